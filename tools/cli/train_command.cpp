// lyapcast train: fit a feed's one-step map (neural, polynomial, or the
// better of both) to a file of samples and write a model file, with a
// progress line and an honest validation report.
#include <CLI/CLI.hpp>
#include <fmt/format.h>

#include <chrono>
#include <cmath>
#include <cstdio>
#include <optional>

#include "cli_common.h"
#include "commands.h"
#include "learn/model_error.h"
#include "learn/model_file.h"
#include "learn/pairs.h"
#include "learn/polynomial_map.h"
#include "learn/smoothed_refit.h"
#include "learn/trainer.h"
#include "physics/dynamics.h"

namespace lyapcast::cli {
namespace {

struct TrainArgs {
  std::string config, feed, csv, out, family, degree;
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

// RMS over channels of the one-step error on `pairs`, on `scale`.
double PairError(const ForecastModel& model, const OneStepPairs& pairs, const Eigen::VectorXd& scale) {
  if (pairs.size() == 0) return std::nan("");
  Eigen::MatrixXd predicted;
  auto scratch = model.NewScratch();
  model.StepBatch(pairs.from, &predicted, *scratch);
  const Eigen::VectorXd per_channel =
      ((predicted - pairs.to).array().colwise() / scale.array()).square().rowwise().mean().matrix();
  return std::sqrt(per_channel.mean());
}

// The polynomial map fitted on the training span's one-step pairs, degree
// and ridge chosen on the validation span's, with a report.
Result<PolynomialFit> FitPolynomialFamily(const FeedConfig& feed, const GridSeries& grid, const TrajectorySet& set,
                                          const Normalization& norm, double dt, const std::vector<int>& degrees) {
  const OneStepPairs train = OneStepPairsIn(grid, 0, set.validation_begin);
  const OneStepPairs validation = OneStepPairsOf(grid, set.validation);
  if (train.size() == 0 || validation.size() == 0) {
    return Status::Invalid(fmt::format("{} one-step training pairs and {} validation pairs (both states complete, "
                                       "one step apart); the polynomial map needs some of each",
                                       train.size(), validation.size()));
  }
  PolynomialFitOptions options;
  options.degrees = degrees;
  const auto started = std::chrono::steady_clock::now();
  auto fit = FitPolynomialMap(dt, norm.mean, norm.stddev, norm.increment_scale, train.from, train.to,
                              validation.from, validation.to, options);
  if (!fit.ok()) return fit.status();
  if (feed.model.denoise) {
    SmoothedRefitOptions smooth;
    smooth.max_gap = feed.model.max_gap;
    auto refit = RefitOnSmoothedStates(std::move(fit).value(), grid, set.validation_begin, dt, norm, validation,
                                       set.validation_begin, grid.size(), smooth);
    if (!refit.ok()) return refit.status();
    std::printf("polynomial map: %s\n", refit->Note().c_str());
    fit = std::move(refit->fit);
  }
  const double seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count();
  std::printf("polynomial map: degree %d, ridge %g chosen of %d candidates on %zu training and %zu validation "
              "pairs in %.2f s\n",
              fit->degree, fit->ridge, fit->candidates, train.size(), validation.size(), seconds);
  const Eigen::VectorXd& s = fit->model->stddev();
  Eigen::MatrixXd predicted;
  auto scratch = fit->model->NewScratch();
  fit->model->StepBatch(validation.from, &predicted, *scratch);
  std::printf("one-step validation error per channel (RMSE / channel std, and in channel units):\n");
  for (Eigen::Index c = 0; c < s.size(); ++c) {
    const double e = std::sqrt((predicted.row(c) - validation.to.row(c)).array().square().mean()) / s[c];
    const auto k = static_cast<std::size_t>(c);
    std::printf("  %-16s %.3e   %.4g %s\n", feed.channels[k].c_str(), e, e * s[c],
                k < feed.units.size() ? feed.units[k].c_str() : "");
  }
  return fit;
}

int WriteModel(const TrainArgs& a, const std::shared_ptr<const ForecastModel>& model, double validation_error,
               ModelFileContents contents) {
  constexpr const char* kCmd = "train";
  if (Status s = SetFileModel(model, &contents); !s.ok()) return PrintError(kCmd, s.message()), kExitFailure;
  contents.metadata.emplace_back("family", std::string(model->family()));
  contents.metadata.emplace_back("validation_error", fmt::format("{:.6e}", validation_error));
  contents.metadata.emplace_back("source", "lyapcast train");
  if (Status s = SaveModel(a.out, contents); !s.ok()) return PrintError(kCmd, s.message()), kExitFailure;
  std::printf("model written to %s (%s)\n", a.out.c_str(), std::string(model->family()).c_str());
  return kExitOk;
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

  ModelFamily family = feed.model.family;
  if (!a.family.empty()) family = a.family == "neural" ? ModelFamily::kNeural
                                  : a.family == "polynomial" ? ModelFamily::kPolynomial
                                                             : ModelFamily::kAuto;
  std::vector<int> degrees = feed.model.degrees;
  if (!a.degree.empty() && a.degree != "auto") degrees = {std::stoi(a.degree)};
  ModelFileContents contents;
  contents.channels = feed.channels;
  contents.step_micros = feed.step;
  contents.time_unit_micros = time_unit;
  contents.metadata = {{"feed", feed.id},
                       {"trained_from", FormatRfc3339(file->samples.front().t)},
                       {"trained_to", FormatRfc3339(file->samples.back().t)}};
  std::shared_ptr<const ForecastModel> chosen;
  double chosen_error = std::nan("");
  if (family != ModelFamily::kNeural) {
    auto poly = FitPolynomialFamily(feed, grid, set, *norm, dt, degrees);
    if (!poly.ok() && family == ModelFamily::kPolynomial) return PrintError(kCmd, poly.status().message()), kExitFailure;
    if (poly.ok()) {
      chosen = poly->model;
      chosen_error = poly->validation_error;
      contents.metadata.emplace_back("degree", std::to_string(poly->degree));
      contents.metadata.emplace_back("ridge", fmt::format("{:g}", poly->ridge));
    } else {
      std::fprintf(stderr, "polynomial map: %s\n", poly.status().message().c_str());
    }
  }
  if (family == ModelFamily::kPolynomial) return WriteModel(a, chosen, chosen_error, std::move(contents));
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
  auto neural = std::make_shared<const NeuralFlowMap<float>>(std::move(model));
  if (family == ModelFamily::kAuto && chosen != nullptr) {
    // Both on the same pairs and scale: the polynomial fit's validation
    // pairs (one step, both states complete) and the data's channel std.
    // As the daemon chooses (schedule/family_choice.h): the longer valid
    // free runs over the validation span, the one-step error breaking a tie.
    const OneStepPairs v = OneStepPairsOf(grid, set.validation);
    const double neural_error = PairError(*neural, v, norm->stddev);
    const double poly_steps = ModelValidSteps(*chosen, grid, set.validation_begin, grid.size(), norm->stddev).mean;
    const double neural_steps = ModelValidSteps(*neural, grid, set.validation_begin, grid.size(), norm->stddev).mean;
    const bool poly_wins = poly_steps > neural_steps || (poly_steps == neural_steps && chosen_error < neural_error);
    std::printf("family auto: %s map chosen (free runs valid for %.1f steps (polynomial) vs %.1f (neural) on the "
                "validation span; one-step validation error on %zu pairs: polynomial %.3e, neural %.3e)\n",
                poly_wins ? "polynomial" : "neural flow", poly_steps, neural_steps, v.size(), chosen_error,
                neural_error);
    if (poly_wins) return WriteModel(a, chosen, chosen_error, std::move(contents));
  }
  contents.metadata.emplace_back("iterations", std::to_string(fit->iterations));
  return WriteModel(a, neural, fit->validation_error, std::move(contents));
}

}  // namespace

void AddTrainCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<TrainArgs>();
  CLI::App* cmd = app.add_subcommand("train", "Fit a feed's flow map to a file of samples and write a model file");
  cmd->footer("Fit a feed's one-step map to a file of samples (ingest-format CSV or NDJSON lines, e.g. from `lyapcast simulate`)\nand write a model file. Settings default to the feed's model and retrain sections; the newest\nretrain.validation fraction of the data is held out and reported.\nFamilies (--family, default model.family): neural (the flow-map network, trained by AdamW),\npolynomial (a ridge regression of the one-step increment on monomials of the state, solved\nexactly; degree and penalty chosen on the held-out span), auto (both; the one whose free runs\nstay valid longer on the held-out span is written).\nExamples:\n  lyapcast train --config config/demo.yaml --feed loop-a --csv loop.csv --out loop-a.model\n  lyapcast train --config config/demo.yaml --feed loop-a --csv loop.csv --out loop-a.model --family auto");
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
  cmd->add_option("--family", args->family,
                  "neural, polynomial, or auto (both; the longer valid free runs on the validation span win); default "
                  "model.family")
      ->check(CLI::IsMember({"neural", "polynomial", "auto"}));
  cmd->add_option("--degree", args->degree, "polynomial degree 1 to 6, or auto (2 to 6, chosen on the validation "
                                            "span); default model.degree")
      ->check(CLI::IsMember({"auto", "1", "2", "3", "4", "5", "6"}));
  cmd->callback([args, exit_code] { *exit_code = RunTrain(*args); });
}

}  // namespace lyapcast::cli
