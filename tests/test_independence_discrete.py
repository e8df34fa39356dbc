"""The G² test against scipy, textbook facts about contingency tables, and its calibration.

References named beside each check.
"""

import numpy as np
import pandas as pd
import pytest
from scipy.stats import chi2, chi2_contingency

from discovery import discover
from discovery.exceptions import DataValidationError, SettingsError
from discovery.independence import GSquared, make_test
from discovery.independence._g_squared import g_squared_table


def _table_frame(table):
    """Rows of a frame whose x × y counts are ``table``."""
    rows = []
    for i, row in enumerate(table):
        for j, count in enumerate(row):
            rows += [(f"a{i}", f"b{j}")] * int(count)
    return pd.DataFrame(rows, columns=["x", "y"])


@pytest.mark.parametrize("table", [
    [[10, 20, 30], [6, 9, 17]],                # scipy's documentation example shape
    [[12, 5], [7, 19]],
    [[30, 10, 5, 1], [10, 30, 8, 4], [5, 6, 40, 9]],
])
def test_unconditional_matches_scipy_log_likelihood(table):
    # Source: scipy.stats.chi2_contingency(lambda_="log-likelihood") is the G-test (Sokal &
    # Rohlf); without Yates' correction it must equal our G² and p-value exactly.
    stat, p, dof, _ = chi2_contingency(np.array(table), correction=False,
                                       lambda_="log-likelihood")
    frame = _table_frame(table)
    result = GSquared(frame).test("x", "y")
    assert result.statistic == pytest.approx(stat, rel=1e-10)
    assert result.pvalue == pytest.approx(p, rel=1e-8)
    assert g_squared_table(np.array(table))[1] == dof


def test_stratified_sum_of_per_stratum_g2():
    # Source: Agresti (2002) §6.3 — the conditional G² is the sum of the partial tables' G²,
    # with the sum of their degrees of freedom; each partial table checked with scipy.
    rng = np.random.default_rng(3)
    n = 600
    z = rng.integers(0, 3, n)
    x = (rng.random(n) < 0.2 + 0.25 * z).astype(int)
    y = (rng.random(n) < 0.7 - 0.2 * z).astype(int)
    frame = pd.DataFrame({"x": x, "y": y, "z": z})
    total, dof = 0.0, 0
    for level in range(3):
        part = frame[frame.z == level]
        table = pd.crosstab(part.x, part.y).to_numpy()
        stat, _, d, _ = chi2_contingency(table, correction=False, lambda_="log-likelihood")
        total += stat
        dof += d
    result = GSquared(frame).test("x", "y", ["z"])
    assert result.statistic == pytest.approx(total, rel=1e-10)
    assert result.pvalue == pytest.approx(chi2.sf(total, dof), rel=1e-8)


def test_degrees_of_freedom_reduced_for_empty_rows():
    # Source: Spirtes, Glymour & Scheines (2000) §5.4.2 — rows/columns that are empty in a
    # stratum do not count: a stratum where x takes one level adds no degree of freedom.
    counts = np.zeros((2, 3, 2))
    counts[0] = [[10, 5], [4, 12], [7, 7]]      # 3 × 2 present: 2 dof
    counts[1] = [[9, 3], [0, 0], [0, 0]]        # only one x level present: 0 dof
    assert g_squared_table(counts)[1] == 2


def test_common_effect_and_common_cause_rules():
    # Common practice (rule of the trade): two independent causes become dependent given
    # their common effect; conditioning on a common cause removes the dependence.
    rng = np.random.default_rng(0)
    n = 4000
    a = rng.integers(0, 2, n)
    b = rng.integers(0, 2, n)
    c = (a ^ b) ^ (rng.random(n) < 0.1)          # common effect
    d = rng.integers(0, 3, n)
    e = (d + (rng.random(n) < 0.3)) % 3          # d causes e and f
    f = (d + (rng.random(n) < 0.3)) % 3
    test = GSquared(pd.DataFrame(dict(a=a, b=b, c=c, d=d, e=e, f=f)))
    assert test.test("a", "b").pvalue > 0.01
    assert test.test("a", "b", ["c"]).pvalue < 1e-6
    assert test.test("e", "f").pvalue < 1e-6
    assert test.test("e", "f", ["d"]).pvalue > 0.01


