#include "monitor/health.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <string>
#include <utility>

#include "core/data_time.h"

namespace lyapcast {
namespace {

class Judge {
 public:
  void Add(Verdict v, std::string reason) {
    result_.verdict = WorseVerdict(result_.verdict, v);
    result_.reasons.push_back(std::move(reason));
  }
  HealthResult Take() { return std::move(result_); }

 private:
  HealthResult result_;
};

// alarm at or above the alarm level, alert at or above the alert level,
// else normal (NaN: normal).
Verdict Level(double value, double alert, double alarm) {
  if (value >= alarm) return Verdict::kAlarm;
  if (value >= alert) return Verdict::kAlert;
  return Verdict::kNormal;
}

// A measured value for a reason: two decimals, truncated, so a value just
// below a threshold never reads as the threshold (4.9996 -> "4.99").
std::string Shown(double x) { return fmt::format("{}", std::floor(x * 100 + 1e-9) / 100); }

}  // namespace

const char* VerdictName(Verdict v) {
  switch (v) {
    case Verdict::kNormal: return "normal";
    case Verdict::kAlert: return "alert";
    case Verdict::kAlarm: return "alarm";
    case Verdict::kIndeterminate: return "indeterminate";
  }
  return "indeterminate";
}

int VerdictExitCode(Verdict v) {
  switch (v) {
    case Verdict::kNormal: return 0;
    case Verdict::kAlert: return 1;
    case Verdict::kAlarm: return 2;
    case Verdict::kIndeterminate: return 3;
  }
  return 3;
}

int VerdictSeverity(Verdict v) {
  switch (v) {
    case Verdict::kNormal: return 0;
    case Verdict::kIndeterminate: return 1;
    case Verdict::kAlert: return 2;
    case Verdict::kAlarm: return 3;
  }
  return 1;
}

Verdict WorseVerdict(Verdict a, Verdict b) { return VerdictSeverity(b) > VerdictSeverity(a) ? b : a; }

ModelAgeThresholds ModelAgeInForce(const HealthLevels& configured, const std::optional<RetrainCycle>& cycle) {
  ModelAgeThresholds t;
  if (cycle) {
    t.alert = std::max(t.alert, 3 * cycle->interval_lyapunov_times + cycle->time_budget_lyapunov_times);
    t.alarm = std::max(t.alarm, 10 * cycle->interval_lyapunov_times + cycle->time_budget_lyapunov_times);
  }
  t.alert_derived = cycle && !configured.model_age_alert_lyapunov;
  t.alarm_derived = cycle && !configured.model_age_alarm_lyapunov;
  if (configured.model_age_alert_lyapunov) t.alert = *configured.model_age_alert_lyapunov;
  if (configured.model_age_alarm_lyapunov) t.alarm = *configured.model_age_alarm_lyapunov;
  // One set, the other derived: keep alert below alarm.
  if (configured.model_age_alert_lyapunov && !configured.model_age_alarm_lyapunov) t.alarm = std::max(t.alarm, t.alert);
  if (configured.model_age_alarm_lyapunov && !configured.model_age_alert_lyapunov) t.alert = std::min(t.alert, t.alarm);
  return t;
}

std::string FormatAge(double seconds) {
  if (std::isnan(seconds)) return "?";
  if (seconds < 0) return "-" + FormatAge(-seconds);
  if (std::isinf(seconds)) return "forever";
  if (seconds < 10) return fmt::format("{:.1f}s", std::floor(seconds * 10) / 10);
  // Truncated, never rounded up: "4m59s" must not read as the 5m threshold.
  const auto s = static_cast<long long>(seconds);
  if (s < 60) return fmt::format("{}s", s);
  if (s < 3600) return fmt::format("{}m{:02}s", s / 60, s % 60);
  if (s < 86400) return fmt::format("{}h{:02}m", s / 3600, s % 3600 / 60);
  return fmt::format("{}d{}h", s / 86400, s % 86400 / 3600);
}

bool ChannelSilent(Micros age, Micros period) {
  return period > Micros{} && static_cast<double>(age.count()) > kSilentPeriods * static_cast<double>(period.count());
}

HealthResult EvaluateHealth(const HealthLevels& t, const ModelAgeThresholds& model_age, const HealthInputs& in) {
  Judge judge;
  if (!in.storage_available) {
    judge.Add(Verdict::kAlarm, "storage unavailable: samples are not being committed");
  }
  if (!in.has_data) judge.Add(Verdict::kIndeterminate, "no sample received yet");
  if (!in.has_model) judge.Add(Verdict::kIndeterminate, "no model yet");
  if (in.paused) {
    judge.Add(Verdict::kNormal, "paused: data age, drift and model age are not judged");
    return judge.Take();
  }
  if (in.has_data && in.data_age_s) {
    const double age = *in.data_age_s;
    const Verdict v =
        Level(age, Seconds(t.data_age_alert), Seconds(t.data_age_alarm));
    if (v != Verdict::kNormal) {
      const bool alarm = v == Verdict::kAlarm;
      judge.Add(v, fmt::format("no sample for {} ({} {})", FormatAge(age), alarm ? "data_age_alarm" : "data_age_alert",
                               FormatDuration(alarm ? t.data_age_alarm : t.data_age_alert)));
    }
  }
  for (const std::string& c : in.suspect_channels) judge.Add(Verdict::kAlert, "suspect sensor readings on " + c);
  if (in.sensor_fault) judge.Add(Verdict::kAlert, "suspect sensor " + *in.sensor_fault);
  for (const SilentChannel& c : in.silent_channels) {
    judge.Add(Verdict::kAlert, fmt::format("channel '{}' silent: no reading for {} (expected every {})", c.channel,
                                           FormatAge(Seconds(c.age)), FormatDuration(c.period)));
  }
  if (in.training_blocked) {
    judge.Add(Verdict::kAlert, "retraining finds no usable training pairs: " + *in.training_blocked);
  }
  if (!in.has_model) return judge.Take();
  if (in.drift_ratio) {
    const Verdict v = Level(*in.drift_ratio, t.drift_alert, t.drift_alarm);
    if (v != Verdict::kNormal) {
      const bool alarm = v == Verdict::kAlarm;
      judge.Add(v, fmt::format("drift ratio {} >= {} {:g}", Shown(*in.drift_ratio),
                               alarm ? "drift_alarm" : "drift_alert", alarm ? t.drift_alarm : t.drift_alert));
    }
  }
  if (in.drift_flag) {
    judge.Add(Verdict::kAlert, "drift flag raised by the change test" +
                                   (in.drift_grew.empty() ? std::string() : "; the error grew most on " + in.drift_grew));
  }
  const bool unscored_long = in.unscored_lyapunov_times ? *in.unscored_lyapunov_times >= kUnscoredAlertLyapunovTimes
                                                        : in.unscored_steps && *in.unscored_steps >= kUnscoredAlertSteps;
  if (unscored_long) {
    const std::string span = in.unscored_lyapunov_times
                                 ? fmt::format("{} Lyapunov times", Shown(*in.unscored_lyapunov_times))
                                 : fmt::format("{} model steps", Shown(*in.unscored_steps));
    judge.Add(Verdict::kAlert, fmt::format("drift cannot be judged: no sample scored for {} of data{}{}", span,
                                           in.unscored_cause.empty() ? "" : ": ", in.unscored_cause));
  }
  if (in.since_training_lyapunov_times) {
    const double lt = *in.since_training_lyapunov_times;
    const Verdict v = Level(lt, model_age.alert, model_age.alarm);
    if (v != Verdict::kNormal) {
      const bool alarm = v == Verdict::kAlarm;
      judge.Add(v, fmt::format("{} Lyapunov times of data since the model's training chunk >= {} {}{}", Shown(lt),
                               alarm ? "model_age_alarm_lyapunov" : "model_age_alert_lyapunov",
                               Shown(alarm ? model_age.alarm : model_age.alert),
                               (alarm ? model_age.alarm_derived : model_age.alert_derived) ? " (derived from the retrain cadence)" : ""));
    }
  }
  return judge.Take();
}

}  // namespace lyapcast
