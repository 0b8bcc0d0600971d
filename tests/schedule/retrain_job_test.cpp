// One retraining job end to end on a real SQLite window: cold start waits for
// enough pairs, the first model is promoted, a warm start records its parent
// and both validation errors, a worse candidate is rejected and the active
// version stays, and lockstep jobs are deterministic to the byte.
// Data: Lorenz-63 (constants of docs/references.md "Systems") from the project's RK4.
#include "schedule/retrain_job.h"

#include <gtest/gtest.h>

#include "support/feeds.h"
#include "support/temp_dir.h"

namespace lyapcast {
namespace {

namespace fs = std::filesystem;

FeedConfig Feed() {
  FeedConfig f = testing::LorenzFeed();
  f.model.hidden = {16, 16};
  f.retrain.iterations = 150;
  f.retrain.batch = 64;
  f.retrain.min_pairs = 500;
  f.retrain.learning_rate = 3e-3;
  return f;
}

struct Db {
  testing::TempDir dir{"lyapcast-retrain-test"};
  fs::path path = dir.path() / "w.db";
  std::unique_ptr<WindowStore> writer = Open();
  std::unique_ptr<WindowStore> reader = Open();
  ModelRegistry registry{Open()};

  std::unique_ptr<WindowStore> Open() {
    auto s = WindowStore::Open(StoreOptions{path, false, 5000});
    EXPECT_TRUE(s.ok()) << s.status().ToString();
    EXPECT_TRUE((*s)->RegisterFeeds({{"lorenz", {"x", "y", "z"}, Micros(10'000)}}).ok());
    return std::move(s).value();
  }
  void Add(const std::vector<FeedSample>& samples) {
    std::vector<InsertOutcome> outcomes;
    ASSERT_TRUE(writer->InsertBatch(samples, &outcomes).ok());
  }
};

TEST(RunRetrain, ColdStartWaitsThenPromotesTheFirstModel) {
  Db db;
  const FeedConfig feed = Feed();
  db.Add(testing::LorenzSamples(300, DataTime{}));
  RetrainInput in{&feed, 0, 3600 * kSecond, DataTimeFromMicros(3'000'000), std::nullopt, 1, true, nullptr};
  auto early = RunRetrain(*db.reader, db.registry, in);
  ASSERT_TRUE(early.ok());
  EXPECT_EQ(early->verdict, RetrainVerdict::kNotEnoughData);
  EXPECT_NE(early->reason.find("500 training pairs"), std::string::npos) << early->reason;
  EXPECT_FALSE(db.registry.Active(0)->has_value());

  db.Add(testing::LorenzSamples(1000, DataTimeFromMicros(3'000'000)));
  in.until = DataTimeFromMicros(13'000'000);
  auto first = RunRetrain(*db.reader, db.registry, in);
  ASSERT_TRUE(first.ok()) << first.status().ToString();
  EXPECT_EQ(first->verdict, RetrainVerdict::kPromoted) << first->reason;
  EXPECT_EQ(first->version, 1);
  auto active = db.registry.Active(0);
  ASSERT_TRUE(active->has_value());
  EXPECT_EQ((*active)->trained_to, DataTimeFromMicros(13'000'000));
  EXPECT_TRUE((*active)->validation_error.has_value());
  EXPECT_NE((*active)->details.find("\"validation_per_channel\""), std::string::npos);
}

TEST(RunRetrain, WarmStartRecordsParentAndBothErrorsAndRejectsAWorseCandidate) {
  Db db;
  FeedConfig feed = Feed();
  db.Add(testing::LorenzSamples(1500, DataTime{}));
  RetrainInput in{&feed, 0, 3600 * kSecond, DataTimeFromMicros(15'000'000), std::nullopt, 1, true, nullptr};
  ASSERT_EQ(RunRetrain(*db.reader, db.registry, in)->verdict, RetrainVerdict::kPromoted);

  db.Add(testing::LorenzSamples(500, DataTimeFromMicros(15'000'000)));
  in.until = DataTimeFromMicros(20'000'000);
  in.active = *db.registry.Active(0).value();
  auto warm = RunRetrain(*db.reader, db.registry, in);
  ASSERT_TRUE(warm.ok());
  EXPECT_EQ(warm->version, 2);
  EXPECT_TRUE(std::isfinite(warm->candidate_error));
  EXPECT_TRUE(std::isfinite(warm->active_error));
  EXPECT_EQ(db.registry.Get(0, 2)->parent, 1);
  // Without estimates the details say null; a restart then has none to resume with.
  EXPECT_FALSE(ParseRecordedExponents(db.registry.Get(0, 2)->details).data.has_value());

  // A candidate trained with a learning rate that wrecks it must not be served.
  const std::int64_t active_before = (*db.registry.Active(0).value()).version;
  db.Add(testing::LorenzSamples(500, DataTimeFromMicros(20'000'000)));
  feed.retrain.learning_rate = 5.0;
  feed.retrain.clip = 1e6;
  in.until = DataTimeFromMicros(25'000'000);
  in.active = *db.registry.Active(0).value();
  auto bad = RunRetrain(*db.reader, db.registry, in);
  ASSERT_TRUE(bad.ok());
  EXPECT_EQ(bad->verdict, RetrainVerdict::kRejected) << bad->reason;
  EXPECT_EQ(db.registry.Get(0, *bad->version)->status, ModelStatus::kRejected);
  EXPECT_EQ((*db.registry.Active(0).value()).version, active_before);
}

TEST(RunRetrain, RecordsTheCadenceEstimatesExactlyForARestart) {
  Db db;
  const FeedConfig feed = Feed();
  db.Add(testing::LorenzSamples(1500, DataTime{}));
  RetrainInput in{&feed, 0, 3600 * kSecond, DataTimeFromMicros(15'000'000), std::nullopt, 1, true, nullptr};
  in.data_exponent = 0.1 / 3.0;  // not exact in decimal: the round trip must be
  in.dynamics_exponent = 0.9056;
  auto job = RunRetrain(*db.reader, db.registry, in);
  ASSERT_TRUE(job.ok() && job->version);
  const RecordedExponents back = ParseRecordedExponents(db.registry.Get(0, *job->version)->details);
  EXPECT_EQ(back.data, in.data_exponent);
  EXPECT_EQ(back.dynamics, in.dynamics_exponent);
  EXPECT_FALSE(ParseRecordedExponents("not json").data.has_value());
  EXPECT_FALSE(ParseRecordedExponents(R"({"exponents":{"data":"fast"}})").data.has_value());
}

TEST(RunRetrain, LockstepJobsAreDeterministicToTheByte) {
  std::string files[2];
  for (std::string& file : files) {
    Db db;
    const FeedConfig feed = Feed();
    db.Add(testing::LorenzSamples(1200, DataTime{}));
    RetrainInput in{&feed, 0, 3600 * kSecond, DataTimeFromMicros(12'000'000), std::nullopt, 7, true, nullptr};
    ASSERT_EQ(RunRetrain(*db.reader, db.registry, in)->verdict, RetrainVerdict::kPromoted);
    file = (*db.registry.Active(0).value()).file;
  }
  EXPECT_EQ(files[0], files[1]);
}

}  // namespace
}  // namespace lyapcast
