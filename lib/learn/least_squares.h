// Exact regularised least squares for linear-in-parameters models
// (docs/design.md "Model families"): a batch ridge solve and its recursive
// form, so a model whose output is linear in its parameters is fitted
// exactly rather than by gradient descent, and updated sample by sample
// rather than retrained.
//
// Both solve the same problem. With Phi the N x F feature matrix (one row
// per sample), Y the N x C targets and lambda >= 0,
//
//     W = argmin ||Phi W - Y||_F^2 + lambda ||W||_F^2        (F x C)
//
// RidgeSolve uses a Householder QR of the augmented matrix
// [Phi; sqrt(lambda) I] rather than the normal equations, whose condition
// number is the square of Phi's (polynomial features of degree 3 and 4 are
// ill-conditioned enough for that to cost digits).
//
// RecursiveLeastSquares keeps P = (Phi^T Phi + lambda I)^-1 and W and folds
// in one sample at a time (the textbook RLS recursion, e.g. Haykin, Adaptive
// Filter Theory, ch. 10): after the same samples it equals RidgeSolve up to
// round-off. With a forgetting factor rho < 1 each update first discounts
// what came before by rho, so the result is the ridge solution with sample
// k weighted rho^(N-1-k) and the penalty weighted rho^N.
//
// Pure values; not thread-safe for concurrent mutation. Nothing throws.
#pragma once

#include "core/eigen.h"  // first, instead of <Eigen/Core>: see there

#include "core/status.h"

namespace lyapcast {

// W (F x C) as above. kInvalidArgument when the shapes disagree, lambda is
// negative or not finite, a value is not finite, or lambda == 0 and Phi has
// fewer rows than columns (the problem has no unique solution).
[[nodiscard]] Result<Eigen::MatrixXd> RidgeSolve(const Eigen::MatrixXd& Phi, const Eigen::MatrixXd& Y,
                                                 double lambda);

class RecursiveLeastSquares {
 public:
  // No samples yet: W = 0, P = I / lambda. kInvalidArgument unless
  // features >= 1, outputs >= 1, lambda > 0 and finite, 0 < forgetting <= 1.
  [[nodiscard]] static Result<RecursiveLeastSquares> Create(int features, int outputs, double lambda,
                                                            double forgetting = 1.0);
  // Continues from a batch solve of the same problem: W from RidgeSolve and
  // P = (Phi^T Phi + lambda I)^-1 computed here from Phi. Same checks as
  // Create and RidgeSolve.
  [[nodiscard]] static Result<RecursiveLeastSquares> FromBatch(const Eigen::MatrixXd& Phi, const Eigen::MatrixXd& Y,
                                                               double lambda, double forgetting = 1.0);

  RecursiveLeastSquares() = default;  // empty; only assignment is meaningful

  // Folds in one sample: phi has features() values, y has outputs(). A
  // sample with a non-finite value is refused (kInvalidArgument) and leaves
  // the state unchanged.
  [[nodiscard]] Status Update(const Eigen::VectorXd& phi, const Eigen::VectorXd& y);

  int features() const { return static_cast<int>(W_.rows()); }
  int outputs() const { return static_cast<int>(W_.cols()); }
  double forgetting() const { return forgetting_; }
  long long samples() const { return samples_; }
  const Eigen::MatrixXd& weights() const { return W_; }     // F x C
  const Eigen::MatrixXd& inverse_gram() const { return P_; }  // F x F, symmetric

 private:
  Eigen::MatrixXd W_, P_;
  Eigen::VectorXd Pphi_;  // scratch reused by Update
  double forgetting_ = 1.0;
  long long samples_ = 0;
};

}  // namespace lyapcast
