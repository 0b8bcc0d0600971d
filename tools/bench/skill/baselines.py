"""Outside reference forecasters for the forecast skill benchmark, from the
papers, with numpy/scipy only:

  ESN    echo-state network (reservoir computing) with a ridge-regression
         readout: H. Jaeger, GMD Report 148 (2001); J. Pathak, B. Hunt,
         M. Girvan, Z. Lu, E. Ott, Phys. Rev. Lett. 120 (2018) 024102.
  SINDy  sparse polynomial regression of the one-step map, by sequentially
         thresholded least squares: S.L. Brunton, J.L. Proctor, J.N. Kutz,
         PNAS 113 (2016) 3932 (here in its discrete-time form, fitting the
         increment x_{n+1} - x_n).
  NVAR   next-generation reservoir computing: linear and quadratic
         monomials of k delayed states, ridge readout on the increment:
         D.J. Gauthier, E. Bollt, A. Griffith, W.A.S. Barbosa, Nat. Commun.
         12 (2021) 5564.

All three work in standardized coordinates z = (x - mean) / std (the
training data's mean and std) and predict the increment z_{n+1} - z_n; a
forecast iterates the learned map from its start. Their hyperparameters are
chosen by the benchmark on a validation slice (select_* below), never on
the test slice.

Inputs: `series` is the observed series on the model-step grid, shape
(T, n), with dropped samples filled by linear interpolation (the reservoir
and NVAR need a value at every step), and `observed` a boolean mask of the
grid points that hold a real sample. Pairs whose current or next point is
not observed are left out of every fit, so no interpolated value is ever a
regression target; SINDy uses only consecutive observed pairs.
"""

import itertools
import math
import time

import numpy as np
import scipy.linalg
import scipy.sparse
import scipy.sparse.linalg

# Normalized error threshold of the valid prediction time: P.R. Vlachas et
# al., Neural Networks 126 (2020) 191.
VPT_THRESHOLD = 0.5
# Forecast values are clipped to this many standard deviations so a
# diverging closed loop stays finite (its error is then far above the VPT
# threshold anyway).
CLIP = 1e3


# ----------------------------------------------------------------- ridge
def ridge_solve(X, Y, beta):
    """argmin_W |X W - Y|^2 + beta |W|^2 by the normal equations
    (X^T X + beta I) W = X^T Y, Cholesky. Equal to least squares on the
    augmented system [X; sqrt(beta) I] W = [Y; 0] (checked by
    tests/reference/test_skill_baselines.py)."""
    return ridge_from_gram(X.T @ X, X.T @ Y, beta)


def ridge_from_gram(G, XtY, beta):
    A = G + beta * np.eye(G.shape[0])
    try:
        c = scipy.linalg.cho_factor(A, lower=False, check_finite=False)
        return scipy.linalg.cho_solve(c, XtY, check_finite=False)
    except np.linalg.LinAlgError:
        # beta = 0 on a singular Gram: the minimum-norm least-squares answer.
        return np.linalg.lstsq(A, XtY, rcond=None)[0]


# ----------------------------------------------------------------- scoring
def normalized_error(pred, truth, std):
    """sqrt(mean_c ((x_c - xhat_c) / std_c)^2) along the last axis; NaN in
    truth (an unobserved point) gives NaN."""
    return np.sqrt(np.mean(((pred - truth) / std) ** 2, axis=-1))


def valid_steps(err):
    """Steps before the normalized error first exceeds VPT_THRESHOLD, per
    row of err (B, S); NaN errors (no observation there) do not end it, a
    non-finite forecast does (it is clipped, so it shows as a large error)."""
    bad = np.where(np.isnan(err), False, err > VPT_THRESHOLD)
    out = np.full(err.shape[0], err.shape[1])
    rows, cols = np.nonzero(bad)
    for r in np.unique(rows):
        out[r] = cols[rows == r].min()
    return out


