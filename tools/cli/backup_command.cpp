// lyapcast backup: a consistent copy of the daemon's SQLite database, taken
// with SQLite's online backup API while the daemon keeps running.
//
// The copy reads one snapshot: a read transaction on the source is opened
// before the first page is copied and held until the last, so commits the
// daemon makes meanwhile neither show up half in the copy nor restart it (an
// unpinned stepwise backup starts over after every commit by another process,
// which under steady ingest may never finish; docs/operations.md). In WAL
// mode a reader never blocks the writer; the daemon's WAL only grows until the
// copy ends. The snapshot includes commits still in the WAL: the backup API
// reads pages through the pager.
//
// The copy is written to OUT.partial, converted to a single-file database
// (rollback journal mode, so reading it creates no -wal/-shm files), checked
// with PRAGMA integrity_check on a fresh connection, and only then renamed to
// OUT. Any failure or SIGINT/SIGTERM removes the partial file.
#include <CLI/CLI.hpp>
#include <fcntl.h>
#include <fmt/format.h>
#include <sqlite3.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <chrono>
#include <csignal>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <memory>
#include <optional>
#include <string>
#include <string_view>
#include <thread>
#include <vector>

#include "cli_common.h"
#include "commands.h"

namespace lyapcast::cli {
namespace {

namespace fs = std::filesystem;

constexpr const char* kCmd = "backup";
constexpr int kDefaultStepPages = 256;
// Waiting on a lock (SQLITE_BUSY/SQLITE_LOCKED): sleep this long between
// tries, and give up after this much waiting in a row.
constexpr auto kBusySleep = std::chrono::milliseconds(20);
constexpr auto kBusyLimit = std::chrono::seconds(30);
// The source connection's own busy timeout, for opening the read snapshot
// (a reader waits only while another process recovers or restarts the WAL).
constexpr int kSourceBusyTimeoutMs = 5000;

struct BackupArgs {
  std::string config, db, out;
  bool force = false;
  int step_pages = kDefaultStepPages;
};

// Set by SIGINT/SIGTERM while a backup runs; checked between steps.
volatile std::sig_atomic_t g_interrupted = 0;
extern "C" void OnInterrupt(int) { g_interrupted = 1; }

// Installs the interrupt handlers for its lifetime.
class InterruptGuard {
 public:
  InterruptGuard() {
    g_interrupted = 0;
    struct sigaction sa {};
    sa.sa_handler = OnInterrupt;
    sigemptyset(&sa.sa_mask);
    sigaction(SIGINT, &sa, &old_int_);
    sigaction(SIGTERM, &sa, &old_term_);
  }
  ~InterruptGuard() {
    sigaction(SIGINT, &old_int_, nullptr);
    sigaction(SIGTERM, &old_term_, nullptr);
  }
  InterruptGuard(const InterruptGuard&) = delete;
  InterruptGuard& operator=(const InterruptGuard&) = delete;

