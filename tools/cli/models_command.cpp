// lyapcast models: a feed's model history from a running daemon
// (GET /v1/feeds/{id}/models), newest first, as a table or the daemon's JSON.
#include <fmt/format.h>
#include <CLI/CLI.hpp>

#include <cstdio>

#include "cli_common.h"
#include "commands.h"
#include "remote_common.h"

namespace lyapcast::cli {
namespace {

struct ModelsArgs {
  RemoteArgs remote;
  std::string feed;
  int limit = 20;
  bool json = false;
};

int RunModels(const ModelsArgs& a) {
  constexpr const char* kCmd = "models";
  if (a.limit < 1 || a.limit > 1000) return PrintError(kCmd, "--limit must be from 1 to 1000"), kExitUsage;
  auto path = FeedPath(a.feed);
  if (!path.ok()) return PrintError(kCmd, path.status().message()), kExitUsage;
  auto remote = Remote::Open(a.remote);
  if (!remote.ok()) return PrintError(kCmd, remote.status().message()), kExitUsage;
  auto body = (*remote)->GetJson(fmt::format("{}/models?limit={}", *path, a.limit));
  if (!body.ok()) return PrintError(kCmd, body.status().message()), RemoteExitCode(body.status());
  if (a.json) {
    std::printf("%s\n", body->dump(2).c_str());
    return kExitOk;
  }
  const json* models = Field(*body, "models");
  if (models == nullptr || !models->is_array()) {
    return PrintError(kCmd, fmt::format("the answer from {} has no 'models' list", (*remote)->url())), kExitFailure;
  }
  if (models->empty()) {
    std::printf("feed %s has no model versions yet\n", a.feed.c_str());
    return kExitOk;
  }
  Table table({"version", "status", "trained to", "val error", "Lyapunov time", "parent", "reason"},
              {true, false, false, true, true, true, false});
  for (const json& m : *models) {
    const auto per_s = Number(Field(m, "lyapunov_per_s"));
    std::string lyapunov_time = "-";
    if (per_s) lyapunov_time = *per_s > 0 ? Age(1.0 / *per_s) : "none (lambda<=0)";
    const auto parent = Integer(Field(m, "parent"));
    table.Add({std::to_string(Integer(Field(m, "version")).value_or(0)), Text(Field(m, "status")),
               TimeText(Field(m, "trained_to")), Num(Number(Field(m, "validation_error")), 4), lyapunov_time,
               parent ? std::to_string(*parent) : "-", Text(Field(m, "reason"))});
  }
  // The reason is cut to the terminal's width (or 120 columns into a pipe);
  // --json has it whole.
  const int columns = TerminalColumns();
  table.Print(stdout, columns > 0 ? columns : 120);
  return kExitOk;
}

}  // namespace

void AddModelsCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<ModelsArgs>();
  CLI::App* cmd = app.add_subcommand("models", "List a feed's model versions on a running daemon, newest first");
  cmd->footer(
      std::string(
          "One row per version: its status (active, retired, rejected), the end of the data it was trained on,\n"
          "its one-step validation error (relative to each channel's standard deviation), its Lyapunov time\n"
          "(1/lambda_max of the learned map), the version it was warm-started from and why it was kept or not.\n"
          "Reasons are cut to the terminal width; --json prints the daemon's answer whole.\n"
          "Examples:\n"
          "  lyapcast models --feed loop-a\n"
          "  lyapcast models --feed loop-a --limit 5 --json\n") +
      kRemoteFooter);
  cmd->add_option("--feed", args->feed, "feed id")->required();
  cmd->add_option("--limit", args->limit, "how many versions, newest first (default 20, at most 1000)");
  cmd->add_flag("--json", args->json, "print the daemon's JSON");
  AddRemoteOptions(cmd, &args->remote);
  cmd->callback([args, exit_code] { *exit_code = RunModels(*args); });
}

}  // namespace lyapcast::cli
