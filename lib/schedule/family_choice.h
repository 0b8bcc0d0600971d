// Which model family a retraining job fits (model.family; docs/design.md
// "Model families"):
//   neural      the training strategy's neural flow map (training_strategy.h);
//   polynomial  the polynomial map (polynomial_training.h);
//   auto        both; the one with the lower one-step error on the selection
//               pairs (the held-out half each fit may choose on; the same
//               pairs and the data's channel scale for both) becomes the
//               candidate, and Candidate::family_choice says so with both
//               figures. A family whose fit fails loses; if both fail, the
//               neural candidate is returned with its failure.
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
