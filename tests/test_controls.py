"""Control sets and effect ranges, checked against definitions written here and outside
libraries (networkx d-separation, numpy linear algebra, statsmodels OLS).

Every reference below is computed in this file, independently of the engine:

* the adjustment criterion for a DAG (Shpitser, VanderWeele & Robins 2010; the back-door
  criterion of Pearl 1995 generalised): Z holds no descendant of a node on a proper causal
  path, and Z d-separates x and y in the proper back-door graph (networkx ``is_d_separator``);
* in a linear structural model the population regression coefficient of x (y on x and Z)
  equals the total effect exactly when Z is valid for generic coefficients (linear-model
  algebra: Σ = (I − B)⁻¹ Ω (I − B)⁻ᵀ, total effect = entry of (I − B)⁻¹);
* an equivalence class is enumerated by brute force: every orientation of the undirected
  edges that is acyclic and keeps the v-structures (Verma & Pearl 1990); a set is valid for
  the class when it is valid in every member (Perković et al. 2018);
* the effect range is the set of OLS coefficients of x when y is regressed on x and x's
  parents in each member, 0 when y is a parent of x (Maathuis, Kalisch & Bühlmann 2009);
* the optimal set has the smallest standard error among valid sets (Henckel, Perković &
  Maathuis 2022; checked on simulated data, common practice).
"""

from __future__ import annotations

from itertools import chain, combinations, product

import networkx as nx
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from discovery import (ControlSetError, DSeparationOracle, Knowledge, control_sets, discover,
                       effect_range, estimate_effect)


# ----------------------------------------------------------------------- references (test-side)

def random_dag(rng, n, p=0.45):
    order = [f"v{i}" for i in rng.permutation(n)]
    g = nx.DiGraph()
    g.add_nodes_from(sorted(order))
    for i, j in combinations(range(n), 2):
        if rng.random() < p:
            g.add_edge(order[i], order[j])
    return g


def subsets(items):
    items = sorted(items)
    return chain.from_iterable(combinations(items, k) for k in range(len(items) + 1))


def reference_valid(dag, x, y, z):
    """Adjustment criterion (Shpitser, VanderWeele & Robins 2010) with networkx d-separation
    in the proper back-door graph (Pearl 1995; van der Zander, Liśkiewicz & Textor 2014)."""
    z = set(z)
    causal = {w for w in nx.descendants(dag, x) if w == y or y in nx.descendants(dag, w)}
    forbidden = set()
    for w in causal:
        forbidden |= {w} | nx.descendants(dag, w)
    if z & (forbidden | {x}):
        return False
    pbd = dag.copy()
    pbd.remove_edges_from([(x, w) for w in dag.successors(x) if w in causal])
    return nx.is_d_separator(pbd, {x}, {y}, z)


def v_structures(dag):
    out = set()
    for v in dag:
        for a, b in combinations(sorted(dag.predecessors(v)), 2):
            if not dag.has_edge(a, b) and not dag.has_edge(b, a):
                out.add((a, v, b))
    return out


def members(result, truth):
    """Every DAG of the class a result stands for: orient its undirected edges every way,
    keep the acyclic ones with the true v-structures (Verma & Pearl 1990)."""
    directed = [(e.source, e.target) for e in result.edges if e.kind == "directed"]
    undirected = [(e.source, e.target) for e in result.edges if e.kind != "directed"]
    vs = v_structures(truth)
    out = []
    for flips in product((False, True), repeat=len(undirected)):
        d = nx.DiGraph()
        d.add_nodes_from(result.variables)
        d.add_edges_from(directed)
        d.add_edges_from((b, a) if f else (a, b) for (a, b), f in zip(undirected, flips))
        if nx.is_directed_acyclic_graph(d) and v_structures(d) == vs:
            out.append(d)
    return out


def linear_model(dag, rng):
    nodes = sorted(dag)
    index = {v: i for i, v in enumerate(nodes)}
    b = np.zeros((len(nodes), len(nodes)))
    for u, v in dag.edges:
        b[index[v], index[u]] = rng.uniform(0.5, 1.5) * rng.choice([-1, 1])
    omega = np.diag(rng.uniform(0.5, 1.5, len(nodes)))
    inv = np.linalg.inv(np.eye(len(nodes)) - b)
    return nodes, index, inv, inv @ omega @ inv.T


