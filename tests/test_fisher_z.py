"""Fisher's z against statsmodels, scipy and the table of critical values of Pearson's r."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from discovery import DegenerateDataWarning, FisherZ, PValueCache
from discovery.independence import canonical_triple


def residual_correlation(frame, x, y, given):
    """Partial correlation as the correlation of OLS residuals (statsmodels)."""
    if given:
        design = sm.add_constant(frame[list(given)])
        rx = sm.OLS(frame[x], design).fit().resid
        ry = sm.OLS(frame[y], design).fit().resid
    else:
        rx, ry = frame[x] - frame[x].mean(), frame[y] - frame[y].mean()
    return float(np.corrcoef(rx, ry)[0, 1])


@pytest.fixture(scope="module")
def frame():
    rng = np.random.default_rng(11)
    n = 400
    a = rng.normal(size=n)
    b = 0.6 * a + rng.normal(size=n)
    c = 0.5 * b - 0.4 * a + rng.normal(size=n)
    d = rng.normal(size=n) + 0.3 * c
    e = rng.normal(size=n)
    return pd.DataFrame({"a": a, "b": b, "c": c, "d": d, "e": e})


@pytest.mark.parametrize("x, y, given", [
    ("a", "b", ()), ("a", "c", ("b",)), ("a", "d", ("b", "c")), ("b", "e", ("a", "c", "d")),
    ("d", "a", ("c",)), ("c", "e", ()),
])
def test_pvalue_matches_statsmodels_residuals_and_scipy_normal(frame, x, y, given):
    # Reference: r from statsmodels OLS residuals; z = atanh(r) sqrt(n - |S| - 3) and the
    # two-sided p-value from scipy.stats.norm (Fisher 1921).
    r = residual_correlation(frame, x, y, given)
    z = np.arctanh(r) * np.sqrt(len(frame) - len(given) - 3)
    expected = 2 * stats.norm.sf(abs(z))
    result = FisherZ(frame).test(x, y, given)
    assert result.pvalue == pytest.approx(expected, rel=1e-8, abs=1e-300)
    assert abs(result.statistic) == pytest.approx(abs(z), rel=1e-8)


def test_critical_value_of_pearson_r_at_n_100():
    # Table of critical values of Pearson's r (two-sided α = 0.05, n = 100, df = 98):
    # |r| ≈ 0.197 (from memory of the standard table; scipy's t distribution gives 0.1966).
    n = 100
    critical = None
    for r in np.arange(0.150, 0.250, 0.0005):
        rng_data = _pair_with_correlation(r, n)
        p = FisherZ(rng_data).test("x", "y").pvalue
        if p < 0.05:
            critical = r
            break
    assert critical == pytest.approx(0.197, abs=0.003)


def _pair_with_correlation(r, n):
    """Two columns with sample correlation exactly r."""
    rng = np.random.default_rng(0)
    u, v = rng.normal(size=(2, n))
    u = (u - u.mean()) / u.std()
    v = v - v.mean() - (v @ u) / (u @ u) * u
    v /= v.std()
    return pd.DataFrame({"x": u, "y": r * u + np.sqrt(1 - r * r) * v})


def test_symmetric_and_canonical(frame):
    t = FisherZ(frame)
    assert t.test("a", "c", ["b", "d"]).pvalue == t.test("c", "a", ["d", "b"]).pvalue
    assert canonical_triple(3, 1, [4, 0]) == (1, 3, (0, 4))


def test_batch_equals_single_tests(frame):
    t = FisherZ(frame)
    triples = [(0, 1, ()), (0, 2, (1,)), (1, 4, (0, 2, 3)), (2, 3, (0, 1))]
    batch = t.pvalues(triples)
    singles = [t.test(t.variables[x], t.variables[y], [t.variables[s] for s in S]).pvalue
               for x, y, S in triples]
    np.testing.assert_allclose(batch, singles, rtol=1e-12)


def test_safe_near_perfect_correlation():
    rng = np.random.default_rng(3)
    x = rng.normal(size=500)
    frame = pd.DataFrame({"x": x, "y": x + 1e-9 * rng.normal(size=500), "z": rng.normal(size=500)})
    p = FisherZ(frame).test("x", "y", ["z"]).pvalue
    assert np.isfinite(p) and p < 1e-100


def test_cache_reuses_pvalues(frame):
    t = FisherZ(frame)
    cache = PValueCache()
    first = cache.pvalues(t, [(0, 1, ()), (0, 2, (1,))])
    again = cache.pvalues(t, [(1, 0, ()), (2, 0, (1,)), (3, 4, ())])
    assert again[:2].tolist() == first.tolist()
    assert cache.hits == 2 and cache.misses == 3


def test_testwise_deletion_uses_complete_rows_of_each_test(frame):
    # With test-wise deletion a test on (a, b) ignores missing values in other columns.
    holes = frame.copy()
    holes.loc[:49, "e"] = np.nan
    t = FisherZ(holes, missing="test-wise")
    assert t.test("a", "b").pvalue == pytest.approx(FisherZ(frame).test("a", "b").pvalue)
    expected = FisherZ(frame.iloc[50:]).test("a", "e", ["b"]).pvalue
    assert t.test("a", "e", ["b"]).pvalue == pytest.approx(expected, rel=1e-10)


def test_too_few_rows_gives_nan_with_warning():
    frame = pd.DataFrame(np.random.default_rng(1).normal(size=(5, 4)), columns=list("abcd"))
    with pytest.warns(DegenerateDataWarning, match="could not be computed"):
        p = FisherZ(frame).test("a", "b", ["c", "d"]).pvalue
    assert np.isnan(p)


def test_independent_data_is_rarely_rejected():
    # common practice, no source: at α = 0.05 about 5% of null tests reject (a loose band here;
    # the calibrated check with a tight band is in the slow suite).
    rng = np.random.default_rng(5)
    frame = pd.DataFrame(rng.normal(size=(300, 30)))
    frame.columns = [f"v{i:02d}" for i in range(30)]
    t = FisherZ(frame)
    triples = [(i, j, ()) for i in range(30) for j in range(i + 1, 30)]
    rate = float(np.mean(t.pvalues(triples) < 0.05))
    assert 0.02 <= rate <= 0.09


@pytest.mark.parametrize("alpha", [0.01, 0.05, 0.2, 0.6])
def test_may_separate_never_rules_out_a_separating_variable(alpha):
    # The search skips a level-1 test when FisherZ.may_separate says the one conditioning
    # variable cannot separate the pair. Reference for every skipped test: the p-value from
    # statsmodels OLS residual correlation and scipy's normal distribution must be <= alpha.
    from discovery.simulate import random_dag, sample_linear_gaussian
    rng = np.random.default_rng(5)
    frame = sample_linear_gaussian(random_dag(9, expected_degree=3, rng=rng), 300, rng=rng)
    test = FisherZ(frame)
    names = list(frame.columns)
    pairs = np.array([(i, j) for i in range(9) for j in range(i + 1, 9)])
    possible = test.may_separate(pairs, alpha)
    skipped = 0
    for (i, j), row in zip(pairs, possible):
        for k in np.flatnonzero(~row):
            if k in (i, j):
                continue
            r = residual_correlation(frame, names[i], names[j], (names[k],))
            p = 2 * stats.norm.sf(abs(np.arctanh(r)) * np.sqrt(len(frame) - 4))
            assert p <= alpha, (names[i], names[j], names[k], p)
            skipped += 1
    assert skipped > 0  # the shortcut does rule tests out on this data


def test_may_separate_is_none_under_test_wise_deletion():
    values = np.random.default_rng(2).normal(size=(50, 3))
    values[0, 0] = np.nan
    test = FisherZ(values, missing="test-wise")
    assert test.may_separate(np.array([[0, 1]]), 0.05) is None
