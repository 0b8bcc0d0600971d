// FitOptions: the trainer's options (Fit in learn/trainer.h).
//
// Owned by lib/learn; the config keys feeds[].retrain.iterations, batch,
// learning_rate, weight_decay and clip map onto it (schedule/training_strategy.h),
// and their defaults in config/config.h refer to the ones here. Header-only,
// so lib/config can use the type without linking the numeric library.
#pragma once

#include <atomic>
#include <cstdint>
#include <vector>

#include "learn/constraint_options.h"

namespace lyapcast {

class Dynamics;  // physics/dynamics.h

struct FitOptions {
  int iterations = 2000;
  int batch = 256;
  double learning_rate = 1e-3;
  double lr_floor_fraction = 0.1;  // cosine decay to this fraction of learning_rate
  double weight_decay = 0.0;
  double clip = 1.0;               // global gradient norm
  double time_budget_s = 0;        // wall seconds; 0 = none
  int validate_every = 100;        // iterations between validation checks
  int patience = 0;                // checks without improvement before stopping; 0 = off
  std::uint64_t seed = 1;          // batch sampling (and weights on a cold start)
  // Known dynamics for constraint terms; the terms are skipped when null.
  // Fit uses it from its own thread only (Dynamics is not thread-safe).
  const Dynamics* dynamics = nullptr;
  std::vector<ConstraintOptions> constraints;  // one per kind (of a repeated kind the last counts)
  const std::atomic<bool>* cancel = nullptr;
};

}  // namespace lyapcast
