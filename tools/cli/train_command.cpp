// lyapcast train: fit a feed's flow map to a file of samples and write a
// model file, with a progress line and an honest validation report.
#include <CLI/CLI.hpp>
#include <fmt/format.h>

#include <cmath>
#include <cstdio>
#include <optional>

#include "cli_common.h"
#include "commands.h"
#include "learn/model_file.h"
#include "learn/pairs.h"
#include "learn/trainer.h"
#include "physics/dynamics.h"

namespace lyapcast::cli {
namespace {

struct TrainArgs {
  std::string config, feed, csv, out;
  std::optional<int> iterations, batch, rollout, max_gap;
  std::optional<double> learning_rate, validation;
  std::uint64_t seed = 1;
  bool no_constraints = false;
};

std::string FormatTerms(const FitProgress& p, bool velocity, bool residual) {
  std::string s = fmt::format("loss {:.3e} (data {:.3e}", p.loss, p.data);
  if (velocity) s += fmt::format(", velocity {:.3e}", p.velocity);
  if (residual) s += fmt::format(", residual {:.3e}", p.residual);
  return s + ")";
}

int RunTrain(const TrainArgs& a) {
  constexpr const char* kCmd = "train";
  auto loaded = LoadFeed(a.config, a.feed);
  if (!loaded.ok()) return PrintError(kCmd, loaded.status().message()), kExitUsage;
  const FeedConfig& feed = loaded->feed();
  auto file = ReadSamples(a.csv, *loaded);
  if (!file.ok()) return PrintError(kCmd, file.status().message()), kExitUsage;
  if (file->samples.size() < 3) {
    return PrintError(kCmd, fmt::format("{} holds {} samples of feed '{}'; training needs many more", a.csv,
                                        file->samples.size(), feed.id)),
           kExitUsage;
  }
  std::optional<Dynamics> dynamics;
  if (feed.dynamics && !a.no_constraints) {
    auto spec = ToDynamicsSpec(feed);
    if (!spec.ok()) return PrintError(kCmd, spec.status().message()), kExitUsage;
    auto d = Dynamics::Compile(*spec);
    if (!d.ok()) return PrintError(kCmd, d.status().message()), kExitUsage;
    dynamics.emplace(std::move(d).value());
  }
  const Micros time_unit = feed.dynamics ? feed.dynamics->time_unit : kSecond;
  const double dt = Seconds(feed.step) / Seconds(time_unit);
  const int channels = static_cast<int>(feed.channels.size());

  const GridSeries grid = ResampleToGrid(file->samples, channels, {feed.step, Micros{}, Micros{}, feed.hold});
  TrajectoryOptions topt;
  topt.rollout = a.rollout.value_or(feed.model.rollout);
  topt.max_gap = a.max_gap.value_or(feed.model.max_gap);
  topt.validation = a.validation.value_or(feed.retrain.validation);
  const TrajectorySet set = BuildTrajectories(grid, topt);
  std::fprintf(stderr,
               "feed %s: %zu samples on a %zu-point grid in %zu segment(s) (%lld samples unused), %zu training and %zu validation "
               "trajectories (%lld across gaps, %lld gaps too long to bridge)\n",
               feed.id.c_str(), file->samples.size(), grid.size(), grid.segments(), static_cast<long long>(grid.unused),
               set.train.size(), set.validation.size(), static_cast<long long>(set.gap_pairs),
               static_cast<long long>(set.skipped_gaps));
  auto norm = ComputeNormalization(grid, set.validation_begin, dt, topt.max_gap);
  if (!norm.ok()) return PrintError(kCmd, norm.status().message()), kExitUsage;
  auto created = FlowMap<float>::Create(channels, feed.model.hidden, feed.model.activation, dt);
  if (!created.ok()) return PrintError(kCmd, created.status().message()), kExitUsage;
  FlowMap<float> model = std::move(created).value();
  if (Status s = model.SetNormalization(norm->mean.cast<float>(), norm->stddev.cast<float>(),
                                        norm->increment_scale.cast<float>());
      !s.ok()) {
    return PrintError(kCmd, s.message()), kExitUsage;
  }
  model.InitRandom(a.seed);

  FitOptions o;
  o.iterations = a.iterations.value_or(feed.retrain.iterations);
  o.batch = a.batch.value_or(feed.retrain.batch);
  o.learning_rate = a.learning_rate.value_or(feed.retrain.learning_rate);
  o.weight_decay = feed.retrain.weight_decay;
  o.clip = feed.retrain.clip;
  o.seed = a.seed;
  o.validate_every = std::max(o.iterations / 20, 1);
  if (dynamics) {
    o.dynamics = &*dynamics;
    o.constraints = feed.dynamics->constraints;
  }
  bool velocity = false, residual = false;
  for (const auto& c : o.constraints) (c.kind == ConstraintKind::kVelocity ? velocity : residual) = true;
  ProgressLine progress(std::max(o.iterations / 20, 1));
  double last_validation = std::nan("");
  auto fit = Fit(model, grid, set, o, [&](const FitProgress& p) {
    if (p.validation) last_validation = *p.validation;
    progress.Update(p.iteration, p.iterations,
                    FormatTerms(p, velocity, residual) + fmt::format(" validation {:.3e}", last_validation));
  });
  progress.Finish();
  if (!fit.ok()) return PrintError(kCmd, fit.status().message()), kExitFailure;

  std::printf("trained %d iterations in %.1f s (%s); best validation at iteration %d\n", fit->iterations,
              fit->seconds, FitStopName(fit->stop), fit->best_iteration);
  // The one-step error on the held-out trajectories with a sample one step
  // on (what `lyapcast score` measures on the same span). The trainer's
  // validation error (OneStepError on every held-out trajectory, stored as
  // validation_error) equals it on gap-free data; across gaps it also scores
  // the first targets k steps on, so it is then reported as well.
  std::vector<Trajectory> one_step;
  for (const Trajectory& t : set.validation) {
    if (grid.present[static_cast<std::size_t>(t.start) + 1]) one_step.push_back(t);
  }
  const std::vector<double> one_step_error =
      one_step.size() == set.validation.size() ? fit->validation_rmse : OneStepError(model, grid, one_step);
  std::printf("one-step validation error per channel (RMSE / channel std, and in channel units):\n");
  for (int c = 0; c < channels; ++c) {
    const double e = one_step_error[static_cast<std::size_t>(c)];
    const std::string unit = static_cast<std::size_t>(c) < feed.units.size() ? feed.units[static_cast<std::size_t>(c)] : "";
    std::printf("  %-16s %.3e   %.4g %s\n", feed.channels[static_cast<std::size_t>(c)].c_str(), e,
                e * static_cast<double>(model.stddev()[c]), unit.c_str());
  }
  if (one_step.size() != set.validation.size()) {
    std::string per_channel;
    for (int c = 0; c < channels; ++c) {
      per_channel += fmt::format(" {}={:.3e}", feed.channels[static_cast<std::size_t>(c)],
                                 fit->validation_rmse[static_cast<std::size_t>(c)]);
    }
    std::printf("validation error %.3e (stored as validation_error; at each held-out trajectory's first target, "
                "%zu of %zu of them k steps on through G^k across a gap):%s\n",
                fit->validation_error, set.validation.size() - one_step.size(), set.validation.size(),
                per_channel.c_str());
  }
  if (residual) {
    std::printf("learned residual correction mu:");
    for (int c = 0; c < channels; ++c) std::printf(" %s=%.4g", feed.channels[static_cast<std::size_t>(c)].c_str(), static_cast<double>(model.mu()[c]));
    std::printf("\n");
  }

  ModelFileContents contents;
  contents.channels = feed.channels;
  contents.step_micros = feed.step;
  contents.time_unit_micros = time_unit;
  contents.model = model;
  contents.metadata = {{"feed", feed.id},
                       {"trained_from", FormatRfc3339(file->samples.front().t)},
                       {"trained_to", FormatRfc3339(file->samples.back().t)},
                       {"iterations", std::to_string(fit->iterations)},
                       {"validation_error", fmt::format("{:.6e}", fit->validation_error)},
                       {"source", "lyapcast train"}};
  if (Status s = SaveModel(a.out, contents); !s.ok()) return PrintError(kCmd, s.message()), kExitFailure;
  std::printf("model written to %s\n", a.out.c_str());
  return kExitOk;
}

}  // namespace

void AddTrainCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<TrainArgs>();
  CLI::App* cmd = app.add_subcommand("train", "Fit a feed's flow map to a file of samples and write a model file");
  cmd->footer("Fit a feed's flow map to a file of samples (ingest-format CSV or NDJSON lines, e.g. from `lyapcast simulate`)\nand write a model file. Settings default to the feed's model and retrain sections; the newest\nretrain.validation fraction of the data is held out and reported.\nExample:\n  lyapcast train --config config/demo.yaml --feed loop-a --csv loop.csv --out loop-a.model");
  cmd->add_option("--config,-c", args->config, "config file defining the feed")->required();
  cmd->add_option("--feed", args->feed, "feed id (may be left out when the config has one feed)");
  cmd->add_option("--csv", args->csv, "sample file, '-' for stdin")->required();
  cmd->add_option("--out,-o", args->out, "model file to write")->required();
  cmd->add_option("--iterations", args->iterations, "optimizer steps (default retrain.iterations)");
  cmd->add_option("--batch", args->batch, "trajectories per step (default retrain.batch)");
  cmd->add_option("--learning-rate", args->learning_rate, "AdamW learning rate (default retrain.learning_rate)");
  cmd->add_option("--validation", args->validation, "newest fraction held out (default retrain.validation)");
  cmd->add_option("--rollout", args->rollout, "unrolled steps on contiguous data (default model.rollout)");
  cmd->add_option("--max-gap", args->max_gap, "longest gap bridged by G^k (default model.max_gap)");
  cmd->add_option("--seed", args->seed, "seed of the initial weights and the batches (default 1)");
  cmd->add_flag("--no-constraints", args->no_constraints, "ignore the feed's dynamics constraints");
  cmd->callback([args, exit_code] { *exit_code = RunTrain(*args); });
}

}  // namespace lyapcast::cli
