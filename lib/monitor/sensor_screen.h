// SensorScreen: per-channel sanity checks on one feed's readings before
// they are stored, so a failing sensor's values are kept and shown but
// never trained on, scored or forecast from (Sample::suspect_mask).
//
// A present reading of channel c is SUSPECT when, in this order:
//   1. bad value: it equals one of the channel's configured bad-quality
//      sentinels exactly (plants write e.g. -9999 or 1e30 for a bad reading);
//   2. range: it lies outside the channel's configured [lo, hi];
//   3. outlier: it lies more than kOutlierScale robust deviations from the
//      median of the channel's recent accepted readings (robust deviation =
//      1.4826 x the median absolute deviation, MAD: one absurd value cannot
//      swamp it), refreshed every kRefresh readings. Needs kMinHistory
//      accepted readings and MAD > 0. Common
//      practice for robust outlier screens uses 3 to 5; a chaotic process
//      roams far within its attractor and shifts level after a real change,
//      so the screen only catches the absurd: kOutlierScale = 20.
//      A real level shift is told from a sentinel burst by its variety: when
//      kShiftRun outliers in a row hold at least kShiftRun / 2 distinct
//      values (a burst of one or two codes such as -9999 and 1e30 does not),
//      the history restarts from them (those already marked stay marked);
//   4. stuck: it is the kStuckRun-th or later reading in a row equal to the
//      one before it (bit for bit) on a channel that normally moves: warm,
//      a median rate > 0, and at most kStuckShare of its recent accepted
//      readings start a run of repeats (a quantized slow signal repeats
//      often; its stuck sensor cannot be told this way and is not
//      screened). The first kStuckRun - 1 repeats are accepted; the first
//      reading that differs ends the run;
//   5. spike: its rate of change from the channel's last accepted reading
//      exceeds kSpikeScale x the median rate over recent accepted
//      consecutive readings (a one-step innovation screen on a robust
//      scale). A step that holds (the next reading is close to the flagged
//      one) is accepted from then on: it costs one suspect reading.
// Readings never enter the history once suspect. A channel that is constant
// (MAD 0, rate 0) is not screened by 3, 4 and 5.
//
// Not thread-safe; the writer thread calls it (SampleWriter::SetScreen).
#pragma once

#include <array>
#include <cstdint>
#include <optional>
#include <string_view>
#include <vector>

#include "core/data_time.h"
#include "core/sample.h"
#include "monitor/channel_quality.h"

namespace lyapcast {

enum class SuspectKind { kBadValue, kRange, kOutlier, kSpike, kStuck };
inline constexpr int kSuspectKinds = 5;
std::string_view SuspectKindName(SuspectKind k);  // "bad_value", "range", "outlier", "spike", "stuck"

class SensorScreen {
 public:
  static constexpr int kHistory = 512;     // accepted readings per channel kept for the robust figures
  static constexpr int kMinHistory = 64;   // before the outlier and spike rules apply
  static constexpr double kOutlierScale = 20;
  static constexpr double kSpikeScale = 30;
  static constexpr int kShiftRun = 32;
  static constexpr int kRefresh = 512;     // accepted readings between refreshes of the robust figures
  static constexpr int kStuckRun = 32;      // repeats in a row that make a moving channel stuck
  static constexpr double kStuckShare = 0.05;  // at most this share of accepted readings start a repeat run

  // One entry per channel of the feed (empty entries: robust rules only).
  explicit SensorScreen(std::vector<ChannelQuality> channels);

  // Marks the suspect channels of `s` (suspect and missing bits; the raw
  // reading stays in values) and returns the newly marked mask. Samples
  // should come in time order; an older one is screened by rules 1-3 only.
  std::uint64_t Screen(Sample& s);

  // Suspect readings so far, per channel and kind.
  const std::vector<std::array<std::int64_t, kSuspectKinds>>& counts() const { return counts_; }

 private:
  struct Channel {
    ChannelQuality quality;
    std::vector<double> values;  // ring of accepted readings
    std::vector<double> rates;   // ring of |rate| between accepted consecutive readings
    std::size_t next_value = 0, next_rate = 0;
    double median = 0, mad = 0, rate_scale = 0;
    double repeat_share = 0;  // share of the rates ring that are 0 (one per run of repeats)
    int repeat_run = 0;       // readings in a row equal to the one before (raw)
    int since_update = 0;
    bool has_last = false;
    DataTime last_t{};
    double last_v = 0;
    bool last_raw_spike = false;  // the previous reading was flagged a spike
    bool has_raw = false;  // raw_t, raw_v: the previous reading, suspect or not
    DataTime raw_t{};
    double raw_v = 0;
    int outlier_run = 0;
    std::vector<double> run;  // the newest outliers of the current run, at most kShiftRun
  };
  std::optional<SuspectKind> Check(Channel& ch, DataTime t, double v);
  void Accept(Channel& ch, DataTime t, double v);
  void Update(Channel& ch);

  std::vector<Channel> channels_;
  std::vector<std::array<std::int64_t, kSuspectKinds>> counts_;
  std::vector<double> scratch_;
};

}  // namespace lyapcast
