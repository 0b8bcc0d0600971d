// RefitOnSmoothedStates: the polynomial map refitted through sensor noise
// (docs/design.md "Fitting through sensor noise").
//
// A map fitted by least squares on noisy measured pairs learns a flattened
// version of the dynamics (noise in its inputs). Round k smooths the
// training span's measurements with the map of round k - 1 (SmoothStates,
// learn/state_smoother.h: every run of measurements that bridges no more
// than max_gap missing grid steps, in one grid segment) and refits the map,
// at the first fit's degree and over its ridge values, on the same one-step
// pairs with both states replaced by their smoothed estimates. Whichever map
// (the first fit included) keeps its free runs valid longest on a held-out
// span (ModelValidSteps from starts fitted to score_history steps, threshold
// 0.5 of the given scale) is returned; the
// first fit wins a tie, so clean data, where smoothing changes next to
// nothing, keep their plain fit.
//
// Pure function; thread-safe.
#pragma once

#include "core/eigen.h"  // first, instead of <Eigen/Core>: see there

#include <cstddef>
#include <string>

#include "core/status.h"
#include "learn/pairs.h"
#include "learn/polynomial_map.h"
#include "learn/state_smoother.h"
#include "learn/trainer.h"

namespace lyapcast {

struct SmoothedRefitOptions {
  // Smooth-and-refit rounds: on the skill benchmark's noisy series
  // (docs/performance.md) the third still lengthened Chen's forecasts.
  int rounds = 3;
  int max_gap = TrajectoryOptions{}.max_gap;  // missing grid steps a smoothing run bridges (model.max_gap)
  StateSmootherOptions smoother;
  // Grid steps of history each scored free run's start is fitted to
  // (ModelValidSteps' history). The smoothed map's gain shows from such
  // starts: from a raw noisy start the start's own noise limits both maps
  // alike (measured on Lorenz-63 with 1 % noise: 3.15 -> 3.29 Lyapunov
  // times from raw starts, 3.56 -> 4.79 from fitted ones; docs/performance.md).
  int score_history = 20;
};

struct SmoothedRefit {
  PolynomialFit fit;          // the map kept: a refit, or the first fit itself (round 0)
  int round = 0;              // which round's refit was kept; 0: the first fit
  int rounds = 0;             // rounds run (fewer than asked when a smoothing or refit failed)
  double rms_correction = 0;  // the kept round's smoothing corrections, RMS in units of the scale
  double valid_steps = 0;     // the kept map's mean valid steps on the held-out span
  double first_valid_steps = 0;  // the first fit's

  // One clause for a report, e.g. "fitted on states smoothed by its dynamics
  // (round 3 of 3, corrections 0.01 of the std): free runs valid 251.4 steps
  // on the held-out span, 184.6 without".
  std::string Note() const;
};

// first: FitPolynomialMap's result on OneStepPairsIn(grid, 0, train_end);
// validation pairs: what the refits choose their ridge on; the free runs
// are scored on grid points [score_begin, score_end). normalization: the
// first fit's (its stddev is the smoother's and the score's scale).
// Errors only for bad arguments (train_end or the score span outside the
// grid); a round that cannot be made ends the rounds.
[[nodiscard]] Result<SmoothedRefit> RefitOnSmoothedStates(PolynomialFit first, const GridSeries& grid,
                                                          std::size_t train_end, double dt,
                                                          const Normalization& normalization,
                                                          const OneStepPairs& validation, std::size_t score_begin,
                                                          std::size_t score_end,
                                                          const SmoothedRefitOptions& options = {});

}  // namespace lyapcast