def population_coefficient(sigma, index, x, y, z):
    cols = [index[x]] + [index[v] for v in sorted(z)]
    beta = np.linalg.solve(sigma[np.ix_(cols, cols)], sigma[cols, index[y]])
    return beta[0]


def simulate(dag, rng, n):
    nodes = list(nx.topological_sort(dag))
    data = {}
    for v in nodes:
        data[v] = rng.normal(size=n) * rng.uniform(0.6, 1.2)
        for u in dag.predecessors(v):
            data[v] = data[v] + dag[u][v]["w"] * data[u]
    return pd.DataFrame({v: data[v] for v in sorted(nodes)})


def weighted(dag, rng):
    for u, v in dag.edges:
        dag[u][v]["w"] = rng.uniform(0.5, 1.5) * rng.choice([-1, 1])
    return dag


def pairs_of(dag, rng, k):
    nodes = sorted(dag)
    out = []
    for _ in range(k):
        x, y = rng.choice(nodes, 2, replace=False)
        out.append((str(x), str(y)))
    return out


# ------------------------------------------------------------------------------------ DAGs

@pytest.mark.parametrize("seed", range(12))
def test_dag_valid_exactly_when_the_adjustment_criterion_holds(seed):
    # Shpitser, VanderWeele & Robins (2010) checked with networkx d-separation (Pearl 1995).
    rng = np.random.default_rng(seed)
    for _ in range(6):
        dag = random_dag(rng, int(rng.integers(4, 7)))
        for x, y in pairs_of(dag, rng, 2):
            answer = control_sets(dag, x, y)
            assert answer.amenable  # a DAG leaves nothing undirected
            others = set(dag) - {x, y}
            valid = {frozenset(z) for z in subsets(others) if reference_valid(dag, x, y, z)}
            for z in subsets(others):
                assert answer.check(z).valid == (frozenset(z) in valid), (dag.edges, x, y, z)
            assert (answer.canonical is None) == (not valid)
            if valid:
                assert answer.canonical in valid
                minimal = {s for s in valid if not any(t < s for t in valid)}
                assert set(answer.minimal) == minimal and answer.minimal_complete
                if answer.optimal is not None:
                    assert answer.optimal in valid


@pytest.mark.parametrize("seed", range(8))
def test_dag_valid_exactly_when_the_regression_coefficient_is_the_effect(seed):
    # Linear-model algebra: with generic coefficients, the population coefficient of x in
    # the regression of y on x and Z equals the total effect exactly for valid Z.
    rng = np.random.default_rng(100 + seed)
    for _ in range(5):
        dag = random_dag(rng, int(rng.integers(4, 7)))
        nodes, index, inv, sigma = linear_model(dag, rng)
        for x, y in pairs_of(dag, rng, 2):
            answer = control_sets(dag, x, y)
            total = inv[index[y], index[x]]
            for z in subsets(set(dag) - {x, y}):
                unbiased = abs(population_coefficient(sigma, index, x, y, z) - total) < 1e-9
                assert answer.check(z).valid == unbiased, (dag.edges, x, y, z)


# -------------------------------------------------------------------- CPDAGs and PDAGs

