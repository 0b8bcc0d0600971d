// Predictability horizon of a forecast (docs/design.md "Lyapunov time and
// cadence"; docs/references.md "Predictability horizon"): an error growing as e(t) ~ e0 exp(lambda t)
// reaches `tol` after (1 / lambda) ln(tol / e0) (the standard linear-growth
// estimate). Units: those of 1 / lambda_max.
// Thread safety: pure function. Header-only.
#pragma once

#include <cmath>
#include <optional>
#include <string>

namespace lyapcast {

// Returns:
//   - nullopt, with *reason set (if reason is not null), when lambda_max is
//     not finite or <= 0 (errors do not grow exponentially: no horizon), or
//     when e0 or tol is not finite, or tol <= 0, or e0 < 0;
//   - 0 when e0 >= tol (the forecast is already out of tolerance);
//   - (1 / lambda_max) ln(tol / e0) otherwise (+inf for e0 == 0 is avoided:
//     e0 == 0 yields nullopt with a reason, an exact model has no horizon
//     from this estimate).
inline std::optional<double> PredictabilityHorizon(double lambda_max, double e0, double tol, std::string* reason) {
  auto fail = [reason](const char* why) -> std::optional<double> {
    if (reason != nullptr) *reason = why;
    return std::nullopt;
  };
  if (!std::isfinite(lambda_max)) return fail("largest Lyapunov exponent is not finite");
  if (lambda_max <= 0) return fail("largest Lyapunov exponent is not positive: errors do not grow exponentially");
  if (!std::isfinite(tol) || tol <= 0) return fail("tolerance is not finite and positive");
  if (!std::isfinite(e0) || e0 < 0) return fail("initial error is not finite and non-negative");
  if (e0 >= tol) return 0.0;
  if (e0 == 0) return fail("initial error is zero: no finite horizon from linear growth");
  return std::log(tol / e0) / lambda_max;
}

}  // namespace lyapcast
