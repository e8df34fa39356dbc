"""Which edges survive: threshold sweeps, resampling support, and "unrelated" by effect size.

- :func:`sweep` repeats the search over a ladder of α (or of the equivalence margin δ) and
  gives every edge its **survival range** (:mod:`._sweep`).
- :func:`support` searches resampled copies of the data (bootstrap or subsampling) and gives
  every pair the share of resamples in which it is adjacent and in each orientation, with a
  consensus diagram (:mod:`._support`).
- ``discover(..., unrelated="equivalence", margin=δ)`` calls a pair unrelated only when two
  one-sided tests show its effect lies within ±δ (:mod:`._equivalence`).

Each analysis returns an immutable record with ``to_dict()``, ``to_csv()``, ``as_text()`` and
``figure()`` (matplotlib, imported only when a figure is drawn); they carry the search's
assumptions and cautions.
"""

from ._equivalence import (EQUIVALENCE_TESTS, EquivalenceTest, fisher_z_equivalence_pvalue,
                           g_squared_equivalence_pvalue)
from ._support import SUPPORT_METHODS, PairSupport, SupportResult, support
from ._sweep import DEFAULT_ALPHAS, EdgeSurvival, SweepResult, sweep

__all__ = ["sweep", "SweepResult", "EdgeSurvival", "DEFAULT_ALPHAS",
           "support", "SupportResult", "PairSupport", "SUPPORT_METHODS",
           "EquivalenceTest", "fisher_z_equivalence_pvalue", "g_squared_equivalence_pvalue",
           "EQUIVALENCE_TESTS"]
