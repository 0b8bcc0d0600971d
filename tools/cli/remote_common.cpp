#include "remote_common.h"

#include <fmt/format.h>
#include <sys/ioctl.h>
#include <unistd.h>
#include <CLI/CLI.hpp>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdlib>
#include <thread>

#include "config/config.h"
#include "core/secret.h"
#include "monitor/health.h"

namespace lyapcast::cli {

const char* const kRemoteFooter =
    "The daemon's address comes from --url, else $LYAPCAST_URL, else http://127.0.0.1:7302.\n"
    "With auth.read_token_file (or admin_token_file) set in the daemon's config, pass that token with\n"
    "--token-file (the file holds the token on its first line; the token is never printed).";

void AddRemoteOptions(CLI::App* cmd, RemoteArgs* args) {
  cmd->add_option("--url", args->url, "the daemon's HTTP address (default $LYAPCAST_URL or http://127.0.0.1:7302)");
  cmd->add_option("--token-file", args->token_file, "file holding the bearer token (read or admin token)");
  cmd->add_option("--timeout", args->timeout, "time limit of each request, e.g. 10s or 500ms (default 10s)");
}

Result<std::unique_ptr<Remote>> Remote::Open(const RemoteArgs& args) {
  std::string url = args.url;
  if (url.empty()) {
    const char* env = std::getenv("LYAPCAST_URL");
    url = env != nullptr && *env != '\0' ? env : kDefaultUrl;
  }
  auto parsed = ParseHttpUrl(url);
  if (!parsed.ok()) return parsed.status();
  auto timeout = ParseDuration(args.timeout);
  if (!timeout.ok() || *timeout <= Micros{}) {
    return Status::Invalid(
        fmt::format("--timeout '{}': expected a positive duration such as 10s or 500ms", args.timeout));
  }
  std::string token;
  if (!args.token_file.empty()) {
    auto t = ReadTokenFile(args.token_file);
    if (!t.ok()) return Status::Invalid("--token-file: " + t.status().message());
    token = std::move(t).value();
  }
  return std::unique_ptr<Remote>(new Remote(std::make_unique<HttpClient>(*parsed, std::move(token), *timeout)));
}

namespace {

std::string Snippet(const std::string& body) {
  std::string s = body.substr(0, body.find('\n'));
  for (char& c : s) {
    if (static_cast<unsigned char>(c) < 0x20) c = ' ';
  }
  return Truncate(s, 120);
}

}  // namespace

Result<HttpClientResponse> Remote::Call(const std::string& method, const std::string& target,
                                        const std::string& accept, std::string request_body,
                                        const std::string& content_type) {
  last_http_status_ = 0;
  HttpClientRequest req;
  req.method = method;
  req.target = target;
  req.accept = accept;
  req.body = std::move(request_body);
  req.content_type = content_type;
  auto res = client_->Send(req);
  if (!res.ok()) {
    const Status& s = res.status();
    if (s.code() == StatusCode::kUnavailable && s.message().rfind("cannot connect", 0) == 0) {
      return Status::Unavailable(s.message() +
                                 " (is lyapcastd running there? set the address with --url or LYAPCAST_URL)");
    }
    return s;
  }
  if (res->status >= 200 && res->status < 300) return res;
  last_http_status_ = res->status;
  std::string message;
  const json body = json::parse(res->body, nullptr, /*allow_exceptions=*/false);
  if (!body.is_discarded()) message = Text(Path(body, {"error", "message"}));
  if (message.empty()) {
    message = res->body.empty() ? fmt::format("{} {} answered {} without a message", method, target, res->reason)
                                : fmt::format("{} {} answered: {}", method, target, Snippet(res->body));
  }
  message += fmt::format(" (HTTP {})", res->status);
  return Status(res->status == 404 ? StatusCode::kNotFound : StatusCode::kFailedPrecondition, message);
}

Result<json> Remote::GetJson(const std::string& target) {
  auto res = Call("GET", target);
  if (!res.ok()) return res.status();
  json body = json::parse(res->body, nullptr, /*allow_exceptions=*/false);
  if (body.is_discarded() || !body.is_object()) {
    return Status::Corruption(fmt::format("the answer to GET {} from {} is not a JSON object (is that lyapcastd?): {}",
                                          target, url(), Snippet(res->body)));
  }
  return body;
}

Result<json> Remote::PostJson(const std::string& target, std::string request_body,
                              const std::string& content_type) {
  auto res = Call("POST", target, "application/json", std::move(request_body), content_type);
  if (!res.ok()) return res.status();
  json body = json::parse(res->body, nullptr, /*allow_exceptions=*/false);
  if (body.is_discarded() || !body.is_object()) {
    return Status::Corruption(fmt::format("the answer to POST {} from {} is not a JSON object (is that lyapcastd?): {}",
                                          target, url(), Snippet(res->body)));
  }
  return body;
}

int RemoteExitCode(const Status& status) { return status.code() == StatusCode::kInvalidArgument ? 2 : 1; }

Result<json> FollowJob(Remote& remote, const std::string& feed_path, std::int64_t job, const std::string& state,
                       Micros limit, bool quiet) {
  const std::string job_path = fmt::format("{}/jobs/{}", feed_path, job);
  const auto started = std::chrono::steady_clock::now();
  auto pause = std::chrono::milliseconds(100);
  std::string last_state = state;
  while (true) {
    auto answer = remote.GetJson(job_path);
    if (!answer.ok()) return Status(answer.status().code(), fmt::format("job {}: {}", job, answer.status().message()));
    const std::string now = Text(Field(*answer, "state"));
    if (now == "done") return answer;
    if (now != last_state && !quiet) std::fprintf(stderr, "job %lld %s\n", static_cast<long long>(job), now.c_str());
    last_state = now;
    if (limit > Micros{} && std::chrono::steady_clock::now() - started > std::chrono::microseconds(limit)) {
      return Status::Unavailable(fmt::format("job {} is still {} after {}; it goes on in the daemon (GET {})", job,
                                             now, FormatDuration(limit), job_path));
    }
    std::this_thread::sleep_for(pause);
    pause = std::min(pause * 2, std::chrono::milliseconds(1000));
  }
}

Result<std::string> FeedPath(const std::string& feed_id) {
  if (!IsValidFeedId(feed_id)) {
    return Status::Invalid(fmt::format("--feed '{}' is not a feed id ([a-z0-9][a-z0-9_-]{{0,63}})", feed_id));
  }
  return "/v1/feeds/" + feed_id;
}

Result<std::vector<std::string>> ListFeeds(Remote& remote) {
  auto body = remote.GetJson("/v1/feeds");
  if (!body.ok()) return body.status();
  const json* feeds = Field(*body, "feeds");
  if (feeds == nullptr || !feeds->is_array()) {
    return Status::Corruption(fmt::format("GET /v1/feeds from {}: no 'feeds' list in the answer", remote.url()));
  }
  std::vector<std::string> ids;
  for (const json& f : *feeds) {
    const std::string id = f.is_object() ? Text(Field(f, "id")) : "";
    if (id.empty()) return Status::Corruption(fmt::format("GET /v1/feeds from {}: a feed without an id", remote.url()));
    ids.push_back(id);
  }
  return ids;
}

Result<DataTime> ParseTimeOption(const std::string& text, const char* option) {
  if (auto t = ParseRfc3339(text); t.ok()) return *t;
  char* end = nullptr;
  const double seconds = std::strtod(text.c_str(), &end);
  if (!text.empty() && end == text.c_str() + text.size()) {
    if (auto t = DataTimeFromEpochSeconds(seconds); t.ok()) return *t;
  }
  return Status::Invalid(
      fmt::format("{} '{}': expected an RFC 3339 time (2026-01-01T00:00:00Z) or epoch seconds", option, text));
}

const json* Field(const json& j, std::string_view key) {
  if (!j.is_object()) return nullptr;
  const auto it = j.find(key);
  if (it == j.end() || it->is_null()) return nullptr;
  return &*it;
}

const json* Path(const json& j, std::initializer_list<std::string_view> keys) {
  const json* at = &j;
  for (std::string_view k : keys) {
    at = Field(*at, k);
    if (at == nullptr) return nullptr;
  }
  return at;
}

std::optional<double> Number(const json* j) {
  if (j == nullptr || !j->is_number()) return std::nullopt;
  const double v = j->get<double>();
  return std::isfinite(v) ? std::optional<double>(v) : std::nullopt;
}

std::optional<std::int64_t> Integer(const json* j) {
  if (j == nullptr || !j->is_number_integer()) return std::nullopt;
  return j->get<std::int64_t>();
}

std::optional<bool> Bool(const json* j) {
  if (j == nullptr || !j->is_boolean()) return std::nullopt;
  return j->get<bool>();
}

std::string Text(const json* j) { return j != nullptr && j->is_string() ? j->get<std::string>() : std::string(); }

std::optional<DataTime> TimeOf(const json* j) {
  if (j == nullptr) return std::nullopt;
  if (j->is_object()) {
    if (const json* r = Field(*j, "rfc3339"); r != nullptr && r->is_string()) {
      if (auto t = ParseRfc3339(r->get<std::string>()); t.ok()) return *t;
    }
    j = Field(*j, "epoch_s");
    if (j == nullptr) return std::nullopt;
  }
  if (j->is_string()) {
    auto t = ParseRfc3339(j->get<std::string>());
    return t.ok() ? std::optional<DataTime>(*t) : std::nullopt;
  }
  if (auto s = Number(j)) {
    auto t = DataTimeFromEpochSeconds(*s);
    if (t.ok()) return *t;
  }
  return std::nullopt;
}

std::string TimeText(DataTime t) {
  std::string s = FormatRfc3339(t);  // ...SS.ffffffZ
  const auto dot = s.rfind('.');
  if (dot != std::string::npos) {
    std::size_t end = s.size() - 1;  // the 'Z'
    while (end > dot + 1 && s[end - 1] == '0') --end;
    s = (end == dot + 1 ? s.substr(0, dot) : s.substr(0, end)) + "Z";
  }
  return s;
}

std::string TimeText(const json* j, const char* absent) {
  const auto t = TimeOf(j);
  return t ? TimeText(*t) : absent;
}

std::string Num(std::optional<double> v, int digits, const char* absent) {
  if (!v || !std::isfinite(*v)) return absent;
  const double a = std::abs(*v);
  if (a != 0 && (a >= 1e7 || a < 1e-4)) return fmt::format("{:.{}e}", *v, std::max(digits - 1, 0));
  return fmt::format("{:.{}g}", *v, digits);
}

std::string Age(std::optional<double> seconds, const char* absent) {
  if (!seconds || std::isnan(*seconds)) return absent;
  return FormatAge(*seconds);
}

Table::Table(std::vector<std::string> header, std::vector<bool> right)
    : header_(std::move(header)), right_(std::move(right)) {
  right_.resize(header_.size(), false);
}

void Table::Add(std::vector<std::string> row) {
  row.resize(header_.size());
  rows_.push_back(std::move(row));
}

namespace {

// Display width of UTF-8 text: code points, which is right for the text we print.
int Width(const std::string& s) {
  int n = 0;
  for (const char c : s) n += (static_cast<unsigned char>(c) & 0xC0) != 0x80 ? 1 : 0;
  return n;
}

}  // namespace

void Table::Print(std::FILE* out, int max_width) const {
  std::vector<int> width(header_.size(), 0);
  const auto measure = [&](const std::vector<std::string>& row) {
    for (std::size_t c = 0; c < row.size(); ++c) width[c] = std::max(width[c], Width(row[c]));
  };
  measure(header_);
  for (const auto& row : rows_) measure(row);
  int before_last = 0;
  for (std::size_t c = 0; c + 1 < width.size(); ++c) before_last += width[c] + 2;
  const int last_room = max_width > 0 ? std::max(max_width - before_last, 24) : 0;
  const auto print = [&](const std::vector<std::string>& row) {
    std::string line;
    for (std::size_t c = 0; c < row.size(); ++c) {
      const bool last = c + 1 == row.size();
      std::string cell = last && last_room > 0 ? Truncate(row[c], last_room) : row[c];
      const int pad = width[c] - Width(cell);
      if (right_[c])
        line += std::string(static_cast<std::size_t>(std::max(pad, 0)), ' ') + cell;
      else
        line += last ? cell : cell + std::string(static_cast<std::size_t>(std::max(pad, 0)), ' ');
      if (!last) line += "  ";
    }
    while (!line.empty() && line.back() == ' ') line.pop_back();
    std::fprintf(out, "%s\n", line.c_str());
  };
  print(header_);
  for (const auto& row : rows_) print(row);
}

int TerminalColumns() {
  if (::isatty(STDOUT_FILENO) == 0) return 0;
  winsize ws{};
  if (::ioctl(STDOUT_FILENO, TIOCGWINSZ, &ws) == 0 && ws.ws_col > 0) return ws.ws_col;
  if (const char* c = std::getenv("COLUMNS"); c != nullptr && std::atoi(c) > 0) return std::atoi(c);
  return 80;
}

std::string Truncate(const std::string& text, int width) {
  if (width <= 0 || Width(text) <= width) return text;
  const int keep = std::max(width - 3, 1);
  std::string out;
  int n = 0;
  for (std::size_t i = 0; i < text.size(); ++i) {
    const bool starts = (static_cast<unsigned char>(text[i]) & 0xC0) != 0x80;
    if (starts && n++ == keep) break;
    out += text[i];
  }
  while (!out.empty() && out.back() == ' ') out.pop_back();
  return out + "...";
}

}  // namespace lyapcast::cli
