"""Dyadic hierarchical GOP structure against its definition (random-access configuration of the
HEVC common test conditions, JCTVC-L1100; common practice)."""

import pytest

from synth import ParameterError
from synth.hierarchy import dyadic_gop, flat_gop


def _trailing_zeros(k: int) -> int:
    return (k & -k).bit_length() - 1


@pytest.mark.parametrize("size", [2, 4, 8, 16, 32, 64])
def test_structure_follows_the_dyadic_definition(size):
    gop = dyadic_gop(size)
    depth = size.bit_length() - 1
    assert sorted(p.position for p in gop) == list(range(1, size))
    coded = {0, size}  # both anchors precede the B pictures (anchor 0 from the previous GOP)
    for i, p in enumerate(gop, start=1):
        z = _trailing_zeros(p.position)
        # Definition: references are the nearest pictures of lower layers, k -/+ 2^z; layer log2(size) - z.
        assert (p.past, p.future) == (p.position - (1 << z), p.position + (1 << z))
        assert p.layer == depth - z
        assert p.coding_index == i
        assert p.t == 0.5
        # Every picture is coded after both of its references.
        assert p.past in coded and p.future in coded
        coded.add(p.position)
    # Layer populations of a dyadic hierarchy: 2^(layer-1) pictures in layer `layer`.
    for layer in range(1, depth + 1):
        assert sum(1 for p in gop if p.layer == layer) == 1 << (layer - 1)


def test_coding_order_of_the_common_test_conditions():
    # HEVC CTC random access, GOP 8 (JCTVC-L1100 configuration, from memory): POC 8 4 2 1 3 6 5 7;
    # VVC CTC random access, GOP 16 (JVET common test conditions, from memory).
    assert [p.position for p in dyadic_gop(8)] == [4, 2, 1, 3, 6, 5, 7]
    assert [p.position for p in dyadic_gop(16)] == [8, 4, 2, 1, 3, 6, 5, 7, 12, 10, 9, 11, 14, 13, 15]
    assert [p.layer for p in dyadic_gop(8)] == [1, 2, 3, 3, 2, 3, 3]


def test_flat_structure_and_bad_sizes():
    flat = flat_gop(8)
    assert [(p.position, p.past, p.future) for p in flat] == [(k, 0, 8) for k in range(1, 8)]
    assert [p.t for p in flat] == [k / 8 for k in range(1, 8)]
    for bad in (0, 1, 3, 12, 128, 2.5, "x"):
        with pytest.raises(ParameterError, match="power of two from 2 to 64"):
            dyadic_gop(bad)
