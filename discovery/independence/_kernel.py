"""Kernel independence tests: HSIC (unconditional) and KCI (conditional), exact or low-rank.

Correlation sees only straight-line dependence: ``y = x² + noise`` has zero correlation and a
strong dependence. Kernel tests compare whole distributions instead. Each variable (or set of
variables) is mapped through a Gaussian kernel ``k(a, b) = exp(-|a - b|² / (2 σ²))`` on
standardised data, with the width ``σ`` set by the *median heuristic* (the median distance
between rows); with such a characteristic kernel, a zero population statistic means
independence.

Unconditional, ``x ⟂ y`` (HSIC)
    The statistic is ``n · HSIC_b = tr(Kc Lc) / n``, where ``Kc = H K H`` and ``Lc`` are the
    centred kernel matrices of x and y. Its null distribution is approximated by a gamma
    distribution whose mean and variance are estimated from the kernel matrices (Gretton,
    Fukumizu, Teo, Song, Schölkopf & Smola 2008).

Conditional, ``x ⟂ y | S`` (KCI)
    The kernel matrices of ``ẍ = (x, S)`` and of ``y`` are centred and *residualised* on S by
    kernel ridge regression, ``R = ε (K_S + ε I)⁻¹``, giving ``K_ẍ|S = R Kc_ẍ R`` and
    ``K_y|S = R Kc_y R``. The statistic is ``tr(K_ẍ|S K_y|S)``; under conditional independence
    it is close to a weighted sum of χ²₁ variables whose weights are the eigenvalues of the
    Hadamard product ``K_ẍ|S ∘ K_y|S``. The gamma approximation uses its mean
    ``Σ_t K_ẍ|S[t,t] K_y|S[t,t]`` and variance ``2 Σ_{t,s} (K_ẍ|S[t,s] K_y|S[t,s])²``
    (Zhang, Peters, Janzing & Schölkopf 2011).

Both exact tests cost O(n²) memory and the conditional one O(n³) time, so above
``lowrank_above`` rows (default 500) the test switches to a **low-rank** version in the manner
of RCIT/RCoT (Strobl, Zhang & Visweswaran 2019): x and y are each mapped to ``features``
random Fourier features (Rahimi & Recht 2007), whose inner products approximate their Gaussian
kernels; the conditioning set to ``features_given`` Nyström features (Williams & Seeger 2001);
the x and y features are residualised on the set's features by ridge regression (ridge ε, as
in the exact test), and the statistic is ``n ‖Cov(r_x, r_y)‖²_F`` with a gamma null fitted to
the covariance of the residual feature products. The set's kernel is narrower in this version
(half the median distance, :data:`GIVEN_WIDTH`): a regression on 100 features is less flexible
than one on all n rows, and a wide kernel left nonlinear signal in the residuals that inflated
the size. Random features and landmarks are drawn from ``seed`` and the variables' positions
only, so a p-value never depends on how a batch was split over processes.

Calibration is good at moderate n; with thousands of rows and a conditioning variable that
drives both x and y through strongly nonlinear links, both versions reject a true conditional
independence somewhat more often than α (0.05–0.13 at α = 0.05 in our runs at n = 2000–3000):
the regression on the set is never perfect and the statistic grows with n. See
docs/independence-tests.md.

Options
-------
``null="gamma"`` (default) uses the gamma approximations above. ``null="simulated"`` draws the
null instead: permutations of y for the unconditional test, and Monte-Carlo draws of the
weighted χ² sum (weights: the eigenvalues above) for the conditional one (Zhang et al. 2011,
§3.3), ``null_samples`` draws, seeded by ``seed``.

References
----------
.. [1] Gretton, A., Fukumizu, K., Teo, C. H., Song, L., Schölkopf, B. & Smola, A. J. (2008).
   A kernel statistical test of independence. *NIPS 20*, 585–592.
.. [2] Zhang, K., Peters, J., Janzing, D. & Schölkopf, B. (2011). Kernel-based conditional
   independence test and application in causal discovery. *UAI 2011*, 804–813.
.. [3] Rahimi, A. & Recht, B. (2007). Random features for large-scale kernel machines.
   *NIPS 20*, 1177–1184.
.. [4] Strobl, E. V., Zhang, K. & Visweswaran, S. (2019). Approximate kernel-based conditional
   independence tests for fast non-parametric causal discovery. *Journal of Causal
   Inference* 7(1), 20180017.
.. [5] Williams, C. K. I. & Seeger, M. (2001). Using the Nyström method to speed up kernel
   machines. *NIPS 13*, 682–688.
"""

