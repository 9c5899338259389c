"""Codebook construction and codec, prefix-freeness, Kraft sums, canonical order and
length caps (pytest_ratefloor.codes)."""

from __future__ import annotations

import itertools
import random
import re
from collections.abc import Callable, Iterator, Mapping
from fractions import Fraction

import numpy as np
import pytest
from bitarray import bitarray
from bitarray.util import canonical_huffman, huffman_code

from pytest_ratefloor import codes
from pytest_ratefloor.codes import Codebook
from pytest_ratefloor.errors import CodeShapeFailure, KraftFailure, PrefixFailure


def brute_prefix_pairs(words: dict[int, str]) -> set[tuple[int, int]]:
    """All (a, b), a != b, where word a is a prefix of (or equal to) word b: O(N²)."""
    return {
        (a, b) for (a, wa), (b, wb) in itertools.permutations(words.items(), 2) if wb.startswith(wa)
    }


def random_words(rng: random.Random, n: int, max_len: int) -> dict[int, str]:
    return {s: "".join(rng.choice("01") for _ in range(rng.randint(1, max_len))) for s in range(n)}


# ------------------------------------------------------------------- construction


def test_three_spellings_of_one_table_agree() -> None:
    as_text = Codebook({0: "0", 1: "10", 2: "110", 3: "111"})
    as_bits = Codebook({s: bitarray(w) for s, w in enumerate(["0", "10", "110", "111"])})
    as_pairs = Codebook({0: (0, 1), 1: (2, 2), 2: (6, 3), 3: (7, 3)})
    for cb in (as_text, as_bits, as_pairs):
        assert {s: w.to01() for s, w in cb.codewords.items()} == {
            0: "0",
            1: "10",
            2: "110",
            3: "111",
        }
        assert cb.lengths == {0: 1, 1: 2, 2: 3, 3: 3}
        assert cb.symbols == [0, 1, 2, 3]
        assert cb.max_length == 3
        assert cb.version is None


def test_value_length_pairs_keep_leading_zeros() -> None:
    # (value, length) means the low `length` bits, MSB first: (1, 4) is 0001.
    cb = Codebook({7: (1, 4), 8: (0, 3)})
    assert cb.word(7) == "0001"
    assert cb.word(8) == "000"


def test_little_endian_bitarray_keeps_its_logical_bit_order() -> None:
    cb = Codebook({0: bitarray("0011", endian="little")})
    assert cb.word(0) == "0011"


def test_numpy_integer_symbols_are_stored_as_int() -> None:
    cb = Codebook({np.int64(5): "0", np.uint8(9): (1, 1)})
    assert cb.symbols == [5, 9]
    assert all(type(s) is int for s in cb.codewords)


def test_codewords_are_frozen_copies() -> None:
    word = bitarray("01")
    cb = Codebook({0: word, 1: "1"})
    word.append(1)
    assert cb.word(0) == "01"
    with pytest.raises(TypeError):
        cb.codewords[0].append(1)


BINARY_TEXT = "must be a non-empty string of the characters '0' and '1'"


@pytest.mark.parametrize(
    ("mapping", "needle"),
    [
        ({3: ""}, f"codeword of symbol 3 {BINARY_TEXT}, got ''"),
        ({3: bitarray()}, "codeword of symbol 3 must be a non-empty bitarray, got bitarray()"),
        ({4: "01x1"}, f"codeword of symbol 4 {BINARY_TEXT}, got '01x1'"),
        ({4: "0 1"}, f"codeword of symbol 4 {BINARY_TEXT}, got '0 1'"),
        ({5: (1, -2)}, "length of codeword (1, -2) of symbol 5 must be an integer >= 1, got -2"),
        ({5: (0, 0)}, "length of codeword (0, 0) of symbol 5 must be an integer >= 1, got 0"),
        ({6: (8, 3)}, "value of codeword (8, 3) of symbol 6 must be an integer in [0, 2**3 - 1]"),
        ({6: (8, 3)}, "(it must fit in 3 bits), got 8"),
        ({6: (-1, 3)}, "value of codeword (-1, 3) of symbol 6 must be an integer in [0, 2**3 - 1]"),
        ({6: [2, 1]}, "value of codeword [2, 1] of symbol 6 must be an integer in [0, 2**1 - 1]"),
        ({2**70: "0"}, f"symbol must be an integer in the signed 64-bit range, got {2**70}"),
        ({}, "mapping must hold at least one codeword, got {}"),
    ],
)
def test_bad_table_values_are_value_errors_naming_symbol_and_codeword(
    mapping: dict, needle: str
) -> None:
    with pytest.raises(ValueError) as info:
        Codebook(mapping, name="gauge")
    assert str(info.value).startswith("codebook 'gauge': ")
    assert needle in str(info.value)


