// The scheduler on a real SQLite window fed through the real SampleWriter:
// lockstep replays in different commit groupings give the same retrain
// points and the same model bytes; triggers during a job are coalesced; a
// due job waits for the running one (logged); a rejected candidate is never
// served; a restarted scheduler serves the stored active version and resumes
// the cadence from the stored state; Stop() cancels a running job; an
// uploaded model is judged or activated by a job of its own, retraining
// continues from it, and a restart resumes the cadence from the newest
// trained version.
// Data: Lorenz-63 (constants of docs/references.md "Systems") from the project's RK4.
#include "schedule/retrain_details.h"
#include "schedule/scheduler.h"

#include <gtest/gtest.h>

#include <mutex>
#include <optional>
#include <thread>

#include "support/feeds.h"
#include "support/temp_dir.h"
#include "support/writer_feed.h"

namespace lyapcast {
namespace {

namespace fs = std::filesystem;

Config LorenzConfig() { return testing::SmallLorenzConfig(); }

// A store, its writer and a scheduler subscribed to it, as the daemon wires them.
class Rig {
 public:
  // Sets training.lockstep and storage.keep_models on `config`, which the
  // scheduler keeps a reference to (a test may change it between jobs).
  Rig(Config& config, const fs::path& db, bool lockstep, int commit_batch, int keep_models = 1000) {
    config.training.lockstep = lockstep;
    config.storage.keep_models = keep_models;
    auto store = WindowStore::Open(StoreOptions{db, false, 5000});
    EXPECT_TRUE(store.ok()) << store.status().ToString();
    EXPECT_TRUE((*store)->RegisterFeeds(Layouts(config)).ok());
    WriterOptions w;
    w.commit_batch = commit_batch;
    writer_ = std::make_unique<SampleWriter>(std::move(store).value(), 1, w);
    SchedulerOptions o;
    o.store_path = db;
    o.layouts = Layouts(config);
    o.log = [this](SchedulerLogLevel, const std::string& text) {
      std::lock_guard lock(log_mu_);
      log_.push_back(text);
    };
    scheduler_ = std::make_unique<Scheduler>(config, o);
    // The scheduler's part of the per-sample order (runtime/feed_runtime.h).
    writer_->Subscribe([this](const CommittedBatch& b) {
      for (const FeedSample& fs : b.samples) scheduler_->OnSample(fs.feed, fs.sample.t);
    });
    EXPECT_TRUE(writer_->Start().ok());
    EXPECT_TRUE(scheduler_->Start({writer_->extent(0)}).ok());
  }
  ~Rig() { Stop(); }

  void Send(const std::vector<FeedSample>& samples, std::size_t chunk) {
    testing::SubmitInChunks(*writer_, samples, chunk);
  }
  void Drain() { testing::Drain(*writer_); }

  void Stop() {
    if (scheduler_) scheduler_->Stop();
    if (writer_) writer_->Stop();
  }
  Scheduler& scheduler() { return *scheduler_; }
  bool Logged(const std::string& needle) {
    std::lock_guard lock(log_mu_);
    for (const std::string& line : log_) {
      if (line.find(needle) != std::string::npos) return true;
    }
    return false;
  }

  static std::vector<FeedLayout> Layouts(const Config& c) {
    std::vector<FeedLayout> out;
    for (const FeedConfig& f : c.feeds) out.push_back({f.id, f.channels, f.step});
    return out;
  }