from __future__ import annotations

import multiprocessing
import warnings
from collections import OrderedDict

import numpy as np
from scipy import linalg, special

from ..exceptions import DegenerateDataWarning
from ..executor import blas_threads
from ._base import IndependenceTest
from ._tabular import (as_frame, check_choice, check_int, check_missing_policy, check_real,
                       check_seed, check_single_levels, fingerprint, numeric_values,
                       reject_unknown)

__all__ = ["KernelCI", "median_width", "gaussian_kernel", "hsic_gamma", "kci_gamma"]

#: Rows used to compute a median-heuristic width (an evenly spaced subsample above this).
WIDTH_ROWS = 500
#: Width of the conditioning set's kernel in the low-rank test, as a multiple of the median
#: distance. With 100 landmarks and the full median width, the regression on the set left
#: enough nonlinear signal for size to reach 0.1–0.3 at n = 2000–5000 on strongly nonlinear
#: chains; half the median brought it to 0.05–0.1 (our calibration runs; common practice,
#: no source, that a narrower kernel fits the regression on the set more closely).
GIVEN_WIDTH = 0.5
#: Fewest complete rows a kernel test will run on (the gamma fit needs n > 5).
MIN_ROWS = 10
#: Exact tests on more rows than this, in the main process, keep all BLAS threads; smaller
#: matrices (and worker processes, which already share the cores) run single-threaded.
THREADED_ROWS = 1000
# Byte budget of the per-process cache of kernel matrices (exact tests).
_CACHE_BYTES = 384 * 2 ** 20

_OWNER = "the kernel test ('kci')"
OPTIONS = ("seed", "lowrank_above", "features", "features_given", "null", "null_samples",
           "epsilon")


# --------------------------------------------------------------------------- kernel pieces

def _subsample(a: np.ndarray, rows: int = WIDTH_ROWS) -> np.ndarray:
    if len(a) <= rows:
        return a
    return a[np.linspace(0, len(a) - 1, rows).astype(np.intp)]


def median_width(a: np.ndarray) -> float:
    """Median heuristic: the median Euclidean distance between distinct rows of ``a``.

    Computed on an evenly spaced subsample of :data:`WIDTH_ROWS` rows for larger tables. A zero
    median (more than half of the pairs tied) falls back to the median of the positive
    distances, and to 1 when every row is the same.
    """
    a = _subsample(np.asarray(a, dtype=float).reshape(len(a), -1))
    sq = (a * a).sum(axis=1)
    d2 = sq[:, None] + sq[None, :] - 2.0 * (a @ a.T)
    iu = np.triu_indices(len(a), k=1)
    dist = np.sqrt(np.clip(d2[iu], 0.0, None))
    if dist.size == 0:
        return 1.0
    med = float(np.median(dist))
    if med <= 1e-12:
        positive = dist[dist > 1e-12]
        med = float(np.median(positive)) if positive.size else 1.0
    return med


def gaussian_kernel(a: np.ndarray, width: float) -> np.ndarray:
    """``K[i, j] = exp(-|a_i - a_j|² / (2 width²))`` for the rows of ``a``."""
    a = np.asarray(a, dtype=float).reshape(len(a), -1)
    sq = (a * a).sum(axis=1)
    d2 = sq[:, None] + sq[None, :] - 2.0 * (a @ a.T)
    np.clip(d2, 0.0, None, out=d2)
    d2 *= -1.0 / (2.0 * width * width)
    return np.exp(d2, out=d2)


def _centre(k: np.ndarray) -> np.ndarray:
    """``H K H`` with ``H = I - 11ᵀ/n``."""
    row = k.mean(axis=0)
    return k - row[None, :] - row[:, None] + row.mean()


def _standardise(a: np.ndarray) -> np.ndarray:
    a = a - a.mean(axis=0)
    sd = a.std(axis=0)
    sd[sd == 0] = 1.0
    return a / sd


