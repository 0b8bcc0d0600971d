#include "learn/smoothed_refit.h"

#include <fmt/format.h>

#include <cmath>
#include <optional>
#include <utility>
#include <vector>

#include "learn/model_error.h"

namespace lyapcast {
namespace {

// A stretch of grid points [begin, end) in one segment of the training span,
// starting and ending at a measured point, with at most max_gap - 1
// unmeasured points in a row inside it.
struct SmoothingRun {
  std::size_t begin = 0, end = 0;
};

bool Measured(const GridSeries& grid, std::size_t i, int channels) {
  const std::uint64_t all = channels >= 64 ? ~std::uint64_t{0} : (std::uint64_t{1} << channels) - 1;
  return grid.present[i] != 0 && (grid.target_missing(i) & all) != all;
}

std::vector<SmoothingRun> SmoothingRuns(const GridSeries& grid, std::size_t end, int max_gap) {
  std::vector<SmoothingRun> runs;
  for (std::size_t s = 0; s < grid.segments(); ++s) {
    const std::size_t begin = grid.segment_begins[s];
    if (begin >= end) break;
    const std::size_t stop = std::min(grid.segment_end(begin), end);
    std::optional<SmoothingRun> run;
    for (std::size_t i = begin; i < stop; ++i) {
      if (!Measured(grid, i, grid.channels)) continue;
      if (run && i - (run->end - 1) > static_cast<std::size_t>(max_gap)) {
        runs.push_back(*run);
        run.reset();
      }
      if (!run) run = SmoothingRun{i, i};
      run->end = i + 1;
    }
    if (run) runs.push_back(*run);
  }
  return runs;
}

// The training pairs with both states replaced by `model`'s smoothed
// estimates (the same pairs as OneStepPairsIn(grid, 0, end): both grid
// states complete, the target not carried). rms_correction: over the
// smoothed measurements, normalized by scale.
OneStepPairs SmoothedPairs(const ForecastModel& model, const GridSeries& grid, std::size_t end, int max_gap,
                           const Eigen::VectorXd& scale, const StateSmootherOptions& smoother,
                           double* rms_correction) {
  const int c = grid.channels;
  std::vector<Eigen::VectorXd> from, to;
  double squares = 0;
  double measurements = 0;
  for (const SmoothingRun& run : SmoothingRuns(grid, end, max_gap)) {
    const std::size_t n = run.end - run.begin;
    if (n < 2) continue;
    Eigen::MatrixXd obs(c, static_cast<Eigen::Index>(n));
    for (std::size_t k = 0; k < n; ++k) {
      const std::size_t i = run.begin + k;
      for (int ch = 0; ch < c; ++ch) {
        const bool measured = grid.present[i] != 0 && ((grid.target_missing(i) >> ch) & 1U) == 0;
        obs(ch, static_cast<Eigen::Index>(k)) = measured ? grid.row(i)[ch] : std::nan("");
      }
    }
    auto smoothed = SmoothStates(model, obs, scale, smoother);
    if (!smoothed.ok()) continue;  // e.g. a channel never measured in this run: its pairs stay out
    squares += smoothed->rms_correction * smoothed->rms_correction * smoothed->measurements;
    measurements += smoothed->measurements;
    for (std::size_t k = 0; k + 1 < n; ++k) {
      const std::size_t i = run.begin + k;
      if (!IsOneStepPair(grid, i)) continue;
      from.push_back(smoothed->states.col(static_cast<Eigen::Index>(k)));
      to.push_back(smoothed->states.col(static_cast<Eigen::Index>(k + 1)));
    }
  }
  *rms_correction = measurements > 0 ? std::sqrt(squares / measurements) : 0;
  OneStepPairs out;
  out.from.resize(c, static_cast<Eigen::Index>(from.size()));
  out.to.resize(c, static_cast<Eigen::Index>(to.size()));
  for (std::size_t k = 0; k < from.size(); ++k) {
    out.from.col(static_cast<Eigen::Index>(k)) = from[k];
    out.to.col(static_cast<Eigen::Index>(k)) = to[k];
  }
  return out;
}

}  // namespace

std::string SmoothedRefit::Note() const {
  if (round == 0) {
    return fmt::format("smoothing the states did not lengthen its free runs ({:.1f} steps on the held-out span, "
                       "{} rounds tried)",
                       first_valid_steps, rounds);
  }
  return fmt::format("fitted on states smoothed by its dynamics (round {} of {}, corrections {:.2g} of the std): "
                     "free runs valid {:.1f} steps on the held-out span, {:.1f} without",
                     round, rounds, rms_correction, valid_steps, first_valid_steps);
}

Result<SmoothedRefit> RefitOnSmoothedStates(PolynomialFit first, const GridSeries& grid, std::size_t train_end,
                                            double dt, const Normalization& normalization,
                                            const OneStepPairs& validation, std::size_t score_begin,
                                            std::size_t score_end, const SmoothedRefitOptions& options) {
  if (train_end > grid.size() || score_begin > score_end || score_end > grid.size()) {
    return Status::Invalid(fmt::format("smoothed refit: training end {} and score span [{}, {}) on a grid of {} points",
                                       train_end, score_begin, score_end, grid.size()));
  }
  if (first.model == nullptr) return Status::Invalid("smoothed refit: no first fit");
  auto valid_steps = [&](const ForecastModel& m) {
    return ModelValidSteps(m, grid, score_begin, score_end, normalization.stddev, 50, 5000, 0.5, options.score_history)
        .mean;
  };
  SmoothedRefit out;
  out.first_valid_steps = valid_steps(*first.model);
  out.valid_steps = out.first_valid_steps;
  PolynomialFitOptions refit_options;
  refit_options.degrees = {first.degree};
  std::shared_ptr<const PolynomialMap> current = first.model;
  const int first_candidates = first.candidates;
  out.fit = std::move(first);
  for (int round = 1; round <= options.rounds; ++round) {
    double correction = 0;
    const OneStepPairs smoothed =
        SmoothedPairs(*current, grid, train_end, options.max_gap, normalization.stddev, options.smoother, &correction);
    if (smoothed.size() == 0) break;
    auto refit = FitPolynomialMap(dt, normalization.mean, normalization.stddev, normalization.increment_scale,
                                  smoothed.from, smoothed.to, validation.from, validation.to, refit_options);
    if (!refit.ok()) break;
    out.rounds = round;
    current = refit->model;
    const double steps = valid_steps(*current);
    if (steps > out.valid_steps) {
      out.fit = std::move(refit).value();
      out.round = round;
      out.rms_correction = correction;
      out.valid_steps = steps;
    }
  }
  out.fit.candidates = first_candidates + out.rounds * static_cast<int>(refit_options.ridges.size());
  return out;
}

}  // namespace lyapcast
