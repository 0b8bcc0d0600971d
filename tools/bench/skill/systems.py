"""Published chaotic flows for the forecast skill benchmark.

Each system carries its right-hand side, its Jacobian (for the tangent
dynamics of the exponent computation), its published parameters and largest
Lyapunov exponent with their sources, and the model step (sample interval)
the benchmark uses. The step is about 1/60 to 1/40 of the Lyapunov time,
and small enough that one step moves each channel by about a tenth of its
standard deviation on average (0.06 to 0.18), so the one-step map is smooth
and close to the identity. Roessler is the exception to the first rule: its
Lyapunov time (about 14) is long against its orbit (about 6) and the short
excursions of z (under 1 time unit), and at 1/56 of the Lyapunov time
(step 0.25, 0.23 std per step) every method's one-step error was 5e-3 to
6e-2 of the std and no forecast lasted half a Lyapunov time; it uses step
0.1 (1/140 of the Lyapunov time, 0.09 std per step).

Published exponents are natural-log rates per unit of model time. Several
are quoted FROM MEMORY of J.C. Sprott's table "Lyapunov exponents for a
few common chaotic systems" (2004, on his web pages; most also in
J.C. Sprott, Chaos and Time-Series Analysis, Oxford University Press, 2003,
Appendix A): each entry says so. The benchmark therefore also computes every
largest exponent from the equations (largest_lyapunov below) and prints it
beside the published figure; a disagreement above 10 % is reported and the
computed value is used for the Lyapunov time.

numpy/scipy only; runs under /usr/bin/python3 (Debian's python3-scipy).
"""

from dataclasses import dataclass
from typing import Callable, Tuple

import numpy as np
from scipy.integrate import solve_ivp

# The integrator settings the benchmark uses everywhere (the brief of issue
# 13: DOP853, rtol = atol = 1e-10).
RTOL = 1e-10
ATOL = 1e-10


@dataclass(frozen=True)
class System:
    name: str
    channels: Tuple[str, ...]
    rhs: Callable[[np.ndarray], np.ndarray]   # f(x) for x of shape (n,)
    jac: Callable[[np.ndarray], np.ndarray]   # df/dx at x, shape (n, n)
    params: dict
    x0: Tuple[float, ...]                     # a start in the basin of the attractor
    transient: float                          # model time discarded before sampling
    dt: float                                 # model step (sample interval), model time units
    lyap_published: float                     # largest exponent, per model time unit
    source_system: str
    source_exponent: str
    from_memory: bool                         # the exponent is quoted from memory


# --- Lorenz-63 ------------------------------------------------------------
# E.N. Lorenz, J. Atmos. Sci. 20 (1963) 130; s = 10, r = 28, b = 8/3.
# Largest exponent 0.9056 (Sprott's 2004 table; Sprott 2003), the value
# docs/references.md already uses and tests/chaos checks against.
def _lorenz(p):
    s, r, b = p["s"], p["r"], p["b"]

    def f(u):
        x, y, z = u
        return np.array([s * (y - x), x * (r - z) - y, x * y - b * z])

    def j(u):
        x, y, z = u
        return np.array([[-s, s, 0.0], [r - z, -1.0, -x], [y, x, -b]])

    return f, j


# --- Roessler -------------------------------------------------------------
# O.E. Roessler, Phys. Lett. A 57 (1976) 397; a = b = 0.2, c = 5.7.
# Largest exponent 0.0714 (Sprott's 2004 table; from memory).
def _roessler(p):
    a, b, c = p["a"], p["b"], p["c"]

    def f(u):
        x, y, z = u
        return np.array([-y - z, x + a * y, b + z * (x - c)])

    def j(u):
        x, y, z = u
        return np.array([[0.0, -1.0, -1.0], [1.0, a, 0.0], [z, 0.0, x - c]])

    return f, j


# --- Chen -----------------------------------------------------------------
# G. Chen, T. Ueta, Int. J. Bifurcation Chaos 9 (1999) 1465; a = 35, b = 3,
# c = 28. Largest exponent 2.0272 (Sprott's 2004 table; from memory; the
# spectrum 2.0272, 0, -12.0272 sums to the trace -a - b + c = -10).
def _chen(p):
    a, b, c = p["a"], p["b"], p["c"]

    def f(u):
        x, y, z = u
        return np.array([a * (y - x), (c - a) * x - x * z + c * y, x * y - b * z])

    def j(u):
        x, y, z = u
        return np.array([[-a, a, 0.0], [c - a - z, c, -x], [y, x, -b]])

    return f, j