def class_cases(seed, with_knowledge):
    rng = np.random.default_rng(200 + seed)
    for _ in range(5):
        dag = random_dag(rng, int(rng.integers(4, 7)), p=0.5)
        knowledge = Knowledge()
        if with_knowledge and dag.number_of_edges():
            edges = sorted(dag.edges)
            pick = rng.choice(len(edges), size=max(1, len(edges) // 3), replace=False)
            knowledge = Knowledge(locked_directions=[edges[i] for i in pick])
        result = discover(None, test=DSeparationOracle(dag), knowledge=knowledge)
        yield rng, dag, result


@pytest.mark.parametrize("with_knowledge", [False, True], ids=["cpdag", "pdag"])
@pytest.mark.parametrize("seed", range(10))
def test_class_valid_exactly_when_valid_in_every_member(seed, with_knowledge):
    # Perković et al. (2017, 2018): valid for the class = valid in every DAG of it,
    # here by brute-force enumeration of the class.
    for rng, dag, result in class_cases(seed, with_knowledge):
        dags = members(result, dag)
        assert any(nx.utils.graphs_equal(d, dag) for d in dags)
        for x, y in pairs_of(dag, rng, 3):
            answer = control_sets(result, x, y)
            others = set(dag) - {x, y}
            valid = {frozenset(z) for z in subsets(others)
                     if all(reference_valid(d, x, y, z) for d in dags)}
            for z in subsets(others):
                assert answer.check(z).valid == (frozenset(z) in valid), \
                    ([e.arrow() for e in result.edges], x, y, z)
            # "no valid set" exactly when none exists
            assert (answer.canonical is None) == (not valid)
            if valid:
                minimal = {s for s in valid if not any(t < s for t in valid)}
                assert set(answer.minimal) == minimal
            if not answer.amenable:
                assert not valid and answer.breaking_path[0] == x
                assert answer.breaking_path[-1] == y


@pytest.mark.parametrize("with_knowledge", [False, True], ids=["cpdag", "pdag"])
@pytest.mark.parametrize("seed", range(6))
def test_optimal_set_is_the_same_in_every_member(seed, with_knowledge):
    # Henckel, Perković & Maathuis (2022): O = pa(cn) \ forb, the same in every member of an
    # amenable class; computed here in each member from the definition.
    for rng, dag, result in class_cases(seed, with_knowledge):
        dags = members(result, dag)
        for x, y in pairs_of(dag, rng, 3):
            answer = control_sets(result, x, y)
            if answer.optimal is None:
                continue
            for d in dags:
                cn = {w for w in nx.descendants(d, x) if w == y or y in nx.descendants(d, w)}
                forb = {x} | cn | set().union(*(nx.descendants(d, w) for w in cn))
                o = set().union(*(set(d.predecessors(w)) for w in cn)) - forb
                assert answer.optimal == o


@pytest.mark.parametrize("with_knowledge", [False, True], ids=["cpdag", "pdag"])
@pytest.mark.parametrize("seed", range(5))
def test_effect_range_equals_the_members_regressions(seed, with_knowledge):
    # Maathuis, Kalisch & Bühlmann (2009): the possible effects are, as a set, the OLS
    # coefficients of x (statsmodels) over every member, y on x and x's parents; 0 when y is
    # a parent of x.
    for rng, dag, result in class_cases(seed, with_knowledge):
        data = simulate(weighted(dag.copy(), rng), rng, 400)
        dags = members(result, dag)
        for x, y in pairs_of(dag, rng, 2):
            expected = set()
            for d in dags:
                pa = sorted(d.predecessors(x))
                if y in pa:
                    expected.add(0.0)
                    continue
                fit = sm.OLS(data[y], sm.add_constant(data[[x] + pa])).fit()
                expected.add(round(float(fit.params[x]), 9))
            got = effect_range(result, data, x, y)
            assert {round(e.estimate, 9) for e in got.effects} == expected
            assert round(got.min, 9) == min(expected) and round(got.max, 9) == max(expected)


def test_optimal_set_has_the_smallest_variance_on_simulated_data():
    # Henckel, Perković & Maathuis (2022), Theorem: the optimal set's asymptotic variance is
    # at most any other valid set's; checked on one large simulated sample (common practice).
    rng = np.random.default_rng(7)
    dag = nx.DiGraph([("c1", "x"), ("c1", "c2"), ("c2", "y"), ("x", "m"), ("m", "y"),
                      ("p", "y"), ("i", "x"), ("c3", "c2")])
    data = simulate(weighted(dag, rng), rng, 50_000)
    answer = control_sets(dag, "x", "y")
    assert answer.optimal == {"c2", "p"}
    best = estimate_effect(data, "x", "y", answer.optimal).se
    compared = 0
    for z in subsets(set(dag) - {"x", "y"}):
        if answer.check(z).valid and set(z) != answer.optimal:
            assert best <= estimate_effect(data, "x", "y", z).se * 1.02
            compared += 1
    assert compared >= 5


# ------------------------------------------------------------------------------------- PAGs

class _MarkedEdge:
    """An edge with stored end marks, as a PAG result carries them."""

    def __init__(self, source, target, from_mark, to_mark):
        self.source, self.target = source, target
        self.from_mark, self.to_mark = from_mark, to_mark
        self.kind = "pag"


class _Pag:
    def __init__(self, variables, edges):
        self.variables = tuple(variables)
        self.edges = tuple(_MarkedEdge(*e) for e in edges)


T, A, C = "tail", "arrow", "circle"


def test_pag_hidden_cause_of_treatment_and_outcome_has_no_valid_set():
    # Textbook shape (Zhang 2008; Perković et al. 2018): a o→ x ↔ y ←o b. The bidirected
    # edge is an unblockable non-causal path; nothing points from x to y, so the effect is 0.
    pag = _Pag("abxy", [("a", "x", C, A), ("x", "y", A, A), ("b", "y", C, A)])
    answer = control_sets(pag, "x", "y")
    assert answer.kind == "pag"
    assert answer.amenable and answer.canonical is None and not answer.causal_nodes
    assert not answer.check(["a", "b"]).valid
    assert "↔" in answer.check([]).reason
    assert any("x ↔ y points into x" in n for n in answer.notes)  # says why


def test_pag_visible_edge_is_identifiable():
    # From memory (Zhang 2008 visibility; Perković et al. 2018): in a o→ x → y with a not
    # adjacent to y, the edge x → y is visible, so the effect is identified with no controls.
    pag = _Pag("axy", [("a", "x", C, A), ("x", "y", T, A)])
    answer = control_sets(pag, "x", "y")
    assert answer.amenable
    assert answer.check([]).valid and answer.check(["a"]).valid
    assert answer.minimal == (frozenset(),)
    assert answer.optimal is None  # defined for graphs without hidden causes only


def test_pag_invisible_edge_is_not_amenable():
    # From memory (Perković et al. 2018): x → y is invisible when every v with an edge into x
    # is adjacent to y; a hidden cause of x and y cannot be ruled out.
    pag = _Pag("axy", [("a", "x", C, A), ("x", "y", T, A), ("a", "y", C, A)])
    answer = control_sets(pag, "x", "y")
    assert not answer.amenable and answer.breaking_path == ("x", "y")
    assert not answer.check(["a"]).valid
    assert "Not identifiable" in answer.as_text() and "hidden" in answer.as_text()


def test_pag_circle_edge_out_of_treatment_is_not_amenable():
    # x o–o y: y may cause x, x may cause y, or a hidden cause may join them (Zhang 2008).
    pag = _Pag("xy", [("x", "y", C, C)])
    answer = control_sets(pag, "x", "y")
    assert not answer.amenable and answer.breaking_path == ("x", "y")


def test_pag_confounder_with_visible_edge_needs_adjustment():
    # From memory, a shape of Perković et al. (2018): b o→ x, x → y visible through b, and a
    # measured common cause c → x, c → y (c ←o ... here c o→ x and c o→ y with a → c).
    pag = _Pag("abcxy", [("b", "x", C, A), ("c", "x", T, A), ("c", "y", T, A),
                         ("x", "y", T, A), ("a", "c", C, A)])
    answer = control_sets(pag, "x", "y")
    assert answer.amenable
    assert not answer.check([]).valid and answer.check(["c"]).valid
    assert frozenset({"c"}) in answer.minimal


def test_pag_with_selection_tail_is_refused():
    pag = _Pag("xy", [("x", "y", T, T)])
    with pytest.raises(ControlSetError, match="selection bias"):
        control_sets(pag, "x", "y", kind="pag")


# --------------------------------------------------------------------------------- bad input

CHAIN = nx.DiGraph([("a", "x"), ("x", "y"), ("a", "y")])


def test_unknown_treatment():
    with pytest.raises(ControlSetError, match="treatment 'q' is not a variable"):
        control_sets(CHAIN, "q", "y")


def test_unknown_outcome():
    with pytest.raises(ControlSetError, match="outcome 'q' is not a variable"):
        control_sets(CHAIN, "x", "q")


def test_identical_treatment_and_outcome():
    with pytest.raises(ControlSetError, match="both 'x'; choose two different"):
        control_sets(CHAIN, "x", "x")


def test_diagram_with_a_cycle():
    with pytest.raises(ControlSetError, match="has a cycle"):
        control_sets(nx.DiGraph([("x", "y"), ("y", "z"), ("z", "x")]), "x", "y")


def test_result_that_is_not_a_valid_class():
    # directed edges forming a cycle cannot be a CPDAG
    from discovery import Edge, SearchResult, SearchSettings
    bad = SearchResult(variables=("x", "y", "z"), settings=SearchSettings(),
                       knowledge=Knowledge(),
                       edges=(Edge("x", "y", "directed"), Edge("y", "z", "directed"),
                              Edge("z", "x", "directed")), removed=(), tests=())
    with pytest.raises(ControlSetError, match="not a valid equivalence class"):
        control_sets(bad, "x", "y")


def test_not_a_graph():
    with pytest.raises(ControlSetError, match="must be a search result or a networkx"):
        control_sets({"x": "y"}, "x", "y")


def test_proposed_set_with_unknown_variables():
    with pytest.raises(ControlSetError, match="names 'zz', not in the diagram"):
        control_sets(CHAIN, "x", "y").check(["a", "zz"])


def test_proposed_set_containing_the_treatment():
    with pytest.raises(ControlSetError, match="contains the treatment 'x'"):
        control_sets(CHAIN, "x", "y").check("a, x")


def test_proposed_set_containing_the_outcome():
    with pytest.raises(ControlSetError, match="contains the outcome 'y'"):
        control_sets(CHAIN, "x", "y").check(["y"])


def test_effect_range_refuses_a_pag():
    pag = _Pag("axy", [("a", "x", C, A), ("x", "y", T, A)])
    with pytest.raises(ControlSetError, match="without hidden causes"):
        effect_range(pag, pd.DataFrame({"a": [1.0], "x": [1.0], "y": [1.0]}), "x", "y")


def test_effect_range_missing_column():
    with pytest.raises(ControlSetError, match="no column 'a'"):
        effect_range(CHAIN, pd.DataFrame({"x": [1.0, 2.0], "y": [1.0, 3.0]}), "x", "y")


def test_estimate_with_a_non_numeric_column():
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0], "y": [2.0, 1.0, 0.0], "a": ["p", "q", "r"]})
    with pytest.raises(ControlSetError, match="'a' is not numeric"):
        estimate_effect(frame, "x", "y", ["a"])


