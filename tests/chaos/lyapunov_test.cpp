// Tests for lib/chaos LyapunovSpectrum (QR / Benettin method) on maps with
// published exponents (docs/references.md "Lyapunov exponents"), the flow adapter on Lorenz-63, the
// learned-map adapter, and the error paths.
#include "chaos/lyapunov.h"

#include <gtest/gtest.h>

#include "support/feeds.h"

#include <chrono>
#include <cmath>
#include <cstdio>
#include <limits>
#include <string>

namespace lyapcast {
namespace {

using testing::MustCompile;

MapStep LogisticMap(double r) {
  MapStep m;
  m.dim = 1;
  m.step = [r](const Eigen::VectorXd& x, Eigen::VectorXd* next, Eigen::MatrixXd* J) {
    next->resize(1);
    (*next)[0] = r * x[0] * (1 - x[0]);
    if (J != nullptr) {
      J->resize(1, 1);
      (*J)(0, 0) = r * (1 - 2 * x[0]);
    }
  };
  return m;
}

MapStep HenonMap(double a, double b) {
  MapStep m;
  m.dim = 2;
  m.step = [a, b](const Eigen::VectorXd& x, Eigen::VectorXd* next, Eigen::MatrixXd* J) {
    next->resize(2);
    (*next)[0] = 1 - a * x[0] * x[0] + x[1];
    (*next)[1] = b * x[0];
    if (J != nullptr) {
      J->resize(2, 2);
      *J << -2 * a * x[0], 1, b, 0;
    }
  };
  return m;
}

SpectrumEstimate MustEstimate(const MapStep& m, Eigen::VectorXd x0, const SpectrumOptions& o) {
  Result<SpectrumEstimate> r = LyapunovSpectrum(m, std::move(x0), o);
  EXPECT_TRUE(r.ok()) << r.status().ToString();
  if (!r.ok()) return {};
  return std::move(r).value();
}

// Logistic map r = 4: lambda = ln 2 exactly (analytic; J.C. Sprott, Chaos and
// Time-Series Analysis, Oxford UP 2003). Tolerance 1 % (brief).
TEST(LyapunovTest, LogisticMapIsLn2) {
  Eigen::VectorXd x0(1);
  x0 << 0.3;
  const SpectrumEstimate e = MustEstimate(LogisticMap(4.0), x0, {});
  ASSERT_EQ(e.exponents.size(), 1);
  EXPECT_NEAR(e.exponents[0], std::log(2.0), 0.01 * std::log(2.0));
  EXPECT_EQ(e.steps, 100000);
  EXPECT_DOUBLE_EQ(e.time, 100000.0);
  EXPECT_EQ(e.history.size(), 10u);
  EXPECT_LT(e.convergence, 0.01);
  RecordProperty("logistic_lambda", std::to_string(e.exponents[0]));
  std::printf("logistic r=4: lambda = %.6f (ln 2 = 0.693147)\n", e.exponents[0]);
}

// Henon a = 1.4, b = 0.3: 0.41922, -1.62319 (Sprott, "Common chaotic
// systems" table, 2004); within 2 %. det J = -b at every point, so the sum
// of the exponents is ln b = -1.20397 exactly (up to rounding).
TEST(LyapunovTest, HenonSpectrumAndSum) {
  Eigen::VectorXd x0(2);
  x0 << 0.1, 0.1;
  SpectrumOptions o;
  o.steps = 200000;
  const SpectrumEstimate e = MustEstimate(HenonMap(1.4, 0.3), x0, o);
  ASSERT_EQ(e.exponents.size(), 2);
  EXPECT_NEAR(e.exponents[0], 0.41922, 0.02 * 0.41922);
  EXPECT_NEAR(e.exponents[1], -1.62319, 0.02 * 1.62319);
  EXPECT_NEAR(e.exponents.sum(), std::log(0.3), 1e-6 * std::abs(std::log(0.3)));
  std::printf("henon: %.6f %.6f sum %.9f (ln 0.3 = %.9f)\n", e.exponents[0], e.exponents[1], e.exponents.sum(),
              std::log(0.3));
}

TEST(LyapunovTest, LeadingExponentOnlyAndSparseReorthonormalization) {
  Eigen::VectorXd x0(2);
  x0 << 0.1, 0.1;
  SpectrumOptions o;
  o.exponents = 1;
  o.reorthonormalize_every = 5;  // 5 Henon steps grow a vector by ~e^2: no overflow
  o.steps = 200000;
  const SpectrumEstimate e = MustEstimate(HenonMap(1.4, 0.3), x0, o);
  ASSERT_EQ(e.exponents.size(), 1);
  EXPECT_NEAR(e.exponents[0], 0.41922, 0.02 * 0.41922);
}

// Fewer steps than convergence checks: the check points share iterations,
// the history still has one entry per check and ends at the estimate.
TEST(LyapunovTest, FewerStepsThanChecks) {
  Eigen::VectorXd x0(1);
  x0 << 0.3;
  SpectrumOptions o;
  o.steps = 3;
  o.convergence_checks = 10;
  const SpectrumEstimate e = MustEstimate(LogisticMap(4.0), x0, o);
  ASSERT_EQ(e.history.size(), 10u);
  EXPECT_EQ(e.history.back()[0], e.exponents[0]);
  EXPECT_EQ(e.steps, 3);
}

TEST(LyapunovTest, TimePerStepScalesRates) {
  MapStep m = LogisticMap(4.0);
  m.time_per_step = 0.5;
  Eigen::VectorXd x0(1);
  x0 << 0.3;
  const SpectrumEstimate e = MustEstimate(m, x0, {});
  EXPECT_NEAR(e.exponents[0], 2 * std::log(2.0), 0.02 * std::log(2.0));
  EXPECT_DOUBLE_EQ(e.time, 50000.0);
}

// Lorenz-63 s = 10, r = 28, b = 8/3 (Sprott 2004 table: 0.9056, 0, -14.5723)
// with the protocol of docs/references.md "Lyapunov exponents": RK4 step 0.01, a discarded transient, 1000
// time units, +-2 % (the zero exponent within 0.02 absolute). The sum is the
// time average of trace J = -(s + 1 + b) exactly, which the RK4 map
// reproduces to O(dt^4): 0.5 %. (The run takes well under a second, so it
// stays a unit test; lorenz_spectrum_slowtest.cpp runs 10x longer and
// covers Wolf et al.'s parameters.)
TEST(LyapunovTest, LorenzSpectrum) {
  const Dynamics d = MustCompile(testing::LorenzFeed());
  Eigen::VectorXd x0(3);
  x0 << 1.0, 1.0, 20.0;
  SpectrumOptions o;
  o.transient_steps = 5000;  // 50 time units
  o.steps = 100000;          // 1000 time units
  const auto t0 = std::chrono::steady_clock::now();
  const SpectrumEstimate e = MustEstimate(FlowMapStep(d, 0.01, 1), x0, o);
  const double secs = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  ASSERT_EQ(e.exponents.size(), 3);
  EXPECT_NEAR(e.exponents[0], 0.9056, 0.02 * 0.9056);
  EXPECT_NEAR(e.exponents[1], 0.0, 0.02);
  EXPECT_NEAR(e.exponents[2], -14.5723, 0.02 * 14.5723);
  EXPECT_NEAR(e.exponents.sum(), -(10 + 1 + 8.0 / 3.0), 0.005 * (10 + 1 + 8.0 / 3.0));
  EXPECT_DOUBLE_EQ(e.time, 1000.0);
  EXPECT_LT(e.convergence, 0.05);
  std::printf("lorenz (1000 tu): %.5f %.5f %.5f sum %.5f convergence %.4f in %.2f s\n", e.exponents[0],
              e.exponents[1], e.exponents[2], e.exponents.sum(), e.convergence, secs);
}

TEST(LyapunovTest, FlowMapStepRejectsBadStep) {
  const Dynamics d = MustCompile(testing::LorenzFeed());
  EXPECT_EQ(FlowMapStep(d, 0.0, 1).dim, 0);
  EXPECT_EQ(FlowMapStep(d, 0.01, 0).dim, 0);
  Result<SpectrumEstimate> r = LyapunovSpectrum(FlowMapStep(d, -1.0, 1), Eigen::VectorXd::Ones(3));
  EXPECT_EQ(r.status().code(), StatusCode::kInvalidArgument);
}

TEST(LyapunovTest, InvalidArguments) {
  const MapStep m = LogisticMap(4.0);
  Eigen::VectorXd x0(1);
  x0 << 0.3;
  EXPECT_EQ(LyapunovSpectrum(m, Eigen::VectorXd::Ones(2)).status().code(), StatusCode::kInvalidArgument);
  Eigen::VectorXd nan(1);
  nan << std::numeric_limits<double>::quiet_NaN();
  EXPECT_EQ(LyapunovSpectrum(m, nan).status().code(), StatusCode::kInvalidArgument);
  SpectrumOptions o;
  o.exponents = 2;
  EXPECT_EQ(LyapunovSpectrum(m, x0, o).status().code(), StatusCode::kInvalidArgument);
  o = {};
  o.steps = 0;
  EXPECT_EQ(LyapunovSpectrum(m, x0, o).status().code(), StatusCode::kInvalidArgument);
  o = {};
  o.reorthonormalize_every = 0;
  EXPECT_EQ(LyapunovSpectrum(m, x0, o).status().code(), StatusCode::kInvalidArgument);
  MapStep bad = m;
  bad.time_per_step = 0;
  EXPECT_EQ(LyapunovSpectrum(bad, x0).status().code(), StatusCode::kInvalidArgument);
  MapStep none;
  none.dim = 1;
  EXPECT_EQ(LyapunovSpectrum(none, x0).status().code(), StatusCode::kInvalidArgument);
}

TEST(LyapunovTest, DivergingOrbitFailsCleanly) {
  // Logistic map r = 4 from x = 2 runs off to -infinity.
  Eigen::VectorXd x0(1);
  x0 << 2.0;
  Result<SpectrumEstimate> r = LyapunovSpectrum(LogisticMap(4.0), x0);
  ASSERT_FALSE(r.ok());
  EXPECT_EQ(r.status().code(), StatusCode::kInternal);
  EXPECT_NE(r.status().message().find("not finite"), std::string::npos) << r.status().message();
}

TEST(LyapunovTest, SingularJacobianFailsCleanly) {
  // x = 0.5 is the critical point of the logistic map: J = 0 there (and the
  // orbit 0.5 -> 1 -> 0 stays at the fixed point 0 afterwards).
  Eigen::VectorXd x0(1);
  x0 << 0.5;
  SpectrumOptions o;
  o.transient_steps = 0;
  Result<SpectrumEstimate> r = LyapunovSpectrum(LogisticMap(4.0), x0, o);
  ASSERT_FALSE(r.ok());
  EXPECT_EQ(r.status().code(), StatusCode::kInternal);
  EXPECT_NE(r.status().message().find("zero diagonal"), std::string::npos) << r.status().message();
}

// ---- ModelMapStep --------------------------------------------------------

FlowMap<double> TinyModel() {
  Result<FlowMap<double>> r = FlowMap<double>::Create(3, {6}, Activation::kTanh, 0.05);
  EXPECT_TRUE(r.ok()) << r.status().ToString();
  FlowMap<double> f = std::move(r).value();
  f.InitRandom(7);
  Eigen::VectorXd m(3), s(3), S(3);
  m << 0.5, -1.0, 2.0;
  s << 1.5, 0.7, 2.0;
  S << 3.0, 1.0, 0.5;
  EXPECT_TRUE(f.SetNormalization(m, s, S).ok());
  return f;
}

TEST(ModelMapStepTest, StepMatchesForwardAndJacobianMatchesFiniteDifferences) {
  const FlowMap<double> model = TinyModel();
  const NeuralFlowMap<double> wrapped(model);
  const MapStep m = ModelMapStep(wrapped);
  ASSERT_EQ(m.dim, 3);
  EXPECT_DOUBLE_EQ(m.time_per_step, 0.05);
  Eigen::VectorXd x(3), next, plus, minus;
  x << 0.3, -0.8, 1.7;
  Eigen::MatrixXd J;
  m.step(x, &next, &J);
  FlowMapCache<double> cache;
  Eigen::MatrixXd Y;
  model.Forward(Eigen::MatrixXd(x), &Y, &cache);
  EXPECT_LT((next - Y.col(0)).norm(), 1e-14);
  ASSERT_EQ(J.rows(), 3);
  ASSERT_EQ(J.cols(), 3);
  // Central differences: error ~ h^2 |G'''| + eps / h ~ 1e-10 for h = 1e-5.
  const double h = 1e-5;
  for (int c = 0; c < 3; ++c) {
    Eigen::VectorXd xp = x, xm = x;
    xp[c] += h;
    xm[c] -= h;
    m.step(xp, &plus, nullptr);
    m.step(xm, &minus, nullptr);
    const Eigen::VectorXd fd = (plus - minus) / (2 * h);
    EXPECT_LT((fd - J.col(c)).norm(), 1e-8) << "column " << c << "\nfd " << fd.transpose() << "\nJ "
                                            << J.col(c).transpose();
  }
  // The random network is not the identity (the check would be vacuous).
  EXPECT_GT((J - Eigen::MatrixXd::Identity(3, 3)).norm(), 1e-3);
}

// A freshly created FlowMap has zero weights and biases, so N = 0 and
// G(x) = x: every exponent of the identity map is exactly 0.
TEST(ModelMapStepTest, IdentityModelHasZeroExponents) {
  Result<FlowMap<double>> r = FlowMap<double>::Create(3, {4}, Activation::kTanh, 0.1);
  ASSERT_TRUE(r.ok()) << r.status().ToString();
  const FlowMap<double> model = std::move(r).value();
  Eigen::VectorXd x0(3);
  x0 << 1.0, -2.0, 0.5;
  SpectrumOptions o;
  o.transient_steps = 10;
  o.steps = 1000;
  const NeuralFlowMap<double> wrapped(model);
  const SpectrumEstimate e = MustEstimate(ModelMapStep(wrapped), x0, o);
  ASSERT_EQ(e.exponents.size(), 3);
  for (int i = 0; i < 3; ++i) EXPECT_NEAR(e.exponents[i], 0.0, 1e-9);
  EXPECT_DOUBLE_EQ(e.time, 100.0);
}

// The float model goes through the same adapter (values cast to double).
TEST(ModelMapStepTest, FloatModelRuns) {
  const FlowMap<float> model = TinyModel().Cast<float>();
  Eigen::VectorXd x0(3);
  x0 << 0.3, -0.8, 1.7;
  SpectrumOptions o;
  o.transient_steps = 10;
  o.steps = 500;
  const NeuralFlowMap<float> wrapped(model);
  Result<SpectrumEstimate> r = LyapunovSpectrum(ModelMapStep(wrapped), x0, o);
  ASSERT_TRUE(r.ok()) << r.status().ToString();
  EXPECT_TRUE(r->exponents.allFinite());
  EXPECT_GE(r->exponents[0], r->exponents[1]);
  EXPECT_GE(r->exponents[1], r->exponents[2]);
}

}  // namespace
}  // namespace lyapcast
