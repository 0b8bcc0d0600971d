#include "schedule/model_upload.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <variant>

#include "core/wall_clock.h"
#include "schedule/estimates.h"
#include "schedule/judge.h"
#include "schedule/retrain_data.h"
#include "schedule/retrain_details.h"
#include "schedule/training_strategy.h"

namespace lyapcast {
namespace {

std::string Joined(const std::vector<std::string>& names) {
  std::string out;
  for (const std::string& n : names) out += (out.empty() ? "" : ", ") + n;
  return out;
}

UploadProblem FromFileProblem(ModelFileProblem p) {
  switch (p) {
    case ModelFileProblem::kTruncated: return UploadProblem::kTruncated;
    case ModelFileProblem::kChecksum: return UploadProblem::kChecksum;
    case ModelFileProblem::kFormatVersion: return UploadProblem::kFormatVersion;
    case ModelFileProblem::kNonFinite: return UploadProblem::kNonFinite;
    case ModelFileProblem::kUnknownRole: return UploadProblem::kWrongRoles;
    case ModelFileProblem::kNone:
    case ModelFileProblem::kNotAModelFile:
    case ModelFileProblem::kMalformed: return UploadProblem::kBadFile;
  }
  return UploadProblem::kBadFile;
}

std::string Metadata(const ModelFileContents& c, const std::string& key) {
  for (const auto& [k, v] : c.metadata) {
    if (k == key) return v;
  }
  return {};
}

// " (the file says it was trained for feed 'x')" when that is another feed.
std::string OtherFeedNote(const std::string& file_feed, const FeedConfig& feed) {
  if (file_feed.empty() || file_feed == feed.id) return {};
  return fmt::format(" (the file says it was trained for feed '{}')", file_feed);
}

Status CheckShape(const ModelFileContents& c, const FeedConfig& feed, const std::string& note,
                  UploadProblem* problem) {
  if (c.channels != feed.channels) {
    *problem = UploadProblem::kWrongChannels;
    if (c.channels.size() != feed.channels.size()) {
      return Status::Invalid(fmt::format("the model has {} channels ({}) but feed '{}' has {} ({}){}",
                                         c.channels.size(), Joined(c.channels), feed.id, feed.channels.size(),
                                         Joined(feed.channels), note));
    }
    std::size_t i = 0;
    while (c.channels[i] == feed.channels[i]) ++i;
    return Status::Invalid(fmt::format("channel {} is '{}' in the model but '{}' in feed '{}': the model's channels "
                                       "({}) must be the feed's ({}), in that order{}",
                                       i, c.channels[i], feed.channels[i], feed.id, Joined(c.channels),
                                       Joined(feed.channels), note));
  }
  const std::vector<ChannelRole> state = AllStateRoles(static_cast<int>(feed.channels.size()));
  if (!c.roles.empty() && c.roles != state) {
    *problem = UploadProblem::kWrongRoles;
    std::size_t i = 0;
    while (i + 1 < c.roles.size() && i < state.size() && c.roles[i] == state[i]) ++i;
    return Status::Invalid(fmt::format("channel {} ('{}') of the model has role code {}; every channel of feed '{}' "
                                       "is a state channel (code 0)",
                                       i, c.channels[i], static_cast<int>(c.roles[i]), feed.id));
  }
  if (c.step_micros != feed.step) {
    *problem = UploadProblem::kWrongStep;
    return Status::Invalid(fmt::format("the model steps {} but feed '{}' has a step of {}{}",
                                       FormatDuration(c.step_micros), feed.id, FormatDuration(feed.step), note));
  }
  const Micros unit = feed.dynamics ? feed.dynamics->time_unit : kSecond;
  if (c.time_unit_micros != unit) {
    *problem = UploadProblem::kWrongStep;
    return Status::Invalid(fmt::format("the model's time unit is {} but feed '{}' uses {} (dynamics.time_unit){}",
                                       FormatDuration(c.time_unit_micros), feed.id, FormatDuration(unit), note));
  }
  const double dt = c.dt();
  const double want = Seconds(feed.step) / Seconds(unit);
  if (!(std::abs(dt - want) <= 1e-9 * want)) {
    *problem = UploadProblem::kWrongStep;
    return Status::Invalid(fmt::format("the model's dt is {:.9g} time units per step, but feed '{}' steps {:.9g} "
                                       "({} in units of {})",
                                       dt, feed.id, want, FormatDuration(feed.step), FormatDuration(unit)));
  }
  return Status::Ok();
}

std::optional<DataTime> MetadataTime(const ModelFileContents& c, const std::string& key) {
  const std::string text = Metadata(c, key);
  if (text.empty()) return std::nullopt;
  auto t = ParseRfc3339(text);
  return t.ok() ? std::optional<DataTime>(*t) : std::nullopt;
}

std::optional<double> MetadataNumber(const ModelFileContents& c, const std::string& key) {
  const std::string text = Metadata(c, key);
  if (text.empty()) return std::nullopt;
  char* end = nullptr;
  const double v = std::strtod(text.c_str(), &end);
  if (end != text.c_str() + text.size() || !std::isfinite(v)) return std::nullopt;
  return v;
}

// The judge's data: the split a retraining job would make now (held-out
// share of the data since the active version's training end), or, when
// that holds nothing to judge on, the held-out share of the whole window.
RetrainData JudgeData(const UploadInput& in, std::string* judged_on) {
  if (in.window.empty()) return {};
  RetrainDataOptions o;
  o.until = in.until;
  o.seed = in.seed;
  if (in.active) {
    o.active_trained_to = in.active->record.trained_to;
    o.active_version = in.active->record.version;
    RetrainData data = PrepareRetrainData(in.window, *in.feed, o);
    if (!data.judge.empty()) {
      *judged_on = fmt::format("{} held-out pairs from {} of the data since version {} was trained",
                               data.judge.size(), FormatRfc3339(data.grid.time(data.judge_begin)),
                               in.active->record.version);
      return data;
    }
  }
  o.active_trained_to.reset();
  RetrainData data = PrepareRetrainData(in.window, *in.feed, o);
  if (!data.judge.empty()) {
    *judged_on = fmt::format("{} held-out pairs from {} at the end of the window", data.judge.size(),
                             FormatRfc3339(data.grid.time(data.judge_begin)));
  }
  return data;
}

}  // namespace

const char* UploadProblemCode(UploadProblem p) {
  switch (p) {
    case UploadProblem::kNone: return "";
    case UploadProblem::kEmpty: return "empty-body";
    case UploadProblem::kTooLarge: return "body-too-large";
    case UploadProblem::kBadFile: return "bad-model-file";
    case UploadProblem::kTruncated: return "truncated-model-file";
    case UploadProblem::kChecksum: return "checksum-mismatch";
    case UploadProblem::kFormatVersion: return "unsupported-format-version";
    case UploadProblem::kNonFinite: return "non-finite-weights";
    case UploadProblem::kWrongChannels: return "wrong-channels";
    case UploadProblem::kWrongRoles: return "wrong-roles";
    case UploadProblem::kWrongStep: return "wrong-step";
  }
  return "?";
}

Result<ValidatedUpload> ValidateUpload(std::string bytes, const FeedConfig& feed, UploadProblem* problem) {
  UploadProblem kind = UploadProblem::kNone;
  const auto fail = [&](Status s) {
    if (problem != nullptr) *problem = kind;
    return s;
  };
  if (bytes.empty()) {
    kind = UploadProblem::kEmpty;
    return fail(Status::Invalid("the body is empty: send the bytes of a model file (`lyapcast train` writes one)"));
  }
  if (bytes.size() > kMaxUploadBytes) {
    kind = UploadProblem::kTooLarge;
    return fail(Status::Invalid(fmt::format("the body has {} bytes; an upload may have at most {}", bytes.size(),
                                            kMaxUploadBytes)));
  }
  ModelFileProblem file_problem = ModelFileProblem::kNone;
  auto contents = Deserialize(bytes, &file_problem);
  if (!contents.ok()) {
    kind = FromFileProblem(file_problem);
    const std::string m = contents.status().message();
    return fail(Status::Invalid(m.find("model file") != std::string::npos ? m : "bad model file: " + m));
  }
  ValidatedUpload out;
  out.file_feed = Metadata(*contents, "feed");
  if (Status s = CheckShape(*contents, feed, OtherFeedNote(out.file_feed, feed), &kind); !s.ok()) return fail(s);
  if (const auto* d = std::get_if<FlowMap<double>>(&contents->model)) {
    const FlowMap<float> m = d->Cast<float>();
    const bool finite = m.parameters().array().isFinite().all() && m.mean().array().isFinite().all() &&
                        m.stddev().array().isFinite().all() && m.increment_scale().array().isFinite().all();
    if (!finite) {
      kind = UploadProblem::kNonFinite;
      return fail(Status::Invalid("a float64 value of the model does not fit in float32, the precision the daemon "
                                  "serves in"));
    }
  }
  auto served = MakeForecastModel(*contents, ModelScalar::kFloat32);
  if (!served.ok()) {
    kind = UploadProblem::kBadFile;
    return fail(Status::Invalid("bad model file: " + served.status().message()));
  }
  out.model = std::move(served).value();
  out.source = Metadata(*contents, "source");
  out.trained_from = MetadataTime(*contents, "trained_from");
  out.trained_to = MetadataTime(*contents, "trained_to");
  out.validation_error = MetadataNumber(*contents, "validation_error");
  out.contents = std::move(contents).value();
  out.file = std::move(bytes);
  if (problem != nullptr) *problem = UploadProblem::kNone;
  return out;
}

Result<UploadOutcome> RunUpload(ModelRegistry& registry, const UploadInput& in) {
  const FeedConfig& feed = *in.feed;
  const ValidatedUpload& up = *in.upload;
  const Micros time_unit = up.contents.time_unit_micros;

  std::string judged_on;
  const RetrainData data = JudgeData(in, &judged_on);
  Candidate candidate;
  candidate.model = up.model;
  const std::int64_t active_version = in.active ? in.active->record.version : 0;
  const Judgement j = JudgeCandidate(candidate, {in.active ? in.active->model.get() : nullptr, active_version}, data,
                                     feed.retrain.promote_tolerance);

  UploadOutcome out;
  out.candidate_error = j.candidate_error;
  out.active_error = j.active_error;
  const bool serve = in.activate || j.promote;
  out.verdict = in.activate ? RetrainVerdict::kActivated : j.promote ? RetrainVerdict::kPromoted
                                                                     : RetrainVerdict::kRejected;
  const std::string requested = in.requested.empty() ? "" : " " + in.requested;
  if (in.activate) {
    std::string scored;
    if (std::isfinite(j.candidate_error)) {
      scored = std::isfinite(j.active_error)
                   ? fmt::format(": validation error {:.4g}, active version {} {:.4g} on the same pairs",
                                 j.candidate_error, active_version, j.active_error)
                   : fmt::format(": validation error {:.4g}", j.candidate_error);
    }
    out.reason = fmt::format("uploaded{} and activated on request{}", requested, scored);
  } else {
    const std::string why = j.promote || std::isfinite(j.candidate_error)
                                ? j.reason
                                : j.reason + "; upload with activate=true to serve it anyway";
    out.reason = fmt::format("uploaded{} and {}: {}", requested, j.promote ? "promoted" : "rejected", why);
  }

  // The start of the model's own run: the newest complete state, or its
  // training mean when the daemon has no data yet.
  const std::optional<Eigen::VectorXd> newest = NewestCompleteState(data.grid);
  const Eigen::VectorXd x0 = newest ? *newest : up.model->training_mean();
  out.lambda_max = ModelExponent(*up.model, x0, time_unit);

  ModelRecord record;
  record.feed = in.feed_index;
  record.status = serve ? ModelStatus::kActive : ModelStatus::kRejected;
  record.origin = ModelOrigin::kUploaded;
  record.reason = out.reason;
  record.created_at = FormatRfc3339(WallNow());
  const bool has_data = !in.window.empty();
  if (up.trained_to) {
    record.trained_to = has_data ? std::min(*up.trained_to, in.until) : *up.trained_to;
  } else {
    record.trained_to = has_data ? in.until : DataTime{};
  }
  record.trained_from = up.trained_from ? std::min(*up.trained_from, record.trained_to) : record.trained_to;
  if (std::isfinite(j.candidate_error)) {
    record.validation_error = j.candidate_error;
  } else {
    record.validation_error = up.validation_error;
  }
  record.lambda_max = out.lambda_max;
  record.data_exponent = in.data_exponent;
  record.dynamics_exponent = in.dynamics_exponent;
  RetrainDetails d;
  d.strategy = "";  // not trained here
  d.trigger = "upload";
  d.validation_pairs = static_cast<std::int64_t>(data.judge.size());
  d.validation_per_channel = j.candidate_per_channel;
  if (std::isfinite(j.active_error)) d.active_error = j.active_error;
  d.data_exponent = in.data_exponent;
  d.dynamics_exponent = in.dynamics_exponent;
  UploadDetails u;
  u.file_feed = up.file_feed;
  u.source = up.source;
  u.bytes = static_cast<std::int64_t>(up.file.size());
  u.activate = in.activate;
  u.judged_on = judged_on;
  u.file_validation_error = up.validation_error;
  d.upload = std::move(u);
  record.details = ToJson(d);
  record.file = up.file;
  auto version = registry.Insert(record);
  if (!version.ok()) return version.status();
  record.version = *version;
  out.version = *version;
  if (serve) out.promoted = MakeActiveModel(std::move(record), up.model, time_unit);
  return out;
}

}  // namespace lyapcast