# ----------------------------------------------------------------- helpers
class Standardizer:
    def __init__(self, x):
        self.mean = np.nanmean(x, axis=0)
        self.std = np.nanstd(x, axis=0)

    def z(self, x):
        return (x - self.mean) / self.std

    def x(self, z):
        return z * self.std + self.mean


def fit_rows(observed, begin, end):
    """Indices t in [begin, end - 1) with t and t + 1 both observed: the
    one-step pairs a fit may use."""
    t = np.arange(begin, end - 1)
    return t[observed[t] & observed[t + 1]]


def monomial_powers(n, degree, include_constant=True):
    """Exponent tuples of all monomials in n variables up to `degree`."""
    out = []
    for d in range(0 if include_constant else 1, degree + 1):
        for combo in itertools.combinations_with_replacement(range(n), d):
            p = [0] * n
            for i in combo:
                p[i] += 1
            out.append(tuple(p))
    return out


def polynomial_features(Z, powers):
    """Z (m, n) -> (m, len(powers)) monomials."""
    m = Z.shape[0]
    F = np.empty((m, len(powers)))
    for j, p in enumerate(powers):
        col = np.ones(m)
        for i, e in enumerate(p):
            if e:
                col = col * Z[:, i] ** e
        F[:, j] = col
    return F


def quadratic_features(L):
    """[1, L, unique products L_i L_j (i <= j)] for L (m, d): NVAR's feature
    vector (Gauthier et al. 2021, constant + linear + quadratic)."""
    m, d = L.shape
    iu = np.triu_indices(d)
    Q = (L[:, :, None] * L[:, None, :])[:, iu[0], iu[1]]
    return np.hstack([np.ones((m, 1)), L, Q])


# ----------------------------------------------------------------- SINDy
class SINDy:
    """Discrete-time SINDy: z_{n+1} - z_n = Theta(z_n) Xi with Theta the
    polynomial library up to `degree` and Xi sparse, fitted by sequentially
    thresholded least squares (STLSQ, Brunton et al. 2016, their
    Algorithm: least squares, zero the small coefficients, refit on the
    rest, repeat) with an optional ridge term (as in PySINDy's STLSQ).
    The threshold is applied to coefficients of the column-normalized
    problem (each library column and each target scaled to unit RMS), so one
    threshold means "this share of the target's scale" whatever the units.
    With standardize=False it works on the raw states (the unit check)."""

    def __init__(self, degree=3, threshold=0.0, ridge=0.0, max_iter=20, standardize=True):
        self.degree, self.threshold, self.ridge, self.max_iter = degree, threshold, ridge, max_iter
        self.standardize = standardize

    def fit(self, series, observed, begin, end):
        std = Standardizer(series[begin:end]) if self.standardize else None
        Z = std.z(series) if std else series
        rows = fit_rows(observed, begin, end)
        self.fit_from_pairs(Z[rows], Z[rows + 1] - Z[rows])
        self.std = std
        return self

    def fit_from_pairs(self, Z, dZ):
        n = Z.shape[1]
        self.powers = monomial_powers(n, self.degree)
        Theta = polynomial_features(Z, self.powers)
        col = np.sqrt(np.mean(Theta ** 2, axis=0))
        col[col == 0] = 1.0
        Tn = Theta / col
        tgt = np.sqrt(np.mean(dZ ** 2, axis=0))
        Yn = dZ / tgt
        m = Tn.shape[0]
        # Ridge in the mean-squared scale, so its value does not depend on
        # how many pairs there are.
        G, TY = Tn.T @ Tn / m, Tn.T @ Yn / m
        Xi = np.zeros((Tn.shape[1], n))
        for k in range(n):
            keep = np.ones(Tn.shape[1], bool)
            xi = np.zeros(Tn.shape[1])
            for _ in range(self.max_iter):
                xi = np.zeros(Tn.shape[1])
                idx = np.nonzero(keep)[0]
                if idx.size == 0:
                    break
                xi[idx] = ridge_from_gram(G[np.ix_(idx, idx)], TY[idx, k], self.ridge)
                new_keep = np.abs(xi) >= self.threshold
                if np.array_equal(new_keep, keep):
                    break
                keep = new_keep
            xi[~keep] = 0.0
            Xi[:, k] = xi
        self.coef = Xi / col[:, None] * tgt[None, :]   # in the units of Z and dZ
        return self

    def step(self, Z):
        return Z + polynomial_features(Z, self.powers) @ self.coef

    def forecast(self, series, observed, starts, steps, stop=None):
        """Iterate the map from series[starts] (the observed state) for
        `steps` steps: (B, steps, n) in the series' units. `stop` (see
        _stopped) may end it early."""
        z = self.std.z(series[starts]) if self.std else series[starts].copy()
        out = np.full((len(starts), steps, series.shape[1]), CLIP)
        with np.errstate(all="ignore"):
            for s in range(steps):
                z = np.clip(self.step(z), -CLIP, CLIP)
                z[~np.isfinite(z)] = CLIP
                out[:, s] = z
                if _stopped(stop, s, out, self.std):
                    break
        return self.std.x(out) if self.std else out

    def one_step(self, series, observed, idx):
        z = self.std.z(series[idx]) if self.std else series[idx]
        y = self.step(z)
        return self.std.x(y) if self.std else y

    def terms(self):
        return int(np.count_nonzero(self.coef))


