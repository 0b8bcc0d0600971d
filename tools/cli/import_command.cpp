// lyapcast import: backfill a running daemon from a historian-style CSV file
// (a header row, a time column, one column per tag, any order, ',' or ';'
// delimited, quoted fields allowed). The feed's channels come from the
// daemon (GET /v1/feeds); each row becomes one ingest line, sent in file
// order through the ingest port with acknowledgements (as `replay` does), and
// every rejection, local or the daemon's, is reported with the file line.
#include <fmt/format.h>
#include <sys/stat.h>
#include <unistd.h>

#include <CLI/CLI.hpp>
#include <chrono>
#include <cstdio>
#include <deque>
#include <fstream>
#include <iostream>
#include <map>
#include <optional>

#include "cli_common.h"
#include "commands.h"
#include "core/secret.h"
#include "csv_reader.h"
#include "import_plan.h"
#include "ingest_client.h"
#include "remote_common.h"

namespace lyapcast::cli {
namespace {

constexpr const char* kCmd = "import";
constexpr std::size_t kShownInFull = 20;       // rejections printed with their line and text
constexpr double kProgressEverySeconds = 2.0;  // progress lines on stderr

struct ImportArgs {
  RemoteArgs remote;
  std::string input, feed, to, ingest_token_file, time_column, time_format = "auto", delimiter = ",";
  std::vector<std::string> maps, scales;
};

// What the daemon says about the feed (GET /v1/feeds).
struct FeedInfo {
  std::vector<std::string> channels;
  std::optional<double> retention_s;
  std::optional<DataTime> newest;
};

Result<FeedInfo> GetFeed(Remote& remote, const std::string& id) {
  auto body = remote.GetJson("/v1/feeds");
  if (!body.ok()) return body.status();
  const json* feeds = Field(*body, "feeds");
  if (feeds == nullptr || !feeds->is_array()) {
    return Status::Corruption(fmt::format("GET /v1/feeds from {}: no 'feeds' list in the answer", remote.url()));
  }
  std::string ids;
  for (const json& f : *feeds) {
    const std::string fid = Text(Field(f, "id"));
    ids += (ids.empty() ? "" : ", ") + fid;
    if (fid != id) continue;
    FeedInfo info;
    const json* channels = Field(f, "channels");
    if (channels == nullptr || !channels->is_array() || channels->empty()) {
      return Status::Corruption(fmt::format("GET /v1/feeds from {}: feed {} without channels", remote.url(), id));
    }
    for (const json& c : *channels) {
      const std::string name = c.is_object() ? Text(Field(c, "name")) : Text(&c);
      if (name.empty()) {
        return Status::Corruption(
            fmt::format("GET /v1/feeds from {}: a channel of feed {} without a name", remote.url(), id));
      }
      info.channels.push_back(name);
    }
    info.retention_s = Number(Field(f, "retention_s"));
    info.newest = TimeOf(Path(f, {"window", "newest"}));
    return info;
  }
  return Status::Invalid(fmt::format("--feed {}: the daemon at {} has no such feed; its feeds: {}", id, remote.url(),
                                     ids.empty() ? "none" : ids));
}

Result<char> ParseDelimiter(const std::string& text) {
  if (text == "," || text == ";") return text[0];
  if (text == "tab" || text == "\\t" || text == "\t") return '\t';
  return Status::Invalid(fmt::format("--delimiter '{}': expected , or ; or tab", text));
}

// One rejected row: where, and why.
struct Rejection {
  std::string code;
  std::string text;
};

// Rejections in file-line order: every code counted, the first
// kShownInFull lines kept in full (local ones are found while reading,
// the daemon's arrive later, so the first by line are kept, not by arrival).
class Rejections {
 public:
  void Add(std::int64_t line, std::string code, std::string text) {
    ++by_code_[code];
    ++total_;
    shown_.emplace(line, Rejection{std::move(code), std::move(text)});
    if (shown_.size() > kShownInFull) shown_.erase(std::prev(shown_.end()));
  }
  std::int64_t total() const { return total_; }
  std::int64_t count(const std::string& code) const {
    const auto it = by_code_.find(code);
    return it == by_code_.end() ? 0 : it->second;
  }
  void Print(const std::string& file) const {
    if (total_ == 0) return;
    std::string codes;
    for (const auto& [code, n] : by_code_) codes += fmt::format("{}{} {}", codes.empty() ? "" : ", ", n, code);
    std::fprintf(stderr, "rejected: %s\n", codes.c_str());
    std::map<std::string, std::int64_t> rest = by_code_;
    for (const auto& [line, r] : shown_) {
      std::fprintf(stderr, "  %s:%lld: %s %s\n", file.c_str(), static_cast<long long>(line), r.code.c_str(),
                   r.text.c_str());
      --rest[r.code];
    }
    if (total_ > static_cast<std::int64_t>(shown_.size())) {
      std::string more;
      for (const auto& [code, n] : rest) {
        if (n > 0) more += fmt::format("{}{} {}", more.empty() ? "" : ", ", n, code);
      }
      std::fprintf(stderr, "  and %lld more: %s\n",
                   static_cast<long long>(total_ - static_cast<std::int64_t>(shown_.size())), more.c_str());
    }
  }

