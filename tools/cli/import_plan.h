// How `lyapcast import` turns the rows of a historian-style CSV file into
// ingest lines (docs/protocol.md "Sample line format"): ImportPlan says which
// column holds the time and which column feeds which of the feed's channels
// (from the header, the feed's channels as the daemon lists them, and the
// options); ConvertRow turns one row into one ingest CSV line, or into a
// rejection with the daemon's reject code and a message naming the column.
// Pure functions; thread-safe.
#pragma once

#include <cstddef>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "core/data_time.h"
#include "core/status.h"

namespace lyapcast::cli {

// --time-format: auto (a number is epoch seconds, anything else RFC 3339),
// rfc3339, epoch-s, epoch-ms.
enum class TimeFormat { kAuto, kRfc3339, kEpochSeconds, kEpochMillis };
[[nodiscard]] Result<TimeFormat> ParseTimeFormat(std::string_view text);
const char* TimeFormatName(TimeFormat format);

// One time cell (spaces around it ignored). Epoch numbers are read exactly
// as decimals ("1767225600.25", "1767225600250", "1.76722560025e9") and
// rounded to the microsecond; RFC 3339 needs an offset or Z and may carry a
// fraction of a second. Errors say what was expected.
[[nodiscard]] Result<DataTime> ParseTimeCell(std::string_view text, TimeFormat format);

// The epoch seconds text the ingest protocol reads back to the same
// microsecond: "1767225600.250000".
std::string EpochMicrosText(DataTime t);

struct ImportOptions {
  std::string time_column;          // "" = the column named t, time or timestamp (any case)
  std::vector<std::string> maps;    // "COLUMN=CHANNEL" (--map), COLUMN as in the header
  std::vector<std::string> scales;  // "CHANNEL=FACTOR" (--scale)
  TimeFormat time_format = TimeFormat::kAuto;
};

struct ImportPlan {
  std::string feed;
  std::vector<std::string> header;    // column names, spaces around them removed
  std::vector<std::string> channels;  // the feed's channels, in the feed's order
  std::size_t time_column = 0;
  std::vector<std::optional<std::size_t>> column_of;  // per channel: its column, or none (missing in every row)
  std::vector<double> scale;                          // per channel; 1 = unscaled
  std::vector<std::size_t> ignored;                   // columns that feed no channel (the time column excluded)
  TimeFormat time_format = TimeFormat::kAuto;

  // "time <- 'Time' (column 1, auto); flow <- 'Flow' (3); dtemp_h <- 'dT' (2) x 0.001; dtemp_v: no column"
  std::string Describe() const;
  // "'Quality' (4), 'Comment' (6)"
  std::string DescribeIgnored() const;
};

// The plan for a file with `header` (as read; trimmed here) into a feed
// with `channels`. The time column is --time-column, else the one column
// named t, time or timestamp in any case. A --map COLUMN=CHANNEL sends a
// column to a channel (COLUMN matched exactly, else case-insensitively when
// that is unambiguous); a column not mapped whose name equals a channel
// feeds that channel; other columns are ignored. Errors are usage errors
// (kInvalidArgument) naming the option and listing the header or the
// channels: an unknown or ambiguous column, an unknown channel, two columns
// for one channel, a bad --scale, no channel fed at all.
[[nodiscard]] Result<ImportPlan> PlanImport(std::string feed, std::vector<std::string> header,
                                            std::vector<std::string> channels, const ImportOptions& options);

struct ImportRow {
  enum class Kind { kSample, kBlank, kRejected };
  Kind kind = Kind::kBlank;
  std::string line;     // kSample: the ingest CSV line, without a line break
  DataTime t{};         // kSample: its time
  std::string code;     // kRejected: a reject code of docs/protocol.md (field-count, bad-time,
                        // not-a-number, non-finite, no-values)
  std::string message;  // kRejected: what was wrong, naming the column
};

// One record's fields -> an ingest line. A record whose fields are all
// empty (or only spaces) is kBlank. Empty cells are missing channels; a
// value is multiplied by its channel's scale.
ImportRow ConvertRow(const ImportPlan& plan, const std::vector<std::string>& fields);

}  // namespace lyapcast::cli
