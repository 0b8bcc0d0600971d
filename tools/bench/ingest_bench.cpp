// ingest_bench: samples per second stored durably by a real lyapcastd over
// TCP, against a bare SQLite insert of the same rows with the same
// transaction sizes, measured in the same run. Median of --runs runs.
//
//   build/tools/bench/ingest_bench [--daemon build/daemon/lyapcastd] [--samples 200000]
//                                  [--runs 5] [--inflight 1000]
//
// Prints one human-readable line per case and, last, one line of JSON.
// The client runs on the same 2-core machine as the daemon and shares it.
#include <arpa/inet.h>
#include <netinet/in.h>
#include <netinet/tcp.h>
#include <poll.h>
#include <signal.h>
#include <sqlite3.h>
#include <sys/socket.h>
#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <optional>
#include <regex>
#include <sstream>
#include <string>
#include <thread>
#include <vector>

namespace fs = std::filesystem;
using Clock = std::chrono::steady_clock;

namespace {

struct Options {
  std::string daemon;
  long samples = 200'000;
  int runs = 5;
  int inflight = 1000;
};

double Median(std::vector<double> v) {
  std::sort(v.begin(), v.end());
  const size_t n = v.size();
  return n % 2 ? v[n / 2] : 0.5 * (v[n / 2 - 1] + v[n / 2]);
}

[[noreturn]] void Die(const std::string& what) {
  std::cerr << "ingest_bench: " << what << '\n';
  std::exit(1);
}

// A lyapcastd child process on ephemeral loopback ports, in its own folder.
class DaemonProcess {
 public:
  DaemonProcess(const std::string& binary, const fs::path& dir) : dir_(dir) {
    fs::create_directories(dir);
    const fs::path config = dir / "bench.yaml";
    std::ofstream(config) << "listen: {ingest: 127.0.0.1:0, http: 127.0.0.1:0}\n"
                             "storage: {path: window.db, retention: 30d}\n"
                             "feeds:\n  - id: bench\n    channels: [a, b, c]\n    step: 10ms\n";
    const fs::path ready = dir / "ready.json";
    log_ = dir / "daemon.log";
    pid_ = fork();
    if (pid_ == 0) {
      const std::string cfg = config.string(), rdy = ready.string(), log = log_.string();
      FILE* f = std::freopen(log.c_str(), "w", stderr);
      (void)f;
      dup2(STDERR_FILENO, STDOUT_FILENO);
      execl(binary.c_str(), binary.c_str(), "--config", cfg.c_str(), "--ready-file", rdy.c_str(), "--log-level",
            "info", static_cast<char*>(nullptr));
      _exit(127);
    }
    for (int i = 0; i < 3000 && !fs::exists(ready); ++i) std::this_thread::sleep_for(std::chrono::milliseconds(10));
    std::ifstream in(ready);
    std::string text((std::istreambuf_iterator<char>(in)), {});
    std::smatch m;
    if (!std::regex_search(text, m, std::regex(R"("ingest_port":(\d+))"))) Die("daemon did not start; see " + log_.string());
    port_ = std::stoi(m[1]);
  }

  // SIGTERM, wait, and return the mean committed transaction size from the log.
  double StopAndMeanTransaction() {
    kill(pid_, SIGTERM);
    int status = 0;
    waitpid(pid_, &status, 0);
    std::ifstream in(log_);
    std::string text((std::istreambuf_iterator<char>(in)), {});
    std::smatch m;
    if (!std::regex_search(text, m, std::regex(R"(committed (\d+) samples in (\d+) transactions)"))) {
      Die("no writer totals in " + log_.string());
    }
    return std::stod(m[1]) / std::max(1.0, std::stod(m[2]));
  }

  int port() const { return port_; }

