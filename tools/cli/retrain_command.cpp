// lyapcast retrain: queue a retrain of one feed now (POST /v1/feeds/{id}/retrain)
// and, with --wait, follow the job (GET /v1/feeds/{id}/jobs/{job}) to its outcome.
#include <fmt/format.h>
#include <CLI/CLI.hpp>

#include <cstdio>

#include "cli_common.h"
#include "commands.h"
#include "remote_common.h"

namespace lyapcast::cli {
namespace {

struct RetrainArgs {
  RemoteArgs remote;
  std::string feed;
  bool wait = false;
  std::string wait_timeout = "0";
  bool json = false;
};

// "promoted v8 in 3.2s: <outcome>" from a job object.
std::string Outcome(const json& job) {
  const std::string verdict = Text(Field(job, "verdict"));
  std::string line = verdict.empty() ? "FAILED" : verdict;
  if (auto v = Integer(Field(job, "version"))) line += fmt::format(" version {}", *v);
  if (auto secs = Number(Field(job, "seconds"))) line += fmt::format(" after {}", Age(secs));
  if (auto it = Integer(Field(job, "iterations")); it && *it > 0) line += fmt::format(" ({} iterations)", *it);
  const std::string outcome = Text(Field(job, "outcome"));
  if (!outcome.empty()) line += ": " + outcome;
  return line;
}

// Exit code of a finished job: its work was done (promoted, rejected or not
// enough data: each a valid answer) or it failed.
int JobExitCode(const json& job) {
  const std::string v = Text(Field(job, "verdict"));
  return v == "promoted" || v == "rejected" || v == "not_enough_data" ? kExitOk : kExitFailure;
}

int RunRetrain(const RetrainArgs& a) {
  constexpr const char* kCmd = "retrain";
  auto path = FeedPath(a.feed);
  if (!path.ok()) return PrintError(kCmd, path.status().message()), kExitUsage;
  auto limit = ParseDuration(a.wait_timeout);
  if (!limit.ok() || *limit < Micros{}) {
    return PrintError(kCmd, "--wait-timeout must be a duration such as 10m (0 = no limit)"), kExitUsage;
  }
  auto remote = Remote::Open(a.remote);
  if (!remote.ok()) return PrintError(kCmd, remote.status().message()), kExitUsage;
  auto queued = (*remote)->PostJson(*path + "/retrain");
  if (!queued.ok()) return PrintError(kCmd, queued.status().message()), RemoteExitCode(queued.status());
  auto job_id = Integer(Field(*queued, "job"));
  if (!job_id) job_id = Integer(Field(*queued, "id"));
  if (!job_id) {
    return PrintError(kCmd, fmt::format("the answer from {} names no job id: {}", (*remote)->url(), queued->dump())),
           kExitFailure;
  }
  const bool joined = Bool(Field(*queued, "coalesced")).value_or(false);
  if (!a.wait) {
    if (a.json) {
      std::printf("%s\n", queued->dump(2).c_str());
    } else {
      std::printf("job %lld %s for feed %s (%s)\n", static_cast<long long>(*job_id),
                  joined ? "joined (a retrain was already pending)" : "queued", a.feed.c_str(),
                  Text(Field(*queued, "state")).empty() ? "queued" : Text(Field(*queued, "state")).c_str());
      std::printf("follow it with: lyapcast retrain --feed %s --wait, or GET %s/jobs/%lld\n", a.feed.c_str(),
                  path->c_str(), static_cast<long long>(*job_id));
    }
    return kExitOk;
  }

  if (!a.json) {
    std::fprintf(stderr, "job %lld %s for feed %s; waiting for it\n", static_cast<long long>(*job_id),
                 joined ? "joined" : "queued", a.feed.c_str());
  }
  auto job = FollowJob(**remote, *path, *job_id, Text(Field(*queued, "state")), *limit, a.json);
  if (!job.ok()) return PrintError(kCmd, job.status().message()), kExitFailure;
  if (a.json)
    std::printf("%s\n", job->dump(2).c_str());
  else
    std::printf("job %lld done: %s\n", static_cast<long long>(*job_id), Outcome(*job).c_str());
  return JobExitCode(*job);
}

}  // namespace

void AddRetrainCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<RetrainArgs>();
  CLI::App* cmd = app.add_subcommand(
      "retrain", "Queue a retrain of a feed now on a running daemon (with tokens configured: the admin token)");
  cmd->footer(
      std::string(
          "Prints the job id. If a retrain is already pending the request joins it. With --wait it follows\n"
          "the job to its end and prints the outcome: exit 0 when the job finished its work (promoted,\n"
          "rejected because the candidate was worse, or not enough data yet), 1 when it failed or was\n"
          "cancelled. A paused feed refuses (HTTP 409).\n"
          "Examples:\n"
          "  lyapcast retrain --feed loop-a --token-file /etc/lyapcast/admin.token\n"
          "  lyapcast retrain --feed loop-a --wait --wait-timeout 10m --token-file /etc/lyapcast/admin.token\n") +
      kRemoteFooter);
  cmd->add_option("--feed", args->feed, "feed id")->required();
  cmd->add_flag("--wait", args->wait, "wait for the job to finish and print its outcome");
  cmd->add_option("--wait-timeout", args->wait_timeout,
                  "with --wait: give up after this long, e.g. 10m (default 0 = no limit)");
  cmd->add_flag("--json", args->json, "print the daemon's JSON (with --wait: the finished job)");
  AddRemoteOptions(cmd, &args->remote);
  cmd->callback([args, exit_code] { *exit_code = RunRetrain(*args); });
}

}  // namespace lyapcast::cli
