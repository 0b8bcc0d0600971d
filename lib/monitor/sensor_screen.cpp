#include "monitor/sensor_screen.h"

#include <algorithm>
#include <cmath>

namespace lyapcast {
namespace {

double Median(std::vector<double>& v) {
  const auto mid = v.begin() + static_cast<std::ptrdiff_t>(v.size() / 2);
  std::nth_element(v.begin(), mid, v.end());
  return *mid;
}

}  // namespace

std::string_view SuspectKindName(SuspectKind k) {
  switch (k) {
    case SuspectKind::kBadValue: return "bad_value";
    case SuspectKind::kRange: return "range";
    case SuspectKind::kOutlier: return "outlier";
    case SuspectKind::kSpike: return "spike";
    case SuspectKind::kStuck: return "stuck";
  }
  return "?";
}

SensorScreen::SensorScreen(std::vector<ChannelQuality> channels)
    : channels_(channels.size()), counts_(channels.size(), std::array<std::int64_t, kSuspectKinds>{}) {
  for (std::size_t c = 0; c < channels.size(); ++c) channels_[c].quality = std::move(channels[c]);
}

void SensorScreen::Update(Channel& ch) {
  scratch_.assign(ch.values.begin(), ch.values.end());
  ch.median = Median(scratch_);
  for (double& x : scratch_) x = std::abs(x - ch.median);
  ch.mad = Median(scratch_);
  if (!ch.rates.empty()) {
    scratch_.assign(ch.rates.begin(), ch.rates.end());
    ch.rate_scale = Median(scratch_);
    const auto zeros = std::count(ch.rates.begin(), ch.rates.end(), 0.0);
    ch.repeat_share = static_cast<double>(zeros) / static_cast<double>(ch.rates.size());
  }
  ch.since_update = 0;
}

void SensorScreen::Accept(Channel& ch, DataTime t, double v) {
  // A run of repeats adds one zero rate, not one per repeat: the share of
  // zeros then counts how often the channel starts repeating, which a stuck
  // spell (accepted up to kStuckRun - 1 repeats) barely changes.
  if (ch.has_last && t > ch.last_t && ch.repeat_run < 2) {
    const double rate = std::abs(v - ch.last_v) / Seconds(t - ch.last_t);
    if (ch.rates.size() < static_cast<std::size_t>(kHistory)) {
      ch.rates.push_back(rate);
    } else {
      ch.rates[ch.next_rate] = rate;
      ch.next_rate = (ch.next_rate + 1) % kHistory;
    }
  }
  if (ch.values.size() < static_cast<std::size_t>(kHistory)) {
    ch.values.push_back(v);
  } else {
    ch.values[ch.next_value] = v;
    ch.next_value = (ch.next_value + 1) % kHistory;
  }
  if (!ch.has_last || t >= ch.last_t) {
    ch.has_last = true;
    ch.last_t = t;
    ch.last_v = v;
  }
  // The robust figures are refreshed on each of the first kMinHistory
  // readings, then whenever the history has grown by as many readings as it
  // held (64, 128, 256, 512), then every kRefresh: a median costs
  // O(kHistory) on the writer thread, where every reading counts (refreshing
  // every 16 readings cost ingest 15-20 % in ingest_bench).
  const std::size_t every = std::min<std::size_t>(kRefresh, ch.values.size());
  if (++ch.since_update >= static_cast<int>(every) || ch.values.size() <= static_cast<std::size_t>(kMinHistory)) {
    Update(ch);
  }
}

std::optional<SuspectKind> SensorScreen::Check(Channel& ch, DataTime t, double v) {
  const ChannelQuality& q = ch.quality;
  if (std::find(q.bad_values.begin(), q.bad_values.end(), v) != q.bad_values.end()) return SuspectKind::kBadValue;
  if ((q.lo && v < *q.lo) || (q.hi && v > *q.hi)) return SuspectKind::kRange;
  const bool warm = ch.values.size() >= static_cast<std::size_t>(kMinHistory);
  if (warm && ch.mad > 0 && std::abs(v - ch.median) > kOutlierScale * 1.4826 * ch.mad) {
    // A level shift varies; a sentinel burst (one or a few repeated codes)
    // or a stuck sensor does not: the newest kShiftRun outliers must hold at
    // least kShiftRun / 2 distinct values.
    ++ch.outlier_run;
    ch.run.push_back(v);
    if (ch.run.size() > static_cast<std::size_t>(kShiftRun)) ch.run.erase(ch.run.begin());
    if (ch.outlier_run < kShiftRun) return SuspectKind::kOutlier;
    scratch_.assign(ch.run.begin(), ch.run.end());
    std::sort(scratch_.begin(), scratch_.end());
    const auto distinct = std::unique(scratch_.begin(), scratch_.end()) - scratch_.begin();
    if (distinct < kShiftRun / 2) return SuspectKind::kOutlier;
    // The process moved: rebuild the history from the run.
    ch.values.clear();
    ch.rates.clear();
    ch.next_value = ch.next_rate = 0;
    ch.has_last = false;
    ch.outlier_run = 0;
    ch.values.assign(ch.run.begin(), ch.run.end());
    ch.run.clear();
    Update(ch);
    return std::nullopt;
  }
  ch.outlier_run = 0;
  ch.run.clear();
  if (warm && ch.repeat_run >= kStuckRun && ch.rate_scale > 0 && ch.repeat_share <= kStuckShare) {
    return SuspectKind::kStuck;
  }
  if (warm && ch.has_last && t > ch.last_t && ch.rate_scale > 0) {
    const double rate = std::abs(v - ch.last_v) / Seconds(t - ch.last_t);
    if (rate > kSpikeScale * ch.rate_scale) {
      // A step that holds: this reading is close to the previous, flagged one.
      const bool holds = ch.last_raw_spike && t > ch.raw_t &&
                         std::abs(v - ch.raw_v) / Seconds(t - ch.raw_t) <= kSpikeScale * ch.rate_scale;
      if (!holds) return SuspectKind::kSpike;
      ch.last_t = ch.raw_t;  // continue from the new level
      ch.last_v = ch.raw_v;
    }
  }
  return std::nullopt;
}

std::uint64_t SensorScreen::Screen(Sample& s) {
  std::uint64_t marked = 0;
  const int n = std::min(static_cast<int>(channels_.size()), static_cast<int>(s.values.size()));
  for (int c = 0; c < n; ++c) {
    if (s.missing(c)) continue;
    Channel& ch = channels_[static_cast<std::size_t>(c)];
    const double v = s.values[static_cast<std::size_t>(c)];
    ch.repeat_run = ch.has_raw && s.t > ch.raw_t && v == ch.raw_v ? ch.repeat_run + 1 : 0;
    const std::optional<SuspectKind> kind = Check(ch, s.t, v);
    const bool spike = kind == SuspectKind::kSpike;
    if (kind) {
      marked |= std::uint64_t{1} << c;
      ++counts_[static_cast<std::size_t>(c)][static_cast<std::size_t>(*kind)];
    } else {
      Accept(ch, s.t, v);
    }
    ch.last_raw_spike = spike;
    ch.has_raw = true;
    ch.raw_t = s.t;
    ch.raw_v = v;
  }
  s.suspect_mask |= marked;
  s.missing_mask |= marked;
  return marked;
}

}  // namespace lyapcast
