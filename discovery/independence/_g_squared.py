"""The G² likelihood-ratio test of conditional independence for discrete data.

For discrete ``x`` and ``y`` and a conditioning set ``S``, the rows are split into *strata*,
one per combination of values of ``S`` that occurs. In each stratum the observed counts
``O[i, j]`` of the ``x × y`` table are compared with the counts ``E[i, j] = O[i, ·] O[·, j] /
O[·, ·]`` expected under independence; summed over strata,

    G² = 2 Σ_s Σ_ij O_sij ln(O_sij / E_sij),

which under conditional independence is approximately χ² with ``Σ_s (r_s − 1)(c_s − 1)``
degrees of freedom, where ``r_s`` and ``c_s`` count the levels of x and y that occur in
stratum s: rows and columns of empty cells carry no information and are not counted
(Spirtes, Glymour & Scheines 2000, §5.4.2; Agresti 2002, §3.2 and §6.3). A stratum with one
level of x or y adds nothing. When no degree of freedom is left, the p-value is 1.

Minimum-rows rule
-----------------
With many strata and few rows the χ² approximation fails and the test has no power. A test
with fewer than ``min_rows_per_dof`` rows per degree of freedom — counted before the reduction
for empty cells, ``(|x| − 1)(|y| − 1) Π |s|`` — is not run: its statistic is NaN and its
p-value 1, read by the search as "independence not rejected". The default of 5 rows per degree
of freedom is common practice, no source (it echoes the rule of five expected counts per cell
of Cochran 1954). The search result counts the tests this rule skipped; ``0`` turns it off.

References
----------
.. [1] Spirtes, P., Glymour, C. & Scheines, R. (2000). *Causation, Prediction, and Search*,
   2nd ed. MIT Press.
.. [2] Agresti, A. (2002). *Categorical Data Analysis*, 2nd ed. Wiley.
.. [3] Cochran, W. G. (1954). Some methods for strengthening the common χ² tests.
   *Biometrics* 10, 417–451.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.special import xlogy
from scipy.stats import chi2

from ..exceptions import DataValidationError
from ._base import IndependenceTest
from ._tabular import (as_frame, check_missing_policy, check_real, check_single_levels,
                       fingerprint, kinds_of, reject_unknown, one_at_a_time)

__all__ = ["GSquared", "g_squared_table"]

_OWNER = "the G² test ('g-squared')"
OPTIONS = ("min_rows_per_dof",)


def g_squared_table(counts: np.ndarray) -> tuple[float, int]:
    """G² and the reduced degrees of freedom of a stack of contingency tables.

    Parameters
    ----------
    counts : array of shape (strata, rows, columns)
        Observed counts, one ``x × y`` table per stratum.

    Returns
    -------
    (float, int)
        The statistic summed over strata and its degrees of freedom, ``Σ (r_s − 1)(c_s − 1)``
        over the levels present in each stratum.
    """
    counts = np.asarray(counts, dtype=float)
    if counts.ndim == 2:
        counts = counts[None]
    rows = counts.sum(axis=2)
    cols = counts.sum(axis=1)
    total = rows.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        expected = rows[:, :, None] * cols[:, None, :] / total[:, None, None]
        terms = xlogy(counts, counts) - xlogy(counts, expected)
    terms = np.where(counts > 0, terms, 0.0)
    g2 = 2.0 * float(terms.sum())
    r = (rows > 0).sum(axis=1)
    c = (cols > 0).sum(axis=1)
    dof = int(np.clip((r - 1) * (c - 1), 0, None).sum())
    return max(g2, 0.0), dof


class GSquared(IndependenceTest):
    """G² likelihood-ratio test of ``x ⟂ y | S`` for discrete columns, stratified over S.

    Parameters
    ----------
    data : pandas.DataFrame or 2-D array
        Discrete columns: binary, categorical (text or categories) or ordinal (whole numbers
        with at most 10 levels), as judged by :func:`discovery.data.column_kind`.
    variables : sequence of str, optional
        Names when ``data`` is an array.
    missing : {"drop", "test-wise"}
        ``"test-wise"``: each test uses the rows complete on its own variables.
    min_rows_per_dof : float, default 5
        The minimum-rows rule (see the module docstring); 0 turns it off.

    Raises
    ------
    DataValidationError
        A column is continuous (G² needs a few levels per column) or has a single level.

    Examples
    --------
    >>> import pandas as pd
    >>> frame = pd.DataFrame({"smoker": ["y", "n", "y", "n"] * 50,
    ...                       "cough": ["y", "n", "y", "y"] * 50,
    ...                       "region": ["a", "a", "b", "b"] * 50})
    >>> test = GSquared(frame)
    >>> round(test.test("smoker", "cough").pvalue, 6)
    0.0
    """

    name = "g-squared"
    vectorised = True

    def __init__(self, data, *, variables=None, missing: str = "drop",
                 min_rows_per_dof: float = 5.0):
        frame = as_frame(data, variables, owner=_OWNER)
        self._has_nan = check_missing_policy(missing, frame, _OWNER)
        check_single_levels(frame, _OWNER)
        kinds = kinds_of(frame)
        for column, kind in kinds.items():
            if kind == "continuous":
                levels = frame[column].nunique()
                raise DataValidationError(
                    f"{_OWNER}: column {column!r} is continuous ({levels} distinct values); "
                    f"G² needs discrete columns — cut it into a few levels, or choose test "
                    f"'mixed' (or 'auto')")
        self.min_rows_per_dof = check_real(min_rows_per_dof, "min_rows_per_dof", _OWNER,
                                           low=0.0, low_closed=True)
        self.variables = tuple(frame.columns)
        self.kinds = kinds
        self.n = int(len(frame))
        self.missing = missing
        codes = np.empty(frame.shape, dtype=np.int64)
        levels = np.empty(frame.shape[1], dtype=np.int64)
        for j, column in enumerate(frame.columns):
            try:
                codes[:, j], uniques = pd.factorize(frame[column], sort=True)
            except TypeError:  # values of mixed types cannot be sorted
                codes[:, j], uniques = pd.factorize(frame[column])
            levels[j] = len(uniques)
        self._codes = codes
        self.levels = levels
        self._key = ("g-squared", missing, self.min_rows_per_dof, frame.shape,
                     fingerprint(frame))

    def settings_key(self) -> tuple:
        return self._key

    # -- the rule ----------------------------------------------------------------------------
    def _full_dof(self, x: int, y: int, s) -> int:
        dof = int((self.levels[x] - 1) * (self.levels[y] - 1))
        for v in s:
            dof *= int(self.levels[v])
        return dof

    def _rows(self, cols) -> np.ndarray | None:
        if not self._has_nan:
            return None
        return (self._codes[:, list(cols)] >= 0).all(axis=1)

    def skipped_by_rule(self, x: int, y: int, s) -> bool:
        """True when the minimum-rows rule stops the test of ``x ⟂ y | s`` (by index)."""
        rows = self._rows((x, y, *s))
        n = self.n if rows is None else int(rows.sum())
        return n < self.min_rows_per_dof * self._full_dof(x, y, s) or n == 0

    def describe_tests(self, tests) -> list[str]:
        """Notes for a search result: how many tests the minimum-rows rule skipped.

        Parameters
        ----------
        tests : iterable of (x, y, given, ...)
            The tests run, by variable name (extra items such as the p-value are ignored).
        """
        index = {v: i for i, v in enumerate(self.variables)}
        tests = list(tests)
        skipped = sum(1 for row in tests if self.skipped_by_rule(
            index[row[0]], index[row[1]], tuple(index[g] for g in row[2])))
        if not skipped:
            return []
        return [f"g-squared: {skipped} of {len(tests)} tests had fewer than "
                f"{self.min_rows_per_dof:g} rows per degree of freedom and were not run "
                f"(common practice); they count as 'independence not rejected' (p = 1)"]

    # -- tests -------------------------------------------------------------------------------
    def _batch(self, triples):
        return one_at_a_time(self._one, triples)

    def _one(self, x, y, s):
        if self.skipped_by_rule(x, y, s):
            return float("nan"), 1.0
        rows = self._rows((x, y, *s))
        codes = self._codes if rows is None else self._codes[rows]
        rx, ry = int(self.levels[x]), int(self.levels[y])
        cell = codes[:, x] * ry + codes[:, y]
        if s:
            stratum = _strata(codes[:, list(s)], self.levels[list(s)])
            present, stratum = np.unique(stratum, return_inverse=True)
            cell = stratum.reshape(-1) * (rx * ry) + cell
            shape = (len(present), rx, ry)
        else:
            shape = (1, rx, ry)
        counts = np.bincount(cell, minlength=shape[0] * rx * ry).reshape(shape)
        g2, dof = g_squared_table(counts)
        if dof == 0:
            return g2, 1.0
        return g2, float(chi2.sf(g2, dof))

    def test(self, x, y, given=()):
        """Run one test by names; see :meth:`IndependenceTest.test`.

        Raises
        ------
        DataValidationError
            When the conditioning set has more possible strata than the table has rows: such a
            test says nothing. (Inside a search the minimum-rows rule skips it instead.)
        """
        given = tuple(given)
        index = {v: i for i, v in enumerate(self.variables)}
        if all(v in index for v in (x, y, *given)):
            strata = 1
            for g in given:
                strata *= int(self.levels[index[g]])
            if strata > self.n:
                raise DataValidationError(
                    f"{_OWNER}: the conditioning set {list(given)} has {strata} possible "
                    f"strata but the table has only {self.n} rows; condition on fewer "
                    f"variables or merge rare levels")
        return super().test(x, y, given)

    # -- for the equivalence rule (discovery.robustness) -------------------------------------
    def g2_dof_rows(self, x: int, y: int, s) -> tuple[float, int, int]:
        """``(G², degrees of freedom, rows used)`` of ``x ⟂ y | s`` (by index); ``(NaN, 0,
        rows)`` when the minimum-rows rule skips the test."""
        rows = self._rows((x, y, *s))
        used = self.n if rows is None else int(rows.sum())
        if self.skipped_by_rule(x, y, s):
            return float("nan"), 0, used
        codes = self._codes if rows is None else self._codes[rows]
        rx, ry = int(self.levels[x]), int(self.levels[y])
        cell = codes[:, x] * ry + codes[:, y]
        strata = 1
        if s:
            present, stratum = np.unique(_strata(codes[:, list(s)], self.levels[list(s)]),
                                         return_inverse=True)
            cell = stratum.reshape(-1) * (rx * ry) + cell
            strata = len(present)
        counts = np.bincount(cell, minlength=strata * rx * ry).reshape(strata, rx, ry)
        g2, dof = g_squared_table(counts)
        return g2, dof, used


def _strata(codes: np.ndarray, levels: np.ndarray) -> np.ndarray:
    """One integer per row naming its combination of conditioning values."""
    if float(np.prod(levels.astype(float))) < 2 ** 62:
        return np.ravel_multi_index(codes.T, tuple(int(v) for v in levels))
    _, inverse = np.unique(codes, axis=0, return_inverse=True)
    return inverse.reshape(-1)


def make_g_squared(frame, *, missing="drop", **options) -> GSquared:
    """Registry factory: reject unknown options with one clear line."""
    reject_unknown(options, _OWNER, OPTIONS)
    return GSquared(frame, missing=missing, **options)