def test_minimum_rows_rule_marks_and_counts():
    # Common practice, no source: fewer than 5 rows per degree of freedom -> not run, p = 1.
    rng = np.random.default_rng(1)
    frame = pd.DataFrame({c: rng.integers(0, 4, 60) for c in "abcde"})
    test = GSquared(frame)
    r = test.test("a", "b", ["c"])          # dof 3*3*4 = 36 -> needs 180 rows
    assert np.isnan(r.statistic) and r.pvalue == 1.0
    assert test.test("a", "b").pvalue < 1.0 or not np.isnan(test.test("a", "b").statistic)
    notes = test.describe_tests([("a", "b", ()), ("a", "b", ("c",)), ("a", "d", ("e",))])
    assert notes and notes[0].startswith("g-squared: 2 of 3 tests")
    off = GSquared(frame, min_rows_per_dof=0)
    assert not np.isnan(off.test("a", "b", ["c"]).statistic)


def test_more_strata_than_rows_is_one_clear_error():
    rng = np.random.default_rng(2)
    frame = pd.DataFrame({c: rng.integers(0, 6, 30) for c in "abcd"})
    message = r"\['c', 'd'\] has 36 possible strata .* only 30 rows"
    with pytest.raises(DataValidationError, match=message):
        GSquared(frame).test("a", "b", ["c", "d"])


def test_bad_columns_are_one_clear_error():
    rng = np.random.default_rng(2)
    with pytest.raises(DataValidationError, match=r"column 'w' is continuous .* 'mixed'"):
        GSquared(pd.DataFrame({"a": rng.integers(0, 2, 50), "w": rng.normal(size=50)}))
    with pytest.raises(DataValidationError, match=r"column 'k' has a single level"):
        GSquared(pd.DataFrame({"a": rng.integers(0, 2, 50), "k": ["same"] * 50}))
    with pytest.raises(SettingsError, match=r"does not take the option\(s\) \['alpha'\]"):
        make_test("g-squared", pd.DataFrame({"a": [0, 1] * 5, "b": [1, 0] * 5}), alpha=0.1)


def test_text_columns_and_missing_values_test_wise():
    rng = np.random.default_rng(4)
    n = 500
    x = rng.choice(["low", "mid", "high"], n)
    y = np.where(rng.random(n) < 0.5, x, rng.choice(["low", "mid", "high"], n)).astype(object)
    y[:40] = None
    frame = pd.DataFrame({"x": x, "y": y})
    with pytest.raises(DataValidationError, match="test-wise"):
        GSquared(frame)
    r = GSquared(frame, missing="test-wise").test("x", "y")
    complete = frame.dropna()
    stat, *_ = chi2_contingency(pd.crosstab(complete.x, complete.y).to_numpy(),
                                correction=False, lambda_="log-likelihood")
    assert r.statistic == pytest.approx(stat)   # scipy on the complete rows


def _calibration(reps, n, seed):
    rng = np.random.default_rng(seed)
    p = []
    for _ in range(reps):
        z = rng.integers(0, 3, n)
        x = (z + (rng.random(n) < 0.4) * rng.integers(0, 3, n)) % 3
        y = (rng.random(n) < 0.3 + 0.2 * z).astype(int)
        frame = pd.DataFrame({"x": x, "y": y, "z": z})
        p.append(GSquared(frame).test("x", "y", ["z"]).pvalue)
    return np.mean(np.array(p) < 0.05)


def test_calibration_small():
    # Source: a valid level-α test rejects a true null with probability about α (Neyman–
    # Pearson); small version with a wide band (CI), binomial sd at 300 reps ≈ 0.013.
    assert 0.015 <= _calibration(300, 400, 11) <= 0.095


@pytest.mark.slow
def test_calibration_full():
    # Same source; 2000 replications: band [0.03, 0.07].
    assert 0.03 <= _calibration(2000, 1000, 12) <= 0.07


def test_search_on_discrete_collider():
    # Rule of the trade: a — c — b with a, b independent causes of c is a collider a → c ← b.
    rng = np.random.default_rng(5)
    n = 3000
    a = rng.integers(0, 2, n)
    b = rng.integers(0, 3, n)
    c = (rng.random(n) < 0.1 + 0.4 * a + 0.35 * (b == 2)).astype(int)
    d = np.where(rng.random(n) < 0.8, c, 1 - c)
    frame = pd.DataFrame({"a": a, "b": b, "c": c, "d": d})
    result = discover(frame, test="g-squared")
    arrows = sorted(e.arrow() for e in result.edges)
    assert arrows == ["a → c", "b → c", "c → d"]
