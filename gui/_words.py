"""Plain words for the window: readable test names, and the engine's messages told in terms
of the window's controls.

The engine speaks to the command line: its messages say "exclude it with --columns" or
"lower --max-depth". In the window there are no options to type; :func:`window_words` turns
each option into the control that does the same thing ("untick it in the Variables panel",
"the Depth box"). Options the window has no control for yet are named as the command line's
and said to be so, rather than dropped. Qt-free.
"""

from __future__ import annotations

import re

__all__ = ["TEST_LABELS", "test_label", "window_words"]

#: Readable names of the independence tests; the identifier stays in the tooltip.
TEST_LABELS = {
    "fisher-z": "Linear (partial correlation)",
    "kci": "Nonlinear (kernel)",
    "g-squared": "Discrete (G² counts)",
    "mixed": "Mixed kinds (regression)",
    "auto": "Automatic (by column kinds)",
}


def test_label(name: str) -> str:
    """The readable name of a test identifier (the identifier itself when it has none)."""
    return TEST_LABELS.get(name, name)


# whole phrases first (so that the sentence still reads), then single options
_PHRASES = (
    (r"exclude (it|them) with --columns(?: or --exclude)?",
     lambda m: f"untick {m.group(1)} in the Variables panel"),
    (r"(?:e\.g\. )?(?:with|using) --(?:columns|exclude)(?: or --(?:columns|exclude))?",
     lambda m: "by unticking it in the Variables panel"),
    (r"\(--(?:columns|exclude) or --(?:columns|exclude)\)",
     lambda m: "(untick them in the Variables panel)"),
    (r"--(?:columns|exclude) or --(?:columns|exclude)",
     lambda m: "the include ticks of the Variables panel"),
    (r"lower --max-depth to (\d+)", lambda m: f"set the Depth box to {m.group(1)}"),
    (r"--test ([a-z-]+)", lambda m: f"the Test choice “{test_label(m.group(1))}”"),
    (r"--alpha ([0-9.eE-]+)", lambda m: f"α {m.group(1)} in the α box"),
)

_CONTROLS = {
    "columns": "the include ticks of the Variables panel",
    "exclude": "the include ticks of the Variables panel",
    "max-depth": "the Depth box",
    "depth": "the Depth box",
    "test": "the Test choice",
    "alpha": "the α box",
    "collider-rule": "the Colliders choice",
    "knowledge": "File → Load knowledge…",
    "missing": "the missing-values choice of the Variables panel",
}

_JOINING_WORDS = {"or", "and", "to", "with", "for", "in", "of", "is", "are"}
_OPTION = re.compile(r"`?--([a-z][a-z-]*)`?((?: [^\s,;:)]+)?)")


def window_words(message: str) -> str:
    """``message`` with command-line options replaced by the window's controls.

    Options without a control in the window are kept, marked as the command line's.

    Examples
    --------
    >>> window_words("column 'x' holds text; exclude it with --columns")
    "column 'x' holds text; untick it in the Variables panel"
    >>> window_words("lower --max-depth to 3 or less, or add rows")
    'set the Depth box to 3 or less, or add rows'
    """
    text = str(message)
    for pattern, replace in _PHRASES:
        text = re.sub(pattern, replace, text)

    def option(m):
        name, value = m.group(1), m.group(2)
        if value.strip() in _JOINING_WORDS:  # "--columns or ...": a word of the sentence
            return (_CONTROLS.get(name) or f"the command line's option --{name} (not in the "
                    "window yet)") + value
        if name in _CONTROLS:
            return _CONTROLS[name]
        return f"the command line's option --{name}{value} (not in the window yet)"
    return _OPTION.sub(option, text)
