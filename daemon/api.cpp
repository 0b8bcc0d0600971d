#include "api.h"

#include <fmt/format.h>

#include <optional>
#include <string_view>
#include <vector>

#include "api_common.h"
#include "api_routes.h"
#include "core/secret.h"
#include "core/wall_clock.h"
#include "ingest_server.h"
#include "page.h"
#include "schedule/model_upload.h"
#include "schedule/scheduler.h"
#include "store/sample_writer.h"

namespace lyapcast {
namespace {

using api::Error;
using api::json;
using api::TimeJson;

std::vector<std::string_view> Segments(std::string_view path) {
  std::vector<std::string_view> out;
  while (!path.empty()) {
    if (path.front() == '/') {
      path.remove_prefix(1);
      continue;
    }
    const auto slash = path.find('/');
    out.push_back(path.substr(0, slash));
    if (slash == std::string_view::npos) break;
    path.remove_prefix(slash);
  }
  return out;
}

// The token of an `Authorization: Bearer <token>` header (RFC 6750 section
// 2.1; the scheme is case-insensitive, RFC 7235 section 2.1), or nullopt for
// another scheme or an empty token.
std::optional<std::string_view> BearerToken(std::string_view header) {
  constexpr std::string_view kScheme = "bearer";
  if (header.size() <= kScheme.size() || header[kScheme.size()] != ' ') return std::nullopt;
  for (std::size_t i = 0; i < kScheme.size(); ++i) {
    const char c = header[i];
    if ((c >= 'A' && c <= 'Z' ? static_cast<char>(c - 'A' + 'a') : c) != kScheme[i]) return std::nullopt;
  }
  std::string_view token = header.substr(kScheme.size());
  while (!token.empty() && token.front() == ' ') token.remove_prefix(1);
  while (!token.empty() && (token.back() == ' ' || token.back() == '\t')) token.remove_suffix(1);
  if (token.empty()) return std::nullopt;
  return token;
}

class Api {
 public:
  explicit Api(ApiContext c) : c_(std::move(c)) {}

  HttpResponse operator()(const HttpRequest& req) const {
    if (req.path == "/v1/heartbeat") return Only(req, "GET", [&] { return Heartbeat(); });
    if (req.path == "/v1/health/live") {  // removed; say where it went rather than only 404
      return Error(404, "not-found", "/v1/health/live was removed; the liveness route is GET /v1/heartbeat");
    }
    if (auto page = ServePage(req)) return *page;  // the operator page holds no data: no token
    if (auto denied = CheckAccess(req)) return *denied;
    if (req.path == "/v1/health") return Only(req, "GET", [&] { return api::Health(c_); });
    if (req.path == "/metrics") return Only(req, "GET", [&] { return api::Metrics(c_); });
    if (req.path == "/v1/feeds") return Only(req, "GET", [&] { return Feeds(); });
    const auto seg = Segments(req.path);
    if (seg.size() >= 3 && seg[0] == "v1" && seg[1] == "feeds") return FeedRoute(req, seg);
    return Error(404, "not-found", "no such endpoint: " + req.path + " (see docs/http-api.md)");
  }

  // Before the body is read: the upload route answers its access check at
  // once (a refused upload is never read) and may have a body of up to
  // kMaxUploadBytes; every other route keeps the server's limit and checks
  // access once the whole request is in.
  HeadDecision Head(const HttpRequest& req) const {
    HeadDecision d;
    const auto seg = Segments(req.path);
    const bool upload =
        req.method == "POST" && seg.size() == 4 && seg[0] == "v1" && seg[1] == "feeds" && seg[3] == "models";
    if (!upload) return d;
    if (auto denied = CheckAccess(req)) {
      d.respond = std::move(*denied);
      return d;
    }
    d.body_limit = kMaxUploadBytes;
    return d;
  }

