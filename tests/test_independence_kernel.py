"""Kernel tests (HSIC, KCI) against a reference library, calibration, power, low-rank agreement.

References named beside each check.
"""

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from discovery import discover
from discovery.exceptions import DataValidationError, SettingsError
from discovery.executor import InProcessExecutor, ProcessExecutor
from discovery.independence import FisherZ, KernelCI, make_test
from discovery.independence._kernel import _centre, gaussian_kernel, hsic_gamma, median_width

sys.path.insert(0, str(Path(__file__).parent))
from nonlinear_model import dag as nonlinear_dag, sample as nonlinear_sample  # noqa: E402


def _std(v):
    v = np.asarray(v, dtype=float).reshape(len(v), -1)
    return (v - v.mean(axis=0)) / v.std(axis=0)


def _hsic(a, b, width=None):
    k = gaussian_kernel(a, width or median_width(a))
    l = gaussian_kernel(b, width or median_width(b))
    return (_centre(k) * _centre(l)).sum() / len(a) ** 2


@pytest.mark.parametrize("seed,shape", [(0, "square"), (1, "sine"), (2, "independent")])
def test_hsic_statistic_matches_hyppo(seed, shape):
    # Source: hyppo.independence.Hsic (a general-purpose independence-testing library) with
    # bias=True computes sqrt(tr(Kc Lc) / sqrt(tr(Kc Kc) tr(Lc Lc))) from Gaussian kernels
    # whose width is the median pairwise distance of x (hyppo uses x's width for both
    # kernels). With that one width, our HSIC_b must give the same number.
    hyppo = pytest.importorskip("hyppo.independence")
    rng = np.random.default_rng(seed)
    x = rng.normal(size=150)
    y = {"square": x ** 2, "sine": np.sin(2 * x),
         "independent": rng.normal(size=150)}[shape] + 0.3 * rng.normal(size=150)
    a, b = _std(x), _std(y)
    width = median_width(a)
    ours = np.sqrt(_hsic(a, b, width) / np.sqrt(_hsic(a, a, width) * _hsic(b, b, width)))
    theirs = hyppo.Hsic(bias=True).statistic(a, b)
    assert ours == pytest.approx(theirs, rel=1e-9, abs=1e-12)


def test_median_heuristic_kernel_matches_hyppo():
    # Source: hyppo.tools.compute_kern(metric="gaussian"): exp(-d² / (2 med²)) with med the
    # median of the off-diagonal Euclidean distances — our gaussian_kernel(median_width).
    tools = pytest.importorskip("hyppo.tools")
    rng = np.random.default_rng(3)
    for a in (_std(rng.normal(size=120)), _std(rng.normal(size=(121, 3)))):
        k, _ = tools.compute_kern(a, a)
        np.testing.assert_allclose(gaussian_kernel(a, median_width(a)), k, rtol=1e-10,
                                   atol=1e-12)


def test_hsic_gamma_p_value_close_to_permutation_p_value():
    # Source: Gretton et al. (2008) §4 — the gamma approximation tracks the permutation null
    # (a permutation test is exact under independence). Same statistic, two nulls.
    rng = np.random.default_rng(4)
    for k, scale in enumerate((0.9, 2.0, 5.0)):
        x = rng.normal(size=200)
        frame = pd.DataFrame({"x": x, "y": np.cos(x) + scale * rng.normal(size=200)})
        gamma = KernelCI(frame).test("x", "y").pvalue
        perm = KernelCI(frame, null="simulated", null_samples=400, seed=k).test("x", "y").pvalue
        assert abs(gamma - perm) < 0.06, (scale, gamma, perm)


def test_hsic_statistic_is_n_times_biased_hsic():
    # Source: Gretton et al. (2008), eq. (4): HSIC_b = tr(K H L H) / n², test statistic n·HSIC_b.
    rng = np.random.default_rng(5)
    x = rng.normal(size=80)
    y = np.abs(x) + rng.normal(size=80)
    result = KernelCI(pd.DataFrame({"x": x, "y": y})).test("x", "y")
    assert result.statistic == pytest.approx(80 * _hsic(_std(x), _std(y)), rel=1e-10)


def test_power_on_a_parabola_where_correlation_fails():
    # Common practice: correlation misses non-monotone dependence; y = x² + noise, n = 300.
    rng = np.random.default_rng(6)
    x = rng.normal(size=300)
    frame = pd.DataFrame({"x": x, "y": x ** 2 + 0.5 * rng.normal(size=300)})
    assert KernelCI(frame).test("x", "y").pvalue < 0.01
    assert KernelCI(frame, lowrank_above=0).test("x", "y").pvalue < 0.01
    assert FisherZ(frame).test("x", "y").pvalue > 0.05


