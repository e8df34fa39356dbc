"""A likelihood-ratio test of conditional independence for tables of mixed column kinds.

To test ``x ⟂ y | S`` when the columns are a mix of numbers and categories, regress x on S
with and without y and compare the two fits by their likelihood ratio
``LR = 2 (ℓ_with − ℓ_without)``, approximately χ² under conditional independence with as many
degrees of freedom as y added parameters (Wilks 1938). The regression follows x's kind:

- continuous or ordinal x: linear regression (ordinary least squares), where
  ``LR = n ln(RSS_without / RSS_with)``;
- binary x: logistic regression;
- categorical x (3 or more levels): multinomial logistic regression, with
  ``(levels − 1)`` times as many degrees of freedom.

As predictors, continuous and ordinal columns enter as (standardised) numbers, binary columns as
0/1 and categorical columns as indicator columns for every level but the first.
Logistic and multinomial fits are maximised by Newton–Raphson with step halving (the
estimator statsmodels' ``Logit`` / ``MNLogit`` compute, to the same maximum), the fit without y
kept and reused for every y with the same x and S, and the fit with y started from it.
Linear fits are read from one cross-product matrix of every encoded column, computed once
(the correlation-matrix route): a test costs a small solve, not a pass over the rows.

All-discrete tests
------------------
When x, y and every variable of S are discrete, the test is G² (the likelihood ratio of the
saturated multinomial model, see :class:`~discovery.independence.GSquared`, with its
minimum-rows rule). A regression with main effects only does not hold S fixed: when two
variables of S act on x and y together (any interaction on the log-odds scale, as random
tables of categories have), y still predicts x given the additive fit of S, and independence
is rejected for a pair that the set separates — this added a spurious edge, and through the
wrong separating set a contested pair, on a random categorical table. Stratified G² holds S
fixed whatever its interactions, and its minimum-rows rule keeps the edge of a test too thin
to run.

Symmetry
--------
Regressing x on y and regressing y on x are different models and give different p-values. The
test runs both and reports the **larger** p-value (and the statistic of that direction): it
rejects independence only when both regressions do. This is one of the combinations studied by
Tsagris, Borboudakis, Lagani & Tsamardinos (2018); it keeps the size at or below α and makes
``x ⟂ y | S`` and ``y ⟂ x | S`` the same test, as the search needs.

Degrees of freedom are the rank the added columns bring (collinear columns are dropped,
judged on the cross-product matrix).

The regressions are linear in their predictors (on the log-odds scale for categories): a
non-monotone dependence between two continuous columns can be missed; use ``"kci"`` for those,
or ``"auto"``, which chooses per pair.

References
----------
.. [1] Tsagris, M., Borboudakis, G., Lagani, V. & Tsamardinos, I. (2018). Constraint-based
   causal discovery with mixed data. *International Journal of Data Science and Analytics*
   6, 19–30.
.. [2] Wilks, S. S. (1938). The large-sample distribution of the likelihood ratio for testing
   composite hypotheses. *Annals of Mathematical Statistics* 9, 60–62.
"""

from __future__ import annotations

import contextlib
import warnings

import numpy as np
import pandas as pd
from scipy.stats import chi2

from ..exceptions import DegenerateDataWarning
from ._base import IndependenceTest
from ._g_squared import GSquared
from ._tabular import (DISCRETE_KINDS, as_frame, check_missing_policy, check_single_levels,
                       fingerprint, kinds_of, reject_unknown, numeric_values, one_at_a_time)

__all__ = ["MixedLR"]

_OWNER = "the mixed-data test ('mixed')"
OPTIONS = ()
#: A column whose part outside the span of the earlier ones has less than this share of its
#: squared length counts as collinear (judged on the cross-product matrix).
_COLLINEAR = 1e-10
#: Newton–Raphson: stop when the log-likelihood is this close to its maximum, or after this
#: many steps.
_LL_TOL = 1e-10
_MAX_STEPS = 100
_FIT_CACHE = 4096


