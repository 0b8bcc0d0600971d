// api_bench: the HTTP API of a real lyapcastd over loopback.
//
//  1. Forecast latency: p50, p99 and max of sequential
//     GET /v1/feeds/{id}/forecast?steps=1000 on one keep-alive connection, on
//     a 3-channel Lorenz-63 feed with the default 3-64-64-3 tanh model, once
//     with the daemon idle and once while a retrain (POST .../retrain, one
//     training thread) runs on the other core. The job is checked to be
//     running before the first and after the last timed request. Reference:
//     GET /v1/heartbeat on the same connection (round trip and scheduling
//     noise).
//  2. GET /v1/feeds/{id}/status requests per second and latency from 16
//     keep-alive connections driven by one client thread (poll loop), each
//     with one request outstanding, for a fixed time after a warm-up; again
//     with lyapcastd --io-threads 1 for comparison.
//
//   build/tools/bench/api_bench [--daemon build/daemon/lyapcastd] [--runs 3] [--requests 2000]
//                               [--steps 1000] [--clients 16] [--duration 5] [--warmup 1]
//                               [--iterations 50000] [--compare-io-threads 1] [--keep]
//
// Setup (once): a daemon whose retrain.iterations is small trains the first
// model on 40 s of simulated data (Lorenz-63, RK4, 10 ms step) and stops.
// Each run then starts a fresh daemon on that database (it serves the stored
// model at once) with retrain.iterations large, so that the retrain it is
// asked for outlasts the measurement; SIGTERM at the end of the run cancels
// it. Data time lies in the past, ending before wall time.
//
// The client shares the 2-core machine with the daemon (HTTP on its io
// threads, the trainer on one more thread). To attribute time, the bench
// reads the daemon's CPU time and minor page faults from /proc/<pid>/stat
// and the machine's busy time from /proc/stat (what other processes took).
// Prints one human-readable line per run and per figure and, last, one line
// of JSON with the medians over --runs.
#include <arpa/inet.h>
#include <fcntl.h>
#include <netinet/in.h>
#include <netinet/tcp.h>
#include <poll.h>
#include <signal.h>
#include <sys/resource.h>
#include <sys/socket.h>
#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <cctype>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
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

constexpr const char* kFeed = "lorenz";
constexpr double kTargetForecastP99Ms = 10.0;
constexpr double kTargetStatusPerS = 5000.0;

struct Options {
  std::string daemon;
  int runs = 3;
  int requests = 2000;
  int steps = 1000;
  int clients = 16;
  double duration_s = 5.0;
  double warmup_s = 1.0;
  int iterations = 50000;
  int first_iterations = 1000;
  int compare_io_threads = 1;  // 0: no comparison
  bool keep = false;
  std::string family = "neural";  // model.family of the feed
  int history = 0;                // > 0: forecasts ask for a start fitted to this many steps (history=N)
};

pid_t g_daemon = -1;  // the running daemon child, stopped on the way out

[[noreturn]] void Die(const std::string& what) {
  std::cerr << "api_bench: " << what << '\n';
  if (g_daemon > 0) {
    kill(g_daemon, SIGTERM);
    waitpid(g_daemon, nullptr, 0);
  }
  std::exit(1);
}

double Median(std::vector<double> v) {
  if (v.empty()) return std::nan("");
  std::sort(v.begin(), v.end());
  const size_t n = v.size();
  return n % 2 ? v[n / 2] : 0.5 * (v[n / 2 - 1] + v[n / 2]);
}

// Nearest-rank percentile of a sample (sorted in place).
double Percentile(std::vector<double>& v, double p) {
  if (v.empty()) return std::nan("");
  std::sort(v.begin(), v.end());
  const size_t rank = static_cast<size_t>(std::ceil(p / 100.0 * static_cast<double>(v.size())));
  return v[std::clamp<size_t>(rank, 1, v.size()) - 1];
}

double Seconds(Clock::duration d) { return std::chrono::duration<double>(d).count(); }

std::string Fixed(double v, int decimals) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.*f", decimals, v);
  return buf;
}

// ---------------------------------------------------------------------------
// Minimal HTTP/1.1 client: keep-alive, responses framed by Content-Length
// (the daemon always sends it).

int ConnectLoopback(int port) {
  const int fd = socket(AF_INET, SOCK_STREAM, 0);
  if (fd < 0) Die("socket failed");
  sockaddr_in addr{};
  addr.sin_family = AF_INET;
  addr.sin_port = htons(static_cast<uint16_t>(port));
  addr.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  if (connect(fd, reinterpret_cast<sockaddr*>(&addr), sizeof addr) != 0) Die("connect to port " + std::to_string(port) + " failed");
  int one = 1;
  setsockopt(fd, IPPROTO_TCP, TCP_NODELAY, &one, sizeof one);
  return fd;
}

struct Response {
  int status = 0;
  std::string body;
};

std::string RequestText(const std::string& method, const std::string& target) {
  std::string r = method + " " + target + " HTTP/1.1\r\nHost: 127.0.0.1\r\n";
  if (method == "POST") r += "Content-Length: 0\r\n";
  return r + "\r\n";
}

// Takes one complete response off the front of `buf`; false if incomplete.
bool TakeResponse(std::string& buf, Response* out) {
  const size_t head_end = buf.find("\r\n\r\n");
  if (head_end == std::string::npos) return false;
  if (buf.compare(0, 5, "HTTP/") != 0) Die("not an HTTP response: " + buf.substr(0, 40));
  const size_t sp = buf.find(' ');
  const int status = std::atoi(buf.c_str() + sp + 1);
  std::optional<size_t> length;
  for (size_t pos = buf.find("\r\n") + 2; pos < head_end;) {
    const size_t eol = buf.find("\r\n", pos);
    const size_t colon = buf.find(':', pos);
    if (colon < eol) {
      std::string name = buf.substr(pos, colon - pos);
      for (char& c : name) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
      if (name == "content-length") length = std::strtoull(buf.c_str() + colon + 1, nullptr, 10);
    }
    pos = eol + 2;
  }
  if (!length) Die("response without Content-Length");
  if (buf.size() < head_end + 4 + *length) return false;
  out->status = status;
  out->body.assign(buf, head_end + 4, *length);
  buf.erase(0, head_end + 4 + *length);
  return true;
}

