"""Pieces shared by the sweep and the support analyses: mark texts, safe CSV cells, checks."""

from __future__ import annotations

import csv
import io
import math

from ..exceptions import SettingsError

_LEFT = {"tail": "–", "arrow": "←", "circle": "o"}
_RIGHT = {"tail": "–", "arrow": "→", "circle": "o"}


def mark_text(edge, a: str, b: str) -> str:
    """The edge between ``a`` and ``b`` as text read from ``a`` to ``b``, from its end marks:
    ``a → b``, ``a ← b``, ``a — b``, ``a ↔ b``, ``a o→ b`` …; a contested edge reads
    ``a ?– b (contested)``."""
    if edge.kind == "contested":
        return f"{a} ?– {b} (contested)"
    at_a, at_b = ((edge.from_mark, edge.to_mark) if edge.source == a
                  else (edge.to_mark, edge.from_mark))
    if at_a == "tail" and at_b == "tail":
        glyph = "—"
    elif at_a == "arrow" and at_b == "arrow":
        glyph = "↔"
    elif at_a == "tail":
        glyph = _RIGHT[at_b] if at_b == "arrow" else "–" + _RIGHT[at_b]
    elif at_b == "tail":
        glyph = _LEFT[at_a] if at_a == "arrow" else _LEFT[at_a] + "–"
    else:
        glyph = _LEFT[at_a] + _RIGHT[at_b]
    return f"{a} {glyph} {b}"


def orientation_of(edge, a: str, b: str) -> str:
    """``"a_to_b"``, ``"b_to_a"``, ``"contested"``, or ``"undirected"`` (no arrowhead at
    either end, or any other mark pattern such as a circle end)."""
    if edge.kind == "contested":
        return "contested"
    at_a, at_b = ((edge.from_mark, edge.to_mark) if edge.source == a
                  else (edge.to_mark, edge.from_mark))
    if at_a == "tail" and at_b == "arrow":
        return "a_to_b"
    if at_a == "arrow" and at_b == "tail":
        return "b_to_a"
    return "undirected"


def safe_cell(value) -> str:
    """A CSV cell that a spreadsheet will not run as a formula (no leading = + - @, tab or
    carriage return; OWASP's advice on CSV injection)."""
    if value is None:
        return ""
    if isinstance(value, float):
        text = "" if math.isnan(value) else f"{value:.6g}"
    else:
        text = str(value)
    if text and (text[0] in "=+-@\t\r"):
        text = "'" + text
    return text


def csv_text(header, rows) -> str:
    """CSV text of a header and rows, every cell through :func:`safe_cell`."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow([safe_cell(h) for h in header])
    for row in rows:
        writer.writerow([safe_cell(v) for v in row])
    return out.getvalue()


def check_ladder(values, name: str, *, owner: str = "sweep") -> tuple[float, ...]:
    """A ladder of thresholds: non-empty, increasing, every value in (0, 1).

    Raises
    ------
    SettingsError
        With one line naming the problem and the value.
    """
    try:
        ladder = tuple(float(v) for v in values)
    except (TypeError, ValueError):
        raise SettingsError(f"The {name!r} parameter of {owner} must be a list of numbers in "
                            f"(0, 1). Got {values!r} instead.") from None
    if not ladder:
        raise SettingsError(f"The {name!r} parameter of {owner} is empty; give at least one "
                            "value in (0, 1), e.g. 0.01,0.05")
    for v in ladder:
        if not (0.0 < v < 1.0):
            raise SettingsError(f"The {name!r} parameter of {owner} must hold values in "
                                f"(0, 1). Got {v:g} instead.")
    for low, high in zip(ladder, ladder[1:]):
        if not low < high:
            raise SettingsError(f"The {name!r} parameter of {owner} must be strictly "
                                f"increasing. Got {low:g} before {high:g}; sort the values and "
                                "drop repeats.")
    return ladder
