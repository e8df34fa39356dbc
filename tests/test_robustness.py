"""Which edges survive: the survival sweep, resampling support and the equivalence rule.

The checks compare with computations outside the project: fresh searches at each threshold,
partial correlations from numpy least squares with TOST p-values from scipy's normal
distribution (Schuirmann 1987), G² from scipy.stats.chi2_contingency with the noncentral χ² of
scipy, and Meinshausen & Bühlmann's (2010, Theorem 1) bound written out by hand.
"""

import json

import networkx as nx
import numpy as np
import pandas as pd
import pytest
from scipy import stats

from discovery import (SettingsError, SupportResult, SweepResult, discover, support, sweep)
from discovery.cli import main
from discovery.independence import FisherZ, GSquared
from discovery.robustness import (DEFAULT_ALPHAS, EquivalenceTest,
                                  fisher_z_equivalence_pvalue, g_squared_equivalence_pvalue)
from discovery.simulate import sample_linear_gaussian

# An invented diagram: a chain with a collider (watering → growth ← light → bloom) and a
# weak extra cause, so that some edges survive every threshold and one does not.
DAG = nx.DiGraph([("water", "growth"), ("light", "growth"), ("growth", "bloom"),
                  ("soil", "water"), ("pests", "bloom")])
WEIGHTS = {("water", "growth"): 0.8, ("light", "growth"): 0.7, ("growth", "bloom"): 0.9,
           ("soil", "water"): 0.6, ("pests", "bloom"): 0.09}


@pytest.fixture(scope="module")
def frame():
    return sample_linear_gaussian(DAG, 800, weights=WEIGHTS, rng=7)


def _marks(result):
    return sorted((e.source, e.target, e.kind) for e in result.edges)


# -- the survival sweep ----------------------------------------------------------------------

def test_every_rung_equals_a_fresh_search(frame):
    s = sweep(frame)
    assert isinstance(s, SweepResult)
    assert s.alphas == DEFAULT_ALPHAS and len(s.alphas) == 12
    assert s.alphas[0] == pytest.approx(1e-4) and s.alphas[-1] == pytest.approx(0.2)
    assert np.allclose(np.diff(np.log(s.alphas)), np.log(2000) / 11, rtol=0.01)
    for alpha, rung in zip(s.alphas, s.results):
        fresh = discover(frame, alpha=alpha)
        assert _marks(rung) == _marks(fresh)
        assert rung.settings.alpha == alpha


def test_rungs_share_one_cache(frame):
    s = sweep(frame, alphas=[0.001, 0.01, 0.05, 0.1])
    computed = sum(r.counts["tests_computed"] for r in s.results)
    fresh = sum(discover(frame, alpha=a).counts["tests"] for a in s.alphas)
    reused = sum(r.counts["tests_from_cache"] for r in s.results)
    assert reused > 0 and computed + reused == fresh


def test_survival_ranges_follow_presence(frame):
    s = sweep(frame, alphas=[0.0001, 0.001, 0.01, 0.05, 0.2])
    for e in s.edges:
        covered = [a for a in s.alphas if any(lo <= a <= hi for lo, hi in e.survival)]
        assert covered == [a for a, here in zip(s.alphas, e.present) if here]
        assert all((m is None) == (not here) for m, here in zip(e.marks, e.present))
    # the strong chain survives every rung (common practice: large effects, 800 rows)
    assert s.edge("growth", "bloom").present == (True,) * 5
    assert s.edge("bloom", "growth").survival == ((0.0001, 0.2),)


def test_sweep_document_csv_and_figure(frame, tmp_path):
    s = sweep(frame, alphas=[0.01, 0.1])
    doc = json.loads(s.to_json())
    assert doc["format"] == "edgewise-sweep" and doc["version"] == 1
    assert doc["parameter"] == "alpha" and doc["margins"] is None
    assert doc["alphas"] == [0.01, 0.1] and len(doc["results"]) == 2
    assert {"a", "b", "present", "marks", "survival"} <= set(doc["edges"][0])
    assert doc["results"][0]["format"] == "edgewise-result" and doc["cautions"]
    lines = s.to_csv().splitlines()
    assert lines[0] == "a,b,rungs_present,survival,alpha=0.01,alpha=0.1"
    assert len(lines) == len(s.edges) + 1
    fig = s.figure(current=0.05)
    fig.savefig(tmp_path / "s.png")
    assert (tmp_path / "s.png").stat().st_size > 5000


