#!/usr/bin/env python3
"""Reference trajectory of Lorenz-63 for tests/physics/lorenz_reftest.cpp.

Integrates x' = s (y - x), y' = x (r - z) - y, z' = x y - b z with
s = 10, r = 28, b = 8/3 (Sprott 2003; docs/references.md "Systems") from (1, 1, 1) using
SciPy's solve_ivp with method DOP853 (Hairer's 8th-order Dormand-Prince),
rtol = atol = 1e-12 (docs/references.md "Integrators"), and prints one line per
output time: "t x y z", each number as Python's repr (shortest round-trip
decimal, so the C++ side reads back the exact binary64 values).

If SciPy is missing, prints a single line starting with "skip:" and exits 0,
so the C++ test can skip with the reason.
"""

import sys

TIMES = [0.5, 1.0, 2.0, 5.0]
SIGMA, RHO, BETA = 10.0, 28.0, 8.0 / 3.0


def lorenz(_t, s):
    x, y, z = s
    return [SIGMA * (y - x), x * (RHO - z) - y, x * y - BETA * z]


def main():
    try:
        from scipy.integrate import solve_ivp
    except ImportError as e:  # pragma: no cover - depends on the machine
        print(f"skip: scipy is not importable under {sys.executable}: {e}")
        return 0
    for t in TIMES:
        # One solve per output time, so each printed state is the end of a
        # real step rather than a dense-output interpolation.
        sol = solve_ivp(lorenz, (0.0, t), [1.0, 1.0, 1.0], method="DOP853", rtol=1e-12, atol=1e-12)
        if not sol.success:
            print(f"solve_ivp failed at t={t}: {sol.message}", file=sys.stderr)
            return 1
        x, y, z = (float(v[-1]) for v in sol.y)
        print(" ".join(repr(v) for v in (float(sol.t[-1]), x, y, z)))
    return 0


if __name__ == "__main__":
    sys.exit(main())
