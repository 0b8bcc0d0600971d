// WindowStore: schema migration, feed layouts, insert/read round trips,
// duplicates, pruning and a full disk (simulated with max_page_count).
#include "store/window_store.h"

#include <gtest/gtest.h>

#include "support/temp_dir.h"
#include <sqlite3.h>
#include <unistd.h>

#include <atomic>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <fstream>
#include <string>
#include <vector>

namespace lyapcast {
namespace {

namespace fs = std::filesystem;

// A fresh folder per test, removed afterwards.
class TempDir : public lyapcast::testing::TempDir {
 public:
  TempDir() : lyapcast::testing::TempDir("lyapcast-store-test") {}
};

// Runs the sqlite3 shell on a database and returns its output, trailing
// newline removed: an outside view of what the store wrote.
std::string Shell(const fs::path& db, const std::string& sql) {
  const char* env = std::getenv("LYAPCAST_SQLITE3");
  const std::string shell = env != nullptr && *env != '\0' ? env : "/usr/bin/sqlite3";
  const std::string command = "'" + shell + "' '" + db.string() + "' \"" + sql + "\" 2>&1";
  FILE* pipe = ::popen(command.c_str(), "r");
  if (pipe == nullptr) return "<popen failed>";
  std::string out;
  char buf[256];
  size_t n;
  while ((n = std::fread(buf, 1, sizeof buf, pipe)) > 0) out.append(buf, n);
  ::pclose(pipe);
  while (!out.empty() && (out.back() == '\n' || out.back() == '\r')) out.pop_back();
  return out;
}

FeedLayout LoopA() { return {"loop-a", {"flow", "dtemp_h", "dtemp_v"}, Micros(500'000)}; }
FeedLayout Rig() { return {"rig-2", {"x", "y"}, Micros(1'000'000)}; }

DataTime Sec(double s) { return DataTimeFromMicros(std::llround(s * 1e6)); }

FeedSample Make(std::uint32_t feed, DataTime t, std::vector<double> values, std::uint64_t mask = 0) {
  FeedSample fs;
  fs.feed = feed;
  fs.sample.t = t;
  fs.sample.missing_mask = mask;
  for (size_t c = 0; c < values.size(); ++c) {
    if ((mask >> c) & 1U) values[c] = std::nan("");
  }
  fs.sample.values = std::move(values);
  return fs;
}

std::unique_ptr<WindowStore> OpenOrDie(const fs::path& path, bool read_only = false) {
  StoreOptions options;
  options.path = path;
  options.read_only = read_only;
  auto store = WindowStore::Open(options);
  EXPECT_TRUE(store.ok()) << store.status().ToString();
  if (!store.ok()) return nullptr;
  return std::move(store).value();
}

std::vector<Sample> ReadAll(WindowStore& store, std::uint32_t feed, int slice_rows = 1000,
                            DataTime from = DataTime::min(),
                            DataTime to = DataTime::max()) {
  std::vector<Sample> out;
  const Status s = store.ReadRange(feed, from, to, slice_rows, [&](std::span<const Sample> slice) {
    out.insert(out.end(), slice.begin(), slice.end());
    return true;
  });
  EXPECT_TRUE(s.ok()) << s.ToString();
  return out;
}

std::vector<InsertOutcome> InsertOk(WindowStore& store, const std::vector<FeedSample>& samples) {
  std::vector<InsertOutcome> outcomes;
  const Status s = store.InsertBatch(samples, &outcomes);
  EXPECT_TRUE(s.ok()) << s.ToString();
  EXPECT_EQ(outcomes.size(), samples.size());
  return outcomes;
}

TEST(WindowStoreSchema, MigratesAnEmptyFileToTheCurrentVersion) {
  TempDir dir;
  const fs::path db = dir.path() / "nested" / "window.db";  // parent folder created on open
  fs::create_directories(db.parent_path());
  { std::ofstream(db).flush(); }  // a zero-byte file, as `touch` leaves it
  ASSERT_EQ(fs::file_size(db), 0U);
  {
    auto store = OpenOrDie(db);
    ASSERT_NE(store, nullptr);
    EXPECT_EQ(store->schema_version(), kSchemaVersion);
  }
  EXPECT_EQ(Shell(db, "PRAGMA user_version"), std::to_string(kSchemaVersion));
  EXPECT_EQ(Shell(db, "SELECT name FROM sqlite_schema WHERE type='table' ORDER BY name"), "feeds\nmodels\nsamples");
  EXPECT_EQ(Shell(db, "PRAGMA journal_mode"), "wal");
}

TEST(WindowStoreSchema, CreatesTheParentFolder) {
  TempDir dir;
  const fs::path db = dir.path() / "var" / "deeper" / "lyapcast.db";
  auto store = OpenOrDie(db);
  ASSERT_NE(store, nullptr);
  EXPECT_TRUE(fs::exists(db));
}

TEST(WindowStoreSchema, ReopenIsIdempotentAndKeepsData) {
  TempDir dir;
  const fs::path db = dir.path() / "w.db";
  {
    auto store = OpenOrDie(db);
    ASSERT_NE(store, nullptr);
    ASSERT_TRUE(store->RegisterFeeds({LoopA()}).ok());
    InsertOk(*store, {Make(0, Sec(1), {1, 2, 3})});
  }
  for (int i = 0; i < 2; ++i) {
    auto store = OpenOrDie(db);
    ASSERT_NE(store, nullptr);
    EXPECT_EQ(store->schema_version(), kSchemaVersion);
    ASSERT_TRUE(store->RegisterFeeds({LoopA()}).ok());
    auto extent = store->Extent(0);
    ASSERT_TRUE(extent.ok());
    EXPECT_EQ(extent->count, 1);
  }
  EXPECT_EQ(Shell(db, "PRAGMA user_version"), std::to_string(kSchemaVersion));
  EXPECT_EQ(Shell(db, "SELECT count(*) FROM feeds"), "1");
}

TEST(WindowStoreSchema, RefusesAFileFromANewerLyapcast) {
  TempDir dir;
  const fs::path db = dir.path() / "w.db";
  { ASSERT_NE(OpenOrDie(db), nullptr); }
  Shell(db, "PRAGMA user_version = 99");
  ASSERT_EQ(Shell(db, "PRAGMA user_version"), "99");
  StoreOptions options;
  options.path = db;
  auto store = WindowStore::Open(options);
  ASSERT_FALSE(store.ok());
  EXPECT_EQ(store.status().code(), StatusCode::kFailedPrecondition);
  EXPECT_NE(store.status().message().find("newer lyapcast"), std::string::npos) << store.status().message();
  EXPECT_NE(store.status().message().find(db.string()), std::string::npos) << store.status().message();
  EXPECT_EQ(Shell(db, "PRAGMA user_version"), "99");  // left as it was
}

TEST(WindowStoreSchema, RefusesAnotherProgramsDatabase) {
  TempDir dir;
  const fs::path db = dir.path() / "other.db";
  Shell(db, "CREATE TABLE invoices(id INTEGER PRIMARY KEY)");
  StoreOptions options;
  options.path = db;
  auto store = WindowStore::Open(options);
  ASSERT_FALSE(store.ok());
  EXPECT_EQ(store.status().code(), StatusCode::kFailedPrecondition);
  EXPECT_NE(store.status().message().find("not a lyapcast store"), std::string::npos) << store.status().message();
  EXPECT_EQ(Shell(db, "SELECT name FROM sqlite_schema WHERE type='table'"), "invoices");
}

TEST(WindowStoreSchema, ReportsAFileThatIsNotADatabase) {
  TempDir dir;
  const fs::path db = dir.path() / "notes.db";
  {
    std::ofstream out(db);
    for (int i = 0; i < 100; ++i) out << "this is a text file, not an SQLite database\n";
  }
  StoreOptions options;
  options.path = db;
  auto store = WindowStore::Open(options);
  ASSERT_FALSE(store.ok());
  EXPECT_EQ(store.status().code(), StatusCode::kCorruption) << store.status().ToString();
}

TEST(WindowStoreFeeds, RegistersNewFeedsAndAcceptsTheSameAgain) {
  TempDir dir;
  const fs::path db = dir.path() / "w.db";
  auto store = OpenOrDie(db);
  ASSERT_NE(store, nullptr);
  ASSERT_TRUE(store->RegisterFeeds({LoopA(), Rig()}).ok());
  EXPECT_EQ(store->channel_count(0), 3);
  EXPECT_EQ(store->channel_count(1), 2);
  EXPECT_EQ(store->channel_count(2), 0);
  ASSERT_TRUE(store->RegisterFeeds({LoopA(), Rig()}).ok());
  // A different config order binds indexes to the same stored feeds.
  ASSERT_TRUE(store->RegisterFeeds({Rig(), LoopA()}).ok());
  EXPECT_EQ(store->channel_count(0), 2);
  EXPECT_EQ(Shell(db, "SELECT name || ':' || channels || ':' || step_us FROM feeds ORDER BY name"),
            "loop-a:flow,dtemp_h,dtemp_v:500000\nrig-2:x,y:1000000");
}

TEST(WindowStoreFeeds, FeedsMissingFromTheConfigAreKept) {
  TempDir dir;
  const fs::path db = dir.path() / "w.db";
  auto store = OpenOrDie(db);
  ASSERT_NE(store, nullptr);
  ASSERT_TRUE(store->RegisterFeeds({LoopA(), Rig()}).ok());
  ASSERT_TRUE(store->RegisterFeeds({Rig()}).ok());
  EXPECT_EQ(Shell(db, "SELECT count(*) FROM feeds"), "2");
}

TEST(WindowStoreFeeds, RefusesChangedChannelsWithAHelpfulMessage) {
  TempDir dir;
  const fs::path db = dir.path() / "w.db";
  auto store = OpenOrDie(db);
  ASSERT_NE(store, nullptr);
  ASSERT_TRUE(store->RegisterFeeds({LoopA()}).ok());
  FeedLayout changed = LoopA();
  changed.channels = {"flow", "dtemp_h"};
  const Status s = store->RegisterFeeds({Rig(), changed});
  ASSERT_EQ(s.code(), StatusCode::kFailedPrecondition);
  EXPECT_EQ(s.message(), "feed 'loop-a': the store at " + db.string() +
                             " recorded channels [flow, dtemp_h, dtemp_v] and step 500ms, the config now says channels "
                             "[flow, dtemp_h] and step 500ms. A feed's layout cannot change under stored data: restore "
                             "the old channels/step, give the changed feed a new id, or move the database aside.");
  // All or nothing: the new feed of the refused call was not recorded.
  EXPECT_EQ(Shell(db, "SELECT group_concat(name) FROM feeds"), "loop-a");
  // Renamed or reordered channels are a change too.
  changed.channels = {"dtemp_h", "flow", "dtemp_v"};
  EXPECT_EQ(store->RegisterFeeds({changed}).code(), StatusCode::kFailedPrecondition);
}

TEST(WindowStoreFeeds, RefusesAChangedStep) {
  TempDir dir;
  const fs::path db = dir.path() / "w.db";
  {
    auto store = OpenOrDie(db);
    ASSERT_NE(store, nullptr);
    ASSERT_TRUE(store->RegisterFeeds({LoopA()}).ok());
  }
  auto store = OpenOrDie(db);  // also across a restart
  ASSERT_NE(store, nullptr);
  FeedLayout changed = LoopA();
  changed.step = kSecond;
  const Status s = store->RegisterFeeds({changed});
  ASSERT_EQ(s.code(), StatusCode::kFailedPrecondition);
  EXPECT_NE(s.message().find("recorded channels [flow, dtemp_h, dtemp_v] and step 500ms"), std::string::npos)
      << s.message();
  EXPECT_NE(s.message().find("now says channels [flow, dtemp_h, dtemp_v] and step 1s"), std::string::npos)
      << s.message();
}

TEST(WindowStoreFeeds, ReadOnlyBindsExistingFeedsOnly) {
  TempDir dir;
  const fs::path db = dir.path() / "w.db";
  StoreOptions options;
  options.path = db;
  options.read_only = true;
  auto missing = WindowStore::Open(options);
  ASSERT_FALSE(missing.ok());
  EXPECT_EQ(missing.status().code(), StatusCode::kNotFound);
  EXPECT_FALSE(fs::exists(db));

  auto writer = OpenOrDie(db);
  ASSERT_NE(writer, nullptr);
  ASSERT_TRUE(writer->RegisterFeeds({LoopA()}).ok());
  InsertOk(*writer, {Make(0, Sec(1), {1, 2, 3}), Make(0, Sec(2), {4, 5, 6})});

  auto reader = OpenOrDie(db, /*read_only=*/true);
  ASSERT_NE(reader, nullptr);
  const Status absent = reader->RegisterFeeds({LoopA(), Rig()});
  EXPECT_EQ(absent.code(), StatusCode::kNotFound) << absent.ToString();
  EXPECT_NE(absent.message().find("rig-2"), std::string::npos);
  FeedLayout changed = LoopA();
  changed.step = Micros(250'000);
  EXPECT_EQ(reader->RegisterFeeds({changed}).code(), StatusCode::kFailedPrecondition);
  ASSERT_TRUE(reader->RegisterFeeds({LoopA()}).ok());
  EXPECT_EQ(ReadAll(*reader, 0).size(), 2U);
  std::vector<InsertOutcome> outcomes;
  const std::vector<FeedSample> more = {Make(0, Sec(3), {1, 1, 1})};
  EXPECT_FALSE(reader->InsertBatch(more, &outcomes).ok());
  // The reader sees the writer's later commits in its next read.
  InsertOk(*writer, more);
  EXPECT_EQ(ReadAll(*reader, 0).size(), 3U);
}

TEST(WindowStoreData, RoundTripsValuesAndMissingChannels) {
  TempDir dir;
  auto store = OpenOrDie(dir.path() / "w.db");
  ASSERT_NE(store, nullptr);
  ASSERT_TRUE(store->RegisterFeeds({LoopA(), Rig()}).ok());
  const std::vector<FeedSample> in = {
      Make(0, Sec(1), {0.31, 1.2, -0.4}),
      Make(0, Sec(1.5), {0.0, 1.25, -1e-300}, 0b001),  // flow missing
      Make(0, Sec(2), {5.0, 0.0, 7.0}, 0b010),          // dtemp_h missing
      Make(0, Sec(2.5), {0.1, 0.2, 0.3}, 0b110),        // only flow present
      Make(1, Sec(1), {-0.0, 3.5}),                    // another feed, same time
  };
  const auto outcomes = InsertOk(*store, in);
  for (InsertOutcome o : outcomes) EXPECT_EQ(o, InsertOutcome::kInserted);

  const std::vector<Sample> out = ReadAll(*store, 0);
  ASSERT_EQ(out.size(), 4U);
  for (size_t i = 0; i < out.size(); ++i) {
    EXPECT_EQ(out[i], in[i].sample) << "row " << i;
    ASSERT_EQ(out[i].values.size(), 3U);
    for (int c = 0; c < 3; ++c) {
      EXPECT_EQ(std::isnan(out[i].values[static_cast<size_t>(c)]), out[i].missing(c)) << "row " << i << " ch " << c;
    }
  }
  EXPECT_EQ(out[1].missing_mask, 0b001U);
  EXPECT_EQ(out[1].values[2], -1e-300);
  EXPECT_EQ(out[3].missing_mask, 0b110U);
  EXPECT_EQ(out[3].values[0], 0.1);

  const std::vector<Sample> rig = ReadAll(*store, 1);
  ASSERT_EQ(rig.size(), 1U);
  EXPECT_TRUE(std::signbit(rig[0].values[0]));  // bit-exact, -0.0 stays -0.0
  EXPECT_EQ(rig[0].values[1], 3.5);

  // Present values only, 8 bytes each.
  EXPECT_EQ(Shell(dir.path() / "w.db",
                  "SELECT group_concat(n) FROM (SELECT length(vals) AS n FROM samples WHERE feed_id = "
                  "(SELECT feed_id FROM feeds WHERE name = 'loop-a') ORDER BY t_us)"),
            "24,16,16,8");
}

TEST(WindowStoreData, OutOfOrderInsertsReadBackInTimeOrder) {
  TempDir dir;
  auto store = OpenOrDie(dir.path() / "w.db");
  ASSERT_NE(store, nullptr);
  ASSERT_TRUE(store->RegisterFeeds({Rig()}).ok());
  const std::vector<int> order = {5, 1, 9, 3, 7, 0, 8, 2, 6, 4};
  for (int i : order) InsertOk(*store, {Make(0, Sec(i), {double(i), -double(i)})});
  const auto out = ReadAll(*store, 0, 4);
  ASSERT_EQ(out.size(), 10U);
  for (int i = 0; i < 10; ++i) {
    EXPECT_EQ(out[static_cast<size_t>(i)].t, Sec(i));
    EXPECT_EQ(out[static_cast<size_t>(i)].values[0], double(i));
  }
  auto extent = store->Extent(0);
  ASSERT_TRUE(extent.ok());
  EXPECT_EQ(extent->count, 10);
  EXPECT_EQ(extent->oldest, Sec(0));
  EXPECT_EQ(extent->newest, Sec(9));
}

TEST(WindowStoreData, ReadsInSlicesAndStopsEarly) {
  TempDir dir;
  auto store = OpenOrDie(dir.path() / "w.db");
  ASSERT_NE(store, nullptr);
  ASSERT_TRUE(store->RegisterFeeds({Rig()}).ok());
  std::vector<FeedSample> in;
  for (int i = 0; i < 10; ++i) in.push_back(Make(0, Sec(i), {double(i), 0}));
  InsertOk(*store, in);

  std::vector<size_t> sizes;
  std::vector<DataTime> times;
  ASSERT_TRUE(store
                  ->ReadRange(0, Sec(0), Sec(100), 3,
                              [&](std::span<const Sample> slice) {
                                sizes.push_back(slice.size());
                                for (const Sample& s : slice) times.push_back(s.t);
                                return true;
                              })
                  .ok());
  EXPECT_EQ(sizes, (std::vector<size_t>{3, 3, 3, 1}));
  ASSERT_EQ(times.size(), 10U);
  for (int i = 0; i < 10; ++i) EXPECT_EQ(times[static_cast<size_t>(i)], Sec(i));

  int calls = 0;
  ASSERT_TRUE(store
                  ->ReadRange(0, Sec(0), Sec(100), 3,
                              [&](std::span<const Sample>) {
                                ++calls;
                                return false;
                              })
                  .ok());
  EXPECT_EQ(calls, 1);

  // from is inclusive, to exclusive.
  const auto part = ReadAll(*store, 0, 2, Sec(2), Sec(5));
  ASSERT_EQ(part.size(), 3U);
  EXPECT_EQ(part.front().t, Sec(2));
  EXPECT_EQ(part.back().t, Sec(4));
  EXPECT_TRUE(ReadAll(*store, 0, 3, Sec(50), Sec(60)).empty());
  EXPECT_EQ(store->ReadRange(0, DataTime{}, DataTimeFromMicros(1), 0, [](std::span<const Sample>) { return true; }).code(),
            StatusCode::kInvalidArgument);
}

TEST(WindowStoreData, IdenticalResendIsStoredOnceAndAConflictIsRefused) {
  TempDir dir;
  auto store = OpenOrDie(dir.path() / "w.db");
  ASSERT_NE(store, nullptr);
  ASSERT_TRUE(store->RegisterFeeds({LoopA()}).ok());
  InsertOk(*store, {Make(0, Sec(1), {1, 2, 3}, 0b100)});

  // Same values and mask (the missing channel's placeholder does not matter).
  auto outcomes = InsertOk(*store, {Make(0, Sec(1), {1, 2, 99}, 0b100), Make(0, Sec(2), {4, 5, 6})});
  EXPECT_EQ(outcomes, (std::vector<InsertOutcome>{InsertOutcome::kDuplicateSame, InsertOutcome::kInserted}));
  EXPECT_EQ(store->Extent(0)->count, 2);

  // A channel stored with another value is a conflict, whatever else the
  // sample carries; the same values on fewer channels are a duplicate.
  outcomes = InsertOk(*store, {Make(0, Sec(1), {1.5, 2, 3.5}), Make(0, Sec(2), {4, 5, 6.0000001}),
                               Make(0, Sec(2), {4, 5, 6}, 0b001)});
  EXPECT_EQ(outcomes, (std::vector<InsertOutcome>{InsertOutcome::kDuplicateConflict,
                                                  InsertOutcome::kDuplicateConflict, InsertOutcome::kDuplicateSame}));
  const auto rows = ReadAll(*store, 0);
  ASSERT_EQ(rows.size(), 2U);
  EXPECT_EQ(rows[0], Make(0, Sec(1), {1, 2, 0}, 0b100).sample);  // unchanged
  EXPECT_EQ(rows[1], Make(0, Sec(2), {4, 5, 6}).sample);

  // Within one batch the second of two equal times sees the first.
  outcomes = InsertOk(*store, {Make(0, Sec(3), {1, 1, 1}), Make(0, Sec(3), {1, 1, 1}), Make(0, Sec(3), {2, 2, 2})});
  EXPECT_EQ(outcomes, (std::vector<InsertOutcome>{InsertOutcome::kInserted, InsertOutcome::kDuplicateSame,
                                                  InsertOutcome::kDuplicateConflict}));
  EXPECT_EQ(store->Extent(0)->count, 3);
}

TEST(WindowStoreData, PartialRowsAtOneTimeMergeChannelByChannel) {
  TempDir dir;
  auto store = OpenOrDie(dir.path() / "w.db");
  ASSERT_NE(store, nullptr);
  ASSERT_TRUE(store->RegisterFeeds({LoopA()}).ok());
  // A fast source writes channels 0 and 1; a slow one (a lab assay) writes
  // channel 2 at the same time, in the same batch and in a later one.
  std::vector<InsertOutcome> outcomes;
  std::vector<MergedRow> merged;
  ASSERT_TRUE(store
                  ->InsertBatch(std::vector<FeedSample>{Make(0, Sec(1), {1, 2, 0}, 0b100),
                                                        Make(0, Sec(1), {0, 0, 3}, 0b011)},
                                &outcomes, &merged)
                  .ok());
  EXPECT_EQ(outcomes, (std::vector<InsertOutcome>{InsertOutcome::kInserted, InsertOutcome::kMerged}));
  EXPECT_EQ(merged[1].row, Make(0, Sec(1), {1, 2, 3}).sample) << "the whole row as stored now";
  EXPECT_EQ(merged[1].added, 0b100U);
  InsertOk(*store, {Make(0, Sec(2), {4, 0, 0}, 0b110)});
  outcomes = InsertOk(*store, {Make(0, Sec(2), {0, 5, 0}, 0b101), Make(0, Sec(2), {4, 0, 6}, 0b010)});
  EXPECT_EQ(outcomes, (std::vector<InsertOutcome>{InsertOutcome::kMerged, InsertOutcome::kMerged}));
  const auto rows = ReadAll(*store, 0);
  ASSERT_EQ(rows.size(), 2U);
  EXPECT_EQ(rows[0], Make(0, Sec(1), {1, 2, 3}).sample);
  EXPECT_EQ(rows[1], Make(0, Sec(2), {4, 5, 6}).sample);
  EXPECT_EQ(store->Extent(0)->count, 2) << "merging adds no row";
}

TEST(WindowStoreData, SuspectReadingsAreStoredAsMissingWithTheirRawValues) {
  TempDir dir;
  auto store = OpenOrDie(dir.path() / "w.db");
  ASSERT_NE(store, nullptr);
  ASSERT_TRUE(store->RegisterFeeds({LoopA()}).ok());
  FeedSample fs = Make(0, Sec(1), {1, -9999, 3});
  fs.sample.suspect_mask = 0b010;
  fs.sample.missing_mask = 0b010;
  InsertOk(*store, {fs});
  const auto rows = ReadAll(*store, 0);
  ASSERT_EQ(rows.size(), 1U);
  EXPECT_EQ(rows[0], fs.sample);
  EXPECT_EQ(rows[0].values[1], -9999) << "the raw reading comes back";
  // Readers of the file that know only mask and vals see a gap.
  EXPECT_EQ(Shell(dir.path() / "w.db", "SELECT mask, length(vals), suspect, length(suspect_vals) FROM samples"), "2|16|2|8");
}

// A partial row with channel `c` marked suspect (its raw reading kept).
FeedSample MarkSuspect(FeedSample fs, int c, double raw) {
  fs.sample.values[static_cast<size_t>(c)] = raw;
  fs.sample.missing_mask |= std::uint64_t{1} << c;
  fs.sample.suspect_mask |= std::uint64_t{1} << c;
  return fs;
}

TEST(WindowStoreData, PartialRowsMergeWithTheirSuspectMarksAndRawReadings) {
  TempDir dir;
  auto store = OpenOrDie(dir.path() / "w.db");
  ASSERT_NE(store, nullptr);
  ASSERT_TRUE(store->RegisterFeeds({LoopA()}).ok());
  std::vector<InsertOutcome> outcomes;
  std::vector<MergedRow> merged;

  // Stored: flow clean, dtemp_h suspect; a second source adds dtemp_v.
  // The merged row keeps the stored mark and raw reading.
  InsertOk(*store, {MarkSuspect(Make(0, Sec(1), {1, 0, 0}, 0b100), 1, -9999)});
  ASSERT_TRUE(store->InsertBatch(std::vector<FeedSample>{Make(0, Sec(1), {0, 0, 3}, 0b011)}, &outcomes, &merged).ok());
  EXPECT_EQ(outcomes, (std::vector<InsertOutcome>{InsertOutcome::kMerged}));
  const Sample want1 = MarkSuspect(Make(0, Sec(1), {1, 0, 3}), 1, -9999).sample;
  EXPECT_EQ(merged[0].row, want1) << "the whole row, suspect mark included";
  EXPECT_EQ(merged[0].added, 0b100U);

  // Stored: flow clean only; the new partial row brings a suspect dtemp_h,
  // then a third one a suspect dtemp_v (in one batch with a clean row).
  InsertOk(*store, {Make(0, Sec(2), {4, 0, 0}, 0b110)});
  ASSERT_TRUE(store
                  ->InsertBatch(std::vector<FeedSample>{MarkSuspect(Make(0, Sec(2), {0, 0, 0}, 0b101), 1, 1e30),
                                                        MarkSuspect(Make(0, Sec(2), {0, 0, 0}, 0b011), 2, -1e30)},
                                &outcomes, &merged)
                  .ok());
  EXPECT_EQ(outcomes, (std::vector<InsertOutcome>{InsertOutcome::kMerged, InsertOutcome::kMerged}));
  const Sample want2 = MarkSuspect(MarkSuspect(Make(0, Sec(2), {4, 0, 0}), 1, 1e30), 2, -1e30).sample;
  EXPECT_EQ(merged[0].added, 0b010U);
  EXPECT_EQ(merged[1].row, want2);
  EXPECT_EQ(merged[1].added, 0b100U);

  const auto rows = ReadAll(*store, 0);
  ASSERT_EQ(rows.size(), 2U);
  EXPECT_EQ(rows[0], want1);
  EXPECT_EQ(rows[1], want2);
  EXPECT_EQ(rows[1].values[1], 1e30) << "the raw reading comes back";
  EXPECT_EQ(Shell(dir.path() / "w.db",
                  "SELECT group_concat(r, ' ') FROM (SELECT mask || '|' || length(vals) || '|' || suspect || '|' || "
                  "length(suspect_vals) AS r FROM samples ORDER BY t_us)"),
            "2|16|2|8 6|8|6|16");
}

TEST(WindowStoreData, ASuspectReadingConflictsLikeAValueAndARepeatIsTheSame) {
  TempDir dir;
  auto store = OpenOrDie(dir.path() / "w.db");
  ASSERT_NE(store, nullptr);
  ASSERT_TRUE(store->RegisterFeeds({LoopA()}).ok());
  const FeedSample stored = MarkSuspect(Make(0, Sec(1), {1, 0, 0}, 0b100), 1, -9999);
  InsertOk(*store, {stored});

  // Another reading where one is stored, suspect or clean on either side.
  auto outcomes = InsertOk(*store, {Make(0, Sec(1), {0, 5, 0}, 0b101),                           // clean vs suspect
                                    MarkSuspect(Make(0, Sec(1), {0, 0, 0}, 0b101), 1, 1e30),     // other raw
                                    MarkSuspect(Make(0, Sec(1), {0, 0, 0}, 0b110), 0, 7),        // suspect vs clean
                                    MarkSuspect(Make(0, Sec(1), {0, 0, 3}, 0b001), 1, -9998)});  // adds, but conflicts
  EXPECT_EQ(outcomes, std::vector<InsertOutcome>(4, InsertOutcome::kDuplicateConflict));

  // The same readings again, also when the resend was screened differently
  // (dtemp_h clean this time, flow suspect): the stored marks stay.
  outcomes = InsertOk(*store, {stored, Make(0, Sec(1), {1, -9999, 0}, 0b100),
                               MarkSuspect(Make(0, Sec(1), {0, 0, 0}, 0b110), 0, 1)});
  EXPECT_EQ(outcomes, std::vector<InsertOutcome>(3, InsertOutcome::kDuplicateSame));
  const auto rows = ReadAll(*store, 0);
  ASSERT_EQ(rows.size(), 1U);
  EXPECT_EQ(rows[0], stored.sample);
}

TEST(WindowStoreData, RejectsMalformedBatchesWithoutStoringAnything) {
  TempDir dir;
  auto store = OpenOrDie(dir.path() / "w.db");
  ASSERT_NE(store, nullptr);
  ASSERT_TRUE(store->RegisterFeeds({LoopA()}).ok());
  std::vector<InsertOutcome> outcomes;
  const std::vector<FeedSample> wrong_count = {Make(0, Sec(1), {1, 2, 3}), Make(0, Sec(2), {1, 2})};
  EXPECT_EQ(store->InsertBatch(wrong_count, &outcomes).code(), StatusCode::kInvalidArgument);
  const std::vector<FeedSample> wrong_feed = {Make(0, Sec(1), {1, 2, 3}), Make(7, Sec(2), {1, 2, 3})};
  EXPECT_EQ(store->InsertBatch(wrong_feed, &outcomes).code(), StatusCode::kInvalidArgument);
  const std::vector<FeedSample> wrong_mask = {Make(0, Sec(1), {1, 2, 3}, 0b1000)};
  EXPECT_EQ(store->InsertBatch(wrong_mask, &outcomes).code(), StatusCode::kInvalidArgument);
  FeedSample suspect_not_missing = Make(0, Sec(1), {1, 2, 3});
  suspect_not_missing.sample.suspect_mask = 0b010;  // a suspect channel must also be missing
  EXPECT_EQ(store->InsertBatch(std::vector<FeedSample>{suspect_not_missing}, &outcomes).code(),
            StatusCode::kInvalidArgument);
  EXPECT_EQ(store->Extent(0)->count, 0);
}

TEST(WindowStoreData, ExtentOfAnEmptyFeedIsZero) {
  TempDir dir;
  auto store = OpenOrDie(dir.path() / "w.db");
  ASSERT_NE(store, nullptr);
  ASSERT_TRUE(store->RegisterFeeds({LoopA(), Rig()}).ok());
  InsertOk(*store, {Make(1, Sec(5), {1, 2})});
  auto extent = store->Extent(0);
  ASSERT_TRUE(extent.ok());
  EXPECT_EQ(extent->count, 0);
  EXPECT_EQ(extent->oldest, DataTime{});
  EXPECT_EQ(extent->newest, DataTimeFromMicros(0));
  EXPECT_FALSE(store->Extent(2).ok());
}

TEST(WindowStorePrune, RespectsMaxRowsAndCutoff) {
  TempDir dir;
  auto store = OpenOrDie(dir.path() / "w.db");
  ASSERT_NE(store, nullptr);
  ASSERT_TRUE(store->RegisterFeeds({Rig(), LoopA()}).ok());
  std::vector<FeedSample> in;
  for (int i = 0; i < 10; ++i) {
    in.push_back(Make(0, Sec(i), {double(i), 0}));
    in.push_back(Make(1, Sec(i), {double(i), 0, 0}));
  }
  InsertOk(*store, in);

  auto deleted = store->PruneBatch(0, Sec(5), 3);
  ASSERT_TRUE(deleted.ok());
  EXPECT_EQ(*deleted, 3);
  EXPECT_EQ(ReadAll(*store, 0).front().t, Sec(3));
  deleted = store->PruneBatch(0, Sec(5), 3);
  ASSERT_TRUE(deleted.ok());
  EXPECT_EQ(*deleted, 2);  // only t=3,4 are below the cutoff
  deleted = store->PruneBatch(0, Sec(5), 3);
  ASSERT_TRUE(deleted.ok());
  EXPECT_EQ(*deleted, 0);
  auto extent = store->Extent(0);
  ASSERT_TRUE(extent.ok());
  EXPECT_EQ(extent->count, 5);
  EXPECT_EQ(extent->oldest, Sec(5));
  EXPECT_EQ(extent->newest, Sec(9));
  EXPECT_EQ(store->Extent(1)->count, 10);  // the other feed is untouched

  // A batch exactly as large as what is below the cutoff takes all of it.
  deleted = store->PruneBatch(1, Sec(4), 4);
  ASSERT_TRUE(deleted.ok());
  EXPECT_EQ(*deleted, 4);
  EXPECT_EQ(store->Extent(1)->oldest, Sec(4));
  deleted = store->PruneBatch(1, Sec(100), 0);
  ASSERT_TRUE(deleted.ok());
  EXPECT_EQ(*deleted, 0);
}

// Caps the database at its current size so the next page allocation fails
// with SQLITE_FULL, as a full disk would. Returns the cap.
long long FillDisk(WindowStore& store) {
  sqlite3* db = store.raw_handle();
  sqlite3_stmt* stmt = nullptr;
  long long pages = 0;
  if (sqlite3_prepare_v2(db, "PRAGMA page_count", -1, &stmt, nullptr) == SQLITE_OK &&
      sqlite3_step(stmt) == SQLITE_ROW) {
    pages = sqlite3_column_int64(stmt, 0);
  }
  sqlite3_finalize(stmt);
  const std::string sql = "PRAGMA max_page_count = " + std::to_string(pages);
  EXPECT_EQ(sqlite3_exec(db, sql.c_str(), nullptr, nullptr, nullptr), SQLITE_OK);
  return pages;
}

void FreeDisk(WindowStore& store) {
  EXPECT_EQ(sqlite3_exec(store.raw_handle(), "PRAGMA max_page_count = 1000000", nullptr, nullptr, nullptr), SQLITE_OK);
}

TEST(WindowStoreFull, ADiskFullBatchStoresNothingAndLaterSucceeds) {
  TempDir dir;
  auto store = OpenOrDie(dir.path() / "w.db");
  ASSERT_NE(store, nullptr);
  ASSERT_TRUE(store->RegisterFeeds({LoopA()}).ok());
  InsertOk(*store, {Make(0, Sec(0), {1, 2, 3})});
  FillDisk(*store);

  std::vector<FeedSample> batch;
  for (int i = 1; i <= 2000; ++i) batch.push_back(Make(0, Sec(i), {double(i), 2, 3}));
  std::vector<InsertOutcome> outcomes;
  for (int attempt = 0; attempt < 2; ++attempt) {  // the connection stays usable after a failure
    const Status s = store->InsertBatch(batch, &outcomes);
    ASSERT_EQ(s.code(), StatusCode::kUnavailable) << s.ToString();
    EXPECT_NE(s.message().find("full"), std::string::npos) << s.message();
    EXPECT_EQ(store->Extent(0)->count, 1);  // nothing of the batch
  }
  EXPECT_EQ(ReadAll(*store, 0).size(), 1U);

  FreeDisk(*store);
  outcomes = InsertOk(*store, batch);
  EXPECT_EQ(outcomes, std::vector<InsertOutcome>(batch.size(), InsertOutcome::kInserted));
  EXPECT_EQ(store->Extent(0)->count, 2001);
}

}  // namespace
}  // namespace lyapcast