 private:
  fs::path dir_, log_;
  pid_t pid_ = -1;
  int port_ = 0;
};

std::string MakeLine(bool json, long i) {
  const long long t_us = 1'700'000'000'000'000LL + i * 10'000LL;  // 10 ms grid
  char buf[160];
  const double a = 0.001 * static_cast<double>(i % 1000), b = 1.25, c = -0.5;
  if (json) {
    std::snprintf(buf, sizeof buf, R"({"feed":"bench","t":%lld.%06lld,"values":{"a":%.3f,"b":%.2f,"c":%.1f}})" "\n",
                  t_us / 1'000'000, t_us % 1'000'000, a, b, c);
  } else {
    std::snprintf(buf, sizeof buf, "bench,%lld.%06lld,%.3f,%.2f,%.1f\n", t_us / 1'000'000, t_us % 1'000'000, a, b, c);
  }
  return buf;
}

// One connection sending lines [begin, end) with at most `inflight` unanswered.
void RunClient(int port, bool json, long begin, long end, int inflight, long* ok_count) {
  std::vector<std::string> lines;
  lines.reserve(static_cast<size_t>(end - begin));
  for (long i = begin; i < end; ++i) lines.push_back(MakeLine(json, i));
  const int fd = socket(AF_INET, SOCK_STREAM, 0);
  sockaddr_in addr{};
  addr.sin_family = AF_INET;
  addr.sin_port = htons(static_cast<uint16_t>(port));
  addr.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  if (connect(fd, reinterpret_cast<sockaddr*>(&addr), sizeof addr) != 0) Die("connect failed");
  int one = 1;
  setsockopt(fd, IPPROTO_TCP, TCP_NODELAY, &one, sizeof one);
  size_t next = 0;
  long replies = 0, oks = 0;
  std::string out;
  size_t out_pos = 0;
  char buf[65536];
  const long total = end - begin;
  while (replies < total) {
    if (out_pos == out.size()) {
      out.clear();
      out_pos = 0;
      while (next < lines.size() && static_cast<long>(next) - replies < inflight && out.size() < 32768) {
        out += lines[next++];
      }
    }
    pollfd p{fd, static_cast<short>(POLLIN | (out_pos < out.size() ? POLLOUT : 0)), 0};
    if (poll(&p, 1, 60'000) <= 0) Die("client timed out");
    if (p.revents & POLLOUT) {
      const ssize_t n = send(fd, out.data() + out_pos, out.size() - out_pos, MSG_NOSIGNAL);
      if (n < 0) Die("send failed");
      out_pos += static_cast<size_t>(n);
    }
    if (p.revents & (POLLIN | POLLHUP | POLLERR)) {
      const ssize_t n = recv(fd, buf, sizeof buf, 0);
      if (n <= 0) Die("daemon closed the connection");
      for (ssize_t k = 0; k < n; ++k) {
        if (buf[k] == '\n') ++replies;
        if (buf[k] == 'o' && (k == 0 || buf[k - 1] == '\n')) ++oks;
      }
    }
  }
  close(fd);
  *ok_count = oks;
}

// Samples per second stored through the daemon, and its mean transaction size.
std::pair<double, double> RunDaemonCase(const Options& o, bool json, int connections, const fs::path& dir) {
  DaemonProcess daemon(o.daemon, dir);
  std::vector<std::thread> threads;
  std::vector<long> oks(static_cast<size_t>(connections));
  const long per = o.samples / connections;
  const auto start = Clock::now();
  for (int c = 0; c < connections; ++c) {
    threads.emplace_back(RunClient, daemon.port(), json, c * per, (c + 1) * per, o.inflight, &oks[static_cast<size_t>(c)]);
  }
  for (auto& t : threads) t.join();
  const double seconds = std::chrono::duration<double>(Clock::now() - start).count();
  long stored = 0;
  for (long k : oks) stored += k;
  if (stored != per * connections) Die("not every sample was acknowledged (" + std::to_string(stored) + ")");
  const double mean_txn = daemon.StopAndMeanTransaction();
  return {static_cast<double>(stored) / seconds, mean_txn};
}

void Exec(sqlite3* db, const char* sql) {
  char* err = nullptr;
  if (sqlite3_exec(db, sql, nullptr, nullptr, &err) != SQLITE_OK) Die(std::string("sqlite: ") + (err ? err : "?"));
}

// The same rows with bare SQLite: WAL, synchronous=FULL, one prepared insert,
// transactions of `txn` rows.
double RunBareSqlite(long samples, int txn, const fs::path& dir) {
  fs::create_directories(dir);
  const std::string path = (dir / "bare.db").string();
  sqlite3* db = nullptr;
  if (sqlite3_open(path.c_str(), &db) != SQLITE_OK) Die("cannot open " + path);
  Exec(db, "PRAGMA journal_mode=WAL; PRAGMA synchronous=FULL;"
           "CREATE TABLE samples(feed_id INTEGER NOT NULL, t_us INTEGER NOT NULL, mask INTEGER NOT NULL,"
           " vals BLOB NOT NULL, PRIMARY KEY(feed_id, t_us)) WITHOUT ROWID;");
  sqlite3_stmt* ins = nullptr;
  sqlite3_prepare_v2(db, "INSERT INTO samples VALUES (1, ?1, 0, ?2)", -1, &ins, nullptr);
  const auto start = Clock::now();
  for (long i = 0; i < samples;) {
    Exec(db, "BEGIN IMMEDIATE");
    for (int k = 0; k < txn && i < samples; ++k, ++i) {
      const double vals[3] = {0.001 * static_cast<double>(i % 1000), 1.25, -0.5};
      sqlite3_bind_int64(ins, 1, 1'700'000'000'000'000LL + i * 10'000LL);
      sqlite3_bind_blob(ins, 2, vals, sizeof vals, SQLITE_STATIC);
      if (sqlite3_step(ins) != SQLITE_DONE) Die("bare insert failed");
      sqlite3_reset(ins);
    }
    Exec(db, "COMMIT");
  }
  const double seconds = std::chrono::duration<double>(Clock::now() - start).count();
  sqlite3_finalize(ins);
  sqlite3_close(db);
  return static_cast<double>(samples) / seconds;
}

}  // namespace

int main(int argc, char** argv) {
  Options o;
  o.daemon = (fs::path(argv[0]).parent_path() / "../../daemon/lyapcastd").lexically_normal().string();
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    auto next = [&]() -> std::string {
      if (i + 1 >= argc) Die("missing value after " + a);
      return argv[++i];
    };
    if (a == "--daemon") o.daemon = next();
    else if (a == "--samples") o.samples = std::stol(next());
    else if (a == "--runs") o.runs = std::stoi(next());
    else if (a == "--inflight") o.inflight = std::stoi(next());
    else if (a == "--help" || a == "-h") {
      std::cout << "usage: ingest_bench [--daemon PATH] [--samples N] [--runs N] [--inflight N]\n"
                   "Measures durable ingest (samples/s) through lyapcastd over 1 and 4 TCP connections,\n"
                   "CSV and NDJSON, against bare SQLite inserts with the same transaction sizes.\n";
      return 0;
    } else Die("unknown option " + a + " (see --help)");
  }
  if (!fs::exists(o.daemon)) Die("no daemon at " + o.daemon + " (use --daemon)");
  const fs::path root = fs::temp_directory_path() / ("lyapcast-bench-" + std::to_string(getpid()));

  std::ostringstream json;
  json << R"({"bench":"ingest","samples":)" << o.samples << R"(,"runs":)" << o.runs << R"(,"inflight":)" << o.inflight
       << R"(,"cases":[)";
  bool first = true;
  int run_id = 0;
  for (int connections : {1, 4}) {
    for (bool as_json : {false, true}) {
      std::vector<double> rates, bare, txns;
      for (int r = 0; r < o.runs; ++r) {
        auto [rate, txn] = RunDaemonCase(o, as_json, connections, root / ("d" + std::to_string(run_id)));
        const double bare_rate =
            RunBareSqlite(o.samples, std::max(1, static_cast<int>(txn + 0.5)), root / ("b" + std::to_string(run_id)));
        fs::remove_all(root / ("d" + std::to_string(run_id)));
        fs::remove_all(root / ("b" + std::to_string(run_id)));
        ++run_id;
        rates.push_back(rate);
        bare.push_back(bare_rate);
        txns.push_back(txn);
      }
      const double m = Median(rates), mb = Median(bare), mt = Median(txns);
      std::printf("%-6s over %d connection(s): %9.0f samples/s stored durably; bare SQLite %9.0f/s "
                  "(same %4.0f-row transactions); ratio %.2f\n",
                  as_json ? "NDJSON" : "CSV", connections, m, mb, mt, m / mb);
      std::fflush(stdout);
      json << (first ? "" : ",") << R"({"format":")" << (as_json ? "ndjson" : "csv") << R"(","connections":)"
           << connections << R"(,"samples_per_s":)" << static_cast<long>(m) << R"(,"bare_sqlite_per_s":)"
           << static_cast<long>(mb) << R"(,"mean_transaction_rows":)" << static_cast<long>(mt) << R"(,"ratio":)"
           << static_cast<double>(static_cast<long>(m / mb * 1000)) / 1000 << "}";
      first = false;
    }
  }
  json << "]}";
  fs::remove_all(root);
  std::cout << json.str() << std::endl;
  return 0;
}
