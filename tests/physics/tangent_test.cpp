// Tests for lib/physics tangent dynamics: the variational system
// Y' = J(x) Y reproduces known sensitivities of the flow.
#include "physics/tangent.h"

#include <gtest/gtest.h>

#include "support/feeds.h"

#include <cmath>

namespace lyapcast {
namespace {

using testing::MustCompile;

FeedConfig Feed(std::vector<std::string> channels, std::vector<std::pair<std::string, std::string>> equations,
                std::vector<std::pair<std::string, double>> constants) {
  FeedConfig f;
  f.id = "tangent";
  f.channels = std::move(channels);
  f.dynamics = DynamicsConfig{};
  f.dynamics->equations = std::move(equations);
  f.dynamics->constants = std::move(constants);
  return f;
}

Eigen::VectorXd Integrate(const Rhs& f, const Eigen::VectorXd& z, double T) {
  Dopri5Options o;
  o.rtol = 1e-12;
  o.atol = 1e-12;
  Result<Dopri5Result> r = IntegrateDopri5(f, z, T, o);
  EXPECT_TRUE(r.ok()) << r.status().ToString();
  return r.ok() ? r->x : z;
}

TEST(TangentTest, PackAndUnpackRoundTrip) {
  Eigen::VectorXd x(3);
  x << 1, 2, 3;
  Eigen::MatrixXd Y(3, 2);
  Y << 1, 2, 3, 4, 5, 6;
  const Eigen::VectorXd z = PackTangent(x, Y);
  ASSERT_EQ(z.size(), 9);
  EXPECT_EQ(z[3], 1.0);  // column-major: Y(0,0), Y(1,0), Y(2,0), Y(0,1), ...
  EXPECT_EQ(z[4], 3.0);
  Eigen::VectorXd x2;
  Eigen::MatrixXd Y2;
  UnpackTangent(z, 3, 2, &x2, &Y2);
  EXPECT_EQ(x2, x);
  EXPECT_EQ(Y2, Y);
}

// Harmonic oscillator x' = v, v' = -w^2 x: the flow is linear, so its
// derivative is the closed-form propagator [[cos, sin/w], [-w sin, cos]](w t).
TEST(TangentTest, OscillatorPropagatorIsExact) {
  const double w = 2.0, T = 3.0;
  const Dynamics d = MustCompile(Feed({"x", "v"}, {{"x", "v"}, {"v", "-w^2*x"}}, {{"w", w}}));
  Eigen::VectorXd x0(2);
  x0 << 1.0, 0.0;
  const Eigen::VectorXd z = Integrate(VariationalRhs(d, 2), PackTangent(x0, Eigen::MatrixXd::Identity(2, 2)), T);
  Eigen::VectorXd x;
  Eigen::MatrixXd Y;
  UnpackTangent(z, 2, 2, &x, &Y);
  const double c = std::cos(w * T), s = std::sin(w * T);
  EXPECT_NEAR(x[0], c, 1e-9);
  EXPECT_NEAR(Y(0, 0), c, 1e-9);
  EXPECT_NEAR(Y(0, 1), s / w, 1e-9);
  EXPECT_NEAR(Y(1, 0), -w * s, 1e-9);
  EXPECT_NEAR(Y(1, 1), c, 1e-9);
}

// Lorenz-63 (Sprott 2003 parameters): one tangent vector after t = 0.5
// matches the central difference of the flow in that direction.
TEST(TangentTest, LorenzTangentMatchesFlowDifference) {
  const Dynamics d = MustCompile(Feed({"x", "y", "z"},
                                      {{"x", "s*(y - x)"}, {"y", "x*(r - z) - y"}, {"z", "x*y - b*z"}},
                                      {{"s", 10.0}, {"r", 28.0}, {"b", 8.0 / 3.0}}));
  const Rhs f = [&d](const double* x, double* dx) { d.Eval(x, dx); };
  Eigen::VectorXd x0(3), v(3);
  x0 << 1.0, 1.0, 1.0;
  v << 0.6, -0.8, 0.0;
  const double T = 0.5, delta = 1e-5;
  const Eigen::VectorXd fd = (Integrate(f, x0 + delta * v, T) - Integrate(f, x0 - delta * v, T)) / (2 * delta);
  const Eigen::VectorXd z = Integrate(VariationalRhs(d, 1, {7.9, 9.0, 8.6}), PackTangent(x0, v), T);
  for (int c = 0; c < 3; ++c) EXPECT_NEAR(z[3 + c], fd[c], 1e-5 * std::max(1.0, std::abs(fd[c]))) << c;
}

}  // namespace
}  // namespace lyapcast
