// Health of one feed: OK / WARNING / CRITICAL / UNKNOWN from configured
// thresholds (DESIGN.md "Monitoring"), for /v1/health and for
// `lyapcast check` (which may override the thresholds on its command line).
//
// Checks, in the order their reasons are listed (each value compared with
// >=: reaching a threshold counts):
//   - storage unavailable                         -> CRITICAL
//   - no sample yet / no model yet                -> UNKNOWN (nothing to judge)
//   - paused                                      -> a note only, see below
//   - data_age_s vs data_age_warn / data_age_crit -> WARNING / CRITICAL
//   - drift_ratio vs drift_warn / drift_crit      -> WARNING / CRITICAL
//   - drift flag raised by the change test        -> WARNING
//   - since_training_lyapunov_times vs model_age_warn_lyapunov /
//     model_age_crit_lyapunov                     -> WARNING / CRITICAL
// While paused (plant shutdown) only storage and the no-data / no-model
// checks apply -- a stopped plant sends nothing and its model cannot drift --
// and "paused" is listed as a note that does not change the verdict.
// Without data the data age is not judged; without a model neither drift
// nor model age is. Absent or NaN values are not judged.
//
// The verdict is the worst of all checks in the order
// OK < UNKNOWN < WARNING < CRITICAL: a problem that is known (data stopped,
// storage down) matters more to an alert than "no model to judge yet", so
// UNKNOWN never hides it. reasons lists every check that is not OK (and
// the pause note) in plain words with the value and the threshold, e.g.
// "drift ratio 5.3 >= drift_crit 5", "no sample for 6m12s (data_age_crit 5m)".
//
// Pure functions of their arguments; thread-safe; no daemon state.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "config/config.h"

namespace lyapcast {

enum class Verdict { kOk, kWarning, kCritical, kUnknown };

// "OK", "WARNING", "CRITICAL", "UNKNOWN".
const char* VerdictName(Verdict v);
// Monitoring-plugin exit code: 0 OK, 1 WARNING, 2 CRITICAL, 3 UNKNOWN.
int VerdictExitCode(Verdict v);
// The worse of two verdicts in the order above.
Verdict WorseVerdict(Verdict a, Verdict b);

struct HealthInputs {
  bool has_data = false;           // any sample of the feed stored
  bool has_model = false;          // an active model
  bool paused = false;             // POST /v1/feeds/{id}/pause
  bool storage_available = true;   // the last commit succeeded
  std::optional<double> data_age_s;  // wall seconds since the last sample arrived
  std::optional<double> drift_ratio;
  bool drift_flag = false;
  // Data time since the model's training chunk, in Lyapunov times
  // (since_training_s * lambda_max); absent without a positive exponent.
  std::optional<double> since_training_lyapunov_times;
};

struct HealthResult {
  Verdict verdict = Verdict::kOk;
  std::vector<std::string> reasons;  // empty when every check is OK and the feed is not paused
};

HealthResult EvaluateHealth(const HealthConfig& thresholds, const HealthInputs& in);

// A span of seconds as operators read it: "45s", "6m12s", "2h05m", "3d4h";
// below 10 s with one decimal ("2.5s"); negative spans get a minus sign.
std::string FormatAge(double seconds);

}  // namespace lyapcast
