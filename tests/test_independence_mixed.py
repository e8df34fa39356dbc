"""The mixed-data likelihood-ratio test against statsmodels' own likelihood-ratio tests.

References named beside each check.
"""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy.stats import chi2

from discovery import discover
from discovery.exceptions import DataValidationError
from discovery.independence import AutoTest, MixedLR, make_test


def _frame(n=500, seed=0):
    rng = np.random.default_rng(seed)
    age = rng.normal(50, 10, n)
    group = rng.choice(["a", "b", "c"], n)
    shift = np.select([group == "a", group == "b"], [0.0, 0.8], -0.5)
    score = 0.05 * age + shift + rng.normal(size=n)
    treated = (rng.random(n) < 1 / (1 + np.exp(-(score - score.mean())))).astype(int)
    return pd.DataFrame({"age": age, "group": group, "score": score, "treated": treated})


def _z(v):
    return (v - v.mean()) / v.std()


def test_continuous_target_matches_statsmodels_ols_lr():
    # Source: statsmodels RegressionResults.compare_lr_test (LR of nested OLS fits).
    f = _frame()
    dummies = pd.get_dummies(f.group, drop_first=True).astype(float).to_numpy()
    base = sm.add_constant(_z(f.age.to_numpy())[:, None])
    full = np.hstack([base, dummies])
    lr, p, df = sm.OLS(f.score, full).fit().compare_lr_test(sm.OLS(f.score, base).fit())
    test = MixedLR(f)
    ours = test._direction(2, 1, np.ones(len(f), bool),
                           np.hstack([np.ones((len(f), 1)), _z(f.age.to_numpy())[:, None]]))
    assert ours[0] == pytest.approx(lr, rel=1e-8)
    assert ours[1] == pytest.approx(p, rel=1e-6)
    assert df == 2


def test_binary_and_categorical_targets_match_statsmodels_llf():
    # Source: statsmodels Logit / MNLogit maximised log-likelihoods; LR = 2 (llf1 - llf0),
    # χ² with (classes - 1) × added columns degrees of freedom (Wilks 1938).
    f = _frame()
    x = _z(f.score.to_numpy())[:, None]
    ones = np.ones((len(f), 1))
    test = MixedLR(f)
    rows = np.ones(len(f), bool)
    ll1 = sm.Logit(f.treated, np.hstack([ones, x])).fit(disp=0).llf
    ll0 = sm.Logit(f.treated, ones).fit(disp=0).llf
    stat, p = test._direction(3, 2, rows, ones)
    assert stat == pytest.approx(2 * (ll1 - ll0), rel=1e-6)
    assert p == pytest.approx(chi2.sf(2 * (ll1 - ll0), 1), rel=1e-5)
    codes = pd.factorize(f.group, sort=True)[0]
    ll1 = sm.MNLogit(codes, np.hstack([ones, x])).fit(disp=0).llf
    ll0 = sm.MNLogit(codes, ones).fit(disp=0).llf
    stat, p = test._direction(1, 2, rows, ones)
    assert stat == pytest.approx(2 * (ll1 - ll0), rel=1e-6)
    assert p == pytest.approx(chi2.sf(2 * (ll1 - ll0), 2), rel=1e-5)


def test_symmetric_and_the_larger_p_value():
    # Our documented rule (after Tsagris et al. 2018): both regressions, the larger p-value.
    f = _frame(seed=3)
    test = MixedLR(f)
    rows = np.ones(len(f), bool)
    base = np.hstack([np.ones((len(f), 1)), _z(f.age.to_numpy())[:, None]])
    a = test._direction(3, 1, rows, base)
    b = test._direction(1, 3, rows, base)
    r1 = test.test("group", "treated", ["age"])
    r2 = test.test("treated", "group", ["age"])
    assert r1.pvalue == r2.pvalue == pytest.approx(max(a[1], b[1]))


