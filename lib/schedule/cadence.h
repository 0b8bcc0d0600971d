// Cadence: when a feed's next retrain is due, in data time (docs/design.md
// "Lyapunov time and cadence").
//
// The Lyapunov time T = 1 / lambda_max comes from the LARGEST positive
// estimate at hand among the active model's (once one exists), the known
// dynamics' and the raw data's (ties: model, then dynamics): the shortest
// Lyapunov time, since retraining too rarely costs forecasts and too often
// only compute (cadence.cpp says why). Without a positive estimate the
// model's, else the dynamics', else the data's is reported. The next retrain is due after
// lyapunov_fraction * T of new data time since the last one, clamped to
// [min_interval, max_interval]; lambda_max <= 0 (or no estimate at all)
// uses max_interval. Every decision carries its reason in words, for logs
// and the status endpoint. Pure functions; thread-safe.
#pragma once

#include <optional>
#include <string>

#include "config/config.h"
#include "core/data_time.h"

namespace lyapcast {

enum class LyapunovSource { kModel, kDynamics, kData };
const char* LyapunovSourceName(LyapunovSource s);  // "model", "dynamics", "data"

// Largest exponents per second of data time from each source, when known.
struct LyapunovEstimates {
  std::optional<double> model;
  std::optional<double> dynamics;
  std::optional<double> data;
};

struct ChosenExponent {
  double lambda_max = 0;  // per second of data time
  LyapunovSource source = LyapunovSource::kData;
};

// The estimate to pace by: the largest positive one (the shortest Lyapunov
// time) among the model's (only when `has_model`), the dynamics' and the
// data's, ties in that order; when none is positive, the first known in that
// order; nullopt when none is known. See cadence.cpp for why the largest.
std::optional<ChosenExponent> ChooseExponent(const LyapunovEstimates& estimates, bool has_model);

struct CadenceDecision {
  DataTime due{};      // data time at which the next retrain is due
  Micros interval{};   // due - since
  std::optional<ChosenExponent> exponent;
  std::string reason;    // e.g. "0.5 Lyapunov times (T = 11.0s from the model) = 5.5s, raised to min_interval 30s"
};

// Next retrain after one that ended at data time `since`.
CadenceDecision NextRetrain(const RetrainConfig& config, const LyapunovEstimates& estimates, bool has_model,
                            DataTime since);

}  // namespace lyapcast
