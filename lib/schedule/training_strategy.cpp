#include "schedule/training_strategy.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <optional>

#include "physics/dynamics.h"

namespace lyapcast {
namespace {

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

FitOptions SupervisedFitOptions(const RetrainConfig& rc, const TrainingContext& context) {
  FitOptions o;
  o.iterations = rc.iterations;
  o.batch = rc.batch;
  o.learning_rate = rc.learning_rate;
  o.weight_decay = rc.weight_decay;
  o.clip = rc.clip;
  o.time_budget_s = context.lockstep ? 0 : Seconds(rc.time_budget);
  o.validate_every = std::max(rc.iterations / 10, 1);
  o.seed = context.seed;
  o.cancel = context.cancel;
  return o;
}

}  // namespace

Result<FlowMap<float>> StartingModel(const RetrainData& data, const TrainingContext& context, std::string* refit) {
  const FeedConfig& feed = *context.feed;
  if (context.warm != nullptr) {
    FlowMap<float> model = *context.warm;
    if (data.normalization && LeftRange(model, *data.normalization, refit)) {
      const Normalization& n = *data.normalization;
      if (Status s = model.Refit(n.mean.cast<float>(), n.stddev.cast<float>(), n.increment_scale.cast<float>());
          !s.ok()) {
        return s;
      }
    }
    return model;
  }
  if (!data.normalization) return Status::Invalid(data.normalization_error);
  auto created = FlowMap<float>::Create(static_cast<int>(feed.channels.size()), feed.model.hidden,
                                        feed.model.activation, data.dt);
  if (!created.ok()) return created.status();
  FlowMap<float> model = std::move(created).value();
  const Normalization& n = *data.normalization;
  if (Status s = model.SetNormalization(n.mean.cast<float>(), n.stddev.cast<float>(), n.increment_scale.cast<float>());
      !s.ok()) {
    return s;
  }
  model.InitRandom(context.seed);
  return model;
}

Result<Candidate> SupervisedStrategy::Train(const RetrainData& data, const TrainingContext& context) const {
  const FeedConfig& feed = *context.feed;
  Candidate out;
  auto start = StartingModel(data, context, &out.refit);
  if (!start.ok()) return start.status();
  FlowMap<float> model = std::move(start).value();

  FitOptions o = SupervisedFitOptions(feed.retrain, context);
  std::optional<Dynamics> dynamics;
  if (feed.dynamics && !feed.dynamics->constraints.empty()) {
    auto spec = ToDynamicsSpec(feed);
    if (!spec.ok()) return spec.status();
    auto d = Dynamics::Compile(*spec);
    if (!d.ok()) return d.status();
    dynamics.emplace(std::move(d).value());
    o.dynamics = &*dynamics;
    o.constraints = feed.dynamics->constraints;
  }
  // Early stopping sees the selection half only.
  TrajectorySet set;
  set.train = data.train;
  set.validation = data.selection;
  set.validation_begin = data.heldout_begin;
  auto fit = Fit(model, data.grid, set, o, context.progress);
  out.model = std::make_shared<const NeuralFlowMap<float>>(std::move(model));
  if (fit.ok()) {
    out.fit = std::move(fit).value();
  } else {
    out.fit_status = fit.status();
  }
  return out;
}

std::unique_ptr<TrainingStrategy> MakeTrainingStrategy(RetrainStrategy kind) {
  switch (kind) {
    case RetrainStrategy::kSupervised: return std::make_unique<SupervisedStrategy>();
  }
  return std::make_unique<SupervisedStrategy>();
}

}  // namespace lyapcast
