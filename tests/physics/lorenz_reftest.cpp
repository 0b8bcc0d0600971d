// Reference test: our integrators on Lorenz-63 (s = 10, r = 28, b = 8/3;
// Sprott 2003, docs/references.md "Systems") against SciPy's solve_ivp with method DOP853
// at rtol = atol = 1e-12 (docs/references.md "Integrators"), computed by
// tests/reference/lorenz_scipy.py under LYAPCAST_PYTHON (Debian's
// python3-scipy). The right-hand side is compiled from expressions by
// Dynamics, so the whole path from config text to trajectory is checked.
//
// Tolerances: the flow is chaotic (largest exponent ~0.9056), so a local
// error e grows to about e * exp(0.9 t) by time t; 1e-6 absolute at t = 5
// leaves room for that growth from our 1e-11 tolerance.
#include <gtest/gtest.h>

#include <array>
#include <cstdio>
#include <filesystem>
#include <sstream>
#include <string>
#include <vector>

#include "physics/dynamics.h"
#include "physics/integrators.h"

namespace lyapcast {
namespace {

struct RefPoint {
  double t;
  std::array<double, 3> x;
};

// Runs the script; fills `points`, or sets `skip` when the interpreter or
// SciPy is missing, or `error` when the script failed.
void RunReference(std::vector<RefPoint>* points, std::string* skip, std::string* error) {
  const std::string python = LYAPCAST_PYTHON;
  const std::string script = std::string(LYAPCAST_SOURCE_DIR) + "/tests/reference/lorenz_scipy.py";
  if (!std::filesystem::exists(python)) {
    *skip = "Python interpreter " + python + " not found (install python3 and python3-scipy)";
    return;
  }
  const std::string command = "OMP_NUM_THREADS=1 '" + python + "' '" + script + "' 2>&1";
  FILE* pipe = popen(command.c_str(), "r");
  if (pipe == nullptr) {
    *error = "cannot run: " + command;
    return;
  }
  std::string output;
  char buffer[4096];
  while (std::fgets(buffer, sizeof buffer, pipe) != nullptr) output += buffer;
  const int rc = pclose(pipe);
  if (output.rfind("skip:", 0) == 0) {
    *skip = output;
    return;
  }
  if (rc != 0) {
    *error = "`" + command + "` failed (status " + std::to_string(rc) + "): " + output;
    return;
  }
  std::istringstream in(output);
  RefPoint p{};
  while (in >> p.t >> p.x[0] >> p.x[1] >> p.x[2]) points->push_back(p);
  if (points->size() != 4) *error = "expected 4 lines \"t x y z\" from the script, got: " + output;
}

Dynamics Lorenz() {
  DynamicsSpec spec;
  spec.feed_id = "lorenz";
  spec.channels = {"x", "y", "z"};
  spec.equations = {{"x", "sigma*(y - x)"}, {"y", "x*(rho - z) - y"}, {"z", "x*y - beta*z"}};
  spec.constants = {{"sigma", 10.0}, {"rho", 28.0}, {"beta", 8.0 / 3.0}};
  Result<Dynamics> d = Dynamics::Compile(spec);
  EXPECT_TRUE(d.ok()) << d.status().ToString();
  return std::move(d).value();
}

class LorenzReference : public ::testing::Test {
 protected:
  // The script runs once per binary (importing SciPy takes most of a second).
  static void SetUpTestSuite() { RunReference(&points_, &skip_, &error_); }
  void SetUp() override {
    if (!skip_.empty()) GTEST_SKIP() << "SciPy reference unavailable: " << skip_;
    ASSERT_TRUE(error_.empty()) << error_;
  }
  static inline std::vector<RefPoint> points_;
  static inline std::string skip_, error_;
};

Eigen::VectorXd Start() { return Eigen::Vector3d(1.0, 1.0, 1.0); }

TEST_F(LorenzReference, Dopri5MatchesScipyDop853) {
  const Dynamics d = Lorenz();
  const Rhs f = [&d](const double* x, double* dx) { d.Eval(x, dx); };
  Dopri5Options o;
  o.rtol = 1e-11;
  o.atol = 1e-11;
  for (const RefPoint& p : points_) {
    const Result<Dopri5Result> r = IntegrateDopri5(f, Start(), p.t, o);
    ASSERT_TRUE(r.ok()) << r.status().ToString();
    for (int c = 0; c < 3; ++c) {
      EXPECT_NEAR(r->x[c], p.x[static_cast<std::size_t>(c)], 1e-6) << "t=" << p.t << " channel " << c;
    }
  }
}

TEST_F(LorenzReference, Rk4MatchesScipyDop853UpToTwo) {
  const Dynamics d = Lorenz();
  const Rhs f = [&d](const double* x, double* dx) { d.Eval(x, dx); };
  int checked = 0;
  for (const RefPoint& p : points_) {
    if (p.t > 2.0) continue;  // RK4's h^4 error, amplified by chaos, exceeds 1e-5 later
    const Eigen::VectorXd x = IntegrateRk4(f, Start(), p.t, 1e-3);
    for (int c = 0; c < 3; ++c) {
      EXPECT_NEAR(x[c], p.x[static_cast<std::size_t>(c)], 1e-5) << "t=" << p.t << " channel " << c;
    }
    ++checked;
  }
  EXPECT_EQ(checked, 3);
}

}  // namespace
}  // namespace lyapcast
