"""Synthetic causal diagrams and data drawn from them.

A *random DAG* here is the Erdős–Rényi construction used throughout the structure-learning
literature: draw a random order of the nodes, then join every earlier node to every later one
independently with probability ``p``. Each node then has, on average, ``p * (n_nodes - 1)``
neighbours (parents plus children), the *expected degree*. A *linear-Gaussian structural model*
on that DAG sets every variable to a weighted sum of its parents plus independent Gaussian noise,

    X_v = sum_{u -> v} w_uv X_u + e_v,    e_v ~ N(0, s_v^2),

so that the data are Markov and (for almost every choice of weights) faithful to the DAG. This is
the simulation design of Kalisch & Bühlmann (2007), with weights of random sign, and it is what
the tests, benchmarks and demos of Edgewise use to know the right answer.

Every function takes one randomness parameter, ``rng``: an int seed, a
:class:`numpy.random.Generator` or ``None`` (fresh entropy). It is converted once with
:func:`numpy.random.default_rng`; global seeds are never read or changed.

References
----------
.. [1] Erdős, P. & Rényi, A. (1959). On random graphs I. *Publicationes Mathematicae* 6, 290–297.
.. [2] Kalisch, M. & Bühlmann, P. (2007). Estimating high-dimensional directed acyclic graphs
   with the PC-algorithm. *Journal of Machine Learning Research* 8, 613–636.

Examples
--------
>>> dag = random_dag(5, expected_degree=2.0, rng=1)
>>> list(dag.nodes)
['x0', 'x1', 'x2', 'x3', 'x4']
>>> frame = sample_linear_gaussian(dag, 100, rng=1)
>>> frame.shape
(100, 5)
"""

from __future__ import annotations

import numbers
from collections.abc import Hashable, Mapping

import networkx as nx
import numpy as np
import pandas as pd

from .exceptions import DataValidationError, SettingsError

__all__ = ["random_dag", "add_hidden_causes", "linear_gaussian_weights",
           "sample_linear_gaussian"]


def _as_generator(rng) -> np.random.Generator:
    """Turn an int seed, a Generator or None into a Generator (once, at the top of a call)."""
    try:
        return np.random.default_rng(rng)
    except (TypeError, ValueError):
        raise SettingsError(
            f"`rng` must be a non-negative int seed, a numpy Generator or None; got {rng!r}"
        ) from None


