// Private to lib/config: typed, position-aware reading of a yaml-cpp tree.
//
// Every read either returns a value in its allowed range or fails with a
// message "<file>:<line>: <key path>: <what is wrong>; <what is allowed>".
// Failures are thrown as ConfigError, which never leaves lib/config:
// ParseConfig() catches it and returns a Status. Throwing keeps the schema
// walk in config.cpp one line per key instead of one error check per key.
//
// yaml-cpp 0.7 keeps duplicate mapping keys (node["k"] returns the first), so
// MapReader iterates each mapping once, rejecting duplicates and unknown keys
// before anything is read from it.
//
// Thread safety: plain values over a yaml-cpp tree; one thread at a time.
#pragma once

#include <yaml-cpp/yaml.h>

#include <cstdint>
#include <limits>
#include <optional>
#include <stdexcept>
#include <string>
#include <string_view>
#include <vector>

#include <filesystem>

#include "core/data_time.h"
#include "core/status.h"

namespace lyapcast::config_internal {

// A finished error message; thrown only inside lib/config.
class ConfigError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

// 1-based line of a node, or 1 when yaml-cpp has no position for it.
int LineOf(const YAML::Node& node);

// "'text'" for scalars, "a mapping", "a list", "nothing" for null.
std::string DescribeNode(const YAML::Node& node);

// "a, b, c".
std::string Join(const std::vector<std::string>& items, std::string_view separator = ", ");

// The whole text of a YAML file; kIo "cannot read <what> file '<path>': <why>"
// when it is a directory, missing, unreadable or fails mid-read.
[[nodiscard]] Result<std::string> ReadYamlFile(const std::filesystem::path& file, std::string_view what);

// Names the config in messages.
class Source {
 public:
  explicit Source(std::string name) : name_(std::move(name)) {}
  const std::string& name() const { return name_; }
  // Throws ConfigError "<name>:<line>: <path>: <text>" ("<name>:<line>: <text>"
  // when path is empty).
  [[noreturn]] void Fail(int line, std::string_view path, std::string_view text) const;

 private:
  std::string name_;
};

// Integer bounds, both inclusive.
struct IntRange {
  long long lo = std::numeric_limits<int>::min();
  long long hi = std::numeric_limits<int>::max();
  std::string Describe() const;  // "an integer >= 1", "an integer in [0, 10]"
};

// Real bounds; infinite bounds mean unbounded.
struct RealRange {
  double lo = -std::numeric_limits<double>::infinity();
  double hi = std::numeric_limits<double>::infinity();
  bool lo_open = false;
  bool hi_open = false;
  bool Contains(double v) const;
  std::string Describe() const;  // "a number > 0", "a number in [0, 1)"

  static RealRange Any() { return {}; }
  static RealRange Positive() { return {0.0, std::numeric_limits<double>::infinity(), true, false}; }
  static RealRange NonNegative() { return {0.0, std::numeric_limits<double>::infinity(), false, false}; }
  static RealRange Between(double lo, double hi, bool lo_open, bool hi_open) { return {lo, hi, lo_open, hi_open}; }
};

// Durations must be > 0 unless allow_zero; never more than ten years, so sums
// and products of config durations cannot overflow int64 microseconds.
struct DurationRule {
  bool allow_zero = false;
  std::string Describe() const;
  static DurationRule Positive() { return {false}; }
  static DurationRule NonNegative() { return {true}; }
};
inline constexpr Micros kMaxConfigDuration = 3650LL * 86400 * kSecond;

class MapReader;

// One node of the tree with its key path ("feeds[0].retrain.batch") and the
// line errors about it should name.
class Value {
 public:
  Value(const Source* source, YAML::Node node, int line, std::string path)
      : source_(source), node_(std::move(node)), line_(line), path_(std::move(path)) {}

  const Source* source() const { return source_; }
  const YAML::Node& node() const { return node_; }
  const std::string& path() const { return path_; }
  int line() const { return line_; }
  bool IsNull() const { return node_.IsNull(); }

  [[noreturn]] void Fail(std::string_view text) const;
  // Fails with "must be <allowed>; got <this node>".
  [[noreturn]] void FailMustBe(std::string_view allowed) const;

  // Scalar text (possibly empty when quoted ""); `allowed` describes the
  // expected form for the error when the node is not a scalar.
  std::string Text(std::string_view allowed) const;
  int Int(IntRange range) const;
  double Real(RealRange range) const;
  bool Bool() const;
  Micros Duration(DurationRule rule) const;
  std::uint64_t Size(std::uint64_t lo, std::uint64_t hi) const;

  // Elements of a list with paths "<path>[i]"; null reads as an empty list.
  std::vector<Value> List(std::string_view allowed) const;
  // A mapping whose keys must be among `allowed`; null reads as empty.
  MapReader Map(std::vector<std::string> allowed) const;
  // A mapping with any plain keys (the caller checks them); null reads as empty.
  MapReader MapAnyKeys() const;

 private:
  const Source* source_;
  YAML::Node node_;
  int line_;
  std::string path_;
};

// A mapping checked for plain scalar keys, duplicates and (optionally)
// unknown keys, in file order.
class MapReader {
 public:
  struct Entry {
    std::string key;
    int key_line;
    Value value;
  };

  // `allowed` empty with check_keys false accepts any key.
  MapReader(const Value& map, std::vector<std::string> allowed, bool check_keys);

  const std::string& path() const { return path_; }
  int line() const { return line_; }
  const std::vector<Entry>& entries() const { return entries_; }
  // "<path>.<key>", or "<key>" at the top level.
  std::string ChildPath(std::string_view key) const;

  std::optional<Value> Get(std::string_view key) const;
  // Fails "<path>.<key>: missing; <allowed>" at the mapping's line.
  Value Require(std::string_view key, std::string_view allowed) const;
  [[noreturn]] void Fail(std::string_view text) const;

 private:
  const Source* source_;
  std::string path_;
  int line_;
  std::vector<Entry> entries_;
};

}  // namespace lyapcast::config_internal
