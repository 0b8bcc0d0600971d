// train_bench: training steps per second of the flow-map network against
// PyTorch running the identical step in the same run, the achieved GFLOP/s
// against this core's FP32 peak (an FMA loop measured here), and the
// relative cost of each physics constraint in a full trainer iteration.
//
//   build/tools/bench/train_bench [--steps 2000] [--runs 5] [--python /usr/bin/python3]
//
// Network 3-64-64-3 tanh, batch 256, float32; a step is forward, MSE,
// backward, AdamW. One lyapcast training job uses one thread; the figure
// "2 jobs" runs two jobs at once (training.threads: 2) and sums their rates.
// PyTorch runs with torch.set_num_threads(2). Prints human lines, then one
// line of JSON.
#include <immintrin.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <string>
#include <thread>
#include <vector>

#include "learn/adam.h"
#include "learn/mlp.h"
#include "learn/pairs.h"
#include "learn/trainer.h"
#include "physics/dynamics.h"
#include "physics/integrators.h"

namespace {

using namespace lyapcast;
using Clock = std::chrono::steady_clock;

double Median(std::vector<double> v) {
  std::sort(v.begin(), v.end());
  return v.size() % 2 ? v[v.size() / 2] : 0.5 * (v[v.size() / 2 - 1] + v[v.size() / 2]);
}

double Seconds(Clock::time_point since) { return std::chrono::duration<double>(Clock::now() - since).count(); }

// Steps per second of the bare network step, one thread.
double NetworkSteps(int steps) {
  Mlp<float> net({3, 64, 64, 3}, Activation::kTanh);
  net.InitRandom(1);
  MlpCache<float> cache;
  MlpGrads<float> grads(net.layout());
  AdamWOptions o;
  o.weight_decay = 0;
  AdamW<float> adam(net.parameters().size(), o);
  const Eigen::MatrixXf x = Eigen::MatrixXf::Random(3, 256), y = Eigen::MatrixXf::Random(3, 256);
  Eigen::MatrixXf out, dy;
  const auto step = [&] {
    net.Forward(x, &out, &cache);
    dy = (2.0f / static_cast<float>(out.size())) * (out - y);
    grads.SetZero();
    net.Backward(cache, dy, &grads, nullptr);
    adam.Step(net.parameters(), grads.flat(), 1e-3);
  };
  for (int i = 0; i < 200; ++i) step();
  const auto t = Clock::now();
  for (int i = 0; i < steps; ++i) step();
  return steps / Seconds(t);
}

// FP32 peak of one core: 12 independent FMA chains (enough to cover the FMA
// latency on two ports) on the widest vectors the CPU has, chosen at run
// time so the portable build reports the same hardware peak. noinline and
// written out per width: inlined into main, GCC stored the accumulators to
// the stack on every iteration, which measures store bandwidth instead.
constexpr long kFmaIterations = 50'000'000;
constexpr int kChains = 12;

double Gflops(int lanes, double seconds) { return 2.0 * lanes * kChains * static_cast<double>(kFmaIterations) / seconds / 1e9; }

[[gnu::noinline, gnu::target("avx512f")]] double FmaPeak512() {
  __m512 acc[kChains];
  for (int i = 0; i < kChains; ++i) acc[i] = _mm512_set1_ps(1.0f + 1e-3f * static_cast<float>(i));
  const __m512 b = _mm512_set1_ps(0.999999f), c = _mm512_set1_ps(1e-7f);
  const auto t = Clock::now();
  for (long i = 0; i < kFmaIterations; ++i) {
#pragma GCC unroll 16
    for (int k = 0; k < kChains; ++k) acc[k] = _mm512_fmadd_ps(acc[k], b, c);
  }
  const double s = Seconds(t);
  alignas(64) float lanes[16];
  float sink = 0;
  for (int k = 0; k < kChains; ++k) {
    _mm512_store_ps(lanes, acc[k]);
    sink += lanes[0];
  }
  return sink == 12345.0f ? 0 : Gflops(16, s);
}

[[gnu::noinline, gnu::target("avx2,fma")]] double FmaPeak256() {
  __m256 acc[kChains];
  for (int i = 0; i < kChains; ++i) acc[i] = _mm256_set1_ps(1.0f + 1e-3f * static_cast<float>(i));
  const __m256 b = _mm256_set1_ps(0.999999f), c = _mm256_set1_ps(1e-7f);
  const auto t = Clock::now();
  for (long i = 0; i < kFmaIterations; ++i) {
#pragma GCC unroll 16
    for (int k = 0; k < kChains; ++k) acc[k] = _mm256_fmadd_ps(acc[k], b, c);
  }
  const double s = Seconds(t);
  alignas(32) float lanes[8];
  float sink = 0;
  for (int k = 0; k < kChains; ++k) {
    _mm256_store_ps(lanes, acc[k]);
    sink += lanes[0];
  }
  return sink == 12345.0f ? 0 : Gflops(8, s);
}

double FmaPeakGflops() {
  if (__builtin_cpu_supports("avx512f")) return FmaPeak512();
  if (__builtin_cpu_supports("fma")) return FmaPeak256();
  return 0;  // no FMA unit: no meaningful peak
}

std::vector<double> TorchRates(const std::string& python, const std::string& script, int steps, int runs) {
  const std::string cmd = python + " " + script + " " + std::to_string(steps) + " " + std::to_string(runs) + " 2";
  std::vector<double> rates;
  FILE* p = popen(cmd.c_str(), "r");
  if (p == nullptr) return rates;
  char line[128];
  while (std::fgets(line, sizeof line, p) != nullptr) rates.push_back(std::atof(line));
  pclose(p);
  return rates;
}

// Trainer iterations per second on Lorenz-63 data with the given constraints.
double TrainerIterations(const std::vector<ConstraintOptions>& constraints, int iterations) {
  DynamicsSpec spec;
  spec.feed_id = "lorenz";
  spec.channels = {"x", "y", "z"};
  spec.equations = {{"x", "s*(y - x)"}, {"y", "x*(r - z) - y"}, {"z", "x*y - b*z"}};
  spec.constants = {{"s", 10.0}, {"r", 28.0}, {"b", 8.0 / 3.0}};
  Dynamics dyn = Dynamics::Compile(spec).value();
  const Rhs f = [&dyn](const double* s, double* dx) { dyn.Eval(s, dx); };
  Eigen::VectorXd x(3);
  x << 1, 1, 1;
  x = IntegrateRk4(f, x, 20.0, 1e-3);
  std::vector<Sample> samples;
  for (int i = 0; i < 5000; ++i) {
    samples.push_back(Sample{DataTimeFromMicros(i * 10'000LL), {x[0], x[1], x[2]}, 0});
    x = IntegrateRk4(f, x, 0.01, 2e-3);
  }
  const GridSeries grid = ResampleToGrid(samples, 3, {Micros(10'000), Micros{}});
  const TrajectorySet set = BuildTrajectories(grid, {1, 8, 0.2});
  auto norm = ComputeNormalization(grid, set.validation_begin, 0.01).value();
  FlowMap<float> model = FlowMap<float>::Create(3, {64, 64}, Activation::kTanh, 0.01).value();
  (void)model.SetNormalization(norm.mean.cast<float>(), norm.stddev.cast<float>(), norm.increment_scale.cast<float>());
  model.InitRandom(1);
  FitOptions o;
  o.iterations = iterations;
  o.batch = 256;
  o.validate_every = 0;
  o.dynamics = &dyn;
  o.constraints = constraints;
  auto r = Fit(model, grid, set, o);
  return r.ok() ? r->iterations / r->seconds : 0;
}

}  // namespace

int main(int argc, char** argv) {
  int steps = 2000, runs = 5;
  std::string python = "/usr/bin/python3";
  for (int i = 1; i + 1 < argc; i += 2) {
    const std::string a = argv[i];
    if (a == "--steps") steps = std::atoi(argv[i + 1]);
    else if (a == "--runs") runs = std::atoi(argv[i + 1]);
    else if (a == "--python") python = argv[i + 1];
  }
  const std::string script =
      (std::filesystem::path(LYAPCAST_SOURCE_DIR) / "tools/bench/torch_train_step.py").string();
#if defined(__AVX512F__) || defined(__AVX2__)
  const bool native = true;
#else
  const bool native = false;
#endif

  // The core's peak first, on a quiet machine, before any other work here.
  const double peak = FmaPeakGflops();
  std::vector<double> one, two;
  for (int r = 0; r < runs; ++r) {
    one.push_back(NetworkSteps(steps));
    double a = 0, b = 0;
    std::thread t1([&] { a = NetworkSteps(steps); });
    std::thread t2([&] { b = NetworkSteps(steps); });
    t1.join();
    t2.join();
    two.push_back(a + b);
  }
  const std::vector<double> torch = TorchRates(python, script, steps, runs);
  const double ours = Median(one), ours2 = Median(two), theirs = torch.empty() ? 0 : Median(torch);
  Mlp<float> net({3, 64, 64, 3}, Activation::kTanh);
  const double flops = static_cast<double>(net.TrainingFlopsPerSample()) * 256;
  std::printf("network step 3-64-64-3 tanh, batch 256, float32 (%s build):\n", native ? "-march=native" : "portable");
  std::printf("  lyapcast, 1 job (1 thread):   %8.0f steps/s  (%.1f GFLOP/s = %.0f%% of one core's FP32 FMA peak %.1f GFLOP/s)\n",
              ours, ours * flops / 1e9, 100 * ours * flops / 1e9 / peak, peak);
  std::printf("  lyapcast, 2 jobs (2 threads): %8.0f steps/s in total\n", ours2);
  if (theirs > 0) {
    std::printf("  PyTorch %s (2 threads):    %8.0f steps/s  -> lyapcast 1 job is %.1fx PyTorch\n", "", theirs,
                ours / theirs);
  } else {
    std::printf("  PyTorch: not available (%s cannot import torch)\n", python.c_str());
  }
  const int iters = std::max(steps / 4, 100);
  const double none = TrainerIterations({}, iters);
  const double vel = TrainerIterations({{ConstraintKind::kVelocity, 1.0, {0.0, 0.05}}}, iters);
  const double res = TrainerIterations({{ConstraintKind::kResidual, 1.0, {0.0, 0.05}}}, iters);
  const double both = TrainerIterations(
      {{ConstraintKind::kVelocity, 1.0, {0.0, 0.05}}, {ConstraintKind::kResidual, 1.0, {0.0, 0.05}}}, iters);
  std::printf("trainer iteration on Lorenz-63 (batch 256, one step): %.0f it/s without constraints; cost relative "
              "to that: velocity %.2fx, residual %.2fx, both %.2fx\n",
              none, none / vel, none / res, none / both);
  std::printf(
      "{\"bench\":\"train\",\"build\":\"%s\",\"steps\":%d,\"runs\":%d,\"lyapcast_steps_per_s\":%.0f,"
      "\"lyapcast_2jobs_steps_per_s\":%.0f,\"torch_steps_per_s\":%.0f,\"ratio_vs_torch\":%.2f,\"gflops\":%.2f,"
      "\"fp32_peak_gflops\":%.2f,\"trainer_it_per_s\":%.0f,\"velocity_cost\":%.2f,\"residual_cost\":%.2f,"
      "\"both_cost\":%.2f}\n",
      native ? "native" : "portable", steps, runs, ours, ours2, theirs, theirs > 0 ? ours / theirs : 0.0,
      ours * flops / 1e9, peak, none, none / vel, none / res, none / both);
  return 0;
}
