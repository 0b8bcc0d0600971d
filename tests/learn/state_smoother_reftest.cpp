// Reference test against numpy (docs/references.md "Learning"): for an
// affine model the weak-constraint smoother is a linear least-squares
// problem, and SmoothStates must equal numpy.linalg.lstsq on its dense form
// to 1e-9 relative (tests/reference/numpy_smoother.py), with missing values,
// unequal channel scales and two dynamics weights.
#include <gtest/gtest.h>

#include <cmath>
#include <fstream>
#include <iomanip>
#include <random>
#include <sstream>

#include "learn/learn_test_util.h"
#include "learn/polynomial_map.h"
#include "learn/state_smoother.h"
#include "physics/integrators.h"
#include "support/python_reference.h"
#include "support/temp_dir.h"

namespace lyapcast {
namespace {

TEST(StateSmootherReference, AffineModelEqualsNumpyLstsq) {
  // A degree-1 polynomial map fitted to a stretch of Lorenz-63: an affine
  // model x' = A x + b whose A and b are read off the map itself.
  const double dt = 0.01;
  const int n = 240;
  Eigen::VectorXd x = IntegrateRk4(testing::Lorenz63, Eigen::Vector3d(1, 1, 1), 20.0, 0.005);
  Eigen::MatrixXd traj(3, n + 1);
  for (int i = 0; i <= n; ++i) {
    traj.col(i) = x;
    Rk4Step(testing::Lorenz63, x, dt);
  }
  const Eigen::Vector3d mean = traj.rowwise().mean();
  const Eigen::Vector3d std(7.9, 9.0, 8.6);
  PolynomialFitOptions o;
  o.degrees = {1};
  o.ridges = {1e-8};
  auto fit = FitPolynomialMap(dt, mean, std, Eigen::Vector3d(0.75, 1.2, 1.0), traj.leftCols(n), traj.rightCols(n),
                              traj.leftCols(n), traj.rightCols(n), o);
  ASSERT_TRUE(fit.ok()) << fit.status().message();
  const PolynomialMap& model = *fit->model;
  auto scratch = model.NewScratch();
  Eigen::VectorXd b(3);
  model.Step(Eigen::VectorXd::Zero(3), &b, *scratch);
  Eigen::MatrixXd A;
  model.Jacobian(Eigen::VectorXd::Zero(3), &A, *scratch);

  std::mt19937_64 rng(3);
  std::normal_distribution<double> noise(0.0, 0.05);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  Eigen::MatrixXd obs = traj.leftCols(n);
  for (Eigen::Index t = 0; t < n; ++t) {
    for (Eigen::Index c = 0; c < 3; ++c) {
      obs(c, t) += noise(rng) * std[c];
      if (u(rng) < 0.1) obs(c, t) = std::nan("");
    }
  }
  testing::TempDir dir;
  const std::string input = (dir.path() / "smoother.txt").string();
  const Eigen::Vector3d scale(2.0, 9.0, 0.5);  // unequal on purpose
  for (double w : {3.0, 100.0}) {
    {
      std::ofstream out(input);
      out << std::setprecision(17) << "shape " << n << " 3\nw " << w << "\nscale";
      for (int c = 0; c < 3; ++c) out << ' ' << scale[c];
      out << "\na";
      for (int i = 0; i < 3; ++i) {
        for (int j = 0; j < 3; ++j) out << ' ' << A(i, j);
      }
      out << "\nb";
      for (int c = 0; c < 3; ++c) out << ' ' << b[c];
      out << "\ny";
      for (int c = 0; c < 3; ++c) {
        for (int t = 0; t < n; ++t) {
          if (std::isnan(obs(c, t))) {
            out << " nan";
          } else {
            out << ' ' << obs(c, t);
          }
        }
      }
      out << '\n';
    }
    const testing::PythonRun run = testing::RunPythonReference("tests/reference/numpy_smoother.py", "'" + input + "'");
    if (!run.skip.empty()) GTEST_SKIP() << run.skip;
    ASSERT_TRUE(run.error.empty()) << run.error;
    std::istringstream in(run.output);
    std::string key;
    in >> key;
    ASSERT_EQ(key, "x") << run.output;
    Eigen::MatrixXd expected(3, n);
    for (int c = 0; c < 3; ++c) {
      for (int t = 0; t < n; ++t) ASSERT_TRUE(in >> expected(c, t)) << run.output;
    }
    StateSmootherOptions so;
    so.dynamics_weight = w;
    auto s = SmoothStates(model, obs, scale, so);
    ASSERT_TRUE(s.ok()) << s.status().message();
    const double difference = (s->states - expected).norm() / expected.norm();
    EXPECT_LT(difference, 1e-9) << "w " << w;
  }
}

}  // namespace
}  // namespace lyapcast
