// Reference test against PyTorch (docs/references.md "Learning": autograd and the
// optimizer on the same weights and batch): a 3-16-16-3 flow map with
// nonzero m, s, S and mu, batch 32, MSE loss, loss.backward(),
// torch.nn.utils.clip_grad_norm_ with a limit that clips, and
// torch.optim.AdamW steps (lr 1e-3, betas (0.9, 0.999), eps 1e-8,
// weight_decay 0.01), computed by tests/reference/torch_step.py in float64.
// lyapcast computes the same with its own code, in double (agreement to
// 1e-9 relative) and in float (tolerances justified at FloatPathTolerances).
#include <gtest/gtest.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cmath>
#include <cstdio>
#include <fstream>
#include <map>
#include <sstream>
#include <string>
#include <vector>

#include "learn/adam.h"
#include "learn/flow_map.h"
#include "learn/learn_test_util.h"
#include "support/temp_dir.h"

namespace lyapcast {
namespace {

using testing::RandomMatrix;
using testing::RandomVector;
using Reference = std::map<std::string, std::vector<double>>;

constexpr int kBatch = 32;
constexpr int kIterations = 3;
constexpr double kLr = 1e-3;
constexpr double kMaxNorm = 0.05;  // the first gradient norm is ~0.5-3 here: clipping happens (asserted)
const AdamWOptions kAdam{0.9, 0.999, 1e-8, 0.01};

struct Case {
  Activation activation = Activation::kTanh;
  int steps = 1;  // loss on G^steps(x)
};

FlowMap<double> MakeMap(Activation act) {
  auto created = FlowMap<double>::Create(3, {16, 16}, act, 0.05);
  EXPECT_TRUE(created.ok());
  FlowMap<double> map = created.value();
  map.InitRandom(1234);
  EXPECT_TRUE(map.SetNormalization(Eigen::Vector3d{0.5, -3.0, 20.0}, Eigen::Vector3d{1.5, 0.4, 6.0},
                                   Eigen::Vector3d{4.0, 0.8, 25.0})
                  .ok());
  map.mu() = Eigen::Vector3d{0.3, -0.7, 0.05};
  for (int l = 0; l < map.network().layers(); ++l) {
    map.network().b(l) = RandomVector(map.network().layout().out(l), 40 + l, -0.2, 0.2);
  }
  return map;
}

Eigen::MatrixXd Inputs(const FlowMap<double>& map, std::uint64_t seed) {
  Eigen::MatrixXd X = RandomMatrix(3, kBatch, seed, -2.0, 2.0);
  for (int j = 0; j < kBatch; ++j) X.col(j) = map.mean() + map.stddev().cwiseProduct(X.col(j));
  return X;
}

void Put(std::ostream& out, const char* key, const double* v, Eigen::Index n) {
  out << key;
  for (Eigen::Index i = 0; i < n; ++i) out << ' ' << v[i];
  out << '\n';
}

// Runs the script; returns its parsed output, or an error text in `error`.
Reference RunTorch(const std::string& input, std::string* error) {
  const std::string script = std::string(LYAPCAST_SOURCE_DIR) + "/tests/reference/torch_step.py";
  const std::string command = std::string("'") + LYAPCAST_PYTHON + "' '" + script + "' '" + input + "' 2>&1";
  FILE* pipe = ::popen(command.c_str(), "r");
  if (pipe == nullptr) {
    *error = "popen failed: " + command;
    return {};
  }
  std::string out;
  char buf[4096];
  size_t n;
  while ((n = std::fread(buf, 1, sizeof buf, pipe)) > 0) out.append(buf, n);
  const int rc = ::pclose(pipe);
  Reference ref;
  if (WIFEXITED(rc) && WEXITSTATUS(rc) == 127) {  // the shell found no such interpreter
    ref["skip"] = {};
    *error = std::string(LYAPCAST_PYTHON) + " not found";
    return ref;
  }
  std::istringstream lines(out);
  std::string line;
  while (std::getline(lines, line)) {
    std::istringstream in(line);
    std::string name;
    in >> name;
    if (name == "skip") {
      ref["skip"] = {};
      *error = line;
      return ref;
    }
    size_t count = 0;
    if (!(in >> count)) continue;
    std::vector<double>& values = ref[name];
    std::string token;
    while (in >> token) values.push_back(std::strtod(token.c_str(), nullptr));
    if (values.size() != count) *error = "short line for " + name;
  }
  if (rc != 0) *error = "script failed (" + std::to_string(rc) + "):\n" + out;
  return ref;
}

// Per-element relative error against the reference, with a floor of
// floor_fraction * max|ref| so elements that are zero up to rounding are
// compared on the array's own scale.
template <typename V>
void ExpectClose(const char* what, const V& ours, const std::vector<double>& ref, double rel,
                 double floor_fraction = 1e-6) {
  ASSERT_EQ(static_cast<size_t>(ours.size()), ref.size()) << what;
  double scale = 0.0;
  for (const double r : ref) scale = std::max(scale, std::abs(r));
  const double floor = std::max(floor_fraction * scale, 1e-300);
  double worst = 0.0;
  size_t worst_at = 0;
  for (size_t i = 0; i < ref.size(); ++i) {
    const double err = std::abs(static_cast<double>(ours[static_cast<Eigen::Index>(i)]) - ref[i]) /
                       std::max(std::abs(ref[i]), floor);
    if (err > worst) {
      worst = err;
      worst_at = i;
    }
  }
  EXPECT_LT(worst, rel) << what << ": worst element " << worst_at << " ours "
                        << static_cast<double>(ours[static_cast<Eigen::Index>(worst_at)]) << " torch "
                        << ref[worst_at];
  std::printf("  %-10s worst relative error %.3g (tolerance %.3g)\n", what, worst, rel);
}

// lyapcast's side of the script: the same iterations with our own code.
template <typename T>
struct Ours {
  std::vector<double> loss, grad_norm;
  Eigen::VectorXd grads, params_1, params_n;
  Eigen::MatrixXd dx, jacobian;
};

template <typename T>
Ours<T> RunOurs(FlowMap<T> map, const Eigen::MatrixXd& X0, const Eigen::MatrixXd& target, int steps,
                const Eigen::VectorXd& jacobian_at) {
  using Mat = typename FlowMap<T>::Mat;
  Ours<T> ours;
  Mat J;
  map.Jacobian(jacobian_at.cast<T>(), &J);
  ours.jacobian = J.template cast<double>();
  const Mat X = X0.cast<T>();
  const Mat Yt = target.cast<T>();
  std::vector<FlowMapCache<T>> caches(static_cast<size_t>(steps));
  std::vector<Mat> states(static_cast<size_t>(steps) + 1);
  FlowMapGrads<T> grads = map.MakeGrads();
  AdamW<T> adam(map.parameters().size(), kAdam);
  for (int it = 0; it < kIterations; ++it) {
    states[0] = X;
    for (int k = 0; k < steps; ++k) {
      map.Forward(states[static_cast<size_t>(k)], &states[static_cast<size_t>(k) + 1], &caches[static_cast<size_t>(k)]);
    }
    const Mat diff = states.back() - Yt;
    ours.loss.push_back(static_cast<double>(diff.squaredNorm()) / static_cast<double>(diff.size()));
    Mat d = diff * static_cast<T>(2.0 / static_cast<double>(diff.size()));
    grads.SetZero();
    for (int k = steps - 1; k >= 0; --k) map.Backward(caches[static_cast<size_t>(k)], d, &grads, &d);
    if (it == 0) {
      ours.grads = grads.flat().template cast<double>();
      ours.dx = d.template cast<double>();
    }
    ours.grad_norm.push_back(ClipGlobalNorm(grads.flat(), kMaxNorm));
    adam.Step(map.parameters(), grads.flat(), kLr);
    if (it == 0) ours.params_1 = map.parameters().template cast<double>();
  }
  ours.params_n = map.parameters().template cast<double>();
  return ours;
}

class TorchReference : public ::testing::Test {
 protected:
  // Writes the case, runs the script; skips when torch is missing.
  bool Run(const Case& c, Reference* ref) {
    map_ = MakeMap(c.activation);
    x_ = Inputs(map_, 7);
    // Targets a little off the current model's prediction: an O(0.1-1) loss.
    target_ = x_ + RandomMatrix(3, kBatch, 8, -1.0, 1.0).cwiseProduct(map_.stddev().replicate(1, kBatch)) * 0.3;
    jacobian_at_ = Inputs(map_, 9).col(0);
    const std::string path = (dir_.path() / "case.txt").string();
    std::ofstream out(path);
    out.precision(17);
    out << "activation " << ActivationName(c.activation) << "\nsizes 3 16 16 3\ndt " << map_.dt() << '\n';
    Put(out, "mean", map_.mean().data(), 3);
    Put(out, "std", map_.stddev().data(), 3);
    Put(out, "scale", map_.increment_scale().data(), 3);
    Put(out, "params", map_.parameters().data(), map_.parameters().size());
    Put(out, "x", x_.data(), x_.size());
    Put(out, "target", target_.data(), target_.size());
    Put(out, "jacobian_at", jacobian_at_.data(), 3);
    out << "steps " << c.steps << "\niterations " << kIterations << "\nlr " << kLr << "\nbeta1 " << kAdam.beta1
        << "\nbeta2 " << kAdam.beta2 << "\neps " << kAdam.eps << "\nweight_decay " << kAdam.weight_decay
        << "\nmax_norm " << kMaxNorm << '\n';
    out.close();
    std::string error;
    *ref = RunTorch(path, &error);
    if (ref->count("skip") != 0) return false;
    EXPECT_TRUE(error.empty()) << error;
    for (const char* key : {"loss", "grad_norm", "grads", "dx", "params_1", "params_n", "jacobian"}) {
      EXPECT_EQ(ref->count(key), 1u) << "torch output lacks " << key;
    }
    return error.empty();
  }

