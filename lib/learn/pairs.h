// Training pairs from a stored series: resampling onto the model-step grid,
// gap-aware multi-step trajectories, and the split by time.
//
// A feed's samples arrive with jitter, gaps, missing channels, at another
// rate than the model step, and with a new sampling phase after an outage.
// The trainer needs states one model step apart. ResampleToGrid lays a grid
// of model steps over the samples in SEGMENTS: a segment's grid is anchored
// at its first sample and runs on in whole steps; a new segment starts when
// a sample comes after a pause (more than the alignment's max_span after the
// previous sample) and lands farther than the tolerance from the running
// grid, so a phase shift never leaves the later data off the grid. Dense
// data never start a segment (their grid runs on and is read between
// samples). Each grid point's channels are formed by the rule of
// learn/alignment.h (exact, interpolated, nearest within tolerance, or
// missing), the same rule the drift monitor uses.
//
// BuildTrajectories turns the grid into trajectories: from every complete
// grid state x_i (all channels present; inputs must be complete) the model is
// unrolled for `horizon` steps and the loss is taken at every grid point in
// (i, i + horizon] that holds a sample, channel by channel (a missing channel
// is masked out of the loss for that channel only). With j the next grid
// point after i in i's segment that holds a sample:
//   - none, or j - i > max_gap: no trajectory from i (too long a gap to bridge);
//   - otherwise horizon = max(rollout, j - i), cut at the end of the segment
//     (and of the training or validation span).
// So a gap of k-1 missing steps gives a k-step pair trained through G^k, and
// contiguous data gives rollouts of length `rollout`; one rule covers both.
//
// The split is by time, never shuffled across it: the newest `validation`
// fraction of the grid validates; a training trajectory never reaches into
// the validation span.
//
// Pure functions; thread-safe.
#pragma once

#include "core/eigen.h"  // first, instead of <Eigen/Core>: see there

#include <cstdint>
#include <span>
#include <vector>

#include "core/data_time.h"
#include "core/sample.h"
#include "learn/alignment.h"
#include "learn/trajectory_options.h"

namespace lyapcast {

using GridOptions = AlignmentOptions;

// States on model-step grids, one after another by segment. Within a
// segment, point i + 1 is one step after point i; trajectories and
// increments never cross a segment boundary.
struct GridSeries {
  DataTime t0{};  // time of the first grid point
  Micros step{};
  int channels = 0;
  std::vector<DataTime> times;        // time of each grid point
  std::vector<double> values;         // size() * channels, row i = grid point i; NaN where missing
  std::vector<std::uint64_t> mask;    // channels that could not be formed, per grid point (all bits set if absent)
  std::vector<std::uint64_t> carried; // channels whose value was carried (alignment's hold): inputs, never targets
  std::vector<std::uint8_t> present;  // 1 if a channel was formed from samples near the grid point (not carried)
  std::vector<std::size_t> segment_begins;  // first grid index of each segment, increasing; [0] == 0
  std::int64_t unused = 0;          // samples that formed no grid value (off the grid, or lost to a nearer one)
  std::int64_t interpolated = 0;    // grid values formed between two samples
  std::int64_t nearest = 0;         // grid values taken from a sample within tolerance but not on time
  std::int64_t carried_values = 0;  // grid values carried from an older sample (hold)

  std::size_t size() const { return present.size(); }
  DataTime time(std::size_t i) const { return times[i]; }
  const double* row(std::size_t i) const { return values.data() + i * static_cast<std::size_t>(channels); }
  bool complete(std::size_t i) const { return present[i] && mask[i] == 0; }
  // Channels that are no target at grid point i: missing or carried.
  std::uint64_t target_missing(std::size_t i) const { return mask[i] | carried[i]; }
  // One past the last grid index of the segment holding i (i < size()).
  std::size_t segment_end(std::size_t i) const;
  std::size_t segments() const { return segment_begins.size(); }
};

// Requires samples in strictly increasing time order (as
// WindowStore::ReadRange gives them) and options.step > 0.
GridSeries ResampleToGrid(std::span<const Sample> samples, int channels, const GridOptions& options);


// Unroll from grid point `start` for `horizon` steps.
struct Trajectory {
  std::int32_t start = 0;
  std::int32_t horizon = 0;
};

struct TrajectorySet {
  std::vector<Trajectory> train;
  std::vector<Trajectory> validation;
  std::size_t validation_begin = 0;  // first grid index of the validation span
  std::int64_t gap_pairs = 0;        // trajectories whose first target is more than one step away
  std::int64_t skipped_gaps = 0;     // complete states with no sample within max_gap steps
};

TrajectorySet BuildTrajectories(const GridSeries& grid, const TrajectoryOptions& options);

// One-step pairs for a model fitted by least squares (learn/polynomial_map.h):
// grid points i, i + 1 in one segment, both complete, the target's channels
// all formed from samples (none carried).
struct OneStepPairs {
  Eigen::MatrixXd from, to;  // channels x N: to.col(i) is one model step after from.col(i)
  std::size_t size() const { return static_cast<std::size_t>(from.cols()); }
};

// Whether grid points i, i + 1 form such a pair.
bool IsOneStepPair(const GridSeries& grid, std::size_t i);
// Every such pair with begin <= i and i + 1 < end.
OneStepPairs OneStepPairsIn(const GridSeries& grid, std::size_t begin, std::size_t end);
// The first step of each given trajectory, where it is such a pair.
OneStepPairs OneStepPairsOf(const GridSeries& grid, const std::vector<Trajectory>& trajectories);


}  // namespace lyapcast
