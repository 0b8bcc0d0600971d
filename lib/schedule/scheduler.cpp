#include "schedule/scheduler.h"

#include <fmt/format.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <variant>

#include "learn/model_file.h"
#include "schedule/estimates.h"
#include "schedule/retrain_data.h"

namespace lyapcast {
namespace {

constexpr std::size_t kJobsKept = 256;
constexpr double kProgressLogSeconds = 10;  // long jobs report at info level this often

// FNV-1a of the feed id, mixed with the job's data time: the same job gets
// the same seed in every replay, different jobs different seeds.
std::uint64_t JobSeed(std::uint64_t base, const std::string& feed, DataTime until) {
  std::uint64_t h = 1469598103934665603ULL ^ base;
  for (unsigned char c : feed) h = (h ^ c) * 1099511628211ULL;
  return h ^ (static_cast<std::uint64_t>(EpochMicros(until)) * 0x9e3779b97f4a7c15ULL);
}

std::string Ver(const std::optional<std::int64_t>& v) { return v ? fmt::format("version {}", *v) : "no version"; }

}  // namespace

const char* TriggerKindName(TriggerKind k) {
  switch (k) {
    case TriggerKind::kCadence: return "cadence";
    case TriggerKind::kDrift: return "drift";
    case TriggerKind::kOperator: return "operator";
    case TriggerKind::kUpload: return "upload";
  }
  return "?";
}

const char* JobStateName(JobState s) {
  switch (s) {
    case JobState::kQueued: return "queued";
    case JobState::kRunning: return "running";
    case JobState::kDone: return "done";
  }
  return "?";
}

struct Scheduler::QueuedUpload {
  std::uint64_t id = 0;
  std::shared_ptr<const ValidatedUpload> upload;
  bool activate = false;
  std::string requested;
};

struct Scheduler::Feed {
  const FeedConfig* config = nullptr;
  std::atomic<std::shared_ptr<const ActiveModel>> active;
  // The rest is guarded by mu_.
  FeedSchedule s;
  std::optional<std::uint64_t> pending_job, running_job;
  std::deque<QueuedUpload> uploads;  // waiting, oldest first; they run before pending_job
  DataTime running_until{};  // data end of the running job
  bool activating = false;     // an operator's Activate holds jobs off
  bool dynamics_tried = false;
  bool warned_model_age = false;  // the health/cadence mismatch below is logged once
  std::vector<ChannelExclusion> exclusions;  // ExcludeReadings, oldest first
};

struct Scheduler::Trainer {
  std::unique_ptr<WindowStore> reader;
  std::unique_ptr<ModelRegistry> registry;
};

Scheduler::Scheduler(const Config& config, SchedulerOptions options) : config_(config), options_(std::move(options)) {
  for (const FeedConfig& fc : config_.feeds) {
    auto f = std::make_unique<Feed>();
    f->config = &fc;
    feeds_.push_back(std::move(f));
  }
}

Scheduler::~Scheduler() { Stop(); }

void Scheduler::Log(SchedulerLogLevel level, const std::string& text) const {
  if (options_.log) options_.log(level, text);
}

Status Scheduler::Start(const std::vector<FeedExtent>& extents) {
  std::vector<std::unique_ptr<Trainer>> trainers;
  for (int k = 0; k < std::max(config_.training.threads, 1); ++k) {
    Trainer& t = *trainers.emplace_back(std::make_unique<Trainer>());
    auto reader = WindowStore::Open(StoreOptions{options_.store_path, false, options_.busy_timeout_ms});
    if (!reader.ok()) return reader.status();
    if (Status s = (*reader)->RegisterFeeds(options_.layouts); !s.ok()) return s;
    auto registry_store = WindowStore::Open(StoreOptions{options_.store_path, false, options_.busy_timeout_ms});
    if (!registry_store.ok()) return registry_store.status();
    if (Status s = (*registry_store)->RegisterFeeds(options_.layouts); !s.ok()) return s;
    t.reader = std::move(reader).value();
    t.registry = std::make_unique<ModelRegistry>(std::move(registry_store).value());
  }

  {
    auto admin_store = WindowStore::Open(StoreOptions{options_.store_path, false, options_.busy_timeout_ms});
    if (!admin_store.ok()) return admin_store.status();
    if (Status s = (*admin_store)->RegisterFeeds(options_.layouts); !s.ok()) return s;
    admin_registry_ = std::make_unique<ModelRegistry>(std::move(admin_store).value());
  }

  std::lock_guard lock(mu_);
  for (std::uint32_t i = 0; i < feeds_.size(); ++i) {
    Feed& f = *feeds_[i];
    const FeedExtent e = i < extents.size() ? extents[i] : FeedExtent{};
    f.s.newest = e.newest;
    f.s.oldest = e.oldest;
    auto active = trainers[0]->registry->Active(i);
    if (!active.ok()) return active.status();
    if (*active) {
      auto published = MakeActiveModel(std::move(**active));
      if (!published.ok()) return published.status();
      f.s.estimates.model = (*published)->record.lambda_max;
      f.active.store(*published);
    }
    auto recent = trainers[0]->registry->List(i, 64);
    if (!recent.ok()) return recent.status();
    const auto model = f.active.load();
    if (!recent->empty()) {
      // Resume from the newest job that recorded a version: its data end
      // is where the next interval starts, paced by the estimates it
      // recorded (the data's is otherwise unknown until the next job).
      // Uploads do not move the cadence; only if the newest 64 versions are
      // all uploads does the newest of them stand in.
      const auto trained = std::find_if(recent->begin(), recent->end(),
                                        [](const ModelRecord& r) { return r.origin == ModelOrigin::kTrained; });
      const ModelRecord& newest = trained != recent->end() ? *trained : recent->front();
      f.s.last_retrain = newest.trained_to;
      f.s.estimates.data = newest.data_exponent;
      f.s.estimates.dynamics = newest.dynamics_exponent;
      ScheduleNextLocked(f, i, *f.s.last_retrain, false);
      Log(SchedulerLogLevel::kInfo,
          fmt::format("feed {}: active {}, last retrain used data to {}; next retrain due at {} ({})", f.config->id,
                      model ? fmt::format("version {}", model->record.version) : "none",
                      FormatRfc3339(*f.s.last_retrain), FormatRfc3339(f.s.next_due), f.s.next_reason));
    } else {
      ScheduleNextLocked(f, i, DataTime{}, false);
      Log(SchedulerLogLevel::kInfo, fmt::format("feed {}: no model yet; {}", f.config->id, f.s.next_reason));
    }
  }
  started_ = true;
  for (auto& t : trainers) {
    trainers_.emplace_back([this, trainer = std::shared_ptr<Trainer>(std::move(t))] { RunTrainer(*trainer); });
  }
  QueueDueLocked();
  work_cv_.notify_all();
  return Status::Ok();
}

void Scheduler::RunTrainer(Trainer& trainer) {
  std::unique_lock lock(mu_);
  while (true) {
    work_cv_.wait(lock, [this] { return stopping_ || !ready_.empty(); });
    if (stopping_) return;
    const std::uint32_t feed = ready_.front();
    ready_.pop_front();
    Feed& f = *feeds_[feed];
    if (f.running_job || f.activating) continue;  // re-queued when the job ends or the activation is released
    // An upload waiting runs first: a retrain after it starts from its outcome.
    std::optional<QueuedUpload> upload;
    if (!f.uploads.empty()) {
      upload = std::move(f.uploads.front());
      f.uploads.pop_front();
    } else if (!f.pending_job) {
      continue;  // stale
    }
    const std::uint64_t id = upload ? upload->id : *f.pending_job;
    if (!upload) {
      f.pending_job.reset();
      f.s.pending = false;
    }
    f.running_job = id;
    f.s.running = true;
    ++running_;
    lock.unlock();
    if (upload) {
      RunUploadJob(trainer, feed, *upload);
    } else {
      RunJob(trainer, feed, id);
    }
    lock.lock();
    --running_;
    f.running_job.reset();
    f.s.running = false;
    if (f.pending_job || !f.uploads.empty()) {
      ready_.push_back(feed);  // a trigger or an upload came in while it ran
      f.s.pending = f.pending_job.has_value();
    }
    QueueDueLocked();
    work_cv_.notify_all();
    idle_cv_.notify_all();
  }
}

// What a job knows when it starts (taken under mu_ in BeginJob).
struct Scheduler::JobStart {
  std::uint64_t id = 0;
  std::uint32_t feed = 0;
  std::shared_ptr<const ActiveModel> active;
  DataTime until{};
  std::string trigger;             // "<kind>: <reason>", for logs
  const char* trigger_kind = "cadence";
  bool estimate_dynamics = false;  // the known dynamics' exponent is estimated once
  LyapunovEstimates known;         // before this job
  std::vector<ChannelExclusion> exclusions;
};

struct Scheduler::JobEstimates {
  std::optional<ExponentEstimate> data, dynamics;
};

namespace {

// Fit progress in the log: debug at every tenth of the iterations, info
// every kProgressLogSeconds so a long job shows it is alive.
class ProgressLogger {
 public:
  ProgressLogger(std::function<void(SchedulerLogLevel, const std::string&)> log, std::string prefix)
      : log_(std::move(log)), prefix_(std::move(prefix)) {}
  void operator()(const FitProgress& p) {
    const int tenth = p.iterations > 0 ? 10 * p.iteration / p.iterations : 0;
    const bool info = Elapsed() - last_info_ >= kProgressLogSeconds;
    if (!info && tenth == last_tenth_) return;
    last_tenth_ = tenth;
    if (info) last_info_ = Elapsed();
    log_(info ? SchedulerLogLevel::kInfo : SchedulerLogLevel::kDebug,
         fmt::format("{} iteration {}/{}, loss {:.4g}{}", prefix_, p.iteration, p.iterations, p.loss,
                     p.validation ? fmt::format(", validation {:.4g}", *p.validation) : ""));
  }
  double Elapsed() const {
    return std::chrono::duration<double>(std::chrono::steady_clock::now() - started_).count();
  }

