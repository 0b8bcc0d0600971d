// lyapcast forecast --model FILE: iterate a model file's flow map from a
// given state (the offline form of the daemon's forecast endpoint).
#include <CLI/CLI.hpp>
#include <fmt/format.h>

#include <cstdio>
#include <variant>

#include "cli_common.h"
#include "commands.h"
#include "learn/model_file.h"

namespace lyapcast::cli {
namespace {

struct ForecastArgs {
  std::string model, from, start;
  int steps = 100;
};

template <typename T>
void Iterate(const FlowMap<T>& model, const std::vector<double>& from, int steps, DataTime start, Micros step,
             bool absolute) {
  typename MlpTypes<T>::Mat x(model.channels(), 1), y;
  for (int c = 0; c < model.channels(); ++c) x(c, 0) = static_cast<T>(from[static_cast<std::size_t>(c)]);
  FlowMapCache<T> cache;
  for (int k = 1; k <= steps; ++k) {
    model.Forward(x, &y, &cache);
    x.swap(y);
    const DataTime t = start + static_cast<DataTime>(k) * step;
    std::string line = absolute ? fmt::format("{},{}.{:06d}", k, t / kMicrosPerSecond, t % kMicrosPerSecond)
                                : fmt::format("{},{:.6f}", k, static_cast<double>(t) / 1e6);
    for (int c = 0; c < model.channels(); ++c) line += fmt::format(",{:.9g}", static_cast<double>(x(c, 0)));
    std::puts(line.c_str());
  }
}

int RunForecast(const ForecastArgs& a) {
  constexpr const char* kCmd = "forecast";
  auto file = LoadModel(a.model);
  if (!file.ok()) return PrintError(kCmd, file.status().message()), kExitUsage;
  auto from = ParseNumberList(a.from, file->channels.size(), "--from");
  if (!from.ok()) return PrintError(kCmd, from.status().message()), kExitUsage;
  if (a.steps < 1) return PrintError(kCmd, "--steps must be at least 1"), kExitUsage;
  DataTime start = 0;
  const bool absolute = !a.start.empty();
  if (absolute) {
    auto t = ParseRfc3339(a.start);
    if (!t.ok()) return PrintError(kCmd, "--start: " + t.status().message()), kExitUsage;
    start = *t;
  }
  std::string header = absolute ? "step,t" : "step,seconds";
  for (const std::string& c : file->channels) header += "," + c;
  std::puts(header.c_str());
  std::visit([&](const auto& model) { Iterate(model, *from, a.steps, start, file->step_micros, absolute); }, file->model);
  return kExitOk;
}

}  // namespace

void AddForecastCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<ForecastArgs>();
  CLI::App* cmd = app.add_subcommand("forecast", "Iterate a model file's flow map from a state (CSV out)");
  cmd->footer("Iterate a model file's flow map from a state and print the trajectory as CSV (step, time, channels).\nTime is seconds after the start, or absolute epoch seconds with --start. Forecasts are advisory.\nExample:\n  lyapcast forecast --model loop-a.model --from 1.2,-0.4,20 --steps 200");
  cmd->add_option("--model,-m", args->model, "model file (from lyapcast train or the daemon)")->required();
  cmd->add_option("--from", args->from, "starting state, one number per channel in the model's order")->required();
  cmd->add_option("--steps", args->steps, "number of model steps (default 100)");
  cmd->add_option("--start", args->start, "RFC 3339 data time of the starting state (default: times relative to it)");
  cmd->callback([args, exit_code] { *exit_code = RunForecast(*args); });
}

}  // namespace lyapcast::cli
