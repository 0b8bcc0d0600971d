// Runs an outside-reference script under LYAPCAST_PYTHON (Debian's
// /usr/bin/python3 with numpy/scipy/torch) and returns what it printed.
// A script that cannot import its library prints a first line starting with
// "skip" and exits 0; the test then skips with that line.
#pragma once

#include <cstdio>
#include <filesystem>
#include <string>

namespace lyapcast::testing {

struct PythonRun {
  std::string output;  // stdout and stderr
  std::string skip;    // set: skip the test with this reason
  std::string error;   // set: the run failed (the message says how)
};

// `script` is relative to the source tree; `args` are appended as given
// (the caller quotes them).
inline PythonRun RunPythonReference(const std::string& script, const std::string& args) {
  PythonRun run;
  const std::string python = LYAPCAST_PYTHON;
  if (!std::filesystem::exists(python)) {
    run.skip = "Python interpreter " + python + " not found (tools/install-deps installs it)";
    return run;
  }
  const std::string path = std::string(LYAPCAST_SOURCE_DIR) + "/" + script;
  const std::string command = "OMP_NUM_THREADS=1 '" + python + "' '" + path + "' " + args + " 2>&1";
  FILE* pipe = ::popen(command.c_str(), "r");
  if (pipe == nullptr) {
    run.error = "cannot run: " + command;
    return run;
  }
  char buffer[4096];
  while (std::fgets(buffer, sizeof buffer, pipe) != nullptr) run.output += buffer;
  const int rc = ::pclose(pipe);
  if (run.output.rfind("skip", 0) == 0) {
    run.skip = run.output;
  } else if (rc != 0) {
    run.error = "`" + command + "` failed (status " + std::to_string(rc) + "): " + run.output;
  }
  return run;
}

}  // namespace lyapcast::testing
