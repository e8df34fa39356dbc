"""Effect ranges: what the data say about an effect when the diagram is known only up to its
class.

In a linear model the total effect of ``x`` on ``y`` is the coefficient of ``x`` when ``y`` is
regressed on ``x`` and the parents of ``x`` (zero when ``y`` is itself a parent of ``x``). A
CPDAG leaves some edges at ``x`` undirected, so the parents of ``x`` are not known; but only a
few parent sets are possible: the directed parents plus a subset of the undirected neighbours
that orients into ``x`` without a new collider. Each possible parent set gives one estimate;
together they are the *effect range* (intervention calculus when the DAG is unknown, IDA,
Maathuis, Kalisch & Bühlmann 2009, local version). With knowledge (a maximally oriented PDAG)
only parent sets that some member of the class allows are kept (checked globally, as
Perković, Kalisch & Maathuis 2017 advise for such graphs).

The range is honest about what the data cannot decide: when it contains both zero and large
values, the data alone do not say whether the treatment matters. The estimates assume linear
effects and the diagram class being right.

References
----------
.. [1] Maathuis, M. H., Kalisch, M. & Bühlmann, P. (2009). Estimating high-dimensional
   intervention effects from observational data. *Annals of Statistics* 37(6A), 3133–3164.
.. [2] Perković, E., Kalisch, M. & Maathuis, M. H. (2017). Interpreting and using CPDAGs with
   background knowledge. *Proceedings of UAI 2017*.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from itertools import combinations

import numpy as np
import pandas as pd

from ..result import ASSUMPTIONS
from ._adjustment import CONTROL_CAUTIONS, control_sets
from ._graph import ControlSetError, extend_to_dag, marked_graph

__all__ = ["effect_range", "EffectRange", "Effect", "estimate_effect", "EffectEstimate",
           "draw_effect_range"]

#: At most this many undirected neighbours of the treatment are enumerated (2**k subsets).
_MAX_SIBLINGS = 16


@dataclass(frozen=True)
class Effect:
    """One possible effect: the estimate when ``parents`` are the treatment's parents."""

    parents: tuple
    estimate: float
    se: float
    rows: int

    def to_dict(self) -> dict:
        return {"parents": list(self.parents), "estimate": self.estimate, "se": self.se,
                "rows": self.rows}


@dataclass(frozen=True)
class EffectEstimate:
    """The effect estimated by adjusting for one control set (OLS), with its interval.

    Attributes
    ----------
    treatment, outcome : str
    controls : tuple of str
    estimate, se : float
    ci : (float, float)
        The ``level`` confidence interval (normal approximation of the OLS t interval).
    level : float
    rows : int
        Rows used (complete in the treatment, outcome and controls).
    valid : bool or None
        Whether the set is valid for the diagram (None when no diagram was given).
    reason : str
    """

    treatment: str
    outcome: str
    controls: tuple
    estimate: float
    se: float
    ci: tuple
    level: float
    rows: int
    valid: bool | None = None
    reason: str = ""

    def to_dict(self) -> dict:
        return {"treatment": self.treatment, "outcome": self.outcome,
                "controls": list(self.controls), "estimate": self.estimate, "se": self.se,
                "ci": list(self.ci), "level": self.level, "rows": self.rows,
                "valid": self.valid, "reason": self.reason}

    def as_text(self) -> str:
        pct = f"{100 * self.level:g}%"
        text = (f"effect of {self.treatment} on {self.outcome} adjusting for "
                f"{_set(self.controls)}: {self.estimate:.4g} (SE {self.se:.3g}; {pct} CI "
                f"{self.ci[0]:.4g} to {self.ci[1]:.4g}; {self.rows} rows)")
        if self.valid is False:
            text += (f" — this set is NOT valid for the diagram, so the estimate may be "
                     f"biased: {self.reason}")
        return text


