// lyapcast forecast: two forms.
//   forecast --model FILE --from STATE ...  iterate a model file's flow map from a
//       given state (offline; the daemon's forecast without a daemon);
//   forecast --feed ID [--steps N | --horizon D] [--from T] ...  ask a running
//       daemon (GET /v1/feeds/{id}/forecast) for a forecast from its newest
//       complete sample or the sample at data time T, with the predictability
//       horizon; a table, CSV or the daemon's JSON.
#include <CLI/CLI.hpp>
#include <fmt/format.h>

#include <algorithm>
#include <charconv>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <variant>

#include "cli_common.h"
#include "commands.h"
#include "learn/model_file.h"
#include "remote_common.h"
#include "learn/history_fit.h"
#include "runtime/forecast.h"

namespace lyapcast::cli {
namespace {

struct ForecastArgs {
  std::string model, from, start, history;
  int steps = 100;
  // The remote form.
  std::string feed, horizon;
  bool csv = false, json = false;
  RemoteArgs remote;
  // Which options were given (set by the callback from the parsed command).
  bool steps_given = false, start_given = false, horizon_given = false, csv_given = false, json_given = false,
       url_given = false, token_given = false, timeout_given = false;
};

// One CSV line per point: step number, time (seconds after the start, or
// absolute epoch seconds with --start), then the channels.
void PrintOfflineForecast(const lyapcast::Forecast& f, bool absolute) {
  for (std::size_t k = 0; k < f.points.size(); ++k) {
    const ForecastPoint& p = f.points[k];
    const std::int64_t us = EpochMicros(p.t);
    std::string line = absolute ? fmt::format("{},{}.{:06d}", k + 1, us / 1'000'000, us % 1'000'000)
                                : fmt::format("{},{:.6f}", k + 1, ToEpochSeconds(p.t));
    for (const double v : p.values) line += fmt::format(",{:.9g}", v);
    std::puts(line.c_str());
  }
}

// The --history file: one row per model step, oldest first, the newest
// row being the start; comma-separated values in the model's channel order,
// an empty field for a missing value; '#' lines are comments.
Result<Eigen::MatrixXd> ReadHistory(const std::string& path, std::size_t channels) {
  std::ifstream in(path);
  if (!in) return Status::NotFound(path + ": cannot open the history file");
  std::vector<Eigen::VectorXd> rows;
  std::string line;
  for (int number = 1; std::getline(in, line); ++number) {
    if (line.empty() || line[0] == '#') continue;
    Eigen::VectorXd row(static_cast<Eigen::Index>(channels));
    std::size_t field = 0, begin = 0;
    for (;; ++field) {
      const std::size_t end = line.find(',', begin);
      const std::string text = line.substr(begin, end == std::string::npos ? std::string::npos : end - begin);
      if (field >= channels) {
        return Status::Invalid(fmt::format("{} line {}: more than {} values (one per channel)", path, number, channels));
      }
      if (text.empty()) {
        row[static_cast<Eigen::Index>(field)] = std::nan("");
      } else {
        const std::string what = fmt::format("{} line {} value {}", path, number, field + 1);
        auto v = ParseNumberList(text, 1, what.c_str());
        if (!v.ok()) return v.status();
        row[static_cast<Eigen::Index>(field)] = (*v)[0];
      }
      if (end == std::string::npos) break;
      begin = end + 1;
    }
    if (field + 1 != channels) {
      return Status::Invalid(fmt::format("{} line {}: {} values, the model has {} channels", path, number, field + 1,
                                         channels));
    }
    rows.push_back(std::move(row));
  }
  if (rows.size() < 2) return Status::Invalid(path + ": a history needs at least two rows");
  Eigen::MatrixXd out(static_cast<Eigen::Index>(channels), static_cast<Eigen::Index>(rows.size()));
  for (std::size_t k = 0; k < rows.size(); ++k) out.col(static_cast<Eigen::Index>(k)) = rows[k];
  return out;
}

int RunForecast(const ForecastArgs& a) {
  constexpr const char* kCmd = "forecast";
  if (a.from.empty() == a.history.empty()) {
    return PrintError(kCmd, "--model needs --from STATE (the starting state, one number per channel) or --history "
                            "FILE (the recent states, fitted; see --help), one of them"),
           kExitUsage;
  }
  for (const auto& [given, name] :
       {std::pair{a.horizon_given, "--horizon"}, std::pair{a.json_given, "--json"}, std::pair{a.url_given, "--url"},
        std::pair{a.token_given, "--token-file"}, std::pair{a.timeout_given, "--timeout"}}) {
    if (given) {
      PrintError(kCmd, fmt::format("{} belongs to the remote form (--feed ID); --model forecasts offline", name));
      return kExitUsage;
    }
  }
  auto file = LoadModel(a.model);
  if (!file.ok()) return PrintError(kCmd, file.status().message()), kExitUsage;
  if (a.steps < 1) return PrintError(kCmd, "--steps must be at least 1"), kExitUsage;
  DataTime start{};
  const bool absolute = !a.start.empty();
  if (absolute) {
    auto t = ParseRfc3339(a.start);
    if (!t.ok()) return PrintError(kCmd, "--start: " + t.status().message()), kExitUsage;
    start = *t;
  }
  auto model = MakeForecastModel(*file);
  if (!model.ok()) return PrintError(kCmd, a.model + ": " + model.status().message()), kExitUsage;
  Eigen::VectorXd from_state;
  if (!a.history.empty()) {
    auto history = ReadHistory(a.history, file->channels.size());
    if (!history.ok()) return PrintError(kCmd, history.status().message()), kExitUsage;
    auto fit = FitStateToHistory(**model, *history, (*model)->error_scale());
    if (!fit.ok()) return PrintError(kCmd, a.history + ": " + fit.status().message()), kExitUsage;
    std::fprintf(stderr, "start fitted to %lld history rows (%d values): misfit RMS %.3g of the channel std (from "
                 "the oldest row as given: %.3g), %d iterations\n",
                 static_cast<long long>(history->cols()), fit->observations, fit->rms_after, fit->rms_before,
                 fit->iterations);
    from_state = fit->start;
  } else {
    auto from = ParseNumberList(a.from, file->channels.size(), "--from");
    if (!from.ok()) return PrintError(kCmd, from.status().message()), kExitUsage;
    from_state = Eigen::Map<const Eigen::VectorXd>(from->data(), static_cast<Eigen::Index>(from->size()));
  }
  // No exponent and no live error offline: the forecast's horizon stays
  // empty and is not printed.
  ForecastRequest request;
  request.from = start;
  request.start.assign(from_state.data(), from_state.data() + from_state.size());
  request.step = file->step_micros;
  request.steps = a.steps;
  auto forecast = MakeForecast(**model, request);
  if (!forecast.ok()) return PrintError(kCmd, forecast.status().message()), kExitUsage;
  std::string header = absolute ? "step,t" : "step,seconds";
  for (const std::string& c : file->channels) header += "," + c;
  std::puts(header.c_str());
  PrintOfflineForecast(*forecast, absolute);
  return kExitOk;
}

// Prints the JSON forecast for people: header lines, then one row per point,
// with a divider where the predictability horizon is crossed and the points
// past it marked.
void PrintForecastTable(const json& f) {
  std::vector<std::string> channels;
  if (const json* c = Field(f, "channels"); c != nullptr && c->is_array()) {
    for (const json& name : *c) channels.push_back(name.is_string() ? name.get<std::string>() : "?");
  }
  const auto from = TimeOf(Field(f, "from"));
  std::string start;
  if (const json* st = Field(f, "start"); st != nullptr && st->is_array()) {
    for (std::size_t c = 0; c < st->size(); ++c) {
      start +=
          fmt::format("{}{}={}", c ? ", " : "", c < channels.size() ? channels[c] : "?", Num(Number(&(*st)[c]), 6));
    }
  }
  std::printf("feed %s, model version %lld, from %s (%s)\n", Text(Field(f, "feed")).c_str(),
              static_cast<long long>(Integer(Field(f, "model_version")).value_or(0)),
              from ? TimeText(*from).c_str() : "?", start.c_str());

  const json* h = Field(f, "horizon");
  const auto horizon_s = Number(h ? Field(*h, "seconds") : nullptr);
  const json* ly = Field(f, "lyapunov");
  const auto lyap_time = Number(ly ? Field(*ly, "lyapunov_time_s") : nullptr);
  const std::string source = ly ? Text(Field(*ly, "source")) : "";
  const std::string lyap_text =
      lyap_time ? fmt::format("Lyapunov time {} from the {}", Age(lyap_time), source) : "no Lyapunov time";
  const std::string errors =
      h ? fmt::format("one-step error {} vs tolerance {}", Num(Number(Field(*h, "e0"))), Num(Number(Field(*h, "tol"))))
        : "";
  if (horizon_s) {
    std::printf("predictability horizon %s = %s Lyapunov times (%s; %s)\n", Age(horizon_s).c_str(),
                Num(Number(h ? Field(*h, "lyapunov_times") : nullptr)).c_str(), lyap_text.c_str(), errors.c_str());
    if (*horizon_s <= 0)
      std::printf("the current error already exceeds the tolerance: no point is within the horizon\n");
  } else {
    const std::string reason = h ? Text(Field(*h, "reason")) : "";
    std::printf("predictability horizon: none (%s; %s)\n", reason.empty() ? "not given" : reason.c_str(),
                lyap_text.c_str());
  }
  if (const json* st = Field(f, "staleness")) {
    std::printf("data %s old, model %s old, %s of data since training", Age(Number(Field(*st, "data_age_s"))).c_str(),
                Age(Number(Field(*st, "model_age_s"))).c_str(), Age(Number(Field(*st, "since_training_s"))).c_str());
    if (auto lt = Number(Field(*st, "since_training_lyapunov_times")))
      std::printf(" (%s Lyapunov times)", Num(lt).c_str());
    std::printf("\n");
  }
  if (const json* fit = Field(f, "start_fit"); fit != nullptr && fit->is_object()) {
    if (Bool(Field(*fit, "used")).value_or(false)) {
      std::printf("start fitted to %s steps of history (%s values): misfit RMS %s of the channel std (from %s)\n",
                  Num(Number(Field(*fit, "history_steps"))).c_str(), Num(Number(Field(*fit, "measurements"))).c_str(),
                  Num(Number(Field(*fit, "rms_after"))).c_str(), Num(Number(Field(*fit, "rms_before"))).c_str());
    } else {
      std::printf("start not fitted to history: %s\n", Text(Field(*fit, "reason")).c_str());
    }
  }
  const std::string advisory = Text(Field(f, "advisory"));
  std::printf("%s\n\n", advisory.empty() ? "Forecasts are advisory." : advisory.c_str());

  // Rows: time, seconds after `from`, channels, mark. Times with as many
  // decimals as the model step needs, so the column lines up.
  const auto step_s = Number(Field(f, "step_s"));
  int decimals = 6;
  if (step_s) {
    const auto step_us = static_cast<std::int64_t>(std::llround(*step_s * 1e6));
    for (int d = 0; d <= 6; ++d) {
      std::int64_t unit = 1;
      for (int k = d; k < 6; ++k) unit *= 10;
      if (step_us > 0 && step_us % unit == 0) {
        decimals = d;
        break;
      }
    }
  }
  const auto time_text = [decimals](DataTime t) {
    std::string s = FormatRfc3339(t);  // ...SS.ffffffZ
    const auto dot = s.rfind('.');
    return decimals == 0 ? s.substr(0, dot) + "Z" : s.substr(0, dot + 1 + static_cast<std::size_t>(decimals)) + "Z";
  };
  std::vector<std::vector<std::string>> rows;
  std::vector<bool> beyond;
  if (const json* points = Field(f, "points"); points != nullptr && points->is_array()) {
    for (const json& p : *points) {
      const auto t = TimeOf(Field(p, "t"));
      std::vector<std::string> row{
          t ? time_text(*t) : "?",
          t && from ? fmt::format("{:.{}f}", Seconds(*t - *from), decimals) : "?"};
      const json* values = Field(p, "values");
      for (std::size_t c = 0; c < channels.size(); ++c) {
        row.push_back(values != nullptr && values->is_array() && c < values->size() ? Num(Number(&(*values)[c]), 6)
                                                                                    : "-");
      }
      rows.push_back(std::move(row));
      beyond.push_back(Bool(Field(p, "beyond_horizon")).value_or(false));
    }
  }
  std::vector<std::string> header{"time", "+s"};
  header.insert(header.end(), channels.begin(), channels.end());
  std::vector<std::size_t> width(header.size());
  for (std::size_t c = 0; c < header.size(); ++c) width[c] = header[c].size();
  for (const auto& row : rows) {
    for (std::size_t c = 0; c < row.size() && c < width.size(); ++c) width[c] = std::max(width[c], row[c].size());
  }
  const auto line = [&](const std::vector<std::string>& row, const char* mark) {
    std::string out = fmt::format("{:<{}}", row[0], width[0]);
    for (std::size_t c = 1; c < row.size(); ++c) out += fmt::format("  {:>{}}", row[c], width[c]);
    out += mark;
    std::printf("%s\n", out.c_str());
  };
  line(header, "");
  bool marked = false;
  for (std::size_t k = 0; k < rows.size(); ++k) {
    if (beyond[k] && !marked) {
      std::printf("---- predictability horizon (%s): the rows below, marked *, are past it ----\n",
                  Age(horizon_s).c_str());
      marked = true;
    }
    line(rows[k], beyond[k] ? "  *" : "");
  }
}

int RunRemoteForecast(const ForecastArgs& a) {
  constexpr const char* kCmd = "forecast";
  if (a.start_given)
    return PrintError(kCmd, "--start belongs to the offline form (--model); use --from T with --feed"), kExitUsage;
  if (a.csv && a.json) return PrintError(kCmd, "give --csv or --json, not both"), kExitUsage;
  if (a.steps_given && a.horizon_given) {
    return PrintError(kCmd, "give --steps N or --horizon D, not both"), kExitUsage;
  }
  auto path = FeedPath(a.feed);
  if (!path.ok()) return PrintError(kCmd, path.status().message()), kExitUsage;
  std::string query;
  if (a.steps_given) {
    if (a.steps < 1 || a.steps > 100000) return PrintError(kCmd, "--steps must be from 1 to 100000"), kExitUsage;
    query = fmt::format("steps={}", a.steps);
  } else if (a.horizon_given) {
    auto d = ParseDuration(a.horizon);
    if (!d.ok() || *d <= Micros{}) {
      return PrintError(kCmd, fmt::format("--horizon '{}': expected a positive duration such as 30s or 5m", a.horizon)),
             kExitUsage;
    }
    query = "horizon=" + UrlEncode(a.horizon);
  }
  if (!a.from.empty()) query += (query.empty() ? "" : "&") + std::string("from=") + UrlEncode(a.from);
  if (!a.history.empty()) {
    // --feed: a number of steps (the daemon reads the samples itself).
    int history = 0;
    const auto [end, ec] = std::from_chars(a.history.data(), a.history.data() + a.history.size(), history);
    if (ec != std::errc() || end != a.history.data() + a.history.size() || history < 0 || history > 1000) {
      return PrintError(kCmd, fmt::format("--history '{}': with --feed, a number of model steps from 0 to 1000 (the "
                                          "start is fitted to the stored samples of that many steps before it)",
                                          a.history)),
             kExitUsage;
    }
    query += (query.empty() ? "" : "&") + fmt::format("history={}", history);
  }
  if (a.csv) query += (query.empty() ? "" : "&") + std::string("format=csv");
  const std::string target = *path + "/forecast" + (query.empty() ? "" : "?" + query);

  auto remote = Remote::Open(a.remote);
  if (!remote.ok()) return PrintError(kCmd, remote.status().message()), kExitUsage;
  if (a.csv || a.json) {
    auto res = (*remote)->Call("GET", target, a.csv ? "text/csv" : "application/json");
    if (!res.ok()) return PrintError(kCmd, res.status().message()), RemoteExitCode(res.status());
    std::fwrite(res->body.data(), 1, res->body.size(), stdout);
    if (!res->body.empty() && res->body.back() != '\n') std::fputc('\n', stdout);
    return kExitOk;
  }
  auto body = (*remote)->GetJson(target);
  if (!body.ok()) return PrintError(kCmd, body.status().message()), RemoteExitCode(body.status());
  PrintForecastTable(*body);
  return kExitOk;
}

}  // namespace

void AddForecastCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<ForecastArgs>();
  CLI::App* cmd =
      app.add_subcommand("forecast", "Forecast from a running daemon (--feed) or from a model file (--model)");
  cmd->footer(
      std::string(
          "Two forms:\n"
          "  --feed ID     ask a running daemon: a forecast from the feed's newest complete sample (or the sample at\n"
          "                data time --from T), --steps N model steps (default 100) or --horizon D of data time, with\n"
          "                the predictability horizon; rows past it are marked *. --csv and --json print the\n"
          "                daemon's CSV (time,<channels>,beyond_horizon) or JSON. --history N fits the start to\n"
          "                the stored samples of the N model steps before it (noisy sensors; see below).\n"
          "  --model FILE  offline: iterate a model file's flow map from --from STATE (one number per channel)\n"
          "                and print CSV (step, time, channels); time is seconds after the start, or absolute\n"
          "                epoch seconds with --start. (`lyapcast train` writes model files, and so does\n"
          "                GET /v1/feeds/{id}/models/{v}/file.)\n"
          "                Or from --history FILE: the recent states one model step apart (CSV rows of one\n"
          "                value per channel, oldest first, empty for missing; the last row is the start): the\n"
          "                start is the model trajectory that fits them best (least squares over the rows),\n"
          "                so sensor noise in the newest sample is not amplified from the first step.\n"
          "Forecasts are advisory; plant safety systems, local codes and licensed practice govern.\n"
          "Examples:\n"
          "  lyapcast forecast --feed loop-a --horizon 30s\n"
          "  lyapcast forecast --feed loop-a --steps 200 --from 2026-01-01T00:20:00Z --csv > f.csv\n"
          "  lyapcast forecast --feed loop-a --horizon 30s --history 20\n"
          "  lyapcast forecast --model loop-a.model --from 1.2,-0.4,20 --steps 200\n"
          "  lyapcast forecast --model loop-a.model --history last-50-rows.csv --steps 200\n") +
      kRemoteFooter);
  cmd->add_option("--feed", args->feed, "remote form: the feed id on the daemon");
  cmd->add_option("--model,-m", args->model, "offline form: model file (from lyapcast train or the daemon)");
  cmd->add_option("--from", args->from,
                  "--model: starting state, one number per channel in the model's order; --feed: the data time to "
                  "start at (RFC 3339 or epoch seconds; default latest)");
  cmd->add_option("--history", args->history,
                  "--model: CSV of the recent states (one row per model step, oldest first, the last is the start); "
                  "the start is fitted to them instead of --from. --feed: N, the start is fitted to the stored "
                  "samples of the N model steps before it (0 to 1000)");
  CLI::Option* steps = cmd->add_option("--steps", args->steps, "number of model steps (default 100)");
  CLI::Option* horizon = cmd->add_option("--horizon", args->horizon,
                                         "--feed: forecast this much data time, e.g. 30s (instead of --steps)");
  CLI::Option* start = cmd->add_option(
      "--start", args->start, "--model: RFC 3339 data time of the starting state (default: times relative to it)");
  CLI::Option* csv = cmd->add_flag("--csv", args->csv, "--feed: print the daemon's CSV");
  CLI::Option* json_flag = cmd->add_flag("--json", args->json, "--feed: print the daemon's JSON");
  AddRemoteOptions(cmd, &args->remote);
  CLI::Option* url = cmd->get_option("--url");
  CLI::Option* token = cmd->get_option("--token-file");
  CLI::Option* timeout = cmd->get_option("--timeout");
  cmd->callback([=] {
    args->steps_given = steps->count() > 0;
    args->horizon_given = horizon->count() > 0;
    args->start_given = start->count() > 0;
    args->csv_given = csv->count() > 0;
    args->json_given = json_flag->count() > 0;
    args->url_given = url->count() > 0;
    args->token_given = token->count() > 0;
    args->timeout_given = timeout->count() > 0;
    if (args->model.empty() == args->feed.empty()) {
      PrintError("forecast", args->model.empty()
                                 ? "give --feed ID (a forecast from a running daemon) or --model FILE (offline, from a "
                                   "model file); see lyapcast forecast --help"
                                 : "give --feed ID (from a daemon) or --model FILE (offline), not both");
      *exit_code = kExitUsage;
      return;
    }
    *exit_code = args->model.empty() ? RunRemoteForecast(*args) : RunForecast(*args);
  });
}

}  // namespace lyapcast::cli
