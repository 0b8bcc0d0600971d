// lyapcastd: the lyapcast daemon. See `lyapcastd --help` and docs/cli.md.
#include <CLI/CLI.hpp>
#include <spdlog/spdlog.h>

#include <iostream>

#include "daemon.h"

int main(int argc, char** argv) {
  CLI::App app{
      "lyapcastd - the lyapcast daemon. Instruments stream samples to it over TCP (CSV or NDJSON lines,\n"
      "each answered once it is committed); it keeps a rolling SQLite window of them per feed, retrains a\n"
      "small neural network that learns each feed's flow map (state now -> state one step later) at a pace\n"
      "set by the process's Lyapunov time, and serves forecasts with drift, staleness, a predictability\n"
      "horizon and a health verdict over HTTP (the operator page is at /, the API under /v1/).\n"
      "Forecasts are advisory: the site's safety systems, interlocks, local codes and licensed practice\n"
      "always govern the plant.\n\n"
      "Exit codes: 0 after a clean stop (SIGTERM or SIGINT: every received line is committed and answered\n"
      "first), 1 on a runtime failure (a port or the database cannot be opened), 2 when the config is\n"
      "invalid or a feed's channels or step differ from what the database recorded.\n\n"
      "Examples:\n"
      "  lyapcastd --config config/demo.yaml\n"
      "  lyapcastd --check-config /etc/lyapcast/plant.yaml\n"
      "  lyapcastd --config test.yaml --ready-file /tmp/ready.json   # ports chosen by the OS (port 0)\n"};
  app.set_version_flag("--version", lyapcast::kVersion);
  std::string config, check_config, ready_file, log_level = "info";
  int io_threads = 2;
  app.add_option("--config,-c", config, "YAML config file (see config/demo.yaml and docs/configuration.md)")
      ->check(CLI::ExistingFile);
  app.add_option("--check-config", check_config, "validate FILE, print a summary and exit (0 valid, 2 invalid)");
  app.add_option("--ready-file", ready_file,
                 "once both listeners are up, write {\"pid\":..,\"ingest_port\":..,\"http_port\":..} to this path");
  app.add_option("--log-level", log_level, "trace, debug, info, warn, error or off")
      ->check(CLI::IsMember({"trace", "debug", "info", "warn", "error", "off"}));
  app.add_option("--io-threads", io_threads, "threads serving ingest and HTTP sockets")->check(CLI::Range(1, 64));
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    return app.exit(e) == 0 ? 0 : lyapcast::kExitConfigInvalid;
  }
  spdlog::set_level(spdlog::level::from_str(log_level));
  spdlog::set_pattern("%Y-%m-%dT%H:%M:%S.%e%z %^%l%$ %v");

  if (!check_config.empty()) return lyapcast::CheckConfig(check_config);
  if (config.empty()) {
    std::cerr << "lyapcastd: --config FILE is required (or --check-config FILE); see --help\n";
    return lyapcast::kExitConfigInvalid;
  }
  lyapcast::DaemonOptions options;
  options.config = config;
  if (!ready_file.empty()) options.ready_file = ready_file;
  options.io_threads = io_threads;
  return lyapcast::RunDaemon(options);
}