def _chain(n, rng):
    """x → z → y with non-monotone links: x ⟂ y | z holds, x and y are dependent."""
    x = rng.uniform(-2, 2, n)
    z = np.sin(1.5 * x) + 0.4 * rng.normal(size=n)
    y = z ** 2 + 0.4 * rng.normal(size=n)
    w = rng.uniform(-2, 2, n)
    return pd.DataFrame({"x": x, "y": y, "z": z, "w": w})


def _rejection_rates(reps, n, seed, **options):
    rng = np.random.default_rng(seed)
    p = np.empty((reps, 3))
    for r in range(reps):
        test = KernelCI(_chain(n, rng), seed=r, **options)
        # (x ⟂ w), (x ⟂ y | z), (w ⟂ y | z): all true
        p[r] = test.pvalues([(0, 3, ()), (0, 1, (2,)), (1, 3, (2,))])
    return (p < 0.05).mean(axis=0)


def test_calibration_small():
    # Source: a valid level-α test rejects a true null with probability ≈ α. Small CI version
    # (wide band; binomial sd ≈ 0.018 at 150 reps).
    rates = _rejection_rates(150, 150, 1)
    assert np.all((rates >= 0.0) & (rates <= 0.11)), rates
    assert rates.mean() >= 0.01, rates


@pytest.mark.slow
def test_calibration_full_exact():
    # Same source; 1000 replications at n = 300, band [0.03, 0.07] for each null.
    rates = _rejection_rates(1000, 300, 2)
    assert np.all((rates >= 0.03) & (rates <= 0.07)), rates


@pytest.mark.slow
def test_calibration_full_low_rank():
    # Same source; low-rank version at n = 2000, 600 replications (sd ≈ 0.009).
    rates = _rejection_rates(600, 2000, 3)
    assert np.all((rates >= 0.03) & (rates <= 0.07)), rates


@pytest.mark.slow
@pytest.mark.parametrize("n", [1000, 3000, 10000])
def test_calibration_low_rank_at_large_n(n):
    # Same source; the strongly nonlinear chain at n = 1,000, 3,000 and 10,000 (low-rank
    # version, 400 replications, binomial sd ≈ 0.011). Measured (seeds 100 + n): 0.045–0.065
    # for every null (docs/independence-tests.md, "Calibration"); the bar is the issue's
    # 0.08, with the floor at 0.02.
    rates = _rejection_rates(400, n, 100 + n)
    assert np.all((rates >= 0.02) & (rates <= 0.08)), rates


def _fisher_rates(reps, n, seed):
    rng = np.random.default_rng(seed)
    p = np.empty((reps, 2))
    for r in range(reps):
        x = rng.normal(size=n)
        z = 0.8 * x + rng.normal(size=n)
        y = -0.6 * z + rng.normal(size=n)
        test = FisherZ(np.column_stack([x, y, z]))
        p[r] = test.pvalues([(0, 1, (2,)), (0, 2, ())])
    return (p[:, 0] < 0.05).mean(), (p[:, 1] < 0.05).mean()


def test_fisher_z_calibration_small():
    # Source: Fisher (1921) — z is N(0, 1) for Gaussian data with zero partial correlation.
    size, power = _fisher_rates(400, 100, 7)
    assert 0.02 <= size <= 0.085 and power == 1.0


@pytest.mark.slow
def test_fisher_z_calibration_full():
    size, _ = _fisher_rates(5000, 200, 8)
    assert 0.03 <= size <= 0.07


def _agreement_cases(n, seed):
    rng = np.random.default_rng(seed)
    cases = []
    for k in range(12):
        f = _chain(n, rng)
        f["v"] = np.cos(2 * f["w"]) + 0.5 * rng.normal(size=n)    # w → v, non-monotone
        cases.append((f, [(0, 1, ()), (0, 2, ()), (3, 4, ()), (0, 3, ()),   # dep, dep, dep, ind
                          (0, 1, (2,)), (1, 3, (2,)), (0, 4, (3,)),        # ind | z, ind, ind
                          (0, 2, (3,)), (3, 4, (0,))]))                   # dep | w, dep | x
    return cases


