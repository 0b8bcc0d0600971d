// The largest Lyapunov exponent of a feed from its known dynamics or from its
// raw data, in the units the cadence uses (per second of data time), with the
// diagnostics an operator needs to judge it; and a model's own exponent,
// computed for each new version (RetrainOutcome::lambda_max,
// UploadOutcome::lambda_max).
//
// Thread safety: reentrant; each call compiles or reads what it needs.
#pragma once

#include "core/eigen.h"  // first, instead of <Eigen/Core>: see there

#include <span>
#include <string>
#include <vector>

#include <optional>

#include "config/config.h"
#include "core/sample.h"
#include "core/status.h"
#include "learn/flow_map.h"
#include "learn/forecast_model.h"
#include "learn/pairs.h"

namespace lyapcast {

struct ExponentEstimate {
  double lambda_max = 0;    // largest exponent per second of data time
  std::string diagnostics;  // e.g. "qr, 20000 steps, converged to 0.004/s"
};

// QR (Benettin) on the tangent dynamics of feed.dynamics, one RK4 substep per
// 5 ms of model time at most, over `model_time_units` of model time after a
// tenth of that as transient, from `x0` (a state on or near the attractor,
// e.g. the newest complete sample). kInvalidArgument when the feed has no
// dynamics or x0 has the wrong size; kInternal when the orbit blows up.
[[nodiscard]] Result<ExponentEstimate> DynamicsExponent(const FeedConfig& feed, const Eigen::VectorXd& x0,
                                                        double model_time_units = 200);

// Rosenstein's method on channel `channel` of `samples` (in time order;
// missing values skipped), using the most recent `max_samples` values and at
// most 1000 reference points so a job spends well under a second on it.
// Errors as RosensteinLargest (too short, constant series, ...).
[[nodiscard]] Result<ExponentEstimate> DataExponent(const FeedConfig& feed, std::span<const Sample> samples,
                                                    int channel = 0, int max_samples = 20000);

// The newest complete state of `grid` (all channels present), if any.
std::optional<Eigen::VectorXd> NewestCompleteState(const GridSeries& grid);

// QR on the Jacobians of the learned map along its own run from `x0`
// (200 model time units, 1 000 to 20 000 steps, after a tenth of that as
// transient), per second of data time (`time_unit`: data time per model time
// unit). nullopt when the run fails (e.g. it blows up).
std::optional<double> ModelExponent(const ForecastModel& model, const Eigen::VectorXd& x0, Micros time_unit);

}  // namespace lyapcast
