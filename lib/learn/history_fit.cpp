#include "learn/history_fit.h"

#include <Eigen/Cholesky>
#include <cmath>
#include <string>

namespace lyapcast {
namespace {

// Cost 0.5 * sum of squared normalized misfits along the trajectory from
// x0; when J != null also the Gauss-Newton system (H = J^T J, g = J^T r).
double Misfit(const ForecastModel& model, ModelScratch& scratch, const Eigen::MatrixXd& obs,
              const Eigen::VectorXd& inv_scale, const Eigen::VectorXd& x0, Eigen::MatrixXd* H, Eigen::VectorXd* g,
              Eigen::VectorXd* last) {
  const Eigen::Index c = obs.rows();
  Eigen::VectorXd x = x0, next(c);
  Eigen::MatrixXd D = Eigen::MatrixXd::Identity(c, c), J(c, c);  // D = d x_k / d x0
  if (H != nullptr) {
    H->setZero(c, c);
    g->setZero(c);
  }
  double cost = 0;
  for (Eigen::Index k = 0; k < obs.cols(); ++k) {
    if (k > 0) {
      if (H != nullptr) {
        model.Jacobian(x, &J, scratch);
        D = (J * D).eval();
      }
      model.Step(x, &next, scratch);
      x = next;
    }
    for (Eigen::Index ch = 0; ch < c; ++ch) {
      const double y = obs(ch, k);
      if (std::isnan(y)) continue;
      const double r = (x[ch] - y) * inv_scale[ch];
      cost += 0.5 * r * r;
      if (H != nullptr) {
        const Eigen::RowVectorXd row = inv_scale[ch] * D.row(ch);
        H->noalias() += row.transpose() * row;
        g->noalias() += r * row.transpose();
      }
    }
  }
  if (last != nullptr) *last = x;
  return cost;
}

}  // namespace

Result<HistoryFit> FitStateToHistory(const ForecastModel& model, const Eigen::MatrixXd& observations,
                                     const Eigen::VectorXd& scale, const HistoryFitOptions& options) {
  const Eigen::Index c = model.shape().channels;
  if (observations.rows() != c || scale.size() != c) {
    return Status::Invalid("history fit: " + std::to_string(observations.rows()) + " channels of history and " +
                           std::to_string(scale.size()) + " scales for a model of " + std::to_string(c));
  }
  if (observations.cols() < 2) return Status::Invalid("history fit: needs at least two observations");
  if (!(scale.array() > 0).all() || !scale.allFinite()) return Status::Invalid("history fit: scales must be > 0");
  // The first guess: the oldest observation, a missing channel taken from
  // the oldest observation that has it.
  Eigen::VectorXd x0(c);
  int present = 0;
  for (Eigen::Index ch = 0; ch < c; ++ch) {
    x0[ch] = std::nan("");
    for (Eigen::Index k = 0; k < observations.cols(); ++k) {
      if (std::isnan(observations(ch, k))) continue;
      if (std::isnan(x0[ch])) x0[ch] = observations(ch, k);
      ++present;
    }
    if (std::isnan(x0[ch])) {
      return Status::Invalid("history fit: channel " + std::to_string(ch) + " is missing from every observation");
    }
  }
  const Eigen::VectorXd inv_scale = scale.cwiseInverse();
  auto scratch = model.NewScratch();
  HistoryFit out;
  out.observations = present;
  Eigen::MatrixXd H;
  Eigen::VectorXd g, last;
  double cost = Misfit(model, *scratch, observations, inv_scale, x0, &H, &g, &last);
  out.rms_before = std::sqrt(2 * cost / present);
  if (!std::isfinite(cost)) return Status::Invalid("history fit: the model's run from the oldest observation is not finite");
  double damping = 1e-6 * std::max(H.diagonal().maxCoeff(), 1e-300);
  for (int it = 0; it < options.max_iterations; ++it) {
    Eigen::MatrixXd A = H;
    A.diagonal().array() += damping;
    const Eigen::VectorXd step = A.ldlt().solve(-g);
    const Eigen::VectorXd trial = x0 + step;
    Eigen::MatrixXd H2;
    Eigen::VectorXd g2, last2;
    const double trial_cost = Misfit(model, *scratch, observations, inv_scale, trial, &H2, &g2, &last2);
    ++out.iterations;
    if (std::isfinite(trial_cost) && trial_cost < cost) {
      const double decrease = (cost - trial_cost) / std::max(cost, 1e-300);
      x0 = trial;
      cost = trial_cost;
      H = std::move(H2);
      g = std::move(g2);
      last = std::move(last2);
      damping = std::max(damping / 3, 1e-12 * std::max(H.diagonal().maxCoeff(), 1e-300));
      if (decrease < options.tolerance) break;
    } else {
      damping *= 10;
      if (!std::isfinite(damping) || damping > 1e12 * std::max(H.diagonal().maxCoeff(), 1.0)) break;
    }
  }
  out.first = x0;
  out.start = last;
  out.rms_after = std::sqrt(2 * cost / present);
  return out;
}

}  // namespace lyapcast
