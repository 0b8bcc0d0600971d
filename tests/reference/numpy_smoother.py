#!/usr/bin/python3
"""numpy reference for tests/learn/state_smoother_reftest.cpp.

Usage: numpy_smoother.py INPUT

INPUT, written by the C++ test, one `key values...` per line:
  shape  N C
  w      the dynamics weight
  scale  C values
  a      C*C values, row-major: the affine model x' = A x + b ...
  b      ... its C values
  y      C*N values, row-major (channel by channel), nan where missing
For an affine model the weak-constraint smoother is linear least squares:
minimise sum over present (t, c) of ((x_tc - y_tc) / s_c)^2 plus
w * sum over t < N-1, c of ((x_t+1 - A x_t - b)_c / s_c)^2 over all C*N
states. Builds that system densely and solves it with numpy.linalg.lstsq
(LAPACK gelsd); prints `x` and the C*N states row-major (repr).
Prints `skip ...` and exits 0 if numpy cannot be imported.
"""
import sys


def main():
    try:
        import numpy as np
    except Exception as e:  # noqa: BLE001 - any import failure means "no reference here"
        print("skip", "cannot import numpy under", sys.executable, ":", repr(e))
        return 0
    v = {}
    with open(sys.argv[1]) as f:
        for line in f:
            key, *rest = line.split()
            v[key] = [float(x) for x in rest]
    n, c = (int(x) for x in v["shape"])
    w = v["w"][0]
    s = np.array(v["scale"])
    a = np.array(v["a"]).reshape(c, c)
    b = np.array(v["b"])
    y = np.array(v["y"]).reshape(c, n)
    rows, rhs = [], []
    idx = lambda t, ch: t * c + ch  # noqa: E731 - unknown x_tc's column
    for t in range(n):
        for ch in range(c):
            if np.isnan(y[ch, t]):
                continue
            r = np.zeros(c * n)
            r[idx(t, ch)] = 1.0 / s[ch]
            rows.append(r)
            rhs.append(y[ch, t] / s[ch])
    sw = np.sqrt(w)
    for t in range(n - 1):
        for ch in range(c):
            r = np.zeros(c * n)
            r[idx(t + 1, ch)] = sw / s[ch]
            for k in range(c):
                r[idx(t, k)] -= sw * a[ch, k] / s[ch]
            rows.append(r)
            rhs.append(sw * b[ch] / s[ch])
    x, *_ = np.linalg.lstsq(np.array(rows), np.array(rhs), rcond=None)
    print("x", " ".join(repr(float(val)) for val in x.reshape(n, c).T.reshape(-1)))
    return 0


if __name__ == "__main__":
    sys.exit(main())
