// Tests for lib/physics Dynamics: expressions compiled from a feed's config
// evaluate the right-hand side and its Jacobian; mistakes are reported with
// feed, channel and position; instances move, clone and change constants.
#include "physics/dynamics.h"

#include <gtest/gtest.h>

#include "support/feeds.h"

#include <cmath>
#include <string>
#include <thread>
#include <utility>
#include <vector>

namespace lyapcast {
namespace {

using testing::MakeFeed;
using testing::MustCompile;
constexpr double kSigma = testing::kLorenzSigma, kRho = testing::kLorenzRho, kBeta = testing::kLorenzBeta;

FeedConfig LorenzFeed(double rho = kRho) { return testing::LorenzFeed(rho); }

void LorenzRhs(const double* p, double* f, double rho = kRho) {
  f[0] = kSigma * (p[1] - p[0]);
  f[1] = p[0] * (rho - p[2]) - p[1];
  f[2] = p[0] * p[1] - kBeta * p[2];
}

const std::vector<std::vector<double>> kPoints = {
    {1.0, 1.0, 1.0}, {-8.5, -7.2, 27.0}, {0.0, 0.0, 0.0}, {12.3, -4.56, 40.1}, {1e-3, -2e-4, 3e-5}, {-15.0, 20.0, 5.0}};

TEST(DynamicsTest, LorenzEvalMatchesClosedForm) {
  const Dynamics d = MustCompile(LorenzFeed());
  ASSERT_EQ(d.dim(), 3);
  for (const auto& p : kPoints) {
    double got[3], want[3];
    d.Eval(p.data(), got);
    LorenzRhs(p.data(), want);
    for (int c = 0; c < 3; ++c) EXPECT_NEAR(got[c], want[c], 1e-12 * std::max(1.0, std::abs(want[c]))) << c;
  }
}

// Hand-derived Jacobian of Lorenz-63: [[-s, s, 0], [r - z, -1, -x], [y, x, -b]].
Eigen::Matrix3d LorenzJacobian(const double* p) {
  Eigen::Matrix3d J;
  J << -kSigma, kSigma, 0.0, kRho - p[2], -1.0, -p[0], p[1], p[0], -kBeta;
  return J;
}

TEST(DynamicsTest, LorenzJacobianMatchesHandDerived) {
  const Dynamics d = MustCompile(LorenzFeed());
  const double scale[3] = {7.9, 9.0, 8.6};  // roughly the attractor's standard deviations
  for (const double* s : {static_cast<const double*>(nullptr), scale}) {
    for (const auto& p : kPoints) {
      Eigen::MatrixXd J;
      d.Jacobian(p.data(), s, &J);
      const Eigen::Matrix3d want = LorenzJacobian(p.data());
      for (int r = 0; r < 3; ++r) {
        for (int c = 0; c < 3; ++c) {
          EXPECT_NEAR(J(r, c), want(r, c), 1e-7 * std::max(1.0, std::abs(want(r, c))))
              << "at (" << p[0] << ", " << p[1] << ", " << p[2] << "), entry " << r << "," << c;
        }
      }
    }
  }
}

// A non-polynomial right-hand side, where truncation error matters: the
// cbrt(eps) step keeps central differences within about 1e-10 relative.
TEST(DynamicsTest, JacobianOfSmoothNonlinearFunction) {
  const Dynamics d = MustCompile(MakeFeed("smooth", {"u", "v"}, {{"u", "sin(u)*v"}, {"v", "exp(-u*v) + a*v^3"}},
                                          {{"a", 0.5}}));
  for (const auto& p : std::vector<std::vector<double>>{{0.3, -1.2}, {2.0, 0.7}, {-1.1, 3.0}}) {
    const double u = p[0], v = p[1];
    Eigen::MatrixXd J;
    d.Jacobian(p.data(), nullptr, &J);
    Eigen::Matrix2d want;
    want << std::cos(u) * v, std::sin(u), -v * std::exp(-u * v), -u * std::exp(-u * v) + 1.5 * v * v;
    for (int r = 0; r < 2; ++r) {
      for (int c = 0; c < 2; ++c) EXPECT_NEAR(J(r, c), want(r, c), 1e-8 * std::max(1.0, std::abs(want(r, c))));
    }
  }
}

TEST(DynamicsTest, BatchesMatchSingleEvaluations) {
  const Dynamics d = MustCompile(LorenzFeed());
  Eigen::MatrixXd X(3, static_cast<Eigen::Index>(kPoints.size()));
  for (std::size_t i = 0; i < kPoints.size(); ++i) {
    for (int c = 0; c < 3; ++c) X(c, static_cast<Eigen::Index>(i)) = kPoints[i][static_cast<std::size_t>(c)];
  }
  Eigen::MatrixXd F;
  d.EvalBatch(X, &F);
  std::vector<Eigen::MatrixXd> Js;
  d.JacobianBatch(X, nullptr, &Js);
  ASSERT_EQ(F.rows(), 3);
  ASSERT_EQ(F.cols(), X.cols());
  ASSERT_EQ(Js.size(), kPoints.size());
  for (std::size_t i = 0; i < kPoints.size(); ++i) {
    double want[3];
    d.Eval(kPoints[i].data(), want);
    Eigen::MatrixXd J;
    d.Jacobian(kPoints[i].data(), nullptr, &J);
    for (int c = 0; c < 3; ++c) EXPECT_EQ(F(c, static_cast<Eigen::Index>(i)), want[c]);
    EXPECT_EQ(Js[i], J);
  }
}

TEST(DynamicsTest, CarriesTimeUnitChannelsAndFeed) {
  FeedConfig feed = LorenzFeed();
  feed.dynamics->time_unit = Micros(250'000);  // 250 ms of data time per model time unit
  const Dynamics d = MustCompile(feed);
  EXPECT_EQ(d.time_unit(), Micros(250'000));
  EXPECT_EQ(d.channels(), (std::vector<std::string>{"x", "y", "z"}));
  EXPECT_EQ(d.feed_id(), "lorenz");
  EXPECT_EQ(MustCompile(LorenzFeed()).time_unit(), kSecond);  // the config default
}

// --- compile errors: each names the feed, the channel and the position -----

Status CompileError(const FeedConfig& feed) {
  const Result<Dynamics> r = testing::CompileFeed(feed);
  EXPECT_FALSE(r.ok()) << "compiled";
  EXPECT_EQ(r.status().code(), StatusCode::kInvalidArgument);
  return r.status();
}

FeedConfig LoopFeed(const std::string& flow_expr) {
  return MakeFeed("loop-a", {"flow", "dtemp_h", "dtemp_v"},
                  {{"flow", flow_expr},
                   {"dtemp_h", "flow*(ra - dtemp_v) - dtemp_h"},
                   {"dtemp_v", "flow*dtemp_h - b*dtemp_v"}},
                  {{"pr", 10.0}, {"ra", 28.0}, {"b", 8.0 / 3.0}});
}

TEST(DynamicsTest, UnknownVariableNamesFeedChannelPositionAndVariables) {
  EXPECT_EQ(CompileError(LoopFeed("prr*(dtemp_h - flow)")).message(),
            "feeds 'loop-a': dynamics.equations.flow: unknown variable 'prr' at position 1 in "
            "\"prr*(dtemp_h - flow)\"; variables are the channels (flow, dtemp_h, dtemp_v) and constants (pr, ra, b)");
  const std::string m = CompileError(LoopFeed("pr*(dtemp_h - flw)")).message();
  EXPECT_NE(m.find("unknown variable 'flw' at position 15"), std::string::npos) << m;
}

TEST(DynamicsTest, SyntaxErrorNamesFeedChannelAndPosition) {
  FeedConfig feed = LorenzFeed();
  feed.dynamics->equations[1].second = "pr*(x - ";
  feed.dynamics->constants.emplace_back("pr", 1.0);
  const std::string m = CompileError(feed).message();
  EXPECT_EQ(m.rfind("feeds 'lorenz': dynamics.equations.y: unexpected end of expression at position 9 in \"pr*(x - \"",
                    0),
            0u)
      << m;
  for (const char* expr : {"x)", "(x", "x y", "x # 2", "2e"}) {
    feed.dynamics->equations[1].second = expr;
    const std::string msg = CompileError(feed).message();
    EXPECT_NE(msg.find("feeds 'lorenz': dynamics.equations.y: "), std::string::npos) << msg;
    EXPECT_NE(msg.find("at position "), std::string::npos) << msg;
    EXPECT_NE(msg.find(std::string("\"") + expr + "\""), std::string::npos) << msg;
  }
}

TEST(DynamicsTest, EmptyAssignmentListTimeAndUnknownFunctionAreRejected) {
  FeedConfig feed = LorenzFeed();
  const std::vector<std::pair<std::string, std::string>> cases = {
      {"   ", "dynamics.equations.z: empty expression at position 1"},
      {"", "dynamics.equations.z: empty expression at position 1"},
      {"z = 1", "dynamics.equations.z: assignment '=' at position 3"},
      {"z += 1", "dynamics.equations.z: assignment '=' at position 4"},
      {"x, y", "dynamics.equations.z: \"x, y\" is a list of 2 values"},
      {"sin(t)*x", "dynamics.equations.z: 't' at position 5 in \"sin(t)*x\" is not available: dynamics are autonomous"},
      {"foo(x)", "dynamics.equations.z: unknown function 'foo' at position 1"},
  };
  for (const auto& [expr, want] : cases) {
    feed.dynamics->equations[2].second = expr;
    const std::string m = CompileError(feed).message();
    EXPECT_NE(m.find("feeds 'lorenz': " + want), std::string::npos) << m;
  }
  // Comparisons are not assignments.
  feed.dynamics->equations[2].second = "(x >= 0) * (y != 1) * (z <= 2) * (x == y) - beta*z";
  EXPECT_TRUE(testing::CompileFeed(feed).ok());
}

TEST(DynamicsTest, StructuralMistakesAreRejected) {
  FeedConfig none = LorenzFeed();
  none.dynamics.reset();
  EXPECT_NE(CompileError(none).message().find("feeds 'lorenz': no dynamics"), std::string::npos);

  FeedConfig missing = LorenzFeed();
  missing.dynamics->equations.pop_back();
  EXPECT_NE(CompileError(missing).message().find("has 2 equations but the feed has 3 channels"), std::string::npos);

  FeedConfig order = LorenzFeed();
  std::swap(order.dynamics->equations[0], order.dynamics->equations[1]);
  EXPECT_NE(CompileError(order).message().find("give the equations in channel order"), std::string::npos);

  FeedConfig twice = LorenzFeed();
  twice.dynamics->constants.emplace_back("rho", 1.0);
  EXPECT_NE(CompileError(twice).message().find("dynamics.constants.rho: defined twice"), std::string::npos);

  FeedConfig shadow = LorenzFeed();
  shadow.dynamics->constants.emplace_back("x", 1.0);
  EXPECT_NE(CompileError(shadow).message().find("dynamics.constants.x: is also a channel"), std::string::npos);

  FeedConfig builtin = LorenzFeed();
  builtin.dynamics->constants.emplace_back("_pi", 3.0);  // muparser's own constant
  EXPECT_NE(CompileError(builtin).message().find("constant name '_pi' cannot be an expression variable"),
            std::string::npos);

  FeedConfig unit = LorenzFeed();
  unit.dynamics->time_unit = Micros{};
  EXPECT_NE(CompileError(unit).message().find("dynamics.time_unit"), std::string::npos);
}

// --- constants, clones, moves ------------------------------------------------

TEST(DynamicsTest, SetConstantChangesTheResult) {
  Dynamics d = MustCompile(LorenzFeed());
  const double p[3] = {2.0, 3.0, 4.0};
  double f[3];
  d.Eval(p, f);
  EXPECT_DOUBLE_EQ(f[1], 2.0 * (28.0 - 4.0) - 3.0);
  ASSERT_TRUE(d.SetConstant("rho", 99.0).ok());
  EXPECT_EQ(d.constant("rho"), 99.0);
  d.Eval(p, f);
  EXPECT_DOUBLE_EQ(f[1], 2.0 * (99.0 - 4.0) - 3.0);

  EXPECT_EQ(d.SetConstant("nope", 1.0).code(), StatusCode::kNotFound);
  EXPECT_NE(d.SetConstant("nope", 1.0).message().find("constants are (sigma, rho, beta)"), std::string::npos);
  EXPECT_EQ(d.SetConstant("rho", std::nan("")).code(), StatusCode::kInvalidArgument);
  EXPECT_EQ(d.SetConstant("x", 1.0).code(), StatusCode::kNotFound);  // a channel is not a constant
  EXPECT_EQ(d.constant("x"), std::nullopt);
  EXPECT_EQ(d.constant("rho"), 99.0);
}

TEST(DynamicsTest, CloneIsIndependentAndUsableOnAnotherThread) {
  Dynamics d = MustCompile(LorenzFeed());
  ASSERT_TRUE(d.SetConstant("rho", 30.0).ok());
  Dynamics clone = d.Clone();
  EXPECT_EQ(clone.constant("rho"), 30.0);  // current values are copied
  ASSERT_TRUE(d.SetConstant("rho", 50.0).ok());
  EXPECT_EQ(clone.constant("rho"), 30.0);

  // Both evaluate at the same time on different threads; each sees its own rho.
  const double p[3] = {1.5, -2.0, 3.0};
  double want_clone[3], want_d[3];
  LorenzRhs(p, want_clone, 30.0);
  LorenzRhs(p, want_d, 50.0);
  int clone_bad = 0, d_bad = 0;
  std::thread other([&] {
    double f[3];
    for (int i = 0; i < 20000; ++i) {
      clone.Eval(p, f);
      if (f[1] != want_clone[1]) ++clone_bad;
    }
  });
  double f[3];
  for (int i = 0; i < 20000; ++i) {
    d.Eval(p, f);
    if (f[1] != want_d[1]) ++d_bad;
  }
  other.join();
  EXPECT_EQ(clone_bad, 0);
  EXPECT_EQ(d_bad, 0);
}

TEST(DynamicsTest, MovedInstancesKeepTheirVariableBindings) {
  std::vector<Dynamics> all;
  for (int i = 0; i < 20; ++i) all.push_back(MustCompile(LorenzFeed(10.0 + i)));  // reallocations move them
  const double p[3] = {1.0, 2.0, 3.0};
  for (int i = 0; i < 20; ++i) {
    double f[3], want[3];
    all[static_cast<std::size_t>(i)].Eval(p, f);
    LorenzRhs(p, want, 10.0 + i);
    for (int c = 0; c < 3; ++c) EXPECT_DOUBLE_EQ(f[c], want[c]) << "instance " << i;
  }
  ASSERT_TRUE(all[3].SetConstant("rho", 1.0).ok());  // still bound to its own storage
  Dynamics moved = std::move(all[3]);
  all[3] = MustCompile(LorenzFeed(77.0));  // move assignment into the moved-from slot
  double f[3], want[3];
  moved.Eval(p, f);
  LorenzRhs(p, want, 1.0);
  EXPECT_DOUBLE_EQ(f[1], want[1]);
  all[3].Eval(p, f);
  LorenzRhs(p, want, 77.0);
  EXPECT_DOUBLE_EQ(f[1], want[1]);
}

TEST(DynamicsTest, DomainErrorsGiveNonFiniteValuesNotExceptions) {
  const Dynamics d = MustCompile(MakeFeed("dom", {"x", "y"}, {{"x", "1/x"}, {"y", "sqrt(y)"}}));
  const double p[2] = {0.0, -1.0};
  double f[2];
  d.Eval(p, f);
  EXPECT_TRUE(std::isinf(f[0]));
  EXPECT_TRUE(std::isnan(f[1]));
}

TEST(DynamicsTest, ChannelsWithoutConstantsAndBuiltins) {
  // No constants; a channel named like a built-in function; muparser's _pi.
  const Dynamics d = MustCompile(MakeFeed("b", {"sin", "v"}, {{"sin", "v"}, {"v", "-_pi*sin(sin)"}}));
  const double p[2] = {0.5, 2.0};
  double f[2];
  d.Eval(p, f);
  EXPECT_DOUBLE_EQ(f[0], 2.0);
  // Exact pi: muparser 2.3.3's own _pi is 3.141592653589 (2.5e-13 off), replaced by Dynamics.
  EXPECT_EQ(f[1], -M_PI * std::sin(0.5));
  const std::string m = CompileError(MakeFeed("b", {"x"}, {{"x", "q*x"}})).message();
  EXPECT_NE(m.find("variables are the channels (x); no constants are defined"), std::string::npos) << m;
}

}  // namespace
}  // namespace lyapcast
