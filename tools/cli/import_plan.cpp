#include "import_plan.h"

#include <fmt/format.h>

#include <algorithm>
#include <charconv>
#include <cmath>
#include <cstdint>
#include <system_error>

namespace lyapcast::cli {
namespace {

std::string_view Trim(std::string_view s) {
  const auto first = s.find_first_not_of(" \t");
  if (first == std::string_view::npos) return {};
  const auto last = s.find_last_not_of(" \t");
  return s.substr(first, last - first + 1);
}

std::string Lower(std::string_view s) {
  std::string out(s);
  for (char& c : out) {
    if (c >= 'A' && c <= 'Z') c = static_cast<char>(c - 'A' + 'a');
  }
  return out;
}

// For messages: at most 64 bytes of a cell, control bytes as '?'.
std::string Quote(std::string_view s) {
  std::string out = "'";
  for (std::size_t i = 0; i < s.size() && i < 64; ++i) {
    const auto b = static_cast<unsigned char>(s[i]);
    out += b < 0x20 || b == 0x7F ? '?' : s[i];
  }
  return out + (s.size() > 64 ? "...'" : "'");
}

std::string ListColumns(const std::vector<std::string>& header) {
  constexpr std::size_t kMost = 40;
  std::string out;
  for (std::size_t k = 0; k < header.size() && k < kMost; ++k) {
    out += fmt::format("{}{} ({})", out.empty() ? "" : ", ", Quote(header[k]), k + 1);
  }
  if (header.size() > kMost) out += fmt::format(", ... ({} columns)", header.size());
  return out;
}

std::string ListChannels(const std::vector<std::string>& channels) {
  std::string out;
  for (const std::string& c : channels) out += (out.empty() ? "" : ", ") + c;
  return out;
}

enum class NumberStatus { kOk, kNotANumber, kOutOfRange, kNonFinite };

// A decimal number ("-12.5", "+3", ".5", "1.5e3") times 10^unit_exp,
// exactly, rounded half away from zero to an integer.
NumberStatus ParseScaledDecimal(std::string_view s, int unit_exp, std::int64_t& out) {
  std::size_t i = 0;
  bool negative = false;
  if (i < s.size() && (s[i] == '+' || s[i] == '-')) negative = s[i++] == '-';
  std::string digits;
  std::int64_t exp10 = 0;
  bool any = false;
  const auto digit = [&](std::size_t k) { return k < s.size() && s[k] >= '0' && s[k] <= '9'; };
  for (; digit(i); ++i, any = true) digits += s[i];
  if (i < s.size() && s[i] == '.') {
    for (++i; digit(i); ++i, any = true, --exp10) digits += s[i];
  }
  if (!any) return NumberStatus::kNotANumber;
  if (i < s.size() && (s[i] == 'e' || s[i] == 'E')) {
    ++i;
    bool exp_negative = false;
    if (i < s.size() && (s[i] == '+' || s[i] == '-')) exp_negative = s[i++] == '-';
    if (!digit(i)) return NumberStatus::kNotANumber;
    std::int64_t e = 0;
    for (; digit(i); ++i) e = std::min<std::int64_t>(e * 10 + (s[i] - '0'), 100'000);
    exp10 += exp_negative ? -e : e;
  }
  if (i != s.size()) return NumberStatus::kNotANumber;
  digits.erase(0, std::min(digits.find_first_not_of('0'), digits.size()));
  const std::int64_t e = exp10 + unit_exp;
  std::int64_t value = 0;
  if (digits.empty()) {
    value = 0;
  } else if (e >= 0) {
    if (static_cast<std::int64_t>(digits.size()) + e > 18) return NumberStatus::kOutOfRange;
    for (const char c : digits) value = value * 10 + (c - '0');
    for (std::int64_t k = 0; k < e; ++k) value *= 10;
  } else {
    const std::int64_t whole = static_cast<std::int64_t>(digits.size()) + e;  // digits before the point
    if (whole > 18) return NumberStatus::kOutOfRange;
    for (std::int64_t k = 0; k < whole; ++k) value = value * 10 + (digits[static_cast<std::size_t>(k)] - '0');
    const char round = whole >= 0 ? digits[static_cast<std::size_t>(whole)] : '0';
    if (round >= '5') ++value;
  }
  out = negative ? -value : value;
  return NumberStatus::kOk;
}

Result<DataTime> EpochTime(std::string_view text, int unit_exp, const char* what, const char* example) {
  std::int64_t us = 0;
  const NumberStatus ns = ParseScaledDecimal(text, unit_exp, us);
  if (ns == NumberStatus::kOk) {
    // The library's range check (years 0001..9999) on a value it can hold exactly enough.
    if (auto t = DataTimeFromEpochSeconds(static_cast<double>(us) / 1e6); !t.ok()) {
      return Status::Invalid(fmt::format("{} as {}: {}", Quote(text), what, t.status().message()));
    }
    return DataTimeFromMicros(us);
  }
  if (ns == NumberStatus::kOutOfRange) {
    return Status::Invalid(fmt::format("{} as {}: time is outside years 0001..9999", Quote(text), what));
  }
  return Status::Invalid(fmt::format("{} is not {} (expected a number such as {})", Quote(text), what, example));
}

// A value cell: a decimal number, '+' allowed.
NumberStatus ParseValue(std::string_view s, double& out) {
  const char* begin = s.data();
  const char* end = s.data() + s.size();
  if (begin != end && *begin == '+' && end - begin > 1 && begin[1] != '-' && begin[1] != '+') ++begin;
  const auto [ptr, ec] = std::from_chars(begin, end, out);
  if (ec == std::errc::result_out_of_range && ptr == end) return NumberStatus::kOutOfRange;
  if (ec != std::errc() || ptr != end) return NumberStatus::kNotANumber;
  if (!std::isfinite(out)) return NumberStatus::kNonFinite;
  return NumberStatus::kOk;
}

// "1,5" looks like a decimal comma.
bool LooksLikeDecimalComma(std::string_view s) {
  const auto comma = s.find(',');
  if (comma == std::string_view::npos || s.find(',', comma + 1) != std::string_view::npos) return false;
  double v = 0;
  std::string dotted(s);
  dotted[comma] = '.';
  return ParseValue(dotted, v) == NumberStatus::kOk;
}

// The column named `name`: exactly, else case-insensitively when only one matches.
// `context` leads the messages ("--map 'X=flow'").
Result<std::size_t> FindColumn(const std::vector<std::string>& header, const std::string& name,
                               const std::string& context) {
  for (const bool exact : {true, false}) {
    std::vector<std::size_t> hits;
    for (std::size_t k = 0; k < header.size(); ++k) {
      if (exact ? header[k] == name : Lower(header[k]) == Lower(name)) hits.push_back(k);
    }
    if (hits.size() == 1) return hits[0];
    if (hits.size() > 1) {
      std::string where;
      for (const std::size_t k : hits) where += fmt::format("{}{}", where.empty() ? "" : ", ", k + 1);
      return Status::Invalid(fmt::format("{}: the header has {} columns named {} (columns {}); rename one in the file",
                                         context, hits.size(), Quote(name), where));
    }
  }
  return Status::Invalid(
      fmt::format("{}: no column named {}; the header: {}", context, Quote(name), ListColumns(header)));
}

// Splits "LEFT=RIGHT" at the last '='.
bool SplitAssignment(const std::string& text, std::string& left, std::string& right) {
  const auto eq = text.rfind('=');
  if (eq == std::string::npos || eq == 0 || eq + 1 == text.size()) return false;
  left = std::string(Trim(std::string_view(text).substr(0, eq)));
  right = std::string(Trim(std::string_view(text).substr(eq + 1)));
  return !left.empty() && !right.empty();
}

// RFC 3339; a local time without an offset (as many historians write) is
// refused with a message that says so. `or_else` ends the other messages.
Result<DataTime> Rfc3339(std::string_view text, std::string_view or_else = "") {
  auto t = ParseRfc3339(text);
  if (t.ok()) return t;
  if (ParseRfc3339(std::string(text) + "Z").ok()) {
    return Status::Invalid(
        fmt::format("{} has no UTC offset: an RFC 3339 time ends in Z or +hh:mm (e.g. {}Z)", Quote(text), text));
  }
  return Status::Invalid(t.status().message() + std::string(or_else));
}

}  // namespace

Result<TimeFormat> ParseTimeFormat(std::string_view text) {
  if (text == "auto") return TimeFormat::kAuto;
  if (text == "rfc3339") return TimeFormat::kRfc3339;
  if (text == "epoch-s") return TimeFormat::kEpochSeconds;
  if (text == "epoch-ms") return TimeFormat::kEpochMillis;
  return Status::Invalid(fmt::format("--time-format {}: expected auto, rfc3339, epoch-s or epoch-ms", Quote(text)));
}

const char* TimeFormatName(TimeFormat format) {
  switch (format) {
    case TimeFormat::kAuto:
      return "auto";
    case TimeFormat::kRfc3339:
      return "rfc3339";
    case TimeFormat::kEpochSeconds:
      return "epoch-s";
    case TimeFormat::kEpochMillis:
      return "epoch-ms";
  }
  return "auto";
}

Result<DataTime> ParseTimeCell(std::string_view text, TimeFormat format) {
  text = Trim(text);
  switch (format) {
    case TimeFormat::kRfc3339:
      return Rfc3339(text);
    case TimeFormat::kEpochSeconds:
      return EpochTime(text, 6, "epoch seconds", "1767225600.25");
    case TimeFormat::kEpochMillis:
      return EpochTime(text, 3, "epoch milliseconds", "1767225600250");
    case TimeFormat::kAuto:
      break;
  }
  std::int64_t us = 0;
  if (ParseScaledDecimal(text, 6, us) != NumberStatus::kNotANumber) {
    return EpochTime(text, 6, "epoch seconds", "1767225600.25");
  }
  return Rfc3339(text, " or epoch seconds such as 1767225600.25");
}

std::string EpochMicrosText(DataTime t) {
  const std::int64_t us = EpochMicros(t);
  const bool negative = us < 0;
  const std::uint64_t a = negative ? static_cast<std::uint64_t>(-(us + 1)) + 1 : static_cast<std::uint64_t>(us);
  return fmt::format("{}{}.{:06}", negative ? "-" : "", a / 1'000'000, a % 1'000'000);
}

std::string ImportPlan::Describe() const {
  std::string out = fmt::format("time <- {} (column {}, {})", Quote(header[time_column]), time_column + 1,
                                TimeFormatName(time_format));
  for (std::size_t c = 0; c < channels.size(); ++c) {
    if (!column_of[c]) {
      // A column named like the channel in another case is the likely one.
      std::string hint;
      for (const std::size_t k : ignored) {
        if (Lower(header[k]) == Lower(channels[c]))
          hint = fmt::format("; --map {}?", Quote(header[k] + "=" + channels[c]));
      }
      out += fmt::format("; {}: no column (missing in every row{})", channels[c], hint);
      continue;
    }
    out += fmt::format("; {} <- {} ({})", channels[c], Quote(header[*column_of[c]]), *column_of[c] + 1);
    if (scale[c] != 1) out += fmt::format(" x {}", scale[c]);
  }
  return out;
}

std::string ImportPlan::DescribeIgnored() const {
  std::string out;
  for (const std::size_t k : ignored) out += fmt::format("{}{} ({})", out.empty() ? "" : ", ", Quote(header[k]), k + 1);
  return out;
}

Result<ImportPlan> PlanImport(std::string feed, std::vector<std::string> header, std::vector<std::string> channels,
                              const ImportOptions& options) {
  ImportPlan plan;
  plan.feed = std::move(feed);
  for (std::string& name : header) name = std::string(Trim(name));
  plan.header = std::move(header);
  plan.channels = std::move(channels);
  plan.time_format = options.time_format;
  plan.column_of.assign(plan.channels.size(), std::nullopt);
  plan.scale.assign(plan.channels.size(), 1.0);
  const auto channel_index = [&](const std::string& name) -> std::optional<std::size_t> {
    const auto it = std::find(plan.channels.begin(), plan.channels.end(), name);
    if (it == plan.channels.end()) return std::nullopt;
    return static_cast<std::size_t>(it - plan.channels.begin());
  };

  // The time column.
  if (!options.time_column.empty()) {
    auto k = FindColumn(plan.header, options.time_column, "--time-column " + Quote(options.time_column));
    if (!k.ok()) return k.status();
    plan.time_column = *k;
  } else {
    std::vector<std::size_t> hits;
    for (std::size_t k = 0; k < plan.header.size(); ++k) {
      const std::string name = Lower(plan.header[k]);
      if (name == "t" || name == "time" || name == "timestamp") hits.push_back(k);
    }
    if (hits.empty()) {
      return Status::Invalid(
          fmt::format("no time column: none is named t, time or timestamp (in any case); name it with --time-column; "
                      "the header: {}",
                      ListColumns(plan.header)));
    }
    if (hits.size() > 1) {
      std::string names;
      for (const std::size_t k : hits)
        names += fmt::format("{}{} ({})", names.empty() ? "" : ", ", Quote(plan.header[k]), k + 1);
      return Status::Invalid(
          fmt::format("several columns could hold the time: {}; choose one with --time-column", names));
    }
    plan.time_column = hits[0];
  }

  // --map COLUMN=CHANNEL.
  std::vector<bool> mapped(plan.header.size(), false);
  for (const std::string& m : options.maps) {
    std::string column, channel;
    if (!SplitAssignment(m, column, channel)) {
      return Status::Invalid(fmt::format("--map {}: expected COLUMN=CHANNEL, e.g. --map 'Flow rate=flow'", Quote(m)));
    }
    auto k = FindColumn(plan.header, column, "--map " + Quote(m));
    if (!k.ok()) return k.status();
    const auto c = channel_index(channel);
    if (!c) {
      return Status::Invalid(fmt::format("--map {}: feed {} has no channel {}; its channels: {}", Quote(m), plan.feed,
                                         Quote(channel), ListChannels(plan.channels)));
    }
    if (*k == plan.time_column) {
      return Status::Invalid(
          fmt::format("--map {}: column {} ({}) is the time column", Quote(m), Quote(plan.header[*k]), *k + 1));
    }
    if (mapped[*k]) {
      return Status::Invalid(
          fmt::format("--map {}: column {} ({}) is mapped twice", Quote(m), Quote(plan.header[*k]), *k + 1));
    }
    if (plan.column_of[*c]) {
      return Status::Invalid(fmt::format("--map {}: channel {} would be fed by two columns, {} ({}) and {} ({})",
                                         Quote(m), channel, Quote(plan.header[*plan.column_of[*c]]),
                                         *plan.column_of[*c] + 1, Quote(plan.header[*k]), *k + 1));
    }
    mapped[*k] = true;
    plan.column_of[*c] = *k;
  }

  // Columns named like a channel that no --map feeds.
  for (std::size_t k = 0; k < plan.header.size(); ++k) {
    if (k == plan.time_column || mapped[k]) continue;
    const auto c = channel_index(plan.header[k]);
    if (!c) continue;
    if (plan.column_of[*c] && !mapped[*plan.column_of[*c]]) {
      return Status::Invalid(
          fmt::format("the header has two columns named {} ({} and {}); choose one with --map COLUMN={}",
                      Quote(plan.header[k]), *plan.column_of[*c] + 1, k + 1, plan.channels[*c]));
    }
    if (!plan.column_of[*c]) plan.column_of[*c] = k;  // else --map chose another column for it: ignored
  }

  // --scale CHANNEL=FACTOR.
  std::vector<bool> scaled(plan.channels.size(), false);
  for (const std::string& s : options.scales) {
    std::string channel, factor_text;
    if (!SplitAssignment(s, channel, factor_text)) {
      return Status::Invalid(fmt::format("--scale {}: expected CHANNEL=FACTOR, e.g. --scale flow=0.001", Quote(s)));
    }
    const auto c = channel_index(channel);
    if (!c) {
      return Status::Invalid(fmt::format("--scale {}: feed {} has no channel {}; its channels: {}", Quote(s), plan.feed,
                                         Quote(channel), ListChannels(plan.channels)));
    }
    double factor = 0;
    if (ParseValue(factor_text, factor) != NumberStatus::kOk || factor == 0) {
      return Status::Invalid(fmt::format("--scale {}: the factor must be a finite number other than 0", Quote(s)));
    }
    if (scaled[*c]) return Status::Invalid(fmt::format("--scale {}: channel {} is scaled twice", Quote(s), channel));
    if (!plan.column_of[*c]) {
      return Status::Invalid(fmt::format("--scale {}: no column feeds channel {} (map one with --map COLUMN={})",
                                         Quote(s), channel, channel));
    }
    scaled[*c] = true;
    plan.scale[*c] = factor;
  }

  if (std::none_of(plan.column_of.begin(), plan.column_of.end(), [](const auto& k) { return k.has_value(); })) {
    return Status::Invalid(fmt::format(
        "no column feeds a channel of feed {} (channels: {}); map columns with --map COLUMN=CHANNEL; the header: {}",
        plan.feed, ListChannels(plan.channels), ListColumns(plan.header)));
  }
  std::vector<bool> used(plan.header.size(), false);
  used[plan.time_column] = true;
  for (const auto& k : plan.column_of) {
    if (k) used[*k] = true;
  }
  for (std::size_t k = 0; k < plan.header.size(); ++k) {
    if (!used[k]) plan.ignored.push_back(k);
  }
  return plan;
}

ImportRow ConvertRow(const ImportPlan& plan, const std::vector<std::string>& fields) {
  ImportRow row;
  if (std::all_of(fields.begin(), fields.end(), [](const std::string& f) { return Trim(f).empty(); })) {
    row.kind = ImportRow::Kind::kBlank;
    return row;
  }
  const auto reject = [&](const char* code, std::string message) {
    row.kind = ImportRow::Kind::kRejected;
    row.code = code;
    row.message = std::move(message);
    return row;
  };
  const std::size_t columns = plan.header.size();
  if (fields.size() != columns) {
    return reject("field-count",
                  fields.size() > columns
                      ? fmt::format("{} fields where the header has {} columns: a value in field {} has no column",
                                    fields.size(), columns, columns + 1)
                      : fmt::format("{} fields where the header has {} columns", fields.size(), columns));
  }
  const std::string_view time_text = Trim(fields[plan.time_column]);
  const std::string time_name =
      fmt::format("column {} ({})", Quote(plan.header[plan.time_column]), plan.time_column + 1);
  if (time_text.empty()) return reject("bad-time", fmt::format("{} is empty; every row needs a time", time_name));
  auto t = ParseTimeCell(time_text, plan.time_format);
  if (!t.ok()) return reject("bad-time", fmt::format("{}: {}", time_name, t.status().message()));

  std::string line = plan.feed + "," + EpochMicrosText(*t);
  bool any = false;
  for (std::size_t c = 0; c < plan.channels.size(); ++c) {
    line += ',';
    if (!plan.column_of[c]) continue;
    const std::size_t k = *plan.column_of[c];
    const std::string_view cell = Trim(fields[k]);
    if (cell.empty()) continue;  // a missing channel
    const std::string where = fmt::format("column {} ({}, channel {})", Quote(plan.header[k]), k + 1, plan.channels[c]);
    double v = 0;
    switch (ParseValue(cell, v)) {
      case NumberStatus::kOk:
        break;
      case NumberStatus::kNonFinite:
        return reject("non-finite", fmt::format("{}: {} is not a finite number", where, Quote(cell)));
      case NumberStatus::kOutOfRange:
        return reject("not-a-number", fmt::format("{}: {} is out of the range of a double", where, Quote(cell)));
      case NumberStatus::kNotANumber:
        return reject("not-a-number",
                      fmt::format("{}: {} is not a number{}", where, Quote(cell),
                                  LooksLikeDecimalComma(cell) ? " (a decimal comma? numbers are written 1.5)" : ""));
    }
    if (plan.scale[c] != 1) {
      v *= plan.scale[c];
      if (!std::isfinite(v)) {
        return reject("non-finite",
                      fmt::format("{}: {} x {} is not a finite number", where, Quote(cell), plan.scale[c]));
      }
    }
    line += fmt::format("{}", v);
    any = true;
  }
  if (!any) return reject("no-values", "every column that feeds a channel is empty");
  row.kind = ImportRow::Kind::kSample;
  row.line = std::move(line);
  row.t = *t;
  return row;
}

}  // namespace lyapcast::cli
