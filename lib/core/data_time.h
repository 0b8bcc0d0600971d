// Data time: timestamps carried by samples, as int64 microseconds since the
// Unix epoch (UTC). Never mixed with wall time (see docs/design.md, "Time").
//
// Also: parsing of RFC 3339 timestamps and of the config's durations and sizes.
// All functions are pure and thread-safe.
#pragma once

#include <cstdint>
#include <string>
#include <string_view>

#include "core/status.h"

namespace lyapcast {

using DataTime = std::int64_t;   // microseconds since 1970-01-01T00:00:00Z
using Micros = std::int64_t;     // a span of time in microseconds

inline constexpr Micros kMicrosPerSecond = 1'000'000;

// Converts epoch seconds (may be fractional) to DataTime, rounding to the
// nearest microsecond. Fails for NaN, infinities and values outside
// years 0001..9999.
[[nodiscard]] Result<DataTime> DataTimeFromEpochSeconds(double seconds);

// Parses an RFC 3339 date-time: "2024-12-02T00:00:00.25Z", "...+01:00";
// 't'/'z' and a space instead of 'T' are accepted (RFC 3339 section 5.6 note).
// Fractions beyond microseconds are rounded. Leap second 60 is rejected.
[[nodiscard]] Result<DataTime> ParseRfc3339(std::string_view text);

// Formats as RFC 3339 UTC with microseconds: "2024-12-02T00:00:00.250000Z".
std::string FormatRfc3339(DataTime t);

// Data time as epoch seconds (for JSON output).
inline double ToEpochSeconds(DataTime t) { return static_cast<double>(t) / 1e6; }

// Parses a duration: "250ms", "30s", "5m", "6h", "2d", "1.5s", "1500us" or a
// plain number of seconds ("0.5"). Negative values are allowed by the parser;
// callers decide what range is valid.
[[nodiscard]] Result<Micros> ParseDuration(std::string_view text);

// Formats a duration compactly for messages and logs: "500ms", "6h", "1.5s".
std::string FormatDuration(Micros d);

// Parses a byte size: "65536", "64KiB", "16MiB", "1GiB" (binary units only).
[[nodiscard]] Result<std::uint64_t> ParseByteSize(std::string_view text);

}  // namespace lyapcast
