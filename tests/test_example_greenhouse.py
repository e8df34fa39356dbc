"""The invented greenhouse example: reproducible, structurally interesting, and honest knowledge.

References: networkx (acyclicity, v-structures, descendants), statsmodels OLS (the data agree
with the diagram), Python's tomllib (the knowledge file parses as TOML).
"""

from __future__ import annotations

import importlib.util
import tomllib
from pathlib import Path

import networkx as nx
import pandas as pd
import pytest
import statsmodels.api as sm

FOLDER = Path(__file__).resolve().parents[1] / "example_sets" / "greenhouse"


@pytest.fixture(scope="module")
def data():
    return pd.read_csv(FOLDER / "data.csv")


@pytest.fixture(scope="module")
def truth():
    edges = pd.read_csv(FOLDER / "truth.csv")
    assert list(edges.columns) == ["from", "to"]
    return nx.DiGraph(list(zip(edges["from"], edges["to"])))


@pytest.fixture(scope="module")
def knowledge():
    with open(FOLDER / "knowledge.toml", "rb") as handle:
        return tomllib.load(handle)


def test_generator_rewrites_the_committed_files_byte_for_byte(tmp_path):
    spec = importlib.util.spec_from_file_location("greenhouse_generate", FOLDER / "generate.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    module.main(["--out", str(tmp_path)])
    for name in ("data.csv", "truth.csv"):
        assert (tmp_path / name).read_bytes() == (FOLDER / name).read_bytes(), name


def test_table_shape(data, truth):
    assert 10 <= data.shape[1] <= 12
    assert len(data) == 2000
    assert not data.isna().any().any()
    assert all(dtype.kind == "f" for dtype in data.dtypes)
    assert set(truth.nodes) == set(data.columns)


def test_structure_is_interesting(truth):
    # networkx is the reference for acyclicity and for v-structures (unshielded colliders).
    assert nx.is_directed_acyclic_graph(truth)
    assert len(list(nx.dag.v_structures(truth))) >= 2
    assert max(d for _, d in truth.in_degree()) <= 4
    # A chain a -> b -> c with a and c non-adjacent.
    assert any(not truth.has_edge(a, c) and not truth.has_edge(c, a)
               for a, b in truth.edges for c in truth.successors(b))


def test_physical_ranges(data):
    # The README promises no impossible values (common practice, no source: shares and
    # physical magnitudes are non-negative; relative humidity is at most 100 %).
    for column in ("sunlight", "heating", "irrigation", "vent_opening", "co2", "soil_moisture",
                   "leaf_area", "fungal_spots", "fruit_yield"):
        assert data[column].min() >= 0, column
    assert data["humidity"].max() <= 100 and data["vent_opening"].max() <= 100


def test_data_agree_with_the_diagram(data, truth):
    # statsmodels OLS of each variable on its parents and its other non-descendants: every
    # parent must be clearly significant (|t| > 8, i.e. detectable by Fisher's z at n = 2000),
    # every other non-descendant not (local Markov property; Lauritzen 1996, Graphical Models,
    # sec. 3.2, from memory). |t| < 4 has probability > 0.9999 per test under the null.
    for v in truth.nodes:
        parents = sorted(truth.predecessors(v))
        others = sorted(set(truth.nodes) - nx.descendants(truth, v) - set(parents) - {v})
        if not parents and not others:
            continue
        fit = sm.OLS(data[v], sm.add_constant(data[parents + others])).fit()
        for u in parents:
            assert abs(fit.tvalues[u]) > 8, (u, v)
        for u in others:
            assert abs(fit.tvalues[u]) < 4, (u, v)


def test_knowledge_is_true_of_the_diagram(knowledge, truth, data):
    assert knowledge["format"] == "edgewise-knowledge" and knowledge["version"] == 1
    named = {v for group in knowledge["stages"] for v in group}
    for key in ("locked", "locked_directions", "forbidden", "forbidden_directions"):
        for pair in knowledge[key]:
            assert len(pair) == 2
            named.update(pair)
    assert named <= set(data.columns)

    stage = {v: k for k, group in enumerate(knowledge["stages"]) for v in group}
    assert len(stage) == sum(len(group) for group in knowledge["stages"])   # no repeats
    for a, b in truth.edges:
        # Nothing in a later stage causes anything in an earlier one.
        if a in stage and b in stage:
            assert stage[a] <= stage[b], (a, b)
    adjacent = lambda a, b: truth.has_edge(a, b) or truth.has_edge(b, a)  # noqa: E731
    assert all(adjacent(a, b) for a, b in knowledge["locked"])
    assert all(truth.has_edge(a, b) for a, b in knowledge["locked_directions"])
    assert not any(adjacent(a, b) for a, b in knowledge["forbidden"])
    assert not any(truth.has_edge(a, b) for a, b in knowledge["forbidden_directions"])


# --------------------------------------------------------------------------- recovery

def _truth_dag():
    edges = pd.read_csv(FOLDER / "truth.csv")
    return nx.DiGraph(list(zip(edges["from"], edges["to"])))


def _as_arcs(result):
    # a result as arcs: a directed edge one arc, an undirected (or contested) edge two
    return set(result.to_networkx().edges)


def test_default_settings_recover_the_equivalence_class_exactly(data):
    # The CPDAG of the true diagram comes from the project's metrics.cpdag_of, itself checked
    # against brute-force enumeration of the equivalence class (tests/test_enumeration.py;
    # Verma & Pearl 1990, Andersson, Madigan & Perlman 1997).
    from discovery import discover
    from discovery.metrics import cpdag_of, structural_hamming_distance
    truth = _truth_dag()
    result = discover(data)  # every setting at its default: standard collider rule, α 0.05
    assert _as_arcs(result) == set(cpdag_of(truth).edges)
    assert structural_hamming_distance(result.to_networkx(), cpdag_of(truth)) == 0
    assert result.counts["contested"] == 0 and not result.conflicts
    # not a knife edge: the other usual levels and collider rules agree
    for alpha, rule in ((0.01, "standard"), (0.05, "conservative"), (0.01, "majority")):
        assert _as_arcs(discover(data, alpha=alpha, collider_rule=rule)) == \
            set(cpdag_of(truth).edges), (alpha, rule)


def test_with_the_knowledge_file_every_edge_is_oriented_as_in_truth(data):
    from discovery import discover, read_knowledge
    result = discover(data, knowledge=read_knowledge(FOLDER / "knowledge.toml"))
    assert _as_arcs(result) == set(_truth_dag().edges)


def test_the_model_is_faithful_with_a_margin():
    # No near-cancellation: run the search on the model's *population* partial correlations
    # (Fisher's z as if from n rows; scipy's normal distribution for the p-value), so that
    # sampling noise plays no part. A model with two paths that nearly cancel loses an edge
    # or a collider here (the earlier version of this example did: air_temp and humidity
    # came out independent given soil_moisture). Down to n = 700 rows the search must return
    # the CPDAG of the true diagram at both usual levels.
    import numpy as np
    from scipy.stats import norm

    from discovery import discover
    from discovery.independence import IndependenceTest
    from discovery.metrics import cpdag_of

    spec = importlib.util.spec_from_file_location("greenhouse_generate", FOLDER / "generate.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    names = list(module.VARIABLES)
    at = {v: i for i, v in enumerate(names)}
    w = np.zeros((len(names), len(names)))
    for (u, v), weight in module.WEIGHTS.items():
        w[at[u], at[v]] = weight
    # covariance of the standardised latent values (unit variances, causal order)
    cov = np.zeros_like(w)
    for v in range(len(names)):
        cov[v, :v] = cov[:v, v] = w[:, v] @ cov[:, :v]
        cov[v, v] = 1.0

    class Population(IndependenceTest):
        name = "population-fisher-z"

        def __init__(self, n):
            self.n = n
            self.variables = tuple(sorted(names))
            self.order = [at[v] for v in self.variables]

        def settings_key(self):
            return ("population", self.n)

        def _batch_array(self, rows):
            z = np.empty(len(rows))
            for k, r in enumerate(rows):
                ids = [self.order[i] for i in r]
                prec = np.linalg.inv(cov[np.ix_(ids, ids)])
                rho = -prec[0, 1] / np.sqrt(prec[0, 0] * prec[1, 1])
                z[k] = np.arctanh(rho) * np.sqrt(self.n - len(ids) + 2 - 3)
            return z, 2 * norm.sf(np.abs(z))

    truth = set(cpdag_of(_truth_dag()).edges)
    for n in (700, 2000):
        for alpha in (0.01, 0.05):
            assert _as_arcs(discover(None, test=Population(n), alpha=alpha)) == truth, (n, alpha)