class MixedLR(IndependenceTest):
    """Regression likelihood-ratio test of ``x ⟂ y | S`` for continuous and categorical columns.

    Parameters
    ----------
    data : pandas.DataFrame or 2-D array
        Any mix of continuous, ordinal, binary and categorical columns (kinds as judged by
        :func:`discovery.data.column_kind`).
    variables : sequence of str, optional
        Names when ``data`` is an array.
    missing : {"drop", "test-wise"}
        ``"test-wise"``: each test uses the rows complete on its own variables.

    Attributes
    ----------
    kinds : dict of str to str
        Each column's kind, which sets its regression and its encoding.

    Raises
    ------
    DataValidationError
        A column has a single level, or a numeric column holds infinite values.

    Warns
    -----
    DegenerateDataWarning
        A test with too few rows for its regressions (p-value NaN: dependence not ruled out).

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> rng = np.random.default_rng(0)
    >>> dose = rng.normal(size=400)
    >>> frame = pd.DataFrame({"dose": dose,
    ...                       "relief": np.where(dose + rng.normal(size=400) > 0, "yes", "no"),
    ...                       "site": rng.choice(["a", "b", "c"], size=400)})
    >>> test = MixedLR(frame)
    >>> test.test("dose", "relief").pvalue < 0.001, test.test("dose", "site").pvalue > 0.01
    (True, True)
    """

    name = "mixed"
    vectorised = False

    def __init__(self, data, *, variables=None, missing: str = "drop"):
        frame = as_frame(data, variables, owner=_OWNER)
        self._has_nan = check_missing_policy(missing, frame, _OWNER)
        check_single_levels(frame, _OWNER)
        self.kinds = kinds_of(frame)
        self.variables = tuple(frame.columns)
        self.n = int(len(frame))
        self.missing = missing
        # numeric columns as floats; binary and categorical as integer codes (-1: missing)
        self._numeric: dict[int, np.ndarray] = {}
        self._codes: dict[int, np.ndarray] = {}
        self._levels: dict[int, int] = {}
        for j, column in enumerate(frame.columns):
            kind = self.kinds[column]
            series = frame[column]
            if kind == "ordinal" and isinstance(series.dtype, pd.CategoricalDtype):
                ranks = series.cat.codes.to_numpy().astype(float)
                ranks[ranks < 0] = np.nan
                self._numeric[j] = ranks
            elif kind in ("continuous", "ordinal"):
                self._numeric[j] = numeric_values(frame[[column]], _OWNER, hint="")[:, 0]
            else:
                try:
                    codes, uniques = pd.factorize(frame[column], sort=True)
                except TypeError:
                    codes, uniques = pd.factorize(frame[column])
                self._codes[j] = codes.astype(np.int64)
                self._levels[j] = len(uniques)
        # Every predictor column in one matrix: an intercept, then each variable's block
        # (numbers standardised, categories as indicators of all levels but the first).
        blocks, start = [np.ones((self.n, 1))], 1
        self._block: dict[int, np.ndarray] = {}
        self._present_of: dict[int, np.ndarray] = {}
        for j in range(len(self.variables)):
            if j in self._numeric:
                v = self._numeric[j]
                ok = ~np.isnan(v)
                sd = v[ok].std() if ok.any() else 0.0
                part = np.where(ok, (v - v[ok].mean()) / (sd if sd > 0 else 1.0), 0.0)[:, None]
            else:
                codes = self._codes[j]
                ok = codes >= 0
                part = np.zeros((self.n, self._levels[j] - 1))
                hit = codes > 0
                part[np.flatnonzero(hit), codes[hit] - 1] = 1.0
            blocks.append(part)
            self._block[j] = np.arange(start, start + part.shape[1])
            self._present_of[j] = ok
            start += part.shape[1]
        self._design_all = np.hstack(blocks)
        self._gram = None if self._has_nan else self._design_all.T @ self._design_all
        self._fits: dict = {}
        # all-discrete tests go to G² over the discrete columns
        discrete = [j for j, c in enumerate(self.variables) if self.kinds[c] in DISCRETE_KINDS]
        self._g2 = None
        if len(discrete) >= 2:
            self._g2 = GSquared(frame[[self.variables[j] for j in discrete]], missing=missing)
            self._g2_index = {j: k for k, j in enumerate(discrete)}
        self._key = ("mixed", 2, missing, frame.shape, fingerprint(frame))

    def settings_key(self) -> tuple:
        return self._key

    def describe_tests(self, tests) -> list[str]:
        """Notes for a search result: how many tests were all-discrete and answered by G²
        (and G²'s own notes on them)."""
        if self._g2 is None:
            return []
        index = {v: i for i, v in enumerate(self.variables)}
        routed = [row for row in tests
                  if self._all_discrete([index[row[0]], index[row[1]],
                                         *(index[g] for g in row[2])])]
        if not routed:
            return []
        return [f"mixed: {len(routed)} test(s) with only discrete columns were answered by "
                f"G² (saturated in the conditioning set)"] + self._g2.describe_tests(routed)

    def untestable_reason(self, x, y, given=()) -> str | None:
        """Why the test of ``x ⟂ y | given`` is not run (all-discrete tests too thin for G²),
        or None. ``x``, ``y`` and ``given`` by name or by position (both accepted)."""
        index = {v: i for i, v in enumerate(self.variables)}
        cols = [v if isinstance(v, (int, np.integer)) else index[v] for v in (x, y, *given)]
        if self._g2 is None or not self._all_discrete(cols):
            return None
        return self._g2.untestable_reason(*(self._g2_index[int(c)] for c in cols[:2]),
                                          [self._g2_index[int(c)] for c in cols[2:]])

    def _all_discrete(self, cols) -> bool:
        return all(int(c) in self._codes or self.kinds[self.variables[int(c)]] in
                   DISCRETE_KINDS for c in cols)

    # -- encodings ---------------------------------------------------------------------------
    def _present(self, cols) -> np.ndarray:
        ok = np.ones(self.n, dtype=bool)
        for c in cols:
            ok &= self._present_of[c]
        return ok

    def _design(self, col: int, rows: np.ndarray) -> np.ndarray:
        """Predictor columns of one variable, on the given rows (standardised on them)."""
        if col in self._numeric:
            v = self._numeric[col][rows]
            sd = v.std()
            return ((v - v.mean()) / (sd if sd > 0 else 1.0))[:, None]
        return self._design_all[rows][:, self._block[col]]

    # -- tests -------------------------------------------------------------------------------
    def _batch(self, triples):
        with _one_blas_thread():
            stat, pval = one_at_a_time(self._one, triples)
        bad = int(np.isnan(pval).sum())
        if bad:  # tests too thin for G² are reported by the search, not warned about
            bad -= sum(1 for (x, y, s), p in zip(triples, pval)
                       if np.isnan(p) and self.untestable_reason(x, y, s) is not None)
        if bad > 0:
            warnings.warn(f"{bad} mixed-data test(s) had too few rows for their regressions; "
                          f"their p-values are NaN", DegenerateDataWarning, stacklevel=3)
        return stat, pval

    def _one(self, x, y, s):
        if self._g2 is not None and self._all_discrete((x, y, *s)):
            local = [self._g2_index[c] for c in (x, y, *s)]
            a, b = sorted(local[:2])
            stat, p = self._g2._batch_array(np.array([[a, b, *sorted(local[2:])]],
                                                     dtype=np.intp))
            return float(stat[0]), float(p[0])
        rows = self._present((x, y, *s)) if self._has_nan else None
        n = self.n if rows is None else int(rows.sum())
        if n < 5:
            return float("nan"), float("nan")
        base = [0] + [int(c) for v in s for c in self._block[v]]
        a = self._direction(x, y, rows, base, s)
        b = self._direction(y, x, rows, base, s)
        if np.isnan(a[1]) or np.isnan(b[1]):
            return float("nan"), float("nan")
        return a if a[1] >= b[1] else b

    def _gram_of(self, cols, rows) -> np.ndarray:
        if rows is None:
            return self._gram[np.ix_(cols, cols)]
        part = self._design_all[rows][:, cols]
        return part.T @ part

    def _direction(self, target: int, other: int, rows, base, given=()) -> tuple[float, float]:
        """LR statistic and p-value of ``other`` as a predictor of ``target`` given the
        ``base`` columns (positions in the matrix of every encoded column)."""
        extra = [int(c) for c in self._block[other]]
        n = self.n if rows is None else int(rows.sum())
        if target in self._numeric:
            t = int(self._block[target][0])
            cols = base + extra + [t]
            gram = self._gram_of(cols, rows)
            kept = _independent_columns(gram[:-1, :-1])
            k0 = int(kept[:len(base)].sum())
            dof = int(kept.sum()) - k0
            if n <= len(base) + len(extra):
                return float("nan"), float("nan")
            in_base = np.flatnonzero(kept[:len(base)])
            in_full = np.flatnonzero(kept)
            rss0 = _rss_from_gram(gram, in_base)
            rss1 = _rss_from_gram(gram, in_full)
            if rss0 <= 1e-12 * gram[-1, -1]:
                return float("nan"), float("nan")
            if dof <= 0:
                return 0.0, 1.0
            lr = n * np.log(rss0 / max(rss1, rss0 * 1e-15))
        else:
            codes = self._codes[target]
            classes = self._levels[target]      # every level occurs in the whole table
            if rows is not None:
                codes = codes[rows]
                present = np.unique(codes)
                classes = len(present)
                if classes < 2:
                    return 0.0, 1.0
                if classes < self._levels[target]:
                    codes = np.searchsorted(present, codes)
            cols = base + extra
            kept = _independent_columns(self._gram_of(cols, rows))
            k0 = int(kept[:len(base)].sum())
            dof = (int(kept.sum()) - k0) * (classes - 1)
            if n <= len(cols) * (classes - 1):
                return float("nan"), float("nan")
            if dof <= 0:
                return 0.0, 1.0
            design = self._design_all if rows is None else self._design_all[rows]
            in_base = [c for c, k in zip(base, kept[:len(base)]) if k]
            in_extra = [c for c, k in zip(extra, kept[len(base):]) if k]
            key = (target, tuple(in_base),
                   None if rows is None else tuple(sorted({target, other, *given})))
            fit0 = self._fits.get(key)
            if fit0 is None:
                fit0 = _multinomial_fit(design[:, in_base], codes, classes)
                if len(self._fits) >= _FIT_CACHE:
                    self._fits.clear()
                self._fits[key] = fit0
            ll0, params0 = fit0
            start = np.vstack([params0, np.zeros((len(in_extra), classes - 1))])
            ll1, _ = _multinomial_fit(design[:, in_base + in_extra], codes, classes, start)
            if not (np.isfinite(ll0) and np.isfinite(ll1)):
                return float("nan"), float("nan")
            lr = 2.0 * (ll1 - ll0)
        lr = max(float(lr), 0.0)
        return lr, float(chi2.sf(lr, dof))


