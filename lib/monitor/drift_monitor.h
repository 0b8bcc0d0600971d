// DriftMonitor: one feed's out-of-sample scoring of the active model, the
// drift flag and the staleness figures (docs/design.md "Monitoring").
//
// Every arriving sample is recorded (newest data time, wall time of the last
// arrival) and kept in a short history (the samples within the reorder
// window plus max_gap steps of the newest; at most kHistory of them). A
// sample is SCORED, once, when all of these hold:
//   - a model is set and the monitor is not paused;
//   - its data time is after the model's trained_to: the model never saw it,
//     so the score is out of sample by construction;
//   - it has at least one channel present;
//   - a complete state can be formed k model steps before it, for the
//     smallest k in 1..max_gap, from the OLDER samples of the history by the
//     alignment rule of learn/alignment.h (the rule training uses:
//     interpolation between close neighbours, else the nearest sample
//     within a quarter step). Dense, jittered or oversampled data are
//     scored with k = 1 at nearly every sample; data sparser than the step
//     through G^k, the way training pairs them;
//   - the error below is finite (it is not for values beyond float range).
// A sample that arrives late (within the reorder window, in any order) is
// scored when its earlier neighbours are there, and may make a newer,
// not yet scored sample scorable. A second sample at the same data time
// (another source writing other channels of the same row) fills the
// missing channels of the first.
// Its normalized error is
//
//     e = sqrt( mean over present channels c of ((G^k(prev)_c - x_c) / s_c)^2 )
//
// with prev the state formed k steps earlier, G the model's one-step map
// (ForecastModel::Step) and s_c its
// per-channel error_scale() (a flow map's stddev()). From e:
//   - rmse_ewma: sqrt of an EWMA of e^2, alpha = 2 / (kWindow + 1);
//   - rmse_window: RMSE over the last kWindow scored samples;
//   - drift_ratio = rmse_window / validation_error, once kMinScored samples
//     are scored and the validation error is finite and > 0;
//   - a ChangeTest (monitor.change_threshold, monitor.change_drift, a
//     warm-up of kWarmupBlocks) on the means of log(e) over blocks of
//     kBlock scored samples. Errors are magnitudes, skewed to the right
//     with a long tail; their log is close to Gaussian, which the test's
//     standardization and its run-length figures assume, and it makes a
//     doubling of the error the same step whatever the error's level.
//     Consecutive errors of a smooth process are strongly correlated (the
//     state moves little per step), which would make a per-sample test
//     alarm far more often than its run-length figures say; block means
//     are much closer to independent. The test warms up on the model's
//     first live scores, so it detects a CHANGE after promotion; a model
//     that is poor from the start shows in drift_ratio instead. (e == 0, an
//     exact prediction, is skipped by the test as non-finite.)
// When the change test alarms, attribution (monitor/drift_attribution.h)
// reads it: each scored sample also gives every channel's own error and,
// for data scored one step apart, each channel's blind error (the other
// channels predicted from the model's own running estimate of that channel).
//   - one sensor at fault: Observe reports sensor_alarm = that channel, the
//     monitor reports the sensor fault (Snapshot().sensor_fault) and raises
//     no drift flag: retraining would learn the fault;
//   - one sensor, but the error has not doubled yet (pending): nothing but
//     Snapshot().last_alarm; the test restarts and a lasting fault alarms
//     again;
//   - otherwise (a process change, or too little evidence): the drift flag
//     rises (with the alarm's data time) and Observe reports alarm_raised
//     exactly once for that alarm (the caller triggers a retrain).
// Either way the test restarts on the same in-control estimate so a
// persisting or new change alarms again later. The flag is cleared only by
// SetModel or Reset.
//
// A feed retrained every few tens of samples would keep the change test in
// its warm-up forever if every new model restarted it (a 2 Hz feed
// retrained every 30 s scores 60 samples per model; the warm-up needs
// kWarmupBlocks * kBlock = 300). So a SUCCESSOR (a model warm-started from
// the one it replaces, after a quiet spell: no alarm under the outgoing
// model) carries the change test over: its warm-up progress, in-control
// estimate, statistic and partial block. Its error level is close to its
// parent's, and an in-control estimate that spans several successive models
// also spans their spread. After an alarm, or for any other model (the
// first one, an operator's activation of an older version), the test starts
// afresh: the regime or the model changed, so the old level no longer says
// what is normal. The per-model scores (EWMA, window, drift ratio, alarms)
// always restart with a new model.
//
// Not thread-safe: the daemon serializes calls (e.g. one mutex per feed).
// Allocation: none per Observe once the history's slots have held a sample
// of the feed's size.
#pragma once

