#include "learn/model_error.h"

#include <algorithm>
#include <cmath>
#include <limits>

#include "learn/trainer.h"

namespace lyapcast {

std::vector<double> ModelOneStepError(const ForecastModel& model, const GridSeries& grid,
                                      const std::vector<Trajectory>& trajectories, const Eigen::VectorXd* scale) {
  if (const FlowMap<float>* net = NeuralNetworkOf<float>(model)) {
    if (scale == nullptr) return OneStepError(*net, grid, trajectories);
    const Eigen::VectorXf s = scale->cast<float>();
    return OneStepError(*net, grid, trajectories, &s);
  }
  const Eigen::VectorXd& s = scale != nullptr ? *scale : model.error_scale();
  const int c = grid.channels;
  std::vector<double> sum(static_cast<std::size_t>(c), 0.0), count(static_cast<std::size_t>(c), 0.0);
  auto scratch = model.NewScratch();
  Eigen::VectorXd x(c), y(c);
  for (const Trajectory& t : trajectories) {
    const auto start = static_cast<std::size_t>(t.start);
    if (grid.size() == 0) break;
    const std::size_t last = std::min(start + static_cast<std::size_t>(std::max(t.horizon, 0)), grid.size() - 1);
    std::size_t target = 0;
    for (std::size_t j = start + 1; j <= last && target == 0; ++j) {
      if (grid.present[j]) target = j;
    }
    if (target == 0) continue;
    x = Eigen::Map<const Eigen::VectorXd>(grid.row(start), c);
    for (std::size_t k = start; k < target; ++k) {
      model.Step(x, &y, *scratch);
      x = y;
    }
    const double* v = grid.row(target);
    for (int k = 0; k < c; ++k) {
      if ((grid.target_missing(target) >> k) & 1U) continue;
      const double e = (x[k] - v[k]) / s[k];
      sum[static_cast<std::size_t>(k)] += e * e;
      count[static_cast<std::size_t>(k)] += 1;
    }
  }
  std::vector<double> out(static_cast<std::size_t>(c));
  for (std::size_t k = 0; k < out.size(); ++k) {
    out[k] = count[k] > 0 ? std::sqrt(sum[k] / count[k]) : std::numeric_limits<double>::quiet_NaN();
  }
  return out;
}

}  // namespace lyapcast
