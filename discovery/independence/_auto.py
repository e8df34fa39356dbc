"""``auto``: choose the independence test for each test from the kinds of its columns.

A table often mixes kinds, and one test rarely fits every pair. The automatic test looks at the
columns of each test ``x ⟂ y | S`` (as judged by :func:`discovery.data.column_kind`) and sends
it to the test that fits them:

=================================================  ============  ===========================
columns of x, y and S                              test          why
=================================================  ============  ===========================
all discrete (binary, categorical, ordinal)        ``g-squared``  counts, no distribution to
                                                                  assume
all continuous, none rejects normality              ``fisher-z``   linear-Gaussian: the exact
                                                                  and fastest choice
all continuous, normality rejected for some         ``kci``        non-Gaussian: dependence
                                                                  may be nonlinear
a mix of continuous and discrete                    ``mixed``      regression likelihood ratio
=================================================  ============  ===========================

Normality of each continuous column is checked once with D'Agostino and Pearson's omnibus test
(``scipy.stats.normaltest``; D'Agostino & Pearson 1973) at level ``normality_alpha`` (default
0.01). Marginal normality does not prove a linear-Gaussian model, and with many rows the check
rejects small departures (sending those columns to the slower kernel test, which is valid for
Gaussian data too): it is a screening rule, common practice, no source.

Every decision is recorded: :meth:`AutoTest.choose` gives the test and the reason for one test,
:meth:`AutoTest.describe_tests` turns a search's tests into notes that say which test decided
each pair and why.

References
----------
.. [1] D'Agostino, R. & Pearson, E. S. (1973). Tests for departure from normality. Empirical
   results for the distributions of b2 and √b1. *Biometrika* 60, 613–622.
"""

from __future__ import annotations

from collections import defaultdict

import numpy as np
from scipy import stats

from ._base import IndependenceTest
from ._fisher_z import FisherZ
from ._g_squared import GSquared, OPTIONS as G_OPTIONS
from ._kernel import KernelCI, OPTIONS as KERNEL_OPTIONS
from ._mixed import MixedLR
from ._tabular import (DISCRETE_KINDS, as_frame, check_missing_policy, check_real,
                       check_single_levels, fingerprint, kinds_of, numeric_values,
                       reject_unknown)

__all__ = ["AutoTest"]

_OWNER = "the automatic test ('auto')"
OPTIONS = ("normality_alpha",) + KERNEL_OPTIONS + G_OPTIONS
#: Fewer rows than this and normality is not checked (the omnibus test needs about 20).
MIN_ROWS_NORMALITY = 20


