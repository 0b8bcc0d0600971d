// Shared helpers for tests/chaos: series with known largest exponents.
#pragma once

#include "core/eigen.h"  // first, instead of <Eigen/Core>: see there

#include <cmath>
#include <cstdio>
#include <vector>

#include "chaos/rosenstein.h"
#include "physics/integrators.h"

namespace lyapcast::testing {

// Logistic map r = 4 from x, n values after a 100-step transient.
inline std::vector<double> LogisticSeries(int n, double x = 0.3) {
  std::vector<double> out;
  for (int i = 0; i < 100; ++i) x = 4 * x * (1 - x);  // transient
  for (int i = 0; i < n; ++i) {
    x = 4 * x * (1 - x);
    out.push_back(x);
  }
  return out;
}

// Lorenz-63 (s = 10, r = 28, b = 8/3) channels x, y, z as rows, sampled
// every dt after a 20-unit transient; RK4 with step dt / 2.
inline Eigen::MatrixXd LorenzSamples(double duration, double dt, double z0 = 20.0) {
  const Rhs f = [](const double* p, double* d) {
    d[0] = 10.0 * (p[1] - p[0]);
    d[1] = p[0] * (28.0 - p[2]) - p[1];
    d[2] = p[0] * p[1] - 8.0 / 3.0 * p[2];
  };
  Eigen::VectorXd x(3);
  x << 1.0, 1.0, z0;
  Rk4Workspace ws;
  for (int i = 0; i < 4000; ++i) Rk4Step(f, x, 0.005, &ws);
  const int n = static_cast<int>(std::lround(duration / dt));
  Eigen::MatrixXd out(3, n);
  for (int i = 0; i < n; ++i) {
    Rk4Step(f, x, dt / 2, &ws);
    Rk4Step(f, x, dt / 2, &ws);
    out.col(i) = x;
  }
  return out;
}

// One line per estimate: the value with its lag, window and fit region.
inline void PrintEstimate(const char* what, const RosensteinEstimate& e, double secs) {
  std::printf("%s: lambda %.4f lag %d dim %d theiler %d fit [%d, %d) R^2 %.5f K %zu (%.2f s)\n", what, e.lambda,
              e.lag, e.dimension, e.theiler, e.fit_begin, e.fit_end, e.r_squared, e.divergence.size() - 1, secs);
}

}  // namespace lyapcast::testing
