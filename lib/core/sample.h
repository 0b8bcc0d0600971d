// Sample: one timestamped vector of a feed's channels, some possibly missing.
#pragma once

#include <cstdint>
#include <vector>

#include "core/data_time.h"

namespace lyapcast {

// A feed has at most this many channels, so a missing-channel mask fits a word.
inline constexpr int kMaxChannels = 64;

struct Sample {
  DataTime t{};
  // One value per channel of the feed, in the feed's channel order. A
  // missing channel's value is NaN and its bit in missing_mask is set.
  std::vector<double> values;
  std::uint64_t missing_mask = 0;  // bit c set <=> channel c is missing
  // Channels whose reading was screened as SUSPECT (out of range, a
  // bad-quality sentinel, a spike; monitor/sensor_screen.h). A suspect
  // channel is also missing, so nothing trains on, scores or forecasts from
  // it; its raw reading stays in values[c] (not NaN) to be stored and shown.
  std::uint64_t suspect_mask = 0;

  bool missing(int channel) const { return (missing_mask >> channel) & 1U; }
  bool suspect(int channel) const { return (suspect_mask >> channel) & 1U; }
  bool complete() const { return missing_mask == 0; }
  friend bool operator==(const Sample& a, const Sample& b);
};

// A sample addressed to a feed by its index in Config::feeds.
struct FeedSample {
  std::uint32_t feed = 0;
  Sample sample;
};

}  // namespace lyapcast
