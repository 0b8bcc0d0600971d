// One retraining job of one feed: window chunk (+ replay) -> trajectories ->
// warm-started (or cold) Fit -> champion/challenger -> registry.
//
//  - Cold start (no active version): the whole window up to `until`, once it
//    holds retrain.min_pairs training trajectories; fresh weights.
//  - Warm start: the trajectories that start at or after the active model's
//    trained_to (the chunk), plus a replay sample of older window
//    trajectories, `replay` of the training set, drawn evenly at random from
//    the older part with the job's seed; weights from the active model. When
//    the chunk's statistics left the model's normalization (a mean moved by
//    more than two standard deviations, or a standard deviation changed by
//    more than 2x), the model is refit (function unchanged) first.
//  - Validation: the newest retrain.validation fraction of the new data
//    (of the window on a cold start), the same slice for candidate and
//    active model. The candidate is promoted
//    when its one-step error is at most active * (1 + promote_tolerance);
//    otherwise it is recorded as rejected with both numbers. A diverging fit
//    is recorded as rejected and never served.
//  - Every version is in the registry before the caller may serve it.
//
// Deterministic for a given window, active version and seed when
// `lockstep` is set (iteration budget only, no wall-time budget).
// Threads: runs on the calling thread; `reader` and `registry` are this
// job's own connections.
#pragma once

#include <atomic>
#include <functional>
#include <limits>
#include <optional>
#include <string>

#include "config/config.h"
#include "learn/trainer.h"
#include "store/model_registry.h"
#include "store/window_store.h"

namespace lyapcast {

struct RetrainInput {
  const FeedConfig* feed = nullptr;  // required
  std::uint32_t feed_index = 0;
  Micros retention = 6 * 3600 * kSecond;
  DataTime until{};                   // use samples with t < until
  std::optional<ModelRecord> active;    // with its file; none = cold start
  std::uint64_t seed = 1;
  bool lockstep = false;                // ignore retrain.time_budget
  const std::atomic<bool>* cancel = nullptr;
  std::string trigger = "cadence";      // recorded in the version's details
  // The feed's exponent estimates (per second) from the data and the known
  // dynamics that pace the cadence after this job; recorded in the version's
  // details ("exponents") so a restarted daemon resumes the same cadence.
  std::optional<double> data_exponent{}, dynamics_exponent{};
};

// The "exponents" a version's details recorded (RetrainInput above); each
// absent when not recorded, null or not a finite number. Tolerates any
// details text (older versions, hand-edited rows).
struct RecordedExponents {
  std::optional<double> data, dynamics;
};
RecordedExponents ParseRecordedExponents(const std::string& details);

enum class RetrainVerdict { kPromoted, kRejected, kNotEnoughData, kCancelled };
const char* RetrainVerdictName(RetrainVerdict v);

struct RetrainOutcome {
  RetrainVerdict verdict = RetrainVerdict::kNotEnoughData;
  std::optional<std::int64_t> version;  // registry version (promoted or rejected)
  std::string reason;                   // in words, for logs and the API
  double candidate_error = std::numeric_limits<double>::quiet_NaN();
  double active_error = std::numeric_limits<double>::quiet_NaN();
  std::optional<double> lyapunov_per_s;  // candidate's largest exponent
  FitResult fit;
};

// Errors only for failures of the store or the registry; a fit that fails is
// a kRejected outcome.
[[nodiscard]] Result<RetrainOutcome> RunRetrain(WindowStore& reader, ModelRegistry& registry, const RetrainInput& in,
                                                const std::function<void(const FitProgress&)>& progress = {});

}  // namespace lyapcast