def test_rules_of_the_trade():
    # Common practice: a mediator separates (age → score → treated); independent columns
    # are not rejected; a direct dependence is.
    rng = np.random.default_rng(7)
    n = 1500
    age = rng.normal(size=n)
    score = age + rng.normal(size=n)
    treated = (rng.random(n) < 1 / (1 + np.exp(-2 * score))).astype(int)
    site = rng.choice(["n", "s", "e", "w"], n)
    test = MixedLR(pd.DataFrame(dict(age=age, score=score, treated=treated, site=site)))
    assert test.test("age", "treated").pvalue < 1e-6
    assert test.test("age", "treated", ["score"]).pvalue > 0.01
    assert test.test("site", "score").pvalue > 0.01


def _calibration(reps, n, seed):
    rng = np.random.default_rng(seed)
    p = []
    for _ in range(reps):
        z = rng.normal(size=n)
        x = (rng.random(n) < 1 / (1 + np.exp(-z))).astype(int)
        group = np.where(z + rng.normal(size=n) > 0.5, "hi",
                         np.where(z > -0.5, "mid", "lo"))
        p.append(MixedLR(pd.DataFrame({"x": x, "g": group, "z": z})).test("x", "g", ["z"])
                 .pvalue)
    return np.mean(np.array(p) < 0.05)


def test_calibration_small():
    # Source: Wilks (1938) — LR ~ χ² under the null, so size ≈ α; taking the larger of two
    # p-values can only lower it. Small CI version, wide band.
    assert 0.005 <= _calibration(150, 300, 1) <= 0.09


@pytest.mark.slow
def test_calibration_full():
    # Same source; the max-of-two rule is conservative, so the band's floor is lower.
    assert 0.02 <= _calibration(1000, 500, 2) <= 0.07


def test_bad_input_single_level():
    f = _frame()
    f["site"] = "only"
    with pytest.raises(DataValidationError, match="column 'site' has a single level"):
        MixedLR(f)


def test_auto_routes_by_kind_and_reports():
    rng = np.random.default_rng(9)
    n = 600
    a = rng.normal(size=n)
    b = a + rng.normal(size=n)                       # Gaussian pair -> fisher-z
    c = np.exp(rng.normal(size=n)) + b ** 2          # non-normal -> kci with b
    d = (b + rng.normal(size=n) > 0).astype(int)     # binary
    e = rng.choice(["x", "y", "z"], n)               # categorical
    f = pd.DataFrame(dict(a=a, b=b, c=c, d=d, e=e))
    test = AutoTest(f)
    assert test.choose(0, 1, ())[0] == "fisher-z"
    assert test.choose(1, 2, ())[0] == "kci"
    assert test.choose(3, 4, ())[0] == "g-squared"
    assert test.choose(0, 3, ())[0] == "mixed"
    assert test.choose(0, 1, (3,))[0] == "mixed"
    # each routed test equals the test it was routed to
    assert test.test("a", "b").pvalue == pytest.approx(
        make_test("fisher-z", f[["a", "b", "c"]]).test("a", "b").pvalue)
    assert test.test("d", "e").pvalue == pytest.approx(
        make_test("g-squared", f[["d", "e"]]).test("d", "e").pvalue)
    notes = test.describe_tests([("a", "b", ()), ("b", "c", ()), ("a", "d", ("b",))])
    joined = "\n".join(notes)
    assert "auto: a — b tested by fisher-z (fisher-z: every column continuous" in joined
    assert "auto: b — c tested by kci" in joined and "auto: a — d tested by mixed" in joined
    assert "rejected for c; not rejected for a, b" in joined
    assert "auto: 3 tests: 1 fisher-z, 1 kci, 1 mixed" in joined


def test_search_with_mixed_and_auto():
    # Rule of the trade: a common effect of two independent causes is a collider.
    rng = np.random.default_rng(11)
    n = 2000
    dose = rng.normal(size=n)
    sex = rng.choice(["f", "m"], n)
    effect = dose + 1.2 * (sex == "m") + rng.normal(size=n)
    f = pd.DataFrame({"dose": dose, "sex": sex, "effect": effect})
    for name in ("mixed", "auto"):
        result = discover(f, test=name)
        assert sorted(e.arrow() for e in result.edges) == ["dose → effect", "sex → effect"]