def test_estimate_with_a_bad_level():
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0], "y": [2.0, 1.0, 0.0]})
    with pytest.raises(ControlSetError, match="confidence level must be in"):
        estimate_effect(frame, "x", "y", level=1.5)


def test_estimate_with_too_few_rows():
    frame = pd.DataFrame({"x": [1.0, 2.0], "y": [2.0, 1.0], "a": [0.0, 1.0]})
    with pytest.raises(ControlSetError, match="too few"):
        estimate_effect(frame, "x", "y", ["a"])


# ------------------------------------------------------------------------- estimates, JSON

def test_estimate_matches_statsmodels_interval():
    # statsmodels OLS conf_int is the reference for the interval.
    rng = np.random.default_rng(3)
    dag = weighted(nx.DiGraph([("a", "x"), ("a", "y"), ("x", "y")]), rng)
    data = simulate(dag, rng, 500)
    est = estimate_effect(data, "x", "y", ["a"], graph=dag)
    fit = sm.OLS(data["y"], sm.add_constant(data[["x", "a"]])).fit()
    assert est.valid is True
    assert est.estimate == pytest.approx(fit.params["x"])
    assert est.ci == pytest.approx(tuple(fit.conf_int(0.05).loc["x"]))
    assert not estimate_effect(data, "x", "y", [], graph=dag).valid