 private:
  struct sigaction old_int_ {};
  struct sigaction old_term_ {};
};

struct DbCloser {
  void operator()(sqlite3* db) const { sqlite3_close_v2(db); }
};
using Db = std::unique_ptr<sqlite3, DbCloser>;

struct StmtFinalizer {
  void operator()(sqlite3_stmt* s) const { sqlite3_finalize(s); }
};
using Stmt = std::unique_ptr<sqlite3_stmt, StmtFinalizer>;

bool IsBusy(int rc) { return (rc & 0xff) == SQLITE_BUSY || (rc & 0xff) == SQLITE_LOCKED; }

Status SqlError(sqlite3* db, int rc, std::string_view what) {
  const std::string detail = db != nullptr ? sqlite3_errmsg(db) : sqlite3_errstr(rc);
  const std::string message = fmt::format("{}: {}", what, detail);
  switch (rc & 0xff) {
    case SQLITE_NOTADB:
    case SQLITE_CORRUPT:
      return Status::Corruption(message);
    case SQLITE_FULL:
      return Status::Unavailable(message);
    case SQLITE_INTERRUPT:
      return Status::Cancelled(message);
    default:
      return Status::Io(message);
  }
}

Result<Db> Open(const fs::path& path, int flags, std::string_view what) {
  sqlite3* raw = nullptr;
  const int rc = sqlite3_open_v2(path.c_str(), &raw, flags, nullptr);
  Db db(raw);
  if (rc != SQLITE_OK) return SqlError(db.get(), rc, fmt::format("cannot open {} {}", what, path.string()));
  sqlite3_extended_result_codes(db.get(), 1);
  return db;
}

// The first column of each result row as text (at most `max_rows` rows).
Result<std::vector<std::string>> Query(sqlite3* db, const char* sql, std::string_view what,
                                       std::size_t max_rows = 1000) {
  sqlite3_stmt* raw = nullptr;
  int rc = sqlite3_prepare_v2(db, sql, -1, &raw, nullptr);
  Stmt stmt(raw);
  if (rc != SQLITE_OK) return SqlError(db, rc, what);
  std::vector<std::string> rows;
  while ((rc = sqlite3_step(stmt.get())) == SQLITE_ROW) {
    const unsigned char* text = sqlite3_column_text(stmt.get(), 0);
    if (rows.size() < max_rows) rows.emplace_back(text != nullptr ? reinterpret_cast<const char*>(text) : "");
  }
  if (rc != SQLITE_DONE) return SqlError(db, rc, what);
  return rows;
}

Result<std::int64_t> QueryInt(sqlite3* db, const char* sql, std::string_view what) {
  auto rows = Query(db, sql, what);
  if (!rows.ok()) return rows.status();
  if (rows->empty()) return Status::Internal(fmt::format("{}: no result", what));
  return static_cast<std::int64_t>(std::strtoll(rows->front().c_str(), nullptr, 10));
}

// Which file to copy: --db, or storage.path of --config.
Result<fs::path> SourcePath(const BackupArgs& a) {
  if (a.config.empty() == a.db.empty()) {
    return Status::Invalid("give the database with --config CONFIG (its storage.path) or with --db PATH");
  }
  if (!a.db.empty()) return fs::path(a.db);
  auto config = LoadConfig(a.config);
  if (!config.ok()) return config.status();
  return config->storage.path;
}

// Checks that make a mistake in the arguments a usage error before anything
// is written: the source exists, OUT is not the source (or one of its
// sidecar files) and is not replaced without --force.
Status CheckPaths(const BackupArgs& a, const fs::path& source, const fs::path& out, const fs::path& partial) {
  std::error_code ec;
  const std::string from_config = a.config.empty() ? "" : fmt::format(" (storage.path in {})", a.config);
  const fs::file_status st = fs::status(source, ec);
  if (!fs::exists(st)) {
    return Status::NotFound(fmt::format("no database at {}{}{}", source.string(), from_config,
                                        ec && ec != std::errc::no_such_file_or_directory ? ": " + ec.message() : ""));
  }
  if (!fs::is_regular_file(st)) {
    return Status::Invalid(fmt::format("{}{} is not a regular file", source.string(), from_config));
  }
  if (::access(source.c_str(), R_OK) != 0) {
    return Status::Io(
        fmt::format("cannot read {}{}: {} (run as root or as the daemon's user, e.g. "
                    "runuser -u lyapcast -- lyapcast backup ...)",
                    source.string(), from_config, std::strerror(errno)));
  }
  if (out.filename().empty()) return Status::Invalid(fmt::format("OUT '{}' names a folder, not a file", out.string()));
  const fs::path abs_source = fs::absolute(source, ec).lexically_normal();
  for (const fs::path& target : {out, partial}) {
    const fs::path abs_target = fs::absolute(target, ec).lexically_normal();
    bool same = abs_target == abs_source || fs::equivalent(source, target, ec);
    for (const char* suffix : {"-wal", "-shm", "-journal"}) {
      same = same || abs_target == fs::path(abs_source.string() + suffix);
    }
    if (same) {
      return Status::Invalid(
          fmt::format("{} is the database being copied (or one of its files); write the backup "
                      "somewhere else",
                      target.string()));
    }
  }
  const fs::file_status out_st = fs::symlink_status(out, ec);
  if (fs::is_directory(out_st)) {
    return Status::Invalid(fmt::format("{} is a folder; give the backup's file name, e.g. {}", out.string(),
                                       (out / "lyapcast.db").string()));
  }
  if (fs::exists(out_st) && !a.force) {
    return Status::Precondition(
        fmt::format("{} exists; choose another name or add --force to replace it", out.string()));
  }
  if (fs::exists(fs::symlink_status(partial, ec)) && !a.force) {
    return Status::Precondition(
        fmt::format("{} exists: a backup to {} is running or was interrupted; remove it or "
                    "add --force",
                    partial.string(), out.string()));
  }
  return Status::Ok();
}

void RemoveCopy(const fs::path& partial) {
  std::error_code ec;
  for (const char* suffix : {"", "-journal", "-wal", "-shm"}) fs::remove(partial.string() + suffix, ec);
}

struct CopyResult {
  std::int64_t pages = 0;
  std::int64_t page_size = 0;
  std::int64_t schema_version = 0;
};

// Creates `partial` empty and owner-only (the database holds the plant's
// data); fails if it exists, so two backups to one name cannot mix.
Status Claim(const fs::path& partial) {
  const int fd = ::open(partial.c_str(), O_WRONLY | O_CREAT | O_EXCL | O_CLOEXEC, 0600);
  if (fd < 0) {
    const int err = errno;
    if (err == ENOENT) {
      return Status::NotFound(fmt::format("cannot create {}: the folder {} does not exist", partial.string(),
                                          partial.parent_path().empty() ? "." : partial.parent_path().string()));
    }
    return Status::Io(fmt::format("cannot create {}: {}", partial.string(), std::strerror(err)));
  }
  ::close(fd);
  return Status::Ok();
}

// Copies `source` into the empty file `partial` from one read snapshot,
// `step_pages` pages per step, with progress on stderr.
Result<CopyResult> Copy(const fs::path& source, const fs::path& partial, int step_pages) {
  auto src = Open(source, SQLITE_OPEN_READONLY, "the database");
  if (!src.ok()) return src.status();
  sqlite3_busy_timeout(src->get(), kSourceBusyTimeoutMs);

  // Pin the snapshot: every step below reads inside this transaction.
  if (int rc = sqlite3_exec(src->get(), "BEGIN DEFERRED", nullptr, nullptr, nullptr); rc != SQLITE_OK) {
    return SqlError(src->get(), rc, fmt::format("starting a read transaction on {}", source.string()));
  }
  auto tables =
      QueryInt(src->get(), "SELECT count(*) FROM sqlite_schema WHERE type = 'table' AND name IN ('feeds', 'samples')",
               fmt::format("reading {}", source.string()));
  if (!tables.ok()) {
    if (IsBusy(sqlite3_errcode(src->get()))) {
      return Status::Unavailable(
          fmt::format("{} stayed locked for {} s; is another program holding it, e.g. a "
                      "VACUUM or a restore? Try again later",
                      source.string(), kSourceBusyTimeoutMs / 1000));
    }
    if (tables.status().code() == StatusCode::kCorruption) {
      return Status::Invalid(
          fmt::format("{} is not an SQLite database ({})", source.string(), tables.status().message()));
    }
    return tables.status();
  }
  if (*tables != 2) {
    return Status::Invalid(
        fmt::format("{} is not a lyapcast database (it has no feeds and samples tables)", source.string()));
  }
  CopyResult out;
  auto version = QueryInt(src->get(), "PRAGMA user_version", "reading the schema version");
  if (!version.ok()) return version.status();
  out.schema_version = *version;
  auto page_size = QueryInt(src->get(), "PRAGMA page_size", "reading the page size");
  if (!page_size.ok()) return page_size.status();
  out.page_size = *page_size;

  auto dst = Open(partial, SQLITE_OPEN_READWRITE, "the backup file");
  if (!dst.ok()) return dst.status();
  // No rollback journal for a file that is deleted on any failure anyway.
  if (int rc = sqlite3_exec(dst->get(), "PRAGMA journal_mode=OFF", nullptr, nullptr, nullptr); rc != SQLITE_OK) {
    return SqlError(dst->get(), rc, fmt::format("preparing {}", partial.string()));
  }

  sqlite3_backup* backup = sqlite3_backup_init(dst->get(), "main", src->get(), "main");
  if (backup == nullptr) {
    return SqlError(dst->get(), sqlite3_errcode(dst->get()), fmt::format("starting the backup of {}", source.string()));
  }
  std::optional<ProgressLine> progress;
  const double mib = static_cast<double>(out.page_size) / (1024.0 * 1024.0);
  auto waited = std::chrono::steady_clock::duration::zero();
  int rc = SQLITE_OK;
  while (true) {
    if (g_interrupted) {
      rc = SQLITE_INTERRUPT;
      break;
    }
    rc = sqlite3_backup_step(backup, step_pages);
    if (IsBusy(rc)) {
      if (waited >= kBusyLimit) break;
      std::this_thread::sleep_for(kBusySleep);
      waited += kBusySleep;
      continue;
    }
    if (rc != SQLITE_OK && rc != SQLITE_DONE) break;
    waited = {};
    const std::int64_t total = sqlite3_backup_pagecount(backup);
    const std::int64_t done = total - sqlite3_backup_remaining(backup);
    // Progress only for a database that takes more than one step.
    if (!progress && rc == SQLITE_OK) progress.emplace(std::max<std::int64_t>(total / 10, 1));
    if (progress) {
      progress->Update(done, total,
                       fmt::format("pages copied ({:.1f} of {:.1f} MiB)", static_cast<double>(done) * mib,
                                   static_cast<double>(total) * mib));
    }
    if (rc == SQLITE_DONE) {
      out.pages = total;
      break;
    }
  }
  if (progress) progress->Finish();
  const int finish_rc = sqlite3_backup_finish(backup);
  if (rc == SQLITE_INTERRUPT) return Status::Cancelled("interrupted");
  if (IsBusy(rc)) {
    return Status::Unavailable(
        fmt::format("{} stayed locked for {} s ({}); is another program holding it, e.g. a "
                    "VACUUM or a restore?",
                    source.string(), std::chrono::seconds(kBusyLimit).count(), sqlite3_errstr(rc)));
  }
  if (rc != SQLITE_DONE) return SqlError(dst->get(), rc, fmt::format("copying {}", source.string()));
  if (finish_rc != SQLITE_OK) return SqlError(dst->get(), finish_rc, fmt::format("finishing {}", partial.string()));
  sqlite3_exec(src->get(), "COMMIT", nullptr, nullptr, nullptr);  // ends the read snapshot
  src->reset();

  // The pages carry the source's WAL-mode header; make the copy a single-file
  // database (the daemon turns WAL on again when it opens a restored copy).
  auto mode = Query(dst->get(), "PRAGMA journal_mode=DELETE", fmt::format("finishing {}", partial.string()));
  if (!mode.ok()) return mode.status();
  if (mode->empty() || mode->front() != "delete") {
    return Status::Io(fmt::format("finishing {}: journal_mode is '{}', not 'delete'", partial.string(),
                                  mode->empty() ? "" : mode->front()));
  }
  sqlite3* raw = dst->release();
  if (int close_rc = sqlite3_close(raw); close_rc != SQLITE_OK) {
    sqlite3_close_v2(raw);
    return Status::Io(fmt::format("closing {}: {}", partial.string(), sqlite3_errstr(close_rc)));
  }
  return out;
}

struct Verified {
  std::int64_t feeds = 0, samples = 0;
};

// PRAGMA integrity_check (and a count) on a fresh read-only connection to the copy.
Result<Verified> Verify(const fs::path& partial) {
  auto db = Open(partial, SQLITE_OPEN_READONLY, "the copy");
  if (!db.ok()) return db.status();
  sqlite3_progress_handler(
      db->get(), 10000, [](void*) -> int { return g_interrupted ? 1 : 0; }, nullptr);
  auto check = Query(db->get(), "PRAGMA integrity_check", fmt::format("checking {}", partial.string()), 10);
  if (!check.ok()) return check.status();
  if (check->size() != 1 || check->front() != "ok") {
    std::string problems;
    for (const auto& line : *check) problems += "\n  " + line;
    return Status::Corruption(
        fmt::format("PRAGMA integrity_check on the copy did not answer 'ok':{}\nthe source may "
                    "be damaged; check it with sqlite3 -readonly DB \"PRAGMA integrity_check\"",
                    problems));
  }
  Verified v;
  auto feeds = QueryInt(db->get(), "SELECT count(*) FROM feeds", "counting feeds in the copy");
  if (!feeds.ok()) return feeds.status();
  v.feeds = *feeds;
  auto samples = QueryInt(db->get(), "SELECT count(*) FROM samples", "counting samples in the copy");
  if (!samples.ok()) return samples.status();
  v.samples = *samples;
  return v;
}

// fsync a folder so a rename in it survives a power cut.
void SyncFolder(const fs::path& folder) {
  const int fd = ::open(folder.empty() ? "." : folder.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
  if (fd < 0) return;
  ::fsync(fd);
  ::close(fd);
}

// Renames the checked copy to OUT; without --force, never over a file that
// appeared meanwhile.
Status Publish(const fs::path& partial, const fs::path& out, bool force) {
  if (!force) {
    if (::renameat2(AT_FDCWD, partial.c_str(), AT_FDCWD, out.c_str(), RENAME_NOREPLACE) == 0) return Status::Ok();
    if (errno == EEXIST) {
      return Status::Precondition(
          fmt::format("{} appeared during the backup; not replaced (add --force)", out.string()));
    }
    if (errno != EINVAL && errno != ENOSYS && errno != ENOTSUP) {
      return Status::Io(
          fmt::format("cannot rename {} to {}: {}", partial.string(), out.string(), std::strerror(errno)));
    }
    // The file system cannot rename without replacing: check, then rename.
    std::error_code ec;
    if (fs::exists(fs::symlink_status(out, ec))) {
      return Status::Precondition(
          fmt::format("{} appeared during the backup; not replaced (add --force)", out.string()));
    }
  }
  std::error_code ec;
  fs::rename(partial, out, ec);
  if (ec) return Status::Io(fmt::format("cannot rename {} to {}: {}", partial.string(), out.string(), ec.message()));
  return Status::Ok();
}

int ExitCode(const Status& s) {
  switch (s.code()) {
    case StatusCode::kInvalidArgument:
    case StatusCode::kNotFound:
    case StatusCode::kFailedPrecondition:
      return kExitUsage;
    default:
      return kExitFailure;
  }
}

int RunBackup(const BackupArgs& a) {
  const auto started = std::chrono::steady_clock::now();
  if (a.step_pages < 1) return PrintError(kCmd, "--step-pages must be at least 1"), kExitUsage;
  auto source = SourcePath(a);
  if (!source.ok()) return PrintError(kCmd, source.status().message()), kExitUsage;
  const fs::path out = a.out;
  const fs::path partial = a.out + ".partial";
  if (Status s = CheckPaths(a, *source, out, partial); !s.ok()) return PrintError(kCmd, s.message()), ExitCode(s);

  if (a.force) RemoveCopy(partial);  // a leftover of an interrupted backup
  if (Status s = Claim(partial); !s.ok()) return PrintError(kCmd, s.message()), ExitCode(s);
  InterruptGuard interrupts;
  const auto fail = [&](const Status& s) {
    RemoveCopy(partial);
    if (g_interrupted) return PrintError(kCmd, "interrupted; no backup written"), kExitFailure;
    PrintError(kCmd, s.message());
    return ExitCode(s);
  };
  auto copied = Copy(*source, partial, a.step_pages);
  if (!copied.ok()) return fail(copied.status());
  auto verified = Verify(partial);
  if (!verified.ok()) return fail(verified.status());
  if (g_interrupted) return fail(Status::Cancelled("interrupted"));
  if (Status s = Publish(partial, out, a.force); !s.ok()) return fail(s);
  SyncFolder(out.parent_path());

  std::error_code ec;
  const auto bytes = fs::file_size(out, ec);
  const double seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count();
  std::printf(
      "backed up %s to %s: %llu bytes, %lld pages, schema version %lld, %lld feeds, %lld samples, "
      "integrity_check ok, %.2f s\n",
      source->string().c_str(), out.string().c_str(), static_cast<unsigned long long>(ec ? 0 : bytes),
      static_cast<long long>(copied->pages), static_cast<long long>(copied->schema_version),
      static_cast<long long>(verified->feeds), static_cast<long long>(verified->samples), seconds);
  return kExitOk;
}

}  // namespace

void AddBackupCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<BackupArgs>();
  CLI::App* cmd = app.add_subcommand("backup", "Copy the daemon's database to a file, safely while it runs");
  cmd->footer(
      "Copies the daemon's SQLite database (storage.path of --config, or --db) to OUT with SQLite's online\n"
      "backup API. Safe while the daemon runs: the copy is one consistent snapshot, including commits still\n"
      "in the write-ahead log, and ingest is never blocked (the daemon's -wal file only grows until the copy\n"
      "ends). Do not copy the live files with cp, rsync or tar: that can miss commits or give a corrupt file.\n"
      "OUT appears only when complete: the copy goes to OUT.partial, passes PRAGMA integrity_check, and is\n"
      "renamed. An existing OUT is kept unless --force. The copy is a single file (no -wal/-shm needed),\n"
      "readable with `sqlite3 -readonly OUT`. Progress on stderr, a summary line on stdout.\n"
      "Restore (the daemon must be stopped; docs/operations.md \"Restore\"):\n"
      "  systemctl stop lyapcastd\n"
      "  mkdir -p /var/lib/lyapcast.before-restore\n"
      "  mv /var/lib/lyapcast/lyapcast.db* /var/lib/lyapcast.before-restore/    # the old db with its -wal/-shm\n"
      "  install -m 0600 -o lyapcast -g lyapcast BACKUP.db /var/lib/lyapcast/lyapcast.db\n"
      "  systemctl start lyapcastd\n"
      "Examples:\n"
      "  lyapcast backup --config /etc/lyapcast/lyapcast.yaml /backup/lyapcast-$(date +%F).db\n"
      "  lyapcast backup --db /var/lib/lyapcast/lyapcast.db --force /backup/lyapcast-latest.db\n"
      "Exit codes: 0 written and checked; 1 the copy or its check failed (nothing written); 2 bad arguments,\n"
      "no database at the path, or OUT exists.");
  cmd->add_option("OUT", args->out, "backup file to write (must not exist unless --force)")->required();
  auto* config = cmd->add_option("--config,-c", args->config, "the daemon's config file: back up its storage.path");
  auto* db = cmd->add_option("--db", args->db, "the database file to back up (instead of --config)");
  config->excludes(db);
  cmd->add_flag("--force", args->force, "replace an existing OUT (and a leftover OUT.partial)");
  cmd->add_option("--step-pages", args->step_pages, "pages copied per step between progress updates (default 256)");
  cmd->callback([args, exit_code] { *exit_code = RunBackup(*args); });
}

}  // namespace lyapcast::cli
