"""The G² test against scipy, textbook facts about contingency tables, and its calibration.

References named beside each check.
"""

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st
from scipy.stats import chi2, chi2_contingency

from discovery import discover
from discovery.exceptions import DataValidationError, SettingsError
from discovery.independence import GSquared, make_test
from discovery.independence._g_squared import g_squared_table

sys.path.insert(0, str(Path(__file__).parent))  # tests/alarm_model.py


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


def test_minimum_rows_rule_on_data_dof_keeps_the_edge():
    # Common practice, no source: fewer than 5 rows per degree of freedom -> not run. The
    # degrees of freedom are counted from the data per stratum (Spirtes, Glymour & Scheines
    # 2000 §5.4.2); a test that is not run returns NaN, read by the search as "not
    # independent", so it cannot remove an edge.
    rng = np.random.default_rng(1)
    frame = pd.DataFrame({c: rng.integers(0, 4, 60) for c in "abcde"})
    test = GSquared(frame)
    r = test.test("a", "b", ["c", "d"])     # 16 strata of ~4 rows: data dof ≈ 16·(2·2) ≫ 60/5
    assert np.isnan(r.statistic) and np.isnan(r.pvalue)
    reason = test.untestable_reason("a", "b", ["d", "c"])
    assert reason.startswith("too few rows to test given {c, d}: 60 rows for ")
    assert test.untestable_reason(0, 1, (2, 3)) == reason      # by index, same answer
    assert test.untestable_reason("a", "b") is None
    assert test.skipped_by_rule(0, 1, (2, 3)) and not test.skipped_by_rule(0, 1, ())
    notes = test.describe_tests([("a", "b", (), 0.3), ("a", "b", ("c", "d"), float("nan")),
                                 ("a", "e", ("c", "d"), float("nan"))])
    assert notes and notes[0].startswith("g-squared: 2 of 3 tests had too few rows")
    assert "did not remove their edges" in notes[0]
    # one level of x in every stratum: no degree of freedom left, not run either
    z = rng.integers(0, 3, 200)
    tied = GSquared(pd.DataFrame({"x": z % 2, "y": rng.integers(0, 2, 200), "z": z}))
    assert np.isnan(tied.test("x", "y", ["z"]).pvalue)
    assert "no stratum holds two levels of both x and y" in tied.untestable_reason(
        "x", "y", ["z"])


def test_data_dof_runs_tests_the_product_rule_skipped():
    # Spirtes, Glymour & Scheines (2000) §5.4.2: with empty cells the degrees of freedom
    # shrink; a 4 × 4 table given three 4-level variables has 576 product degrees of freedom
    # (needs 2,880 rows by the product rule) but far fewer from the data when x and y are
    # driven by the set, so 2,000 rows suffice.
    rng = np.random.default_rng(7)
    n = 2000
    s = rng.integers(0, 4, (n, 3))
    x = (s[:, 0] + (rng.random(n) < 0.1)) % 4
    y = (s[:, 1] + (rng.random(n) < 0.1) + (x == s[:, 0])) % 4
    frame = pd.DataFrame({"x": x, "y": y, "a": s[:, 0], "b": s[:, 1], "c": s[:, 2]})
    new = GSquared(frame)
    r = new.test("x", "y", ["a", "b", "c"])
    assert np.isfinite(r.pvalue) and r.pvalue < 1e-6
    older = GSquared(frame, thin_tests="independent")
    # the older rule: judged on 576 product degrees of freedom, read as independent
    assert older.test("x", "y", ["a", "b", "c"]).pvalue == 1.0
    assert "older rule" in older.untestable_reason("x", "y", ["a", "b", "c"])
    assert older.describe_tests([("x", "y", ("a", "b", "c"), 1.0)])[0].startswith(
        "g-squared: 1 of 1 tests had fewer than 5 rows per degree of freedom of the full")


def test_thin_tests_option_is_checked():
    frame = pd.DataFrame({"a": [0, 1] * 5, "b": [1, 0] * 5})
    with pytest.raises(SettingsError, match=r"'thin_tests' option .* 'keep-edge', "
                                            r"'independent'"):
        make_test("g-squared", frame, thin_tests="drop")
    with pytest.raises(KeyError, match="'q' is not among"):
        GSquared(frame).untestable_reason("a", "q")


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


