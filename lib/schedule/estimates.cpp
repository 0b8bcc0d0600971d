#include "schedule/estimates.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>

#include "chaos/lyapunov.h"
#include "chaos/rosenstein.h"
#include "learn/pairs.h"
#include "physics/dynamics.h"

namespace lyapcast {

Result<ExponentEstimate> DynamicsExponent(const FeedConfig& feed, const Eigen::VectorXd& x0, double model_time_units) {
  if (!feed.dynamics) return Status::Invalid("feed '" + feed.id + "' has no dynamics");
  if (x0.size() != static_cast<Eigen::Index>(feed.channels.size())) {
    return Status::Invalid(fmt::format("start state has {} values, feed '{}' has {} channels", x0.size(), feed.id,
                                       feed.channels.size()));
  }
  auto spec = ToDynamicsSpec(feed);
  if (!spec.ok()) return spec.status();
  auto dynamics = Dynamics::Compile(*spec);
  if (!dynamics.ok()) return dynamics.status();
  const double unit_s = Seconds(feed.dynamics->time_unit);
  const double dt = Seconds(feed.step) / unit_s;
  const MapStep step = FlowMapStep(*dynamics, dt, std::max(1, static_cast<int>(std::ceil(dt / 5e-3))));
  SpectrumOptions o;
  o.exponents = 1;
  o.steps = std::max(1000L, static_cast<long>(model_time_units / dt));
  o.transient_steps = o.steps / 10;
  auto estimate = LyapunovSpectrum(step, x0, o);
  if (!estimate.ok()) return estimate.status();
  const double per_second = 1.0 / unit_s;
  return ExponentEstimate{estimate->exponents[0] * per_second,
                          fmt::format("qr on the tangent dynamics, {} steps, converged to {:.2g}/s", estimate->steps,
                                      estimate->convergence * per_second)};
}

Result<ExponentEstimate> DataExponent(const FeedConfig& feed, std::span<const Sample> samples, int channel,
                                      int max_samples) {
  if (channel < 0 || channel >= static_cast<int>(feed.channels.size())) {
    return Status::Invalid(fmt::format("feed '{}' has no channel {}", feed.id, channel));
  }
  // The estimator needs evenly spaced values: put the channel on a grid by
  // the alignment rule training uses, spaced at the model step or, for data
  // sparser than the step, at the whole number of steps nearest the median
  // sample spacing, so the exponent is per second of real time whatever
  // the sampling.
  Micros spacing = feed.step;
  if (const std::optional<Micros> median = MedianSpacing(samples)) {
    const double ratio = static_cast<double>(median->count()) / static_cast<double>(feed.step.count());
    spacing = std::max<std::int64_t>(1, std::llround(ratio)) * feed.step;
  }
  const int channels = static_cast<int>(feed.channels.size());
  const GridSeries grid = ResampleToGrid(samples, channels, {spacing, Micros{}, Micros{}});
  // The newest run of grid values without a gap that is long enough for a
  // steady estimate (kEnough values), else the longest run.
  constexpr std::size_t kEnough = 1000;
  const auto present = [&](std::size_t i) { return grid.present[i] && !((grid.mask[i] >> channel) & 1U); };
  std::size_t best_begin = 0, best_end = 0;
  for (std::size_t i = 0; i < grid.size();) {
    if (!present(i)) {
      ++i;
      continue;
    }
    const std::size_t stop = grid.segment_end(i);
    std::size_t j = i;
    while (j < stop && present(j)) ++j;
    if (j - i >= kEnough || j - i > best_end - best_begin) {
      best_begin = i;
      best_end = j;
    }
    i = j;
  }
  std::vector<double> series;
  series.reserve(best_end - best_begin);
  for (std::size_t i = best_begin; i < best_end; ++i) series.push_back(grid.row(i)[channel]);
  RosensteinOptions o;
  o.max_samples = max_samples;
  o.max_references = 1000;
  auto r = RosensteinLargest(series, Seconds(spacing), o);
  if (!r.ok()) return r.status();
  return ExponentEstimate{r->lambda,
                          fmt::format("rosenstein on {} every {}, {} values, lag {}, Theiler {}, fit [{}, {}), R^2 {:.3f}",
                                      feed.channels[static_cast<std::size_t>(channel)], FormatDuration(spacing),
                                      series.size(), r->lag, r->theiler, r->fit_begin, r->fit_end, r->r_squared)};
}

std::optional<Eigen::VectorXd> NewestCompleteState(const GridSeries& grid) {
  for (std::size_t i = grid.size(); i-- > 0;) {
    if (grid.complete(i)) return Eigen::VectorXd(Eigen::Map<const Eigen::VectorXd>(grid.row(i), grid.channels));
  }
  return std::nullopt;
}

std::optional<double> ModelExponent(const ForecastModel& model, const Eigen::VectorXd& x0, Micros time_unit) {
  SpectrumOptions o;
  o.exponents = 1;
  o.steps = std::clamp(static_cast<long>(200.0 / model.shape().dt), 1000L, 20000L);
  o.transient_steps = o.steps / 10;
  auto e = LyapunovSpectrum(ModelMapStep(model), x0, o);
  if (!e.ok()) return std::nullopt;
  return e->exponents[0] / Seconds(time_unit);
}

}  // namespace lyapcast
