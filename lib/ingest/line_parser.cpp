#include "ingest/line_parser.h"

#include <simdjson.h>

#include <algorithm>
#include <charconv>
#include <cmath>
#include <cstring>
#include <limits>
#include <system_error>
#include <utility>
#include <vector>

#include <fmt/format.h>

#include "ingest/reject_text.h"

namespace lyapcast {
namespace {

namespace od = simdjson::ondemand;

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr std::string_view kJsonShape =
    R"(a sample is {"feed":"<id>","t":<epoch seconds or "RFC 3339">,"values":{"<channel>":<number or null>,...}})";

bool IsBlank(char c) { return c == ' ' || c == '\t'; }

std::string_view Trim(std::string_view s) {
  size_t b = 0;
  size_t e = s.size();
  while (b < e && IsBlank(s[b])) ++b;
  while (e > b && IsBlank(s[e - 1])) --e;
  return s.substr(b, e - b);
}

ParsedLine Reject(RejectReason reason, std::string message) {
  ParsedLine out;
  out.kind = ParsedLine::Kind::kReject;
  out.reason = reason;
  out.message = std::move(message);
  return out;
}

// --- numbers ----------------------------------------------------------------

enum class NumberStatus { kOk, kNotANumber, kNonFinite, kOutOfRange };

// For a literal std::from_chars rejected with ERANGE: true if its magnitude is
// huge (overflow), false if tiny (underflow). Decided from the decimal
// exponent, which for an out-of-range double is far from zero either way.
bool RangeErrorIsOverflow(std::string_view s) {
  size_t i = 0;
  if (i < s.size() && (s[i] == '-' || s[i] == '+')) ++i;
  std::int64_t magnitude = 0;  // decimal exponent of the leading digit, roughly
  bool seen_nonzero = false;
  std::int64_t int_digits = 0;
  std::int64_t leading_frac_zeros = 0;
  for (; i < s.size() && s[i] >= '0' && s[i] <= '9'; ++i) {
    if (s[i] != '0') seen_nonzero = true;
    if (seen_nonzero) ++int_digits;
  }
  if (i < s.size() && s[i] == '.') {
    for (++i; i < s.size() && s[i] >= '0' && s[i] <= '9'; ++i) {
      if (!seen_nonzero) {
        if (s[i] == '0') {
          ++leading_frac_zeros;
        } else {
          seen_nonzero = true;
        }
      }
    }
  }
  magnitude = int_digits > 0 ? int_digits - 1 : -(leading_frac_zeros + 1);
  std::int64_t exponent = 0;
  if (i < s.size() && (s[i] == 'e' || s[i] == 'E')) {
    ++i;
    bool neg = false;
    if (i < s.size() && (s[i] == '-' || s[i] == '+')) neg = s[i++] == '-';
    for (; i < s.size() && s[i] >= '0' && s[i] <= '9'; ++i) {
      if (exponent < 1'000'000'000) exponent = exponent * 10 + (s[i] - '0');
    }
    if (neg) exponent = -exponent;
  }
  return magnitude + exponent > 0;
}

// Parses a whole CSV field as a double. Accepts a leading '+'. Underflow
// yields a signed zero; overflow is kOutOfRange.
NumberStatus ParseDouble(std::string_view s, double& out) {
  const char* begin = s.data();
  const char* end = s.data() + s.size();
  if (begin != end && *begin == '+' && end - begin > 1 && begin[1] != '-' && begin[1] != '+') ++begin;
  const auto [ptr, ec] = std::from_chars(begin, end, out);
  if (ec == std::errc::result_out_of_range && ptr == end) {
    if (RangeErrorIsOverflow(s)) return NumberStatus::kOutOfRange;
    out = *begin == '-' ? -0.0 : 0.0;
    return NumberStatus::kOk;
  }
  if (ec != std::errc() || ptr != end) return NumberStatus::kNotANumber;
  if (!std::isfinite(out)) return NumberStatus::kNonFinite;
  return NumberStatus::kOk;
}

// True if `s` is a number by the JSON grammar (RFC 8259 section 6).
bool IsJsonNumber(std::string_view s) {
  size_t i = 0;
  const auto digit = [&](size_t k) { return k < s.size() && s[k] >= '0' && s[k] <= '9'; };
  if (i < s.size() && s[i] == '-') ++i;
  if (!digit(i)) return false;
  if (s[i] == '0') {
    ++i;
  } else {
    while (digit(i)) ++i;
  }
  if (i < s.size() && s[i] == '.') {
    ++i;
    if (!digit(i)) return false;
    while (digit(i)) ++i;
  }
  if (i < s.size() && (s[i] == 'e' || s[i] == 'E')) {
    ++i;
    if (i < s.size() && (s[i] == '+' || s[i] == '-')) ++i;
    if (!digit(i)) return false;
    while (digit(i)) ++i;
  }
  return i == s.size();
}

// --- time -------------------------------------------------------------------

// Parses t given as epoch seconds or RFC 3339; on failure sets `message`.
bool ParseTime(std::string_view text, DataTime& out, std::string& message) {
  if (text.empty()) {
    message = "t is empty; expected epoch seconds such as 1733097600.25 or an RFC 3339 time such as "
              "2024-12-02T08:30:00.25Z";
    return false;
  }
  double seconds = 0;
  const NumberStatus ns = ParseDouble(text, seconds);
  if (ns == NumberStatus::kNonFinite) {
    message = fmt::format("t {} is not finite; expected epoch seconds such as 1733097600.25", Quote(text));
    return false;
  }
  if (ns == NumberStatus::kOutOfRange) {
    message = fmt::format("t {} is out of range; expected epoch seconds such as 1733097600.25", Quote(text));
    return false;
  }
  if (ns == NumberStatus::kOk) {
    Result<DataTime> t = DataTimeFromEpochSeconds(seconds);
    if (!t.ok()) {
      message = fmt::format("t {} as epoch seconds: {}", Quote(text), Sanitize(t.status().message(), 200));
      return false;
    }
    out = *t;
    return true;
  }
  Result<DataTime> t = ParseRfc3339(text);
  if (!t.ok()) {
    // The message quotes the text: "'x' is not an RFC 3339 time (why); expected e.g. ...".
    message = fmt::format("t {} or epoch seconds such as 1733097600.25", Sanitize(t.status().message(), 240));
    return false;
  }
  out = *t;
  return true;
}

// --- encoding ---------------------------------------------------------------

bool IsControl(unsigned char b) { return (b < 0x20 && b != '\t') || b == 0x7F; }

// Offset of the first byte that does not start/continue a valid UTF-8
// sequence (no overlongs, no surrogates, at most U+10FFFF), or npos.
size_t FirstInvalidUtf8(std::string_view s) {
  const auto* p = reinterpret_cast<const unsigned char*>(s.data());
  const size_t n = s.size();
  size_t i = 0;
  while (i < n) {
    const unsigned char b = p[i];
    if (b < 0x80) {
      ++i;
      continue;
    }
    size_t len;
    unsigned char lo = 0x80;
    unsigned char hi = 0xBF;
    if (b >= 0xC2 && b <= 0xDF) {
      len = 2;
    } else if (b >= 0xE0 && b <= 0xEF) {
      len = 3;
      if (b == 0xE0) lo = 0xA0;
      if (b == 0xED) hi = 0x9F;
    } else if (b >= 0xF0 && b <= 0xF4) {
      len = 4;
      if (b == 0xF0) lo = 0x90;
      if (b == 0xF4) hi = 0x8F;
    } else {
      return i;
    }
    if (i + 1 >= n || p[i + 1] < lo || p[i + 1] > hi) return i;
    for (size_t k = 2; k < len; ++k) {
      if (i + k >= n || (p[i + k] & 0xC0) != 0x80) return i;
    }
    i += len;
  }
  return std::string_view::npos;
}

// True if the line is valid UTF-8 without control bytes; else false and the message.
bool CheckEncoding(std::string_view line, std::string& message) {
  const auto* p = reinterpret_cast<const unsigned char*>(line.data());
  const size_t n = line.size();
  unsigned bad = 0;
  unsigned high = 0;
  for (size_t i = 0; i < n; ++i) {  // branch-free so it vectorizes
    const unsigned char b = p[i];
    bad |= static_cast<unsigned>((b < 0x20) & (b != '\t')) | static_cast<unsigned>(b == 0x7F);
    high |= b;
  }
  const bool utf8_ok = (high & 0x80) == 0 || simdjson::validate_utf8(line.data(), n);
  if (bad == 0 && utf8_ok) return true;
  size_t control_at = std::string_view::npos;
  if (bad != 0) {
    for (size_t i = 0; i < n; ++i) {
      if (IsControl(p[i])) {
        control_at = i;
        break;
      }
    }
  }
  const size_t utf8_at = utf8_ok ? std::string_view::npos : FirstInvalidUtf8(line);
  if (control_at != std::string_view::npos && (utf8_at == std::string_view::npos || control_at < utf8_at)) {
    message = fmt::format(
        "control byte 0x{:02x} at offset {}; lines must be UTF-8 text without control characters (tab allowed)",
        p[control_at], control_at);
  } else {
    const size_t at = utf8_at == std::string_view::npos ? 0 : utf8_at;
    message = fmt::format("invalid UTF-8 at offset {} (byte 0x{:02x}); lines must be UTF-8 text",
                          at, at < n ? p[at] : 0);
  }
  return false;
}

// --- messages ---------------------------------------------------------------

// "a, b, c" listing at most `max` names, then "and N more".
template <typename Names, typename Get>
std::string ListNames(const Names& names, size_t max, Get get) {
  std::string out;
  size_t i = 0;
  for (const auto& n : names) {
    if (i == max) {
      fmt::format_to(std::back_inserter(out), ", and {} more", names.size() - max);
      break;
    }
    if (i > 0) out += ", ";
    out += Sanitize(get(n), 64);
    ++i;
  }
  return out;
}

std::string ChannelList(const FeedConfig& feed) {
  return ListNames(feed.channels, 12, [](const std::string& c) -> std::string_view { return c; });
}

// simdjson's description of an error, without its final period.
std::string_view JsonErrorText(simdjson::error_code e) {
  std::string_view m = simdjson::error_message(e);
  if (!m.empty() && m.back() == '.') m.remove_suffix(1);
  return m;
}

const char* JsonTypeName(od::json_type t) {
  switch (t) {
    case od::json_type::array: return "an array";
    case od::json_type::object: return "an object";
    case od::json_type::number: return "a number";
    case od::json_type::string: return "a string";
    case od::json_type::boolean: return "a boolean";
    case od::json_type::null: return "null";
  }
  return "an unknown value";
}

}  // namespace

// Per-instance scratch: the simdjson parser and its padded input buffer, the
// collected JSON values, and lookup tables built from the Config.
struct LineParser::JsonScratch {
  enum class Kind { kNumber, kNull, kString, kBool, kObject, kArray, kOutOfRange };
  struct Entry {
    std::string_view key;   // unescaped, in the parser's string buffer
    Kind kind;
    double value;           // kNumber
    std::string_view text;  // kString/kBool/kOutOfRange: the text for messages
  };

