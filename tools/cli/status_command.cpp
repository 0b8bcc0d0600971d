// lyapcast status: what the daemon knows about each feed, as a compact block
// an operator can read at a glance (GET /v1/feeds/{id}/status), or the
// daemon's JSON with --json.
#include <fmt/format.h>
#include <CLI/CLI.hpp>

#include <cstdio>

#include "cli_common.h"
#include "commands.h"
#include "remote_common.h"

namespace lyapcast::cli {
namespace {

struct StatusArgs {
  RemoteArgs remote;
  std::string feed;
  bool json = false;
};

// One line per aspect, the verdict and its reasons first.
void PrintBlock(const json& s, const std::string& id) {
  const std::string verdict = Text(Path(s, {"health", "verdict"}));
  const bool paused = Bool(Field(s, "paused")).value_or(false);
  std::printf("%s  %s%s\n", id.c_str(), verdict.empty() ? "?" : verdict.c_str(),
              paused ? "  (PAUSED: no retraining, no drift alarms)" : "");
  if (const json* reasons = Path(s, {"health", "reasons"}); reasons != nullptr && reasons->is_array()) {
    for (const json& r : *reasons)
      std::printf("  ! %s\n", r.is_string() ? r.get<std::string>().c_str() : r.dump().c_str());
  }

  const json* model = Field(s, "model");
  const json* st = Field(s, "staleness");
  const auto since_lt = Number(st ? Field(*st, "since_training_lyapunov_times") : nullptr);
  if (model == nullptr) {
    std::printf("  model     none yet\n");
  } else {
    // An uploaded version says so; trained is the daemon's own.
    const bool uploaded = Text(Field(*model, "origin")) == "uploaded";
    std::string line = fmt::format("v{}{}, trained to {}", Integer(Field(*model, "version")).value_or(0),
                                   uploaded ? " (uploaded)" : "", TimeText(Field(*model, "trained_to")));
    if (auto age = Number(st ? Field(*st, "model_age_s") : nullptr)) line += fmt::format(", {} old", Age(age));
    if (auto e = Number(Field(*model, "validation_error"))) line += fmt::format(", validation error {}", Num(e));
    std::printf("  model     %s\n", line.c_str());
    if (const std::string family = Text(Field(*model, "family")); !family.empty()) {
      const std::string why = Text(Field(*model, "family_reason"));
      std::printf("  family    %s%s\n", family.c_str(), why.empty() ? "" : (": " + why).c_str());
    }
    const auto since = Number(st ? Field(*st, "since_training_s") : nullptr);
    if (since || since_lt) {
      const std::string in_lt = since_lt ? fmt::format(" = {} Lyapunov times", Num(since_lt)) : "";
      std::printf("  since     %s of data since its training chunk%s\n", Age(since).c_str(), in_lt.c_str());
    }
  }

  if (model == nullptr) {
    std::printf("  drift     no model to score the data against\n");
  } else if (const json* d = Field(s, "drift")) {
    const auto ratio = Number(Field(*d, "ratio"));
    std::string line = fmt::format("ratio {}", Num(ratio));
    if (Bool(Field(*d, "warming_up")).value_or(false)) line += " (warming up)";
    const auto rmse = Number(Field(*d, "rmse_window")), val = Number(Field(*d, "validation_error"));
    if (rmse || val) line += fmt::format(": recent error {} vs validation {}", Num(rmse), Num(val));
    if (auto n = Integer(Field(*d, "scored"))) line += fmt::format(", {} scored", *n);
    if (Bool(Field(*d, "flag")).value_or(false)) {
      line += fmt::format("; CHANGE FLAG raised at {}", TimeText(Field(*d, "flagged_at")));
    }
    if (auto alarms = Integer(Field(*d, "alarms")); alarms && *alarms > 0) line += fmt::format(", {} alarms", *alarms);
    std::printf("  drift     %s\n", line.c_str());
  }

  if (const json* w = Field(s, "window")) {
    const auto n = Integer(Field(*w, "samples")).value_or(0);
    if (n == 0) {
      std::printf("  data      no samples yet\n");
    } else {
      std::string line =
          fmt::format("{} samples, {} .. {}", n, TimeText(Field(*w, "oldest")), TimeText(Field(*w, "newest")));
      if (auto age = Number(st ? Field(*st, "data_age_s") : nullptr))
        line += fmt::format("; last arrived {} ago", Age(age));
      std::printf("  data      %s\n", line.c_str());
    }
  }

  if (const json* ly = Field(s, "lyapunov")) {
    std::string line;
    if (const json* chosen = Field(*ly, "chosen")) {
      const auto per_s = Number(Field(*chosen, "per_s"));
      const auto time_s = Number(Field(*chosen, "lyapunov_time_s"));
      line = time_s ? fmt::format("time {} (lambda {}/s, from the {})", Age(time_s), Num(per_s),
                                  Text(Field(*chosen, "source")))
                    : fmt::format("no Lyapunov time (lambda {}/s from the {}: no exponential error growth)", Num(per_s),
                                  Text(Field(*chosen, "source")));
    } else {
      line = "no estimate yet";
    }
    std::string others;
    for (const char* src : {"model", "dynamics", "data"}) {
      if (auto v = Number(Path(*ly, {src, "per_s"})))
        others += fmt::format("{}{} {}/s", others.empty() ? "" : ", ", src, Num(v));
    }
    if (!others.empty()) line += "; estimates: " + others;
    std::printf("  lyapunov  %s\n", line.c_str());
  }

  if (const json* c = Field(s, "cadence")) {
    std::string line;
    if (Bool(Field(*c, "running")).value_or(false)) line = "RUNNING now; ";
    if (Bool(Field(*c, "pending")).value_or(false)) line += "another pending; ";
    const std::string reason = Text(Field(*c, "reason"));
    const json* due = Field(*c, "next_due");
    line += due != nullptr ? "next due " + TimeText(due) : std::string("not scheduled yet");
    if (!reason.empty()) line += ": " + reason;
    std::printf("  retrain   %s\n", line.c_str());
  }

  if (const json* j = Field(s, "last_job")) {
    std::string line = fmt::format("#{} ({})", Integer(Field(*j, "id")).value_or(0), Text(Field(*j, "trigger")));
    const std::string state = Text(Field(*j, "state"));
    const std::string verdict_text = Text(Field(*j, "verdict"));
    if (state != "done")
      line += " " + state;
    else
      line += " " + (verdict_text.empty() ? std::string("FAILED") : verdict_text);
    if (auto v = Integer(Field(*j, "version"))) line += fmt::format(" v{}", *v);
    if (auto secs = Number(Field(*j, "seconds"))) line += fmt::format(" in {}", Age(secs));
    const std::string outcome = Text(Field(*j, "outcome"));
    if (!outcome.empty()) line += ": " + outcome;
    std::printf("  last job  %s\n", line.c_str());
  }

  if (const json* n = Field(s, "jobs")) {
    std::printf("  jobs      %lld promoted, %lld rejected, %lld not enough data, %lld failed\n",
                static_cast<long long>(Integer(Field(*n, "promoted")).value_or(0)),
                static_cast<long long>(Integer(Field(*n, "rejected")).value_or(0)),
                static_cast<long long>(Integer(Field(*n, "not_enough_data")).value_or(0)),
                static_cast<long long>(Integer(Field(*n, "failed")).value_or(0)));
  }
}

int RunStatus(const StatusArgs& a) {
  constexpr const char* kCmd = "status";
  auto remote = Remote::Open(a.remote);
  if (!remote.ok()) return PrintError(kCmd, remote.status().message()), kExitUsage;
  std::vector<std::string> ids;
  if (!a.feed.empty()) {
    ids.push_back(a.feed);
  } else {
    auto listed = ListFeeds(**remote);
    if (!listed.ok()) return PrintError(kCmd, listed.status().message()), RemoteExitCode(listed.status());
    ids = std::move(listed).value();
  }
  json all = json::array();
  for (std::size_t i = 0; i < ids.size(); ++i) {
    auto path = FeedPath(ids[i]);
    if (!path.ok()) return PrintError(kCmd, path.status().message()), kExitUsage;
    auto status = (*remote)->GetJson(*path + "/status");
    if (!status.ok()) return PrintError(kCmd, status.status().message()), RemoteExitCode(status.status());
    if (a.json) {
      all.push_back(std::move(status).value());
      continue;
    }
    if (i > 0) std::printf("\n");
    PrintBlock(*status, ids[i]);
  }
  if (a.json) {
    // One feed: the daemon's object as is; all feeds: {"feeds": [...]}.
    const json out = a.feed.empty() ? json{{"feeds", std::move(all)}} : std::move(all[0]);
    std::printf("%s\n", out.dump(2).c_str());
  }
  return kExitOk;
}

}  // namespace

void AddStatusCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<StatusArgs>();
  CLI::App* cmd = app.add_subcommand("status", "Show what a running daemon knows about each feed");
  cmd->footer(
      std::string("For each feed (or the one given): the health verdict and its reasons first, then the active\n"
                  "model and its age, drift, the data window and its age, the Lyapunov time and where it comes\n"
                  "from, the next retrain and why, and the last job's outcome.\n"
                  "Examples:\n"
                  "  lyapcast status\n"
                  "  lyapcast status --feed loop-a --url http://10.0.0.5:7302 --token-file /etc/lyapcast/read.token\n"
                  "  lyapcast status --feed loop-a --json | jq .drift.ratio\n") +
      kRemoteFooter);
  cmd->add_option("--feed", args->feed, "one feed id (default: every feed the daemon serves)");
  cmd->add_flag("--json", args->json,
                "print the daemon's JSON (one feed: its status object; all feeds: {\"feeds\": [...]})");
  AddRemoteOptions(cmd, &args->remote);
  cmd->callback([args, exit_code] { *exit_code = RunStatus(*args); });
}

}  // namespace lyapcast::cli
