// FeedRuntime: the per-sample order of work (scheduler, model switch,
// scoring, newest state, drift trigger with its rate limit, lockstep wait)
// and the forecast, on a real store, writer and scheduler as the daemon
// wires them. Data: Lorenz-63 (constants of docs/references.md "Systems")
// from the project's RK4; the "fault" is Gaussian sensor noise of 4 units
// added from a given sample on (invented for the test), which the change
// test must flag.
#include "runtime/feed_runtime.h"

#include <gtest/gtest.h>

#include <initializer_list>
#include <limits>
#include <random>

#include "core/wall_clock.h"
#include "schedule/retrain_details.h"
#include "support/feeds.h"
#include "support/temp_dir.h"
#include "support/writer_feed.h"

namespace lyapcast {
namespace {

namespace fs = std::filesystem;

const DataTime kT0 = DataTimeFromMicros(1'000'000'000'000'000);

Config LorenzConfig() {
  Config c = testing::SmallLorenzConfig();
  c.training.lockstep = true;
  return c;
}

// Clean Lorenz samples, then from index `fault_from` on a noisy sensor.
std::vector<FeedSample> Stream(int n, int fault_from) {
  std::vector<FeedSample> out = testing::LorenzSamples(n, kT0);
  std::mt19937_64 rng(7);
  std::normal_distribution<double> noise(0.0, 4.0);
  for (int i = fault_from; i < n; ++i) {
    for (double& v : out[static_cast<std::size_t>(i)].sample.values) v += noise(rng);
  }
  return out;
}

// A store, its writer, a scheduler and the runtimes subscribed to it.
class Rig {
 public:
  Rig(const Config& config, const fs::path& db, int commit_batch) {
    for (const FeedConfig& f : config.feeds) layouts_.push_back({f.id, f.channels, f.step});
    auto store = WindowStore::Open(StoreOptions{db, false, 5000});
    EXPECT_TRUE(store.ok()) << store.status().ToString();
    EXPECT_TRUE((*store)->RegisterFeeds(layouts_).ok());
    WriterOptions w;
    w.commit_batch = commit_batch;
    writer_ = std::make_unique<SampleWriter>(std::move(store).value(), 1, w);
    SchedulerOptions o;
    o.store_path = db;
    o.layouts = layouts_;
    scheduler_ = std::make_unique<Scheduler>(config, o);
    runtimes_ = std::make_unique<FeedRuntimes>(config, *scheduler_, SchedulerLog{});
    writer_->Subscribe([this](const CommittedBatch& b) { runtimes_->OnCommitted(b); });
    EXPECT_TRUE(writer_->Start().ok());
    EXPECT_TRUE(scheduler_->Start({writer_->extent(0)}).ok());
  }
  ~Rig() {
    scheduler_->Stop();
    writer_->Stop();
  }
  void Send(const std::vector<FeedSample>& samples, std::size_t chunk) {
    testing::SubmitInChunks(*writer_, samples, chunk);
  }
  void Drain() { testing::Drain(*writer_); }

  Scheduler& scheduler() { return *scheduler_; }
  FeedRuntime& runtime() { return runtimes_->at(0); }

 private:
  std::vector<FeedLayout> layouts_;
  std::unique_ptr<SampleWriter> writer_;
  std::unique_ptr<Scheduler> scheduler_;
  std::unique_ptr<FeedRuntimes> runtimes_;
};

struct Version {
  std::string trigger;
  DataTime trained_to{};
  std::string file;
  bool operator==(const Version&) const = default;
};

std::vector<Version> Versions(const fs::path& db, const Config& config) {
  auto store = WindowStore::Open(StoreOptions{db, false, 5000});
  EXPECT_TRUE(store.ok());
  EXPECT_TRUE((*store)->RegisterFeeds({{config.feeds[0].id, config.feeds[0].channels, config.feeds[0].step}}).ok());
  ModelRegistry registry(std::move(store).value());
  std::vector<Version> out;
  auto list = registry.List(0, 1000);
  EXPECT_TRUE(list.ok());
  for (auto it = list->rbegin(); it != list->rend(); ++it) {
    out.push_back({ParseRetrainDetails(it->details).trigger, it->trained_to, registry.Get(0, it->version)->file});
  }
  return out;
}

// Order 1 before 2 and 3: in lockstep the sample at which the first retrain
// is due waits for that job, and the monitor then switches to the model it
// produced while handling that same sample. Were the sample scored before
// the scheduler saw it, the monitor would still have no model after it.
TEST(FeedRuntime, TheSampleAtADueRetrainWaitsForItAndFindsTheNewModel) {
  const Config config = LorenzConfig();
  const FeedConfig& feed = config.feeds[0];
  testing::TempDir dir("lyapcast-runtime-test");
  Rig rig(config, dir.path() / "w.db", 4096);
  EXPECT_FALSE(rig.runtime().NewestComplete().has_value());
  // The first job is due once the window spans min_pairs / (1 - validation)
  // + rollout + 1 steps (scheduler.h): 500 + 4 + 1 = 505 steps after the first sample.
  const int due_index = 505;
  const std::vector<FeedSample> data = testing::LorenzSamples(700, kT0);
  rig.Send({data.begin(), data.begin() + due_index}, 100);
  rig.Drain();
  EXPECT_EQ(rig.scheduler().active(0), nullptr) << "not due yet";
  EXPECT_FALSE(rig.runtime().Snapshot(WallNow()).model_version.has_value());
  rig.Send({data.begin() + due_index, data.begin() + due_index + 1}, 1);  // the due sample alone
  rig.Drain();
  const auto active = rig.scheduler().active(0);
  ASSERT_NE(active, nullptr);
  EXPECT_EQ(active->record.trained_to, kT0 + due_index * feed.step) << "lockstep: exactly the data before it";
  EXPECT_EQ(rig.runtime().Snapshot(WallNow()).model_version, 1);
  EXPECT_EQ(rig.runtime().NewestComplete()->t, kT0 + due_index * feed.step);

  // Later samples are scored against the new model (the due sample itself
  // is where its training data ends, and serves as the first "previous").
  rig.Send({data.begin() + due_index + 1, data.end()}, 100);
  rig.Drain();
  EXPECT_EQ(rig.runtime().Snapshot(WallNow()).scored, 700 - due_index - 1);
}

// Order 5 and 6: a sensor fault raises change-test alarms; each drift
// retrain uses the data up to and including its alarming sample, and drift
// retrains are at least min_interval of data time apart although the fault
// keeps alarming.
TEST(FeedRuntime, DriftAlarmsTriggerRetrainsUpToTheAlarmingSampleAtMostOncePerMinInterval) {
  const Config config = LorenzConfig();
  testing::TempDir dir("lyapcast-runtime-test");
  const fs::path db = dir.path() / "w.db";
  {
    Rig rig(config, db, 4096);
    rig.Send(Stream(3000, 1500), 500);
    rig.Drain();
    EXPECT_GE(rig.runtime().drift_triggers(), 1u);
    const DriftSnapshot s = rig.runtime().Snapshot(WallNow());
    EXPECT_GE(s.alarms_total, static_cast<std::int64_t>(rig.runtime().drift_triggers()));
  }
  std::vector<DataTime> drift_ends;
  for (const Version& v : Versions(db, config)) {
    if (v.trigger == "drift") drift_ends.push_back(v.trained_to);
  }
  ASSERT_FALSE(drift_ends.empty());
  for (DataTime end : drift_ends) {
    // until = the alarming sample's time + 1 us; samples lie on the 10 ms grid.
    EXPECT_EQ((end - Micros(1) - kT0) % config.feeds[0].step, Micros(0));
    EXPECT_GE(end, kT0 + 1500 * config.feeds[0].step) << "no alarm before the fault";
  }
  for (std::size_t i = 1; i < drift_ends.size(); ++i) {
    EXPECT_GE(drift_ends[i] - drift_ends[i - 1], config.feeds[0].retrain.min_interval);
  }
}

// The whole order under lockstep: replays at two groupings give the same
// drift alarms, the same versions with the same triggers and data ends, and
// the same model bytes. Without the lockstep wait after a drift trigger,
// how many samples were scored by the old model would depend on grouping.
TEST(FeedRuntime, LockstepReplayWithDriftRetrainsIsTheSameAtAnyGrouping) {
  const Config config = LorenzConfig();
  const std::vector<FeedSample> data = Stream(2500, 1300);
  std::vector<Version> runs[2];
  std::int64_t alarms[2] = {0, 0};
  const std::pair<std::size_t, int> groupings[2] = {{7, 16}, {997, 4096}};  // (chunk, commit_batch)
  for (int r = 0; r < 2; ++r) {
    testing::TempDir dir("lyapcast-runtime-test");
    const fs::path db = dir.path() / "w.db";
    {
      Rig rig(config, db, groupings[r].second);
      rig.Send(data, groupings[r].first);
      rig.Drain();
      alarms[r] = rig.runtime().Snapshot(WallNow()).alarms_total;
    }
    runs[r] = Versions(db, config);
  }
  EXPECT_GE(alarms[0], 1);
  EXPECT_EQ(alarms[0], alarms[1]);
  ASSERT_EQ(runs[0].size(), runs[1].size());
  bool any_drift = false;
  for (std::size_t i = 0; i < runs[0].size(); ++i) {
    any_drift = any_drift || runs[0][i].trigger == "drift";
    EXPECT_EQ(runs[0][i].trigger, runs[1][i].trigger) << "version " << i + 1;
    EXPECT_EQ(runs[0][i].trained_to, runs[1][i].trained_to) << "version " << i + 1;
    EXPECT_TRUE(runs[0][i].file == runs[1][i].file) << "model bytes differ at version " << i + 1;
  }
  EXPECT_TRUE(any_drift);
}

// The forecast: refused without a model; with one, from the given start with
// the published model, the horizon's e0 the monitor's error (the model's
// validation error before the monitor has one).
TEST(FeedRuntime, ForecastsWithThePublishedModelAndTheMonitorsError) {
  const Config config = LorenzConfig();
  testing::TempDir dir("lyapcast-runtime-test");
  Rig rig(config, dir.path() / "w.db", 4096);
  const Sample start = testing::LorenzSamples(1, kT0)[0].sample;
  EXPECT_EQ(rig.runtime().ForecastFrom(start, 10, 0.9).status().code(), StatusCode::kFailedPrecondition);

  rig.Send(testing::LorenzSamples(800, kT0), 800);
  rig.Drain();
  auto served = rig.runtime().ForecastFrom(start, 50, 0.9056);
  ASSERT_TRUE(served.ok()) << served.status().ToString();
  EXPECT_EQ(served->model, rig.scheduler().active(0));
  ASSERT_EQ(served->forecast.points.size(), 50u);
  EXPECT_EQ(served->forecast.points[0].t, start.t + config.feeds[0].step);
  EXPECT_EQ(served->forecast.horizon.e0, rig.runtime().e0());
  EXPECT_TRUE(served->forecast.horizon.seconds.has_value()) << served->forecast.horizon.reason;
  // The same numbers as MakeForecast on the same model: one forecast.
  ForecastRequest request;
  request.from = start.t;
  request.start = start.values;
  request.step = config.feeds[0].step;
  request.steps = 50;
  request.lambda_max = 0.9056;
  request.e0 = rig.runtime().e0();
  request.tol = config.feeds[0].monitor.horizon_tol;
  auto direct = MakeForecast(*served->model->model, request);
  ASSERT_TRUE(direct.ok());
  EXPECT_EQ(direct->points.back().values, served->forecast.points.back().values);
}

// A suspect reading is counted once, though a second source's partial row
// merged into its row hands the whole row (mark included) on again.
TEST(FeedRuntime, CountsASuspectReadingOnceWhenItsRowIsMerged) {
  const Config config = LorenzConfig();
  testing::TempDir dir("lyapcast-runtime-test");
  Rig rig(config, dir.path() / "w.db", 4096);
  FeedSample first = testing::LorenzSamples(1, kT0)[0];
  FeedSample second = first;
  first.sample.values[0] = -9999;
  first.sample.missing_mask = 0b111;  // x suspect, y and z from the other source
  first.sample.suspect_mask = 0b001;
  second.sample.missing_mask = 0b001;
  rig.Send({first}, 1);
  rig.Drain();
  rig.Send({second}, 1);
  rig.Drain();
  const auto suspects = rig.runtime().Suspects();
  ASSERT_EQ(suspects.size(), 3U);
  EXPECT_EQ(suspects[0].count, 1);
  EXPECT_EQ(suspects[0].last_value, -9999);
  EXPECT_EQ(suspects[0].last, kT0);
  EXPECT_EQ(suspects[1].count, 0);
}

// The data time `steps` model steps plus `extra` after t.
DataTime After(DataTime t, int steps, Micros extra = {}) { return t + steps * Micros(10'000) + extra; }

// `values` at t with the channels in `missing` left out (NaN, mask bit set).
FeedSample Partial(DataTime t, const std::vector<double>& values, std::initializer_list<int> missing) {
  FeedSample fs;
  fs.sample.t = t;
  fs.sample.values = values;
  for (int c : missing) {
    fs.sample.values[static_cast<std::size_t>(c)] = std::numeric_limits<double>::quiet_NaN();
    fs.sample.missing_mask |= std::uint64_t{1} << c;
  }
  return fs;
}

// The start estimate: present channels as measured; a missing channel within
// its hold carried (carrying wins), any other predicted as G^k of the newest
// complete state when the newest sample lies within a quarter step of k
// whole steps after it, 1 <= k <= model.max_gap; otherwise none.
TEST(FeedRuntime, StartEstimateCarriesWithinHoldAndPredictsTheRestFromTheNewestCompleteState) {
  Config config = LorenzConfig();
  FeedConfig& feed = config.feeds[0];
  feed.hold = {Micros{}, Micros(15'000), Micros{}};  // y may be carried 15 ms
  ASSERT_EQ(feed.model.max_gap, 8);
  testing::TempDir dir("lyapcast-runtime-test");
  Rig rig(config, dir.path() / "w.db", 4096);
  const std::vector<FeedSample> data = testing::LorenzSamples(820, kT0);
  rig.Send({data.begin(), data.begin() + 800}, 800);
  rig.Drain();
  const Sample& x0 = data[799].sample;  // the newest complete state
  const auto model = rig.scheduler().active(0);
  ASSERT_NE(model, nullptr);
  auto e = rig.runtime().EstimateStart();
  ASSERT_TRUE(e.has_value());
  EXPECT_TRUE(e->estimated.empty()) << "a complete newest sample needs no estimate";
  EXPECT_EQ(e->model, nullptr);
  // G^k(x0), evaluated into a vector of its own (a column of the rollout
  // would refer into the rollout, a temporary).
  const auto g = [&](int k) -> Eigen::VectorXd {
    const Eigen::VectorXd start = Eigen::Map<const Eigen::VectorXd>(x0.values.data(), 3);
    return Rollout(*model->model, start, k).states.col(k - 1);
  };
  using How = FeedRuntime::EstimatedChannel::How;
  const auto send = [&](const FeedSample& fs) {
    rig.Send({fs}, 1);
    rig.Drain();
    ASSERT_EQ(rig.scheduler().active(0), model) << "no retrain in between";
  };

  // One step on, z missing: z = G(x0)_z; x and y as measured.
  send(Partial(After(x0.t, 1), data[800].sample.values, {2}));
  e = rig.runtime().EstimateStart();
  ASSERT_TRUE(e.has_value());
  EXPECT_EQ(e->start.t, After(x0.t, 1));
  EXPECT_TRUE(e->start.complete());
  EXPECT_EQ(e->start.values[0], data[800].sample.values[0]);
  EXPECT_EQ(e->start.values[1], data[800].sample.values[1]);
  EXPECT_EQ(e->start.values[2], g(1)(2));
  ASSERT_EQ(e->estimated.size(), 1u);
  EXPECT_EQ(e->estimated[0].channel, 2);
  EXPECT_EQ(e->estimated[0].how, How::kPredicted);
  EXPECT_NEAR(e->estimated[0].age_s, 0.01, 1e-9);
  EXPECT_EQ(e->model, model);
  // The prediction is close to the truth: a trained map's one-step error on
  // Lorenz (z spans about 5..45) is far below the step's change.
  EXPECT_NEAR(e->start.values[2], data[800].sample.values[2], 1.0);

  // Two steps on, y and z missing: y's value of 10 ms ago is within its
  // hold and carried although the model could predict it; z from G^2.
  send(Partial(After(x0.t, 2), data[801].sample.values, {1, 2}));
  e = rig.runtime().EstimateStart();
  ASSERT_TRUE(e.has_value());
  ASSERT_EQ(e->estimated.size(), 2u);
  EXPECT_EQ(e->estimated[0].channel, 1);
  EXPECT_EQ(e->estimated[0].how, How::kCarried);
  EXPECT_NEAR(e->estimated[0].age_s, 0.01, 1e-9);
  EXPECT_EQ(e->start.values[1], data[800].sample.values[1]);
  EXPECT_EQ(e->estimated[1].channel, 2);
  EXPECT_EQ(e->estimated[1].how, How::kPredicted);
  EXPECT_NEAR(e->estimated[1].age_s, 0.02, 1e-9);
  EXPECT_EQ(e->start.values[2], g(2)(2));

  // 4 steps + 2 ms on (within the quarter-step tolerance): y is now 32 ms
  // old, past its hold, and predicted with z through G^4.
  send(Partial(After(x0.t, 4, Micros(2'000)), data[803].sample.values, {1, 2}));
  e = rig.runtime().EstimateStart();
  ASSERT_TRUE(e.has_value());
  ASSERT_EQ(e->estimated.size(), 2u);
  EXPECT_EQ(e->estimated[0].how, How::kPredicted);
  EXPECT_EQ(e->estimated[1].how, How::kPredicted);
  EXPECT_NEAR(e->estimated[1].age_s, 0.042, 1e-9);
  EXPECT_EQ(e->start.values[1], g(4)(1));
  EXPECT_EQ(e->start.values[2], g(4)(2));
  // The forecast runs the version that predicted.
  auto served = rig.runtime().ForecastFrom(e->start, 5, 0.9, e->model);
  ASSERT_TRUE(served.ok()) << served.status().ToString();
  EXPECT_EQ(served->model, model);

  // 6 steps + 4 ms on: off the grid by more than a quarter step.
  send(Partial(After(x0.t, 6, Micros(4'000)), data[805].sample.values, {2}));
  EXPECT_FALSE(rig.runtime().EstimateStart().has_value());
  // 9 steps on: further than model.max_gap (8) steps.
  send(Partial(After(x0.t, 9), data[808].sample.values, {2}));
  EXPECT_FALSE(rig.runtime().EstimateStart().has_value());
  // NewestComplete, the caller's fallback, is still x0.
  EXPECT_EQ(rig.runtime().NewestComplete()->t, x0.t);
}

// Activity: per channel the data time of its newest usable reading (a
// missing one does not count), and the oldest and newest sample seen.
TEST(FeedRuntime, ActivityHasEachChannelsNewestReading) {
  const Config config = LorenzConfig();
  testing::TempDir dir("lyapcast-runtime-test");
  Rig rig(config, dir.path() / "w.db", 4096);
  EXPECT_FALSE(rig.runtime().Activity().newest.has_value());
  const std::vector<FeedSample> data = testing::LorenzSamples(10, kT0);
  rig.Send({data.begin(), data.begin() + 5}, 5);
  rig.Send({Partial(data[5].sample.t, data[5].sample.values, {2})}, 1);
  rig.Send({Partial(data[6].sample.t, data[6].sample.values, {1, 2})}, 1);
  rig.Drain();
  const FeedRuntime::ChannelActivity a = rig.runtime().Activity();
  EXPECT_EQ(a.first, kT0);
  EXPECT_EQ(a.newest, data[6].sample.t);
  EXPECT_EQ(a.last, (std::vector<std::optional<DataTime>>{data[6].sample.t, data[5].sample.t, data[4].sample.t}));
}

}  // namespace
}  // namespace lyapcast