 private:
  std::function<void(SchedulerLogLevel, const std::string&)> log_;
  std::string prefix_;
  std::chrono::steady_clock::time_point started_ = std::chrono::steady_clock::now();
  double last_info_ = 0;
  int last_tenth_ = 0;
};

// The samples of `window` (oldest first) at or after `from`.
std::span<const Sample> Since(const std::vector<Sample>& window, DataTime from) {
  const auto first = std::lower_bound(window.begin(), window.end(), from,
                                      [](const Sample& s, DataTime t) { return s.t < t; });
  return {first, window.end()};
}

}  // namespace

void Scheduler::RunJob(Trainer& trainer, std::uint32_t feed, std::uint64_t job_id) {
  const JobStart start = BeginJob(feed, job_id);
  const FeedConfig& fc = *feeds_[feed]->config;
  Log(SchedulerLogLevel::kInfo,
      fmt::format("feed {}: job {} started ({}), data before {}, {}", fc.id, job_id, start.trigger,
                  FormatRfc3339(start.until),
                  start.active ? fmt::format("warm start from version {}", start.active->record.version)
                               : "cold start"));
  ProgressLogger progress([this](SchedulerLogLevel l, const std::string& t) { Log(l, t); },
                          fmt::format("feed {}: job {}", fc.id, job_id));

  // One read serves the retraining window and the data exponent's recent span.
  const Micros retention = config_.storage.retention;
  const Micros recent_span = 20000 * fc.step;
  auto window = ReadWindow(*trainer.reader, feed, start.until - std::max(retention, recent_span), start.until);
  JobEstimates estimates;
  const auto retrain = [&]() -> Result<RetrainOutcome> {
    if (!window.ok()) return window.status();
    estimates = EstimateExponents(fc, Since(*window, start.until - recent_span), start.estimate_dynamics);
    RetrainInput in;
    in.feed = &fc;
    in.feed_index = feed;
    in.until = start.until;
    in.window = Since(*window, start.until - retention);
    in.active = start.active;
    in.seed = JobSeed(options_.seed, fc.id, start.until);
    in.lockstep = config_.training.lockstep;
    in.cancel = &cancel_;
    in.trigger = start.trigger_kind;
    in.exclusions = start.exclusions;
    in.data_exponent = estimates.data ? std::optional<double>(estimates.data->lambda_max) : start.known.data;
    in.dynamics_exponent =
        estimates.dynamics ? std::optional<double>(estimates.dynamics->lambda_max) : start.known.dynamics;
    return RunRetrain(*trainer.registry, in, [&progress](const FitProgress& p) { progress(p); });
  };
  const Result<RetrainOutcome> outcome = retrain();
  const double seconds = progress.Elapsed();
  PublishAndPrune(trainer, start, outcome);
  FinishJob(start, estimates, outcome, seconds);
}

Scheduler::JobStart Scheduler::BeginJob(std::uint32_t feed, std::uint64_t job_id) {
  Feed& f = *feeds_[feed];
  JobStart start;
  start.id = job_id;
  start.feed = feed;
  start.active = f.active.load();
  std::lock_guard lock(mu_);
  JobInfo* j = FindJobLocked(job_id);
  if (j != nullptr) {
    if (j->until == DataTime{}) j->until = f.s.newest + Micros(1);  // everything committed so far
    j->state = JobState::kRunning;
    if (start.active) j->parent = start.active->record.version;
    start.until = j->until;
    start.trigger = fmt::format("{}: {}", TriggerKindName(j->trigger), j->trigger_reason);
    start.trigger_kind = TriggerKindName(j->trigger);
  } else {
    start.until = f.s.newest + Micros(1);
    start.trigger = "unknown";
  }
  f.running_until = start.until;
  start.estimate_dynamics = f.config->dynamics.has_value() && !f.dynamics_tried;
  f.dynamics_tried = true;
  start.known = f.s.estimates;
  start.exclusions = f.exclusions;
  return start;
}

// Lyapunov estimates from the data (and once from the known dynamics), for
// the cadence before a model exists and for the status report.
Scheduler::JobEstimates Scheduler::EstimateExponents(const FeedConfig& fc, std::span<const Sample> recent,
                                                     bool estimate_dynamics) const {
  JobEstimates out;
  auto d = DataExponent(fc, recent);
  if (d.ok()) {
    out.data = *d;
  } else {
    Log(SchedulerLogLevel::kDebug, fmt::format("feed {}: no data exponent yet: {}", fc.id, d.status().message()));
  }
  if (!estimate_dynamics) return out;
  for (auto it = recent.rbegin(); it != recent.rend(); ++it) {
    if (!it->complete()) continue;
    const Eigen::VectorXd x0 =
        Eigen::Map<const Eigen::VectorXd>(it->values.data(), static_cast<Eigen::Index>(it->values.size()));
    auto e = DynamicsExponent(fc, x0);
    if (e.ok()) {
      out.dynamics = *e;
    } else {
      Log(SchedulerLogLevel::kWarning,
          fmt::format("feed {}: known dynamics give no exponent: {}", fc.id, e.status().message()));
    }
    break;
  }
  return out;
}

// A promoted version is already durable in the registry; serve it, then
// prune old versions (not after a cancelled job: shutting down).
void Scheduler::PublishAndPrune(Trainer& trainer, const JobStart& start, const Result<RetrainOutcome>& outcome) {
  Feed& f = *feeds_[start.feed];
  const FeedConfig& fc = *f.config;
  if (!outcome.ok() || outcome->verdict == RetrainVerdict::kCancelled) return;
  if (outcome->promoted) f.active.store(outcome->promoted);
  const int keep = config_.storage.keep_models;
  auto pruned = trainer.registry->Prune(start.feed, keep);
  if (!pruned.ok()) {
    Log(SchedulerLogLevel::kWarning,
        fmt::format("feed {}: pruning old versions failed: {}", fc.id, pruned.status().message()));
  } else if (*pruned > 0) {
    Log(SchedulerLogLevel::kInfo,
        fmt::format("feed {}: pruned {} retired/rejected versions beyond keep_models {}", fc.id, *pruned, keep));
  }
}

// Bookkeeping after a job: the job record, counters, estimates, the next
// due time, and one log line with the outcome.
void Scheduler::FinishJob(const JobStart& start, const JobEstimates& estimates,
                          const Result<RetrainOutcome>& outcome, double seconds) {
  Feed& f = *feeds_[start.feed];
  const FeedConfig& fc = *f.config;
  const std::uint64_t job_id = start.id;
  const std::string serving = start.active ? Ver(start.active->record.version) : "no model";
  std::lock_guard lock(mu_);
  JobInfo done;
  if (JobInfo* j = FindJobLocked(job_id); j != nullptr) {
    j->state = JobState::kDone;
    j->seconds = seconds;
    done = *j;
  }
  if (estimates.data) {
    f.s.estimates.data = estimates.data->lambda_max;
    f.s.data_diagnostics = estimates.data->diagnostics;
  }
  if (estimates.dynamics) {
    f.s.estimates.dynamics = estimates.dynamics->lambda_max;
    f.s.dynamics_diagnostics = estimates.dynamics->diagnostics;
  }
  bool retry_soon = false;
  if (!outcome.ok()) {
    ++f.s.failed;
    done.outcome = outcome.status().message();
    Log(SchedulerLogLevel::kError, fmt::format("feed {}: job {} failed after {:.1f}s: {}; still serving {}", fc.id,
                                               job_id, seconds, done.outcome, serving));
    retry_soon = true;
  } else {
    const RetrainOutcome& o = *outcome;
    done.verdict = o.verdict;
    done.version = o.version;
    done.outcome = o.reason;
    done.iterations = o.fit.iterations;
    if (std::isfinite(o.candidate_error)) done.validation_error = o.candidate_error;
    if (std::isfinite(o.active_error)) done.active_error = o.active_error;
    switch (o.verdict) {
      case RetrainVerdict::kPromoted:
      case RetrainVerdict::kActivated:  // uploads only
        ++f.s.promoted;
        if (o.promoted) f.s.estimates.model = o.promoted->record.lambda_max;
        Log(SchedulerLogLevel::kInfo,
            fmt::format("feed {}: job {} promoted version {} in {:.1f}s ({}): {}", fc.id, job_id,
                        o.version.value_or(0), seconds,
                        o.fit.iterations > 0 ? fmt::format("{} iterations", o.fit.iterations)
                                             : std::string("exact fit"),
                        o.reason));
        break;
      case RetrainVerdict::kRejected:
        ++f.s.rejected;
        Log(SchedulerLogLevel::kWarning,
            fmt::format("feed {}: job {} rejected candidate version {} in {:.1f}s: {}; still serving {}", fc.id,
                        job_id, o.version.value_or(0), seconds, o.reason, serving));
        break;
      case RetrainVerdict::kNotEnoughData:
        ++f.s.not_enough_data;
        retry_soon = true;
        done.blocked = o.blocked;
        Log(o.blocked ? SchedulerLogLevel::kWarning : SchedulerLogLevel::kInfo,
            fmt::format("feed {}: job {}: {}", fc.id, job_id, o.reason));
        break;
      case RetrainVerdict::kCancelled:
        Log(SchedulerLogLevel::kInfo, fmt::format("feed {}: job {} cancelled (shutting down)", fc.id, job_id));
        if (JobInfo* j = FindJobLocked(job_id); j != nullptr) *j = done;
        f.s.last_job = done;
        return;
    }
  }
  if (JobInfo* j = FindJobLocked(job_id); j != nullptr) *j = done;
  f.s.last_job = done;
  f.s.last_retrain = start.until;
  ++f.s.jobs_finished;
  f.s.job_seconds_total += seconds;
  ScheduleAfterJobLocked(f, start, retry_soon);
}

void Scheduler::ScheduleAfterJobLocked(Feed& f, const JobStart& start, bool retry_soon) {
  const FeedConfig& fc = *f.config;
  if (retry_soon && f.active.load()) {
    // A failure with a model: try again after min_interval, not a whole cadence.
    const Micros interval = std::max(fc.retrain.min_interval, fc.step);
    f.s.next_due = start.until + interval;
    f.s.next_reason = fmt::format("the last job did not finish a model: retry after {}", FormatDuration(interval));
  } else {
    ScheduleNextLocked(f, start.feed, start.until, retry_soon);
  }
  Log(SchedulerLogLevel::kInfo, fmt::format("feed {}: next retrain due at {} ({})", fc.id,
                                            FormatRfc3339(f.s.next_due), f.s.next_reason));
  if (f.s.newest >= f.s.next_due && !config_.training.lockstep) {
    Log(SchedulerLogLevel::kInfo, fmt::format("feed {}: that retrain was due while job {} ran (data reached {}); "
                                              "it starts now",
                                              fc.id, start.id, FormatRfc3339(f.s.newest)));
  }
}

// The first job waits until the window spans enough steps for min_pairs
// training pairs; a cold start that still found too few (gaps) retries
// after min_interval; afterwards the cadence of cadence.h applies.
void Scheduler::ScheduleNextLocked(Feed& f, std::uint32_t, DataTime since, bool retry_soon) {
  const FeedConfig& fc = *f.config;
  const RetrainConfig& rc = fc.retrain;
  const bool has_model = f.active.load() != nullptr;
  if (!has_model && !f.s.last_retrain) {
    // Training pairs need `rollout` further steps each; validation takes its share.
    const double span_steps = rc.min_pairs / std::max(1e-9, 1.0 - rc.validation) + fc.model.rollout + 1;
    const auto span = static_cast<std::int64_t>(std::ceil(span_steps)) * fc.step;
    f.s.next_due = f.s.oldest != DataTime{} ? f.s.oldest + span : DataTime{};
    f.s.next_reason = fmt::format("first retrain once the window spans {} ({} pairs of {} plus the validation share)",
                                  FormatDuration(span), rc.min_pairs, FormatDuration(fc.step));
    return;
  }
  if (!has_model && retry_soon) {
    const Micros interval = std::max(rc.min_interval, fc.step);
    f.s.next_due = since + interval;
    const bool blocked = f.s.last_job && f.s.last_job->blocked;
    f.s.next_reason = blocked ? fmt::format("no model yet ({}): retry after {}", f.s.last_job->outcome,
                                            FormatDuration(interval))
                              : fmt::format("no model yet and too few pairs: retry after {}", FormatDuration(interval));
    return;
  }
  const CadenceDecision d = NextRetrain(rc, f.s.estimates, has_model, since);
  f.s.next_due = since + std::max(d.interval, fc.step);
  f.s.next_reason = d.reason;
  // The model ages between retrains by the interval itself: an alert level
  // below it makes the health verdict read "alert" before every retrain,
  // which teaches operators to ignore it. (Unset levels are derived from
  // the cadence and cannot fall below it.)
  const std::optional<double> alert_level = fc.health.model_age_alert_lyapunov;
  if (alert_level && d.exponent && d.exponent->lambda_max > 0 && !f.warned_model_age) {
    const double interval_lt = Seconds(d.interval) * d.exponent->lambda_max;
    if (interval_lt >= *alert_level) {
      f.warned_model_age = true;
      Log(SchedulerLogLevel::kWarning,
          fmt::format("feed {}: retrains are {} apart, {:.2g} Lyapunov times, not below health."
                      "model_age_alert_lyapunov {:g}: the verdict will read alert before each retrain; raise "
                      "model_age_alert_lyapunov (and _alarm) above {:.2g}, leave both unset to derive them from "
                      "the cadence, or lower retrain.min_interval",
                      fc.id, FormatDuration(d.interval), interval_lt, *alert_level, interval_lt));
    }
  }
}

void Scheduler::QueueDueLocked() {
  if (stopping_ || !started_) return;
  for (std::uint32_t i = 0; i < feeds_.size(); ++i) {
    Feed& f = *feeds_[i];
    if (f.s.paused || f.s.next_due == DataTime{} || f.s.newest < f.s.next_due) continue;
    if (f.pending_job || f.activating) continue;  // already queued, or held by Activate
    if (f.running_job && f.running_until >= f.s.next_due) continue;  // the running job covers it
    if (f.running_job) {
      // Queue it now: the trainer picks it up when the running job ends.
      Log(SchedulerLogLevel::kInfo, fmt::format("feed {}: retrain due at {} waits for the running job {}",
                                                f.config->id, FormatRfc3339(f.s.next_due), *f.running_job));
    }
    QueueLocked(i, TriggerKind::kCadence, "due at " + FormatRfc3339(f.s.next_due));
  }
}

std::uint64_t Scheduler::QueueLocked(std::uint32_t feed, TriggerKind kind, std::string reason,
                                     std::optional<DataTime> until) {
  Feed& f = *feeds_[feed];
  if (f.pending_job) {
    ++f.s.coalesced;
    Log(SchedulerLogLevel::kInfo, fmt::format("feed {}: {} trigger ({}) joins the pending job {}", f.config->id,
                                              TriggerKindName(kind), reason, *f.pending_job));
    return *f.pending_job;
  }
  JobInfo job;
  job.id = next_job_id_++;
  job.feed = feed;
  job.trigger = kind;
  job.trigger_reason = std::move(reason);
  // A cadence job in lockstep uses exactly the data before its due time.
  if (kind == TriggerKind::kCadence && config_.training.lockstep) job.until = f.s.next_due;
  if (until) job.until = *until;
  jobs_.push_back(job);
  while (jobs_.size() > kJobsKept) jobs_.pop_front();
  f.pending_job = job.id;
  f.s.pending = true;
  if (!f.running_job) ready_.push_back(feed);
  Log(SchedulerLogLevel::kDebug, fmt::format("feed {}: job {} queued ({}: {})", f.config->id, job.id,
                                             TriggerKindName(kind), job.trigger_reason));
  return job.id;
}

bool Scheduler::BusyLocked() const {
  if (running_ > 0) return true;
  for (std::uint32_t feed : ready_) {
    if (!feeds_[feed]->activating) return true;
  }
  return false;
}

JobInfo* Scheduler::FindJobLocked(std::uint64_t id) {
  for (JobInfo& j : jobs_) {
    if (j.id == id) return &j;
  }
  return nullptr;
}

void Scheduler::OnSample(std::uint32_t feed, DataTime t) {
  if (feed >= feeds_.size()) return;
  std::unique_lock lock(mu_);
  if (stopping_) return;
  Feed& f = *feeds_[feed];
  f.s.newest = std::max(f.s.newest, t);
  if (f.s.oldest == DataTime{} || t < f.s.oldest) {
    f.s.oldest = t;
    if (!f.s.last_retrain && !f.active.load()) ScheduleNextLocked(f, feed, DataTime{}, false);
  }
  if (f.s.next_due == DataTime{} || t < f.s.next_due) return;  // the common case: nothing due
  QueueDueLocked();
  work_cv_.notify_all();
  if (config_.training.lockstep) {
    // Ingest pauses here (the writer does not go on) until every due
    // retrain is done; a job's end may make the next one due.
    idle_cv_.wait(lock, [this] { return stopping_ || !BusyLocked(); });
  }
}

void Scheduler::WaitIfLockstep() {
  if (!config_.training.lockstep) return;
  std::unique_lock lock(mu_);
  idle_cv_.wait(lock, [this] { return stopping_ || !BusyLocked(); });
}

Result<std::uint64_t> Scheduler::Trigger(std::uint32_t feed, TriggerKind kind, std::string reason,
                                         std::optional<DataTime> until) {
  if (feed >= feeds_.size()) return Status::NotFound(fmt::format("no feed with index {}", feed));
  std::lock_guard lock(mu_);
  if (stopping_ || !started_) return Status::Unavailable("the scheduler is not running");
  if (feeds_[feed]->s.paused) {
    return Status::Precondition(fmt::format("feed {} is paused; resume it first", feeds_[feed]->config->id));
  }
  const std::uint64_t id = QueueLocked(feed, kind, std::move(reason), until);
  work_cv_.notify_all();
  return id;
}

Result<std::uint64_t> Scheduler::Upload(std::uint32_t feed, std::shared_ptr<const ValidatedUpload> upload,
                                        bool activate, std::string requested) {
  if (feed >= feeds_.size()) return Status::NotFound(fmt::format("no feed with index {}", feed));
  if (!upload) return Status::Invalid("no upload given");
  std::lock_guard lock(mu_);
  if (stopping_ || !started_) return Status::Unavailable("the scheduler is not running");
  Feed& f = *feeds_[feed];
  if (f.uploads.size() >= kMaxQueuedUploads) {
    return Status::Precondition(fmt::format("feed {}: {} uploads wait to be judged already; try again when they are "
                                            "done",
                                            f.config->id, f.uploads.size()));
  }
  JobInfo job;
  job.id = next_job_id_++;
  job.feed = feed;
  job.trigger = TriggerKind::kUpload;
  job.trigger_reason = fmt::format("model file of {} bytes{}, {}", upload->file.size(),
                                   upload->file_feed.empty() ? "" : " for feed " + upload->file_feed,
                                   activate ? "to activate at once" : "to judge against the active model");
  jobs_.push_back(job);
  while (jobs_.size() > kJobsKept) jobs_.pop_front();
  f.uploads.push_back(QueuedUpload{job.id, std::move(upload), activate, std::move(requested)});
  if (!f.running_job && !f.activating) ready_.push_back(feed);
  Log(SchedulerLogLevel::kInfo, fmt::format("feed {}: job {} queued: upload of a {}", f.config->id, job.id,
                                            job.trigger_reason));
  work_cv_.notify_all();
  return job.id;
}

void Scheduler::RunUploadJob(Trainer& trainer, std::uint32_t feed, const QueuedUpload& upload) {
  Feed& f = *feeds_[feed];
  const FeedConfig& fc = *f.config;
  const auto started = std::chrono::steady_clock::now();
  UploadInput in;
  in.feed = &fc;
  in.feed_index = feed;
  in.active = f.active.load();
  in.upload = upload.upload;
  in.activate = upload.activate;
  in.requested = upload.requested;
  {
    std::lock_guard lock(mu_);
    in.until = f.s.newest + Micros(1);  // everything committed so far
    in.data_exponent = f.s.estimates.data;
    in.dynamics_exponent = f.s.estimates.dynamics;
    if (JobInfo* j = FindJobLocked(upload.id); j != nullptr) {
      j->state = JobState::kRunning;
      if (f.s.newest != DataTime{}) j->until = in.until;  // none without data
    }
  }
  in.seed = JobSeed(options_.seed, fc.id, in.until);
  Log(SchedulerLogLevel::kInfo,
      fmt::format("feed {}: job {} started (upload: {}), data before {}, {}", fc.id, upload.id,
                  upload.activate ? "activate at once" : "judge", FormatRfc3339(in.until),
                  in.active ? fmt::format("active version {}", in.active->record.version) : "no active model"));
  auto window = ReadWindow(*trainer.reader, feed, in.until - config_.storage.retention, in.until);
  const Result<UploadOutcome> outcome = [&]() -> Result<UploadOutcome> {
    if (!window.ok()) return window.status();
    in.window = *window;
    return RunUpload(*trainer.registry, in);
  }();
  if (outcome.ok() && outcome->promoted) {
    f.active.store(outcome->promoted);
    auto pruned = trainer.registry->Prune(feed, config_.storage.keep_models);
    if (!pruned.ok()) {
      Log(SchedulerLogLevel::kWarning,
          fmt::format("feed {}: pruning old versions failed: {}", fc.id, pruned.status().message()));
    }
  }
  const double seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count();
  FinishUploadJob(feed, upload, outcome, seconds);
}

void Scheduler::FinishUploadJob(std::uint32_t feed, const QueuedUpload& upload,
                                const Result<UploadOutcome>& outcome, double seconds) {
  Feed& f = *feeds_[feed];
  const FeedConfig& fc = *f.config;
  std::lock_guard lock(mu_);
  JobInfo done;
  if (JobInfo* j = FindJobLocked(upload.id); j != nullptr) done = *j;
  done.id = upload.id;
  done.feed = feed;
  done.state = JobState::kDone;
  done.seconds = seconds;
  if (!outcome.ok()) {
    done.outcome = outcome.status().message();
    Log(SchedulerLogLevel::kError, fmt::format("feed {}: job {} (upload) failed after {:.1f}s: {}; nothing stored",
                                               fc.id, upload.id, seconds, done.outcome));
  } else {
    const UploadOutcome& o = *outcome;
    done.verdict = o.verdict;
    done.version = o.version;
    done.outcome = o.reason;
    if (std::isfinite(o.candidate_error)) done.validation_error = o.candidate_error;
    if (std::isfinite(o.active_error)) done.active_error = o.active_error;
    if (o.promoted) f.s.estimates.model = o.promoted->record.lambda_max;
    Log(o.promoted ? SchedulerLogLevel::kInfo : SchedulerLogLevel::kWarning,
        fmt::format("feed {}: job {} {} uploaded version {} in {:.1f}s: {}", fc.id, upload.id,
                    RetrainVerdictName(o.verdict), o.version, seconds, o.reason));
  }
  if (JobInfo* j = FindJobLocked(upload.id); j != nullptr) *j = done;
  f.s.last_job = done;
}

std::shared_ptr<const ActiveModel> Scheduler::active(std::uint32_t feed) const {
  if (feed >= feeds_.size()) return nullptr;
  return feeds_[feed]->active.load();
}

FeedSchedule Scheduler::schedule(std::uint32_t feed) const {
  std::lock_guard lock(mu_);
  return feed < feeds_.size() ? feeds_[feed]->s : FeedSchedule{};
}

std::optional<JobInfo> Scheduler::job(std::uint64_t id) const {
  std::lock_guard lock(mu_);
  for (const JobInfo& j : jobs_) {
    if (j.id == id) return j;
  }
  return std::nullopt;
}

void Scheduler::ExcludeReadings(std::uint32_t feed, int channel, DataTime from, DataTime to) {
  if (feed >= feeds_.size() || channel < 0 ||
      channel >= static_cast<int>(feeds_[feed]->config->channels.size()) || to < from) {
    return;
  }
  std::lock_guard lock(mu_);
  std::vector<ChannelExclusion>& list = feeds_[feed]->exclusions;
  for (auto it = list.rbegin(); it != list.rend(); ++it) {
    if (it->channel != channel) continue;
    if (from <= it->to && to >= it->from) {
      it->from = std::min(it->from, from);
      it->to = std::max(it->to, to);
      return;
    }
    break;
  }
  list.push_back({channel, from, to});
  if (list.size() > kMaxExclusions) list.erase(list.begin());
}

Status Scheduler::SetPaused(std::uint32_t feed, bool paused) {
  if (feed >= feeds_.size()) return Status::NotFound(fmt::format("no feed with index {}", feed));
  std::lock_guard lock(mu_);
  Feed& f = *feeds_[feed];
  if (f.s.paused == paused) return Status::Ok();
  f.s.paused = paused;
  Log(SchedulerLogLevel::kInfo, fmt::format("feed {}: {}", f.config->id,
                                            paused ? "paused: no retraining until resumed"
                                                   : "resumed: retraining follows the cadence again"));
  if (!paused) {
    QueueDueLocked();
    work_cv_.notify_all();
  }
  return Status::Ok();
}

bool Scheduler::paused(std::uint32_t feed) const {
  std::lock_guard lock(mu_);
  return feed < feeds_.size() && feeds_[feed]->s.paused;
}

Status Scheduler::Activate(std::uint32_t feed, std::int64_t version, const std::string& reason) {
  if (feed >= feeds_.size()) return Status::NotFound(fmt::format("no feed with index {}", feed));
  std::lock_guard admin(admin_mu_);
  Feed& f = *feeds_[feed];
  {
    std::lock_guard lock(mu_);
    if (!started_ || stopping_) return Status::Unavailable("the scheduler is not running");
    if (f.running_job) {
      return Status::Precondition(fmt::format("feed {}: job {} is running; activate when it is done",
                                                    f.config->id, *f.running_job));
    }
    // Hold off new jobs of this feed while the choice is made durable.
    f.activating = true;
  }
  const auto release = [this, &f, feed] {
    std::lock_guard lock(mu_);
    ReleaseActivatingLocked(f, feed);
  };
  auto record = admin_registry_->Get(feed, version);
  if (!record.ok()) {
    release();
    return record.status();
  }
  record->status = ModelStatus::kActive;
  record->reason = reason;
  // Decoded before the registry changes: a version that cannot be served is
  // never made active.
  auto published = MakeActiveModel(std::move(record).value());
  if (!published.ok()) {
    release();
    return published.status();
  }
  if (Status s = admin_registry_->Activate(feed, version, reason); !s.ok()) {
    release();
    return s;
  }
  const auto previous = f.active.load();
  f.active.store(*published);
  {
    std::lock_guard lock(mu_);
    f.s.estimates.model = (*published)->record.lambda_max;
    Log(SchedulerLogLevel::kInfo, fmt::format("feed {}: version {} activated by an operator ({}), replacing {}",
                                              f.config->id, version, reason,
                                              previous ? Ver(previous->record.version) : "no model"));
    ReleaseActivatingLocked(f, feed);
  }
  return Status::Ok();
}

void Scheduler::ReleaseActivatingLocked(Feed& f, std::uint32_t feed) {
  f.activating = false;
  if (f.pending_job || !f.uploads.empty()) ready_.push_back(feed);
  QueueDueLocked();
  work_cv_.notify_all();
  idle_cv_.notify_all();
}

void Scheduler::Stop() {
  {
    std::lock_guard lock(mu_);
    if (stopping_ && trainers_.empty()) return;
    stopping_ = true;
  }
  cancel_.store(true);
  work_cv_.notify_all();
  idle_cv_.notify_all();
  for (auto& t : trainers_) {
    if (t.joinable()) t.join();
  }
  trainers_.clear();
}

}  // namespace lyapcast