# --- Thomas' cyclically symmetric attractor -------------------------------
# R. Thomas, Int. J. Bifurcation Chaos 9 (1999) 1889; b = 0.18 as in
# Sprott 2003. Largest exponent 0.0349 (Sprott's 2004 table; from memory;
# the spectrum 0.0349, 0, -0.5749 sums to the trace -3b = -0.54).
def _thomas(p):
    b = p["b"]

    def f(u):
        x, y, z = u
        return np.array([np.sin(y) - b * x, np.sin(z) - b * y, np.sin(x) - b * z])

    def j(u):
        x, y, z = u
        return np.array([[-b, np.cos(y), 0.0], [0.0, -b, np.cos(z)], [np.cos(x), 0.0, -b]])

    return f, j


# --- Halvorsen ------------------------------------------------------------
# Sprott 2003 (attributed there to A. Halvorsen); a = 1.27. Largest
# exponent 0.7899 (Sprott's 2004 table; from memory; with 0 and -4.5999 it
# sums to the trace -3a = -3.81).
def _halvorsen(p):
    a = p["a"]

    def f(u):
        x, y, z = u
        return np.array([-a * x - 4 * y - 4 * z - y * y,
                         -a * y - 4 * z - 4 * x - z * z,
                         -a * z - 4 * x - 4 * y - x * x])

    def j(u):
        x, y, z = u
        return np.array([[-a, -4 - 2 * y, -4.0], [-4.0, -a, -4 - 2 * z], [-4 - 2 * x, -4.0, -a]])

    return f, j


# --- Sprott case B --------------------------------------------------------
# J.C. Sprott, Phys. Rev. E 50 (1994) R647, case B: x' = yz, y' = x - y,
# z' = 1 - xy. Largest exponent 0.210 (that paper's table, and 0.2101 in
# Sprott's 2004 table; from memory; the spectrum sums to the trace -1).
def _sprott_b(p):
    def f(u):
        x, y, z = u
        return np.array([y * z, x - y, 1 - x * y])

    def j(u):
        x, y, z = u
        return np.array([[0.0, z, y], [1.0, -1.0, 0.0], [-y, -x, 0.0]])

    return f, j


def _make(name, channels, maker, params, **kw):
    f, j = maker(params)
    return System(name=name, channels=channels, rhs=f, jac=j, params=params, **kw)


SPROTT_TABLE = "J.C. Sprott, Lyapunov exponents of common chaotic systems (table, 2004)"

SYSTEMS = {
    s.name: s
    for s in [
        _make("lorenz63", ("x", "y", "z"), _lorenz, {"s": 10.0, "r": 28.0, "b": 8.0 / 3.0},
              x0=(1.0, 1.0, 1.0), transient=50.0, dt=0.025, lyap_published=0.9056,
              source_system="E.N. Lorenz, J. Atmos. Sci. 20 (1963) 130",
              source_exponent=SPROTT_TABLE + "; Sprott, Chaos and Time-Series Analysis, OUP 2003",
              from_memory=False),
        _make("roessler", ("x", "y", "z"), _roessler, {"a": 0.2, "b": 0.2, "c": 5.7},
              x0=(-9.0, 0.0, 0.0), transient=500.0, dt=0.1, lyap_published=0.0714,
              source_system="O.E. Roessler, Phys. Lett. A 57 (1976) 397",
              source_exponent=SPROTT_TABLE, from_memory=True),
        _make("chen", ("x", "y", "z"), _chen, {"a": 35.0, "b": 3.0, "c": 28.0},
              x0=(-10.0, 0.0, 37.0), transient=30.0, dt=0.01, lyap_published=2.0272,
              source_system="G. Chen, T. Ueta, Int. J. Bifurcation Chaos 9 (1999) 1465",
              source_exponent=SPROTT_TABLE, from_memory=True),
        _make("thomas", ("x", "y", "z"), _thomas, {"b": 0.18},
              x0=(0.1, 0.0, -0.1), transient=1000.0, dt=0.5, lyap_published=0.0349,
              source_system="R. Thomas, Int. J. Bifurcation Chaos 9 (1999) 1889",
              source_exponent=SPROTT_TABLE, from_memory=True),
        _make("halvorsen", ("x", "y", "z"), _halvorsen, {"a": 1.27},
              x0=(-1.48, -1.51, 2.04), transient=50.0, dt=0.025, lyap_published=0.7899,
              source_system="Sprott, Chaos and Time-Series Analysis, OUP 2003 (after A. Halvorsen)",
              source_exponent=SPROTT_TABLE, from_memory=True),
        _make("sprott_b", ("x", "y", "z"), _sprott_b, {},
              x0=(0.05, 0.05, 0.05), transient=200.0, dt=0.1, lyap_published=0.2101,
              source_system="J.C. Sprott, Phys. Rev. E 50 (1994) R647, case B",
              source_exponent="Sprott, Phys. Rev. E 50 (1994) R647 (0.21); " + SPROTT_TABLE + " (0.2101)",
              from_memory=True),
    ]
}


