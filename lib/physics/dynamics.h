// Dynamics: a feed's known right-hand side dx/dt = f(x), compiled from the
// expressions of a DynamicsSpec (physics/dynamics_spec.h; docs/design.md
// "Learning", config key `dynamics`).
//
// One muparser expression per channel, in the feed's channel order. The
// variables an expression may use are the feed's channels and the constants
// of `dynamics.constants`; the system is autonomous, so `t` is not available.
// Besides those, muparser's built-in functions (sin, exp, sqrt, min, ...),
// operators (+ - * / ^, comparisons, `c ? a : b`) and constants (_pi, _e;
// _pi is the double nearest pi, not muparser 2.3.3's 13-digit value) work;
// `-x^2` means -(x^2). Assignments (`x = 1`) and lists (`a, b`) are
// rejected: an expression is one value and must not change the state.
//
// Time: f is per unit of *model* time; one model time unit is time_unit() of
// data time (dynamics.time_unit, default 1 s).
//
// Thread safety: NOT thread-safe, not even the const methods (the parsers
// read the state from internal, mutable variable storage and cache their
// bytecode lazily). Use one instance per thread: Clone() builds an
// independent copy for another thread. Instances are movable (the variable
// storage is heap-allocated, so the parsers' pointers into it survive moves)
// but not copyable. A moved-from instance may only be assigned or destroyed.
// No method throws: parser exceptions are caught inside this module.
#pragma once

#include "core/eigen.h"  // first, instead of <Eigen/Core>: see there

#include <memory>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "core/data_time.h"
#include "core/status.h"
#include "physics/dynamics_spec.h"

namespace lyapcast {

class Dynamics {
 public:
  // Compiles `spec` (parsing every expression now, so mistakes surface at
  // config check rather than in the trainer). Returns kInvalidArgument when
  // there are no channels, when time_unit is not positive, when the equations
  // are not one per channel in channel order, when a constant repeats or
  // shadows a channel or a built-in name, or when an expression does not
  // parse. A feed's spec comes from ToDynamicsSpec (config/config.h).
  // Expression errors name the feed, the channel and the position (counted
  // from 1) e.g.
  //   feeds 'loop-a': dynamics.equations.flow: unknown variable 'prr' at
  //   position 1 in "prr*(dtemp_h - flow)"; variables are the channels
  //   (flow, dtemp_h, dtemp_v) and constants (pr, ra, b)
  [[nodiscard]] static Result<Dynamics> Compile(const DynamicsSpec& spec);

  Dynamics(Dynamics&&) noexcept;
  Dynamics& operator=(Dynamics&&) noexcept;
  Dynamics(const Dynamics&) = delete;
  Dynamics& operator=(const Dynamics&) = delete;
  ~Dynamics();

  // An independent instance with the same expressions and the current
  // constant values, for use on another thread. Cannot fail: the
  // expressions already compiled once.
  Dynamics Clone() const;

  int dim() const;                                 // number of channels
  Micros time_unit() const;                        // one unit of model time in data time (> 0)
  const std::vector<std::string>& channels() const;  // the feed's channels, in order
  const std::string& feed_id() const;

  // dxdt[c] = f_c(x), per unit of model time. x and dxdt hold dim() values
  // each and may not overlap. Division by zero and the like give inf/NaN as
  // in IEEE arithmetic; the caller checks finiteness where it matters.
  void Eval(const double* x, double* dxdt) const;

  // Column i of *F is f(column i of X). Requires X.rows() == dim(); resizes *F
  // to dim() x X.cols(). Evaluates one sample at a time (muparser's bulk mode
  // may start OpenMP threads; see DEVELOPERS.md "Pitfalls").
  void EvalBatch(const Eigen::MatrixXd& X, Eigen::MatrixXd* F) const;

  // Changes a constant for later evaluations (to simulate a parameter change).
  // kNotFound for a name that is not a constant, kInvalidArgument for a
  // non-finite value.
  [[nodiscard]] Status SetConstant(std::string_view name, double value);
  // The current value of a constant, or nullopt if there is none by that name.
  std::optional<double> constant(std::string_view name) const;

  // J(r, c) = d f_r / d x_c at x by central differences, with per-channel step
  //   h_c = cbrt(DBL_EPSILON) * max(|x_c|, scale_c).
  // Why cbrt(eps): the central difference has truncation error ~ h^2 |f'''| / 6
  // and rounding error ~ eps |f| / h; their sum is smallest at h ~ eps^(1/3),
  // giving a relative error of about eps^(2/3) ~ 4e-11 for smooth f with O(1)
  // derivatives scaled like the state (exact up to rounding for f quadratic,
  // e.g. Lorenz-63). `scale` holds dim() typical magnitudes (e.g. channel
  // standard deviations) so channels near zero still get a sensible step;
  // nullptr means 1.0 for every channel. Resizes *J to dim() x dim().
  // Costs 2 dim() evaluations of f.
  void Jacobian(const double* x, const double* scale, Eigen::MatrixXd* J) const;

  // (*J)[i] = Jacobian at column i of X (same rules as Jacobian()).
  void JacobianBatch(const Eigen::MatrixXd& X, const double* scale, std::vector<Eigen::MatrixXd>* J) const;

 private:
  struct State;
  explicit Dynamics(std::unique_ptr<State> state);
  std::unique_ptr<State> s_;
};

}  // namespace lyapcast
