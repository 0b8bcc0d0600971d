#include "learn/pairs.h"

#include <algorithm>
#include <cmath>
#include <limits>

namespace lyapcast {

GridSeries ResampleToGrid(std::span<const Sample> samples, int channels, const GridOptions& options) {
  GridSeries g;
  g.channels = channels;
  g.step = options.step;
  if (samples.empty() || options.step <= Micros{} || channels <= 0) return g;
  const Micros tolerance = options.tolerance > Micros{} ? options.tolerance : options.step / 4;
  g.t0 = samples.front().t;
  const std::size_t n = static_cast<std::size_t>((samples.back().t - g.t0 + options.step / 2) / options.step) + 1;
  const std::size_t c = static_cast<std::size_t>(channels);
  g.values.assign(n * c, std::numeric_limits<double>::quiet_NaN());
  g.mask.assign(n, ~std::uint64_t{0});
  g.present.assign(n, 0);
  // Distance of the sample currently holding each grid point, to keep the nearest.
  std::vector<Micros> held(n, Micros::max());
  for (const Sample& s : samples) {
    const Micros offset = s.t - g.t0;
    const auto i = static_cast<std::size_t>((offset + options.step / 2) / options.step);
    if (i >= n) continue;
    const Micros distance = std::chrono::abs(offset - static_cast<std::int64_t>(i) * options.step);
    if (distance > tolerance) {
      ++g.off_grid;
      continue;
    }
    if (g.present[i]) {
      ++g.collisions;
      if (distance >= held[i]) continue;
    }
    held[i] = distance;
    g.present[i] = 1;
    g.mask[i] = s.missing_mask;
    for (std::size_t ch = 0; ch < c && ch < s.values.size(); ++ch) {
      g.values[i * c + ch] = s.missing(static_cast<int>(ch)) ? std::numeric_limits<double>::quiet_NaN() : s.values[ch];
    }
  }
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

  // next_present[i]: the first grid index > i holding a sample, or n.
  std::vector<std::size_t> next_present(n, n);
  for (std::size_t i = n - 1; i-- > 0;) next_present[i] = grid.present[i + 1] ? i + 1 : next_present[i + 1];

  for (std::size_t i = 0; i + 1 < n; ++i) {
    if (!grid.complete(i)) continue;
    const std::size_t j = next_present[i];
    if (j >= n) break;  // no later sample at all
    const std::size_t gap = j - i;
    if (gap > static_cast<std::size_t>(max_gap)) {
      ++out.skipped_gaps;
      continue;
    }
    const bool in_validation = i >= out.validation_begin;
    // Training trajectories stop before the validation span; validation
    // trajectories stay inside it.
    const std::size_t limit = in_validation ? n - 1 : out.validation_begin - 1;
    if (j > limit) continue;
    const std::size_t horizon = std::min(std::max<std::size_t>(static_cast<std::size_t>(rollout), gap), limit - i);
    const Trajectory t{static_cast<std::int32_t>(i), static_cast<std::int32_t>(horizon)};
    if (gap > 1) ++out.gap_pairs;
    (in_validation ? out.validation : out.train).push_back(t);
  }
  return out;
}

}  // namespace lyapcast
