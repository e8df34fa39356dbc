"""Test names, their options, and the factory that builds a test for a table."""

from __future__ import annotations

from ..exceptions import SettingsError
from ._auto import make_auto
from ._fisher_z import FisherZ
from ._g_squared import make_g_squared
from ._kernel import make_kernel_test
from ._mixed import make_mixed

__all__ = ["TEST_NAMES", "TEST_OPTIONS", "make_test"]

# name -> (factory(frame, *, missing, **options), one-line description)
_FACTORIES = {
    "fisher-z": (lambda frame, *, missing="drop", **_: FisherZ(frame, missing=missing),
                 "partial correlation, Fisher's z (linear-Gaussian data)"),
    "kci": (make_kernel_test,
            "kernel test, HSIC / KCI (nonlinear continuous data; low-rank above 500 rows)"),
    "g-squared": (make_g_squared,
                  "G² likelihood ratio, stratified (discrete data: binary, categorical, "
                  "ordinal)"),
    "mixed": (make_mixed,
              "regression likelihood ratio, linear / logistic / multinomial (mixed kinds)"),
    "auto": (make_auto,
             "chooses g-squared, fisher-z, kci or mixed for each test from the column kinds"),
}

#: The test names a user may choose from, with a one-line description each.
TEST_NAMES = {name: desc for name, (_, desc) in _FACTORIES.items()}

_KERNEL_OPTIONS = {
    "seed": "int, default 0: seeds random features and simulated nulls",
    "lowrank_above": "int, default 500: rows above which the low-rank test is used",
    "features": "int, default 10: random Fourier features for x and for y (low-rank)",
    "features_given": "int, default 100: Nyström features for the conditioning set (low-rank)",
    "null": "'gamma' (default) or 'simulated': how the null distribution is approximated",
    "null_samples": "int, default 1000: draws of the simulated null",
    "epsilon": "float, default 1e-3: ridge regulariser of the regression on the set",
}

#: The options (``test_options`` of ``discover``) each test takes, with a one-line help each.
TEST_OPTIONS = {
    "fisher-z": {},
    "kci": dict(_KERNEL_OPTIONS),
    "g-squared": {"min_rows_per_dof": "float, default 5: fewer rows per degree of freedom "
                                      "(counted from the data) and the test is not run",
                  "thin_tests": "'keep-edge' (default): a test too thin to run keeps its edge; "
                                "'independent': the older rule, read as p = 1 (removes edges)"},
    "mixed": {},
    "auto": {"normality_alpha": "float, default 0.01: level of the normality check",
             **_KERNEL_OPTIONS,
             "min_rows_per_dof": "float, default 5: G²'s minimum-rows rule",
             "thin_tests": "'keep-edge' (default) or 'independent': G²'s tests too thin to run"},
}


def make_test(name: str, frame, *, missing: str = "drop", **options):
    """Build the independence test called ``name`` over the columns of ``frame``.

    Parameters
    ----------
    name : str
        One of :data:`TEST_NAMES`.
    frame : pandas.DataFrame
        The usable columns.
    missing : {"drop", "test-wise"}
    **options
        The test's options, listed in :data:`TEST_OPTIONS`.

    Raises
    ------
    SettingsError
        If ``name`` is not one of :data:`TEST_NAMES`, or an option is unknown or out of range.
    DataValidationError
        If the test cannot use a column (text for a numeric test, a continuous column for G²,
        a single level).
    """
    if name not in _FACTORIES:
        raise SettingsError(f"The 'test' parameter must be one of {sorted(_FACTORIES)}; "
                            f"got {name!r} instead.")
    return _FACTORIES[name][0](frame, missing=missing, **options)
