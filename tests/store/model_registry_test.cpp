// ModelRegistry: versions per feed, one active version at a time, rejected
// candidates recorded with their reason, activation (pin / roll back),
// pruning that spares the active version and its parent, each version's
// origin (trained or uploaded), and the forward migration of files of schema
// versions 1, 2 and 3 (built with the sqlite3 shell).
#include "store/model_registry.h"

#include <gtest/gtest.h>

#include <cstdio>
#include <cstdlib>
#include <string>

#include "support/temp_dir.h"

namespace lyapcast {
namespace {

namespace fs = std::filesystem;

std::string Shell(const fs::path& db, const std::string& sql) {
  const char* shell = std::getenv("LYAPCAST_SQLITE3");
  const std::string cmd = std::string(shell ? shell : "sqlite3") + " '" + db.string() + "' \"" + sql + "\"";
  std::string out;
  if (FILE* p = popen(cmd.c_str(), "r")) {
    char buf[256];
    while (std::fgets(buf, sizeof buf, p)) out += buf;
    pclose(p);
  }
  while (!out.empty() && out.back() == '\n') out.pop_back();
  return out;
}

std::unique_ptr<WindowStore> Open(const fs::path& db) {
  auto store = WindowStore::Open(StoreOptions{db, false, 5000});
  EXPECT_TRUE(store.ok()) << store.status().ToString();
  EXPECT_TRUE((*store)->RegisterFeeds({{"loop-a", {"flow", "dtemp_h"}, Micros(500'000)}, {"rig-b", {"x"}, Micros(100'000)}}).ok());
  return std::move(store).value();
}

ModelRecord Candidate(ModelStatus status, const std::string& reason, std::optional<std::int64_t> parent = {},
                      std::uint32_t feed = 0) {
  ModelRecord r;
  r.feed = feed;
  r.status = status;
  r.reason = reason;
  r.parent = parent;
  r.trained_from = DataTimeFromMicros(1'000'000);
  r.trained_to = DataTimeFromMicros(2'000'000);
  r.validation_error = 0.01;
  r.details = R"({"iterations":10})";
  r.file = std::string("LYAPMODL") + std::string(40, '\x01') + reason;
  return r;
}

class ModelRegistryTest : public ::testing::Test {
 protected:
  testing::TempDir dir_{"lyapcast-registry-test"};
  fs::path db_ = dir_.path() / "w.db";
  ModelRegistry registry_{Open(db_)};
};

TEST_F(ModelRegistryTest, VersionsCountPerFeedAndPromotionRetiresTheActiveOne) {
  EXPECT_FALSE(registry_.Active(0)->has_value());
  EXPECT_EQ(*registry_.Insert(Candidate(ModelStatus::kActive, "first model")), 1);
  EXPECT_EQ(*registry_.Insert(Candidate(ModelStatus::kActive, "rig first", {}, 1)), 1);
  EXPECT_EQ(*registry_.Insert(Candidate(ModelStatus::kRejected, "validation 0.02 > 0.0105", 1)), 2);
  EXPECT_EQ(*registry_.Insert(Candidate(ModelStatus::kActive, "promoted", 1)), 3);
  auto active = registry_.Active(0);
  ASSERT_TRUE(active.ok() && active->has_value());
  EXPECT_EQ((*active)->version, 3);
  EXPECT_EQ((*active)->file.substr(0, 8), "LYAPMODL");
  EXPECT_EQ((*active)->parent, 1);
  auto list = registry_.List(0, 10);
  ASSERT_TRUE(list.ok());
  ASSERT_EQ(list->size(), 3u);
  EXPECT_EQ((*list)[0].version, 3);
  EXPECT_TRUE((*list)[0].file.empty()) << "listings leave the file out";
  EXPECT_EQ((*list)[1].status, ModelStatus::kRejected);
  EXPECT_EQ((*list)[1].reason, "validation 0.02 > 0.0105");
  EXPECT_EQ((*list)[2].status, ModelStatus::kRetired);
  EXPECT_EQ((*list)[2].reason, "replaced by version 3");
  // Outside view: exactly one active row per feed.
  EXPECT_EQ(Shell(db_, "SELECT feed_id, count(*) FROM models WHERE status = 'active' GROUP BY feed_id"), "1|1\n2|1");
}

TEST_F(ModelRegistryTest, ActivatePinsOrRollsBack) {
  ASSERT_TRUE(registry_.Insert(Candidate(ModelStatus::kActive, "v1")).ok());
  ASSERT_TRUE(registry_.Insert(Candidate(ModelStatus::kActive, "v2", 1)).ok());
  ASSERT_TRUE(registry_.Activate(0, 1, "operator rollback").ok());
  auto active = registry_.Active(0);
  EXPECT_EQ((*active)->version, 1);
  EXPECT_EQ((*active)->reason, "operator rollback");
  EXPECT_EQ(registry_.Get(0, 2)->status, ModelStatus::kRetired);
  EXPECT_EQ(registry_.Activate(0, 9, "x").code(), StatusCode::kNotFound);
  EXPECT_EQ(registry_.Get(0, 9).status().code(), StatusCode::kNotFound);
}

TEST_F(ModelRegistryTest, PruneSparesTheActiveVersionAndItsParent) {
  ASSERT_TRUE(registry_.Insert(Candidate(ModelStatus::kActive, "v1")).ok());
  for (int i = 0; i < 5; ++i) ASSERT_TRUE(registry_.Insert(Candidate(ModelStatus::kRejected, "worse", 1)).ok());
  ASSERT_TRUE(registry_.Insert(Candidate(ModelStatus::kActive, "v7", 1)).ok());  // retires v1, its parent
  auto pruned = registry_.Prune(0, 2);
  ASSERT_TRUE(pruned.ok());
  // Non-active: v1 (parent of the active, kept), v2..v6 rejected; keep the newest 2 (v6, v5) -> delete v2, v3, v4.
  EXPECT_EQ(*pruned, 3);
  EXPECT_EQ(Shell(db_, "SELECT group_concat(version) FROM (SELECT version FROM models ORDER BY version)"), "1,5,6,7");
}

TEST_F(ModelRegistryTest, EachVersionKeepsItsOrigin) {
  ASSERT_TRUE(registry_.Insert(Candidate(ModelStatus::kActive, "trained here")).ok());
  ModelRecord uploaded = Candidate(ModelStatus::kActive, "uploaded by an operator");
  uploaded.origin = ModelOrigin::kUploaded;
  ASSERT_EQ(*registry_.Insert(uploaded), 2);
  auto list = registry_.List(0, 10);
  ASSERT_TRUE(list.ok()) << list.status().ToString();
  ASSERT_EQ(list->size(), 2u);
  EXPECT_EQ((*list)[0].origin, ModelOrigin::kUploaded);
  EXPECT_EQ((*list)[1].origin, ModelOrigin::kTrained);
  EXPECT_EQ(registry_.Get(0, 2)->origin, ModelOrigin::kUploaded);
  EXPECT_EQ((*registry_.Active(0))->origin, ModelOrigin::kUploaded);
  EXPECT_EQ(Shell(db_, "SELECT group_concat(origin) FROM (SELECT origin FROM models ORDER BY version)"),
            "trained,uploaded");
  EXPECT_STREQ(ModelOriginName(ModelOrigin::kUploaded), "uploaded");
}

TEST_F(ModelRegistryTest, RefusesAVersionWithoutItsFile) {
  ModelRecord r = Candidate(ModelStatus::kActive, "empty");
  r.file.clear();
  EXPECT_EQ(registry_.Insert(r).status().code(), StatusCode::kInvalidArgument);
}

TEST(ModelRegistryMigration, AVersionOneFileGainsTheRegistryAndKeepsItsSamples) {
  testing::TempDir dir("lyapcast-migration-test");
  const fs::path db = dir.path() / "old.db";
  // The version-1 schema exactly as the first release created it.
  Shell(db,
        "PRAGMA journal_mode=WAL;"
        "CREATE TABLE feeds(feed_id INTEGER PRIMARY KEY, name TEXT NOT NULL UNIQUE, channels TEXT NOT NULL,"
        " step_us INTEGER NOT NULL, created_at TEXT);"
        "CREATE TABLE samples(feed_id INTEGER NOT NULL REFERENCES feeds(feed_id), t_us INTEGER NOT NULL,"
        " mask INTEGER NOT NULL, vals BLOB NOT NULL, PRIMARY KEY(feed_id, t_us)) WITHOUT ROWID;"
        "INSERT INTO feeds VALUES (1, 'loop-a', 'flow,dtemp_h', 500000, '2026-01-01');"
        "INSERT INTO samples VALUES (1, 42, 2, zeroblob(8));"
        "PRAGMA user_version = 1;");
  ASSERT_EQ(Shell(db, "PRAGMA user_version"), "1");
  {
    auto store = Open(db);
    EXPECT_EQ(store->schema_version(), kSchemaVersion);
    EXPECT_EQ(store->Extent(0)->count, 1);
    ModelRegistry registry(std::move(store));
    EXPECT_EQ(*registry.Insert(Candidate(ModelStatus::kActive, "first")), 1);
  }
  EXPECT_EQ(Shell(db, "PRAGMA user_version"), std::to_string(kSchemaVersion));
  EXPECT_EQ(Shell(db, "SELECT count(*) FROM samples"), "1");
  EXPECT_EQ(Shell(db, "PRAGMA integrity_check"), "ok");
}

// A file as schema version 2 left it (the largest exponent as lyapunov_max,
// the cadence estimates only inside details) gains the exponent columns,
// filled from the details where they hold numbers.
TEST(ModelRegistryMigration, AVersionTwoFileGainsExponentColumnsFilledFromTheDetails) {
  testing::TempDir dir("lyapcast-migration-test");
  const fs::path db = dir.path() / "v2.db";
  Shell(db,
        "PRAGMA journal_mode=WAL;"
        "CREATE TABLE feeds(feed_id INTEGER PRIMARY KEY, name TEXT NOT NULL UNIQUE, channels TEXT NOT NULL,"
        " step_us INTEGER NOT NULL, created_at TEXT);"
        "CREATE TABLE samples(feed_id INTEGER NOT NULL REFERENCES feeds(feed_id), t_us INTEGER NOT NULL,"
        " mask INTEGER NOT NULL, vals BLOB NOT NULL, PRIMARY KEY(feed_id, t_us)) WITHOUT ROWID;"
        "CREATE TABLE models(feed_id INTEGER NOT NULL REFERENCES feeds(feed_id), version INTEGER NOT NULL,"
        " status TEXT NOT NULL CHECK (status IN ('active', 'retired', 'rejected')), reason TEXT NOT NULL,"
        " parent INTEGER, created_at TEXT NOT NULL, trained_from_us INTEGER NOT NULL,"
        " trained_to_us INTEGER NOT NULL, validation_error REAL, lyapunov_max REAL, details TEXT NOT NULL,"
        " file BLOB NOT NULL, PRIMARY KEY (feed_id, version));"
        "CREATE UNIQUE INDEX models_one_active ON models(feed_id) WHERE status = 'active';"
        "INSERT INTO feeds VALUES (1, 'loop-a', 'flow,dtemp_h', 500000, '2026-01-01');"
        "INSERT INTO models VALUES (1, 1, 'retired', 'r', NULL, '2026-01-01', 0, 10, 0.1, 0.9,"
        " json_object('exponents', json_object('data', 1.25, 'dynamics', NULL)), x'00');"
        "INSERT INTO models VALUES (1, 2, 'active', 'a', 1, '2026-01-01', 0, 20, 0.1, 0.8,"
        " 'not json', x'00');"
        "INSERT INTO models VALUES (1, 3, 'rejected', 'b', 2, '2026-01-01', 0, 30, 0.1, NULL,"
        " json_object('exponents', json_object('data', 'fast', 'dynamics', 0.9056)), x'00');"
        "PRAGMA user_version = 2;");
  {
    auto store = Open(db);
    EXPECT_EQ(store->schema_version(), kSchemaVersion);
    ModelRegistry registry(std::move(store));
    auto rows = registry.List(0, 10);
    ASSERT_TRUE(rows.ok()) << rows.status().ToString();
    ASSERT_EQ(rows->size(), 3u);
    const ModelRecord& v3 = (*rows)[0];
    const ModelRecord& v2 = (*rows)[1];
    const ModelRecord& v1 = (*rows)[2];
    EXPECT_EQ(v1.lambda_max, 0.9);
    EXPECT_EQ(v1.data_exponent, 1.25);
    EXPECT_FALSE(v1.dynamics_exponent.has_value());
    EXPECT_EQ(v2.lambda_max, 0.8);
    EXPECT_FALSE(v2.data_exponent.has_value());  // details not JSON: left empty, not an error
    EXPECT_FALSE(v3.data_exponent.has_value());  // not a number
    EXPECT_EQ(v3.dynamics_exponent, 0.9056);
  }
  EXPECT_EQ(Shell(db, "PRAGMA user_version"), std::to_string(kSchemaVersion));
  EXPECT_EQ(Shell(db, "SELECT count(*) FROM pragma_table_info('models') WHERE name = 'lyapunov_max'"), "0");
  EXPECT_EQ(Shell(db, "PRAGMA integrity_check"), "ok");
}

// A file as schema version 3 left it (no origin column) opens: every
// existing version reads as trained by the daemon, and uploads can follow.
TEST(ModelRegistryMigration, AVersionThreeFileGainsTheOriginColumnAllTrained) {
  testing::TempDir dir("lyapcast-migration-test");
  const fs::path db = dir.path() / "v3.db";
  Shell(db,
        "PRAGMA journal_mode=WAL;"
        "CREATE TABLE feeds(feed_id INTEGER PRIMARY KEY, name TEXT NOT NULL UNIQUE, channels TEXT NOT NULL,"
        " step_us INTEGER NOT NULL, created_at TEXT);"
        "CREATE TABLE samples(feed_id INTEGER NOT NULL REFERENCES feeds(feed_id), t_us INTEGER NOT NULL,"
        " mask INTEGER NOT NULL, vals BLOB NOT NULL, PRIMARY KEY(feed_id, t_us)) WITHOUT ROWID;"
        "CREATE TABLE models(feed_id INTEGER NOT NULL REFERENCES feeds(feed_id), version INTEGER NOT NULL,"
        " status TEXT NOT NULL CHECK (status IN ('active', 'retired', 'rejected')), reason TEXT NOT NULL,"
        " parent INTEGER, created_at TEXT NOT NULL, trained_from_us INTEGER NOT NULL,"
        " trained_to_us INTEGER NOT NULL, validation_error REAL, lambda_max REAL, details TEXT NOT NULL,"
        " file BLOB NOT NULL, data_exponent REAL, dynamics_exponent REAL, PRIMARY KEY (feed_id, version));"
        "CREATE UNIQUE INDEX models_one_active ON models(feed_id) WHERE status = 'active';"
        "INSERT INTO feeds VALUES (1, 'loop-a', 'flow,dtemp_h', 500000, '2026-01-01');"
        "INSERT INTO models VALUES (1, 1, 'retired', 'r', NULL, '2026-01-01', 0, 10, 0.1, 0.9, '{}', x'00',"
        " 1.25, NULL);"
        "INSERT INTO models VALUES (1, 2, 'active', 'a', 1, '2026-01-01', 0, 20, 0.1, 0.8, '{}', x'00', NULL, 0.9);"
        "PRAGMA user_version = 3;");
  {
    auto store = Open(db);
    EXPECT_EQ(store->schema_version(), kSchemaVersion);
    ModelRegistry registry(std::move(store));
    auto rows = registry.List(0, 10);
    ASSERT_TRUE(rows.ok()) << rows.status().ToString();
    ASSERT_EQ(rows->size(), 2u);
    EXPECT_EQ((*rows)[0].origin, ModelOrigin::kTrained);
    EXPECT_EQ((*rows)[1].origin, ModelOrigin::kTrained);
    EXPECT_EQ((*rows)[1].data_exponent, 1.25);
    ModelRecord uploaded = Candidate(ModelStatus::kRejected, "uploaded, worse");
    uploaded.origin = ModelOrigin::kUploaded;
    EXPECT_EQ(*registry.Insert(uploaded), 3);
  }
  EXPECT_EQ(Shell(db, "PRAGMA user_version"), std::to_string(kSchemaVersion));
  EXPECT_EQ(Shell(db, "SELECT group_concat(origin) FROM (SELECT origin FROM models ORDER BY version)"),
            "trained,trained,uploaded");
  EXPECT_EQ(Shell(db, "PRAGMA integrity_check"), "ok");
}

}  // namespace
}  // namespace lyapcast
