"""Fisher's z test of zero partial correlation, for linear-Gaussian data.

The partial correlation of ``x`` and ``y`` given ``S`` is read off the inverse ``P`` of the
correlation submatrix over ``(x, y, S)``: ``r = -P[0,1] / sqrt(P[0,0] P[1,1])``. Under
independence and Gaussian data, ``z = sqrt(n - |S| - 3) * atanh(r)`` is approximately standard
normal (Fisher 1921), and the two-sided p-value is ``2 * (1 - Phi(|z|))``. This is the test used
by the PC algorithm in Spirtes, Glymour & Scheines (2000), *Causation, Prediction, and Search*.

The correlation matrix is computed once. A batch of triples with the same conditioning-set
size is answered from the stack of their small correlation submatrices at once, not by a
Python loop of regressions: the entries ``P`` needs come from eliminating ``S`` (the Schur
complement, i.e. the residual covariance of ``x`` and ``y`` given ``S``), one conditioning
variable at a time across the whole batch. With test-wise deletion (Tu, Zhang, Kjellström &
Zhang 2019, "Causal discovery in the presence of missing data", AISTATS) each test uses the
rows complete on its own variables.

References
----------
Fisher, R. A. (1921). On the "probable error" of a coefficient of correlation deduced from a
small sample. Metron 1, 3–32.
"""

from __future__ import annotations

import hashlib
import warnings

import numpy as np
from scipy.special import ndtr, ndtri

from ..exceptions import DataValidationError, DegenerateDataWarning
from ._base import IndependenceTest

__all__ = ["FisherZ"]

# |r| is clipped below 1 so that atanh stays finite: a partial correlation this close to one
# already gives a p-value far below any usable α.
_R_MAX = 1.0 - 1e-12
#: Working memory of the elimination for one piece of a batch (see _partial_correlations).
_ELIMINATION_BYTES = 64 << 20


def _fingerprint(values: np.ndarray) -> str:
    return hashlib.sha256(np.ascontiguousarray(values).tobytes()).hexdigest()[:16]


