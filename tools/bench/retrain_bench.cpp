// retrain_bench: what continual retraining costs and what it buys, on
// Lorenz-63 (sigma 10, rho 28, beta 8/3; docs/references.md "Systems"), time unit 1 s,
// model step 10 ms, channels x, y, z, model 3-64-64-3 tanh (config default).
//
//   build/tools/bench/retrain_bench [--runs 3] [--seed 1] [--quick] [--verbose] [--family neural]
//
// About 2.5 minutes on one core (--quick: about 1 minute).
//
// 1. Cost: wall time of one RunRetrain with retrain.iterations = 2000,
//    warm-started from an active model, lockstep (no time budget); median of
//    --runs fresh repetitions (own database each), and iterations per second.
// 2. Skill on a drifting stream: rho steps 28 -> 38 midway. The stream goes
//    into a SQLite window chunk by chunk in data time; RunRetrain runs at each
//    cadence point (NextRetrain) warm-started from the active version.
//    "One-time" is the first model, never retrained. Forecasts start every
//    Lyapunov time; each is scored by its valid prediction time (VPT,
//    docs/references.md "Forecast skill").
// 3. The same continual procedure when only every 5th sample arrives (50 ms
//    apart on the 10 ms model grid), with and without the velocity constraint:
//    RunRetrain's gap-aware path throughout (the increment scale from 5-step
//    increments, pairs through G^5, validation at the first target 5 steps
//    on, the velocity term at that target).
//
// Prints human-readable lines, then one line of JSON with every figure.
// Deterministic: fixed seeds, data time, lockstep retrains (wall times are the
// only figures that vary between runs). SQLite files live in a temporary
// folder that is removed when the program ends normally.
#include "core/eigen.h"  // first: see there

#include <fmt/format.h>

#include <algorithm>
#include <array>
#include <cerrno>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <map>
#include <memory>
#include <optional>
#include <string>
#include <utility>
#include <variant>
#include <vector>

#include "chaos/lyapunov.h"
#include "config/config.h"
#include "learn/flow_map.h"
#include "learn/forecast_model.h"
#include "learn/model_file.h"
#include "physics/dynamics.h"
#include "physics/integrators.h"
#include "schedule/cadence.h"
#include "schedule/retrain_data.h"
#include "schedule/retrain_job.h"
#include "store/model_registry.h"
#include "store/window_store.h"

