"""Test names and the factory that builds a test for a table."""

from __future__ import annotations

from ..exceptions import SettingsError
from ._fisher_z import FisherZ

__all__ = ["TEST_NAMES", "make_test"]

# name -> (factory(frame, *, missing, **options), one-line description)
_FACTORIES = {
    "fisher-z": (lambda frame, *, missing="drop", **_: FisherZ(frame, missing=missing),
                 "partial correlation, Fisher's z (linear-Gaussian data)"),
}

#: The test names a user may choose from, with a one-line description each.
TEST_NAMES = {name: desc for name, (_, desc) in _FACTORIES.items()}


def make_test(name: str, frame, *, missing: str = "drop", **options):
    """Build the independence test called ``name`` over the columns of ``frame``.

    Raises
    ------
    SettingsError
        If ``name`` is not one of :data:`TEST_NAMES`.
    """
    if name not in _FACTORIES:
        raise SettingsError(f"The 'test' parameter must be one of {sorted(_FACTORIES)}; "
                            f"got {name!r} instead.")
    return _FACTORIES[name][0](frame, missing=missing, **options)