  void CheckDouble(const Case& c) {
    Reference ref;
    if (!Run(c, &ref)) {
      if (ref.count("skip") != 0) GTEST_SKIP() << "PyTorch reference unavailable (install python3-torch)";
      return;
    }
    const Ours<double> ours = RunOurs(map_, x_, target_, c.steps, jacobian_at_);
    ASSERT_GT(ref["grad_norm"][0], 2 * kMaxNorm) << "the case must exercise clipping";
    // Double against double: only summation order differs (~1e-15); 1e-9
    // leaves room for the conditioning of differences of nearby values.
    const double rel = 1e-9;
    ExpectClose("loss", Eigen::Map<const Eigen::VectorXd>(ours.loss.data(), kIterations), ref["loss"], rel);
    ExpectClose("grad_norm", Eigen::Map<const Eigen::VectorXd>(ours.grad_norm.data(), kIterations),
                ref["grad_norm"], rel);
    ExpectClose("grads", ours.grads, ref["grads"], rel);
    ExpectClose("dx", ours.dx.reshaped(), ref["dx"], rel);
    ExpectClose("params_1", ours.params_1, ref["params_1"], rel);
    ExpectClose("params_n", ours.params_n, ref["params_n"], rel);
    ExpectClose("jacobian", ours.jacobian.reshaped(), ref["jacobian"], rel);
  }