namespace {

using namespace lyapcast;
namespace fs = std::filesystem;
using Clock = std::chrono::steady_clock;

constexpr Micros kStep{10'000};  // model step: 10 ms of data time
constexpr double kDt = 0.01;      // the same in model time units (1 s)
constexpr double kSigma = 10.0, kRho = 28.0, kBeta = 8.0 / 3.0;
// The drift: rho (the reduced Rayleigh number, i.e. how hard the convection
// cell is heated) steps from 28 to 38, as if an operator raised the heat
// input. 38 stays inside the chaotic regime (chaos sets in at 24.74, the
// first wide periodic windows lie near rho = 100), the attractor grows (z's
// mean moves from ~23.5 to ~33, about one standard deviation of z) and the
// leading exponent rises, so a model of the old regime is plainly wrong while
// the new regime can be learned from a few Lyapunov times of data. The step
// is small enough that RunRetrain's normalization check does not refit.
constexpr double kRhoAfter = 38.0;
constexpr double kVptThreshold = 0.5;      // docs/references.md "Forecast skill" (Vlachas et al. 2020)
constexpr double kMaxForecastLyapunov = 10;  // forecasts are cut here (counted as "capped")
constexpr int kSparseStride = 5;           // part 3: every 5th sample (50 ms apart)

// ---------------------------------------------------------------- basics

[[noreturn]] void Fail(const std::string& what) {
  std::fprintf(stderr, "retrain_bench: %s\n", what.c_str());
  std::exit(1);
}

template <typename T>
T Must(Result<T> r, const char* what) {
  if (!r.ok()) Fail(fmt::format("{}: {}", what, r.status().ToString()));
  return std::move(r).value();
}

void Must(const Status& s, const char* what) {
  if (!s.ok()) Fail(fmt::format("{}: {}", what, s.ToString()));
}

double ElapsedSeconds(Clock::time_point since) { return std::chrono::duration<double>(Clock::now() - since).count(); }

double Median(std::vector<double> v) {
  if (v.empty()) return std::nan("");
  std::sort(v.begin(), v.end());
  return v.size() % 2 ? v[v.size() / 2] : 0.5 * (v[v.size() / 2 - 1] + v[v.size() / 2]);
}

double Mean(const std::vector<double>& v) {
  if (v.empty()) return std::nan("");
  double s = 0;
  for (double x : v) s += x;
  return s / static_cast<double>(v.size());
}

// JSON has no NaN: unknown figures are null.
std::string Json(double v, int decimals = 4) { return std::isfinite(v) ? fmt::format("{:.{}f}", v, decimals) : "null"; }

DataTime TimeOf(std::size_t index) { return DataTime{} + static_cast<std::int64_t>(index) * kStep; }
std::size_t IndexAt(double seconds) { return static_cast<std::size_t>(std::llround(seconds / kDt)); }
// First sample index whose time is at or after t (t >= 0).
std::size_t FirstIndexFrom(DataTime t) {
  return static_cast<std::size_t>((t.time_since_epoch() + kStep - Micros(1)) / kStep);
}

// A fresh folder for the SQLite files, removed with its contents at exit.
class TempDir {
 public:
  TempDir() {
    std::string pattern = (fs::temp_directory_path() / "lyapcast-retrain-bench-XXXXXX").string();
    if (::mkdtemp(pattern.data()) == nullptr) Fail("cannot create a temporary folder: " + std::string(std::strerror(errno)));
    path_ = pattern;
  }
  ~TempDir() {
    std::error_code ec;
    fs::remove_all(path_, ec);
  }
  TempDir(const TempDir&) = delete;
  TempDir& operator=(const TempDir&) = delete;
  const fs::path& path() const { return path_; }

 private:
  fs::path path_;
};

struct Settings {
  int runs = 3;
  std::uint64_t seed = 1;
  bool quick = false;
  bool verbose = false;
  ModelFamily family = ModelFamily::kNeural;
};

// --family: every feed of the run fits this model family (set once by main
// before any feed is made).
ModelFamily g_family = ModelFamily::kNeural;

// ---------------------------------------------------------------- the feed

// Retraining as a plant engineer would set it for a process whose Lyapunov
// time is about 1 s: the default iteration budget, batch, learning rate,
// replay and validation shares; the cadence paced by the active model's
// exponent at 4 Lyapunov times (~4.4 s at rho 28) rather than the default 0.5
// (0.55 s), because one 2000-iteration retrain takes about a second of one
// core and must finish well inside its interval for the daemon to keep up in
// real time; min_interval 2 s and max_interval 30 s bound a wild estimate.
RetrainConfig PlantRetrain() {
  RetrainConfig r;
  r.lyapunov_fraction = 4.0;
  r.min_interval = 2 * kSecond;
  r.max_interval = 30 * kSecond;
  r.iterations = 2000;
  return r;
}

// Lorenz-63 with the nominal constants; the config knows the nominal physics,
// never the change. Constraints, when given, use these equations (rho 28).
FeedConfig LorenzFeed(std::vector<ConstraintConfig> constraints = {}) {
  FeedConfig f;
  f.id = "lorenz";
  f.channels = {"x", "y", "z"};
  f.step = kStep;
  DynamicsConfig d;
  d.time_unit = kSecond;
  d.equations = {{"x", "sigma*(y - x)"}, {"y", "x*(rho - z) - y"}, {"z", "x*y - beta*z"}};
  d.constants = {{"sigma", kSigma}, {"rho", kRho}, {"beta", kBeta}};
  d.constraints = std::move(constraints);
  f.dynamics = std::move(d);
  f.retrain = PlantRetrain();
  f.model.family = g_family;
  return f;
}

// ---------------------------------------------------------------- simulation

// Noise-free states every 10 ms from t = 0, after a 20-time-unit transient,
// by the project's RK4 at h = 1e-3 (checked against SciPy's DOP853 in
// tests/physics). rho switches to rho_after from sample `change` on
// (`change` >= size: no change).
struct Truth {
  std::vector<std::array<double, 3>> x;
  std::size_t change = 0;
  std::size_t size() const { return x.size(); }
};

Truth Simulate(std::size_t n, std::size_t change, double rho_after) {
  Dynamics d = Must(Dynamics::Compile(ToDynamicsSpec(LorenzFeed()).value()), "compiling Lorenz-63");
  const Rhs f = [&d](const double* s, double* dx) { d.Eval(s, dx); };
  Eigen::VectorXd x(3);
  x << 1, 1, 1;
  x = IntegrateRk4(f, x, 20.0, 1e-3);
  Truth t;
  t.change = change;
  t.x.reserve(n);
  for (std::size_t i = 0; i < n; ++i) {
    if (i == change) Must(d.SetConstant("rho", rho_after), "changing rho");
    t.x.push_back({x[0], x[1], x[2]});
    x = IntegrateRk4(f, x, kDt, 1e-3);
  }
  return t;
}

// Largest exponent (per second) of the true system at `rho`, by the QR method
// on the RK4 tangent map (lib/chaos, checked against Sprott's 0.9056 at 28).
double TrueLambda(double rho, long steps) {
  FeedConfig feed = LorenzFeed();
  for (auto& [name, value] : feed.dynamics->constants) {
    if (name == "rho") value = rho;
  }
  const Dynamics d = Must(Dynamics::Compile(ToDynamicsSpec(feed).value()), "compiling Lorenz-63");
  Eigen::VectorXd x0(3);
  x0 << 1, 1, 1;
  SpectrumOptions o;
  o.exponents = 1;
  o.transient_steps = 2000;
  o.steps = steps;
  return Must(LyapunovSpectrum(FlowMapStep(d, kDt), x0, o), "true Lyapunov exponent").exponents[0];
}

// ---------------------------------------------------------------- store

// A window of one feed: the writer's, a reader's and the registry's own
// connections, as in the daemon.
struct Db {
  std::unique_ptr<WindowStore> writer, reader;
  std::unique_ptr<ModelRegistry> registry;
};

std::unique_ptr<WindowStore> OpenStore(const fs::path& file) {
  auto s = Must(WindowStore::Open(StoreOptions{file, false, 5000}), "opening the window");
  Must(s->RegisterFeeds({{"lorenz", {"x", "y", "z"}, kStep}}), "registering the feed");
  return s;
}

Db OpenDb(const fs::path& file) {
  Db db;
  db.writer = OpenStore(file);
  db.reader = OpenStore(file);
  db.registry = std::make_unique<ModelRegistry>(OpenStore(file));
  return db;
}

// Stores the samples with index in [from, to) that the instrument delivers
// (every `stride`-th), in one transaction.
void Insert(WindowStore& writer, const Truth& truth, std::size_t from, std::size_t to, int stride) {
  std::vector<FeedSample> batch;
  for (std::size_t i = from; i < std::min(to, truth.size()); ++i) {
    if (i % static_cast<std::size_t>(stride) != 0) continue;
    const auto& x = truth.x[i];
    batch.push_back({0, Sample{TimeOf(i), {x[0], x[1], x[2]}, 0}});
  }
  if (batch.empty()) return;
  std::vector<InsertOutcome> outcomes;
  Must(writer.InsertBatch(batch, &outcomes), "inserting samples");
}

// One job as the scheduler runs it: the window read once, then RunRetrain.
RetrainOutcome Retrain(Db& db, const FeedConfig& feed, DataTime until, const std::optional<ModelRecord>& active,
                       std::uint64_t seed, const char* what) {
  const std::vector<Sample> window =
      Must(ReadWindow(*db.reader, 0, until - StorageConfig{}.retention, until), "reading the window");
  RetrainInput in;
  in.feed = &feed;
  in.until = until;
  in.window = window;
  if (active) in.active = Must(MakeActiveModel(*active), "decoding the active model");
  in.seed = seed;
  in.lockstep = true;
  return Must(RunRetrain(*db.registry, in), what);
}

// The model as the daemon serves it (float).
std::shared_ptr<const ForecastModel> ModelOf(const ModelRecord& record) {
  ModelFileContents c = Must(Deserialize(record.file), "reading a model file");
  return Must(MakeForecastModel(c, ModelScalar::kFloat32), "serving a model file");
}

// ---------------------------------------------------------------- part 1

struct WarmTiming {
  double wall_s = 0;  // the whole RunRetrain call
  double fit_s = 0;   // of which Fit
  int iterations = 0;
  std::string verdict;
};

// 60 s of window, a cold first model (500 iterations: only its weights
// matter here), 10 s of new data, then the timed 2000-iteration warm start.
WarmTiming TimeWarmRetrain(const fs::path& file, const Truth& truth, std::uint64_t seed) {
  Db db = OpenDb(file);
  const std::size_t window = IndexAt(60), fresh = IndexAt(70);
  Insert(*db.writer, truth, 0, window, 1);
  FeedConfig cold = LorenzFeed();
  cold.retrain.iterations = 500;
  auto first = Retrain(db, cold, TimeOf(window), std::nullopt, seed, "cold start");
  if (first.verdict != RetrainVerdict::kPromoted) Fail("part 1 cold start not promoted: " + first.reason);

  Insert(*db.writer, truth, window, fresh, 1);
  const FeedConfig warm = LorenzFeed();  // iterations 2000
  auto active = Must(db.registry->Active(0), "reading the active model");
  const auto started = Clock::now();
  auto out = Retrain(db, warm, TimeOf(fresh), active, seed + 1, "warm start");
  WarmTiming t;
  t.wall_s = ElapsedSeconds(started);
  t.fit_s = out.fit.seconds;
  t.iterations = out.fit.iterations;
  t.verdict = RetrainVerdictName(out.verdict);
  return t;
}

// ---------------------------------------------------------------- continual retraining

// The data-time layout of the drifting stream.
struct StreamPlan {
  double first_s = 60;    // commissioning data: the first (and one-time) model is trained on [0, first_s)
  double change_s = 120;  // rho steps here
  double end_s = 240;
  int cold_iterations = 8000;  // the first model's budget (a one-off, so more than a retrain's)
};

// A model version and the data time from which it was served.
struct Served {
  DataTime from{};
  std::int64_t version = 0;
  std::shared_ptr<const ForecastModel> model;
};

struct ContinualRun {
  std::vector<Served> timeline;  // [0] is the first model, the one-time baseline
  std::string first_model_note;  // how the first model came about
  int retrains = 0;
  std::map<std::string, int> verdicts;             // by verdict name
  std::map<std::string, std::string> first_reason;  // an example reason per verdict
  std::vector<double> intervals_before_s, intervals_after_s;
  int max_interval_fallbacks = 0;  // intervals set by max_interval (exponent not positive, or tiny)
  double retrain_wall_s = 0;
  std::string cadence_example;  // the first NextRetrain reason
};

// The first model: RunRetrain's cold start on the commissioning data (with
// the larger one-off budget). Without one there is nothing to measure.
std::string FirstModel(Db& db, const FeedConfig& feed, const StreamPlan& plan, std::uint64_t seed) {
  FeedConfig cold = feed;
  cold.retrain.iterations = plan.cold_iterations;
  const DataTime until = TimeOf(IndexAt(plan.first_s));
  auto out = Retrain(db, cold, until, std::nullopt, seed, "cold start");
  if (out.verdict != RetrainVerdict::kPromoted) {
    Fail(fmt::format("RunRetrain cold start on [0, {:g}s) gave no model ({}: {})", plan.first_s,
                     RetrainVerdictName(out.verdict), out.reason));
  }
  return fmt::format("RunRetrain cold start, {} iterations: {}", out.fit.iterations, out.reason);
}

// Feeds the stream chunk by chunk in data time and retrains at every cadence
// point, warm-starting from the active version; a promoted version is served
// from the data time it was trained up to (lockstep: no compute latency).
ContinualRun RunContinual(const fs::path& file, const FeedConfig& feed, const Truth& truth, const StreamPlan& plan,
                          int stride, double nominal_lambda, const Settings& settings) {
  Db db = OpenDb(file);
  const std::size_t first = IndexAt(plan.first_s);
  const DataTime change = TimeOf(truth.change), end = TimeOf(truth.size());
  Insert(*db.writer, truth, 0, first, stride);
  ContinualRun run;
  run.first_model_note = FirstModel(db, feed, plan, settings.seed);
  auto active = Must(db.registry->Active(0), "reading the active model");
  run.timeline.push_back({TimeOf(first), active->version, ModelOf(*active)});

  DataTime since = TimeOf(first);
  for (std::uint64_t k = 1;; ++k) {
    // As the daemon would: the active model's exponent and the known
    // dynamics' (nominal rho); NextRetrain paces by the larger.
    LyapunovEstimates estimates;
    estimates.model = active->lambda_max;
    estimates.dynamics = nominal_lambda;
    const CadenceDecision next = NextRetrain(feed.retrain, estimates, true, since);
    if (run.cadence_example.empty()) run.cadence_example = next.reason;
    if (next.due > end) break;
    Insert(*db.writer, truth, FirstIndexFrom(since), FirstIndexFrom(next.due), stride);
    const auto started = Clock::now();
    auto out = Retrain(db, feed, next.due, *active, settings.seed + k, "retrain");
    run.retrain_wall_s += ElapsedSeconds(started);
    ++run.retrains;
    (since < change ? run.intervals_before_s : run.intervals_after_s).push_back(Seconds(next.interval));
    if (next.interval == feed.retrain.max_interval) ++run.max_interval_fallbacks;
    const std::string verdict = RetrainVerdictName(out.verdict);
    ++run.verdicts[verdict];
    run.first_reason.emplace(verdict, out.reason);
    if (settings.verbose) {
      const std::string lambda = out.lambda_max ? fmt::format("{:.3f}/s", *out.lambda_max) : "?";
      std::printf("    t=%7.2fs  interval %5.2fs  %-9s candidate lambda %-8s %s\n", ToEpochSeconds(next.due),
                  Seconds(next.interval), verdict.c_str(), lambda.c_str(), out.reason.c_str());
    }
    if (out.verdict == RetrainVerdict::kPromoted) {
      active = Must(db.registry->Active(0), "reading the active model");
      run.timeline.push_back({next.due, active->version, ModelOf(*active)});
    }
    since = next.due;
  }
  return run;
}

// ---------------------------------------------------------------- forecast skill

// A stretch of the stream with one set of dynamics.
struct Segment {
  std::size_t begin = 0, end = 0;  // sample indices
  double lyapunov_time_s = 0;      // 1 / lambda_max of the true system there
  std::array<double, 3> stddev{};  // of the true data in the segment
};

Segment MakeSegment(const Truth& truth, std::size_t begin, std::size_t end, double lambda) {
  Segment s{begin, end, 1.0 / lambda, {}};
  for (int c = 0; c < 3; ++c) {
    double sum = 0, sum2 = 0;
    for (std::size_t i = begin; i < end; ++i) {
      sum += truth.x[i][c];
      sum2 += truth.x[i][c] * truth.x[i][c];
    }
    const double n = static_cast<double>(end - begin);
    s.stddev[c] = std::sqrt((sum2 - sum * sum / n) / (n - 1));
  }
  return s;
}

std::size_t HorizonSteps(const Segment& s) {
  return static_cast<std::size_t>(std::ceil(kMaxForecastLyapunov * s.lyapunov_time_s / kDt));
}

// Forecast starts every Lyapunov time, on delivered samples, such that the
// whole horizon stays inside the segment (never across the change).
std::vector<std::size_t> ForecastStarts(const Segment& s, int stride) {
  std::vector<std::size_t> starts;
  const auto stride_u = static_cast<std::size_t>(stride);
  for (double t = static_cast<double>(s.begin) * kDt;; t += s.lyapunov_time_s) {
    std::size_t i = IndexAt(t);
    i = (i + stride_u - 1) / stride_u * stride_u;  // the next sample that arrived
    if (i + HorizonSteps(s) >= s.end) break;
    starts.push_back(i);
  }
  return starts;
}

// VPT in Lyapunov times: the data time until sqrt(mean_c((x_c - xhat_c) /
// std_c)^2) first exceeds 0.5, free-running the model from the observed state.
double ValidPredictionTime(const ForecastModel& model, const Truth& truth, std::size_t start, const Segment& s,
                           bool* capped) {
  const std::size_t horizon = HorizonSteps(s);
  // The whole horizon, then the first step past the threshold: the same
  // answer as stopping there, for a little more work.
  const Eigen::VectorXd x0 = Eigen::Map<const Eigen::VectorXd>(truth.x[start].data(), 3);
  const FreeRun run = Rollout(model, x0, static_cast<std::int64_t>(horizon));
  for (std::size_t k = 1; k <= horizon; ++k) {
    double e2 = 0;
    for (int c = 0; c < 3; ++c) {
      const double e = (run.states(c, static_cast<Eigen::Index>(k - 1)) - truth.x[start + k][c]) / s.stddev[c];
      e2 += e * e / 3.0;
    }
    if (!(std::sqrt(e2) <= kVptThreshold)) {  // NaN (a blown-up run) counts as exceeded
      *capped = false;
      return static_cast<double>(k) * kDt / s.lyapunov_time_s;
    }
  }
  *capped = true;
  return static_cast<double>(horizon) * kDt / s.lyapunov_time_s;
}

// The version served at data time t: the newest one activated at or before t.
const Served& ServedAt(const std::vector<Served>& timeline, DataTime t) {
  const Served* pick = &timeline.front();
  for (const Served& s : timeline) {
    if (s.from <= t) pick = &s;
  }
  return *pick;
}

struct Skill {
  std::vector<double> vpt;
  int capped = 0;
  double mean() const { return Mean(vpt); }
  double median() const { return Median(vpt); }
};

struct SegmentSkill {
  Skill one_time, continual;
  Skill one_time_late, continual_late;  // second half of the segment's forecasts
};

SegmentSkill ScoreSegment(const ContinualRun& run, const Truth& truth, const Segment& s, int stride) {
  SegmentSkill out;
  const std::vector<std::size_t> starts = ForecastStarts(s, stride);
  for (std::size_t n = 0; n < starts.size(); ++n) {
    const std::size_t i = starts[n];
    const bool late = 2 * n >= starts.size();
    bool capped = false;
    const double one = ValidPredictionTime(*run.timeline.front().model, truth, i, s, &capped);
    out.one_time.vpt.push_back(one);
    out.one_time.capped += capped;
    if (late) out.one_time_late.vpt.push_back(one);
    const double cont = ValidPredictionTime(*ServedAt(run.timeline, TimeOf(i)).model, truth, i, s, &capped);
    out.continual.vpt.push_back(cont);
    out.continual.capped += capped;
    if (late) out.continual_late.vpt.push_back(cont);
  }
  return out;
}

struct DriftResult {
  ContinualRun run;
  SegmentSkill before, after;
  double wall_s = 0;
};

DriftResult RunDrift(const fs::path& file, const FeedConfig& feed, const Truth& truth, const StreamPlan& plan,
                     int stride, const Segment& before, const Segment& after, double nominal_lambda,
                     const Settings& settings) {
  const auto started = Clock::now();
  DriftResult r;
  r.run = RunContinual(file, feed, truth, plan, stride, nominal_lambda, settings);
  r.before = ScoreSegment(r.run, truth, before, stride);
  r.after = ScoreSegment(r.run, truth, after, stride);
  r.wall_s = ElapsedSeconds(started);
  return r;
}

// ---------------------------------------------------------------- reporting

std::string SkillLine(const char* name, const Skill& s) {
  return fmt::format("{:<10} mean {:5.2f}  median {:5.2f}  (n {}, capped at {:g}: {})", name, s.mean(), s.median(),
                     s.vpt.size(), kMaxForecastLyapunov, s.capped);
}

void PrintRun(const DriftResult& r) {
  const ContinualRun& run = r.run;
  std::printf("    first model: %s\n", run.first_model_note.c_str());
  std::printf("    cadence: %s\n", run.cadence_example.c_str());
  std::string verdicts;
  for (const auto& [v, n] : run.verdicts) verdicts += fmt::format("{}{} {}", verdicts.empty() ? "" : ", ", n, v);
  std::printf("    %d retrains (%s); mean interval %.2fs before the change, %.2fs after (%d set by max_interval: "
              "no positive exponent, or a tiny one); %.1fs of retraining (wall), %.1fs for the whole part\n",
              run.retrains, verdicts.c_str(), Mean(run.intervals_before_s), Mean(run.intervals_after_s),
              run.max_interval_fallbacks, run.retrain_wall_s, r.wall_s);
  for (const auto& [v, reason] : run.first_reason) std::printf("      e.g. %s: %s\n", v.c_str(), reason.c_str());
  std::printf("    VPT in Lyapunov times, before the change:\n      %s\n      %s\n",
              SkillLine("one-time", r.before.one_time).c_str(), SkillLine("continual", r.before.continual).c_str());
  std::printf("    after the change:\n      %s\n      %s\n", SkillLine("one-time", r.after.one_time).c_str(),
              SkillLine("continual", r.after.continual).c_str());
  std::printf("    after the change, second half of the forecasts (adapted): one-time mean %.2f, continual mean "
              "%.2f\n",
              r.after.one_time_late.mean(), r.after.continual_late.mean());
}

std::string SkillJson(const Skill& s) {
  return fmt::format(R"({{"mean":{},"median":{},"n":{},"capped":{}}})", Json(s.mean(), 3), Json(s.median(), 3),
                     s.vpt.size(), s.capped);
}

std::string RunJson(const DriftResult& r) {
  const double ratio = r.after.continual.mean() / r.after.one_time.mean();
  return fmt::format(
      R"({{"retrains":{},"max_interval_fallbacks":{},"promoted":{},"rejected":{},"not_enough_data":{},"mean_interval_before_s":{},)"
      R"("mean_interval_after_s":{},"retrain_wall_s":{},"wall_s":{},"before":{{"one_time":{},"continual":{}}},)"
      R"("after":{{"one_time":{},"continual":{}}},"after_late_mean":{{"one_time":{},"continual":{}}},)"
      R"("after_ratio_continual_vs_one_time":{}}})",
      r.run.retrains, r.run.max_interval_fallbacks, r.run.verdicts.count("promoted") ? r.run.verdicts.at("promoted") : 0,
      r.run.verdicts.count("rejected") ? r.run.verdicts.at("rejected") : 0,
      r.run.verdicts.count("not_enough_data") ? r.run.verdicts.at("not_enough_data") : 0,
      Json(Mean(r.run.intervals_before_s), 3), Json(Mean(r.run.intervals_after_s), 3), Json(r.run.retrain_wall_s, 2),
      Json(r.wall_s, 2), SkillJson(r.before.one_time), SkillJson(r.before.continual), SkillJson(r.after.one_time),
      SkillJson(r.after.continual), Json(r.after.one_time_late.mean(), 3), Json(r.after.continual_late.mean(), 3),
      Json(ratio, 3));
}

bool SameWeights(const ContinualRun& a, const ContinualRun& b) {
  if (a.timeline.size() != b.timeline.size()) return false;
  for (std::size_t i = 0; i < a.timeline.size(); ++i) {
    const FlowMap<float>* na = NeuralNetworkOf<float>(*a.timeline[i].model);
    const FlowMap<float>* nb = NeuralNetworkOf<float>(*b.timeline[i].model);
    if (na == nullptr || nb == nullptr || na->parameters() != nb->parameters()) return false;
  }
  return true;
}

void PrintHelp() {
  std::printf(
      "retrain_bench: cost and forecast skill of continual retraining (Lorenz-63, rho 28 -> 38)\n\n"
      "  retrain_bench [--runs N] [--seed S] [--quick] [--verbose] [--family F]\n\n"
      "  --runs N     repetitions of the timed 2000-iteration warm start (median; default 3)\n"
      "  --seed S     base seed of every training job (default 1)\n"
      "  --quick      a ~1 minute smoke run: 1 run, a shorter stream, smaller first-model budget\n"
      "  --verbose    one line per retrain\n"
      "  --family F   model.family of every retrain: neural (default), polynomial or auto\n\n"
      "Prints human-readable lines, then one JSON line. Run on a quiet machine.\n");
}

bool ParseArgs(int argc, char** argv, Settings* s) {
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    const bool has_value = i + 1 < argc;
    if (a == "--help" || a == "-h") {
      PrintHelp();
      std::exit(0);
    } else if (a == "--quick") {
      s->quick = true;
    } else if (a == "--verbose") {
      s->verbose = true;
    } else if (a == "--runs" && has_value) {
      s->runs = std::atoi(argv[++i]);
    } else if (a == "--seed" && has_value) {
      s->seed = std::strtoull(argv[++i], nullptr, 10);
    } else if (a == "--family" && has_value) {
      const std::string f = argv[++i];
      if (f == "neural") {
        s->family = ModelFamily::kNeural;
      } else if (f == "polynomial") {
        s->family = ModelFamily::kPolynomial;
      } else if (f == "auto") {
        s->family = ModelFamily::kAuto;
      } else {
        std::fprintf(stderr, "retrain_bench: --family '%s': neural, polynomial or auto\n", f.c_str());
        return false;
      }
    } else {
      std::fprintf(stderr, "retrain_bench: unknown or incomplete argument '%s' (see --help)\n", a.c_str());
      return false;
    }
  }
  if (s->runs < 1) {
    std::fprintf(stderr, "retrain_bench: --runs must be at least 1\n");
    return false;
  }
  return true;
}

}  // namespace

