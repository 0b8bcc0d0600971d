// The daemon's lifetime: load config, open the store, start the writer and
// the listeners, write the ready file, run until SIGTERM/SIGINT, then stop
// accepting, commit and answer what was received, and exit.
#pragma once

#include <filesystem>
#include <optional>
#include <string>

namespace lyapcast {

inline constexpr const char* kVersion = "0.1.0";

// Process exit codes.
inline constexpr int kExitOk = 0;
inline constexpr int kExitFailure = 1;       // runtime failure (cannot bind, I/O)
inline constexpr int kExitConfigInvalid = 2; // config invalid or store/config mismatch

struct DaemonOptions {
  std::filesystem::path config;
  std::optional<std::filesystem::path> ready_file;
  int io_threads = 2;
};

// Runs until a stop signal; returns the process exit code.
int RunDaemon(const DaemonOptions& options);

// Validates a config file and prints a summary or the error; returns 0 or 2.
int CheckConfig(const std::filesystem::path& config);

}  // namespace lyapcast
