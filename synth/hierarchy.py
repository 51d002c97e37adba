"""Dyadic hierarchical GOP structure (random access), as in the random-access configuration of the
HEVC common test conditions (F. Bossen, "Common test conditions and software reference
configurations", JCTVC-L1100, 2013; common practice).

A GOP of `size` pictures (a power of two, 2..64) spans display positions 0..size; positions 0 and
`size` are the anchors (temporal layer 0; position 0 belongs to the previous GOP). Every other
position k is a B picture referencing the nearest pictures of lower layers on both sides,
``k - 2**z`` and ``k + 2**z`` with ``z`` the number of trailing zero bits of k, and sits in temporal
layer ``log2(size) - z``. Coding order is depth first: the anchor `size`, then the middle picture,
then recursively the left half before the right half (for size 8: 8, 4, 2, 1, 3, 6, 5, 7).
"""

from __future__ import annotations

from dataclasses import dataclass

from synth.errors import ParameterError

__all__ = ["GopPicture", "MAX_GOP_SIZE", "check_gop_size", "dyadic_gop", "flat_gop"]

MAX_GOP_SIZE = 64


@dataclass(frozen=True)
class GopPicture:
    """One picture of a GOP.

    Attributes
    ----------
    position : int
        Display position inside the GOP (0..size).
    layer : int
        Temporal layer (0 for anchors).
    past, future : int or None
        Display positions of its two references (None for anchors).
    coding_index : int
        Position in coding order, 0 for the leading anchor `size` (position 0 is coded in the
        previous GOP and has coding_index -1).
    """

    position: int
    layer: int
    past: int | None
    future: int | None
    coding_index: int

    @property
    def t(self) -> float:
        """Fraction of the way from the past to the future reference."""
        if self.past is None or self.future is None:
            return 0.0
        return (self.position - self.past) / (self.future - self.past)


def check_gop_size(size: int) -> int:
    """Validate a GOP size: a power of two from 2 to `MAX_GOP_SIZE`.

    Raises
    ------
    ParameterError
        Otherwise.
    """
    try:
        n = int(size)
    except (TypeError, ValueError):
        raise ParameterError(f"GOP size must be a power of two from 2 to {MAX_GOP_SIZE}, got {size!r}") from None
    if n != size or n < 2 or n > MAX_GOP_SIZE or n & (n - 1):
        raise ParameterError(f"GOP size must be a power of two from 2 to {MAX_GOP_SIZE}, got {size!r}")
    return n


def dyadic_gop(size: int) -> list[GopPicture]:
    """The non-anchor pictures of a dyadic hierarchical GOP, in coding order.

    Parameters
    ----------
    size : int
        Power of two, 2..64.

    Returns
    -------
    list of GopPicture
        ``size - 1`` pictures (positions 1..size-1) in coding order; coding_index starts at 1
        (the anchor `size` is coded first, index 0).
    """
    size = check_gop_size(size)
    depth = size.bit_length() - 1
    order: list[GopPicture] = []

    def visit(lo: int, hi: int, layer: int) -> None:
        if hi - lo < 2:
            return
        mid = (lo + hi) // 2
        order.append(GopPicture(mid, layer, lo, hi, len(order) + 1))
        visit(lo, mid, layer + 1)
        visit(mid, hi, layer + 1)

    visit(0, size, 1)
    if len(order) != size - 1 or max(p.layer for p in order) != depth:
        raise RuntimeError("dyadic GOP construction is inconsistent")  # cannot happen
    return order


def flat_gop(size: int) -> list[GopPicture]:
    """Every position 1..size-1 predicted straight from the two anchors (t = k / size), display order.

    Layer is reported as 1 for all of them.
    """
    size = check_gop_size(size)
    return [GopPicture(k, 1, 0, size, k) for k in range(1, size)]
