// GET /v1/feeds/{id}/forecast: a free run of the published active model
// from the newest complete sample (or the one at a given data time), with
// the predictability horizon and the staleness figures (docs/http-api.md "Forecast").
#include <fmt/format.h>

#include <cmath>
#include <iterator>

#include "api_feed_view.h"
#include "api_routes.h"
#include "api_store.h"
#include "chaos/horizon.h"
#include "core/wall_clock.h"
#include "feed_monitors.h"

namespace lyapcast::api {
namespace {

constexpr std::int64_t kMaxSteps = 100'000;
constexpr std::int64_t kDefaultSteps = 100;
constexpr int kFromLookbackSteps = 10;  // from=T uses a complete sample at most this many steps before T

struct Trajectory {
  std::vector<DataTime> times;
  std::vector<std::vector<double>> values;
};

Trajectory FreeRun(const FlowMap<float>& model, const Sample& start, Micros step, std::int64_t steps) {
  Trajectory out;
  out.times.reserve(static_cast<std::size_t>(steps));
  out.values.reserve(static_cast<std::size_t>(steps));
  FlowMap<float>::Mat x(model.channels(), 1), y;
  for (int c = 0; c < model.channels(); ++c) x(c, 0) = static_cast<float>(start.values[static_cast<std::size_t>(c)]);
  FlowMapCache<float> cache;
  for (std::int64_t k = 1; k <= steps; ++k) {
    model.Forward(x, &y, &cache);
    x = y;
    std::vector<double> v(static_cast<std::size_t>(model.channels()));
    for (int c = 0; c < model.channels(); ++c) v[static_cast<std::size_t>(c)] = static_cast<double>(x(c, 0));
    out.times.push_back(start.t + k * step);
    out.values.push_back(std::move(v));
  }
  return out;
}

std::string CsvNumber(double v) { return std::isfinite(v) ? fmt::format("{:.9g}", v) : ""; }

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

  const auto active = c.scheduler->active(feed);
  if (!active) {
    const FeedSchedule s = c.scheduler->schedule(feed);
    return Error(409, "no-model", fmt::format("feed {} has no model yet{}", fc.id,
                                              s.next_due != DataTime{} ? "; the first retrain is due at " + FormatRfc3339(s.next_due)
                                                         : "; it needs data first"));
  }

  std::optional<Sample> start;
  if (from_latest) {
    start = c.monitors->NewestComplete(feed);
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
  const Trajectory run = FreeRun(active->model, *start, fc.step, steps);

  // Predictability horizon from the exponent the cadence paces by and the
  // monitor's current one-step error.
  double e0 = c.monitors->e0(feed);
  if (!std::isfinite(e0) && active->record.validation_error) e0 = *active->record.validation_error;
  std::string why;
  std::optional<double> horizon_s;
  if (!view.exponent) {
    why = "no Lyapunov exponent estimate yet";
  } else {
    horizon_s = PredictabilityHorizon(view.exponent->lambda_max, e0, fc.monitor.horizon_tol, &why);
  }
  const auto beyond = [&](DataTime t) {
    return horizon_s && Seconds(t - start->t) > *horizon_s;
  };

  if (*csv) {
    HttpResponse r;
    r.content_type = "text/csv; charset=utf-8";
    r.body = "time";
    for (const std::string& ch : fc.channels) r.body += "," + ch;
    r.body += ",beyond_horizon\n";
    for (std::size_t k = 0; k < run.times.size(); ++k) {
      r.body += FormatRfc3339(run.times[k]);
      for (double v : run.values[k]) r.body += "," + CsvNumber(v);
      r.body += beyond(run.times[k]) ? ",1\n" : ",0\n";
    }
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
  json horizon = {{"seconds", OptionalNumber(horizon_s)},
                  {"lyapunov_times",
                   horizon_s && view.exponent ? json(*horizon_s * view.exponent->lambda_max) : json(nullptr)},
                  {"e0", OptionalNumber(e0)},
                  {"tol", fc.monitor.horizon_tol},
                  {"reason", horizon_s ? json(nullptr) : json(why)}};
  json start_values = json::array();
  for (double v : start->values) start_values.push_back(v);
  HttpResponse r = Json(200, json{{"feed", fc.id},
                                  {"model_version", active->record.version},
                                  {"channels", fc.channels},
                                  {"step_s", Seconds(fc.step)},
                                  {"from", TimeJson(start->t)},
                                  {"start", std::move(start_values)},
                                  {"lyapunov", std::move(lyapunov)},
                                  {"horizon", std::move(horizon)},
                                  {"staleness", StalenessJson(view)},
                                  {"advisory", kAdvisory}});
  // The points are most of the body: written directly rather than through a
  // JSON document tree, which took most of a 1000-step forecast's time.
  if (!r.body.empty() && r.body.back() == '\n') r.body.pop_back();
  if (!r.body.empty() && r.body.back() == '}') r.body.pop_back();  // reopen the top-level object
  r.body.reserve(r.body.size() + run.times.size() * (96 + 24 * fc.channels.size()));
  auto out = std::back_inserter(r.body);
  fmt::format_to(out, ",\"points\":[");
  for (std::size_t k = 0; k < run.times.size(); ++k) {
    fmt::format_to(out, "{}{{\"t\":{{\"epoch_s\":{},\"rfc3339\":\"{}\"}},\"values\":[", k ? "," : "",
                   ToEpochSeconds(run.times[k]), FormatRfc3339(run.times[k]));
    for (std::size_t c = 0; c < run.values[k].size(); ++c) {
      const double v = run.values[k][c];
      if (c) r.body += ',';
      if (std::isfinite(v)) {
        fmt::format_to(out, "{}", v);
      } else {
        r.body += "null";
      }
    }
    fmt::format_to(out, "],\"beyond_horizon\":{}}}", beyond(run.times[k]) ? "true" : "false");
  }
  r.body += "]}\n";
  return r;
}

}  // namespace lyapcast::api
