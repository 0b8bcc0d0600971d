// Fitting the polynomial map family in a retraining job (model.family
// polynomial or auto; docs/design.md "Model families").
//
// A polynomial map's readout is fitted exactly (learn/polynomial_map.h), so
// there is no warm start to continue from: every job refits it on every
// one-step pair of the window's training span (both grid states complete,
// one step apart in one segment, the target not carried), not only on the
// newest chunk the neural fit trains on. The degree and the ridge penalty
// are chosen on the selection half of the held-out data (one-step pairs of
// data.selection); the judge half stays unseen, as for every candidate.
// With model.denoise auto the fit is then refitted on states smoothed by its
// own dynamics (learn/smoothed_refit.h), scored by free runs on the
// selection span; the family note says which was kept and why.
//
// Pure functions; thread-safe.
#pragma once

#include <cstddef>
#include <vector>

#include "config/config.h"
#include "core/status.h"
#include "learn/pairs.h"
#include "schedule/retrain_data.h"
#include "schedule/training_strategy.h"

namespace lyapcast {

// The polynomial candidate of a job: fitted on OneStepPairsIn(grid, 0,
// heldout_begin), chosen on the selection pairs, with the data's
// normalization. Requires data.not_enough empty. A fit that cannot be made
// (too few pairs, no finite candidate) is a Candidate with fit_status set;
// errors only for what is not the candidate's fault (none today).
[[nodiscard]] Result<Candidate> TrainPolynomial(const RetrainData& data, const FeedConfig& feed);

}  // namespace lyapcast
