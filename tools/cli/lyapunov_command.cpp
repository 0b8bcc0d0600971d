// lyapcast lyapunov: the largest Lyapunov exponent (and spectrum where a
// Jacobian is available) from up to three sources side by side: a sample
// file (Rosenstein), a model file (QR on the learned map's Jacobians) and a
// feed's known dynamics (QR on the tangent dynamics). Rates are per second
// of data time.
#include <CLI/CLI.hpp>
#include <fmt/format.h>

#include <cmath>
#include <cstdio>
#include <optional>
#include <type_traits>
#include <variant>

#include "chaos/lyapunov.h"
#include "chaos/rosenstein.h"
#include "cli_common.h"
#include "commands.h"
#include "learn/model_file.h"
#include "physics/dynamics.h"

namespace lyapcast::cli {
namespace {

struct LyapunovArgs {
  std::string config, feed, csv, model, channel;
  double time_units = 1000;  // model time units of the QR runs
};

struct Row {
  std::string source;
  double lambda_per_s = 0;
  std::string spectrum;
  std::string diagnostics;
};

std::string Spectrum(const Eigen::VectorXd& e, double per_second) {
  std::string s;
  for (Eigen::Index i = 0; i < e.size(); ++i) s += fmt::format("{}{:.4g}", i ? ", " : "", e[i] * per_second);
  return s;
}

int RunLyapunov(const LyapunovArgs& a) {
  constexpr const char* kCmd = "lyapunov";
  if (a.csv.empty() && a.model.empty() && a.config.empty()) {
    return PrintError(kCmd, "give at least one of --csv (with --config), --model, or --config with dynamics"), kExitUsage;
  }
  std::optional<LoadedFeed> feed;
  if (!a.config.empty()) {
    auto loaded = LoadFeed(a.config, a.feed);
    if (!loaded.ok()) return PrintError(kCmd, loaded.status().message()), kExitUsage;
    feed = std::move(loaded).value();
  }
  std::vector<Row> rows;
  std::optional<Eigen::VectorXd> start;  // a state on the attractor, from the data when given

  if (!a.csv.empty()) {
    if (!feed) return PrintError(kCmd, "--csv needs --config (and --feed) to read the samples"), kExitUsage;
    auto file = ReadSamples(a.csv, *feed);
    if (!file.ok()) return PrintError(kCmd, file.status().message()), kExitUsage;
    const FeedConfig& f = feed->feed();
    const int channel = a.channel.empty() ? 0 : f.ChannelIndex(a.channel);
    if (channel < 0) return PrintError(kCmd, fmt::format("feed '{}' has no channel '{}'", f.id, a.channel)), kExitUsage;
    std::vector<double> series;
    for (const Sample& s : file->samples) {
      if (!s.missing(channel)) series.push_back(s.values[static_cast<std::size_t>(channel)]);
      if (s.complete()) start = Eigen::Map<const Eigen::VectorXd>(s.values.data(), static_cast<Eigen::Index>(s.values.size()));
    }
    auto r = RosensteinLargest(series, Seconds(f.step));
    if (!r.ok()) return PrintError(kCmd, "data: " + r.status().message()), kExitFailure;
    rows.push_back({"data (Rosenstein, " + f.channels[static_cast<std::size_t>(channel)] + ")", r->lambda, "-",
                    fmt::format("lag {}, dimension {}, Theiler {}, fit steps [{}, {}), R^2 {:.4f}", r->lag,
                                r->dimension, r->theiler, r->fit_begin, r->fit_end, r->r_squared)});
  }

  if (!a.model.empty()) {
    auto file = LoadModel(a.model);
    if (!file.ok()) return PrintError(kCmd, file.status().message()), kExitUsage;
    const double per_second = 1.0 / Seconds(file->time_unit_micros);
    auto model = MakeForecastModel(*file);
    if (!model.ok()) return PrintError(kCmd, "model: " + model.status().message()), kExitUsage;
    const ForecastModel& m = *model.value();
    const Eigen::VectorXd x0 = start && start->size() == m.shape().channels ? *start : m.training_mean();
    SpectrumOptions o;
    o.steps = static_cast<long>(a.time_units / m.shape().dt);
    o.transient_steps = o.steps / 10;
    const auto estimate = LyapunovSpectrum(ModelMapStep(m), x0, o);
    if (!estimate.ok()) return PrintError(kCmd, "model: " + estimate.status().message()), kExitFailure;
    rows.push_back({"model (QR on G's Jacobian)", estimate->exponents[0] * per_second,
                    Spectrum(estimate->exponents, per_second),
                    fmt::format("{} steps, converged to {:.2g}", estimate->steps, estimate->convergence * per_second)});
  }

  if (feed && feed->feed().dynamics) {
    const FeedConfig& f = feed->feed();
    auto spec = ToDynamicsSpec(f);
    if (!spec.ok()) return PrintError(kCmd, spec.status().message()), kExitUsage;
    auto dynamics = Dynamics::Compile(*spec);
    if (!dynamics.ok()) return PrintError(kCmd, dynamics.status().message()), kExitUsage;
    const double unit_s = Seconds(f.dynamics->time_unit);
    const double dt = Seconds(f.step) / unit_s;
    const MapStep step = FlowMapStep(*dynamics, dt, std::max(1, static_cast<int>(std::ceil(dt / 5e-3))));
    Eigen::VectorXd x0 = start ? *start : Eigen::VectorXd::Ones(static_cast<Eigen::Index>(f.channels.size()));
    SpectrumOptions o;
    o.steps = static_cast<long>(a.time_units / dt);
    o.transient_steps = o.steps / 10;
    auto estimate = LyapunovSpectrum(step, x0, o);
    if (!estimate.ok()) return PrintError(kCmd, "dynamics: " + estimate.status().message()), kExitFailure;
    const double per_second = 1.0 / unit_s;
    rows.push_back({"dynamics (QR on the tangent dynamics)", estimate->exponents[0] * per_second,
                    Spectrum(estimate->exponents, per_second),
                    fmt::format("{} steps, converged to {:.2g}", estimate->steps, estimate->convergence * per_second)});
  }

  std::printf("%-40s %14s %16s  %s\n", "source", "largest (1/s)", "Lyapunov time", "spectrum (1/s); diagnostics");
  for (const Row& r : rows) {
    const std::string t = r.lambda_per_s > 0 ? fmt::format("{:.4g} s", 1.0 / r.lambda_per_s) : "none (not chaotic)";
    std::printf("%-40s %14.5g %16s  %s; %s\n", r.source.c_str(), r.lambda_per_s, t.c_str(), r.spectrum.c_str(),
                r.diagnostics.c_str());
  }
  return kExitOk;
}

}  // namespace

void AddLyapunovCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<LyapunovArgs>();
  CLI::App* cmd = app.add_subcommand("lyapunov", "Estimate Lyapunov exponents from data, a model and known dynamics");
  cmd->footer(
      "Runs every estimator the arguments allow and prints them side by side, per second of data time:\n"
      "  data      --csv FILE --config C [--feed F] [--channel NAME]   Rosenstein's method on one channel\n"
      "  model     --model FILE                                        QR on the learned map's Jacobians\n"
      "  dynamics  --config C [--feed F] (feed with a dynamics section) QR on the tangent dynamics\n"
      "The data's last complete sample starts the model and dynamics runs when given.\n"
      "Example:\n"
      "  lyapcast lyapunov --config config/demo.yaml --feed loop-a --csv loop.csv --model loop-a.model");
  cmd->add_option("--config,-c", args->config, "config file defining the feed");
  cmd->add_option("--feed", args->feed, "feed id (may be left out when the config has one feed)");
  cmd->add_option("--csv", args->csv, "sample file (ingest-format lines)");
  cmd->add_option("--channel", args->channel, "channel for Rosenstein's method (default the first)");
  cmd->add_option("--model,-m", args->model, "model file");
  cmd->add_option("--time-units", args->time_units, "length of the QR runs in model time units (default 1000)");
  cmd->callback([args, exit_code] { *exit_code = RunLyapunov(*args); });
}

}  // namespace lyapcast::cli