# ----------------------------------------------------------------- NVAR
class NVAR:
    """Gauthier et al. 2021: the feature vector at step n is
    [1, O_lin, O_nonlin] with O_lin = (z_n, z_{n-1}, ..., z_{n-k+1})
    (k delayed states, skip 1) and O_nonlin its unique quadratic monomials;
    z_{n+1} - z_n = W O by ridge regression (their Eq. 4-6)."""

    def __init__(self, k=2, beta=1e-6):
        self.k, self.beta = k, beta

    def _lin(self, Z, idx):
        return np.hstack([Z[idx - j] for j in range(self.k)])

    def fit(self, series, observed, begin, end):
        self.std = Standardizer(series[begin:end])
        Z = self.std.z(series)
        rows = fit_rows(observed, max(begin, self.k - 1), end)
        F = quadratic_features(self._lin(Z, rows))
        m = F.shape[0]
        self.W = ridge_from_gram(F.T @ F / m, F.T @ (Z[rows + 1] - Z[rows]) / m, self.beta)
        return self

    def fit_many(self, series, observed, begin, end, betas):
        """One Gram matrix, several ridge values: [(beta, W)]."""
        self.std = Standardizer(series[begin:end])
        Z = self.std.z(series)
        rows = fit_rows(observed, max(begin, self.k - 1), end)
        F = quadratic_features(self._lin(Z, rows))
        m = F.shape[0]
        G, FY = F.T @ F / m, F.T @ (Z[rows + 1] - Z[rows]) / m
        return [(b, ridge_from_gram(G, FY, b)) for b in betas]

    def forecast(self, series, observed, starts, steps, stop=None):
        Z = self.std.z(series)
        starts = np.asarray(starts)
        hist = [Z[starts - j] for j in range(self.k)]   # newest first, each (B, n)
        out = np.full((len(starts), steps, series.shape[1]), CLIP)
        with np.errstate(all="ignore"):
            for s in range(steps):
                F = quadratic_features(np.hstack(hist))
                z = np.clip(hist[0] + F @ self.W, -CLIP, CLIP)
                z[~np.isfinite(z)] = CLIP
                hist = [z] + hist[:-1]
                out[:, s] = z
                if _stopped(stop, s, out, self.std):
                    break
        return self.std.x(out)

    def one_step(self, series, observed, idx):
        Z = self.std.z(series)
        F = quadratic_features(self._lin(Z, np.asarray(idx)))
        return self.std.x(Z[idx] + F @ self.W)


