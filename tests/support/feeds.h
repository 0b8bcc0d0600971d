// Feed configs with known dynamics for tests, built in code (no YAML).
#pragma once

#include <gtest/gtest.h>

#include <cstdlib>
#include <string>
#include <utility>
#include <vector>

#include "config/config.h"
#include "core/sample.h"
#include "physics/dynamics.h"
#include "physics/integrators.h"

namespace lyapcast::testing {

inline FeedConfig MakeFeed(std::string id, std::vector<std::string> channels,
                           std::vector<std::pair<std::string, std::string>> equations,
                           std::vector<std::pair<std::string, double>> constants = {}) {
  FeedConfig f;
  f.id = std::move(id);
  f.channels = std::move(channels);
  DynamicsConfig d;
  d.equations = std::move(equations);
  d.constants = std::move(constants);
  f.dynamics = std::move(d);
  return f;
}

// Lorenz-63 with the parameters of docs/references.md "Systems" (Sprott 2003: sigma = 10,
// rho = 28, beta = 8/3), channels x, y, z; model time unit 1 s.
inline constexpr double kLorenzSigma = 10.0, kLorenzRho = 28.0, kLorenzBeta = 8.0 / 3.0;

inline FeedConfig LorenzFeed(double rho = kLorenzRho, Micros step = Micros(10'000)) {
  FeedConfig f = MakeFeed("lorenz", {"x", "y", "z"},
                          {{"x", "sigma*(y - x)"}, {"y", "x*(rho - z) - y"}, {"z", "x*y - beta*z"}},
                          {{"sigma", kLorenzSigma}, {"rho", rho}, {"beta", kLorenzBeta}});
  f.step = step;
  return f;
}

// The feed's dynamics compiled as the daemon does: ToDynamicsSpec, then
// Dynamics::Compile (either error is returned).
inline Result<Dynamics> CompileFeed(const FeedConfig& feed) {
  Result<DynamicsSpec> spec = ToDynamicsSpec(feed);
  if (!spec.ok()) return spec.status();
  return Dynamics::Compile(*spec);
}

// A one-feed Lorenz config small enough for scheduler and runtime tests: a
// 3-16-16-3 network, 60 iterations per retrain, first model at 400 pairs,
// retrains every 2..4 s of data (invented sizes, chosen for test speed).
inline Config SmallLorenzConfig() {
  Config c;
  FeedConfig f = LorenzFeed();
  f.model.hidden = {16, 16};
  f.retrain.iterations = 60;
  f.retrain.batch = 64;
  f.retrain.min_pairs = 400;
  f.retrain.learning_rate = 3e-3;
  f.retrain.min_interval = 2 * kSecond;
  f.retrain.max_interval = 4 * kSecond;
  c.feeds.push_back(f);
  return c;
}

// Compiles or fails the test at once (nothing after it could run).
inline Dynamics MustCompile(const FeedConfig& feed) {
  Result<Dynamics> r = CompileFeed(feed);
  if (!r.ok()) {
    ADD_FAILURE() << r.status().ToString();
    std::abort();
  }
  return std::move(r).value();
}

// Lorenz-63 samples of feed 0 every 10 ms for `n` steps from data time t0,
// starting on the attractor (20 time units of transient from (1, 1, 1));
// RK4 with 2 ms steps. Every call gives the same trajectory.
inline std::vector<FeedSample> LorenzSamples(int n, DataTime t0) {
  const Dynamics d = MustCompile(LorenzFeed());
  const Rhs f = [&d](const double* x, double* dx) { d.Eval(x, dx); };
  Eigen::VectorXd x(3);
  x << 1, 1, 1;
  x = IntegrateRk4(f, x, 20.0, 2e-3);
  std::vector<FeedSample> out;
  for (int i = 0; i < n; ++i) {
    out.push_back({0, Sample{t0 + i * Micros(10'000), {x[0], x[1], x[2]}, 0}});
    x = IntegrateRk4(f, x, 0.01, 2e-3);
  }
  return out;
}

}  // namespace lyapcast::testing
