// WriterOptions: group commit, retention and pruning of the SampleWriter
// (store/sample_writer.h).
//
// Owned by lib/store; the config keys limits.commit_every, limits.commit_batch
// and storage.retention map onto it, and their defaults in config/config.h
// refer to the ones here. Header-only, so lib/config can use the type
// without linking SQLite. A plain value.
#pragma once

#include "core/data_time.h"

namespace lyapcast {

struct WriterOptions {
  Micros commit_every{5'000};           // group window after the first queued sample
  int commit_batch = 4096;              // commit as soon as this many samples are queued
  Micros commit_quiet{300};             // ... or when no submission arrived for this long
  Micros retention = 6 * 3600 * kSecond;  // data time kept per feed (older samples: too-old, pruned)
  int prune_batch = 1000;               // rows per prune transaction
  Micros prune_every = kSecond;         // wall time between prune passes
  Micros retry_after_failure{200'000};  // wait before retrying after a failed commit
};

}  // namespace lyapcast
