"""Edgewise's engine: from a table of measurements to an equivalence class of causal diagrams.

Concepts
--------
Two variables that are independent given some others (their *separating set*) are not
directly linked; two independent causes of a common effect become dependent once the effect is
conditioned on (a *collider*). From such patterns, a PC-style search (Spirtes, Glymour &
Scheines 2000) recovers the *equivalence class* of diagrams that fit the data: edges whose
direction the data fix are directed, the rest stay undirected (a CPDAG).

The search is sound only under causal sufficiency, acyclicity, faithfulness, i.i.d. rows and an
independence test that fits the data; its output is a set of hypotheses to weigh with study
design and domain expertise (see ``discovery.result.ASSUMPTIONS``).

Examples
--------
>>> import networkx as nx
>>> from discovery import discover
>>> from discovery.independence import DSeparationOracle
>>> result = discover(None, test=DSeparationOracle(nx.DiGraph([("a", "c"), ("b", "c")])))
>>> [e.arrow() for e in result.edges]
['a → c', 'b → c']

This package never imports Qt.
"""

__version__ = "0.1.0"

from .data import Dataset, check_for_search, column_kind, prepare_frame, read_table
from .exceptions import (DataValidationError, DegenerateDataWarning, DiscoveryError,
                         KnowledgeError, ResourceLimitError, ResultFormatError,
                         SearchCancelled, SearchLimitWarning, SettingsError, WorkerError,
                         ClusterError)
from .independence import DSeparationOracle, FisherZ, PValueCache
from .result import ASSUMPTIONS, Edge, Removal, SearchResult, load_result
from .knowledge import Knowledge, read_knowledge, write_knowledge
from .search import discover
from .effects import (ControlSetError, ControlSets, EffectRange, control_sets, effect_range,
                      estimate_effect)
from .settings import PARAMETERS, SearchSettings
from .robustness import SupportResult, SweepResult, support, sweep

__all__ = [
    "discover", "sweep", "support", "SweepResult", "SupportResult", "read_table", "prepare_frame", "Dataset", "column_kind", "check_for_search",
    "Knowledge", "read_knowledge", "write_knowledge",
    "SearchResult", "Edge", "Removal", "load_result", "ASSUMPTIONS",
    "SearchSettings", "PARAMETERS",
    "DSeparationOracle", "FisherZ", "PValueCache",
    "DiscoveryError", "DataValidationError", "KnowledgeError", "SettingsError",
    "ResultFormatError", "ResourceLimitError", "SearchCancelled", "DegenerateDataWarning",
    "SearchLimitWarning", "WorkerError", "ClusterError",
    "control_sets", "ControlSets", "effect_range", "EffectRange", "estimate_effect",
    "ControlSetError",
]