def test_controls_document_has_the_shared_keys():
    answer = control_sets(CHAIN, "x", "y")
    doc = answer.to_dict(check=answer.check(["a"]))
    for key in ("format", "version", "treatment", "outcome", "amenable", "breaking_path",
                "canonical", "optimal", "minimal", "minimal_bound", "check", "effects",
                "cautions"):
        assert key in doc
    assert doc["format"] == "edgewise-controls" and doc["check"]["valid"] is True
    assert doc["canonical"] == ["a"] and doc["minimal"] == [["a"]]


# ------------------------------------------- MAGs of DAGs with hidden variables (soundness)

def mag_of(dag, observed):
    """The maximal ancestral graph of ``dag`` over ``observed`` (Richardson & Spirtes 2002):
    two observed variables are adjacent when no set of other observed variables d-separates
    them (networkx); the edge is a → b when a is an ancestor of b, else a ↔ b."""
    edges = []
    for a, b in combinations(sorted(observed), 2):
        rest = set(observed) - {a, b}
        if any(nx.is_d_separator(dag, {a}, {b}, set(z)) for z in subsets(rest)):
            continue
        if a in nx.ancestors(dag, b):
            edges.append((a, b, T, A))
        elif b in nx.ancestors(dag, a):
            edges.append((b, a, T, A))
        else:
            edges.append((a, b, A, A))
    return _Pag(sorted(observed), edges)


