#!/usr/bin/python3
"""numpy reference for tests/learn/least_squares_reftest.cpp.

Usage: numpy_lstsq.py INPUT

INPUT, written by the C++ test, one `key values...` per line:
  shape   N F C
  lambda  the ridge penalty
  phi     N*F values, row-major (one row per sample)
  y       N*C values, row-major
Solves min ||Phi W - Y||^2 + lambda ||W||^2 with numpy.linalg.lstsq on the
augmented system [Phi; sqrt(lambda) I] W = [Y; 0] (float64, LAPACK gelsd)
and prints `w` and the F*C values of W row-major (repr: exact round trip).
Prints `skip ...` and exits 0 if numpy cannot be imported.
"""
import sys


def main():
    try:
        import numpy as np
    except Exception as e:  # noqa: BLE001 - any import failure means "no reference here"
        print("skip", "cannot import numpy under", sys.executable, ":", repr(e))
        return 0
    values = {}
    with open(sys.argv[1]) as f:
        for line in f:
            key, *rest = line.split()
            values[key] = [float(v) for v in rest]
    n, fcount, c = (int(v) for v in values["shape"])
    lam = values["lambda"][0]
    phi = np.array(values["phi"]).reshape(n, fcount)
    y = np.array(values["y"]).reshape(n, c)
    a = np.vstack([phi, np.sqrt(lam) * np.eye(fcount)])
    b = np.vstack([y, np.zeros((fcount, c))])
    w, *_ = np.linalg.lstsq(a, b, rcond=None)
    print("w", " ".join(repr(float(v)) for v in w.reshape(-1)))
    return 0


if __name__ == "__main__":
    sys.exit(main())
