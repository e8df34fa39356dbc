"""The search: order-independent adjacency search, then orientation with knowledge."""

from ._discover import discover

__all__ = ["discover"]
