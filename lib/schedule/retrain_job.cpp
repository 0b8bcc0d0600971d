#include "schedule/retrain_job.h"

#include <fmt/format.h>
#include <simdjson.h>

#include <algorithm>
#include <cmath>
#include <random>
#include <variant>

#include "chaos/lyapunov.h"
#include "learn/model_file.h"
#include "learn/pairs.h"
#include "physics/dynamics.h"

namespace lyapcast {
namespace {

double Mean(const std::vector<double>& v) {
  double m = 0;
  for (double x : v) m += x / static_cast<double>(v.size());
  return m;
}

std::string JoinErrors(const std::vector<double>& v) {
  std::string s = "[";
  for (std::size_t i = 0; i < v.size(); ++i) {
    s += i ? "," : "";
    s += std::isfinite(v[i]) ? fmt::format("{:.6g}", v[i]) : "null";  // JSON has no NaN
  }
  return s + "]";
}

// Round-trips exactly ({:.17g}); JSON has no NaN or infinity.
std::string JsonNumber(const std::optional<double>& v) {
  return v && std::isfinite(*v) ? fmt::format("{:.17g}", *v) : "null";
}

// True (with the reason) when the data left the model's normalization.
bool LeftRange(const FlowMap<float>& model, const Normalization& now, std::string* why) {
  for (int c = 0; c < model.channels(); ++c) {
    const double m = model.mean()[c], s = model.stddev()[c];
    const double ratio = now.stddev[c] / s;
    if (std::abs(now.mean[c] - m) > 2 * s || ratio > 2 || ratio < 0.5) {
      *why = fmt::format("channel {}: mean {:.4g} -> {:.4g}, std {:.4g} -> {:.4g}", c, m, now.mean[c], s, now.stddev[c]);
      return true;
    }
  }
  return false;
}

// The chunk (trajectories starting at or after `since`) plus a replay share
// of older ones drawn with the job's seed.
std::vector<Trajectory> ChunkWithReplay(const GridSeries& grid, const std::vector<Trajectory>& train, DataTime since,
                                        double replay, std::uint64_t seed) {
  std::vector<Trajectory> fresh, older;
  for (const Trajectory& t : train) (grid.time(static_cast<std::size_t>(t.start)) >= since ? fresh : older).push_back(t);
  if (fresh.empty() || older.empty() || replay <= 0) return fresh;
  const auto want = static_cast<std::size_t>(std::llround(replay / (1.0 - replay) * static_cast<double>(fresh.size())));
  std::mt19937_64 rng(seed ^ 0x9e3779b97f4a7c15ULL);
  for (std::size_t k = 0; k < std::min(want, older.size()); ++k) fresh.push_back(older[rng() % older.size()]);
  return fresh;
}

std::optional<double> LargestExponentPerSecond(const FlowMap<float>& model, const GridSeries& grid,
                                               Micros time_unit) {
  Eigen::VectorXd x0;
  for (std::size_t i = grid.size(); i-- > 0;) {
    if (grid.complete(i)) {
      x0 = Eigen::Map<const Eigen::VectorXd>(grid.row(i), grid.channels);
      break;
    }
  }
  if (x0.size() == 0) return std::nullopt;
  SpectrumOptions o;
  o.exponents = 1;
  o.steps = std::clamp(static_cast<long>(200.0 / model.dt()), 1000L, 20000L);
  o.transient_steps = o.steps / 10;
  const NeuralFlowMap<float> wrapped(model);
  auto e = LyapunovSpectrum(ModelMapStep(wrapped), x0, o);
  if (!e.ok()) return std::nullopt;
  return e->exponents[0] / Seconds(time_unit);
}

}  // namespace

const char* RetrainVerdictName(RetrainVerdict v) {
  switch (v) {
    case RetrainVerdict::kPromoted: return "promoted";
    case RetrainVerdict::kRejected: return "rejected";
    case RetrainVerdict::kNotEnoughData: return "not_enough_data";
    case RetrainVerdict::kCancelled: return "cancelled";
  }
  return "?";
}

Result<RetrainOutcome> RunRetrain(WindowStore& reader, ModelRegistry& registry, const RetrainInput& in,
                                  const std::function<void(const FitProgress&)>& progress) {
  const FeedConfig& feed = *in.feed;
  const RetrainConfig& rc = feed.retrain;
  const int channels = static_cast<int>(feed.channels.size());
  const Micros time_unit = feed.dynamics ? feed.dynamics->time_unit : kSecond;
  const double dt = Seconds(feed.step) / Seconds(time_unit);
  RetrainOutcome out;

  std::vector<Sample> samples;
  if (Status s = reader.ReadRange(in.feed_index, in.until - in.retention, in.until, 4096,
                                  [&](std::span<const Sample> slice) {
                                    samples.insert(samples.end(), slice.begin(), slice.end());
                                    return true;
                                  });
      !s.ok()) {
    return s;
  }
  const GridSeries grid = ResampleToGrid(samples, channels, {feed.step, Micros{}});
  // The held-out slice is the newest `validation` fraction of the new data
  // (the whole window on a cold start), so a warm start always has fresh
  // data on both sides of the split.
  double validation = rc.validation;
  if (in.active && grid.size() > 1) {
    const double span = Seconds(in.until - grid.t0);
    const double chunk = Seconds(in.until - std::max(in.active->trained_to, grid.t0));
    validation = std::clamp(rc.validation * chunk / span, 0.0, rc.validation);
  }
  TrajectorySet set = BuildTrajectories(grid, {feed.model.rollout, feed.model.max_gap, validation});

  FlowMap<float> model;
  std::string refit_note;
  if (!in.active) {
    if (static_cast<int>(set.train.size()) < rc.min_pairs) {
      out.reason = fmt::format("cold start waits for {} training pairs; the window holds {}", rc.min_pairs,
                               set.train.size());
      return out;
    }
    auto norm = ComputeNormalization(grid, set.validation_begin, dt, feed.model.max_gap);
    if (!norm.ok()) {
      out.reason = norm.status().message();
      return out;
    }
    auto created = FlowMap<float>::Create(feed.model, channels, dt);
    if (!created.ok()) return created.status();
    model = std::move(created).value();
    if (Status s = model.SetNormalization(norm->mean.cast<float>(), norm->stddev.cast<float>(),
                                          norm->increment_scale.cast<float>());
        !s.ok()) {
      return s;
    }
    model.InitRandom(in.seed);
  } else {
    auto file = Deserialize(in.active->file);
    if (!file.ok()) return file.status();
    model = std::holds_alternative<FlowMap<float>>(file->model) ? std::get<FlowMap<float>>(file->model)
                                                                 : std::get<FlowMap<double>>(file->model).Cast<float>();
    set.train = ChunkWithReplay(grid, set.train, in.active->trained_to, rc.replay, in.seed);
    if (set.train.empty()) {
      out.reason = fmt::format("no new training pairs since version {} (trained to {})", in.active->version,
                               FormatRfc3339(in.active->trained_to));
      return out;
    }
    auto norm = ComputeNormalization(grid, set.validation_begin, dt, feed.model.max_gap);
    if (norm.ok() && LeftRange(model, *norm, &refit_note)) {
      if (Status s = model.Refit(norm->mean.cast<float>(), norm->stddev.cast<float>(),
                                 norm->increment_scale.cast<float>());
          !s.ok()) {
        return s;
      }
    }
  }

  std::optional<Dynamics> dynamics;
  FitOptions o;
  o.iterations = rc.iterations;
  o.batch = rc.batch;
  o.learning_rate = rc.learning_rate;
  o.weight_decay = rc.weight_decay;
  o.clip = rc.clip;
  o.time_budget_s = in.lockstep ? 0 : Seconds(rc.time_budget);
  o.validate_every = std::max(rc.iterations / 10, 1);
  o.seed = in.seed;
  o.cancel = in.cancel;
  if (feed.dynamics && !feed.dynamics->constraints.empty()) {
    auto d = Dynamics::Compile(feed);
    if (!d.ok()) return d.status();
    dynamics.emplace(std::move(d).value());
    o.dynamics = &*dynamics;
    o.constraints = feed.dynamics->constraints;
  }
  auto fit = Fit(model, grid, set, o, progress);
  if (fit.ok() && fit->stop == FitStop::kCancelled) {
    out.verdict = RetrainVerdict::kCancelled;
    out.reason = "cancelled";
    return out;
  }

  out.candidate_error = fit.ok() ? fit->validation_error : std::numeric_limits<double>::quiet_NaN();
  std::optional<FlowMap<float>> active_model;
  if (in.active) {
    auto file = Deserialize(in.active->file);
    if (!file.ok()) return file.status();
    active_model = std::holds_alternative<FlowMap<float>>(file->model)
                       ? std::get<FlowMap<float>>(file->model)
                       : std::get<FlowMap<double>>(file->model).Cast<float>();
    out.active_error = Mean(OneStepError(*active_model, grid, set.validation));
  }

  bool promote = false;
  if (!fit.ok()) {
    out.reason = "fit failed: " + fit.status().message();
  } else if (!std::isfinite(out.candidate_error)) {
    out.reason = "no validation data to judge the candidate";
  } else if (!in.active) {
    promote = true;
    out.reason = fmt::format("first model, validation error {:.4g}", out.candidate_error);
  } else if (!std::isfinite(out.active_error) ||
             out.candidate_error <= out.active_error * (1.0 + rc.promote_tolerance)) {
    promote = true;
    out.reason = fmt::format("validation error {:.4g} vs active version {} {:.4g} on the same slice",
                             out.candidate_error, in.active->version, out.active_error);
  } else {
    out.reason = fmt::format("validation error {:.4g} worse than active version {} {:.4g} x (1 + {:g})",
                             out.candidate_error, in.active->version, out.active_error, rc.promote_tolerance);
  }
  if (fit.ok()) out.fit = *fit;
  out.verdict = promote ? RetrainVerdict::kPromoted : RetrainVerdict::kRejected;
  if (fit.ok()) out.lyapunov_per_s = LargestExponentPerSecond(model, grid, time_unit);

  ModelFileContents contents;
  contents.channels = feed.channels;
  contents.step_micros = feed.step;
  contents.time_unit_micros = time_unit;
  contents.model = model;
  contents.metadata = {{"feed", feed.id}, {"trained_to", FormatRfc3339(in.until)}};
  auto bytes = Serialize(contents);
  if (!bytes.ok()) return bytes.status();
  ModelRecord record;
  record.feed = in.feed_index;
  record.status = promote ? ModelStatus::kActive : ModelStatus::kRejected;
  record.reason = out.reason;
  if (in.active) record.parent = in.active->version;
  record.trained_from = grid.size() ? grid.t0 : in.until;
  record.trained_to = in.until;
  if (std::isfinite(out.candidate_error)) record.validation_error = out.candidate_error;
  record.lyapunov_max = out.lyapunov_per_s;
  record.details = fmt::format(
      R"({{"iterations":{},"seconds":{:.3f},"stop":"{}","train_pairs":{},"validation_pairs":{},)"
      R"("validation_per_channel":{},"active_error":{},"refit":"{}","trigger":"{}",)"
      R"("exponents":{{"data":{},"dynamics":{}}}}})",
      out.fit.iterations, out.fit.seconds, FitStopName(out.fit.stop), set.train.size(), set.validation.size(),
      JoinErrors(out.fit.validation_rmse),
      std::isfinite(out.active_error) ? fmt::format("{:.6g}", out.active_error) : "null", refit_note, in.trigger,
      JsonNumber(in.data_exponent), JsonNumber(in.dynamics_exponent));
  record.file = std::move(bytes).value();
  auto version = registry.Insert(record);
  if (!version.ok()) return version.status();
  out.version = *version;
  return out;
}

RecordedExponents ParseRecordedExponents(const std::string& details) {
  RecordedExponents out;
  simdjson::dom::parser parser;
  simdjson::dom::element doc;
  if (parser.parse(details).get(doc) != simdjson::SUCCESS) return out;
  const auto read = [&](const char* key) -> std::optional<double> {
    double v = 0;
    if (doc["exponents"][key].get_double().get(v) != simdjson::SUCCESS || !std::isfinite(v)) return std::nullopt;
    return v;
  };
  out.data = read("data");
  out.dynamics = read("dynamics");
  return out;
}

}  // namespace lyapcast