int main(int argc, char** argv) {
  Settings settings;
  if (!ParseArgs(argc, argv, &settings)) return 2;
  g_family = settings.family;
  if (settings.quick) settings.runs = 1;
  const auto started = Clock::now();
  TempDir dir;
  StreamPlan plan;
  // Quick: 40 s of commissioning data is the least that gives the sparse arm
  // (every 5th sample) RunRetrain's 500 training pairs.
  if (settings.quick) plan = StreamPlan{40, 70, 110, 3000};

  // ---- 1. cost of a warm-start retrain
  std::printf("model.family %s\n", ModelFamilyName(settings.family));
  std::printf("1. warm-start RunRetrain, 2000 iterations, lockstep (60 s window + 10 s new data, 3-64-64-3 tanh, "
              "batch 256, rollout 4; a polynomial fit refits on the whole window), %d run(s):\n",
              settings.runs);
  const Truth steady = Simulate(IndexAt(70), IndexAt(70), kRho);
  std::vector<double> walls, fits;
  for (int r = 0; r < settings.runs; ++r) {
    const WarmTiming t = TimeWarmRetrain(dir.path() / fmt::format("warm{}.db", r), steady, settings.seed);
    std::printf("   run %d: %.3fs wall (fit %.3fs, %d iterations, %s)\n", r + 1, t.wall_s, t.fit_s, t.iterations,
                t.verdict.c_str());
    walls.push_back(t.wall_s);
    fits.push_back(t.fit_s);
  }
  const double wall = Median(walls), fit = Median(fits);
  std::printf("   median %.3fs wall = %.0f iterations/s overall; fit alone %.3fs = %.0f iterations/s (the rest: "
              "window read, validation, the candidate's Lyapunov estimate, registry)\n",
              wall, 2000 / wall, fit, 2000 / fit);

  // ---- the drifting stream and its true Lyapunov times
  const long lyap_steps = settings.quick ? 10000 : 50000;
  const double lambda_before = TrueLambda(kRho, lyap_steps), lambda_after = TrueLambda(kRhoAfter, lyap_steps);
  const Truth drift = Simulate(IndexAt(plan.end_s), IndexAt(plan.change_s), kRhoAfter);
  const Segment before = MakeSegment(drift, IndexAt(plan.first_s), drift.change, lambda_before);
  const Segment after = MakeSegment(drift, drift.change, drift.size(), lambda_after);
  std::printf("\nstream: Lorenz-63 noise-free, 10 ms samples, rho %.0f on [0, %.0fs), %.0f on [%.0fs, %.0fs); first "
              "model trained on [0, %.0fs)\n",
              kRho, plan.change_s, kRhoAfter, plan.change_s, plan.end_s, plan.first_s);
  std::printf("   true lambda_max %.4f/s (T = %.3fs) at rho %.0f (Sprott: 0.9056), %.4f/s (T = %.3fs) at rho %.0f\n",
              lambda_before, 1 / lambda_before, kRho, lambda_after, 1 / lambda_after, kRhoAfter);
  std::printf("   retrain: iterations 2000, batch 256, lr 1e-3, replay 0.3, validation 0.2, promote_tolerance 0.05, "
              "cadence NextRetrain on the larger of the model's and the dynamics' exponent, lyapunov_fraction 4, min 2s, "
              "max 30s; first model "
              "%d iterations\n",
              plan.cold_iterations);
  std::printf("   forecasts every T from delivered samples, horizon up to %.0f T, never across the change; VPT: "
              "normalized error > %.1f (std of each segment)\n",
              kMaxForecastLyapunov, kVptThreshold);

  // ---- 2. skill on the drifting stream
  std::printf("\n2. continual vs one-time, every sample delivered:\n");
  const DriftResult full =
      RunDrift(dir.path() / "drift.db", LorenzFeed(), drift, plan, 1, before, after, lambda_before, settings);
  PrintRun(full);
  const double ratio = full.after.continual.mean() / full.after.one_time.mean();
  const double ratio_median = full.after.continual.median() / full.after.one_time.median();
  std::printf("   after the change continual / one-time = %.2fx (mean), %.2fx (median); target >= 2x: %s\n", ratio,
              ratio_median,
              ratio >= 2 ? "MET" : fmt::format("MISSED by {:.2f}x (mean {:.0f}% of the target)", 2 - ratio, 50 * ratio).c_str());

  // ---- 3. every 5th sample, with and without the velocity constraint
  std::printf("\n3. every %dth sample (50 ms apart on the 10 ms grid; model.max_gap %d >= %d), same procedure; the "
              "constraint's dynamics use the configured nominal rho = %.0f, not the changed %.0f:\n",
              kSparseStride, FeedConfig{}.model.max_gap, kSparseStride, kRho, kRhoAfter);
  ConstraintConfig velocity;  // weight 1, anneal mid 0.5 width 0.05 (config defaults)
  velocity.kind = ConstraintKind::kVelocity;
  std::printf("  without constraints:\n");
  const DriftResult plain = RunDrift(dir.path() / "sparse_plain.db", LorenzFeed(), drift, plan, kSparseStride, before,
                                     after, lambda_before, settings);
  PrintRun(plain);
  std::printf("  with the velocity constraint (weight 1, anneal mid 0.5, width 0.05):\n");
  const DriftResult constrained = RunDrift(dir.path() / "sparse_velocity.db", LorenzFeed({velocity}), drift, plan,
                                           kSparseStride, before, after, lambda_before, settings);
  PrintRun(constrained);
  if (plain.run.verdicts.count("promoted") == 0 && constrained.run.verdicts.count("promoted") == 0) {
    std::printf("   no warm candidate was promoted in either arm, so \"continual\" served the first model "
                "throughout\n");
  }
  const bool identical = SameWeights(plain.run, constrained.run);
  std::printf("   the two arms' served models are %s\n",
              identical ? "BIT-IDENTICAL: the velocity term never acted" : "different");

  const double total = ElapsedSeconds(started);
  std::printf("\ntotal wall time %.1fs\n", total);
  std::printf(
      R"({"bench":"retrain","family":"%s","quick":%s,"runs":%d,"seed":%llu,"warm_retrain":{"iterations":2000,"wall_s":%s,)"
      R"("fit_s":%s,"iterations_per_s":%s,"fit_iterations_per_s":%s},"lambda_before":%s,"lambda_after":%s,)"
      R"("rho_before":%.0f,"rho_after":%.0f,"drift":%s,"target_ratio":2.0,"target_met":%s,"sparse_stride":%d,)"
      R"("sparse_plain":%s,"sparse_velocity":%s,"sparse_arms_identical":%s,"total_wall_s":%s})"
      "\n",
      ModelFamilyName(settings.family), settings.quick ? "true" : "false", settings.runs,
      static_cast<unsigned long long>(settings.seed),
      Json(wall, 3).c_str(), Json(fit, 3).c_str(), Json(2000 / wall, 0).c_str(), Json(2000 / fit, 0).c_str(),
      Json(lambda_before).c_str(), Json(lambda_after).c_str(), kRho, kRhoAfter, RunJson(full).c_str(),
      ratio >= 2 ? "true" : "false", kSparseStride, RunJson(plain).c_str(), RunJson(constrained).c_str(),
      identical ? "true" : "false", Json(total, 1).c_str());
  return 0;
}
