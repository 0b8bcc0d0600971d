// SampleWriter: the single store writer thread with group commit.
//
// Sessions Submit() parsed samples with a completion; the writer gathers
// submissions into one transaction until `commit_batch` samples are queued or
// `commit_every` has passed since the first one (or no new submission came
// for `commit_quiet`), commits, then calls each
// completion with one outcome per sample, and after that hands the newly
// stored samples to the subscribers. An outcome is known only after its
// transaction committed, so `ok` is never sent for an uncommitted sample.
//
// Too old: a sample older than (the feed's newest stored time - retention)
// is rejected kTooOld without touching SQLite. Retention pruning runs on the
// writer thread between commits in batches of `prune_batch` rows, so a large
// prune never holds the write lock long enough to stall ingest.
//
// Storage failure: when a commit fails (disk full, I/O error), every sample
// of that group gets kStorageUnavailable, storage_available() turns false,
// and later groups keep trying (after `retry_after_failure`); the first
// successful commit turns it true again. Nothing is ever acknowledged that
// was not committed.
//
// Threads: Submit, Subscribe-free getters and Stop may be called from any
// thread. Completions and subscribers run on the writer thread and must be
// quick (post work elsewhere). Subscribe only before Start.
#pragma once

#include <atomic>
#include <chrono>
#include <condition_variable>
#include <cstdint>
#include <deque>
#include <functional>
#include <iterator>
#include <memory>
#include <mutex>
#include <optional>
#include <thread>
#include <vector>

#include "core/reject_reason.h"
#include "core/sample.h"
#include "core/write_outcome.h"
#include "store/window_store.h"
#include "store/writer_options.h"

namespace lyapcast {

using WriteCompletion = std::function<void(std::vector<WriteOutcome>)>;

// Newly stored samples of one committed transaction (identical resends and
// rejected samples are not included). A sample merged into a row already
// stored at its time is handed on as the whole row as stored now.
struct CommittedBatch {
  std::vector<FeedSample> samples;
  // One per sample: the channels this commit stored a reading for (present
  // or suspect); all of a new row's, only the merged-in ones of a merged
  // row. Lets a subscriber count a reading once though a merged row
  // repeats the readings stored before.
  std::vector<std::uint64_t> added;
};

// Wall time of each successful commit (the InsertBatch transaction with its
// fsync), as a cumulative histogram for the metrics endpoint.
struct CommitLatency {
  static constexpr double kBounds[] = {0.0005, 0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5};
  static constexpr std::size_t kBuckets = std::size(kBounds);
  std::uint64_t le[kBuckets] = {};  // commits that took <= kBounds[i] seconds
  std::uint64_t count = 0;
  double sum_seconds = 0;
  void Record(double seconds);
};

struct WriterStats {
  std::uint64_t samples_committed = 0;  // inserted rows
  std::uint64_t transactions = 0;       // successful commits
  std::uint64_t failed_commits = 0;
  std::uint64_t rows_pruned = 0;
  CommitLatency commit_latency;
};

class SampleWriter {
 public:
  // Takes ownership of the store, which must have its feeds registered.
  SampleWriter(std::unique_ptr<WindowStore> store, int feed_count, WriterOptions options);
  ~SampleWriter();  // Stop()s if still running
  SampleWriter(const SampleWriter&) = delete;
  SampleWriter& operator=(const SampleWriter&) = delete;

  // Loads each feed's extent and starts the writer thread.
  [[nodiscard]] Status Start();

  // Queues samples; `done` is called exactly once from the writer thread.
  // Returns false (and does not call `done`) after Stop() began. Never
  // blocks: callers bound how much they keep outstanding (backpressure).
  bool Submit(std::vector<FeedSample> samples, WriteCompletion done);

  // Adds a subscriber for committed batches. Only before Start(). After each
  // commit every subscriber is called with the newly stored samples BEFORE
  // that group's completions run, so whoever sees an acknowledgement may
  // rely on the subscribers having seen the sample.
  void Subscribe(std::function<void(const CommittedBatch&)> subscriber);

  // Sets the sensor screen: called on the writer thread for every sample
  // that passed the writer's own checks, in submission order, just before
  // it is stored; it may mark channels suspect (Sample::suspect_mask, with
  // the channel's missing bit). Only before Start().
  void SetScreen(std::function<void(FeedSample&)> screen) { screen_ = std::move(screen); }

  // Commits and completes everything submitted so far, then joins the thread.
  void Stop();

  bool storage_available() const { return storage_available_.load(std::memory_order_relaxed); }
  std::size_t queued_samples() const { return queued_samples_.load(std::memory_order_relaxed); }
  FeedExtent extent(std::uint32_t feed) const;  // snapshot
  WriterStats stats() const;                    // snapshot

 private:
  struct Submission {
    std::vector<FeedSample> samples;
    WriteCompletion done;
    std::chrono::steady_clock::time_point queued_at;  // starts the commit_every window
  };
  void Run(std::stop_token stop);
  // Returns false when the commit failed (storage unavailable).
  bool CommitGroup(std::vector<Submission>& group);
  // CommitGroup's two stages: per-sample checks that keep one bad sample
  // from failing the transaction, then the transaction and its outcomes.
  struct GroupWork;
  void ScreenGroup(std::vector<Submission>& group, GroupWork& w);
  bool StoreCandidates(GroupWork& w, CommittedBatch* batch);
  // One prune batch per feed that has rows below its cutoff; returns true
  // when some feed still has rows to prune after this step.
  bool PruneSome();
  bool PruneNeededLocked() const;  // requires mu_

  std::unique_ptr<WindowStore> store_;
  const int feed_count_;
  const WriterOptions options_;
  std::vector<std::function<void(const CommittedBatch&)>> subscribers_;
  std::function<void(FeedSample&)> screen_;

  mutable std::mutex mu_;
  std::condition_variable cv_;
  std::deque<Submission> queue_;  // guarded by mu_
  bool stopping_ = false;         // guarded by mu_
  std::uint64_t submissions_ = 0;  // guarded by mu_; counts Submit() calls
  std::vector<FeedExtent> extents_;  // guarded by mu_
  WriterStats stats_;                // guarded by mu_

  std::mutex stop_mu_;  // serializes Stop() so two callers never join at once
  std::atomic<bool> storage_available_{true};
  std::atomic<std::size_t> queued_samples_{0};
  std::jthread thread_;
};

}  // namespace lyapcast
