// Fit: trains a FlowMap<float> on gap-aware trajectories of a grid series,
// optionally with physics constraints from known dynamics.
//
// Each iteration draws a batch of trajectories of one horizon h (buckets by
// horizon, chosen in proportion to their size, so no work is spent unrolling
// short trajectories to a longer one's length), unrolls G h times from the
// complete data state, and takes the data loss at every present target:
//
//   L_data = mean over present (step, sample, channel) of ((G^k(x) - y) / s_c)^2
//
// with s_c the model's per-channel standard deviation, so channels in
// different units weigh alike. Constraint terms (docs/design.md "Learning"), once
// per trajectory, each multiplied by
//   w(i) = weight / (1 + exp(-(i / iterations - mid) / width)):
//   velocity:  mean ((f(G^k(z)) - f(y_k)) / fs_c)^2
//              at the trajectory's FIRST present target y_k, k steps on (k = 1
//              on gap-free data: f(G(z)) against f(y1)); the mean is over the
//              trajectories whose first target is complete (f needs every
//              channel), the others have no velocity term
//   residual:  mean ((G(z) - z - dt f(z) - mu dt (f(G(z)) - f(z))) / (dt fs_c))^2
//              on the first step z -> G(z), whatever the gap
// where fs_c is the standard deviation of f_c over the training states, so
// every term is a squared relative error of comparable size. Both
// backpropagate through f's Jacobian (central differences, Dynamics::Jacobian)
// and, for the velocity term at k > 1, through the composition G^k as the
// data term does; the residual term also trains mu.
//
// Then global-norm clipping, AdamW with decoupled weight decay and a cosine
// learning-rate schedule. Validation (OneStepError below: the normalized RMSE
// per channel at each validation trajectory's first target, one step on for
// gap-free data, k steps on through G^k across a gap) runs every
// `validate_every` iterations and at the end; early stopping keeps the best
// weights seen.
//
// Threads: Fit runs on the calling thread and uses exactly one thread (Eigen
// is built without OpenMP here); `training.threads` is the number of such
// jobs the daemon runs concurrently. `cancel` may be set from another thread
// and is checked every iteration.
#pragma once

#include <atomic>
#include <cstdint>
#include <functional>
#include <limits>
#include <optional>
#include <string>
#include <vector>

#include "core/status.h"
#include "learn/fit_options.h"
#include "learn/flow_map.h"
#include "learn/pairs.h"
#include "physics/dynamics.h"

namespace lyapcast {

struct FitProgress {
  int iteration = 0;  // 1-based, after the update
  int iterations = 0;
  double loss = 0;    // weighted total
  double data = 0;
  double velocity = 0;  // unweighted term values (0 when not used)
  double residual = 0;
  double learning_rate = 0;
  double grad_norm = 0;
  std::optional<double> validation;  // set on iterations that validated
};

enum class FitStop { kIterations, kTimeBudget, kEarlyStopping, kCancelled };
const char* FitStopName(FitStop s);

struct FitResult {
  int iterations = 0;  // updates done
  double seconds = 0;
  FitStop stop = FitStop::kIterations;
  FitProgress last;                        // losses of the last iteration
  std::vector<double> validation_rmse;     // per channel, normalized by s_c (NaN if no validation data)
  double validation_error = std::numeric_limits<double>::quiet_NaN();  // mean over channels
  int best_iteration = 0;                  // weights kept from here (early stopping)
  std::int64_t train_trajectories = 0;
  std::int64_t validation_trajectories = 0;
};

// Per-channel mean and std of the complete states of the grid span [0, end),
// and the increment scale S_c = std of the per-step increments / dt, gap-aware:
// each complete state x_i is paired with the next complete state x_j at most
// `max_gap` steps later (k = j - i, both before `end`; no pair when there is
// none), and its increment per step is (x_j - x_i) / k. Callers pass the
// feed's model.max_gap; the default 1 pairs consecutive states only. On
// consecutive complete states (k = 1 everywhere) the result is exactly, bit
// for bit, that of max_gap = 1. Across a gap, (x_j - x_i) / k is the mean of
// the k one-step increments in between (they telescope); for a smooth flow
// over a few steps it equals the one-step increment at the midpoint up to
// curvature terms of relative order (k dt / tau)^2, tau the flow's shortest
// time scale (the k-step chord is shorter than the path of k one-step
// increments only by such terms), so its std estimates the one-step
// increment scale, usually slightly low. S is a scale, not a fit: the
// network absorbs a constant factor. A constant channel is left out (see
// Normalization::left_out). Fails (kInvalidArgument) when there are fewer
// than 2 complete states, fewer than 2 such pairs, or a channel moves but
// its increments do not vary (an exact ramp).
struct Normalization {
  Eigen::VectorXd mean, stddev, increment_scale;
  // Channels constant over the data (a sensor not yet wired, a closed
  // valve): LEFT OUT of the model rather than failing the whole fit. Their
  // stddev is kLeftOutScale x max(|mean|, 1), so the network's input from
  // them is ~0 and their normalized errors vanish; their increment scale is
  // kLeftOutIncrement, so G holds them at their value (in float, exactly).
  // A later fit on data where they move brings them in (the warm start
  // refits the normalization).
  std::uint64_t left_out = 0;
  static constexpr double kLeftOutScale = 1e6;
  static constexpr double kLeftOutIncrement = 1e-30;
};
[[nodiscard]] Result<Normalization> ComputeNormalization(const GridSeries& grid, std::size_t end, double dt,
                                                         int max_gap = 1);

// Trains `model` in place from its current weights (a warm start; for a cold
// start, SetNormalization and InitRandom first). Fails (kInvalidArgument) on
// no training trajectories or options out of range, and (kInternal) when the
// loss stops being finite: the message names the iteration and what to try;
// the model then holds the best weights seen before the divergence.
[[nodiscard]] Result<FitResult> Fit(FlowMap<float>& model, const GridSeries& grid, const TrajectorySet& set,
                                    const FitOptions& options,
                                    const std::function<void(const FitProgress&)>& progress = {});

// The trainer's validation error: normalized RMSE per channel of `model` at
// the FIRST present target of each given trajectory. For a trajectory from
// the complete state x_s, with j the first grid point in (s, s + horizon]
// holding a sample and k = j - s, the prediction is G^k(x_s) (k model steps,
// in float) and each channel present at j contributes
//   ((G^k(x_s)_c - x_j,c) / s_c)^2,   s_c = model.stddev()[c],
// so RMSE_c = sqrt(mean of those over the trajectories). On gap-free data
// (every start + 1 holds a sample) k = 1 throughout and this is the one-step
// error, as the name says; across a gap it is a k-step error (k <= the
// feed's model.max_gap on BuildTrajectories' output), typically larger than
// the one-step error of the same model, so compare values only on the same
// trajectories (champion/challenger does). Trajectories without a present
// target within their horizon (or with horizon 0) are skipped. NaN for a
// channel with no target at all. `scale`, when given (one value per
// channel, > 0), replaces the model's stddev as the error scale, so two
// models can be compared on one scale.
std::vector<double> OneStepError(const FlowMap<float>& model, const GridSeries& grid,
                                 const std::vector<Trajectory>& trajectories,
                                 const Eigen::VectorXf* scale = nullptr);

}  // namespace lyapcast
