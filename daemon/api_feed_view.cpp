#include "api_feed_view.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>

#include "runtime/feed_runtime.h"
#include "schedule/retrain_details.h"
#include "store/sample_writer.h"

namespace lyapcast::api {
namespace {

// "'y', 'z'": the channels whose own error grew most at the newest alarm
// (empty without one), for the health reasons.
std::string GrewAtLastAlarm(const FeedConfig& f, const DriftSnapshot& d) {
  std::string out;
  if (!d.last_alarm) return out;
  for (int k : d.last_alarm->grew) {
    out += fmt::format("{}'{}'", out.empty() ? "" : ", ", f.channels[static_cast<std::size_t>(k)]);
  }
  return out;
}

}  // namespace

FeedView ViewFeed(const ApiContext& c, std::uint32_t feed, WallTime wall_now) {
  FeedView v;
  v.index = feed;
  v.config = &c.config->feeds[feed];
  v.extent = c.writer->extent(feed);
  v.schedule = c.scheduler->schedule(feed);
  v.drift = c.runtimes->at(feed).Snapshot(wall_now);
  v.model = c.scheduler->active(feed);
  v.exponent = ChooseExponent(v.schedule.estimates, v.model != nullptr);
  std::optional<RetrainCycle> cycle;
  if (v.exponent && v.exponent->lambda_max > 0) {
    const double lambda = v.exponent->lambda_max;
    if (v.drift.since_training_s) v.since_training_lyapunov_times = *v.drift.since_training_s * lambda;
    const RetrainConfig& rc = v.config->retrain;
    const Micros interval = std::max(NextRetrain(rc, v.schedule.estimates, v.model != nullptr, DataTime{}).interval,
                                     v.config->step);
    cycle = RetrainCycle{Seconds(interval) * lambda,
                         Seconds(rc.time_budget) * lambda};
  }
  v.model_age = ModelAgeInForce(v.config->health, cycle);
  HealthInputs in;
  in.has_data = v.extent.count > 0;
  in.has_model = v.model != nullptr;
  in.paused = v.schedule.paused;
  in.storage_available = c.writer->storage_available();
  in.data_age_s = v.drift.data_age_s;
  in.drift_ratio = v.drift.drift_ratio;
  in.drift_flag = v.drift.drift_flag;
  const std::string grew = GrewAtLastAlarm(*v.config, v.drift);
  if (v.drift.drift_flag) in.drift_grew = grew;
  in.since_training_lyapunov_times = v.since_training_lyapunov_times;
  if (v.drift.unscored_s) {
    in.unscored_steps = *v.drift.unscored_s / Seconds(v.config->step);
    if (v.exponent && v.exponent->lambda_max > 0) {
      in.unscored_lyapunov_times = *v.drift.unscored_s * v.exponent->lambda_max;
    }
    in.unscored_cause = v.drift.unscored_cause;
  }
  if (v.schedule.last_job && v.schedule.last_job->blocked) in.training_blocked = v.schedule.last_job->outcome;
  v.suspects = c.runtimes->at(feed).Suspects();
  for (std::size_t k = 0; k < v.suspects.size(); ++k) {
    const FeedRuntime::SuspectChannel& sc = v.suspects[k];
    if (!sc.last || !v.drift.newest_data_time) continue;
    if (Seconds(*v.drift.newest_data_time - *sc.last) > kSuspectRecentSteps * Seconds(v.config->step)) continue;
    in.suspect_channels.push_back(fmt::format("'{}': {} suspect readings, the last {:g} at {}", v.config->channels[k],
                                              sc.count, sc.last_value, FormatRfc3339(*sc.last)));
  }
  if (const auto& f = v.drift.sensor_fault) {
    in.sensor_fault = fmt::format(
        "'{}' since {}: the one-step error grew{}{} and predicting without '{}' explains it ({} alarm{}); no drift "
        "retrain",
        v.config->channels[static_cast<std::size_t>(f->channel)], FormatRfc3339(f->since), grew.empty() ? "" : " on ",
        grew, v.config->channels[static_cast<std::size_t>(f->channel)], f->alarms, f->alarms == 1 ? "" : "s");
  }
  // Silent channels: a channel not seen since the daemon started counts from
  // the first sample it saw (at least that long without a reading).
  const FeedRuntime::ChannelActivity activity = c.runtimes->at(feed).Activity();
  v.channels.resize(v.config->channels.size());
  for (std::size_t k = 0; k < v.channels.size(); ++k) {
    ChannelView& ch = v.channels[k];
    ch.last = k < activity.last.size() ? activity.last[k] : std::nullopt;
    ch.period = k < v.config->period.size() ? v.config->period[k] : Micros{};
    if (!activity.newest) continue;
    if (ch.last) ch.age = *activity.newest - *ch.last;
    const std::optional<DataTime> since = ch.last ? ch.last : activity.first;
    if (!since || !ChannelSilent(*activity.newest - *since, ch.period)) continue;
    ch.silent = true;
    in.silent_channels.push_back({v.config->channels[k], *activity.newest - *since, ch.period});
  }
  v.health = EvaluateHealth(v.config->health, v.model_age, in);
  return v;
}

json ModelJson(const ModelRecord& r) {
  json details = json::parse(r.details, nullptr, /*allow_exceptions=*/false);
  if (details.is_discarded()) details = r.details;
  return {{"version", r.version},
          {"status", ModelStatusName(r.status)},
          {"origin", ModelOriginName(r.origin)},
          {"reason", r.reason},
          {"parent", r.parent ? json(*r.parent) : json(nullptr)},
          {"created_at", r.created_at},
          {"trained_from", TimeJson(r.trained_from)},
          {"trained_to", TimeJson(r.trained_to)},
          {"validation_error", OptionalNumber(r.validation_error)},
          {"lyapunov_per_s", OptionalNumber(r.lambda_max)},
          {"details", std::move(details)}};
}

json JobJson(const Config& config, const JobInfo& j) {
  return {{"id", j.id},
          {"feed", config.feeds[j.feed].id},
          {"trigger", TriggerKindName(j.trigger)},
          {"trigger_reason", j.trigger_reason},
          {"state", JobStateName(j.state)},
          {"until", j.until != DataTime{} ? TimeJson(j.until) : json(nullptr)},
          {"parent", j.parent ? json(*j.parent) : json(nullptr)},
          {"verdict", j.verdict ? json(RetrainVerdictName(*j.verdict)) : json(nullptr)},
          {"version", j.version ? json(*j.version) : json(nullptr)},
          {"outcome", j.outcome},
          {"blocked", j.blocked},
          {"validation_error", OptionalNumber(j.validation_error)},
          {"active_error", OptionalNumber(j.active_error)},
          {"iterations", j.iterations},
          {"seconds", j.seconds}};
}

json StalenessJson(const FeedView& v) {
  return {{"data_age_s", OptionalNumber(v.drift.data_age_s)},
          {"model_age_s", OptionalNumber(v.drift.model_age_s)},
          {"since_training_s", OptionalNumber(v.drift.since_training_s)},
          {"since_training_lyapunov_times", OptionalNumber(v.since_training_lyapunov_times)}};
}

json ThresholdsJson(const HealthConfig& h, const ModelAgeThresholds& model_age) {
  return {{"drift_alert", h.drift_alert},
          {"drift_alarm", h.drift_alarm},
          {"data_age_alert_s", Seconds(h.data_age_alert)},
          {"data_age_alarm_s", Seconds(h.data_age_alarm)},
          {"model_age_alert_lyapunov", model_age.alert},
          {"model_age_alarm_lyapunov", model_age.alarm},
          {"model_age_alert_derived", model_age.alert_derived},
          {"model_age_alarm_derived", model_age.alarm_derived}};
}

namespace {

json ExponentJson(const std::optional<double>& per_s, const std::string& diagnostics) {
  if (!per_s || !std::isfinite(*per_s)) return nullptr;
  json j = {{"per_s", *per_s}};
  if (!diagnostics.empty()) j["diagnostics"] = diagnostics;
  return j;
}

const char* AlarmKindName(DriftAttribution::Kind k) {
  switch (k) {
    case DriftAttribution::Kind::kProcessChange: return "process_change";
    case DriftAttribution::Kind::kSensor: return "sensor";
    case DriftAttribution::Kind::kPending: return "sensor_pending";
    case DriftAttribution::Kind::kUnknown: break;
  }
  return "unknown";
}

// Per channel: its own one-step error and its blind error, recent over
// reference RMS (monitor/drift_attribution.h); null until warm.
json DriftChannelsJson(const FeedConfig& f, const DriftSnapshot& d) {
  json out = json::object();
  for (std::size_t k = 0; k < d.channels.size() && k < f.channels.size(); ++k) {
    out[f.channels[k]] = {{"error_ratio", OptionalNumber(d.channels[k].error_ratio)},
                          {"blind_ratio", OptionalNumber(d.channels[k].blind_ratio)}};
  }
  return out;
}

json ChannelNames(const FeedConfig& f, const std::vector<int>& channels) {
  json out = json::array();
  for (int k : channels) out.push_back(f.channels[static_cast<std::size_t>(k)]);
  return out;
}

json LastAlarmJson(const FeedConfig& f, const DriftSnapshot& d) {
  if (!d.last_alarm) return nullptr;
  const DriftSnapshot::AlarmReading& a = *d.last_alarm;
  return {{"at", TimeJson(a.at)},
          {"reading", AlarmKindName(a.kind)},
          {"channel", a.channel >= 0 ? json(f.channels[static_cast<std::size_t>(a.channel)]) : json(nullptr)},
          {"grew", ChannelNames(f, a.grew)},
          {"error_ratio", a.full_ratio > 0 ? json(a.full_ratio) : json(nullptr)}};
}

json SensorFaultJson(const FeedConfig& f, const DriftSnapshot& d) {
  if (!d.sensor_fault) return nullptr;
  const DriftSnapshot::SensorFault& s = *d.sensor_fault;
  return {{"channel", f.channels[static_cast<std::size_t>(s.channel)]},
          {"since", TimeJson(s.since)},
          {"last", TimeJson(s.last)},
          {"alarms", s.alarms}};
}

}  // namespace

json StatusJson(const ApiContext& c, const FeedView& v) {
  (void)c;
  const FeedSchedule& s = v.schedule;
  const DriftSnapshot& d = v.drift;
  json window = {{"samples", v.extent.count},
                 {"oldest", v.extent.count ? TimeJson(v.extent.oldest) : json(nullptr)},
                 {"newest", v.extent.count ? TimeJson(v.extent.newest) : json(nullptr)}};
  json model = nullptr;
  if (v.model) {
    const ModelRecord& r = v.model->record;
    // Which family serves and why: what the job fitted (family_note) and,
    // under model.family auto, why that family won (family_choice).
    const RetrainDetails details = ParseRetrainDetails(r.details);
    std::string why = details.family_choice;
    if (!details.family_note.empty()) why += (why.empty() ? "" : "; ") + details.family_note;
    model = {{"version", r.version},
             {"family", std::string(v.model->model->family())},
             {"family_reason", why.empty() ? json(nullptr) : json(why)},
             {"trained_from", TimeJson(r.trained_from)},
             {"trained_to", TimeJson(r.trained_to)},
             {"validation_error", OptionalNumber(r.validation_error)},
             {"lyapunov_per_s", OptionalNumber(r.lambda_max)},
             {"created_at", r.created_at},
             {"origin", ModelOriginName(r.origin)},
             {"reason", r.reason}};
  }
  json drift = {{"ratio", OptionalNumber(d.drift_ratio)},
                {"rmse_window", OptionalNumber(d.rmse_window)},
                {"rmse_ewma", OptionalNumber(d.rmse_ewma)},
                {"validation_error", OptionalNumber(d.validation_error)},
                {"scored", d.scored},
                {"scored_late", d.scored_late},
                {"scored_multi_step", d.scored_multi},
                {"unscored_s", OptionalNumber(d.unscored_s)},
                {"unscored_cause", d.unscored_cause.empty() ? json(nullptr) : json(d.unscored_cause)},
                {"last_error", OptionalNumber(d.last_error)},
                {"change_statistic", d.change_statistic},
                {"warming_up", d.warming_up},
                {"flag", d.drift_flag},
                {"flagged_at", d.flagged_at ? TimeJson(*d.flagged_at) : json(nullptr)},
                {"alarms", d.alarms},
                {"channels", DriftChannelsJson(*v.config, d)},
                {"last_alarm", LastAlarmJson(*v.config, d)},
                {"sensor_fault", SensorFaultJson(*v.config, d)},
                {"sensor_alarms_total", d.sensor_alarms_total}};
  json suspect = json::object();
  for (std::size_t k = 0; k < v.suspects.size(); ++k) {
    const FeedRuntime::SuspectChannel& sc = v.suspects[k];
    if (sc.count == 0) continue;
    suspect[v.config->channels[k]] = {{"count", sc.count},
                                      {"last", sc.last ? TimeJson(*sc.last) : json(nullptr)},
                                      {"last_value", sc.last_value}};
  }
  json channels = json::object();
  for (std::size_t k = 0; k < v.channels.size(); ++k) {
    const ChannelView& ch = v.channels[k];
    channels[v.config->channels[k]] = {{"last", ch.last ? TimeJson(*ch.last) : json(nullptr)},
                                       {"age_s", ch.age ? json(Seconds(*ch.age)) : json(nullptr)},
                                       {"period_s", ch.period > Micros{} ? json(Seconds(ch.period)) : json(nullptr)},
                                       {"silent", ch.silent}};
  }
  json chosen = nullptr;
  if (v.exponent) {
    chosen = {{"per_s", v.exponent->lambda_max},
              {"source", LyapunovSourceName(v.exponent->source)},
              {"lyapunov_time_s", v.exponent->lambda_max > 0 ? json(1.0 / v.exponent->lambda_max) : json(nullptr)}};
  }
  json lyapunov = {{"model", ExponentJson(s.estimates.model, "")},
                   {"dynamics", ExponentJson(s.estimates.dynamics, s.dynamics_diagnostics)},
                   {"data", ExponentJson(s.estimates.data, s.data_diagnostics)},
                   {"chosen", std::move(chosen)}};
  json cadence = {{"last_retrain", s.last_retrain ? TimeJson(*s.last_retrain) : json(nullptr)},
                  {"next_due", s.next_due != DataTime{} ? TimeJson(s.next_due) : json(nullptr)},
                  {"reason", s.next_reason},
                  {"running", s.running},
                  {"pending", s.pending}};
  return {{"feed", v.config->id},
          {"paused", s.paused},
          {"health",
           {{"verdict", VerdictName(v.health.verdict)},
            {"reasons", v.health.reasons},
            {"thresholds", ThresholdsJson(v.config->health, v.model_age)}}},
          {"window", std::move(window)},
          {"model", std::move(model)},
          {"drift", std::move(drift)},
          {"suspect", std::move(suspect)},
          {"channels", std::move(channels)},
          {"staleness", StalenessJson(v)},
          {"lyapunov", std::move(lyapunov)},
          {"cadence", std::move(cadence)},
          {"last_job", s.last_job ? JobJson(*c.config, *s.last_job) : json(nullptr)},
          {"jobs",
           {{"promoted", s.promoted},
            {"rejected", s.rejected},
            {"not_enough_data", s.not_enough_data},
            {"failed", s.failed},
            {"coalesced", s.coalesced}}}};
}

}  // namespace lyapcast::api
