#include "runtime/feed_runtime.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <limits>

#include "core/wall_clock.h"
#include "learn/alignment.h"
#include "schedule/retrain_details.h"

namespace lyapcast {
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

struct FeedRuntime::State {
  explicit State(const FeedConfig& feed) : monitor(ToDriftMonitorOptions(feed)) {}
  DriftMonitor monitor;
  std::shared_ptr<const ActiveModel> model;  // the one the monitor scores with
  std::optional<Sample> newest_complete;
  std::optional<Sample> newest;                     // the newest sample, complete or not
  std::optional<DataTime> first;                    // the oldest sample time seen
  std::vector<std::pair<DataTime, double>> last;    // per channel, its newest observation (t 0: none)
  std::optional<DataTime> last_drift_trigger;
  std::uint64_t drift_triggers = 0;
  std::vector<SuspectChannel> suspects;
  // The current spell of sensor alarms (for logging at 1, 10, 100, ...).
  int sensor_channel = -1;
  DataTime sensor_last{};
  DataTime sensor_since{};  // first alarm of the spell
  std::int64_t sensor_spell = 0;
};

FeedRuntime::FeedRuntime(const FeedConfig& feed, std::uint32_t index, Scheduler& scheduler, SchedulerLog log)
    : feed_(feed), index_(index), scheduler_(scheduler), log_(std::move(log)),
      state_(std::make_unique<State>(feed)) {
  std::lock_guard lock(mu_);
  SyncModelLocked();
}

FeedRuntime::~FeedRuntime() = default;

void FeedRuntime::Log(SchedulerLogLevel level, const std::string& text) const {
  if (log_) log_(level, text);
}

void FeedRuntime::SyncModelLocked() {
  State& s = *state_;
  std::shared_ptr<const ActiveModel> active = scheduler_.active(index_);
  if (active == s.model) return;
  // A cadence or drift retrain warm-starts from the model it replaces; the
  // change test may then carry on (DriftMonitor::Handover).
  const bool successor = active && s.model && active->record.parent == s.model->record.version;
  s.model = active;
  if (!active) {
    (void)s.monitor.SetModel(nullptr, 0, std::numeric_limits<double>::quiet_NaN(), DataTime{}, WallTime{});
    return;
  }
  const ModelRecord& r = active->record;
  auto created = ParseWallRfc3339(r.created_at);
  const WallTime promoted_wall = created.ok() ? *created : WallNow();
  Status st = s.monitor.SetModel(active->model, r.version, ValidationRms(r), r.trained_to, promoted_wall,
                                 successor ? DriftMonitor::Handover::kSuccessor : DriftMonitor::Handover::kFresh);
  if (!st.ok()) {
    Log(SchedulerLogLevel::kError,
        fmt::format("feed {}: the drift monitor cannot use version {}: {}", feed_.id, r.version, st.message()));
  }
}

void FeedRuntime::OnSample(const Sample& sample, WallTime arrived, std::uint64_t added) {
  scheduler_.OnSample(index_, sample.t);  // 1. in lockstep: a due retrain runs first
  DriftMonitor::Observation seen;
  bool trigger = false;
  std::int64_t sensor_spell = 0;
  DataTime sensor_since{};
  struct {
    double full_ratio = 0;
    std::string blind;
  } evidence;
  {
    std::lock_guard lock(mu_);
    State& s = *state_;
    SyncModelLocked();                          // 2.
    seen = s.monitor.Observe(sample, arrived);  // 3.
    if (seen.sensor_alarm >= 0) {
      const bool same = seen.sensor_alarm == s.sensor_channel &&
                        sample.t - s.sensor_last <= DriftMonitor::kSensorHoldSteps * feed_.step;
      s.sensor_spell = same ? s.sensor_spell + 1 : 1;
      if (!same) s.sensor_since = sample.t;
      s.sensor_channel = seen.sensor_alarm;
      s.sensor_last = sample.t;
      sensor_spell = s.sensor_spell;
      sensor_since = s.sensor_since;
    }
    if (seen.sensor_alarm >= 0 || seen.alarm_raised) {
      const DriftSnapshot d = s.monitor.Snapshot(arrived);
      if (d.last_alarm) evidence.full_ratio = d.last_alarm->full_ratio;
      for (std::size_t c = 0; c < d.channels.size() && c < feed_.channels.size(); ++c) {
        const std::optional<double>& r = d.channels[c].blind_ratio;
        evidence.blind += fmt::format("{}{} {}", c == 0 ? "" : ", ", feed_.channels[c],
                                      r ? fmt::format("{:.2f}", *r) : std::string("-"));
      }
    }
    if (sample.complete() && (!s.newest_complete || sample.t >= s.newest_complete->t)) {
      s.newest_complete = sample;  // 4.
    }
    if (!s.first || sample.t < *s.first) s.first = sample.t;
    if (!s.newest || sample.t > s.newest->t) {
      s.newest = sample;
    } else if (sample.t == s.newest->t) {  // a merged row: the writer passes the whole row
      s.newest = sample;
    }
    s.suspects.resize(feed_.channels.size());
    for (std::size_t c = 0; c < s.suspects.size() && c < sample.values.size(); ++c) {
      if (!sample.suspect(static_cast<int>(c)) || !((added >> c) & 1U)) continue;
      SuspectChannel& sc = s.suspects[c];
      ++sc.count;
      if (!sc.last || sample.t >= *sc.last) {
        sc.last = sample.t;
        sc.last_value = sample.values[c];
      }
    }
    s.last.resize(feed_.channels.size());
    for (std::size_t c = 0; c < s.last.size() && c < sample.values.size(); ++c) {
      if (!sample.missing(static_cast<int>(c)) && sample.t >= s.last[c].first) s.last[c] = {sample.t, sample.values[c]};
    }
    // 5. A lasting change keeps alarming; one drift retrain per min_interval
    // of data time is enough (the flag stays up meanwhile).
    if (seen.alarm_raised &&
        (!s.last_drift_trigger || sample.t - *s.last_drift_trigger >= feed_.retrain.min_interval)) {
      s.last_drift_trigger = sample.t;
      ++s.drift_triggers;
      trigger = true;
    }
  }
  if (seen.sensor_alarm >= 0) {
    // Not trained on: the alarm's evidence reaches back a change test's
    // delay (kWindow scored samples); the exclusion runs on while the
    // alarms recur, as long as the fault is reported.
    scheduler_.ExcludeReadings(index_, seen.sensor_alarm, sensor_since - DriftMonitor::kWindow * feed_.step,
                               sample.t + DriftMonitor::kSensorHoldSteps * feed_.step);
  }
  if (seen.sensor_alarm >= 0 && (sensor_spell == 1 || sensor_spell == 10 || sensor_spell % 100 == 0)) {
    // Retraining now would learn the fault; the sensor is reported instead
    // (status drift.sensor_fault, health). Logged at the first alarm of a
    // spell, the 10th and every 100th: a lasting fault alarms often.
    Log(SchedulerLogLevel::kWarning,
        fmt::format("feed {}: the one-step error grew {:.2f}x at {} and ignoring channel '{}' explains it (blind "
                    "error ratios {}): suspect sensor ({} alarm{} in a row); no drift retrain",
                    feed_.id, evidence.full_ratio, FormatRfc3339(sample.t),
                    feed_.channels[static_cast<std::size_t>(seen.sensor_alarm)], evidence.blind, sensor_spell,
                    sensor_spell == 1 ? "" : "s"));
  }
  if (seen.alarm_raised && !trigger) {
    Log(SchedulerLogLevel::kInfo, fmt::format("feed {}: drift alarm again at {}; a drift retrain ran less than "
                                              "min_interval ago",
                                              feed_.id, FormatRfc3339(sample.t)));
  }
  if (!trigger) return;
  const std::string reason =
      fmt::format("change test alarm at {} (one-step error {:.3g}{})", FormatRfc3339(sample.t), seen.error,
                  evidence.full_ratio > 0
                      ? fmt::format(", {:.2f}x its reference; blind error ratios {}", evidence.full_ratio, evidence.blind)
                      : std::string());
  Log(SchedulerLogLevel::kWarning, fmt::format("feed {}: drift: {}; retraining", feed_.id, reason));
  auto job = scheduler_.Trigger(index_, TriggerKind::kDrift, reason, sample.t + Micros(1));
  if (!job.ok()) {
    Log(SchedulerLogLevel::kWarning,
        fmt::format("feed {}: drift retrain not queued: {}", feed_.id, job.status().message()));
  }
  scheduler_.WaitIfLockstep();  // 6.
}

DriftSnapshot FeedRuntime::Snapshot(WallTime wall_now) const {
  std::lock_guard lock(mu_);
  return state_->monitor.Snapshot(wall_now);
}

double FeedRuntime::e0() const {
  std::lock_guard lock(mu_);
  return state_->monitor.e0();
}

std::optional<Sample> FeedRuntime::NewestComplete() const {
  std::lock_guard lock(mu_);
  return state_->newest_complete;
}

std::optional<FeedRuntime::StartEstimate> FeedRuntime::EstimateStart() const {
  std::optional<Sample> complete;
  std::vector<std::pair<DataTime, double>> last;
  StartEstimate out;
  {
    std::lock_guard lock(mu_);
    const State& s = *state_;
    if (!s.newest) return std::nullopt;
    out.start = *s.newest;
    complete = s.newest_complete;
    last = s.last;
  }
  using How = EstimatedChannel::How;
  std::uint64_t unresolved = 0;  // missing channels that cannot be carried
  for (int c = 0; c < static_cast<int>(out.start.values.size()); ++c) {
    if (!out.start.missing(c)) continue;
    const auto k = static_cast<std::size_t>(c);
    const Micros hold = k < feed_.hold.size() ? feed_.hold[k] : Micros{};
    if (k >= last.size() || last[k].first == DataTime{} || hold <= Micros{} || out.start.t - last[k].first > hold) {
      unresolved |= std::uint64_t{1} << c;
      continue;
    }
    out.start.values[k] = last[k].second;
    out.start.missing_mask &= ~(std::uint64_t{1} << c);
    out.estimated.push_back({c, How::kCarried, Seconds(out.start.t - last[k].first)});
  }
  if (unresolved == 0) return out;

  // The rest from the model: t1 = t0 + k * step within the alignment's
  // nearest-sample tolerance, 1 <= k <= max_gap.
  if (!complete || complete->t >= out.start.t) return std::nullopt;
  std::shared_ptr<const ActiveModel> model = scheduler_.active(index_);
  const int channels = static_cast<int>(out.start.values.size());
  if (!model || model->model->shape().channels != channels ||
      complete->values.size() != out.start.values.size()) {
    return std::nullopt;
  }
  const Micros step = feed_.step;
  const Micros span = out.start.t - complete->t;
  const std::int64_t steps = (span + step / 2) / step;
  const Micros off = span - steps * step;
  if (steps < 1 || steps > feed_.model.max_gap ||
      std::abs(off.count()) > AlignmentOptions(step).tolerance_or_default().count()) {
    return std::nullopt;
  }
  const Eigen::VectorXd x0 = Eigen::Map<const Eigen::VectorXd>(complete->values.data(), channels);
  const FreeRun run = Rollout(*model->model, x0, steps);
  const auto predicted = run.states.col(static_cast<Eigen::Index>(steps - 1));
  for (int c = 0; c < channels; ++c) {
    if (!((unresolved >> c) & 1U)) continue;
    if (!std::isfinite(predicted(c))) return std::nullopt;
    out.start.values[static_cast<std::size_t>(c)] = predicted(c);
    out.start.missing_mask &= ~(std::uint64_t{1} << c);
    out.estimated.push_back({c, How::kPredicted, Seconds(span)});
  }
  // Feed order, as the response lists them.
  std::sort(out.estimated.begin(), out.estimated.end(),
            [](const EstimatedChannel& a, const EstimatedChannel& b) { return a.channel < b.channel; });
  out.model = std::move(model);
  return out;
}

FeedRuntime::ChannelActivity FeedRuntime::Activity() const {
  std::lock_guard lock(mu_);
  const State& s = *state_;
  ChannelActivity out;
  out.last.resize(feed_.channels.size());
  for (std::size_t c = 0; c < out.last.size() && c < s.last.size(); ++c) {
    if (s.last[c].first != DataTime{}) out.last[c] = s.last[c].first;
  }
  out.first = s.first;
  if (s.newest) out.newest = s.newest->t;
  return out;
}

std::vector<FeedRuntime::SuspectChannel> FeedRuntime::Suspects() const {
  std::lock_guard lock(mu_);
  std::vector<SuspectChannel> out = state_->suspects;
  out.resize(feed_.channels.size());
  return out;
}

void FeedRuntime::SetPaused(bool paused) {
  std::lock_guard lock(mu_);
  state_->monitor.SetPaused(paused);
}

std::uint64_t FeedRuntime::drift_triggers() const {
  std::lock_guard lock(mu_);
  return state_->drift_triggers;
}

Result<ServedForecast> FeedRuntime::ForecastFrom(const Sample& start, std::int64_t steps,
                                                 std::optional<double> lambda_max,
                                                 std::shared_ptr<const ActiveModel> model) const {
  ServedForecast out;
  out.model = model ? std::move(model) : scheduler_.active(index_);
  if (!out.model) return Status::Precondition(fmt::format("feed {} has no model yet", feed_.id));
  double e0 = this->e0();
  if (!std::isfinite(e0) && out.model->record.validation_error) e0 = *out.model->record.validation_error;
  ForecastRequest request;
  request.from = start.t;
  request.start = start.values;
  request.step = feed_.step;
  request.steps = steps;
  request.lambda_max = lambda_max;
  request.e0 = e0;
  request.tol = feed_.monitor.horizon_tol;
  auto made = MakeForecast(*out.model->model, request);
  if (!made.ok()) return made.status();
  out.forecast = std::move(made).value();
  return out;
}

FeedRuntimes::FeedRuntimes(const Config& config, Scheduler& scheduler, SchedulerLog log) {
  for (std::uint32_t i = 0; i < config.feeds.size(); ++i) {
    feeds_.push_back(std::make_unique<FeedRuntime>(config.feeds[i], i, scheduler, log));
  }
}

void FeedRuntimes::OnCommitted(const CommittedBatch& batch) {
  const WallTime arrived = WallNow();
  for (std::size_t i = 0; i < batch.samples.size(); ++i) {
    const FeedSample& fs = batch.samples[i];
    // A batch without `added` (built by hand) counts every suspect reading.
    const std::uint64_t added = i < batch.added.size() ? batch.added[i] : ~std::uint64_t{0};
    if (fs.feed < feeds_.size()) feeds_[fs.feed]->OnSample(fs.sample, arrived, added);
  }
}

}  // namespace lyapcast
