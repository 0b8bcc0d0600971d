// Shared pieces of the lyapcast CLI commands: loading a feed from a config,
// reading sample files, a progress line on stderr, and error reporting.
#pragma once

#include <cstdint>
#include <filesystem>
#include <string>
#include <vector>

#include "config/config.h"
#include "core/sample.h"
#include "core/status.h"

namespace lyapcast::cli {

// Exit codes of the offline commands.
inline constexpr int kExitOk = 0;
inline constexpr int kExitFailure = 1;  // the work failed (I/O, diverged fit)
inline constexpr int kExitUsage = 2;    // bad arguments, config or input

struct LoadedFeed {
  Config config;
  int index = -1;
  const FeedConfig& feed() const { return config.feeds[static_cast<std::size_t>(index)]; }
};

// Loads `config_path` and finds `feed_id` (or the only feed when empty).
[[nodiscard]] Result<LoadedFeed> LoadFeed(const std::filesystem::path& config_path, const std::string& feed_id);

// Reads ingest-format lines (CSV or NDJSON, docs/protocol.md "Sample line format")
// of one feed from a file ("-" = stdin), in time order. Blank lines and
// lines starting with '#' are skipped; lines of other feeds are skipped and
// counted; a bad line is an error naming the file and line.
struct SampleFile {
  std::vector<Sample> samples;
  std::int64_t other_feeds = 0;
};
[[nodiscard]] Result<SampleFile> ReadSamples(const std::filesystem::path& path, const LoadedFeed& feed);

// Parses "1,2.5,-3" into exactly `count` numbers.
[[nodiscard]] Result<std::vector<double>> ParseNumberList(const std::string& text, std::size_t count,
                                                          const char* what);

// A single progress line on stderr, redrawn at most every 100 ms when stderr
// is a terminal, or printed whenever `done` passes a multiple of `log_every`
// otherwise. A total <= 0 means unknown: no bar, just the count and detail.
class ProgressLine {
 public:
  explicit ProgressLine(std::int64_t log_every = 1000);
  void Update(std::int64_t done, std::int64_t total, const std::string& detail);
  void Finish();

 private:
  bool tty_;
  std::int64_t log_every_;
  std::int64_t last_logged_ = -1;
  double last_draw_ = -1;
  bool drawn_ = false;
};

// Prints "lyapcast <command>: <message>" to stderr.
void PrintError(const char* command, const std::string& message);

}  // namespace lyapcast::cli
