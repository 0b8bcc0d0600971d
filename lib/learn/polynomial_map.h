// PolynomialMap: a linear-in-parameters flow map (docs/design.md
// "Model families"), the one-step map in residual form
//
//     G(x) = x + dt * S ⊙ (W^T phi((x - m) ⊘ s))
//
// with phi the monomials of degree 0..p of the normalized state (graded
// order: 1, z1, ..., zC, z1^2, z1 z2, ...), W (F x C) the readout, and m, s,
// S the per-channel mean, std and increment scale as in the neural flow map
// (learn/flow_map.h). Polynomial regression of the one-step increment is
// discrete-time sparse identification without the sparsity (Brunton,
// Proctor, Kutz 2016, PNAS 113, 3932) and the nonlinear vector
// autoregression of Gauthier, Bollt, Griffith, Barbosa 2021 (Nat. Commun.
// 12, 5564) with no delayed states; its readout is fitted exactly by ridge
// regression (learn/least_squares.h) rather than by gradient descent, and
// can be updated by recursive least squares.
//
// For a flow whose right-hand side is a polynomial of degree q, the Euler
// map is a polynomial of degree q and a Runge-Kutta map one of higher
// degree; degree 3 or 4 approximates the true one-step map of such a flow to
// O(dt^3) or better. Other right-hand sides are approximated on the range of
// the training data only: a polynomial grows fast outside it.
//
// Thread safety: immutable after construction, as every ForecastModel.
#pragma once

#include "core/eigen.h"  // first, instead of <Eigen/Core>: see there

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "core/status.h"
#include "learn/forecast_model.h"

namespace lyapcast {

// The monomials of degree 0..degree in `variables` variables.
class PolynomialFeatures {
 public:
  static constexpr int kMaxFeatures = 4096;  // a bound on the fit's memory and time (F^2 and F^3)

  // kInvalidArgument unless variables in [1, 64], degree in [1, 8] and the
  // number of monomials, C(variables + degree, degree), is <= kMaxFeatures.
  [[nodiscard]] static Result<PolynomialFeatures> Create(int variables, int degree);
  PolynomialFeatures() = default;

  int variables() const { return variables_; }
  int degree() const { return degree_; }
  int size() const { return static_cast<int>(exponents_.size()) / std::max(variables_, 1); }
  // Exponent of variable v in monomial k.
  int exponent(int k, int v) const { return exponents_[static_cast<std::size_t>(k * variables_ + v)]; }

  // phi (size() values) at z (variables() values).
  void Evaluate(const double* z, double* phi) const;
  // d phi / d z at z: size() x variables().
  void Gradient(const double* z, Eigen::MatrixXd* dphi) const;
  // "1", "x", "x^2 y" with the given variable names (variables() of them).
  std::string Name(int k, const std::vector<std::string>& names) const;

 private:
  int variables_ = 0, degree_ = 0;
  std::vector<std::uint8_t> exponents_;  // size() x variables(), row-major
};

class PolynomialMap final : public ForecastModel {
 public:
  // kInvalidArgument unless dt > 0 and finite, m, s, S have one value per
  // channel of `features` (s and S > 0, all finite) and W is
  // features.size() x channels with finite values.
  [[nodiscard]] static Result<std::shared_ptr<const PolynomialMap>> Create(PolynomialFeatures features, double dt,
                                                                           Eigen::VectorXd mean,
                                                                           Eigen::VectorXd stddev,
                                                                           Eigen::VectorXd increment_scale,
                                                                           Eigen::MatrixXd readout);

  const ModelShape& shape() const override { return shape_; }
  std::string_view family() const override { return "polynomial_map"; }
  // s, as the neural flow map: normalized errors are comparable across families.
  const Eigen::VectorXd& error_scale() const override { return std_; }
  const Eigen::VectorXd& training_mean() const override { return mean_; }
  std::unique_ptr<ModelScratch> NewScratch() const override;
  void Step(const Eigen::VectorXd& x, Eigen::VectorXd* next, ModelScratch& scratch) const override;
  void StepBatch(const Eigen::MatrixXd& X, Eigen::MatrixXd* Y, ModelScratch& scratch) const override;
  void Jacobian(const Eigen::VectorXd& x, Eigen::MatrixXd* J, ModelScratch& scratch) const override;

  const PolynomialFeatures& features() const { return features_; }
  const Eigen::VectorXd& mean() const { return mean_; }
  const Eigen::VectorXd& stddev() const { return std_; }
  const Eigen::VectorXd& increment_scale() const { return scale_; }
  const Eigen::MatrixXd& readout() const { return W_; }

 private:
  PolynomialMap() = default;

  PolynomialFeatures features_;
  ModelShape shape_;
  Eigen::VectorXd mean_, std_, scale_;
  Eigen::MatrixXd W_;
};

// The ridge problem a PolynomialMap's readout solves, for one-step pairs
// (X.col(i) -> X_next.col(i), one model step apart; both C x N): rows of
// Phi are phi((x_i - m) ⊘ s), rows of Y are ((x_next_i - x_i) ⊘ S) / dt.
// Requires matching shapes; values are not checked here (RidgeSolve does).
void PolynomialRegressionProblem(const PolynomialFeatures& features, double dt, const Eigen::VectorXd& mean,
                                 const Eigen::VectorXd& stddev, const Eigen::VectorXd& increment_scale,
                                 const Eigen::MatrixXd& X, const Eigen::MatrixXd& X_next, Eigen::MatrixXd* Phi,
                                 Eigen::MatrixXd* Y);

struct PolynomialFitOptions {
  // Degrees tried; the one with the lowest validation error wins (ties: the
  // lower degree). Default 2 to 6: the one-step map of a flow with a
  // quadratic right-hand side is a power series in dt whose terms rise in
  // degree, so at coarse steps degrees above the field's own pay (Lorenz-63
  // at 25 ms: one-step error 8.5e-7 of the std at degree 4, 4.9e-10 at 6).
  // A degree with more monomials than a fifth of the training pairs, or
  // more than PolynomialFeatures::kMaxFeatures, is skipped.
  std::vector<int> degrees = {2, 3, 4, 5, 6};
  // Ridge penalties tried, per sample: lambda = ridge * N (N training pairs),
  // so the choice does not depend on the window's length.
  std::vector<double> ridges = {1e-14, 1e-12, 1e-10, 1e-8, 1e-6, 1e-4};
};

struct PolynomialFit {
  std::shared_ptr<const PolynomialMap> model;
  int degree = 0;
  double ridge = 0;
  double validation_error = 0;  // RMS over channels of the normalized one-step error on the validation pairs
  int candidates = 0;           // (degree, ridge) pairs tried
  std::vector<int> skipped;     // degrees not tried: too many monomials for the pairs
};

// Fits on the training pairs, chooses degree and ridge on the validation
// pairs (one-step error normalized by s, RMS over channels), and returns the
// chosen model, fitted on the training pairs only (the validation pairs stay
// held out: the caller judges the result on them). kInvalidArgument when there
// are no pairs, the shapes disagree, or no candidate gives a finite fit.
[[nodiscard]] Result<PolynomialFit> FitPolynomialMap(double dt, const Eigen::VectorXd& mean,
                                                     const Eigen::VectorXd& stddev,
                                                     const Eigen::VectorXd& increment_scale,
                                                     const Eigen::MatrixXd& X, const Eigen::MatrixXd& X_next,
                                                     const Eigen::MatrixXd& X_val, const Eigen::MatrixXd& X_val_next,
                                                     const PolynomialFitOptions& options = {});

}  // namespace lyapcast
