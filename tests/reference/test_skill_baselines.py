"""Checks of the forecast skill benchmark's outside references
(tools/bench/skill/baselines.py, systems.py): the ridge solve against
numpy's least squares on the augmented system, SINDy's recovery of
Lorenz-63's coefficients, the systems' Jacobians against finite
differences, Lorenz-63's largest exponent against Sprott's published value,
and the valid-prediction-time count. numpy/scipy under /usr/bin/python3;
fixed seeds, nothing timed."""

import dataclasses
import os
import sys
import unittest

import numpy as np

SKILL = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "tools", "bench", "skill")
sys.path.insert(0, SKILL)

import baselines as bl  # noqa: E402
from systems import SYSTEMS, largest_lyapunov, simulate  # noqa: E402


class RidgeTest(unittest.TestCase):
    def test_ridge_equals_lstsq_on_the_augmented_system(self):
        # argmin |X W - Y|^2 + beta |W|^2 is the least-squares solution of
        # [X; sqrt(beta) I] W = [Y; 0]; numpy.linalg.lstsq solves that by SVD.
        rng = np.random.default_rng(7)
        X = rng.standard_normal((300, 40)) @ np.diag(np.logspace(0, -3, 40))
        Y = rng.standard_normal((300, 3))
        for beta in (1e-6, 1e-3, 1.0):
            W = bl.ridge_solve(X, Y, beta)
            Xa = np.vstack([X, np.sqrt(beta) * np.eye(40)])
            Ya = np.vstack([Y, np.zeros((40, 3))])
            ref = np.linalg.lstsq(Xa, Ya, rcond=None)[0]
            self.assertLess(np.max(np.abs(W - ref)) / np.max(np.abs(ref)), 1e-9, f"beta {beta}")


class SindyTest(unittest.TestCase):
    def test_recovers_lorenz63(self):
        # Brunton, Proctor, Kutz, PNAS 113 (2016) 3932 recover Lorenz-63
        # from clean data. Here the discrete-time form: increments over
        # dt = 2.5e-4 divided by dt are f(x) + (dt/2) J f + ..., so the
        # coefficients carry a bias of order dt |J| (about 3 % on y's
        # -1 in y'); the tolerance (ours) is 5 % of each coefficient, and the
        # sparsity pattern must be exact.
        s = dataclasses.replace(SYSTEMS["lorenz63"], dt=2.5e-4)
        X = simulate(s, 40000)
        m = bl.SINDy(degree=2, threshold=0.05, standardize=False).fit_from_pairs(X[:-1], np.diff(X, axis=0))
        C = m.coef / s.dt
        sigma, rho, beta = 10.0, 28.0, 8.0 / 3.0
        true = {((1, 0, 0), 0): -sigma, ((0, 1, 0), 0): sigma,
                ((1, 0, 0), 1): rho, ((0, 1, 0), 1): -1.0, ((1, 0, 1), 1): -1.0,
                ((1, 1, 0), 2): 1.0, ((0, 0, 1), 2): -beta}
        found = {(m.powers[i], k): C[i, k] for i, k in zip(*np.nonzero(C))}
        self.assertEqual(set(found), set(true), f"terms found: {found}")
        for key, value in true.items():
            self.assertAlmostEqual(found[key] / value, 1.0, delta=0.05, msg=f"{key}: {found[key]} vs {value}")

    def test_threshold_zero_is_least_squares(self):
        rng = np.random.default_rng(3)
        Z = rng.standard_normal((500, 2))
        dZ = rng.standard_normal((500, 2))
        m = bl.SINDy(degree=3, threshold=0.0, standardize=False).fit_from_pairs(Z, dZ)
        Theta = bl.polynomial_features(Z, m.powers)
        ref = np.linalg.lstsq(Theta, dZ, rcond=None)[0]
        self.assertLess(np.max(np.abs(m.coef - ref)), 1e-9)


class SystemsTest(unittest.TestCase):
    def test_jacobians_match_finite_differences(self):
        for name, s in SYSTEMS.items():
            X = simulate(s, 50, transient=s.transient / 10)
            for x in X[::10]:
                J = s.jac(x)
                h = 1e-6 * max(1.0, np.max(np.abs(x)))
                Jn = np.column_stack([(s.rhs(x + h * e) - s.rhs(x - h * e)) / (2 * h) for e in np.eye(len(x))])
                np.testing.assert_allclose(J, Jn, rtol=1e-6, atol=1e-6 * np.max(np.abs(J)), err_msg=name)

    def test_lorenz63_largest_exponent(self):
        # 0.9056 (Sprott's table, 2004); 400 model time units: within 5 %
        # (our tolerance for a run this short).
        lam, _ = largest_lyapunov(SYSTEMS["lorenz63"], 400.0)
        self.assertAlmostEqual(lam / 0.9056, 1.0, delta=0.05)


class ScoringTest(unittest.TestCase):
    def test_valid_steps(self):
        err = np.array([[0.1, 0.2, 0.6, 0.1],     # fails at the third step: 2 valid steps
                        [0.1, 0.1, 0.1, 0.1],     # never fails: all 4
                        [0.7, 0.1, 0.1, 0.1],     # fails at once: 0
                        [0.1, np.nan, 0.4, 0.9]])  # NaN (no observation) does not end it: 3
        self.assertEqual(bl.valid_steps(err).tolist(), [2, 4, 0, 3])

    def test_normalized_error(self):
        pred = np.array([[1.0, 2.0]])
        truth = np.array([[0.0, 0.0]])
        std = np.array([2.0, 4.0])
        self.assertAlmostEqual(float(bl.normalized_error(pred, truth, std)[0]), np.sqrt(0.25), places=12)


if __name__ == "__main__":
    unittest.main()