class HttpConnection {
 public:
  explicit HttpConnection(int port) : fd_(ConnectLoopback(port)) {}
  ~HttpConnection() { close(fd_); }
  HttpConnection(const HttpConnection&) = delete;
  HttpConnection& operator=(const HttpConnection&) = delete;

  Response Request(const std::string& method, const std::string& target) {
    const std::string req = RequestText(method, target);
    for (size_t off = 0; off < req.size();) {
      const ssize_t n = send(fd_, req.data() + off, req.size() - off, MSG_NOSIGNAL);
      if (n <= 0) Die("send failed");
      off += static_cast<size_t>(n);
    }
    Response r;
    char chunk[65536];
    bool first = true;
    while (!TakeResponse(in_, &r)) {
      const ssize_t n = recv(fd_, chunk, sizeof chunk, 0);
      if (n <= 0) Die("the daemon closed the connection during " + method + " " + target);
      if (first) first_byte_ = Clock::now();
      first = false;
      in_.append(chunk, static_cast<size_t>(n));
    }
    return r;
  }

  // When the first bytes of the last response arrived: the daemon had
  // computed and serialized the whole response by then (Beast writes it
  // after the handler returns), so send-to-first-byte is the server's time.
  Clock::time_point first_byte() const { return first_byte_; }

 private:
  int fd_;
  std::string in_;
  Clock::time_point first_byte_;
};

// ---------------------------------------------------------------------------
// The daemon as a child process, on ephemeral loopback ports.

std::string ConfigText(int iterations, const std::string& family) {
  // Lorenz-63 (sigma 10, rho 28, beta 8/3). Cadence and drift retrains are
  // pushed out of the way (min_interval 1h, a change threshold no stationary
  // stream reaches) so the only jobs are the first model and the one asked for.
  return "listen: {ingest: 127.0.0.1:0, http: 127.0.0.1:0}\n"
         "storage: {path: window.db, retention: 30d}\n"
         "training: {threads: 1, lockstep: false}\n"
         "feeds:\n"
         "  - id: lorenz\n"
         "    channels: [x, y, z]\n"
         "    step: 10ms\n"
         "    dynamics:\n"
         "      equations: {x: \"s*(y - x)\", y: \"x*(r - z) - y\", z: \"x*y - b*z\"}\n"
         "      constants: {s: 10, r: 28, b: 2.6666666666666667}\n"
         "    model: {hidden: [64, 64], activation: tanh, family: " + family + "}\n"
         "    retrain: {min_interval: 1h, max_interval: 1h, min_pairs: 2000, iterations: " +
         std::to_string(iterations) +
         ", time_budget: 30m}\n"
         "    monitor: {change_threshold: 1000000}\n";
}

class DaemonProcess {
 public:
  DaemonProcess(const std::string& binary, const fs::path& dir, int iterations, int io_threads,
                const std::string& family)
      : dir_(dir) {
    fs::create_directories(dir);
    const fs::path config = dir / "bench.yaml";
    std::ofstream(config) << ConfigText(iterations, family);
    const fs::path ready = dir / "ready.json";
    fs::remove(ready);
    log_ = dir / "daemon.log";
    pid_ = fork();
    if (pid_ == 0) {
      const std::string cfg = config.string(), rdy = ready.string(), log = log_.string();
      const std::string threads = std::to_string(io_threads);
      FILE* f = std::freopen(log.c_str(), "a", stderr);
      (void)f;
      dup2(STDERR_FILENO, STDOUT_FILENO);
      if (io_threads > 0) {
        execl(binary.c_str(), binary.c_str(), "--config", cfg.c_str(), "--ready-file", rdy.c_str(), "--io-threads",
              threads.c_str(), static_cast<char*>(nullptr));
      } else {
        execl(binary.c_str(), binary.c_str(), "--config", cfg.c_str(), "--ready-file", rdy.c_str(),
              static_cast<char*>(nullptr));
      }
      _exit(127);
    }
    g_daemon = pid_;
    for (int i = 0; i < 3000 && !fs::exists(ready); ++i) {
      int status = 0;
      if (waitpid(pid_, &status, WNOHANG) == pid_) {
        pid_ = g_daemon = -1;
        Die("the daemon exited at start; see " + log_.string());
      }
      std::this_thread::sleep_for(std::chrono::milliseconds(10));
    }
    std::ifstream in(ready);
    std::string text((std::istreambuf_iterator<char>(in)), {});
    std::smatch m;
    if (!std::regex_search(text, m, std::regex(R"("ingest_port":(\d+),"http_port":(\d+))"))) {
      Die("the daemon did not start; see " + log_.string());
    }
    ingest_port_ = std::stoi(m[1]);
    http_port_ = std::stoi(m[2]);
  }
  ~DaemonProcess() { Stop(); }

  void Stop() {
    if (pid_ <= 0) return;
    kill(pid_, SIGTERM);
    int status = 0;
    waitpid(pid_, &status, 0);
    pid_ = g_daemon = -1;
  }

  int ingest_port() const { return ingest_port_; }
  int http_port() const { return http_port_; }
  pid_t pid() const { return pid_; }
  const fs::path& log() const { return log_; }

