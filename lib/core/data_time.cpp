#include "core/data_time.h"

#include <charconv>
#include <cmath>
#include <cstdio>

namespace lyapcast {
namespace {

// Days since 1970-01-01 of a proleptic Gregorian civil date (H. Hinnant's
// public-domain days_from_civil algorithm).
constexpr std::int64_t DaysFromCivil(std::int64_t y, unsigned m, unsigned d) {
  y -= m <= 2;
  const std::int64_t era = (y >= 0 ? y : y - 399) / 400;
  const unsigned yoe = static_cast<unsigned>(y - era * 400);
  const unsigned doy = (153 * (m + (m > 2 ? -3 : 9)) + 2) / 5 + d - 1;
  const unsigned doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
  return era * 146097 + static_cast<std::int64_t>(doe) - 719468;
}

struct Civil {
  std::int64_t y;
  unsigned m, d;
};

constexpr Civil CivilFromDays(std::int64_t z) {
  z += 719468;
  const std::int64_t era = (z >= 0 ? z : z - 146096) / 146097;
  const unsigned doe = static_cast<unsigned>(z - era * 146097);
  const unsigned yoe = (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;
  const std::int64_t y = static_cast<std::int64_t>(yoe) + era * 400;
  const unsigned doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
  const unsigned mp = (5 * doy + 2) / 153;
  const unsigned d = doy - (153 * mp + 2) / 5 + 1;
  const unsigned m = mp < 10 ? mp + 3 : mp - 9;
  return {y + (m <= 2), m, d};
}

constexpr bool IsLeap(std::int64_t y) { return (y % 4 == 0 && y % 100 != 0) || y % 400 == 0; }

unsigned DaysInMonth(std::int64_t y, unsigned m) {
  static constexpr unsigned kDays[] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
  return m == 2 && IsLeap(y) ? 29 : kDays[m - 1];
}

// Reads exactly n decimal digits at text[pos].
bool Digits(std::string_view text, size_t pos, size_t n, unsigned& out) {
  if (pos + n > text.size()) return false;
  unsigned v = 0;
  for (size_t i = 0; i < n; ++i) {
    const char c = text[pos + i];
    if (c < '0' || c > '9') return false;
    v = v * 10 + static_cast<unsigned>(c - '0');
  }
  out = v;
  return true;
}

constexpr std::int64_t kUsPerSecond = 1'000'000;
constexpr std::int64_t kMinTime = DaysFromCivil(1, 1, 1) * 86400LL * kUsPerSecond;
constexpr std::int64_t kMaxTime = (DaysFromCivil(10000, 1, 1) * 86400LL) * kUsPerSecond - 1;

Status BadTime(std::string_view text, const char* why) {
  return Status::Invalid("'" + std::string(text.substr(0, 64)) + "' is not an RFC 3339 time (" + why +
                         "); expected e.g. 2024-12-02T08:30:00.25Z");
}

}  // namespace

Result<DataTime> DataTimeFromEpochSeconds(double seconds) {
  if (!std::isfinite(seconds)) return Status::Invalid("time is not a finite number");
  const double us = std::nearbyint(seconds * 1e6);
  if (us < static_cast<double>(kMinTime) || us > static_cast<double>(kMaxTime)) {
    return Status::Invalid("time is outside years 0001..9999");
  }
  return DataTimeFromMicros(static_cast<std::int64_t>(us));
}

Micros MicrosFromSeconds(double seconds) { return Micros(static_cast<std::int64_t>(std::llround(seconds * 1e6))); }

Result<DataTime> ParseRfc3339(std::string_view text) {
  unsigned year, month, day, hour, minute, second;
  if (text.size() < 20) return BadTime(text, "too short");
  if (!Digits(text, 0, 4, year) || text[4] != '-' || !Digits(text, 5, 2, month) || text[7] != '-' ||
      !Digits(text, 8, 2, day)) {
    return BadTime(text, "date must be YYYY-MM-DD");
  }
  const char sep = text[10];
  if (sep != 'T' && sep != 't' && sep != ' ') return BadTime(text, "date and time must be separated by 'T'");
  if (!Digits(text, 11, 2, hour) || text[13] != ':' || !Digits(text, 14, 2, minute) || text[16] != ':' ||
      !Digits(text, 17, 2, second)) {
    return BadTime(text, "time must be hh:mm:ss");
  }
  if (year < 1 || month < 1 || month > 12 || day < 1 || day > DaysInMonth(year, month)) {
    return BadTime(text, "no such date");
  }
  if (hour > 23 || minute > 59 || second > 59) return BadTime(text, "no such time of day");
  size_t pos = 19;
  std::int64_t frac_us = 0;
  if (pos < text.size() && text[pos] == '.') {
    ++pos;
    const size_t start = pos;
    std::int64_t scale = 100000;
    int round_digit = -1;
    while (pos < text.size() && text[pos] >= '0' && text[pos] <= '9') {
      const int digit = text[pos] - '0';
      if (scale >= 1) {
        frac_us += digit * scale;
        scale /= 10;
      } else if (round_digit < 0) {
        round_digit = digit;
      }
      ++pos;
    }
    if (pos == start) return BadTime(text, "empty fraction of a second");
    if (round_digit >= 5) frac_us += 1;
  }
  std::int64_t offset_s = 0;
  if (pos < text.size() && (text[pos] == 'Z' || text[pos] == 'z')) {
    ++pos;
  } else if (pos < text.size() && (text[pos] == '+' || text[pos] == '-')) {
    unsigned oh, om;
    if (!Digits(text, pos + 1, 2, oh) || pos + 3 >= text.size() || text[pos + 3] != ':' ||
        !Digits(text, pos + 4, 2, om) || oh > 23 || om > 59) {
      return BadTime(text, "offset must be Z or +hh:mm");
    }
    offset_s = (text[pos] == '+' ? 1 : -1) * static_cast<std::int64_t>(oh * 3600 + om * 60);
    pos += 6;
  } else {
    return BadTime(text, "missing time zone offset (Z or +hh:mm)");
  }
  if (pos != text.size()) return BadTime(text, "unexpected characters after the offset");
  const std::int64_t secs = DaysFromCivil(year, month, day) * 86400 + hour * 3600 + minute * 60 + second - offset_s;
  const std::int64_t t = secs * kUsPerSecond + frac_us;
  if (t < kMinTime || t > kMaxTime) return BadTime(text, "outside years 0001..9999");
  return DataTimeFromMicros(t);
}

Result<WallTime> ParseWallRfc3339(std::string_view text) {
  auto t = ParseRfc3339(text);
  if (!t.ok()) return t.status();
  return WallTimeAtData(*t);
}

std::string FormatRfc3339(WallTime t) { return FormatRfc3339(DataTimeAtWall(t)); }

std::string FormatRfc3339(DataTime time) {
  const std::int64_t t = EpochMicros(time);
  std::int64_t secs = t / kUsPerSecond;
  std::int64_t us = t % kUsPerSecond;
  if (us < 0) {
    us += kUsPerSecond;
    secs -= 1;
  }
  std::int64_t days = secs / 86400;
  std::int64_t sod = secs % 86400;
  if (sod < 0) {
    sod += 86400;
    days -= 1;
  }
  const Civil c = CivilFromDays(days);
  char buf[40];
  std::snprintf(buf, sizeof buf, "%04lld-%02u-%02uT%02lld:%02lld:%02lld.%06lldZ", static_cast<long long>(c.y), c.m,
                c.d, static_cast<long long>(sod / 3600), static_cast<long long>(sod / 60 % 60),
                static_cast<long long>(sod % 60), static_cast<long long>(us));
  return buf;
}

Result<Micros> ParseDuration(std::string_view text) {
  const auto bad = [&] {
    return Status::Invalid("'" + std::string(text) +
                           "' is not a duration; use a number with a unit: 250ms, 30s, 5m, 6h, 2d (plain numbers are seconds)");
  };
  if (text.empty()) return bad();
  double value = 0;
  const auto [end, ec] = std::from_chars(text.data(), text.data() + text.size(), value);
  if (ec != std::errc() || !std::isfinite(value)) return bad();
  const std::string_view unit = text.substr(static_cast<size_t>(end - text.data()));
  double scale;
  if (unit.empty() || unit == "s") scale = 1e6;
  else if (unit == "ms") scale = 1e3;
  else if (unit == "us") scale = 1;
  else if (unit == "m" || unit == "min") scale = 60e6;
  else if (unit == "h") scale = 3600e6;
  else if (unit == "d") scale = 86400e6;
  else return bad();
  const double us = std::nearbyint(value * scale);
  if (std::fabs(us) > 9.2e18) return bad();
  return Micros(static_cast<std::int64_t>(us));
}

std::string FormatDuration(Micros span) {
  const std::int64_t d = span.count();
  const auto fmt = [](double v, const char* unit) {
    char buf[48];
    std::snprintf(buf, sizeof buf, "%g%s", v, unit);
    return std::string(buf);
  };
  const std::int64_t a = d < 0 ? -d : d;
  if (a == 0) return "0s";
  if (a % (86400 * kUsPerSecond) == 0) return fmt(static_cast<double>(d) / 86400e6, "d");
  if (a % (3600 * kUsPerSecond) == 0) return fmt(static_cast<double>(d) / 3600e6, "h");
  if (a % (60 * kUsPerSecond) == 0) return fmt(static_cast<double>(d) / 60e6, "m");
  if (a >= kUsPerSecond) return fmt(static_cast<double>(d) / 1e6, "s");
  if (a % 1000 == 0) return fmt(static_cast<double>(d) / 1e3, "ms");
  return fmt(static_cast<double>(d), "us");
}

Result<std::uint64_t> ParseByteSize(std::string_view text) {
  const auto bad = [&] {
    return Status::Invalid("'" + std::string(text) + "' is not a size; use bytes or KiB/MiB/GiB, e.g. 64KiB");
  };
  std::uint64_t value = 0;
  const auto [end, ec] = std::from_chars(text.data(), text.data() + text.size(), value);
  if (ec != std::errc() || end == text.data()) return bad();
  const std::string_view unit = text.substr(static_cast<size_t>(end - text.data()));
  std::uint64_t scale;
  if (unit.empty() || unit == "B") scale = 1;
  else if (unit == "KiB") scale = 1ULL << 10;
  else if (unit == "MiB") scale = 1ULL << 20;
  else if (unit == "GiB") scale = 1ULL << 30;
  else return bad();
  if (value > UINT64_MAX / scale) return bad();
  return value * scale;
}

}  // namespace lyapcast
