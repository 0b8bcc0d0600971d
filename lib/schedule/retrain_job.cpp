#include "schedule/retrain_job.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>

#include "core/wall_clock.h"
#include "learn/model_file.h"
#include "schedule/estimates.h"
#include "schedule/family_choice.h"
#include "schedule/judge.h"
#include "schedule/retrain_data.h"
#include "schedule/retrain_details.h"
#include "schedule/training_strategy.h"

namespace lyapcast {
namespace {

std::optional<double> LargestExponentPerSecond(const ForecastModel& model, const GridSeries& grid,
                                               Micros time_unit) {
  const std::optional<Eigen::VectorXd> x0 = NewestCompleteState(grid);
  if (!x0) return std::nullopt;
  return ModelExponent(model, *x0, time_unit);
}

RetrainDetails DetailsOf(const RetrainInput& in, const RetrainData& data, const Candidate& candidate,
                         const Judgement& judgement, const std::string& excluded) {
  RetrainDetails d;
  d.excluded = excluded;
  d.strategy = RetrainStrategyName(in.feed->retrain.strategy);
  d.trigger = in.trigger;
  d.iterations = candidate.fit.iterations;
  d.seconds = candidate.fit.seconds;
  d.stop = FitStopName(candidate.fit.stop);
  d.train_pairs = static_cast<std::int64_t>(data.train.size());
  d.selection_pairs = static_cast<std::int64_t>(data.selection.size());
  d.validation_pairs = static_cast<std::int64_t>(data.judge.size());
  d.validation_per_channel = judgement.candidate_per_channel;
  if (std::isfinite(judgement.active_error)) d.active_error = judgement.active_error;
  d.refit = candidate.refit;
  if (candidate.model != nullptr) d.family = std::string(candidate.model->family());
  d.family_note = candidate.family_note;
  d.family_choice = candidate.family_choice;
  if (data.normalization) {
    for (std::size_t c = 0; c < in.feed->channels.size(); ++c) {
      if (!((data.normalization->left_out >> c) & 1U)) continue;
      d.left_out.push_back(in.feed->channels[c]);
      // Its normalized errors are ~0 by construction: not a figure of skill.
      if (c < d.validation_per_channel.size()) d.validation_per_channel[c] = std::nan("");
    }
  }
  d.data_exponent = in.data_exponent;
  d.dynamics_exponent = in.dynamics_exponent;
  return d;
}

// Writes the candidate as the feed's next version (active or rejected).
Result<ModelRecord> Record(ModelRegistry& registry, const RetrainInput& in, const RetrainData& data,
                           const Candidate& candidate, const Judgement& judgement, std::optional<double> lambda_max,
                           const std::string& excluded) {
  const FeedConfig& feed = *in.feed;
  ModelFileContents contents;
  contents.channels = feed.channels;
  contents.step_micros = feed.step;
  contents.time_unit_micros = feed.dynamics ? feed.dynamics->time_unit : kSecond;
  if (Status s = SetFileModel(candidate.model, &contents); !s.ok()) return s;
  contents.metadata = {{"feed", feed.id}, {"trained_to", FormatRfc3339(in.until)}};
  auto bytes = Serialize(contents);
  if (!bytes.ok()) return bytes.status();
  ModelRecord record;
  record.feed = in.feed_index;
  record.status = judgement.promote ? ModelStatus::kActive : ModelStatus::kRejected;
  record.reason = judgement.reason;
  record.created_at = FormatRfc3339(WallNow());  // set here so the served record carries it
  if (in.active) record.parent = in.active->record.version;
  record.trained_from = data.grid.size() ? data.grid.t0 : in.until;
  record.trained_to = in.until;
  if (std::isfinite(judgement.candidate_error)) record.validation_error = judgement.candidate_error;
  record.lambda_max = lambda_max;
  record.data_exponent = in.data_exponent;
  record.dynamics_exponent = in.dynamics_exponent;
  record.details = ToJson(DetailsOf(in, data, candidate, judgement, excluded));
  record.file = std::move(bytes).value();
  auto version = registry.Insert(record);
  if (!version.ok()) return version.status();
  record.version = *version;
  return record;
}

}  // namespace

const char* RetrainVerdictName(RetrainVerdict v) {
  switch (v) {
    case RetrainVerdict::kPromoted: return "promoted";
    case RetrainVerdict::kRejected: return "rejected";
    case RetrainVerdict::kNotEnoughData: return "not_enough_data";
    case RetrainVerdict::kCancelled: return "cancelled";
    case RetrainVerdict::kActivated: return "activated";
  }
  return "?";
}

Result<RetrainOutcome> RunRetrain(ModelRegistry& registry, const RetrainInput& in,
                                  const std::function<void(const FitProgress&)>& progress) {
  const FeedConfig& feed = *in.feed;
  RetrainOutcome out;
  RetrainDataOptions data_options;
  data_options.until = in.until;
  data_options.seed = in.seed;
  if (in.active) {
    data_options.active_trained_to = in.active->record.trained_to;
    data_options.active_version = in.active->record.version;
  }
  // Excluded readings become missing in a copy of the window (only when
  // there are any: the copy costs a pass over the window).
  std::vector<Sample> masked;
  std::span<const Sample> window = in.window;
  std::string excluded;
  if (!in.exclusions.empty()) {
    masked.assign(in.window.begin(), in.window.end());
    std::int64_t count = 0;
    for (Sample& s : masked) {
      for (const ChannelExclusion& e : in.exclusions) {
        if (s.t < e.from || s.t > e.to || s.missing(e.channel)) continue;
        s.missing_mask |= std::uint64_t{1} << e.channel;
        ++count;
      }
    }
    window = masked;
    for (const ChannelExclusion& e : in.exclusions) {
      excluded += fmt::format("{}'{}' from {} to {}", excluded.empty() ? "" : ", ",
                              feed.channels[static_cast<std::size_t>(e.channel)], FormatRfc3339(e.from),
                              FormatRfc3339(e.to));
    }
    excluded = fmt::format("{} readings of suspect sensors left out ({})", count, excluded);
  }
  const RetrainData data = PrepareRetrainData(window, feed, data_options);
  if (!data.not_enough.empty()) {
    out.reason = data.not_enough + (excluded.empty() ? "" : "; " + excluded);
    out.blocked = data.blocked;
    return out;
  }

  TrainingContext context;
  context.feed = &feed;
  context.warm = in.active ? WarmStartNetwork(*in.active) : nullptr;
  context.seed = in.seed;
  context.lockstep = in.lockstep;
  context.cancel = in.cancel;
  context.progress = progress;
  auto candidate = TrainCandidate(data, context);
  if (!candidate.ok()) return candidate.status();
  if (candidate->fit_status.ok() && candidate->fit.stop == FitStop::kCancelled) {
    out.verdict = RetrainVerdict::kCancelled;
    out.reason = "cancelled";
    return out;
  }

  const Judgement judgement = JudgeCandidate(
      *candidate, {in.active ? in.active->model.get() : nullptr, in.active ? in.active->record.version : 0}, data,
      feed.retrain.promote_tolerance);
  out.candidate_error = judgement.candidate_error;
  out.active_error = judgement.active_error;
  out.reason = judgement.reason;
  out.fit = candidate->fit;
  out.verdict = judgement.promote ? RetrainVerdict::kPromoted : RetrainVerdict::kRejected;
  const Micros time_unit = feed.dynamics ? feed.dynamics->time_unit : kSecond;
  if (candidate->fit_status.ok() && candidate->model != nullptr) {
    out.lambda_max = LargestExponentPerSecond(*candidate->model, data.grid, time_unit);
  }

  auto record = Record(registry, in, data, *candidate, judgement, out.lambda_max, excluded);
  if (!record.ok()) return record.status();
  out.version = record->version;
  if (judgement.promote) {
    out.promoted = MakeActiveModel(std::move(record).value(), std::move(candidate->model), time_unit);
  }
  return out;
}

}  // namespace lyapcast
