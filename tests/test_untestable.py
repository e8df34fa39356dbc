"""A test that returns no p-value (NaN) is no evidence either way: the pair is untestable.

Reference for the data: a linear-Gaussian chain a -> b -> c with an independent d, where
Fisher's z (checked against statsmodels elsewhere) separates a and c given b and d from all.
Rule of the trade (common practice, no source): a missing p-value must not be read as
"dependent" nor as "independent".
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd

from discovery import discover
from discovery.independence import FisherZ, IndependenceTest
from discovery.result import NO_PVALUE, SearchResult


def chain_frame(n=800, seed=2):
    rng = np.random.default_rng(seed)
    a = rng.normal(size=n)
    b = a + rng.normal(size=n)
    c = b + rng.normal(size=n)
    return pd.DataFrame({"a": a, "b": b, "c": c, "d": rng.normal(size=n)})


class Blind(IndependenceTest):
    """Fisher's z, except that every test of the pair {a, d} returns NaN."""

    name = "blind"
    vectorised = True

    def __init__(self, frame, reason=True):
        self.inner = FisherZ(frame)
        self.variables = self.inner.variables
        self.n = self.inner.n
        self.with_reason = reason
        self.blind = {self.variables.index("a"), self.variables.index("d")}

    def settings_key(self):
        return ("blind",) + tuple(self.inner.settings_key())

    def _batch_array(self, idx):
        stat, p = self.inner._batch_array(idx)
        p = np.array(p, dtype=float)
        p[[{int(r[0]), int(r[1])} == self.blind for r in idx]] = np.nan
        return stat, p

    def untestable_reason(self, x, y, given):
        if not self.with_reason:
            return None
        return f"no rows to test {x} and {y} given {{{', '.join(given)}}}"


def test_nan_pair_is_kept_and_marked_untestable():
    frame = chain_frame()
    plain = discover(frame)
    assert plain.edge("a", "d") is None  # d is independent of everything
    result = discover(None, test=Blind(frame))
    edge = result.edge("a", "d")
    assert edge is not None and edge.untestable == "no rows to test a and d given {}"
    assert result.counts["untestable"] == 1
    # every other pair is decided as before (adjacency; the kept edge may orient others)
    others = {e.pair for e in result.edges if e.pair != {"a", "d"}}
    assert others == {e.pair for e in plain.edges}
    assert all(not e.untestable for e in result.edges if e.pair != {"a", "d"})


def test_untestable_in_json_text_and_evidence(tmp_path):
    result = discover(None, test=Blind(chain_frame(), reason=False))
    doc = result.to_dict()
    entry = next(e for e in doc["edges"] if {e["from"], e["to"]} == {"a", "d"})
    assert entry["untestable"] is True and entry["untestable_reason"] == NO_PVALUE
    again = SearchResult.from_dict(json.loads(json.dumps(doc)))
    assert again.edge("a", "d").untestable == NO_PVALUE
    text = result.summary().as_text()
    assert "1 untestable" in text and "untestable (the test returned no p-value)" in text
    assert any("count neither for nor against" in n for n in result.summary().notes())
    evidence = result.evidence("a", "d").as_text()
    assert "untestable:" in evidence and "no p-value (untestable)" in evidence


def test_a_failing_hook_falls_back_to_the_generic_text():
    class Broken(Blind):
        def untestable_reason(self, x, y, given):
            raise RuntimeError("boom")

    result = discover(None, test=Broken(chain_frame()))
    assert result.edge("a", "d").untestable == NO_PVALUE


def test_counts_agree_under_every_collider_rule():
    # "tests" are the tests in the evidence; computed + from the cache count those same tests
    frame = chain_frame()
    from discovery.independence import PValueCache
    cache = PValueCache()
    for rule in ("standard", "conservative", "majority", "conservative"):
        result = discover(frame, collider_rule=rule, cache=cache)
        c = result.counts
        assert c["tests"] == len(result.tests)
        assert c["tests_computed"] + c["tests_from_cache"] == c["tests"]
    assert c["tests_computed"] == 0 and c["collider_tests_computed"] == 0
    assert "from the cache" in result.summary().as_text()
