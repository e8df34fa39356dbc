"""Memory bounds of large searches: the evidence kept within a budget (the rest in a temporary
file), Fisher's z eliminating wide sets in pieces, the intake without copies of the table.

Each mechanism must change where the bytes live, never what the search reports: results with
and without it are compared whole (skeleton, separating sets, evidence rows, JSON), and the
evidence read back from the file is checked against p-values computed outside the project
(statsmodels residuals and scipy's normal distribution, Fisher 1921).
"""

import codecs
import io
import json
import pickle

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from discovery import DegenerateDataWarning, FisherZ, discover
from discovery import _evidence
from discovery._evidence import EvidenceLog
from discovery.data import prepare_frame
from discovery.independence import _fisher_z
from discovery.simulate import random_dag, sample_linear_gaussian
from test_fisher_z import residual_correlation


@pytest.fixture(scope="module")
def frame():
    # expected degree 4 on 14 variables: the search runs to depth 3 or more
    rng = np.random.default_rng(5)
    return sample_linear_gaussian(random_dag(14, expected_degree=4, rng=rng), 3000, rng=rng)


def _document(result) -> dict:
    doc = result.to_dict()
    doc.pop("timings")
    doc["counts"]["levels"] = [{k: v for k, v in lv.items() if k != "seconds"}
                               for lv in doc["counts"]["levels"]]
    return doc


def _blocks(n_blocks=7, seed=0):
    rng = np.random.default_rng(seed)
    out = []
    for k in range(n_blocks):
        rows = int(rng.integers(0, 40))
        idx = rng.integers(0, 500, size=(rows, 2 + k % 4)).astype(np.uint16)
        p = rng.random(rows)
        if rows:
            p[0] = np.nan  # NaN p-values (untestable) must come back as NaN
        out.append((idx, p))
    return out


# -- the evidence log ------------------------------------------------------------------------

def test_evidence_beyond_the_budget_goes_to_a_file_and_reads_back_the_same():
    blocks = _blocks()
    budget = 300
    log = EvidenceLog(blocks, budget=budget)
    assert log.spilled and 0 < log.nbytes_in_memory <= budget
    assert log.tests == sum(len(p) for _, p in blocks)
    assert len(log) == len(blocks)
    log.freeze()  # as a result's evidence: nothing read back can be changed
    back = list(log)
    for (idx, p), (idx2, p2) in zip(blocks, back):
        assert idx2.dtype == idx.dtype and idx2.shape == idx.shape
        assert np.array_equal(idx, idx2)
        assert np.array_equal(p, p2, equal_nan=True)
        assert not idx2.flags.writeable and not p2.flags.writeable
    assert len(back) == len(blocks)


def test_evidence_without_a_budget_stays_in_memory():
    log = EvidenceLog(_blocks(), budget=None)
    assert not log.spilled and log.nbytes_on_disk == 0


def test_spilled_evidence_transforms_pickles_and_closes():
    blocks = _blocks(seed=1)
    log = EvidenceLog(blocks, budget=0)  # everything in the file
    assert log.nbytes_in_memory == 0 and log.spilled
    log.transform_pvalues(np.negative)
    for (_, p), (_, p2) in zip(blocks, log):
        assert np.array_equal(-p, p2, equal_nan=True)
    copy = pickle.loads(pickle.dumps(log))
    for (i1, p1), (i2, p2) in zip(log, copy):
        assert np.array_equal(i1, i2) and np.array_equal(p1, p2, equal_nan=True)
    log.close()
    assert log.tests == 0 and list(log) == []


def test_a_full_disk_is_one_clear_line(monkeypatch):
    from discovery import ResourceLimitError

    def no_space(handle, array, offset):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(_evidence, "_write_at", no_space)
    log = EvidenceLog(budget=0)
    with pytest.raises(ResourceLimitError, match="free disk space there or point TMPDIR"):
        log.append(_blocks()[1])


def test_search_results_are_identical_with_the_evidence_spilled(frame, monkeypatch):
    usual = discover(frame)
    assert not usual.tests._blocks.spilled
    monkeypatch.setattr(_evidence, "EVIDENCE_MEMORY_CAP", 2048)  # a tiny budget
    spilled = discover(frame)
    log = spilled.tests._blocks
    assert log.spilled and log.nbytes_in_memory <= 2048  # the budget is honoured
    assert spilled.counts["depth_reached"] >= 3
    assert spilled.edges == usual.edges
    assert tuple(spilled.removed) == tuple(usual.removed)  # separating sets and p-values
    assert list(spilled.tests) == list(usual.tests)  # every evidence row, in order
    a, b = next((e.source, e.target) for e in usual.edges)
    assert spilled.evidence(a, b) == usual.evidence(a, b)  # what `edgewise explain` reads
    assert json.dumps(_document(spilled)) == json.dumps(_document(usual))
    again = pickle.loads(pickle.dumps(spilled.tests))  # evidence sent to another process
    assert list(again) == list(usual.tests)


