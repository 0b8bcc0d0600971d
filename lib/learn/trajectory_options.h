// TrajectoryOptions: how BuildTrajectories (learn/pairs.h) cuts a grid
// series into training and validation trajectories.
//
// Owned by lib/learn; the config keys feeds[].model.rollout, model.max_gap and
// retrain.validation map onto it, and their defaults in config/config.h refer
// to the ones here. Header-only, so lib/config can use the type without
// linking the numeric library. A plain value.
#pragma once

namespace lyapcast {

struct TrajectoryOptions {
  int rollout = 4;          // unrolled steps trained on contiguous data; >= 1
  int max_gap = 8;          // longest composition G^k trained across gaps; >= 1
  double validation = 0.2;  // newest fraction of the grid's time span, in [0, 1)
};

}  // namespace lyapcast
