// lyapcast check: a monitoring-plugin style health check of a running daemon
// for cron jobs and monitoring systems (Nagios, Icinga, Sensu, ...).
//
// It fetches each feed's status, re-evaluates the verdict from the status
// figures with monitor/health.h EvaluateHealth -- the same function the
// daemon uses -- under the thresholds the daemon reports (health.thresholds)
// overridden by the command line, and prints exactly one line:
//   LYAPCAST <VERDICT> - <feed>: <reasons> | <perfdata>
// exiting 0 OK, 1 WARNING, 2 CRITICAL, 3 UNKNOWN (also for a daemon that
// cannot be reached or answers something else, and for bad arguments).
#include <fmt/format.h>
#include <CLI/CLI.hpp>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <optional>

#include "cli_common.h"
#include "commands.h"
#include "monitor/health.h"
#include "remote_common.h"

namespace lyapcast::cli {
namespace {

struct CheckArgs {
  RemoteArgs remote;
  std::string feed;
  std::string drift_warn, drift_crit, data_age_warn, data_age_crit, model_age_warn, model_age_crit;
};

struct FeedCheck {
  std::string id;
  Verdict verdict = Verdict::kUnknown;
  std::vector<std::string> reasons;
  std::string summary;  // the figures, for a feed with nothing to report
  HealthConfig thresholds;
  HealthInputs inputs;
  bool have_figures = false;  // perfdata only for feeds whose status was read
};

int Severity(Verdict v) {
  switch (v) {
    case Verdict::kOk:
      return 0;
    case Verdict::kUnknown:
      return 1;
    case Verdict::kWarning:
      return 2;
    case Verdict::kCritical:
      return 3;
  }
  return 1;
}

// One line, no perfdata separator inside the text.
std::string Clean(std::string s) {
  for (char& c : s) {
    if (c == '\n' || c == '\r' || c == '\t') c = ' ';
    if (c == '|') c = '/';
  }
  return s;
}

int Unknown(const std::string& why) {
  std::printf("LYAPCAST UNKNOWN - %s\n", Clean(why).c_str());
  return VerdictExitCode(Verdict::kUnknown);
}

Result<double> NumberArg(const std::string& text, const char* name) {
  char* end = nullptr;
  const double v = std::strtod(text.c_str(), &end);
  if (text.empty() || end != text.c_str() + text.size() || !std::isfinite(v) || v < 0) {
    return Status::Invalid(fmt::format("{} '{}': expected a number >= 0", name, text));
  }
  return v;
}

Result<Micros> DurationArg(const std::string& text, const char* name) {
  auto d = ParseDuration(text);
  if (!d.ok() || *d < 0)
    return Status::Invalid(fmt::format("{} '{}': expected a duration such as 30s or 5m", name, text));
  return *d;
}

// The daemon's thresholds for the feed, then the command line's.
Status ApplyThresholds(const json& status, const CheckArgs& a, HealthConfig* h) {
  if (const json* t = Path(status, {"health", "thresholds"})) {
    if (auto v = Number(Field(*t, "drift_warn"))) h->drift_warn = *v;
    if (auto v = Number(Field(*t, "drift_crit"))) h->drift_crit = *v;
    if (auto v = Number(Field(*t, "data_age_warn_s"))) h->data_age_warn = std::llround(*v * 1e6);
    if (auto v = Number(Field(*t, "data_age_crit_s"))) h->data_age_crit = std::llround(*v * 1e6);
    if (auto v = Number(Field(*t, "model_age_warn_lyapunov"))) h->model_age_warn_lyapunov = *v;
    if (auto v = Number(Field(*t, "model_age_crit_lyapunov"))) h->model_age_crit_lyapunov = *v;
  }
  const auto number = [](const std::string& text, const char* name, double* out) -> Status {
    if (text.empty()) return Status::Ok();
    auto v = NumberArg(text, name);
    if (!v.ok()) return v.status();
    *out = *v;
    return Status::Ok();
  };
  const auto duration = [](const std::string& text, const char* name, Micros* out) -> Status {
    if (text.empty()) return Status::Ok();
    auto v = DurationArg(text, name);
    if (!v.ok()) return v.status();
    *out = *v;
    return Status::Ok();
  };
  for (Status s :
       {number(a.drift_warn, "--drift-warn", &h->drift_warn), number(a.drift_crit, "--drift-crit", &h->drift_crit),
        duration(a.data_age_warn, "--data-age-warn", &h->data_age_warn),
        duration(a.data_age_crit, "--data-age-crit", &h->data_age_crit),
        number(a.model_age_warn, "--model-age-warn-lyapunov", &h->model_age_warn_lyapunov),
        number(a.model_age_crit, "--model-age-crit-lyapunov", &h->model_age_crit_lyapunov)}) {
    if (!s.ok()) return s;
  }
  return Status::Ok();
}

// Reads the health inputs from a status answer; kCorruption when it is not
// a lyapcast status.
Status ReadInputs(const json& s, bool storage_available, HealthInputs* in) {
  const json* window = Field(s, "window");
  const json* staleness = Field(s, "staleness");
  if (window == nullptr || !window->is_object() || staleness == nullptr || !staleness->is_object() ||
      !s.contains("model")) {
    return Status::Corruption("the status answer lacks window, model or staleness (is that lyapcastd?)");
  }
  in->has_data = Integer(Field(*window, "samples")).value_or(0) > 0;
  in->has_model = Field(s, "model") != nullptr;
  in->paused = Bool(Field(s, "paused")).value_or(false);
  in->storage_available = storage_available;
  in->data_age_s = Number(Field(*staleness, "data_age_s"));
  in->since_training_lyapunov_times = Number(Field(*staleness, "since_training_lyapunov_times"));
  if (const json* d = Field(s, "drift")) {
    in->drift_ratio = Number(Field(*d, "ratio"));
    in->drift_flag = Bool(Field(*d, "flag")).value_or(false);
  }
  return Status::Ok();
}

// Plain decimals (no exponent, which some perfdata parsers refuse), at most 6 places.
std::string PerfNumber(double v) {
  std::string s = fmt::format("{:.6f}", v);
  while (s.back() == '0') s.pop_back();
  if (s.back() == '.') s.pop_back();
  return s == "-0" ? "0" : s;
}

std::string Perf(std::optional<double> v, const char* unit, double warn, double crit) {
  return fmt::format("{}{};{};{}", v ? PerfNumber(*v) : "U", v ? unit : "", PerfNumber(warn), PerfNumber(crit));
}

int RunCheck(const CheckArgs& a) {
  // Bad arguments are found before any request (thresholds are checked again per feed).
  HealthConfig probe;
  if (Status s = ApplyThresholds(json::object(), a, &probe); !s.ok()) {
    return Unknown("bad argument: " + s.message());
  }
  std::vector<std::string> ids;
  if (!a.feed.empty()) {
    if (auto p = FeedPath(a.feed); !p.ok()) return Unknown("bad argument: " + p.status().message());
  }
  auto remote = Remote::Open(a.remote);
  if (!remote.ok()) return Unknown("bad argument: " + remote.status().message());
  Remote& r = **remote;

  // Storage: /v1/feeds says it with the feed list; /v1/health/live (always open) otherwise.
  bool storage_available = true;
  if (a.feed.empty()) {
    auto feeds = r.GetJson("/v1/feeds");
    if (!feeds.ok()) return Unknown(feeds.status().message());
    storage_available = Bool(Field(*feeds, "storage_available")).value_or(true);
    const json* list = Field(*feeds, "feeds");
    if (list == nullptr || !list->is_array())
      return Unknown("GET /v1/feeds from " + r.url() + ": no 'feeds' list (is that lyapcastd?)");
    for (const json& f : *list) {
      const std::string id = Text(Field(f, "id"));
      if (id.empty()) return Unknown("GET /v1/feeds from " + r.url() + ": a feed without an id");
      ids.push_back(id);
    }
    if (ids.empty()) return Unknown("the daemon at " + r.url() + " serves no feeds");
  } else {
    auto live = r.GetJson("/v1/health/live");
    if (!live.ok()) return Unknown(live.status().message());
    storage_available = Bool(Field(*live, "storage_available")).value_or(true);
    ids.push_back(a.feed);
  }

  std::vector<FeedCheck> checks;
  for (const std::string& id : ids) {
    FeedCheck c;
    c.id = id;
    auto status = r.GetJson("/v1/feeds/" + id + "/status");
    if (!status.ok()) {
      // One unreachable daemon or a refused token is one UNKNOWN, not one per feed.
      const bool no_daemon = status.status().code() == StatusCode::kUnavailable;
      if (no_daemon || r.last_http_status() == 401 || r.last_http_status() == 403 || ids.size() == 1) {
        return Unknown((ids.size() == 1 ? id + ": " : "") + status.status().message());
      }
      c.reasons.push_back(status.status().message());
      checks.push_back(std::move(c));
      continue;
    }
    if (Status s = ApplyThresholds(*status, a, &c.thresholds); !s.ok()) return Unknown("bad argument: " + s.message());
    if (Status s = ReadInputs(*status, storage_available, &c.inputs); !s.ok()) {
      c.reasons.push_back(s.message());
      checks.push_back(std::move(c));
      continue;
    }
    const HealthResult h = EvaluateHealth(c.thresholds, c.inputs);
    c.verdict = h.verdict;
    c.reasons = h.reasons;
    c.have_figures = true;
    std::string summary;
    if (const json* m = Field(*status, "model"))
      summary = fmt::format("model v{}", Integer(Field(*m, "version")).value_or(0));
    if (c.inputs.drift_ratio) summary += fmt::format(", drift ratio {}", Num(c.inputs.drift_ratio));
    if (c.inputs.data_age_s) summary += fmt::format(", data age {}", Age(c.inputs.data_age_s));
    if (c.inputs.since_training_lyapunov_times) {
      summary += fmt::format(", {} Lyapunov times since training", Num(c.inputs.since_training_lyapunov_times));
    }
    c.summary = summary;
    checks.push_back(std::move(c));
  }

  Verdict worst = Verdict::kOk;
  for (const FeedCheck& c : checks) worst = WorseVerdict(worst, c.verdict);
  std::stable_sort(checks.begin(), checks.end(),
                   [](const FeedCheck& x, const FeedCheck& y) { return Severity(x.verdict) > Severity(y.verdict); });
  const bool several = checks.size() > 1;
  std::string text, perf;
  for (const FeedCheck& c : checks) {
    std::string what;
    for (const std::string& reason : c.reasons) what += (what.empty() ? "" : ", ") + reason;
    if (what.empty()) what = c.summary.empty() ? "ok" : c.summary;
    text += fmt::format("{}{}{}: {}", text.empty() ? "" : "; ", c.id,
                        several ? std::string(" ") + VerdictName(c.verdict) : "", what);
    if (!c.have_figures) continue;
    const std::string prefix = several ? c.id + "." : "";
    const HealthConfig& t = c.thresholds;
    perf += fmt::format(
        "{}{}drift_ratio={} {}data_age={} {}model_age_lyapunov={}", perf.empty() ? "" : " ", prefix,
        Perf(c.inputs.drift_ratio, "", t.drift_warn, t.drift_crit), prefix,
        Perf(c.inputs.data_age_s, "s", static_cast<double>(t.data_age_warn) / 1e6,
             static_cast<double>(t.data_age_crit) / 1e6),
        prefix, Perf(c.inputs.since_training_lyapunov_times, "", t.model_age_warn_lyapunov, t.model_age_crit_lyapunov));
  }
  std::printf("LYAPCAST %s - %s%s%s\n", VerdictName(worst), Clean(text).c_str(), perf.empty() ? "" : " | ",
              perf.c_str());
  return VerdictExitCode(worst);
}

}  // namespace

void AddCheckCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<CheckArgs>();
  CLI::App* cmd = app.add_subcommand("check", "Health check for cron and monitoring systems: one line, exit 0/1/2/3");
  cmd->footer(
      std::string(
          "Fetches each feed's status (or the one given) and judges it with the daemon's own health rules:\n"
          "storage down -> CRITICAL; no data or no model yet -> UNKNOWN; data age, drift ratio and model age\n"
          "(data time since training, in Lyapunov times) against their warn/crit thresholds, each reached when\n"
          "value >= threshold; a raised drift flag -> WARNING; a paused feed is judged only on storage and data.\n"
          "Thresholds are the feed's (config health:, reported in its status) unless given here.\n"
          "Prints exactly one line, worst feed first, with perfdata after '|' (labels prefixed with the feed\n"
          "id when several feeds are reported; U = not known yet):\n"
          "  LYAPCAST WARNING - loop-a: drift ratio 2.4 >= drift_warn 2 | drift_ratio=2.4;2;5 data_age=0.4s;30;300 "
          "...\n"
          "Exit codes: 0 OK, 1 WARNING, 2 CRITICAL, 3 UNKNOWN. The worst feed decides; UNKNOWN only beats OK.\n"
          "3 also when the daemon cannot be reached, refuses the token or answers something else, and for bad\n"
          "arguments (the line says why).\n"
          "Examples:\n"
          "  lyapcast check\n"
          "  lyapcast check --feed loop-a --drift-warn 1.5 --data-age-crit 2m --token-file /etc/lyapcast/read.token\n"
          "  */5 * * * *  lyapcast check >/dev/null || page-someone   # crontab\n") +
      kRemoteFooter);
  cmd->add_option("--feed", args->feed, "one feed id (default: every feed; the worst verdict wins)");
  cmd->add_option("--drift-warn", args->drift_warn, "WARNING when the drift ratio reaches this");
  cmd->add_option("--drift-crit", args->drift_crit, "CRITICAL when the drift ratio reaches this");
  cmd->add_option("--data-age-warn", args->data_age_warn, "WARNING when no sample arrived for this long, e.g. 30s");
  cmd->add_option("--data-age-crit", args->data_age_crit, "CRITICAL when no sample arrived for this long, e.g. 5m");
  cmd->add_option("--model-age-warn-lyapunov", args->model_age_warn,
                  "WARNING when the data since the model's training spans this many Lyapunov times");
  cmd->add_option("--model-age-crit-lyapunov", args->model_age_crit,
                  "CRITICAL when the data since the model's training spans this many Lyapunov times");
  AddRemoteOptions(cmd, &args->remote);
  cmd->callback([args, exit_code] { *exit_code = RunCheck(*args); });
}

}  // namespace lyapcast::cli
