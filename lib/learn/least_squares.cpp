#include "learn/least_squares.h"

#include <Eigen/Cholesky>
#include <Eigen/QR>
#include <cmath>
#include <string>

namespace lyapcast {
namespace {

Status CheckLambda(double lambda, bool allow_zero) {
  if (!std::isfinite(lambda) || lambda < 0 || (!allow_zero && lambda == 0)) {
    return Status::Invalid("least squares: ridge lambda must be finite and " +
                           std::string(allow_zero ? ">= 0" : "> 0") + ", got " + std::to_string(lambda));
  }
  return Status::Ok();
}

Status CheckForgetting(double rho) {
  if (!(rho > 0 && rho <= 1)) {
    return Status::Invalid("least squares: forgetting factor must be in (0, 1], got " + std::to_string(rho));
  }
  return Status::Ok();
}

}  // namespace

Result<Eigen::MatrixXd> RidgeSolve(const Eigen::MatrixXd& Phi, const Eigen::MatrixXd& Y, double lambda) {
  if (Status s = CheckLambda(lambda, /*allow_zero=*/true); !s.ok()) return s;
  const Eigen::Index n = Phi.rows(), f = Phi.cols();
  if (f < 1 || Y.cols() < 1 || Y.rows() != n) {
    return Status::Invalid("least squares: features are " + std::to_string(n) + " x " + std::to_string(f) +
                           ", targets " + std::to_string(Y.rows()) + " x " + std::to_string(Y.cols()) +
                           " (need the same rows, at least one column each)");
  }
  if (!Phi.allFinite() || !Y.allFinite()) return Status::Invalid("least squares: a feature or target is not finite");
  if (lambda == 0 && n < f) {
    return Status::Invalid("least squares: " + std::to_string(n) + " samples for " + std::to_string(f) +
                           " features and no ridge term: no unique solution");
  }
  Eigen::MatrixXd A(n + (lambda > 0 ? f : 0), f);
  Eigen::MatrixXd B = Eigen::MatrixXd::Zero(A.rows(), Y.cols());
  A.topRows(n) = Phi;
  B.topRows(n) = Y;
  if (lambda > 0) A.bottomRows(f) = std::sqrt(lambda) * Eigen::MatrixXd::Identity(f, f);
  // Column pivoting so that a rank-deficient Phi with lambda == 0 gives a
  // least-squares solution rather than garbage.
  Eigen::ColPivHouseholderQR<Eigen::MatrixXd> qr(A);
  if (lambda == 0 && qr.rank() < f) {
    return Status::Invalid("least squares: the features are linearly dependent (rank " + std::to_string(qr.rank()) +
                           " of " + std::to_string(f) + ") and there is no ridge term");
  }
  return Eigen::MatrixXd(qr.solve(B));
}

Result<RecursiveLeastSquares> RecursiveLeastSquares::Create(int features, int outputs, double lambda,
                                                            double forgetting) {
  if (features < 1 || outputs < 1) {
    return Status::Invalid("least squares: need at least one feature and one output, got " +
                           std::to_string(features) + " and " + std::to_string(outputs));
  }
  if (Status s = CheckLambda(lambda, /*allow_zero=*/false); !s.ok()) return s;
  if (Status s = CheckForgetting(forgetting); !s.ok()) return s;
  RecursiveLeastSquares r;
  r.W_ = Eigen::MatrixXd::Zero(features, outputs);
  r.P_ = Eigen::MatrixXd::Identity(features, features) / lambda;
  r.Pphi_.resize(features);
  r.forgetting_ = forgetting;
  return r;
}

Result<RecursiveLeastSquares> RecursiveLeastSquares::FromBatch(const Eigen::MatrixXd& Phi, const Eigen::MatrixXd& Y,
                                                               double lambda, double forgetting) {
  if (Status s = CheckLambda(lambda, /*allow_zero=*/false); !s.ok()) return s;
  if (Status s = CheckForgetting(forgetting); !s.ok()) return s;
  Result<Eigen::MatrixXd> W = RidgeSolve(Phi, Y, lambda);
  if (!W.ok()) return W.status();
  RecursiveLeastSquares r;
  const Eigen::Index f = Phi.cols();
  Eigen::MatrixXd gram = Eigen::MatrixXd::Identity(f, f) * lambda;
  gram.selfadjointView<Eigen::Lower>().rankUpdate(Phi.transpose());
  gram = gram.selfadjointView<Eigen::Lower>();
  r.P_ = gram.llt().solve(Eigen::MatrixXd::Identity(f, f));
  r.W_ = std::move(W).value();
  r.Pphi_.resize(f);
  r.forgetting_ = forgetting;
  r.samples_ = Phi.rows();
  return r;
}

Status RecursiveLeastSquares::Update(const Eigen::VectorXd& phi, const Eigen::VectorXd& y) {
  if (phi.size() != W_.rows() || y.size() != W_.cols()) {
    return Status::Invalid("least squares: a sample has " + std::to_string(phi.size()) + " features and " +
                           std::to_string(y.size()) + " targets, the model " + std::to_string(W_.rows()) + " and " +
                           std::to_string(W_.cols()));
  }
  if (!phi.allFinite() || !y.allFinite()) return Status::Invalid("least squares: a sample value is not finite");
  // k = P phi / (rho + phi^T P phi); W += k (y - W^T phi)^T; P = (P - k phi^T P) / rho.
  Pphi_.noalias() = P_ * phi;
  const double denom = forgetting_ + phi.dot(Pphi_);
  const Eigen::RowVectorXd innovation = y.transpose() - phi.transpose() * W_;
  W_.noalias() += (Pphi_ / denom) * innovation;
  P_.noalias() -= (Pphi_ / denom) * Pphi_.transpose();
  if (forgetting_ != 1.0) P_ /= forgetting_;
  // Round-off makes P drift from symmetric over many updates; keep it so.
  P_ = 0.5 * (P_ + P_.transpose()).eval();
  ++samples_;
  return Status::Ok();
}

}  // namespace lyapcast
