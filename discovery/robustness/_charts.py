"""Charts of the sweep and of resampling support (matplotlib Figures, no pyplot).

Both use Edgewise's colours: slate marks on the warm light-grey canvas, contested marks in
brick red, and a footer with a one-line caution.
"""

from __future__ import annotations

from pathlib import Path

from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from ..exceptions import DiscoveryError
from ..io import BRICK, CANVAS, SLATE, TEAL

__all__ = ["sweep_figure", "support_figure", "save_figure"]

CHART_CAUTION = ("Hypotheses from data, sound only under stated assumptions (no hidden common "
                 "causes, no feedback, faithfulness); weigh with study design and expertise.")
_FORMATS = {".png": "png", ".svg": "svg", ".pdf": "pdf"}
_PALE = "#D9D6CF"


def _glyph(mark: str, a: str, b: str) -> str:
    """The middle of a mark text ``a → b`` (the arrow only)."""
    middle = mark[len(a) + 1:len(mark) - len(b) - 1] if mark.endswith(b) else mark
    return "?" if "contested" in mark else middle.strip()


def sweep_figure(result, *, current: float | None = None, max_pairs: int = 60) -> Figure:
    """Pairs (rows) against the ladder (log axis): a pale bar over each survival range and
    the edge's mark at each rung where it is present; ``current`` draws a teal line."""
    edges = list(result.edges)[:max_pairs]
    ladder = list(result.ladder)
    height = 1.6 + 0.32 * max(len(edges), 1)
    fig = Figure(figsize=(8.0, height), facecolor=CANVAS)
    FigureCanvasAgg(fig)
    ax = fig.add_axes([0.24, 0.9 / height + 0.05, 0.72, 1 - (1.45 / height)])
    ax.set_facecolor(CANVAS)
    ax.set_xscale("log")
    for row, e in enumerate(edges):
        y = len(edges) - 1 - row
        for low, high in e.survival:
            ax.plot([low, high], [y, y], color=_PALE, linewidth=9, solid_capstyle="round",
                    zorder=1)
        for value, mark in zip(ladder, e.marks):
            if mark is None:
                continue
            glyph = _glyph(mark, e.a, e.b)
            ax.text(value, y, glyph, ha="center", va="center", fontsize=10,
                    color=BRICK if glyph == "?" else SLATE, zorder=3,
                    fontweight="bold" if glyph == "?" else "normal")
    ax.set_yticks(range(len(edges)))
    ax.set_yticklabels([f"{e.a} · {e.b}" for e in reversed(edges)], fontsize=8, color=SLATE)
    ax.set_ylim(-0.7, max(len(edges), 1) - 0.3)
    pad = (ladder[-1] / ladder[0]) ** 0.06 if len(ladder) > 1 else 1.5
    ax.set_xlim(ladder[0] / pad, ladder[-1] * pad)
    ax.set_xticks(ladder)
    ax.set_xticklabels([f"{v:.2g}" for v in ladder], fontsize=7, rotation=45, color=SLATE)
    ax.minorticks_off()
    symbol = "margin δ" if result.parameter == "margin" else "significance level α"
    ax.set_xlabel(symbol + " (marks read from the left name to the right one; ? contested)",
                  fontsize=8, color=SLATE)
    if current is not None:
        ax.axvline(current, color=TEAL, linewidth=1.4, zorder=2)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.set_title("Survival sweep: where each edge is present", fontsize=10, color=SLATE,
                 loc="left")
    more = len(result.edges) - len(edges)
    foot = CHART_CAUTION + (f" ({more} more pairs not shown)" if more > 0 else "")
    fig.text(0.01, 0.012, foot, fontsize=6.5, color=SLATE, wrap=True)
    return fig


def support_figure(result, *, max_pairs: int = 60) -> Figure:
    """Pairs (rows) with a stacked bar of their support split by orientation; a teal line at
    the consensus cut-off."""
    pairs = list(result.pairs)[:max_pairs]
    height = 1.7 + 0.3 * max(len(pairs), 1)
    fig = Figure(figsize=(8.0, height), facecolor=CANVAS)
    FigureCanvasAgg(fig)
    ax = fig.add_axes([0.24, 1.0 / height + 0.05, 0.72, 1 - (1.6 / height)])
    ax.set_facecolor(CANVAS)
    colours = {"a_to_b": SLATE, "b_to_a": "#7A8794", "undirected": "#B9C0C7",
               "contested": BRICK}
    labels = {"a_to_b": "left → right", "b_to_a": "left ← right", "undirected": "undirected",
              "contested": "contested"}
    ys = [len(pairs) - 1 - i for i in range(len(pairs))]
    left = [0.0] * len(pairs)
    for key in ("a_to_b", "b_to_a", "undirected", "contested"):
        widths = [getattr(p, key) for p in pairs]
        ax.barh(ys, widths, left=left, height=0.62, color=colours[key], label=labels[key])
        left = [l + w for l, w in zip(left, widths)]
    ax.axvline(result.cutoff, color=TEAL, linewidth=1.4)
    ax.set_xlim(0, 1.0)
    ax.set_yticks(ys)
    ax.set_yticklabels([f"{p.a} · {p.b}" for p in pairs], fontsize=8, color=SLATE)
    ax.set_ylim(-0.7, max(len(pairs), 1) - 0.3)
    ax.set_xlabel(f"share of {result.resamples} {result.method} resamples (line: consensus "
                  f"cut-off {result.cutoff:g})", fontsize=8, color=SLATE)
    ax.legend(fontsize=7, loc="lower right", frameon=False, ncol=2)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    title = "Resampling support of each pair"
    if result.false_edges_bound is not None:
        title += f" (expected false pairs ≤ {result.false_edges_bound:.2g})"
    ax.set_title(title, fontsize=10, color=SLATE, loc="left")
    fig.text(0.01, 0.012, CHART_CAUTION, fontsize=6.5, color=SLATE, wrap=True)
    return fig


def save_figure(fig: Figure, path) -> None:
    """Write a figure (PNG, SVG or PDF, by the file's extension) atomically."""
    from ..files import atomic_write
    path = Path(path)
    fmt = _FORMATS.get(path.suffix.lower())
    if fmt is None:
        raise DiscoveryError(f"{path}: a figure file must end in .png, .svg or .pdf")
    with atomic_write(path) as tmp:
        fig.savefig(tmp, format=fmt, dpi=150, facecolor=fig.get_facecolor())
