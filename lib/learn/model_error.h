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

}  // namespace lyapcast
