"""Exp-Golomb codes against ITU-T H.264 clause 9.1 (Table 9-2) and the se(v) mapping of 9.1.1
(Table 9-3). Code words below are the standard's table entries (from memory; they follow from the
bit-string form 0..0 1 x..x of Table 9-2)."""

import numpy as np
import pytest

from synth import ParameterError
from synth.expgolomb import (
    code_number_to_signed,
    se_codeword,
    se_length,
    signed_to_code_number,
    ue_codeword,
    ue_length,
)

# ITU-T H.264 Table 9-2, explicit assignment of bit strings to codeNum values
TABLE_9_2 = {
    0: "1",
    1: "010",
    2: "011",
    3: "00100",
    4: "00101",
    5: "00110",
    6: "00111",
    7: "0001000",
    8: "0001001",
    9: "0001010",
}

# ITU-T H.264 Table 9-3: codeNum -> syntax element value for se(v)
TABLE_9_3 = {0: 0, 1: 1, 2: -1, 3: 2, 4: -2, 5: 3, 6: -3}


@pytest.mark.parametrize("k,word", sorted(TABLE_9_2.items()))
def test_ue_codewords_match_table_9_2(k, word):
    assert ue_codeword(k) == word
    assert ue_length(k) == len(word)


def test_ue_lengths_follow_the_bit_string_ranges_of_table_9_2():
    # Table 9-2: "1" is 0; "0 1 x0" 1..2; "0 0 1 x1 x0" 3..6; "0 0 0 1 x2 x1 x0" 7..14; then 15..30
    ranges = [(0, 0, 1), (1, 2, 3), (3, 6, 5), (7, 14, 7), (15, 30, 9), (31, 62, 11)]
    for lo, hi, length in ranges:
        assert np.all(ue_length(np.arange(lo, hi + 1)) == length)
    # large code numbers: 2M + 1 bits with M = floor(log2(k + 1)) (clause 9.1)
    assert ue_length(2**31 - 2) == 61 and ue_length(2**31 - 1) == 63


@pytest.mark.parametrize("k,v", sorted(TABLE_9_3.items()))
def test_signed_mapping_matches_table_9_3(k, v):
    assert signed_to_code_number(v) == k
    assert code_number_to_signed(k) == v
    assert se_codeword(v) == TABLE_9_2[k]
    assert se_length(v) == len(TABLE_9_2[k])


def test_signed_mapping_is_a_bijection_on_a_range():
    # clause 9.1.1: (-1)**(k+1) * Ceil(k / 2)
    k = np.arange(0, 2001)
    v = code_number_to_signed(k)
    assert np.array_equal(v, (-1) ** (k + 1) * np.ceil(k / 2).astype(int))
    assert np.array_equal(signed_to_code_number(v), k)


def test_negative_code_numbers_are_refused():
    with pytest.raises(ParameterError, match="code numbers must be >= 0"):
        ue_length(-1)
    with pytest.raises(ParameterError, match="code numbers must be >= 0"):
        ue_codeword(-3)
