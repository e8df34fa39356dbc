"""Memory estimates made before large allocations, so that work that cannot fit is refused
with one clear line instead of failing (or swapping the machine) half-way.

The figures are measured, not derived: the search's first levels hold every pair of variables
at once, about 600 bytes a pair at their peak (peak resident memory from
``resource.getrusage``: 4.8 GiB for 4,000 variables of 30 rows, 8.0 million pairs;
docs/benchmarks.md), and a simulated table costs its float array, the frame and the CSV text
written from it. Deeper levels are bounded as they start (see ``discovery.search``: a level
whose evidence could outgrow the memory set aside for it and the free disk space for
temporary files is not run; ``discovery._evidence`` keeps the evidence within that memory).
"""

from __future__ import annotations

import os

from .exceptions import ResourceLimitError

__all__ = ["available_memory", "search_memory_estimate", "check_search_memory",
           "check_simulation_memory"]

#: Peak bytes per pair of variables in the search's first levels (measured; see above).
BYTES_PER_PAIR = 600
#: Bytes a simulated cell costs at its peak: the float array, the frame and its CSV text.
BYTES_PER_SIMULATED_CELL = 8 * 3 + 24


def available_memory() -> int:
    """Bytes of memory the machine can still give (MemAvailable on Linux; physical memory
    elsewhere)."""
    try:
        with open("/proc/meminfo", encoding="ascii") as handle:
            for line in handle:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (OSError, ValueError, AttributeError):
        return 2**62  # unknown: do not refuse


def _gib(nbytes: float) -> str:
    return f"{nbytes / 2**30:,.1f} GiB"


def search_memory_estimate(n_variables: int, n_rows: int) -> int:
    """Bytes the search needs at its peak for ``n_variables`` columns of ``n_rows`` rows."""
    pairs = n_variables * (n_variables - 1) // 2
    return pairs * BYTES_PER_PAIR + 3 * 8 * n_variables * max(n_rows, 1)


def check_search_memory(n_variables: int, n_rows: int, *, available: int | None = None) -> None:
    """Refuse a search that cannot fit in memory.

    Raises
    ------
    ResourceLimitError
        When :func:`search_memory_estimate` exceeds the memory available.
    """
    need = search_memory_estimate(n_variables, n_rows)
    have = available_memory() if available is None else available
    if need > have:
        raise ResourceLimitError(
            f"{n_variables:,} variables need about {_gib(need)} of memory for the search, "
            f"more than the {_gib(have)} available; choose fewer columns (--columns or "
            "--exclude), or run on a larger machine")


def check_simulation_memory(n_rows: int, n_variables: int, *,
                            available: int | None = None) -> None:
    """Refuse a simulated table that cannot fit in memory.

    Raises
    ------
    ResourceLimitError
        When the table would need more memory than is available.
    """
    need = n_rows * n_variables * BYTES_PER_SIMULATED_CELL
    have = available_memory() if available is None else available
    if need > have:
        raise ResourceLimitError(
            f"{n_rows:,} rows of {n_variables:,} variables need about {_gib(need)} of memory, "
            f"more than the {_gib(have)} available; ask for fewer --rows")
