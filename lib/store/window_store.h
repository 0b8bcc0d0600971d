// WindowStore: the rolling SQLite window of samples (one connection).
//
// Schema (versioned by PRAGMA user_version, migrated forward on open):
//   feeds(feed_id, name, channels, step_us, created_at)
//   samples(feed_id, t_us, mask, vals, suspect, suspect_vals) WITHOUT ROWID,
//     primary key (feed_id, t_us)
//   models(feed_id, version, status, ...)  (version 2; see ModelRegistry)
// `vals` holds only the present channels as little-endian float64, in channel
// order; `mask` has bit c set when channel c is missing. `suspect` has bit c
// set when channel c's reading was screened suspect (then it is also set in
// `mask`), and `suspect_vals` holds those raw readings as `vals` holds values.
//
// Duplicate timestamps: a sample whose (feed, t) is already stored is accepted
// as an idempotent resend when its readings are identical (stored once), and
// rejected as kDuplicateConflict when a reading differs (the stored one
// stays). A client that resends after a lost connection therefore never
// duplicates data, and conflicting data is never overwritten silently.
//
// Journal: WAL, synchronous=FULL (a commit survives power loss).
// Thread safety: an instance is used by one thread at a time. The writer
// thread owns one instance; each reader (training, queries) opens its own.
#pragma once

#include <cstdint>
#include <filesystem>
#include <functional>
#include <memory>
#include <span>
#include <string>
#include <vector>

#include "core/data_time.h"
#include "core/sample.h"
#include "core/status.h"

struct sqlite3;

namespace lyapcast {

// What the store records about a feed, compared at every start.
struct FeedLayout {
  std::string id;
  std::vector<std::string> channels;
  Micros step{};
};

// Stored samples of a feed. When count == 0, oldest/newest are 0.
struct FeedExtent {
  std::int64_t count = 0;
  DataTime oldest{};
  DataTime newest{};
};

// A row that InsertBatch merged: the whole row as stored now, and the
// channels the merging sample added to it (each present or suspect).
struct MergedRow {
  Sample row;
  std::uint64_t added = 0;
};

enum class InsertOutcome {
  kInserted,           // new row
  kDuplicateSame,      // its channels are already stored with these values: accepted, stored once
  kMerged,             // a partial row at that time gained this sample's other channels
  kDuplicateConflict,  // a channel is stored at that time with another value: rejected
};

struct StoreOptions {
  std::filesystem::path path;  // parent folder is created if missing
  bool read_only = false;      // readers open read-only; requires an existing file
  int busy_timeout_ms = 5000;  // wait for locks this long before failing
};

// 1: window tables; 2: model registry; 3: exponent columns; 4: models.origin
inline constexpr int kSchemaVersion = 5;

class WindowStore {
 public:
  // Opens (creating if needed) and migrates the schema to kSchemaVersion.
  // Errors: kIoError (cannot open), kFailedPrecondition (file from a newer
  // lyapcast: user_version > kSchemaVersion), kCorruption.
  [[nodiscard]] static Result<std::unique_ptr<WindowStore>> Open(const StoreOptions& options);
  ~WindowStore();
  WindowStore(const WindowStore&) = delete;
  WindowStore& operator=(const WindowStore&) = delete;

  // Binds feeds in config order: feed index i in the calls below means
  // feeds[i]. New feeds are recorded; a known feed whose channels or step
  // differ is refused (kFailedPrecondition) with a message that says what
  // changed and what to do. Feeds stored but absent from `feeds` are kept.
  [[nodiscard]] Status RegisterFeeds(const std::vector<FeedLayout>& feeds);

  int schema_version() const;

  // Inserts all samples in one transaction and fills outcomes[i] per sample.
  // Requires values.size() == the feed's channels and suspect_mask within
  // missing_mask (kInvalidArgument otherwise, nothing stored).
  // A sample at a time where the feed already has a row merges into it
  // channel by channel (channels at different rates, or two sources writing
  // one feed). A channel's reading is its value, or its raw reading when
  // suspect. Readings the row lacks are stored with their suspect marks
  // (kMerged; when `merged` is given, (*merged)[i] is the whole row as
  // stored now, suspect marks and raw readings included, and the channels
  // added); readings the row holds bit for bit are fine (kDuplicateSame when
  // the sample adds none); a reading that differs from the stored one
  // rejects the sample (kDuplicateConflict; nothing of it is stored). Only
  // the readings compare, not the marks: a resend screened differently is
  // the same reading, and the stored mark stays.
  // On a non-ok Status (disk full: kUnavailable; other failures: kIoError)
  // the transaction is rolled back and nothing of the batch is stored.
  [[nodiscard]] Status InsertBatch(std::span<const FeedSample> samples, std::vector<InsertOutcome>* outcomes,
                                   std::vector<MergedRow>* merged = nullptr);

  // Deletes at most max_rows of the feed's oldest samples with t < cutoff,
  // in one short transaction. Returns the number of rows deleted.
  [[nodiscard]] Result<int> PruneBatch(std::uint32_t feed, DataTime cutoff, int max_rows);

  [[nodiscard]] Result<FeedExtent> Extent(std::uint32_t feed);

  // Streams samples with from <= t < to in time order, in slices of at most
  // slice_rows, each read in its own short read transaction (so WAL
  // checkpoints are never starved). `visit` returns false to stop early.
  [[nodiscard]] Status ReadRange(std::uint32_t feed, DataTime from, DataTime to, int slice_rows,
                                 const std::function<bool(std::span<const Sample>)>& visit);

  // Number of channels of a registered feed.
  int channel_count(std::uint32_t feed) const;
  // The feeds.feed_id row of a registered feed (for other tables' keys).
  std::int64_t feed_row_id(std::uint32_t feed) const { return feed_ids_[feed]; }
  std::size_t feed_count() const { return feed_ids_.size(); }

  // The raw handle for this connection's own pragmas in tests (e.g.
  // max_page_count to simulate a full disk). Owned by the store.
  sqlite3* raw_handle() { return db_; }

 private:
  WindowStore() = default;
  struct Statements;
  [[nodiscard]] Status PrepareStatements();  // after the migration
  sqlite3* db_ = nullptr;  // owned; closed in the destructor
  std::unique_ptr<Statements> stmts_;
  std::vector<std::int64_t> feed_ids_;  // config index -> feeds.feed_id
  std::vector<int> channel_counts_;
  int schema_version_ = 0;
  std::filesystem::path path_;  // for messages
  bool read_only_ = false;
};

}  // namespace lyapcast