#include <array>
#include <cstdint>
#include <limits>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "core/data_time.h"
#include "core/sample.h"
#include "core/status.h"
#include "learn/alignment.h"
#include "learn/forecast_model.h"
#include "monitor/change_test.h"
#include "monitor/drift_attribution.h"
#include "monitor/drift_monitor_options.h"

namespace lyapcast {

struct DriftSnapshot {
  std::optional<std::int64_t> model_version;  // none without a model
  std::optional<double> validation_error;     // the model's, when finite
  std::int64_t scored = 0;                    // samples scored since SetModel/Reset
  std::optional<double> last_error;           // e of the newest scored sample
  std::optional<double> rmse_ewma;            // none until a sample is scored
  std::optional<double> rmse_window;
  std::optional<double> drift_ratio;          // see the header comment for when it is present
  double change_statistic = 0;                // ChangeTest::statistic()
  bool warming_up = true;                     // the change test is still estimating
  bool drift_flag = false;
  std::optional<DataTime> flagged_at;         // data time of the alarm that raised the flag
  std::int64_t alarms = 0;                    // alarms since SetModel/Reset
  std::int64_t alarms_total = 0;              // alarms over the monitor's life (a counter)
  bool paused = false;
  std::optional<DataTime> newest_data_time;   // largest sample time seen
  std::optional<WallTime> last_arrival_wall;  // wall time of the last arrival
  // Wall now - last arrival (negative if the wall clock stepped back).
  std::optional<double> data_age_s;
  // Wall now - the model's promotion wall time.
  std::optional<double> model_age_s;
  // Newest data time - the model's trained_to (data time); multiply by the
  // largest Lyapunov exponent for health's since_training_lyapunov_times.
  std::optional<double> since_training_s;
  // Data time since a sample was last scored (or since scoring became
  // possible: the model's trained_to, its activation, the end of a pause),
  // while a model is set and the monitor runs; with why the newest samples
  // could not be scored, in words. Health turns a long stretch into a reason.
  std::optional<double> unscored_s;
  std::string unscored_cause;
  std::int64_t scored_late = 0;   // samples scored after a newer one arrived
  std::int64_t scored_multi = 0;  // samples scored through G^k, k > 1
  // Per channel (feed order), once the attribution's references are warm:
  // its own one-step error and its blind error, recent over reference RMS.
  std::vector<DriftAttribution::ChannelFigures> channels;
  // The newest change-test alarm as attribution read it (none before one).
  struct AlarmReading {
    DataTime at{};
    DriftAttribution::Kind kind = DriftAttribution::Kind::kUnknown;
    int channel = -1;        // the suspect sensor when kind is kSensor
    std::vector<int> grew;   // channels whose own error grew
    double full_ratio = 0;   // recent / reference RMS of the whole error (0: unknown)
  };
  std::optional<AlarmReading> last_alarm;
  // A sensor that attribution found at fault, while it is (its newest such
  // alarm within kSensorHoldSteps model steps of the newest sample).
  struct SensorFault {
    int channel = -1;
    DataTime since{};  // first alarm of this spell
    DataTime last{};   // newest alarm
    std::int64_t alarms = 0;  // alarms of this spell
  };
  std::optional<SensorFault> sensor_fault;
  std::int64_t sensor_alarms_total = 0;  // alarms attributed to a sensor over the monitor's life
};

class DriftMonitor {
 public:
  static constexpr int kWindow = 100;    // samples in rmse_window and the EWMA's span
  static constexpr int kMinScored = 10;  // scored samples before drift_ratio and e0 use live errors
  static constexpr int kBlock = 10;      // scored samples per change-test observation
  static constexpr int kWarmupBlocks = 30;  // blocks that estimate the in-control level
  static constexpr int kHistory = 1024;     // samples kept for forming earlier states
  static constexpr int kSettle = 50;        // steps a blind estimate runs before its errors count
  static constexpr int kSensorHoldSteps = 300;  // model steps a sensor fault stays reported after its last alarm

