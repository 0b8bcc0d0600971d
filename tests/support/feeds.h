// Feed configs with known dynamics for tests, built in code (no YAML).
#pragma once

#include <gtest/gtest.h>

#include <cstdlib>
#include <string>
#include <utility>
#include <vector>

#include "config/config.h"
#include "physics/dynamics.h"

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

// Lorenz-63 with the parameters of REFERENCES.md (Sprott 2003: sigma = 10,
// rho = 28, beta = 8/3), channels x, y, z; model time unit 1 s.
inline constexpr double kLorenzSigma = 10.0, kLorenzRho = 28.0, kLorenzBeta = 8.0 / 3.0;

inline FeedConfig LorenzFeed(double rho = kLorenzRho, Micros step = 10'000) {
  FeedConfig f = MakeFeed("lorenz", {"x", "y", "z"},
                          {{"x", "sigma*(y - x)"}, {"y", "x*(rho - z) - y"}, {"z", "x*y - beta*z"}},
                          {{"sigma", kLorenzSigma}, {"rho", rho}, {"beta", kLorenzBeta}});
  f.step = step;
  return f;
}

// Compiles or fails the test at once (nothing after it could run).
inline Dynamics MustCompile(const FeedConfig& feed) {
  Result<Dynamics> r = Dynamics::Compile(feed);
  if (!r.ok()) {
    ADD_FAILURE() << r.status().ToString();
    std::abort();
  }
  return std::move(r).value();
}

}  // namespace lyapcast::testing
