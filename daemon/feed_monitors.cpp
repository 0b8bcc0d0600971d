#include "feed_monitors.h"

#include <spdlog/spdlog.h>

#include <cmath>
#include <limits>

#include "core/wall_clock.h"
#include "schedule/retrain_details.h"

namespace lyapcast {

struct FeedMonitors::Feed {
  Feed(const FeedConfig& fc, std::uint32_t i) : config(&fc), index(i), monitor(ToDriftMonitorOptions(fc)) {}
  const FeedConfig* config;
  std::uint32_t index;
  mutable std::mutex mu;
  DriftMonitor monitor;                          // guarded by mu
  std::shared_ptr<const ActiveModel> model;      // the one the monitor scores with; guarded by mu
  std::optional<Sample> newest_complete;         // guarded by mu
  std::optional<DataTime> last_drift_trigger;    // guarded by mu
};

FeedMonitors::FeedMonitors(const Config& config, Scheduler& scheduler) : config_(config), scheduler_(scheduler) {
  for (std::uint32_t i = 0; i < config_.feeds.size(); ++i) {
    feeds_.push_back(std::make_unique<Feed>(config_.feeds[i], i));
  }
  for (std::uint32_t i = 0; i < feeds_.size(); ++i) {
    std::lock_guard lock(feeds_[i]->mu);
    SyncModel(*feeds_[i]);
  }
}

FeedMonitors::~FeedMonitors() = default;

namespace {

// The validation error on the monitor's scale. The registry's figure is the
// mean over channels of per-channel RMSEs; the monitor's rolling error is
// the RMS over channels, which is larger by up to sqrt(channels) when the
// channels differ. The per-channel figures in the version's details give
// the RMS form; without them the mean is used.
double ValidationRms(const ModelRecord& r) {
  return ValidationRms(ParseRetrainDetails(r.details))
      .value_or(r.validation_error.value_or(std::numeric_limits<double>::quiet_NaN()));
}

}  // namespace

void FeedMonitors::SyncModel(Feed& f) {
  std::shared_ptr<const ActiveModel> active = scheduler_.active(f.index);
  if (active == f.model) return;
  // A cadence or drift retrain warm-starts from the model it replaces; the
  // change test may then carry on (DriftMonitor::Handover).
  const bool successor = active && f.model && active->record.parent == f.model->record.version;
  f.model = active;
  if (!active) {
    (void)f.monitor.SetModel(nullptr, 0, std::numeric_limits<double>::quiet_NaN(), DataTime{}, WallTime{});
    return;
  }
  const ModelRecord& r = active->record;
  auto created = ParseWallRfc3339(r.created_at);
  const WallTime promoted_wall = created.ok() ? *created : WallNow();
  Status s = f.monitor.SetModel(active->model, r.version, ValidationRms(r), r.trained_to, promoted_wall,
                                successor ? DriftMonitor::Handover::kSuccessor : DriftMonitor::Handover::kFresh);
  if (!s.ok()) spdlog::error("feed {}: the drift monitor cannot use version {}: {}", f.config->id, r.version,
                             s.message());
}

void FeedMonitors::OnCommitted(const CommittedBatch& batch) {
  const WallTime arrived = WallNow();
  for (const FeedSample& fs : batch.samples) {
    if (fs.feed >= feeds_.size()) continue;
    scheduler_.OnSample(fs.feed, fs.sample.t);  // in lockstep: a due retrain runs first
    Feed& f = *feeds_[fs.feed];
    DriftMonitor::Observation seen;
    bool trigger = false;
    {
      std::lock_guard lock(f.mu);
      if (scheduler_.active(fs.feed) != f.model) SyncModel(f);
      seen = f.monitor.Observe(fs.sample, arrived);
      if (fs.sample.complete() && (!f.newest_complete || fs.sample.t >= f.newest_complete->t)) {
        f.newest_complete = fs.sample;
      }
      // A lasting change keeps alarming; one drift retrain per min_interval
      // of data time is enough (the flag stays up meanwhile).
      if (seen.alarm_raised &&
          (!f.last_drift_trigger || fs.sample.t - *f.last_drift_trigger >= f.config->retrain.min_interval)) {
        f.last_drift_trigger = fs.sample.t;
        trigger = true;
      }
    }
    if (seen.alarm_raised && !trigger) {
      spdlog::info("feed {}: drift alarm again at {}; a drift retrain ran less than min_interval ago",
                   f.config->id, FormatRfc3339(fs.sample.t));
    }
    if (trigger) {
      const std::string reason = fmt::format("change test alarm at {} (one-step error {:.3g})",
                                             FormatRfc3339(fs.sample.t), seen.error);
      spdlog::warn("feed {}: drift: {}; retraining", f.config->id, reason);
      auto job = scheduler_.Trigger(fs.feed, TriggerKind::kDrift, reason, fs.sample.t + Micros(1));
      if (!job.ok()) spdlog::warn("feed {}: drift retrain not queued: {}", f.config->id, job.status().message());
      scheduler_.WaitIfLockstep();
    }
  }
}

DriftSnapshot FeedMonitors::Snapshot(std::uint32_t feed, WallTime wall_now) const {
  if (feed >= feeds_.size()) return {};
  std::lock_guard lock(feeds_[feed]->mu);
  return feeds_[feed]->monitor.Snapshot(wall_now);
}

double FeedMonitors::e0(std::uint32_t feed) const {
  if (feed >= feeds_.size()) return std::numeric_limits<double>::quiet_NaN();
  std::lock_guard lock(feeds_[feed]->mu);
  return feeds_[feed]->monitor.e0();
}

std::optional<Sample> FeedMonitors::NewestComplete(std::uint32_t feed) const {
  if (feed >= feeds_.size()) return std::nullopt;
  std::lock_guard lock(feeds_[feed]->mu);
  return feeds_[feed]->newest_complete;
}

void FeedMonitors::SetPaused(std::uint32_t feed, bool paused) {
  if (feed >= feeds_.size()) return;
  std::lock_guard lock(feeds_[feed]->mu);
  feeds_[feed]->monitor.SetPaused(paused);
}

}  // namespace lyapcast