@pytest.mark.parametrize("options", [
    {"unrelated": "equivalence", "margin": 0.05},  # p-values' signs flipped and restored
    {"hidden_causes": True, "pds_budget": None},  # the possible-d-sep phase adds evidence
    {"collider_rule": "conservative"},  # extra tests through the p-value store
])
def test_other_search_modes_are_identical_with_the_evidence_spilled(frame, monkeypatch, options):
    usual = discover(frame, **options)
    monkeypatch.setattr(_evidence, "EVIDENCE_MEMORY_CAP", 0)
    spilled = discover(frame, **options)
    assert spilled.tests._blocks.spilled
    assert json.dumps(_document(spilled)) == json.dumps(_document(usual))


def test_spilled_evidence_matches_statsmodels_and_scipy(frame, monkeypatch):
    # Reference: partial correlation from statsmodels OLS residuals, z = atanh(r) sqrt(n-|S|-3),
    # the two-sided p-value from scipy.stats.norm (Fisher 1921). Rows from the file.
    monkeypatch.setattr(_evidence, "EVIDENCE_MEMORY_CAP", 0)
    result = discover(frame)
    assert result.tests._blocks.nbytes_in_memory == 0
    rows = list(result.tests)
    rng = np.random.default_rng(0)
    wide = [r for r in rows if len(r[2]) >= 2]
    for x, y, given, p in [rows[i] for i in rng.choice(len(rows), 6, replace=False)] + wide[:4]:
        r = residual_correlation(frame, x, y, given)  # statsmodels OLS residuals
        z = np.arctanh(r) * np.sqrt(len(frame) - len(given) - 3)
        assert p == pytest.approx(2 * stats.norm.sf(abs(z)), rel=1e-6, abs=1e-300)


def test_the_depth_guard_counts_the_disk(frame, monkeypatch):
    # with the memory budget spent but disk space to spare, the search is not cut short
    from discovery.search import _skeleton
    monkeypatch.setattr(_skeleton, "available_memory", lambda: 1)
    monkeypatch.setattr(_skeleton, "free_disk_space", lambda: 1 << 40)
    result = discover(frame)
    assert result.counts["depth_reached"] == discover(frame).counts["depth_reached"] >= 3
    assert not any("depth limited" in n for n in result.notes)
    assert result.tests._blocks.spilled


# -- Fisher's z in pieces --------------------------------------------------------------------

def test_fisher_z_in_pieces_gives_the_same_numbers(frame, monkeypatch):
    test = FisherZ(frame)
    rng = np.random.default_rng(3)
    n = len(test.variables)
    for k in (2, 3, 5):
        picks = [rng.choice(n, k + 2, replace=False) for _ in range(3000)]
        rows = np.array([np.r_[np.sort(p[:2]), np.sort(p[2:])] for p in picks])
        whole = test._batch_array(rows)[1]
        monkeypatch.setattr(_fisher_z, "_ELIMINATION_BYTES", 1)  # pieces of 1,024 rows
        pieces = test._batch_array(rows)[1]
        monkeypatch.undo()
        assert np.array_equal(whole, pieces, equal_nan=True)
        # and against numpy's inverse of the correlation submatrix (r = -P01/sqrt(P00 P11))
        c = test.correlation
        for row, p in zip(rows[:5], pieces[:5]):
            prec = np.linalg.inv(c[np.ix_(row, row)])
            r = -prec[0, 1] / np.sqrt(prec[0, 0] * prec[1, 1])
            z = np.arctanh(r) * np.sqrt(test.n - k - 3)
            assert p == pytest.approx(2 * stats.norm.sf(abs(z)), rel=1e-8, abs=1e-300)


# -- the intake ------------------------------------------------------------------------------

