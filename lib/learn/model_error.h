// The one-step error of any model behind the seam, as the trainer measures
// it (learn/trainer.h OneStepError): normalized RMSE per channel at each
// trajectory's first present target, k model steps on across a gap. Used
// where models of different families are compared (the judge).
//
// A NeuralFlowMap<float> is measured by the trainer's own OneStepError, so
// its figures are exactly those of training; any other model steps through
// ForecastModel::Step in double.
//
// Pure function; thread-safe (uses its own scratch).
#pragma once

#include <vector>

#include "learn/forecast_model.h"
#include "learn/pairs.h"

namespace lyapcast {

// `scale`, when given (one value per channel, > 0), replaces the model's
// error_scale(). NaN for a channel with no target.
std::vector<double> ModelOneStepError(const ForecastModel& model, const GridSeries& grid,
                                      const std::vector<Trajectory>& trajectories,
                                      const Eigen::VectorXd* scale = nullptr);

// Multi-step skill on held-out data, in the manner of the valid prediction
// time (the time until the normalized error first exceeds a threshold;
// Vlachas et al., Neural Networks 126 (2020) 191): from each of up to
// `max_starts` complete grid states evenly spread over [begin, end), the
// model runs free, and each later grid point of the same segment (before
// `end`) whose channels are all present is compared with the run; the
// count of model steps until sqrt(mean_c ((run_c - value_c) / scale_c)^2)
// first exceeds `threshold` is that start's score (the steps to the end of
// the data or to max_steps when it never does). One-step error cannot
// separate two models at the noise floor of noisy data; this can.
// history > 0: each run starts from the state FitStateToHistory
// (learn/history_fit.h) fits to the start's grid point and the `history`
// points before it in its segment (missing channels left out), as a
// forecast whose start is fitted to recent samples; the start's own sample
// otherwise, or when that fit fails.
struct ValidSteps {
  double mean = 0;     // mean over starts of the valid steps
  int starts = 0;      // starts scored
  int capped = 0;      // starts whose run stayed valid to the end of their data or max_steps
};
ValidSteps ModelValidSteps(const ForecastModel& model, const GridSeries& grid, std::size_t begin, std::size_t end,
                           const Eigen::VectorXd& scale, int max_starts = 50, int max_steps = 5000,
                           double threshold = 0.5, int history = 0);

}  // namespace lyapcast
