// Training pairs from a stored series: resampling onto the model-step grid,
// gap-aware multi-step trajectories, and the split by time.
//
// A feed's samples arrive with jitter, gaps and missing channels. The trainer
// needs states on the grid t0 + i*dt. ResampleToGrid puts each sample on its
// nearest grid point when it lies within `tolerance` of it (others are
// counted as off-grid and dropped); grid points without a sample are gaps.
//
// BuildTrajectories turns the grid into trajectories: from every complete
// grid state x_i (all channels present; inputs must be complete) the model is
// unrolled for `horizon` steps and the loss is taken at every grid point in
// (i, i + horizon] that holds a sample, channel by channel (a missing channel
// is masked out of the loss for that channel only). With j the next grid
// point after i that holds a sample:
//   - j - i > max_gap: no trajectory from i (too long a gap to bridge);
//   - otherwise horizon = max(rollout, j - i), cut at the end of the grid.
// So a gap of k-1 missing steps gives a k-step pair trained through G^k, and
// contiguous data gives rollouts of length `rollout`; one rule covers both.
//
// The split is by time, never shuffled across it: the newest `validation`
// fraction of the grid validates; a training trajectory never reaches into
// the validation span.
//
// Pure functions; thread-safe.
#pragma once

#include <cstdint>
#include <span>
#include <vector>

#include "core/data_time.h"
#include "core/sample.h"
#include "learn/trajectory_options.h"

namespace lyapcast {

struct GridOptions {
  Micros step = kSecond;  // dt in data time; > 0
  Micros tolerance{};            // 0 means step / 4
};

// Samples on the grid t0 + i * step. Absent grid points have present[i] == 0.
struct GridSeries {
  DataTime t0{};
  Micros step{};
  int channels = 0;
  std::vector<double> values;        // size() * channels, row i = grid point i; NaN where missing
  std::vector<std::uint64_t> mask;   // missing-channel mask per grid point (all bits set if absent)
  std::vector<std::uint8_t> present; // 1 if a sample landed on the grid point
  std::int64_t off_grid = 0;         // samples farther than tolerance from every grid point
  std::int64_t collisions = 0;       // samples that lost their grid point to a nearer one

  std::size_t size() const { return present.size(); }
  DataTime time(std::size_t i) const { return t0 + static_cast<std::int64_t>(i) * step; }
  const double* row(std::size_t i) const { return values.data() + i * static_cast<std::size_t>(channels); }
  bool complete(std::size_t i) const { return present[i] && mask[i] == 0; }
};

// Requires samples in increasing time order (as WindowStore::ReadRange gives
// them) and options.step > 0. The grid starts at the first sample's time.
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

}  // namespace lyapcast
