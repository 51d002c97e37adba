"""A small cache of recent results keyed by the identity of their inputs.

Every picture between one reference pair is synthesised from the same fields and pictures, so work
that depends only on them (motion cells, their refinement) is done once per pair. `VectorField` and
`Picture` are immutable; an entry keeps its inputs alive, so an identity in a key is never reused.
"""

from __future__ import annotations

import threading
from collections import OrderedDict

__all__ = ["RecentResults"]


class RecentResults:
    """The last `size` results, least recently used dropped first; safe across threads.

    Parameters
    ----------
    size : int
        Number of entries kept.
    """

    def __init__(self, size: int = 4) -> None:
        self._size = int(size)
        self._entries: OrderedDict = OrderedDict()
        self._lock = threading.Lock()

    def get(self, key):
        """The stored result for `key`, or None."""
        with self._lock:
            hit = self._entries.get(key)
            if hit is None:
                return None
            self._entries.move_to_end(key)
            return hit[1]

    def put(self, key, inputs, result) -> None:
        """Store `result` for `key`, keeping `inputs` (the objects whose ids are in the key) alive."""
        with self._lock:
            self._entries[key] = (inputs, result)
            while len(self._entries) > self._size:
                self._entries.popitem(last=False)

    def clear(self) -> None:
        """Forget every entry (benchmarks time the first picture of a pair this way)."""
        with self._lock:
            self._entries.clear()
