#include "store/window_store.h"

#include "core/wall_clock.h"

#include <sqlite3.h>

#include <bit>
#include <chrono>
#include <cstring>
#include <iterator>
#include <limits>
#include <optional>
#include <system_error>

#include <fmt/format.h>

#include "store/sqlite_util.h"

namespace lyapcast {
namespace {

using sqlite::Stmt;

// ---------------------------------------------------------------------------
// Schema migrations. kMigrations[n] takes a store from user_version n to n+1;
// it runs inside the transaction that also sets the new user_version, so a
// crash mid-migration leaves the file at version n. Append, never edit: files
// in the field were written by the old steps.

Status CreateWindowTables(sqlite3* db) {
  // channels: the feed's channel names joined with ','; channel names cannot
  // contain ',' (docs/design.md "Identifiers and paths"). created_at: wall time, for people.
  // samples is WITHOUT ROWID so rows are clustered by (feed_id, t_us): range
  // reads, extents and pruning walk the primary key directly.
  return sqlite::Exec(db,
                      "CREATE TABLE feeds("
                      "  feed_id INTEGER PRIMARY KEY,"
                      "  name TEXT NOT NULL UNIQUE,"
                      "  channels TEXT NOT NULL,"
                      "  step_us INTEGER NOT NULL,"
                      "  created_at TEXT);"
                      "CREATE TABLE samples("
                      "  feed_id INTEGER NOT NULL REFERENCES feeds(feed_id),"
                      "  t_us INTEGER NOT NULL,"
                      "  mask INTEGER NOT NULL,"
                      "  vals BLOB NOT NULL,"
                      "  PRIMARY KEY(feed_id, t_us)) WITHOUT ROWID;",
                      "creating the window tables (schema version 1)");
}

Status CreateModelTables(sqlite3* db) {
  // One row per model version of a feed (ModelRegistry). `file` holds the
  // model file bytes (learn/model_file.h: weights, normalization, mu);
  // `details` a JSON object of losses, per-channel errors, Lyapunov
  // estimates and timings, for people and the API. At most one row per feed
  // is 'active' (the partial unique index enforces it).
  return sqlite::Exec(db,
                      "CREATE TABLE models("
                      "  feed_id INTEGER NOT NULL REFERENCES feeds(feed_id),"
                      "  version INTEGER NOT NULL,"
                      "  status TEXT NOT NULL CHECK (status IN ('active', 'retired', 'rejected')),"
                      "  reason TEXT NOT NULL,"
                      "  parent INTEGER,"
                      "  created_at TEXT NOT NULL,"
                      "  trained_from_us INTEGER NOT NULL,"
                      "  trained_to_us INTEGER NOT NULL,"
                      "  validation_error REAL,"
                      "  lyapunov_max REAL,"
                      "  details TEXT NOT NULL,"
                      "  file BLOB NOT NULL,"
                      "  PRIMARY KEY (feed_id, version));"
                      "CREATE UNIQUE INDEX models_one_active ON models(feed_id) WHERE status = 'active';",
                      "creating the model registry (schema version 2)");
}

Status AddExponentColumns(sqlite3* db) {
  // The largest exponent has one name everywhere (lambda_max, per second of
  // data time). The data and dynamics estimates that pace the cadence after
  // a job were only inside `details`; as columns a restart reads them
  // without parsing JSON. Existing rows are filled from their details where
  // those hold a number (CASE evaluates only the branch it takes, so
  // malformed details are left NULL rather than failing the migration).
  return sqlite::Exec(db,
                      "ALTER TABLE models RENAME COLUMN lyapunov_max TO lambda_max;"
                      "ALTER TABLE models ADD COLUMN data_exponent REAL;"
                      "ALTER TABLE models ADD COLUMN dynamics_exponent REAL;"
                      "UPDATE models SET"
                      "  data_exponent = CASE WHEN json_valid(details) THEN"
                      "    CASE WHEN json_type(details, '$.exponents.data') IN ('real', 'integer')"
                      "    THEN json_extract(details, '$.exponents.data') END END,"
                      "  dynamics_exponent = CASE WHEN json_valid(details) THEN"
                      "    CASE WHEN json_type(details, '$.exponents.dynamics') IN ('real', 'integer')"
                      "    THEN json_extract(details, '$.exponents.dynamics') END END;",
                      "adding the exponent columns (schema version 3)");
}

Status AddOriginColumn(sqlite3* db) {
  // Where a version came from: 'trained' by the daemon's retraining (every
  // version before this column existed) or 'uploaded' by an operator
  // (POST /v1/feeds/{id}/models).
  return sqlite::Exec(db,
                      "ALTER TABLE models ADD COLUMN origin TEXT NOT NULL DEFAULT 'trained'"
                      "  CHECK (origin IN ('trained', 'uploaded'));",
                      "adding the origin column (schema version 4)");
}

Status AddSuspectColumns(sqlite3* db) {
  // Readings screened as suspect (monitor/sensor_screen.h): their channels
  // are missing in mask/vals, so older readers see them as gaps; the bits
  // are in suspect and the raw readings in suspect_vals (float64
  // little-endian, in channel order, like vals).
  return sqlite::Exec(db,
                      "ALTER TABLE samples ADD COLUMN suspect INTEGER NOT NULL DEFAULT 0;"
                      "ALTER TABLE samples ADD COLUMN suspect_vals BLOB;",
                      "adding the suspect-reading columns (schema version 5)");
}

using Migration = Status (*)(sqlite3*);
constexpr Migration kMigrations[] = {&CreateWindowTables, &CreateModelTables, &AddExponentColumns,
                                     &AddOriginColumn, &AddSuspectColumns};
static_assert(std::size(kMigrations) == kSchemaVersion, "one migration per schema version");

Result<int> ReadUserVersion(sqlite3* db) {
  auto stmt = Stmt::Prepare(db, "PRAGMA user_version");
  if (!stmt.ok()) return stmt.status();
  const int rc = stmt->Step();
  if (rc != SQLITE_ROW) return sqlite::Error(db, rc, "reading the schema version");
  return static_cast<int>(stmt->ColumnInt(0));
}

Result<bool> HasAnyTable(sqlite3* db) {
  auto stmt = Stmt::Prepare(db, "SELECT count(*) FROM sqlite_schema");
  if (!stmt.ok()) return stmt.status();
  const int rc = stmt->Step();
  if (rc != SQLITE_ROW) return sqlite::Error(db, rc, "reading the schema");
  return stmt->ColumnInt(0) > 0;
}

Status NewerFileError(const std::filesystem::path& path, int version) {
  return Status::Precondition(fmt::format(
      "the store at {} has schema version {}, but this lyapcast knows versions up to {}: it was written by a "
      "newer lyapcast. Run that newer version, or point storage.path at another file.",
      path.string(), version, kSchemaVersion));
}

// Brings the file to kSchemaVersion. Each step runs in its own IMMEDIATE
// transaction and re-reads the version inside it, so two processes opening
// the same new file at once migrate it exactly once.
Result<int> Migrate(sqlite3* db, const std::filesystem::path& path, bool read_only) {
  auto version = ReadUserVersion(db);
  if (!version.ok()) return version.status();
  if (*version > kSchemaVersion) return NewerFileError(path, *version);
  if (*version == kSchemaVersion) return *version;
  if (read_only) {
    return Status::Precondition(fmt::format(
        "the store at {} has schema version {} and this lyapcast needs {}; a read-only reader cannot migrate it. "
        "Start the daemon once on this file (it migrates on start) and retry.",
        path.string(), *version, kSchemaVersion));
  }
  while (true) {
    if (Status s = sqlite::Exec(db, "BEGIN IMMEDIATE", "starting the schema migration"); !s.ok()) return s;
    const auto rollback = [db] {
      if (sqlite3_get_autocommit(db) == 0) sqlite3_exec(db, "ROLLBACK", nullptr, nullptr, nullptr);
    };
    auto current = ReadUserVersion(db);
    if (!current.ok()) {
      rollback();
      return current.status();
    }
    const int v = *current;
    if (v > kSchemaVersion) {
      rollback();
      return NewerFileError(path, v);
    }
    if (v == kSchemaVersion) {
      rollback();  // migrated by another process meanwhile
      return v;
    }
    if (v == 0) {
      // Version 0 must mean "new, empty file": refuse to add our tables to
      // some other program's database.
      auto has_tables = HasAnyTable(db);
      if (!has_tables.ok() || *has_tables) {
        rollback();
        if (!has_tables.ok()) return has_tables.status();
        return Status::Precondition(fmt::format(
            "{} is an SQLite database with tables but no lyapcast schema version; it is not a lyapcast store. "
            "Point storage.path at a new file.",
            path.string()));
      }
    }
    Status s = kMigrations[v](db);
    if (s.ok()) {
      // The version is a constant of this program, never outside input;
      // PRAGMA arguments cannot be bound as parameters.
      const std::string set_version = fmt::format("PRAGMA user_version = {}", v + 1);
      s = sqlite::Exec(db, set_version.c_str(), "recording the schema version");
    }
    if (s.ok()) s = sqlite::Exec(db, "COMMIT", "committing the schema migration");
    if (!s.ok()) {
      rollback();
      return Status(s.code(), fmt::format("migrating {} from schema version {} to {}: {}", path.string(), v, v + 1,
                                          s.message()));
    }
  }
}

std::string JoinChannels(const std::vector<std::string>& channels, const char* sep) {
  std::string out;
  for (size_t i = 0; i < channels.size(); ++i) {
    if (i > 0) out += sep;
    out += channels[i];
  }
  return out;
}

std::vector<std::string> SplitChannels(const std::string& joined) {
  std::vector<std::string> out;
  if (joined.empty()) return out;
  size_t start = 0;
  while (true) {
    const size_t comma = joined.find(',', start);
    out.push_back(joined.substr(start, comma == std::string::npos ? std::string::npos : comma - start));
    if (comma == std::string::npos) break;
    start = comma + 1;
  }
  return out;
}

std::uint64_t ChannelBits(int channels) {
  return channels >= 64 ? ~std::uint64_t{0} : (std::uint64_t{1} << channels) - 1;
}

// vals: the present channels only, as little-endian IEEE-754 float64, in
// channel order (byte order fixed so the file is portable between machines).
void EncodeValues(const Sample& s, int channels, std::vector<unsigned char>* out) {
  out->clear();
  for (int c = 0; c < channels; ++c) {
    if (s.missing(c)) continue;
    const auto bits = std::bit_cast<std::uint64_t>(s.values[static_cast<size_t>(c)]);
    for (int b = 0; b < 8; ++b) out->push_back(static_cast<unsigned char>(bits >> (8 * b)));
  }
}

// suspect_vals: the raw readings of the suspect channels, as vals encodes values.
void EncodeSuspect(const Sample& s, int channels, std::vector<unsigned char>* out) {
  out->clear();
  for (int c = 0; c < channels; ++c) {
    if (!s.suspect(c)) continue;
    const auto bits = std::bit_cast<std::uint64_t>(s.values[static_cast<size_t>(c)]);
    for (int b = 0; b < 8; ++b) out->push_back(static_cast<unsigned char>(bits >> (8 * b)));
  }
}

bool DecodeSuspect(std::span<const unsigned char> bytes, std::uint64_t suspect, int channels, Sample* s) {
  if ((suspect & ~ChannelBits(channels)) != 0 || bytes.size() != static_cast<size_t>(std::popcount(suspect)) * 8) {
    return false;
  }
  s->suspect_mask = suspect;
  size_t pos = 0;
  for (int c = 0; c < channels; ++c) {
    if (!((suspect >> c) & 1U)) continue;
    std::uint64_t bits = 0;
    for (int b = 0; b < 8; ++b) bits |= static_cast<std::uint64_t>(bytes[pos + static_cast<size_t>(b)]) << (8 * b);
    pos += 8;
    s->values[static_cast<size_t>(c)] = std::bit_cast<double>(bits);
  }
  return true;
}

bool DecodeValues(std::span<const unsigned char> bytes, std::uint64_t mask, int channels, Sample* s) {
  if ((mask & ~ChannelBits(channels)) != 0) return false;
  const int present = channels - std::popcount(mask);
  if (bytes.size() != static_cast<size_t>(present) * 8) return false;
  s->missing_mask = mask;
  s->values.resize(static_cast<size_t>(channels));
  size_t pos = 0;
  for (int c = 0; c < channels; ++c) {
    if ((mask >> c) & 1U) {
      s->values[static_cast<size_t>(c)] = std::numeric_limits<double>::quiet_NaN();
      continue;
    }
    std::uint64_t bits = 0;
    for (int b = 0; b < 8; ++b) bits |= static_cast<std::uint64_t>(bytes[pos + static_cast<size_t>(b)]) << (8 * b);
    pos += 8;
    s->values[static_cast<size_t>(c)] = std::bit_cast<double>(bits);
  }
  return true;
}

// The channels a sample carries a reading for: present ones and suspect
// ones (whose raw reading stays in values).
std::uint64_t ReadingBits(const Sample& s, int channels) {
  return (~s.missing_mask | s.suspect_mask) & ChannelBits(channels);
}

// Merges `in` into the stored row `row` channel by channel (docs/design.md
// "Storage"): a channel the row has no reading for takes in's reading with
// its suspect mark; a channel both carry must hold the same raw reading bit
// for bit, whatever the marks (a resend may be screened differently from
// the first sending, and is still the same reading: the stored mark stays).
// Returns the channels added, or nullopt on a conflict (row is then partly
// changed and must not be stored).
std::optional<std::uint64_t> MergeInto(const Sample& in, int channels, Sample* row) {
  const std::uint64_t stored = ReadingBits(*row, channels);
  std::uint64_t added = 0;
  for (int c = 0; c < channels; ++c) {
    const std::uint64_t bit = std::uint64_t{1} << c;
    if ((ReadingBits(in, channels) & bit) == 0) continue;
    const double v = in.values[static_cast<std::size_t>(c)];
    if ((stored & bit) != 0) {
      if (std::bit_cast<std::uint64_t>(row->values[static_cast<std::size_t>(c)]) != std::bit_cast<std::uint64_t>(v)) {
        return std::nullopt;
      }
      continue;
    }
    added |= bit;
    row->values[static_cast<std::size_t>(c)] = v;
    if (in.suspect(c)) {
      row->suspect_mask |= bit;  // stays missing: nothing trains on it
    } else {
      row->missing_mask &= ~bit;
    }
  }
  return added;
}

std::string WallNowRfc3339() { return FormatRfc3339(WallNow()); }

}  // namespace

struct WindowStore::Statements {
  Stmt begin_immediate;  // writes take the write lock up front: no deadlocking upgrade
  Stmt begin_read;       // deferred: a read snapshot only
  Stmt commit;
  Stmt rollback;
  Stmt feed_by_name;
  Stmt insert_feed;
  Stmt insert_sample;
  Stmt select_sample;
  Stmt update_sample;
  Stmt prune_find;
  Stmt prune_delete_before;
  Stmt prune_delete_through;
  Stmt extent;
  Stmt read_range;
};

namespace {

// Open flags; for a writer also the store's folder. kNotFound for a
// read-only reader without the file.
Result<int> OpenFlags(const StoreOptions& options) {
  const std::filesystem::path& path = options.path;
  // FULLMUTEX (serialized) although one thread uses a connection at a time:
  // raw_handle() lets tests and diagnostics set pragmas from another thread,
  // and the uncontended mutex costs nothing measurable next to an fsync.
  int flags = SQLITE_OPEN_FULLMUTEX;
  if (options.read_only) {
    std::error_code ec;
    if (!std::filesystem::exists(path, ec)) {
      return Status::NotFound(fmt::format("the store {} does not exist (a read-only reader needs the file the "
                                          "daemon writes)",
                                          path.string()));
    }
    return flags | SQLITE_OPEN_READONLY;
  }
  if (path.has_parent_path()) {
    std::error_code ec;
    std::filesystem::create_directories(path.parent_path(), ec);
    if (ec) {
      return Status::Io(
          fmt::format("cannot create the folder {} for the store: {}", path.parent_path().string(), ec.message()));
    }
  }
  return flags | SQLITE_OPEN_READWRITE | SQLITE_OPEN_CREATE;
}

Status Opening(const std::filesystem::path& path, const Status& s) {
  return Status(s.code(), fmt::format("opening the store {}: {}", path.string(), s.message()));
}

// A writer's durability settings.
Status SetWriterPragmas(sqlite3* db, const std::filesystem::path& path) {
  // journal_mode answers with the mode in effect; anything but "wal" (e.g.
  // a file system without shared memory) would make readers block the
  // writer, which the design relies on not happening.
  auto mode = Stmt::Prepare(db, "PRAGMA journal_mode=WAL");
  if (!mode.ok()) return Opening(path, mode.status());
  const int step = mode->Step();
  if (step != SQLITE_ROW) return Opening(path, sqlite::Error(db, step, "setting journal_mode=WAL"));
  const std::string got = mode->ColumnText(0);
  mode->Reset();
  if (got != "wal") {
    return Status::Io(fmt::format("the store {} cannot use write-ahead logging (journal_mode is '{}'); put it on "
                                  "a local file system",
                                  path.string(), got));
  }
  // FULL: a commit is on disk before ingest acknowledges it (docs/design.md "Storage").
  if (Status s = sqlite::Exec(db, "PRAGMA synchronous=FULL", "setting synchronous=FULL"); !s.ok()) {
    return Opening(path, s);
  }
  return Status::Ok();
}

}  // namespace

Status WindowStore::PrepareStatements() {
  auto stmts = std::make_unique<Statements>();
  const struct {
    Stmt* stmt;
    const char* sql;
  } kSql[] = {
      {&stmts->begin_immediate, "BEGIN IMMEDIATE"},
      {&stmts->begin_read, "BEGIN DEFERRED"},
      {&stmts->commit, "COMMIT"},
      {&stmts->rollback, "ROLLBACK"},
      {&stmts->feed_by_name, "SELECT feed_id, channels, step_us FROM feeds WHERE name = ?1"},
      {&stmts->insert_feed, "INSERT INTO feeds(name, channels, step_us, created_at) VALUES(?1, ?2, ?3, ?4)"},
      {&stmts->insert_sample,
       "INSERT INTO samples(feed_id, t_us, mask, vals, suspect, suspect_vals) VALUES(?1, ?2, ?3, ?4, ?5, ?6) "
       "ON CONFLICT(feed_id, t_us) DO NOTHING"},
      {&stmts->select_sample,
       "SELECT mask, vals, suspect, suspect_vals FROM samples WHERE feed_id = ?1 AND t_us = ?2"},
      {&stmts->update_sample,
       "UPDATE samples SET mask = ?3, vals = ?4, suspect = ?5, suspect_vals = ?6 WHERE feed_id = ?1 AND t_us = ?2"},
      {&stmts->prune_find,
       "SELECT t_us FROM samples WHERE feed_id = ?1 AND t_us < ?2 ORDER BY t_us LIMIT 1 OFFSET ?3"},
      {&stmts->prune_delete_before, "DELETE FROM samples WHERE feed_id = ?1 AND t_us < ?2"},
      {&stmts->prune_delete_through, "DELETE FROM samples WHERE feed_id = ?1 AND t_us <= ?2"},
      // Separate subqueries so min() and max() each use the primary key's
      // min/max optimization (one b-tree descent each).
      {&stmts->extent,
       "SELECT (SELECT count(*) FROM samples WHERE feed_id = ?1),"
       "       (SELECT min(t_us) FROM samples WHERE feed_id = ?1),"
       "       (SELECT max(t_us) FROM samples WHERE feed_id = ?1)"},
      {&stmts->read_range,
       "SELECT t_us, mask, vals, suspect, suspect_vals FROM samples WHERE feed_id = ?1 AND t_us >= ?2 AND t_us < ?3 "
       "ORDER BY t_us LIMIT ?4"},
  };
  for (const auto& [stmt, sql] : kSql) {
    auto prepared = Stmt::Prepare(db_, sql);
    if (!prepared.ok()) return prepared.status();
    *stmt = std::move(prepared).value();
  }
  stmts_ = std::move(stmts);
  return Status::Ok();
}

Result<std::unique_ptr<WindowStore>> WindowStore::Open(const StoreOptions& options) {
  const std::filesystem::path& path = options.path;
  if (path.empty()) return Status::Invalid("storage path is empty");
  std::unique_ptr<WindowStore> store(new WindowStore());
  store->path_ = path;
  store->read_only_ = options.read_only;
  auto flags = OpenFlags(options);
  if (!flags.ok()) return flags.status();
  const int rc = sqlite3_open_v2(path.c_str(), &store->db_, *flags, nullptr);
  if (rc != SQLITE_OK) {
    Status s = sqlite::Error(store->db_, rc, fmt::format("opening the store {}", path.string()));
    return Status(s.code() == StatusCode::kUnavailable ? s.code() : StatusCode::kIoError, s.message());
  }
  sqlite3* db = store->db_;
  sqlite3_extended_result_codes(db, 1);
  sqlite3_busy_timeout(db, options.busy_timeout_ms);

  const auto opening = [&](const Status& s) { return Opening(path, s); };
  if (!options.read_only) {
    if (Status s = SetWriterPragmas(db, path); !s.ok()) return s;
  }
  if (Status s = sqlite::Exec(db, "PRAGMA foreign_keys=ON", "enabling foreign keys"); !s.ok()) return opening(s);

  auto version = Migrate(db, path, options.read_only);
  if (!version.ok()) {
    const Status s = version.status();
    // A newer or foreign file is not an I/O problem; keep those messages as they are.
    if (s.code() == StatusCode::kFailedPrecondition) return s;
    return opening(s);
  }
  store->schema_version_ = *version;
  if (Status s = store->PrepareStatements(); !s.ok()) return opening(s);
  return store;
}

WindowStore::~WindowStore() {
  stmts_.reset();  // finalize first: sqlite3_close refuses while statements exist
  sqlite3_close(db_);
}

int WindowStore::schema_version() const { return schema_version_; }

int WindowStore::channel_count(std::uint32_t feed) const {
  return feed < channel_counts_.size() ? channel_counts_[feed] : 0;
}

Status WindowStore::RegisterFeeds(const std::vector<FeedLayout>& feeds) {
  for (const FeedLayout& f : feeds) {
    if (f.channels.empty() || f.channels.size() > static_cast<size_t>(kMaxChannels)) {
      return Status::Invalid(
          fmt::format("feed '{}': needs 1 to {} channels, got {}", f.id, kMaxChannels, f.channels.size()));
    }
    for (const std::string& c : f.channels) {
      if (c.empty() || c.find(',') != std::string::npos) {
        return Status::Invalid(fmt::format("feed '{}': channel name '{}' is empty or contains ','", f.id, c));
      }
    }
  }

  Statements& st = *stmts_;
  sqlite::Transaction txn(db_, st.rollback);
  if (Status s = txn.Begin(read_only_ ? st.begin_read : st.begin_immediate, "registering feeds"); !s.ok()) return s;

  std::vector<std::int64_t> ids;
  std::vector<int> counts;
  std::vector<std::string> mismatches;
  const std::string created_at = WallNowRfc3339();
  for (const FeedLayout& f : feeds) {
    std::int64_t id = 0;
    {
      sqlite::ResetOnExit reset(st.feed_by_name);
      st.feed_by_name.BindText(1, f.id);
      const int rc = st.feed_by_name.Step();
      if (rc == SQLITE_ROW) {
        id = st.feed_by_name.ColumnInt(0);
        const std::vector<std::string> stored = SplitChannels(st.feed_by_name.ColumnText(1));
        const Micros stored_step = st.feed_by_name.ColumnSpan(2);
        if (stored != f.channels || stored_step != f.step) {
          mismatches.push_back(fmt::format(
              "feed '{}': the store at {} recorded channels [{}] and step {}, the config now says channels [{}] and "
              "step {}. A feed's layout cannot change under stored data: restore the old channels/step, give the "
              "changed feed a new id, or move the database aside.",
              f.id, path_.string(), JoinChannels(stored, ", "), FormatDuration(stored_step),
              JoinChannels(f.channels, ", "), FormatDuration(f.step)));
        }
      } else if (rc != SQLITE_DONE) {
        return sqlite::Error(db_, rc, fmt::format("reading feed '{}' from {}", f.id, path_.string()));
      }
    }
    if (id == 0) {
      if (read_only_) {
        return Status::NotFound(fmt::format("feed '{}' is not in the store at {}; the daemon records it when it "
                                            "starts with that feed configured",
                                            f.id, path_.string()));
      }
      sqlite::ResetOnExit reset(st.insert_feed);
      st.insert_feed.BindText(1, f.id);
      st.insert_feed.BindText(2, JoinChannels(f.channels, ","));
      st.insert_feed.BindSpan(3, f.step);
      st.insert_feed.BindText(4, created_at);
      const int rc = st.insert_feed.Step();
      if (rc != SQLITE_DONE) {
        return sqlite::Error(db_, rc, fmt::format("recording feed '{}' in {}", f.id, path_.string()));
      }
      id = sqlite3_last_insert_rowid(db_);
    }
    ids.push_back(id);
    counts.push_back(static_cast<int>(f.channels.size()));
  }
  if (!mismatches.empty()) {
    std::string message;
    for (const std::string& m : mismatches) {
      if (!message.empty()) message += '\n';
      message += m;
    }
    return Status::Precondition(std::move(message));  // txn rolls back: no new feed recorded either
  }
  if (Status s = txn.Commit(st.commit, "registering feeds"); !s.ok()) return s;
  feed_ids_ = std::move(ids);
  channel_counts_ = std::move(counts);
  return Status::Ok();
}

Status WindowStore::InsertBatch(std::span<const FeedSample> samples, std::vector<InsertOutcome>* outcomes,
                                std::vector<MergedRow>* merged) {
  if (outcomes != nullptr) outcomes->clear();
  if (merged != nullptr) merged->assign(samples.size(), MergedRow{});
  // Validate everything before writing so a bad sample cannot half-store a batch.
  for (size_t i = 0; i < samples.size(); ++i) {
    const FeedSample& fs = samples[i];
    if (fs.feed >= feed_ids_.size()) {
      return Status::Invalid(fmt::format("sample {} of the batch: feed index {} is not registered", i, fs.feed));
    }
    const int n = channel_counts_[fs.feed];
    if (fs.sample.values.size() != static_cast<size_t>(n) || (fs.sample.missing_mask & ~ChannelBits(n)) != 0) {
      return Status::Invalid(fmt::format("sample {} of the batch: {} values and mask {:#x} for a feed of {} channels",
                                         i, fs.sample.values.size(), fs.sample.missing_mask, n));
    }
    if ((fs.sample.suspect_mask & ~fs.sample.missing_mask) != 0) {
      return Status::Invalid(fmt::format("sample {} of the batch: suspect mask {:#x} has channels that are not in the "
                                         "missing mask {:#x} (a suspect channel is also missing)",
                                         i, fs.sample.suspect_mask, fs.sample.missing_mask));
    }
  }

  Statements& st = *stmts_;
  sqlite::Transaction txn(db_, st.rollback);
  const std::string what = fmt::format("storing samples in {}", path_.string());
  if (Status s = txn.Begin(st.begin_immediate, what); !s.ok()) return s;

  std::vector<InsertOutcome> result;
  result.reserve(samples.size());
  std::vector<unsigned char> vals, suspect_vals;
  for (const FeedSample& fs : samples) {
    const std::int64_t feed_id = feed_ids_[fs.feed];
    const auto mask = static_cast<std::int64_t>(fs.sample.missing_mask);  // bit pattern kept (C++20 modular)
    EncodeValues(fs.sample, channel_counts_[fs.feed], &vals);
    {
      sqlite::ResetOnExit reset(st.insert_sample);
      st.insert_sample.BindInt(1, feed_id);
      st.insert_sample.BindTime(2, fs.sample.t);
      st.insert_sample.BindInt(3, mask);
      st.insert_sample.BindBlob(4, vals);
      st.insert_sample.BindInt(5, static_cast<std::int64_t>(fs.sample.suspect_mask));
      EncodeSuspect(fs.sample, channel_counts_[fs.feed], &suspect_vals);
      st.insert_sample.BindBlob(6, suspect_vals);
      const int rc = st.insert_sample.Step();
      if (rc != SQLITE_DONE) return sqlite::Error(db_, rc, what);
    }
    if (sqlite3_changes(db_) > 0) {
      result.push_back(InsertOutcome::kInserted);
      continue;
    }
    // DO NOTHING fired: merge with the row already stored at that time.
    const int channels = channel_counts_[fs.feed];
    Sample row;
    row.t = fs.sample.t;
    {
      sqlite::ResetOnExit reset(st.select_sample);
      st.select_sample.BindInt(1, feed_id);
      st.select_sample.BindTime(2, fs.sample.t);
      const int rc = st.select_sample.Step();
      if (rc != SQLITE_ROW) {
        if (rc == SQLITE_DONE) return Status::Internal(fmt::format("{}: insert ignored but no row stored", what));
        return sqlite::Error(db_, rc, what);
      }
      if (!DecodeValues(st.select_sample.ColumnBlob(1), static_cast<std::uint64_t>(st.select_sample.ColumnInt(0)),
                        channels, &row) ||
          !DecodeSuspect(st.select_sample.ColumnBlob(3), static_cast<std::uint64_t>(st.select_sample.ColumnInt(2)),
                         channels, &row)) {
        return Status::Internal(fmt::format("{}: the row stored at {} does not decode", what, FormatRfc3339(row.t)));
      }
    }
    const std::optional<std::uint64_t> added = MergeInto(fs.sample, channels, &row);
    if (!added || *added == 0) {
      result.push_back(added ? InsertOutcome::kDuplicateSame : InsertOutcome::kDuplicateConflict);
      continue;
    }
    EncodeValues(row, channels, &vals);
    EncodeSuspect(row, channels, &suspect_vals);
    {
      sqlite::ResetOnExit update_reset(st.update_sample);
      st.update_sample.BindInt(1, feed_id);
      st.update_sample.BindTime(2, row.t);
      st.update_sample.BindInt(3, static_cast<std::int64_t>(row.missing_mask));
      st.update_sample.BindBlob(4, vals);
      st.update_sample.BindInt(5, static_cast<std::int64_t>(row.suspect_mask));
      st.update_sample.BindBlob(6, suspect_vals);
      const int urc = st.update_sample.Step();
      if (urc != SQLITE_DONE) return sqlite::Error(db_, urc, what);
    }
    result.push_back(InsertOutcome::kMerged);
    if (merged != nullptr) (*merged)[result.size() - 1] = MergedRow{std::move(row), *added};
  }
  if (Status s = txn.Commit(st.commit, what); !s.ok()) return s;
  if (outcomes != nullptr) *outcomes = std::move(result);
  return Status::Ok();
}

Result<int> WindowStore::PruneBatch(std::uint32_t feed, DataTime cutoff, int max_rows) {
  if (feed >= feed_ids_.size()) return Status::Invalid(fmt::format("feed index {} is not registered", feed));
  if (max_rows <= 0) return 0;
  Statements& st = *stmts_;
  const std::int64_t feed_id = feed_ids_[feed];
  const std::string what = fmt::format("pruning old samples in {}", path_.string());
  sqlite::Transaction txn(db_, st.rollback);
  if (Status s = txn.Begin(st.begin_immediate, what); !s.ok()) return s;

  // Find the max_rows-th oldest time below the cutoff; deleting through it
  // removes exactly max_rows rows (times are unique per feed). When there are
  // fewer, everything below the cutoff goes.
  std::optional<DataTime> boundary;
  {
    sqlite::ResetOnExit reset(st.prune_find);
    st.prune_find.BindInt(1, feed_id);
    st.prune_find.BindTime(2, cutoff);
    st.prune_find.BindInt(3, max_rows - 1);
    const int rc = st.prune_find.Step();
    if (rc == SQLITE_ROW) {
      boundary = st.prune_find.ColumnTime(0);
    } else if (rc != SQLITE_DONE) {
      return sqlite::Error(db_, rc, what);
    }
  }
  Stmt& del = boundary ? st.prune_delete_through : st.prune_delete_before;
  {
    sqlite::ResetOnExit reset(del);
    del.BindInt(1, feed_id);
    del.BindTime(2, boundary ? *boundary : cutoff);
    const int rc = del.Step();
    if (rc != SQLITE_DONE) return sqlite::Error(db_, rc, what);
  }
  const int deleted = sqlite3_changes(db_);
  if (Status s = txn.Commit(st.commit, what); !s.ok()) return s;
  return deleted;
}

Result<FeedExtent> WindowStore::Extent(std::uint32_t feed) {
  if (feed >= feed_ids_.size()) return Status::Invalid(fmt::format("feed index {} is not registered", feed));
  Statements& st = *stmts_;
  sqlite::ResetOnExit reset(st.extent);
  st.extent.BindInt(1, feed_ids_[feed]);
  const int rc = st.extent.Step();
  if (rc != SQLITE_ROW) {
    return sqlite::Error(db_, rc, fmt::format("reading the extent of a feed in {}", path_.string()));
  }
  FeedExtent e;
  e.count = st.extent.ColumnInt(0);
  if (e.count > 0) {
    e.oldest = st.extent.ColumnTime(1);
    e.newest = st.extent.ColumnTime(2);
  }
  return e;
}

Status WindowStore::ReadRange(std::uint32_t feed, DataTime from, DataTime to, int slice_rows,
                              const std::function<bool(std::span<const Sample>)>& visit) {
  if (feed >= feed_ids_.size()) return Status::Invalid(fmt::format("feed index {} is not registered", feed));
  if (slice_rows <= 0) return Status::Invalid(fmt::format("slice_rows must be positive, got {}", slice_rows));
  Statements& st = *stmts_;
  const std::int64_t feed_id = feed_ids_[feed];
  const int channels = channel_counts_[feed];
  const std::string what = fmt::format("reading samples from {}", path_.string());

  // Reused across slices so the per-sample value vectors keep their capacity.
  std::vector<Sample> slice;
  DataTime next = from;
  while (next < to) {
    size_t rows = 0;
    {
      sqlite::Transaction txn(db_, st.rollback);
      if (Status s = txn.Begin(st.begin_read, what); !s.ok()) return s;
      sqlite::ResetOnExit reset(st.read_range);
      st.read_range.BindInt(1, feed_id);
      st.read_range.BindTime(2, next);
      st.read_range.BindTime(3, to);
      st.read_range.BindInt(4, slice_rows);
      int rc;
      while ((rc = st.read_range.Step()) == SQLITE_ROW) {
        if (rows == slice.size()) slice.emplace_back();
        Sample& s = slice[rows];
        s.t = st.read_range.ColumnTime(0);
        const auto mask = static_cast<std::uint64_t>(st.read_range.ColumnInt(1));
        s.suspect_mask = 0;
        if (!DecodeValues(st.read_range.ColumnBlob(2), mask, channels, &s) ||
            !DecodeSuspect(st.read_range.ColumnBlob(4), static_cast<std::uint64_t>(st.read_range.ColumnInt(3)),
                           channels, &s)) {
          return Status::Corruption(fmt::format("{}: the row at t={} does not match the feed's {} channels", what,
                                                FormatRfc3339(s.t), channels));
        }
        ++rows;
      }
      if (rc != SQLITE_DONE) return sqlite::Error(db_, rc, what);
      st.read_range.Reset();
      if (Status s = txn.Commit(st.commit, what); !s.ok()) return s;
    }
    // The visitor runs outside the read transaction: slow consumers never
    // pin a WAL snapshot.
    if (rows == 0) break;
    next = slice[rows - 1].t + Micros(1);  // cannot overflow: t < to
    if (!visit(std::span<const Sample>(slice.data(), rows))) break;
    if (rows < static_cast<size_t>(slice_rows)) break;
  }
  return Status::Ok();
}

}  // namespace lyapcast
