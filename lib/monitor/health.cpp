#include "monitor/health.h"

#include <fmt/format.h>

#include <cmath>
#include <string>
#include <utility>

#include "core/data_time.h"

namespace lyapcast {
namespace {

int Severity(Verdict v) {  // OK < UNKNOWN < WARNING < CRITICAL
  switch (v) {
    case Verdict::kOk: return 0;
    case Verdict::kUnknown: return 1;
    case Verdict::kWarning: return 2;
    case Verdict::kCritical: return 3;
  }
  return 1;
}

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

// CRITICAL at or above crit, WARNING at or above warn, else OK (NaN: OK).
Verdict Level(double value, double warn, double crit) {
  if (value >= crit) return Verdict::kCritical;
  if (value >= warn) return Verdict::kWarning;
  return Verdict::kOk;
}

// A measured value for a reason: two decimals, truncated, so a value just
// below a threshold never reads as the threshold (4.9996 -> "4.99").
std::string Shown(double x) { return fmt::format("{}", std::floor(x * 100 + 1e-9) / 100); }

}  // namespace

const char* VerdictName(Verdict v) {
  switch (v) {
    case Verdict::kOk: return "OK";
    case Verdict::kWarning: return "WARNING";
    case Verdict::kCritical: return "CRITICAL";
    case Verdict::kUnknown: return "UNKNOWN";
  }
  return "UNKNOWN";
}

int VerdictExitCode(Verdict v) {
  switch (v) {
    case Verdict::kOk: return 0;
    case Verdict::kWarning: return 1;
    case Verdict::kCritical: return 2;
    case Verdict::kUnknown: return 3;
  }
  return 3;
}

Verdict WorseVerdict(Verdict a, Verdict b) { return Severity(b) > Severity(a) ? b : a; }

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

HealthResult EvaluateHealth(const HealthConfig& t, const HealthInputs& in) {
  Judge judge;
  if (!in.storage_available) {
    judge.Add(Verdict::kCritical, "storage unavailable: samples are not being committed");
  }
  if (!in.has_data) judge.Add(Verdict::kUnknown, "no sample received yet");
  if (!in.has_model) judge.Add(Verdict::kUnknown, "no model yet");
  if (in.paused) {
    judge.Add(Verdict::kOk, "paused: data age, drift and model age are not judged");
    return judge.Take();
  }
  if (in.has_data && in.data_age_s) {
    const double age = *in.data_age_s;
    const Verdict v =
        Level(age, static_cast<double>(t.data_age_warn) / 1e6, static_cast<double>(t.data_age_crit) / 1e6);
    if (v != Verdict::kOk) {
      const bool crit = v == Verdict::kCritical;
      judge.Add(v, fmt::format("no sample for {} ({} {})", FormatAge(age), crit ? "data_age_crit" : "data_age_warn",
                               FormatDuration(crit ? t.data_age_crit : t.data_age_warn)));
    }
  }
  if (!in.has_model) return judge.Take();
  if (in.drift_ratio) {
    const Verdict v = Level(*in.drift_ratio, t.drift_warn, t.drift_crit);
    if (v != Verdict::kOk) {
      const bool crit = v == Verdict::kCritical;
      judge.Add(v, fmt::format("drift ratio {} >= {} {:g}", Shown(*in.drift_ratio), crit ? "drift_crit" : "drift_warn",
                               crit ? t.drift_crit : t.drift_warn));
    }
  }
  if (in.drift_flag) judge.Add(Verdict::kWarning, "drift flag raised by the change test");
  if (in.since_training_lyapunov_times) {
    const double lt = *in.since_training_lyapunov_times;
    const Verdict v = Level(lt, t.model_age_warn_lyapunov, t.model_age_crit_lyapunov);
    if (v != Verdict::kOk) {
      const bool crit = v == Verdict::kCritical;
      judge.Add(v, fmt::format("{} Lyapunov times of data since the model's training chunk >= {} {:g}", Shown(lt),
                               crit ? "model_age_crit_lyapunov" : "model_age_warn_lyapunov",
                               crit ? t.model_age_crit_lyapunov : t.model_age_warn_lyapunov));
    }
  }
  return judge.Take();
}

}  // namespace lyapcast
