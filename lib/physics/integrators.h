// Integrators for autonomous systems dx/dt = f(x) on Eigen vectors.
//
// - Classic fourth-order Runge-Kutta with a fixed step (RK4).
// - Adaptive Dormand-Prince 5(4) (DOPRI5): the coefficients of Dormand &
//   Prince, J. Comp. Appl. Math. 6 (1980) 19, as tabulated in Hairer,
//   Norsett & Wanner, Solving Ordinary Differential Equations I, 2nd ed.,
//   Springer 1993, section II.5 (and their code dopri5.f), with FSAL (the last
//   stage of an accepted step is the first of the next), local extrapolation
//   (the 5th-order solution is propagated) and Hairer's starting-step
//   heuristic (section II.4, "HINIT").
//
// Time is the right-hand side's own time (model time for a Dynamics).
// Thread safety: the functions are reentrant; `f` is called only from the
// calling thread (a Dynamics-backed f must be owned by that thread).
// No function throws (unless f does).
#pragma once

#include "core/eigen.h"  // first, instead of <Eigen/Core>: see there

#include <cstdint>
#include <functional>

#include "core/status.h"

namespace lyapcast {

// Writes f(x) to dxdt; both hold the state dimension's worth of doubles and do
// not overlap.
using Rhs = std::function<void(const double* x, double* dxdt)>;

// Scratch vectors for repeated RK4 steps (avoids four allocations per step).
struct Rk4Workspace {
  Eigen::VectorXd k1, k2, k3, k4, tmp;
};

// One classic RK4 step of size h (h may be negative), in place. Global error
// O(h^4). `ws` may be null (then temporaries are allocated).
void Rk4Step(const Rhs& f, Eigen::VectorXd& x, double h, Rk4Workspace* ws = nullptr);

// Integrates over `duration` >= 0 with steps of h > 0; the last step is
// shortened so the result lands exactly on `duration` (a remainder below
// 1e-9 h, a rounding artefact of duration / h, is dropped). Returns x
// unchanged for duration <= 0 or h <= 0.
Eigen::VectorXd IntegrateRk4(const Rhs& f, Eigen::VectorXd x, double duration, double h);

struct Dopri5Options {
  double rtol = 1e-6;   // relative tolerance per component
  double atol = 1e-9;   // absolute tolerance per component
  double h_initial = 0; // 0: Hairer's starting-step heuristic
  double h_min = 0;     // 0: only the rounding limit 16 eps |t| applies
  double h_max = 0;     // 0: the whole duration
  std::int64_t max_steps = 1'000'000;  // accepted + rejected attempts
  double safety = 0.9;      // step-size safety factor
  double min_factor = 0.2;  // a new step is at least this times the last ...
  double max_factor = 10.0; // ... and at most this times (1 after a rejection)
};

struct Dopri5Result {
  Eigen::VectorXd x;               // state at t = duration
  std::int64_t steps_accepted = 0;
  std::int64_t steps_rejected = 0;
  std::int64_t evaluations = 0;    // calls of f
  double next_step = 0;            // the step the controller would try next (to continue)
};

// Integrates from t = 0 to t = duration (>= 0) with error control: a step is
// accepted when the RMS over components of err_i / (atol + rtol max(|x_i|,
// |x_new_i|)) is <= 1. The observer, if given, sees (0, x0) and then (t, x)
// after every accepted step, the last one at exactly t = duration.
// A trial step whose values are not finite (too large a step can overflow
// where the solution does not) is rejected and the step shrunk by min_factor.
// Errors, each naming t and the cause:
//   - kInvalidArgument: a non-finite initial state, a negative or non-finite
//     duration, or bad tolerances;
//   - kFailedPrecondition: f not finite at the initial state; more than
//     max_steps attempts; the step size underflowing h_min or 16 eps |t|
//     (stiffness, a singularity, the state going non-finite, or a blow-up in
//     finite time such as x' = x^2; the message says which it looks like).
[[nodiscard]] Result<Dopri5Result> IntegrateDopri5(
    const Rhs& f, Eigen::VectorXd x, double duration, const Dopri5Options& options = {},
    const std::function<void(double t, const Eigen::VectorXd& x)>& observer = {});

}  // namespace lyapcast