 private:
  fs::path dir_, log_;
  pid_t pid_ = -1;
  int ingest_port_ = 0, http_port_ = 0;
};

// ---------------------------------------------------------------------------
// Lorenz-63 by classical RK4 (two 5 ms substeps per 10 ms sample), streamed
// as CSV ingest lines on a 10 ms grid of data time.

class LorenzStream {
 public:
  explicit LorenzStream(long long t0_us) : t_us_(t0_us) {
    for (int i = 0; i < 4000; ++i) Step(0.005);  // 20 s transient
  }

  std::vector<std::string> Next(int n) {
    std::vector<std::string> lines;
    char buf[160];
    for (int i = 0; i < n; ++i) {
      Step(0.005);
      Step(0.005);
      t_us_ += 10'000;
      std::snprintf(buf, sizeof buf, "%s,%lld.%06lld,%.6f,%.6f,%.6f\n", kFeed, t_us_ / 1'000'000, t_us_ % 1'000'000,
                    s_[0], s_[1], s_[2]);
      lines.emplace_back(buf);
    }
    return lines;
  }

 private:
  static void Rhs(const double* s, double* d) {
    d[0] = 10.0 * (s[1] - s[0]);
    d[1] = s[0] * (28.0 - s[2]) - s[1];
    d[2] = s[0] * s[1] - (8.0 / 3.0) * s[2];
  }
  void Step(double h) {
    double k1[3], k2[3], k3[3], k4[3], tmp[3];
    Rhs(s_, k1);
    for (int c = 0; c < 3; ++c) tmp[c] = s_[c] + 0.5 * h * k1[c];
    Rhs(tmp, k2);
    for (int c = 0; c < 3; ++c) tmp[c] = s_[c] + 0.5 * h * k2[c];
    Rhs(tmp, k3);
    for (int c = 0; c < 3; ++c) tmp[c] = s_[c] + h * k3[c];
    Rhs(tmp, k4);
    for (int c = 0; c < 3; ++c) s_[c] += h / 6.0 * (k1[c] + 2 * k2[c] + 2 * k3[c] + k4[c]);
  }

  double s_[3] = {1.0, 1.0, 1.0};
  long long t_us_;
};