# ----------------------------------------------------------------- ESN
class ESN:
    """Echo-state network (Jaeger 2001) as Pathak et al. 2018 set it up:
    a sparse random reservoir (average degree `degree`, weights uniform in
    [-1, 1], scaled to `spectral_radius`), each node driven by one input
    channel with a weight uniform in [-input_scaling, input_scaling], plus a
    bias uniform in [-bias_scaling, bias_scaling], leaky tanh units:
        r_n = (1 - leak) r_{n-1} + leak tanh(A r_{n-1} + W_in z_n + b).
    Readout features [1, z_n, r~_n] with r~ the state with every second node
    squared (Pathak et al.'s quadratic readout, which breaks the tanh
    reservoir's odd symmetry); the readout predicts z_{n+1} - z_n by ridge
    regression (the direct input term and the increment target are the
    usual readout of J. Lukosevicius, "A practical guide to applying echo
    state networks", Springer LNCS 7700 (2012)). A forecast first listens:
    from a zero state it is driven by the `warmup` observed steps up to and
    including the start, then runs closed loop on its own output."""

    def __init__(self, n_inputs, size=500, spectral_radius=0.9, input_scaling=0.1, leak=1.0,
                 bias_scaling=0.1, degree=3, seed=1, warmup=500):
        self.size, self.leak, self.warmup = size, leak, warmup
        rng = np.random.default_rng(seed)
        density = degree / size
        A = scipy.sparse.random(size, size, density=density, random_state=rng,
                                data_rvs=lambda k: rng.uniform(-1.0, 1.0, k), format="csr")
        rho = _spectral_radius(A, seed)
        self.A = (A * (spectral_radius / rho)).tocsr() if rho > 0 else A
        self.Win = np.zeros((size, n_inputs))
        self.Win[np.arange(size), rng.integers(0, n_inputs, size)] = rng.uniform(-input_scaling, input_scaling, size)
        self.b = rng.uniform(-bias_scaling, bias_scaling, size)
        self.sq = np.arange(size) % 2 == 0   # the squared half of the nodes

    def _features(self, R, Z):
        Rt = R.copy()
        Rt[:, self.sq] = Rt[:, self.sq] ** 2
        return np.hstack([np.ones((R.shape[0], 1)), Z, Rt])

    def drive(self, Z):
        """Teacher-forced states r_n for every row of Z (T, n): (T, size)."""
        T = Z.shape[0]
        pre = Z @ self.Win.T + self.b
        R = np.empty((T, self.size))
        r = np.zeros(self.size)
        a = self.leak
        for t in range(T):
            r = (1 - a) * r + a * np.tanh(self.A @ r + pre[t])
            R[t] = r
        return R

    def listen(self, Z, starts):
        """States at `starts` after listening from zero to the `warmup`
        steps of Z up to and including each start: (B, size)."""
        starts = np.asarray(starts)
        R = np.zeros((len(starts), self.size))
        a = self.leak
        for j in range(self.warmup - 1, -1, -1):
            u = Z[starts - j]
            R = (1 - a) * R + a * np.tanh((self.A @ R.T).T + u @ self.Win.T + self.b)
        return R

    def prepare(self, series, observed, fit_end, drive_end=None):
        """Standardize on [0, fit_end), drive the reservoir over the
        observed series up to drive_end (default fit_end) and return the
        normal equations of the readout on the one-step pairs of
        [warmup, fit_end). The states are kept for one_step."""
        drive_end = fit_end if drive_end is None else drive_end
        self.std = Standardizer(series[:fit_end])
        Z = self.std.z(series[:drive_end])
        self.R = self.drive(Z)
        rows = fit_rows(observed, self.warmup, fit_end)
        F = self._features(self.R[rows], Z[rows])
        m = F.shape[0]
        return F.T @ F / m, F.T @ (Z[rows + 1] - Z[rows]) / m

    def fit(self, series, observed, fit_end, beta, drive_end=None):
        G, FY = self.prepare(series, observed, fit_end, drive_end)
        self.W = ridge_from_gram(G, FY, beta)
        return self

    def forecast(self, series, observed, starts, steps, stop=None):
        Z = self.std.z(series)
        starts = np.asarray(starts)
        # Listening does not depend on the readout: kept for the next call
        # with the same starts (the ridge values of one reservoir).
        key = (id(series), starts.tobytes())
        if getattr(self, "_listened", (None,))[0] != key:
            self._listened = (key, self.listen(Z, starts))
        R = self._listened[1]
        z = Z[starts]
        a = self.leak
        out = np.full((len(starts), steps, series.shape[1]), CLIP)
        with np.errstate(all="ignore"):
            for s in range(steps):
                z = np.clip(z + self._features(R, z) @ self.W, -CLIP, CLIP)
                z[~np.isfinite(z)] = CLIP
                out[:, s] = z
                if _stopped(stop, s, out, self.std):
                    break
                R = (1 - a) * R + a * np.tanh((self.A @ R.T).T + z @ self.Win.T + self.b)
        return self.std.x(out)

    def drive_all(self, series):
        """Drive over the whole observed series, for one_step anywhere."""
        self.R = self.drive(self.std.z(series))

    def one_step(self, series, observed, idx):
        """Teacher-forced one-step predictions at idx: the reservoir state
        there after being driven by the observed series from its start
        (prepare's drive; idx below its drive_end)."""
        idx = np.asarray(idx)
        Z = self.std.z(series[idx])
        return self.std.x(Z + self._features(self.R[idx], Z) @ self.W)