class FisherZ(IndependenceTest):
    """Fisher's z test for partial correlation, answered in batches.

    Parameters
    ----------
    data : pandas.DataFrame or 2-D array
        Numeric columns, one per variable.
    variables : sequence of str, optional
        Names when ``data`` is an array (default ``x0, x1, ...``).
    missing : {"drop", "test-wise"}
        ``"drop"``: rows with any missing value must already be removed (NaN raises).
        ``"test-wise"``: each test uses the rows complete on its own variables.
    fingerprint : str, optional
        A hash that identifies the data (keys the p-value cache); computed when not given.

    Warns
    -----
    DegenerateDataWarning
        When a test cannot be computed (too few complete rows); its p-value is NaN, which the
        search treats as "dependence not ruled out" (the edge stays).
    """

    name = "fisher-z"
    vectorised = True

    def __init__(self, data, *, variables=None, missing: str = "drop",
                 fingerprint: str | None = None):
        if hasattr(data, "columns"):
            variables = tuple(map(str, data.columns.tolist()))
            values = data.to_numpy(dtype=float)
        else:
            values = np.asarray(data, dtype=float)
            if variables is None:
                variables = tuple(f"x{i}" for i in range(values.shape[1]))
        if values.ndim != 2:
            raise DataValidationError("Fisher's z needs a 2-D table: one column per variable")
        if missing not in ("drop", "test-wise"):
            raise DataValidationError(
                f"missing must be 'drop' or 'test-wise', got {missing!r}")
        self.variables = tuple(variables)
        self.missing = missing
        self._values = values
        # a finite sum rules out missing values in one pass without a temporary
        with np.errstate(invalid="ignore", over="ignore"):
            total = values.sum()
        self._has_nan = not np.isfinite(total) and bool(np.isnan(values).any())
        if self._has_nan and missing == "drop":
            raise DataValidationError(
                "the data has missing values; drop incomplete rows first or use "
                "missing='test-wise'")
        self.n = int(values.shape[0])
        # The cache key names the data; a caller that already hashed it (the Dataset's
        # SHA-256 with the column order) passes that instead of hashing the values again.
        self._key = ("fisher-z", missing, values.shape, self.variables,
                     fingerprint or _fingerprint(values))
        self._corr = None if self._has_nan else _correlation(values)
        self._abs_corr = self._corr32 = None

    @property
    def correlation(self) -> np.ndarray:
        """The correlation matrix (complete data only)."""
        if self._corr is None:
            raise DataValidationError("no single correlation matrix under test-wise deletion")
        return self._corr

    def association(self):
        """Absolute correlations (complete data), to order conditioning candidates."""
        if self._corr is not None and self._abs_corr is None:
            self._abs_corr = np.abs(self._corr)
            self._abs_corr.flags.writeable = False  # shared: read-only
        return self._abs_corr

    def settings_key(self) -> tuple:
        return self._key

    def may_separate(self, pairs, alpha):
        """False where conditioning on one variable ``z`` cannot separate ``x`` and ``y``.

        ``p > alpha`` needs ``|r_xy.z| < c = tanh(z_{1-alpha/2} / sqrt(n - 4))``, and since the
        denominator of the partial correlation is at most one,
        ``|r_xy.z| >= |r_xy - r_xz r_yz|``. So when ``|r_xy - r_xz r_yz| >= c`` the test can
        only find dependence. Formed in single precision (half the memory traffic) with a
        margin of 1e-6, far above its rounding. Complete data only.
        """
        n_eff = self.n - 4
        if self._corr is None or n_eff <= 0 or not 0.0 < alpha < 1.0:
            return None
        if self._corr32 is None:
            self._corr32 = self._corr.astype(np.float32)
        r = self._corr32
        critical = np.tanh(-ndtri(alpha / 2.0) / np.sqrt(n_eff)) + 1e-6
        gap = np.take(r, pairs[:, 0], axis=0)
        gap *= np.take(r, pairs[:, 1], axis=0)
        gap -= r.ravel().take(pairs[:, 0] * r.shape[0] + pairs[:, 1])[:, None]
        np.abs(gap, out=gap)
        return ~(gap >= np.float32(critical))  # NaN stays possible

    def _batch_array(self, idx):
        size = idx.shape[1] - 2
        if self._corr is not None:
            r = _partial_correlations(self._corr, idx)
            n_eff = float(self.n - size - 3)
        else:
            r, n_eff = self._testwise(idx)
        z, p = _z_and_p(r, n_eff)
        if np.isnan(p).any():
            warnings.warn(f"{int(np.isnan(p).sum())} Fisher's z test(s) could not be computed "
                          "(too few complete rows, or a constant column); their p-values are "
                          "NaN", DegenerateDataWarning, stacklevel=3)
        return z, p

    def _testwise(self, idx):
        r = np.full(len(idx), np.nan)
        n_eff = np.zeros(len(idx))
        for k, cols in enumerate(idx):
            block = self._values[:, cols]
            block = block[~np.isnan(block).any(axis=1)]
            n_k = block.shape[0]
            if n_k - len(cols) - 1 < 1:
                continue
            corr = _correlation(block)
            if np.isnan(corr).any():
                continue
            r[k] = _partial_correlations(corr, np.arange(len(cols))[None, :])[0]
            n_eff[k] = n_k - (len(cols) - 2) - 3
        return r, n_eff


