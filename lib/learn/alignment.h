// Alignment: how a channel's value at a chosen time is formed from samples
// that arrive with jitter, at another rate than the model step, or with a
// different sampling phase after an outage. Training (ResampleToGrid in
// learn/pairs.h) and the drift monitor (monitor/drift_monitor.h) both use
// this one rule, so what the model is trained on and what it is scored on
// are the same kind of state.
//
// The rule, per channel, for a time `at`, with a the newest sample at or
// before `at` holding the channel and b the oldest at or after it:
//   1. a.t == at or b.t == at: that sample's value (an on-grid sample is
//      taken as it is);
//   2. else, when both exist and b.t - a.t <= max_span: the linear
//      interpolation between them. Dense data (sampled at or faster than
//      the step, jittered or not, any phase) are read between their
//      neighbours; interpolation error is about (b.t - a.t)^2 / 8 times the
//      second derivative, far below what a jitter of a few per cent of the
//      step costs when the value is taken as if it were on time;
//   3. else the nearer of a and b when within `tolerance` of `at` (sparse
//      data: samples several steps apart are taken at the nearest step, not
//      blended across a span the model has to predict);
//   4. else, when the channel may be carried (hold > 0) and a is at most
//      `hold` old: a's value, CARRIED (a slow channel such as a lab assay
//      next to fast sensors);
//   5. else missing.
// A carried value may complete a state (an input); it is never a training
// or scoring target, since it is the old reading, not the value now.
//
// Pure functions; thread-safe.
#pragma once

#include <algorithm>
#include <cstdint>
#include <limits>
#include <optional>
#include <span>
#include <utility>
#include <vector>

#include "core/data_time.h"
#include "core/sample.h"

namespace lyapcast {

struct AlignmentOptions {
  AlignmentOptions() = default;
  AlignmentOptions(Micros step_in, Micros tolerance_in = {}, Micros max_span_in = {},  // NOLINT: brace-init
                   std::vector<Micros> hold_in = {})
      : step(step_in), tolerance(tolerance_in), max_span(max_span_in), hold(std::move(hold_in)) {}

  Micros step{};       // the model step; > 0
  Micros tolerance{};  // nearest-sample tolerance; 0 means step / 4
  Micros max_span{};   // widest bracket interpolated across; 0 means 3 * step / 2
  std::vector<Micros> hold;  // per channel, how long a value may be carried; empty or 0 = never

  Micros tolerance_or_default() const { return tolerance > Micros{} ? tolerance : step / 4; }
  Micros max_span_or_default() const { return max_span > Micros{} ? max_span : step * 3 / 2; }
  Micros hold_for(int channel) const {
    return channel < static_cast<int>(hold.size()) ? hold[static_cast<std::size_t>(channel)] : Micros{};
  }
  Micros longest_hold() const {
    Micros m{};
    for (Micros h : hold) m = std::max(m, h);
    return m;
  }
};

// One observation of one channel.
struct ChannelPoint {
  DataTime t{};
  double value = 0;
};

// How a value was formed (for counts and for saying so in a response).
enum class Formed { kMissing, kExact, kInterpolated, kNearest, kCarried };

struct FormedValue {
  Formed how = Formed::kMissing;
  double value = 0;  // meaningful unless how == kMissing
};

// The rule above for one channel; `a` and `b` are its bracketing
// observations (a->t <= at <= b->t), either may be null; `hold` the
// channel's (options.hold_for(channel)).
FormedValue ValueAt(const ChannelPoint* a, const ChannelPoint* b, DataTime at, const AlignmentOptions& options,
                    Micros hold = Micros{});

// The median time between consecutive samples of `sorted` (in time
// order); none for fewer than two samples. How a feed is really sampled,
// whatever its configured step.
std::optional<Micros> MedianSpacing(std::span<const Sample> sorted);

// The state at `at` from `samples`, a sequence sorted by strictly increasing
// time with operator[] and size() (a std::vector<Sample>, a span, or a ring
// buffer's view), each sample's values sized `channels`. Writes one value per
// channel to out[0..channels) (NaN where missing) and returns the missing
// mask (bit c set: channel c could not be formed); `carried`, when given,
// gets the mask of channels whose value was carried. Looks no further from
// `at` than max(max_span, tolerance, the channel's hold).
template <typename Sorted>
std::uint64_t StateAt(const Sorted& samples, DataTime at, int channels, const AlignmentOptions& options,
                      double* out, std::uint64_t* carried = nullptr);

// ---- implementation of the template ----

namespace alignment_detail {
std::int64_t UpperBoundByTime(std::int64_t n, DataTime at, const auto& time_of) {
  std::int64_t lo = 0, hi = n;  // first index with time > at
  while (lo < hi) {
    const std::int64_t mid = lo + (hi - lo) / 2;
    if (time_of(mid) <= at) {
      lo = mid + 1;
    } else {
      hi = mid;
    }
  }
  return lo;
}
}  // namespace alignment_detail

template <typename Sorted>
std::uint64_t StateAt(const Sorted& samples, DataTime at, int channels, const AlignmentOptions& options,
                      double* out, std::uint64_t* carried) {
  const auto n = static_cast<std::int64_t>(samples.size());
  const Micros near = std::max(options.max_span_or_default(), options.tolerance_or_default());
  if (carried != nullptr) *carried = 0;
  const std::int64_t first_after =
      alignment_detail::UpperBoundByTime(n, at, [&](std::int64_t i) { return samples[i].t; });
  std::uint64_t missing = 0;
  for (int c = 0; c < channels; ++c) {
    ChannelPoint a, b;
    bool has_a = false, has_b = false;
    const Micros hold = options.hold_for(c);
    const Micros reach = std::max(near, hold);
    for (std::int64_t i = first_after - 1; i >= 0 && at - samples[i].t <= reach; --i) {
      const Sample& s = samples[i];
      if (s.missing(c) || static_cast<int>(s.values.size()) <= c) continue;
      a = {s.t, s.values[static_cast<std::size_t>(c)]};
      has_a = true;
      break;
    }
    // An exact hit is the sample just before first_after; b is only needed otherwise.
    if (!(has_a && a.t == at)) {
      for (std::int64_t i = first_after; i < n && samples[i].t - at <= near; ++i) {
        const Sample& s = samples[i];
        if (s.missing(c) || static_cast<int>(s.values.size()) <= c) continue;
        b = {s.t, s.values[static_cast<std::size_t>(c)]};
        has_b = true;
        break;
      }
    }
    const FormedValue v = ValueAt(has_a ? &a : nullptr, has_b ? &b : nullptr, at, options, hold);
    if (v.how == Formed::kCarried && carried != nullptr) *carried |= std::uint64_t{1} << c;
    if (v.how == Formed::kMissing) {
      missing |= std::uint64_t{1} << c;
      out[c] = std::numeric_limits<double>::quiet_NaN();
    } else {
      out[c] = v.value;
    }
  }
  return missing;
}

}  // namespace lyapcast
