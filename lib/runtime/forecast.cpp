#include "runtime/forecast.h"

#include <fmt/format.h>

#include <utility>

#include "chaos/horizon.h"

namespace lyapcast {

Horizon ForecastHorizon(const std::optional<double>& lambda_max, double e0, double tol) {
  Horizon h;
  h.e0 = e0;
  h.tol = tol;
  if (!lambda_max) {
    h.reason = "no Lyapunov exponent estimate yet";
    return h;
  }
  h.seconds = PredictabilityHorizon(*lambda_max, e0, tol, &h.reason);
  if (h.seconds) {
    h.reason.clear();
    h.lyapunov_times = *h.seconds * *lambda_max;
  }
  return h;
}

Result<Forecast> MakeForecast(const ForecastModel& model, const ForecastRequest& request) {
  const int channels = model.shape().channels;
  if (request.start.size() != static_cast<std::size_t>(channels)) {
    return Status::Invalid(fmt::format("a forecast starts from {} values, one per model channel; got {}", channels,
                                       request.start.size()));
  }
  if (request.steps < 1) return Status::Invalid(fmt::format("a forecast needs >= 1 steps; got {}", request.steps));
  if (request.step <= Micros{}) return Status::Invalid("a forecast needs a positive data step");

  Forecast f;
  f.from = request.from;
  f.start = request.start;
  f.horizon = ForecastHorizon(request.lambda_max, request.e0, request.tol);
  const Eigen::VectorXd start = Eigen::Map<const Eigen::VectorXd>(request.start.data(), channels);
  const FreeRun run = Rollout(model, start, request.steps);
  f.points.resize(static_cast<std::size_t>(request.steps));
  for (std::int64_t k = 0; k < request.steps; ++k) {
    ForecastPoint& p = f.points[static_cast<std::size_t>(k)];
    p.t = request.from + (k + 1) * request.step;
    const auto col = run.states.col(static_cast<Eigen::Index>(k));
    p.values.assign(col.data(), col.data() + channels);
    p.beyond_horizon = f.horizon.seconds && Seconds(p.t - request.from) > *f.horizon.seconds;
  }
  return f;
}

}  // namespace lyapcast
