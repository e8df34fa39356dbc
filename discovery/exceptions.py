"""The exceptions and warnings Edgewise raises.

Every error message says what is wrong, where (file, column, argument) and what to do, in one
line, so that the command line and the window can show it as it is.
"""

__all__ = [
    "DiscoveryError",
    "DataValidationError",
    "KnowledgeError",
    "SettingsError",
    "ResultFormatError",
    "SearchCancelled",
    "ResourceLimitError",
    "WorkerError",
    "ClusterError",
    "DegenerateDataWarning",
    "SearchLimitWarning",
]


class DiscoveryError(Exception):
    """Root of every error Edgewise raises on purpose."""


class DataValidationError(DiscoveryError, ValueError):
    """The data cannot be used as given (empty file, text in a numeric column, ...)."""


class KnowledgeError(DiscoveryError, ValueError):
    """The knowledge contradicts itself or names variables that are not in the data."""


class SettingsError(DiscoveryError, ValueError):
    """A search setting is out of its range or not one of its choices."""


class ResultFormatError(DiscoveryError, ValueError):
    """A saved result or session file is not a valid Edgewise document."""


class SearchCancelled(DiscoveryError):
    """The search was stopped by its cancel flag before it finished; no result exists."""


class ResourceLimitError(DiscoveryError, MemoryError):
    """The work would need more memory than the machine has; refused before allocating."""
class WorkerError(DiscoveryError):
    """Work spread over processes or a cluster failed there (an exception, a lost worker).

    ``remote_traceback`` (when set) holds the worker's traceback, for a bug report.
    """

    remote_traceback: str = ""


class ClusterError(DiscoveryError):
    """A cluster cannot be used: unreachable, no workers, or Edgewise missing on them."""


class DegenerateDataWarning(UserWarning):
    """The data is usable but degenerate: a constant column was excluded, a test gave NaN."""


class SearchLimitWarning(UserWarning):
    """The search was limited (depth capped by the number of rows, a level left unfinished)."""