 private:
  std::map<std::string, std::int64_t> by_code_;
  std::multimap<std::int64_t, Rejection> shown_;
  std::int64_t total_ = 0;
};

// "error <line> <code> <text>" -> code and text.
Rejection ParseErrorReply(const std::string& reply) {
  const auto a = reply.find(' ');
  const auto b = a == std::string::npos ? a : reply.find(' ', a + 1);
  if (b == std::string::npos) return {"?", reply};
  const auto c = reply.find(' ', b + 1);
  if (c == std::string::npos) return {reply.substr(b + 1), ""};
  return {reply.substr(b + 1, c - b - 1), reply.substr(c + 1)};
}

struct Counts {
  std::int64_t rows = 0, accepted = 0, skipped = 0, line = 0;
  std::optional<DataTime> oldest, newest;  // of the accepted rows
};

// A progress line on stderr every kProgressEverySeconds (none for a file
// read faster than that): redrawn in place on a terminal, one line each time
// otherwise.
class Progress {
 public:
  explicit Progress(std::uint64_t total_bytes)
      : total_bytes_(total_bytes), tty_(::isatty(STDERR_FILENO) != 0), next_(Clock::now()) {
    next_ += std::chrono::duration_cast<Clock::duration>(std::chrono::duration<double>(kProgressEverySeconds));
  }
  void Tick(const Counts& n, std::int64_t rejected, std::uint64_t bytes) {
    const auto now = Clock::now();
    if (now < next_) return;
    next_ = now + std::chrono::duration_cast<Clock::duration>(std::chrono::duration<double>(kProgressEverySeconds));
    const std::string share =
        total_bytes_ > 0 ? fmt::format(" ({}%)", std::min<std::uint64_t>(100, 100 * bytes / total_bytes_)) : "";
    const std::string text = fmt::format("line {}{}: {} rows read, {} accepted, {} rejected, {} skipped", n.line, share,
                                         n.rows, n.accepted, rejected, n.skipped);
    if (tty_) {
      std::fprintf(stderr, "\r%s\033[K", text.c_str());
      drawn_ = true;
    } else {
      std::fprintf(stderr, "%s\n", text.c_str());
    }
  }
  void Finish() {
    if (drawn_) std::fputc('\n', stderr);
    drawn_ = false;
  }