class AutoTest(IndependenceTest):
    """Choose G², Fisher's z, KCI or the mixed test for each test from its columns' kinds.

    Parameters
    ----------
    data : pandas.DataFrame or 2-D array
        Any mix of continuous, ordinal, binary and categorical columns.
    variables : sequence of str, optional
        Names when ``data`` is an array.
    missing : {"drop", "test-wise"}
        Passed to every test.
    normality_alpha : float, default 0.01
        A continuous column whose normality p-value is below this counts as non-normal.
    **options
        Options of the kernel test (``seed``, ``lowrank_above``, ``features``,
        ``features_given``, ``null``, ``null_samples``, ``epsilon``) and of G²
        (``min_rows_per_dof``).

    Attributes
    ----------
    kinds : dict of str to str
        Each column's kind.
    normality : dict of str to float
        The normality p-value of each continuous column.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> rng = np.random.default_rng(0)
    >>> x = rng.normal(size=200)
    >>> frame = pd.DataFrame({"x": x, "y": x + rng.normal(size=200),
    ...                       "group": rng.choice(["a", "b"], size=200)})
    >>> AutoTest(frame).choose(0, 1, ())
    ('fisher-z', 'x and y continuous; normality not rejected (p ≥ 0.01)')
    >>> AutoTest(frame).choose(0, 2, ())[0]
    'mixed'
    """

    name = "auto"

    def __init__(self, data, *, variables=None, missing: str = "drop",
                 normality_alpha: float = 0.01, **options):
        reject_unknown(options, _OWNER, OPTIONS[1:])
        frame = as_frame(data, variables, owner=_OWNER)
        check_missing_policy(missing, frame, _OWNER)
        check_single_levels(frame, _OWNER)
        self.normality_alpha = check_real(normality_alpha, "normality_alpha", _OWNER,
                                          low=0.0, high=1.0)
        self.variables = tuple(frame.columns)
        self.n = int(len(frame))
        self.missing = missing
        self.kinds = kinds_of(frame)
        kernel_options = {k: v for k, v in options.items() if k in KERNEL_OPTIONS}
        g_options = {k: v for k, v in options.items() if k in G_OPTIONS}
        self.seed = kernel_options.get("seed", 0)
        continuous = [c for c in frame.columns if self.kinds[c] == "continuous"]
        discrete = [c for c in frame.columns if self.kinds[c] in DISCRETE_KINDS]
        self.normality = {}
        if continuous:
            values = numeric_values(frame[continuous], _OWNER,
                                    hint="leave it out or give it as a category")
            for j, c in enumerate(continuous):
                v = values[:, j][~np.isnan(values[:, j])]
                self.normality[c] = (float(stats.normaltest(v).pvalue)
                                     if len(v) >= MIN_ROWS_NORMALITY else float("nan"))
        index = {c: i for i, c in enumerate(frame.columns)}
        # Sub-tests over the columns they can take, with maps from our indices to theirs.
        self._tests: dict[str, tuple[IndependenceTest, dict[int, int]]] = {}
        if len(continuous) >= 2:
            sub = frame[continuous].astype(float)
            local = {index[c]: k for k, c in enumerate(continuous)}
            self._tests["fisher-z"] = (FisherZ(sub, missing=missing), local)
            self._tests["kci"] = (KernelCI(sub, missing=missing, **kernel_options), local)
        if len(discrete) >= 2:
            local = {index[c]: k for k, c in enumerate(discrete)}
            self._tests["g-squared"] = (GSquared(frame[discrete], missing=missing,
                                                 **g_options), local)
        if continuous and discrete:
            self._tests["mixed"] = (MixedLR(frame, missing=missing),
                                    {i: i for i in range(len(frame.columns))})
        self.vectorised = "kci" not in self._tests and "mixed" not in self._tests
        self._key = ("auto", missing, self.normality_alpha, tuple(sorted(options.items())),
                     frame.shape, fingerprint(frame))

    def settings_key(self) -> tuple:
        return self._key

    # -- the choice --------------------------------------------------------------------------
    def _normal(self, column: str) -> bool:
        p = self.normality.get(column, float("nan"))
        return not (p < self.normality_alpha)  # NaN (too few rows): not rejected

    def choose(self, x: int, y: int, given) -> tuple[str, str]:
        """The test for ``x ⟂ y | given`` (by index) and the reason, in plain words."""
        names = [self.variables[v] for v in (x, y, *given)]
        kinds = [self.kinds[v] for v in names]
        pair = f"{names[0]} and {names[1]}"
        scope = pair + (" and the conditioning set" if given else "")
        if all(k in DISCRETE_KINDS for k in kinds):
            return "g-squared", f"{scope} discrete"
        if all(k == "continuous" for k in kinds):
            rejected = [v for v in names if not self._normal(v)]
            if not rejected:
                return "fisher-z", (f"{scope} continuous; normality not rejected "
                                    f"(p ≥ {self.normality_alpha:g})")
            return "kci", (f"{scope} continuous; normality rejected for "
                           f"{', '.join(rejected)} (p < {self.normality_alpha:g})")
        detail = ", ".join(f"{v} {k}" for v, k in zip(names, kinds))
        return "mixed", f"mixed kinds ({detail})"

    def untestable_reason(self, x, y, given=()) -> str | None:
        """Why the test of ``x ⟂ y | given`` is not run (G²'s tests too thin to run), or
        None. ``x``, ``y`` and ``given`` by name or by position (both accepted)."""
        index = {v: i for i, v in enumerate(self.variables)}
        cols = [int(v) if isinstance(v, (int, np.integer)) else index[v]
                for v in (x, y, *given)]
        name = self.choose(cols[0], cols[1], tuple(cols[2:]))[0]
        test, local = self._tests[name]
        reason = getattr(test, "untestable_reason", None)
        if reason is None:
            return None
        return reason(local[cols[0]], local[cols[1]], [local[c] for c in cols[2:]])

    # -- tests -------------------------------------------------------------------------------
    def _batch(self, triples):
        m = len(triples)
        stat = np.full(m, np.nan)
        pval = np.full(m, np.nan)
        groups: dict[str, list[int]] = defaultdict(list)
        for i, (x, y, s) in enumerate(triples):
            groups[self.choose(x, y, s)[0]].append(i)
        for name, rows in groups.items():
            test, local = self._tests[name]
            sub = []
            for i in rows:
                x, y, s = triples[i]
                a, b = local[x], local[y]
                sub.append((min(a, b), max(a, b), tuple(sorted(local[v] for v in s))))
            st, pv = test._batch(sub)
            stat[rows] = st
            pval[rows] = pv
        return stat, pval

    def describe_tests(self, tests) -> list[str]:
        """Notes for a search result: which test decided each pair, and why.

        Parameters
        ----------
        tests : iterable of (x, y, given, ...)
            The tests run, by variable name (extra items such as the p-value are ignored).

        Returns
        -------
        list of str
            The normality verdicts; one line per group of pairs tested by the same tests
            (with the reason for each test); the count of tests per test; then the notes of
            the kernel and G² tests (approximation used, tests skipped by the rows rule).
        """
        index = {v: i for i, v in enumerate(self.variables)}
        per_pair: dict[tuple[str, str], set] = defaultdict(set)
        routed: dict[str, list] = defaultdict(list)
        for row in tests:
            x, y, given = row[0], row[1], tuple(row[2])
            a, b = sorted((index[x], index[y]))
            name = self.choose(a, b, tuple(index[g] for g in given))[0]
            per_pair[(self.variables[a], self.variables[b])].add(name)
            routed[name].append((x, y, given))
        if not routed:
            return []
        notes = []
        if self.normality:
            bad = [c for c in self.normality if not self._normal(c)]
            good = [c for c in self.normality if self._normal(c)]
            notes.append(f"auto: normality (D'Agostino–Pearson, level {self.normality_alpha:g}) "
                         f"rejected for {', '.join(bad) or 'no column'}; not rejected for "
                         f"{', '.join(good) or 'no column'}")
        groups: dict[tuple, list[str]] = defaultdict(list)
        for pair, names in per_pair.items():
            groups[tuple(sorted(names))].append(f"{pair[0]} — {pair[1]}")
        for names, pairs in sorted(groups.items(), key=lambda g: (-len(g[1]), g[0])):
            why = "; ".join(f"{n}: {WHY[n]}" for n in names)
            notes.append(f"auto: {', '.join(sorted(pairs))} tested by {' and '.join(names)} "
                         f"({why})")
        counts = ", ".join(f"{len(rows)} {name}" for name, rows in
                           sorted(routed.items(), key=lambda kv: -len(kv[1])))
        notes.append(f"auto: {sum(len(r) for r in routed.values())} tests: {counts}")
        for name in ("kci", "g-squared"):
            if routed.get(name):
                test, _ = self._tests[name]
                notes.extend(test.describe_tests(routed[name]))
        return notes


#: Why each test is chosen, in a few words (the rules of :meth:`AutoTest.choose`).
WHY = {
    "g-squared": "every column of the test discrete",
    "fisher-z": "every column continuous, normality not rejected",
    "kci": "every column continuous, normality rejected for at least one",
    "mixed": "continuous and discrete columns together",
}


def make_auto(frame, *, missing="drop", **options) -> AutoTest:
    """Registry factory: reject unknown options with one clear line."""
    return AutoTest(frame, missing=missing, **options)
