#include "schedule/cadence.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>

namespace lyapcast {

const char* LyapunovSourceName(LyapunovSource s) {
  switch (s) {
    case LyapunovSource::kModel: return "model";
    case LyapunovSource::kDynamics: return "dynamics";
    case LyapunovSource::kData: return "data";
  }
  return "?";
}

std::optional<ChosenExponent> ChooseExponent(const LyapunovEstimates& e, bool has_model) {
  const auto usable = [](const std::optional<double>& v) { return v.has_value() && std::isfinite(*v); };
  const auto positive = [&](const std::optional<double>& v) { return usable(v) && *v > 0; };
  // The estimates disagree most right after a change: a freshly
  // warm-started model's free run can settle on a cycle or linger near a
  // fixed point (exponent near or below zero) while the process is as
  // chaotic as ever. Pacing by it stretched the cadence to max_interval
  // exactly when retraining mattered most (the demo's loop-a in lockstep:
  // T = 2 300 s from the model just after the jump, 11 s from the
  // equations). So the cadence follows the LARGEST positive estimate, the
  // shortest Lyapunov time: retraining too often costs compute, bounded by
  // min_interval; too rarely costs forecasts. Ties go to the model, then
  // the dynamics.
  std::optional<ChosenExponent> best;
  const auto consider = [&](const std::optional<double>& v, LyapunovSource source) {
    if (positive(v) && (!best || *v > best->lambda_max)) best = ChosenExponent{*v, source};
  };
  if (has_model) consider(e.model, LyapunovSource::kModel);
  consider(e.dynamics, LyapunovSource::kDynamics);
  consider(e.data, LyapunovSource::kData);
  if (best) return best;
  // None is positive: the model's, else the dynamics', else the data's
  // (then NextRetrain waits max_interval: no chaos to pace by).
  if (has_model && usable(e.model)) return ChosenExponent{*e.model, LyapunovSource::kModel};
  if (usable(e.dynamics)) return ChosenExponent{*e.dynamics, LyapunovSource::kDynamics};
  if (usable(e.data)) return ChosenExponent{*e.data, LyapunovSource::kData};
  return std::nullopt;
}

CadenceDecision NextRetrain(const RetrainConfig& config, const LyapunovEstimates& estimates, bool has_model,
                            DataTime since) {
  CadenceDecision d;
  d.exponent = ChooseExponent(estimates, has_model);
  const Micros lo = config.min_interval, hi = std::max(config.max_interval, config.min_interval);
  if (!d.exponent) {
    d.interval = hi;
    d.reason = fmt::format("no Lyapunov estimate yet: max_interval {}", FormatDuration(hi));
  } else if (d.exponent->lambda_max <= 0) {
    d.interval = hi;
    d.reason = fmt::format("largest Lyapunov exponent {:.3g}/s from the {} is not positive (no chaos to pace by): "
                           "max_interval {}",
                           d.exponent->lambda_max, LyapunovSourceName(d.exponent->source), FormatDuration(hi));
  } else {
    const double lyapunov_time_s = 1.0 / d.exponent->lambda_max;
    const double wanted_s = config.lyapunov_fraction * lyapunov_time_s;
    // Clamp in double first: a tiny exponent gives a huge interval.
    const double clamped_s = std::clamp(wanted_s, Seconds(lo), Seconds(hi));
    d.interval = MicrosFromSeconds(clamped_s);
    const std::string base = fmt::format("{:g} Lyapunov times (T = {:.3g}s from the {}) = {:.3g}s",
                                         config.lyapunov_fraction, lyapunov_time_s,
                                         LyapunovSourceName(d.exponent->source), wanted_s);
    if (wanted_s < Seconds(lo)) {
      d.reason = base + ", raised to min_interval " + FormatDuration(lo);
    } else if (wanted_s > Seconds(hi)) {
      d.reason = base + ", lowered to max_interval " + FormatDuration(hi);
    } else {
      d.reason = base;
    }
  }
  d.due = since + d.interval;
  return d;
}

}  // namespace lyapcast
