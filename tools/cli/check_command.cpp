// lyapcast check: the health of a running daemon in one line and an exit
// code, for cron jobs and monitoring systems.
//
// It fetches each feed's status, re-evaluates the verdict from the status
// figures with monitor/health.h EvaluateHealth -- the same function the
// daemon uses -- under the thresholds the daemon reports (health.thresholds)
// overridden by the command line, and prints exactly one line, worst feed
// first, each feed led by its own verdict:
//   <verdict> <feed>: <reasons or figures>[; <verdict> <feed>: ...] | <perfdata>
// so the first word is the overall verdict. Exit codes follow the
// monitoring-plugin convention other tools read: 0 normal, 1 alert, 2 alarm,
// 3 indeterminate (also for a daemon that cannot be reached or answers
// something else, and for bad arguments: "indeterminate: <why>"). The
// perfdata after '|' is the conventional label=value[unit];alert;alarm.
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
  std::string drift_alert, drift_alarm, data_age_alert, data_age_alarm, model_age_alert, model_age_alarm;
};

struct FeedCheck {
  std::string id;
  Verdict verdict = Verdict::kIndeterminate;
  std::vector<std::string> reasons;
  std::string summary;  // the figures, for a feed with nothing to report
  HealthConfig thresholds;
  ModelAgeThresholds model_age;
  HealthInputs inputs;
  bool have_figures = false;  // perfdata only for feeds whose status was read
};

// One line, no perfdata separator inside the text.
std::string Clean(std::string s) {
  for (char& c : s) {
    if (c == '\n' || c == '\r' || c == '\t') c = ' ';
    if (c == '|') c = '/';
  }
  return s;
}

// The whole answer when nothing can be judged: "indeterminate: <why>", or
// "indeterminate <feed>: <why>" when the one feed asked for cannot be read.
int Indeterminate(const std::string& why, const std::string& feed = "") {
  std::printf("%s%s%s: %s\n", VerdictName(Verdict::kIndeterminate), feed.empty() ? "" : " ", Clean(feed).c_str(),
              Clean(why).c_str());
  return VerdictExitCode(Verdict::kIndeterminate);
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
  if (!d.ok() || *d < Micros{})
    return Status::Invalid(fmt::format("{} '{}': expected a duration such as 30s or 5m", name, text));
  return *d;
}