@pytest.mark.parametrize(
    ("mapping", "needle"),
    [
        # any hashable key is a symbol (tests/test_codes_symbols.py), a bool never is
        ({True: "0"}, "symbol must not be a bool (Python takes True for 1"),
        ({"a": True}, "codeword of symbol 'a' must be a '0'/'1' string"),
        ({("t", 1): [0.5, 1]}, "value of codeword [0.5, 1] of symbol ('t', 1) must be an"),
        (
            {7: 3.5},
            "codeword of symbol 7 must be a '0'/'1' string, a bitarray or a (value, length) "
            "pair, got 3.5",
        ),
        ({7: (1, 2, 3)}, "codeword of symbol 7 must be a '0'/'1' string"),
        ({7: None}, "codeword of symbol 7 must be a '0'/'1' string"),
        ({7: (1.0, 2)}, "value of codeword (1.0, 2) of symbol 7 must be an integer, got 1.0"),
        ({7: (1, 2.0)}, "length of codeword (1, 2.0) of symbol 7 must be an integer, got 2.0"),
        ({7: (1, True)}, "length of codeword (1, True) of symbol 7 must be an integer, got True"),
    ],
)
def test_bad_table_types_are_type_errors_naming_symbol_and_codeword(
    mapping: dict, needle: str
) -> None:
    with pytest.raises(TypeError) as info:
        Codebook(mapping, name="gauge")
    assert str(info.value).startswith("codebook 'gauge': ")
    assert needle in str(info.value)


def test_value_length_pairs_of_numpy_integers_are_accepted() -> None:
    cb = Codebook({0: (np.int64(1), np.uint8(2)), 1: [np.int32(0), 1]})
    assert [cb.word(0), cb.word(1)] == ["01", "0"]


def test_codebook_needs_a_mapping_and_a_string_name() -> None:
    with pytest.raises(TypeError, match=r"codebook 'gauge': mapping must be a \{symbol: code"):
        Codebook([(0, "0")], name="gauge")  # type: ignore[arg-type]
    with pytest.raises(TypeError, match="codebook name must be a string, got 5"):
        Codebook({0: "0"}, name=5)  # type: ignore[arg-type]


class RepeatedKeys(Mapping):
    """A mapping whose items list one symbol twice (a dict cannot)."""

    def __getitem__(self, key: object) -> str:
        raise KeyError(key)

    def __iter__(self) -> Iterator[int]:
        return iter([])

    def __len__(self) -> int:
        return 2

    def items(self):  # type: ignore[override]
        return [(np.int64(3), "0"), (3, "1")]


class ListKeyed(Mapping):
    """A mapping whose one key is a list (unhashable: no dict can hold it)."""

    def __getitem__(self, key: object) -> int:
        return 1

    def __iter__(self) -> Iterator[object]:
        return iter([["x"]])

    def __len__(self) -> int:
        return 1


def test_a_symbol_listed_twice_is_a_value_error() -> None:
    with pytest.raises(ValueError, match="codebook 'gauge': symbols must be distinct, got 3 twice"):
        Codebook(RepeatedKeys(), name="gauge")


def test_duplicate_codewords_are_accepted_at_construction() -> None:
    cb = Codebook({0: "01", 1: "01"})
    assert len(cb) == 2


# ------------------------------------------------------------------------ the codec


def test_encode_is_the_concatenation_of_codewords() -> None:
    table = {0: "0", 1: "10", 2: "110", 3: "111"}
    cb = Codebook(table)
    data = np.array([3, 0, 2, 1, 1, 0], dtype=np.int64)
    # reference: plain string concatenation of the table's own text
    assert cb.encode(data).to01() == "".join(table[s] for s in data.tolist())


