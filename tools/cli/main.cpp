// lyapcast: the command-line tool. Offline commands work on files (simulate,
// train, forecast --model, lyapunov, score); commands that talk to a daemon come later.
#include <CLI/CLI.hpp>

#include "commands.h"

int main(int argc, char** argv) {
  CLI::App app{
      "lyapcast - tools for the lyapcast daemon and its flow-map models.\n"
      "Forecasts are advisory; plant safety systems, local codes and licensed practice govern.\n"};
  app.set_version_flag("--version", "0.1.0");
  app.require_subcommand(1);
  int exit_code = 0;
  lyapcast::cli::AddSimulateCommand(app, &exit_code);
  lyapcast::cli::AddTrainCommand(app, &exit_code);
  lyapcast::cli::AddForecastCommand(app, &exit_code);
  lyapcast::cli::AddLyapunovCommand(app, &exit_code);
  lyapcast::cli::AddScoreCommand(app, &exit_code);
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    const int code = app.exit(e);
    return code == 0 ? 0 : 2;
  }
  return exit_code;
}