def _check_count(value, name: str, *, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < minimum:
        raise SettingsError(f"`{name}` must be an integer >= {minimum}; got {value!r}")
    return int(value)


def _check_real(value, name: str, *, minimum: float = 0.0) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not (
            np.isfinite(value) and value >= minimum):
        raise SettingsError(f"`{name}` must be a finite number >= {minimum:g}; got {value!r}")
    return float(value)


def _check_dag(dag) -> None:
    if not isinstance(dag, nx.DiGraph):
        raise DataValidationError(
            f"`dag` must be a networkx.DiGraph; got {type(dag).__name__} "
            "(build one with networkx.DiGraph(edges))")
    if not nx.is_directed_acyclic_graph(dag):
        raise DataValidationError(
            f"`dag` has a cycle {nx.find_cycle(dag)}; simulation needs an acyclic graph")


def random_dag(n_nodes: int, *, expected_degree: float = 2.0, rng=None,
               prefix: str = "x") -> nx.DiGraph:
    """Draw an Erdős–Rényi random DAG.

    A random order of the nodes is drawn from `rng`; every pair (earlier, later) in that order is
    an edge earlier → later, independently, with probability ``expected_degree / (n_nodes - 1)``
    (Erdős & Rényi 1959; the design of Kalisch & Bühlmann 2007).

    Parameters
    ----------
    n_nodes : int
        Number of nodes, at least 1.
    expected_degree : float, default 2.0
        Expected number of neighbours (parents plus children) of a node, between 0 and
        ``n_nodes - 1``.
    rng : int, numpy.random.Generator or None
        Source of randomness; the same seed gives the same graph.
    prefix : str, default "x"
        Node names are ``f"{prefix}{i}"``, with ``i`` zero-padded to a common width so that the
        names sort in numeric order (``x00 … x14`` for 15 nodes).

    Returns
    -------
    networkx.DiGraph
        Nodes in name order; edges sorted by (source, target) name. The causal order is random,
        so node names carry no information about it.

    Raises
    ------
    SettingsError
        If `n_nodes` is not a positive integer, if `expected_degree` is negative or larger than
        ``n_nodes - 1`` (an edge probability above 1), or if `rng` is not a seed or Generator.

    Notes
    -----
    The edges are drawn in one vectorised step: the number of edges is Binomial(N, p) over the
    N = n(n-1)/2 ordered pairs, and given that number the edge set is a uniform subset, which is
    the same distribution as N independent coin flips. Memory grows with the number of edges,
    not with N, so thousands of nodes are cheap.

    Examples
    --------
    >>> dag = random_dag(15, rng=0)
    >>> list(dag.nodes)[:3], list(dag.nodes)[-1]
    (['x00', 'x01', 'x02'], 'x14')
    >>> import networkx as nx
    >>> nx.is_directed_acyclic_graph(dag)
    True
    """
    n = _check_count(n_nodes, "n_nodes", minimum=1)
    degree = _check_real(expected_degree, "expected_degree")
    if n > 1 and degree > n - 1:
        raise SettingsError(
            f"`expected_degree` must be at most n_nodes - 1 = {n - 1}; got {expected_degree!r}")
    if not isinstance(prefix, str):
        raise SettingsError(f"`prefix` must be a string; got {prefix!r}")
    gen = _as_generator(rng)

    width = len(str(n - 1))
    names = [f"{prefix}{i:0{width}d}" for i in range(n)]
    dag = nx.DiGraph()
    dag.add_nodes_from(names)
    if n == 1:
        return dag

    order = gen.permutation(n)                      # order[k] is the k-th node in causal order
    n_pairs = n * (n - 1) // 2
    p = degree / (n - 1)
    n_edges = int(gen.binomial(n_pairs, p))
    flat = np.sort(gen.choice(n_pairs, size=n_edges, replace=False)).astype(np.int64)
    # Flat index -> (row i, column j), i < j, of the strict upper triangle in row-major order.
    rows = np.arange(n - 1, dtype=np.int64)
    row_start = rows * (2 * n - rows - 1) // 2
    i = np.searchsorted(row_start, flat, side="right") - 1
    j = flat - row_start[i] + i + 1
    sources, targets = order[i], order[j]
    edges = sorted(zip(sources.tolist(), targets.tolist()))
    dag.add_edges_from((names[s], names[t]) for s, t in edges)
    return dag


def add_hidden_causes(dag: nx.DiGraph, n_hidden: int, *, rng=None,
                      prefix: str = "hidden") -> tuple[nx.DiGraph, list[str]]:
    """A copy of ``dag`` with ``n_hidden`` new common causes, each of two distinct variables
    drawn at random (for studies of the hidden-causes search).

    Returns
    -------
    (networkx.DiGraph, list of str)
        The enlarged DAG and the names of the hidden variables (drop their columns from
        sampled data to hide them).

    Raises
    ------
    SettingsError
        If ``n_hidden`` is negative or ``dag`` has fewer than two nodes.

    Examples
    --------
    >>> dag, hidden = add_hidden_causes(random_dag(5, rng=0), 2, rng=0)
    >>> hidden, [len(list(dag.successors(h))) for h in hidden]
    (['hidden0', 'hidden1'], [2, 2])
    """
    k = _check_count(n_hidden, "n_hidden", minimum=0)
    nodes = sorted(dag.nodes, key=str)
    if k and len(nodes) < 2:
        raise SettingsError("`dag` needs at least two nodes to give them a hidden common cause")
    gen = _as_generator(rng)
    out = dag.copy()
    hidden = []
    for i in range(k):
        name = f"{prefix}{i}"
        a, b = gen.choice(len(nodes), size=2, replace=False)
        out.add_edges_from([(name, nodes[a]), (name, nodes[b])])
        hidden.append(name)
    return out, hidden


def linear_gaussian_weights(dag: nx.DiGraph, *, low: float = 0.5, high: float = 1.5,
                            rng=None) -> dict[tuple[Hashable, Hashable], float]:
    """Draw edge weights for a linear structural model: magnitude uniform, sign random.

    Each weight is ``±U(low, high)`` with either sign equally likely (after Kalisch & Bühlmann
    2007, who used positive weights; random signs avoid a graph in which all correlations are
    positive). Keeping `low` away from 0 keeps every edge detectable.

    Parameters
    ----------
    dag : networkx.DiGraph
        The causal diagram; must be acyclic.
    low, high : float, default 0.5 and 1.5
        Range of the absolute weights, ``0 <= low <= high``.
    rng : int, numpy.random.Generator or None
        Source of randomness.

    Returns
    -------
    dict
        ``{(u, v): weight}`` for every edge ``u -> v``, in the graph's edge order.

    Raises
    ------
    DataValidationError
        If `dag` is not a networkx.DiGraph or has a cycle.
    SettingsError
        If `low` or `high` is negative, not finite, or ``low > high``.

    Examples
    --------
    >>> import networkx as nx
    >>> w = linear_gaussian_weights(nx.DiGraph([("a", "b")]), rng=0)
    >>> 0.5 <= abs(w[("a", "b")]) <= 1.5
    True
    """
    _check_dag(dag)
    low = _check_real(low, "low")
    high = _check_real(high, "high")
    if low > high:
        raise SettingsError(f"`low` ({low:g}) must not exceed `high` ({high:g})")
    gen = _as_generator(rng)
    edges = list(dag.edges)
    magnitude = gen.uniform(low, high, size=len(edges))
    sign = np.where(gen.random(len(edges)) < 0.5, -1.0, 1.0)
    return {edge: float(w) for edge, w in zip(edges, sign * magnitude)}


def _noise_scales(noise_scale, nodes: list, gen: np.random.Generator) -> np.ndarray:
    """Standard deviation of each node's noise, in node order."""
    if isinstance(noise_scale, Mapping):
        missing = [v for v in nodes if v not in noise_scale]
        if missing:
            raise SettingsError(
                f"`noise_scale` has no value for node(s) {missing[:5]}; give one per node")
        scales = np.array([noise_scale[v] for v in nodes], dtype=float) if nodes else np.empty(0)
    elif isinstance(noise_scale, numbers.Real) and not isinstance(noise_scale, bool):
        scales = np.full(len(nodes), float(noise_scale))
    elif (isinstance(noise_scale, (tuple, list)) and len(noise_scale) == 2
          and all(isinstance(s, numbers.Real) and not isinstance(s, bool) for s in noise_scale)):
        low, high = (float(s) for s in noise_scale)
        if not (np.isfinite(low) and np.isfinite(high) and 0 < low <= high):
            raise SettingsError(
                f"`noise_scale` range must satisfy 0 < low <= high; got {noise_scale!r}")
        scales = gen.uniform(low, high, size=len(nodes))
    else:
        raise SettingsError(
            "`noise_scale` must be a number, a (low, high) pair or a {node: scale} mapping; "
            f"got {noise_scale!r}")
    if not np.all(np.isfinite(scales)) or np.any(scales <= 0):
        raise SettingsError(f"`noise_scale` values must be finite and > 0; got {noise_scale!r}")
    return scales


def sample_linear_gaussian(dag: nx.DiGraph, n_rows: int, *,
                           weights: Mapping[tuple[Hashable, Hashable], float] | None = None,
                           noise_scale=(0.5, 1.5), rng=None) -> pd.DataFrame:
    """Sample rows from a linear-Gaussian structural model on `dag`.

    Each variable is the weighted sum of its parents plus independent noise,
    ``X_v = sum_u w_uv X_u + e_v`` with ``e_v ~ N(0, s_v^2)``, computed in topological order
    (Kalisch & Bühlmann 2007). In matrix form, with ``W[u, v] = w_uv`` and one row per sample,
    ``X = E (I - W)^-1``, so ``cov(X) = (I - W)^-T diag(s^2) (I - W)^-1``.

    Parameters
    ----------
    dag : networkx.DiGraph
        The causal diagram; must be acyclic.
    n_rows : int
        Number of rows, at least 1.
    weights : mapping, optional
        ``{(u, v): weight}`` with one finite weight per edge of `dag`. By default drawn with
        :func:`linear_gaussian_weights` (``±U(0.5, 1.5)``) from the same `rng`.
    noise_scale : float, (low, high) or mapping, default (0.5, 1.5)
        Standard deviation of each node's noise: one number for all, a range from which each
        node's is drawn uniformly, or ``{node: scale}`` for every node.
    rng : int, numpy.random.Generator or None
        Source of randomness (weights if drawn, noise scales if drawn, then the noise).

    Returns
    -------
    pandas.DataFrame
        `n_rows` rows, one float64 column per node in the graph's node order, named by node.

    Raises
    ------
    DataValidationError
        If `dag` is not a networkx.DiGraph or has a cycle.
    SettingsError
        If `n_rows` is not a positive integer; if `weights` misses an edge, names a pair that is
        not an edge, or has a non-finite value; if `noise_scale` is not positive.

    Notes
    -----
    The loop over nodes touches only each node's parents, so the cost is about
    ``n_rows * (n_nodes + n_edges)``: 1000 sparse nodes by 5000 rows take well under a second.

    Examples
    --------
    >>> import networkx as nx
    >>> chain = nx.DiGraph([("a", "b"), ("b", "c")])
    >>> frame = sample_linear_gaussian(chain, 5, weights={("a", "b"): 1.0, ("b", "c"): -0.5},
    ...                                noise_scale=1.0, rng=0)
    >>> list(frame.columns), frame.dtypes.unique().tolist()
    (['a', 'b', 'c'], [dtype('float64')])
    """
    _check_dag(dag)
    n = _check_count(n_rows, "n_rows", minimum=1)
    gen = _as_generator(rng)
    if weights is None:
        weights = linear_gaussian_weights(dag, rng=gen)
    elif not isinstance(weights, Mapping):
        raise SettingsError(f"`weights` must be a {{(u, v): weight}} mapping; got {weights!r}")
    else:
        extra = [e for e in weights if not (isinstance(e, tuple) and len(e) == 2
                                            and dag.has_edge(*e))]
        if extra:
            raise SettingsError(
                f"`weights` names pair(s) {extra[:5]} that are not edges of `dag`; remove them")
        missing = [e for e in dag.edges if e not in weights]
        if missing:
            raise SettingsError(
                f"`weights` has no weight for edge(s) {missing[:5]}; give one per edge")
        bad = [e for e in dag.edges if not (isinstance(weights[e], numbers.Real)
                                            and np.isfinite(weights[e]))]
        if bad:
            raise SettingsError(f"`weights` of edge(s) {bad[:5]} must be finite numbers")

    nodes = list(dag.nodes)
    index = {v: k for k, v in enumerate(nodes)}
    scales = _noise_scales(noise_scale, nodes, gen)
    # One row per variable while computing, so that each variable is contiguous in memory.
    values = gen.standard_normal((len(nodes), n))
    values *= scales[:, None]
    for v in nx.topological_sort(dag):
        parents = list(dag.predecessors(v))
        if parents:
            w = np.array([weights[(u, v)] for u in parents], dtype=float)
            values[index[v]] += w @ values[[index[u] for u in parents]]
    return pd.DataFrame(values.T, columns=pd.Index(nodes), dtype=np.float64, copy=True)