def test_roundtrip_of_a_huffman_code_built_by_bitarray() -> None:
    rng = np.random.default_rng(7)
    weights = {s: int(w) for s, w in enumerate(rng.integers(1, 1000, size=40))}
    cb = Codebook(huffman_code(weights), name="bitarray-huffman")  # reference library's code
    data = rng.integers(0, 40, size=5000)
    bits = cb.encode(data)
    # reference: bitarray's own decoder on bitarray's own code
    ref = bitarray()
    ref.encode(huffman_code(weights), data.tolist())
    assert bits == ref
    np.testing.assert_array_equal(cb.decode(bits, data.size), data)
    assert cb.decode(bits, data.size).dtype == np.int64


def test_large_canonical_table_encodes_its_own_words() -> None:
    # The codec table is built by bit-slicing numpy arrays; the reference is the
    # '0'/'1' text of each codeword formatted one at a time.
    rng = np.random.default_rng(12)
    probs = rng.random(3000) ** 6
    cb = codes.canonical_codebook((np.arange(3000), codes.huffman_lengths(probs)))
    data = rng.integers(0, 3000, size=4000)
    bits = cb.encode(data)
    assert bits.to01() == "".join(cb.word(int(s)) for s in data)
    np.testing.assert_array_equal(cb.decode(bits, data.size), data)


def test_encode_unknown_symbol_names_symbol_and_index() -> None:
    cb = Codebook({0: "0", 1: "1"}, name="tide")
    with pytest.raises(ValueError, match=r"symbol 5 at index 2 has no codeword in codebook 'tide'"):
        cb.encode(np.array([0, 1, 5, 0]))


def test_encode_rejects_non_integer_input() -> None:
    cb = Codebook({0: "0", 1: "1"})
    with pytest.raises(TypeError, match="symbols must be a 1-D array of integers, got dtype float"):
        cb.encode(np.array([0.5, 1.0]))
    with pytest.raises(TypeError, match="symbols must be a 1-D array of integers, got '01'"):
        cb.encode("01")  # type: ignore[arg-type]
    with pytest.raises(ValueError, match=r"symbols must be a 1-D array of integers, got shape"):
        cb.encode(np.zeros((2, 2), dtype=np.int64))
    with pytest.raises(ValueError, match="symbols must be integers in the signed 64-bit range"):
        cb.encode(np.array([2**64 - 1], dtype=np.uint64))


def test_encode_empty_and_decode_zero() -> None:
    cb = Codebook({0: "0", 1: "1"})
    assert len(cb.encode(np.array([], dtype=np.int64))) == 0
    assert cb.decode(bitarray(), 0).shape == (0,)


def test_decode_reads_exactly_n_symbols_and_ignores_padding() -> None:
    # Incomplete code: '11' is unused. Padding '11' after the data must not be read.
    cb = Codebook({0: "0", 1: "10"})
    bits = cb.encode(np.array([1, 0, 1]))
    bits.extend("111")
    np.testing.assert_array_equal(cb.decode(bits, 3), [1, 0, 1])


def test_decode_from_bytes_reads_msb_first() -> None:
    cb = Codebook({0: "0", 1: "1"})
    np.testing.assert_array_equal(cb.decode(bytes([0b10100000]), 4), [1, 0, 1, 0])


def test_decode_garbage_names_the_position() -> None:
    cb = Codebook({0: "0", 1: "10"}, name="tide")
    with pytest.raises(ValueError, match=r"position 3 .*match no codeword; decoded 2 of 3"):
        cb.decode(bitarray("010110"), 3)


def test_decode_short_stream_says_how_many_symbols_it_holds() -> None:
    cb = Codebook({0: "0", 1: "1"})
    with pytest.raises(ValueError, match="holds only 2 complete codewords"):
        cb.decode(bitarray("01"), 5)


def test_decode_stream_ending_inside_a_codeword() -> None:
    cb = Codebook({0: "0", 1: "110", 2: "111"})
    with pytest.raises(ValueError, match="end inside a codeword"):
        cb.decode(bitarray("011"), 2)


def test_decode_of_non_prefix_free_code_is_refused_with_the_pair() -> None:
    cb = Codebook({0: "0", 1: "01", 2: "11"}, name="tide")
    with pytest.raises(ValueError, match=r"symbol 0 \('0'\) is a prefix of .*symbol 1 \('01'\)"):
        cb.decode(bitarray("011"), 2)


