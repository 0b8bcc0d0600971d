#include "learn/trajectory_loss.h"

#include <algorithm>
#include <bit>
#include <cmath>
#include <limits>

namespace lyapcast {

DynamicsTable DynamicsTable::Build(const Dynamics& d, const GridSeries& grid, std::size_t train_end) {
  const int c = grid.channels;
  DynamicsTable out;
  out.f.setConstant(c, static_cast<Eigen::Index>(grid.size()), std::numeric_limits<double>::quiet_NaN());
  Eigen::VectorXd sum = Eigen::VectorXd::Zero(c), sum2 = Eigen::VectorXd::Zero(c);
  double n = 0;
  for (std::size_t i = 0; i < grid.size(); ++i) {
    if (!grid.complete(i)) continue;
    auto col = out.f.col(static_cast<Eigen::Index>(i));
    d.Eval(grid.row(i), col.data());
    if (i < train_end && col.allFinite()) {
      sum += col;
      sum2 += col.cwiseAbs2();
      n += 1;
    }
  }
  out.fscale = Eigen::VectorXd::Ones(c);
  if (n >= 2) {
    for (int k = 0; k < c; ++k) {
      const double var = (sum2[k] - sum[k] * sum[k] / n) / (n - 1);
      if (var > 0 && std::isfinite(var)) out.fscale[k] = std::sqrt(var);
    }
  }
  return out;
}

template <typename T>
LossTerms TrajectoryLoss<T>::Evaluate(const FlowMap<T>& model, const GridSeries& grid,
                                      const std::vector<Trajectory>& batch, const LossWeights& weights,
                                      const Dynamics* dynamics, const DynamicsTable* table, FlowMapGrads<T>* grads) {
  const int c = grid.channels;
  const auto B = static_cast<Eigen::Index>(batch.size());
  int h = 0;
  for (const Trajectory& t : batch) h = std::max(h, static_cast<int>(t.horizon));
  if (static_cast<int>(x_.size()) < h + 1) {
    x_.resize(static_cast<std::size_t>(h) + 1);
    caches_.resize(static_cast<std::size_t>(h));
  }
  x_[0].resize(c, B);
  for (Eigen::Index b = 0; b < B; ++b) {
    const auto start = static_cast<std::size_t>(batch[static_cast<std::size_t>(b)].start);
    x_[0].col(b) = Eigen::Map<const Eigen::VectorXd>(grid.row(start), c).template cast<T>();
  }
  for (int k = 1; k <= h; ++k) {
    model.Forward(x_[static_cast<std::size_t>(k) - 1], &x_[static_cast<std::size_t>(k)],
                  &caches_[static_cast<std::size_t>(k) - 1]);
  }
  // Present target entries, so the data loss is a mean over them.
  double count = 0;
  for (const Trajectory& t : batch) {
    for (int k = 1; k <= t.horizon; ++k) {
      const auto i = static_cast<std::size_t>(t.start + k);
      if (grid.present[i]) count += c - std::popcount(grid.target_missing(i));
    }
  }
  count = std::max(count, 1.0);
  const Eigen::VectorXd inv_s = model.stddev().template cast<double>().cwiseInverse();
  const bool constrained = (weights.velocity > 0 || weights.residual > 0) && dynamics != nullptr && table != nullptr;
  // The step of each trajectory's first present target (0: none within its
  // horizon), where the velocity term applies when that target is complete.
  first_target_.assign(batch.size(), 0);
  velocity_at_.assign(static_cast<std::size_t>(h) + 1, 0);
  for (std::size_t b = 0; b < batch.size(); ++b) {
    const Trajectory& t = batch[b];
    for (int k = 1; k <= t.horizon; ++k) {
      if (grid.present[static_cast<std::size_t>(t.start + k)]) {
        first_target_[b] = k;
        const auto i = static_cast<std::size_t>(t.start + k);
        if (grid.complete(i) && grid.carried[i] == 0) velocity_at_[static_cast<std::size_t>(k)] = 1;
        break;
      }
    }
  }

  // Backward through the unrolled steps: the gradient reaching x_[k] is its
  // own loss gradient plus what flows back from x_[k+1].
  LossTerms terms;
  dy_.setZero(c, B);
  for (int k = h; k >= 1; --k) {
    const Mat& P = x_[static_cast<std::size_t>(k)];
    for (Eigen::Index b = 0; b < B; ++b) {
      const Trajectory& t = batch[static_cast<std::size_t>(b)];
      if (k > t.horizon) continue;
      const auto i = static_cast<std::size_t>(t.start + k);
      if (!grid.present[i]) continue;
      const double* y = grid.row(i);
      for (int ch = 0; ch < c; ++ch) {
        if ((grid.target_missing(i) >> ch) & 1U) continue;
        const double e = (static_cast<double>(P(ch, b)) - y[ch]) * inv_s[ch];
        terms.data += e * e / count;
        dy_(ch, b) += static_cast<T>(2.0 * e * inv_s[ch] / count);
      }
    }
    if (constrained && (k == 1 || (weights.velocity > 0 && velocity_at_[static_cast<std::size_t>(k)]))) {
      AddConstraints(model, grid, batch, weights, *dynamics, *table, k, P, &dy_, grads->mu(), &terms);
    }
    model.Backward(caches_[static_cast<std::size_t>(k) - 1], dy_, grads, k > 1 ? &dx_ : nullptr);
    if (k > 1) dy_.swap(dx_);
  }
  return terms;
}

// At unrolled step k (G = G^k(z) of every trajectory):
// Velocity, for the trajectories whose first present target y is k steps on
// and complete: mean_c ((f(G) - f(y)) / fs)^2, averaged over all trajectories
// of the batch with a complete first target. Residual, at k = 1 only:
// r = G - z - dt f(z) - mu dt (f(G) - f(z)), mean_c (r / (dt fs))^2.
// Gradients w.r.t. G go through J = df/dx at G, into *dG (the gradient
// reaching G^k, which Evaluate then backpropagates through the composition).
// At k = 1 every column is visited, as when both terms lived on the first
// step only, so gap-free batches give the same values and gradients bit for
// bit. Adds the unweighted term values into *terms.
template <typename T>
void TrajectoryLoss<T>::AddConstraints(const FlowMap<T>& model, const GridSeries& grid,
                                       const std::vector<Trajectory>& batch, const LossWeights& w, const Dynamics& d,
                                       const DynamicsTable& table, int k, const Mat& G, Mat* dG,
                                       typename MlpTypes<T>::VecMap dmu, LossTerms* terms) {
  const int c = grid.channels;
  const double dt = model.dt();
  const Eigen::VectorXd mu = model.mu().template cast<double>();
  Eigen::VectorXd g(c), fg(c), grad(c);
  Eigen::MatrixXd J;
  double n_velocity = 0;
  for (std::size_t b = 0; b < batch.size(); ++b) {
    const int first = first_target_[b];
    n_velocity += first > 0 && grid.complete(static_cast<std::size_t>(batch[b].start + first));
  }
  const double n_residual = static_cast<double>(batch.size());
  for (std::size_t b = 0; b < batch.size(); ++b) {
    const auto col = static_cast<Eigen::Index>(b);
    const auto start = static_cast<Eigen::Index>(batch[b].start);
    const bool velocity = w.velocity > 0 && first_target_[b] == k && grid.complete(static_cast<std::size_t>(start + k));
    if (k > 1 && !velocity) continue;
    g = G.col(col).template cast<double>();
    d.Eval(g.data(), fg.data());
    d.Jacobian(g.data(), table.fscale.data(), &J);
    grad.setZero();
    if (velocity) {
      const Eigen::VectorXd dv = (fg - table.f.col(start + k)).cwiseQuotient(table.fscale);
      terms->velocity += dv.squaredNorm() / (n_velocity * c);
      grad += w.velocity * J.transpose() * (2.0 * dv.cwiseQuotient(table.fscale)) / (n_velocity * c);
    }
    if (k == 1 && w.residual > 0) {
      const auto z = Eigen::Map<const Eigen::VectorXd>(grid.row(static_cast<std::size_t>(start)), c);
      const auto fz = table.f.col(start);
      const Eigen::VectorXd r = g - z - dt * fz - dt * mu.cwiseProduct(fg - fz);
      const Eigen::VectorXd denom = dt * table.fscale;
      terms->residual += r.cwiseQuotient(denom).squaredNorm() / (n_residual * c);
      const Eigen::VectorXd dr = w.residual * 2.0 * r.cwiseQuotient(denom.cwiseAbs2()) / (n_residual * c);
      grad += dr - J.transpose() * (dt * mu.cwiseProduct(dr));
      dmu += (-dt * dr.cwiseProduct(fg - fz)).template cast<T>();
    }
    dG->col(col) += grad.template cast<T>();
  }
}

template class TrajectoryLoss<float>;
template class TrajectoryLoss<double>;

}  // namespace lyapcast
