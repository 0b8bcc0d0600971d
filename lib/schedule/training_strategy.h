// TrainingStrategy: how a retraining job turns prepared data into a
// candidate model (retrain.strategy; docs/design.md "Retraining").
//
// A strategy starts from the active model's weights (a warm start, refit
// first when the data left its normalization) or from fresh weights (a cold
// start), trains on data.train, may use data.selection to choose among its
// own weights (early stopping) and must not look at data.judge: that half
// judges its candidate against the active model afterwards.
//
// Only `supervised` exists now: Fit (learn/trainer.h), the data loss over
// short rollouts plus the physics constraint terms of the known dynamics.
// Later strategies implement the same interface.
//
// Threads: Train runs on the calling (trainer) thread; a strategy object
// holds no state between calls and may be shared.
#pragma once

#include <atomic>
#include <cstdint>
#include <functional>
#include <memory>
#include <string>

#include "config/config.h"
#include "core/status.h"
#include "learn/flow_map.h"
#include "learn/forecast_model.h"
#include "learn/trainer.h"
#include "schedule/retrain_data.h"

namespace lyapcast {

struct TrainingContext {
  const FeedConfig* feed = nullptr;         // required
  const FlowMap<float>* warm = nullptr;     // the active model; null = cold start
  std::uint64_t seed = 1;                   // fresh weights and batch draws
  bool lockstep = false;                    // iteration budget only, no wall-time budget
  const std::atomic<bool>* cancel = nullptr;
  std::function<void(const FitProgress&)> progress;  // may be empty
};

struct Candidate {
  std::shared_ptr<const ForecastModel> model;  // null only when the fit failed before a model existed
  FitResult fit;
  Status fit_status;       // not ok: the fit failed or diverged (the candidate is rejected)
  std::string refit;       // why the warm start's normalization was moved; empty if it was not
  std::string family_note;  // what was fitted, in words (polynomial: degree, ridge, pairs); may be empty
  std::string family_choice;  // model.family auto: which family won on the selection pairs and why
};

class TrainingStrategy {
 public:
  virtual ~TrainingStrategy() = default;
  virtual const char* name() const = 0;  // as in the config
  // Errors only for what is not the candidate's fault (a model that cannot
  // be created from the config, constraints that do not compile); a fit that
  // fails is a Candidate with fit_status set. Requires data.not_enough empty.
  [[nodiscard]] virtual Result<Candidate> Train(const RetrainData& data, const TrainingContext& context) const = 0;
};

class SupervisedStrategy final : public TrainingStrategy {
 public:
  const char* name() const override { return "supervised"; }
  [[nodiscard]] Result<Candidate> Train(const RetrainData& data, const TrainingContext& context) const override;
};

std::unique_ptr<TrainingStrategy> MakeTrainingStrategy(RetrainStrategy kind);

// The model a strategy starts from: a copy of context.warm, refit when the
// data's statistics left its normalization (a mean moved by more than two
// standard deviations, or a standard deviation changed by more than 2x;
// *refit says which), or a fresh model with the data's normalization and
// random weights from context.seed.
[[nodiscard]] Result<FlowMap<float>> StartingModel(const RetrainData& data, const TrainingContext& context,
                                                   std::string* refit);

}  // namespace lyapcast
