// Scheduler: each feed's retraining cadence and the trainer pool that runs
// the jobs (docs/design.md "Threads" and "Time").
//
// Cadence, in data time only: every newly committed sample reaches
// OnSample() (from the per-feed runtime, runtime/feed_runtime.h); once a feed's newest sample
// reaches its due time a job is queued. The first job is due once the window spans retrain.min_pairs steps
// (and is retried every min_interval while it holds too few pairs); after a
// job that used data up to U the next is due at NextRetrain(U) (cadence.h),
// never sooner than one sample step later. Drift (lib/monitor's change test) and an
// operator can Trigger() a job earlier.
//
// Jobs: at most one per feed at a time; a trigger that arrives while the
// feed's job runs (or is queued) is coalesced into the one pending job and
// logged. A pool of `threads` trainers runs jobs of different feeds
// concurrently, each with its own SQLite connections (reader and registry),
// so training never blocks ingest. A promoted version is durable in the
// registry before it is published; the active model of each feed is an
// immutable object behind an atomic shared pointer, so readers never wait.
// A failed, diverged or worse candidate leaves the active version in place.
//
// Lockstep (training.lockstep): OnSample() does not return while a job is due or
// running, so the writer, and through backpressure the ingest sessions,
// pause until the retraining is done, and later samples (and whatever the
// caller does with them, e.g. drift scoring) see the new model. A cadence job then uses exactly the
// samples before its due time and no wall-time budget, so a replay at any
// speed gives the same retrain points and the same model bytes. (The writer
// calls subscribers before its next prune, so no sample a job needs is
// pruned under it.) In live mode a job uses everything committed when it
// starts; a due job that waits for a running one logs that it waits.
//
// Uploads: an operator's model file (schedule/model_upload.h) is judged (or
// activated on request) and recorded by a job of its own on a trainer, never
// alongside another job of the same feed and before the feed's pending
// retrain; a promoted or activated upload is published like a retrain's and
// retraining continues from it. It does not move the cadence.
//
// Start-up: Start() loads each feed's active version and publishes it, and
// resumes the cadence from the newest stored version the daemon trained
// (uploads do not count) at its training end.
//
// Threads: OnSample runs on the writer thread. Trigger, active, schedule,
// job and Stop may be called from any thread. Every decision is reported
// through `log` (from the calling or a trainer thread) with its reason.
#pragma once

#include <atomic>
#include <condition_variable>
#include <cstdint>
#include <deque>
#include <filesystem>
#include <functional>
#include <memory>
#include <mutex>
#include <optional>
#include <span>
#include <string>
#include <thread>
#include <vector>

#include "config/config.h"
#include "schedule/active_model.h"
#include "schedule/cadence.h"
#include "schedule/model_upload.h"
#include "schedule/retrain_job.h"
#include "store/model_registry.h"
#include "store/sample_writer.h"
#include "store/window_store.h"