def test_margin_sweep_equals_fresh_equivalence_searches(frame):
    s = sweep(frame, margins=[0.05, 0.1, 0.2], alpha=0.05)
    assert s.parameter == "margin" and s.margins == (0.05, 0.1, 0.2)
    for margin, rung in zip(s.margins, s.results):
        fresh = discover(frame, alpha=0.05, unrelated="equivalence", margin=margin)
        assert _marks(rung) == _marks(fresh)
    # a wider margin calls more pairs unrelated: edges can only disappear (common practice)
    counts = [len(r.edges) for r in s.results]
    assert counts == sorted(counts, reverse=True)


@pytest.mark.parametrize("alphas, match", [
    ([], "is empty"),
    ([0.05, 0.01], "strictly increasing"),
    ([0.01, 0.01], "strictly increasing"),
    ([0.0, 0.1], r"in \(0, 1\)"),
    ([0.1, 1.0], r"in \(0, 1\)"),
    (["a"], "list of numbers"),
])
def test_bad_ladders_are_refused(frame, alphas, match):
    with pytest.raises(SettingsError, match=match):
        sweep(frame, alphas=alphas)


@pytest.mark.parametrize("margins", [[0.0, 0.1], [0.1, 1.0], [-0.1]])
def test_bad_margin_ladders_are_refused(frame, margins):
    with pytest.raises(SettingsError, match="'margins'"):
        sweep(frame, margins=margins)


# -- the equivalence rule --------------------------------------------------------------------

def _tost_normal(r, n_eff, delta):
    """TOST on Fisher's z scale written with scipy's normal (Schuirmann 1987)."""
    se = 1.0 / np.sqrt(n_eff)
    z = np.arctanh(r)
    lower = stats.norm.sf((z - np.arctanh(-delta)) / se)   # H0: rho <= -delta
    upper = stats.norm.cdf((z - np.arctanh(delta)) / se)   # H0: rho >= +delta
    return max(lower, upper)


def test_equivalence_pvalues_against_scipy_normal(frame):
    test = EquivalenceTest(FisherZ(frame), 0.1)
    x = frame["water"].to_numpy()
    y = frame["bloom"].to_numpy()
    z = np.column_stack([np.ones(len(frame)), frame["growth"].to_numpy()])
    # the partial correlation as the correlation of least-squares residuals
    rx = x - z @ np.linalg.lstsq(z, x, rcond=None)[0]
    ry = y - z @ np.linalg.lstsq(z, y, rcond=None)[0]
    r = np.corrcoef(rx, ry)[0, 1]
    got = test.test("water", "bloom", ["growth"])
    assert got.statistic == pytest.approx(r, abs=1e-10)
    assert got.pvalue == pytest.approx(_tost_normal(r, len(frame) - 1 - 3, 0.1), rel=1e-9)
    for r_, n_, d_ in [(0.0, 100, 0.2), (0.15, 400, 0.1), (-0.3, 50, 0.25), (0.02, 10, 0.5)]:
        assert fisher_z_equivalence_pvalue(r_, n_, d_) == pytest.approx(
            _tost_normal(r_, n_, d_), rel=1e-9)


def _pair_with_correlation(n, r, seed=0):
    """Two columns whose sample correlation is exactly r."""
    rng = np.random.default_rng(seed)
    a = rng.standard_normal(n)
    b = rng.standard_normal(n)
    a = (a - a.mean()) / a.std()
    b = b - a * (a @ b) / (a @ a)
    b = (b - b.mean()) / b.std()
    return pd.DataFrame({"exposure": a, "outcome": r * a + np.sqrt(1 - r * r) * b})


def test_worked_example_significant_but_within_the_margin():
    # docs/robustness.md: n = 200,000 and r = 0.02 is "significant" but below delta = 0.05
    data = _pair_with_correlation(200_000, 0.02)
    assert np.corrcoef(data["exposure"], data["outcome"])[0, 1] == pytest.approx(0.02)
    usual = discover(data, alpha=0.05)
    assert len(usual.edges) == 1
    assert usual.edges[0].max_pvalue == pytest.approx(
        2 * stats.norm.sf(np.arctanh(0.02) * np.sqrt(200_000 - 3)), rel=1e-6)
    assert usual.edges[0].max_pvalue < 1e-15
    equivalence = discover(data, alpha=0.05, unrelated="equivalence", margin=0.05)
    assert equivalence.edges == ()
    (removed,) = equivalence.removed
    assert removed.pvalue == pytest.approx(_tost_normal(0.02, 200_000 - 3, 0.05), rel=1e-6)
    assert removed.pvalue < 1e-30
    assert equivalence.settings.unrelated == "equivalence"
    assert equivalence.to_dict()["settings"]["margin"] == 0.05


