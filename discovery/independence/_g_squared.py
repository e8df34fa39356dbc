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
level of x or y adds nothing.

Too few rows: tests that are not run
------------------------------------
With many strata and few rows the χ² approximation fails and the test has no power. The
minimum-rows rule compares the rows of a test with its degrees of freedom **counted from the
data** as above: a test with fewer than ``min_rows_per_dof`` rows per degree of freedom (default
5; common practice, no source — it echoes Cochran's 1954 rule of five expected counts per cell),
or with no degree of freedom left at all (no stratum holds two levels of both x and y), is
**not run**. Its statistic and p-value are NaN, which the search reads as "not shown to be
independent": *the edge stays*. A test without enough data never deletes an edge.
:meth:`GSquared.untestable_reason` says why a test was not run ("too few rows to test given
{a, b} ...") and :meth:`GSquared.describe_tests` counts such tests for the result's notes.

The older rule (option ``thin_tests="independent"``) judged the rows against the degrees of
freedom of the full table, ``(|x| − 1)(|y| − 1) Π |s|``, and read a test it skipped as p = 1,
"independent": with many levels in the conditioning set it **removes true edges** for want of
data (on the ALARM network at n = 10,000 it loses 8 of 46 edges this way).

Speed
-----
A batch of tests is answered from integer-coded columns without a per-test table: each row's
cell is the mixed-radix number ``((offset_t + stratum) · |x| + x) · |y| + y``, where ``offset_t``
places test ``t`` in its own block, and one ``np.bincount`` over the whole chunk of tests counts
every cell of every test at once; G², the degrees of freedom and the rows per test are then
reductions over those counts. Tests whose conditioning set has more possible strata than
there is room for fall back to numbering only the strata that occur (``np.unique``).

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
from ._tabular import (as_frame, check_choice, check_missing_policy, check_real,
                       check_single_levels, fingerprint, kinds_of, reject_unknown)

__all__ = ["GSquared", "g_squared_table"]

_OWNER = "the G² test ('g-squared')"
OPTIONS = ("min_rows_per_dof", "thin_tests")
#: Values of the ``thin_tests`` option.
THIN_TESTS = ("keep-edge", "independent")

# A chunk of tests is counted with one bincount: at most this many row entries and cells.
_CHUNK_ENTRIES = 1 << 18   # about 1 MB of int32 keys: stays in cache
_CHUNK_CELLS = 1 << 22


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
    g2, dof = _strata_g2(counts)
    return max(float(g2.sum()), 0.0), int(dof.sum())


def _strata_g2(counts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per stratum: G² and ``(r − 1)(c − 1)`` over the levels present (counts ``(T, R, C)``)."""
    rows = counts.sum(axis=2)
    cols = counts.sum(axis=1)
    total = rows.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        expected = rows[:, :, None] * cols[:, None, :] / total[:, None, None]
        terms = xlogy(counts, counts) - xlogy(counts, expected)
    terms = np.where(counts > 0, terms, 0.0)
    g2 = 2.0 * terms.sum(axis=(1, 2))
    r = (rows > 0).sum(axis=1)
    c = (cols > 0).sum(axis=1)
    return g2, np.clip((r - 1) * (c - 1), 0, None)


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
        The minimum-rows rule (see the module docstring). ``0`` runs every test that has at
        least one degree of freedom.
    thin_tests : {"keep-edge", "independent"}
        ``"keep-edge"`` (default): the rule is judged on the degrees of freedom counted from
        the data, and a test it stops is not run (p-value NaN, the edge stays).
        ``"independent"``: the older rule, judged on the full table's degrees of freedom,
        reading a stopped test as p = 1 — it removes edges for want of data.

    Raises
    ------
    DataValidationError
        A column is continuous (G² needs a few levels per column) or has a single level.
    SettingsError
        An option is out of range.

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
                 min_rows_per_dof: float = 5.0, thin_tests: str = "keep-edge"):
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
        self.thin_tests = check_choice(thin_tests, "thin_tests", _OWNER, THIN_TESTS)
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
        # one contiguous row of codes per variable: the batch gathers whole columns
        self._columns = np.ascontiguousarray(codes.T).astype(
            np.int32 if frame.shape[0] < 2 ** 31 else np.int64)
        self.levels = levels
        self._key = ("g-squared", missing, self.min_rows_per_dof, self.thin_tests, frame.shape,
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

    def _thin(self, rows, dof, full_dof) -> np.ndarray:
        """Which tests the minimum-rows rule stops (arrays per test)."""
        rows = np.asarray(rows, dtype=float)
        if self.thin_tests == "independent":
            return (rows < self.min_rows_per_dof * np.asarray(full_dof, dtype=float)) | (rows == 0)
        dof = np.asarray(dof, dtype=float)
        return (dof == 0) | (rows < self.min_rows_per_dof * dof)

    def _index_of(self, x, y, given) -> tuple[int, int, tuple[int, ...]]:
        index = {v: i for i, v in enumerate(self.variables)}

        def one(v):
            if isinstance(v, (int, np.integer)) and not isinstance(v, bool):
                if not 0 <= int(v) < len(self.variables):
                    raise KeyError(f"variable index {v} is out of range")
                return int(v)
            if v not in index:
                raise KeyError(f"variable {v!r} is not among {list(self.variables)}")
            return index[v]

        a, b = one(x), one(y)
        s = tuple(sorted(one(g) for g in given))
        return (a, b, s) if a < b else (b, a, s)

    def untestable_reason(self, x, y, given=()) -> str | None:
        """Why the test of ``x ⟂ y | given`` is not run, or None when it is run.

        Parameters
        ----------
        x, y : str or int
            The two variables, by name or by position in :attr:`variables` (both accepted).
        given : iterable of str or int
            The conditioning set, likewise.

        Returns
        -------
        str or None
            e.g. ``"too few rows to test given {a, b}: 180 rows for 40 degrees of freedom
            (at least 5 per degree needed)"``.
        """
        a, b, s = self._index_of(x, y, given)
        rows, dof, _ = self._counts_stats(np.array([[a, b, *s]], dtype=np.intp))
        full = self._full_dof(a, b, s)
        if not self._thin(rows, dof, [full])[0]:
            return None
        names = ", ".join(self.variables[v] for v in s)
        where = f" given {{{names}}}" if s else ""
        rows, dof = int(rows[0]), int(dof[0])
        if self.thin_tests == "independent":
            return (f"too few rows to test{where}: {rows} rows for {full} degrees of freedom "
                    f"of the full table (at least {self.min_rows_per_dof:g} per degree "
                    f"needed); read as independent (older rule)")
        if dof == 0:
            return (f"too few rows to test{where}: no stratum holds two levels of both "
                    f"{self.variables[a]} and {self.variables[b]} ({rows} rows)")
        return (f"too few rows to test{where}: {rows} rows for {dof} degrees of freedom "
                f"(at least {self.min_rows_per_dof:g} per degree needed)")

    def skipped_by_rule(self, x: int, y: int, s) -> bool:
        """True when the minimum-rows rule stops the test of ``x ⟂ y | s`` (by index)."""
        return self.untestable_reason(x, y, tuple(s)) is not None

    def describe_tests(self, tests) -> list[str]:
        """Notes for a search result: how many tests the minimum-rows rule stopped.

        Parameters
        ----------
        tests : iterable of (x, y, given, ...)
            The tests run, by variable name. A fourth item, the p-value, lets tests that
            cannot have been stopped (a finite p-value below 1) be skipped without recounting.
        """
        tests = list(tests)
        candidates = []
        for row in tests:
            p = row[3] if len(row) > 3 else float("nan")
            if p is None or not np.isfinite(p) or p >= 1.0:
                candidates.append(self._index_of(row[0], row[1], row[2]))
        stopped = 0
        if candidates:
            by_size: dict[int, list] = {}
            for t in candidates:
                by_size.setdefault(len(t[2]), []).append([t[0], t[1], *t[2]])
            for rows in by_size.values():
                idx = np.array(rows, dtype=np.intp)
                n_rows, dof, full = self._counts_stats(idx)
                stopped += int(self._thin(n_rows, dof, full).sum())
        if not stopped:
            return []
        if self.thin_tests == "independent":
            return [f"g-squared: {stopped} of {len(tests)} tests had fewer than "
                    f"{self.min_rows_per_dof:g} rows per degree of freedom of the full table "
                    f"and were not run (older rule, option thin_tests='independent'); they "
                    f"count as 'independent' (p = 1) and may have removed true edges"]
        return [f"g-squared: {stopped} of {len(tests)} tests had too few rows (fewer than "
                f"{self.min_rows_per_dof:g} per degree of freedom counted from the data, or "
                f"none) and were not run; they did not remove their edges (p-value NaN, read "
                f"as 'not independent')"]

    # -- tests -------------------------------------------------------------------------------
    def _batch_array(self, idx):
        idx = np.asarray(idx, dtype=np.intp)
        g2, dof, rows, full = self._statistics(idx)
        thin = self._thin(rows, dof, full)
        with np.errstate(invalid="ignore"):
            p = np.where(dof > 0, chi2.sf(g2, np.maximum(dof, 1)), 1.0)
        stat = np.where(thin, np.nan, np.maximum(g2, 0.0))
        p = np.where(thin, 1.0 if self.thin_tests == "independent" else np.nan, p)
        return stat, p

    def _counts_stats(self, idx):
        """Rows used, data degrees of freedom and full-table degrees of freedom per test."""
        _, dof, rows, full = self._statistics(idx)
        return rows, dof, full

    def _statistics(self, idx):
        """G², data degrees of freedom, rows used and full-table degrees of freedom per test."""
        m, width = idx.shape
        lv = self.levels[idx].astype(float)
        full = (lv[:, 0] - 1) * (lv[:, 1] - 1) * lv[:, 2:].prod(axis=1)
        g2 = np.zeros(m)
        dof = np.zeros(m, dtype=np.int64)
        rows = np.zeros(m, dtype=np.int64)
        cells = lv.prod(axis=1)           # cells of each test's full table
        dense = cells <= max(4.0 * self.n, 4096.0)
        order = np.flatnonzero(dense)
        if len(order):
            # chunks of tests, sized so one bincount stays small
            per_test = max(1, self.n)
            start = 0
            while start < len(order):
                stop = start + 1
                entries = per_test
                total = cells[order[start]]
                while (stop < len(order) and entries + per_test <= _CHUNK_ENTRIES
                       and total + cells[order[stop]] <= _CHUNK_CELLS):
                    entries += per_test
                    total += cells[order[stop]]
                    stop += 1
                part = order[start:stop]
                g2[part], dof[part], rows[part] = self._dense(idx[part])
                start = stop
        for t in np.flatnonzero(~dense):
            g2[t], dof[t], rows[t] = self._sparse(idx[t])
        return g2, dof, rows, full

    def _dense(self, idx):
        """Counts of a chunk of tests by one bincount over mixed-radix cell numbers."""
        m, width = idx.shape
        cols = self._columns
        lv = self.levels[idx]
        rx, ry = int(lv[:, 0].max()), int(lv[:, 1].max())
        strata = lv[:, 2:].prod(axis=1) if width > 2 else np.ones(m, dtype=np.int64)
        offsets = np.concatenate([[0], np.cumsum(strata)[:-1]])
        n_strata = int(strata.sum())
        dtype = np.int64 if n_strata * rx * ry >= 2 ** 31 - 1 else cols.dtype
        if width > 2:                    # mixed radix over the set: (s1 · l2 + s2) · l3 + s3 ...
            key = cols[idx[:, 2]].astype(dtype)
            for j in range(3, width):
                key *= lv[:, j].astype(dtype)[:, None]
                key += cols[idx[:, j]]
            key += offsets.astype(dtype)[:, None]
        else:
            key = np.broadcast_to(offsets.astype(dtype)[:, None], (m, self.n)).copy()
        key *= rx
        key += cols[idx[:, 0]]
        key *= ry
        key += cols[idx[:, 1]]
        bins = n_strata * rx * ry
        if self._has_nan:
            bad = (cols[idx] < 0).any(axis=1)
            key[bad] = bins
        counts = np.bincount(key.ravel(), minlength=bins + 1)[:bins]
        counts = counts.reshape(n_strata, rx, ry).astype(float)
        per_stratum_rows = counts.sum(axis=(1, 2))
        used = per_stratum_rows > 0
        owner = np.repeat(np.arange(m), strata)[used]
        g2_s, dof_s = _strata_g2(counts[used])
        g2 = np.bincount(owner, weights=g2_s, minlength=m)
        dof = np.bincount(owner, weights=dof_s, minlength=m).round().astype(np.int64)
        rows = np.bincount(owner, weights=per_stratum_rows[used], minlength=m)
        return g2, dof, rows.round().astype(np.int64)

    def _sparse(self, row):
        """One test whose conditioning set has more possible strata than the dense path takes:
        number only the strata that occur."""
        x, y, s = int(row[0]), int(row[1]), [int(v) for v in row[2:]]
        present = self._rows((x, y, *s))
        codes = self._codes if present is None else self._codes[present]
        rx, ry = int(self.levels[x]), int(self.levels[y])
        stratum = _strata(codes[:, s], self.levels[s])
        kept, stratum = np.unique(stratum, return_inverse=True)
        cell = (stratum.reshape(-1) * rx + codes[:, x]) * ry + codes[:, y]
        counts = np.bincount(cell, minlength=len(kept) * rx * ry).reshape(len(kept), rx, ry)
        g2, dof = _strata_g2(counts.astype(float))
        return float(g2.sum()), int(dof.sum()), int(len(codes))

    def test(self, x, y, given=()):
        """Run one test by names; see :meth:`IndependenceTest.test`.

        A test that the minimum-rows rule stops comes back with NaN statistic and p-value
        (see :meth:`untestable_reason`).

        Raises
        ------
        DataValidationError
            When the conditioning set has more possible strata than the table has rows: such a
            test says nothing. (Inside a search the minimum-rows rule stops it instead.)
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
