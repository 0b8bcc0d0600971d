#include "store/model_registry.h"

#include <fmt/format.h>
#include <sqlite3.h>

#include "core/wall_clock.h"
#include "store/sqlite_util.h"

namespace lyapcast {
using sqlite::Stmt;

namespace {

constexpr const char* kColumns =
    "version, status, reason, parent, created_at, trained_from_us, trained_to_us, validation_error, lambda_max, "
    "details, data_exponent, dynamics_exponent, origin";

Result<ModelOrigin> ParseOrigin(const std::string& s) {
  if (s == "trained") return ModelOrigin::kTrained;
  if (s == "uploaded") return ModelOrigin::kUploaded;
  return Status::Corruption("unknown model origin '" + s + "' in the registry");
}

Result<ModelStatus> ParseStatus(const std::string& s) {
  if (s == "active") return ModelStatus::kActive;
  if (s == "retired") return ModelStatus::kRetired;
  if (s == "rejected") return ModelStatus::kRejected;
  return Status::Corruption("unknown model status '" + s + "' in the registry");
}

void BindOptionalDouble(Stmt& st, int index, const std::optional<double>& v) {
  if (v) {
    sqlite3_bind_double(st.get(), index, *v);
  } else {
    sqlite3_bind_null(st.get(), index);
  }
}

std::optional<double> ColumnOptionalDouble(const Stmt& st, int column) {
  if (st.ColumnIsNull(column)) return std::nullopt;
  return sqlite3_column_double(st.get(), column);
}

// Reads the kColumns of the current row (and `file` at column 13 if asked).
Result<ModelRecord> ReadRow(const Stmt& st, std::uint32_t feed, bool with_file) {
  ModelRecord r;
  r.feed = feed;
  r.version = st.ColumnInt(0);
  auto status = ParseStatus(st.ColumnText(1));
  if (!status.ok()) return status.status();
  r.status = *status;
  r.reason = st.ColumnText(2);
  if (!st.ColumnIsNull(3)) r.parent = st.ColumnInt(3);
  r.created_at = st.ColumnText(4);
  r.trained_from = st.ColumnTime(5);
  r.trained_to = st.ColumnTime(6);
  r.validation_error = ColumnOptionalDouble(st, 7);
  r.lambda_max = ColumnOptionalDouble(st, 8);
  r.details = st.ColumnText(9);
  r.data_exponent = ColumnOptionalDouble(st, 10);
  r.dynamics_exponent = ColumnOptionalDouble(st, 11);
  auto origin = ParseOrigin(st.ColumnText(12));
  if (!origin.ok()) return origin.status();
  r.origin = *origin;
  if (with_file) {
    const auto blob = st.ColumnBlob(13);
    r.file.assign(reinterpret_cast<const char*>(blob.data()), blob.size());
  }
  return r;
}

std::span<const unsigned char> Bytes(const std::string& s) {
  return {reinterpret_cast<const unsigned char*>(s.data()), s.size()};
}

}  // namespace

const char* ModelOriginName(ModelOrigin o) {
  switch (o) {
    case ModelOrigin::kTrained: return "trained";
    case ModelOrigin::kUploaded: return "uploaded";
  }
  return "?";
}

const char* ModelStatusName(ModelStatus s) {
  switch (s) {
    case ModelStatus::kActive: return "active";
    case ModelStatus::kRetired: return "retired";
    case ModelStatus::kRejected: return "rejected";
  }
  return "?";
}

struct ModelRegistry::Statements {
  Stmt begin, commit, rollback, next_version, retire_active, insert, active, one, list, exists, activate, prune;
};

ModelRegistry::ModelRegistry(std::unique_ptr<WindowStore> store) : store_(std::move(store)) {}

ModelRegistry::~ModelRegistry() = default;

namespace {
std::string Select(const char* tail, bool with_file) {
  return fmt::format("SELECT {}{} FROM models {}", kColumns, with_file ? ", file" : "", tail);
}
}  // namespace

// All statements are prepared on first use, so the constructor cannot fail
// and a broken file is reported by the first call.
Status ModelRegistry::Prepare() {
  if (st_) return Status::Ok();
  auto st = std::make_unique<Statements>();
  const std::pair<Stmt*, std::string> all[] = {
      {&st->begin, "BEGIN IMMEDIATE"},
      {&st->commit, "COMMIT"},
      {&st->rollback, "ROLLBACK"},
      {&st->next_version, "SELECT coalesce(max(version), 0) + 1 FROM models WHERE feed_id = ?1"},
      {&st->retire_active, "UPDATE models SET status = 'retired', reason = ?2 WHERE feed_id = ?1 AND status = 'active'"},
      {&st->insert, "INSERT INTO models (feed_id, version, status, reason, parent, created_at, trained_from_us, "
       "trained_to_us, validation_error, lambda_max, details, file, data_exponent, dynamics_exponent, origin) "
       "VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15)"},
      {&st->active, Select("WHERE feed_id = ?1 AND status = 'active'", true)},
      {&st->one, Select("WHERE feed_id = ?1 AND version = ?2", true)},
      {&st->list, Select("WHERE feed_id = ?1 ORDER BY version DESC LIMIT ?2", false)},
      {&st->exists, "SELECT status FROM models WHERE feed_id = ?1 AND version = ?2"},
      {&st->activate, "UPDATE models SET status = 'active', reason = ?3 WHERE feed_id = ?1 AND version = ?2"},
      {&st->prune, "DELETE FROM models WHERE feed_id = ?1 AND status != 'active'"
       " AND version NOT IN (SELECT version FROM models WHERE feed_id = ?1 AND status != 'active'"
       "                     ORDER BY version DESC LIMIT ?2)"
       " AND version IS NOT (SELECT parent FROM models WHERE feed_id = ?1 AND status = 'active')"},
  };
  for (const auto& [stmt, sql] : all) {
    auto prepared = Stmt::Prepare(store_->raw_handle(), sql);
    if (!prepared.ok()) return prepared.status();
    *stmt = std::move(prepared).value();
  }
  st_ = std::move(st);
  return Status::Ok();
}

Result<std::int64_t> ModelRegistry::Insert(const ModelRecord& r) {
  if (Status s = Prepare(); !s.ok()) return s;
  if (r.feed >= store_->feed_count()) return Status::Invalid(fmt::format("feed index {} is not registered", r.feed));
  if (r.file.empty()) return Status::Invalid("a model version needs its model file bytes");
  const std::int64_t feed_id = store_->feed_row_id(r.feed);
  const std::string what = "storing a model version";
  sqlite::Transaction txn(store_->raw_handle(), st_->rollback);
  if (Status s = txn.Begin(st_->begin, what); !s.ok()) return s;
  std::int64_t version = 0;
  {
    sqlite::ResetOnExit reset(st_->next_version);
    st_->next_version.BindInt(1, feed_id);
    if (const int rc = st_->next_version.Step(); rc != SQLITE_ROW) return sqlite::Error(store_->raw_handle(), rc, what);
    version = st_->next_version.ColumnInt(0);
  }
  if (r.status == ModelStatus::kActive) {
    sqlite::ResetOnExit reset(st_->retire_active);
    st_->retire_active.BindInt(1, feed_id);
    st_->retire_active.BindText(2, fmt::format("replaced by version {}", version));
    if (const int rc = st_->retire_active.Step(); rc != SQLITE_DONE) {
      return sqlite::Error(store_->raw_handle(), rc, what);
    }
  }
  {
    Stmt& st = st_->insert;
    sqlite::ResetOnExit reset(st);
    st.BindInt(1, feed_id);
    st.BindInt(2, version);
    st.BindText(3, ModelStatusName(r.status));
    st.BindText(4, r.reason);
    if (r.parent) {
      st.BindInt(5, *r.parent);
    } else {
      sqlite3_bind_null(st.get(), 5);
    }
    st.BindText(6, r.created_at.empty() ? FormatRfc3339(WallNow()) : r.created_at);
    st.BindTime(7, r.trained_from);
    st.BindTime(8, r.trained_to);
    BindOptionalDouble(st, 9, r.validation_error);
    BindOptionalDouble(st, 10, r.lambda_max);
    st.BindText(11, r.details.empty() ? "{}" : r.details);
    st.BindBlob(12, Bytes(r.file));
    BindOptionalDouble(st, 13, r.data_exponent);
    BindOptionalDouble(st, 14, r.dynamics_exponent);
    st.BindText(15, ModelOriginName(r.origin));
    if (const int rc = st.Step(); rc != SQLITE_DONE) return sqlite::Error(store_->raw_handle(), rc, what);
  }
  if (Status s = txn.Commit(st_->commit, what); !s.ok()) return s;
  return version;
}

Result<std::optional<ModelRecord>> ModelRegistry::Active(std::uint32_t feed) {
  if (Status s = Prepare(); !s.ok()) return s;
  if (feed >= store_->feed_count()) return Status::Invalid(fmt::format("feed index {} is not registered", feed));
  sqlite::ResetOnExit reset(st_->active);
  st_->active.BindInt(1, store_->feed_row_id(feed));
  const int rc = st_->active.Step();
  if (rc == SQLITE_DONE) return std::optional<ModelRecord>();
  if (rc != SQLITE_ROW) return sqlite::Error(store_->raw_handle(), rc, "reading the active model");
  auto row = ReadRow(st_->active, feed, true);
  if (!row.ok()) return row.status();
  return std::optional<ModelRecord>(std::move(row).value());
}

Result<ModelRecord> ModelRegistry::Get(std::uint32_t feed, std::int64_t version) {
  if (Status s = Prepare(); !s.ok()) return s;
  if (feed >= store_->feed_count()) return Status::Invalid(fmt::format("feed index {} is not registered", feed));
  sqlite::ResetOnExit reset(st_->one);
  st_->one.BindInt(1, store_->feed_row_id(feed));
  st_->one.BindInt(2, version);
  const int rc = st_->one.Step();
  if (rc == SQLITE_DONE) return Status::NotFound(fmt::format("model version {} does not exist", version));
  if (rc != SQLITE_ROW) return sqlite::Error(store_->raw_handle(), rc, "reading a model version");
  return ReadRow(st_->one, feed, true);
}

Result<std::vector<ModelRecord>> ModelRegistry::List(std::uint32_t feed, int limit) {
  if (Status s = Prepare(); !s.ok()) return s;
  if (feed >= store_->feed_count()) return Status::Invalid(fmt::format("feed index {} is not registered", feed));
  sqlite::ResetOnExit reset(st_->list);
  st_->list.BindInt(1, store_->feed_row_id(feed));
  st_->list.BindInt(2, limit);
  std::vector<ModelRecord> out;
  int rc;
  while ((rc = st_->list.Step()) == SQLITE_ROW) {
    auto row = ReadRow(st_->list, feed, false);
    if (!row.ok()) return row.status();
    out.push_back(std::move(row).value());
  }
  if (rc != SQLITE_DONE) return sqlite::Error(store_->raw_handle(), rc, "listing model versions");
  return out;
}

Status ModelRegistry::Activate(std::uint32_t feed, std::int64_t version, const std::string& reason) {
  if (Status s = Prepare(); !s.ok()) return s;
  if (feed >= store_->feed_count()) return Status::Invalid(fmt::format("feed index {} is not registered", feed));
  const std::int64_t feed_id = store_->feed_row_id(feed);
  const std::string what = fmt::format("activating model version {}", version);
  sqlite::Transaction txn(store_->raw_handle(), st_->rollback);
  if (Status s = txn.Begin(st_->begin, what); !s.ok()) return s;
  {
    sqlite::ResetOnExit reset(st_->exists);
    st_->exists.BindInt(1, feed_id);
    st_->exists.BindInt(2, version);
    const int rc = st_->exists.Step();
    if (rc == SQLITE_DONE) return Status::NotFound(fmt::format("model version {} does not exist", version));
    if (rc != SQLITE_ROW) return sqlite::Error(store_->raw_handle(), rc, what);
    if (st_->exists.ColumnText(0) == "active") return Status::Ok();  // already active
  }
  for (Stmt* st : {&st_->retire_active, &st_->activate}) {
    sqlite::ResetOnExit reset(*st);
    st->BindInt(1, feed_id);
    if (st == &st_->retire_active) {
      st->BindText(2, fmt::format("replaced by version {} ({})", version, reason));
    } else {
      st->BindInt(2, version);
      st->BindText(3, reason);
    }
    if (const int rc = st->Step(); rc != SQLITE_DONE) return sqlite::Error(store_->raw_handle(), rc, what);
  }
  return txn.Commit(st_->commit, what);
}

Result<int> ModelRegistry::Prune(std::uint32_t feed, int keep) {
  if (Status s = Prepare(); !s.ok()) return s;
  if (feed >= store_->feed_count()) return Status::Invalid(fmt::format("feed index {} is not registered", feed));
  sqlite::ResetOnExit reset(st_->prune);
  st_->prune.BindInt(1, store_->feed_row_id(feed));
  st_->prune.BindInt(2, keep < 0 ? 0 : keep);
  if (const int rc = st_->prune.Step(); rc != SQLITE_DONE) {
    return sqlite::Error(store_->raw_handle(), rc, "pruning old model versions");
  }
  return sqlite3_changes(store_->raw_handle());
}

}  // namespace lyapcast
