// SampleWriter: group commit, completion order, too-old and duplicate-time
// rejections, subscribers, draining on Stop, retention pruning and recovery
// from a full disk. Waits are bounded by a generous timeout; no test asserts
// on how long anything took.
#include "store/sample_writer.h"

#include <gtest/gtest.h>

#include "support/temp_dir.h"
#include <sqlite3.h>
#include <unistd.h>

#include <atomic>
#include <chrono>
#include <cmath>
#include <condition_variable>
#include <mutex>
#include <string>
#include <vector>

namespace lyapcast {
namespace {

namespace fs = std::filesystem;
using namespace std::chrono_literals;

constexpr auto kTimeout = 30s;

// A fresh folder per test, removed afterwards.
class TempDir : public lyapcast::testing::TempDir {
 public:
  TempDir() : lyapcast::testing::TempDir("lyapcast-writer-test") {}
};

DataTime Sec(double s) { return DataTimeFromMicros(std::llround(s * 1e6)); }

FeedSample Make(DataTime t, double v, std::uint32_t feed = 0) {
  FeedSample fs;
  fs.feed = feed;
  fs.sample.t = t;
  fs.sample.values = {v, -v};
  return fs;
}

std::unique_ptr<WindowStore> OpenStore(const fs::path& path) {
  StoreOptions options;
  options.path = path;
  auto store = WindowStore::Open(options);
  EXPECT_TRUE(store.ok()) << store.status().ToString();
  if (!store.ok()) return nullptr;
  Status s = (*store)->RegisterFeeds({{"rig", {"x", "y"}, kSecond}, {"rig-b", {"x", "y"}, kSecond}});
  EXPECT_TRUE(s.ok()) << s.ToString();
  return std::move(store).value();
}

// Collects completions from the writer thread; the test thread waits on it.
class Completions {
 public:
  WriteCompletion Callback(int id) {
    return [this, id](std::vector<WriteOutcome> outcomes) {
      std::lock_guard lock(mu_);
      order_.push_back(id);
      results_.push_back(std::move(outcomes));
      cv_.notify_all();
    };
  }
  // Waits until n completions arrived; false on timeout.
  bool WaitFor(size_t n) {
    std::unique_lock lock(mu_);
    return cv_.wait_for(lock, kTimeout, [&] { return results_.size() >= n; });
  }
  size_t count() {
    std::lock_guard lock(mu_);
    return results_.size();
  }
  std::vector<int> order() {
    std::lock_guard lock(mu_);
    return order_;
  }
  std::vector<WriteOutcome> result(size_t i) {
    std::lock_guard lock(mu_);
    return results_.at(i);
  }

