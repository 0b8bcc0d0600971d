// The lyapcast CLI's subcommands. Each Add*Command registers one subcommand
// on `app`; its callback stores the process exit code in *exit_code
// (cli_common.h: 0 done, 1 failed, 2 usage; `check` uses 0/1/2/3 as a
// monitoring plugin does).
#pragma once

namespace CLI {
class App;
}

namespace lyapcast::cli {

void AddSimulateCommand(CLI::App& app, int* exit_code);
void AddTrainCommand(CLI::App& app, int* exit_code);
void AddForecastCommand(CLI::App& app, int* exit_code);
void AddLyapunovCommand(CLI::App& app, int* exit_code);
void AddScoreCommand(CLI::App& app, int* exit_code);
// A consistent copy of the daemon's SQLite database, safe while it runs.
void AddBackupCommand(CLI::App& app, int* exit_code);
// Commands that talk to a running daemon (docs/http-api.md, docs/protocol.md).
void AddStatusCommand(CLI::App& app, int* exit_code);
void AddModelsCommand(CLI::App& app, int* exit_code);
void AddRetrainCommand(CLI::App& app, int* exit_code);
void AddCheckCommand(CLI::App& app, int* exit_code);
void AddReplayCommand(CLI::App& app, int* exit_code);
void AddExportCommand(CLI::App& app, int* exit_code);
// A historian-style CSV file into a feed (channels from the HTTP API, samples through the ingest port).
void AddImportCommand(CLI::App& app, int* exit_code);

}  // namespace lyapcast::cli