def test_decode_codewords_beyond_bitarrays_tree_limit() -> None:
    # bitarray's decodetree stops at 256 bits; longer codewords use the slow path.
    cb = Codebook({0: "0", 1: "1" * 300, 2: "1" * 299 + "0"})
    data = np.array([1, 0, 2, 2, 0, 1])
    np.testing.assert_array_equal(cb.decode(cb.encode(data), data.size), data)
    with pytest.raises(ValueError, match="holds only"):
        cb.decode(cb.encode(data), data.size + 1)


def test_decode_rejects_bad_n_and_bad_streams() -> None:
    cb = Codebook({0: "0", 1: "1"}, name="tide")
    with pytest.raises(ValueError, match="n must be an integer >= 0, got -1"):
        cb.decode(bitarray("0"), -1)
    with pytest.raises(TypeError, match=r"n must be an integer, got 1\.5"):
        cb.decode(bitarray("0"), 1.5)  # type: ignore[arg-type]
    with pytest.raises(TypeError, match="n must be an integer, got True"):
        cb.decode(bitarray("0"), True)
    with pytest.raises(TypeError, match="codebook 'tide': bits must be a bitarray or bytes, got"):
        cb.decode("01", 2)  # type: ignore[arg-type]


# ------------------------------------------------------------------ prefix-freeness


def test_prefix_witness_on_the_three_word_example() -> None:
    # {0, 01, 10}: '0' is a prefix of '01' (checked by eye).
    assert codes.prefix_witness({0: "0", 1: "01", 2: "10"}) == ((0, "0"), (1, "01"))


def test_prefix_witness_reports_equal_codewords() -> None:
    assert codes.prefix_witness({4: "101", 9: "101", 1: "0"}) == ((4, "101"), (9, "101"))


def test_prefix_witness_agrees_with_all_pairs_brute_force() -> None:
    rng = random.Random(11)
    for trial in range(400):
        words = random_words(rng, rng.randint(1, 9), rng.choice([3, 5, 8]))
        pairs = brute_prefix_pairs(words)
        found = codes.prefix_witness(words)
        if not pairs:
            assert found is None, (trial, words)
        else:
            assert found is not None, (trial, words)
            (a, wa), (b, wb) = found
            assert (a, b) in pairs
            assert (words[a], words[b]) == (wa, wb)


def test_prefix_witness_long_codewords_take_the_text_path() -> None:
    # Codewords over 64 bits cannot be packed into uint64; same verdict expected.
    words = {0: "1" * 70, 1: "1" * 70 + "0", 2: "0"}
    assert codes.prefix_witness(words) == ((0, "1" * 70), (1, "1" * 70 + "0"))
    assert codes.prefix_witness({0: "1" * 70, 1: "0" * 70}) is None
    rng = random.Random(3)
    for _ in range(50):
        words = {s: "0" * 64 + w for s, w in random_words(rng, 6, 4).items()}
        assert (codes.prefix_witness(words) is None) == (not brute_prefix_pairs(words))


def test_prefix_witness_for_58_to_64_bit_codewords() -> None:
    # Lengths 58..64 still pack into uint64 but take the three-key sort.
    rng = random.Random(4)
    for _ in range(100):
        words = {s: "1" * 56 + w for s, w in random_words(rng, 7, 8).items()}
        pairs = brute_prefix_pairs(words)
        found = codes.prefix_witness(words)
        assert (found is None) == (not pairs), words
        if found is not None:
            assert (found[0][0], found[1][0]) in pairs


def test_bitarray_huffman_codes_are_prefix_free() -> None:
    rng = np.random.default_rng(5)
    for n in (2, 3, 17, 300):
        code = huffman_code(dict(enumerate(rng.random(n).tolist())))  # reference library
        codes.assert_prefix_free(code)


def test_assert_prefix_free_message_shows_both_codewords() -> None:
    with pytest.raises(PrefixFailure) as info:
        codes.assert_prefix_free(Codebook({3: "01", 7: "0110", 8: "1"}, name="gauge-deltas"))
    msg = str(info.value)
    assert "'gauge-deltas'" in msg
    assert "symbol 3 ('01') is a prefix of the codeword of symbol 7 ('0110')" in msg


def test_assert_prefix_free_message_for_a_shared_codeword() -> None:
    with pytest.raises(PrefixFailure, match="symbols 1 and 2 share the codeword '10'"):
        codes.assert_prefix_free({1: "10", 2: "10", 3: "0"})