def hsic_gamma(k: np.ndarray, l: np.ndarray, kc: np.ndarray | None = None,
               lc: np.ndarray | None = None) -> tuple[float, float]:
    """HSIC test statistic ``n · HSIC_b`` and its gamma-approximation p-value.

    Parameters
    ----------
    k, l : (n, n) arrays
        Kernel matrices of x and y (uncentred).
    kc, lc : (n, n) arrays, optional
        Their centred versions, when already computed.

    Notes
    -----
    Mean and variance of the null follow Gretton et al. (2008), §3 and their reference code:
    ``E = (1 + μx μy − μx − μy) / n`` with ``μ`` the mean off-diagonal kernel value, and
    ``Var = 72 (n−4)(n−5) / (n(n−1)(n−2)(n−3)) · mean_{i≠j} (Kc Lc / 6)²_{ij}``.
    """
    n = k.shape[0]
    kc = _centre(k) if kc is None else kc
    lc = _centre(l) if lc is None else lc
    prod = kc * lc
    stat = prod.sum() / n
    sq = (prod / 6.0) ** 2
    var = (sq.sum() - np.trace(sq)) / (n * (n - 1))
    var *= 72.0 * (n - 4) * (n - 5) / (n * (n - 1) * (n - 2) * (n - 3))
    mu_x = (k.sum() - np.trace(k)) / (n * (n - 1))
    mu_y = (l.sum() - np.trace(l)) / (n * (n - 1))
    mean = (1.0 + mu_x * mu_y - mu_x - mu_y) / n
    return float(stat), _gamma_sf(stat, n * mean, n * n * var)


def kci_gamma(kx: np.ndarray, ky: np.ndarray) -> tuple[float, float]:
    """KCI statistic ``tr(Kx Ky)`` of two residualised kernel matrices and its gamma p-value.

    The null's mean is ``Σ_t Kx[t,t] Ky[t,t]`` and its variance ``2 Σ (Kx ∘ Ky)²``: the trace
    and twice the squared Frobenius norm of the Hadamard product, whose eigenvalues weight
    the χ²₁ terms of the null (Zhang et al. 2011, Theorem 4 and §3.3).
    """
    prod = kx * ky
    stat = prod.sum()
    mean = float(np.diagonal(prod).sum())
    var = 2.0 * float((prod * prod).sum())
    return float(stat), _gamma_sf(stat, mean, var)


def _gamma_sf(stat: float, mean: float, var: float) -> float:
    if not (np.isfinite(stat) and mean > 0 and var > 0):
        return float("nan")
    shape = mean * mean / var
    scale = var / mean
    return float(special.gammaincc(shape, max(stat, 0.0) / scale))  # gamma survival function


def _residual_maker(kzc: np.ndarray, epsilon: float) -> np.ndarray:
    """``R = ε (Kc_S + ε I)⁻¹``, symmetric, by a Cholesky solve."""
    n = kzc.shape[0]
    a = kzc + epsilon * np.eye(n)
    try:
        factor = linalg.cho_factor(a, lower=True, check_finite=False)
        r = linalg.cho_solve(factor, epsilon * np.eye(n), check_finite=False)
    except linalg.LinAlgError:
        r = epsilon * np.linalg.pinv(a, hermitian=True)
    return 0.5 * (r + r.T)