# -- the batch computation against references ---------------------------------------------------

def _reference_g2(codes, levels, x, y, s):
    """The former one-test-at-a-time G² (np.unique over strata, one table per test), kept as
    a reference for the batch computation: statistic and data degrees of freedom."""
    rx, ry = int(levels[x]), int(levels[y])
    cell = codes[:, x] * ry + codes[:, y]
    if s:
        stratum = np.ravel_multi_index(codes[:, list(s)].T, tuple(int(levels[v]) for v in s))
        present, stratum = np.unique(stratum, return_inverse=True)
        cell = stratum.reshape(-1) * (rx * ry) + cell
        shape = (len(present), rx, ry)
    else:
        shape = (1, rx, ry)
    counts = np.bincount(cell, minlength=shape[0] * rx * ry).reshape(shape)
    return g_squared_table(counts)


def _random_table(seed, n=1500, columns=7):
    rng = np.random.default_rng(seed)
    levels = rng.integers(2, 5, columns)
    data = np.zeros((n, columns), dtype=int)
    for j in range(columns):
        data[:, j] = rng.integers(0, levels[j], n)
        if j >= 2:  # some dependence, so that p-values span the whole range
            data[:, j] = np.where(rng.random(n) < 0.3, data[:, j - 1] % levels[j],
                                  data[:, j])
    return pd.DataFrame(data, columns=[f"v{j}" for j in range(columns)])


def test_batch_equals_the_former_per_test_computation():
    # The batch (mixed-radix cells, one bincount per chunk) must give the same p-values as
    # the former per-test computation to 1e-12 wherever both run.
    from itertools import combinations
    frame = _random_table(21)
    test = GSquared(frame, min_rows_per_dof=0)
    codes, levels = test._codes, test.levels
    for k in range(4):
        triples = [(x, y, s) for x, y in combinations(range(7), 2)
                   for s in combinations([v for v in range(7) if v not in (x, y)], k)]
        p = test.pvalues(triples, canonical=True)
        for (x, y, s), pv in zip(triples, p):
            g2, dof = _reference_g2(codes, levels, x, y, s)
            assert dof > 0 and abs(pv - chi2.sf(g2, dof)) <= 1e-12


def test_batch_equals_scipy_per_stratum_summed():
    # Source: scipy.stats.chi2_contingency(lambda_="log-likelihood", correction=False) on each
    # stratum's table (empty rows and columns dropped), statistics and degrees of freedom
    # summed over strata (Agresti 2002 §6.3).
    frame = _random_table(22, n=800, columns=5)
    test = GSquared(frame, min_rows_per_dof=0)
    triples = [(0, 1, (2,)), (0, 3, (1, 4)), (2, 4, (0, 1, 3)), (1, 2, ())]
    p = test.pvalues(triples)
    for (x, y, s), pv in zip(triples, p):
        names = frame.columns
        total, dof = 0.0, 0
        groups = frame.groupby([names[v] for v in s]) if s else [((), frame)]
        for _, part in groups:
            table = pd.crosstab(part[names[x]], part[names[y]]).to_numpy()
            if min(table.shape) < 2:
                continue
            stat, _, d, _ = chi2_contingency(table, correction=False,
                                             lambda_="log-likelihood")
            total += stat
            dof += d
        assert abs(pv - chi2.sf(total, dof)) <= 1e-12


def test_missing_values_in_the_batch_equal_scipy_on_complete_rows():
    # test-wise deletion in the batch: each test uses the rows complete on its own columns;
    # reference: scipy per stratum on those rows.
    frame = _random_table(23, n=600, columns=4).astype(float)
    frame.iloc[:50, 2] = np.nan
    frame.iloc[40:90, 3] = np.nan
    test = GSquared(frame, missing="test-wise", min_rows_per_dof=0)
    p = test.pvalues([(0, 1, (2,)), (0, 1, (3,)), (0, 1, ())])
    for pv, given in zip(p, ["v2", "v3", None]):
        part = frame.dropna(subset=["v0", "v1"] + ([given] if given else []))
        total, dof = 0.0, 0
        for _, g in (part.groupby(given) if given else [((), part)]):
            stat, _, d, _ = chi2_contingency(pd.crosstab(g.v0, g.v1).to_numpy(),
                                             correction=False, lambda_="log-likelihood")
            total, dof = total + stat, dof + d
        assert abs(pv - chi2.sf(total, dof)) <= 1e-12