def test_prefix_failure_is_an_assertion_error() -> None:
    with pytest.raises(AssertionError):
        codes.assert_prefix_free({0: "0", 1: "0"})


@pytest.mark.parametrize(
    "check", [codes.prefix_witness, codes.kraft_sum, codes.is_canonical, codes.assert_kraft]
)
def test_a_code_must_be_a_codebook_or_a_mapping(check: Callable[..., object]) -> None:
    with pytest.raises(TypeError, match=r"code must be a Codebook or a \{symbol: codeword\} map"):
        check(["0", "1"])


# ------------------------------------------------------------------------------ Kraft


def exact_kraft(words: dict[int, str]) -> Fraction:
    """Reference: Σ 2^-ℓ summed with Fraction term by term."""
    return sum((Fraction(1, 2 ** len(w)) for w in words.values()), Fraction(0))


def test_kraft_sum_is_exact() -> None:
    rng = random.Random(2)
    for _ in range(100):
        words = random_words(rng, rng.randint(1, 12), 40)
        total = codes.kraft_sum(words)
        assert isinstance(total, Fraction)
        assert total == exact_kraft(words)


def test_kraft_of_a_complete_code_is_one() -> None:
    assert codes.kraft_sum({0: "0", 1: "10", 2: "11"}) == 1
    codes.assert_kraft({0: "0", 1: "10", 2: "11"}, complete=True)


def test_overfull_table_fails_with_the_exact_sum_and_mcmillan() -> None:
    # lengths 1,1,2 (the naive cap of [1,2,2,2]-style bug): 1/2+1/2+1/4 = 5/4
    with pytest.raises(KraftFailure) as info:
        codes.assert_kraft(Codebook({0: "0", 1: "1", 2: "10"}, name="capped"))
    msg = str(info.value)
    assert "5/4 > 1" in msg
    assert "McMillan" in msg
    assert "'capped'" in msg
    assert "2×1" in msg  # the length histogram


def test_incomplete_code_passes_unless_complete_is_asked() -> None:
    words = {0: "0", 1: "10"}  # Kraft 3/4
    codes.assert_kraft(words)
    with pytest.raises(KraftFailure) as info:
        codes.assert_kraft(words, complete=True)
    msg = str(info.value)
    assert "3/4 < 1" in msg
    assert "1/4 of the code space (25%) is unused" in msg
    assert "no codeword starts with '11'" in msg


def test_unused_prefix_example_is_really_unused() -> None:
    rng = random.Random(9)
    checked = 0
    for _ in range(300):
        words = random_words(rng, rng.randint(1, 6), 6)
        if brute_prefix_pairs(words) or exact_kraft(words) >= 1:
            continue
        if len(words) == 1 and len(words[0]) == 1:
            continue  # the one-symbol 1-bit code is accepted as complete
        with pytest.raises(KraftFailure) as info:
            codes.assert_kraft(words, complete=True)
        hole = str(info.value).split("no codeword starts with '")[1].split("'")[0]
        assert not any(w.startswith(hole) or hole.startswith(w) for w in words.values())
        checked += 1
    assert checked > 50


def test_single_symbol_one_bit_code_counts_as_complete() -> None:
    # The one code a one-symbol alphabet can have (documented convention).
    codes.assert_kraft({4: "0"}, complete=True)
    with pytest.raises(KraftFailure, match="1/4 < 1"):
        codes.assert_kraft({4: "00"}, complete=True)


def test_huffman_codes_from_bitarray_are_complete() -> None:
    rng = np.random.default_rng(8)
    for n in (2, 5, 64, 500):
        codes.assert_kraft(huffman_code(dict(enumerate(rng.random(n).tolist()))), complete=True)


# --------------------------------------------------------------- canonical and caps


def test_canonical_code_of_the_rfc1951_example() -> None:
    # RFC 1951 §3.2.2 worked example (from memory): lengths (3,3,3,3,3,2,4,4) for
    # A..H give F=00, A=010, B=011, C=100, D=101, E=110, G=1110, H=1111.
    lengths = dict(zip(range(8), (3, 3, 3, 3, 3, 2, 4, 4)))
    cb = codes.canonical_codebook(lengths, name="rfc1951")
    expected = ["010", "011", "100", "101", "110", "00", "1110", "1111"]
    assert [cb.word(s) for s in range(8)] == expected
    assert codes.is_canonical(cb)
    codes.assert_prefix_free(cb, canonical=True, max_length=4)
    codes.assert_kraft(cb, complete=True, canonical=True)


