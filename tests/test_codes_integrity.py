"""Integrity of the code-table functions: a bool is never a symbol or a length,
a codeword length past MAX_CODEWORD_BITS is refused before anything is built,
and a bad parameter (max_length, m, p) is blamed on the parameter, not the code.
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from bitarray import bitarray

from pytest_ratefloor import codes
from pytest_ratefloor.codes import (
    GOLOMB_MAX_M,
    MAX_CODEWORD_BITS,
    Codebook,
    assert_kraft,
    assert_prefix_free,
    canonical_codebook,
)

PREFIX_FREE = {0: "0", 1: "10", 2: "11"}

#: The one refusal of a bool symbol, in integer tables and in tables of other symbols.
BOOL_REFUSED = (
    "symbol must not be a bool (Python takes True for 1 and False for 0, so it would be "
    "ambiguous with those integers; use 1/0 or a string), got "
)


# ---------------------------------------------------------------- bools


@pytest.mark.parametrize("key", [True, False, np.True_], ids=["True", "False", "numpy"])
@pytest.mark.parametrize("other", [2, "a"], ids=["beside-int", "beside-str"])
def test_a_bool_symbol_is_refused_by_name(key: object, other: object) -> None:
    # {True: "0", 2: "1"} must not become symbol 1 (True == 1 in Python), and beside
    # 'a' a bool would be ambiguous with 1 all the same: refused in every table
    expected = f"^codebook 'codebook': {re.escape(BOOL_REFUSED)}{bool(key)}$"
    for table in ({key: "0", other: "1"}, {other: "1", key: "0"}):
        with pytest.raises(TypeError, match=expected):
            Codebook(table)


def test_a_bool_is_no_symbol_for_lookups_or_canonical_tables() -> None:
    book = Codebook(PREFIX_FREE)
    assert 1 in book
    assert True not in book
    with pytest.raises(TypeError, match=f"^codebook 'codebook': {re.escape(BOOL_REFUSED)}True$"):
        book.word(True)
    text = Codebook({"a": "0", 1: "10", "c": "11"})
    assert 1 in text
    assert True not in text
    assert np.True_ not in text
    with pytest.raises(TypeError, match=f"^codebook 'codebook': {re.escape(BOOL_REFUSED)}True$"):
        text.word(True)
    for lengths in ({True: 1, 2: 1}, {"a": 1, True: 1}):
        with pytest.raises(TypeError, match=f"^{re.escape(BOOL_REFUSED)}True$"):
            canonical_codebook(lengths)
    with pytest.raises(TypeError, match=r"^length of symbol 0 must be an integer, got True$"):
        canonical_codebook({0: True, 1: 1})
    with pytest.raises(TypeError, match=r"^symbols must be a 1-D array of integers, got dtype "
                                        r"bool \(first value True\)$"):
        canonical_codebook((np.array([True, False]), np.array([1, 1])))
    with pytest.raises(TypeError, match=r"^lengths must be a 1-D array of integers, got dtype "
                                        r"bool \(first value True\)$"):
        canonical_codebook((np.array([0, 1]), np.array([True, True])))
    with pytest.raises(TypeError, match=r"length of codeword \(0, True\) of symbol 0 must be an "
                                        r"integer, got True"):
        Codebook({0: (0, True)})


def test_a_sample_of_bools_still_encodes_as_zeros_and_ones() -> None:
    # a sample of a binary source may come as bools (as Source.information takes them)
    book = Codebook({0: "0", 1: "1"})
    assert book.encode(np.array([True, False, True])) == bitarray("101")


# ---------------------------------------------------------------- lengths


def test_the_length_cap_is_two_to_the_sixteen() -> None:
    assert MAX_CODEWORD_BITS == 2**16
    longest = Codebook({0: (0, MAX_CODEWORD_BITS), 1: "1"})  # at the cap: accepted
    assert longest.max_length == MAX_CODEWORD_BITS


def test_a_huge_pair_length_is_a_value_error_naming_symbol_and_length() -> None:
    # before the fix: accepted, then a bare MemoryError when the table was used
    with pytest.raises(ValueError) as info:
        Codebook({0: (0, 2**40)})
    assert str(info.value) == (
        "codebook 'codebook': length of codeword (0, 1099511627776) of symbol 0 must be an "
        f"integer in [1, {MAX_CODEWORD_BITS}] (MAX_CODEWORD_BITS), got 1099511627776"
    )


@pytest.mark.parametrize(
    "word",
    ["1" * (MAX_CODEWORD_BITS + 1), bitarray(MAX_CODEWORD_BITS + 1), (0, MAX_CODEWORD_BITS + 1)],
    ids=["text", "bitarray", "pair"],
)
def test_every_spelling_of_a_too_long_codeword_is_refused(word: object) -> None:
    with pytest.raises(ValueError, match=re.escape(
        f"of symbol 7 must be an integer in [1, {MAX_CODEWORD_BITS}] (MAX_CODEWORD_BITS), "
        f"got {MAX_CODEWORD_BITS + 1}"
    )):
        Codebook({7: word, 8: "0"}, name="long")


@pytest.mark.parametrize(
    "lengths",
    [{0: 2**40, 1: 1}, (np.array([0, 1]), np.array([2**40, 1]))],
    ids=["mapping", "arrays"],
)
def test_canonical_codebook_refuses_a_huge_length(lengths: object) -> None:
    # before the fix: a MemoryError from numpy (an 8 TiB bincount)
    with pytest.raises(ValueError, match=re.escape(
        f"length of symbol 0 must be an integer in [0, {MAX_CODEWORD_BITS}] (MAX_CODEWORD_BITS), "
        "got 1099511627776"
    )):
        canonical_codebook(lengths)  # type: ignore[arg-type]


# ---------------------------------------------------------------- parameters


@pytest.mark.parametrize("check", [assert_prefix_free, assert_kraft])
@pytest.mark.parametrize("bad", [-1, 0])
def test_a_bad_max_length_blames_the_parameter(check, bad: int) -> None:  # type: ignore[no-untyped-def]
    # a code that is fine in every other respect: the error is about max_length
    with pytest.raises(ValueError, match=f"^max_length must be an integer >= 1, got {bad}$"):
        check(Codebook(PREFIX_FREE), max_length=bad)
    with pytest.raises(TypeError, match=r"^max_length must be an integer, got True$"):
        check(Codebook(PREFIX_FREE), max_length=True)


def test_the_parameter_is_checked_before_the_code_is_judged() -> None:
    # a code that is not prefix-free, with a bad cap: the cap is named, not the code
    with pytest.raises(ValueError, match=r"^max_length must be an integer >= 1, got -1$"):
        assert_prefix_free({0: "0", 1: "01"}, max_length=-1)


def test_the_other_size_parameters_of_the_package() -> None:
    with pytest.raises(ValueError, match=r"^max_length must be an integer >= 1, got -1$"):
        codes.length_limited_lengths([0.5, 0.5], max_length=-1)
    with pytest.raises(TypeError, match=r"^max_length must be an integer, got True$"):
        codes.length_limited_lengths([0.5, 0.5], max_length=True)
    # a huge cap is simply no constraint
    assert codes.length_limited_lengths([0.5, 0.25, 0.25], 2**40).tolist() == [1, 2, 2]
    with pytest.raises(ValueError, match=r"^limit must be an integer >= 1, got 0$"):
        codes.ambiguity({0: "0", 1: "01"}, limit=0)
    with pytest.raises(TypeError, match=r"^limit must be an integer, got True$"):
        codes.assert_uniquely_decodable({0: "0", 1: "01"}, limit=True)
    with pytest.raises(ValueError, match=r"^top must be an integer >= 0, got -1$"):
        codes.excess_by_symbol(PREFIX_FREE, [0, 1, 2], [0.5, 0.25, 0.25], top=-1)
    with pytest.raises(ValueError, match=r"^n must be an integer >= 0, got -1$"):
        Codebook(PREFIX_FREE).decode(bitarray("0"), -1)


def test_golomb_parameters_beyond_a_machine_word_are_named() -> None:
    assert GOLOMB_MAX_M == 2**63 - 1
    # before the fix: OverflowError (int too large to convert to float)
    with pytest.raises(ValueError, match=r"^m must be an integer <= GOLOMB_MAX_M = 2\*\*63 - 1, "
                                         r"got 1358\d+\.\.\.$"):
        codes.golomb_expected_length(0.5, 2**1100)
    assert codes.golomb_expected_length(0.5, GOLOMB_MAX_M) > 0
    # before the fix: OverflowError (cannot convert float infinity to integer)
    for tiny in (5e-324, 1e-300):
        with pytest.raises(ValueError, match=rf"^p must be a probability whose Golomb parameter "
                                             rf"m ≈ ln 2 / p is at most GOLOMB_MAX_M = 2\*\*63 "
                                             rf"- 1, got {tiny!r}$"):
            codes.golomb_parameter(tiny)
        with pytest.raises(ValueError, match="GOLOMB_MAX_M"):
            codes.rice_parameter(tiny)
    # m ≈ ln 2 / p (Gallager & van Voorhis 1975) still fits for p = 1e-18
    assert codes.golomb_parameter(1e-18) == pytest.approx(0.6931471805599453e18, rel=1e-9)
