// Time in lyapcast: three types that never mix silently.
//
//   Micros    a span of time (data or wall), whole microseconds
//             (std::chrono::microseconds: arithmetic and comparisons with
//             other durations; `.count()` only where a number leaves C++,
//             e.g. for SQLite or a file).
//   DataTime  a point in data time: the timestamps carried by samples, as
//             microseconds since the Unix epoch (UTC). Cadence, windows,
//             training ranges and forecasts live here (docs/design.md "Time").
//   WallTime  a point on the machine's real-time clock, microseconds since the
//             Unix epoch: data age, model age, process uptime and the
//             future-skew check only (core/wall_clock.h reads it).
//
// DataTime and WallTime are time points of different clocks: subtracting
// one from the other, or passing one where the other is expected, does not
// compile. Where the two must meet (e.g. the future-skew check compares a
// sample's time with wall time), convert explicitly with
// DataTimeAtWall / WallTimeAtData and say why there.
//
// Also: parsing of RFC 3339 timestamps and of the config's durations and sizes.
// All functions are pure and thread-safe.
#pragma once

#include <chrono>
#include <cstdint>
#include <string>
#include <string_view>

#include "core/status.h"

namespace lyapcast {

using Micros = std::chrono::microseconds;
inline constexpr Micros kSecond = std::chrono::seconds(1);

// Tag clocks: only their time points are used (no now() on DataClock).
struct DataClock {
  using rep = std::int64_t;
  using period = std::micro;
  using duration = Micros;
  using time_point = std::chrono::time_point<DataClock, Micros>;
  static constexpr bool is_steady = false;
};
struct WallClock {
  using rep = std::int64_t;
  using period = std::micro;
  using duration = Micros;
  using time_point = std::chrono::time_point<WallClock, Micros>;
  static constexpr bool is_steady = false;
};

using DataTime = DataClock::time_point;  // DataTime{} is the epoch, used as "none" in a few places
using WallTime = WallClock::time_point;

// Microseconds since the epoch, in and out (storage, files, wire formats).
constexpr DataTime DataTimeFromMicros(std::int64_t us) { return DataTime(Micros(us)); }
constexpr WallTime WallTimeFromMicros(std::int64_t us) { return WallTime(Micros(us)); }
constexpr std::int64_t EpochMicros(DataTime t) { return t.time_since_epoch().count(); }
constexpr std::int64_t EpochMicros(WallTime t) { return t.time_since_epoch().count(); }

// The same instant on the other clock: only where a data timestamp is
// deliberately compared with the machine's clock.
constexpr DataTime DataTimeAtWall(WallTime t) { return DataTime(t.time_since_epoch()); }
constexpr WallTime WallTimeAtData(DataTime t) { return WallTime(t.time_since_epoch()); }

// A span in seconds (for JSON, logs and arithmetic with rates).
constexpr double Seconds(Micros d) { return std::chrono::duration<double>(d).count(); }
// Seconds to a span, rounded to the nearest microsecond (finite input).
Micros MicrosFromSeconds(double seconds);

// Converts epoch seconds (may be fractional) to DataTime, rounding to the
// nearest microsecond. Fails for NaN, infinities and values outside
// years 0001..9999.
[[nodiscard]] Result<DataTime> DataTimeFromEpochSeconds(double seconds);

// Parses an RFC 3339 date-time: "2024-12-02T00:00:00.25Z", "...+01:00";
// 't'/'z' and a space instead of 'T' are accepted (RFC 3339 section 5.6 note).
// Fractions beyond microseconds are rounded. Leap second 60 is rejected.
[[nodiscard]] Result<DataTime> ParseRfc3339(std::string_view text);
// The same for a wall-clock timestamp (e.g. a model's created_at).
[[nodiscard]] Result<WallTime> ParseWallRfc3339(std::string_view text);

// Formats as RFC 3339 UTC with microseconds: "2024-12-02T00:00:00.250000Z".
std::string FormatRfc3339(DataTime t);
std::string FormatRfc3339(WallTime t);

// Epoch seconds (for JSON output).
inline double ToEpochSeconds(DataTime t) { return static_cast<double>(EpochMicros(t)) / 1e6; }
inline double ToEpochSeconds(WallTime t) { return static_cast<double>(EpochMicros(t)) / 1e6; }

// Parses a duration: "250ms", "30s", "5m", "6h", "2d", "1.5s", "1500us" or a
// plain number of seconds ("0.5"). Negative values are allowed by the parser;
// callers decide what range is valid.
[[nodiscard]] Result<Micros> ParseDuration(std::string_view text);

// Formats a duration compactly for messages and logs: "500ms", "6h", "1.5s".
std::string FormatDuration(Micros d);

// Parses a byte size: "65536", "64KiB", "16MiB", "1GiB" (binary units only).
[[nodiscard]] Result<std::uint64_t> ParseByteSize(std::string_view text);

}  // namespace lyapcast
