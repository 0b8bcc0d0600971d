// The lyapcast CLI's subcommands. Each Add*Command registers one subcommand
// on `app`; its callback stores the process exit code in *exit_code.
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

}  // namespace lyapcast::cli
