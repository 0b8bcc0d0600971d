// FitStateToHistory: a forecast's start estimated from the recent history
// rather than taken from the newest (noisy) sample alone (docs/design.md
// "Forecast start").
//
// A measured state carries sensor noise; a chaotic model amplifies it from
// the first step, so the forecast is valid only until that noise has grown
// to the tolerance. The recent history holds more information about the
// present state than the newest sample: the state the model's own
// trajectory passes through while staying closest to every recent sample.
// With y_0..y_m the observations one model step apart (y_m the newest),
// G the model's one-step map and s the per-channel scale,
//
//     x0* = argmin_x0  sum_k sum_c ((G^k(x0)_c - y_k,c) / s_c)^2
//
// over the present channels of each observation (strong-constraint
// variational assimilation over a short window, e.g. Kalnay, Atmospheric
// Modeling, Data Assimilation and Predictability, 2003, ch. 5), and the
// start is G^m(x0*). Solved by Gauss-Newton with Levenberg damping from x0
// = y_0 (missing channels from the newest sample that has them), with the
// model's Jacobians chained along the trajectory. A window of a fraction
// of a Lyapunov time keeps the problem nearly linear; the noise of the
// estimate falls roughly as 1/sqrt(m + 1) while the model is accurate over
// the window.
//
// Pure function; thread-safe (its own scratch).
#pragma once

#include "core/eigen.h"  // first, instead of <Eigen/Core>: see there

#include "core/status.h"
#include "learn/forecast_model.h"

namespace lyapcast {

struct HistoryFitOptions {
  int max_iterations = 30;      // Gauss-Newton steps at most
  double tolerance = 1e-12;     // stop when the relative cost decrease is below this
};

struct HistoryFit {
  Eigen::VectorXd start;        // the estimate of the state at the newest observation
  Eigen::VectorXd first;        // x0*, at the oldest observation
  double rms_before = 0;        // RMS of the normalized misfit of the trajectory from y_0 ...
  double rms_after = 0;         // ... and from x0* (the fit's residual)
  int iterations = 0;
  int observations = 0;         // present (observation, channel) values used
};

// observations: channels x (m + 1), column k one model step after column k
// - 1, NaN where a channel is missing; scale: per channel, > 0.
// kInvalidArgument when the shapes disagree, m < 1, a channel is never
// present, or the first column cannot be completed.
[[nodiscard]] Result<HistoryFit> FitStateToHistory(const ForecastModel& model, const Eigen::MatrixXd& observations,
                                                   const Eigen::VectorXd& scale,
                                                   const HistoryFitOptions& options = {});

}  // namespace lyapcast