def test_sparse_fallback_equals_the_dense_path():
    # A conditioning set with more possible cells than the dense path takes is counted over
    # the strata that occur; same p-value as the reference computation.
    rng = np.random.default_rng(24)
    n = 300
    frame = pd.DataFrame({f"c{j}": rng.integers(0, 10, n) for j in range(6)})
    frame["x"] = rng.integers(0, 2, n)
    frame["y"] = (frame.x + (rng.random(n) < 0.3)) % 2
    test = GSquared(frame, min_rows_per_dof=0)
    x, y = test.variables.index("x"), test.variables.index("y")
    s = (0, 1, 2, 3)                    # 10,000 strata × 4 cells: the sparse path
    assert test.levels[list(s)].prod() * 4 > max(4 * n, 4096)
    g2, dof = _reference_g2(test._codes, test.levels, min(x, y), max(x, y), s)
    p = test.pvalues([(x, y, s)])[0]
    assert (np.isnan(p) and dof == 0) or abs(p - chi2.sf(g2, dof)) <= 1e-12


# -- ALARM ---------------------------------------------------------------------------------------

@pytest.mark.parametrize("seed", [1, 2, 3])
def test_alarm_skeleton_from_its_tables(seed):
    # ALARM (Beinlich, Suermondt, Chavez & Cooper 1989), 37 variables and 46 edges, sampled
    # from its published tables (tests/data/alarm_network.json), n = 10,000, α = 0.01: the
    # skeleton must be found with F1 ≥ 0.97. With the older rule (product degrees of freedom,
    # skipped tests read as independent) the first seed loses 8 edges (F1 0.905).
    from alarm_model import alarm_network, sample_alarm
    from discovery.metrics import skeleton_scores
    dag, _ = alarm_network()
    frame = sample_alarm(10_000, seed)
    result = discover(frame, test="g-squared", alpha=0.01)
    assert skeleton_scores(result.to_networkx(), dag).f1 >= 0.97
    if seed == 1:
        older = discover(frame, test="g-squared", alpha=0.01,
                         test_options={"thin_tests": "independent"})
        assert skeleton_scores(older.to_networkx(), dag).f1 < 0.93
        assert any("older rule" in note for note in older.notes)


# -- a test too thin to run never removes an edge ------------------------------------------------

@st.composite
def _thin_tables(draw):
    n = draw(st.integers(15, 120))
    columns = draw(st.integers(3, 5))
    seed = draw(st.integers(0, 2 ** 31))
    rng = np.random.default_rng(seed)
    levels = rng.integers(2, 5, columns)
    data = np.column_stack([rng.integers(0, k, n) for k in levels])
    for j in range(1, columns):       # some dependence, so that edges survive level 0
        copy = rng.random(n) < draw(st.floats(0.0, 0.9))
        data[copy, j] = data[copy, j - 1] % levels[j]
    for j in range(columns):          # every column keeps at least two levels
        data[:2, j] = [0, 1]
    return pd.DataFrame(data, columns=[f"q{j}" for j in range(columns)])


@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(frame=_thin_tables(), alpha=st.sampled_from([0.01, 0.05, 0.3]),
       rule=st.sampled_from([1.0, 5.0, 10.0]))
def test_no_thin_test_removes_an_edge(frame, alpha, rule):
    # Property (the rule of the issue): a test marked too thin has p-value NaN, and no removed
    # pair was separated by such a test.
    result = discover(frame, test="g-squared", alpha=alpha,
                      test_options={"min_rows_per_dof": rule})
    test = GSquared(frame, min_rows_per_dof=rule)
    for x, y, given, p in result.tests:
        if test.untestable_reason(x, y, given) is not None:
            assert np.isnan(p)
    for removal in result.removed:
        assert removal.by == "test"
        assert test.untestable_reason(removal.a, removal.b, removal.separating_set) is None
        assert removal.pvalue > alpha
