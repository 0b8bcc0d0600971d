// lyapcast simulate: integrate a feed's known dynamics and write (or send)
// samples as an instrument would: sensor noise, dropped samples, a missing
// channel now and then, and scheduled parameter changes.
#include <CLI/CLI.hpp>
#include <fmt/format.h>

#include <chrono>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <iostream>
#include <random>
#include <thread>

#include "cli_common.h"
#include "commands.h"
#include "core/wall_clock.h"
#include "ingest_client.h"
#include "physics/dynamics.h"
#include "physics/integrators.h"

namespace lyapcast::cli {
namespace {

// A change of a named constant: a step (t1 == t2) or a linear ramp.
struct ParameterChange {
  std::string name;
  double from = 0, to = 0;
  Micros t1 = 0, t2 = 0;  // offsets from the start of the simulation
};

// NAME=VALUE@T (step) or NAME=A..B@T1..T2 (ramp from A at T1 to B at T2).
Result<ParameterChange> ParseChange(const std::string& text) {
  const auto bad = [&](const std::string& why) {
    return Status::Invalid(fmt::format("--change '{}': {}; use NAME=VALUE@T (a step) or NAME=A..B@T1..T2 (a ramp), "
                                       "e.g. ra=35@10m or ra=28..35@5m..15m",
                                       text, why));
  };
  const auto eq = text.find('='), at = text.find('@');
  if (eq == std::string::npos || at == std::string::npos || at < eq) return bad("missing '=' or '@'");
  ParameterChange c;
  c.name = text.substr(0, eq);
  const std::string values = text.substr(eq + 1, at - eq - 1), times = text.substr(at + 1);
  const auto number = [](const std::string& s, double* out) {
    char* end = nullptr;
    *out = std::strtod(s.c_str(), &end);
    return !s.empty() && end == s.c_str() + s.size() && std::isfinite(*out);
  };
  const auto vdots = values.find(".."), tdots = times.find("..");
  if ((vdots == std::string::npos) != (tdots == std::string::npos)) return bad("a ramp needs two values and two times");
  if (vdots == std::string::npos) {
    if (!number(values, &c.from)) return bad("'" + values + "' is not a number");
    c.to = c.from;
    auto t = ParseDuration(times);
    if (!t.ok()) return bad(t.status().message());
    c.t1 = c.t2 = *t;
    return c;
  }
  if (!number(values.substr(0, vdots), &c.from) || !number(values.substr(vdots + 2), &c.to)) {
    return bad("values must be numbers");
  }
  auto t1 = ParseDuration(times.substr(0, tdots)), t2 = ParseDuration(times.substr(tdots + 2));
  if (!t1.ok() || !t2.ok()) return bad("times must be durations such as 90s or 5m");
  if (*t2 <= *t1) return bad("the ramp must end after it starts");
  c.t1 = *t1;
  c.t2 = *t2;
  return c;
}

double ChangeValue(const ParameterChange& c, Micros offset) {
  if (offset >= c.t2) return c.to;
  return c.from + (c.to - c.from) * static_cast<double>(offset - c.t1) / static_cast<double>(c.t2 - c.t1);
}

// Standard normal draws from mt19937_64 via Box-Muller, written out so the
// same seed gives the same noise with any standard library.
class Noise {
 public:
  explicit Noise(std::uint64_t seed) : rng_(seed) {}
  double Uniform() { return static_cast<double>(rng_() >> 11) * 0x1.0p-53; }
  double Normal() {
    const double u1 = 1.0 - Uniform(), u2 = Uniform();
    return std::sqrt(-2.0 * std::log(u1)) * std::cos(2.0 * M_PI * u2);
  }
  std::uint64_t Below(std::uint64_t n) { return rng_() % n; }