  od::parser parser;
  std::unique_ptr<char[]> buf;
  size_t cap = 0;
  std::vector<Entry> entries;
  std::string key_buf;  // feed id lookups in feed_index_ without allocating
  // Per feed: channel name -> index; views into the Config's strings.
  std::vector<std::unordered_map<std::string_view, int>> channel_index;

  // Copies `line` into a buffer with simdjson's padding (zeroed, so it can
  // never look like a closing brace).
  void Load(std::string_view line) {
    const size_t need = line.size() + simdjson::SIMDJSON_PADDING;
    if (need > cap) {
      cap = std::max<size_t>({need, cap * 2, 4096});
      buf = std::make_unique<char[]>(cap);
    }
    if (!line.empty()) std::memcpy(buf.get(), line.data(), line.size());
    std::memset(buf.get() + line.size(), 0, simdjson::SIMDJSON_PADDING);
  }
};

LineParser::LineParser(const Config& config, Micros max_future_skew)
    : config_(config), max_future_skew_(max_future_skew), json_(std::make_unique<JsonScratch>()) {
  feed_index_.reserve(config_.feeds.size());
  json_->channel_index.resize(config_.feeds.size());
  for (size_t f = 0; f < config_.feeds.size(); ++f) {
    const FeedConfig& feed = config_.feeds[f];
    feed_index_.emplace(feed.id, static_cast<std::uint32_t>(f));
    auto& channels = json_->channel_index[f];
    channels.reserve(feed.channels.size());
    for (size_t c = 0; c < feed.channels.size(); ++c) {
      channels.emplace(feed.channels[c], static_cast<int>(c));
    }
  }
}

LineParser::~LineParser() = default;

namespace {

// Everything after the feed and time are known, shared by CSV and JSON.
struct Pending {
  std::uint32_t feed = 0;
  DataTime t{};
  std::string_view t_text;
};

bool CheckFuture(const Pending& p, WallTime wall_now, Micros skew, std::string& message) {
  // The one place a data timestamp meets the machine's clock: a sample may
  // not claim to come from the future (beyond the allowed skew).
  const DataTime now = DataTimeAtWall(wall_now);
  // Compare differences, not sums, so an extreme wall_now cannot overflow.
  if (p.t <= now || p.t - now <= skew) return true;
  const Micros ahead = p.t - now;
  const Micros ahead_ms = std::chrono::round<std::chrono::milliseconds>(ahead);
  message = fmt::format("t {} ({}) is {} ahead of this server's clock (allowed skew {})", Sanitize(p.t_text, 40),
                        FormatRfc3339(p.t), FormatDuration(ahead_ms > Micros{} ? ahead_ms : ahead), FormatDuration(skew));
  return false;
}

}  // namespace

ParsedLine LineParser::Parse(std::string_view line, WallTime wall_now) {
  if (!line.empty() && line.back() == '\r') line.remove_suffix(1);
  std::string message;
  if (!CheckEncoding(line, message)) return Reject(RejectReason::kBadEncoding, std::move(message));
  size_t first = 0;
  while (first < line.size() && IsBlank(line[first])) ++first;
  if (first == line.size()) {
    return Reject(RejectReason::kFieldCount,
                  "empty line; expected a sample as CSV (feed,t,values...) or JSON, or 'auth <token>'");
  }
  const char c = line[first];
  if (c == '{' || c == '[') return ParseJson(line, wall_now);
  if (line.substr(first, 5) == "auth ") {
    ParsedLine out;
    out.kind = ParsedLine::Kind::kAuth;
    out.token = std::string(Trim(line.substr(first + 5)));
    return out;
  }
  return ParseCsv(line, wall_now);
}

namespace {

std::string UnknownFeedMessage(std::string_view id, const Config& config) {
  if (id.empty()) {
    return fmt::format("feed id is empty (feeds: {})",
                       ListNames(config.feeds, 5, [](const FeedConfig& f) -> std::string_view { return f.id; }));
  }
  return fmt::format("feed {} is not configured (feeds: {})", Quote(id),
                     ListNames(config.feeds, 5, [](const FeedConfig& f) -> std::string_view { return f.id; }));
}

// Strips one pair of surrounding double quotes if nothing else is quoted.
std::string_view Unquote(std::string_view s) {
  if (s.size() >= 2 && s.front() == '"' && s.back() == '"' &&
      s.substr(1, s.size() - 2).find('"') == std::string_view::npos) {
    return s.substr(1, s.size() - 2);
  }
  return s;
}

}  // namespace

// Longer than the ~80 lines we aim for, on purpose: one left-to-right pass
// over the line whose checks must run in the documented order (first error
// wins, docs/protocol.md "Replies"), on the ingest hot path (ingest_bench).
// Split, each piece would need the cursor, the feed and the partly filled
// sample passed in and out, and the order would be spread over functions.
ParsedLine LineParser::ParseCsv(std::string_view line, WallTime wall_now) {
  JsonScratch& s = *json_;
  const size_t comma = line.find(',');
  const std::string_view feed_text = Unquote(Trim(line.substr(0, comma)));
  s.key_buf.assign(feed_text);
  const auto it = feed_index_.find(s.key_buf);
  if (it == feed_index_.end()) return Reject(RejectReason::kUnknownFeed, UnknownFeedMessage(feed_text, config_));
  const std::uint32_t feed_idx = it->second;
  const FeedConfig& feed = config_.feeds[feed_idx];
  const size_t nch = feed.channels.size();

  const size_t nfields = 1 + static_cast<size_t>(std::count(line.begin(), line.end(), ','));
  if (nfields != nch + 2) {
    std::string names = "feed, t";
    for (size_t c = 0; c < nch && c < 12; ++c) {
      names += ", ";
      names += feed.channels[c];
    }
    if (nch > 12) fmt::format_to(std::back_inserter(names), ", and {} more", nch - 12);
    return Reject(RejectReason::kFieldCount, fmt::format("expected {} fields ({}) for feed {}, got {}", nch + 2,
                                                         names, Quote(feed.id), nfields));
  }

  std::string_view rest = line.substr(comma + 1);
  const auto next_field = [&rest]() {
    const size_t k = rest.find(',');
    const std::string_view field = Trim(rest.substr(0, k));
    rest = k == std::string_view::npos ? std::string_view() : rest.substr(k + 1);
    return field;
  };

  Pending p;
  p.feed = feed_idx;
  p.t_text = Unquote(next_field());
  std::string message;
  if (!ParseTime(p.t_text, p.t, message)) return Reject(RejectReason::kBadTime, std::move(message));

  ParsedLine out;
  out.kind = ParsedLine::Kind::kSample;
  out.sample.feed = feed_idx;
  Sample& sample = out.sample.sample;
  sample.t = p.t;
  sample.values.resize(nch);
  std::uint64_t missing = 0;
  for (size_t c = 0; c < nch; ++c) {
    const std::string_view field = next_field();
    double v = kNaN;
    if (field.empty()) {
      missing |= std::uint64_t{1} << c;
    } else if (field.front() == '"') {
      return Reject(RejectReason::kNotANumber,
                    fmt::format("value of {} is {}; quotes are not allowed around CSV values, send the bare number",
                                Quote(feed.channels[c]), Quote(field)));
    } else {
      switch (ParseDouble(field, v)) {
        case NumberStatus::kOk: break;
        case NumberStatus::kNotANumber:
          return Reject(RejectReason::kNotANumber, fmt::format("value of {} is {}, not a number",
                                                               Quote(feed.channels[c]), Quote(field)));
        case NumberStatus::kNonFinite:
          return Reject(RejectReason::kNonFinite, fmt::format("value of {} is {}, not a finite number",
                                                              Quote(feed.channels[c]), Quote(field)));
        case NumberStatus::kOutOfRange:
          return Reject(RejectReason::kNonFinite, fmt::format("value of {} is {}, beyond the range of a double",
                                                              Quote(feed.channels[c]), Quote(field)));
      }
    }
    sample.values[c] = v;
  }
  sample.missing_mask = missing;
  if (nch > 0 && missing == (nch >= 64 ? ~std::uint64_t{0} : (std::uint64_t{1} << nch) - 1)) {
    return Reject(RejectReason::kNoValues,
                  fmt::format("no values: every channel field is empty (channels of {}: {})", Quote(feed.id),
                              ChannelList(feed)));
  }
  if (!CheckFuture(p, wall_now, max_future_skew_, message)) {
    return Reject(RejectReason::kFutureTime, std::move(message));
  }
  return out;
}

namespace {

std::string_view TrimJsonWs(std::string_view s) {
  while (!s.empty() && (s.back() == ' ' || s.back() == '\t' || s.back() == '\n' || s.back() == '\r')) {
    s.remove_suffix(1);
  }
  return s;
}

// Reads a value completely so that malformed JSON inside it is reported even
// when the value itself is not used (unknown fields, repeated keys, values of
// the wrong type). Nesting is limited so deep input cannot exhaust the stack.
constexpr int kMaxIgnoredDepth = 32;

simdjson::error_code ValidateValue(od::value v, int depth = 0) {
  if (depth > kMaxIgnoredDepth) return simdjson::DEPTH_ERROR;
  od::json_type t;
  if (auto e = v.type().get(t)) return e;
  switch (t) {
    case od::json_type::object: {
      od::object o;
      if (auto e = v.get_object().get(o)) return e;
      for (auto fr : o) {
        od::field f;
        if (auto e = std::move(fr).get(f)) return e;
        std::string_view k;
        if (auto e = f.unescaped_key().get(k)) return e;
        if (auto e = ValidateValue(f.value(), depth + 1)) return e;
      }
      return simdjson::SUCCESS;
    }
    case od::json_type::array: {
      od::array a;
      if (auto e = v.get_array().get(a)) return e;
      for (auto er : a) {
        od::value ev;
        if (auto e = std::move(er).get(ev)) return e;
        if (auto e = ValidateValue(ev, depth + 1)) return e;
      }
      return simdjson::SUCCESS;
    }
    case od::json_type::number: {
      double d;
      if (v.get_double().get(d) == simdjson::SUCCESS) return simdjson::SUCCESS;
      // A well-formed number beyond the range of a double is fine here.
      return IsJsonNumber(TrimJsonWs(v.raw_json_token())) ? simdjson::SUCCESS : simdjson::NUMBER_ERROR;
    }
    case od::json_type::string: {
      std::string_view s;
      return v.get_string().get(s);
    }
    case od::json_type::boolean: {
      bool b;
      return v.get_bool().get(b);
    }
    case od::json_type::null: {
      bool is_null = false;
      if (auto e = v.is_null().get(is_null)) return e;
      return is_null ? simdjson::SUCCESS : simdjson::INCORRECT_TYPE;
    }
  }
  return simdjson::INCORRECT_TYPE;
}

}  // namespace

// Longer than the ~80 lines we aim for, on purpose: one pass over a
// simdjson on-demand document, which can be iterated only once and only
// forward, so every field must be handled while the iterator is on it; the
// first-error-wins bookkeeping (a semantic error is reported only once the
// whole line is known to be well-formed JSON) lives on this frame. This is
// the ingest hot path (ingest_bench); splitting it would pass the iterator
// state and a dozen locals between functions for no gain in clarity.
ParsedLine LineParser::ParseJson(std::string_view line, WallTime wall_now) {
  JsonScratch& s = *json_;
  s.Load(line);
  const char* const base = s.buf.get();
  s.entries.clear();

  od::document doc;
  const auto bad_json = [&](simdjson::error_code e) {
    std::string where;
    const char* loc = nullptr;
    if (doc.current_location().get(loc) == simdjson::SUCCESS && loc >= base && loc <= base + line.size()) {
      where = fmt::format(" near offset {}", loc - base);
    }
    return Reject(RejectReason::kBadJson, fmt::format("malformed JSON{}: {}", where, JsonErrorText(e)));
  };
  if (auto e = s.parser.iterate(base, line.size(), s.cap).get(doc)) {
    return Reject(RejectReason::kBadJson, fmt::format("malformed JSON: {}", JsonErrorText(e)));
  }
  od::json_type top;
  if (auto e = doc.type().get(top)) return bad_json(e);
  if (top != od::json_type::object) {
    return Reject(RejectReason::kBadJson,
                  fmt::format("the line is {}, not a JSON object; {}", JsonTypeName(top), kJsonShape));
  }
  od::object obj;
  if (auto e = doc.get_object().get(obj)) {
    if (e == simdjson::INCOMPLETE_ARRAY_OR_OBJECT && TrimJsonWs(line).back() != '}') {
      return Reject(RejectReason::kBadJson,
                    fmt::format("malformed JSON: the line must end with the object's closing '}}' ({})",
                                JsonErrorText(e)));
    }
    return bad_json(e);
  }

  bool have_feed = false;
  bool have_t = false;
  bool have_values = false;
  std::string_view feed_id;
  // t: kNumber (t_value), kString (t_text), or kOutOfRange.
  JsonScratch::Kind t_kind = JsonScratch::Kind::kNull;
  double t_value = 0;
  std::string_view t_text;
  // The first semantic error among the top-level keys; reported only once
  // the whole line is known to be well-formed JSON.
  bool have_error = false;
  RejectReason error_reason = RejectReason::kBadJson;
  std::string error_message;
  const auto record = [&](RejectReason r, std::string m) {
    if (have_error) return;
    have_error = true;
    error_reason = r;
    error_message = std::move(m);
  };

  for (auto fr : obj) {
    od::field field;
    if (auto e = std::move(fr).get(field)) return bad_json(e);
    std::string_view key;
    if (auto e = field.unescaped_key().get(key)) return bad_json(e);
    od::value v = field.value();
    const bool is_feed = key == "feed";
    const bool is_t = key == "t";
    const bool is_values = key == "values";
    if (!is_feed && !is_t && !is_values) {
      record(RejectReason::kUnknownField,
             fmt::format("unknown field {} (allowed: feed, t, values)", Quote(key)));
      if (auto e = ValidateValue(v)) return bad_json(e);
      continue;
    }
    if ((is_feed && have_feed) || (is_t && have_t) || (is_values && have_values)) {
      record(RejectReason::kDuplicateField, fmt::format("field {} appears more than once", Quote(key)));
      if (auto e = ValidateValue(v)) return bad_json(e);
      continue;
    }
    od::json_type type;
    if (auto e = v.type().get(type)) return bad_json(e);
    if (is_feed) {
      have_feed = true;
      if (type != od::json_type::string) {
        return Reject(RejectReason::kBadJson,
                      fmt::format("field 'feed' is {}, expected a string (the feed id)", JsonTypeName(type)));
      }
      if (auto e = v.get_string().get(feed_id)) return bad_json(e);
    } else if (is_t) {
      have_t = true;
      if (type == od::json_type::number) {
        t_text = TrimJsonWs(v.raw_json_token());
        if (v.get_double().get(t_value) == simdjson::SUCCESS) {
          t_kind = JsonScratch::Kind::kNumber;
        } else if (IsJsonNumber(t_text)) {
          t_kind = JsonScratch::Kind::kOutOfRange;
        } else {
          return Reject(RejectReason::kBadJson,
                        fmt::format("malformed JSON: t is {}, not a valid JSON number", Quote(t_text)));
        }
      } else if (type == od::json_type::string) {
        t_kind = JsonScratch::Kind::kString;
        if (auto e = v.get_string().get(t_text)) return bad_json(e);
      } else {
        return Reject(RejectReason::kBadJson,
                      fmt::format("field 't' is {}, expected a number (epoch seconds) or an RFC 3339 string",
                                  JsonTypeName(type)));
      }
    } else {  // values
      have_values = true;
      if (type != od::json_type::object) {
        return Reject(RejectReason::kBadJson,
                      fmt::format("field 'values' is {}, expected an object of channel: number", JsonTypeName(type)));
      }
      od::object vals;
      if (auto e = v.get_object().get(vals)) return bad_json(e);
      for (auto cr : vals) {
        od::field cf;
        if (auto e = std::move(cr).get(cf)) return bad_json(e);
        JsonScratch::Entry entry{};
        if (auto e = cf.unescaped_key().get(entry.key)) return bad_json(e);
        od::value cv = cf.value();
        od::json_type ct;
        if (auto e = cv.type().get(ct)) return bad_json(e);
        switch (ct) {
          case od::json_type::number: {
            if (cv.get_double().get(entry.value) == simdjson::SUCCESS) {
              entry.kind = JsonScratch::Kind::kNumber;
              break;
            }
            entry.text = TrimJsonWs(cv.raw_json_token());
            if (!IsJsonNumber(entry.text)) {
              return Reject(RejectReason::kBadJson,
                            fmt::format("malformed JSON: value of {} is {}, not a valid JSON number (NaN and "
                                        "Infinity are not JSON; send null for a missing value)",
                                        Quote(entry.key), Quote(entry.text)));
            }
            entry.kind = JsonScratch::Kind::kOutOfRange;
            break;
          }
          case od::json_type::null: {
            bool is_null = false;
            if (auto e = cv.is_null().get(is_null)) return bad_json(e);
            if (!is_null) return bad_json(simdjson::INCORRECT_TYPE);
            entry.kind = JsonScratch::Kind::kNull;
            break;
          }
          case od::json_type::string:
            entry.kind = JsonScratch::Kind::kString;
            if (auto e = cv.get_string().get(entry.text)) return bad_json(e);
            break;
          case od::json_type::boolean: {
            bool b = false;
            if (auto e = cv.get_bool().get(b)) return bad_json(e);
            entry.kind = JsonScratch::Kind::kBool;
            entry.text = b ? "true" : "false";
            break;
          }
          case od::json_type::object:
          case od::json_type::array:
            entry.kind = ct == od::json_type::object ? JsonScratch::Kind::kObject : JsonScratch::Kind::kArray;
            if (auto e = ValidateValue(cv)) return bad_json(e);
            break;
        }
        s.entries.push_back(entry);
      }
    }
  }
  {
    const char* loc = nullptr;
    const auto e = doc.current_location().get(loc);
    if (e != simdjson::OUT_OF_BOUNDS) {
      if (e == simdjson::SUCCESS && loc >= base && loc <= base + line.size()) {
        return Reject(RejectReason::kBadJson,
                      fmt::format("malformed JSON: unexpected {} after the closing '}}' at offset {}",
                                  Quote(std::string_view(loc, static_cast<size_t>(base + line.size() - loc))),
                                  loc - base));
      }
      return Reject(RejectReason::kBadJson, "malformed JSON: unexpected content after the object");
    }
  }

  if (have_error) return Reject(error_reason, std::move(error_message));
  if (!have_feed || !have_t || !have_values) {
    std::string missing;
    for (const auto& [have, name] : {std::pair{have_feed, "'feed'"}, {have_t, "'t'"}, {have_values, "'values'"}}) {
      if (have) continue;
      if (!missing.empty()) missing += ", ";
      missing += name;
    }
    const bool several = (!have_feed) + (!have_t) + (!have_values) > 1;
    return Reject(RejectReason::kMissingField,
                  fmt::format("missing field{} {}; {}", several ? "s" : "", missing, kJsonShape));
  }

  s.key_buf.assign(feed_id);
  const auto it = feed_index_.find(s.key_buf);
  if (it == feed_index_.end()) return Reject(RejectReason::kUnknownFeed, UnknownFeedMessage(feed_id, config_));
  Pending p;
  p.feed = it->second;
  const FeedConfig& feed = config_.feeds[p.feed];
  const size_t nch = feed.channels.size();

  std::string message;
  p.t_text = t_text;
  if (t_kind == JsonScratch::Kind::kOutOfRange) {
    return Reject(RejectReason::kBadTime,
                  fmt::format("t {} is out of range; expected epoch seconds such as 1733097600.25", Quote(t_text)));
  }
  if (t_kind == JsonScratch::Kind::kNumber) {
    Result<DataTime> t = DataTimeFromEpochSeconds(t_value);
    if (!t.ok()) {
      return Reject(RejectReason::kBadTime,
                    fmt::format("t {} as epoch seconds: {}", Quote(t_text), Sanitize(t.status().message(), 200)));
    }
    p.t = *t;
  } else if (!ParseTime(t_text, p.t, message)) {
    return Reject(RejectReason::kBadTime, std::move(message));
  }

  ParsedLine out;
  out.kind = ParsedLine::Kind::kSample;
  out.sample.feed = p.feed;
  Sample& sample = out.sample.sample;
  sample.t = p.t;
  sample.values.assign(nch, kNaN);
  std::uint64_t seen = 0;
  std::uint64_t present = 0;
  const auto& channel_index = s.channel_index[p.feed];
  for (size_t i = 0; i < s.entries.size(); ++i) {
    const JsonScratch::Entry& entry = s.entries[i];
    // Senders usually follow the channel order: try that before hashing.
    int c = -1;
    if (i < nch && feed.channels[i] == entry.key) {
      c = static_cast<int>(i);
    } else if (const auto ci = channel_index.find(entry.key); ci != channel_index.end()) {
      c = ci->second;
    }
    if (c < 0) {
      return Reject(RejectReason::kUnknownChannel,
                    fmt::format("channel {} is not a channel of feed {} (channels: {})", Quote(entry.key),
                                Quote(feed.id), ChannelList(feed)));
    }
    const std::uint64_t bit = std::uint64_t{1} << c;
    if (seen & bit) {
      return Reject(RejectReason::kDuplicateChannel,
                    fmt::format("channel {} appears more than once in values", Quote(entry.key)));
    }
    seen |= bit;
    switch (entry.kind) {
      case JsonScratch::Kind::kNumber:
        sample.values[static_cast<size_t>(c)] = entry.value;
        present |= bit;
        break;
      case JsonScratch::Kind::kNull:
        break;
      case JsonScratch::Kind::kOutOfRange:
        return Reject(RejectReason::kNonFinite, fmt::format("value of {} is {}, beyond the range of a double",
                                                            Quote(entry.key), Quote(entry.text)));
      case JsonScratch::Kind::kString:
        return Reject(RejectReason::kNotANumber,
                      fmt::format("value of {} is a string (\"{}\"), not a number; send a bare JSON number or null",
                                  Quote(entry.key), Sanitize(entry.text, 40)));
      case JsonScratch::Kind::kBool:
        return Reject(RejectReason::kNotANumber,
                      fmt::format("value of {} is {}, not a number", Quote(entry.key), entry.text));
      case JsonScratch::Kind::kObject:
      case JsonScratch::Kind::kArray:
        return Reject(RejectReason::kNotANumber,
                      fmt::format("value of {} is {}, not a number", Quote(entry.key),
                                  entry.kind == JsonScratch::Kind::kObject ? "an object" : "an array"));
    }
  }
  const std::uint64_t all = nch >= 64 ? ~std::uint64_t{0} : (std::uint64_t{1} << nch) - 1;
  sample.missing_mask = all & ~present;
  if (present == 0) {
    return Reject(RejectReason::kNoValues,
                  fmt::format("no values: every channel is absent or null (channels of {}: {})", Quote(feed.id),
                              ChannelList(feed)));
  }
  if (!CheckFuture(p, wall_now, max_future_skew_, message)) {
    return Reject(RejectReason::kFutureTime, std::move(message));
  }
  return out;
}

}  // namespace lyapcast
