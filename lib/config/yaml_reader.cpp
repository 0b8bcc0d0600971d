#include "config/yaml_reader.h"

#include <fmt/format.h>

#include <algorithm>
#include <charconv>
#include <cerrno>
#include <cmath>
#include <cstring>
#include <fstream>
#include <sstream>
#include <system_error>
#include <utility>

namespace lyapcast::config_internal {

Result<std::string> ReadYamlFile(const std::filesystem::path& file, std::string_view what) {
  std::error_code ec;
  if (std::filesystem::is_directory(file, ec)) {
    return Status::Io(fmt::format("cannot read {} file '{}': it is a directory", what, file.string()));
  }
  std::ifstream in(file, std::ios::binary);
  if (!in) return Status::Io(fmt::format("cannot read {} file '{}': {}", what, file.string(), std::strerror(errno)));
  std::ostringstream text;
  text << in.rdbuf();
  if (in.bad()) return Status::Io(fmt::format("cannot read {} file '{}': read failed", what, file.string()));
  return text.str();
}
namespace {

// YAML writes "+5" for five; std::from_chars does not take the sign.
std::string_view StripPlus(std::string_view text) {
  if (text.size() > 1 && text.front() == '+' && text[1] != '-' && text[1] != '+') text.remove_prefix(1);
  return text;
}

std::optional<long long> ParseInteger(std::string_view text) {
  text = StripPlus(text);
  long long v = 0;
  const auto [end, ec] = std::from_chars(text.data(), text.data() + text.size(), v);
  if (ec != std::errc() || end != text.data() + text.size() || text.empty()) return std::nullopt;
  return v;
}

std::optional<double> ParseReal(std::string_view text) {
  text = StripPlus(text);
  double v = 0;
  const auto [end, ec] = std::from_chars(text.data(), text.data() + text.size(), v);
  if (ec != std::errc() || end != text.data() + text.size() || text.empty() || !std::isfinite(v)) {
    return std::nullopt;
  }
  return v;
}

std::string FormatBound(double v) { return fmt::format("{}", v); }

// "1 byte", "64KiB", "1GiB": the largest binary unit that divides exactly.
std::string FormatSize(std::uint64_t bytes) {
  if (bytes == 1) return "1 byte";
  if (bytes != 0 && bytes % (1ULL << 30) == 0) return fmt::format("{}GiB", bytes >> 30);
  if (bytes != 0 && bytes % (1ULL << 20) == 0) return fmt::format("{}MiB", bytes >> 20);
  if (bytes != 0 && bytes % (1ULL << 10) == 0) return fmt::format("{}KiB", bytes >> 10);
  return fmt::format("{} bytes", bytes);
}

}  // namespace

int LineOf(const YAML::Node& node) {
  const int line = node.Mark().line;
  return line < 0 ? 1 : line + 1;
}

std::string DescribeNode(const YAML::Node& node) {
  switch (node.Type()) {
    case YAML::NodeType::Scalar: {
      // Quote what was written, but keep a pasted blob from flooding the log.
      constexpr size_t kMaxShown = 80;
      const std::string& text = node.Scalar();
      if (text.size() <= kMaxShown) return "'" + text + "'";
      return "'" + text.substr(0, kMaxShown) + "...' (" + std::to_string(text.size()) + " characters)";
    }
    case YAML::NodeType::Map: return "a mapping";
    case YAML::NodeType::Sequence: return "a list";
    case YAML::NodeType::Null:
    case YAML::NodeType::Undefined: break;
  }
  return "nothing";
}

std::string Join(const std::vector<std::string>& items, std::string_view separator) {
  std::string out;
  for (size_t i = 0; i < items.size(); ++i) {
    if (i > 0) out += separator;
    out += items[i];
  }
  return out;
}

void Source::Fail(int line, std::string_view path, std::string_view text) const {
  if (path.empty()) throw ConfigError(fmt::format("{}:{}: {}", name_, line, text));
  throw ConfigError(fmt::format("{}:{}: {}: {}", name_, line, path, text));
}

std::string IntRange::Describe() const {
  constexpr long long kIntMin = std::numeric_limits<int>::min();
  constexpr long long kIntMax = std::numeric_limits<int>::max();
  if (lo == kIntMin && hi == kIntMax) return "an integer";
  if (hi == kIntMax) return fmt::format("an integer >= {}", lo);
  if (lo == kIntMin) return fmt::format("an integer <= {}", hi);
  return fmt::format("an integer in [{}, {}]", lo, hi);
}

bool RealRange::Contains(double v) const {
  if (lo_open ? !(v > lo) : !(v >= lo)) return false;
  if (hi_open ? !(v < hi) : !(v <= hi)) return false;
  return true;
}

std::string RealRange::Describe() const {
  const bool has_lo = std::isfinite(lo);
  const bool has_hi = std::isfinite(hi);
  if (!has_lo && !has_hi) return "a finite number";
  if (!has_hi) return fmt::format("a number {} {}", lo_open ? ">" : ">=", FormatBound(lo));
  if (!has_lo) return fmt::format("a number {} {}", hi_open ? "<" : "<=", FormatBound(hi));
  return fmt::format("a number in {}{}, {}{}", lo_open ? "(" : "[", FormatBound(lo), FormatBound(hi),
                     hi_open ? ")" : "]");
}

std::string DurationRule::Describe() const {
  return allow_zero ? "a duration >= 0 such as 0s, 500ms or 2s" : "a positive duration such as 500ms or 2s";
}

void Value::Fail(std::string_view text) const { source_->Fail(line_, path_, text); }

void Value::FailMustBe(std::string_view allowed) const {
  Fail(fmt::format("must be {}; got {}", allowed, DescribeNode(node_)));
}

std::string Value::Text(std::string_view allowed) const {
  if (!node_.IsScalar()) FailMustBe(allowed);
  return node_.Scalar();
}

int Value::Int(IntRange range) const {
  const std::string allowed = range.Describe();
  const std::optional<long long> v = ParseInteger(Text(allowed));
  if (!v || *v < range.lo || *v > range.hi) FailMustBe(allowed);
  return static_cast<int>(*v);
}

double Value::Real(RealRange range) const {
  const std::string allowed = range.Describe();
  const std::optional<double> v = ParseReal(Text(allowed));
  if (!v || !range.Contains(*v)) FailMustBe(allowed);
  return *v;
}

bool Value::Bool() const {
  // YAML 1.2 core schema booleans only: "yes"/"on" surprise people (and
  // "no" is a country code), so they are rejected with the allowed spelling.
  const std::string text = Text("true or false");
  if (text == "true" || text == "True" || text == "TRUE") return true;
  if (text == "false" || text == "False" || text == "FALSE") return false;
  FailMustBe("true or false");
}

Micros Value::Duration(DurationRule rule) const {
  const std::string allowed = rule.Describe();
  const Result<Micros> d = ParseDuration(Text(allowed));
  if (!d.ok() || *d < Micros{} || (*d == Micros{} && !rule.allow_zero)) FailMustBe(allowed);
  if (*d > kMaxConfigDuration) {
    Fail(fmt::format("must be at most {}; got {}", FormatDuration(kMaxConfigDuration), DescribeNode(node_)));
  }
  return *d;
}

std::uint64_t Value::Size(std::uint64_t lo, std::uint64_t hi) const {
  const std::string allowed =
      fmt::format("a size from {} to {} such as 65536 or 64KiB (units KiB, MiB, GiB)", FormatSize(lo), FormatSize(hi));
  const Result<std::uint64_t> v = ParseByteSize(Text(allowed));
  if (!v.ok() || *v < lo || *v > hi) FailMustBe(allowed);
  return *v;
}

std::vector<Value> Value::List(std::string_view allowed) const {
  std::vector<Value> out;
  if (node_.IsNull()) return out;
  if (!node_.IsSequence()) FailMustBe(allowed);
  out.reserve(node_.size());
  size_t i = 0;
  for (const YAML::Node& item : node_) {  // binds the iterator's temporary; lifetime extended
    // A null item ("- " alone) has no position of its own; the list's is close.
    const int line = item.IsNull() ? line_ : LineOf(item);
    out.emplace_back(source_, item, line, fmt::format("{}[{}]", path_, i++));
  }
  return out;
}

MapReader Value::Map(std::vector<std::string> allowed) const { return MapReader(*this, std::move(allowed), true); }

MapReader Value::MapAnyKeys() const { return MapReader(*this, {}, false); }

MapReader::MapReader(const Value& map, std::vector<std::string> allowed, bool check_keys)
    : source_(map.source()), path_(map.path()), line_(map.line()) {
  if (map.IsNull()) return;
  if (!map.node().IsMap()) {
    map.FailMustBe(check_keys ? fmt::format("a mapping with keys {}", Join(allowed)) : std::string("a mapping"));
  }
  for (auto it = map.node().begin(); it != map.node().end(); ++it) {
    // Copies: yaml-cpp's iterator hands out a temporary proxy, so a
    // reference to it->first dangles (AddressSanitizer catches it).
    const YAML::Node key_node = it->first;
    const YAML::Node value = it->second;
    const int key_line = LineOf(key_node);
    if (!key_node.IsScalar()) {
      source_->Fail(key_line, path_, fmt::format("keys must be plain names; got {} as a key", DescribeNode(key_node)));
    }
    const std::string key = key_node.Scalar();
    const std::string child = ChildPath(key);
    if (check_keys && std::find(allowed.begin(), allowed.end(), key) == allowed.end()) {
      source_->Fail(key_line, child,
                    fmt::format("unknown key; allowed keys {}: {}",
                                path_.empty() ? std::string("at the top level") : "under " + path_, Join(allowed)));
    }
    for (const Entry& seen : entries_) {
      if (seen.key == key) {
        source_->Fail(key_line, child,
                      fmt::format("duplicate key (first at line {}); each key may appear only once", seen.key_line));
      }
    }
    // Errors about a value as a whole name its key's line: a block mapping
    // or list value starts on the next line, and a null one has no position.
    entries_.push_back(Entry{key, key_line, Value(source_, value, key_line, child)});
  }
}

std::string MapReader::ChildPath(std::string_view key) const {
  return path_.empty() ? std::string(key) : fmt::format("{}.{}", path_, key);
}

std::optional<Value> MapReader::Get(std::string_view key) const {
  for (const Entry& e : entries_) {
    if (e.key == key) return e.value;
  }
  return std::nullopt;
}

Value MapReader::Require(std::string_view key, std::string_view allowed) const {
  std::optional<Value> v = Get(key);
  if (!v) source_->Fail(line_, ChildPath(key), fmt::format("missing; {}", allowed));
  return std::move(*v);
}

void MapReader::Fail(std::string_view text) const { source_->Fail(line_, path_, text); }

}  // namespace lyapcast::config_internal