def test_canonical_codebook_matches_bitarray_canonical_huffman() -> None:
    # bitarray.util.canonical_huffman lists symbols in its canonical order; relabel
    # them 0, 1, 2, ... in that order so that our (length, symbol) order coincides.
    rng = np.random.default_rng(4)
    for n in (2, 3, 10, 200):
        freq = {f"s{i}": int(c) for i, c in enumerate(rng.integers(1, 10_000, size=n))}
        ref_code, _counts, order = canonical_huffman(freq)
        relabelled = {k: ref_code[s].to01() for k, s in enumerate(order)}
        assert codes.is_canonical(relabelled)
        lengths = {k: len(w) for k, w in relabelled.items()}
        ours = codes.canonical_codebook(lengths)
        assert {k: ours.word(k) for k in lengths} == relabelled


def test_canonical_codebook_skips_zero_lengths_and_accepts_arrays() -> None:
    cb = codes.canonical_codebook((np.array([10, 11, 12, 13]), np.array([1, 0, 2, 2])))
    assert cb.symbols == [10, 12, 13]
    assert [cb.word(s) for s in cb.symbols] == ["0", "10", "11"]


def test_canonical_codebook_refuses_overfull_lengths() -> None:
    with pytest.raises(ValueError, match=r"Kraft sum Σ2\^-ℓ <= 1 .*got a Kraft sum of 5/4"):
        codes.canonical_codebook({0: 1, 1: 1, 2: 2})
    with pytest.raises(ValueError, match="length of symbol 1 must be an integer >= 0, got -1"):
        codes.canonical_codebook({0: 1, 1: -1})
    with pytest.raises(ValueError, match="length of symbol 1 must be an integer >= 0, got -1"):
        codes.canonical_codebook((np.array([0, 1]), np.array([1, -1])))
    with pytest.raises(ValueError, match="at least one symbol a positive length"):
        codes.canonical_codebook({0: 0})
    with pytest.raises(ValueError, match="symbols must be distinct, got 4 twice"):
        codes.canonical_codebook((np.array([4, 1, 4]), np.array([1, 2, 2])))
    with pytest.raises(ValueError, match="symbols and lengths must be the same size, got 3 and 2"):
        codes.canonical_codebook((np.array([4, 1, 5]), np.array([1, 1])))
    with pytest.raises(ValueError, match=r"lengths must be a \{symbol: length\} mapping or a"):
        codes.canonical_codebook(([0], [1], [2]))  # type: ignore[arg-type]


def test_canonical_codebook_refuses_wrong_types() -> None:
    with pytest.raises(TypeError, match=r"length of symbol 0 must be an integer, got 1\.5"):
        codes.canonical_codebook({0: 1.5, 1: 1})  # type: ignore[dict-item]
    with pytest.raises(TypeError, match=r"length of symbol 'a' must be an integer, got 1\.5"):
        codes.canonical_codebook({"a": 1.5, 1: 1})
    with pytest.raises(TypeError, match="symbol must be hashable, got"):
        codes.canonical_codebook(ListKeyed())
    with pytest.raises(TypeError, match=r"lengths must be a 1-D array of integers, got dtype"):
        codes.canonical_codebook((np.array([0, 1]), np.array([1.0, 1.0])))
    with pytest.raises(TypeError, match=r"lengths must be a \{symbol: length\} mapping or a"):
        codes.canonical_codebook(5)  # type: ignore[arg-type]
    with pytest.raises(TypeError, match="codebook name must be a string, got 7"):
        codes.canonical_codebook({0: 1, 1: 1}, name=7)  # type: ignore[arg-type]


def test_canonical_with_long_codewords_uses_exact_integers() -> None:
    # Unary-like lengths 1..80 plus one extra of length 80: a complete code.
    lengths = {i: i + 1 for i in range(80)}
    lengths[80] = 80
    cb = codes.canonical_codebook(lengths)
    assert cb.word(0) == "0"
    assert cb.word(79) == "1" * 79 + "0"
    assert cb.word(80) == "1" * 80
    assert codes.kraft_sum(cb) == 1
    assert codes.is_canonical(cb)
    assert codes.prefix_witness(cb) is None


