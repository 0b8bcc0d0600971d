#include "physics/integrators.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <limits>
#include <string>

namespace lyapcast {

void Rk4Step(const Rhs& f, Eigen::VectorXd& x, double h, Rk4Workspace* ws) {
  Rk4Workspace local;
  Rk4Workspace& w = ws != nullptr ? *ws : local;
  const Eigen::Index n = x.size();
  w.k1.resize(n);
  w.k2.resize(n);
  w.k3.resize(n);
  w.k4.resize(n);
  w.tmp.resize(n);
  f(x.data(), w.k1.data());
  w.tmp = x + (0.5 * h) * w.k1;
  f(w.tmp.data(), w.k2.data());
  w.tmp = x + (0.5 * h) * w.k2;
  f(w.tmp.data(), w.k3.data());
  w.tmp = x + h * w.k3;
  f(w.tmp.data(), w.k4.data());
  x += (h / 6.0) * (w.k1 + 2.0 * w.k2 + 2.0 * w.k3 + w.k4);
}

Eigen::VectorXd IntegrateRk4(const Rhs& f, Eigen::VectorXd x, double duration, double h) {
  if (!(duration > 0.0) || !(h > 0.0) || !std::isfinite(duration)) return x;
  // Whole steps plus one shortened step. Counting steps (rather than adding
  // h to t until t >= duration) keeps rounding from adding a sliver step.
  double whole = std::floor(duration / h);
  double rest = duration - whole * h;
  if (rest < 0.0) {  // duration / h rounded up to an integer
    whole -= 1.0;
    rest += h;
  }
  if (rest >= h * (1.0 - 1e-9)) {  // ... or fell just short of one
    whole += 1.0;
    rest = 0.0;
  }
  if (rest <= h * 1e-9) rest = 0.0;
  Rk4Workspace ws;
  const auto steps = static_cast<std::int64_t>(whole);
  for (std::int64_t i = 0; i < steps; ++i) Rk4Step(f, x, h, &ws);
  if (rest > 0.0) Rk4Step(f, x, rest, &ws);
  return x;
}

namespace {

// Dormand-Prince 5(4) tableau (Hairer, Norsett & Wanner, Table II.5.2; dopri5.f).
// The nodes c = (0, 1/5, 3/10, 4/5, 8/9, 1, 1) are not needed: f is autonomous.
constexpr double a21 = 1.0 / 5;
constexpr double a31 = 3.0 / 40, a32 = 9.0 / 40;
constexpr double a41 = 44.0 / 45, a42 = -56.0 / 15, a43 = 32.0 / 9;
constexpr double a51 = 19372.0 / 6561, a52 = -25360.0 / 2187, a53 = 64448.0 / 6561, a54 = -212.0 / 729;
constexpr double a61 = 9017.0 / 3168, a62 = -355.0 / 33, a63 = 46732.0 / 5247, a64 = 49.0 / 176,
                 a65 = -5103.0 / 18656;
// Fifth-order weights (also row 7: FSAL).
constexpr double a71 = 35.0 / 384, a73 = 500.0 / 1113, a74 = 125.0 / 192, a75 = -2187.0 / 6784, a76 = 11.0 / 84;
// Error weights: fifth- minus fourth-order weights.
constexpr double e1 = 71.0 / 57600, e3 = -71.0 / 16695, e4 = 71.0 / 1920, e5 = -17253.0 / 339200, e6 = 22.0 / 525,
                 e7 = -1.0 / 40;

bool AllFinite(const Eigen::VectorXd& v) { return v.allFinite(); }

// Norms as single loops: no temporaries per step.

// sum_i (v_i / (atol + rtol |x_i|))^2, as in Hairer's HINIT.
double ScaledSquares(const Eigen::VectorXd& v, const Eigen::VectorXd& x, const Dopri5Options& o) {
  double sum = 0.0;
  for (Eigen::Index i = 0; i < v.size(); ++i) {
    const double q = v[i] / (o.atol + o.rtol * std::abs(x[i]));
    sum += q * q;
  }
  return sum;
}

// RMS_i of err_i / (atol + rtol max(|x_i|, |y_i|)): <= 1 accepts a step.
double ErrorNorm(const Eigen::VectorXd& err, const Eigen::VectorXd& x, const Eigen::VectorXd& y,
                 const Dopri5Options& o) {
  double sum = 0.0;
  for (Eigen::Index i = 0; i < err.size(); ++i) {
    const double q = err[i] / (o.atol + o.rtol * std::max(std::abs(x[i]), std::abs(y[i])));
    sum += q * q;
  }
  return std::sqrt(sum / static_cast<double>(err.size()));
}

double MaxAbs(const Eigen::VectorXd& v) {
  double m = 0.0;
  for (Eigen::Index i = 0; i < v.size(); ++i) m = std::max(m, std::abs(v[i]));
  return m;
}

// Hairer's starting step (HINIT in dopri5.f, order 5): a step whose explicit
// Euler error estimate is about 0.01 in the scaled norm.
double InitialStep(const Rhs& f, const Eigen::VectorXd& x, const Eigen::VectorXd& f0, double h_max,
                   const Dopri5Options& o, std::int64_t* evaluations) {
  const double dnf = ScaledSquares(f0, x, o);
  const double dny = ScaledSquares(x, x, o);
  double h = (dnf <= 1e-10 || dny <= 1e-10) ? 1e-6 : std::sqrt(dny / dnf) * 0.01;
  h = std::min(h, h_max);
  const Eigen::VectorXd y1 = x + h * f0;
  Eigen::VectorXd f1(x.size());
  f(y1.data(), f1.data());
  ++*evaluations;
  const double der2 = std::sqrt(ScaledSquares(f1 - f0, x, o)) / h;
  const double der12 = std::max(std::abs(der2), std::sqrt(dnf));
  double h1;
  if (!std::isfinite(der12)) {
    h1 = h * 1e-3;  // f is not finite a little way out: start small, the controller takes over
  } else if (der12 <= 1e-15) {
    h1 = std::max(1e-6, h * 1e-3);
  } else {
    h1 = std::pow(0.01 / der12, 1.0 / 5.0);
  }
  return std::min({100 * h, h1, h_max});
}

}  // namespace

Result<Dopri5Result> IntegrateDopri5(const Rhs& f, Eigen::VectorXd x, double duration, const Dopri5Options& o,
                                     const std::function<void(double, const Eigen::VectorXd&)>& observer) {
  if (!std::isfinite(duration) || duration < 0.0) {
    return Status::Invalid(fmt::format("DOPRI5: duration must be finite and >= 0; got {}", duration));
  }
  if (!(o.rtol >= 0.0) || !(o.atol >= 0.0) || !(o.rtol > 0.0 || o.atol > 0.0) || !std::isfinite(o.rtol) ||
      !std::isfinite(o.atol)) {
    return Status::Invalid(fmt::format("DOPRI5: tolerances must be finite, >= 0 and not both 0; got rtol={} atol={}",
                                       o.rtol, o.atol));
  }
  if (!(o.safety > 0.0 && o.safety <= 1.0) || !(o.min_factor > 0.0 && o.min_factor < 1.0) ||
      !(o.max_factor >= 1.0 && std::isfinite(o.max_factor)) || !(o.h_min >= 0.0) || !(o.h_max >= 0.0) ||
      !(o.h_initial >= 0.0) || o.max_steps <= 0) {
    return Status::Invalid(fmt::format(
        "DOPRI5: options out of range: need 0 < safety <= 1 (got {}), 0 < min_factor < 1 (got {}), finite "
        "max_factor >= 1 (got {}), h_min, h_max, h_initial >= 0 (got {}, {}, {}) and max_steps > 0 (got {})",
        o.safety, o.min_factor, o.max_factor, o.h_min, o.h_max, o.h_initial, o.max_steps));
  }
  if (!AllFinite(x)) return Status::Invalid("DOPRI5: the initial state is not finite");
  const Eigen::Index n = x.size();
  Dopri5Result out;
  Eigen::VectorXd k1(n), k2(n), k3(n), k4(n), k5(n), k6(n), k7(n), y(n), y1(n), err(n);
  f(x.data(), k1.data());
  out.evaluations = 1;
  if (!AllFinite(k1)) {
    return Status::Precondition("DOPRI5: the right-hand side is not finite at t=0 (the initial state is outside "
                                "the domain of f)");
  }
  if (observer) observer(0.0, x);
  if (duration == 0.0 || n == 0) {
    out.x = std::move(x);
    return out;
  }
  const double h_max = o.h_max > 0.0 ? std::min(o.h_max, duration) : duration;
  double h = o.h_initial > 0.0 ? o.h_initial : InitialStep(f, x, k1, h_max, o, &out.evaluations);
  h = std::min(h, h_max);
  double t = 0.0;
  bool after_reject = false;    // no step growth right after a rejection
  bool nonfinite_trial = false;  // the last rejection was a non-finite trial
  const double eps = std::numeric_limits<double>::epsilon();
  for (;;) {
    if (out.steps_accepted + out.steps_rejected >= o.max_steps) {
      return Status::Precondition(fmt::format(
          "DOPRI5: exceeded max_steps={} ({} accepted, {} rejected) at t={:.17g} of duration {:.17g}; raise max_steps "
          "or loosen rtol/atol",
          o.max_steps, out.steps_accepted, out.steps_rejected, t, duration));
    }
    // Land exactly on the end (dopri5.f: stretch by up to 1 % rather than
    // leaving a sliver step).
    bool last = false;
    if (t + 1.01 * h >= duration) {
      h = duration - t;
      last = true;
    }
    const double h_floor = std::max(o.h_min, 16.0 * eps * std::abs(t));
    if (!last && h < h_floor) {
      const std::string limit = o.h_min > 16.0 * eps * std::abs(t) ? fmt::format("h_min={:.3g}", o.h_min)
                                                                   : std::string("the rounding limit 16 eps |t|");
      const std::string cause =
          nonfinite_trial
              ? "the last trial step gave non-finite values: the solution leaves the domain of f or blows up here"
              : "the problem is stiff or singular here, or the solution blows up in finite time";
      return Status::Precondition(
          fmt::format("DOPRI5: step size underflow at t={:.17g} of duration {:.17g}: h={:.3g} is below {}; {} "
                      "(max |x| = {:.3g})",
                      t, duration, h, limit, cause, MaxAbs(x)));
    }
    y = x + h * (a21 * k1);
    f(y.data(), k2.data());
    y = x + h * (a31 * k1 + a32 * k2);
    f(y.data(), k3.data());
    y = x + h * (a41 * k1 + a42 * k2 + a43 * k3);
    f(y.data(), k4.data());
    y = x + h * (a51 * k1 + a52 * k2 + a53 * k3 + a54 * k4);
    f(y.data(), k5.data());
    y = x + h * (a61 * k1 + a62 * k2 + a63 * k3 + a64 * k4 + a65 * k5);
    f(y.data(), k6.data());
    y1 = x + h * (a71 * k1 + a73 * k3 + a74 * k4 + a75 * k5 + a76 * k6);
    f(y1.data(), k7.data());
    out.evaluations += 6;
    err = h * (e1 * k1 + e3 * k3 + e4 * k4 + e5 * k5 + e6 * k6 + e7 * k7);
    const double e = ErrorNorm(err, x, y1, o);
    if (!std::isfinite(e) || !AllFinite(y1) || !AllFinite(k7)) {
      // Too large a step can overflow where the solution itself does not:
      // shrink hard and retry; a real blow-up ends in step size underflow.
      ++out.steps_rejected;
      nonfinite_trial = true;
      after_reject = true;
      h *= o.min_factor;
      continue;
    }
    nonfinite_trial = false;
    // Optimal-step factor for a 5th-order local error (exponent 1/5).
    const double ideal = e > 0.0 ? o.safety * std::pow(e, -0.2) : o.max_factor;
    if (e <= 1.0) {
      ++out.steps_accepted;
      x.swap(y1);
      k1.swap(k7);  // FSAL: f(x_new) is the next step's first stage
      t = last ? duration : t + h;
      if (observer) observer(t, x);
      const double factor = std::clamp(ideal, o.min_factor, after_reject ? 1.0 : o.max_factor);
      after_reject = false;
      out.next_step = std::min(h * factor, h_max);
      if (last) break;
      h = out.next_step;
    } else {
      ++out.steps_rejected;
      after_reject = true;
      h *= std::clamp(ideal, o.min_factor, 1.0);
    }
  }
  out.x = std::move(x);
  return out;
}

}  // namespace lyapcast
