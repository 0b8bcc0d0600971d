#include "schedule/polynomial_training.h"

#include <fmt/format.h>

#include <chrono>

#include "learn/polynomial_map.h"
#include "learn/smoothed_refit.h"

namespace lyapcast {

Result<Candidate> TrainPolynomial(const RetrainData& data, const FeedConfig& feed) {
  const auto started = std::chrono::steady_clock::now();
  Candidate out;
  out.fit.stop = FitStop::kIterations;
  if (!data.normalization) {
    out.fit_status = Status::Invalid(data.normalization_error);
    return out;
  }
  const Normalization& n = *data.normalization;
  const OneStepPairs train = OneStepPairsIn(data.grid, 0, data.heldout_begin);
  const OneStepPairs selection = OneStepPairsOf(data.grid, data.selection);
  out.fit.train_trajectories = static_cast<std::int64_t>(train.size());
  out.fit.validation_trajectories = static_cast<std::int64_t>(selection.size());
  if (train.size() == 0 || selection.size() == 0) {
    out.fit_status = Status::Invalid(fmt::format("polynomial map: {} one-step training pairs and {} selection pairs "
                                                 "(both states complete, one step apart); need at least one of each",
                                                 train.size(), selection.size()));
    return out;
  }
  PolynomialFitOptions options;
  options.degrees = feed.model.degrees;
  auto fit = FitPolynomialMap(data.dt, n.mean, n.stddev, n.increment_scale, train.from, train.to, selection.from,
                              selection.to, options);
  if (!fit.ok()) {
    out.fit.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count();
    out.fit_status = fit.status();
    return out;
  }
  PolynomialFit chosen = std::move(fit).value();
  std::string smoothing;
  if (feed.model.denoise) {
    // Scored on the selection span, which the fit may choose on; the judge
    // span stays unseen.
    SmoothedRefitOptions smooth;
    smooth.max_gap = feed.model.max_gap;
    auto refit = RefitOnSmoothedStates(chosen, data.grid, data.heldout_begin, data.dt, n, selection,
                                       data.heldout_begin, data.judge_begin, smooth);
    if (!refit.ok()) {
      out.fit_status = refit.status();
      return out;
    }
    chosen = std::move(refit->fit);
    smoothing = "; " + refit->Note();
  }
  out.fit.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count();
  out.fit.iterations = 0;  // an exact fit: no optimizer steps
  out.fit.validation_error = chosen.validation_error;
  out.model = chosen.model;
  out.family_note = fmt::format("polynomial degree {}, ridge {:g}, {} pairs, best of {} degree/ridge candidates{}",
                                chosen.degree, chosen.ridge, train.size(), chosen.candidates, smoothing);
  return out;
}

}  // namespace lyapcast
