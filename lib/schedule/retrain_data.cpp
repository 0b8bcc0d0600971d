#include "schedule/retrain_data.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <limits>
#include <random>

namespace lyapcast {
namespace {

// The chunk (trajectories starting at or after `since`) plus a replay share
// of older ones drawn with the job's seed.
std::vector<Trajectory> ChunkWithReplay(const GridSeries& grid, const std::vector<Trajectory>& train, DataTime since,
                                        double replay, std::uint64_t seed) {
  std::vector<Trajectory> fresh, older;
  for (const Trajectory& t : train) (grid.time(static_cast<std::size_t>(t.start)) >= since ? fresh : older).push_back(t);
  if (fresh.empty() || older.empty() || replay <= 0) return fresh;
  const auto want = static_cast<std::size_t>(std::llround(replay / (1.0 - replay) * static_cast<double>(fresh.size())));
  std::mt19937_64 rng(seed ^ 0x9e3779b97f4a7c15ULL);
  for (std::size_t k = 0; k < std::min(want, older.size()); ++k) fresh.push_back(older[rng() % older.size()]);
  return fresh;
}

// Splits the held-out trajectories at judge_begin; selection trajectories
// are cut so that none reaches a judged grid point.
void SplitHeldOut(const std::vector<Trajectory>& heldout, RetrainData* d) {
  const auto judge_begin = static_cast<std::int32_t>(d->judge_begin);
  for (Trajectory t : heldout) {
    if (t.start >= judge_begin) {
      d->judge.push_back(t);
    } else {
      t.horizon = std::min(t.horizon, judge_begin - t.start);
      d->selection.push_back(t);
    }
  }
}

}  // namespace

std::string DiagnoseNoPairs(std::span<const Sample> window, const GridSeries& grid, const FeedConfig& feed) {
  const std::optional<Micros> spacing = MedianSpacing(window);
  if (!spacing) return "";
  const Micros median = *spacing;
  const double steps = static_cast<double>(median.count()) / static_cast<double>(feed.step.count());
  if (std::llround(steps) > feed.model.max_gap) {
    return fmt::format("samples are about {} apart ({} model steps of {}), more than model.max_gap {}: raise "
                       "model.max_gap to at least {} or set the step to the sample period",
                       FormatDuration(median), std::llround(steps), FormatDuration(feed.step), feed.model.max_gap,
                       std::llround(steps));
  }
  // A channel absent from most grid states.
  const int channels = static_cast<int>(feed.channels.size());
  std::size_t present = 0, complete = 0;
  std::vector<std::size_t> missing(static_cast<std::size_t>(channels), 0);
  for (std::size_t i = 0; i < grid.size(); ++i) {
    if (!grid.present[i]) continue;
    ++present;
    if (grid.mask[i] == 0) ++complete;
    for (int c = 0; c < channels; ++c) missing[static_cast<std::size_t>(c)] += (grid.mask[i] >> c) & 1U;
  }
  if (present > 0 && complete * 10 < present) {
    const auto worst = static_cast<std::size_t>(std::max_element(missing.begin(), missing.end()) - missing.begin());
    return fmt::format("only {} of {} grid states have every channel; channel '{}' is missing from {} of them",
                       complete, present, feed.channels[worst], missing[worst]);
  }
  return "";
}

RetrainData PrepareRetrainData(std::span<const Sample> window, const FeedConfig& feed,
                               const RetrainDataOptions& options) {
  const RetrainConfig& rc = feed.retrain;
  const Micros time_unit = feed.dynamics ? feed.dynamics->time_unit : kSecond;
  RetrainData d;
  d.dt = Seconds(feed.step) / Seconds(time_unit);
  d.grid = ResampleToGrid(window, static_cast<int>(feed.channels.size()), {feed.step, Micros{}, Micros{}, feed.hold});
  // The held-out span is the newest `validation` fraction of the new data
  // (the whole window on a cold start), so a warm start always has fresh
  // data on both sides of the split.
  double validation = rc.validation;
  if (options.active_trained_to && d.grid.size() > 1) {
    const double span = Seconds(options.until - d.grid.t0);
    const double chunk = Seconds(options.until - std::max(*options.active_trained_to, d.grid.t0));
    validation = std::clamp(rc.validation * chunk / span, 0.0, rc.validation);
  }
  TrajectorySet set = BuildTrajectories(d.grid, {feed.model.rollout, feed.model.max_gap, validation});
  d.heldout_begin = set.validation_begin;
  d.judge_begin = set.validation_begin + (d.grid.size() - set.validation_begin) / 2;
  SplitHeldOut(set.validation, &d);

  auto norm = ComputeNormalization(d.grid, set.validation_begin, d.dt, feed.model.max_gap);
  if (norm.ok()) {
    d.normalization = std::move(norm).value();
  } else {
    d.normalization_error = norm.status().message();
  }

  if (!options.active_trained_to) {
    if (static_cast<int>(set.train.size()) < rc.min_pairs) {
      d.not_enough = fmt::format("cold start waits for {} training pairs; the window holds {}", rc.min_pairs,
                                 set.train.size());
      // Plenty of samples and still (almost) no pairs: something other
      // than time is missing.
      if (window.size() >= static_cast<std::size_t>(2 * rc.min_pairs) &&
          static_cast<int>(set.train.size()) * 10 < rc.min_pairs) {
        const std::string cause = DiagnoseNoPairs(window, d.grid, feed);
        if (!cause.empty()) {
          d.not_enough = fmt::format("{} samples give {} training pairs: {}", window.size(), set.train.size(), cause);
          d.blocked = true;
        }
      }
    } else if (!d.normalization) {
      const std::string cause = DiagnoseNoPairs(window, d.grid, feed);
      d.not_enough = cause.empty() ? d.normalization_error : cause;
      d.blocked = true;
    }
    d.train = std::move(set.train);
    return d;
  }
  d.train = ChunkWithReplay(d.grid, set.train, *options.active_trained_to, rc.replay, options.seed);
  if (d.train.empty()) {
    d.not_enough = fmt::format("no new training pairs since version {} (trained to {})", options.active_version,
                               FormatRfc3339(*options.active_trained_to));
    // New samples that form no pair are a problem; no or few new samples
    // (an outage, the first moments after one) are not. 50 fresh samples
    // leave some 40 after the held-out share: pairs unless something is wrong.
    constexpr std::ptrdiff_t kFreshEnough = 50;
    const auto fresh = std::count_if(window.begin(), window.end(),
                                     [&](const Sample& s) { return s.t > *options.active_trained_to; });
    if (fresh >= kFreshEnough) {
      const std::string cause = DiagnoseNoPairs(window, d.grid, feed);
      d.not_enough += fmt::format(" although {} samples arrived since{}{}", fresh, cause.empty() ? "" : ": ", cause);
      d.blocked = true;
    }
  }
  return d;
}

Result<std::vector<Sample>> ReadWindow(WindowStore& reader, std::uint32_t feed, DataTime from, DataTime until) {
  std::vector<Sample> samples;
  if (Status s = reader.ReadRange(feed, from, until, 4096,
                                  [&](std::span<const Sample> slice) {
                                    samples.insert(samples.end(), slice.begin(), slice.end());
                                    return true;
                                  });
      !s.ok()) {
    return s;
  }
  return samples;
}

}  // namespace lyapcast
