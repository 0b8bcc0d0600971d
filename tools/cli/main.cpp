// lyapcast: the command-line tool. Offline commands work on files (simulate,
// train, forecast --model, lyapunov, score) or on the daemon's database file
// (backup); the others talk to a running daemon over its HTTP API (status,
// models, models upload, retrain, forecast --feed, check, export) or its
// ingest port (replay, simulate --send; import uses both).
#include <CLI/CLI.hpp>

#include <cstdio>
#include <cstring>

#include "commands.h"

int main(int argc, char** argv) {
  CLI::App app{
      "lyapcast - tools for the lyapcast daemon and its flow-map models.\n"
      "Forecasts are advisory; plant safety systems, local codes and licensed practice govern.\n"};
  app.set_version_flag("--version", "0.1.0");
  app.require_subcommand(1);
  app.footer(
      "Talk to a running daemon: status, models (and models upload), retrain, forecast --feed, check, export\n"
      "(HTTP API; --url, --token-file), replay (ingest port), import (a historian CSV file into a feed; both).\n"
      "Offline, on files: simulate, train, forecast --model, lyapunov, score.\n"
      "On the daemon's database file (safe while it runs): backup.\n"
      "`lyapcast <command> --help` explains each command with examples.");
  int exit_code = 0;
  lyapcast::cli::AddStatusCommand(app, &exit_code);
  lyapcast::cli::AddForecastCommand(app, &exit_code);
  lyapcast::cli::AddModelsCommand(app, &exit_code);
  lyapcast::cli::AddRetrainCommand(app, &exit_code);
  lyapcast::cli::AddCheckCommand(app, &exit_code);
  lyapcast::cli::AddExportCommand(app, &exit_code);
  lyapcast::cli::AddReplayCommand(app, &exit_code);
  lyapcast::cli::AddImportCommand(app, &exit_code);
  lyapcast::cli::AddSimulateCommand(app, &exit_code);
  lyapcast::cli::AddTrainCommand(app, &exit_code);
  lyapcast::cli::AddLyapunovCommand(app, &exit_code);
  lyapcast::cli::AddScoreCommand(app, &exit_code);
  lyapcast::cli::AddBackupCommand(app, &exit_code);
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    // `check` speaks exit codes to monitoring systems: bad arguments are
    // indeterminate (3) with one line on stdout, not 2 (which reads as alarm).
    const bool check = argc > 1 && std::strcmp(argv[1], "check") == 0;
    if (check && e.get_exit_code() != 0) {
      std::printf("indeterminate: bad argument: %s\n", e.what());
      std::fprintf(stderr, "Run with --help for more information.\n");
      return 3;
    }
    const int code = app.exit(e);
    return code == 0 ? 0 : 2;
  }
  return exit_code;
}