def test_too_few_rows_leave_a_pair_undecided():
    data = _pair_with_correlation(40, 0.01, seed=3)
    usual = discover(data)
    assert usual.edges == ()  # p > alpha: the usual rule calls them unrelated
    result = discover(data, unrelated="equivalence", margin=0.05)
    assert len(result.edges) == 1 and result.undecided == (("exposure", "outcome"),)
    assert any("undecided" in n for n in result.notes)
    assert result.to_dict()["undecided"] == [["exposure", "outcome"]]
    from discovery import SearchResult
    assert SearchResult.from_dict(result.to_dict()).undecided == result.undecided


def test_g_squared_equivalence_against_scipy():
    rng = np.random.default_rng(5)
    n = 3000
    a = rng.integers(0, 3, n)
    b = np.where(rng.random(n) < 0.05, rng.integers(0, 2, n), a % 2)
    frame = pd.DataFrame({"a": a, "b": b, "c": rng.integers(0, 2, n)})
    table = pd.crosstab(frame["a"], frame["b"]).to_numpy()
    g2, _, dof, _ = stats.chi2_contingency(table, correction=False,
                                           lambda_="log-likelihood")
    delta = 0.3
    m_delta = -0.5 * np.log(1 - delta ** 2)  # MI of a correlation delta (Gaussian), nats
    expected = stats.ncx2.cdf(g2, dof, 2 * n * m_delta)
    got = EquivalenceTest(GSquared(frame), delta).test("a", "b")
    assert got.statistic == pytest.approx(g2, rel=1e-9)
    assert got.pvalue == pytest.approx(expected, rel=1e-9)
    assert g_squared_equivalence_pvalue(g2, dof, n, delta) == pytest.approx(expected)
    result = discover(frame, test="g-squared", unrelated="equivalence", margin=0.1)
    assert {frozenset(e.pair) for e in result.edges} == {frozenset(("a", "b"))}


def test_equivalence_refuses_tests_without_an_effect_size(frame):
    with pytest.raises(SettingsError, match="no effect size to bound"):
        discover(frame, test="kci", unrelated="equivalence", margin=0.1)


@pytest.mark.parametrize("margin, match", [(None, "when unrelated='equivalence'"),
                                           (0.0, r"in \(0, 1\)"), (1.0, r"in \(0, 1\)"),
                                           (-0.2, r"in \(0, 1\)")])
def test_bad_margins_are_refused(frame, margin, match):
    with pytest.raises(SettingsError, match=match):
        discover(frame, unrelated="equivalence", margin=margin)


def test_unknown_unrelated_rule_is_refused(frame):
    with pytest.raises(SettingsError, match="'unrelated' parameter"):
        discover(frame, unrelated="effect")


# -- resampling support ----------------------------------------------------------------------

def test_true_edges_high_support_absent_pairs_low(frame):
    result = support(frame, resamples=20, seed=11)
    assert isinstance(result, SupportResult) and result.resamples == 20
    # common practice: on clean linear data, strong true edges appear in (nearly) every
    # resample and non-adjacent pairs in few
    for a, b in [("water", "growth"), ("light", "growth"), ("growth", "bloom"),
                 ("soil", "water")]:
        assert result.pair(a, b).adjacent >= 0.9
    truth = {frozenset(e) for e in DAG.edges}
    names = list(frame.columns)
    absent = [frozenset((a, b)) for i, a in enumerate(names) for b in names[i + 1:]
              if frozenset((a, b)) not in truth]
    share = {frozenset((p.a, p.b)): p.adjacent for p in result.pairs}
    # repeated rows make the bootstrap's tests overconfident, so it finds some extra edges
    # (from memory; common practice, no source): a looser bound on single absent pairs
    assert max(share.get(q, 0.0) for q in absent) <= 0.4
    assert np.mean([share.get(q, 0.0) for q in absent]) <= 0.15
    for p in result.pairs:
        assert p.a_to_b + p.b_to_a + p.undirected + p.contested == pytest.approx(p.adjacent)
    # the collider water → growth ← light is oriented in most resamples
    assert result.pair("water", "growth").a_to_b >= 0.8
    kept = {frozenset((e.source, e.target)) for e in result.consensus}
    assert {frozenset(("growth", "bloom")), frozenset(("water", "growth"))} <= kept
    halves = support(frame, resamples=20, seed=11, method="subsample")
    assert max(p.adjacent for p in halves.pairs if frozenset((p.a, p.b)) in absent) <= 0.2


