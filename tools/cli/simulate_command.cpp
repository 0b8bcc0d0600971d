// lyapcast simulate: integrate feeds' known dynamics and write (or send)
// samples as instruments would: sensor noise, dropped samples, a missing
// channel now and then, and scheduled parameter changes. One feed from the
// flags, or every feed of a scenario file (config/scenario.h) merged in data
// time order. The simulation itself is FeedSimulator's.
#include <CLI/CLI.hpp>
#include <fmt/format.h>

#include <chrono>
#include <cstdio>
#include <fstream>
#include <memory>
#include <thread>

#include "cli_common.h"
#include "commands.h"
#include "config/scenario.h"
#include "core/wall_clock.h"
#include "feed_simulator.h"
#include "ingest_client.h"

namespace lyapcast::cli {
namespace {

constexpr const char* kCmd = "simulate";

struct SimulateArgs {
  std::string config, feed, from, step, duration, start, transient = "0s", out = "-", format = "csv", send, token_file;
  std::string noise, scenario;
  std::vector<std::string> changes;
  double gap_rate = 0, missing_rate = 0, jitter = 0, speed = 0;
  std::uint64_t seed = 1;
  std::vector<std::string> single_feed_flags;  // those given, e.g. {"--feed", "--seed"}
};

// Where the lines go: a file or stdout, or a daemon's ingest port (paced
// against wall time with --speed).
class Sink {
 public:
  Sink() = default;
  Sink(const Sink&) = delete;
  Sink& operator=(const Sink&) = delete;
  ~Sink() {
    if (out_ != nullptr && out_ != stdout) std::fclose(out_);
  }

  // Connects or opens the output; the error is a failure (exit 1), not a usage error.
  [[nodiscard]] Status Open(const SimulateArgs& a) {
    out_path_ = a.out;
    speed_ = a.speed;
    sending_ = !a.send.empty();
    if (sending_) {
      std::string token;
      if (!a.token_file.empty()) {
        std::ifstream t(a.token_file);
        std::getline(t, token);
      }
      return client_.Connect(a.send, token);
    }
    if (a.out != "-") {
      out_ = std::fopen(a.out.c_str(), "w");
      if (out_ == nullptr) return Status::Io("cannot write " + a.out);
    }
    return Status::Ok();
  }

  // Data time offset 0 is due now (with --speed).
  void StartClock() { wall_start_ = std::chrono::steady_clock::now(); }

  // Writes or sends one line whose sample lies `offset` after the start.
  [[nodiscard]] Status Write(const std::string& line, Micros offset) {
    if (!sending_) {
      std::fputs(line.c_str(), out_);
      std::fputc('\n', out_);
      return Status::Ok();
    }
    if (speed_ > 0) {  // pace data time at `speed` times wall time
      const auto due = wall_start_ + std::chrono::duration_cast<Micros>(offset / speed_);
      std::this_thread::sleep_until(due);
    }
    Status s = client_.Send(line);
    if (s.ok() && speed_ > 0) s = client_.Flush();
    return s;
  }

  // Sends what is queued and reads every reply, or closes the file.
  [[nodiscard]] Status Finish() {
    if (sending_) return client_.Finish();
    if (out_ != stdout) {
      const int rc = std::fclose(out_);
      out_ = stdout;
      if (rc != 0) return Status::Io("cannot finish writing " + out_path_);
    }
    return Status::Ok();
  }

  bool sending() const { return sending_; }
  const IngestClient& client() const { return client_; }

