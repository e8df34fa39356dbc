"""Independence tests behind one batch protocol, and the shared p-value cache.

Every test is an :class:`IndependenceTest`: it answers a *batch* of ``(x, y, S)`` triples with
an array of p-values (``pvalues``), or one named test with an :class:`IndependenceResult`
(``test``). :class:`PValueCache` remembers p-values across searches.

Available tests (the names the search, the command line and the window accept):

``fisher-z``
    Partial correlation with Fisher's z transform, for linear-Gaussian data (Fisher 1921).
``kci``
    :class:`KernelCI`: HSIC for ``x ⟂ y`` (Gretton et al. 2008) and KCI for ``x ⟂ y | S``
    (Zhang et al. 2011), Gaussian kernels with median-heuristic widths; exact up to 500 rows,
    low-rank random features above (Rahimi & Recht 2007; Strobl, Zhang & Visweswaran 2019).
``g-squared``
    :class:`GSquared`: the G² likelihood-ratio test for discrete data, stratified over the
    conditioning set, with a minimum-rows rule (Spirtes, Glymour & Scheines 2000).
``mixed``
    :class:`MixedLR`: likelihood ratio of linear / logistic / multinomial regressions, both
    ways, the larger p-value (Tsagris et al. 2018), for tables of mixed kinds.
``auto``
    :class:`AutoTest`: chooses one of the above for each test from the columns' kinds and a
    normality check, and records why.
``d-separation``
    :class:`DSeparationOracle`, answering from a known DAG (validation and teaching).

:data:`TEST_OPTIONS` lists the options each test takes (``discover(..., test_options=...)``).
"""

from ._base import IndependenceResult, IndependenceTest, PValueCache, canonical_triple
from ._fisher_z import FisherZ
from ._oracle import DSeparationOracle
from ._auto import AutoTest
from ._g_squared import GSquared
from ._kernel import KernelCI
from ._mixed import MixedLR
from ._registry import TEST_NAMES, TEST_OPTIONS, make_test

__all__ = [
    "IndependenceResult",
    "IndependenceTest",
    "PValueCache",
    "canonical_triple",
    "FisherZ",
    "DSeparationOracle",
    "KernelCI",
    "GSquared",
    "MixedLR",
    "AutoTest",
    "TEST_NAMES",
    "TEST_OPTIONS",
    "make_test",
]
