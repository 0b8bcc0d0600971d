// ChannelQuality: a channel's configured sanity limits for the sensor screen
// (monitor/sensor_screen.h). Owned by lib/monitor; lib/config fills one per
// channel from a feed's `quality` section. Header-only; a plain value.
#pragma once

#include <optional>
#include <vector>

namespace lyapcast {

struct ChannelQuality {
  std::optional<double> lo, hi;    // configured range (inclusive); none = unbounded
  std::vector<double> bad_values;  // configured bad-quality sentinels, compared exactly
};

}  // namespace lyapcast