 private:
  bool sending_ = false;
  double speed_ = 0;
  std::string out_path_;
  std::FILE* out_ = stdout;
  IngestClient client_;
  std::chrono::steady_clock::time_point wall_start_;
};

SampleFormat FormatOf(const SimulateArgs& a) { return a.format == "ndjson" ? SampleFormat::kNdjson : SampleFormat::kCsv; }

// Parses --duration; 0 after printing an error.
Micros DurationArg(const std::string& text) {
  auto duration = ParseDuration(text);
  if (!duration.ok() || *duration <= Micros{}) {
    PrintError(kCmd, "--duration must be a positive duration such as 10m");
    return Micros{};
  }
  return *duration;
}

// --start, or by default so that the series ends now (a daemon then accepts every sample).
Result<DataTime> StartArg(const SimulateArgs& a, Micros duration) {
  if (a.start.empty()) return DataTimeAtWall(WallNow()) - duration;  // data that ends now
  auto t = ParseRfc3339(a.start);
  if (!t.ok()) return Status::Invalid("--start: " + t.status().message());
  return *t;
}

// --- one feed from the flags ---------------------------------------------------

int RunSingleFeed(const SimulateArgs& a) {
  auto loaded = LoadFeed(a.config, a.feed);
  if (!loaded.ok()) return PrintError(kCmd, loaded.status().message()), kExitUsage;
  const FeedConfig& feed = loaded->feed();
  if (!feed.dynamics) {
    return PrintError(kCmd, fmt::format("feed '{}' has no dynamics section to simulate", feed.id)), kExitUsage;
  }
  auto spec = ToDynamicsSpec(feed);
  if (!spec.ok()) return PrintError(kCmd, spec.status().message()), kExitUsage;
  auto compiled = Dynamics::Compile(*spec);
  if (!compiled.ok()) return PrintError(kCmd, compiled.status().message()), kExitUsage;
  const std::size_t dim = feed.channels.size();

  FeedSimulatorOptions o;
  o.format = FormatOf(a);
  o.seed = a.seed;
  o.gap_rate = a.gap_rate;
  o.missing_rate = a.missing_rate;
  o.jitter = a.jitter;
  if (!a.from.empty()) {
    auto v = ParseNumberList(a.from, dim, "--from");
    if (!v.ok()) return PrintError(kCmd, v.status().message()), kExitUsage;
    o.from = *v;
  }
  if (!a.step.empty()) {
    auto s = ParseDuration(a.step);
    if (!s.ok() || *s <= Micros{}) return PrintError(kCmd, "--step must be a positive duration such as 100ms"), kExitUsage;
    o.step = *s;
  }
  o.duration = DurationArg(a.duration);
  if (o.duration == Micros{}) return kExitUsage;
  auto transient = ParseDuration(a.transient);
  if (!transient.ok() || *transient < Micros{}) return PrintError(kCmd, "--transient must be a duration"), kExitUsage;
  o.transient = *transient;
  auto start = StartArg(a, o.duration);
  if (!start.ok()) return PrintError(kCmd, start.status().message()), kExitUsage;
  o.start = *start;
  if (!a.noise.empty()) {
    auto one = ParseNumberList(a.noise, 1, "--noise");
    auto each = ParseNumberList(a.noise, dim, "--noise");
    if (one.ok()) o.noise.assign(dim, (*one)[0]);
    else if (each.ok()) o.noise = *each;
    else return PrintError(kCmd, each.status().message() + " (or one number for all channels)"), kExitUsage;
  }
  for (const std::string& text : a.changes) {
    auto c = ParseParameterChange(text);
    if (!c.ok()) return PrintError(kCmd, "--change " + c.status().message()), kExitUsage;
    if (!compiled->constant(c->name)) {
      return PrintError(kCmd, fmt::format("--change: '{}' is not a constant of feed '{}'", c->name, feed.id)), kExitUsage;
    }
    o.changes.push_back(*c);
  }
  if (a.gap_rate < 0 || a.gap_rate >= 1 || a.missing_rate < 0 || a.missing_rate > 1) {
    return PrintError(kCmd, "--gap-rate must be in [0, 1) and --missing-rate in [0, 1]"), kExitUsage;
  }
  if (!(a.jitter >= 0 && a.jitter <= 0.4)) {
    return PrintError(kCmd, fmt::format("--jitter must be in [0, 0.4] (a fraction of the step); got {}", a.jitter)),
           kExitUsage;
  }

  Sink sink;
  if (Status s = sink.Open(a); !s.ok()) return PrintError(kCmd, s.message()), kExitFailure;
  const Micros duration = o.duration;
  auto created = FeedSimulator::Create(feed, std::move(compiled).value(), std::move(o));
  if (!created.ok()) return PrintError(kCmd, created.status().message()), kExitUsage;
  FeedSimulator& sim = *created;

  const std::int64_t total = sim.steps_total();
  ProgressLine progress(std::max<std::int64_t>(total / 10, 1));
  sink.StartClock();
  while (!sim.done()) {
    auto step = sim.Next();
    if (!step.ok()) {
      progress.Finish();
      return PrintError(kCmd, step.status().message() + "; check the dynamics, --from and --change"), kExitFailure;
    }
    if (step->kept) {
      if (Status s = sink.Write(step->line, step->offset); !s.ok()) {
        return progress.Finish(), PrintError(kCmd, s.message()), kExitFailure;
      }
    }
    progress.Update(sim.steps_taken(), total, fmt::format("{} samples", sim.samples_kept()));
  }
  progress.Finish();
  if (sink.sending()) {
    if (Status s = sink.Finish(); !s.ok()) return PrintError(kCmd, s.message()), kExitFailure;
    const IngestClient& client = sink.client();
    std::fprintf(stderr, "sent %lld samples: %lld accepted, %lld rejected\n", static_cast<long long>(client.sent()),
                 static_cast<long long>(client.accepted()), static_cast<long long>(client.rejected()));
    for (const std::string& e : client.first_errors()) std::fprintf(stderr, "  first %s\n", e.c_str());
    return client.rejected() == 0 ? kExitOk : kExitFailure;
  }
  if (Status s = sink.Finish(); !s.ok()) return PrintError(kCmd, s.message()), kExitFailure;
  std::fprintf(stderr, "wrote %lld samples of feed %s (%s of data time)\n", static_cast<long long>(sim.samples_kept()),
               feed.id.c_str(), FormatDuration(duration).c_str());
  return kExitOk;
}

// --- every feed of a scenario file ---------------------------------------------

// The options of scenario feed `i` for `feed`; checks what needs the config
// (channel counts, constant names). Errors name the scenario file, line and key.
Result<FeedSimulatorOptions> ScenarioOptions(const Scenario& scenario, std::size_t i, const FeedConfig& feed,
                                             const Dynamics& dyn) {
  const ScenarioFeed& sf = scenario.feeds[i];
  const std::size_t dim = feed.channels.size();
  const auto channels = [&] {
    std::string out;
    for (const std::string& c : feed.channels) out += (out.empty() ? "" : ", ") + c;
    return out;
  };
  FeedSimulatorOptions o;
  o.seed = sf.seed;
  o.transient = sf.transient;
  o.step = sf.step.value_or(Micros{});
  o.gap_rate = sf.gap_rate;
  o.missing_rate = sf.missing_rate;
  o.jitter = sf.jitter;
  if (!sf.from.empty() && sf.from.size() != dim) {
    return Status::Invalid(fmt::format("{}: feed '{}' has {} channels ({}); give one number per channel, got {}",
                                       scenario.Where(i, "from", sf.lines.from), feed.id, dim, channels(),
                                       sf.from.size()));
  }
  o.from = sf.from;
  if (sf.noise.size() == 1) {
    o.noise.assign(dim, sf.noise[0]);
  } else if (!sf.noise.empty()) {
    if (sf.noise.size() != dim) {
      return Status::Invalid(fmt::format(
          "{}: feed '{}' has {} channels ({}); give one number for every channel or one per channel, got {}",
          scenario.Where(i, "noise", sf.lines.noise), feed.id, dim, channels(), sf.noise.size()));
    }
    o.noise = sf.noise;
  }
  for (std::size_t k = 0; k < sf.changes.size(); ++k) {
    const ParameterChange& c = sf.changes[k];
    if (!dyn.constant(c.name)) {
      std::string constants;
      for (const auto& [name, value] : feed.dynamics->constants) constants += (constants.empty() ? "" : ", ") + name;
      return Status::Invalid(fmt::format("{}: '{}' is not a constant of feed '{}'; its constants are {}",
                                         scenario.Where(i, fmt::format("changes[{}]", k), sf.lines.changes[k]),
                                         c.name, feed.id, constants.empty() ? std::string("(none)") : constants));
    }
  }
  o.changes = sf.changes;
  return o;
}

std::string FeedCounts(const std::vector<FeedSimulator>& sims) {
  std::string out;
  for (const FeedSimulator& s : sims) {
    out += fmt::format("{}{}: {} samples", out.empty() ? "" : ", ", s.feed_id(), s.samples_kept());
  }
  return out;
}

int RunScenario(const SimulateArgs& a) {
  if (!a.single_feed_flags.empty()) {
    std::string flags;
    for (const std::string& f : a.single_feed_flags) flags += (flags.empty() ? "" : ", ") + f;
    return PrintError(kCmd, fmt::format("{} cannot be combined with --scenario: the scenario file sets each feed's "
                                        "settings; drop {} or --scenario",
                                        flags, a.single_feed_flags.size() == 1 ? "it" : "them")),
           kExitUsage;
  }
  auto config = LoadConfig(a.config);
  if (!config.ok()) return PrintError(kCmd, config.status().message()), kExitUsage;
  auto scenario = LoadScenario(a.scenario);
  if (!scenario.ok()) return PrintError(kCmd, scenario.status().message()), kExitUsage;

  Micros duration{};
  if (!a.duration.empty()) {
    duration = DurationArg(a.duration);
    if (duration == Micros{}) return kExitUsage;
  } else if (scenario->duration) {
    duration = *scenario->duration;
  } else {
    return PrintError(kCmd, fmt::format("{} sets no duration: add 'duration: 2h' (for example) to it or give "
                                        "--duration",
                                        a.scenario)),
           kExitUsage;
  }
  auto start = StartArg(a, duration);
  if (!start.ok()) return PrintError(kCmd, start.status().message()), kExitUsage;

  // Check every feed before opening anything.
  struct Prepared {
    const FeedConfig* feed;
    Dynamics dyn;
    FeedSimulatorOptions options;
  };
  std::vector<Prepared> prepared;
  for (std::size_t i = 0; i < scenario->feeds.size(); ++i) {
    const ScenarioFeed& sf = scenario->feeds[i];
    const std::string where = scenario->Where(i, "feed", sf.lines.feed);
    const int index = config->FeedIndex(sf.feed);
    if (index < 0) {
      std::string ids;
      for (const FeedConfig& f : config->feeds) ids += (ids.empty() ? "" : ", ") + f.id;
      return PrintError(kCmd, fmt::format("{}: {} has no feed '{}'; its feeds are {}", where, a.config, sf.feed, ids)),
             kExitUsage;
    }
    const FeedConfig& feed = config->feeds[static_cast<std::size_t>(index)];
    if (!feed.dynamics) {
      return PrintError(kCmd, fmt::format("{}: feed '{}' has no dynamics section in {} to simulate", where, feed.id,
                                          a.config)),
             kExitUsage;
    }
    auto spec = ToDynamicsSpec(feed);
    if (!spec.ok()) return PrintError(kCmd, where + ": " + spec.status().message()), kExitUsage;
    auto compiled = Dynamics::Compile(*spec);
    if (!compiled.ok()) return PrintError(kCmd, where + ": " + compiled.status().message()), kExitUsage;
    auto options = ScenarioOptions(*scenario, i, feed, *compiled);
    if (!options.ok()) return PrintError(kCmd, options.status().message()), kExitUsage;
    options->start = *start;
    options->duration = duration;
    options->format = FormatOf(a);
    prepared.push_back(Prepared{&feed, std::move(compiled).value(), std::move(options).value()});
  }

  Sink sink;
  if (Status s = sink.Open(a); !s.ok()) return PrintError(kCmd, s.message()), kExitFailure;
  std::vector<FeedSimulator> sims;
  std::int64_t total = 0;
  for (Prepared& p : prepared) {
    auto created = FeedSimulator::Create(*p.feed, std::move(p.dyn), std::move(p.options));
    if (!created.ok()) return PrintError(kCmd, created.status().message()), kExitUsage;
    total += created->steps_total();
    sims.push_back(std::move(created).value());
  }

  // Merge in data time order; on ties the feed listed first goes first.
  ProgressLine progress(std::max<std::int64_t>(total / 10, 1));
  std::int64_t taken = 0;
  sink.StartClock();
  for (;;) {
    FeedSimulator* next = nullptr;
    for (FeedSimulator& s : sims) {
      if (!s.done() && (next == nullptr || s.next_offset() < next->next_offset())) next = &s;
    }
    if (next == nullptr) break;
    auto step = next->Next();
    if (!step.ok()) {
      progress.Finish();
      return PrintError(kCmd, fmt::format("feed '{}': {}; check its dynamics and its from and changes in {}",
                                          next->feed_id(), step.status().message(), a.scenario)),
             kExitFailure;
    }
    if (step->kept) {
      if (Status s = sink.Write(step->line, step->offset); !s.ok()) {
        return progress.Finish(), PrintError(kCmd, s.message()), kExitFailure;
      }
    }
    progress.Update(++taken, total, FeedCounts(sims));
  }
  progress.Finish();
  if (Status s = sink.Finish(); !s.ok()) return PrintError(kCmd, s.message()), kExitFailure;
  if (sink.sending()) {
    const IngestClient& client = sink.client();
    std::fprintf(stderr, "%s; sent %lld, accepted %lld, rejected %lld\n", FeedCounts(sims).c_str(),
                 static_cast<long long>(client.sent()), static_cast<long long>(client.accepted()),
                 static_cast<long long>(client.rejected()));
    for (const std::string& e : client.first_errors()) std::fprintf(stderr, "  first %s\n", e.c_str());
    return client.rejected() == 0 ? kExitOk : kExitFailure;
  }
  std::fprintf(stderr, "%s; wrote %s (%s of data time per feed from %s)\n", FeedCounts(sims).c_str(),
               a.out == "-" ? "to stdout" : a.out.c_str(), FormatDuration(duration).c_str(),
               FormatRfc3339(*start).c_str());
  return kExitOk;
}

}  // namespace

void AddSimulateCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<SimulateArgs>();
  CLI::App* cmd = app.add_subcommand("simulate", "Integrate a feed's known dynamics and write samples as an instrument would");
  cmd->footer(
      "Integrate a feed's known dynamics (its config's dynamics section) and write samples as an instrument would:\n"
      "CSV or NDJSON lines in the ingest format, to a file, stdout, or a daemon's ingest port.\n"
      "With --scenario, one process simulates every feed of a scenario file over the same data time (same start)\n"
      "and merges their samples in time order; the file sets each feed's seed, transient, from, step, noise,\n"
      "gap_rate, missing_rate, jitter and changes (see config/demo-scenario.yaml), so those flags and --feed are refused.\n"
      "Examples:\n"
      "  lyapcast simulate --config config/demo.yaml --feed loop-a --duration 30m --noise 0.02 > loop.csv\n"
      "  lyapcast simulate -c config/demo.yaml --feed loop-a --duration 1h --change ra=35@20m --gap-rate 0.05 \\\n"
      "      --send 127.0.0.1:7301 --speed 20\n"
      "  lyapcast simulate -c config/demo.yaml --scenario config/demo-scenario.yaml --duration 10m -o both.csv\n"
      "  lyapcast simulate -c config/demo.yaml --scenario config/demo-scenario.yaml --send 127.0.0.1:7301 --speed 10");
  cmd->add_option("--config,-c", args->config, "config file defining the feeds")->required();
  cmd->add_option("--scenario", args->scenario,
                  "scenario file: simulate every feed it lists, merged in time order; it replaces --feed, --from, "
                  "--transient, --step, --noise, --gap-rate, --missing-rate, --jitter, --change and --seed");
  std::vector<CLI::Option*> single;
  single.push_back(cmd->add_option("--feed", args->feed, "feed id (may be left out when the config has one feed)"));
  single.push_back(cmd->add_option("--from", args->from, "initial state, one number per channel (default all 1)"));
  single.push_back(
      cmd->add_option("--transient", args->transient, "integrate this long before the first sample (default 0s)"));
  single.push_back(cmd->add_option("--step", args->step, "time between samples (default: the feed's step)"));
  cmd->add_option("--duration", args->duration,
                  "data time to simulate, e.g. 30m (required, unless the scenario file sets duration)");
  cmd->add_option("--start", args->start, "RFC 3339 time of the first sample (default: so that the last is now)");
  single.push_back(
      cmd->add_option("--noise", args->noise, "sensor noise std in channel units: one number, or one per channel"));
  single.push_back(cmd->add_option("--gap-rate", args->gap_rate, "probability that a sample is dropped (default 0)"));
  single.push_back(cmd->add_option("--missing-rate", args->missing_rate,
                                   "probability that one random channel is missing (default 0)"));
  single.push_back(cmd->add_option("--jitter", args->jitter,
                                   "timestamp jitter: std of each sample's offset from its step, as a fraction of the "
                                   "step, in [0, 0.4]; the reading is the state at the stamped time (default 0)"));
  single.push_back(cmd->add_option(
      "--change", args->changes,
      "parameter change, repeatable: NAME=VALUE@T (step) or NAME=A..B@T1..T2 (ramp); T from the start"));
  single.push_back(cmd->add_option("--seed", args->seed, "seed of noise, gaps and missing channels (default 1)"));
  cmd->add_option("--format", args->format, "csv or ndjson (default csv)")->check(CLI::IsMember({"csv", "ndjson"}));
  cmd->add_option("--out,-o", args->out, "output file (default stdout)");
  cmd->add_option("--send", args->send, "stream to a daemon's ingest port, host:port, instead of writing");
  cmd->add_option("--token-file", args->token_file, "ingest token file for --send");
  cmd->add_option("--speed", args->speed, "with --send: data time runs this many times faster than wall time "
                                          "(default 0 = as fast as the daemon accepts)");
  cmd->callback([args, exit_code, single] {
    if (args->scenario.empty()) {
      // As CLI11 says it for a required option (--duration is optional only with --scenario).
      if (args->duration.empty()) throw CLI::RequiredError("--duration");
      *exit_code = RunSingleFeed(*args);
      return;
    }
    for (const CLI::Option* o : single) {
      if (o->count() > 0) args->single_feed_flags.push_back(o->get_name());
    }
    *exit_code = RunScenario(*args);
  });
}

}  // namespace lyapcast::cli