@dataclass(frozen=True)
class EffectRange:
    """The possible effects of the treatment on the outcome (see the module notes).

    Attributes
    ----------
    treatment, outcome : str
    effects : tuple of Effect
        One per possible parent set of the treatment, smallest sets first.
    min, max : float
    share_zero : float
        Share of the possible effects that are zero or whose confidence interval (at
        ``level``) includes zero.
    level : float
    chosen : EffectEstimate or None
        The estimate for the control set passed as ``controls``.
    notes, cautions : tuple of str
    """

    treatment: str
    outcome: str
    effects: tuple
    min: float
    max: float
    share_zero: float
    level: float = 0.95
    chosen: EffectEstimate | None = None
    notes: tuple = ()
    cautions: tuple = CONTROL_CAUTIONS

    def to_dict(self) -> dict:
        return {"treatment": self.treatment, "outcome": self.outcome,
                "effects": [e.to_dict() for e in self.effects], "min": self.min,
                "max": self.max, "share_zero": self.share_zero, "level": self.level,
                "chosen": None if self.chosen is None else self.chosen.to_dict(),
                "notes": list(self.notes), "cautions": list(self.cautions)}

    def as_text(self) -> str:
        lines = [f"Possible effects of {self.treatment} on {self.outcome} "
                 f"(one per possible parent set of {self.treatment}; linear model):"]
        for e in self.effects:
            lines.append(f"  parents {_set(e.parents):<28} {e.estimate:>10.4g}  (SE "
                         f"{e.se:.3g})")
        lines.append(f"  range {self.min:.4g} to {self.max:.4g}; "
                     f"{100 * self.share_zero:.0f}% of them zero or not distinguishable "
                     f"from zero at {100 * self.level:g}%")
        if self.chosen is not None:
            lines.append("  " + self.chosen.as_text())
        lines += [f"Note: {n}" for n in self.notes]
        return "\n".join(lines)

    def figure(self, **kwargs):
        """The chart (a matplotlib Figure); see :func:`draw_effect_range`."""
        return draw_effect_range(self, **kwargs)


def _set(s) -> str:
    return "{" + ", ".join(sorted(s)) + "}"


def _frame(data, columns, what="data") -> pd.DataFrame:
    frame = getattr(data, "frame", data)
    if not isinstance(frame, pd.DataFrame):
        raise ControlSetError(f"the data must be a pandas DataFrame or a Dataset; got "
                              f"{type(data).__name__}")
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise ControlSetError(f"the {what} has no column {', '.join(map(repr, missing))}; "
                              "use the data the diagram was found from")
    sub = frame[list(columns)]
    text = [c for c in columns if not pd.api.types.is_numeric_dtype(sub[c])
            or pd.api.types.is_bool_dtype(sub[c])]
    if text:
        raise ControlSetError(f"column {text[0]!r} is not numeric; linear effect estimates "
                              "need numeric columns")
    return sub.dropna().astype(float)


def _ols(frame: pd.DataFrame, x: str, y: str, controls) -> tuple[float, float, int, float]:
    """Coefficient of x, its standard error, rows and residual degrees of freedom."""
    import statsmodels.api as sm
    cols = [x] + sorted(controls)
    design = sm.add_constant(frame[cols].to_numpy(), has_constant="add")
    n, p = design.shape
    if n <= p:
        raise ControlSetError(f"{n} complete rows are too few to regress {y!r} on {x!r} and "
                              f"{len(cols) - 1} control(s)")
    fit = sm.OLS(frame[y].to_numpy(), design).fit()
    return float(fit.params[1]), float(fit.bse[1]), n, float(fit.df_resid)