 private:
  using Clock = std::chrono::steady_clock;
  std::uint64_t total_bytes_;
  bool tty_;
  bool drawn_ = false;
  Clock::time_point next_;
};

int RunImport(const ImportArgs& a) {
  // Arguments first: nothing is sent before they are all right.
  auto delimiter = ParseDelimiter(a.delimiter);
  if (!delimiter.ok()) return PrintError(kCmd, delimiter.status().message()), kExitUsage;
  auto time_format = ParseTimeFormat(a.time_format);
  if (!time_format.ok()) return PrintError(kCmd, time_format.status().message()), kExitUsage;
  if (auto path = FeedPath(a.feed); !path.ok()) return PrintError(kCmd, path.status().message()), kExitUsage;
  const auto colon = a.to.rfind(':');
  if (colon == std::string::npos || colon == 0 || colon + 1 == a.to.size() ||
      a.to.find_first_not_of("0123456789", colon + 1) != std::string::npos) {
    return PrintError(kCmd, fmt::format("--to '{}': expected HOST:PORT, e.g. 127.0.0.1:7301", a.to)), kExitUsage;
  }
  std::string ingest_token;
  if (!a.ingest_token_file.empty()) {
    auto t = ReadTokenFile(a.ingest_token_file);
    if (!t.ok()) return PrintError(kCmd, "--ingest-token-file: " + t.status().message()), kExitUsage;
    ingest_token = std::move(t).value();
  }
  const std::string name = a.input == "-" ? "stdin" : a.input;
  std::ifstream file;
  std::istream* in = &std::cin;
  std::uint64_t total_bytes = 0;
  if (a.input != "-") {
    file.open(a.input, std::ios::binary);
    if (!file) return PrintError(kCmd, "cannot read " + a.input), kExitUsage;
    in = &file;
    struct stat st {};
    if (::stat(a.input.c_str(), &st) == 0 && S_ISREG(st.st_mode)) total_bytes = static_cast<std::uint64_t>(st.st_size);
  }

  // The feed's channels, from the daemon.
  auto remote = Remote::Open(a.remote);
  if (!remote.ok()) return PrintError(kCmd, remote.status().message()), kExitUsage;
  auto feed = GetFeed(**remote, a.feed);
  if (!feed.ok()) return PrintError(kCmd, feed.status().message()), RemoteExitCode(feed.status());

  // The header and the plan.
  CsvReader reader(*in, *delimiter);
  CsvRecord record;
  if (!reader.Next(record)) return PrintError(kCmd, name + " is empty: expected a header row first"), kExitUsage;
  // A header that does not split is most often a file with another delimiter.
  const std::string delimiter_hint =
      record.fields.size() <= 1
          ? fmt::format(
                " (read with --delimiter '{}' it has one column at most: is the file delimited by ';' or tabs?)",
                *delimiter == '\t' ? std::string("tab") : std::string(1, *delimiter))
          : "";
  if (!record.error.empty()) {
    return PrintError(kCmd,
                      fmt::format("{}:{}: the header row: {}{}", name, record.line, record.error, delimiter_hint)),
           kExitUsage;
  }
  ImportOptions options;
  options.time_column = a.time_column;
  options.maps = a.maps;
  options.scales = a.scales;
  options.time_format = *time_format;
  auto plan = PlanImport(a.feed, record.fields, feed->channels, options);
  if (!plan.ok()) {
    return PrintError(kCmd, fmt::format("{}: {}{}", name, plan.status().message(), delimiter_hint)), kExitUsage;
  }
  std::fprintf(stderr, "import %s into feed %s: %s\n", name.c_str(), a.feed.c_str(), plan->Describe().c_str());
  if (!plan->ignored.empty()) {
    std::fprintf(stderr, "ignoring %zu column%s that feed%s no channel: %s\n", plan->ignored.size(),
                 plan->ignored.size() == 1 ? "" : "s", plan->ignored.size() == 1 ? "s" : "",
                 plan->DescribeIgnored().c_str());
  }

  // Send. Replies come in the order of the lines sent: the front of
  // `in_flight` is the row the next reply answers.
  struct Sent {
    std::int64_t line;
    DataTime t;
  };
  std::deque<Sent> in_flight;
  Counts n;
  Rejections rejections;
  std::string stray;  // a reply to no sent line (e.g. too-many-connections)
  IngestClient client;
  client.set_reply_handler([&](const std::string& reply) {
    if (in_flight.empty()) {
      stray = reply;
      return;
    }
    const Sent row = in_flight.front();
    in_flight.pop_front();
    if (reply.rfind("ok", 0) == 0) {
      ++n.accepted;
      if (!n.oldest || row.t < *n.oldest) n.oldest = row.t;
      if (!n.newest || row.t > *n.newest) n.newest = row.t;
    } else {
      Rejection r = ParseErrorReply(reply);
      rejections.Add(row.line, std::move(r.code), std::move(r.text));
    }
  });
  if (Status s = client.Connect(a.to, ingest_token); !s.ok()) return PrintError(kCmd, s.message()), kExitFailure;

  Progress progress(total_bytes);
  Status failed;
  while (reader.Next(record)) {
    ++n.rows;
    n.line = record.last_line;
    if (!record.error.empty()) {
      rejections.Add(record.line, "bad-csv", record.error);
    } else {
      ImportRow row = ConvertRow(*plan, record.fields);
      if (row.kind == ImportRow::Kind::kRejected && record.last_line > record.line) {
        // A quoted field that swallowed the lines after it (a quote not
        // closed) must not cost them: reject this line, read on from the next.
        reader.GiveBackContinuation();
        row.code = "bad-csv";
        row.message = fmt::format(
            "a quoted field runs from this line to line {} and the record is no valid row ({}); "
            "a quote not closed? reading on from line {}",
            record.last_line, row.message, record.line + 1);
      }
      switch (row.kind) {
        case ImportRow::Kind::kBlank:
          ++n.skipped;
          break;
        case ImportRow::Kind::kRejected:
          rejections.Add(record.line, std::move(row.code), std::move(row.message));
          break;
        case ImportRow::Kind::kSample:
          in_flight.push_back({record.line, row.t});
          failed = client.Send(row.line);
          break;
      }
    }
    if (!failed.ok()) break;
    progress.Tick(n, rejections.total(), reader.bytes_read());
  }
  if (failed.ok()) failed = client.Finish();
  progress.Finish();

  // The summary.
  const std::int64_t unanswered = static_cast<std::int64_t>(in_flight.size());
  std::fprintf(stderr,
               "imported %s into feed %s: %lld rows read, %lld accepted, %lld rejected, %lld skipped (blank)%s\n",
               name.c_str(), a.feed.c_str(), static_cast<long long>(n.rows), static_cast<long long>(n.accepted),
               static_cast<long long>(rejections.total()), static_cast<long long>(n.skipped),
               unanswered > 0 ? fmt::format(", {} sent but not answered", unanswered).c_str() : "");
  rejections.Print(name);
  // Retention: the daemon's figures now, after the import moved the feed's newest sample.
  const std::int64_t too_old = rejections.count("too-old");
  const bool long_span =
      n.oldest && n.newest && feed->retention_s && Seconds(*n.newest - *n.oldest) > *feed->retention_s;
  if (too_old > 0 || long_span) {
    auto now = GetFeed(**remote, a.feed);
    const FeedInfo& f = now.ok() ? *now : *feed;
    const std::string retention =
        f.retention_s ? FormatDuration(MicrosFromSeconds(*f.retention_s)) : std::string("storage.retention");
    if (too_old > 0) {
      std::fprintf(stderr,
                   "too-old: %lld row%s lay more than the feed's retention (%s) before its newest sample (%s). Older "
                   "history is accepted only while it is within the retention of the newest sample; import the "
                   "oldest history first, before newer data arrives, or raise storage.retention.\n",
                   static_cast<long long>(too_old), too_old == 1 ? "" : "s", retention.c_str(),
                   f.newest ? TimeText(*f.newest).c_str() : "-");
    }
    if (long_span) {
      const std::string cutoff = f.newest && f.retention_s
                                     ? " (those before " + TimeText(*f.newest - MicrosFromSeconds(*f.retention_s)) + ")"
                                     : "";
      std::fprintf(stderr,
                   "note: the accepted rows span %s, more than the feed's retention (%s): the daemon keeps the newest "
                   "%s of data time and prunes the older rows%s\n",
                   Age(Seconds(*n.newest - *n.oldest)).c_str(), retention.c_str(), retention.c_str(), cutoff.c_str());
    }
  }
  if (!stray.empty()) std::fprintf(stderr, "the daemon said: %s\n", stray.c_str());
  if (!failed.ok()) {
    PrintError(kCmd, fmt::format("the connection to {} failed: {}", a.to, failed.message()));
    if (unanswered > 0) {
      std::fprintf(stderr,
                   "rows from %s:%lld on were sent but not answered, and rows after line %lld were not read; run the "
                   "import again: rows already stored with the same values are accepted without being duplicated\n",
                   name.c_str(), static_cast<long long>(in_flight.front().line), static_cast<long long>(n.line));
    } else {
      std::fprintf(stderr,
                   "rows after line %lld were not read; run the import again: rows already stored with the same "
                   "values are accepted without being duplicated\n",
                   static_cast<long long>(n.line));
    }
    return kExitFailure;
  }
  return rejections.total() == 0 ? kExitOk : kExitFailure;
}

}  // namespace

void AddImportCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<ImportArgs>();
  CLI::App* cmd = app.add_subcommand("import", "Backfill a daemon's feed from a historian-style CSV file");
  cmd->footer(
      std::string(
          "Reads a CSV file with a header row: one column with the time, one column per tag, in any order.\n"
          "The feed's channels come from the daemon (--url); each row becomes one sample, sent in file order\n"
          "to the ingest port (--to) and committed before it is acknowledged.\n"
          "Columns: --time-column names the time column (default: the column named t, time or timestamp, in\n"
          "any case). --map COLUMN=CHANNEL (repeatable) sends a column to a channel; a column named like a\n"
          "channel feeds it without --map; other columns are ignored (listed in one notice). A channel with\n"
          "no column is missing in every row. --scale CHANNEL=FACTOR (repeatable) multiplies a channel's\n"
          "values, e.g. for a change of units.\n"
          "Cells: empty = the channel is missing in that row; numbers with a decimal point (1.5, -2e-3);\n"
          "fields may be quoted (\"...\", with \"\" for a quote). Times (--time-format): auto = a number is epoch\n"
          "seconds, anything else RFC 3339 with Z or an offset (2026-01-01T08:00:00.25+01:00); rfc3339;\n"
          "epoch-s; epoch-ms. Rows whose cells are all empty are skipped.\n"
          "Every rejected row, found here (bad-time, not-a-number, field-count, bad-csv, ...) or by the daemon\n"
          "(too-old, duplicate-time, future-time, ...), is reported with its line in the file (the header is\n"
          "line 1): the first 20 in full, the rest counted by code. A bad row never stops the import.\n"
          "History behind the feed's newest sample is accepted within storage.retention of it; older rows are\n"
          "rejected too-old. Rows already stored with the same values are accepted again without being\n"
          "duplicated, so an import can be run again after a failure.\n"
          "Exit codes: 0 every row accepted (blank rows aside), 1 some rejected or the connection failed,\n"
          "2 bad arguments or a header that does not fit the feed.\n"
          "Examples:\n"
          "  lyapcast import history.csv --feed loop-a --to 127.0.0.1:7301\n"
          "  lyapcast import export.csv --feed loop-a --to 127.0.0.1:7301 --delimiter ';' --time-column Zeit \\\n"
          "      --map 'FT-101=flow' --map 'TT-201=dtemp_h' --map 'TT-202=dtemp_v' --scale flow=0.001\n"
          "  lyapcast import ms.csv --feed rig-b --to 10.0.0.6:7301 --time-format epoch-ms \\\n"
          "      --url http://10.0.0.6:7302 --token-file read.token --ingest-token-file ingest.token\n") +
      kRemoteFooter);
  cmd->add_option("input,--input,-i", args->input, "the CSV file (- = stdin)")->required();
  cmd->add_option("--feed", args->feed, "feed id")->required();
  cmd->add_option("--to", args->to, "the daemon's ingest address, host:port (e.g. 127.0.0.1:7301)")->required();
  cmd->add_option("--time-column", args->time_column, "the column holding the time (default: t, time or timestamp)");
  cmd->add_option("--time-format", args->time_format, "auto, rfc3339, epoch-s or epoch-ms (default auto)");
  cmd->add_option("--map", args->maps, "COLUMN=CHANNEL: the column feeds the channel (repeatable)")
      ->allow_extra_args(false);
  cmd->add_option("--scale", args->scales, "CHANNEL=FACTOR: multiply the channel's values (repeatable)")
      ->allow_extra_args(false);
  cmd->add_option("--delimiter", args->delimiter, "field delimiter: , (default) or ; or tab");
  cmd->add_option("--ingest-token-file", args->ingest_token_file,
                  "ingest token file (auth.ingest_token_file); never printed");
  AddRemoteOptions(cmd, &args->remote);
  cmd->callback([args, exit_code] { *exit_code = RunImport(*args); });
}

}  // namespace lyapcast::cli