namespace lyapcast {

enum class SchedulerLogLevel { kDebug, kInfo, kWarning, kError };
using SchedulerLog = std::function<void(SchedulerLogLevel, const std::string&)>;

// What the scheduler needs beyond the Config it is given (which supplies
// training.threads, training.lockstep, storage.retention and
// storage.keep_models).
struct SchedulerOptions {
  std::filesystem::path store_path;        // the window database (required)
  std::vector<FeedLayout> layouts;         // as registered by the writer's store
  int busy_timeout_ms = 5000;
  std::uint64_t seed = 1;                  // mixed with the feed and the job's data time
  SchedulerLog log;                        // may be empty
};

// kUpload: an operator's model upload (Scheduler::Upload), not a retrain.
enum class TriggerKind { kCadence, kDrift, kOperator, kUpload };
const char* TriggerKindName(TriggerKind k);  // "cadence", "drift", "operator", "upload"

enum class JobState { kQueued, kRunning, kDone };
const char* JobStateName(JobState s);  // "queued", "running", "done"

struct JobInfo {
  std::uint64_t id = 0;
  std::uint32_t feed = 0;
  TriggerKind trigger = TriggerKind::kCadence;
  std::string trigger_reason;
  JobState state = JobState::kQueued;
  DataTime until{};  // data used: samples before this time (set when it starts)
  std::optional<std::int64_t> parent;  // version it warm-started from (none for an upload)
  // When done without an error. An upload ends activated, promoted or rejected.
  std::optional<RetrainVerdict> verdict;
  std::optional<std::int64_t> version;    // recorded version (promoted, rejected or activated)
  std::string outcome;  // the verdict's reason, or the error
  bool blocked = false;  // not_enough_data although data arrive: health says so (RetrainOutcome::blocked)
  // The judge's figures: the new version's validation error on the judged
  // pairs and the active model's on the same pairs (when it judged).
  std::optional<double> validation_error, active_error;
  int iterations = 0;
  double seconds = 0;  // wall time of the job
};

// What the scheduler knows of one feed (a snapshot).
struct FeedSchedule {
  DataTime newest{};           // newest committed sample (0: none)
  DataTime oldest{};           // oldest committed sample seen (0: none)
  std::optional<DataTime> last_retrain;  // data end of the last finished job
  DataTime next_due{};         // the next cadence job is due at this data time
  std::string next_reason;       // why then
  LyapunovEstimates estimates;   // per second of data time
  std::string dynamics_diagnostics, data_diagnostics;
  bool running = false, pending = false, paused = false;
  std::optional<JobInfo> last_job;  // the newest finished job
  std::uint64_t promoted = 0, rejected = 0, not_enough_data = 0, failed = 0, coalesced = 0;
  std::uint64_t jobs_finished = 0;  // every job that ended (any outcome but cancelled)
  double job_seconds_total = 0;     // their wall time
};

class Scheduler {
 public:
  // `config` must outlive the scheduler.
  Scheduler(const Config& config, SchedulerOptions options);
  ~Scheduler();  // Stop()s
  Scheduler(const Scheduler&) = delete;
  Scheduler& operator=(const Scheduler&) = delete;

  // Opens the scheduler's connections, publishes each feed's active
  // version, resumes the cadence (extents: each feed's stored samples, as
  // the writer reports them) and starts the trainers. Errors: the store or
  // a stored model cannot be read.
  [[nodiscard]] Status Start(const std::vector<FeedExtent>& extents);

  // A newly committed sample of `feed` at data time `t`. Returns at once in
  // live mode; in lockstep only when no job is due or running (or Stop()
  // began).
  void OnSample(std::uint32_t feed, DataTime t);
  // In lockstep, waits until no job is queued or running (or Stop() began);
  // returns at once in live mode. Call after a Trigger that must take
  // effect before the next sample (a drift alarm in a replay).
  void WaitIfLockstep();

  // Queues a job for `feed` now (coalesced with a pending or running one).
  // `until`: the data the job may use ends there (e.g. just after the sample
  // that raised a drift alarm, so a lockstep replay is reproducible);
  // nullopt: everything committed when it starts.
  // Returns the job's id (the pending job's when coalesced). kNotFound for an
  // unknown feed; kFailedPrecondition while paused; kUnavailable when
  // stopping.
  [[nodiscard]] Result<std::uint64_t> Trigger(std::uint32_t feed, TriggerKind kind, std::string reason,
                                              std::optional<DataTime> until = std::nullopt);

  // Plant shutdown: while paused no job of the feed is queued (cadence,
  // drift or operator); a running job finishes. Resuming re-checks the
  // cadence at once. kNotFound for an unknown feed.
  [[nodiscard]] Status SetPaused(std::uint32_t feed, bool paused);
  bool paused(std::uint32_t feed) const;

  // A sensor at fault: jobs started from now on treat `channel`'s readings
  // over [from, to] (data time) as missing. Extends the feed's newest
  // exclusion of that channel when the two overlap; keeps at most
  // kMaxExclusions (the oldest go). In memory only: a restart forgets them.
  // Any thread; unknown feeds and channels are ignored.
  static constexpr std::size_t kMaxExclusions = 64;
  void ExcludeReadings(std::uint32_t feed, int channel, DataTime from, DataTime to);

  // An operator's pin or rollback: makes stored `version` active (durable
  // first), publishes it, and retraining continues from it. kNotFound for
  // an unknown feed or version; kFailedPrecondition while a job of the feed
  // runs (its outcome would race the choice; try again when it is done).
  [[nodiscard]] Status Activate(std::uint32_t feed, std::int64_t version, const std::string& reason);

