// SmoothStates: the states of a whole stretch of noisy measurements,
// estimated jointly with a model of their dynamics (docs/design.md
// "Fitting through sensor noise").
//
// A model fitted by least squares on noisy one-step pairs (x_t, x_t+1) is
// biased: the noise in its inputs flattens what it learns (errors in
// variables), and forecasts from it fall short even from an exact start.
// Given a first model G, the states x_0..x_N-1 that stay close to the
// measurements y_t while following G closely,
//
//     min_x  sum_t sum_c ((x_t,c - y_t,c) / s_c)^2
//          + w sum_t sum_c ((x_t+1,c - G(x_t)_c) / s_c)^2,
//
// carry much less noise than y (the dynamics tie every state to its
// neighbours on both sides), and a model refitted on them is less biased;
// alternating the two converges in a few rounds (a weak-constraint
// smoother: Kalnay, Atmospheric Modeling, Data Assimilation and
// Predictability, 2003, ch. 5; used to learn dynamics through noise by
// S.H. Rudy, J.N. Kutz, S.L. Brunton, J. Comput. Phys. 396 (2019) 483).
// A missing value has no measurement term: the dynamics alone place it, so
// the smoothed series has no gaps. w weighs a model step's misfit against a
// measurement's: the ratio of the measurement noise variance to the
// model's one-step error variance.
//
// Solved by Gauss-Newton: the normal matrix is block tridiagonal (state t
// couples only with t - 1 and t + 1), factored by a sparse Cholesky (Eigen
// SimplicialLDLT), so one iteration costs O(N c^3) for c channels. Each
// iteration needs G and its Jacobian at every state; a step that raises
// the cost is halved (at most 20 times).
//
// Pure function; thread-safe (its own scratch).
#pragma once

#include "core/eigen.h"  // first, instead of <Eigen/Core>: see there

#include "core/status.h"
#include "learn/forecast_model.h"

namespace lyapcast {

struct StateSmootherOptions {
  // w: a model step's squared misfit counts w times a measurement's. 100
  // (the model's one-step error a tenth of the noise) was best on the
  // skill benchmark's noisy series (1 % noise; docs/performance.md).
  double dynamics_weight = 100;
  int max_iterations = 10;   // Gauss-Newton steps at most
  double tolerance = 1e-10;  // stop when the relative cost decrease is below this
};

struct SmoothedStates {
  Eigen::MatrixXd states;          // channels x N: the estimate at every column, none missing
  double rms_correction = 0;       // RMS of (x - y) / s over the present measurements
  double rms_model_misfit = 0;     // RMS of (x_t+1 - G(x_t)) / s over the steps
  int iterations = 0;              // Gauss-Newton steps taken
  int measurements = 0;            // present (column, channel) values
};

// observations: channels x N, column t + 1 one model step after column t, NaN
// where missing; scale: per channel, > 0. The first guess takes each
// missing value from the channel's linear interpolation between its nearest
// present values (the nearest one at the ends). kInvalidArgument when the
// shapes disagree, N < 2, a scale is not > 0, dynamics_weight is not > 0, or
// a channel is missing from every column; kInternal when the model gives a
// non-finite value at the first guess.
[[nodiscard]] Result<SmoothedStates> SmoothStates(const ForecastModel& model, const Eigen::MatrixXd& observations,
                                                  const Eigen::VectorXd& scale,
                                                  const StateSmootherOptions& options = {});

}  // namespace lyapcast
