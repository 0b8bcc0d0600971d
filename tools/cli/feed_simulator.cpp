#include "feed_simulator.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <random>
#include <utility>

#include "physics/integrators.h"

namespace lyapcast::cli {
namespace {

// Standard normal draws from mt19937_64 via Box-Muller, written out so the
// same seed gives the same noise with any standard library.
class Noise {
 public:
  explicit Noise(std::uint64_t seed) : rng_(seed) {}
  double Uniform() { return static_cast<double>(rng_() >> 11) * 0x1.0p-53; }
  double Normal() {
    const double u1 = 1.0 - Uniform(), u2 = Uniform();
    return std::sqrt(-2.0 * std::log(u1)) * std::cos(2.0 * M_PI * u2);
  }
  std::uint64_t Below(std::uint64_t n) { return rng_() % n; }

 private:
  std::mt19937_64 rng_;
};

std::string FormatLine(SampleFormat format, const std::string& feed_id, const std::vector<std::string>& channels,
                       DataTime t, const std::vector<double>& x, std::uint64_t missing) {
  std::string line;
  const std::int64_t us = EpochMicros(t);
  const auto t_text = fmt::format("{}.{:06d}", us / 1'000'000, us % 1'000'000);
  if (format == SampleFormat::kNdjson) {
    line = fmt::format(R"({{"feed":"{}","t":{},"values":{{)", feed_id, t_text);
    bool first = true;
    for (std::size_t c = 0; c < x.size(); ++c) {
      if ((missing >> c) & 1U) continue;
      line += fmt::format(R"({}"{}":{:.10g})", first ? "" : ",", channels[c], x[c]);
      first = false;
    }
    line += "}}";
  } else {
    line = feed_id + "," + t_text;
    for (std::size_t c = 0; c < x.size(); ++c) {
      line += ',';
      if (!((missing >> c) & 1U)) line += fmt::format("{:.10g}", x[c]);
    }
  }
  return line;
}

}  // namespace

// Heap-allocated so the right-hand side's pointer to the dynamics survives
// moves of the simulator.
struct FeedSimulator::State {
  State(Dynamics d, std::uint64_t seed) : dyn(std::move(d)), rng(seed) {}