  // An operator's model upload, validated against the feed (ValidateUpload):
  // queues a job that judges it against the active model, or activates it
  // when `activate`, and records it as the feed's next version with origin
  // `uploaded` (see "Uploads" above). `requested` says how it was asked for
  // ("over the API"), for the version's reason. Allowed while paused.
  // Returns the job's id. kNotFound for an unknown feed; kFailedPrecondition
  // when kMaxQueuedUploads uploads of the feed wait already; kUnavailable
  // when stopping.
  static constexpr std::size_t kMaxQueuedUploads = 4;
  [[nodiscard]] Result<std::uint64_t> Upload(std::uint32_t feed, std::shared_ptr<const ValidatedUpload> upload,
                                             bool activate, std::string requested);

  // The published active model (null when the feed has none yet).
  std::shared_ptr<const ActiveModel> active(std::uint32_t feed) const;
  FeedSchedule schedule(std::uint32_t feed) const;
  std::optional<JobInfo> job(std::uint64_t id) const;  // the newest 256 jobs are kept

  // Cancels running jobs (their candidates are dropped unrecorded), wakes a
  // waiting OnSample and joins the trainers. Idempotent.
  void Stop();

 private:
  struct Feed;
  struct Trainer;
  struct QueuedUpload;
  void Log(SchedulerLogLevel level, const std::string& text) const;
  void RunTrainer(Trainer& trainer);  // a trainer thread's loop
  // Requires mu_. Queues a cadence job for every feed whose due time passed.
  void QueueDueLocked();
  // Requires mu_. Queues (or coalesces into) a job of `feed`.
  std::uint64_t QueueLocked(std::uint32_t feed, TriggerKind kind, std::string reason,
                            std::optional<DataTime> until = std::nullopt);
  // A job, in steps: BeginJob (under mu_: marks it running, fixes its data
  // end), EstimateExponents, RunRetrain, PublishAndPrune, FinishJob (under
  // mu_: bookkeeping, the next due time).
  struct JobStart;
  struct JobEstimates;
  void RunJob(Trainer& trainer, std::uint32_t feed, std::uint64_t job_id);
  JobStart BeginJob(std::uint32_t feed, std::uint64_t job_id);
  JobEstimates EstimateExponents(const FeedConfig& fc, std::span<const Sample> recent, bool estimate_dynamics) const;
  void PublishAndPrune(Trainer& trainer, const JobStart& start, const Result<RetrainOutcome>& outcome);
  void FinishJob(const JobStart& start, const JobEstimates& estimates, const Result<RetrainOutcome>& outcome,
                 double seconds);
  void ScheduleAfterJobLocked(Feed& f, const JobStart& start, bool retry_soon);  // requires mu_
  // An upload job: the window read, RunUpload, publish, bookkeeping.
  void RunUploadJob(Trainer& trainer, std::uint32_t feed, const QueuedUpload& upload);
  void FinishUploadJob(std::uint32_t feed, const QueuedUpload& upload, const Result<UploadOutcome>& outcome,
                       double seconds);
  bool BusyLocked() const;  // some job queued or running
  void ReleaseActivatingLocked(Feed& f, std::uint32_t feed);  // requires mu_
  JobInfo* FindJobLocked(std::uint64_t id);
  void ScheduleNextLocked(Feed& f, std::uint32_t feed, DataTime since, bool retry_soon);

  const Config& config_;
  const SchedulerOptions options_;
  std::vector<std::unique_ptr<Feed>> feeds_;

  mutable std::mutex mu_;
  std::condition_variable work_cv_;  // trainers: a job was queued or stopping
  std::condition_variable idle_cv_;  // lockstep writer: a job finished or stopping
  std::deque<std::uint32_t> ready_;  // feeds with a queued job, in order; guarded by mu_
  std::deque<JobInfo> jobs_;         // newest last; guarded by mu_
  std::uint64_t next_job_id_ = 1;    // guarded by mu_
  bool started_ = false, stopping_ = false;  // guarded by mu_
  int running_ = 0;                  // guarded by mu_
  std::atomic<bool> cancel_{false};
  std::vector<std::jthread> trainers_;
  std::mutex admin_mu_;                     // serializes Activate
  std::unique_ptr<ModelRegistry> admin_registry_;  // Activate's own connection
};

}  // namespace lyapcast