  lyapcast::testing::TempDir dir_{"lyapcast-torch-ref"};
  FlowMap<double> map_;
  Eigen::MatrixXd x_, target_;
  Eigen::VectorXd jacobian_at_;
};

TEST_F(TorchReference, TanhOneStepDouble) { CheckDouble({Activation::kTanh, 1}); }
TEST_F(TorchReference, SiluOneStepDouble) { CheckDouble({Activation::kSilu, 1}); }
TEST_F(TorchReference, TanhThreeStepCompositionDouble) { CheckDouble({Activation::kTanh, 3}); }
TEST_F(TorchReference, SiluThreeStepCompositionDouble) { CheckDouble({Activation::kSilu, 3}); }

// The float32 training path against the float64 reference.
// FloatPathTolerances: float rounds every input, weight and intermediate to
// 24 bits (unit roundoff u = 6e-8). A computed sum of n terms t_i has error
// about sqrt(n) u sum|t_i| (at most n u sum|t_i|), relative to the size of
// the TERMS, not of the result: gradient elements are batch sums of 32 terms
// of both signs, and dL/dx starts from y - target, a difference of values
// ~30 that round at 2e-6. So gradients and dL/dx are compared relative to
// their array's largest element (floor fraction 1): expected a few u (2e-7 to
// 7e-7 measured), tolerance 1e-5 (~80 u), still 10^4 to 10^5 times tighter
// than any real bug (a wrong derivative or a missing term is an O(1) error).
// The loss and the norm are sums of squares without cancellation: 1e-5
// relative. Parameters after AdamW: the first update lr * g / (|g| + eps)
// does not depend on the gradient's rounding, later ones through mhat /
// sqrt(vhat) only by lr times the gradients' relative error, so parameters
// differ by about their own float rounding: 1e-6 relative (floor 1e-3 of the
// largest). The Jacobian I + dt S J_N / s: 1e-5 relative (floor 1e-3).
TEST_F(TorchReference, FloatPathWithinFloatPrecision) {
  for (Activation act : {Activation::kTanh, Activation::kSilu}) {
    SCOPED_TRACE(ActivationName(act));
    Reference ref;
    if (!Run({act, 1}, &ref)) {
      if (ref.count("skip") != 0) GTEST_SKIP() << "PyTorch reference unavailable (install python3-torch)";
      return;
    }
    const Ours<float> ours = RunOurs(map_.Cast<float>(), x_, target_, 1, jacobian_at_);
    ExpectClose("loss", Eigen::Map<const Eigen::VectorXd>(ours.loss.data(), kIterations), ref["loss"], 1e-5);
    ExpectClose("grad_norm", Eigen::Map<const Eigen::VectorXd>(ours.grad_norm.data(), kIterations),
                ref["grad_norm"], 1e-5);
    ExpectClose("grads", ours.grads, ref["grads"], 1e-5, 1.0);
    ExpectClose("dx", ours.dx.reshaped(), ref["dx"], 1e-5, 1.0);
    ExpectClose("params_1", ours.params_1, ref["params_1"], 1e-6, 1e-3);
    ExpectClose("params_n", ours.params_n, ref["params_n"], 1e-6, 1e-3);
    ExpectClose("jacobian", ours.jacobian.reshaped(), ref["jacobian"], 1e-5, 1e-3);
  }
}

}  // namespace
}  // namespace lyapcast
