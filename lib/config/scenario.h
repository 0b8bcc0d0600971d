// Simulation scenarios: which feeds `lyapcast simulate --scenario` streams
// and how each one's simulated instrument behaves (noise, dropped samples,
// missing channels, scheduled parameter changes). A scenario names feeds of
// a config; the config says their channels, steps and dynamics.
//
// File format (YAML, one document), every key but feeds[].feed optional:
//
//   duration: 2h            # data time simulated per feed (the CLI's --duration overrides)
//   feeds:                  # at least one; each feed at most once
//     - feed: loop-a        # a feed id of the config
//       seed: 11            # seed of noise, gaps and missing channels
//       transient: 5m       # integrated before the first sample
//       from: [1, 1, 1]     # initial state, one number per channel
//       step: 0.5s          # time between samples
//       noise: [0.05, 0.05, 0.05]   # sensor noise std: one number, or one per channel
//       gap_rate: 0.02      # probability that a sample is dropped, [0, 1)
//       missing_rate: 0.01  # probability that one random channel is missing, [0, 1]
//       jitter: 0.02        # timestamp jitter std as a fraction of the step, [0, 0.4]
//       changes: ["ra=28..30@0s..15m", "ra=38@15m"]   # see ParseParameterChange
//
// Times in changes are offsets from the first sample. The reader is as strict
// as the config's: unknown and duplicate keys, wrong types and values out of
// range are errors naming "<file>:<line>: <key path>: <what is wrong>; <what
// is allowed>", e.g.
//   config/demo-scenario.yaml:9: feeds[0].gap_rate: must be a number in [0, 1); got '1.5'
// What needs the config -- that each feed exists and has dynamics, that from
// and noise have one number per channel, that each change names a constant
// of the feed's dynamics -- is for the caller to check; ScenarioFeed keeps
// the lines to name in those messages (Scenario::Where).
//
// Thread safety: plain values; the functions are reentrant.
#pragma once

#include <cstdint>
#include <filesystem>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "core/data_time.h"
#include "core/status.h"

namespace lyapcast {

// A scheduled change of a named constant of a feed's dynamics: a step
// (t1 == t2, the value becomes `to` at t1) or a linear ramp from `from` at t1
// to `to` at t2 (t2 > t1). Times are offsets from the first sample (>= 0).
// Before t1 the constant keeps its value from the config.
struct ParameterChange {
  std::string name;
  double from = 0, to = 0;
  Micros t1{}, t2{};

  // The constant's value at `offset` >= t1.
  double ValueAt(Micros offset) const;
};

// Parses NAME=VALUE@T (a step) or NAME=A..B@T1..T2 (a ramp from A at T1 to B
// at T2), e.g. "ra=35@10m" or "ra=28..35@5m..15m"; durations as
// ParseDuration. The name is not checked here (it needs the dynamics).
// kInvalidArgument with a message that starts with the text in quotes and
// says what is wrong and the allowed forms:
//   'ra=1..2@5s': a ramp needs two values and two times; use NAME=VALUE@T ...
[[nodiscard]] Result<ParameterChange> ParseParameterChange(std::string_view text);

// One feed's simulated instrument. Defaults are those of `lyapcast simulate`
// for a single feed.
struct ScenarioFeed {
  std::string feed;                      // feed id (the config's grammar); required
  std::uint64_t seed = 1;                // noise, gaps and missing channels
  Micros transient{};                  // >= 0: integrated before the first sample
  std::vector<double> from;              // initial state; empty = 1 for every channel
  std::optional<Micros> step;            // > 0; unset = the feed's step
  std::vector<double> noise;             // each >= 0; empty = none, one = every channel, else one per channel
  double gap_rate = 0;                   // [0, 1)
  double missing_rate = 0;               // [0, 1]
  double jitter = 0;                     // [0, 0.4]
  std::vector<ParameterChange> changes;  // in file order

  // Lines of the file (1-based; 0 when the key is absent), for messages
  // about checks made against the config.
  struct Lines {
    int feed = 0;
    int from = 0;
    int noise = 0;
    std::vector<int> changes;  // one per change
  } lines;
};

struct Scenario {
  std::string source;              // the name used in messages (the file's path)
  std::optional<Micros> duration;  // > 0; unset = the caller must supply one
  std::vector<ScenarioFeed> feeds;  // at least one; feed ids distinct

  // "<source>:<line>: feeds[<index>].<key>" (without ".<key>" when key is
  // empty): the start of a message about a value of feeds[index].
  std::string Where(std::size_t index, std::string_view key, int line) const;
};

// Reads and checks a scenario file. Errors: kIoError when the file cannot be
// read, kInvalidArgument (naming file, line and key) for its contents.
[[nodiscard]] Result<Scenario> LoadScenario(const std::filesystem::path& file);

// Same for YAML text; `source_name` names it in messages and in
// Scenario::source.
[[nodiscard]] Result<Scenario> ParseScenario(std::string_view yaml, const std::string& source_name);

}  // namespace lyapcast
