// Health of one feed, judged against configured thresholds, for /v1/health,
// the status routes, the metrics and `lyapcast check` (which may override
// the thresholds on its command line).
//
// The four verdicts use the words of process alarm management: an *alert*
// asks the operator to look at something when convenient, an *alarm* asks
// for a response now.
//   normal         every check passes (exit code 0)
//   alert          needs attention: a threshold's alert level is reached (1)
//   alarm          act now: an alarm level is reached, or storage is down (2)
//   indeterminate  cannot judge: no sample or no model yet (3)
// The exit codes are the widely used monitoring-plugin convention, so any
// scheduler or monitoring system can act on them.
//
// Checks, in the order their reasons are listed (each value compared with
// >=: reaching a threshold counts):
//   - storage unavailable                            -> alarm
//   - no sample yet / no model yet                   -> indeterminate
//   - paused                                         -> a note only, see below
//   - data_age_s vs data_age_alert / data_age_alarm  -> alert / alarm
//   - drift_ratio vs drift_alert / drift_alarm       -> alert / alarm
//   - drift flag raised by the change test           -> alert
//   - no sample scored for kUnscoredAlertLyapunovTimes Lyapunov times of
//     data (kUnscoredAlertSteps model steps without a positive exponent)
//     while a model is active: drift cannot be judged -> alert, with why
//   - the last retrain found no usable training pairs while data arrive
//     (training_blocked)                             -> alert, with why
//   - suspect readings on a channel within kSuspectRecentSteps model steps
//     of the newest data (a failing sensor)          -> alert, per channel
//   - a channel with a declared period silent (ChannelSilent) -> alert, per
//     channel
//   - since_training_lyapunov_times vs the model-age thresholds in force
//     (ModelAgeInForce)                              -> alert / alarm
// While paused (plant shutdown) only storage and the no-data / no-model
// checks apply -- a stopped plant sends nothing and its model cannot drift --
// and "paused" is listed as a note that does not change the verdict.
// Without data the data age is not judged; without a model neither drift
// nor model age is. Absent or NaN values are not judged.
//
// The verdict is the worst of all checks in the order
// normal < indeterminate < alert < alarm: a problem that is known (data
// stopped, storage down) matters more than "no model to judge yet", so
// indeterminate never hides it. reasons lists every check that is not normal
// (and the pause note) in plain words with the value and the threshold, e.g.
// "drift ratio 5.3 >= drift_alarm 5", "no sample for 6m12s (data_age_alarm 5m)".
//
// Pure functions of their arguments; thread-safe; no daemon state.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "core/data_time.h"
#include "monitor/health_levels.h"

namespace lyapcast {

enum class Verdict { kNormal, kAlert, kAlarm, kIndeterminate };

// "normal", "alert", "alarm", "indeterminate".
const char* VerdictName(Verdict v);
// Monitoring-plugin exit code: 0 normal, 1 alert, 2 alarm, 3 indeterminate.
int VerdictExitCode(Verdict v);
// The worse of two verdicts in the order above.
Verdict WorseVerdict(Verdict a, Verdict b);
// Rank for sorting, worst highest: normal 0, indeterminate 1, alert 2, alarm 3.
int VerdictSeverity(Verdict v);

// The model-age thresholds that apply, in Lyapunov times of data since the
// model's training chunk. The configured ones when set; otherwise derived
// from the retrain cycle, because the model ages by a whole retrain
// interval (plus the job's run time) before every promotion, and a fixed
// default below that would read "alert" forever on a healthy feed:
//   alert = max(2,  (3 * interval + time_budget) / T)   two retrains missed
//   alarm = max(10, (10 * interval + time_budget) / T)  about nine missed
// with interval the cadence's current retrain interval and T the Lyapunov
// time it paces by. `cycle` absent (no positive exponent) gives the fixed
// floors 2 and 10.
struct RetrainCycle {
  double interval_lyapunov_times = 0;     // the cadence's interval / T
  double time_budget_lyapunov_times = 0;  // retrain.time_budget / T
};
struct ModelAgeThresholds {
  double alert = 2;
  double alarm = 10;
  bool alert_derived = false;  // not configured and derived from a known cycle
  bool alarm_derived = false;
};
ModelAgeThresholds ModelAgeInForce(const HealthLevels& configured, const std::optional<RetrainCycle>& cycle);

// Drift that cannot be judged is not "normal": a stretch this long without
// a scored sample is an alert (common practice: a monitor that has not
// seen its signal for several correlation times reports itself).
inline constexpr double kUnscoredAlertLyapunovTimes = 5;
inline constexpr double kUnscoredAlertSteps = 100;
// A channel's suspect readings stay a health reason this long (in model
// steps of data) after the last one.
inline constexpr double kSuspectRecentSteps = 300;

// A channel expected to report at least once per `period` (feeds[].period)
// is silent when more than kSilentPeriods periods of data time passed since
// its last reading, measured against the feed's newest sample (so a feed
// that stops altogether is the data-age check's, not every channel's).
// Three periods let one or two readings be late or lost without an alert.
inline constexpr double kSilentPeriods = 3;
// `age`: data time from the channel's last reading to the feed's newest
// sample. False when period <= 0 (none declared): fast channels are covered
// by the data age.
bool ChannelSilent(Micros age, Micros period);

struct SilentChannel {
  std::string channel;  // its name
  Micros age{};         // data time without a reading, as for ChannelSilent
  Micros period{};      // the declared period
};

struct HealthInputs {
  bool has_data = false;           // any sample of the feed stored
  bool has_model = false;          // an active model
  bool paused = false;             // POST /v1/feeds/{id}/pause
  bool storage_available = true;   // the last commit succeeded
  std::optional<double> data_age_s;  // wall seconds since the last sample arrived
  std::optional<double> drift_ratio;
  bool drift_flag = false;
  // The channels whose own error grew most at the alarm, quoted and comma
  // separated ("'y', 'z'"); empty when unknown.
  std::string drift_grew;
  // Data time since the model's training chunk, in Lyapunov times
  // (since_training_s * lambda_max); absent without a positive exponent.
  std::optional<double> since_training_lyapunov_times;
  // Data time without a scored sample (DriftSnapshot::unscored_s), in
  // Lyapunov times when the exponent is positive and in model steps; and why.
  std::optional<double> unscored_lyapunov_times;
  std::optional<double> unscored_steps;
  std::string unscored_cause;
  // The last retrain could not train for want of usable pairs while data
  // arrive: why, in words; absent otherwise.
  std::optional<std::string> training_blocked;
  // Channels with suspect readings (sensor screen) recently, each described
  // in words ("'x': 12 suspect readings, the last -9999 at T").
  std::vector<std::string> suspect_channels;
  // A sensor the drift monitor found at fault (DriftSnapshot::sensor_fault),
  // described in words ("'x' since T: ..."); absent otherwise.
  std::optional<std::string> sensor_fault;
  // Channels that ChannelSilent calls silent.
  std::vector<SilentChannel> silent_channels;
};

struct HealthResult {
  Verdict verdict = Verdict::kNormal;
  std::vector<std::string> reasons;  // empty when every check passes and the feed is not paused
};

// `model_age` is ModelAgeInForce's answer for this feed.
HealthResult EvaluateHealth(const HealthLevels& thresholds, const ModelAgeThresholds& model_age,
                            const HealthInputs& in);

// A span of seconds as operators read it: "45s", "6m12s", "2h05m", "3d4h";
// below 10 s with one decimal ("2.5s"); negative spans get a minus sign.
std::string FormatAge(double seconds);

}  // namespace lyapcast