// Sends the lines over one ingest connection; every reply must be "ok".
void Ingest(int port, const std::vector<std::string>& lines) {
  const int fd = ConnectLoopback(port);
  std::string out;
  for (const auto& l : lines) out += l;
  size_t out_pos = 0, replies = 0;
  std::string in;
  char buf[65536];
  while (replies < lines.size()) {
    pollfd p{fd, static_cast<short>(POLLIN | (out_pos < out.size() ? POLLOUT : 0)), 0};
    if (poll(&p, 1, 60'000) <= 0) Die("ingest timed out");
    if (p.revents & POLLOUT) {
      const ssize_t n = send(fd, out.data() + out_pos, std::min<size_t>(out.size() - out_pos, 65536), MSG_NOSIGNAL);
      if (n < 0) Die("ingest send failed");
      out_pos += static_cast<size_t>(n);
    }
    if (p.revents & (POLLIN | POLLHUP | POLLERR)) {
      const ssize_t n = recv(fd, buf, sizeof buf, 0);
      if (n <= 0) Die("the daemon closed the ingest connection");
      in.append(buf, static_cast<size_t>(n));
      for (size_t nl; (nl = in.find('\n')) != std::string::npos; in.erase(0, nl + 1)) {
        if (in.compare(0, 3, "ok ") != 0) Die("ingest rejected a line: " + in.substr(0, nl));
        ++replies;
      }
    }
  }
  close(fd);
}

// ---------------------------------------------------------------------------
// Reading the few status fields the bench needs (compact JSON from the daemon).

bool HasModel(const std::string& status_body) { return status_body.find("\"model\":{") != std::string::npos; }

bool CadenceRunning(const std::string& status_body) {
  const size_t c = status_body.find("\"cadence\":{");
  if (c == std::string::npos) Die("status without cadence: " + status_body.substr(0, 200));
  const size_t r = status_body.find("\"running\":", c);
  return status_body.compare(r + 10, 4, "true") == 0;
}

std::string JobState(HttpConnection& http, long job) {
  const Response r = http.Request("GET", std::string("/v1/feeds/") + kFeed + "/jobs/" + std::to_string(job));
  std::smatch m;
  if (r.status != 200 || !std::regex_search(r.body, m, std::regex(R"re("state":"([a-z]+)")re"))) {
    Die("job " + std::to_string(job) + ": HTTP " + std::to_string(r.status) + " " + r.body.substr(0, 200));
  }
  return m[1];
}

std::string StatusBody(HttpConnection& http) {
  const Response r = http.Request("GET", std::string("/v1/feeds/") + kFeed + "/status");
  if (r.status != 200) Die("status: HTTP " + std::to_string(r.status) + " " + r.body.substr(0, 200));
  return r.body;
}

// ---------------------------------------------------------------------------
// The daemon's own counters from /proc: minor page faults and CPU time (all
// threads), to attribute server-side time.

struct ProcCounters {
  double minor_faults = 0, cpu_s = 0;
};

ProcCounters ReadProc(pid_t pid) {
  std::ifstream in("/proc/" + std::to_string(pid) + "/stat");
  std::string text((std::istreambuf_iterator<char>(in)), {});
  const size_t paren = text.rfind(')');
  if (paren == std::string::npos) return {};
  std::istringstream fields(text.substr(paren + 2));
  std::vector<std::string> f;  // f[0] is field 3 (state)
  for (std::string x; fields >> x;) f.push_back(x);
  if (f.size() < 13) return {};
  const double tick = static_cast<double>(sysconf(_SC_CLK_TCK));
  return {std::stod(f[7]), (std::stod(f[11]) + std::stod(f[12])) / tick};  // minflt; utime + stime
}

// Busy CPU seconds of the whole machine (all cores, /proc/stat), and of this
// process; with the daemon's, what other processes took meanwhile.
struct MachineCpu {
  double busy_s = 0, self_s = 0;
  Clock::time_point at;
};

MachineCpu ReadMachine() {
  MachineCpu m;
  m.at = Clock::now();
  std::ifstream in("/proc/stat");
  std::string cpu;
  double v[8] = {};
  in >> cpu;
  for (double& x : v) in >> x;  // user nice system idle iowait irq softirq steal
  const double tick = static_cast<double>(sysconf(_SC_CLK_TCK));
  m.busy_s = (v[0] + v[1] + v[2] + v[5] + v[6]) / tick;
  rusage u{};
  getrusage(RUSAGE_SELF, &u);
  m.self_s = static_cast<double>(u.ru_utime.tv_sec + u.ru_stime.tv_sec) +
             1e-6 * static_cast<double>(u.ru_utime.tv_usec + u.ru_stime.tv_usec);
  return m;
}

// Cores used by processes other than this one and the daemon between a and b.
double OtherCores(const MachineCpu& a, const MachineCpu& b, const ProcCounters& da, const ProcCounters& db) {
  const double wall = Seconds(b.at - a.at);
  if (wall <= 0) return 0;
  return std::max(0.0, ((b.busy_s - a.busy_s) - (b.self_s - a.self_s) - (db.cpu_s - da.cpu_s)) / wall);
}

std::string LoadAverage() {
  std::ifstream in("/proc/loadavg");
  std::string a, b, c;
  in >> a >> b >> c;
  return a + " " + b + " " + c;
}

// ---------------------------------------------------------------------------
// Measurements.

struct Latency {
  double p50_ms = 0, p99_ms = 0, max_ms = 0;
};

Latency Summarize(std::vector<double> ms) {
  Latency l;
  l.p50_ms = Percentile(ms, 50);
  l.p99_ms = Percentile(ms, 99);
  l.max_ms = ms.empty() ? std::nan("") : ms.back();
  return l;
}

struct ForecastResult {
  Latency latency;
  double first_byte_p50_ms = 0;  // request sent to first response byte
  double faults_per_request = 0;  // the daemon's minor page faults (all threads)
  double cpu_ms_per_request = 0;  // the daemon's CPU time (all threads, the trainer's too)
  double other_cores = 0;         // CPU taken meanwhile by processes other than the daemon and the bench
  size_t body_bytes = 0;
};

// `warmup` untimed requests, then `n` timed ones, sequential on one connection.
ForecastResult MeasureForecasts(HttpConnection& http, int steps, int history, int n, int warmup, pid_t daemon = -1) {
  const std::string target = std::string("/v1/feeds/") + kFeed + "/forecast?steps=" + std::to_string(steps) +
                             (history > 0 ? "&history=" + std::to_string(history) : std::string());
  ForecastResult out;
  for (int i = 0; i < warmup; ++i) {
    const Response r = http.Request("GET", target);
    if (r.status != 200) Die("forecast: HTTP " + std::to_string(r.status) + " " + r.body.substr(0, 300));
    if (i == 0) {
      size_t points = 0;
      for (size_t p = 0; (p = r.body.find("\"beyond_horizon\":", p)) != std::string::npos; ++p) ++points;
      if (points != static_cast<size_t>(steps)) {
        Die("forecast has " + std::to_string(points) + " points, asked for " + std::to_string(steps));
      }
    }
    out.body_bytes = r.body.size();
  }
  std::vector<double> ms, first_byte;
  ms.reserve(static_cast<size_t>(n));
  const ProcCounters before = daemon > 0 ? ReadProc(daemon) : ProcCounters{};
  const MachineCpu machine_before = ReadMachine();
  for (int i = 0; i < n; ++i) {
    const auto t = Clock::now();
    const Response r = http.Request("GET", target);
    ms.push_back(1e3 * Seconds(Clock::now() - t));
    first_byte.push_back(1e3 * Seconds(http.first_byte() - t));
    if (r.status != 200) Die("forecast: HTTP " + std::to_string(r.status));
  }
  const ProcCounters after = daemon > 0 ? ReadProc(daemon) : ProcCounters{};
  out.other_cores = OtherCores(machine_before, ReadMachine(), before, after);
  out.latency = Summarize(std::move(ms));
  out.first_byte_p50_ms = Percentile(first_byte, 50);
  if (n > 0) {
    out.faults_per_request = (after.minor_faults - before.minor_faults) / n;
    out.cpu_ms_per_request = 1e3 * (after.cpu_s - before.cpu_s) / n;
  }
  return out;
}

// The smallest request: the loopback round trip and this machine's
// scheduling noise, a floor under the forecast figures.
Latency MeasureTrivial(HttpConnection& http, int n) {
  std::vector<double> ms;
  for (int i = 0; i < n; ++i) {
    const auto t = Clock::now();
    const Response r = http.Request("GET", "/v1/heartbeat");
    ms.push_back(1e3 * Seconds(Clock::now() - t));
    if (r.status != 200) Die("heartbeat: HTTP " + std::to_string(r.status));
  }
  return Summarize(std::move(ms));
}

struct StatusLoad {
  double per_s = 0;
  Latency latency;
  double daemon_cores = 0;       // the daemon's CPU time over the window / the window
  double daemon_us_per_request = 0;
  double client_us_per_request = 0;  // this client thread's CPU time per request
  double other_cores = 0;            // CPU taken by other processes during the window
};

double ThreadCpuSeconds() {
  rusage u{};
  getrusage(RUSAGE_THREAD, &u);
  return static_cast<double>(u.ru_utime.tv_sec + u.ru_stime.tv_sec) + 1e-6 * static_cast<double>(u.ru_utime.tv_usec + u.ru_stime.tv_usec);
}

// `clients` keep-alive connections, each with one request outstanding,
// driven by one poll loop; counts responses completed in the timed window
// and takes the latency of those sent and completed in it.
StatusLoad MeasureStatusLoad(int port, int clients, double warmup_s, double duration_s, pid_t daemon) {
  const std::string req = RequestText("GET", std::string("/v1/feeds/") + kFeed + "/status");
  struct Conn {
    int fd;
    std::string in;
    Clock::time_point sent;
  };
  std::vector<Conn> conns;
  std::vector<pollfd> fds;
  auto send_request = [&](Conn& c) {
    c.sent = Clock::now();
    const ssize_t n = send(c.fd, req.data(), req.size(), MSG_NOSIGNAL);
    if (n != static_cast<ssize_t>(req.size())) Die("status send failed");
  };
  for (int i = 0; i < clients; ++i) {
    const int fd = ConnectLoopback(port);
    fcntl(fd, F_SETFL, fcntl(fd, F_GETFL) | O_NONBLOCK);
    conns.push_back({fd, {}, {}});
    fds.push_back({fd, POLLIN, 0});
  }
  const auto start = Clock::now();
  const auto measure_from = start + std::chrono::duration_cast<Clock::duration>(std::chrono::duration<double>(warmup_s));
  const auto measure_to =
      measure_from + std::chrono::duration_cast<Clock::duration>(std::chrono::duration<double>(duration_s));
  for (Conn& c : conns) send_request(c);
  std::vector<double> ms;
  long completed = 0;
  size_t outstanding = conns.size();
  char buf[65536];
  Response r;
  // CPU counters at the first poll wake-up inside the window and the first after it.
  std::optional<std::pair<ProcCounters, double>> cpu_from, cpu_to;
  MachineCpu machine_from, machine_to;
  Clock::time_point cpu_from_t, cpu_to_t;
  while (outstanding > 0) {
    if (poll(fds.data(), fds.size(), 30'000) <= 0) Die("status load: the daemon stopped answering");
    const auto woke = Clock::now();
    if (!cpu_from && woke >= measure_from) {
      cpu_from.emplace(ReadProc(daemon), ThreadCpuSeconds());
      machine_from = ReadMachine();
      cpu_from_t = woke;
    }
    if (!cpu_to && woke >= measure_to) {
      cpu_to.emplace(ReadProc(daemon), ThreadCpuSeconds());
      machine_to = ReadMachine();
      cpu_to_t = woke;
    }
    for (size_t i = 0; i < fds.size(); ++i) {
      if (!(fds[i].revents & (POLLIN | POLLHUP | POLLERR))) continue;
      Conn& c = conns[i];
      for (;;) {
        const ssize_t n = recv(c.fd, buf, sizeof buf, 0);
        if (n > 0) {
          c.in.append(buf, static_cast<size_t>(n));
          continue;
        }
        if (n < 0 && (errno == EAGAIN || errno == EWOULDBLOCK)) break;
        Die("status load: the daemon closed a connection");
      }
      while (TakeResponse(c.in, &r)) {
        const auto now = Clock::now();
        if (r.status != 200) Die("status: HTTP " + std::to_string(r.status));
        if (now >= measure_from && now <= measure_to) {
          ++completed;
          if (c.sent >= measure_from) ms.push_back(1e3 * Seconds(now - c.sent));
        }
        if (now < measure_to) {
          send_request(c);
        } else {
          --outstanding;
          fds[i].events = 0;
        }
      }
    }
  }
  for (Conn& c : conns) close(c.fd);
  StatusLoad out;
  out.per_s = static_cast<double>(completed) / duration_s;
  out.latency = Summarize(std::move(ms));
  if (cpu_from && cpu_to && completed > 0) {
    const double window = Seconds(cpu_to_t - cpu_from_t);
    const double daemon_cpu = cpu_to->first.cpu_s - cpu_from->first.cpu_s;
    out.daemon_cores = daemon_cpu / window;
    out.daemon_us_per_request = 1e6 * daemon_cpu / (out.per_s * window);
    out.client_us_per_request = 1e6 * (cpu_to->second - cpu_from->second) / (out.per_s * window);
    out.other_cores = OtherCores(machine_from, machine_to, cpu_from->first, cpu_to->first);
  }
  return out;
}

// ---------------------------------------------------------------------------

struct RunResult {
  ForecastResult idle, loaded;
  Latency reference;  // GET /v1/heartbeat: round trip and scheduling floor
  StatusLoad status;
  bool idle_quiet = true;              // no job running before and after the idle measurement
  bool loaded_throughout = true;       // the retrain ran before and after the loaded measurement
  std::string job_state_after;
};

void WaitForModel(HttpConnection& http, double timeout_s, const fs::path& log) {
  const auto deadline = Clock::now() + std::chrono::duration_cast<Clock::duration>(std::chrono::duration<double>(timeout_s));
  while (Clock::now() < deadline) {
    const std::string s = StatusBody(http);
    if (HasModel(s) && !CadenceRunning(s)) return;
    std::this_thread::sleep_for(std::chrono::milliseconds(50));
  }
  Die("no model after " + Fixed(timeout_s, 0) + " s; see " + log.string());
}

// One run: a fresh daemon on the prepared database, new data since the
// model, idle forecasts, status load, then forecasts under a running retrain.
RunResult RunOnce(const Options& o, const fs::path& dir, LorenzStream& stream, int io_threads, bool status_only) {
  RunResult out;
  DaemonProcess daemon(o.daemon, dir, o.iterations, io_threads, o.family);
  Ingest(daemon.ingest_port(), stream.Next(300));  // 3 s of data newer than the model: the retrain's chunk
  HttpConnection http(daemon.http_port());
  WaitForModel(http, 60, daemon.log());

  if (!status_only) {
    const bool before = CadenceRunning(StatusBody(http));
    out.idle = MeasureForecasts(http, o.steps, o.history, o.requests, 20, daemon.pid());
    out.reference = MeasureTrivial(http, o.requests);
    out.idle_quiet = !before && !CadenceRunning(StatusBody(http));
  }

  out.status = MeasureStatusLoad(daemon.http_port(), o.clients, o.warmup_s, o.duration_s, daemon.pid());
  if (status_only) return out;

  const Response posted = http.Request("POST", std::string("/v1/feeds/") + kFeed + "/retrain");
  std::smatch m;
  if (posted.status != 202 || !std::regex_search(posted.body, m, std::regex(R"("job":(\d+))"))) {
    Die("retrain: HTTP " + std::to_string(posted.status) + " " + posted.body);
  }
  const long job = std::stol(m[1]);
  for (int i = 0; i < 500 && JobState(http, job) == "queued"; ++i) std::this_thread::sleep_for(std::chrono::milliseconds(10));
  // Warm-up under load, then the check, then the timed requests, then the check.
  MeasureForecasts(http, o.steps, o.history, 0, 20);
  const bool running_before = JobState(http, job) == "running" && CadenceRunning(StatusBody(http));
  out.loaded = MeasureForecasts(http, o.steps, o.history, o.requests, 0, daemon.pid());
  out.job_state_after = JobState(http, job);
  const bool running_after = out.job_state_after == "running" && CadenceRunning(StatusBody(http));
  out.loaded_throughout = running_before && running_after;
  daemon.Stop();  // SIGTERM cancels the job; nothing half-trained is stored
  return out;
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
    else if (a == "--runs") o.runs = std::stoi(next());
    else if (a == "--requests") o.requests = std::stoi(next());
    else if (a == "--steps") o.steps = std::stoi(next());
    else if (a == "--clients") o.clients = std::stoi(next());
    else if (a == "--duration") o.duration_s = std::stod(next());
    else if (a == "--warmup") o.warmup_s = std::stod(next());
    else if (a == "--iterations") o.iterations = std::stoi(next());
    else if (a == "--compare-io-threads") o.compare_io_threads = std::stoi(next());
    else if (a == "--keep") o.keep = true;
    else if (a == "--family") o.family = next();
    else if (a == "--history") o.history = std::stoi(next());
    else if (a == "--help" || a == "-h") {
      std::cout <<
          "usage: api_bench [--daemon PATH] [--runs N] [--requests N] [--steps N] [--clients N]\n"
          "                 [--duration S] [--warmup S] [--iterations N] [--compare-io-threads N] [--keep]\n"
          "                 [--family neural|polynomial|auto] [--history N]\n"
          "Measures the HTTP API of a real lyapcastd over loopback, on a 3-channel Lorenz-63 feed\n"
          "(10 ms step) with the default 3-64-64-3 tanh model:\n"
          "  forecast   p50/p99/max latency of --requests (2000) sequential\n"
          "             GET /v1/feeds/lorenz/forecast?steps=--steps (1000) on one keep-alive\n"
          "             connection, with the daemon idle and while a retrain of --iterations\n"
          "             (50000) runs on one training thread (checked before and after)\n"
          "  status     GET /v1/feeds/lorenz/status requests/s and latency from --clients (16)\n"
          "             keep-alive connections in one client poll loop, --duration (5) s after\n"
          "             --warmup (1) s, with the daemon idle\n"
          "Each of --runs (3) runs starts a fresh daemon (default --io-threads) on a database\n"
          "holding a first model trained once at the start; the medians are reported. With\n"
          "--compare-io-threads N (default 1; 0 skips) the status load is measured again, --runs\n"
          "times, against a daemon started with --io-threads N.\n"
          "To attribute the time it also reports GET /v1/heartbeat latency on the forecast\n"
          "connection (round trip and scheduling noise), the daemon's CPU time and minor page\n"
          "faults (/proc/<pid>/stat) and the CPU other processes took meanwhile (/proc/stat).\n"
          "--daemon defaults to ../../daemon/lyapcastd next to this program; --keep keeps the\n"
          "temporary folder (databases, daemon logs). --family sets the feed's model.family (default\n"
          "neural; with auto the first model is the polynomial map on this clean feed and the retrain\n"
          "still trains the network, so it outlasts the measurement); --history N asks every\n"
          "forecast for a start fitted to N steps of stored samples (default 0: none).\n"
          "Targets: forecast p99 under 10 ms while\n"
          "retraining; status at least 5000 requests/s. Prints human lines, then one JSON line.\n";
      return 0;
    } else Die("unknown option " + a + " (see --help)");
  }
  if (!fs::exists(o.daemon)) Die("no daemon at " + o.daemon + " (use --daemon)");
  if (o.runs < 1 || o.requests < 1 || o.steps < 1 || o.clients < 1 || o.duration_s <= 0) Die("bad option value");
  if (o.family != "neural" && o.family != "polynomial" && o.family != "auto") Die("--family: neural, polynomial or auto");
  if (o.history < 0 || o.history > 1000) Die("--history: 0 to 1000");
  const fs::path root = fs::temp_directory_path() / ("lyapcast-api-bench-" + std::to_string(getpid()));
  const fs::path dir = root / "daemon";
  const std::string load_before = LoadAverage();

  // Data time: a 10 ms grid ending well before wall time (future-time check).
  const long long now_s = std::chrono::duration_cast<std::chrono::seconds>(
                              std::chrono::system_clock::now().time_since_epoch()).count();
  LorenzStream stream((now_s - 3600) * 1'000'000LL);

  // Setup: the first model, trained with few iterations so it comes quickly.
  {
    const auto t = Clock::now();
    DaemonProcess daemon(o.daemon, dir, o.first_iterations, 0, o.family);
    Ingest(daemon.ingest_port(), stream.Next(4000));  // 40 s of data
    HttpConnection http(daemon.http_port());
    WaitForModel(http, 120, daemon.log());
    const std::string status = StatusBody(http);
    std::smatch family;
    std::regex_search(status, family, std::regex(R"re("family":"(\w+)")re"));
    daemon.Stop();
    std::printf("setup: first model (%d iterations, model.family %s: serves %s) on 40 s of Lorenz-63 data in %.1f s\n",
                o.first_iterations, o.family.c_str(), family.size() > 1 ? family[1].str().c_str() : "?",
                Seconds(Clock::now() - t));
    std::fflush(stdout);
  }

  std::vector<RunResult> runs, compare;
  for (int r = 0; r < o.runs; ++r) {
    runs.push_back(RunOnce(o, dir, stream, 0, false));
    const RunResult& x = runs.back();
    std::printf("run %d: forecast idle p50 %.2f p99 %.2f max %.2f ms; retraining p50 %.2f p99 %.2f max %.2f ms "
                "(job running before and after: %s); heartbeat p99 %.2f ms; status %.0f/s p99 %.2f ms; "
                "other processes' CPU %.1f / %.1f / %.1f cores\n",
                r + 1, x.idle.latency.p50_ms, x.idle.latency.p99_ms, x.idle.latency.max_ms, x.loaded.latency.p50_ms,
                x.loaded.latency.p99_ms, x.loaded.latency.max_ms, x.loaded_throughout ? "yes" : "NO",
                x.reference.p99_ms, x.status.per_s, x.status.latency.p99_ms, x.idle.other_cores, x.loaded.other_cores,
                x.status.other_cores);
    std::fflush(stdout);
  }
  for (int r = 0; o.compare_io_threads > 0 && r < o.runs; ++r) {
    compare.push_back(RunOnce(o, dir, stream, o.compare_io_threads, true));
    std::printf("run %d, --io-threads %d: status %.0f/s p99 %.2f ms; other processes' CPU %.1f cores\n", r + 1,
                o.compare_io_threads, compare.back().status.per_s, compare.back().status.latency.p99_ms,
                compare.back().status.other_cores);
    std::fflush(stdout);
  }

  // Medians over runs, figure by figure.
  const auto med = [](const std::vector<RunResult>& rs, auto field) {
    std::vector<double> v;
    for (const RunResult& r : rs) v.push_back(field(r));
    return Median(v);
  };
  const auto latency = [&](const std::vector<RunResult>& rs, auto pick) {
    return Latency{med(rs, [&](const RunResult& r) { return pick(r).p50_ms; }),
                   med(rs, [&](const RunResult& r) { return pick(r).p99_ms; }),
                   med(rs, [&](const RunResult& r) { return pick(r).max_ms; })};
  };
  const auto latency_json = [](const Latency& l) {
    return R"({"p50_ms":)" + Fixed(l.p50_ms, 3) + R"(,"p99_ms":)" + Fixed(l.p99_ms, 3) + R"(,"max_ms":)" +
           Fixed(l.max_ms, 3) + "}";
  };
  const Latency idle = latency(runs, [](const RunResult& r) { return r.idle.latency; });
  const Latency loaded = latency(runs, [](const RunResult& r) { return r.loaded.latency; });
  const Latency live = latency(runs, [](const RunResult& r) { return r.reference; });
  const Latency status = latency(runs, [](const RunResult& r) { return r.status.latency; });
  const double idle_fb = med(runs, [](const RunResult& r) { return r.idle.first_byte_p50_ms; });
  const double loaded_fb = med(runs, [](const RunResult& r) { return r.loaded.first_byte_p50_ms; });
  const double idle_faults = med(runs, [](const RunResult& r) { return r.idle.faults_per_request; });
  const double loaded_faults = med(runs, [](const RunResult& r) { return r.loaded.faults_per_request; });
  const double idle_cpu = med(runs, [](const RunResult& r) { return r.idle.cpu_ms_per_request; });
  const double rate = med(runs, [](const RunResult& r) { return r.status.per_s; });
  const double idle_other = med(runs, [](const RunResult& r) { return r.idle.other_cores; });
  const double loaded_other = med(runs, [](const RunResult& r) { return r.loaded.other_cores; });
  const double status_other = med(runs, [](const RunResult& r) { return r.status.other_cores; });
  const double status_cores = med(runs, [](const RunResult& r) { return r.status.daemon_cores; });
  const double status_daemon_us = med(runs, [](const RunResult& r) { return r.status.daemon_us_per_request; });
  const double status_client_us = med(runs, [](const RunResult& r) { return r.status.client_us_per_request; });
  bool quiet = true, throughout = true;
  for (const RunResult& r : runs) {
    quiet = quiet && r.idle_quiet;
    throughout = throughout && r.loaded_throughout;
  }
  const bool forecast_met = loaded.p99_ms < kTargetForecastP99Ms;
  const bool status_met = rate >= kTargetStatusPerS;

  std::printf("forecast steps=%d (%zu-byte JSON body), %d sequential requests on one keep-alive connection, "
              "median of %d runs:\n",
              o.steps, runs.front().idle.body_bytes, o.requests, o.runs);
  std::printf("  daemon idle:      p50 %6.2f ms  p99 %6.2f ms  max %6.2f ms  (to first byte p50 %.2f ms; daemon "
              "%.2f ms CPU and %.0f minor page faults per request)\n",
              idle.p50_ms, idle.p99_ms, idle.max_ms, idle_fb, idle_cpu, idle_faults);
  std::printf("  retrain running:  p50 %6.2f ms  p99 %6.2f ms  max %6.2f ms  (to first byte p50 %.2f ms; %.0f minor "
              "page faults per request)\n",
              loaded.p50_ms, loaded.p99_ms, loaded.max_ms, loaded_fb, loaded_faults);
  std::printf("  meanwhile other processes on this machine used %.1f (idle) and %.1f (retraining) of %u cores\n",
              idle_other, loaded_other, std::thread::hardware_concurrency());
  std::printf("  the retrain (%d iterations, 1 training thread) was running before the first and after the last "
              "timed request in %s\n",
              o.iterations, throughout ? "every run" : "NOT every run (see --iterations)");
  if (!quiet) std::printf("  note: a job was running during an idle measurement\n");
  std::printf("  reference, GET /v1/heartbeat on the same connection: p50 %.2f ms  p99 %.2f ms  max %.2f ms\n",
              live.p50_ms, live.p99_ms, live.max_ms);
  std::printf("  target p99 < %.0f ms while retraining: %s\n", kTargetForecastP99Ms,
              forecast_met ? "met"
                           : ("MISSED by " + Fixed(loaded.p99_ms - kTargetForecastP99Ms, 2) + " ms (" +
                              Fixed(loaded.p99_ms / kTargetForecastP99Ms, 1) + "x the target)")
                                 .c_str());
  std::printf("status, %d keep-alive connections (one client thread), %g s after %g s warm-up, median of %d runs:\n",
              o.clients, o.duration_s, o.warmup_s, o.runs);
  std::printf("  daemon's default --io-threads: %6.0f requests/s  p50 %5.2f ms  p99 %5.2f ms\n", rate, status.p50_ms,
              status.p99_ms);
  std::printf("    the daemon used %.2f cores (%.0f us CPU per request), this client %.0f us per request; other "
              "processes %.1f cores\n",
              status_cores, status_daemon_us, status_client_us, status_other);
  Latency cmp_status;
  double cmp_rate = 0;
  if (!compare.empty()) {
    cmp_status = latency(compare, [](const RunResult& r) { return r.status.latency; });
    cmp_rate = med(compare, [](const RunResult& r) { return r.status.per_s; });
    std::printf("  --io-threads %d:                %6.0f requests/s  p50 %5.2f ms  p99 %5.2f ms\n",
                o.compare_io_threads, cmp_rate, cmp_status.p50_ms, cmp_status.p99_ms);
  }
  std::printf("  target >= %.0f requests/s: %s\n", kTargetStatusPerS,
              status_met ? "met"
                         : ("MISSED by " + Fixed(kTargetStatusPerS - rate, 0) + "/s (" +
                            Fixed(100 * (1 - rate / kTargetStatusPerS), 0) + " % short)")
                               .c_str());
  const std::string load_after = LoadAverage();
  std::printf("load average (1/5/15 min) at start %s, at end %s, on %u cores\n", load_before.c_str(),
              load_after.c_str(), std::thread::hardware_concurrency());

  std::ostringstream json;
  json << R"({"bench":"api","family":")" << o.family << R"(","history":)" << o.history << R"(,"runs":)" << o.runs << R"(,"load_average_start":")" << load_before
       << R"(","load_average_end":")" << load_after << R"(","forecast":{"steps":)" << o.steps << R"(,"requests":)"
       << o.requests << R"(,"body_bytes":)" << runs.front().idle.body_bytes << R"(,"idle":)" << latency_json(idle)
       << R"(,"idle_first_byte_p50_ms":)" << Fixed(idle_fb, 3) << R"(,"idle_daemon_cpu_ms_per_request":)"
       << Fixed(idle_cpu, 3) << R"(,"idle_page_faults_per_request":)" << Fixed(idle_faults, 1)
       << R"(,"retraining":)" << latency_json(loaded) << R"(,"retraining_first_byte_p50_ms":)" << Fixed(loaded_fb, 3)
       << R"(,"retraining_page_faults_per_request":)" << Fixed(loaded_faults, 1) << R"(,"retrain_iterations":)"
       << o.iterations << R"(,"retrain_running_throughout":)" << (throughout ? "true" : "false")
       << R"(,"health_live_reference":)" << latency_json(live) << R"(,"other_processes_cores":{"idle":)"
       << Fixed(idle_other, 2) << R"(,"retraining":)" << Fixed(loaded_other, 2) << "}" << R"(,"target_p99_ms":)" << kTargetForecastP99Ms
       << R"(,"target_met":)" << (forecast_met ? "true" : "false") << R"(},"status":{"clients":)" << o.clients
       << R"(,"duration_s":)" << o.duration_s << R"(,"default_io_threads":{"requests_per_s":)"
       << static_cast<long>(rate) << R"(,"latency":)" << latency_json(status) << R"(,"daemon_cores":)"
       << Fixed(status_cores, 2) << R"(,"daemon_us_per_request":)" << Fixed(status_daemon_us, 1)
       << R"(,"client_us_per_request":)" << Fixed(status_client_us, 1) << R"(,"other_processes_cores":)"
       << Fixed(status_other, 2) << "}";
  if (!compare.empty()) {
    json << R"(,"io_threads_)" << o.compare_io_threads << R"(":{"requests_per_s":)" << static_cast<long>(cmp_rate)
         << R"(,"latency":)" << latency_json(cmp_status) << "}";
  }
  json << R"(,"target_per_s":)" << kTargetStatusPerS << R"(,"target_met":)" << (status_met ? "true" : "false")
       << "}}";
  if (o.keep) {
    std::printf("kept %s\n", root.c_str());
  } else {
    fs::remove_all(root);
  }
  std::cout << json.str() << std::endl;
  return 0;
}