def test_non_canonical_table_names_the_symbol_and_both_codewords() -> None:
    # Prefix-free and complete, but symbols 1 and 2 are swapped against canonical order.
    words = {0: "0", 1: "11", 2: "10"}
    assert not codes.is_canonical(words)
    with pytest.raises(CodeShapeFailure) as info:
        codes.assert_prefix_free(Codebook(words, name="swap"), canonical=True)
    msg = str(info.value)
    assert "symbol 1 has codeword '11'" in msg
    assert "gives it '10'" in msg


def test_canonical_check_on_overfull_lengths_says_none_exists() -> None:
    with pytest.raises(CodeShapeFailure, match="admit no canonical code"):
        codes._check_shape(Codebook({0: "0", 1: "1", 2: "10"}), None, True)


def test_is_canonical_against_a_direct_construction() -> None:
    # Reference: the RFC 1951 §3.2.2 next_code loop written out here independently.
    rng = random.Random(21)
    for _ in range(100):
        lengths = sorted(rng.randint(1, 7) for _ in range(rng.randint(1, 12)))
        if exact_kraft({i: "0" * ln for i, ln in enumerate(lengths)}) > 1:
            continue
        bl_count = [lengths.count(b) for b in range(max(lengths) + 1)]
        bl_count[0] = 0
        next_code = [0] * (max(lengths) + 1)
        code = 0
        for bits in range(1, max(lengths) + 1):
            code = (code + bl_count[bits - 1]) << 1
            next_code[bits] = code
        words = {}
        for sym, ln in enumerate(lengths):
            words[sym] = format(next_code[ln], f"0{ln}b")
            next_code[ln] += 1
        assert codes.is_canonical(words)
        ours = codes.canonical_codebook(dict(enumerate(lengths)))
        assert {s: ours.word(s) for s in words} == words


def test_length_cap_failure_names_symbol_length_and_cap() -> None:
    words = {0: "0", 1: "10", 2: "110", 3: "1110", 4: "11110", 5: "11111"}
    codes.assert_prefix_free(words, max_length=5)
    with pytest.raises(CodeShapeFailure) as info:
        codes.assert_kraft(Codebook(words, name="capped"), max_length=4)
    msg = str(info.value)
    assert "symbol 4 has a 5-bit codeword but max_length=4" in msg
    assert "2 codewords over the cap" in msg


@pytest.mark.parametrize("check", [codes.assert_prefix_free, codes.assert_kraft])
def test_length_cap_must_be_a_positive_integer(check: Callable[..., object]) -> None:
    words = {0: "0", 1: "10", 2: "11"}
    for bad in (2.5, True, "4", 4.0):
        expected = re.escape(f"max_length must be an integer, got {bad!r}")
        with pytest.raises(TypeError, match=expected):
            check(words, max_length=bad)
    for bad in (0, -3):
        with pytest.raises(ValueError, match=f"max_length must be an integer >= 1, got {bad}"):
            check(words, max_length=bad)
    # the argument is checked before the code: a bad cap is named even on a bad code
    with pytest.raises(TypeError, match="max_length"):
        check({0: "0", 1: "0", 2: "1"}, max_length=2.5)


# ------------------------------------------------------------------ inside pytest


def test_failures_show_in_a_pytest_run(pytester: pytest.Pytester) -> None:
    pytester.makepyfile(
        """
        from pytest_ratefloor import assert_kraft, assert_prefix_free

        def test_table():
            assert_prefix_free({0: "0", 1: "01", 2: "11"})

        def test_lengths():
            assert_kraft({0: "0", 1: "1", 2: "10"})
        """
    )
    result = pytester.runpytest("-p", "no:cacheprovider")
    result.assert_outcomes(failed=2)
    result.stdout.fnmatch_lines(
        [
            "*PrefixFailure: codebook 'codebook' is not prefix-free: the codeword of symbol 0"
            " ('0') is a prefix of the codeword of symbol 1 ('01')*",
            "*KraftFailure: *Kraft sum*= 5/4 > 1*McMillan*",
        ]
    )
    # __tracebackhide__: the traceback stops at the user's call, not inside the codes package
    assert "def assert_prefix_free" not in result.stdout.str()
