// The largest Lyapunov exponent of a feed from its known dynamics or from its
// raw data, in the units the cadence uses (per second of data time), with the
// diagnostics an operator needs to judge it. The model's own exponent comes
// with each trained version (RetrainOutcome::lambda_max).
//
// Thread safety: reentrant; each call compiles or reads what it needs.
#pragma once

#include "core/eigen.h"  // first, instead of <Eigen/Core>: see there

#include <span>
#include <string>
#include <vector>

#include "config/config.h"
#include "core/sample.h"
#include "core/status.h"

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

}  // namespace lyapcast
