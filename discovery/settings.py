"""Search settings, declared once.

:data:`PARAMETERS` is the one constraint table: :class:`SearchSettings` validates against it,
the command line builds its options from it, and the window reads its ranges and choices, so
the three can never disagree.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from numbers import Integral, Real

from .exceptions import SettingsError

__all__ = ["Interval", "Choice", "Flag", "PARAMETERS", "SearchSettings", "COLLIDER_RULES",
           "default_collider_rule",
           "MISSING_POLICIES", "UNRELATED_RULES"]

COLLIDER_RULES = ("standard", "conservative", "majority")
MISSING_POLICIES = ("drop", "test-wise")
UNRELATED_RULES = ("significance", "equivalence")


@dataclass(frozen=True)
class Interval:
    """A numeric range: ``kind`` is int or float; ``None`` bounds are open-ended."""

    kind: type
    low: float | None
    high: float | None
    closed: str = "both"  # "both", "left", "right", "neither"
    allow_none: bool = False
    help: str = ""

    def describe(self) -> str:
        left = "[" if self.closed in ("both", "left") else "("
        right = "]" if self.closed in ("both", "right") else ")"
        lo = "-inf" if self.low is None else f"{self.low:g}"
        hi = "inf" if self.high is None else f"{self.high:g}"
        name = "an int" if self.kind is int else "a float"
        return f"{name} in {left}{lo}, {hi}{right}" + (" or None" if self.allow_none else "")

    def accepts(self, value) -> bool:
        if value is None:
            return self.allow_none
        if isinstance(value, bool):
            return False
        if self.kind is int and not isinstance(value, Integral):
            return False
        if not isinstance(value, Real) or math.isnan(value):
            return False
        if self.low is not None:
            if value < self.low or (value == self.low and self.closed in ("right", "neither")):
                return False
        if self.high is not None:
            if value > self.high or (value == self.high and self.closed in ("left", "neither")):
                return False
        return True


@dataclass(frozen=True)
class Choice:
    """One of a fixed set of strings."""

    options: tuple[str, ...]
    help: str = ""

    def describe(self) -> str:
        return "one of " + ", ".join(repr(o) for o in self.options)

    def accepts(self, value) -> bool:
        return value in self.options


@dataclass(frozen=True)
class Flag:
    """On or off (a bool)."""

    help: str = ""

    def describe(self) -> str:
        return "True or False"

    def accepts(self, value) -> bool:
        return isinstance(value, bool)


def _test_choice() -> Choice:
    from .independence import TEST_NAMES
    return Choice(tuple(TEST_NAMES) + ("d-separation",),
                  "independence test; 'd-separation' needs a DSeparationOracle")


#: The constraint table of the search's settings.
PARAMETERS = {
    "alpha": Interval(float, 0.0, 1.0, "neither",
                      help="significance level: a pair is independent when p > alpha"),
    "max_depth": Interval(int, 0, None, "left", allow_none=True,
                          help="largest conditioning-set size (None: no limit)"),
    "collider_rule": Choice(COLLIDER_RULES, "how unshielded triples are judged colliders"),
    "missing": Choice(MISSING_POLICIES, "drop incomplete rows, or delete test-wise"),
    "hidden_causes": Flag("allow hidden common causes of the measured variables (FCI: the "
                          "result is a partial ancestral graph with circle marks)"),
    "unrelated": Choice(UNRELATED_RULES,
                        "what makes a pair unrelated: 'significance' (p > alpha) or "
                        "'equivalence' (two one-sided tests show the effect within the margin)"),
    "margin": Interval(float, 0.0, 1.0, "neither", allow_none=True,
                       help="equivalence margin: the largest partial correlation still "
                            "called unrelated (with unrelated='equivalence')"),
}


def default_collider_rule(hidden_causes: bool) -> str:
    """The collider rule of a search that was not given one: ``"majority"`` in the
    hidden-causes mode, ``"standard"`` otherwise.

    With hidden causes, the colliders also decide which sets the possible-d-separating-set
    phase tries, so a collider judged from one separating set (the standard rule) makes
    the skeleton depend on which set the adjacency search happened to find first; the
    majority rule (Colombo & Maathuis 2014, "Order-independent constraint-based causal
    structure learning", JMLR 15) removes that dependence and, on finite samples, gives
    fewer false arrowheads (docs/hidden-causes.md, docs/benchmarks.md).
    """
    return "majority" if hidden_causes else "standard"


def check_parameter(name: str, value, *, owner: str = "discover"):
    """Raise SettingsError unless ``value`` satisfies the constraint named ``name``."""
    constraint = _test_choice() if name == "test" else PARAMETERS[name]
    if not constraint.accepts(value):
        raise SettingsError(f"The {name!r} parameter of {owner} must be "
                            f"{constraint.describe()}. Got {value!r} instead.")


@dataclass(frozen=True)
class SearchSettings:
    """Validated settings of one search (frozen).

    Raises
    ------
    SettingsError
        When a value is outside its constraint in :data:`PARAMETERS`.
    """

    test: str = "fisher-z"
    alpha: float = 0.05
    max_depth: int | None = None
    collider_rule: str = "standard"
    missing: str = "drop"
    test_options: tuple = ()  # (name, value) pairs given to the test, sorted by name
    hidden_causes: bool = False
    unrelated: str = "significance"
    margin: float | None = None

    def __post_init__(self):
        options = self.test_options
        if isinstance(options, dict):
            options = options.items()
        try:
            options = tuple(sorted((str(k), v) for k, v in options))
        except (TypeError, ValueError):
            raise SettingsError("The 'test_options' parameter must be a mapping of option "
                                f"names to values. Got {self.test_options!r} instead.") from None
        object.__setattr__(self, "test_options", options)
        # Test names are checked against the registry where a name is turned into a test;
        # here any test object's name is accepted (custom tests have their own).
        if not isinstance(self.test, str) or not self.test:
            raise SettingsError(f"The 'test' parameter must be a test name. Got "
                                f"{self.test!r} instead.")
        for name in ("alpha", "max_depth", "collider_rule", "missing", "hidden_causes",
                     "unrelated", "margin"):
            check_parameter(name, getattr(self, name))
        if self.unrelated == "equivalence" and self.margin is None:
            raise SettingsError("The 'margin' parameter of discover must be a float in (0, 1) "
                                "when unrelated='equivalence' (e.g. margin=0.05). Got None "
                                "instead.")
        if self.margin is not None:
            object.__setattr__(self, "margin", float(self.margin))
        object.__setattr__(self, "alpha", float(self.alpha))
        if self.max_depth is not None:
            object.__setattr__(self, "max_depth", int(self.max_depth))

    def to_dict(self) -> dict:
        out = asdict(self)
        out["test_options"] = dict(self.test_options)
        return out

    @classmethod
    def from_dict(cls, values: dict) -> "SearchSettings":
        known = {k: values[k] for k in ("test", "alpha", "max_depth", "collider_rule",
                                        "missing", "test_options", "hidden_causes",
                                        "unrelated", "margin")
                 if k in values}
        return cls(**known)