def estimate_effect(data, treatment: str, outcome: str, controls=(), *,
                    level: float = 0.95, graph=None) -> EffectEstimate:
    """The effect of ``treatment`` on ``outcome`` adjusting for ``controls`` (OLS,
    statsmodels), with a ``level`` confidence interval.

    Parameters
    ----------
    data : pandas.DataFrame or Dataset
    treatment, outcome : str
    controls : iterable of str
    level : float in (0, 1)
    graph : SearchResult or networkx.DiGraph, optional
        When given, the set is also checked against it (``valid`` and ``reason``).

    Raises
    ------
    ControlSetError
        If a column is missing or not numeric, the controls contain the treatment or outcome,
        there are too few rows, or ``level`` is not in (0, 1).
    """
    from scipy import stats
    if not 0 < level < 1:
        raise ControlSetError(f"the confidence level must be in (0, 1); got {level}")
    controls = tuple(sorted({controls} if isinstance(controls, str) else set(controls)))
    valid, reason = None, ""
    if graph is not None:
        verdict = control_sets(graph, treatment, outcome).check(controls)
        valid, reason = verdict.valid, verdict.reason
    elif treatment in controls or outcome in controls:
        raise ControlSetError("the control set contains the treatment or the outcome; a "
                              "control set holds other variables only")
    if treatment == outcome:
        raise ControlSetError(f"the treatment and the outcome are both {treatment!r}")
    frame = _frame(data, [treatment, outcome, *controls])
    est, se, n, df = _ols(frame, treatment, outcome, controls)
    q = float(stats.t.ppf(0.5 + level / 2, df))
    return EffectEstimate(treatment, outcome, controls, est, se, (est - q * se, est + q * se),
                          level, n, valid, reason)


def _possible_parent_sets(g, x):
    """The parent sets of x that some member of the class has (Maathuis et al. 2009; with
    knowledge each candidate is checked for a consistent member)."""
    parents = sorted(g.parents(x), key=str)
    sibs = sorted(g.siblings(x), key=str)
    if len(sibs) > _MAX_SIBLINGS:
        raise ControlSetError(f"{x!r} has {len(sibs)} undirected neighbours; the effect range "
                              f"enumerates at most {_MAX_SIBLINGS} (2^k parent sets)")
    directed = [(u, v) for u in g.nodes for v in g.mark[u] if g.directed(u, v)]
    undirected = {frozenset((u, v)) for u in g.nodes for v in g.mark[u] if g.undirected(u, v)}
    out = []
    for k in range(len(sibs) + 1):
        for s in combinations(sibs, k):
            into = set(parents) | set(s)
            # no new collider at x: every two new parents adjacent, and to the old ones
            if any(not g.adjacent(a, b) for a, b in combinations(sorted(into, key=str), 2)
                   if a in s or b in s):
                continue
            if g.kind == "pdag" and not g.contested:
                away = [w for w in sibs if w not in s]
                # no new collider at a neighbour now pointed into: x → w ← u, u not adj x
                if any(not g.adjacent(u, x) and u != x for w in away for u in g.parents(w)):
                    continue
                d2 = directed + [(v, x) for v in s] + [(x, w) for w in away]
                u2 = {e for e in undirected if x not in e}
                if extend_to_dag(g.nodes, d2, u2) is None:
                    continue
            out.append(tuple(sorted(into, key=str)))
    return out


