// The data of one retraining job, prepared once: the window on the model's
// grid, the training trajectories, and the held-out trajectories split in
// two (docs/design.md "Retraining").
//
//  - Cold start (no active version): the whole window; it must hold
//    retrain.min_pairs training trajectories.
//  - Warm start: the trajectories that start at or after the active
//    version's trained_to (the chunk), plus a replay share of older window
//    trajectories (retrain.replay of the training set, drawn evenly with the
//    job's seed).
//  - Held out: the newest retrain.validation fraction of the new data (of
//    the window on a cold start). Its OLDER half is the selection set, on
//    which the fit keeps its best weights (early stopping); its NEWER half is
//    the judge set, on which candidate and active model are compared. A
//    candidate's weights are thus never chosen on the pairs that judge it,
//    so a candidate no better than the active model is not favoured by its
//    own selection. No selection trajectory reaches into the judge span, and
//    no training trajectory into the held-out span.
//
// Pure functions of their arguments; thread-safe.
#pragma once

#include <cstdint>
#include <optional>
#include <span>
#include <string>
#include <vector>

#include "config/config.h"
#include "core/sample.h"
#include "core/status.h"
#include "learn/pairs.h"
#include "learn/trainer.h"
#include "store/window_store.h"

namespace lyapcast {

struct RetrainData {
  GridSeries grid;
  std::vector<Trajectory> train;
  std::vector<Trajectory> selection;  // early stopping
  std::vector<Trajectory> judge;      // champion/challenger
  std::size_t heldout_begin = 0;      // first grid index held out
  std::size_t judge_begin = 0;        // first grid index of the judge span
  // Statistics of the training span (complete states before heldout_begin);
  // absent (with the reason) when they cannot be computed.
  std::optional<Normalization> normalization;
  std::string normalization_error;
  double dt = 1;  // model step in model time units
  // Empty when the job can train; otherwise why not (not enough data).
  std::string not_enough;
  // Set with not_enough when the window holds data that yield no usable
  // pairs (as opposed to a cold start still filling its window): a health
  // reason at once, with the cause in not_enough.
  bool blocked = false;
};

struct RetrainDataOptions {
  DataTime until{};                        // samples before this time
  std::optional<DataTime> active_trained_to;  // warm start from data after this; none = cold start
  std::int64_t active_version = 0;            // for messages
  std::uint64_t seed = 1;                  // the replay draw
};

// Why a window yields no usable training pairs, in words an operator can act
// on: samples too sparse for model.max_gap, a channel missing from (nearly)
// every state; empty when none of these explains it.
std::string DiagnoseNoPairs(std::span<const Sample> window, const GridSeries& grid, const FeedConfig& feed);

// `window`: the feed's samples before options.until, oldest first.
RetrainData PrepareRetrainData(std::span<const Sample> window, const FeedConfig& feed,
                               const RetrainDataOptions& options);

// Reads the feed's samples in [from, until), oldest first.
[[nodiscard]] Result<std::vector<Sample>> ReadWindow(WindowStore& reader, std::uint32_t feed, DataTime from,
                                                     DataTime until);

}  // namespace lyapcast