  Dynamics dyn;
  Rhs f;
  std::vector<std::string> channels;
  FeedSimulatorOptions options;
  double model_step = 0;  // the sample step in model time units
  double h = 0;           // the RK4 substep, model time units
  Eigen::VectorXd x;      // the state at the next step
  Noise rng;
  std::vector<double> reading;
};

Result<FeedSimulator> FeedSimulator::Create(const FeedConfig& feed, Dynamics dynamics, FeedSimulatorOptions o) {
  const std::size_t dim = feed.channels.size();
  if (static_cast<std::size_t>(dynamics.dim()) != dim || dynamics.feed_id() != feed.id) {
    return Status::Invalid(fmt::format("feed '{}': the dynamics were not compiled from this feed", feed.id));
  }
  if (o.step == Micros{}) o.step = feed.step;
  if (o.step <= Micros{}) return Status::Invalid(fmt::format("feed '{}': the step must be positive", feed.id));
  if (o.duration <= Micros{}) return Status::Invalid(fmt::format("feed '{}': the duration must be positive", feed.id));
  if (o.transient < Micros{}) return Status::Invalid(fmt::format("feed '{}': the transient must be >= 0", feed.id));
  if (o.from.empty()) o.from.assign(dim, 1.0);
  if (o.from.size() != dim) {
    return Status::Invalid(fmt::format("feed '{}': the initial state needs {} numbers, one per channel; got {}",
                                       feed.id, dim, o.from.size()));
  }
  if (o.noise.empty()) o.noise.assign(dim, 0.0);
  if (o.noise.size() != dim) {
    return Status::Invalid(fmt::format("feed '{}': the noise needs {} numbers, one per channel; got {}", feed.id, dim,
                                       o.noise.size()));
  }
  if (!(o.gap_rate >= 0 && o.gap_rate < 1) || !(o.missing_rate >= 0 && o.missing_rate <= 1)) {
    return Status::Invalid(fmt::format("feed '{}': the gap rate must be in [0, 1) and the missing rate in [0, 1]",
                                       feed.id));
  }
  if (!(o.jitter >= 0 && o.jitter <= 0.4)) {
    return Status::Invalid(fmt::format("feed '{}': the jitter must be in [0, 0.4] (a fraction of the step); got {}",
                                       feed.id, o.jitter));
  }
  for (const ParameterChange& c : o.changes) {
    if (!dynamics.constant(c.name)) {
      return Status::Invalid(fmt::format("feed '{}': '{}' is not a constant of its dynamics", feed.id, c.name));
    }
  }

  auto s = std::make_unique<State>(std::move(dynamics), o.seed);
  const Dynamics* dyn = &s->dyn;
  s->f = [dyn](const double* state, double* dx) { dyn->Eval(state, dx); };
  s->channels = feed.channels;
  const double unit_s = Seconds(s->dyn.time_unit());
  s->model_step = Seconds(o.step) / unit_s;
  // RK4 substeps of at most 2e-3 model units (and at least 4 per sample):
  // far below the sensor noise for the dynamics this tool is meant for.
  s->h = s->model_step / std::max(4.0, std::ceil(s->model_step / 2e-3));
  s->x = Eigen::Map<const Eigen::VectorXd>(o.from.data(), static_cast<Eigen::Index>(dim));
  if (o.transient > Micros{}) s->x = IntegrateRk4(s->f, s->x, Seconds(o.transient) / unit_s, s->h);
  s->reading.resize(dim);
  const Micros step = o.step;
  const std::int64_t total = o.duration / step;
  s->options = std::move(o);
  return FeedSimulator(std::move(s), feed.id, step, total);
}

FeedSimulator::FeedSimulator(std::unique_ptr<State> state, std::string feed_id, Micros step, std::int64_t total)
    : s_(std::move(state)), feed_id_(std::move(feed_id)), step_(step), total_(total) {}

FeedSimulator::FeedSimulator(FeedSimulator&&) noexcept = default;
FeedSimulator& FeedSimulator::operator=(FeedSimulator&&) noexcept = default;
FeedSimulator::~FeedSimulator() = default;

Result<FeedSimulator::Step> FeedSimulator::Next() {
  State& s = *s_;
  const FeedSimulatorOptions& o = s.options;
  Step out;
  out.offset = next_offset();
  for (const ParameterChange& c : o.changes) {
    if (out.offset >= c.t1) (void)s.dyn.SetConstant(c.name, c.ValueAt(out.offset));
  }
  if (!s.x.allFinite()) {
    next_ = total_;
    return Status::Precondition(
        fmt::format("the state left finite values at {} into the run", FormatDuration(out.offset)));
  }
  const std::size_t dim = s.reading.size();
  if (s.rng.Uniform() >= o.gap_rate) {
    // Jitter draws come only when asked for, so jitter-free runs stay as they were.
    const double jitter = o.jitter > 0 ? std::clamp(o.jitter * s.rng.Normal(), -0.45, 0.45) : 0.0;
    const Micros shift(std::llround(jitter * static_cast<double>(step_.count())));
    Eigen::VectorXd at = s.x;
    if (shift != Micros{}) {
      // Whole RK4 substeps of at most h toward the stamped time; Rk4Step takes negative steps too.
      const double span = s.model_step * static_cast<double>(shift.count()) / static_cast<double>(step_.count());
      const auto n = static_cast<int>(std::ceil(std::abs(span) / s.h));
      for (int k = 0; k < n; ++k) Rk4Step(s.f, at, span / n);
    }
    for (std::size_t c = 0; c < dim; ++c) s.reading[c] = at[static_cast<Eigen::Index>(c)] + o.noise[c] * s.rng.Normal();
    std::uint64_t missing = 0;
    if (o.missing_rate > 0 && s.rng.Uniform() < o.missing_rate && dim > 1) missing = std::uint64_t{1} << s.rng.Below(dim);
    out.kept = true;
    out.line = FormatLine(o.format, feed_id_, s.channels, o.start + out.offset + shift, s.reading, missing);
    ++kept_;
  }
  s.x = IntegrateRk4(s.f, s.x, s.model_step, s.h);
  ++next_;
  return out;
}

}  // namespace lyapcast::cli