def test_low_rank_agrees_with_exact():
    # Requirement of the trade-off (issue 3): the low-rank test must reach the exact test's
    # decision at α = 0.05 on at least 95% of a set of dependent and independent cases.
    same = total = 0
    for frame, triples in _agreement_cases(400, 9):
        exact = KernelCI(frame, lowrank_above=10 ** 9).pvalues(triples) < 0.05
        low = KernelCI(frame, lowrank_above=0).pvalues(triples) < 0.05
        same += int((exact == low).sum())
        total += len(triples)
    assert same / total >= 0.95, same / total


def test_deterministic_for_a_seed_and_over_processes():
    # Our promise: p-values depend on the seed only, not on how a batch is split.
    frame = _chain(700, np.random.default_rng(10))
    triples = [(0, 1, (2,)), (0, 3, ()), (1, 3, (2,)), (0, 2, (3,)), (2, 3, (0, 1))]
    a = KernelCI(frame, seed=3).pvalues(triples)
    b = KernelCI(frame, seed=3).pvalues(triples[::-1])[::-1]
    with ProcessExecutor(2) as ex:
        c = KernelCI(frame, seed=3).pvalues(triples, executor=ex)
    d = KernelCI(frame, seed=3).pvalues(triples, executor=InProcessExecutor())
    np.testing.assert_array_equal(a, b)
    np.testing.assert_allclose(a, c, rtol=1e-12)
    np.testing.assert_array_equal(a, d)
    assert not np.array_equal(a, KernelCI(frame, seed=4).pvalues(triples))


def test_description_states_the_approximation():
    frame = _chain(600, np.random.default_rng(11))
    assert "low-rank" in KernelCI(frame).description
    assert "seed 0" in KernelCI(frame).description
    assert "exact" in KernelCI(frame, lowrank_above=1000).description
    result = discover(frame, test="kci", test_options={"seed": 5})
    assert result.seed == 5


def test_bad_input_is_one_clear_error():
    rng = np.random.default_rng(12)
    frame = pd.DataFrame({"a": rng.normal(size=30), "b": rng.choice(["u", "v"], 30)})
    with pytest.raises(DataValidationError, match=r"column 'b' is not numeric .* 'mixed'"):
        KernelCI(frame)
    frame = pd.DataFrame({"a": rng.normal(size=30), "b": [1.0] * 30})
    with pytest.raises(DataValidationError, match=r"column 'b' has a single level"):
        KernelCI(frame)
    ok = pd.DataFrame({"a": rng.normal(size=30), "b": rng.normal(size=30)})
    with pytest.raises(SettingsError, match=r"'null' option .* 'gamma', 'simulated'"):
        KernelCI(ok, null="exactly")
    with pytest.raises(SettingsError, match=r"does not take the option\(s\) \['width'\]"):
        make_test("kci", ok, width=2.0)


def test_nonlinear_search_beats_correlation():
    # Invented nonlinear model (tests/nonlinear_model.py: 10 variables, non-monotone links),
    # n = 1000, scored with discovery.metrics.skeleton_scores against the true skeleton.
    # Numbers recorded in docs/independence-tests.md.
    from discovery.metrics import skeleton_scores
    frame = nonlinear_sample(1000, seed=0)
    kernel = skeleton_scores(discover(frame, test="kci").to_networkx(), nonlinear_dag())
    linear = skeleton_scores(discover(frame, test="fisher-z").to_networkx(), nonlinear_dag())
    assert kernel.f1 >= 0.85
    assert linear.f1 <= kernel.f1 - 0.15


def test_test_wise_missing_uses_the_complete_rows_of_each_test():
    # Test-wise deletion (Tu, Zhang, Kjellström & Zhang 2019): a test with missing cells
    # equals the same test on the rows complete in its own columns.
    frame = _chain(300, np.random.default_rng(13))
    frame.loc[:39, "w"] = np.nan
    frame.loc[250:, "y"] = np.nan
    test = KernelCI(frame, missing="test-wise")
    complete = frame[["x", "y", "z"]].dropna()
    assert test.test("x", "y", ["z"]).pvalue == pytest.approx(
        KernelCI(complete).test("x", "y", ["z"]).pvalue, rel=1e-9)
    assert test.test("x", "w").n == 300


def test_search_refuses_text_for_the_kernel_test_in_one_line():
    frame = _chain(100, np.random.default_rng(14))
    frame["site"] = np.where(frame["w"] > 0, "north", "south")
    with pytest.raises(DataValidationError) as info:
        discover(frame, test="kci")
    message = str(info.value)
    assert "column 'site' is not numeric" in message and "\n" not in message
