// Tests for lib/physics integrators against closed-form solutions
// (docs/references.md "Integrators"): the harmonic oscillator x'' = -w^2 x with
// x = cos(w t), and exponential decay x' = -k x with x = exp(-k t).
#include "physics/integrators.h"

#include <gtest/gtest.h>

#include <cmath>
#include <limits>
#include <string>
#include <vector>

namespace lyapcast {
namespace {

constexpr double kW = 2.0;

// x'' = -w^2 x as the first-order system (x, v).
const Rhs kOscillator = [](const double* s, double* d) {
  d[0] = s[1];
  d[1] = -kW * kW * s[0];
};

Eigen::VectorXd Vec(std::initializer_list<double> v) {
  Eigen::VectorXd x(static_cast<Eigen::Index>(v.size()));
  Eigen::Index i = 0;
  for (double e : v) x[i++] = e;
  return x;
}

// Global error at time T of RK4 against x = cos(w t), v = -w sin(w t).
double Rk4OscillatorError(double h, double T) {
  const Eigen::VectorXd x = IntegrateRk4(kOscillator, Vec({1.0, 0.0}), T, h);
  return std::hypot(x[0] - std::cos(kW * T), (x[1] + kW * std::sin(kW * T)) / kW);
}

TEST(Rk4Test, OscillatorGlobalErrorIsFourthOrder) {
  // docs/references.md "Integrators": observed order log2(e(h) / e(h/2)) = 4 +- 0.2.
  const double T = 10.0;
  const double e1 = Rk4OscillatorError(0.02, T);
  const double e2 = Rk4OscillatorError(0.01, T);
  const double order = std::log2(e1 / e2);
  EXPECT_NEAR(order, 4.0, 0.2) << "e(h)=" << e1 << " e(h/2)=" << e2;
  EXPECT_LT(e2, 1e-6);
}

TEST(Rk4Test, LastStepIsShortenedToLandExactly) {
  int calls = 0;
  const Rhs decay = [&calls](const double* x, double* d) {
    ++calls;
    d[0] = -x[0];
  };
  // 1.0 = 3 steps of 0.3 + one of 0.1; RK4 error ~ h^4 / 120.
  Eigen::VectorXd x = IntegrateRk4(decay, Vec({1.0}), 1.0, 0.3);
  EXPECT_EQ(calls, 16);
  EXPECT_NEAR(x[0], std::exp(-1.0), 1e-4);
  // 0.3 / 0.1 is 2.9999999999999996 in floating point: still exactly 3 steps.
  calls = 0;
  x = IntegrateRk4(decay, Vec({1.0}), 0.3, 0.1);
  EXPECT_EQ(calls, 12);
  EXPECT_NEAR(x[0], std::exp(-0.3), 1e-6);
  // 0.7 / 0.1 is 7.000000000000001: 7 steps, no sliver step.
  calls = 0;
  x = IntegrateRk4(decay, Vec({1.0}), 0.7, 0.1);
  EXPECT_EQ(calls, 28);
  // Nothing to do.
  calls = 0;
  EXPECT_EQ(IntegrateRk4(decay, Vec({1.0}), 0.0, 0.1)[0], 1.0);
  EXPECT_EQ(calls, 0);
}

TEST(Rk4Test, StepWithAndWithoutWorkspaceAgree) {
  Eigen::VectorXd a = Vec({1.0, 0.5}), b = a;
  Rk4Workspace ws;
  Rk4Step(kOscillator, a, 0.1, &ws);
  Rk4Step(kOscillator, b, 0.1);
  EXPECT_EQ(a, b);
}

TEST(Dopri5Test, ExponentialDecayAtTightTolerance) {
  const double k = 0.7, T = 5.0;
  const Rhs decay = [k](const double* x, double* d) { d[0] = -k * x[0]; };
  Dopri5Options o;
  o.rtol = 1e-10;
  o.atol = 1e-12;
  const Result<Dopri5Result> r = IntegrateDopri5(decay, Vec({1.0}), T, o);
  ASSERT_TRUE(r.ok()) << r.status().ToString();
  EXPECT_NEAR(r->x[0], std::exp(-k * T), 1e-8);
  EXPECT_GT(r->steps_accepted, 0);
}

double Dopri5OscillatorError(double rtol, Dopri5Result* out = nullptr) {
  Dopri5Options o;
  o.rtol = rtol;
  o.atol = rtol * 1e-3;
  const double T = 10.0;
  const Result<Dopri5Result> r = IntegrateDopri5(kOscillator, Vec({1.0, 0.0}), T, o);
  EXPECT_TRUE(r.ok()) << r.status().ToString();
  if (!r.ok()) return 1.0;
  if (out != nullptr) *out = *r;
  return std::hypot(r->x[0] - std::cos(kW * T), (r->x[1] + kW * std::sin(kW * T)) / kW);
}

TEST(Dopri5Test, OscillatorErrorDecreasesWithTolerance) {
  Dopri5Result loose, tight;
  const double e4 = Dopri5OscillatorError(1e-4, &loose);
  const double e7 = Dopri5OscillatorError(1e-7);
  const double e10 = Dopri5OscillatorError(1e-10, &tight);
  EXPECT_LT(e7, e4);
  EXPECT_LT(e10, e7);
  EXPECT_LT(e10, 1e-8);
  EXPECT_GT(tight.steps_accepted, loose.steps_accepted);
  // FSAL: one evaluation at the start, one for the starting-step heuristic,
  // then six per attempted step.
  EXPECT_EQ(tight.evaluations, 2 + 6 * (tight.steps_accepted + tight.steps_rejected));
}

TEST(Dopri5Test, RejectedStepsAreCounted) {
  Dopri5Options o;
  o.rtol = 1e-8;
  o.atol = 1e-10;
  o.h_initial = 5.0;  // far too large: the first attempts must be rejected
  const Result<Dopri5Result> r = IntegrateDopri5(kOscillator, Vec({1.0, 0.0}), 10.0, o);
  ASSERT_TRUE(r.ok()) << r.status().ToString();
  EXPECT_GE(r->steps_rejected, 1);
  EXPECT_EQ(r->evaluations, 1 + 6 * (r->steps_accepted + r->steps_rejected));
  EXPECT_NEAR(r->x[0], std::cos(kW * 10.0), 1e-6);
  EXPECT_GT(r->next_step, 0.0);
}

TEST(Dopri5Test, ObserverSeesStartEveryAcceptedStepAndExactEnd) {
  std::vector<double> times;
  const Result<Dopri5Result> r = IntegrateDopri5(
      kOscillator, Vec({1.0, 0.0}), 3.7, {}, [&times](double t, const Eigen::VectorXd& x) {
        EXPECT_EQ(x.size(), 2);
        times.push_back(t);
      });
  ASSERT_TRUE(r.ok()) << r.status().ToString();
  ASSERT_EQ(static_cast<std::int64_t>(times.size()), r->steps_accepted + 1);
  EXPECT_EQ(times.front(), 0.0);
  EXPECT_EQ(times.back(), 3.7);
  for (std::size_t i = 1; i < times.size(); ++i) EXPECT_GT(times[i], times[i - 1]);
}

TEST(Dopri5Test, ZeroDurationReturnsTheInitialState) {
  const Result<Dopri5Result> r = IntegrateDopri5(kOscillator, Vec({0.25, 0.5}), 0.0);
  ASSERT_TRUE(r.ok());
  EXPECT_EQ(r->x, Vec({0.25, 0.5}));
  EXPECT_EQ(r->steps_accepted, 0);
}

TEST(Dopri5Test, MaxStepsExceededIsAClearError) {
  Dopri5Options o;
  o.rtol = 1e-10;
  o.max_steps = 10;
  const Result<Dopri5Result> r = IntegrateDopri5(kOscillator, Vec({1.0, 0.0}), 100.0, o);
  ASSERT_FALSE(r.ok());
  EXPECT_EQ(r.status().code(), StatusCode::kFailedPrecondition);
  const std::string m = r.status().message();
  EXPECT_NE(m.find("exceeded max_steps=10"), std::string::npos) << m;
  EXPECT_NE(m.find("of duration 100"), std::string::npos) << m;
}

TEST(Dopri5Test, FiniteTimeBlowUpIsAClearError) {
  // x' = x^2, x(0) = 1: x = 1 / (1 - t) blows up at t = 1.
  const Rhs square = [](const double* x, double* d) { d[0] = x[0] * x[0]; };
  const Result<Dopri5Result> r = IntegrateDopri5(square, Vec({1.0}), 2.0);
  ASSERT_FALSE(r.ok());
  EXPECT_EQ(r.status().code(), StatusCode::kFailedPrecondition);
  const std::string m = r.status().message();
  const std::string at = "step size underflow at t=";
  const std::size_t p = m.find(at);
  ASSERT_NE(p, std::string::npos) << m;
  EXPECT_NEAR(std::stod(m.substr(p + at.size())), 1.0, 1e-3) << m;  // where it blows up
  EXPECT_NE(m.find("blows up"), std::string::npos) << m;
}

TEST(Dopri5Test, NonFiniteValuesAreAClearError) {
  const double nan = std::numeric_limits<double>::quiet_NaN();
  // f is not finite beyond x = 1.5, which x' = 1 reaches at t = 1.5.
  const Rhs edge = [nan](const double* x, double* d) { d[0] = x[0] > 1.5 ? nan : 1.0; };
  const Result<Dopri5Result> r = IntegrateDopri5(edge, Vec({0.0}), 3.0);
  ASSERT_FALSE(r.ok());
  EXPECT_EQ(r.status().code(), StatusCode::kFailedPrecondition);
  EXPECT_NE(r.status().message().find("non-finite values"), std::string::npos) << r.status().message();
  EXPECT_NE(r.status().message().find("at t=1.4999"), std::string::npos) << r.status().message();

  const Rhs bad = [nan](const double*, double* d) { d[0] = nan; };
  const Result<Dopri5Result> r0 = IntegrateDopri5(bad, Vec({0.0}), 1.0);
  ASSERT_FALSE(r0.ok());
  EXPECT_NE(r0.status().message().find("not finite at t=0"), std::string::npos) << r0.status().message();

  const Result<Dopri5Result> r1 = IntegrateDopri5(kOscillator, Vec({nan, 0.0}), 1.0);
  ASSERT_FALSE(r1.ok());
  EXPECT_EQ(r1.status().code(), StatusCode::kInvalidArgument);
  EXPECT_NE(r1.status().message().find("initial state is not finite"), std::string::npos);
}

TEST(Dopri5Test, InvalidArgumentsAreRejected) {
  EXPECT_EQ(IntegrateDopri5(kOscillator, Vec({1.0, 0.0}), -1.0).status().code(), StatusCode::kInvalidArgument);
  Dopri5Options o;
  o.rtol = 0.0;
  o.atol = 0.0;
  EXPECT_EQ(IntegrateDopri5(kOscillator, Vec({1.0, 0.0}), 1.0, o).status().code(), StatusCode::kInvalidArgument);
  o = {};
  o.min_factor = 2.0;
  EXPECT_EQ(IntegrateDopri5(kOscillator, Vec({1.0, 0.0}), 1.0, o).status().code(), StatusCode::kInvalidArgument);
}

}  // namespace
}  // namespace lyapcast
