// Shared pieces of the commands that talk to a running daemon over its HTTP
// API (status, models, retrain, forecast --feed, check, export): the common
// options (--url, --token-file, --timeout), calls that turn the daemon's
// JSON errors into one printable message, tolerant readers of the answers'
// JSON, and text tables.
#pragma once

#include <nlohmann/json.hpp>

#include <memory>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "core/data_time.h"
#include "core/status.h"
#include "http_client.h"

namespace CLI {
class App;
}

namespace lyapcast::cli {

using nlohmann::json;

inline constexpr const char* kDefaultUrl = "http://127.0.0.1:7302";

struct RemoteArgs {
  std::string url;         // empty: $LYAPCAST_URL, else kDefaultUrl
  std::string token_file;  // bearer token; empty = none
  std::string timeout = "10s";
};

// Adds --url, --token-file and --timeout to `cmd`.
void AddRemoteOptions(CLI::App* cmd, RemoteArgs* args);

// The lines the help footers of remote commands share.
extern const char* const kRemoteFooter;

// A connection to one daemon. Every call answers either the daemon's 2xx
// response or a Status whose message is ready to print after
// "lyapcast <cmd>: ":
//   - the daemon's error: "<error.message> (HTTP <status>)" (code kNotFound,
//     kFailedPrecondition, ... by status; see HttpStatusCode below);
//   - no connection: "cannot connect to <url>: <why> (is lyapcastd running? ...)" (kUnavailable);
//   - an answer that is not the JSON asked for (kCorruption).
class Remote {
 public:
  // Errors are usage errors (kInvalidArgument): a bad URL or timeout, an
  // unreadable token file. The token never appears in a message.
  [[nodiscard]] static Result<std::unique_ptr<Remote>> Open(const RemoteArgs& args);

  [[nodiscard]] Result<HttpClientResponse> Call(const std::string& method, const std::string& target,
                                                const std::string& accept = "application/json",
                                                std::string request_body = {},
                                                const std::string& content_type = {});
  // GET/POST answering a JSON object (POST with an optional body).
  [[nodiscard]] Result<json> GetJson(const std::string& target);
  [[nodiscard]] Result<json> PostJson(const std::string& target, std::string request_body = {},
                                      const std::string& content_type = {});

  const std::string& url() const { return client_->url().text; }
  // The HTTP status of the last daemon error (0 when the last call failed
  // without an answer).
  int last_http_status() const { return last_http_status_; }

 private:
  explicit Remote(std::unique_ptr<HttpClient> client) : client_(std::move(client)) {}
  std::unique_ptr<HttpClient> client_;
  int last_http_status_ = 0;
};

// Exit code of a failed remote call: 2 for usage errors, else 1.
int RemoteExitCode(const Status& status);

// Polls GET <feed_path>/jobs/<job> (100 ms, doubling to 1 s) until the job
// is done and returns it. `limit` > 0 gives up after that long (the job goes
// on in the daemon). Unless `quiet`, each change of state is written to
// stderr ("job 7 running"). Errors carry a printable message: "job 7: <why>"
// when the daemon could not be asked, "job 7 is still running after 10m; it
// goes on in the daemon (GET ...)" at the limit.
[[nodiscard]] Result<json> FollowJob(Remote& remote, const std::string& feed_path, std::int64_t job,
                                     const std::string& state, Micros limit, bool quiet);

// "/v1/feeds/<id>" after checking the id (kInvalidArgument naming --feed).
[[nodiscard]] Result<std::string> FeedPath(const std::string& feed_id);

// The feed ids the daemon serves (GET /v1/feeds), in its order.
[[nodiscard]] Result<std::vector<std::string>> ListFeeds(Remote& remote);

// A command-line time: RFC 3339 or epoch seconds (as the API accepts).
[[nodiscard]] Result<DataTime> ParseTimeOption(const std::string& text, const char* option);

// --- Reading answers: absent, null and wrongly typed values read as absent.
const json* Field(const json& j, std::string_view key);
const json* Path(const json& j, std::initializer_list<std::string_view> keys);
std::optional<double> Number(const json* j);
std::optional<std::int64_t> Integer(const json* j);
std::optional<bool> Bool(const json* j);
std::string Text(const json* j);  // "" when absent or not a string
// A time value {"epoch_s", "rfc3339"} (or bare epoch seconds / RFC 3339 text).
std::optional<DataTime> TimeOf(const json* j);
// RFC 3339 without a zero fraction ("2026-01-01T00:01:40Z", "...40.25Z"), or `absent`.
std::string TimeText(const json* j, const char* absent = "-");
std::string TimeText(DataTime t);

// Numbers for people: up to `digits` significant digits, no exponent for
// everyday magnitudes; `absent` for nullopt or non-finite.
std::string Num(std::optional<double> v, int digits = 3, const char* absent = "-");
// A span of seconds: "45s", "6m12s", "2.5s" (monitor/health.h FormatAge).
std::string Age(std::optional<double> seconds, const char* absent = "-");

// --- Text tables.
class Table {
 public:
  // `right`: one flag per column (numbers right-aligned).
  Table(std::vector<std::string> header, std::vector<bool> right);
  void Add(std::vector<std::string> row);
  // Prints with two spaces between columns. When max_width > 0 the last
  // column is cut to fit (ending in "...").
  void Print(std::FILE* out, int max_width = 0) const;

 private:
  std::vector<std::string> header_;
  std::vector<bool> right_;
  std::vector<std::vector<std::string>> rows_;
};

// Columns of the terminal on stdout, or 0 when stdout is not a terminal.
int TerminalColumns();

// Cuts `text` to at most `width` characters (UTF-8 aware), ending in "...".
std::string Truncate(const std::string& text, int width);

}  // namespace lyapcast::cli