def _correlation(values: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = np.corrcoef(values, rowvar=False)
    corr = np.atleast_2d(corr)
    np.clip(corr, -1.0, 1.0, out=corr)
    np.fill_diagonal(corr, 1.0)
    return corr


def _partial_correlations(corr: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """Partial correlations of columns idx[:,0] and idx[:,1] given idx[:,2:], one per row.

    A set of one variable uses ``r_xy.z = (r_xy - r_xz r_yz) / sqrt((1 - r_xz^2)(1 - r_yz^2))``
    elementwise; larger sets eliminate their variables from the correlation submatrices
    (:func:`_eliminate`), rows with a (nearly) singular conditioning block use the
    pseudo-inverse.
    """
    k = idx.shape[1] - 2
    pick = _entries(corr, idx)
    if k == 0:
        return pick(0, 1)
    if k == 1:
        return _recurse(pick(0, 1), pick(0, 2), pick(1, 2))
    # The elimination holds (k+2)(k+3)/2 arrays over the rows: a batch of wide sets goes in
    # pieces that keep them within _ELIMINATION_BYTES (each row is computed on its own, so
    # the pieces give the same numbers as one pass).
    d = k + 2
    step = max(1024, _ELIMINATION_BYTES // (8 * (d * (d + 1) // 2 + d)))
    if step >= len(idx):
        vxx, vyy, vxy, ok = _eliminate(pick, d, len(idx))
        with np.errstate(invalid="ignore", divide="ignore"):
            r = vxy / np.sqrt(vxx * vyy)
    else:
        r = np.empty(len(idx))
        ok = np.empty(len(idx), dtype=bool)
        for start in range(0, len(idx), step):
            part = idx[start:start + step]
            vxx, vyy, vxy, ok[start:start + step] = _eliminate(_entries(corr, part), d,
                                                               len(part))
            with np.errstate(invalid="ignore", divide="ignore"):
                r[start:start + step] = vxy / np.sqrt(vxx * vyy)
    if not ok.all():  # a (nearly) singular conditioning block: the pseudo-inverse decides
        bad = idx[~ok]
        prec = _stacked_inverse(corr[bad[:, :, None], bad[:, None, :]])
        with np.errstate(invalid="ignore", divide="ignore"):
            r[~ok] = -prec[:, 0, 1] / np.sqrt(prec[:, 0, 0] * prec[:, 1, 1])
    return r


def _entries(corr: np.ndarray, idx: np.ndarray):
    """``pick(a, b)``: the correlations ``corr[idx[:, a], idx[:, b]]`` as one array over the
    rows (flat ``take``: several times faster than two-array indexing)."""
    flat = np.ravel(corr)
    n = corr.shape[0]
    bases = {}

    def pick(a, b):
        if a not in bases:
            bases[a] = idx[:, a] * n
        return flat.take(bases[a] + idx[:, b])
    return pick


def _eliminate(pick, d: int, rows: int):
    """Covariance of ``x`` and ``y`` given ``S`` for each row ``[x, y, s1..sk]`` (``d``
    columns; ``pick(a, b)`` gives the correlations of columns a and b): Gaussian elimination
    of the ``s`` from the correlation submatrix, one at a time (the Schur complement). Each
    entry is one array over the rows, so every step is a few elementwise operations on
    contiguous arrays. Returns the three entries and a mask of the rows whose pivots all
    stayed clearly positive.
    """
    m = {(a, b): np.ones(rows) if a == b else pick(a, b)
         for a in range(d) for b in range(a, d)}
    ok = np.ones(rows, dtype=bool)
    for j in range(d - 1, 1, -1):
        pivot = m[j, j]
        ok &= pivot > 1e-12
        scale = 1.0 / np.where(ok, pivot, 1.0)
        for a in range(j):
            factor = m[a, j] * scale
            for b in range(a, j):
                m[a, b] -= factor * m[b, j]
    return m[0, 0], m[1, 1], m[0, 1], ok


def _recurse(rxy, rxz, ryz):
    """One step of the partial-correlation recursion; NaN where a factor is degenerate."""
    with np.errstate(invalid="ignore", divide="ignore"):
        denom = np.sqrt(np.clip((1 - rxz ** 2) * (1 - ryz ** 2), 0.0, None))
        r = (rxy - rxz * ryz) / denom
    return np.where(denom > 1e-12, r, np.nan)


def _stacked_inverse(sub: np.ndarray) -> np.ndarray:
    """Invert a stack of symmetric matrices; singular ones fall back to the pseudo-inverse."""
    try:
        prec = np.linalg.inv(sub)
    except np.linalg.LinAlgError:
        return np.linalg.pinv(sub, hermitian=True)
    bad = ~np.isfinite(prec).all(axis=(1, 2))
    if bad.any():
        prec[bad] = np.linalg.pinv(sub[bad], hermitian=True)
    return prec


def _z_and_p(r: np.ndarray, n_eff) -> tuple[np.ndarray, np.ndarray]:
    """Fisher's z and its two-sided p-value; ``n_eff`` (``n - |S| - 3``) is one number or one
    per row, NaN where it is not positive."""
    r = np.clip(r, -_R_MAX, _R_MAX)
    with np.errstate(invalid="ignore"):
        scale = (np.sqrt(n_eff) if n_eff > 0 else np.nan) if np.ndim(n_eff) == 0 else \
            np.sqrt(np.where(n_eff > 0, n_eff, np.nan))
        z = np.arctanh(r)
        z *= scale
    p = ndtr(-np.abs(z))
    p *= 2.0
    return z, p