 private:
  template <typename F>
  HttpResponse Only(const HttpRequest& req, const char* method, F&& f) const {
    if (req.method != method && !(req.method == "HEAD" && std::string_view(method) == "GET")) {
      return MethodNotAllowed(req, method);
    }
    return f();
  }

  static HttpResponse MethodNotAllowed(const HttpRequest& req, const std::string& allow) {
    HttpResponse r = Error(405, "method-not-allowed", req.method + " is not allowed on " + req.path + "; use " + allow);
    r.headers.emplace_back("Allow", allow);
    return r;
  }

  // /v1/feeds/{id}/...
  HttpResponse FeedRoute(const HttpRequest& req, const std::vector<std::string_view>& seg) const {
    const int feed = c_.config->FeedIndex(std::string(seg[2]));
    if (feed < 0) {
      return Error(404, "not-found", fmt::format("no feed '{}' (GET /v1/feeds lists them)", seg[2]));
    }
    const auto f = static_cast<std::uint32_t>(feed);
    const std::size_t n = seg.size();
    if (n == 4 && seg[3] == "forecast") return Only(req, "GET", [&] { return api::Forecast(c_, f, req); });
    if (n == 4 && seg[3] == "status") return Only(req, "GET", [&] { return api::Status(c_, f); });
    if (n == 4 && seg[3] == "models") {
      if (req.method == "POST") return api::Upload(c_, f, req);
      if (req.method == "GET" || req.method == "HEAD") return api::Models(c_, f, req);
      return MethodNotAllowed(req, "GET, POST");
    }
    if (n == 4 && seg[3] == "samples") return Only(req, "GET", [&] { return api::Samples(c_, f, req); });
    if (n == 4 && seg[3] == "retrain") return Only(req, "POST", [&] { return api::Retrain(c_, f); });
    if (n == 4 && seg[3] == "pause") return Only(req, "POST", [&] { return api::Pause(c_, f, true); });
    if (n == 4 && seg[3] == "resume") return Only(req, "POST", [&] { return api::Pause(c_, f, false); });
    if (n == 5 && seg[3] == "jobs") return Only(req, "GET", [&] { return api::Job(c_, f, std::string(seg[4])); });
    if (n == 6 && seg[3] == "models" && seg[5] == "file") {
      return Only(req, "GET", [&] { return api::ModelFile(c_, f, std::string(seg[4])); });
    }
    if (n == 6 && seg[3] == "models" && seg[5] == "activate") {
      return Only(req, "POST", [&] { return api::Activate(c_, f, std::string(seg[4])); });
    }
    return Error(404, "not-found", "no such endpoint: " + req.path + " (see docs/http-api.md)");
  }

  // GET needs the read (or admin) token when one is configured; anything
  // else needs the admin token as soon as any token is configured (a read
  // token alone makes the daemon read-only over HTTP).
  std::optional<HttpResponse> CheckAccess(const HttpRequest& req) const {
    const bool read_only = req.method == "GET" || req.method == "HEAD";
    if (!c_.read_token && !c_.admin_token) return std::nullopt;
    if (read_only && !c_.read_token) return std::nullopt;
    const std::optional<std::string_view> token = BearerToken(req.authorization);
    if (!token) {
      HttpResponse r = Error(401, "unauthorized", "this endpoint needs 'Authorization: Bearer <token>'");
      r.headers.emplace_back("WWW-Authenticate", "Bearer realm=\"lyapcast\"");
      return r;
    }
    const bool admin = c_.admin_token && ConstantTimeEquals(*token, *c_.admin_token);
    const bool reader = c_.read_token && ConstantTimeEquals(*token, *c_.read_token);
    if (read_only ? (admin || reader) : admin) return std::nullopt;
    if (reader || admin) return Error(403, "forbidden", "this token may read but not change anything; use the admin token");
    HttpResponse r = Error(401, "unauthorized", "the bearer token is not valid");
    r.headers.emplace_back("WWW-Authenticate", "Bearer realm=\"lyapcast\", error=\"invalid_token\"");
    return r;
  }

