#include <utility>  // before Asio: Boost 1.74 needs std::exchange (DEVELOPERS.md "Pitfalls")

#include "daemon.h"

#include <spdlog/spdlog.h>
#include <unistd.h>

#include <boost/asio.hpp>
#include <fstream>
#include <iostream>
#include <thread>
#include <vector>

#include "api.h"
#include "api_store.h"
#include "runtime/feed_runtime.h"
#include "config/config.h"
#include "core/secret.h"
#include "core/wall_clock.h"
#include "http_server.h"
#include "ingest_server.h"
#include "physics/dynamics.h"
#include "schedule/scheduler.h"
#include "monitor/sensor_screen.h"
#include "store/sample_writer.h"
#include "store/window_store.h"
#include "systemd_notify.h"

namespace lyapcast {
namespace {

namespace asio = boost::asio;

std::optional<std::string> LoadToken(const std::optional<std::filesystem::path>& file, const char* key, bool* ok) {
  if (!file) return std::nullopt;
  auto token = ReadTokenFile(*file);
  if (!token.ok()) {
    spdlog::error("auth.{}: {}", key, token.status().message());
    *ok = false;
    return std::nullopt;
  }
  return std::move(token).value();
}

// Written to a temporary name and renamed, so a reader never sees half a file.
Status WriteReadyFile(const std::filesystem::path& path, std::uint16_t ingest_port, std::uint16_t http_port) {
  const std::filesystem::path tmp = path.string() + ".tmp";
  {
    std::ofstream out(tmp, std::ios::trunc);
    if (!out) return Status::Io("cannot write ready file " + tmp.string());
    out << fmt::format(R"({{"pid":{},"ingest_port":{},"http_port":{}}})", ::getpid(), ingest_port, http_port) << '\n';
    if (!out.flush()) return Status::Io("cannot write ready file " + tmp.string());
  }
  std::error_code ec;
  std::filesystem::rename(tmp, path, ec);
  if (ec) return Status::Io("cannot rename ready file to " + path.string() + ": " + ec.message());
  return Status::Ok();
}

std::vector<FeedLayout> Layouts(const Config& config) {
  std::vector<FeedLayout> out;
  for (const FeedConfig& f : config.feeds) out.push_back({f.id, f.channels, f.step});
  return out;
}

// LoadConfig checks the shape of `dynamics`; compiling the expressions finds
// unknown variables and syntax errors, which are config errors too.
Status CompileAllDynamics(const Config& config) {
  for (const FeedConfig& feed : config.feeds) {
    if (!feed.dynamics) continue;
    auto spec = ToDynamicsSpec(feed);
    if (!spec.ok()) return Status::Invalid(config.source.string() + ": " + spec.status().message());
    auto compiled = Dynamics::Compile(*spec);
    if (!compiled.ok()) return Status::Invalid(config.source.string() + ": " + compiled.status().message());
  }
  return Status::Ok();
}

void LogToSpdlog(SchedulerLogLevel level, const std::string& text) {
  switch (level) {
    case SchedulerLogLevel::kDebug: spdlog::debug("{}", text); break;
    case SchedulerLogLevel::kInfo: spdlog::info("{}", text); break;
    case SchedulerLogLevel::kWarning: spdlog::warn("{}", text); break;
    case SchedulerLogLevel::kError: spdlog::error("{}", text); break;
  }
}

SchedulerOptions SchedulerOptionsFor(const Config& config) {
  SchedulerOptions o;
  o.store_path = config.storage.path;
  o.layouts = Layouts(config);
  o.log = LogToSpdlog;
  return o;
}

}  // namespace

int CheckConfig(const std::filesystem::path& file) {
  auto config = LoadConfig(file);
  Status dynamics = config.ok() ? CompileAllDynamics(*config) : config.status();
  if (!dynamics.ok()) {
    std::cerr << "lyapcastd: invalid config: " << dynamics.message() << '\n';
    return kExitConfigInvalid;
  }
  std::cout << "config " << file.string() << " is valid\n" << DescribeConfig(*config);
  return kExitOk;
}

namespace {

struct Tokens {
  std::optional<std::string> ingest, read, admin;
};

// The config and the token files, checked. An exit code on failure.
std::optional<int> LoadChecked(const DaemonOptions& options, std::optional<Config>* config, Tokens* tokens) {
  auto loaded = LoadConfig(options.config);
  if (!loaded.ok()) {
    spdlog::error("invalid config: {}", loaded.status().message());
    return kExitConfigInvalid;
  }
  if (Status s = CompileAllDynamics(*loaded); !s.ok()) {
    spdlog::error("invalid config: {}", s.message());
    return kExitConfigInvalid;
  }
  bool tokens_ok = true;
  tokens->ingest = LoadToken(loaded->auth.ingest_token_file, "ingest_token_file", &tokens_ok);
  tokens->read = LoadToken(loaded->auth.read_token_file, "read_token_file", &tokens_ok);
  tokens->admin = LoadToken(loaded->auth.admin_token_file, "admin_token_file", &tokens_ok);
  if (!tokens_ok) return kExitConfigInvalid;
  *config = std::move(loaded).value();
  return std::nullopt;
}

void LogStartup(const DaemonOptions& options, const Config& config) {
  spdlog::info("lyapcastd {} starting (pid {}), config {}", kVersion, ::getpid(), options.config.string());
  const std::string summary = DescribeConfig(config);
  for (std::string_view rest = summary; !rest.empty();) {
    const auto nl = rest.find('\n');
    spdlog::info("  {}", rest.substr(0, nl));
    if (nl == std::string_view::npos) break;
    rest = rest.substr(nl + 1);
  }
  if (config.listen.allow_remote_without_tokens &&
      (!IsLoopbackHost(config.listen.ingest.host) || !IsLoopbackHost(config.listen.http.host))) {
    spdlog::warn("listening beyond loopback without tokens (listen.allow_remote_without_tokens: true): "
                 "anyone who can reach these ports can send samples and read forecasts");
  }
}

// A store/config mismatch is the operator's to fix (exit code 2); anything
// else is a failure.
int ExitCodeFor(const Status& s) {
  return s.code() == StatusCode::kFailedPrecondition ? kExitConfigInvalid : kExitFailure;
}

Result<std::unique_ptr<WindowStore>> OpenWindow(const Config& config) {
  auto store = WindowStore::Open(StoreOptions{config.storage.path, false, 5000});
  if (!store.ok()) return Status(store.status().code(), "cannot open the store: " + store.status().message());
  if (Status s = (*store)->RegisterFeeds(Layouts(config)); !s.ok()) return s;
  spdlog::info("store {} open (schema version {})", config.storage.path.string(), (*store)->schema_version());
  return store;
}

// Logs what each feed holds and starts the trainers from there.
Status StartRetraining(const Config& config, const SampleWriter& writer, Scheduler& scheduler) {
  std::vector<FeedExtent> extents;
  for (std::size_t i = 0; i < config.feeds.size(); ++i) {
    const FeedExtent e = writer.extent(static_cast<std::uint32_t>(i));
    extents.push_back(e);
    if (e.count > 0) {
      spdlog::info("feed {}: {} samples stored, {} .. {}", config.feeds[i].id, e.count, FormatRfc3339(e.oldest),
                   FormatRfc3339(e.newest));
    }
  }
  if (Status s = scheduler.Start(extents); !s.ok()) {
    return Status(s.code(), "cannot start the retraining scheduler: " + s.message());
  }
  spdlog::info("retraining: {} trainer thread(s){}", std::max(config.training.threads, 1),
               config.training.lockstep ? ", lockstep (ingest waits for each due retrain)" : "");
  return Status::Ok();
}

IngestServerOptions IngestOptionsFor(const Config& config, const std::optional<std::string>& token) {
  IngestServerOptions o;
  o.endpoint = config.listen.ingest;
  o.max_line = config.limits.max_line;
  o.max_connections = config.limits.max_connections;
  o.idle_timeout = config.limits.idle_timeout;
  o.max_future_skew = config.limits.max_future_skew;
  o.token = token;
  o.max_outstanding = static_cast<std::size_t>(std::max(2 * config.limits.commit_batch, 1024));
  return o;
}

// On SIGINT or SIGTERM: cancel training, drain the listeners, stop `io`.
void StopOnSignal(asio::signal_set& signals, asio::io_context& io, Scheduler& scheduler, HttpServer& http,
                  IngestServer& ingest) {
  signals.async_wait([&](boost::system::error_code ec, int signo) {
    if (ec) return;
    NotifyStopping();  // systemd: the stop has begun (no-op without NOTIFY_SOCKET)
    spdlog::info("received {}; stopping: no new connections, finishing received lines", signo == SIGINT ? "SIGINT" : "SIGTERM");
    // Cancel training first: in lockstep the writer may be waiting for a
    // job, and the sessions for the writer.
    scheduler.Stop();
    http.Shutdown();
    ingest.Shutdown([&io] { io.stop(); });
  });
}

// Runs `io` on `io_threads` threads (this one included) until it stops.
void RunIo(asio::io_context& io, int io_threads) {
  std::vector<std::thread> threads;
  for (int i = 1; i < io_threads; ++i) threads.emplace_back([&io] { io.run(); });
  io.run();
  for (auto& t : threads) t.join();
}

void LogTotals(const SampleWriter& writer, const IngestServer& ingest) {
  const WriterStats stats = writer.stats();
  const IngestCounters& k = ingest.counters();
  spdlog::info("writer: committed {} samples in {} transactions ({} failed commits, {} rows pruned)",
               stats.samples_committed, stats.transactions, stats.failed_commits, stats.rows_pruned);
  spdlog::info("ingest: {} lines on {} connections, {} accepted", k.lines.load(), k.connections_accepted.load(),
               k.accepted.load());
}

}  // namespace

int RunDaemon(const DaemonOptions& options) {
  std::optional<Config> loaded;
  Tokens tokens;
  if (auto exit_code = LoadChecked(options, &loaded, &tokens)) return *exit_code;
  const Config config = std::move(*loaded);
  LogStartup(options, config);

  auto store = OpenWindow(config);
  if (!store.ok()) {
    spdlog::error("{}", store.status().message());
    return ExitCodeFor(store.status());
  }
  WriterOptions wopts;
  wopts.commit_every = config.limits.commit_every;
  wopts.commit_batch = config.limits.commit_batch;
  wopts.retention = config.storage.retention;
  SampleWriter writer(std::move(store).value(), static_cast<int>(config.feeds.size()), wopts);
  Scheduler scheduler(config, SchedulerOptionsFor(config));
  FeedRuntimes runtimes(config, scheduler, LogToSpdlog);
  // Per sample, the order of work of runtime/feed_runtime.h: the scheduler
  // first (in lockstep a due retrain runs before the sample is scored), then
  // the drift monitor and a drift retrain.
  writer.Subscribe([&runtimes](const CommittedBatch& batch) { runtimes.OnCommitted(batch); });
  // The sensor screen runs on the writer thread only.
  std::vector<SensorScreen> screens;
  for (const FeedConfig& f : config.feeds) screens.emplace_back(f.quality);
  std::vector<std::vector<std::int64_t>> suspect_logged(config.feeds.size());
  writer.SetScreen([&screens, &suspect_logged, &config](FeedSample& fs) {
    if (fs.feed >= screens.size()) return;
    const std::uint64_t marked = screens[fs.feed].Screen(fs.sample);
    if (marked == 0) return;
    // Logged at the first suspect reading of a channel and then at every
    // power of ten, so a long sentinel burst does not flood the log.
    const FeedConfig& f = config.feeds[fs.feed];
    auto& logged = suspect_logged[fs.feed];
    logged.resize(f.channels.size(), 0);
    for (std::size_t c = 0; c < f.channels.size(); ++c) {
      if (!((marked >> c) & 1U)) continue;
      const std::int64_t n = ++logged[c];
      if (n != 1 && n != 10 && n != 100 && n != 1000 && n % 10000 != 0) continue;
      const auto& counts = screens[fs.feed].counts()[c];
      std::string kinds;
      for (int k = 0; k < kSuspectKinds; ++k) {
        kinds += fmt::format("{}{} {}", k == 0 ? "" : ", ", SuspectKindName(static_cast<SuspectKind>(k)),
                             counts[static_cast<std::size_t>(k)]);
      }
      spdlog::warn("feed {}: channel {} reading {} at {} is suspect; {} suspect so far ({}); kept but not trained on",
                   f.id, f.channels[c], fs.sample.values[c], FormatRfc3339(fs.sample.t), n, kinds);
    }
  });
  const auto fail = [&](const std::string& message) {
    spdlog::error("{}", message);
    scheduler.Stop();
    writer.Stop();
    return kExitFailure;
  };
  if (Status s = writer.Start(); !s.ok()) return fail("cannot start the store writer: " + s.message());
  if (Status s = StartRetraining(config, writer, scheduler); !s.ok()) return fail(s.message());
  auto api_store = ApiStore::Open(config.storage.path, Layouts(config));
  if (!api_store.ok()) return fail("cannot open the store for the API: " + api_store.status().message());

  asio::io_context io;
  IngestServer ingest(io, config, writer, IngestOptionsFor(config, tokens.ingest));
  HttpServerOptions hopts;
  hopts.endpoint = config.listen.http;
  ApiContext api{&config,         &writer,     &ingest,     &scheduler, &runtimes,
                 api_store->get(), tokens.read, tokens.admin, WallNow(), kVersion};
  ApiHandlers handlers = MakeApiHandlers(std::move(api));
  hopts.head = std::move(handlers.head);
  HttpServer http(io, hopts, std::move(handlers.request));
  if (Status s = ingest.Listen(); !s.ok()) return fail(s.message());
  if (Status s = http.Listen(); !s.ok()) return fail(s.message());
  ingest.StartAccepting();
  http.StartAccepting();
  spdlog::info("listening: ingest on {}:{}, HTTP on {}:{}", config.listen.ingest.host, ingest.port(),
               config.listen.http.host, http.port());
  // Before anyone is told we are ready: a stop request must find its handler.
  asio::signal_set signals(io, SIGINT, SIGTERM);
  StopOnSignal(signals, io, scheduler, http, ingest);
  if (options.ready_file) {
    if (Status s = WriteReadyFile(*options.ready_file, ingest.port(), http.port()); !s.ok()) return fail(s.message());
  }
  // systemd (Type=notify): both listeners are up; no-op without NOTIFY_SOCKET.
  NotifyReady(fmt::format("serving: ingest on {}:{}, HTTP on {}:{}", config.listen.ingest.host, ingest.port(),
                          config.listen.http.host, http.port()));

  RunIo(io, options.io_threads);
  scheduler.Stop();
  writer.Stop();
  LogTotals(writer, ingest);
  if (options.ready_file) {
    std::error_code ec;
    std::filesystem::remove(*options.ready_file, ec);
  }
  spdlog::info("lyapcastd stopped");
  return kExitOk;
}

}  // namespace lyapcast