def test_same_seed_same_tables_and_processes_equal_in_process(frame):
    one = support(frame, resamples=8, seed=4, method="subsample")
    again = support(frame, resamples=8, seed=4, method="subsample")
    spread = support(frame, resamples=8, seed=4, method="subsample", jobs=2)
    assert one.to_dict() == again.to_dict() == spread.to_dict()
    other = support(frame, resamples=8, seed=5, method="subsample")
    assert other.to_dict()["pairs"] != one.to_dict()["pairs"]


def test_subsampling_bound_and_document(frame):
    result = support(frame, resamples=10, seed=2, method="subsample", cutoff=0.8)
    p = len(frame.columns) * (len(frame.columns) - 1) / 2
    # Meinshausen & Bühlmann (2010), Theorem 1: E[V] <= q^2 / ((2 pi - 1) p)
    assert result.false_edges_bound == pytest.approx(result.mean_edges ** 2 / (0.6 * p))
    assert result.at_cutoff(0.5).false_edges_bound is None
    assert support(frame, resamples=3, seed=2).false_edges_bound is None  # bootstrap
    doc = json.loads(result.to_json())
    assert doc["format"] == "edgewise-support" and doc["version"] == 1
    assert doc["method"] == "subsample" and doc["resamples"] == 10 and doc["seed"] == 2
    assert doc["cutoff"] == 0.8 and doc["cautions"]
    assert {"a", "b", "adjacent", "a_to_b", "b_to_a", "undirected", "contested"} <= \
        set(doc["pairs"][0])
    assert all(e["kind"] in ("directed", "undirected", "contested")
               for e in doc["consensus"]["edges"])


def test_csv_cells_never_start_a_formula():
    rng = np.random.default_rng(0)
    x = rng.standard_normal(300)
    data = pd.DataFrame({"=cmd": x, "+b": x + rng.standard_normal(300),
                         "-c": rng.standard_normal(300), "@d": x * 0.5 + rng.standard_normal(300)})
    for text in (support(data, resamples=3, seed=1).to_csv(),
                 sweep(data, alphas=[0.01, 0.1]).to_csv()):
        for line in text.splitlines():
            for cell in line.split(","):
                assert not cell.lstrip('"')[:1] in ("=", "+", "-", "@"), line


@pytest.mark.parametrize("kwargs, match", [
    ({"resamples": 0}, "'resamples' parameter of support must be an int of at least 1"),
    ({"resamples": 2.5}, "'resamples'"),
    ({"method": "jackknife"}, "'method' parameter"),
    ({"cutoff": 0.0}, "'cutoff' parameter"),
    ({"cutoff": 1.5}, "'cutoff' parameter"),
    ({"alpha": 2.0}, "'alpha' parameter"),
])
def test_bad_support_settings_are_refused(frame, kwargs, match):
    with pytest.raises(SettingsError, match=match):
        support(frame, **{"resamples": 2, **kwargs})


def test_cluster_needs_an_executor_that_has_one(frame):
    import inspect

    from discovery import executor
    if "cluster" in inspect.signature(executor.make_executor).parameters:
        pytest.skip("the executor has a cluster back-end: its own tests cover addresses")
    with pytest.raises(SettingsError, match="no cluster back-end"):
        support(frame, resamples=2, cluster="tcp://127.0.0.1:1")


def test_support_stops_when_cancelled(frame):
    from discovery import SearchCancelled
    with pytest.raises(SearchCancelled):
        support(frame, resamples=10, seed=1, cancel=lambda: True)


# -- the commands ----------------------------------------------------------------------------

def test_sweep_and_support_commands_write_their_files(frame, tmp_path, capsys):
    data = tmp_path / "plants.csv"
    frame.to_csv(data, index=False)
    out = tmp_path / "out"
    assert main(["sweep", str(data), "--alphas", "0.001,0.05", "--out", str(out / "s.json"),
                 "--csv", str(out / "s.csv"), "--figure", str(out / "s.png")]) == 0
    assert json.loads((out / "s.json").read_text())["format"] == "edgewise-sweep"
    assert (out / "s.png").read_bytes()[:4] == b"\x89PNG"
    assert main(["support", str(data), "--resamples", "4", "--seed", "1", "--out",
                 str(out / "p.json"), "--csv", str(out / "p.csv"), "--consensus",
                 str(out / "c.json")]) == 0
    assert json.loads((out / "p.json").read_text())["seed"] == 1
    printed = capsys.readouterr().out
    assert "Survival sweep" in printed and "Resampling support" in printed
    assert "Caution" in printed


