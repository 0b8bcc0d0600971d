// Small private helpers over the sqlite3 C API for lib/store: an owning
// prepared statement, a transaction guard, and the mapping of SQLite result
// codes to Status codes. Not part of the public lib/ surface.
//
// Thread safety: same as the connection they wrap (one thread at a time).
#pragma once

#include <cstdint>
#include <span>
#include <string>
#include <string_view>

#include "core/data_time.h"
#include "core/status.h"

struct sqlite3;
struct sqlite3_stmt;

namespace lyapcast::sqlite {

// Maps a failed SQLite call on `db` to a Status: SQLITE_FULL -> kUnavailable
// (disk full or the database's maximum size; retrying later can succeed),
// SQLITE_CORRUPT / SQLITE_NOTADB -> kCorruption, anything else -> kIoError.
// `what` says what was being done; SQLite's own message is appended.
Status Error(sqlite3* db, int rc, std::string_view what);

// Runs SQL without parameters (DDL, pragmas with constant arguments). Never
// used with values that come from outside the program.
Status Exec(sqlite3* db, const char* sql, std::string_view what);

// An owned prepared statement. Move-only; finalized on destruction.
class Stmt {
 public:
  Stmt() = default;
  ~Stmt();
  Stmt(Stmt&& other) noexcept : stmt_(other.stmt_) { other.stmt_ = nullptr; }
  Stmt& operator=(Stmt&& other) noexcept;
  Stmt(const Stmt&) = delete;
  Stmt& operator=(const Stmt&) = delete;

  // Prepared as SQLITE_PREPARE_PERSISTENT: these statements live as long as
  // the connection and are reused for every call.
  [[nodiscard]] static Result<Stmt> Prepare(sqlite3* db, std::string_view sql);

  // Binding: parameter indexes start at 1. Blob and text bytes are copied
  // (SQLITE_TRANSIENT) so callers need not keep buffers alive.
  void BindInt(int index, std::int64_t value);
  void BindText(int index, std::string_view value);
  void BindBlob(int index, std::span<const unsigned char> bytes);
  // Times and spans are stored as integer microseconds.
  void BindTime(int index, DataTime t) { BindInt(index, EpochMicros(t)); }
  void BindSpan(int index, Micros d) { BindInt(index, d.count()); }

  // sqlite3_step: SQLITE_ROW, SQLITE_DONE or an error code.
  int Step();
  // Ends the current execution so the statement releases its locks; keeps
  // the bindings (every caller rebinds all parameters anyway).
  void Reset();

  std::int64_t ColumnInt(int column) const;
  bool ColumnIsNull(int column) const;
  DataTime ColumnTime(int column) const { return DataTimeFromMicros(ColumnInt(column)); }
  Micros ColumnSpan(int column) const { return Micros(ColumnInt(column)); }
  std::string ColumnText(int column) const;
  std::span<const unsigned char> ColumnBlob(int column) const;  // valid until the next Step/Reset

  sqlite3_stmt* get() const { return stmt_; }

 private:
  explicit Stmt(sqlite3_stmt* stmt) : stmt_(stmt) {}
  sqlite3_stmt* stmt_ = nullptr;
};

// Resets a statement when leaving scope, so an early return never leaves a
// statement mid-execution (which would pin a read snapshot or a lock).
class ResetOnExit {
 public:
  explicit ResetOnExit(Stmt& stmt) : stmt_(stmt) {}
  ~ResetOnExit() { stmt_.Reset(); }
  ResetOnExit(const ResetOnExit&) = delete;
  ResetOnExit& operator=(const ResetOnExit&) = delete;

 private:
  Stmt& stmt_;
};

// A transaction begun with one of the connection's cached BEGIN statements.
// Unless Commit() succeeded, the destructor rolls back, and only when a
// transaction is still open: SQLite itself already rolls back after some
// errors (SQLITE_FULL, SQLITE_IOERR, SQLITE_NOMEM), and a second ROLLBACK
// would fail. Either way the connection is left usable for the next call.
class Transaction {
 public:
  Transaction(sqlite3* db, Stmt& rollback) : db_(db), rollback_(rollback) {}
  ~Transaction();
  Transaction(const Transaction&) = delete;
  Transaction& operator=(const Transaction&) = delete;

  [[nodiscard]] Status Begin(Stmt& begin, std::string_view what);
  [[nodiscard]] Status Commit(Stmt& commit, std::string_view what);

 private:
  sqlite3* db_;
  Stmt& rollback_;
  bool open_ = false;
};

}  // namespace lyapcast::sqlite
