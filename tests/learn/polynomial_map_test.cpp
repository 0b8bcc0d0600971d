// PolynomialMap (learn/polynomial_map.h): the monomials, derivatives against
// central differences, exact recovery of a polynomial map, and the fit's
// choice of degree and ridge on held-out pairs.
#include "learn/polynomial_map.h"

#include <gtest/gtest.h>

#include <cmath>

#include "learn/learn_test_util.h"
#include "physics/integrators.h"

namespace lyapcast {
namespace {

using testing::RandomMatrix;

// n + 1 states one step apart, on the attractor; `euler` uses x + dt f(x)
// (a polynomial of degree 2) instead of RK4.
Eigen::MatrixXd Trajectory(int n, double dt, bool euler) {
  Eigen::VectorXd x = IntegrateRk4(testing::Lorenz63, Eigen::Vector3d(1, 1, 1), 20.0, 0.005);
  Eigen::MatrixXd out(3, n + 1);
  out.col(0) = x;
  for (int i = 1; i <= n; ++i) {
    if (euler) {
      Eigen::Vector3d f;
      testing::Lorenz63(x.data(), f.data());
      x += dt * f;
    } else {
      Rk4Step(testing::Lorenz63, x, dt);
    }
    out.col(i) = x;
  }
  return out;
}

struct Scales {
  Eigen::VectorXd mean, stddev, increment;
};

Scales ScalesOf(const Eigen::MatrixXd& traj, double dt) {
  Scales s;
  s.mean = traj.rowwise().mean();
  s.stddev = ((traj.colwise() - s.mean).array().square().rowwise().mean()).sqrt().matrix();
  const Eigen::MatrixXd inc = (traj.rightCols(traj.cols() - 1) - traj.leftCols(traj.cols() - 1)) / dt;
  const Eigen::VectorXd inc_mean = inc.rowwise().mean();
  s.increment = ((inc.colwise() - inc_mean).array().square().rowwise().mean()).sqrt().matrix() * dt;
  return s;
}

TEST(PolynomialFeatures, CountsAndOrdersTheMonomials) {
  auto f = PolynomialFeatures::Create(3, 2);
  ASSERT_TRUE(f.ok());
  ASSERT_EQ(f.value().size(), 10);  // C(3 + 2, 2)
  const std::vector<std::string> names = {"x", "y", "z"};
  std::string all;
  for (int k = 0; k < 10; ++k) all += f.value().Name(k, names) + ",";
  EXPECT_EQ(all, "1,x,y,z,x^2,x y,x z,y^2,y z,z^2,");
  EXPECT_EQ(PolynomialFeatures::Create(3, 4).value().size(), 35);
  EXPECT_EQ(PolynomialFeatures::Create(10, 3).value().size(), 286);
  double phi[10];
  const double z[3] = {2, 3, 5};
  f.value().Evaluate(z, phi);
  const double expected[10] = {1, 2, 3, 5, 4, 6, 10, 9, 15, 25};
  for (int k = 0; k < 10; ++k) EXPECT_EQ(phi[k], expected[k]) << k;
}

TEST(PolynomialFeatures, RefusesSizesBeyondItsLimits) {
  EXPECT_FALSE(PolynomialFeatures::Create(0, 2).ok());
  EXPECT_FALSE(PolynomialFeatures::Create(3, 0).ok());
  EXPECT_FALSE(PolynomialFeatures::Create(3, 9).ok());
  auto big = PolynomialFeatures::Create(40, 4);  // 135 751 monomials
  ASSERT_FALSE(big.ok());
  EXPECT_NE(big.status().message().find("use a lower degree"), std::string::npos) << big.status().message();
}

TEST(PolynomialFeatures, GradientMatchesCentralDifferences) {
  auto f = PolynomialFeatures::Create(4, 3);
  ASSERT_TRUE(f.ok());
  const Eigen::VectorXd z = RandomMatrix(4, 1, 3, -1.5, 1.5);
  Eigen::MatrixXd dphi;
  f.value().Gradient(z.data(), &dphi);
  const int n = f.value().size();
  Eigen::VectorXd plus(n), minus(n);
  const double h = 1e-6;
  for (int v = 0; v < 4; ++v) {
    Eigen::VectorXd zp = z, zm = z;
    zp[v] += h;
    zm[v] -= h;
    f.value().Evaluate(zp.data(), plus.data());
    f.value().Evaluate(zm.data(), minus.data());
    const Eigen::VectorXd fd = (plus - minus) / (2 * h);
    EXPECT_LT((dphi.col(v) - fd).norm(), 1e-7 * std::max(1.0, fd.norm())) << "variable " << v;
  }
}

TEST(PolynomialMap, RecoversTheEulerMapOfLorenzExactly) {
  // The Euler map x + dt f(x) of Lorenz-63 is a polynomial of degree 2: a
  // degree-2 fit with no noise must reproduce it to round-off, on states it
  // was not fitted on.
  const double dt = 0.01;
  const Eigen::MatrixXd traj = Trajectory(3000, dt, /*euler=*/true);
  const Scales s = ScalesOf(traj, dt);
  const Eigen::MatrixXd X = traj.leftCols(2000), Xn = traj.middleCols(1, 2000);
  const Eigen::MatrixXd V = traj.middleCols(2000, 999), Vn = traj.middleCols(2001, 999);
  PolynomialFitOptions options;
  options.degrees = {2};
  options.ridges = {0.0};
  auto fit = FitPolynomialMap(dt, s.mean, s.stddev, s.increment, X, Xn, V, Vn, options);
  ASSERT_TRUE(fit.ok()) << fit.status().message();
  EXPECT_LT(fit.value().validation_error, 1e-11);
  const ForecastModel& model = *fit.value().model;
  EXPECT_EQ(model.family(), "polynomial_map");
  auto scratch = model.NewScratch();
  Eigen::VectorXd next;
  const Eigen::VectorXd x = traj.col(2500);
  model.Step(x, &next, *scratch);
  EXPECT_LT((next - traj.col(2501)).norm(), 1e-10 * x.norm());
  // The Jacobian of the Euler map: I + dt Df, in closed form.
  Eigen::MatrixXd J;
  model.Jacobian(x, &J, *scratch);
  Eigen::Matrix3d expected;
  expected << -10, 10, 0, 28 - x[2], -1, -x[0], x[1], x[0], -8.0 / 3.0;
  expected = Eigen::Matrix3d::Identity() + dt * expected;
  EXPECT_LT((J - expected).norm(), 1e-8);
}

TEST(PolynomialMap, StepBatchAndJacobianAgreeWithStep) {
  auto f = PolynomialFeatures::Create(3, 3);
  ASSERT_TRUE(f.ok());
  auto model = PolynomialMap::Create(f.value(), 0.05, Eigen::Vector3d(0.5, -1, 20), Eigen::Vector3d(2, 3, 8),
                                     Eigen::Vector3d(4, 5, 6), RandomMatrix(20, 3, 41, -0.3, 0.3));
  ASSERT_TRUE(model.ok()) << model.status().message();
  const Eigen::MatrixXd X = RandomMatrix(3, 7, 42, -3, 3);
  auto scratch = model.value()->NewScratch();
  Eigen::MatrixXd Y;
  model.value()->StepBatch(X, &Y, *scratch);
  for (int j = 0; j < 7; ++j) {
    Eigen::VectorXd y;
    model.value()->Step(X.col(j), &y, *scratch);
    EXPECT_LT((y - Y.col(j)).norm(), 1e-12 * (1 + y.norm()));
  }
  Eigen::MatrixXd J;
  const Eigen::VectorXd x = X.col(2);
  model.value()->Jacobian(x, &J, *scratch);
  const double h = 1e-6;
  for (int v = 0; v < 3; ++v) {
    Eigen::VectorXd xp = x, xm = x, yp, ym;
    xp[v] += h;
    xm[v] -= h;
    model.value()->Step(xp, &yp, *scratch);
    model.value()->Step(xm, &ym, *scratch);
    EXPECT_LT((J.col(v) - (yp - ym) / (2 * h)).norm(), 1e-6) << v;
  }
  Eigen::MatrixXd in_place = X;
  model.value()->StepBatch(in_place, &in_place, *scratch);
  EXPECT_LT((in_place - Y).norm(), 1e-12 * Y.norm());
}

TEST(PolynomialMap, CreateRefusesInconsistentParts) {
  auto f = PolynomialFeatures::Create(2, 2).value();
  const Eigen::Vector2d one(1, 1);
  EXPECT_FALSE(PolynomialMap::Create(f, 0.0, one, one, one, Eigen::MatrixXd::Zero(6, 2)).ok());
  EXPECT_FALSE(PolynomialMap::Create(f, 0.1, one, Eigen::Vector2d(1, 0), one, Eigen::MatrixXd::Zero(6, 2)).ok());
  EXPECT_FALSE(PolynomialMap::Create(f, 0.1, one, one, one, Eigen::MatrixXd::Zero(5, 2)).ok());
  EXPECT_TRUE(PolynomialMap::Create(f, 0.1, one, one, one, Eigen::MatrixXd::Zero(6, 2)).ok());
}

TEST(PolynomialMap, FitOnTheRk4MapPrefersAHigherDegree) {
  // The RK4 map of Lorenz-63 is a polynomial of degree 16 in x; degree 2
  // misses its dt^2 terms, degree 4 gets within O(dt^4) of it. The fit
  // must see that on held-out pairs and pick a degree above 2 (measured:
  // degree 4, error 1.4e-7 of the channel std; degree 2 alone 1.5e-3).
  const double dt = 0.01;
  const Eigen::MatrixXd traj = Trajectory(6000, dt, /*euler=*/false);
  const Scales s = ScalesOf(traj, dt);
  const Eigen::MatrixXd X = traj.leftCols(4000), Xn = traj.middleCols(1, 4000);
  const Eigen::MatrixXd V = traj.middleCols(4000, 1999), Vn = traj.middleCols(4001, 1999);
  auto fit = FitPolynomialMap(dt, s.mean, s.stddev, s.increment, X, Xn, V, Vn);
  ASSERT_TRUE(fit.ok()) << fit.status().message();
  EXPECT_GT(fit.value().degree, 2);
  EXPECT_EQ(fit.value().candidates, 30);
  EXPECT_LT(fit.value().validation_error, 1e-6) << "degree " << fit.value().degree;
  PolynomialFitOptions two;
  two.degrees = {2};
  auto quadratic = FitPolynomialMap(dt, s.mean, s.stddev, s.increment, X, Xn, V, Vn, two);
  ASSERT_TRUE(quadratic.ok());
  EXPECT_GT(quadratic.value().validation_error, 10 * fit.value().validation_error);
}

}  // namespace
}  // namespace lyapcast
