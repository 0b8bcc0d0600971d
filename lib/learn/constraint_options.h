// ConstraintOptions: one physics constraint term of the trainer (learn/trainer.h,
// docs/design.md "Learning"): which term, its weight and the anneal schedule
// that ramps it in.
//
// Owned by lib/learn; the config list feeds[].dynamics.constraints maps onto
// it (lib/config aliases ConstraintConfig to it), so the defaults below are the
// config's defaults too. Header-only, so lib/config can use the type without
// linking the numeric library.
#pragma once

namespace lyapcast {

// The weight of a term at iteration i of `iterations`:
//   weight / (1 + exp(-(i / iterations - mid) / width)).
struct AnnealSchedule {
  double mid = 0.5;     // midpoint of the sigmoid, as a fraction of the iteration budget
  double width = 0.05;  // width of the sigmoid, as a fraction of the budget
};

enum class ConstraintKind { kVelocity, kResidual };

// "velocity", "residual" (the config's spelling); "unknown" for a value outside the enum.
inline const char* ConstraintKindName(ConstraintKind kind) {
  switch (kind) {
    case ConstraintKind::kVelocity: return "velocity";
    case ConstraintKind::kResidual: return "residual";
  }
  return "unknown";
}

struct ConstraintOptions {
  ConstraintKind kind = ConstraintKind::kVelocity;
  double weight = 1.0;  // maximum weight reached by the anneal schedule
  AnnealSchedule anneal;
};

}  // namespace lyapcast
