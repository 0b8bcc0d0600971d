#include "store/sample_writer.h"

#include <algorithm>
#include <limits>
#include <span>
#include <utility>

namespace lyapcast {
namespace {

using Clock = std::chrono::steady_clock;

// Completes submissions that never reached the writer thread (Stop() before
// Start()): each accepted Submit still gets its one completion.
WriteOutcome ShuttingDown() { return {false, RejectReason::kShuttingDown}; }

WriteOutcome Accepted() {
  WriteOutcome o;
  o.accepted = true;
  return o;
}

}  // namespace

SampleWriter::SampleWriter(std::unique_ptr<WindowStore> store, int feed_count, WriterOptions options)
    : store_(std::move(store)),
      feed_count_(std::max(feed_count, 0)),
      options_(options),
      extents_(static_cast<size_t>(std::max(feed_count, 0))) {}

SampleWriter::~SampleWriter() { Stop(); }

Status SampleWriter::Start() {
  if (store_ == nullptr) return Status::Precondition("the sample writer has no store");
  {
    std::lock_guard lock(mu_);
    if (stopping_) return Status::Precondition("the sample writer was stopped; it cannot start again");
  }
  if (thread_.joinable()) return Status::Precondition("the sample writer is already running");
  std::vector<FeedExtent> loaded;
  loaded.reserve(static_cast<size_t>(feed_count_));
  for (int f = 0; f < feed_count_; ++f) {
    auto extent = store_->Extent(static_cast<std::uint32_t>(f));
    if (!extent.ok()) return extent.status();
    loaded.push_back(*extent);
  }
  {
    std::lock_guard lock(mu_);
    extents_ = std::move(loaded);
  }
  thread_ = std::jthread([this](std::stop_token stop) { Run(std::move(stop)); });
  return Status::Ok();
}

bool SampleWriter::Submit(std::vector<FeedSample> samples, WriteCompletion done) {
  const size_t n = samples.size();
  {
    std::lock_guard lock(mu_);
    if (stopping_) return false;
    queue_.push_back(Submission{std::move(samples), std::move(done), Clock::now()});
    ++submissions_;
    queued_samples_.fetch_add(n, std::memory_order_relaxed);
  }
  cv_.notify_all();
  return true;
}

void SampleWriter::Subscribe(std::function<void(const CommittedBatch&)> subscriber) {
  subscribers_.push_back(std::move(subscriber));
}

void SampleWriter::Stop() {
  std::lock_guard stop_lock(stop_mu_);
  {
    std::lock_guard lock(mu_);
    stopping_ = true;
  }
  cv_.notify_all();
  if (thread_.joinable()) {
    thread_.request_stop();
    thread_.join();  // Run() drains the queue before returning
    return;
  }
  std::deque<Submission> left;
  {
    std::lock_guard lock(mu_);
    left.swap(queue_);
    queued_samples_.store(0, std::memory_order_relaxed);
  }
  for (Submission& s : left) {
    if (s.done) s.done(std::vector<WriteOutcome>(s.samples.size(), ShuttingDown()));
  }
}

FeedExtent SampleWriter::extent(std::uint32_t feed) const {
  std::lock_guard lock(mu_);
  return feed < extents_.size() ? extents_[feed] : FeedExtent{};
}

WriterStats SampleWriter::stats() const {
  std::lock_guard lock(mu_);
  return stats_;
}

bool SampleWriter::PruneNeededLocked() const {
  if (options_.prune_batch <= 0) return false;  // pruning disabled
  for (const FeedExtent& e : extents_) {
    if (e.count > 0 && e.newest - options_.retention > e.oldest) return true;
  }
  return false;
}

// Stop() signals through stopping_ (guarded by mu_, which the waits below
// already hold) rather than the stop token, so one predicate covers both
// "new work" and "drain and exit".
void SampleWriter::Run(std::stop_token) {
  const Micros commit_every = std::max(options_.commit_every, Micros{});
  const Micros commit_quiet = std::max(options_.commit_quiet, Micros{});
  const Micros prune_every = std::max(options_.prune_every, Micros{});
  const Micros retry_after = std::max(options_.retry_after_failure, Micros{});
  const size_t batch = static_cast<size_t>(std::max(options_.commit_batch, 1));
  Clock::time_point prune_at = Clock::now();  // a first pass right away prunes what piled up while stopped

  while (true) {
    std::vector<Submission> group;
    bool stopping = false;
    {
      std::unique_lock lock(mu_);
      const auto has_work = [this] { return stopping_ || !queue_.empty(); };
      // Sleep until work arrives, or until the next prune step when the
      // window holds rows past retention.
      if (PruneNeededLocked()) {
        cv_.wait_until(lock, prune_at, has_work);
      } else {
        cv_.wait(lock, has_work);
      }
      if (!queue_.empty()) {
        // Group commit: one fsync for everything that arrives within
        // commit_every of the first queued submission, or up to commit_batch.
        // When nothing new arrives for commit_quiet, waiting longer only
        // delays the senders (a single client waiting for its replies sends
        // nothing more), so the group is committed at once.
        const auto deadline = queue_.front().queued_at + commit_every;
        const auto full = [this, batch] {
          return stopping_ || queued_samples_.load(std::memory_order_relaxed) >= batch;
        };
        while (!full()) {
          const std::uint64_t seen = submissions_;
          const auto quiet_until = std::min(deadline, Clock::now() + commit_quiet);
          if (cv_.wait_until(lock, quiet_until, full)) break;
          if (Clock::now() >= deadline || submissions_ == seen) break;
        }
        size_t taken = 0;
        while (!queue_.empty() && taken < batch) {  // whole submissions only
          taken += queue_.front().samples.size();
          group.push_back(std::move(queue_.front()));
          queue_.pop_front();
        }
        queued_samples_.fetch_sub(taken, std::memory_order_relaxed);
      }
      stopping = stopping_;
      if (stopping && group.empty()) return;  // queue drained
    }

    if (!group.empty() && !CommitGroup(group)) {
      // Back off so a full disk is not hammered; Stop() cuts the wait short
      // so the remaining queue is still answered promptly.
      std::unique_lock lock(mu_);
      cv_.wait_for(lock, retry_after, [this] { return stopping_; });
    }

    if (!stopping && Clock::now() >= prune_at) {
      // One batch per feed per loop iteration: a big backlog (e.g. after a
      // restart) is pruned in steps with commits in between.
      const bool more = PruneSome();
      prune_at = more ? Clock::now() : Clock::now() + prune_every;
    }
  }
}

struct SampleWriter::GroupWork {
  std::vector<std::vector<WriteOutcome>> results;  // per submission, per sample
  std::vector<FeedSample> candidates;              // samples to insert
  std::vector<std::pair<size_t, size_t>> origin;   // candidate -> (submission, sample)
};

void SampleWriter::ScreenGroup(std::vector<Submission>& group, GroupWork& w) {
  w.results.resize(group.size());
  // Too-old is decided against the newest time known so far, including
  // earlier samples of this group, so the verdict does not depend on how
  // samples happened to be grouped.
  std::vector<FeedExtent> known;
  {
    std::lock_guard lock(mu_);
    known = extents_;
  }
  for (size_t i = 0; i < group.size(); ++i) {
    std::vector<FeedSample>& samples = group[i].samples;
    w.results[i].assign(samples.size(), WriteOutcome{});
    for (size_t j = 0; j < samples.size(); ++j) {
      FeedSample& fs = samples[j];
      // Ingest validates feed and channel count; checking here keeps one bad
      // sample from failing the whole group's transaction.
      if (fs.feed >= static_cast<std::uint32_t>(feed_count_)) {
        w.results[i][j] = {false, RejectReason::kUnknownFeed};
        continue;
      }
      const int channels = store_->channel_count(fs.feed);
      const std::uint64_t channel_bits = channels >= 64 ? ~std::uint64_t{0} : (std::uint64_t{1} << channels) - 1;
      if (fs.sample.values.size() != static_cast<size_t>(channels) || (fs.sample.missing_mask & ~channel_bits) != 0) {
        w.results[i][j] = {false, RejectReason::kFieldCount};
        continue;
      }
      FeedExtent& e = known[fs.feed];
      if (e.count > 0 && fs.sample.t < e.newest - options_.retention) {
        w.results[i][j] = {false, RejectReason::kTooOld};
        continue;
      }
      if (e.count == 0 || fs.sample.t > e.newest) e.newest = fs.sample.t;
      e.count = std::max<std::int64_t>(e.count, 1);
      if (screen_) screen_(fs);
      // Completions only receive outcomes, so the samples can move.
      w.candidates.push_back(std::move(fs));
      w.origin.emplace_back(i, j);
    }
  }
}

bool SampleWriter::StoreCandidates(GroupWork& w, CommittedBatch* batch) {
  std::vector<InsertOutcome> inserted;
  std::vector<MergedRow> merged;
  const auto started = Clock::now();
  const Status status = store_->InsertBatch(w.candidates, &inserted, &merged);
  const double seconds = std::chrono::duration<double>(Clock::now() - started).count();
  if (!status.ok()) {
    // The whole group shares the failed transaction's fate: nothing of it
    // is acknowledged, and the senders are told to retry later.
    for (auto& r : w.results) std::fill(r.begin(), r.end(), WriteOutcome{false, RejectReason::kStorageUnavailable});
    storage_available_.store(false, std::memory_order_relaxed);
    std::lock_guard lock(mu_);
    ++stats_.failed_commits;
    return false;
  }
  storage_available_.store(true, std::memory_order_relaxed);
  std::vector<FeedExtent> extents;
  {
    std::lock_guard lock(mu_);
    extents = extents_;
  }
  for (size_t k = 0; k < w.candidates.size(); ++k) {
    const auto [i, j] = w.origin[k];
    switch (inserted[k]) {
      case InsertOutcome::kInserted: {
        w.results[i][j] = Accepted();
        FeedExtent& e = extents[w.candidates[k].feed];
        const DataTime t = w.candidates[k].sample.t;
        if (e.count == 0) {
          e.oldest = e.newest = t;
        } else {
          e.oldest = std::min(e.oldest, t);
          e.newest = std::max(e.newest, t);
        }
        ++e.count;
        const Sample& s = w.candidates[k].sample;
        const int channels = store_->channel_count(w.candidates[k].feed);
        const std::uint64_t bits = channels >= 64 ? ~std::uint64_t{0} : (std::uint64_t{1} << channels) - 1;
        batch->added.push_back((~s.missing_mask | s.suspect_mask) & bits);
        batch->samples.push_back(std::move(w.candidates[k]));
        break;
      }
      case InsertOutcome::kMerged:
        // Subscribers see the whole row as stored now (the channels it
        // had plus this sample's), so a row completed by a second source
        // is a complete state for them.
        w.results[i][j] = Accepted();
        batch->added.push_back(merged[k].added);
        batch->samples.push_back({w.candidates[k].feed, std::move(merged[k].row)});
        break;
      case InsertOutcome::kDuplicateSame:
        w.results[i][j] = Accepted();
        break;
      case InsertOutcome::kDuplicateConflict:
        w.results[i][j] = {false, RejectReason::kDuplicateTime};
        break;
    }
  }
  std::lock_guard lock(mu_);
  extents_ = std::move(extents);
  stats_.samples_committed += batch->samples.size();
  ++stats_.transactions;
  stats_.commit_latency.Record(seconds);
  return true;
}

bool SampleWriter::CommitGroup(std::vector<Submission>& group) {
  GroupWork w;
  ScreenGroup(group, w);
  CommittedBatch batch;
  const bool committed = w.candidates.empty() || StoreCandidates(w, &batch);
  // The subscribers see what is newly stored first, then the completions
  // run in submission order, only after the outcome is durable (or
  // definitely failed). Subscribers first, so an acknowledged sample has
  // also been seen by them: a retrain requested right after an
  // acknowledgement covers it, and in lockstep an acknowledgement means the
  // retrains due before it (and the drift checks on it) are done.
  if (!batch.samples.empty()) {
    for (const auto& subscriber : subscribers_) subscriber(batch);
  }
  for (size_t i = 0; i < group.size(); ++i) {
    if (group[i].done) group[i].done(std::move(w.results[i]));
  }
  return committed;
}

void CommitLatency::Record(double seconds) {
  for (std::size_t i = 0; i < kBuckets; ++i) {
    if (seconds <= kBounds[i]) ++le[i];
  }
  ++count;
  sum_seconds += seconds;
}

bool SampleWriter::PruneSome() {
  if (options_.prune_batch <= 0) return false;
  std::vector<FeedExtent> snapshot;
  {
    std::lock_guard lock(mu_);
    snapshot = extents_;
  }
  bool more = false;
  for (size_t f = 0; f < snapshot.size(); ++f) {
    const FeedExtent& e = snapshot[f];
    if (e.count == 0) continue;
    const DataTime cutoff = e.newest - options_.retention;
    if (cutoff <= e.oldest) continue;
    const auto feed = static_cast<std::uint32_t>(f);
    auto deleted = store_->PruneBatch(feed, cutoff, options_.prune_batch);
    if (!deleted.ok()) continue;  // tried again at the next pass; commits report storage trouble
    // Only the oldest end moved and this thread is the only writer, so the
    // count is adjusted and the new oldest row read with one b-tree descent
    // instead of recounting the whole window.
    FeedExtent updated = e;
    updated.count -= *deleted;
    bool found = false;
    const Status read = store_->ReadRange(feed, DataTime::min(),
                                          DataTime::max(), 1,
                                          [&](std::span<const Sample> rows) {
                                            updated.oldest = rows.front().t;
                                            found = true;
                                            return false;
                                          });
    if (!read.ok() || (found ? updated.count <= 0 : updated.count != 0)) {
      // Fall back to the store's own figures if the bookkeeping disagrees.
      auto fresh = store_->Extent(feed);
      if (fresh.ok()) updated = *fresh;
    } else if (!found) {
      updated = FeedExtent{};
    }
    if (updated.count > 0 && updated.oldest < cutoff) more = true;
    std::lock_guard lock(mu_);
    extents_[f] = updated;
    stats_.rows_pruned += static_cast<std::uint64_t>(*deleted);
  }
  return more;
}

}  // namespace lyapcast
