#include "store/sqlite_util.h"

#include <sqlite3.h>

#include <fmt/format.h>

namespace lyapcast::sqlite {

Status Error(sqlite3* db, int rc, std::string_view what) {
  const int primary = rc & 0xff;
  const char* detail = db != nullptr ? sqlite3_errmsg(db) : sqlite3_errstr(rc);
  if (primary == SQLITE_FULL) {
    return Status::Unavailable(
        fmt::format("{}: the database is full (disk full or its maximum size reached): {}", what, detail));
  }
  if (primary == SQLITE_CORRUPT || primary == SQLITE_NOTADB) {
    return Status::Corruption(fmt::format("{}: {}", what, detail));
  }
  return Status::Io(fmt::format("{}: {} (sqlite code {})", what, detail, rc));
}

Status Exec(sqlite3* db, const char* sql, std::string_view what) {
  const int rc = sqlite3_exec(db, sql, nullptr, nullptr, nullptr);
  if (rc != SQLITE_OK) return Error(db, rc, what);
  return Status::Ok();
}

Stmt::~Stmt() { sqlite3_finalize(stmt_); }

Stmt& Stmt::operator=(Stmt&& other) noexcept {
  if (this != &other) {
    sqlite3_finalize(stmt_);
    stmt_ = other.stmt_;
    other.stmt_ = nullptr;
  }
  return *this;
}

Result<Stmt> Stmt::Prepare(sqlite3* db, std::string_view sql) {
  sqlite3_stmt* stmt = nullptr;
  const int rc = sqlite3_prepare_v3(db, sql.data(), static_cast<int>(sql.size()), SQLITE_PREPARE_PERSISTENT, &stmt,
                                    nullptr);
  if (rc != SQLITE_OK) {
    sqlite3_finalize(stmt);
    return Error(db, rc, fmt::format("preparing '{}'", sql));
  }
  return Stmt(stmt);
}

// Bind calls can only fail for a wrong index or SQLITE_TOOBIG, both
// programming errors on these fixed statements; a failed bind leaves the
// parameter NULL, which the NOT NULL constraints then reject at Step().
void Stmt::BindInt(int index, std::int64_t value) { sqlite3_bind_int64(stmt_, index, value); }

void Stmt::BindText(int index, std::string_view value) {
  sqlite3_bind_text64(stmt_, index, value.data(), value.size(), SQLITE_TRANSIENT, SQLITE_UTF8);
}

void Stmt::BindBlob(int index, std::span<const unsigned char> bytes) {
  // A zero-length blob must still be a blob, not NULL: pass a non-null pointer.
  static const unsigned char kEmpty = 0;
  sqlite3_bind_blob64(stmt_, index, bytes.empty() ? &kEmpty : bytes.data(), bytes.size(), SQLITE_TRANSIENT);
}

int Stmt::Step() { return sqlite3_step(stmt_); }

void Stmt::Reset() {
  if (stmt_ != nullptr) sqlite3_reset(stmt_);
}

std::int64_t Stmt::ColumnInt(int column) const { return sqlite3_column_int64(stmt_, column); }

bool Stmt::ColumnIsNull(int column) const { return sqlite3_column_type(stmt_, column) == SQLITE_NULL; }

std::string Stmt::ColumnText(int column) const {
  const unsigned char* text = sqlite3_column_text(stmt_, column);
  const int n = sqlite3_column_bytes(stmt_, column);
  if (text == nullptr) return {};
  return std::string(reinterpret_cast<const char*>(text), static_cast<size_t>(n));
}

std::span<const unsigned char> Stmt::ColumnBlob(int column) const {
  const void* data = sqlite3_column_blob(stmt_, column);
  const int n = sqlite3_column_bytes(stmt_, column);
  if (data == nullptr || n <= 0) return {};
  return {static_cast<const unsigned char*>(data), static_cast<size_t>(n)};
}

Transaction::~Transaction() {
  if (open_ && sqlite3_get_autocommit(db_) == 0) {
    // Nothing useful can be done if ROLLBACK itself fails; the next BEGIN
    // will then report the connection's state.
    rollback_.Step();
    rollback_.Reset();
  }
}

Status Transaction::Begin(Stmt& begin, std::string_view what) {
  ResetOnExit reset(begin);
  const int rc = begin.Step();
  if (rc != SQLITE_DONE) return Error(db_, rc, what);
  open_ = true;
  return Status::Ok();
}

Status Transaction::Commit(Stmt& commit, std::string_view what) {
  ResetOnExit reset(commit);
  const int rc = commit.Step();
  if (rc != SQLITE_DONE) return Error(db_, rc, what);  // still open: the destructor rolls back
  open_ = false;
  return Status::Ok();
}

}  // namespace lyapcast::sqlite