def effect_range(graph, data, treatment: str, outcome: str, *, controls=None,
                 level: float = 0.95) -> EffectRange:
    """The possible effects of ``treatment`` on ``outcome``: one per possible parent set of
    the treatment (IDA, Maathuis, Kalisch & Bühlmann 2009), each an OLS estimate with its
    standard error.

    Parameters
    ----------
    graph : SearchResult or networkx.DiGraph
        A CPDAG, a maximally oriented PDAG (result found with knowledge) or a DAG.
    data : pandas.DataFrame or Dataset
        The data, with a numeric column for the treatment, the outcome and its neighbours.
    treatment, outcome : str
    controls : iterable of str, optional
        Also estimate the effect adjusting for this set (``.chosen``), checked for validity.
    level : float
        Confidence level for ``share_zero`` and the chosen set's interval.

    Returns
    -------
    EffectRange

    Raises
    ------
    ControlSetError
        If the graph is a PAG (hidden causes), the treatment or outcome is unknown or the
        same, a column is missing or not numeric, or there are too few rows.
    """
    from scipy import stats
    g = marked_graph(graph)
    if g.kind == "pag":
        raise ControlSetError("the effect range needs a diagram without hidden causes (a "
                              "CPDAG, PDAG or DAG); for a PAG use the control sets and "
                              "estimate with a valid set")
    for role, v in (("treatment", treatment), ("outcome", outcome)):
        if v not in g.mark:
            raise ControlSetError(f"the {role} {v!r} is not a variable of the diagram")
    if treatment == outcome:
        raise ControlSetError(f"the treatment and the outcome are both {treatment!r}; choose "
                              "two different variables")
    if not 0 < level < 1:
        raise ControlSetError(f"the confidence level must be in (0, 1); got {level}")
    g.member()  # raises when the class is not valid
    sets = _possible_parent_sets(g, treatment)
    needed = sorted({treatment, outcome} | {v for s in sets for v in s}, key=str)
    frame = _frame(data, needed)
    effects = []
    for parents in sets:
        if outcome in parents:
            effects.append(Effect(parents, 0.0, 0.0, len(frame)))
            continue
        est, se, n, _ = _ols(frame, treatment, outcome, parents)
        effects.append(Effect(parents, est, se, n))
    q = float(stats.norm.ppf(0.5 + level / 2))
    zero = sum(1 for e in effects if abs(e.estimate) <= q * e.se)
    notes = []
    if len(frame) < len(getattr(data, "frame", data)):
        notes.append(f"{len(getattr(data, 'frame', data)) - len(frame)} rows with missing "
                     "values left out")
    if len(effects) > 1:
        notes.append(f"the class allows {len(effects)} parent sets of {treatment}: the data "
                     "cannot say which is right, so every value in the range is possible")
    chosen = None
    if controls is not None:
        chosen = estimate_effect(data, treatment, outcome, controls, level=level, graph=graph)
    estimates = [e.estimate for e in effects]
    return EffectRange(treatment, outcome, tuple(effects), float(min(estimates)),
                       float(max(estimates)), zero / len(effects), level, chosen, tuple(notes))


def draw_effect_range(record: EffectRange, path=None, *, ax=None):
    """A dot-and-whisker chart of the possible effects (and of the chosen set's estimate).

    Parameters
    ----------
    record : EffectRange
    path : str or os.PathLike, optional
        PNG, SVG or PDF file to write (atomically).
    ax : matplotlib Axes, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.figure import Figure
    from scipy import stats
    slate, teal, amber = "#44505C", "#1F6F78", "#F2B134"
    rows = [(f"parents {_set(e.parents)}", e.estimate, e.se, slate) for e in record.effects]
    if record.chosen is not None:
        c = record.chosen
        rows.append((f"chosen {_set(c.controls)}", c.estimate, c.se, teal))
    if ax is None:
        fig = Figure(figsize=(6.0, 1.2 + 0.32 * len(rows)), facecolor="#F7F6F3")
        ax = fig.add_subplot(1, 1, 1)
    else:
        fig = ax.figure
    q = float(stats.norm.ppf(0.5 + record.level / 2))
    ys = np.arange(len(rows))[::-1]
    for yy, (label, est, se, colour) in zip(ys, rows):
        ax.plot([est - q * se, est + q * se], [yy, yy], color=colour, lw=1.6)
        ax.plot([est], [yy], "o", color=colour, ms=6)
    ax.axvline(0.0, color=amber, lw=1.2, ls="--")
    ax.set_yticks(ys)
    ax.set_yticklabels([r[0] for r in rows], fontsize=8)
    ax.set_ylim(-0.7, len(rows) - 0.3)
    ax.set_xlabel(f"effect of {record.treatment} on {record.outcome}", fontsize=8)
    ax.tick_params(axis="x", labelsize=8)
    ax.set_facecolor("#FFFFFF")
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    fig.text(0.01, 0.01, f"Bars: {100 * record.level:g}% intervals. Valid only if the diagram "
             "class is right and effects are linear.", fontsize=6.5, color=slate)
    fig.tight_layout(rect=(0, 0.05, 1, 1))
    if path is not None:
        from pathlib import Path
        from ..files import atomic_write
        fmt = Path(path).suffix.lower().lstrip(".") or "png"
        if fmt not in ("png", "svg", "pdf"):
            raise ControlSetError(f"{path}: the chart can be written as .png, .svg or .pdf")
        with atomic_write(path) as tmp:
            fig.savefig(tmp, format=fmt, dpi=150, facecolor=fig.get_facecolor())
    return fig
