// GET /v1/feeds/{id}/forecast: a free run of the published active model
// from the newest sample with its missing channels estimated, else the
// newest complete sample (or the one at a given data time), with
// the predictability horizon and the staleness figures (docs/http-api.md "Forecast").
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <iterator>

#include "api_feed_view.h"
#include "api_routes.h"
#include "api_store.h"
#include "core/wall_clock.h"
#include "learn/alignment.h"
#include "learn/history_fit.h"
#include "runtime/feed_runtime.h"

namespace lyapcast::api {
namespace {

constexpr std::int64_t kMaxSteps = 100'000;
constexpr std::int64_t kDefaultSteps = 100;
constexpr int kFromLookbackSteps = 10;  // from=T uses a complete sample at most this many steps before T
constexpr std::int64_t kMaxHistory = 1000;  // history=N: at most this many steps before the start

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

namespace {

struct ForecastParams {
  std::int64_t steps = kDefaultSteps;
  bool csv = false;
  std::optional<DataTime> from;  // none: the newest sample, estimated (StartSample)
  std::int64_t history = 0;      // > 0: the start fitted to this many steps before it (FitStart)
};

// steps | horizon, format, from; checked before the model so a bad
// parameter is 400 whatever the feed's state. An error response on failure.
std::optional<HttpResponse> ParseParams(const FeedConfig& fc, const HttpRequest& req, ForecastParams* p) {
  auto steps = IntParam(req, "steps", 1, kMaxSteps);
  if (!steps.ok()) return FromStatus(steps.status());
  auto horizon = DurationParam(req, "horizon");
  if (!horizon.ok()) return FromStatus(horizon.status());
  if (*steps && *horizon) return BadParameter("steps", "give steps or horizon, not both");
  const auto csv = WantsCsv(req);
  if (!csv.ok()) return FromStatus(csv.status());
  p->csv = *csv;
  // from: absent or "latest" (the newest sample, estimated), else a data time.
  const auto from_it = req.query.find("from");
  if (from_it != req.query.end() && from_it->second != "latest") {
    auto from = TimeParam(req, "from");
    if (!from.ok()) return FromStatus(from.status());
    p->from = *from;
  }
  auto history = IntParam(req, "history", 0, kMaxHistory);
  if (!history.ok()) return FromStatus(history.status());
  p->history = history->value_or(0);
  p->steps = steps->value_or(kDefaultSteps);
  if (*horizon) {
    p->steps = (**horizon + fc.step - Micros(1)) / fc.step;
    if (p->steps > kMaxSteps) {
      return BadParameter("horizon", fmt::format("{} is {} steps of {}; at most {} steps", FormatDuration(**horizon),
                                                 p->steps, FormatDuration(fc.step), kMaxSteps));
    }
  }
  return std::nullopt;
}

// The start: the complete sample at or shortly before `from`; else the
// newest sample with its missing channels estimated (FeedRuntime::
// EstimateStart: `estimated` lists them, `model` gets the version that
// predicted any); else the newest complete one (after a restart, before
// anything arrived: the newest stored). An error response when there is none.
std::optional<HttpResponse> StartSample(const ApiContext& c, std::uint32_t feed, const std::optional<DataTime>& from,
                                        Sample* start, json* estimated, std::shared_ptr<const ActiveModel>* model) {
  const FeedConfig& fc = c.config->feeds[feed];
  if (from) {
    auto found = c.store->CompleteSampleAt(feed, *from, kFromLookbackSteps * fc.step);
    if (!found.ok()) return FromStatus(found.status());
    if (!*found) {
      return Error(404, "not-found", fmt::format("from: feed {} has no complete sample at or up to {} steps before {}",
                                                 fc.id, kFromLookbackSteps, FormatRfc3339(*from)));
    }
    *start = **found;
    return std::nullopt;
  }
  // The newest sample, its missing channels carried within their hold or
  // predicted by the model, when that is newer than the newest complete row.
  auto newest = c.runtimes->at(feed).NewestComplete();
  if (auto estimate = c.runtimes->at(feed).EstimateStart();
      estimate && (!newest || estimate->start.t > newest->t)) {
    *start = std::move(estimate->start);
    *model = std::move(estimate->model);
    for (const FeedRuntime::EstimatedChannel& e : estimate->estimated) {
      estimated->push_back({{"channel", fc.channels[static_cast<std::size_t>(e.channel)]},
                            {"how", e.how == FeedRuntime::EstimatedChannel::How::kPredicted ? "predicted" : "carried"},
                            {"age_s", e.age_s}});
    }
    return std::nullopt;
  }
  if (newest) {
    *start = *newest;
    return std::nullopt;
  }
  const FeedExtent e = c.writer->extent(feed);
  if (e.count > 0) {
    auto found = c.store->CompleteSampleAt(feed, e.newest, kFromLookbackSteps * fc.step);
    if (!found.ok()) return FromStatus(found.status());
    if (*found) {
      *start = **found;
      return std::nullopt;
    }
  }
  return Error(409, "no-data", fmt::format("feed {} has no complete sample to start from", fc.id));
}

// history=N: the start replaced by the state the model's trajectory passes
// through while staying closest to the stored samples of the N steps before
// it and the start's own measured channels (FitStateToHistory,
// learn/history_fit.h; docs/design.md "Forecast start"). Each grid point
// k = 0..N at start.t - (N - k) * step is formed by the alignment rule,
// carried values left out. Returns the response's start_fit object; on a
// fit that cannot be made the start stays as it was and start_fit says why.
json FitStart(const ApiContext& c, std::uint32_t feed, std::int64_t history, const ForecastModel& model,
              Sample* start) {
  const FeedConfig& fc = c.config->feeds[feed];
  const int channels = static_cast<int>(fc.channels.size());
  const AlignmentOptions align(fc.step, Micros{}, Micros{}, fc.hold);
  const Micros reach = std::max(align.max_span_or_default(), align.longest_hold());
  auto read = c.store->ReadSamples(feed, start->t - history * fc.step - reach, start->t + Micros(1),
                                   static_cast<int>(std::min<std::int64_t>(100 * (history + 2), 100'000)));  // dense feeds: several samples a step
  json out = {{"history_steps", history}};
  if (!read.ok()) {
    out["used"] = false;
    out["reason"] = read.status().message();
    return out;
  }
  std::vector<Sample>& samples = read->samples;
  // The start itself (its estimated channels are not measurements).
  if (samples.empty() || samples.back().t != start->t) {
    out["used"] = false;
    out["reason"] = "the start is not a stored sample";
    return out;
  }
  Eigen::MatrixXd obs(channels, history + 1);
  std::vector<double> row(static_cast<std::size_t>(channels));
  for (std::int64_t k = 0; k <= history; ++k) {
    std::uint64_t carried = 0;
    const std::uint64_t missing =
        StateAt(samples, start->t - (history - k) * fc.step, channels, align, row.data(), &carried);
    for (int ch = 0; ch < channels; ++ch) {
      const bool absent = ((missing | carried) >> ch) & 1U;
      obs(ch, static_cast<Eigen::Index>(k)) = absent ? std::nan("") : row[static_cast<std::size_t>(ch)];
    }
  }
  auto fit = FitStateToHistory(model, obs, model.error_scale());
  if (!fit.ok() || !fit->start.allFinite()) {
    out["used"] = false;
    out["reason"] = fit.ok() ? std::string("the fitted start is not finite") : fit.status().message();
    return out;
  }
  for (int ch = 0; ch < channels; ++ch) start->values[static_cast<std::size_t>(ch)] = fit->start[ch];
  out["used"] = true;
  out["measurements"] = fit->observations;
  out["rms_before"] = fit->rms_before;
  out["rms_after"] = fit->rms_after;
  out["iterations"] = fit->iterations;
  return out;
}

// Everything of the JSON body but the points, in the document's order.
json HeadJson(const FeedConfig& fc, const FeedView& view, const ServedForecast& served, json estimated,
              json start_fit) {
  json lyapunov = nullptr;
  if (view.exponent) {
    lyapunov = {{"per_s", view.exponent->lambda_max},
                {"source", LyapunovSourceName(view.exponent->source)},
                {"lyapunov_time_s",
                 view.exponent->lambda_max > 0 ? json(1.0 / view.exponent->lambda_max) : json(nullptr)}};
  }
  const lyapcast::Forecast& f = served.forecast;
  const Horizon& h = f.horizon;
  json horizon = {{"seconds", OptionalNumber(h.seconds)},
                  {"lyapunov_times", OptionalNumber(h.lyapunov_times)},
                  {"e0", OptionalNumber(h.e0)},
                  {"tol", h.tol},
                  {"reason", h.seconds ? json(nullptr) : json(h.reason)}};
  json start_values = json::array();
  for (double v : f.start) start_values.push_back(v);
  return json{{"feed", fc.id},
              {"model_version", served.model->record.version},
              {"channels", fc.channels},
              {"step_s", Seconds(fc.step)},
              {"from", TimeJson(f.from)},
              {"start", std::move(start_values)},
              {"estimated", std::move(estimated)},
              {"start_fit", std::move(start_fit)},
              {"lyapunov", std::move(lyapunov)},
              {"horizon", std::move(horizon)},
              {"staleness", StalenessJson(view)},
              {"advisory", kAdvisory}};
}

}  // namespace

HttpResponse Forecast(const ApiContext& c, std::uint32_t feed, const HttpRequest& req) {
  const FeedConfig& fc = c.config->feeds[feed];
  ForecastParams params;
  if (auto bad = ParseParams(fc, req, &params)) return *bad;
  if (!c.scheduler->active(feed)) {
    const FeedSchedule s = c.scheduler->schedule(feed);
    return Error(409, "no-model", fmt::format("feed {} has no model yet{}", fc.id,
                                              s.next_due != DataTime{} ? "; the first retrain is due at " + FormatRfc3339(s.next_due)
                                                         : "; it needs data first"));
  }
  Sample start;
  json estimated = json::array();
  std::shared_ptr<const ActiveModel> model;  // the version that predicted part of the start, if any
  if (auto none = StartSample(c, feed, params.from, &start, &estimated, &model)) return *none;
  json start_fit = nullptr;
  if (params.history > 0) {
    // One version fits the start and runs the forecast.
    if (!model) model = c.scheduler->active(feed);
    start_fit = FitStart(c, feed, params.history, *model->model, &start);
  }

  const FeedView view = ViewFeed(c, feed, WallNow());
  // Predictability horizon from the exponent the cadence paces by.
  auto served = c.runtimes->at(feed).ForecastFrom(
      start, params.steps, view.exponent ? std::optional<double>(view.exponent->lambda_max) : std::nullopt,
      std::move(model));
  if (!served.ok()) return FromStatus(served.status());
  HttpResponse r;
  if (params.csv) {
    r.content_type = "text/csv; charset=utf-8";
    r.body = CsvBody(fc, served->forecast);
    r.headers.emplace_back("X-Lyapcast-Model-Version", std::to_string(served->model->record.version));
    return r;
  }
  r.status = 200;
  r.body = JsonBody(HeadJson(fc, view, *served, std::move(estimated), std::move(start_fit)), served->forecast);
  return r;
}

}  // namespace lyapcast::api