def _stopped(stop, s, out_z, std):
    """Every 20 steps, stop(s, forecast so far in the series' units) may
    say that every forecast has already failed (the validation's VPT needs
    nothing after that); the rest of `out` then stays at CLIP."""
    if stop is None or s % 20 != 19:
        return False
    part = out_z[:, : s + 1]
    return bool(stop(s, std.x(part) if std is not None else part))


def _spectral_radius(A, seed):
    try:
        v0 = np.random.default_rng(seed).standard_normal(A.shape[0])
        ev = scipy.sparse.linalg.eigs(A, k=1, which="LM", return_eigenvectors=False, v0=v0, maxiter=5000)
        return float(np.abs(ev[0]))
    except scipy.sparse.linalg.ArpackNoConvergence:
        return float(np.max(np.abs(np.linalg.eigvals(A.toarray()))))


# ----------------------------------------------------------------- selection
class Validation:
    """The validation slice: forecasts from `starts` (observed grid points
    in the last part of the training data) scored against the OBSERVED
    series (the truth is not known to a forecaster), steps capped so no
    forecast leaves the slice. score() gives (mean VPT in steps, one-step
    error): higher VPT first, lower one-step error breaks ties."""

    def __init__(self, series, observed, begin, end, n_starts, horizon, std):
        self.series, self.observed, self.std, self.end = series, observed, std, end
        self.steps = min(horizon, (end - begin) // 2)
        cand = np.arange(begin, end - self.steps)
        cand = cand[observed[cand]]
        self.starts = cand[np.linspace(0, len(cand) - 1, n_starts).round().astype(int)]
        self.truth = np.where(observed[:, None], series, np.nan)
        pairs = np.arange(begin, end - 1)
        self.pairs = pairs[observed[pairs] & observed[pairs + 1]]

    def vpt(self, model):
        idx = self.starts[:, None] + 1 + np.arange(self.steps)[None, :]
        truth = self.truth[idx]

        def all_failed(s, part):
            err = normalized_error(part, truth[:, : s + 1], self.std)
            return np.all(np.nan_to_num(err, nan=0.0).max(axis=1) > VPT_THRESHOLD)

        pred = model.forecast(self.series, self.observed, self.starts, self.steps, stop=all_failed)
        return float(np.mean(valid_steps(normalized_error(pred, truth, self.std))))

    def one_step(self, model):
        y = model.one_step(self.series, self.observed, self.pairs)
        return float(np.mean(np.sqrt(np.mean(((y - self.series[self.pairs + 1]) / self.std) ** 2, axis=0))))

    def score(self, model):
        v, e = self.vpt(model), self.one_step(model)
        return (v, -e if math.isfinite(e) else -math.inf)


SINDY_DEGREES = (2, 3)
SINDY_THRESHOLDS = (0.0, 1e-6, 1e-5, 1e-4, 1e-3, 1e-2, 3e-2)
SINDY_RIDGES = (0.0, 1e-10, 1e-8, 1e-6)
NVAR_KS = (1, 2, 3, 4, 5)
RIDGE_BETAS = (1e-14, 1e-12, 1e-10, 1e-9, 1e-8, 1e-7, 1e-6, 1e-5, 1e-4, 1e-3, 1e-2)


def select_sindy(series, observed, fit_end, val, log=lambda s: None):
    """Grid over degree x threshold x ridge, scored on the validation
    slice; returns (model fitted on [0, fit_end), chosen settings, seconds
    of the search)."""
    t0 = time.time()
    best = None
    for deg in SINDY_DEGREES:
        for ridge in SINDY_RIDGES:
            for thr in SINDY_THRESHOLDS:
                m = SINDy(deg, thr, ridge).fit(series, observed, 0, fit_end)
                s = val.score(m)
                if best is None or s > best[0]:
                    best = (s, m, {"degree": deg, "threshold": thr, "ridge": ridge, "terms": m.terms()})
    log(f"SINDy chose {best[2]} (validation VPT {best[0][0]:.0f} steps, one-step {-best[0][1]:.2e})")
    return best[1], best[2], time.time() - t0


def select_nvar(series, observed, fit_end, val, log=lambda s: None):
    t0 = time.time()
    best = None
    for k in NVAR_KS:
        m = NVAR(k)
        for beta, W in m.fit_many(series, observed, 0, fit_end, RIDGE_BETAS):
            m.W, m.beta = W, beta
            s = val.score(m)
            if best is None or s > best[0]:
                best = (s, {"k": k, "beta": beta})
    m = NVAR(**best[1]).fit(series, observed, 0, fit_end)
    log(f"NVAR chose {best[1]} (validation VPT {best[0][0]:.0f} steps, one-step {-best[0][1]:.2e})")
    return m, best[1], time.time() - t0


def esn_candidates(trials, sizes, seed):
    """Random search space (fixed seed): spectral radius and input and bias
    scaling log-uniform, leak uniform; Pathak et al.'s average degree 3."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(trials):
        out.append({"size": int(rng.choice(sizes)),
                    "spectral_radius": float(math.exp(rng.uniform(math.log(0.05), math.log(1.5)))),
                    "input_scaling": float(math.exp(rng.uniform(math.log(0.01), math.log(1.0)))),
                    "bias_scaling": float(math.exp(rng.uniform(math.log(0.01), math.log(1.0)))),
                    "leak": float(rng.uniform(0.1, 1.0))})
    return out


def select_esn(series, observed, fit_end, val, trials, sizes, warmup, seed, log=lambda s: None):
    """Random search over the reservoir's settings, each with every ridge
    value of RIDGE_BETAS (one Gram matrix per reservoir); scored on the
    validation slice. Returns (model, settings, seconds)."""
    t0 = time.time()
    best = None
    for i, c in enumerate(esn_candidates(trials, sizes, seed)):
        m = ESN(series.shape[1], seed=seed + i, warmup=warmup, **c)
        G, FY = m.prepare(series, observed, fit_end, val.end)
        for beta in RIDGE_BETAS:
            m.W = ridge_from_gram(G, FY, beta)
            s = val.score(m)
            if best is None or s > best[0]:
                best = (s, dict(c, beta=beta, seed=seed + i), m, m.W.copy())
        log(f"  ESN trial {i + 1}/{trials}: {_fmt(c)}; best so far VPT {best[0][0]:.0f} steps ({_fmt(best[1])})")
    m, settings = best[2], best[1]
    m.W = best[3]
    log(f"ESN chose {_fmt(settings)} (validation VPT {best[0][0]:.0f} steps)")
    return m, settings, time.time() - t0


def _fmt(d):
    return ", ".join(f"{k} {v:.3g}" if isinstance(v, float) else f"{k} {v}" for k, v in d.items())
