// Reference test against numpy (docs/references.md "Learning"): the ridge
// solve of a polynomial map's readout equals numpy.linalg.lstsq on the same
// augmented system [Phi; sqrt(lambda) I] W = [Y; 0] to 1e-9 relative, on the
// features the daemon would build (degree-4 monomials of normalized
// Lorenz-63 states: the worst-conditioned default degree).
#include <gtest/gtest.h>

#include <fstream>
#include <iomanip>
#include <sstream>

#include "learn/least_squares.h"
#include "learn/polynomial_map.h"
#include "learn/learn_test_util.h"
#include "physics/integrators.h"
#include "support/python_reference.h"
#include "support/temp_dir.h"

namespace lyapcast {
namespace {

void Put(std::ostream& out, const char* key, const Eigen::MatrixXd& m) {
  out << key;
  for (Eigen::Index i = 0; i < m.rows(); ++i) {
    for (Eigen::Index j = 0; j < m.cols(); ++j) out << ' ' << m(i, j);
  }
  out << '\n';
}

TEST(LeastSquaresReference, RidgeSolveEqualsNumpyLstsq) {
  const double dt = 0.01;
  const int n = 1500;
  Eigen::VectorXd x = IntegrateRk4(testing::Lorenz63, Eigen::Vector3d(1, 1, 1), 20.0, 0.005);
  Eigen::MatrixXd X(3, n), Xn(3, n);
  for (int i = 0; i < n; ++i) {
    X.col(i) = x;
    Rk4Step(testing::Lorenz63, x, dt);
    Xn.col(i) = x;
  }
  auto features = PolynomialFeatures::Create(3, 4);
  ASSERT_TRUE(features.ok());
  Eigen::MatrixXd Phi, Y;
  PolynomialRegressionProblem(features.value(), dt, Eigen::Vector3d(0, 0, 23.5), Eigen::Vector3d(7.9, 9.0, 8.6),
                              Eigen::Vector3d(0.75, 1.2, 1.0), X, Xn, &Phi, &Y);
  testing::TempDir dir;
  const std::string input = (dir.path() / "lstsq.txt").string();
  for (double lambda : {1e-8 * n, 1e-3 * n}) {
    {
      std::ofstream out(input);
      out << std::setprecision(17);
      out << "shape " << n << ' ' << Phi.cols() << ' ' << Y.cols() << '\n' << "lambda " << lambda << '\n';
      Put(out, "phi", Phi);
      Put(out, "y", Y);
    }
    const testing::PythonRun run = testing::RunPythonReference("tests/reference/numpy_lstsq.py", "'" + input + "'");
    if (!run.skip.empty()) GTEST_SKIP() << run.skip;
    ASSERT_TRUE(run.error.empty()) << run.error;
    std::istringstream in(run.output);
    std::string key;
    in >> key;
    ASSERT_EQ(key, "w") << run.output;
    Eigen::MatrixXd expected(Phi.cols(), Y.cols());
    for (Eigen::Index i = 0; i < expected.rows(); ++i) {
      for (Eigen::Index j = 0; j < expected.cols(); ++j) ASSERT_TRUE(in >> expected(i, j)) << run.output;
    }
    auto W = RidgeSolve(Phi, Y, lambda);
    ASSERT_TRUE(W.ok()) << W.status().message();
    const double difference = (W.value() - expected).norm() / expected.norm();
    EXPECT_LT(difference, 1e-9) << "lambda " << lambda;
  }
}

}  // namespace
}  // namespace lyapcast
