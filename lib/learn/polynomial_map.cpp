#include "learn/polynomial_map.h"

#include <algorithm>
#include <cmath>
#include <limits>

#include <fmt/format.h>

#include "learn/least_squares.h"

namespace lyapcast {
namespace {

// Every exponent vector of `variables` entries summing to `total`, first
// variable's exponent descending (x^2, x y, x z, y^2, ...).
void AppendDegree(int variables, int total, std::vector<std::uint8_t>* out) {
  std::vector<std::uint8_t> e(static_cast<std::size_t>(variables), 0);
  // Recursive over the variable index; depth <= 64.
  auto rec = [&](auto&& self, int v, int left) -> void {
    if (v == variables - 1) {
      e[static_cast<std::size_t>(v)] = static_cast<std::uint8_t>(left);
      out->insert(out->end(), e.begin(), e.end());
      return;
    }
    for (int k = left; k >= 0; --k) {
      e[static_cast<std::size_t>(v)] = static_cast<std::uint8_t>(k);
      self(self, v + 1, left - k);
    }
  };
  rec(rec, 0, total);
}

double Binomial(int n, int k) {
  double r = 1;
  for (int i = 1; i <= k; ++i) r = r * (n - k + i) / i;
  return r;
}

struct PolynomialScratch final : ModelScratch {
  Eigen::VectorXd z, phi, inc;
  Eigen::MatrixXd dphi, Phi;  // Phi: F x B (columns are samples)
  Eigen::MatrixXd Z;
};

}  // namespace

Result<PolynomialFeatures> PolynomialFeatures::Create(int variables, int degree) {
  if (variables < 1 || variables > 64) {
    return Status::Invalid("polynomial features: " + std::to_string(variables) + " variables (1 to 64 allowed)");
  }
  if (degree < 1 || degree > 8) {
    return Status::Invalid("polynomial features: degree " + std::to_string(degree) + " (1 to 8 allowed)");
  }
  const double count = Binomial(variables + degree, degree);
  if (count > kMaxFeatures) {
    return Status::Invalid("polynomial features: degree " + std::to_string(degree) + " in " +
                           std::to_string(variables) + " channels gives " + std::to_string(static_cast<long>(count)) +
                           " monomials, more than " + std::to_string(kMaxFeatures) + "; use a lower degree");
  }
  PolynomialFeatures f;
  f.variables_ = variables;
  f.degree_ = degree;
  for (int d = 0; d <= degree; ++d) AppendDegree(variables, d, &f.exponents_);
  return f;
}

void PolynomialFeatures::Evaluate(const double* z, double* phi) const {
  const int n = size();
  for (int k = 0; k < n; ++k) {
    double p = 1;
    const std::uint8_t* e = exponents_.data() + static_cast<std::size_t>(k) * variables_;
    for (int v = 0; v < variables_; ++v) {
      for (int j = 0; j < e[v]; ++j) p *= z[v];
    }
    phi[k] = p;
  }
}

void PolynomialFeatures::Gradient(const double* z, Eigen::MatrixXd* dphi) const {
  const int n = size();
  dphi->setZero(n, variables_);
  for (int k = 0; k < n; ++k) {
    const std::uint8_t* e = exponents_.data() + static_cast<std::size_t>(k) * variables_;
    for (int v = 0; v < variables_; ++v) {
      if (e[v] == 0) continue;
      double p = e[v];
      for (int u = 0; u < variables_; ++u) {
        const int power = u == v ? e[u] - 1 : e[u];
        for (int j = 0; j < power; ++j) p *= z[u];
      }
      (*dphi)(k, v) = p;
    }
  }
}

std::string PolynomialFeatures::Name(int k, const std::vector<std::string>& names) const {
  std::string out;
  for (int v = 0; v < variables_; ++v) {
    const int e = exponent(k, v);
    if (e == 0) continue;
    if (!out.empty()) out += ' ';
    out += v < static_cast<int>(names.size()) ? names[static_cast<std::size_t>(v)] : "c" + std::to_string(v);
    if (e > 1) out += "^" + std::to_string(e);
  }
  return out.empty() ? "1" : out;
}

Result<std::shared_ptr<const PolynomialMap>> PolynomialMap::Create(PolynomialFeatures features, double dt,
                                                                   Eigen::VectorXd mean, Eigen::VectorXd stddev,
                                                                   Eigen::VectorXd increment_scale,
                                                                   Eigen::MatrixXd readout) {
  const int c = features.variables();
  if (c < 1) return Status::Invalid("polynomial map: no features");
  if (!std::isfinite(dt) || dt <= 0) return Status::Invalid("polynomial map: model step must be > 0");
  if (mean.size() != c || stddev.size() != c || increment_scale.size() != c) {
    return Status::Invalid("polynomial map: mean, std and increment scale need " + std::to_string(c) + " values each");
  }
  if (!mean.allFinite() || !stddev.allFinite() || !increment_scale.allFinite() || (stddev.array() <= 0).any() ||
      (increment_scale.array() <= 0).any()) {
    return Status::Invalid("polynomial map: mean must be finite, std and increment scale finite and > 0");
  }
  if (readout.rows() != features.size() || readout.cols() != c || !readout.allFinite()) {
    return Status::Invalid("polynomial map: readout must be " + std::to_string(features.size()) + " x " +
                           std::to_string(c) + " finite values");
  }
  std::shared_ptr<PolynomialMap> m(new PolynomialMap());
  m->features_ = std::move(features);
  m->shape_ = ModelShape{c, AllStateRoles(c), dt};
  m->mean_ = std::move(mean);
  m->std_ = std::move(stddev);
  m->scale_ = std::move(increment_scale);
  m->W_ = std::move(readout);
  return std::shared_ptr<const PolynomialMap>(std::move(m));
}

std::unique_ptr<ModelScratch> PolynomialMap::NewScratch() const {
  auto s = std::make_unique<PolynomialScratch>();
  s->z.resize(shape_.channels);
  s->phi.resize(features_.size());
  return s;
}

void PolynomialMap::Step(const Eigen::VectorXd& x, Eigen::VectorXd* next, ModelScratch& scratch) const {
  auto& s = static_cast<PolynomialScratch&>(scratch);
  s.z = (x - mean_).cwiseQuotient(std_);
  features_.Evaluate(s.z.data(), s.phi.data());
  s.inc.noalias() = W_.transpose() * s.phi;
  if (next != &x) *next = x;
  next->noalias() += shape_.dt * scale_.cwiseProduct(s.inc);
}

void PolynomialMap::StepBatch(const Eigen::MatrixXd& X, Eigen::MatrixXd* Y, ModelScratch& scratch) const {
  auto& s = static_cast<PolynomialScratch&>(scratch);
  const Eigen::Index b = X.cols();
  s.Z = (X.colwise() - mean_).array().colwise() / std_.array();
  s.Phi.resize(features_.size(), b);
  for (Eigen::Index j = 0; j < b; ++j) features_.Evaluate(s.Z.col(j).data(), s.Phi.col(j).data());
  if (Y != &X) *Y = X;
  Y->noalias() += ((shape_.dt * scale_).asDiagonal() * W_.transpose()) * s.Phi;
}

void PolynomialMap::Jacobian(const Eigen::VectorXd& x, Eigen::MatrixXd* J, ModelScratch& scratch) const {
  auto& s = static_cast<PolynomialScratch&>(scratch);
  s.z = (x - mean_).cwiseQuotient(std_);
  features_.Gradient(s.z.data(), &s.dphi);
  // dG/dx = I + dt diag(S) W^T (dphi/dz) diag(1/s)
  *J = (shape_.dt * scale_).asDiagonal() * (W_.transpose() * s.dphi) * std_.cwiseInverse().asDiagonal();
  J->diagonal().array() += 1.0;
}

void PolynomialRegressionProblem(const PolynomialFeatures& features, double dt, const Eigen::VectorXd& mean,
                                 const Eigen::VectorXd& stddev, const Eigen::VectorXd& increment_scale,
                                 const Eigen::MatrixXd& X, const Eigen::MatrixXd& X_next, Eigen::MatrixXd* Phi,
                                 Eigen::MatrixXd* Y) {
  const Eigen::Index n = X.cols();
  Phi->resize(n, features.size());
  Eigen::VectorXd z(X.rows()), phi(features.size());
  for (Eigen::Index i = 0; i < n; ++i) {
    z = (X.col(i) - mean).cwiseQuotient(stddev);
    features.Evaluate(z.data(), phi.data());
    Phi->row(i) = phi.transpose();
  }
  *Y = ((X_next - X).array().colwise() / (dt * increment_scale.array())).transpose();
}

Result<PolynomialFit> FitPolynomialMap(double dt, const Eigen::VectorXd& mean, const Eigen::VectorXd& stddev,
                                       const Eigen::VectorXd& increment_scale, const Eigen::MatrixXd& X,
                                       const Eigen::MatrixXd& X_next, const Eigen::MatrixXd& X_val,
                                       const Eigen::MatrixXd& X_val_next, const PolynomialFitOptions& options) {
  const Eigen::Index c = mean.size();
  if (X.cols() < 1 || X_val.cols() < 1) return Status::Invalid("polynomial fit: no training or no validation pairs");
  if (X.rows() != c || X_next.rows() != c || X_val.rows() != c || X_val_next.rows() != c ||
      X.cols() != X_next.cols() || X_val.cols() != X_val_next.cols()) {
    return Status::Invalid("polynomial fit: pair matrices do not match the channels");
  }
  PolynomialFit best;
  best.validation_error = std::numeric_limits<double>::infinity();
  std::string last_error = "no degree or ridge to try";
  Eigen::MatrixXd Phi, Y, pred;
  for (int degree : options.degrees) {
    Result<PolynomialFeatures> features = PolynomialFeatures::Create(static_cast<int>(c), degree);
    if (!features.ok() || 5 * static_cast<Eigen::Index>(features.value().size()) > X.cols()) {
      last_error = features.ok() ? fmt::format("degree {} has {} monomials for {} pairs (at most a fifth of the pairs)",
                                               degree, features.value().size(), X.cols())
                                 : features.status().message();
      best.skipped.push_back(degree);
      continue;
    }
    PolynomialRegressionProblem(features.value(), dt, mean, stddev, increment_scale, X, X_next, &Phi, &Y);
    for (double ridge : options.ridges) {
      ++best.candidates;
      Result<Eigen::MatrixXd> W = RidgeSolve(Phi, Y, ridge * static_cast<double>(X.cols()));
      if (!W.ok()) {
        last_error = W.status().message();
        continue;
      }
      Result<std::shared_ptr<const PolynomialMap>> model =
          PolynomialMap::Create(features.value(), dt, mean, stddev, increment_scale, std::move(W).value());
      if (!model.ok()) {
        last_error = model.status().message();
        continue;
      }
      auto scratch = model.value()->NewScratch();
      model.value()->StepBatch(X_val, &pred, *scratch);
      const Eigen::VectorXd per_channel =
          ((pred - X_val_next).array().colwise() / stddev.array()).square().rowwise().mean().matrix();
      const double error = std::sqrt(per_channel.mean());
      if (std::isfinite(error) && error < best.validation_error) {
        best.model = std::move(model).value();
        best.degree = degree;
        best.ridge = ridge;
        best.validation_error = error;
      }
    }
  }
  if (best.model == nullptr) return Status::Invalid("polynomial fit: no candidate fitted: " + last_error);
  return best;
}

}  // namespace lyapcast
