// lyapcast replay: stream a file of ingest-format lines (CSV or NDJSON, as
// `simulate` and `export` write them) to a daemon's ingest port, as fast as
// it accepts them or paced at a multiple of the data-time rate, and report
// what was accepted and why anything was rejected.
#include <fmt/format.h>
#include <CLI/CLI.hpp>

#include <sys/stat.h>
#include <nlohmann/json.hpp>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <iostream>
#include <optional>
#include <thread>
#include <vector>

#include "cli_common.h"
#include "commands.h"
#include "core/data_time.h"
#include "core/secret.h"
#include "ingest_client.h"

namespace lyapcast::cli {
namespace {

struct ReplayArgs {
  std::string input, to, token_file;
  double speed = 0;
};

// The data time of an ingest line, or nullopt when it has none we can read
// (the daemon will say what is wrong with it).
std::optional<DataTime> LineTime(const std::string& line) {
  std::string t;
  if (!line.empty() && line.front() == '{') {
    const auto j = nlohmann::json::parse(line, nullptr, /*allow_exceptions=*/false);
    if (j.is_discarded() || !j.is_object() || !j.contains("t")) return std::nullopt;
    const auto& v = j["t"];
    if (v.is_number()) {
      auto r = DataTimeFromEpochSeconds(v.get<double>());
      return r.ok() ? std::optional<DataTime>(*r) : std::nullopt;
    }
    if (!v.is_string()) return std::nullopt;
    t = v.get<std::string>();
  } else {
    const auto a = line.find(',');
    if (a == std::string::npos) return std::nullopt;
    const auto b = line.find(',', a + 1);
    t = line.substr(a + 1, b == std::string::npos ? std::string::npos : b - a - 1);
  }
  if (auto r = ParseRfc3339(t); r.ok()) return *r;
  char* end = nullptr;
  const double s = std::strtod(t.c_str(), &end);
  if (t.empty() || end != t.c_str() + t.size()) return std::nullopt;
  auto r = DataTimeFromEpochSeconds(s);
  return r.ok() ? std::optional<DataTime>(*r) : std::nullopt;
}

// "error <line> <code> <text>" -> "<file>:<file line>: <code> <text>".
std::string Describe(const std::string& reply, const std::string& input, const std::vector<std::int64_t>& file_line,
                     std::int64_t first_data_line) {
  const auto a = reply.find(' ');
  const auto b = a == std::string::npos ? a : reply.find(' ', a + 1);
  if (a == std::string::npos || b == std::string::npos) return reply;
  const std::int64_t conn_line = std::strtoll(reply.substr(a + 1, b - a - 1).c_str(), nullptr, 10);
  const std::int64_t index = conn_line - first_data_line;
  if (index < 0 || index >= static_cast<std::int64_t>(file_line.size())) return reply;
  return fmt::format("{}:{}: {}", input == "-" ? "stdin" : input, file_line[static_cast<std::size_t>(index)],
                     reply.substr(b + 1));
}

int RunReplay(const ReplayArgs& a) {
  constexpr const char* kCmd = "replay";
  if (a.speed < 0 || !std::isfinite(a.speed))
    return PrintError(kCmd, "--speed must be >= 0 (0 = as fast as possible)"), kExitUsage;
  std::ifstream file;
  std::istream* in = &std::cin;
  std::int64_t total_lines = 0;  // 0: unknown (stdin, a pipe)
  if (a.input != "-") {
    file.open(a.input, std::ios::binary);
    if (!file) return PrintError(kCmd, "cannot read " + a.input), kExitUsage;
    in = &file;
    // A regular file's lines are counted first, for the progress bar.
    struct stat st {};
    if (::stat(a.input.c_str(), &st) == 0 && S_ISREG(st.st_mode)) {
      std::ifstream count(a.input, std::ios::binary);
      std::vector<char> buf(1 << 20);
      while (count.read(buf.data(), static_cast<std::streamsize>(buf.size())) || count.gcount() > 0) {
        total_lines += std::count(buf.data(), buf.data() + count.gcount(), '\n');
      }
      if (st.st_size > 0 && total_lines == 0) total_lines = 1;  // one line without a newline
    }
  }
  std::string token;
  if (!a.token_file.empty()) {
    auto t = ReadTokenFile(a.token_file);
    if (!t.ok()) return PrintError(kCmd, "--token-file: " + t.status().message()), kExitUsage;
    token = std::move(t).value();
  }
  const auto colon = a.to.rfind(':');
  if (colon == std::string::npos || colon == 0 || colon + 1 == a.to.size() ||
      a.to.find_first_not_of("0123456789", colon + 1) != std::string::npos) {
    return PrintError(kCmd, fmt::format("--to '{}': expected HOST:PORT, e.g. 127.0.0.1:7301", a.to)), kExitUsage;
  }
  IngestClient client;
  if (Status s = client.Connect(a.to, token); !s.ok()) return PrintError(kCmd, s.message()), kExitFailure;
  const std::int64_t first_data_line = token.empty() ? 1 : 2;  // the auth line is line 1 of the connection

  ProgressLine progress(total_lines > 0 ? std::max<std::int64_t>(total_lines / 10, 1) : 10000);
  const auto wall_start = std::chrono::steady_clock::now();
  std::optional<DataTime> t0;
  std::vector<std::int64_t> file_line;  // file line of each sent line
  std::int64_t line_no = 0;
  std::string line;
  Status failed;
  while (std::getline(*in, line)) {
    ++line_no;
    if (!line.empty() && line.back() == '\r') line.pop_back();
    const auto first = line.find_first_not_of(" \t");
    if (first == std::string::npos || line[first] == '#') continue;  // blank lines and comments
    if (a.speed > 0) {
      if (const auto t = LineTime(line)) {
        if (!t0) t0 = *t;
        const auto due =
            wall_start + std::chrono::duration_cast<Micros>((*t - *t0) / a.speed);
        std::this_thread::sleep_until(due);
      }
    }
    file_line.push_back(line_no);
    Status sent = client.Send(line);
    if (sent.ok() && a.speed > 0) sent = client.Flush();  // paced: on the wire when due
    if (!sent.ok()) {
      failed = sent;
      break;
    }
    const std::string detail =
        fmt::format("lines: {} sent, {} accepted, {} rejected", client.sent(), client.accepted(), client.rejected());
    progress.Update(total_lines > 0 ? std::min(line_no, total_lines) : client.sent(), total_lines, detail);
  }
  if (failed.ok()) failed = client.Finish();
  if (failed.ok() && total_lines > 0) {
    progress.Update(
        total_lines, total_lines,
        fmt::format("lines: {} sent, {} accepted, {} rejected", client.sent(), client.accepted(), client.rejected()));
  }
  progress.Finish();

  const std::int64_t unanswered = client.sent() - client.accepted() - client.rejected();
  std::fprintf(stderr, "replayed %lld lines of %s to %s: %lld accepted, %lld rejected%s\n",
               static_cast<long long>(client.sent()), a.input == "-" ? "stdin" : a.input.c_str(), a.to.c_str(),
               static_cast<long long>(client.accepted()), static_cast<long long>(client.rejected()),
               unanswered > 0 ? fmt::format(", {} unanswered", unanswered).c_str() : "");
  if (!client.rejected_by_code().empty()) {
    std::string codes;
    for (const auto& [code, n] : client.rejected_by_code())
      codes += fmt::format("{}{} {}", codes.empty() ? "" : ", ", n, code);
    std::fprintf(stderr, "rejected: %s; the first of each:\n", codes.c_str());
    for (const std::string& e : client.first_errors()) {
      std::fprintf(stderr, "  %s\n", Describe(e, a.input, file_line, first_data_line).c_str());
    }
  }
  if (!failed.ok()) {
    PrintError(kCmd, fmt::format("the connection to {} failed: {}", a.to, failed.message()));
    return kExitFailure;
  }
  return client.rejected() == 0 ? kExitOk : kExitFailure;
}

}  // namespace

void AddReplayCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<ReplayArgs>();
  CLI::App* cmd =
      app.add_subcommand("replay", "Stream a file of samples (CSV or NDJSON lines) to a daemon's ingest port");
  cmd->footer(
      "Sends every line of the file (blank lines and lines starting with # are skipped) to the ingest port,\n"
      "as fast as the daemon accepts them, or with --speed X paced so that data time runs X times faster\n"
      "than the wall clock (from the first line's time). Progress goes to stderr, then the counts of accepted\n"
      "and rejected lines and the first rejection of each kind with its line in the file.\n"
      "Exit codes: 0 every line accepted, 1 some rejected or the connection failed, 2 bad arguments.\n"
      "A sample already stored with the same values is accepted again without being duplicated, so a replay\n"
      "can be repeated after a failure. Samples older than the feed's retention (from its newest sample) or\n"
      "later than the daemon's clock allows are rejected (too-old, future-time).\n"
      "Examples:\n"
      "  lyapcast replay --input loop.csv --to 127.0.0.1:7301\n"
      "  lyapcast simulate -c config/demo.yaml --feed loop-a --duration 1h | lyapcast replay --input - --to "
      "127.0.0.1:7301\n"
      "  lyapcast export --feed loop-a --from 2026-01-01T00:00:00Z --to 2026-01-01T06:00:00Z --out day.csv\n"
      "  lyapcast replay --input day.csv --to 10.0.0.6:7301 --speed 60 --token-file /etc/lyapcast/ingest.token");
  cmd->add_option("--input,-i", args->input, "file of ingest lines (- = stdin)")->required();
  cmd->add_option("--to", args->to, "the daemon's ingest address, host:port (e.g. 127.0.0.1:7301)")->required();
  cmd->add_option("--speed", args->speed,
                  "data time runs this many times faster than wall time (default 0 = as fast as possible)");
  cmd->add_option("--token-file", args->token_file, "ingest token file (auth.ingest_token_file); never printed");
  cmd->callback([args, exit_code] { *exit_code = RunReplay(*args); });
}

}  // namespace lyapcast::cli
