"""Independence tests behind one batch protocol, and the shared p-value cache.

Every test is an :class:`IndependenceTest`: it answers a *batch* of ``(x, y, S)`` triples with
an array of p-values (``pvalues``), or one named test with an :class:`IndependenceResult`
(``test``). :class:`PValueCache` remembers p-values across searches.

Available tests (the names the search, the command line and the window accept):

``fisher-z``
    Partial correlation with Fisher's z transform, for linear-Gaussian data (Fisher 1921).
``d-separation``
    :class:`DSeparationOracle`, answering from a known DAG (validation and teaching).
"""

from ._base import IndependenceResult, IndependenceTest, PValueCache, canonical_triple
from ._fisher_z import FisherZ
from ._oracle import DSeparationOracle
from ._registry import TEST_NAMES, make_test

__all__ = [
    "IndependenceResult",
    "IndependenceTest",
    "PValueCache",
    "canonical_triple",
    "FisherZ",
    "DSeparationOracle",
    "TEST_NAMES",
    "make_test",
]
