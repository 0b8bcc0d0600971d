// FeedRuntime: what the daemon does with one feed between the writer and the
// HTTP routes (docs/design.md "Data flow"), in one place with its own tests.
//
// Per committed sample, in this order (OnSample):
//   1. the scheduler sees it (cadence; in lockstep a due retrain runs first,
//      so the sample is scored by the model trained on the data before it);
//   2. the drift monitor switches to the published model if it changed (a
//      successor of the model it scored with keeps the change test's
//      in-control estimate: DriftMonitor::Handover);
//   3. the monitor scores the sample against the model;
//   4. the newest complete sample (a forecast's default start) is updated;
//   5. a change-test alarm triggers a drift retrain with the data up to and
//      including the alarming sample, at most one per retrain.min_interval
//      of data time (a lasting change keeps alarming; the flag stays up);
//   6. in lockstep, the caller waits until that retrain finished, so the
//      next sample is scored by its outcome (the next sample's step 1 would
//      wait for it too; waiting here also holds the writer, so whoever reads
//      after this batch sees the outcome).
//
// Forecast: a free run of the published model from a given start with the
// predictability horizon from the given exponent and the monitor's current
// one-step error (the model's validation error until the monitor has one).
//
// FeedRuntimes holds one per configured feed and is the writer's subscriber.
//
// Threads: OnSample/OnCommitted on the writer thread only; the getters,
// SetPaused and Forecast from any thread (one mutex per feed, held only for
// in-memory work, never while the scheduler runs a job).
#pragma once

#include <cstdint>
#include <memory>
#include <mutex>
#include <optional>
#include <vector>

#include "config/config.h"
#include "core/sample.h"
#include "monitor/drift_monitor.h"
#include "runtime/forecast.h"
#include "schedule/scheduler.h"
#include "store/sample_writer.h"

namespace lyapcast {

// A forecast and the model version that made it.
struct ServedForecast {
  std::shared_ptr<const ActiveModel> model;
  Forecast forecast;
};

class FeedRuntime {
 public:
  // `feed` and `scheduler` must outlive the runtime; `index` is the feed's
  // index in the config (and the scheduler). `log` may be empty.
  FeedRuntime(const FeedConfig& feed, std::uint32_t index, Scheduler& scheduler, SchedulerLog log);
  ~FeedRuntime();
  FeedRuntime(const FeedRuntime&) = delete;
  FeedRuntime& operator=(const FeedRuntime&) = delete;

  // The per-sample order of work above. `arrived`: wall time of the commit.
  // `added`: the channels whose readings are new in this commit
  // (CommittedBatch::added); only those count as suspect readings, so a
  // merged row's earlier suspect readings are not counted twice.
  void OnSample(const Sample& sample, WallTime arrived, std::uint64_t added);

  DriftSnapshot Snapshot(WallTime wall_now) const;
  double e0() const;  // the monitor's current error; NaN when unknown
  std::optional<Sample> NewestComplete() const;

  // A forecast start at the newest sample's time: its present channels as
  // measured, and each missing channel estimated (docs/design.md "Forecast
  // start"):
  //   - carried: its last value, when that is at most the channel's `hold`
  //     (config) old; carrying wins when it applies;
  //   - predicted: from the published model run k steps, G^k(x(t0)), from
  //     the newest complete sample x(t0), when the newest sample's time t1
  //     is within a quarter step of t0 + k * step (the alignment rule's
  //     nearest-sample tolerance, learn/alignment.h) with
  //     1 <= k <= model.max_gap (the longest composition the model is
  //     trained and scored through), and every predicted value is finite.
  // `estimated` names each estimated channel, how, and its age. Absent when
  // some missing channel can be neither (then the caller falls back to
  // NewestComplete). Runs the model outside the runtime's lock.
  struct EstimatedChannel {
    enum class How { kCarried, kPredicted };
    int channel = 0;
    How how = How::kCarried;
    // Data time from the carried value, or from the complete sample the
    // prediction started at, to the start.
    double age_s = 0;
  };
  struct StartEstimate {
    Sample start;  // complete
    std::vector<EstimatedChannel> estimated;
    // The model version that predicted; null when nothing was predicted.
    // Pass it to ForecastFrom so one version makes the start and the run.
    std::shared_ptr<const ActiveModel> model;
  };
  std::optional<StartEstimate> EstimateStart() const;

  // What the runtime saw of each channel (since the daemon started): the
  // data time of its newest usable reading (suspect readings are missing
  // and do not count), and the oldest and newest sample times of the feed.
  struct ChannelActivity {
    std::vector<std::optional<DataTime>> last;  // per channel (feed order); none: no reading seen
    std::optional<DataTime> first;              // none before the first sample
    std::optional<DataTime> newest;
  };
  ChannelActivity Activity() const;

  // Readings the sensor screen marked suspect, per channel (feed order),
  // as the committed samples showed them (each stored reading once).
  struct SuspectChannel {
    std::int64_t count = 0;
    std::optional<DataTime> last;  // data time of the newest suspect reading
    double last_value = 0;
  };
  std::vector<SuspectChannel> Suspects() const;
  void SetPaused(bool paused);
  // Drift retrains this runtime queued (alarms within min_interval of the
  // previous trigger are not counted).
  std::uint64_t drift_triggers() const;

  // `steps` points from `start` (complete, one value per channel) with
  // `model`, or the published model when `model` is null.
  // kFailedPrecondition when the feed has no model yet; otherwise
  // MakeForecast's errors.
  [[nodiscard]] Result<ServedForecast> ForecastFrom(const Sample& start, std::int64_t steps,
                                                    std::optional<double> lambda_max,
                                                    std::shared_ptr<const ActiveModel> model = nullptr) const;

 private:
  struct State;
  void SyncModelLocked();  // requires mu_
  void Log(SchedulerLogLevel level, const std::string& text) const;

  const FeedConfig& feed_;
  const std::uint32_t index_;
  Scheduler& scheduler_;
  const SchedulerLog log_;
  mutable std::mutex mu_;
  std::unique_ptr<State> state_;  // guarded by mu_
};

class FeedRuntimes {
 public:
  // `config` and `scheduler` must outlive this object.
  FeedRuntimes(const Config& config, Scheduler& scheduler, SchedulerLog log);

  // The writer's subscriber: OnSample for each sample of the batch, in order.
  void OnCommitted(const CommittedBatch& batch);

  std::size_t size() const { return feeds_.size(); }
  // Requires feed < size().
  FeedRuntime& at(std::uint32_t feed) { return *feeds_[feed]; }
  const FeedRuntime& at(std::uint32_t feed) const { return *feeds_[feed]; }

 private:
  std::vector<std::unique_ptr<FeedRuntime>> feeds_;
};

}  // namespace lyapcast