@pytest.mark.parametrize("seed", range(6))
def test_mag_answer_is_valid_in_the_dag_with_hidden_variables(seed):
    # Perković et al. (2018): a set valid for a MAG is valid in every DAG with hidden
    # variables that it represents, in particular the one it was built from; checked with the
    # adjustment criterion by networkx d-separation (Shpitser et al. 2010).
    rng = np.random.default_rng(300 + seed)
    checked = 0
    for _ in range(6):
        dag = random_dag(rng, int(rng.integers(5, 7)), p=0.5)
        hidden = set(rng.choice(sorted(dag), size=int(rng.integers(1, 3)), replace=False))
        observed = set(dag) - hidden
        mag = mag_of(dag, observed)
        for x, y in combinations(sorted(observed), 2):
            for a, b in ((x, y), (y, x)):
                answer = control_sets(mag, a, b, kind="pag")
                for z in subsets(observed - {a, b}):
                    if answer.check(z).valid:
                        assert reference_valid(dag, a, b, z), (sorted(dag.edges), hidden,
                                                               a, b, z)
                        checked += 1
    assert checked > 0


def asymptotic_variance(sigma, index, x, y, z):
    """n × Var of the OLS coefficient of x in y ~ x + Z: σ²(y | x, Z) / σ²(x | Z)
    (linear-model algebra on the population covariance)."""
    def residual_variance(target, given):
        g = [index[v] for v in given]
        t = index[target]
        if not g:
            return sigma[t, t]
        return sigma[t, t] - sigma[t, g] @ np.linalg.solve(sigma[np.ix_(g, g)], sigma[g, t])
    return residual_variance(y, [x, *sorted(z)]) / residual_variance(x, sorted(z))


@pytest.mark.parametrize("seed", range(6))
def test_optimal_set_has_the_smallest_asymptotic_variance(seed):
    # Henckel, Perković & Maathuis (2022), main result (from memory): among valid sets the
    # optimal one has the smallest asymptotic variance; here exact population variances of a
    # random linear model, for DAGs and for the CPDAG of each.
    rng = np.random.default_rng(400 + seed)
    compared = 0
    for _ in range(6):
        dag = random_dag(rng, int(rng.integers(4, 7)), p=0.5)
        nodes, index, inv, sigma = linear_model(dag, rng)
        result = discover(None, test=DSeparationOracle(dag))
        for x, y in pairs_of(dag, rng, 3):
            for graph in (dag, result):
                answer = control_sets(graph, x, y)
                if answer.optimal is None:
                    continue
                best = asymptotic_variance(sigma, index, x, y, answer.optimal)
                for z in subsets(set(dag) - {x, y}):
                    if answer.check(z).valid:
                        assert best <= asymptotic_variance(sigma, index, x, y, z) * (1 + 1e-9)
                        compared += 1
    assert compared > 0
