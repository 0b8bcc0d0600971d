// QR (Benettin / Shimada-Nagashima) Lyapunov spectrum; see lyapunov.h.
#include "chaos/lyapunov.h"

#include <Eigen/QR>

#include <algorithm>
#include <cmath>
#include <functional>
#include <memory>
#include <utility>

#include <fmt/format.h>

#include "physics/integrators.h"
#include "physics/tangent.h"

namespace lyapcast {
namespace {

Status CheckOptions(const MapStep& map, const Eigen::VectorXd& x0, const SpectrumOptions& o) {
  if (map.dim < 1) return Status::Invalid(fmt::format("lyapunov: map dimension {} (need >= 1)", map.dim));
  if (!map.step) return Status::Invalid("lyapunov: the map has no step function");
  if (!std::isfinite(map.time_per_step) || map.time_per_step <= 0) {
    return Status::Invalid(fmt::format("lyapunov: time_per_step {} (need finite and > 0)", map.time_per_step));
  }
  if (x0.size() != map.dim) {
    return Status::Invalid(fmt::format("lyapunov: initial state has {} values, the map has dimension {}",
                                       x0.size(), map.dim));
  }
  if (!x0.allFinite()) return Status::Invalid("lyapunov: initial state is not finite");
  if (o.exponents < 0 || o.exponents > map.dim) {
    return Status::Invalid(fmt::format("lyapunov: exponents {} (allowed 0..{}; 0 = all)", o.exponents, map.dim));
  }
  if (o.transient_steps < 0) return Status::Invalid(fmt::format("lyapunov: transient_steps {} < 0", o.transient_steps));
  if (o.steps < 1) return Status::Invalid(fmt::format("lyapunov: steps {} (need >= 1)", o.steps));
  if (o.reorthonormalize_every < 1) {
    return Status::Invalid(fmt::format("lyapunov: reorthonormalize_every {} (need >= 1)", o.reorthonormalize_every));
  }
  if (o.convergence_checks < 1) {
    return Status::Invalid(fmt::format("lyapunov: convergence_checks {} (need >= 1)", o.convergence_checks));
  }
  return Status::Ok();
}

}  // namespace

Result<SpectrumEstimate> LyapunovSpectrum(const MapStep& map, Eigen::VectorXd x0, const SpectrumOptions& options) {
  if (Status s = CheckOptions(map, x0, options); !s.ok()) return s;
  const int n = map.dim;
  const int k = options.exponents == 0 ? n : options.exponents;

  Eigen::VectorXd x = std::move(x0), next;
  for (long i = 0; i < options.transient_steps; ++i) {
    map.step(x, &next, nullptr);
    if (next.size() != n || !next.allFinite()) {
      return Status::Internal(fmt::format("lyapunov: state not finite (or of the wrong size) after transient "
                                          "iteration {}",
                                          i + 1));
    }
    std::swap(x, next);
  }

  Eigen::MatrixXd Q = Eigen::MatrixXd::Identity(n, k), J;
  Eigen::VectorXd sum_log = Eigen::VectorXd::Zero(k);
  Eigen::HouseholderQR<Eigen::MatrixXd> qr(n, k);
  SpectrumEstimate est;
  est.history.reserve(static_cast<size_t>(options.convergence_checks));
  int next_check = 0;
  // Check point c (0-based) after steps * (c + 1) / checks iterations, at
  // least 1 (with fewer steps than checks, several land on one iteration).
  auto check_at = [&](int c) { return std::max(1L, options.steps * (c + 1) / options.convergence_checks); };
  long since_qr = 0;

  for (long i = 1; i <= options.steps; ++i) {
    map.step(x, &next, &J);
    if (next.size() != n || J.rows() != n || J.cols() != n) {
      return Status::Internal(fmt::format("lyapunov: step {} returned a state of size {} and a {}x{} Jacobian "
                                          "(dimension {})",
                                          i, next.size(), J.rows(), J.cols(), n));
    }
    if (!next.allFinite() || !J.allFinite()) {
      return Status::Internal(fmt::format("lyapunov: state or Jacobian not finite at measured iteration {}", i));
    }
    std::swap(x, next);
    Q = J * Q;  // Eigen evaluates the product into a temporary: no aliasing
    ++since_qr;
    // Also orthonormalize at every check point so the running estimate is exact there.
    const bool at_check = next_check < options.convergence_checks && i == check_at(next_check);
    if (since_qr >= options.reorthonormalize_every || at_check || i == options.steps) {
      qr.compute(Q);
      const auto& R = qr.matrixQR();
      Eigen::MatrixXd thin = qr.householderQ() * Eigen::MatrixXd::Identity(n, k);
      for (int j = 0; j < k; ++j) {
        const double r = R(j, j);
        if (r == 0.0 || !std::isfinite(r)) {
          return Status::Internal(fmt::format("lyapunov: zero diagonal R({0},{0}) at measured iteration {1}: the "
                                              "tangent basis collapsed (singular Jacobian)",
                                              j, i));
        }
        sum_log[j] += std::log(std::abs(r));
        if (r < 0) thin.col(j) *= -1.0;  // Q R with diag(R) > 0: keeps directions continuous
      }
      Q = std::move(thin);
      since_qr = 0;
    }
    while (next_check < options.convergence_checks && i == check_at(next_check)) {
      est.history.push_back(sum_log / (static_cast<double>(i) * map.time_per_step));
      ++next_check;
    }
  }

  if (est.history.empty()) return Status::Internal("lyapunov: no running estimate recorded");  // unreachable
  est.exponents = est.history.back();
  std::sort(est.exponents.data(), est.exponents.data() + est.exponents.size(), std::greater<double>());
  est.steps = options.steps;
  est.time = static_cast<double>(options.steps) * map.time_per_step;
  const size_t h = est.history.size();
  for (size_t i = h / 2; i < h; ++i) {
    est.convergence = std::max(est.convergence, std::abs(est.history[i][0] - est.history.back()[0]));
  }
  est.method = fmt::format("qr (benettin), {} of {} exponents, reorthonormalize every {}", k, n,
                           options.reorthonormalize_every);
  return est;
}

MapStep FlowMapStep(const Dynamics& d, double dt_model, int rk4_substeps) {
  MapStep m;
  if (!std::isfinite(dt_model) || dt_model <= 0 || rk4_substeps < 1) return m;  // dim 0: rejected later
  const int n = d.dim();
  m.dim = n;
  m.time_per_step = dt_model;
  const double h = dt_model / rk4_substeps;
  // The Rhs objects hold a reference to d; shared scratch keeps copies cheap.
  struct Scratch {
    Rhs state_rhs, tangent_rhs;
    Rk4Workspace ws;
    Eigen::VectorXd z;
  };
  auto s = std::make_shared<Scratch>();
  s->state_rhs = [&d](const double* x, double* dxdt) { d.Eval(x, dxdt); };
  s->tangent_rhs = VariationalRhs(d, n);
  m.step = [s, n, h, rk4_substeps](const Eigen::VectorXd& x, Eigen::VectorXd* next, Eigen::MatrixXd* jacobian) {
    if (jacobian == nullptr) {
      *next = x;
      for (int i = 0; i < rk4_substeps; ++i) Rk4Step(s->state_rhs, *next, h, &s->ws);
      return;
    }
    s->z = PackTangent(x, Eigen::MatrixXd::Identity(n, n));
    for (int i = 0; i < rk4_substeps; ++i) Rk4Step(s->tangent_rhs, s->z, h, &s->ws);
    UnpackTangent(s->z, n, n, next, jacobian);
  };
  return m;
}

MapStep ModelMapStep(const ForecastModel& model) {
  std::shared_ptr<ModelScratch> scratch = model.NewScratch();
  MapStep m;
  m.dim = model.shape().channels;
  m.time_per_step = model.shape().dt;
  m.step = [&model, scratch](const Eigen::VectorXd& x, Eigen::VectorXd* next, Eigen::MatrixXd* jacobian) {
    model.Step(x, next, *scratch);
    if (jacobian != nullptr) model.Jacobian(x, jacobian, *scratch);
  };
  return m;
}

}  // namespace lyapcast
