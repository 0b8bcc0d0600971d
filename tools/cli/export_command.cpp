// lyapcast export: a feed's stored samples in a data-time range from a running
// daemon, page by page (GET /v1/feeds/{id}/samples?format=csv), as ingest-format
// CSV lines that `lyapcast replay` (or any sender) can stream back in.
#include <fmt/format.h>
#include <CLI/CLI.hpp>

#include <algorithm>
#include <cstdio>
#include <filesystem>

#include "cli_common.h"
#include "commands.h"
#include "remote_common.h"

namespace lyapcast::cli {
namespace {

// The daemon names the next page in a `Link: <target>; rel="next"` header
// (RFC 8288). Without one a full page is followed by a request from just
// after its last row.
constexpr const char* kLinkHeader = "Link";

// The `from` value of a next-page link's target, or "" when the header
// holds no rel="next" link with one (the daemon's links carry epoch
// numbers, which need no percent-decoding).
std::string NextFrom(const std::string& link) {
  const auto open = link.find('<');
  const auto close = link.find('>', open == std::string::npos ? 0 : open);
  if (open == std::string::npos || close == std::string::npos) return "";
  if (link.find("rel=\"next\"", close) == std::string::npos) return "";
  const std::string target = link.substr(open + 1, close - open - 1);
  auto at = target.find("?from=");
  if (at == std::string::npos) at = target.find("&from=");
  if (at == std::string::npos) return "";
  const std::string rest = target.substr(at + 6);
  return rest.substr(0, rest.find('&'));
}

struct ExportArgs {
  RemoteArgs remote;
  std::string feed, from, to, out = "-";
  std::string suspect = "raw";  // the samples API's suspect=: raw or omit
  int page_size = 10000;
};

int RunExport(const ExportArgs& a) {
  constexpr const char* kCmd = "export";
  auto path = FeedPath(a.feed);
  if (!path.ok()) return PrintError(kCmd, path.status().message()), kExitUsage;
  auto from = ParseTimeOption(a.from, "--from");
  if (!from.ok()) return PrintError(kCmd, from.status().message()), kExitUsage;
  auto to = ParseTimeOption(a.to, "--to");
  if (!to.ok()) return PrintError(kCmd, to.status().message()), kExitUsage;
  if (*to <= *from) return PrintError(kCmd, "--to must be later than --from (the range is [from, to))"), kExitUsage;
  if (a.page_size < 1 || a.page_size > 10000)
    return PrintError(kCmd, "--page-size must be from 1 to 10000"), kExitUsage;
  auto remote = Remote::Open(a.remote);
  if (!remote.ok()) return PrintError(kCmd, remote.status().message()), kExitUsage;

  // Into a temporary file renamed at the end, so a failed export leaves no
  // half file that looks complete.
  const std::string tmp = a.out == "-" ? "" : a.out + ".part";
  std::FILE* out = stdout;
  if (!tmp.empty()) {
    out = std::fopen(tmp.c_str(), "w");
    if (out == nullptr) return PrintError(kCmd, "cannot write " + tmp), kExitFailure;
  }
  ProgressLine progress(std::max<std::int64_t>((*to - *from).count() / 10, 1));
  const auto fail = [&](const std::string& message, int code) {
    progress.Finish();
    if (!tmp.empty()) {
      std::fclose(out);
      std::remove(tmp.c_str());
    }
    PrintError(kCmd, message);
    return code;
  };

  const std::string prefix = a.feed + ",";
  std::int64_t rows = 0, pages = 0;
  std::string page_from = FormatRfc3339(*from);
  DataTime reached = *from;
  while (true) {
    const std::string target =
        fmt::format("{}/samples?from={}&to={}&limit={}&format=csv&suspect={}", *path, UrlEncode(page_from),
                    UrlEncode(FormatRfc3339(*to)), a.page_size, a.suspect);
    auto res = (*remote)->Call("GET", target, "text/csv");
    if (!res.ok()) return fail(res.status().message(), RemoteExitCode(res.status()));
    ++pages;
    if (res->content_type.find("json") != std::string::npos) {
      return fail(fmt::format("the daemon at {} answered JSON to format=csv", (*remote)->url()), kExitFailure);
    }
    // Rows must be this feed's ingest CSV; anything else is not an export.
    std::size_t pos = 0, page_rows = 0;
    std::string last;
    while (pos < res->body.size()) {
      std::size_t nl = res->body.find('\n', pos);
      if (nl == std::string::npos) nl = res->body.size();
      std::string_view row(res->body.data() + pos, nl - pos);
      if (!row.empty() && row.back() == '\r') row.remove_suffix(1);
      pos = nl + 1;
      if (row.empty()) continue;
      if (row.substr(0, prefix.size()) != prefix) {
        return fail(fmt::format("page {} from {}: a row that is not feed {}'s ingest CSV: {}", pages, (*remote)->url(),
                                a.feed, Truncate(std::string(row), 80)),
                    kExitFailure);
      }
      std::fwrite(row.data(), 1, row.size(), out);
      std::fputc('\n', out);
      last = row;
      ++page_rows;
    }
    rows += static_cast<std::int64_t>(page_rows);
    bool have_last = false;
    if (!last.empty()) {
      const auto comma = last.find(',', prefix.size());
      if (auto t = ParseTimeOption(last.substr(prefix.size(), comma - prefix.size()), "t"); t.ok()) {
        reached = *t;
        have_last = true;
      }
    }
    progress.Update((reached - *from).count(), (*to - *from).count(),
                    fmt::format("{} samples exported, up to {}", rows, page_rows > 0 ? TimeText(reached) : page_from));
    std::string next = NextFrom(res->Header(kLinkHeader));
    // Without the header, a full page may not be the last: go on after its
    // last row (times are whole microseconds; the range is [from, to)).
    if (next.empty() && have_last && page_rows == static_cast<std::size_t>(a.page_size)) {
      next = FormatRfc3339(reached + Micros(1));
    }
    if (next.empty()) break;
    auto next_t = ParseTimeOption(next, "from");
    if (!next_t.ok()) {
      return fail(fmt::format("the daemon's next-page link: {}", next_t.status().message()), kExitFailure);
    }
    auto current = ParseTimeOption(page_from, "from");
    if (!current.ok() || *next_t <= *current) {
      return fail(fmt::format("the daemon's next page starts at {}, not after {}; stopping", next, page_from),
                  kExitFailure);
    }
    page_from = next;
  }
  progress.Finish();
  if (!tmp.empty()) {
    if (std::fclose(out) != 0) {
      std::remove(tmp.c_str());
      return PrintError(kCmd, "cannot finish writing " + tmp), kExitFailure;
    }
    std::error_code ec;
    std::filesystem::rename(tmp, a.out, ec);
    if (ec) return PrintError(kCmd, fmt::format("cannot rename {} to {}: {}", tmp, a.out, ec.message())), kExitFailure;
  } else if (std::fflush(stdout) != 0) {
    return PrintError(kCmd, "cannot write to stdout"), kExitFailure;
  }
  std::fprintf(stderr, "exported %lld samples of feed %s in [%s, %s) in %lld pages%s%s\n", static_cast<long long>(rows),
               a.feed.c_str(), TimeText(*from).c_str(), TimeText(*to).c_str(), static_cast<long long>(pages),
               a.out == "-" ? "" : " to ", a.out == "-" ? "" : a.out.c_str());
  return kExitOk;
}

}  // namespace

void AddExportCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<ExportArgs>();
  CLI::App* cmd = app.add_subcommand("export", "Write a feed's stored samples in a time range as replayable CSV");
  cmd->footer(
      std::string(
          "Pages through the daemon's stored samples of the feed with from <= t < to, oldest first, and writes\n"
          "them as ingest-format CSV lines (feed,epoch_s,values...; an empty field is a missing channel),\n"
          "exactly as stored, so `lyapcast replay` can stream them into another daemon. Progress on stderr.\n"
          "Suspect readings (the sensor screen's bad-quality codes, out-of-range values, outliers, spikes;\n"
          "never trained on) are written as received by default (--suspect raw): replayed into a daemon\n"
          "with the same quality config they are screened again, and nothing the instrument sent is lost.\n"
          "--suspect omit writes an empty field instead, for a consumer that must not see a -9999 as data.\n"
          "Times: RFC 3339 or epoch seconds. With --out the file appears only when the export is complete.\n"
          "Examples:\n"
          "  lyapcast export --feed loop-a --from 2026-01-01T00:00:00Z --to 2026-01-01T06:00:00Z --out day.csv\n"
          "  lyapcast export --feed loop-a --from 1767225600 --to 1767229200 | gzip > hour.csv.gz\n"
          "  lyapcast replay --input day.csv --to 127.0.0.1:7301\n") +
      kRemoteFooter);
  cmd->add_option("--feed", args->feed, "feed id")->required();
  cmd->add_option("--from", args->from, "start of the range (included)")->required();
  cmd->add_option("--to", args->to, "end of the range (excluded)")->required();
  cmd->add_option("--out,-o", args->out, "output file (default stdout)");
  cmd->add_option("--page-size", args->page_size, "samples per request (default 10000, the most the daemon gives)");
  cmd->add_option("--suspect", args->suspect,
                  "suspect readings: raw (default) writes the reading as received, omit an empty field")
      ->check(CLI::IsMember({"raw", "omit"}));
  AddRemoteOptions(cmd, &args->remote);
  cmd->callback([args, exit_code] { *exit_code = RunExport(*args); });
}

}  // namespace lyapcast::cli