  HttpResponse Heartbeat() const {
    const WallTime now = WallNow();
    return api::Json(200, json{{"alive", true},
                               {"version", c_.version},
                               {"uptime_s", Seconds(now - c_.started_wall)},
                               {"storage_available", c_.writer->storage_available()}});
  }

  HttpResponse Feeds() const {
    json feeds = json::array();
    for (std::size_t i = 0; i < c_.config->feeds.size(); ++i) {
      const FeedConfig& f = c_.config->feeds[i];
      const FeedExtent e = c_.writer->extent(static_cast<std::uint32_t>(i));
      json channels = json::array();
      for (std::size_t ch = 0; ch < f.channels.size(); ++ch) {
        channels.push_back({{"name", f.channels[ch]}, {"unit", ch < f.units.size() ? f.units[ch] : ""}});
      }
      json window = {{"samples", e.count}};
      window["oldest"] = e.count ? TimeJson(e.oldest) : json(nullptr);
      window["newest"] = e.count ? TimeJson(e.newest) : json(nullptr);
      json entry = {{"id", f.id},
                    {"channels", std::move(channels)},
                    {"step_s", Seconds(f.step)},
                    {"dynamics_known", f.dynamics.has_value()},
                    {"retention_s", Seconds(c_.config->storage.retention)},
                    {"window", std::move(window)}};
      if (c_.scheduler != nullptr) AddRetraining(static_cast<std::uint32_t>(i), &entry);
      feeds.push_back(std::move(entry));
    }
    json body = {{"feeds", std::move(feeds)}, {"storage_available", c_.writer->storage_available()}};
    if (c_.ingest != nullptr) {
      const IngestCounters& k = c_.ingest->counters();
      body["ingest"] = {{"connections", c_.ingest->active_connections()},
                        {"lines", k.lines.load()},
                        {"accepted", k.accepted.load()}};
    }
    return api::Json(200, body);
  }

  // The active model and the cadence, in brief (the status route has all).
  void AddRetraining(std::uint32_t feed, json* entry) const {
    const auto model = c_.scheduler->active(feed);
    json m = nullptr;
    if (model) {
      const ModelRecord& r = model->record;
      m = {{"version", r.version},
           {"origin", ModelOriginName(r.origin)},
           {"trained_to", TimeJson(r.trained_to)},
           {"validation_error", api::OptionalNumber(r.validation_error)},
           {"lyapunov_per_s", api::OptionalNumber(r.lambda_max)}};
    }
    (*entry)["model"] = std::move(m);
    const FeedSchedule s = c_.scheduler->schedule(feed);
    json retraining = {{"next_due", s.next_due != DataTime{} ? TimeJson(s.next_due) : json(nullptr)},
                       {"next_reason", s.next_reason},
                       {"last_retrain", s.last_retrain ? TimeJson(*s.last_retrain) : json(nullptr)},
                       {"running", s.running},
                       {"paused", s.paused},
                       {"promoted", s.promoted},
                       {"rejected", s.rejected},
                       {"failed", s.failed},
                       {"coalesced", s.coalesced}};
    if (s.last_job) {
      retraining["last_job"] = {{"id", s.last_job->id},
                                {"trigger", TriggerKindName(s.last_job->trigger)},
                                {"verdict", s.last_job->verdict ? RetrainVerdictName(*s.last_job->verdict) : "error"},
                                {"version", s.last_job->version ? json(*s.last_job->version) : json(nullptr)},
                                {"outcome", s.last_job->outcome},
                                {"seconds", s.last_job->seconds}};
    }
    (*entry)["retraining"] = std::move(retraining);
  }

  ApiContext c_;
};

}  // namespace

ApiHandlers MakeApiHandlers(ApiContext context) {
  auto api = std::make_shared<Api>(std::move(context));
  return {[api](const HttpRequest& req) { return (*api)(req); },
          [api](const HttpRequest& head) { return api->Head(head); }};
}

}  // namespace lyapcast