 private:
  std::mutex mu_;
  std::condition_variable cv_;
  std::vector<int> order_;
  std::vector<std::vector<WriteOutcome>> results_;
};

// Submits and waits for the one completion.
std::vector<WriteOutcome> SubmitAndWait(SampleWriter& writer, std::vector<FeedSample> samples) {
  Completions done;
  EXPECT_TRUE(writer.Submit(std::move(samples), done.Callback(0)));
  EXPECT_TRUE(done.WaitFor(1));
  return done.count() == 1 ? done.result(0) : std::vector<WriteOutcome>{};
}

template <typename Pred>
bool Eventually(Pred pred) {
  const auto deadline = std::chrono::steady_clock::now() + kTimeout;
  while (std::chrono::steady_clock::now() < deadline) {
    if (pred()) return true;
    std::this_thread::sleep_for(2ms);
  }
  return pred();
}

WriterOptions FastOptions() {
  WriterOptions o;
  o.commit_every = Micros(2'000);
  o.retry_after_failure = Micros(10'000);
  o.retention = 3600 * kSecond;
  return o;
}

bool Accepted(const WriteOutcome& o) { return o.accepted; }
bool Rejected(const WriteOutcome& o, RejectReason r) { return !o.accepted && o.reason == r; }

TEST(SampleWriter, GroupsManySubmissionsIntoFewTransactions) {
  TempDir dir;
  WriterOptions options = FastOptions();
  constexpr int kSubmissions = 200;
  // The group closes when all of them are queued (commit_batch) long before
  // the generous commit_every runs out.
  options.commit_batch = kSubmissions;
  options.commit_every = 20 * kSecond;
  options.commit_quiet = 20 * kSecond;
  SampleWriter writer(OpenStore(dir.path() / "w.db"), 2, options);
  ASSERT_TRUE(writer.Start().ok());
  Completions done;
  for (int i = 0; i < kSubmissions; ++i) {
    ASSERT_TRUE(writer.Submit({Make(Sec(i), i)}, done.Callback(i)));
  }
  ASSERT_TRUE(done.WaitFor(kSubmissions));
  const WriterStats stats = writer.stats();
  EXPECT_LT(stats.transactions, static_cast<std::uint64_t>(kSubmissions));
  EXPECT_GE(stats.transactions, 1U);
  EXPECT_EQ(stats.samples_committed, static_cast<std::uint64_t>(kSubmissions));
  EXPECT_EQ(writer.extent(0).count, kSubmissions);
  EXPECT_EQ(writer.queued_samples(), 0U);
}

// A lone sender waits for its replies before sending more, so holding its
// group open for the whole commit_every would only slow it down: the group
// closes once nothing new arrived for commit_quiet. With commit_every at 60 s
// and the 30 s wait below, the completion arrives only through the quiet gap.
TEST(SampleWriter, CommitsEarlyWhenNoMoreSubmissionsArrive) {
  TempDir dir;
  WriterOptions options = FastOptions();
  options.commit_every = 60 * kSecond;
  options.commit_quiet = Micros(1'000);
  SampleWriter writer(OpenStore(dir.path() / "w.db"), 2, options);
  ASSERT_TRUE(writer.Start().ok());
  Completions done;
  ASSERT_TRUE(writer.Submit({Make(Sec(1), 1)}, done.Callback(0)));
  ASSERT_TRUE(done.WaitFor(1));
  EXPECT_EQ(writer.stats().transactions, 1U);
}

TEST(SampleWriter, CompletesInSubmissionOrderWithOneOutcomePerSample) {
  TempDir dir;
  SampleWriter writer(OpenStore(dir.path() / "w.db"), 2, FastOptions());
  ASSERT_TRUE(writer.Start().ok());
  Completions done;
  constexpr int kSubmissions = 50;
  int t = 0;
  for (int i = 0; i < kSubmissions; ++i) {
    std::vector<FeedSample> samples;
    for (int k = 0; k < i % 5; ++k) samples.push_back(Make(Sec(t++), k, static_cast<std::uint32_t>(i % 2)));
    ASSERT_TRUE(writer.Submit(std::move(samples), done.Callback(i)));
  }
  ASSERT_TRUE(done.WaitFor(kSubmissions));
  const std::vector<int> order = done.order();
  ASSERT_EQ(order.size(), static_cast<size_t>(kSubmissions));
  for (int i = 0; i < kSubmissions; ++i) {
    EXPECT_EQ(order[static_cast<size_t>(i)], i);
    const auto outcomes = done.result(static_cast<size_t>(i));
    EXPECT_EQ(outcomes.size(), static_cast<size_t>(i % 5));  // an empty submission completes too
    for (const WriteOutcome& o : outcomes) EXPECT_TRUE(o.accepted);
  }
  EXPECT_EQ(writer.extent(0).count + writer.extent(1).count, t);
}

TEST(SampleWriter, RejectsSamplesOlderThanRetentionBeforeTheNewest) {
  TempDir dir;
  WriterOptions options = FastOptions();
  options.retention = 10 * kSecond;
  SampleWriter writer(OpenStore(dir.path() / "w.db"), 2, options);
  ASSERT_TRUE(writer.Start().ok());
  ASSERT_TRUE(Accepted(SubmitAndWait(writer, {Make(Sec(100), 1)}).at(0)));

  auto outcomes = SubmitAndWait(writer, {Make(Sec(80), 2), Make(Sec(95), 3), Make(Sec(90), 4), Make(Sec(50), 5, 1)});
  ASSERT_EQ(outcomes.size(), 4U);
  EXPECT_TRUE(Rejected(outcomes[0], RejectReason::kTooOld));  // 20 s before the newest
  EXPECT_TRUE(Accepted(outcomes[1]));                          // late but within retention
  EXPECT_TRUE(Accepted(outcomes[2]));                          // exactly at the boundary
  EXPECT_TRUE(Accepted(outcomes[3]));                          // another feed has its own newest

  // Earlier samples of the same group count as newest.
  outcomes = SubmitAndWait(writer, {Make(Sec(200), 6), Make(Sec(150), 7), Make(Sec(195), 8)});
  ASSERT_EQ(outcomes.size(), 3U);
  EXPECT_TRUE(Accepted(outcomes[0]));
  EXPECT_TRUE(Rejected(outcomes[1], RejectReason::kTooOld));
  EXPECT_TRUE(Accepted(outcomes[2]));
  const FeedExtent e = writer.extent(0);
  EXPECT_EQ(e.count, 5);  // 100, 95, 90, 200, 195
  EXPECT_EQ(e.newest, Sec(200));
}

TEST(SampleWriter, RejectsADifferentSampleAtAStoredTime) {
  TempDir dir;
  SampleWriter writer(OpenStore(dir.path() / "w.db"), 2, FastOptions());
  ASSERT_TRUE(writer.Start().ok());
  ASSERT_TRUE(Accepted(SubmitAndWait(writer, {Make(Sec(1), 1.5)}).at(0)));
  const auto outcomes = SubmitAndWait(writer, {Make(Sec(1), 2.5), Make(Sec(1), 1.5)});
  ASSERT_EQ(outcomes.size(), 2U);
  EXPECT_TRUE(Rejected(outcomes[0], RejectReason::kDuplicateTime));
  EXPECT_TRUE(Accepted(outcomes[1]));  // identical resend
  EXPECT_EQ(writer.extent(0).count, 1);
  EXPECT_EQ(writer.stats().samples_committed, 1U);
}

TEST(SampleWriter, AMalformedSampleIsRejectedAloneNotWithItsGroup) {
  TempDir dir;
  SampleWriter writer(OpenStore(dir.path() / "w.db"), 2, FastOptions());
  ASSERT_TRUE(writer.Start().ok());
  FeedSample short_one = Make(Sec(2), 2);
  short_one.sample.values.pop_back();
  FeedSample bad_mask = Make(Sec(3), 3);
  bad_mask.sample.missing_mask = 0b100;  // a third channel on a two-channel feed
  const auto outcomes = SubmitAndWait(writer, {Make(Sec(1), 1), Make(Sec(1), 1, 7), short_one, bad_mask});
  ASSERT_EQ(outcomes.size(), 4U);
  EXPECT_TRUE(Accepted(outcomes[0]));
  EXPECT_TRUE(Rejected(outcomes[1], RejectReason::kUnknownFeed));
  EXPECT_TRUE(Rejected(outcomes[2], RejectReason::kFieldCount));
  EXPECT_TRUE(Rejected(outcomes[3], RejectReason::kFieldCount));
  EXPECT_TRUE(writer.storage_available());
  EXPECT_EQ(writer.extent(0).count, 1);
}

TEST(SampleWriter, SubscribersSeeOnlyNewlyStoredSamples) {
  TempDir dir;
  WriterOptions options = FastOptions();
  options.retention = 10 * kSecond;
  SampleWriter writer(OpenStore(dir.path() / "w.db"), 2, options);
  std::mutex mu;
  std::vector<std::vector<DataTime>> batches;
  writer.Subscribe([&](const CommittedBatch& batch) {
    std::lock_guard lock(mu);
    std::vector<DataTime> times;
    for (const FeedSample& fs : batch.samples) times.push_back(fs.sample.t);
    batches.push_back(std::move(times));
  });
  ASSERT_TRUE(writer.Start().ok());
  ASSERT_TRUE(Accepted(SubmitAndWait(writer, {Make(Sec(100), 1)}).at(0)));
  {
    std::lock_guard lock(mu);
    EXPECT_EQ(batches.size(), 1U) << "the subscriber saw the sample before its acknowledgement";
  }
  // A resend, a conflict and a too-old sample: nothing new, no batch.
  SubmitAndWait(writer, {Make(Sec(100), 1), Make(Sec(100), 9), Make(Sec(10), 1)});
  // Mixed: only the two new ones are handed on.
  SubmitAndWait(writer, {Make(Sec(101), 2), Make(Sec(100), 1), Make(Sec(5), 1), Make(Sec(102), 3)});
  writer.Stop();
  std::lock_guard lock(mu);
  ASSERT_EQ(batches.size(), 2U);
  EXPECT_EQ(batches[0], (std::vector<DataTime>{Sec(100)}));
  EXPECT_EQ(batches[1], (std::vector<DataTime>{Sec(101), Sec(102)}));
}

TEST(SampleWriter, SubscribersSeeAMergedRowWithItsSuspectMarksAndWhatItAdded) {
  TempDir dir;
  SampleWriter writer(OpenStore(dir.path() / "w.db"), 2, FastOptions());
  // The screen marks every x of -9999 suspect, as a bad-value rule would.
  writer.SetScreen([](FeedSample& fs) {
    if (!fs.sample.missing(0) && fs.sample.values[0] == -9999) {
      fs.sample.missing_mask |= 0b01;
      fs.sample.suspect_mask |= 0b01;
    }
  });
  std::mutex mu;
  std::vector<Sample> seen;
  std::vector<std::uint64_t> added;
  writer.Subscribe([&](const CommittedBatch& batch) {
    std::lock_guard lock(mu);
    ASSERT_EQ(batch.added.size(), batch.samples.size());
    for (const FeedSample& fs : batch.samples) seen.push_back(fs.sample);
    added.insert(added.end(), batch.added.begin(), batch.added.end());
  });
  ASSERT_TRUE(writer.Start().ok());
  FeedSample x_only = Make(Sec(1), -9999);
  x_only.sample.missing_mask = 0b10;
  FeedSample y_only = Make(Sec(1), 0);
  y_only.sample.values[1] = 2.5;
  y_only.sample.missing_mask = 0b01;
  ASSERT_TRUE(Accepted(SubmitAndWait(writer, {x_only}).at(0)));
  ASSERT_TRUE(Accepted(SubmitAndWait(writer, {y_only}).at(0)));
  writer.Stop();
  std::lock_guard lock(mu);
  ASSERT_EQ(seen.size(), 2U);
  EXPECT_EQ(added, (std::vector<std::uint64_t>{0b01, 0b10}));
  EXPECT_EQ(seen[1].suspect_mask, 0b01U) << "the stored suspect mark is handed on with the merged row";
  EXPECT_EQ(seen[1].missing_mask, 0b01U);
  EXPECT_EQ(seen[1].values[0], -9999);
  EXPECT_EQ(seen[1].values[1], 2.5);
}

TEST(SampleWriter, StopCommitsAndCompletesEverythingSubmitted) {
  TempDir dir;
  const fs::path db = dir.path() / "w.db";
  WriterOptions options = FastOptions();
  options.commit_every = 60 * kSecond;  // only Stop() ends the group window
  options.commit_batch = 1'000'000;
  Completions done;
  constexpr int kSubmissions = 40;
  {
    SampleWriter writer(OpenStore(db), 2, options);
    ASSERT_TRUE(writer.Start().ok());
    for (int i = 0; i < kSubmissions; ++i) {
      ASSERT_TRUE(writer.Submit({Make(Sec(2 * i), i), Make(Sec(2 * i + 1), i)}, done.Callback(i)));
    }
    writer.Stop();
    EXPECT_EQ(done.count(), static_cast<size_t>(kSubmissions));  // all completed before Stop returned
    EXPECT_FALSE(writer.Submit({Make(Sec(1000), 1)}, done.Callback(-1)));
    writer.Stop();  // idempotent
  }
  EXPECT_EQ(done.count(), static_cast<size_t>(kSubmissions));
  for (int i = 0; i < kSubmissions; ++i) {
    for (const WriteOutcome& o : done.result(static_cast<size_t>(i))) EXPECT_TRUE(o.accepted);
  }
  auto store = OpenStore(db);
  ASSERT_NE(store, nullptr);
  EXPECT_EQ(store->Extent(0)->count, 2 * kSubmissions);  // durable, visible to a new connection
}

TEST(SampleWriter, StopBeforeStartStillCompletesSubmissions) {
  TempDir dir;
  SampleWriter writer(OpenStore(dir.path() / "w.db"), 2, FastOptions());
  Completions done;
  ASSERT_TRUE(writer.Submit({Make(Sec(1), 1)}, done.Callback(0)));
  writer.Stop();
  ASSERT_EQ(done.count(), 1U);
  EXPECT_TRUE(Rejected(done.result(0).at(0), RejectReason::kShuttingDown));
  EXPECT_FALSE(writer.Start().ok());
}

TEST(SampleWriter, PrunesPastRetentionInBatches) {
  TempDir dir;
  WriterOptions options = FastOptions();
  options.retention = 10 * kSecond;
  options.prune_every = Micros(1'000);
  options.prune_batch = 7;
  SampleWriter writer(OpenStore(dir.path() / "w.db"), 2, options);
  ASSERT_TRUE(writer.Start().ok());
  std::vector<FeedSample> samples;
  for (int i = 0; i < 100; ++i) samples.push_back(Make(Sec(i), i));  // ascending: none too old on arrival
  std::vector<FeedSample> other;
  for (int i = 0; i < 5; ++i) other.push_back(Make(Sec(i), i, 1));
  samples.insert(samples.end(), other.begin(), other.end());
  const auto outcomes = SubmitAndWait(writer, samples);
  ASSERT_EQ(outcomes.size(), 105U);
  for (const WriteOutcome& o : outcomes) ASSERT_TRUE(o.accepted);
  // Kept: t in [89 s, 99 s] = 11 rows.
  ASSERT_TRUE(Eventually([&] { return writer.extent(0).count == 11; })) << writer.extent(0).count;
  EXPECT_EQ(writer.extent(0).oldest, Sec(89));
  EXPECT_EQ(writer.extent(0).newest, Sec(99));
  EXPECT_EQ(writer.stats().rows_pruned, 89U);
  EXPECT_EQ(writer.extent(1).count, 5);  // within its own retention
}

TEST(SampleWriter, PrunesABacklogAtStartUp) {
  TempDir dir;
  const fs::path db = dir.path() / "w.db";
  {
    auto store = OpenStore(db);
    ASSERT_NE(store, nullptr);
    std::vector<FeedSample> samples;
    for (int i = 0; i < 300; ++i) samples.push_back(Make(Sec(i), i));
    std::vector<InsertOutcome> outcomes;
    ASSERT_TRUE(store->InsertBatch(samples, &outcomes).ok());
  }
  WriterOptions options = FastOptions();
  options.retention = 50 * kSecond;
  options.prune_every = 60 * kSecond;  // the start-up pass continues without waiting for this
  options.prune_batch = 20;
  SampleWriter writer(OpenStore(db), 2, options);
  ASSERT_TRUE(writer.Start().ok());
  EXPECT_EQ(writer.extent(0).newest, Sec(299));
  ASSERT_TRUE(Eventually([&] { return writer.extent(0).count == 51; })) << writer.extent(0).count;
  EXPECT_EQ(writer.extent(0).oldest, Sec(249));
  // Ingest is served meanwhile and afterwards.
  EXPECT_TRUE(Accepted(SubmitAndWait(writer, {Make(Sec(300), 1)}).at(0)));
  writer.Stop();
  auto store = OpenStore(db);
  ASSERT_NE(store, nullptr);
  EXPECT_EQ(store->Extent(0)->count, 52);
}

TEST(SampleWriter, ReportsAFullDiskAndRecoversWhenSpaceReturns) {
  TempDir dir;
  auto store = OpenStore(dir.path() / "w.db");
  ASSERT_NE(store, nullptr);
  sqlite3* db = store->raw_handle();
  // Cap the file at its current size: the next page allocation fails with
  // SQLITE_FULL, as a full disk would.
  ASSERT_EQ(sqlite3_exec(db, "PRAGMA max_page_count = 1", nullptr, nullptr, nullptr), SQLITE_OK);
  WriterOptions options = FastOptions();
  SampleWriter writer(std::move(store), 2, options);
  ASSERT_TRUE(writer.Start().ok());
  EXPECT_TRUE(writer.storage_available());

  std::vector<FeedSample> batch;
  for (int i = 0; i < 1000; ++i) batch.push_back(Make(Sec(i), i));
  for (int attempt = 0; attempt < 2; ++attempt) {
    const auto outcomes = SubmitAndWait(writer, batch);
    ASSERT_EQ(outcomes.size(), batch.size());
    for (const WriteOutcome& o : outcomes) ASSERT_TRUE(Rejected(o, RejectReason::kStorageUnavailable));
    EXPECT_FALSE(writer.storage_available());
  }
  EXPECT_EQ(writer.extent(0).count, 0);
  EXPECT_GE(writer.stats().failed_commits, 2U);
  EXPECT_EQ(writer.stats().transactions, 0U);

  // Space returns. The connection is serialized (FULLMUTEX), so setting the
  // pragma from this thread is safe while the writer thread waits.
  ASSERT_EQ(sqlite3_exec(db, "PRAGMA max_page_count = 1000000", nullptr, nullptr, nullptr), SQLITE_OK);
  const auto outcomes = SubmitAndWait(writer, batch);
  ASSERT_EQ(outcomes.size(), batch.size());
  for (const WriteOutcome& o : outcomes) ASSERT_TRUE(Accepted(o));
  EXPECT_TRUE(writer.storage_available());
  EXPECT_EQ(writer.extent(0).count, 1000);
}

}  // namespace
}  // namespace lyapcast
