"""SATD against a direct Hadamard matrix product, and Exp-Golomb lengths against ITU-T H.264."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.linalg import hadamard

from synth.codec.offsets import offset_bits
from synth.codec.satd import SATD_SCALE, block_sad, block_satd, hadamard_tiles, satd_tiles
from synth.errors import ParameterError
from synth.expgolomb import se_codeword, se_length, ue_codeword, ue_length

# ITU-T H.264 (clause 9.1, Table 9-2): bit strings of the first ue(v) code numbers.
H264_TABLE_9_2 = {
    0: "1",
    1: "010",
    2: "011",
    3: "00100",
    4: "00101",
    5: "00110",
    6: "00111",
    7: "0001000",
    8: "0001001",
}
# ITU-T H.264 (clause 9.1.1, Table 9-3): se(v) value for code numbers 0, 1, 2, 3, 4, 5, 6.
H264_TABLE_9_3 = {0: 0, 1: 1, 2: -1, 3: 2, 4: -2, 5: 3, 6: -3}


def test_exp_golomb_lengths_follow_h264_table_9_2():
    for k, bits in H264_TABLE_9_2.items():
        assert ue_codeword(k) == bits
        assert int(ue_length(k)) == len(bits)
    # Table 9-2's ranges: 1..2 -> 3 bits, 3..6 -> 5, 7..14 -> 7, 15..30 -> 9 (2M+1 bits)
    assert list(ue_length(np.arange(31))) == [1] + [3] * 2 + [5] * 4 + [7] * 8 + [9] * 16


def test_signed_mapping_follows_h264_table_9_3_and_offset_bits_use_it():
    for k, v in H264_TABLE_9_3.items():
        assert se_codeword(v) == ue_codeword(k)
        assert int(se_length(v)) == len(ue_codeword(k))
    # an offset costs se(dx) + se(dy): (0, 0) is two one-bit code words, (1, -2) is 3 + 5 bits
    assert int(offset_bits(0, 0)) == 2
    assert int(offset_bits(1, -2)) == 8


@pytest.mark.parametrize("tile", [4, 8])
def test_hadamard_tiles_equal_matrix_product_with_scipy_hadamard(tile):
    # scipy.linalg.hadamard builds the Sylvester-ordered Hadamard matrix (reference library).
    rng = np.random.default_rng(5)
    res = rng.integers(-255, 256, size=(3 * tile, 2 * tile)).astype(np.float64)
    H = hadamard(tile).astype(np.float64)
    coeffs = hadamard_tiles(res, tile=tile)
    direct_sum = np.zeros((3, 2))
    for r in range(3):
        for c in range(2):
            X = res[r * tile : (r + 1) * tile, c * tile : (c + 1) * tile]
            T = H @ X @ H.T
            np.testing.assert_array_equal(coeffs[r, c], T)
            direct_sum[r, c] = np.abs(T).sum() / SATD_SCALE[tile]
    np.testing.assert_allclose(satd_tiles(res, tile=tile), direct_sum, rtol=0, atol=1e-9)


def test_block_satd_and_sad_sum_their_tiles():
    rng = np.random.default_rng(6)
    res = rng.normal(0, 20, size=(32, 48))
    per_tile = satd_tiles(res, tile=4)
    np.testing.assert_allclose(block_satd(res, block=16), per_tile.reshape(2, 4, 3, 4).sum(axis=(1, 3)))
    np.testing.assert_allclose(block_sad(res, block=16), np.abs(res).reshape(2, 16, 3, 16).sum(axis=(1, 3)))
    # a DC residual of value v over a 4x4 tile has one coefficient 16 v: SATD 16 v / 2 = 8 v, SAD 16 v
    dc = np.full((4, 4), 3.0)
    assert satd_tiles(dc, tile=4)[0, 0] == pytest.approx(24.0)


def test_satd_rejects_bad_sizes():
    with pytest.raises(ParameterError, match="tile size must be 4 or 8"):
        satd_tiles(np.zeros((8, 8)), tile=16)
    with pytest.raises(ParameterError, match="not a multiple"):
        satd_tiles(np.zeros((6, 8)), tile=4)
    with pytest.raises(ParameterError, match="not a multiple"):
        block_satd(np.zeros((16, 16)), block=6, tile=4)
