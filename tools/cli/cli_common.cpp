#include "cli_common.h"

#include <fmt/format.h>
#include <unistd.h>

#include <algorithm>
#include <charconv>
#include <chrono>
#include <cstdio>
#include <fstream>
#include <iostream>
#include <limits>

#include "ingest/line_parser.h"

namespace lyapcast::cli {

Result<LoadedFeed> LoadFeed(const std::filesystem::path& config_path, const std::string& feed_id) {
  auto config = LoadConfig(config_path);
  if (!config.ok()) return config.status();
  LoadedFeed out;
  out.config = std::move(config).value();
  if (feed_id.empty()) {
    if (out.config.feeds.size() != 1) {
      std::string ids;
      for (const auto& f : out.config.feeds) ids += (ids.empty() ? "" : ", ") + f.id;
      return Status::Invalid(fmt::format("{} has {} feeds ({}); choose one with --feed", config_path.string(),
                                         out.config.feeds.size(), ids));
    }
    out.index = 0;
  } else {
    out.index = out.config.FeedIndex(feed_id);
    if (out.index < 0) {
      return Status::NotFound(fmt::format("{} has no feed '{}'", config_path.string(), feed_id));
    }
  }
  return out;
}

Result<SampleFile> ReadSamples(const std::filesystem::path& path, const LoadedFeed& feed) {
  std::ifstream file;
  std::istream* in = &std::cin;
  if (path != "-") {
    file.open(path);
    if (!file) return Status::Io(fmt::format("cannot read {}", path.string()));
    in = &file;
  }
  // Offline files may hold any data time: no future-skew check.
  LineParser parser(feed.config, Micros::max() / 4);
  SampleFile out;
  std::string line;
  std::int64_t line_no = 0;
  bool sorted = true;
  while (std::getline(*in, line)) {
    ++line_no;
    const auto first = line.find_first_not_of(" \t\r");
    if (first == std::string::npos || line[first] == '#') continue;
    ParsedLine p = parser.Parse(line, WallTime{});
    if (p.kind != ParsedLine::Kind::kSample) {
      if (p.kind == ParsedLine::Kind::kReject && p.reason == RejectReason::kUnknownFeed) {
        return Status::Invalid(fmt::format("{}:{}: {}", path.string(), line_no, p.message));
      }
      if (p.kind == ParsedLine::Kind::kAuth) continue;
      return Status::Invalid(fmt::format("{}:{}: {} {}", path.string(), line_no, RejectCode(p.reason), p.message));
    }
    if (static_cast<int>(p.sample.feed) != feed.index) {
      ++out.other_feeds;
      continue;
    }
    if (!out.samples.empty() && p.sample.sample.t <= out.samples.back().t) sorted = false;
    out.samples.push_back(std::move(p.sample.sample));
  }
  if (!sorted) {
    std::stable_sort(out.samples.begin(), out.samples.end(), [](const Sample& a, const Sample& b) { return a.t < b.t; });
    // Keep the first of equal times, as the store does for duplicates.
    out.samples.erase(std::unique(out.samples.begin(), out.samples.end(),
                                  [](const Sample& a, const Sample& b) { return a.t == b.t; }),
                      out.samples.end());
  }
  return out;
}

Result<std::vector<double>> ParseNumberList(const std::string& text, std::size_t count, const char* what) {
  std::vector<double> out;
  std::size_t pos = 0;
  while (pos <= text.size()) {
    const std::size_t comma = std::min(text.find(',', pos), text.size());
    const std::string field = text.substr(pos, comma - pos);
    double v = 0;
    const auto [end, ec] = std::from_chars(field.data(), field.data() + field.size(), v);
    if (ec != std::errc() || end != field.data() + field.size() || field.empty()) {
      return Status::Invalid(fmt::format("{}: '{}' is not a number", what, field));
    }
    out.push_back(v);
    pos = comma + 1;
  }
  if (out.size() != count) {
    return Status::Invalid(fmt::format("{}: expected {} comma-separated numbers, got {}", what, count, out.size()));
  }
  return out;
}

ProgressLine::ProgressLine(std::int64_t log_every) : tty_(::isatty(STDERR_FILENO) != 0), log_every_(log_every) {}

void ProgressLine::Update(std::int64_t done, std::int64_t total, const std::string& detail) {
  const double now =
      std::chrono::duration<double>(std::chrono::steady_clock::now().time_since_epoch()).count();
  if (total <= 0) {  // unknown total: the count and the detail only
    if (tty_) {
      if (now - last_draw_ < 0.1) return;
      last_draw_ = now;
      std::fprintf(stderr, "\r%s\033[K", detail.c_str());
      drawn_ = true;
    } else if (done / log_every_ != last_logged_) {
      last_logged_ = done / log_every_;
      std::fprintf(stderr, "%s\n", detail.c_str());
    }
    return;
  }
  if (tty_) {
    if (done != total && now - last_draw_ < 0.1) return;
    last_draw_ = now;
    constexpr int kWidth = 24;
    const int filled = total > 0 ? static_cast<int>(kWidth * done / total) : 0;
    std::fprintf(stderr, "\r[%s%s] %3d%% %s\033[K", std::string(static_cast<std::size_t>(filled), '#').c_str(),
                 std::string(static_cast<std::size_t>(kWidth - filled), '.').c_str(),
                 total > 0 ? static_cast<int>(100 * done / total) : 0, detail.c_str());
    drawn_ = true;
  } else if (done == total || done / log_every_ != last_logged_) {
    last_logged_ = done / log_every_;
    std::fprintf(stderr, "%lld/%lld %s\n", static_cast<long long>(done), static_cast<long long>(total),
                 detail.c_str());
  }
}

void ProgressLine::Finish() {
  if (tty_ && drawn_) std::fputc('\n', stderr);
  drawn_ = false;
}

void PrintError(const char* command, const std::string& message) {
  std::fprintf(stderr, "lyapcast %s: %s\n", command, message.c_str());
}

}  // namespace lyapcast::cli
