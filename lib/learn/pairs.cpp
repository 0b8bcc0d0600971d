#include "learn/pairs.h"

#include <algorithm>
#include <cmath>
#include <limits>

namespace lyapcast {

std::size_t GridSeries::segment_end(std::size_t i) const {
  const auto next = std::upper_bound(segment_begins.begin(), segment_begins.end(), i);
  return next == segment_begins.end() ? size() : *next;
}

namespace {

// Pass 1: the grid points' times and the segments (see the header).
void LayGrid(std::span<const Sample> samples, const GridOptions& o, GridSeries* g) {
  const Micros step = o.step;
  const Micros tolerance = o.tolerance_or_default();
  const Micros span = o.max_span_or_default();
  DataTime last_grid{};    // time of the newest grid point
  DataTime last_sample{};  // time of the previous sample
  for (std::size_t k = 0; k < samples.size(); ++k) {
    const DataTime t = samples[k].t;
    if (k == 0) {
      g->segment_begins.push_back(0);
      g->times.push_back(t);
      last_grid = last_sample = t;
      continue;
    }
    const Micros ahead = t - last_grid;
    const std::int64_t steps = (ahead + step / 2) / step;  // nearest whole step from the newest grid point
    const Micros off = std::chrono::abs(ahead - steps * step);
    if (steps >= 1 && off <= tolerance) {
      for (std::int64_t i = 1; i <= steps; ++i) g->times.push_back(last_grid + i * step);
      last_grid += steps * step;
    } else if (t - last_sample <= span) {
      // Dense data between grid points: the grid runs on up to the sample,
      // and those points are read between samples.
      while (last_grid + step <= t) {
        last_grid += step;
        g->times.push_back(last_grid);
      }
    } else {
      // After a pause, off the running grid: a new segment anchored here.
      g->segment_begins.push_back(g->times.size());
      g->times.push_back(t);
      last_grid = t;
    }
    last_sample = t;
  }
}

}  // namespace

GridSeries ResampleToGrid(std::span<const Sample> samples, int channels, const GridOptions& options) {
  GridSeries g;
  g.channels = channels;
  g.step = options.step;
  if (samples.empty() || options.step <= Micros{} || channels <= 0) return g;
  LayGrid(samples, options, &g);
  g.t0 = g.times.front();
  const std::size_t n = g.times.size();
  const auto c = static_cast<std::size_t>(channels);
  g.values.assign(n * c, std::numeric_limits<double>::quiet_NaN());
  g.mask.assign(n, ~std::uint64_t{0});
  g.present.assign(n, 0);
  g.carried.assign(n, 0);
  for (std::size_t i = 0; i < n; ++i) g.mask[i] = channels >= 64 ? ~std::uint64_t{0} : (std::uint64_t{1} << c) - 1;

  // Pass 2, channel by channel: walk the grid and the channel's
  // observations together; a is the newest observation at or before the
  // grid time, b the next one.
  std::vector<std::uint8_t> used(samples.size(), 0);
  std::vector<std::size_t> index;  // samples holding the channel
  index.reserve(samples.size());
  for (std::size_t ch = 0; ch < c; ++ch) {
    index.clear();
    for (std::size_t k = 0; k < samples.size(); ++k) {
      const Sample& s = samples[k];
      if (ch < s.values.size() && !s.missing(static_cast<int>(ch))) index.push_back(k);
    }
    const Micros hold = options.hold_for(static_cast<int>(ch));
    std::size_t p = 0;  // index[p] is the first observation after the grid time
    for (std::size_t i = 0; i < n; ++i) {
      const DataTime at = g.times[i];
      while (p < index.size() && samples[index[p]].t <= at) ++p;
      const bool has_a = p > 0, has_b = p < index.size();
      const ChannelPoint a = has_a ? ChannelPoint{samples[index[p - 1]].t, samples[index[p - 1]].values[ch]} : ChannelPoint{};
      const ChannelPoint b = has_b ? ChannelPoint{samples[index[p]].t, samples[index[p]].values[ch]} : ChannelPoint{};
      const FormedValue v = ValueAt(has_a ? &a : nullptr, has_b ? &b : nullptr, at, options, hold);
      if (v.how == Formed::kMissing) continue;
      g.values[i * c + ch] = v.value;
      g.mask[i] &= ~(std::uint64_t{1} << ch);
      if (v.how == Formed::kCarried) {
        g.carried[i] |= std::uint64_t{1} << ch;
        ++g.carried_values;
        continue;
      }
      g.present[i] = 1;
      switch (v.how) {
        case Formed::kExact:
          used[index[a.t == at ? p - 1 : p]] = 1;
          break;
        case Formed::kInterpolated:
          ++g.interpolated;
          used[index[p - 1]] = used[index[p]] = 1;
          break;
        case Formed::kNearest:
          ++g.nearest;
          used[index[has_a && at - a.t <= (has_b ? b.t - at : Micros::max()) ? p - 1 : p]] = 1;
          break;
        case Formed::kMissing:
        case Formed::kCarried: break;
      }
    }
  }
  for (std::size_t i = 0; i < n; ++i) {
    if (!g.present[i]) g.mask[i] = ~std::uint64_t{0};
  }
  for (std::uint8_t u : used) g.unused += u ? 0 : 1;
  return g;
}

TrajectorySet BuildTrajectories(const GridSeries& grid, const TrajectoryOptions& options) {
  TrajectorySet out;
  const std::size_t n = grid.size();
  if (n < 2) return out;
  const double fraction = std::clamp(options.validation, 0.0, 0.999);
  out.validation_begin = n - static_cast<std::size_t>(std::floor(fraction * static_cast<double>(n)));
  const int rollout = std::max(options.rollout, 1);
  const int max_gap = std::max(options.max_gap, 1);

  // next_present[i]: the first grid index > i in i's segment holding a
  // sample, or n.
  std::vector<std::size_t> next_present(n, n);
  for (std::size_t i = n - 1; i-- > 0;) {
    if (grid.segment_end(i) == i + 1) continue;  // i ends its segment
    next_present[i] = grid.present[i + 1] ? i + 1 : next_present[i + 1];
  }

  for (std::size_t i = 0; i + 1 < n; ++i) {
    if (!grid.complete(i)) continue;
    const std::size_t j = next_present[i];
    if (j >= n) continue;  // no later sample in this segment
    const std::size_t gap = j - i;
    if (gap > static_cast<std::size_t>(max_gap)) {
      ++out.skipped_gaps;
      continue;
    }
    const bool in_validation = i >= out.validation_begin;
    // Training trajectories stop before the validation span; validation
    // trajectories stay inside it; neither leaves its segment.
    const std::size_t limit = std::min(in_validation ? n - 1 : out.validation_begin - 1, grid.segment_end(i) - 1);
    if (j > limit) continue;
    const std::size_t horizon = std::min(std::max<std::size_t>(static_cast<std::size_t>(rollout), gap), limit - i);
    const Trajectory t{static_cast<std::int32_t>(i), static_cast<std::int32_t>(horizon)};
    if (gap > 1) ++out.gap_pairs;
    (in_validation ? out.validation : out.train).push_back(t);
  }
  return out;
}

bool IsOneStepPair(const GridSeries& grid, std::size_t i) {
  return i + 1 < grid.size() && i + 1 < grid.segment_end(i) && grid.complete(i) && grid.complete(i + 1) &&
         grid.target_missing(i + 1) == 0;
}

namespace {

OneStepPairs Collect(const GridSeries& grid, const std::vector<std::size_t>& starts) {
  OneStepPairs p;
  const int c = grid.channels;
  p.from.resize(c, static_cast<Eigen::Index>(starts.size()));
  p.to.resize(c, static_cast<Eigen::Index>(starts.size()));
  for (std::size_t k = 0; k < starts.size(); ++k) {
    p.from.col(static_cast<Eigen::Index>(k)) = Eigen::Map<const Eigen::VectorXd>(grid.row(starts[k]), c);
    p.to.col(static_cast<Eigen::Index>(k)) = Eigen::Map<const Eigen::VectorXd>(grid.row(starts[k] + 1), c);
  }
  return p;
}

}  // namespace

OneStepPairs OneStepPairsIn(const GridSeries& grid, std::size_t begin, std::size_t end) {
  std::vector<std::size_t> starts;
  for (std::size_t i = begin; i + 1 < std::min(end, grid.size()); ++i) {
    if (IsOneStepPair(grid, i)) starts.push_back(i);
  }
  return Collect(grid, starts);
}

OneStepPairs OneStepPairsOf(const GridSeries& grid, const std::vector<Trajectory>& trajectories) {
  std::vector<std::size_t> starts;
  for (const Trajectory& t : trajectories) {
    const auto i = static_cast<std::size_t>(t.start);
    if (t.horizon >= 1 && IsOneStepPair(grid, i)) starts.push_back(i);
  }
  return Collect(grid, starts);
}

}  // namespace lyapcast