def _weighted_chi2_sf(stat: float, weights: np.ndarray, samples: int,
                      rng: np.random.Generator) -> float:
    """Monte-Carlo p-value of ``Σ w_k z_k²`` (the spectral null, Zhang et al. 2011 §3.3)."""
    weights = weights[weights > weights.max() * 1e-6] if weights.size else weights
    if weights.size == 0:
        return float("nan")
    draws = np.empty(samples)
    step = max(1, 2 ** 22 // max(1, weights.size))
    for start in range(0, samples, step):
        stop = min(samples, start + step)
        z = rng.standard_normal((stop - start, weights.size))
        draws[start:stop] = (z * z) @ weights
    return float((1 + np.count_nonzero(draws >= stat)) / (samples + 1))


class _Lru:
    """A small least-recently-used store of arrays bounded by bytes."""

    def __init__(self, budget: int):
        self.budget = budget
        self.used = 0
        self.items: OrderedDict = OrderedDict()

    def get(self, key):
        value = self.items.get(key)
        if value is not None:
            self.items.move_to_end(key)
        return value

    def put(self, key, value):
        size = getattr(value, "nbytes", 0)
        if size > self.budget:
            return value
        self.items[key] = value
        self.used += size
        while self.used > self.budget:
            _, old = self.items.popitem(last=False)
            self.used -= getattr(old, "nbytes", 0)
        return value


# --------------------------------------------------------------------------- the test

class KernelCI(IndependenceTest):
    """Kernel tests of (conditional) independence: HSIC for ``x ⟂ y``, KCI for ``x ⟂ y | S``.

    Parameters
    ----------
    data : pandas.DataFrame or 2-D array
        Numeric columns, one per variable (binary and ordinal codes are used as numbers).
    variables : sequence of str, optional
        Names when ``data`` is an array.
    missing : {"drop", "test-wise"}
        ``"test-wise"``: each test uses the rows complete on its own variables.
    seed : int, default 0
        Seeds the random features of the low-rank test and the simulated null. The same seed
        gives the same p-values, however the work is split over processes.
    lowrank_above : int, default 500
        Above this many rows (of a test), the low-rank random-feature test replaces the exact
        one. ``0`` always uses features; a very large number never does.
    features : int, default 10
        Random Fourier features for x and for y in the low-rank test.
    features_given : int, default 100
        Nyström landmarks (features) for the conditioning set in the low-rank test.
    null : {"gamma", "simulated"}, default "gamma"
        How the null distribution is approximated (see the module docstring).
    null_samples : int, default 1000
        Permutations or Monte-Carlo draws when ``null="simulated"``.
    epsilon : float, default 1e-3
        Ridge ε of the regression on the conditioning set (KCI's regulariser).

    Attributes
    ----------
    description : str
        One line saying which version runs at this size (exact or low-rank, which null) —
        the text the search result notes.

    Raises
    ------
    DataValidationError
        A column is not numeric, holds infinite values, or has a single level.
    SettingsError
        An option is outside its range.

    Warns
    -----
    DegenerateDataWarning
        A test has fewer than 10 complete rows, or a degenerate kernel; its p-value is NaN,
        which the search reads as "dependence not ruled out".

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> rng = np.random.default_rng(0)
    >>> x = rng.normal(size=300)
    >>> frame = pd.DataFrame({"x": x, "y": x ** 2 + 0.3 * rng.normal(size=300),
    ...                       "w": rng.normal(size=300)})
    >>> test = KernelCI(frame)
    >>> test.test("x", "y").pvalue < 0.01, test.test("x", "w").pvalue > 0.01
    (True, True)
    """

    name = "kci"
    vectorised = False

    def __init__(self, data, *, variables=None, missing: str = "drop", seed: int = 0,
                 lowrank_above: int = 500, features: int = 10, features_given: int = 100,
                 null: str = "gamma", null_samples: int = 1000, epsilon: float = 1e-3):
        frame = as_frame(data, variables, owner=_OWNER)
        self._has_nan = check_missing_policy(missing, frame, _OWNER)
        check_single_levels(frame, _OWNER)
        self._values = numeric_values(
            frame, _OWNER, hint="the kernel test needs numbers — exclude the column or "
                                "choose test 'mixed' or 'g-squared' for categorical data")
        self.variables = tuple(frame.columns)
        self.n = int(len(frame))
        self.missing = missing
        self.seed = check_seed(seed, _OWNER)
        self.lowrank_above = check_int(lowrank_above, "lowrank_above", _OWNER, minimum=0)
        self.features = check_int(features, "features", _OWNER, minimum=1)
        self.features_given = check_int(features_given, "features_given", _OWNER, minimum=1)
        self.null = check_choice(null, "null", _OWNER, ("gamma", "simulated"))
        self.null_samples = check_int(null_samples, "null_samples", _OWNER, minimum=10)
        self.epsilon = check_real(epsilon, "epsilon", _OWNER, low=0.0)
        self._key = ("kci", missing, self.seed, self.lowrank_above, self.features,
                     self.features_given, self.null, self.null_samples, self.epsilon,
                     frame.shape, fingerprint(frame))
        self._z = None if self._has_nan else _standardise(self._values)
        self._cache = _Lru(_CACHE_BYTES)

    # -- protocol ----------------------------------------------------------------------------
    def settings_key(self) -> tuple:
        return self._key

    @property
    def lowrank(self) -> bool:
        """True when tests on all rows use the low-rank random-feature version."""
        return self.n > self.lowrank_above

    @property
    def description(self) -> str:
        """Which version runs on the full table, in one line."""
        null = ("gamma approximation of the null" if self.null == "gamma"
                else f"simulated null ({self.null_samples} draws, seed {self.seed})")
        if self.lowrank:
            return (f"kci: low-rank ({self.features} random Fourier features per variable, "
                    f"{self.features_given} Nyström features for the conditioning set; seed "
                    f"{self.seed}) because n = {self.n} > {self.lowrank_above}; {null}")
        return f"kci: exact kernel matrices (n = {self.n} ≤ {self.lowrank_above}); {null}"

    def describe_tests(self, tests) -> list[str]:
        """Notes for a search result: which version answered the tests.

        Parameters
        ----------
        tests : iterable of (x, y, given, ...)
            The tests run, by variable name (extra items such as the p-value are ignored).
        """
        try:
            count = len(tests)
        except TypeError:
            count = sum(1 for _ in tests)
        return [self.description] if count else []

    def __getstate__(self):
        state = self.__dict__.copy()
        state["_cache"] = None
        return state

    def __setstate__(self, state):
        self.__dict__.update(state)
        self._cache = _Lru(_CACHE_BYTES)

    def _batch(self, triples):
        m = len(triples)
        stat = np.full(m, np.nan)
        pval = np.full(m, np.nan)
        # Triples sharing a conditioning set share its residual maker: visit them together.
        order = sorted(range(m), key=lambda i: (triples[i][2], triples[i][0], triples[i][1]))
        threaded = (not self.lowrank and self.n > THREADED_ROWS
                    and multiprocessing.parent_process() is None)
        with blas_threads(None if threaded else 1):
            for i in order:
                x, y, s = triples[i]
                stat[i], pval[i] = self._one(x, y, s)
        bad = int(np.isnan(pval).sum())
        if bad:
            warnings.warn(f"{bad} kernel test(s) had fewer than {MIN_ROWS} complete rows or a "
                          f"degenerate kernel; their p-values are NaN", DegenerateDataWarning,
                          stacklevel=3)
        return stat, pval

    # -- one test ----------------------------------------------------------------------------
    def _one(self, x: int, y: int, s: tuple[int, ...]) -> tuple[float, float]:
        cols = (x, y, *s)
        if self._has_nan:
            rows = ~np.isnan(self._values[:, cols]).any(axis=1)
            n = int(rows.sum())
            if n < MIN_ROWS:
                return float("nan"), float("nan")
            data = _standardise(self._values[rows][:, list(cols)])
            local = {c: k for k, c in enumerate(cols)}
            view, key = data, ("rows", rows.tobytes())
        else:
            n = self.n
            if n < MIN_ROWS:
                return float("nan"), float("nan")
            view, local, key = self._z, None, ("all",)
        rng = np.random.default_rng([self.seed, x, y, len(s), *s])
        if n > self.lowrank_above:
            return self._lowrank(view, local, key, x, y, s, rng)
        return self._exact(view, local, key, x, y, s, rng)

    def _cols(self, view, local, cols):
        if local is None:
            return view[:, list(cols)]
        return view[:, [local[c] for c in cols]]

    def _memo(self, key, make):
        if self._cache is None:
            self._cache = _Lru(_CACHE_BYTES)
        value = self._cache.get(key)
        if value is None:
            value = self._cache.put(key, make())
        return value

    def _kernel(self, view, local, rows_key, cols):
        """(K, Kc) of the columns ``cols``, memoised."""
        def make():
            a = self._cols(view, local, cols)
            k = gaussian_kernel(a, median_width(a))
            return np.stack([k, _centre(k)])
        return self._memo(("K", rows_key, tuple(cols)), make)

    def _exact(self, view, local, rows_key, x, y, s, rng):
        if not s:
            kx = self._kernel(view, local, rows_key, (x,))
            ky = self._kernel(view, local, rows_key, (y,))
            stat, p = hsic_gamma(kx[0], ky[0], kx[1], ky[1])
            if self.null == "simulated":
                p = _permutation_pvalue(kx[1], ky[1], stat, self.null_samples, rng)
            return stat, p
        r = self._memo(("R", rows_key, s), lambda: _residual_maker(
            self._kernel(view, local, rows_key, s)[1], self.epsilon))

        def residual(cols):
            def make():
                kc = self._kernel(view, local, rows_key, cols)[1]
                out = r @ kc @ r
                return 0.5 * (out + out.T)
            return self._memo(("KR", rows_key, cols, s), make)

        # ẍ = (x, S) augments x with the conditioning set, as in Zhang et al. (2011).
        kx = residual((x, *s))
        ky = residual((y,))
        stat, p = kci_gamma(kx, ky)
        if self.null == "simulated":
            weights = np.linalg.eigvalsh(kx * ky)
            p = _weighted_chi2_sf(stat, np.clip(weights, 0, None), self.null_samples, rng)
        return stat, p

    # -- low rank ----------------------------------------------------------------------------
    def _fourier(self, view, local, rows_key, cols, count):
        """Centred random Fourier features of the columns ``cols`` (Rahimi & Recht 2007)."""
        def make():
            a = self._cols(view, local, cols)
            width = median_width(a)
            gen = np.random.default_rng([self.seed, count, len(cols), *cols])
            w = gen.standard_normal((a.shape[1], count)) / width
            b = gen.uniform(0.0, 2.0 * np.pi, count)
            f = np.sqrt(2.0 / count) * np.cos(a @ w + b)
            return f - f.mean(axis=0)
        return self._memo(("F", rows_key, tuple(cols), count), make)

    def _nystrom(self, view, local, rows_key, cols, count):
        """Centred Nyström features of the conditioning set (Williams & Seeger 2001).

        ``count`` landmark rows, drawn from ``seed`` and the set's positions; features
        ``K_nm U Λ^(-1/2)`` from the eigen-decomposition ``K_mm = U Λ Uᵀ``, so that their inner
        products approximate the Gaussian kernel. The width is :data:`GIVEN_WIDTH` times the
        median distance (see the module docstring).
        """
        def make():
            a = self._cols(view, local, cols)
            width = GIVEN_WIDTH * median_width(a)
            gen = np.random.default_rng([self.seed, count, len(cols), *cols])
            marks = a[np.sort(gen.choice(len(a), size=min(count, len(a)), replace=False))]
            sq = (a * a).sum(axis=1)
            d2 = sq[:, None] + (marks * marks).sum(axis=1)[None, :] - 2.0 * (a @ marks.T)
            knm = np.exp(-np.clip(d2, 0.0, None) / (2.0 * width * width))
            lam, u = np.linalg.eigh(gaussian_kernel(marks, width))
            keep = lam > lam.max() * 1e-8
            f = knm @ (u[:, keep] / np.sqrt(lam[keep]))
            return f - f.mean(axis=0)
        return self._memo(("N", rows_key, tuple(cols), count), make)

    def _lowrank(self, view, local, rows_key, x, y, s, rng):
        fx = self._fourier(view, local, rows_key, (x,), self.features)
        fy = self._fourier(view, local, rows_key, (y,), self.features)
        n = fx.shape[0]
        if s:
            fz = self._nystrom(view, local, rows_key, s, self.features_given)
            gram = self._memo(("G", rows_key, s, self.features_given), lambda: linalg.cho_factor(
                fz.T @ fz + self.epsilon * np.eye(fz.shape[1]), lower=True))
            coef = linalg.cho_solve(gram, fz.T @ np.hstack([fx, fy]))
            res = np.hstack([fx, fy]) - fz @ coef
            fx, fy = res[:, :fx.shape[1]], res[:, fx.shape[1]:]
        cross = fx.T @ fy / n
        stat = n * float((cross * cross).sum())
        # Null: n‖vec C‖² ≈ Σ λ z², λ the eigenvalues of the covariance of the feature products.
        # Single precision is ample for the null's two moments and halves the cost; the
        # products are formed in it (formed in double and then converted, they cost a third
        # more: the largest arrays of a test, read and written once more).
        fx32, fy32 = fx.astype(np.float32), fy.astype(np.float32)
        prod = (fx32[:, :, None] * fy32[:, None, :]).reshape(n, -1)
        prod -= prod.mean(axis=0)
        cov = (prod.T @ prod).astype(float)
        cov /= n
        if self.null == "simulated":
            if s:
                weights = np.clip(np.linalg.eigvalsh(cov), 0, None)
                return stat, _weighted_chi2_sf(stat, weights, self.null_samples, rng)
            return stat, _feature_permutation_pvalue(fx, fy, stat, self.null_samples, rng)
        return stat, _gamma_sf(stat, float(np.trace(cov)), 2.0 * float((cov * cov).sum()))


def _permutation_pvalue(kc, lc, stat, samples, rng) -> float:
    n = kc.shape[0]
    count = 0
    for _ in range(samples):
        perm = rng.permutation(n)
        if (kc * lc[np.ix_(perm, perm)]).sum() / n >= stat:
            count += 1
    return float((1 + count) / (samples + 1))


def _feature_permutation_pvalue(fx, fy, stat, samples, rng) -> float:
    n = fx.shape[0]
    count = 0
    for _ in range(samples):
        cross = fx.T @ fy[rng.permutation(n)] / n
        if n * float((cross * cross).sum()) >= stat:
            count += 1
    return float((1 + count) / (samples + 1))


def make_kernel_test(frame, *, missing="drop", **options) -> KernelCI:
    """Registry factory: reject unknown options with one clear line."""
    reject_unknown(options, _OWNER, OPTIONS)
    return KernelCI(frame, missing=missing, **options)
