// One forecast (docs/design.md "The model seam"): a free run of a model from
// a start state (learn/forecast_model.h Rollout), stamped with data times,
// with the predictability horizon (chaos/horizon.h) and, per point, whether
// it lies beyond that horizon. The forecast route, `lyapcast forecast
// --model` and the benchmarks all forecast through MakeForecast, so they give
// the same numbers; how a forecast is written out (JSON, CSV, a table) is
// the caller's.
//
// Thread safety: MakeForecast is reentrant; concurrent calls may share one
// model (it makes its own scratch). Nothing here throws.
#pragma once

#include <cstdint>
#include <limits>
#include <optional>
#include <string>
#include <vector>

#include "core/data_time.h"
#include "core/status.h"
#include "learn/forecast_model.h"

namespace lyapcast {

struct ForecastRequest {
  DataTime from{};            // data time of the start state
  std::vector<double> start;  // one value per model channel, in model order
  Micros step{};              // data time of one model step (> 0)
  std::int64_t steps = 0;     // points to forecast (>= 1)
  // The horizon's inputs: the largest Lyapunov exponent per second of data
  // time (none: no estimate yet), the current normalized one-step error and
  // the tolerance the forecast error may grow to.
  std::optional<double> lambda_max;
  double e0 = std::numeric_limits<double>::quiet_NaN();
  double tol = std::numeric_limits<double>::quiet_NaN();
};

struct Horizon {
  // Seconds of data time after `from` for which the forecast is expected
  // within tolerance (PredictabilityHorizon); none, with `reason`, when no
  // horizon follows from the inputs.
  std::optional<double> seconds;
  std::string reason;                    // empty when seconds is set
  std::optional<double> lyapunov_times;  // seconds * lambda_max, when both exist
  double e0 = std::numeric_limits<double>::quiet_NaN();   // as requested
  double tol = std::numeric_limits<double>::quiet_NaN();  // as requested
};

struct ForecastPoint {
  DataTime t{};                // from + k * step, k = 1, 2, ...
  std::vector<double> values;  // one per channel; inf/NaN where the run left the representable range
  bool beyond_horizon = false;  // t - from > horizon seconds (false without a horizon)
};

struct Forecast {
  DataTime from{};
  std::vector<double> start;
  std::vector<ForecastPoint> points;  // `steps` of them, never cut short
  Horizon horizon;
};

// kInvalidArgument when start has not model.shape().channels values, steps
// < 1 or step <= 0. Start values are used as given (a non-finite one gives
// non-finite points).
[[nodiscard]] Result<Forecast> MakeForecast(const ForecastModel& model, const ForecastRequest& request);

// The horizon alone (what MakeForecast computes): "no Lyapunov exponent
// estimate yet" without an exponent, else PredictabilityHorizon's answer.
Horizon ForecastHorizon(const std::optional<double>& lambda_max, double e0, double tol);

}  // namespace lyapcast
