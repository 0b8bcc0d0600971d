// Which model family a retraining job fits (model.family; docs/design.md
// "Model families"):
//   neural      the training strategy's neural flow map (training_strategy.h);
//   polynomial  the polynomial map (polynomial_training.h);
//   auto        both; the one whose free runs stay valid longer on the
//               selection span (the held-out half each fit may choose on;
//               ModelValidSteps, the data's channel scale, threshold 0.5)
//               becomes the candidate, the lower one-step error on the
//               selection pairs breaking a tie; Candidate::family_choice
//               says so with the figures of both. Multi-step, because on
//               noisy data both families sit at the noise floor of the
//               one-step error while their forecasts differ (measured in
//               the skill benchmark: docs/performance.md). A family whose
//               fit fails loses; if both fail, the neural candidate is
//               returned with its failure.
// The judge then compares the candidate with the active model as always,
// whatever either's family.
//
// Threads: as TrainingStrategy::Train (the calling trainer thread).
#pragma once

#include "core/status.h"
#include "schedule/retrain_data.h"
#include "schedule/training_strategy.h"

namespace lyapcast {

// Requires context.feed and data.not_enough empty.
[[nodiscard]] Result<Candidate> TrainCandidate(const RetrainData& data, const TrainingContext& context);

}  // namespace lyapcast
