#include "schedule/family_choice.h"

#include <fmt/format.h>

#include <cmath>
#include <limits>

#include "learn/model_error.h"
#include "schedule/polynomial_training.h"

namespace lyapcast {
namespace {

// RMS over channels of the one-step error on the selection pairs, on the
// data's scale; +inf for a failed fit or no finite figure.
double SelectionError(const Candidate& c, const RetrainData& data) {
  if (!c.fit_status.ok() || c.model == nullptr || !data.normalization) return std::numeric_limits<double>::infinity();
  const std::vector<double> e = ModelOneStepError(*c.model, data.grid, data.selection, &data.normalization->stddev);
  double sum = 0;
  int n = 0;
  for (double v : e) {
    if (!std::isfinite(v)) continue;
    sum += v * v;
    ++n;
  }
  return n > 0 ? std::sqrt(sum / n) : std::numeric_limits<double>::infinity();
}

std::string Figure(double e) { return std::isfinite(e) ? fmt::format("{:.3g}", e) : std::string("no fit"); }

// Mean valid steps of free runs over the selection span; -1 for a failed fit.
double SelectionSteps(const Candidate& c, const RetrainData& data) {
  if (!c.fit_status.ok() || c.model == nullptr || !data.normalization) return -1;
  return ModelValidSteps(*c.model, data.grid, data.heldout_begin, data.judge_begin, data.normalization->stddev).mean;
}

}  // namespace

Result<Candidate> TrainCandidate(const RetrainData& data, const TrainingContext& context) {
  const FeedConfig& feed = *context.feed;
  if (feed.model.family == ModelFamily::kPolynomial) return TrainPolynomial(data, feed);
  auto neural = MakeTrainingStrategy(feed.retrain.strategy)->Train(data, context);
  if (feed.model.family == ModelFamily::kNeural || !neural.ok()) return neural;
  if (neural->fit_status.ok() && neural->fit.stop == FitStop::kCancelled) return neural;
  auto polynomial = TrainPolynomial(data, feed);
  if (!polynomial.ok()) return neural;
  const double n = SelectionError(*neural, data);
  const double p = SelectionError(*polynomial, data);
  const double n_steps = SelectionSteps(*neural, data);
  const double p_steps = SelectionSteps(*polynomial, data);
  const std::string figures =
      fmt::format("free runs valid for {:.1f} steps (polynomial) vs {:.1f} (neural) on the selection span; "
                  "one-step error on {} selection pairs: polynomial {}, neural {}",
                  p_steps, n_steps, data.selection.size(), Figure(p), Figure(n));
  if (p_steps > n_steps || (p_steps == n_steps && p < n)) {
    polynomial->family_choice = "polynomial map chosen (" + figures + ")";
    // The neural fit's figures stay in the log; the record describes what is stored.
    return polynomial;
  }
  neural->family_choice = "neural flow map chosen (" + figures + ")";
  return neural;
}

}  // namespace lyapcast