  struct Observation {
    bool scored = false;
    // This sample raised a change-test alarm read as a change of the process
    // (or unattributable): the drift flag is up; the caller retrains.
    bool alarm_raised = false;
    // This sample raised an alarm that attribution put on one sensor: the
    // channel (feed order), else -1. No drift flag; the caller does not retrain.
    int sensor_alarm = -1;
    double error = std::numeric_limits<double>::quiet_NaN();  // e when scored
  };

  // Starts without a model, unpaused. Requires options.channels >= 1 and
  // options.step > 0 (a feed's, from ToDriftMonitorOptions in config/config.h).
  explicit DriftMonitor(const DriftMonitorOptions& options);

  // How a new model relates to the one it replaces (see the header comment).
  enum class Handover {
    kFresh,      // restart the change test
    kSuccessor,  // warm-started from the outgoing model: carry the change test over unless it alarmed
  };

  // A new active model (null: none). Resets the scores, the drift flag and
  // the per-model alarm count, and the change test unless `handover` is
  // kSuccessor and the outgoing model raised no alarm; keeps the arrival
  // record and the sample history. The monitor shares ownership of the model
  // (the daemon passes its published ActiveModel's) and scores through its
  // Step with a scratch of its own.
  // validation_error: the model's one-step error at promotion, normalized
  // like e (NaN when unknown); trained_to: end of its training data (data
  // time); promoted_wall: when it became active (wall time, µs).
  // kInvalidArgument (nothing changed) when the model's channel count is not
  // the feed's.
  [[nodiscard]] Status SetModel(std::shared_ptr<const ForecastModel> model, std::int64_t version,
                                double validation_error, DataTime trained_to, WallTime promoted_wall,
                                Handover handover = Handover::kFresh);

  // Records one committed sample of this feed that arrived at wall time
  // `arrived_wall` and scores it when the rules above allow. Requires
  // s.values.size() == the feed's channel count (a sample of another size is
  // recorded for data age only).
  Observation Observe(const Sample& s, WallTime arrived_wall);

  // While paused (plant shutdown) samples are recorded for data age but
  // neither scored nor fed to the change test, so no alarm is raised.
  void SetPaused(bool paused);
  bool paused() const { return paused_; }
  bool has_model() const { return model_ != nullptr; }

  // Forgets the scores, the change test, the drift flag and the per-model
  // alarm count, as a new model would, keeping the model.
  void Reset();

  DriftSnapshot Snapshot(WallTime wall_now) const;

  // The current normalized one-step error e0 for the predictability horizon
  // (chaos/horizon.h): rmse_window once kMinScored samples are scored, else
  // the model's validation error (NaN without a model or when unknown).
  double e0() const;

