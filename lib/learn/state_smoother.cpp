#include "learn/state_smoother.h"

#include <Eigen/SparseCholesky>
#include <Eigen/SparseCore>
#include <cmath>
#include <string>
#include <vector>

namespace lyapcast {
namespace {

// The problem in scaled variables u = x / s, where every residual is
// dimensionless: measurement r_t = u_t - y_t / s (present channels), model
// d_t = u_t+1 - G(s u_t) / s.
struct Problem {
  const ForecastModel& model;
  const Eigen::MatrixXd& y;       // observations / s, NaN where missing
  const Eigen::VectorXd& scale;
  double w;
};

struct Linearization {
  double cost = 0;                      // 0.5 (sum r^2 + w sum d^2)
  Eigen::MatrixXd d;                    // channels x (N - 1): model misfits
  std::vector<Eigen::MatrixXd> B;       // d G / d u at each u_t, t < N - 1 (scaled)
};

// Cost at u and the model misfits into *lin; with `jacobians` also the
// scaled Jacobians the next Gauss-Newton step needs.
double Evaluate(const Problem& p, ModelScratch& scratch, const Eigen::MatrixXd& u, Linearization* lin,
                bool jacobians) {
  const Eigen::Index c = u.rows(), n = u.cols();
  Eigen::VectorXd x(c), next(c);
  Eigen::MatrixXd J(c, c);
  double cost = 0;
  for (Eigen::Index t = 0; t < n; ++t) {
    for (Eigen::Index ch = 0; ch < c; ++ch) {
      if (std::isnan(p.y(ch, t))) continue;
      const double r = u(ch, t) - p.y(ch, t);
      cost += 0.5 * r * r;
    }
  }
  lin->d.resize(c, n - 1);
  if (jacobians) lin->B.resize(static_cast<std::size_t>(n - 1));
  for (Eigen::Index t = 0; t + 1 < n; ++t) {
    x = u.col(t).cwiseProduct(p.scale);
    p.model.Step(x, &next, scratch);
    lin->d.col(t) = u.col(t + 1) - next.cwiseQuotient(p.scale);
    cost += 0.5 * p.w * lin->d.col(t).squaredNorm();
    if (jacobians) {
      p.model.Jacobian(x, &J, scratch);
      // d(G(s u)/s)/du = S^-1 J S
      lin->B[static_cast<std::size_t>(t)] = p.scale.cwiseInverse().asDiagonal() * J * p.scale.asDiagonal();
    }
  }
  lin->cost = cost;
  return cost;
}

// The Gauss-Newton step: H delta = -g with H block tridiagonal.
bool SolveStep(const Problem& p, const Eigen::MatrixXd& u, const Linearization& lin, Eigen::MatrixXd* delta) {
  const Eigen::Index c = u.rows(), n = u.cols();
  const Eigen::Index dim = c * n;
  std::vector<Eigen::Triplet<double>> entries;
  entries.reserve(static_cast<std::size_t>(n * c * c * 3));
  Eigen::VectorXd g = Eigen::VectorXd::Zero(dim);
  for (Eigen::Index t = 0; t < n; ++t) {
    for (Eigen::Index ch = 0; ch < c; ++ch) {
      if (std::isnan(p.y(ch, t))) continue;
      entries.emplace_back(t * c + ch, t * c + ch, 1.0);
      g[t * c + ch] += u(ch, t) - p.y(ch, t);
    }
  }
  for (Eigen::Index t = 0; t + 1 < n; ++t) {
    const Eigen::MatrixXd& B = lin.B[static_cast<std::size_t>(t)];
    const Eigen::VectorXd d = lin.d.col(t);
    // d_t = u_t+1 - g(u_t): d d_t / d u_t+1 = I, d d_t / d u_t = -B.
    const Eigen::MatrixXd BtB = p.w * B.transpose() * B;
    for (Eigen::Index i = 0; i < c; ++i) {
      entries.emplace_back((t + 1) * c + i, (t + 1) * c + i, p.w);
      for (Eigen::Index j = 0; j < c; ++j) {
        entries.emplace_back(t * c + i, t * c + j, BtB(i, j));
        // lower triangle: rows of u_t+1 against columns of u_t
        entries.emplace_back((t + 1) * c + i, t * c + j, -p.w * B(i, j));
      }
    }
    g.segment((t + 1) * c, c) += p.w * d;
    g.segment(t * c, c) -= p.w * B.transpose() * d;
  }
  Eigen::SparseMatrix<double> H(dim, dim);
  H.setFromTriplets(entries.begin(), entries.end());  // duplicates are summed
  Eigen::SimplicialLDLT<Eigen::SparseMatrix<double>, Eigen::Lower> solver;
  solver.compute(H);
  if (solver.info() != Eigen::Success) return false;
  const Eigen::VectorXd step = solver.solve(-g);
  if (solver.info() != Eigen::Success || !step.allFinite()) return false;
  *delta = Eigen::Map<const Eigen::MatrixXd>(step.data(), c, n);
  return true;
}

}  // namespace

Result<SmoothedStates> SmoothStates(const ForecastModel& model, const Eigen::MatrixXd& observations,
                                    const Eigen::VectorXd& scale, const StateSmootherOptions& options) {
  const Eigen::Index c = model.shape().channels, n = observations.cols();
  if (observations.rows() != c || scale.size() != c) {
    return Status::Invalid("state smoother: " + std::to_string(observations.rows()) + " channels of observations and " +
                           std::to_string(scale.size()) + " scales for a model of " + std::to_string(c));
  }
  if (n < 2) return Status::Invalid("state smoother: needs at least two columns of observations");
  if (!scale.allFinite() || !(scale.array() > 0).all()) return Status::Invalid("state smoother: scales must be > 0");
  if (!(options.dynamics_weight > 0) || !std::isfinite(options.dynamics_weight)) {
    return Status::Invalid("state smoother: dynamics_weight must be > 0");
  }
  const Eigen::MatrixXd y = scale.cwiseInverse().asDiagonal() * observations;
  // First guess: measurements, gaps interpolated per channel.
  Eigen::MatrixXd u = y;
  SmoothedStates out;
  for (Eigen::Index ch = 0; ch < c; ++ch) {
    Eigen::Index prev = -1;
    for (Eigen::Index t = 0; t < n; ++t) {
      if (std::isnan(y(ch, t))) continue;
      ++out.measurements;
      if (prev < 0) {
        for (Eigen::Index k = 0; k < t; ++k) u(ch, k) = y(ch, t);
      } else {
        for (Eigen::Index k = prev + 1; k < t; ++k) {
          const double a = static_cast<double>(k - prev) / static_cast<double>(t - prev);
          u(ch, k) = (1 - a) * y(ch, prev) + a * y(ch, t);
        }
      }
      prev = t;
    }
    if (prev < 0) {
      return Status::Invalid("state smoother: channel " + std::to_string(ch) + " is missing from every column");
    }
    for (Eigen::Index k = prev + 1; k < n; ++k) u(ch, k) = y(ch, prev);
  }
  const Problem p{model, y, scale, options.dynamics_weight};
  auto scratch = model.NewScratch();
  Linearization lin, trial_lin;
  double cost = Evaluate(p, *scratch, u, &lin, true);
  if (!std::isfinite(cost)) {
    return Status::Internal("state smoother: the model gives a non-finite value at the measured states");
  }
  Eigen::MatrixXd delta;
  bool converged = false;
  for (int it = 0; it < options.max_iterations && !converged; ++it) {
    if (!SolveStep(p, u, lin, &delta)) break;
    ++out.iterations;
    double factor = 1;
    bool accepted = false;
    for (int half = 0; half < 20 && !accepted; ++half, factor /= 2) {
      const Eigen::MatrixXd trial = u + factor * delta;
      const double trial_cost = Evaluate(p, *scratch, trial, &trial_lin, false);
      if (std::isfinite(trial_cost) && trial_cost <= cost) {
        const double decrease = (cost - trial_cost) / std::max(cost, 1e-300);
        u = trial;
        cost = Evaluate(p, *scratch, u, &lin, true);
        accepted = true;
        converged = decrease < options.tolerance;
      }
    }
    if (!accepted) break;
  }
  double correction = 0;
  for (Eigen::Index t = 0; t < n; ++t) {
    for (Eigen::Index ch = 0; ch < c; ++ch) {
      if (std::isnan(y(ch, t))) continue;
      const double r = u(ch, t) - y(ch, t);
      correction += r * r;
    }
  }
  out.rms_correction = std::sqrt(correction / std::max(out.measurements, 1));
  out.rms_model_misfit = std::sqrt(lin.d.squaredNorm() / static_cast<double>(lin.d.size()));
  out.states = scale.asDiagonal() * u;
  return out;
}

}  // namespace lyapcast