 private:
  std::mt19937_64 rng_;
};

struct SimulateArgs {
  std::string config, feed, from, step, duration, start, transient = "0s", out = "-", format = "csv", send, token_file;
  std::string noise;
  std::vector<std::string> changes;
  double gap_rate = 0, missing_rate = 0, speed = 0;
  std::uint64_t seed = 1;
};

std::string FormatLine(const std::string& format, const FeedConfig& feed, DataTime t, const std::vector<double>& x,
                       std::uint64_t missing) {
  std::string line;
  const auto t_text = fmt::format("{}.{:06d}", t / kMicrosPerSecond, t % kMicrosPerSecond);
  if (format == "ndjson") {
    line = fmt::format(R"({{"feed":"{}","t":{},"values":{{)", feed.id, t_text);
    bool first = true;
    for (std::size_t c = 0; c < x.size(); ++c) {
      if ((missing >> c) & 1U) continue;
      line += fmt::format(R"({}"{}":{:.10g})", first ? "" : ",", feed.channels[c], x[c]);
      first = false;
    }
    line += "}}";
  } else {
    line = feed.id + "," + t_text;
    for (std::size_t c = 0; c < x.size(); ++c) {
      line += ',';
      if (!((missing >> c) & 1U)) line += fmt::format("{:.10g}", x[c]);
    }
  }
  return line;
}

int RunSimulate(const SimulateArgs& a) {
  constexpr const char* kCmd = "simulate";
  auto loaded = LoadFeed(a.config, a.feed);
  if (!loaded.ok()) return PrintError(kCmd, loaded.status().message()), kExitUsage;
  const FeedConfig& feed = loaded->feed();
  if (!feed.dynamics) {
    return PrintError(kCmd, fmt::format("feed '{}' has no dynamics section to simulate", feed.id)), kExitUsage;
  }
  auto compiled = Dynamics::Compile(feed);
  if (!compiled.ok()) return PrintError(kCmd, compiled.status().message()), kExitUsage;
  Dynamics& dyn = *compiled;
  const std::size_t dim = feed.channels.size();

  std::vector<double> x0(dim, 1.0);
  if (!a.from.empty()) {
    auto v = ParseNumberList(a.from, dim, "--from");
    if (!v.ok()) return PrintError(kCmd, v.status().message()), kExitUsage;
    x0 = *v;
  }
  Micros step = feed.step;
  if (!a.step.empty()) {
    auto s = ParseDuration(a.step);
    if (!s.ok() || *s <= 0) return PrintError(kCmd, "--step must be a positive duration such as 100ms"), kExitUsage;
    step = *s;
  }
  auto duration = ParseDuration(a.duration);
  if (!duration.ok() || *duration <= 0) {
    return PrintError(kCmd, "--duration must be a positive duration such as 10m"), kExitUsage;
  }
  auto transient = ParseDuration(a.transient);
  if (!transient.ok() || *transient < 0) return PrintError(kCmd, "--transient must be a duration"), kExitUsage;
  // By default the series ends now, so a daemon accepts every sample.
  DataTime start = WallNowMicros() - *duration;
  if (!a.start.empty()) {
    auto t = ParseRfc3339(a.start);
    if (!t.ok()) return PrintError(kCmd, "--start: " + t.status().message()), kExitUsage;
    start = *t;
  }
  std::vector<double> noise_sigma(dim, 0.0);
  if (!a.noise.empty()) {
    auto one = ParseNumberList(a.noise, 1, "--noise");
    auto each = ParseNumberList(a.noise, dim, "--noise");
    if (one.ok()) noise_sigma.assign(dim, (*one)[0]);
    else if (each.ok()) noise_sigma = *each;
    else return PrintError(kCmd, each.status().message() + " (or one number for all channels)"), kExitUsage;
  }
  std::vector<ParameterChange> changes;
  for (const std::string& text : a.changes) {
    auto c = ParseChange(text);
    if (!c.ok()) return PrintError(kCmd, c.status().message()), kExitUsage;
    if (!dyn.constant(c->name)) {
      return PrintError(kCmd, fmt::format("--change: '{}' is not a constant of feed '{}'", c->name, feed.id)), kExitUsage;
    }
    changes.push_back(*c);
  }
  if (a.gap_rate < 0 || a.gap_rate >= 1 || a.missing_rate < 0 || a.missing_rate > 1) {
    return PrintError(kCmd, "--gap-rate must be in [0, 1) and --missing-rate in [0, 1]"), kExitUsage;
  }

  std::ofstream file;
  std::FILE* out = stdout;
  IngestClient client;
  const bool sending = !a.send.empty();
  if (sending) {
    std::string token;
    if (!a.token_file.empty()) {
      std::ifstream t(a.token_file);
      std::getline(t, token);
    }
    if (Status s = client.Connect(a.send, token); !s.ok()) return PrintError(kCmd, s.message()), kExitFailure;
  } else if (a.out != "-") {
    out = std::fopen(a.out.c_str(), "w");
    if (out == nullptr) return PrintError(kCmd, "cannot write " + a.out), kExitFailure;
  }

  const Rhs f = [&dyn](const double* s, double* dx) { dyn.Eval(s, dx); };
  const double unit = static_cast<double>(dyn.time_unit());
  const double model_step = static_cast<double>(step) / unit;
  // RK4 substeps of at most 2e-3 model units (and at least 4 per sample):
  // far below the sensor noise for the dynamics this tool is meant for.
  const double h = model_step / std::max(4.0, std::ceil(model_step / 2e-3));
  Eigen::VectorXd x = Eigen::Map<const Eigen::VectorXd>(x0.data(), static_cast<Eigen::Index>(dim));
  if (*transient > 0) x = IntegrateRk4(f, x, static_cast<double>(*transient) / unit, h);
  Noise rng(a.seed);
  const std::int64_t total = *duration / step;
  ProgressLine progress(std::max<std::int64_t>(total / 10, 1));
  const auto wall_start = std::chrono::steady_clock::now();
  std::vector<double> reading(dim);
  std::int64_t written = 0;
  for (std::int64_t i = 0; i < total; ++i) {
    const Micros offset = i * step;
    for (const ParameterChange& c : changes) {
      if (offset >= c.t1) (void)dyn.SetConstant(c.name, ChangeValue(c, offset));
    }
    if (!x.allFinite()) {
      progress.Finish();
      return PrintError(kCmd, fmt::format("the state left finite values at {} into the run; check the dynamics, "
                                          "--from and --change", FormatDuration(offset))),
             kExitFailure;
    }
    if (rng.Uniform() >= a.gap_rate) {
      for (std::size_t c = 0; c < dim; ++c) reading[c] = x[static_cast<Eigen::Index>(c)] + noise_sigma[c] * rng.Normal();
      std::uint64_t missing = 0;
      if (a.missing_rate > 0 && rng.Uniform() < a.missing_rate && dim > 1) missing = std::uint64_t{1} << rng.Below(dim);
      const std::string line = FormatLine(a.format, feed, start + offset, reading, missing);
      if (sending) {
        if (a.speed > 0) {  // pace data time at `speed` times wall time
          const auto due = wall_start + std::chrono::microseconds(static_cast<std::int64_t>(offset / a.speed));
          std::this_thread::sleep_until(due);
        }
        Status s = client.Send(line);
        if (s.ok() && a.speed > 0) s = client.Flush();
        if (!s.ok()) return progress.Finish(), PrintError(kCmd, s.message()), kExitFailure;
      } else {
        std::fputs(line.c_str(), out);
        std::fputc('\n', out);
      }
      ++written;
    }
    x = IntegrateRk4(f, x, model_step, h);
    progress.Update(i + 1, total, fmt::format("{} samples", written));
  }
  progress.Finish();
  if (sending) {
    if (Status s = client.Finish(); !s.ok()) return PrintError(kCmd, s.message()), kExitFailure;
    std::fprintf(stderr, "sent %lld samples: %lld accepted, %lld rejected\n", static_cast<long long>(client.sent()),
                 static_cast<long long>(client.accepted()), static_cast<long long>(client.rejected()));
    for (const std::string& e : client.first_errors()) std::fprintf(stderr, "  first %s\n", e.c_str());
    return client.rejected() == 0 ? kExitOk : kExitFailure;
  }
  if (out != stdout && std::fclose(out) != 0) return PrintError(kCmd, "cannot finish writing " + a.out), kExitFailure;
  std::fprintf(stderr, "wrote %lld samples of feed %s (%s of data time)\n", static_cast<long long>(written),
               feed.id.c_str(), FormatDuration(*duration).c_str());
  return kExitOk;
}

}  // namespace

void AddSimulateCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<SimulateArgs>();
  CLI::App* cmd = app.add_subcommand("simulate", "Integrate a feed's known dynamics and write samples as an instrument would");
  cmd->footer("Integrate a feed's known dynamics (its config's dynamics section) and write samples as an instrument would:\nCSV or NDJSON lines in the ingest format, to a file, stdout, or a daemon's ingest port.\nExamples:\n  lyapcast simulate --config config/demo.yaml --feed loop-a --duration 30m --noise 0.02 > loop.csv\n  lyapcast simulate -c config/demo.yaml --feed loop-a --duration 1h --change ra=35@20m --gap-rate 0.05 \\\n      --send 127.0.0.1:7301 --speed 20");
  cmd->add_option("--config,-c", args->config, "config file defining the feed")->required();
  cmd->add_option("--feed", args->feed, "feed id (may be left out when the config has one feed)");
  cmd->add_option("--from", args->from, "initial state, one number per channel (default all 1)");
  cmd->add_option("--transient", args->transient, "integrate this long before the first sample (default 0s)");
  cmd->add_option("--step", args->step, "time between samples (default: the feed's step)");
  cmd->add_option("--duration", args->duration, "data time to simulate, e.g. 30m")->required();
  cmd->add_option("--start", args->start, "RFC 3339 time of the first sample (default: so that the last is now)");
  cmd->add_option("--noise", args->noise, "sensor noise std in channel units: one number, or one per channel");
  cmd->add_option("--gap-rate", args->gap_rate, "probability that a sample is dropped (default 0)");
  cmd->add_option("--missing-rate", args->missing_rate, "probability that one random channel is missing (default 0)");
  cmd->add_option("--change", args->changes,
                  "parameter change, repeatable: NAME=VALUE@T (step) or NAME=A..B@T1..T2 (ramp); T from the start");
  cmd->add_option("--seed", args->seed, "seed of noise, gaps and missing channels (default 1)");
  cmd->add_option("--format", args->format, "csv or ndjson (default csv)")->check(CLI::IsMember({"csv", "ndjson"}));
  cmd->add_option("--out,-o", args->out, "output file (default stdout)");
  cmd->add_option("--send", args->send, "stream to a daemon's ingest port, host:port, instead of writing");
  cmd->add_option("--token-file", args->token_file, "ingest token file for --send");
  cmd->add_option("--speed", args->speed, "with --send: data time runs this many times faster than wall time "
                                          "(default 0 = as fast as the daemon accepts)");
  cmd->callback([args, exit_code] { *exit_code = RunSimulate(*args); });
}

}  // namespace lyapcast::cli