// The daemon's thresholds for the feed (the model-age levels as in force
// there, configured or derived), then the command line's.
Status ApplyThresholds(const json& status, const CheckArgs& a, HealthConfig* h, ModelAgeThresholds* model_age) {
  if (const json* t = Path(status, {"health", "thresholds"})) {
    if (auto v = Number(Field(*t, "drift_alert"))) h->drift_alert = *v;
    if (auto v = Number(Field(*t, "drift_alarm"))) h->drift_alarm = *v;
    if (auto v = Number(Field(*t, "data_age_alert_s"))) h->data_age_alert = MicrosFromSeconds(*v);
    if (auto v = Number(Field(*t, "data_age_alarm_s"))) h->data_age_alarm = MicrosFromSeconds(*v);
    if (auto v = Number(Field(*t, "model_age_alert_lyapunov"))) model_age->alert = *v;
    if (auto v = Number(Field(*t, "model_age_alarm_lyapunov"))) model_age->alarm = *v;
    model_age->alert_derived = Bool(Field(*t, "model_age_alert_derived")).value_or(false);
    model_age->alarm_derived = Bool(Field(*t, "model_age_alarm_derived")).value_or(false);
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
  const double alert_before = model_age->alert, alarm_before = model_age->alarm;
  for (Status s : {number(a.drift_alert, "--drift-alert", &h->drift_alert),
                   number(a.drift_alarm, "--drift-alarm", &h->drift_alarm),
                   duration(a.data_age_alert, "--data-age-alert", &h->data_age_alert),
                   duration(a.data_age_alarm, "--data-age-alarm", &h->data_age_alarm),
                   number(a.model_age_alert, "--model-age-alert-lyapunov", &model_age->alert),
                   number(a.model_age_alarm, "--model-age-alarm-lyapunov", &model_age->alarm)}) {
    if (!s.ok()) return s;
  }
  if (model_age->alert != alert_before) model_age->alert_derived = false;
  if (model_age->alarm != alarm_before) model_age->alarm_derived = false;
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
  ModelAgeThresholds probe_age;
  if (Status s = ApplyThresholds(json::object(), a, &probe, &probe_age); !s.ok()) {
    return Indeterminate("bad argument: " + s.message());
  }
  std::vector<std::string> ids;
  if (!a.feed.empty()) {
    if (auto p = FeedPath(a.feed); !p.ok()) return Indeterminate("bad argument: " + p.status().message());
  }
  auto remote = Remote::Open(a.remote);
  if (!remote.ok()) return Indeterminate("bad argument: " + remote.status().message());
  Remote& r = **remote;

  // Storage: /v1/feeds says it with the feed list; /v1/heartbeat (always open) otherwise.
  bool storage_available = true;
  if (a.feed.empty()) {
    auto feeds = r.GetJson("/v1/feeds");
    if (!feeds.ok()) return Indeterminate(feeds.status().message());
    storage_available = Bool(Field(*feeds, "storage_available")).value_or(true);
    const json* list = Field(*feeds, "feeds");
    if (list == nullptr || !list->is_array())
      return Indeterminate("GET /v1/feeds from " + r.url() + ": no 'feeds' list (is that lyapcastd?)");
    for (const json& f : *list) {
      const std::string id = Text(Field(f, "id"));
      if (id.empty()) return Indeterminate("GET /v1/feeds from " + r.url() + ": a feed without an id");
      ids.push_back(id);
    }
    if (ids.empty()) return Indeterminate("the daemon at " + r.url() + " serves no feeds");
  } else {
    auto live = r.GetJson("/v1/heartbeat");
    if (!live.ok()) return Indeterminate(live.status().message());
    storage_available = Bool(Field(*live, "storage_available")).value_or(true);
    ids.push_back(a.feed);
  }

  std::vector<FeedCheck> checks;
  for (const std::string& id : ids) {
    FeedCheck c;
    c.id = id;
    auto status = r.GetJson("/v1/feeds/" + id + "/status");
    if (!status.ok()) {
      // One unreachable daemon or a refused token is one indeterminate line, not one per feed.
      const bool no_daemon = status.status().code() == StatusCode::kUnavailable;
      if (no_daemon || r.last_http_status() == 401 || r.last_http_status() == 403 || ids.size() == 1) {
        return Indeterminate(status.status().message(), ids.size() == 1 ? id : "");
      }
      c.reasons.push_back(status.status().message());
      checks.push_back(std::move(c));
      continue;
    }
    if (Status s = ApplyThresholds(*status, a, &c.thresholds, &c.model_age); !s.ok()) {
      return Indeterminate("bad argument: " + s.message());
    }
    if (Status s = ReadInputs(*status, storage_available, &c.inputs); !s.ok()) {
      c.reasons.push_back(s.message());
      checks.push_back(std::move(c));
      continue;
    }
    const HealthResult h = EvaluateHealth(c.thresholds, c.model_age, c.inputs);
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

  Verdict worst = Verdict::kNormal;
  for (const FeedCheck& c : checks) worst = WorseVerdict(worst, c.verdict);
  std::stable_sort(checks.begin(), checks.end(), [](const FeedCheck& x, const FeedCheck& y) {
    return VerdictSeverity(x.verdict) > VerdictSeverity(y.verdict);
  });
  const bool several = checks.size() > 1;
  std::string text, perf;
  for (const FeedCheck& c : checks) {
    std::string what;
    for (const std::string& reason : c.reasons) what += (what.empty() ? "" : ", ") + reason;
    if (what.empty()) what = c.summary.empty() ? "no figures yet" : c.summary;
    text += fmt::format("{}{} {}: {}", text.empty() ? "" : "; ", VerdictName(c.verdict), c.id, what);
    if (!c.have_figures) continue;
    const std::string prefix = several ? c.id + "." : "";
    const HealthConfig& t = c.thresholds;
    perf += fmt::format("{}{}drift_ratio={} {}data_age={} {}model_age_lyapunov={}", perf.empty() ? "" : " ", prefix,
                        Perf(c.inputs.drift_ratio, "", t.drift_alert, t.drift_alarm), prefix,
                        Perf(c.inputs.data_age_s, "s", Seconds(t.data_age_alert),
                             Seconds(t.data_age_alarm)),
                        prefix, Perf(c.inputs.since_training_lyapunov_times, "", c.model_age.alert, c.model_age.alarm));
  }
  std::printf("%s%s%s\n", Clean(text).c_str(), perf.empty() ? "" : " | ", perf.c_str());
  return VerdictExitCode(worst);
}

}  // namespace

void AddCheckCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<CheckArgs>();
  CLI::App* cmd = app.add_subcommand(
      "check", "Health in one line for cron and monitoring systems: exit 0 normal, 1 alert, 2 alarm, 3 indeterminate");
  cmd->footer(
      std::string(
          "Fetches each feed's status (or the one given) and judges it with the daemon's own health rules:\n"
          "  alarm          act now: storage down, or an alarm level reached\n"
          "  alert          needs attention: an alert level reached, or the drift flag raised\n"
          "  indeterminate  cannot judge: no data or no model yet (or the daemon cannot be asked)\n"
          "  normal         every check passes\n"
          "The checks: data age, drift ratio and model age (data time since training, in Lyapunov times)\n"
          "against their alert/alarm levels, each reached when value >= level; a paused feed is judged\n"
          "only on storage and data. Levels are the feed's (config health:, reported in its status; model-age\n"
          "levels not configured are derived from the retrain cadence) unless given here.\n"
          "Prints exactly one line, worst feed first, each feed led by its verdict, so the first word is the\n"
          "overall verdict; perfdata after '|' as label=value;alert;alarm (labels prefixed with the feed id\n"
          "when several feeds are reported; U = not known yet):\n"
          "  alert loop-a: drift ratio 2.4 >= drift_alert 2; normal rig-b: model v7, drift ratio 0.93 | "
          "loop-a.drift_ratio=2.4;2;5 ...\n"
          "Exit codes: 0 normal, 1 alert, 2 alarm, 3 indeterminate. The worst feed decides; indeterminate only\n"
          "beats normal. 3 also when the daemon cannot be reached, refuses the token or answers something\n"
          "else, and for bad arguments (the line says why).\n"
          "Examples:\n"
          "  lyapcast check\n"
          "  lyapcast check --feed loop-a --drift-alert 1.5 --data-age-alarm 2m --token-file /etc/lyapcast/read.token\n"
          "  */5 * * * *  lyapcast check >/dev/null || page-someone   # crontab\n") +
      kRemoteFooter);
  cmd->add_option("--feed", args->feed, "one feed id (default: every feed; the worst verdict wins)");
  cmd->add_option("--drift-alert", args->drift_alert, "alert when the drift ratio reaches this");
  cmd->add_option("--drift-alarm", args->drift_alarm, "alarm when the drift ratio reaches this");
  cmd->add_option("--data-age-alert", args->data_age_alert, "alert when no sample arrived for this long, e.g. 30s");
  cmd->add_option("--data-age-alarm", args->data_age_alarm, "alarm when no sample arrived for this long, e.g. 5m");
  cmd->add_option("--model-age-alert-lyapunov", args->model_age_alert,
                  "alert when the data since the model's training spans this many Lyapunov times");
  cmd->add_option("--model-age-alarm-lyapunov", args->model_age_alarm,
                  "alarm when the data since the model's training spans this many Lyapunov times");
  AddRemoteOptions(cmd, &args->remote);
  cmd->callback([args, exit_code] { *exit_code = RunCheck(*args); });
}

}  // namespace lyapcast::cli
