// lyapcast models: a feed's model history from a running daemon
// (GET /v1/feeds/{id}/models), newest first, as a table or the daemon's JSON;
// and `lyapcast models upload`: a model file into the daemon
// (POST /v1/feeds/{id}/models), followed to its outcome.
#include <fmt/format.h>
#include <CLI/CLI.hpp>

#include <cerrno>
#include <cstdio>
#include <cstring>
#include <fstream>
#include <iterator>

#include "cli_common.h"
#include "commands.h"
#include "learn/model_file.h"
#include "remote_common.h"
#include "schedule/model_upload.h"

namespace lyapcast::cli {
namespace {

struct ModelsArgs {
  RemoteArgs remote;
  std::string feed;
  int limit = 20;
  bool json = false;
};

struct UploadArgs {
  RemoteArgs remote;
  std::string file, feed;
  bool activate = false;
  bool no_wait = false;
  std::string wait_timeout = "0";
  bool json = false;
};

int RunModels(const ModelsArgs& a) {
  constexpr const char* kCmd = "models";
  if (a.feed.empty()) return PrintError(kCmd, "--feed is required"), kExitUsage;
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
  Table table({"version", "status", "origin", "trained to", "val error", "Lyapunov time", "parent", "reason"},
              {true, false, false, false, true, true, true, false});
  for (const json& m : *models) {
    const auto per_s = Number(Field(m, "lyapunov_per_s"));
    std::string lyapunov_time = "-";
    if (per_s) lyapunov_time = *per_s > 0 ? Age(1.0 / *per_s) : "none (lambda<=0)";
    const auto parent = Integer(Field(m, "parent"));
    const std::string origin = Text(Field(m, "origin"));
    table.Add({std::to_string(Integer(Field(m, "version")).value_or(0)), Text(Field(m, "status")),
               origin.empty() ? "-" : origin, TimeText(Field(m, "trained_to")), Num(Number(Field(m, "validation_error")), 4), lyapunov_time,
               parent ? std::to_string(*parent) : "-", Text(Field(m, "reason"))});
  }
  // The reason is cut to the terminal's width (or 120 columns into a pipe);
  // --json has it whole.
  const int columns = TerminalColumns();
  table.Print(stdout, columns > 0 ? columns : 120);
  return kExitOk;
}

// The file's bytes, at most kMaxUploadBytes (kInvalidArgument naming the file).
Result<std::string> ReadModelFile(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) return Status::Invalid(fmt::format("cannot read {}: {}", path, std::strerror(errno)));
  std::string bytes;
  char buf[1 << 16];
  while (in.read(buf, sizeof buf) || in.gcount() > 0) {
    bytes.append(buf, static_cast<std::size_t>(in.gcount()));
    if (bytes.size() > kMaxUploadBytes) {
      return Status::Invalid(fmt::format("{} is larger than the {} bytes the daemon accepts in an upload", path,
                                         kMaxUploadBytes));
    }
  }
  if (in.bad()) return Status::Invalid(fmt::format("cannot read {}: read error", path));
  return bytes;
}

// "version 7 activated (validation error 0.0098; active model 0.011 on the same pairs)"
std::string UploadSummary(const json& job) {
  const std::string verdict = Text(Field(job, "verdict"));
  std::string line;
  if (auto v = Integer(Field(job, "version"))) line = fmt::format("version {} ", *v);
  line += verdict.empty() ? "FAILED" : verdict;
  const auto mine = Number(Field(job, "validation_error"));
  const auto active = Number(Field(job, "active_error"));
  if (mine && active) {
    line += fmt::format(" (validation error {}; active model {} on the same pairs)", Num(mine, 4), Num(active, 4));
  } else if (mine) {
    line += fmt::format(" (validation error {})", Num(mine, 4));
  }
  return line;
}

int RunUpload(const UploadArgs& a) {
  constexpr const char* kCmd = "models upload";
  auto path = FeedPath(a.feed);
  if (!path.ok()) return PrintError(kCmd, path.status().message()), kExitUsage;
  auto limit = ParseDuration(a.wait_timeout);
  if (!limit.ok() || *limit < Micros{}) {
    return PrintError(kCmd, "--wait-timeout must be a duration such as 10m (0 = no limit)"), kExitUsage;
  }
  auto bytes = ReadModelFile(a.file);
  if (!bytes.ok()) return PrintError(kCmd, bytes.status().message()), kExitUsage;
  // Damage shows here before anything is sent; whether the model fits the
  // feed (channels, step) the daemon judges, from its own config.
  if (auto contents = Deserialize(*bytes); !contents.ok()) {
    return PrintError(kCmd, fmt::format("{}: {}", a.file, contents.status().message())), kExitUsage;
  }
  auto remote = Remote::Open(a.remote);
  if (!remote.ok()) return PrintError(kCmd, remote.status().message()), kExitUsage;
  const std::size_t size = bytes->size();
  auto queued = (*remote)->PostJson(*path + "/models" + (a.activate ? "?activate=true" : ""),
                                    std::move(bytes).value(), "application/octet-stream");
  if (!queued.ok()) return PrintError(kCmd, queued.status().message()), RemoteExitCode(queued.status());
  const auto job_id = Integer(Field(*queued, "job"));
  if (!job_id) {
    return PrintError(kCmd, fmt::format("the answer from {} names no job id: {}", (*remote)->url(), queued->dump())),
           kExitFailure;
  }
  const char* what = a.activate ? "to activate at once" : "to be judged against the active model";
  if (a.no_wait) {
    if (a.json) {
      std::printf("%s\n", queued->dump(2).c_str());
    } else {
      std::printf("job %lld queued: %s (%zu bytes) for feed %s, %s\n", static_cast<long long>(*job_id),
                  a.file.c_str(), size, a.feed.c_str(), what);
      std::printf("follow it with GET %s/jobs/%lld\n", path->c_str(), static_cast<long long>(*job_id));
    }
    return kExitOk;
  }
  if (!a.json) {
    std::fprintf(stderr, "uploaded %s (%zu bytes) to feed %s %s: job %lld; waiting for it\n", a.file.c_str(), size,
                 a.feed.c_str(), what, static_cast<long long>(*job_id));
  }
  auto job = FollowJob(**remote, *path, *job_id, Text(Field(*queued, "state")), *limit, a.json);
  if (!job.ok()) return PrintError(kCmd, job.status().message()), kExitFailure;
  const std::string verdict = Text(Field(*job, "verdict"));
  if (a.json) {
    std::printf("%s\n", job->dump(2).c_str());
  } else {
    std::printf("%s\n  %s\n", UploadSummary(*job).c_str(), Text(Field(*job, "outcome")).c_str());
    if (verdict == "rejected") {
      std::printf("  not served; the active version is unchanged (to serve it anyway: lyapcast models upload %s "
                  "--feed %s --activate)\n",
                  a.file.c_str(), a.feed.c_str());
    }
  }
  return verdict == "activated" || verdict == "promoted" ? kExitOk : kExitFailure;
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
          "Origin: trained (by the daemon's retraining) or uploaded (with `lyapcast models upload`).\n"
          "Reasons are cut to the terminal width; --json prints the daemon's answer whole.\n"
          "Examples:\n"
          "  lyapcast models --feed loop-a\n"
          "  lyapcast models --feed loop-a --limit 5 --json\n"
          "  lyapcast models upload loop-a.model --feed loop-a     (see lyapcast models upload --help)\n") +
      kRemoteFooter);
  cmd->add_option("--feed", args->feed, "feed id (required)");
  cmd->add_option("--limit", args->limit, "how many versions, newest first (default 20, at most 1000)");
  cmd->add_flag("--json", args->json, "print the daemon's JSON");
  AddRemoteOptions(cmd, &args->remote);

  auto up = std::make_shared<UploadArgs>();
  CLI::App* upload = cmd->add_subcommand(
      "upload", "Load a model file (from lyapcast train) into a running daemon as a new version (admin token)");
  upload->footer(
      std::string(
          "Sends FILE, a model file written by `lyapcast train` for this feed, to the daemon\n"
          "(POST /v1/feeds/{id}/models). The daemon checks it first: a damaged file, another format version,\n"
          "channels (names, order) or a step that are not the feed's are refused with the reason and nothing\n"
          "is stored. Then, as a job, it either\n"
          "  - judges it like one of its own retrain candidates: the uploaded model and the active one are\n"
          "    scored on the same newest held-out data of the feed; the upload is promoted (served) when its\n"
          "    one-step validation error is at most the active model's times 1 + retrain.promote_tolerance,\n"
          "    else stored as rejected while the active model keeps serving; or\n"
          "  - with --activate, serves it at once (still scored, so its validation error is known).\n"
          "Either way it becomes a new version with origin 'uploaded' (see lyapcast models), and retraining\n"
          "continues from it when it is served. The command waits for the job and prints the version, the\n"
          "verdict and the figures; --no-wait prints the job id instead.\n"
          "Exit codes: 0 activated or promoted, 1 rejected (stored, not served), refused by the daemon, failed\n"
          "or not reached, 2 bad arguments or a FILE that is not a readable model file.\n"
          "Examples:\n"
          "  lyapcast train -c config/demo.yaml --feed loop-a --csv loop.csv --out loop-a.model\n"
          "  lyapcast models upload loop-a.model --feed loop-a --token-file /etc/lyapcast/admin.token\n"
          "  lyapcast models upload loop-a.model --feed loop-a --activate --token-file /etc/lyapcast/admin.token\n") +
      kRemoteFooter);
  upload->add_option("FILE", up->file, "model file to upload (lyapcast train --out)")->required();
  upload->add_option("--feed", up->feed, "feed id")->required();
  upload->add_flag("--activate", up->activate, "serve it at once instead of judging it against the active model");
  upload->add_flag("--no-wait", up->no_wait, "print the job id and return without waiting for the outcome");
  upload->add_option("--wait-timeout", up->wait_timeout, "give up waiting after this long, e.g. 10m (default 0 = no "
                                                         "limit)");
  upload->add_flag("--json", up->json, "print the daemon's JSON (the finished job; with --no-wait the queued one)");
  AddRemoteOptions(upload, &up->remote);
  upload->callback([up, exit_code] { *exit_code = RunUpload(*up); });
  // The parent's callback runs after the subcommand's: it lists only when
  // no subcommand was given.
  cmd->callback([args, exit_code, upload] {
    if (upload->parsed()) return;
    *exit_code = RunModels(*args);
  });
}

}  // namespace lyapcast::cli
