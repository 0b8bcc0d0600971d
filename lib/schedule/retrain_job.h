// One retraining job of one feed, as a pipeline of small steps
// (docs/design.md "Retraining"):
//
//   prepare the data once (retrain_data.h: grid, training trajectories,
//   held-out selection and judge halves)
//   -> train a candidate with the feed's strategy (training_strategy.h)
//   -> judge it against the active model on the judge half (judge.h)
//   -> record the version with its details and exponents in the registry
//
// A diverging fit is recorded as rejected and never served. Every version is
// in the registry before the caller may serve it; the caller publishes a
// promoted one (RetrainOutcome::promoted is ready to serve, decoded).
//
// Deterministic for a given window, active version and seed when
// `lockstep` is set (iteration budget only, no wall-time budget).
// Threads: runs on the calling thread; `registry` is this job's own
// connection.
#pragma once

#include <atomic>
#include <functional>
#include <limits>
#include <memory>
#include <optional>
#include <span>
#include <string>

#include "config/config.h"
#include "learn/trainer.h"
#include "schedule/active_model.h"
#include "store/model_registry.h"

namespace lyapcast {

// A channel's readings not to train on over [from, to] (data time): a
// sensor the drift monitor found at fault (FeedRuntime).
struct ChannelExclusion {
  int channel = 0;
  DataTime from{}, to{};
};

struct RetrainInput {
  const FeedConfig* feed = nullptr;  // required
  std::uint32_t feed_index = 0;
  DataTime until{};                  // the job uses samples with t < until
  // The feed's samples before `until` within the retention window, oldest
  // first (ReadWindow); read once by the caller.
  std::span<const Sample> window;
  std::shared_ptr<const ActiveModel> active;  // none = cold start
  std::uint64_t seed = 1;
  bool lockstep = false;                      // ignore retrain.time_budget
  const std::atomic<bool>* cancel = nullptr;
  std::string trigger = "cadence";            // recorded in the version's details
  // The feed's exponent estimates (per second) from the data and the known
  // dynamics that pace the cadence after this job; stored in the version's
  // registry row so a restarted daemon resumes the same cadence.
  std::optional<double> data_exponent{}, dynamics_exponent{};
  // Readings treated as missing for training (Scheduler::ExcludeReadings).
  std::vector<ChannelExclusion> exclusions;
};

// kActivated: an uploaded model an operator asked to serve at once, without
// judging (schedule/model_upload.h); retraining jobs never give it.
enum class RetrainVerdict { kPromoted, kRejected, kNotEnoughData, kCancelled, kActivated };
// "promoted", "rejected", "not_enough_data", "cancelled", "activated"
const char* RetrainVerdictName(RetrainVerdict v);

struct RetrainOutcome {
  RetrainVerdict verdict = RetrainVerdict::kNotEnoughData;
  std::optional<std::int64_t> version;  // registry version (promoted or rejected)
  std::string reason;                   // in words, for logs and the API
  bool blocked = false;                 // kNotEnoughData although data arrive (RetrainData::blocked)
  double candidate_error = std::numeric_limits<double>::quiet_NaN();
  double active_error = std::numeric_limits<double>::quiet_NaN();
  std::optional<double> lambda_max;     // the candidate's largest exponent, per second
  FitResult fit;
  std::shared_ptr<const ActiveModel> promoted;  // set when kPromoted
};

// Errors only for failures of the registry or of the model file writer; a
// fit that fails is a kRejected outcome.
[[nodiscard]] Result<RetrainOutcome> RunRetrain(ModelRegistry& registry, const RetrainInput& in,
                                                const std::function<void(const FitProgress&)>& progress = {});

}  // namespace lyapcast
