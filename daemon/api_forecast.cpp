// GET /v1/feeds/{id}/forecast: a free run of the published active model
// from the newest complete sample (or the one at a given data time), with
// the predictability horizon and the staleness figures (docs/http-api.md "Forecast").
#include <fmt/format.h>

#include <cmath>
#include <iterator>

#include "api_feed_view.h"
#include "api_routes.h"
#include "api_store.h"
#include "core/wall_clock.h"
#include "runtime/feed_runtime.h"

namespace lyapcast::api {
namespace {

constexpr std::int64_t kMaxSteps = 100'000;
constexpr std::int64_t kDefaultSteps = 100;
constexpr int kFromLookbackSteps = 10;  // from=T uses a complete sample at most this many steps before T

std::string CsvNumber(double v) { return std::isfinite(v) ? fmt::format("{:.9g}", v) : ""; }

std::string CsvBody(const FeedConfig& fc, const lyapcast::Forecast& f) {
  std::string body = "time";
  for (const std::string& ch : fc.channels) body += "," + ch;
  body += ",beyond_horizon\n";
  for (const ForecastPoint& p : f.points) {
    body += FormatRfc3339(p.t);
    for (double v : p.values) body += "," + CsvNumber(v);
    body += p.beyond_horizon ? ",1\n" : ",0\n";
  }
  return body;
}

// The JSON body: the fields of `head` as Json() would write them (keys in
// the document's order), then "points" last. The points are most of the
// body: written directly rather than through a JSON document tree, which
// took most of a 1000-step forecast's time.
std::string JsonBody(const json& head, const lyapcast::Forecast& f) {
  std::string body = "{";
  for (const auto& [key, value] : head.items()) {
    if (body.size() > 1) body += ',';
    body += json(key).dump(-1, ' ', false, json::error_handler_t::replace);
    body += ':';
    body += value.dump(-1, ' ', false, json::error_handler_t::replace);
  }
  const std::size_t channels = f.start.size();
  body.reserve(body.size() + f.points.size() * (96 + 24 * channels));
  auto out = std::back_inserter(body);
  fmt::format_to(out, ",\"points\":[");
  for (std::size_t k = 0; k < f.points.size(); ++k) {
    const ForecastPoint& p = f.points[k];
    fmt::format_to(out, "{}{{\"t\":{{\"epoch_s\":{},\"rfc3339\":\"{}\"}},\"values\":[", k ? "," : "",
                   ToEpochSeconds(p.t), FormatRfc3339(p.t));
    for (std::size_t c = 0; c < p.values.size(); ++c) {
      const double v = p.values[c];
      if (c) body += ',';
      if (std::isfinite(v)) {
        fmt::format_to(out, "{}", v);
      } else {
        body += "null";
      }
    }
    fmt::format_to(out, "],\"beyond_horizon\":{}}}", p.beyond_horizon ? "true" : "false");
  }
  body += "]}\n";
  return body;
}

}  // namespace

HttpResponse Forecast(const ApiContext& c, std::uint32_t feed, const HttpRequest& req) {
  const FeedConfig& fc = c.config->feeds[feed];
  auto steps_param = IntParam(req, "steps", 1, kMaxSteps);
  if (!steps_param.ok()) return FromStatus(steps_param.status());
  auto horizon_param = DurationParam(req, "horizon");
  if (!horizon_param.ok()) return FromStatus(horizon_param.status());
  if (*steps_param && *horizon_param) return BadParameter("steps", "give steps or horizon, not both");
  const auto csv = WantsCsv(req);
  if (!csv.ok()) return FromStatus(csv.status());
  // from: absent or "latest" (the newest complete sample), else a data time;
  // checked before the model so a bad parameter is 400 whatever the state.
  const auto from_it = req.query.find("from");
  const bool from_latest = from_it == req.query.end() || from_it->second == "latest";
  auto from = from_latest ? Result<std::optional<DataTime>>(std::optional<DataTime>{}) : TimeParam(req, "from");
  if (!from.ok()) return FromStatus(from.status());
  std::int64_t steps = steps_param->value_or(kDefaultSteps);
  if (*horizon_param) {
    steps = (**horizon_param + fc.step - Micros(1)) / fc.step;
    if (steps > kMaxSteps) {
      return BadParameter("horizon", fmt::format("{} is {} steps of {}; at most {} steps", FormatDuration(**horizon_param),
                                                 steps, FormatDuration(fc.step), kMaxSteps));
    }
  }

  if (!c.scheduler->active(feed)) {
    const FeedSchedule s = c.scheduler->schedule(feed);
    return Error(409, "no-model", fmt::format("feed {} has no model yet{}", fc.id,
                                              s.next_due != DataTime{} ? "; the first retrain is due at " + FormatRfc3339(s.next_due)
                                                         : "; it needs data first"));
  }

  std::optional<Sample> start;
  if (from_latest) {
    start = c.runtimes->at(feed).NewestComplete();
    if (!start) {
      // After a restart nothing has arrived yet: the newest stored sample.
      const FeedExtent e = c.writer->extent(feed);
      if (e.count > 0) {
        auto found = c.store->CompleteSampleAt(feed, e.newest, kFromLookbackSteps * fc.step);
        if (!found.ok()) return FromStatus(found.status());
        start = *found;
      }
    }
    if (!start) return Error(409, "no-data", fmt::format("feed {} has no complete sample to start from", fc.id));
  } else {
    auto found = c.store->CompleteSampleAt(feed, **from, kFromLookbackSteps * fc.step);
    if (!found.ok()) return FromStatus(found.status());
    if (!*found) {
      return Error(404, "not-found", fmt::format("from: feed {} has no complete sample at or up to {} steps before {}",
                                                 fc.id, kFromLookbackSteps, FormatRfc3339(**from)));
    }
    start = *found;
  }

  const FeedView view = ViewFeed(c, feed, WallNow());
  // Predictability horizon from the exponent the cadence paces by.
  auto served = c.runtimes->at(feed).ForecastFrom(
      *start, steps, view.exponent ? std::optional<double>(view.exponent->lambda_max) : std::nullopt);
  if (!served.ok()) return FromStatus(served.status());
  const lyapcast::Forecast& f = served->forecast;
  const std::shared_ptr<const ActiveModel>& active = served->model;

  if (*csv) {
    HttpResponse r;
    r.content_type = "text/csv; charset=utf-8";
    r.body = CsvBody(fc, f);
    r.headers.emplace_back("X-Lyapcast-Model-Version", std::to_string(active->record.version));
    return r;
  }

  json lyapunov = nullptr;
  if (view.exponent) {
    lyapunov = {{"per_s", view.exponent->lambda_max},
                {"source", LyapunovSourceName(view.exponent->source)},
                {"lyapunov_time_s",
                 view.exponent->lambda_max > 0 ? json(1.0 / view.exponent->lambda_max) : json(nullptr)}};
  }
  const Horizon& h = f.horizon;
  json horizon = {{"seconds", OptionalNumber(h.seconds)},
                  {"lyapunov_times", OptionalNumber(h.lyapunov_times)},
                  {"e0", OptionalNumber(h.e0)},
                  {"tol", h.tol},
                  {"reason", h.seconds ? json(nullptr) : json(h.reason)}};
  json start_values = json::array();
  for (double v : f.start) start_values.push_back(v);
  const json head{{"feed", fc.id},
                  {"model_version", active->record.version},
                  {"channels", fc.channels},
                  {"step_s", Seconds(fc.step)},
                  {"from", TimeJson(f.from)},
                  {"start", std::move(start_values)},
                  {"lyapunov", std::move(lyapunov)},
                  {"horizon", std::move(horizon)},
                  {"staleness", StalenessJson(view)},
                  {"advisory", kAdvisory}};
  HttpResponse r;
  r.status = 200;
  r.body = JsonBody(head, f);
  return r;
}

}  // namespace lyapcast::api
