#include "learn/model_error.h"

#include <algorithm>
#include <cmath>
#include <iterator>
#include <limits>

#include "learn/history_fit.h"
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
    if (start >= grid.size() || !grid.complete(start)) continue;  // trajectories start from complete states
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

namespace {

// The state at grid point s fitted to it and up to `history` points before
// it in its segment; `measured` when there is no history or the fit fails.
Eigen::VectorXd FittedStart(const ForecastModel& model, const GridSeries& grid, std::size_t s, int history,
                            const Eigen::VectorXd& scale, const Eigen::VectorXd& measured) {
  const std::size_t segment = *std::prev(std::upper_bound(grid.segment_begins.begin(), grid.segment_begins.end(), s));
  const std::size_t first = s - std::min<std::size_t>(static_cast<std::size_t>(history), s - segment);
  if (first == s) return measured;
  const int c = grid.channels;
  Eigen::MatrixXd obs(c, static_cast<Eigen::Index>(s - first + 1));
  for (std::size_t i = first; i <= s; ++i) {
    for (int ch = 0; ch < c; ++ch) {
      const bool present = grid.present[i] != 0 && ((grid.target_missing(i) >> ch) & 1U) == 0;
      obs(ch, static_cast<Eigen::Index>(i - first)) = present ? grid.row(i)[ch] : std::nan("");
    }
  }
  auto fit = FitStateToHistory(model, obs, scale);
  return fit.ok() && fit->start.allFinite() ? fit->start : measured;
}

}  // namespace

ValidSteps ModelValidSteps(const ForecastModel& model, const GridSeries& grid, std::size_t begin, std::size_t end,
                           const Eigen::VectorXd& scale, int max_starts, int max_steps, double threshold,
                           int history) {
  ValidSteps out;
  end = std::min(end, grid.size());
  if (begin + 1 >= end || max_starts < 1) return out;
  const int c = grid.channels;
  const std::size_t span = end - begin;
  const std::size_t stride = std::max<std::size_t>(span / static_cast<std::size_t>(max_starts), 1);
  auto scratch = model.NewScratch();
  Eigen::VectorXd x(c), y(c);
  double total = 0;
  for (std::size_t s = begin; s + 1 < end && out.starts < max_starts; s += stride) {
    if (!grid.complete(s)) continue;
    const std::size_t stop = std::min(end, grid.segment_end(s));
    x = Eigen::Map<const Eigen::VectorXd>(grid.row(s), c);
    if (history > 0) x = FittedStart(model, grid, s, history, scale, x);
    int valid = 0;
    bool failed = false;
    for (std::size_t k = s + 1; k < stop && valid < max_steps; ++k) {
      model.Step(x, &y, *scratch);
      x = y;
      if (grid.complete(k) && grid.target_missing(k) == 0) {
        const double e = std::sqrt(
            ((x - Eigen::Map<const Eigen::VectorXd>(grid.row(k), c)).cwiseQuotient(scale)).squaredNorm() / c);
        if (!(e <= threshold)) {  // NaN fails too
          failed = true;
          break;
        }
      }
      ++valid;
    }
    if (valid == 0 && !failed && s + 1 >= stop) continue;  // no room after this start
    ++out.starts;
    out.capped += failed ? 0 : 1;
    total += valid;
  }
  out.mean = out.starts > 0 ? total / out.starts : 0.0;
  return out;
}

}  // namespace lyapcast
