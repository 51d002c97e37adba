"""A small cache of recent results keyed by the identity of their inputs.

Every picture between one reference pair is synthesised from the same fields and pictures, so work
that depends only on them (motion cells, their refinement) is done once per pair. `VectorField` and
`Picture` are immutable; an entry keeps its inputs alive, so an identity in a key is never reused.
"""

from __future__ import annotations

import threading
from collections import OrderedDict

__all__ = ["RecentResults", "per_field_pair"]


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


def per_field_pair(cache: RecentResults, fields, pictures: dict, work, **options) -> list:
    """``work(field, coded, reference, **options)`` for every field whose two pictures are in `pictures`.

    `pictures` maps display times to pictures; a field between other pictures is returned as it
    is. The result is kept in `cache`, keyed by the identity of the fields and pictures and by
    `options`, so every further picture between the same reference pair reuses it.
    """
    fields = list(fields)
    pairs = [(pictures.get(float(f.coded_time)), pictures.get(float(f.reference_time))) for f in fields]
    key = (
        tuple(id(f) for f in fields),
        tuple(id(p) for pair in pairs for p in pair),
        tuple(sorted(options.items())),
    )
    out = cache.get(key)
    if out is None:
        out = [f if c is None or r is None else work(f, c, r, **options) for f, (c, r) in zip(fields, pairs)]
        cache.put(key, (fields, pairs), out)
    return list(out)
