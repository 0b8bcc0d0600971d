// FeedMonitors: one DriftMonitor per feed (lib/monitor), fed with every
// newly committed sample right after the scheduler saw it, so in lockstep a
// sample past a due retrain is scored by the model trained before it. A
// drift alarm triggers a retrain with the data up to the alarming sample.
// Also keeps each feed's newest complete sample, the default start of a
// forecast.
//
// Threads: OnCommitted on the writer thread; the getters and SetPaused from
// any thread (one mutex per feed, held only for in-memory work).
#pragma once

#include <memory>
#include <mutex>
#include <optional>
#include <vector>

#include "config/config.h"
#include "monitor/drift_monitor.h"
#include "schedule/scheduler.h"
#include "store/sample_writer.h"

namespace lyapcast {

class FeedMonitors {
 public:
  // `config` and `scheduler` must outlive this object.
  FeedMonitors(const Config& config, Scheduler& scheduler);
  ~FeedMonitors();

  // The writer's subscriber: scheduler cadence, then scoring, per sample.
  void OnCommitted(const CommittedBatch& batch);

  DriftSnapshot Snapshot(std::uint32_t feed, WallTime wall_now) const;
  double e0(std::uint32_t feed) const;  // NaN when unknown
  std::optional<Sample> NewestComplete(std::uint32_t feed) const;
  void SetPaused(std::uint32_t feed, bool paused);

 private:
  struct Feed;
  void SyncModel(Feed& f);  // requires f.mu
  const Config& config_;
  Scheduler& scheduler_;
  std::vector<std::unique_ptr<Feed>> feeds_;
};

}  // namespace lyapcast