 private:
  std::unique_ptr<SampleWriter> writer_;
  std::unique_ptr<Scheduler> scheduler_;
  std::mutex log_mu_;
  std::vector<std::string> log_;
};

std::unique_ptr<ModelRegistry> OpenRegistry(const fs::path& db, const Config& config) {
  auto store = WindowStore::Open(StoreOptions{db, false, 5000});
  EXPECT_TRUE(store.ok());
  EXPECT_TRUE((*store)->RegisterFeeds(Rig::Layouts(config)).ok());
  return std::make_unique<ModelRegistry>(std::move(store).value());
}

// (version, status, trained_to, file) of every stored version, oldest first.
struct Version {
  std::int64_t version;
  ModelStatus status;
  DataTime trained_to;
  std::string file;
  bool operator==(const Version&) const = default;
};
std::vector<Version> Versions(const fs::path& db, const Config& config) {
  auto registry = OpenRegistry(db, config);
  std::vector<Version> out;
  auto list = registry->List(0, 1000);
  EXPECT_TRUE(list.ok());
  for (auto it = list->rbegin(); it != list->rend(); ++it) {
    out.push_back({it->version, it->status, it->trained_to, registry->Get(0, it->version)->file});
  }
  return out;
}

TEST(Scheduler, LockstepReplayGivesTheSameRetrainPointsAndModelBytesAtAnyGrouping) {
  Config config = LorenzConfig();
  const std::vector<FeedSample> data = testing::LorenzSamples(2000, DataTimeFromMicros(1'000'000'000'000'000));
  std::vector<Version> runs[2];
  const std::pair<std::size_t, int> groupings[2] = {{7, 16}, {997, 4096}};  // (chunk, commit_batch)
  for (int r = 0; r < 2; ++r) {
    testing::TempDir dir("lyapcast-scheduler-test");
    const fs::path db = dir.path() / "w.db";
    {
      Rig rig(config, db, /*lockstep=*/true, groupings[r].second);
      rig.Send(data, groupings[r].first);
      rig.Drain();
      const FeedSchedule s = rig.scheduler().schedule(0);
      EXPECT_GE(s.promoted, 1u);
      EXPECT_EQ(s.failed, 0u);
      EXPECT_FALSE(s.running);
      ASSERT_TRUE(s.last_retrain.has_value());
      EXPECT_GT(s.next_due, *s.last_retrain);
      EXPECT_GT(s.next_due, s.newest) << "lockstep leaves no due job behind";
      ASSERT_NE(rig.scheduler().active(0), nullptr);
    }
    runs[r] = Versions(db, config);
  }
  // First job once the window spans 400 / (1 - 0.2) + rollout + 1 steps
  // (enough for the first model at once); then every 2..4 s of data: at
  // least 4 versions from 20 s of data.
  ASSERT_GE(runs[0].size(), 4u);
  const Micros first_span = (500 + config.feeds[0].model.rollout + 1) * Micros(10'000);
  EXPECT_EQ(runs[0].front().trained_to, DataTimeFromMicros(1'000'000'000'000'000) + first_span);
  ASSERT_EQ(runs[0].size(), runs[1].size());
  for (std::size_t i = 0; i < runs[0].size(); ++i) {
    EXPECT_EQ(runs[0][i].trained_to, runs[1][i].trained_to) << "version " << runs[0][i].version;
    EXPECT_EQ(runs[0][i].status, runs[1][i].status) << "version " << runs[0][i].version;
    EXPECT_TRUE(runs[0][i].file == runs[1][i].file) << "model bytes differ at version " << runs[0][i].version;
  }
  for (std::size_t i = 1; i < runs[0].size(); ++i) {
    const Micros gap = runs[0][i].trained_to - runs[0][i - 1].trained_to;
    EXPECT_GE(gap, 2 * kSecond) << "clamped to min_interval";
    EXPECT_LE(gap, 4 * kSecond) << "clamped to max_interval";
  }
}

TEST(Scheduler, TriggersDuringAJobAreCoalescedAndADueJobWaits) {
  Config config = LorenzConfig();
  config.feeds[0].retrain.iterations = 2'000'000;  // runs until Stop() cancels it
  testing::TempDir dir("lyapcast-scheduler-test");
  const fs::path db = dir.path() / "w.db";
  Rig rig(config, db, /*lockstep=*/false, 4096);
  rig.Send(testing::LorenzSamples(600, DataTime{}), 600);  // past the first due time (5 s): the cold start runs
  rig.Drain();
  for (int i = 0; i < 2000 && !rig.scheduler().schedule(0).running; ++i) {
    std::this_thread::sleep_for(std::chrono::milliseconds(5));
  }
  ASSERT_TRUE(rig.scheduler().schedule(0).running);
  auto a = rig.scheduler().Trigger(0, TriggerKind::kOperator, "test");
  auto b = rig.scheduler().Trigger(0, TriggerKind::kDrift, "test");
  auto c = rig.scheduler().Trigger(0, TriggerKind::kOperator, "test");
  ASSERT_TRUE(a.ok() && b.ok() && c.ok());
  EXPECT_EQ(*a, *b);
  EXPECT_EQ(*a, *c);
  EXPECT_EQ(rig.scheduler().schedule(0).coalesced, 2u);
  EXPECT_TRUE(rig.scheduler().schedule(0).pending);
  EXPECT_EQ(rig.scheduler().job(*a)->state, JobState::kQueued);

  EXPECT_EQ(rig.scheduler().Trigger(7, TriggerKind::kOperator, "x").status().code(), StatusCode::kNotFound);
  rig.Stop();
  EXPECT_EQ(rig.scheduler().active(0), nullptr) << "the cancelled cold start published nothing";
  EXPECT_TRUE(Versions(db, config).empty()) << "a cancelled job records no version";
  EXPECT_TRUE(rig.Logged("cancelled"));
}

TEST(Scheduler, ACadenceJobDueWhileAnotherRunsWaitsAndSaysSo) {
  Config config = LorenzConfig();
  testing::TempDir dir("lyapcast-scheduler-test");
  Rig rig(config, dir.path() / "w.db", /*lockstep=*/false, 4096);
  rig.Send(testing::LorenzSamples(600, DataTime{}), 600);
  rig.Drain();
  const auto settled = [&rig] {
    const FeedSchedule s = rig.scheduler().schedule(0);
    return !s.running && !s.pending && s.last_job.has_value();
  };
  for (int i = 0; i < 4000 && !settled(); ++i) std::this_thread::sleep_for(std::chrono::milliseconds(5));
  ASSERT_TRUE(settled());
  ASSERT_NE(rig.scheduler().active(0), nullptr);
  const DataTime due = rig.scheduler().schedule(0).next_due;
  ASSERT_LE(due, DataTimeFromMicros(10'000'000));  // 6 s + at most max_interval

  // No job runs now, so the config may change: the next job runs until Stop().
  config.feeds[0].retrain.iterations = 2'000'000;
  rig.Send(testing::LorenzSamples(100, DataTimeFromMicros(6'000'000)), 100);  // new data, short of the due time
  rig.Drain();
  ASSERT_LT(DataTimeFromMicros(7'000'000), due);
  ASSERT_TRUE(rig.scheduler().Trigger(0, TriggerKind::kOperator, "test").ok());
  for (int i = 0; i < 2000 && !rig.scheduler().schedule(0).running; ++i) {
    std::this_thread::sleep_for(std::chrono::milliseconds(5));
  }
  ASSERT_TRUE(rig.scheduler().schedule(0).running);
  EXPECT_FALSE(rig.Logged("waits for the running job"));
  rig.Send(testing::LorenzSamples(400, DataTimeFromMicros(7'000'000)), 400);  // data to 11 s: past the cadence due time
  rig.Drain();
  EXPECT_TRUE(rig.Logged("waits for the running job"));
  EXPECT_TRUE(rig.scheduler().schedule(0).pending);
  rig.Stop();
  EXPECT_EQ(rig.scheduler().active(0)->record.version, 1) << "the cancelled job changed nothing";
}

TEST(Scheduler, ARejectedCandidateIsNeverServed) {
  Config config = LorenzConfig();
  // A candidate must be 100x better than the active model to be promoted:
  // after the first model every candidate is rejected.
  config.feeds[0].retrain.promote_tolerance = -0.99;
  testing::TempDir dir("lyapcast-scheduler-test");
  const fs::path db = dir.path() / "w.db";
  {
    Rig rig(config, db, /*lockstep=*/true, 4096);
    rig.Send(testing::LorenzSamples(1500, DataTime{}), 100);
    rig.Drain();
    const FeedSchedule s = rig.scheduler().schedule(0);
    EXPECT_EQ(s.promoted, 1u);
    EXPECT_GE(s.rejected, 2u);
    ASSERT_NE(rig.scheduler().active(0), nullptr);
    EXPECT_EQ(rig.scheduler().active(0)->record.version, 1);
    EXPECT_TRUE(rig.Logged("still serving version 1"));
  }
  const std::vector<Version> versions = Versions(db, config);
  ASSERT_GE(versions.size(), 3u);
  EXPECT_EQ(versions[0].status, ModelStatus::kActive);
  for (std::size_t i = 1; i < versions.size(); ++i) EXPECT_EQ(versions[i].status, ModelStatus::kRejected);
}

TEST(Scheduler, PrunesVersionsBeyondKeepModelsButNeverTheActiveOne) {
  Config config = LorenzConfig();
  config.feeds[0].retrain.promote_tolerance = -0.99;  // every later candidate is rejected
  testing::TempDir dir("lyapcast-scheduler-test");
  const fs::path db = dir.path() / "w.db";
  {
    Rig rig(config, db, /*lockstep=*/true, 4096, /*keep_models=*/2);
    rig.Send(testing::LorenzSamples(2000, DataTime{}), 100);
    rig.Drain();
    EXPECT_GE(rig.scheduler().schedule(0).rejected, 3u);
    EXPECT_TRUE(rig.Logged("beyond keep_models 2"));
  }
  const std::vector<Version> versions = Versions(db, config);
  ASSERT_EQ(versions.size(), 3u) << "the active version and the newest 2 rejected ones";
  EXPECT_EQ(versions[0].version, 1);
  EXPECT_EQ(versions[0].status, ModelStatus::kActive);
}

TEST(Scheduler, WarnsOnceWhenHealthWouldCallEveryRetrainIntervalStale) {
  // Lorenz-63 (lambda about 0.9/s, from the dynamics) retrained at least
  // 2 s apart: about 1.8 Lyapunov times between retrains.
  // Unset levels are derived from the cadence and never warn.
  for (const std::optional<double> alert : {std::optional<double>(0.5), std::optional<double>(1000.0),
                                            std::optional<double>()}) {
    Config config = LorenzConfig();
    config.feeds[0].health.model_age_alert_lyapunov = alert;
    if (alert) config.feeds[0].health.model_age_alarm_lyapunov = 2 * *alert;
    testing::TempDir dir("lyapcast-scheduler-test");
    Rig rig(config, dir.path() / "w.db", /*lockstep=*/true, 4096);
    rig.Send(testing::LorenzSamples(900, DataTime{}), 100);
    rig.Drain();
    ASSERT_NE(rig.scheduler().active(0), nullptr);
    EXPECT_EQ(rig.Logged("the verdict will read alert before each retrain"), alert && *alert < 1)
        << alert.value_or(-1);
  }
}

TEST(Scheduler, PausedFeedsDoNotRetrainAndResumeCatchesUp) {
  Config config = LorenzConfig();
  testing::TempDir dir("lyapcast-scheduler-test");
  Rig rig(config, dir.path() / "w.db", /*lockstep=*/true, 4096);
  ASSERT_TRUE(rig.scheduler().SetPaused(0, true).ok());
  EXPECT_TRUE(rig.scheduler().paused(0));
  rig.Send(testing::LorenzSamples(1200, DataTime{}), 100);  // well past the first due time
  rig.Drain();
  EXPECT_EQ(rig.scheduler().schedule(0).last_job, std::nullopt);
  EXPECT_EQ(rig.scheduler().Trigger(0, TriggerKind::kOperator, "x").status().code(),
            StatusCode::kFailedPrecondition);
  ASSERT_TRUE(rig.scheduler().SetPaused(0, false).ok());
  for (int i = 0; i < 4000 && !rig.scheduler().active(0); ++i) std::this_thread::sleep_for(std::chrono::milliseconds(5));
  ASSERT_NE(rig.scheduler().active(0), nullptr) << "resuming ran the due retrain";
  EXPECT_TRUE(rig.Logged("paused: no retraining until resumed"));
}

TEST(Scheduler, ReadingsOfASensorAtFaultAreLeftOutOfLaterJobs) {
  Config config = LorenzConfig();
  testing::TempDir dir("lyapcast-scheduler-test");
  Rig rig(config, dir.path() / "w.db", /*lockstep=*/true, 4096);
  // Two overlapping spells of channel y merge into one; x gets its own;
  // nonsense (unknown channel, reversed interval) is ignored.
  rig.scheduler().ExcludeReadings(0, 1, DataTimeFromMicros(2'000'000), DataTimeFromMicros(3'000'000));
  rig.scheduler().ExcludeReadings(0, 1, DataTimeFromMicros(2'500'000), DataTimeFromMicros(4'000'000));
  rig.scheduler().ExcludeReadings(0, 0, DataTimeFromMicros(5'000'000), DataTimeFromMicros(5'500'000));
  rig.scheduler().ExcludeReadings(0, 7, DataTimeFromMicros(0), DataTimeFromMicros(1'000'000));
  rig.scheduler().ExcludeReadings(0, 2, DataTimeFromMicros(1'000'000), DataTimeFromMicros(0));
  rig.Send(testing::LorenzSamples(1200, DataTime{}), 100);
  rig.Drain();
  ASSERT_NE(rig.scheduler().active(0), nullptr);
  const RetrainDetails details = ParseRetrainDetails(rig.scheduler().active(0)->record.details);
  // 10 ms samples: y over [2 s, 4 s] is 201 readings, x over [5 s, 5.5 s] 51.
  EXPECT_EQ(details.excluded,
            "252 readings of suspect sensors left out ('y' from 1970-01-01T00:00:02.000000Z to "
            "1970-01-01T00:00:04.000000Z, 'x' from 1970-01-01T00:00:05.000000Z to 1970-01-01T00:00:05.500000Z)");
}

TEST(Scheduler, AnOperatorActivatesAnOlderVersionAndRetrainingContinuesFromIt) {
  Config config = LorenzConfig();
  testing::TempDir dir("lyapcast-scheduler-test");
  const fs::path db = dir.path() / "w.db";
  Rig rig(config, db, /*lockstep=*/true, 4096);
  rig.Send(testing::LorenzSamples(1200, DataTime{}), 100);
  rig.Drain();
  ASSERT_GE(rig.scheduler().active(0)->record.version, 2);
  ASSERT_TRUE(rig.scheduler().Activate(0, 1, "roll back for a test").ok());
  EXPECT_EQ(rig.scheduler().active(0)->record.version, 1);
  EXPECT_EQ(rig.scheduler().active(0)->record.reason, "roll back for a test");
  EXPECT_EQ(rig.scheduler().Activate(0, 99, "x").code(), StatusCode::kNotFound);
  EXPECT_EQ(rig.scheduler().active(0)->record.version, 1) << "a failed activation changes nothing";

  rig.Send(testing::LorenzSamples(800, DataTimeFromMicros(12'000'000)), 100);
  rig.Drain();
  const FeedSchedule s = rig.scheduler().schedule(0);
  ASSERT_TRUE(s.last_job.has_value());
  auto registry = OpenRegistry(db, config);
  auto list = registry->List(0, 1000);
  ASSERT_TRUE(list.ok());
  // The first job after the rollback warm-started from version 1.
  bool found = false;
  for (auto it = list->rbegin(); it != list->rend(); ++it) {
    if (it->trained_to > DataTimeFromMicros(12'000'000)) {
      EXPECT_EQ(it->parent, 1);
      found = true;
      break;
    }
  }
  EXPECT_TRUE(found);
}

TEST(Scheduler, RestartServesTheStoredActiveVersionAndResumesTheCadence) {
  Config config = LorenzConfig();
  testing::TempDir dir("lyapcast-scheduler-test");
  const fs::path db = dir.path() / "w.db";
  const std::vector<FeedSample> data = testing::LorenzSamples(2000, DataTime{});
  std::int64_t active_before = 0;
  DataTime last_before{}, due_before{};
  {
    Rig rig(config, db, /*lockstep=*/true, 4096);
    rig.Send({data.begin(), data.begin() + 1200}, 100);
    rig.Drain();
    ASSERT_NE(rig.scheduler().active(0), nullptr);
    active_before = rig.scheduler().active(0)->record.version;
    last_before = *rig.scheduler().schedule(0).last_retrain;
    due_before = rig.scheduler().schedule(0).next_due;
  }
  ASSERT_GT(active_before, 0);
  Rig rig(config, db, /*lockstep=*/true, 4096);
  ASSERT_NE(rig.scheduler().active(0), nullptr);
  EXPECT_EQ(rig.scheduler().active(0)->record.version, active_before);
  EXPECT_EQ(*rig.scheduler().schedule(0).last_retrain, last_before);
  EXPECT_EQ(rig.scheduler().schedule(0).next_due, due_before);
  EXPECT_TRUE(rig.Logged("next retrain due at"));
  rig.Send({data.begin() + 1200, data.end()}, 100);
  rig.Drain();
  const FeedSchedule s = rig.scheduler().schedule(0);
  EXPECT_GE(s.promoted + s.rejected, 1u) << "retraining resumed";
  EXPECT_GT(*s.last_retrain, last_before);
  ASSERT_TRUE(s.last_job.has_value());
  EXPECT_EQ(s.last_job->parent.value_or(0) >= active_before, true);
}

// A model file for the small Lorenz feed with random weights: a poor model.
std::shared_ptr<const ValidatedUpload> PoorUpload(const FeedConfig& feed) {
  FlowMap<float> map = FlowMap<float>::Create(3, {8}, Activation::kTanh, 0.01).value();
  EXPECT_TRUE(map.SetNormalization(Eigen::VectorXf::Constant(3, 1), Eigen::VectorXf::Constant(3, 8),
                                   Eigen::VectorXf::Constant(3, 2000))
                  .ok());
  map.InitRandom(3);
  ModelFileContents c;
  c.channels = feed.channels;
  c.step_micros = feed.step;
  c.model = map;
  c.metadata = {{"feed", feed.id}, {"trained_to", "1970-01-01T00:00:01Z"}};
  auto v = ValidateUpload(Serialize(c).value(), feed);
  EXPECT_TRUE(v.ok()) << v.status().ToString();
  return std::make_shared<const ValidatedUpload>(std::move(v).value());
}

JobInfo WaitForJob(Scheduler& scheduler, std::uint64_t id) {
  for (int i = 0; i < 4000; ++i) {
    const auto job = scheduler.job(id);
    if (job && job->state == JobState::kDone) return *job;
    std::this_thread::sleep_for(std::chrono::milliseconds(5));
  }
  ADD_FAILURE() << "job " << id << " did not finish";
  return {};
}

TEST(Scheduler, AnUploadIsJudgedOrActivatedAndRetrainingContinuesFromIt) {
  Config config = LorenzConfig();
  testing::TempDir dir("lyapcast-scheduler-test");
  const fs::path db = dir.path() / "w.db";
  std::int64_t uploaded = 0;
  DataTime last_retrain{};
  {
    Rig rig(config, db, /*lockstep=*/true, 4096);
    rig.Send(testing::LorenzSamples(1200, DataTime{}), 100);
    rig.Drain();
    const auto before = rig.scheduler().active(0);
    ASSERT_NE(before, nullptr);
    const FeedSchedule s0 = rig.scheduler().schedule(0);

    // Judged: rejected, the active version stays.
    auto judged = rig.scheduler().Upload(0, PoorUpload(config.feeds[0]), false, "in a test");
    ASSERT_TRUE(judged.ok()) << judged.status().ToString();
    const JobInfo j = WaitForJob(rig.scheduler(), *judged);
    EXPECT_EQ(j.trigger, TriggerKind::kUpload);
    ASSERT_TRUE(j.verdict.has_value()) << j.outcome;
    EXPECT_EQ(*j.verdict, RetrainVerdict::kRejected) << j.outcome;
    EXPECT_NE(j.outcome.find("uploaded in a test and rejected"), std::string::npos) << j.outcome;
    ASSERT_TRUE(j.validation_error && j.active_error);
    EXPECT_GT(*j.validation_error, *j.active_error);
    EXPECT_EQ(rig.scheduler().active(0), before);
    EXPECT_EQ(rig.scheduler().schedule(0).last_job->id, *judged);
    EXPECT_TRUE(rig.Logged("rejected uploaded version"));

    // Activated on request: served at once; the cadence does not move and
    // the retrain counters count retrains only.
    auto activated = rig.scheduler().Upload(0, PoorUpload(config.feeds[0]), true, "in a test");
    ASSERT_TRUE(activated.ok());
    const JobInfo a = WaitForJob(rig.scheduler(), *activated);
    ASSERT_TRUE(a.verdict.has_value()) << a.outcome;
    EXPECT_EQ(*a.verdict, RetrainVerdict::kActivated);
    ASSERT_NE(rig.scheduler().active(0), nullptr);
    EXPECT_EQ(rig.scheduler().active(0)->record.version, *a.version);
    EXPECT_EQ(rig.scheduler().active(0)->record.origin, ModelOrigin::kUploaded);
    uploaded = *a.version;
    const FeedSchedule s1 = rig.scheduler().schedule(0);
    EXPECT_EQ(s1.next_due, s0.next_due);
    EXPECT_EQ(s1.last_retrain, s0.last_retrain);
    EXPECT_EQ(s1.promoted + s1.rejected, s0.promoted + s0.rejected);
    last_retrain = *s1.last_retrain;

    EXPECT_EQ(rig.scheduler().Upload(7, PoorUpload(config.feeds[0]), true, "x").status().code(),
              StatusCode::kNotFound);
  }
  // A restart serves the upload and resumes the cadence from the newest
  // trained version, not from the upload.
  Rig rig(config, db, /*lockstep=*/true, 4096);
  ASSERT_NE(rig.scheduler().active(0), nullptr);
  EXPECT_EQ(rig.scheduler().active(0)->record.version, uploaded);
  EXPECT_EQ(*rig.scheduler().schedule(0).last_retrain, last_retrain);
  // The next retrain warm-starts from the uploaded version.
  rig.Send(testing::LorenzSamples(600, DataTimeFromMicros(12'000'000)), 100);
  rig.Drain();
  auto registry = OpenRegistry(db, config);
  auto list = registry->List(0, 1000);
  ASSERT_TRUE(list.ok());
  bool found = false;
  for (auto it = list->rbegin(); it != list->rend(); ++it) {
    if (it->version > uploaded) {
      EXPECT_EQ(it->parent, uploaded);
      EXPECT_EQ(it->origin, ModelOrigin::kTrained);
      found = true;
      break;
    }
  }
  EXPECT_TRUE(found) << "a retrain after the upload";
}

TEST(Scheduler, UploadsWaitForTheRunningJobAndAtMostFourQueue) {
  Config config = LorenzConfig();
  config.feeds[0].retrain.iterations = 2'000'000;  // runs until Stop() cancels it
  testing::TempDir dir("lyapcast-scheduler-test");
  const fs::path db = dir.path() / "w.db";
  Rig rig(config, db, /*lockstep=*/false, 4096);
  rig.Send(testing::LorenzSamples(600, DataTime{}), 600);
  rig.Drain();
  for (int i = 0; i < 2000 && !rig.scheduler().schedule(0).running; ++i) {
    std::this_thread::sleep_for(std::chrono::milliseconds(5));
  }
  ASSERT_TRUE(rig.scheduler().schedule(0).running);
  std::vector<std::uint64_t> ids;
  for (std::size_t i = 0; i < Scheduler::kMaxQueuedUploads; ++i) {
    auto id = rig.scheduler().Upload(0, PoorUpload(config.feeds[0]), true, "in a test");
    ASSERT_TRUE(id.ok()) << id.status().ToString();
    ids.push_back(*id);
  }
  auto refused = rig.scheduler().Upload(0, PoorUpload(config.feeds[0]), true, "in a test");
  EXPECT_EQ(refused.status().code(), StatusCode::kFailedPrecondition);
  EXPECT_NE(refused.status().message().find("4 uploads wait"), std::string::npos) << refused.status().ToString();
  for (std::uint64_t id : ids) EXPECT_EQ(rig.scheduler().job(id)->state, JobState::kQueued);
  rig.Stop();
  EXPECT_EQ(rig.scheduler().active(0), nullptr) << "nothing ran after the cancelled job";
  EXPECT_EQ(rig.scheduler().Upload(0, PoorUpload(config.feeds[0]), true, "x").status().code(),
            StatusCode::kUnavailable);
}

}  // namespace
}  // namespace lyapcast
