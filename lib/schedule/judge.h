// Champion/challenger: whether a retraining job's candidate replaces the
// active model (docs/design.md "Retraining").
//
// Both are scored on the judge half of the held-out data (retrain_data.h),
// which the candidate's training never chose weights on, with the trainer's
// one-step error (OneStepError: normalized RMSE per channel at each
// trajectory's first target, averaged over channels). The candidate is
// promoted when its error is at most active * (1 + promote_tolerance), or
// when there is no active model (or it scores no finite error). A fit that
// failed, or a candidate without a finite error, is never promoted.
//
// Pure function; thread-safe.
#pragma once

#include <cstdint>
#include <limits>
#include <optional>
#include <string>
#include <vector>

#include "learn/forecast_model.h"
#include "schedule/retrain_data.h"
#include "schedule/training_strategy.h"

namespace lyapcast {

struct Judgement {
  bool promote = false;
  double candidate_error = std::numeric_limits<double>::quiet_NaN();
  std::vector<double> candidate_per_channel;  // NaN where a channel has no judged target
  double active_error = std::numeric_limits<double>::quiet_NaN();
  std::string reason;  // in words, for logs, the registry and the API
};

struct ActiveForJudging {
  const ForecastModel* model = nullptr;  // null: no active model (a first model)
  std::int64_t version = 0;
};

Judgement JudgeCandidate(const Candidate& candidate, const ActiveForJudging& active, const RetrainData& data,
                         double promote_tolerance);

}  // namespace lyapcast
