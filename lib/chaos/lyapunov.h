// Lyapunov spectrum of any map with a Jacobian by the QR method (Benettin,
// Galgani, Giorgilli & Strelcyn, Meccanica 15 (1980) 9; Shimada & Nagashima,
// Prog. Theor. Phys. 61 (1979) 1605; docs/design.md "Lyapunov time and cadence").
//
// A flow enters through its integrator (FlowMapStep: one RK4 step of the
// variational system per map step) and a learned model through its one-step
// map G (ModelMapStep), so published map values test the same code path.
//
// Units: exponents are per unit of the map's own time, i.e. per iteration
// divided by MapStep::time_per_step. For FlowMapStep and ModelMapStep that
// is per unit of MODEL time; callers convert to data time with the feed's
// time unit (lambda_data = lambda_model / time_unit).
//
// Thread safety: LyapunovSpectrum is reentrant; it calls MapStep::step only
// from the calling thread. A MapStep is no more thread-safe than what it
// refers to (a Dynamics or ForecastModel, which must outlive it).
// Nothing here throws (unless the user's step function does).
#pragma once

#include "core/eigen.h"  // first, instead of <Eigen/Core>: see there

#include <functional>
#include <memory>
#include <string>
#include <vector>

#include "core/status.h"
#include "learn/forecast_model.h"
#include "physics/dynamics.h"

namespace lyapcast {

// One iteration x -> next = F(x). `step` writes F(x) to *next and, when
// `jacobian` is not null, dF/dx at x (dim x dim) to *jacobian; with a null
// `jacobian` only the state is wanted (the transient), which lets adapters
// skip the tangent work. It may resize its outputs; it must not keep them.
struct MapStep {
  std::function<void(const Eigen::VectorXd& x, Eigen::VectorXd* next, Eigen::MatrixXd* jacobian)> step;
  int dim = 0;
  // Time one iteration represents: converts per-iteration rates into
  // per-unit-time rates. 1 for maps, dt (model time) for flows and flow maps.
  double time_per_step = 1.0;
};

struct SpectrumOptions {
  int exponents = 0;             // how many leading exponents; 0 = all (dim)
  long transient_steps = 1000;   // iterations discarded before measuring (>= 0)
  long steps = 100000;           // measured iterations (>= 1)
  int reorthonormalize_every = 1;  // QR every this many steps (>= 1)
  int convergence_checks = 10;   // running estimates recorded (>= 1)
};

struct SpectrumEstimate {
  Eigen::VectorXd exponents;  // descending, per unit time (see the header note)
  long steps = 0;             // measured iterations
  double time = 0;            // steps * time_per_step
  // Running estimates after steps * (i + 1) / convergence_checks iterations;
  // the last one equals `exponents` (before sorting; the QR order is
  // descending in practice).
  std::vector<Eigen::VectorXd> history;
  // max |history[i](0) - history.back()(0)| over the last half of the
  // history: how far the largest exponent still moved lately (0 with one
  // check). A crude convergence measure in the exponents' units.
  double convergence = 0;
  std::string method;  // e.g. "qr (benettin), 3 of 3 exponents, reorthonormalize every 1"
};

// Estimates the leading exponents along the orbit of x0: iterates through
// the transient, then propagates an orthonormal basis Q (dim x k) by the
// Jacobians, re-orthonormalizes with Householder QR (signs fixed so
// diag(R) > 0) and averages log R_ii over the elapsed time.
// Errors:
//   - kInvalidArgument: dim < 1, no step function, time_per_step not finite
//     or <= 0, x0 of the wrong size or not finite, or options out of range;
//   - kInternal: the orbit or the Jacobian becomes non-finite, a step
//     returns the wrong sizes, or a diagonal entry of R is zero (the
//     tangent basis collapsed: a singular Jacobian; the exponent would be
//     -inf). Messages name the iteration.
[[nodiscard]] Result<SpectrumEstimate> LyapunovSpectrum(const MapStep& map, Eigen::VectorXd x0,
                                                        const SpectrumOptions& options = {});

// The time-dt_model map of a known dynamics: each step integrates the
// variational system (physics/tangent.h VariationalRhs, x' = f(x),
// Y' = J(x) Y from Y = I) with `rk4_substeps` >= 1 classic RK4 steps of
// dt_model / rk4_substeps, giving the step's Jacobian (the derivative of the
// RK4 map, up to the finite-difference Jacobian of f). time_per_step =
// dt_model, so rates are per unit of model time.
// Requires dt_model > 0 finite and rk4_substeps >= 1 (else the returned
// step has dim 0 and LyapunovSpectrum rejects it). Keeps a reference to `d`:
// `d` must outlive the MapStep and is used on the calling thread only.
MapStep FlowMapStep(const Dynamics& d, double dt_model, int rk4_substeps = 1);

// A model's one-step map (learn/forecast_model.h): next = model.Step(x),
// jacobian = model.Jacobian(x); time_per_step = model.shape().dt (model
// time). Keeps a reference to `model`, which must outlive the MapStep; the
// step owns a scratch from model.NewScratch() (shared by copies of the
// MapStep, so copies must stay on one thread).
MapStep ModelMapStep(const ForecastModel& model);

}  // namespace lyapcast