def _one_blas_thread():
    """BLAS on one thread while tests run (many small products gain nothing from threads)."""
    try:
        from ..executor import blas_threads
    except ImportError:  # pragma: no cover - the executor always provides it today
        return contextlib.nullcontext()
    return blas_threads(1)


def _independent_columns(gram: np.ndarray) -> np.ndarray:
    """Which columns, taken in order, are not linear combinations of the earlier ones
    (a Cholesky factorisation of the cross-product matrix that skips collinear columns)."""
    p = gram.shape[0]
    keep = np.zeros(p, dtype=bool)
    chol = np.zeros((p, p))
    for j in range(p):
        kept = np.flatnonzero(keep)
        if len(kept):
            r = _forward(chol, kept, gram[kept, j])
            rest = gram[j, j] - r @ r
        else:
            r = np.empty(0)
            rest = gram[j, j]
        if gram[j, j] > 0 and rest > _COLLINEAR * gram[j, j]:
            keep[j] = True
            chol[j, kept] = r
            chol[j, j] = np.sqrt(rest)
    return keep


def _forward(chol: np.ndarray, kept: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve ``L r = b`` for the lower-triangular factor of the kept columns."""
    from scipy.linalg import solve_triangular
    return solve_triangular(chol[np.ix_(kept, kept)], b, lower=True, check_finite=False)


def _rss_from_gram(gram: np.ndarray, cols: np.ndarray) -> float:
    """Residual sum of squares of the last column regressed on ``cols`` (both in ``gram``)."""
    from scipy.linalg import cho_factor, cho_solve
    g = gram[np.ix_(cols, cols)]
    c = gram[cols, -1]
    coef = cho_solve(cho_factor(g, check_finite=False), c, check_finite=False)
    return float(gram[-1, -1] - c @ coef)


def _multinomial_fit(design: np.ndarray, codes: np.ndarray, classes: int,
                     start: np.ndarray | None = None) -> tuple[float, np.ndarray]:
    """Maximised log-likelihood and coefficients of a multinomial logit (logistic for two
    classes), class 0 the reference; Newton–Raphson with step halving.

    Stops when the Newton decrement says the log-likelihood is within ``_LL_TOL`` of its
    maximum. Under (quasi-)separation the likelihood has no maximum: the steps stop after
    ``_MAX_STEPS`` with the log-likelihood close to its supremum, computed as
    ``Σ log P(observed class)`` so that it stays finite.
    """
    n, p = design.shape
    k = classes - 1
    zt = np.ascontiguousarray(design.T)               # (p, n): rows contiguous
    hit = np.zeros((k, n))
    observed = codes > 0
    hit[codes[observed] - 1, np.flatnonzero(observed)] = 1.0
    beta = np.zeros((p, k)) if start is None else np.array(start, dtype=float)

    def loglik(b):
        eta = b.T @ zt                                 # (k, n)
        top = np.maximum(eta.max(axis=0), 0.0)
        total = np.exp(-top) + np.exp(eta - top).sum(axis=0)
        log_norm = top + np.log(total)
        ll = float((hit * eta).sum() - log_norm.sum())
        return ll, np.exp(eta - log_norm)              # probabilities of classes 1..k

    ll, prob = loglik(beta)
    for _ in range(_MAX_STEPS):
        grad = (zt @ (hit - prob).T).reshape(-1, order="F")
        hess = np.empty((p * k, p * k))
        for a in range(k):
            for b in range(a, k):
                w = prob[a] * ((a == b) - prob[b])
                block = (zt * w) @ zt.T
                hess[a * p:(a + 1) * p, b * p:(b + 1) * p] = block
                hess[b * p:(b + 1) * p, a * p:(a + 1) * p] = block
        try:
            step = np.linalg.solve(hess, grad)
        except np.linalg.LinAlgError:
            step = np.linalg.lstsq(hess, grad, rcond=None)[0]
        decrement = float(grad @ step)
        if 0.0 <= decrement < 2 * _LL_TOL:            # ℓ is within decrement / 2 of the top
            break
        step = step.reshape(p, k, order="F")
        scale = 1.0
        for _ in range(30):
            new = beta + scale * step
            new_ll, new_prob = loglik(new)
            if new_ll >= ll - 1e-12 * abs(ll):
                break
            scale /= 2
        else:
            break
        beta, ll, prob = new, new_ll, new_prob
    return ll, beta


def make_mixed(frame, *, missing="drop", **options) -> MixedLR:
    """Registry factory: reject unknown options with one clear line."""
    reject_unknown(options, _OWNER, OPTIONS)
    return MixedLR(frame, missing=missing)
