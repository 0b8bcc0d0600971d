// Shared helpers for lib/learn tests: deterministic random batches, the MSE
// loss used by the gradient checks, and central finite differences.
#pragma once

#include <gtest/gtest.h>

#include "core/eigen.h"
#include <algorithm>
#include <cmath>
#include <cstdint>
#include <functional>
#include <random>
#include <string>

namespace lyapcast::testing {

// Uniform in [lo, hi), from a fixed-seed generator (same mapping as
// Mlp::InitRandom, so values do not depend on the standard library).
inline Eigen::MatrixXd RandomMatrix(Eigen::Index rows, Eigen::Index cols, std::uint64_t seed, double lo = -1.0,
                                    double hi = 1.0) {
  std::mt19937_64 rng(seed);
  Eigen::MatrixXd m(rows, cols);
  for (Eigen::Index i = 0; i < m.size(); ++i) {
    const double u = static_cast<double>(rng() >> 11) * 0x1.0p-53;
    m.data()[i] = lo + (hi - lo) * u;
  }
  return m;
}

inline Eigen::VectorXd RandomVector(Eigen::Index n, std::uint64_t seed, double lo = -1.0, double hi = 1.0) {
  return RandomMatrix(n, 1, seed, lo, hi);
}

// Lorenz-63 with s = 10, r = 28, b = 8/3 (Sprott 2003), as a right-hand
// side for physics/integrators.h.
inline void Lorenz63(const double* x, double* dxdt) {
  dxdt[0] = 10.0 * (x[1] - x[0]);
  dxdt[1] = x[0] * (28.0 - x[2]) - x[1];
  dxdt[2] = x[0] * x[1] - 8.0 / 3.0 * x[2];
}

// MSE = mean((Y - target)^2) over all elements; dY = 2 (Y - target) / n.
inline double MseLoss(const Eigen::MatrixXd& Y, const Eigen::MatrixXd& target, Eigen::MatrixXd* dY = nullptr) {
  const double n = static_cast<double>(Y.size());
  if (dY != nullptr) *dY = 2.0 * (Y - target) / n;
  return (Y - target).squaredNorm() / n;
}

// Central difference of loss() w.r.t. *x: (L(x + h) - L(x - h)) / 2h, x restored.
inline double CentralDifference(const std::function<double()>& loss, double* x, double h = 1e-5) {
  const double saved = *x;
  *x = saved + h;
  const double plus = loss();
  *x = saved - h;
  const double minus = loss();
  *x = saved;
  return (plus - minus) / (2.0 * h);
}

// Relative error with a floor on the denominator: gradients much smaller
// than `floor` are compared absolutely (a relative error is meaningless for
// a value that is zero up to rounding). Central differences with h = 1e-5
// on an O(1) loss carry ~1e-11 truncation and ~1e-11 rounding error, so
// rel < 1e-6 with floor 1e-4 is a strict check.
inline double RelativeError(double analytic, double numeric, double floor = 1e-4) {
  return std::abs(analytic - numeric) / std::max({std::abs(analytic), std::abs(numeric), floor});
}

// Checks every element of `params` (a flat buffer) against central
// differences of `loss`; `analytic` holds the gradient for the same layout.
inline void ExpectGradientMatches(const std::function<double()>& loss, double* params, const double* analytic,
                                  Eigen::Index count, const std::string& what, double tol = 1e-6) {
  double worst = 0.0;
  Eigen::Index worst_at = -1;
  for (Eigen::Index i = 0; i < count; ++i) {
    const double numeric = CentralDifference(loss, params + i);
    const double err = RelativeError(analytic[i], numeric);
    if (err > worst) {
      worst = err;
      worst_at = i;
    }
    EXPECT_LT(err, tol) << what << " element " << i << ": analytic " << analytic[i] << " numeric " << numeric;
  }
  SCOPED_TRACE(what);
  EXPECT_LT(worst, tol) << "worst element " << worst_at;
}

}  // namespace lyapcast::testing