def simulate(system, n_samples, transient=None, x0=None):
    """n_samples states one model step apart, after discarding `transient`
    model time (default the system's) from x0. DOP853 at RTOL/ATOL; the
    samples are the solver's dense output (its 7th-order interpolant)."""
    transient = system.transient if transient is None else transient
    x0 = np.asarray(system.x0 if x0 is None else x0, dtype=float)
    f = system.rhs
    if transient > 0:
        s = solve_ivp(lambda t, u: f(u), (0.0, transient), x0, method="DOP853", rtol=RTOL, atol=ATOL)
        if not s.success:
            raise RuntimeError(f"{system.name}: transient integration failed: {s.message}")
        x0 = s.y[:, -1]
    t_end = (n_samples - 1) * system.dt
    t_eval = np.arange(n_samples) * system.dt
    t_eval[-1] = t_end
    s = solve_ivp(lambda t, u: f(u), (0.0, t_end), x0, method="DOP853", rtol=RTOL, atol=ATOL, t_eval=t_eval)
    if not s.success or s.y.shape[1] != n_samples:
        raise RuntimeError(f"{system.name}: integration failed: {s.message}")
    return s.y.T.copy()


def largest_lyapunov(system, time_units, renorm=None, transient=None, seed=0):
    """Largest Lyapunov exponent from the equations: Benettin's method
    (G. Benettin, L. Galgani, A. Giorgilli, J.-M. Strelcyn, Meccanica 15
    (1980) 9) with one tangent vector, i.e. the QR method reduced to its
    first column. The state and the tangent vector v' = J(x) v are
    integrated together with DOP853 (RTOL/ATOL); every `renorm` model time
    (default a tenth of the published Lyapunov time, at most 1) v is
    renormalised and the log of its growth accumulated. Returns
    (exponent per model time unit, the spread of its estimates over the
    second half of the run as a rough uncertainty)."""
    n = len(system.x0)
    f, jac = system.rhs, system.jac
    if renorm is None:
        renorm = min(1.0, 0.1 / system.lyap_published)
    transient = system.transient if transient is None else transient
    x = simulate(system, 2, transient=transient)[-1]
    v = np.random.default_rng(seed).standard_normal(n)
    v /= np.linalg.norm(v)

    def aug(t, u):
        x_, v_ = u[:n], u[n:]
        return np.concatenate([f(x_), jac(x_) @ v_])

    # Let v align with the leading direction first (20 Lyapunov times).
    align = 20.0 / system.lyap_published
    segments = int(np.ceil(time_units / renorm))
    skip = int(np.ceil(align / renorm))
    total, t_sum = 0.0, 0.0
    running = []
    for k in range(skip + segments):
        s = solve_ivp(aug, (0.0, renorm), np.concatenate([x, v]), method="DOP853", rtol=RTOL, atol=ATOL)
        u = s.y[:, -1]
        x, v = u[:n], u[n:]
        g = np.linalg.norm(v)
        v /= g
        if k >= skip:
            total += np.log(g)
            t_sum += renorm
            running.append(total / t_sum)
    half = running[len(running) // 2:]
    return total / t_sum, float(np.max(half) - np.min(half))