@pytest.mark.parametrize("argv, message", [
    (["sweep", "{data}", "--alphas", "0.1,0.01"], "strictly increasing"),
    (["sweep", "{data}", "--alphas", ","], "is empty"),
    (["sweep", "{data}", "--alphas", "0.01,x"], "numbers separated by commas"),
    (["sweep", "{data}", "--margins", "0.05,1"], r"in \(0, 1\)"),
    (["support", "{data}", "--resamples", "0"], "at least 1"),
    (["discover", "{data}", "--unrelated", "equivalence", "--margin", "0"], r"in \(0, 1\)"),
])
def test_bad_command_input_is_one_line_and_no_file(frame, tmp_path, capsys, argv, message):
    data = tmp_path / "plants.csv"
    frame.to_csv(data, index=False)
    target = tmp_path / "never.json"
    code = main([a.replace("{data}", str(data)) for a in argv] + ["--out", str(target)])
    err = capsys.readouterr().err
    assert code == 2 and len(err.strip().splitlines()) == 1
    import re
    assert re.search(message, err), err
    assert not target.exists() and list(tmp_path.iterdir()) == [data]


def test_equivalence_wrapper_refuses_other_tests(frame):
    from discovery.independence import DSeparationOracle
    with pytest.raises(SettingsError, match="no effect size to bound"):
        EquivalenceTest(DSeparationOracle(DAG), 0.1)


def test_support_refuses_data_it_cannot_resample():
    from discovery import DataValidationError
    tiny = pd.DataFrame({"a": [0.1, 0.5, 0.2], "b": [1.0, 0.3, 0.7]})
    with pytest.raises(DataValidationError, match="at least 4 rows"):
        support(tiny, resamples=2, method="subsample")


def test_documents_round_trip_and_damaged_ones_are_refused(frame):
    from discovery import ResultFormatError
    s = sweep(frame, alphas=[0.01, 0.1])
    assert SweepResult.from_dict(json.loads(s.to_json())).to_dict() == s.to_dict()
    r = support(frame, resamples=3, seed=1)
    assert SupportResult.from_dict(json.loads(r.to_json())).to_dict() == r.to_dict()
    with pytest.raises(ResultFormatError, match="'format' is not 'edgewise-sweep'"):
        SweepResult.from_dict({"format": "edgewise-support"})
    broken = s.to_dict()
    broken["edges"][0]["present"] = [True]
    with pytest.raises(ResultFormatError, match="do not match its ladder"):
        SweepResult.from_dict(broken)
    with pytest.raises(ResultFormatError, match="version"):
        SupportResult.from_dict({**r.to_dict(), "version": 9})
    with pytest.raises(ResultFormatError, match="damaged"):
        SupportResult.from_dict({**r.to_dict(), "pairs": [{"a": "x"}]})


def test_the_sweeps_shared_cache_is_exact_for_wide_rows():
    # 300 variables need 9 bits each: a row with 6 conditioning variables does not pack
    # into 64 bits, and is kept as the row itself (common practice, no source: a cache must
    # answer exactly what was stored)
    from discovery.independence import PValueCache

    class Echo:  # a stand-in test whose "p-value" names its row
        variables = tuple(f"v{i}" for i in range(300))

        def settings_key(self):
            return ("echo",)

        def pvalues_array(self, idx, executor=None):
            return (idx * np.arange(1, idx.shape[1] + 1)).sum(axis=1) / 1e6

    rng = np.random.default_rng(0)
    cache, test = PValueCache(), Echo()
    rows = np.sort(rng.choice(300, size=(500, 8)), axis=1)
    first = cache.pvalues_array(test, rows)
    again = cache.pvalues_array(test, rows[::-1])
    assert np.array_equal(first, test.pvalues_array(rows))
    assert np.array_equal(again, test.pvalues_array(rows[::-1]))
    assert cache.hits == 500 and cache.misses == 500


def test_resampling_holds_one_blas_thread_and_restores_it(frame, monkeypatch):
    # Each resample's search would otherwise set BLAS threads and set them back, which
    # restarts OpenBLAS's thread pool (docs/parallel.md, "BLAS"); the run holds one thread
    # throughout and leaves the caller's setting as it was. Thread counts read by threadpoolctl.
    threadpoolctl = pytest.importorskip("threadpoolctl")
    from discovery.robustness import _support

    def counts():
        return sorted({lib["num_threads"] for lib in threadpoolctl.threadpool_info()
                       if lib["user_api"] == "blas"})

    seen = []
    real = _support._search_each

    def watched(*args, **kwargs):
        seen.append(counts())
        return real(*args, **kwargs)

    monkeypatch.setattr(_support, "_search_each", watched)
    before = counts()
    support(frame, resamples=4, seed=3)
    assert seen and all(c == [1] for c in seen)
    assert counts() == before
