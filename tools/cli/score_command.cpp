// lyapcast score: how well a model file fits a file of samples. The one-step
// error per channel, by the trainer's own validation measure (OneStepError)
// on one-step pairs only (max_gap 1, where its first target is one step on),
// so the numbers compare with the validation_error of a model validated on
// gap-free data (across gaps the trainer's validation error is a k-step one).
#include <CLI/CLI.hpp>
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <limits>
#include <nlohmann/json.hpp>
#include <optional>
#include <type_traits>
#include <variant>

#include "cli_common.h"
#include "commands.h"
#include "learn/model_error.h"
#include "learn/model_file.h"
#include "learn/pairs.h"
#include "learn/trainer.h"

namespace lyapcast::cli {
namespace {

struct ScoreArgs {
  std::string model, input, config, feed, from, to;
  bool json = false;
};

std::string JoinNames(const std::vector<std::string>& names) {
  std::string s;
  for (const std::string& n : names) s += (s.empty() ? "" : ", ") + n;
  return "[" + s + "]";
}

std::string MetadataValue(const ModelFileContents& file, const std::string& key) {
  for (const auto& [k, v] : file.metadata) {
    if (k == key) return v;
  }
  return "";
}

// An RFC 3339 time or epoch seconds (as in the sample files).
Result<DataTime> ParseTimeArg(const std::string& text, const char* what) {
  if (auto t = ParseRfc3339(text); t.ok()) return *t;
  char* end = nullptr;
  const double seconds = std::strtod(text.c_str(), &end);
  if (!text.empty() && end == text.c_str() + text.size() && std::isfinite(seconds) && std::abs(seconds) < 1e11) {
    return DataTimeFromMicros(std::llround(seconds * 1e6));
  }
  return Status::Invalid(fmt::format("{} '{}' is neither an RFC 3339 time (2026-01-01T00:00:00Z) nor epoch seconds",
                                     what, text));
}

// The feed whose lines the input holds: from --config, or made from the
// model file alone (its channels and step; the feed id from --feed or the
// model's "feed" metadata).
Result<LoadedFeed> FeedFor(const ScoreArgs& a, const ModelFileContents& file) {
  const std::string model_feed = MetadataValue(file, "feed");
  if (!a.config.empty()) {
    std::string id = a.feed;
    if (id.empty() && !model_feed.empty()) {
      // Prefer the model's own feed when the config has it; otherwise LoadFeed's rule (the only feed).
      auto probe = LoadFeed(a.config, model_feed);
      if (probe.ok()) return probe;
    }
    return LoadFeed(a.config, id);
  }
  const std::string id = a.feed.empty() ? model_feed : a.feed;
  if (id.empty()) {
    return Status::Invalid(
        fmt::format("{} names no feed; give --feed ID (the feed id of the input's lines) or --config", a.model));
  }
  if (!IsValidFeedId(id)) return Status::Invalid(fmt::format("--feed '{}' is not a valid feed id", id));
  LoadedFeed out;
  FeedConfig feed;
  feed.id = id;
  feed.channels = file.channels;
  feed.step = file.step_micros;
  out.config.feeds.push_back(std::move(feed));
  out.index = 0;
  return out;
}

int RunScore(const ScoreArgs& a) {
  constexpr const char* kCmd = "score";
  auto file = LoadModel(a.model);
  if (!file.ok()) return PrintError(kCmd, file.status().message()), kExitUsage;
  const std::vector<std::string>& names = file->channels;
  const int channels = static_cast<int>(names.size());

  auto loaded = FeedFor(a, *file);
  if (!loaded.ok()) return PrintError(kCmd, loaded.status().message()), kExitUsage;
  const FeedConfig& feed = loaded->feed();
  if (feed.channels != names) {
    return PrintError(kCmd, fmt::format("the channels differ: model {} has {}, feed '{}' in {} has {}", a.model,
                                        JoinNames(names), feed.id, a.config, JoinNames(feed.channels))),
           kExitUsage;
  }
  if (!a.config.empty() && feed.step != file->step_micros) {
    std::fprintf(stderr, "lyapcast score: note: feed '%s' has step %s, the model %s; scoring on the model's step\n",
                 feed.id.c_str(), FormatDuration(feed.step).c_str(), FormatDuration(file->step_micros).c_str());
  }

  std::optional<DataTime> from, to;
  if (!a.from.empty()) {
    auto t = ParseTimeArg(a.from, "--from");
    if (!t.ok()) return PrintError(kCmd, t.status().message()), kExitUsage;
    from = *t;
  }
  if (!a.to.empty()) {
    auto t = ParseTimeArg(a.to, "--to");
    if (!t.ok()) return PrintError(kCmd, t.status().message()), kExitUsage;
    to = *t;
  }
  if (from && to && *from > *to) {
    return PrintError(kCmd, fmt::format("--from {} is after --to {}", FormatRfc3339(*from), FormatRfc3339(*to))),
           kExitUsage;
  }

  auto samples = ReadSamples(a.input, *loaded);
  if (!samples.ok()) {
    std::string message = samples.status().message();
    if (a.config.empty() && samples.status().code() == StatusCode::kInvalidArgument) {
      message += fmt::format(" (without --config the input is read as feed '{}' with the model's channels {}; "
                             "give --feed or --config for other files)",
                             feed.id, JoinNames(names));
    }
    return PrintError(kCmd, message), kExitUsage;
  }
  std::vector<Sample>& all = samples->samples;
  const std::size_t read = all.size();
  std::erase_if(all, [&](const Sample& s) { return (from && s.t < *from) || (to && s.t > *to); });
  const std::string range = fmt::format("{} .. {}", from ? FormatRfc3339(*from) : "start",
                                        to ? FormatRfc3339(*to) : "end");
  if (all.empty()) {
    return PrintError(kCmd, fmt::format("no pairs to score: {} holds {} samples of feed '{}', none in {}", a.input,
                                        read, feed.id, range)),
           kExitUsage;
  }

  // The model's grid; one-step pairs as the trainer's validation takes them:
  // from a complete state to the next grid point holding a sample, missing
  // channels left out of that channel's error.
  const GridSeries grid = ResampleToGrid(all, channels, {file->step_micros, Micros{}});
  TrajectoryOptions topt;
  topt.rollout = 1;
  topt.max_gap = 1;  // a longer gap has no one-step target
  topt.validation = 0;
  const TrajectorySet set = BuildTrajectories(grid, topt);
  std::int64_t pairs = 0;
  std::vector<std::int64_t> channel_pairs(static_cast<std::size_t>(channels), 0);
  for (const Trajectory& t : set.train) {
    const auto next = static_cast<std::size_t>(t.start) + 1;
    if (next >= grid.size() || !grid.present[next]) continue;
    ++pairs;
    for (int c = 0; c < channels; ++c) {
      if (!((grid.mask[next] >> c) & 1U)) ++channel_pairs[static_cast<std::size_t>(c)];
    }
  }
  std::fprintf(stderr,
               "feed %s: %zu samples in %s on a %zu-point grid of step %s in %zu segment(s) (%lld samples unused, %lld values interpolated), "
               "%lld one-step pairs, %lld complete states without a sample one step on\n",
               feed.id.c_str(), all.size(), range.c_str(), grid.size(), FormatDuration(grid.step).c_str(),
               grid.segments(), static_cast<long long>(grid.unused), static_cast<long long>(grid.interpolated),
               static_cast<long long>(pairs), static_cast<long long>(set.skipped_gaps));
  if (samples->other_feeds > 0) {
    std::fprintf(stderr, "skipped %lld lines of other feeds\n", static_cast<long long>(samples->other_feeds));
  }
  if (pairs == 0) {
    return PrintError(kCmd, fmt::format("no pairs to score in {} ({} samples): no complete sample has a sample one "
                                        "model step ({}) later",
                                        range, all.size(), FormatDuration(file->step_micros))),
           kExitUsage;
  }

  // The trainer's measure: a neural flow map in float (a float64 model is
  // rounded to float for it), a polynomial map in double.
  auto served = MakeForecastModel(*file, ModelScalar::kFloat32);
  if (!served.ok()) return PrintError(kCmd, served.status().message()), kExitUsage;
  const ForecastModel& model = *served.value();
  const std::vector<double> error = ModelOneStepError(model, grid, set.train);
  // Mean over channels, as FitResult::validation_error; a channel with no
  // target in range (missing throughout) is left out of the mean.
  double overall = 0;
  int counted = 0;
  for (double e : error) {
    if (std::isnan(e)) continue;
    overall += e;
    ++counted;
  }
  overall = counted > 0 ? overall / counted : std::numeric_limits<double>::quiet_NaN();
  const DataTime first = all.front().t, last = all.back().t;

  if (a.json) {
    nlohmann::json j;
    j["model"] = a.model;
    j["pairs"] = pairs;
    j["from"] = FormatRfc3339(first);
    j["to"] = FormatRfc3339(last);
    j["error"] = overall;  // NaN is written as null
    j["channels"] = nlohmann::json::array();
    for (std::size_t k = 0; k < names.size(); ++k) {
      j["channels"].push_back({{"name", names[k]}, {"error", error[k]}});
    }
    std::puts(j.dump().c_str());
    return kExitOk;
  }

  const std::string validation = MetadataValue(*file, "validation_error");
  const std::string trained = validation.empty() ? "" : ", validation_error " + validation;
  std::printf("model %s (feed %s, step %s%s)\n", a.model.c_str(), feed.id.c_str(),
              FormatDuration(file->step_micros).c_str(), trained.c_str());
  std::printf("scored %lld one-step pairs from %s to %s\n", static_cast<long long>(pairs), FormatRfc3339(first).c_str(),
              FormatRfc3339(last).c_str());
  std::printf("one-step error (RMSE / the model's channel std, as validation_error; and in channel units):\n");
  std::printf("  %-16s %10s %10s   %s\n", "channel", "error", "pairs", "RMSE");
  for (int c = 0; c < channels; ++c) {
    const auto k = static_cast<std::size_t>(c);
    const std::string unit = k < feed.units.size() ? " " + feed.units[k] : "";
    if (std::isnan(error[k])) {
      std::printf("  %-16s %10s %10lld   - (no target in range)\n", names[k].c_str(), "-",
                  static_cast<long long>(channel_pairs[k]));
    } else {
      std::printf("  %-16s %10.3e %10lld   %.4g%s\n", names[k].c_str(), error[k],
                  static_cast<long long>(channel_pairs[k]), error[k] * model.error_scale()[c],
                  unit.c_str());
    }
  }
  std::printf("  %-16s %10.3e %10lld\n", "overall", overall, static_cast<long long>(pairs));
  return kExitOk;
}

}  // namespace

void AddScoreCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<ScoreArgs>();
  CLI::App* cmd = app.add_subcommand("score", "Measure how well a model file fits a file of samples");
  cmd->footer(
      "Resamples the input onto the model's step grid and reports, per channel and overall (the mean over\n"
      "channels), the one-step error: the RMSE of G(x_t) against x_{t+dt} divided by the channel's standard\n"
      "deviation stored in the model (that of its training data), the trainer's validation measure, so the\n"
      "numbers compare with the model's validation_error when it was validated on gap-free data (across\n"
      "gaps the trainer validates at the first sample k steps on, through G^k: a larger, k-step error).\n"
      "Pairs run from a complete sample to a sample one model step later; a channel missing in the later\n"
      "one is left out of that channel's error.\n"
      "The model file alone gives the channels and step: without --config the input's lines are read as\n"
      "the model's feed (its metadata, or --feed ID), values in the model's channel order. With --config the\n"
      "feed's channels must equal the model's; lines of other feeds are then skipped.\n"
      "--from/--to take RFC 3339 times or epoch seconds (inclusive). --json prints one object:\n"
      "  {\"model\",\"pairs\",\"from\",\"to\",\"error\",\"channels\":[{\"name\",\"error\"}]} (null where no target).\n"
      "Exit codes: 0 scored, 2 bad arguments, model file, config or input (also: no pairs in range).\n"
      "Examples:\n"
      "  lyapcast score --model loop-a.model --input loop.csv\n"
      "  lyapcast score --model loop-a.model --input loop.csv --config config/demo.yaml --feed loop-a \\\n"
      "      --from 2026-01-01T00:20:00Z --json");
  cmd->add_option("--model,-m", args->model, "model file (from lyapcast train or the daemon)")->required();
  cmd->add_option("--input,--csv,-i", args->input, "sample file (ingest-format CSV or NDJSON lines), '-' for stdin")
      ->required();
  cmd->add_option("--config,-c", args->config, "config file defining the feed (optional; see below)");
  cmd->add_option("--feed", args->feed, "feed id of the input's lines (default: the model's feed)");
  cmd->add_option("--from", args->from, "score samples at or after this data time");
  cmd->add_option("--to", args->to, "score samples at or before this data time");
  cmd->add_flag("--json", args->json, "print one JSON object instead of the table");
  cmd->callback([args, exit_code] { *exit_code = RunScore(*args); });
}

}  // namespace lyapcast::cli