 private:
  // Why the newest unscored sample was not scored.
  enum class Unscored { kNone, kNoState, kTrainedOn, kNoChannel, kNotFinite };
  struct Slot {
    Sample sample;
    bool scored = false;
    // Blind estimates (drift_attribution.h) at this sample's time, per
    // channel, and how many steps each chain has run (0: none).
    std::vector<double> blind;
    std::vector<int> blind_age;
  };
  // The history as a sequence sorted by time, limited to its first `size`
  // slots (alignment's StateAt reads it).
  struct HistoryView {
    const DriftMonitor* m;
    std::int64_t n;
    std::int64_t size() const { return n; }
    const Sample& operator[](std::int64_t i) const { return m->slot(i).sample; }
  };
  Slot& slot(std::int64_t i) { return history_[static_cast<std::size_t>((head_ + i) % kHistory)]; }
  const Slot& slot(std::int64_t i) const { return history_[static_cast<std::size_t>((head_ + i) % kHistory)]; }

  double RmseWindow() const;
  void ResetScores();
  // Inserts s in time order (merging a sample at the same time); returns its
  // index, or -1 when it is older than everything kept and the history is full.
  std::int64_t Insert(const Sample& s);
  void Prune();
  // Scores slot i if the rules allow; returns whether it raised an alarm.
  bool TryScore(std::int64_t i, Observation* out);
  // e through G^k from the state before slot i; NaN when none can be formed.
  // Fills own_sq_ and blind_sq_ for attribution.
  double Score(std::int64_t i, bool* multi);
  // Advances the blind estimates to slot i from the one nearest `at` (the
  // state's time, one step before) and fills blind_sq_. x_ holds the state,
  // y_ its one-step prediction.
  void RunBlind(std::int64_t i, DataTime at);
  bool SensorFaultActive() const;
  void Record(double e, DataTime t, Observation* out);
  std::string DescribeUnscored() const;

  // From the options.
  int channels_;
  Micros step_;
  int max_gap_;
  Micros keep_;  // history span kept behind the newest sample
  AlignmentOptions alignment_;
  ChangeTestOptions change_options_;

  // The model.
  std::shared_ptr<const ForecastModel> model_;
  std::int64_t version_ = 0;
  double validation_error_ = 0;
  DataTime trained_to_{};
  WallTime promoted_wall_{};

  // Arrivals.
  bool paused_ = false;
  std::optional<DataTime> newest_;
  std::optional<WallTime> last_arrival_;
  std::vector<Slot> history_;  // ring buffer of kHistory slots
  std::vector<std::array<ChannelPoint, 2>> last_seen_;  // per channel, its two newest observations
  std::int64_t head_ = 0, size_ = 0;

  // Scores (since SetModel/Reset).
  std::int64_t scored_ = 0;
  double last_error_ = 0;
  double ewma_sq_ = 0;
  std::array<double, kWindow> window_sq_{};  // ring buffer of e^2
  ChangeTest change_;
  double block_sum_ = 0;  // sum of log(e) over the current block
  int block_count_ = 0;
  bool drift_flag_ = false;
  std::optional<DataTime> flagged_at_;
  std::int64_t alarms_ = 0;
  std::int64_t alarms_total_ = 0;
  std::int64_t scored_late_ = 0, scored_multi_ = 0;
  // Scoring coverage: data time from which samples could have been scored,
  // the newest scored sample's, and why the newest sample was not.
  std::optional<DataTime> scorable_from_;
  std::optional<DataTime> last_scored_;
  Unscored unscored_ = Unscored::kNone;

  // Step's buffers, reused (the scratch is the model's, made by SetModel).
  Eigen::VectorXd x_, y_;
  std::vector<double> state_;
  std::unique_ptr<ModelScratch> scratch_;

  // Attribution (carried over with the change test for a successor model).
  DriftAttribution attribution_;
  std::vector<double> own_sq_, blind_sq_;
  Eigen::MatrixXd blind_x_, blind_y_;
  // Its own scratch: a model's buffers are kept for one batch size, and the
  // blind batch (channels columns) alternates with Step's single column.
  std::unique_ptr<ModelScratch> blind_scratch_;
  std::optional<DriftSnapshot::AlarmReading> last_alarm_;
  std::optional<DriftSnapshot::SensorFault> sensor_fault_;
  std::int64_t sensor_alarms_total_ = 0;
};

}  // namespace lyapcast
