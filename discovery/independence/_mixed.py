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
Logistic and multinomial fits use statsmodels (``Logit``, ``MNLogit``).

Symmetry
--------
Regressing x on y and regressing y on x are different models and give different p-values. The
test runs both and reports the **larger** p-value (and the statistic of that direction): it
rejects independence only when both regressions do. This is one of the combinations studied by
Tsagris, Borboudakis, Lagani & Tsamardinos (2018); it keeps the size at or below α and makes
``x ⟂ y | S`` and ``y ⟂ x | S`` the same test, as the search needs.

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

import warnings

import numpy as np
import pandas as pd
from scipy.stats import chi2

from ..exceptions import DegenerateDataWarning
from ._base import IndependenceTest
from ._tabular import (as_frame, check_missing_policy, check_single_levels, fingerprint,
                       kinds_of, reject_unknown, numeric_values, one_at_a_time)

__all__ = ["MixedLR"]

_OWNER = "the mixed-data test ('mixed')"
OPTIONS = ()


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
        self._key = ("mixed", missing, frame.shape, fingerprint(frame))

    def settings_key(self) -> tuple:
        return self._key

    def describe_tests(self, tests) -> list[str]:
        """Notes for a search result (none: the mixed test has no approximation to state)."""
        return []

    # -- encodings ---------------------------------------------------------------------------
    def _present(self, cols) -> np.ndarray:
        ok = np.ones(self.n, dtype=bool)
        for c in cols:
            if c in self._numeric:
                ok &= ~np.isnan(self._numeric[c])
            else:
                ok &= self._codes[c] >= 0
        return ok

    def _design(self, col: int, rows: np.ndarray) -> np.ndarray:
        """Predictor columns of one variable, on the given rows."""
        if col in self._numeric:
            v = self._numeric[col][rows]
            sd = v.std()
            return ((v - v.mean()) / (sd if sd > 0 else 1.0))[:, None]
        codes = self._codes[col][rows]
        levels = self._levels[col]
        out = np.zeros((len(codes), levels - 1))
        hit = codes > 0
        out[np.flatnonzero(hit), codes[hit] - 1] = 1.0
        return out

    # -- tests -------------------------------------------------------------------------------
    def _batch(self, triples):
        stat, pval = one_at_a_time(self._one, triples)
        bad = int(np.isnan(pval).sum())
        if bad:
            warnings.warn(f"{bad} mixed-data test(s) had too few rows for their regressions; "
                          f"their p-values are NaN", DegenerateDataWarning, stacklevel=3)
        return stat, pval

    def _one(self, x, y, s):
        rows = self._present((x, y, *s))
        if rows.sum() < 5:
            return float("nan"), float("nan")
        given = [self._design(c, rows) for c in s]
        ones = np.ones((int(rows.sum()), 1))
        base = np.hstack([ones] + given)
        a = self._direction(x, y, rows, base)
        b = self._direction(y, x, rows, base)
        if np.isnan(a[1]) or np.isnan(b[1]):
            return float("nan"), float("nan")
        return a if a[1] >= b[1] else b

    def _direction(self, target: int, other: int, rows, base) -> tuple[float, float]:
        """LR statistic and p-value of ``other`` as a predictor of ``target`` given ``base``."""
        extra = self._design(other, rows)
        full = np.hstack([base, extra])
        n = base.shape[0]
        if target in self._numeric:
            v = self._numeric[target][rows]
            rss0 = _rss(base, v)
            rss1 = _rss(full, v)
            dof = _rank(full) - _rank(base)
            if n <= full.shape[1] or rss0 <= 0:
                return float("nan"), float("nan")
            if dof <= 0:
                return 0.0, 1.0
            lr = n * np.log(rss0 / max(rss1, rss0 * 1e-15))
        else:
            codes = self._codes[target][rows]
            present = np.unique(codes)
            codes = np.searchsorted(present, codes)
            classes = len(present)
            if classes < 2:
                return 0.0, 1.0
            dof = (_rank(full) - _rank(base)) * (classes - 1)
            if n <= full.shape[1] * (classes - 1):
                return float("nan"), float("nan")
            if dof <= 0:
                return 0.0, 1.0
            ll0 = _loglik(codes, classes, _independent(base))
            ll1 = _loglik(codes, classes, _independent(full))
            if ll0 is None or ll1 is None:
                return float("nan"), float("nan")
            lr = 2.0 * (ll1 - ll0)
        lr = max(float(lr), 0.0)
        return lr, float(chi2.sf(lr, dof))


def _rss(design: np.ndarray, v: np.ndarray) -> float:
    coef, *_ = np.linalg.lstsq(design, v, rcond=None)
    resid = v - design @ coef
    return float(resid @ resid)


def _rank(design: np.ndarray) -> int:
    return int(np.linalg.matrix_rank(design))


def _independent(design: np.ndarray) -> np.ndarray:
    """Drop columns that are linear combinations of earlier ones (keeps the fit identifiable)."""
    if design.shape[1] <= 1:
        return design
    _, r = np.linalg.qr(design)
    diag = np.abs(np.diag(r))
    keep = diag > 1e-9 * max(1.0, diag.max())
    return design[:, keep]


def _loglik(codes: np.ndarray, classes: int, design: np.ndarray) -> float | None:
    """Maximised log-likelihood of a logistic (2 classes) or multinomial logit fit."""
    from statsmodels.discrete.discrete_model import Logit, MNLogit
    model = Logit(codes.astype(float), design) if classes == 2 else MNLogit(codes, design)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for method in ("newton", "bfgs"):
            try:
                fit = model.fit(disp=0, method=method, maxiter=200)
            except (np.linalg.LinAlgError, ValueError, OverflowError):
                continue
            except Exception as err:  # statsmodels' PerfectSeparationError on older versions
                if type(err).__name__ != "PerfectSeparationError":
                    raise
                return _separated_loglik()
            llf = _observed_loglik(model, fit.params, codes, classes)
            if np.isfinite(llf):
                return llf
    return None


def _observed_loglik(model, params, codes: np.ndarray, classes: int) -> float:
    """Σ log P(observed class): finite under (quasi-)separation, where statsmodels' own
    log-likelihood can be NaN from 0 · log 0 terms."""
    if not np.all(np.isfinite(np.asarray(params))):
        return float("nan")
    probs = np.asarray(model.predict(params))
    if classes == 2:
        p_obs = np.where(codes == 1, probs, 1.0 - probs)
    else:
        p_obs = probs[np.arange(len(codes)), codes]
    return float(np.log(np.clip(p_obs, 1e-300, 1.0)).sum())


def _separated_loglik() -> float:
    # Perfect separation: the maximised likelihood is 1 (log-likelihood 0) in the limit.
    return 0.0


def make_mixed(frame, *, missing="drop", **options) -> MixedLR:
    """Registry factory: reject unknown options with one clear line."""
    reject_unknown(options, _OWNER, OPTIONS)
    return MixedLR(frame, missing=missing)
