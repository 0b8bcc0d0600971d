// Ridge regression and recursive least squares (learn/least_squares.h): the
// closed form, the recursion against the batch solve, and the refusals.
// numpy's lstsq on the same problem: least_squares_reftest.cpp.
#include "learn/least_squares.h"

#include <gtest/gtest.h>

#include <Eigen/Cholesky>

#include <cmath>

#include "learn/learn_test_util.h"

namespace lyapcast {
namespace {

using testing::RandomMatrix;

double RelativeDifference(const Eigen::MatrixXd& a, const Eigen::MatrixXd& b) {
  return (a - b).norm() / std::max(b.norm(), 1e-300);
}

TEST(RidgeSolve, MatchesTheNormalEquationsOnAWellConditionedProblem) {
  // Textbook closed form W = (Phi^T Phi + lambda I)^-1 Phi^T Y; fine in
  // double when Phi is well conditioned, as this random one is.
  const Eigen::MatrixXd Phi = RandomMatrix(200, 8, 1);
  const Eigen::MatrixXd Y = RandomMatrix(200, 3, 2);
  for (double lambda : {0.0, 1e-3, 10.0}) {
    auto W = RidgeSolve(Phi, Y, lambda);
    ASSERT_TRUE(W.ok()) << W.status().message();
    const Eigen::MatrixXd gram = Phi.transpose() * Phi + lambda * Eigen::MatrixXd::Identity(8, 8);
    const Eigen::MatrixXd expected = gram.ldlt().solve(Phi.transpose() * Y);
    EXPECT_LT(RelativeDifference(W.value(), expected), 1e-12) << "lambda " << lambda;
  }
}

TEST(RidgeSolve, RecoversAnExactLinearRelation) {
  const Eigen::MatrixXd Phi = RandomMatrix(50, 5, 3);
  const Eigen::MatrixXd W_true = RandomMatrix(5, 2, 4);
  auto W = RidgeSolve(Phi, Phi * W_true, 0.0);
  ASSERT_TRUE(W.ok());
  EXPECT_LT(RelativeDifference(W.value(), W_true), 1e-13);
}

TEST(RidgeSolve, RefusesWhatHasNoAnswer) {
  const Eigen::MatrixXd Phi = RandomMatrix(10, 4, 5);
  EXPECT_FALSE(RidgeSolve(Phi, RandomMatrix(9, 1, 6), 0.0).ok());           // rows differ
  EXPECT_FALSE(RidgeSolve(Phi, RandomMatrix(10, 1, 6), -1.0).ok());         // negative penalty
  EXPECT_FALSE(RidgeSolve(Phi, RandomMatrix(10, 1, 6), std::nan("")).ok());
  EXPECT_FALSE(RidgeSolve(RandomMatrix(3, 4, 7), RandomMatrix(3, 1, 6), 0.0).ok());  // underdetermined
  Eigen::MatrixXd dependent = Phi;
  dependent.col(3) = 2 * dependent.col(1);
  auto r = RidgeSolve(dependent, RandomMatrix(10, 1, 6), 0.0);
  ASSERT_FALSE(r.ok());
  EXPECT_NE(r.status().message().find("linearly dependent"), std::string::npos) << r.status().message();
  EXPECT_TRUE(RidgeSolve(dependent, RandomMatrix(10, 1, 6), 1e-6).ok()) << "a ridge term makes it solvable";
  Eigen::MatrixXd bad = Phi;
  bad(2, 2) = INFINITY;
  EXPECT_FALSE(RidgeSolve(bad, RandomMatrix(10, 1, 6), 1.0).ok());
}

TEST(RecursiveLeastSquares, EqualsTheBatchSolveAfterTheSameSamples) {
  const Eigen::MatrixXd Phi = RandomMatrix(400, 10, 11);
  const Eigen::MatrixXd Y = Phi * RandomMatrix(10, 3, 12) + 0.1 * RandomMatrix(400, 3, 13);
  const double lambda = 1e-2;
  auto rls = RecursiveLeastSquares::Create(10, 3, lambda);
  ASSERT_TRUE(rls.ok());
  for (Eigen::Index i = 0; i < Phi.rows(); ++i) {
    ASSERT_TRUE(rls.value().Update(Phi.row(i).transpose(), Y.row(i).transpose()).ok());
  }
  auto batch = RidgeSolve(Phi, Y, lambda);
  ASSERT_TRUE(batch.ok());
  EXPECT_LT(RelativeDifference(rls.value().weights(), batch.value()), 1e-8);
  EXPECT_EQ(rls.value().samples(), 400);
  const Eigen::MatrixXd gram = Phi.transpose() * Phi + lambda * Eigen::MatrixXd::Identity(10, 10);
  EXPECT_LT(RelativeDifference(rls.value().inverse_gram() * gram, Eigen::MatrixXd::Identity(10, 10)), 1e-8);
}

TEST(RecursiveLeastSquares, ContinuesABatchFitExactly) {
  // Batch on the first 300 samples, then 100 recursive updates: the same as
  // a batch refit on all 400 (the continual update of a linear readout).
  const Eigen::MatrixXd Phi = RandomMatrix(400, 12, 21);
  const Eigen::MatrixXd Y = RandomMatrix(400, 2, 22);
  const double lambda = 0.5;
  auto rls = RecursiveLeastSquares::FromBatch(Phi.topRows(300), Y.topRows(300), lambda);
  ASSERT_TRUE(rls.ok()) << rls.status().message();
  for (Eigen::Index i = 300; i < 400; ++i) {
    ASSERT_TRUE(rls.value().Update(Phi.row(i).transpose(), Y.row(i).transpose()).ok());
  }
  auto batch = RidgeSolve(Phi, Y, lambda);
  ASSERT_TRUE(batch.ok());
  EXPECT_LT(RelativeDifference(rls.value().weights(), batch.value()), 1e-8);
}

TEST(RecursiveLeastSquares, ForgettingEqualsAWeightedBatchSolve) {
  // rho < 1: sample k weighs rho^(N-1-k), the penalty rho^N (exponentially
  // weighted RLS; Haykin, Adaptive Filter Theory, ch. 10).
  const int n = 300;
  const double rho = 0.99, lambda = 1.0;
  const Eigen::MatrixXd Phi = RandomMatrix(n, 6, 31);
  const Eigen::MatrixXd Y = RandomMatrix(n, 2, 32);
  auto rls = RecursiveLeastSquares::Create(6, 2, lambda, rho);
  ASSERT_TRUE(rls.ok());
  Eigen::MatrixXd Phi_w = Phi, Y_w = Y;
  for (int k = 0; k < n; ++k) {
    ASSERT_TRUE(rls.value().Update(Phi.row(k).transpose(), Y.row(k).transpose()).ok());
    const double w = std::sqrt(std::pow(rho, n - 1 - k));
    Phi_w.row(k) *= w;
    Y_w.row(k) *= w;
  }
  auto batch = RidgeSolve(Phi_w, Y_w, lambda * std::pow(rho, n));
  ASSERT_TRUE(batch.ok());
  EXPECT_LT(RelativeDifference(rls.value().weights(), batch.value()), 1e-8);
}

TEST(RecursiveLeastSquares, RefusesBadOptionsAndSamplesWithoutChangingState) {
  EXPECT_FALSE(RecursiveLeastSquares::Create(0, 1, 1.0).ok());
  EXPECT_FALSE(RecursiveLeastSquares::Create(3, 1, 0.0).ok());
  EXPECT_FALSE(RecursiveLeastSquares::Create(3, 1, 1.0, 0.0).ok());
  EXPECT_FALSE(RecursiveLeastSquares::Create(3, 1, 1.0, 1.5).ok());
  auto rls = RecursiveLeastSquares::Create(3, 1, 1.0);
  ASSERT_TRUE(rls.ok());
  ASSERT_TRUE(rls.value().Update(Eigen::Vector3d(1, 2, 3), Eigen::VectorXd::Constant(1, 4.0)).ok());
  const Eigen::MatrixXd before = rls.value().weights();
  EXPECT_FALSE(rls.value().Update(Eigen::Vector2d(1, 2), Eigen::VectorXd::Constant(1, 4.0)).ok());
  EXPECT_FALSE(rls.value().Update(Eigen::Vector3d(1, NAN, 3), Eigen::VectorXd::Constant(1, 4.0)).ok());
  EXPECT_EQ(rls.value().weights(), before);
  EXPECT_EQ(rls.value().samples(), 1);
}

}  // namespace
}  // namespace lyapcast