def test_intake_profile_in_pieces_reads_the_same_kinds(monkeypatch):
    rng = np.random.default_rng(2)
    table = pd.DataFrame({
        "cont": rng.normal(size=200), "whole": rng.integers(0, 5, 200).astype(float),
        "two": rng.integers(0, 2, 200).astype(float), "const": np.full(200, 3.0),
        "gappy": np.where(rng.random(200) < 0.1, np.nan, rng.normal(size=200)),
        "inf": np.r_[np.inf, rng.normal(size=199)]})
    with pytest.warns(DegenerateDataWarning, match="'const' is constant"):
        whole = prepare_frame(table, missing="test-wise")
    from discovery import data
    monkeypatch.setattr(data, "_PROFILE_BYTES", 1)  # one column a piece
    with pytest.warns(DegenerateDataWarning, match="'const' is constant"):
        pieces = prepare_frame(table, missing="test-wise")
    assert dict(pieces.kinds) == dict(whole.kinds)
    assert dict(pieces.excluded) == dict(whole.excluded)
    assert pieces.notes == whole.notes


def test_intake_leaves_the_callers_frame_alone_without_copying_it():
    rng = np.random.default_rng(1)
    table = pd.DataFrame({"a": rng.normal(size=50), "b": rng.normal(size=50),
                          "flag": rng.choice(["yes", "no"], 50)})
    before = table.copy(deep=True)
    dataset = prepare_frame(table)
    pd.testing.assert_frame_equal(table, before)  # "yes"/"no" was read as 1/0 on a copy
    assert set(dataset.frame["flag"].unique()) <= {0, 1}
    numeric = pd.DataFrame(rng.normal(size=(100, 4)), columns=list("wxyz"))
    kept = prepare_frame(numeric).frame
    if int(pd.__version__.split(".")[0]) >= 3:  # pandas copies on write: no bytes copied
        assert np.shares_memory(kept.to_numpy(), numeric.to_numpy())
    kept.iloc[0, 0] = 99.0  # a change to the search's table never reaches the caller's
    assert numeric.iloc[0, 0] != 99.0


# -- the p-value store's budget ----------------------------------------------------------------

def test_a_sweep_with_a_small_store_gives_the_same_results(frame):
    # a store that fills up keeps fewer p-values for later rungs to reuse, and changes nothing
    # the sweep reports
    from discovery import PValueCache
    from discovery.robustness import sweep
    alphas = [0.001, 0.01, 0.05]
    usual = sweep(frame, alphas=alphas, cache=PValueCache(max_bytes=None))
    small_cache = PValueCache(max_bytes=4000)
    small = sweep(frame, alphas=alphas, cache=small_cache)
    assert small_cache.nbytes <= 4000 and small_cache.not_kept > 0
    assert small.edges == usual.edges
    for a, b in zip(small.results, usual.results):
        assert a.edges == b.edges and list(a.tests) == list(b.tests)
        assert a.counts["tests"] == b.counts["tests"]
        assert (a.counts["tests_computed"] + a.counts["tests_from_cache"]
                == b.counts["tests_computed"] + b.counts["tests_from_cache"])
    reused = [r.counts["tests_from_cache"] for r in small.results]
    assert sum(reused) < sum(r.counts["tests_from_cache"] for r in usual.results)
    assert any("p-value store was full" in n for r in small.results for n in r.notes)
    assert not any("p-value store was full" in n for r in usual.results for n in r.notes)


# -- reading text tables -------------------------------------------------------------------

def test_text_tables_read_the_same_whatever_their_bytes(tmp_path):
    # the same table as plain ASCII with LF (pandas reads the file's own bytes), as UTF-8
    # with a byte-order mark and CRLF line ends, and as UTF-16 (re-encoded first): the same
    # frame, and the one pandas itself reads from the text (a quoted name with the separator
    # inside, a blank line, a missing value); a non-ASCII name survives the re-encoding
    from discovery.data import read_table
    text = ('a,b,"c, quoted",größe\n1.5,2,"3",4\n-1e3,,5,6\n\n7,8,"9",10\n'
            '0.25,1,"2",3\n')
    ascii_text = text.replace("größe", "size")
    files = {"plain.csv": ascii_text.encode("ascii"),
             "bom_crlf.csv": codecs.BOM_UTF8 + ascii_text.replace("\n", "\r\n").encode("utf-8"),
             "utf16.csv": ascii_text.encode("utf-16")}
    frames = []
    for name, data in files.items():
        path = tmp_path / name
        path.write_bytes(data)
        frames.append(read_table(path, missing="test-wise").frame)
    for other in frames[1:]:
        pd.testing.assert_frame_equal(frames[0], other)
    expected = pd.read_csv(io.StringIO(ascii_text), keep_default_na=False, na_values=[""])
    pd.testing.assert_frame_equal(frames[0], expected.astype(float), check_dtype=False)
    path = tmp_path / "named.csv"
    path.write_bytes(text.encode("utf-8"))  # non-ASCII: re-encoded before pandas reads it
    assert list(read_table(path, missing="test-wise").frame.columns)[-1] == "größe"
