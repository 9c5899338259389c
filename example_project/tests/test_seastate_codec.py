"""Unit tests of the sea-state Huffman codec (kelpwick.seastate)."""

from __future__ import annotations

import itertools
from fractions import Fraction

import numpy as np
import pytest
from bitarray import bitarray
from bitarray.util import canonical_decode, canonical_huffman

from kelpwick import seastate


def _cost(counts: np.ndarray, lengths: np.ndarray) -> int:
    return int((np.asarray(counts) * np.asarray(lengths)).sum())


def test_canonical_code_matches_the_rfc1951_worked_example() -> None:
    # RFC 1951 §3.2.2: lengths (3, 3, 3, 3, 3, 2, 4, 4) for A..H give
    # F=00, A=010, B=011, C=100, D=101, E=110, G=1110, H=1111.
    code = seastate.canonical_code([3, 3, 3, 3, 3, 2, 4, 4])
    words = {s: w.to01() for s, w in code.items()}
    assert words == {
        0: "010", 1: "011", 2: "100", 3: "101", 4: "110", 5: "00", 6: "1110", 7: "1111",
    }


def test_message_layout_worked_by_hand() -> None:
    # classes [0, 0, 1, 2]: counts (2, 1, 1) -> lengths (1, 2, 2) -> 0="0", 1="10", 2="11".
    # Bits: class field 0010 | lengths 001 010 010 | payload 0 0 10 11 -> 19 bits, zero-padded:
    # 00100010 10010001 01100000 = 22 91 60, after the count byte 04 (worked by hand).
    assert seastate.encode(np.array([0, 0, 1, 2])) == bytes.fromhex("04229160")
    assert seastate.decode(bytes.fromhex("04229160"), 4).tolist() == [0, 0, 1, 2]


def test_payload_decodes_with_bitarrays_canonical_decoder() -> None:
    # An independent canonical (DEFLATE-convention) decoder reads our payload.
    rng = np.random.default_rng(7)
    classes = rng.choice(8, size=5_000, p=seastate.SEA_STATE_FREQUENCIES)
    message = seastate.encode(classes)
    bits = bitarray()
    bits.frombytes(message[2:])  # 5000 needs a two-byte count
    lengths = seastate.read_lengths(bits)
    body = bits[4 + 3 * lengths.size :]
    count = [int((lengths == v).sum()) if v else 0 for v in range(seastate.MAX_LENGTH + 1)]
    order = [s for _, s in sorted((int(v), s) for s, v in enumerate(lengths) if v)]
    decoded = list(itertools.islice(canonical_decode(body, count, order), classes.size))
    assert decoded == classes.tolist()


@pytest.mark.parametrize("seed", range(20))
def test_lengths_are_huffman_optimal_when_the_cap_does_not_bind(seed: int) -> None:
    # bitarray.util.canonical_huffman is an independent unrestricted Huffman construction.
    rng = np.random.default_rng(seed)
    counts = rng.integers(1, 1000, size=int(rng.integers(2, 17))) ** int(rng.integers(1, 4))
    reference, _, _ = canonical_huffman({s: int(c) for s, c in enumerate(counts)})
    reference_lengths = np.array([len(reference[s]) for s in range(counts.size)])
    lengths = seastate.limited_lengths(counts)
    assert lengths.max() <= seastate.MAX_LENGTH
    if reference_lengths.max() <= seastate.MAX_LENGTH:
        assert _cost(counts, lengths) == _cost(counts, reference_lengths)
    else:  # the cap binds: a capped code can only cost more than the unrestricted optimum
        assert _cost(counts, lengths) > _cost(counts, reference_lengths)


@pytest.mark.parametrize(("symbols", "cap"), [(4, 2), (5, 3), (6, 3), (6, 4), (7, 3)])
def test_package_merge_matches_exhaustive_search(symbols: int, cap: int) -> None:
    # Exhaustive search over every length vector within the cap that satisfies Kraft.
    rng = np.random.default_rng(symbols * 10 + cap)
    for _ in range(5):
        counts = rng.integers(1, 200, size=symbols) ** 2
        best = min(
            int(np.dot(counts, lens))
            for lens in itertools.product(range(1, cap + 1), repeat=symbols)
            if sum(1 << (cap - v) for v in lens) <= 1 << cap  # Kraft sum <= 1, scaled by 2**cap
        )
        lengths = seastate.limited_lengths(counts, max_length=cap)
        assert lengths.max() <= cap
        assert _cost(counts, lengths) == best


def test_cap_binds_on_a_dyadic_tail_and_the_code_stays_complete() -> None:
    # Counts 2**15, 2**14, ..., 1, 1 would want lengths up to 15 (dyadic pmf, from memory).
    counts = np.array([2**15 >> i for i in range(15)] + [1])
    lengths = seastate.limited_lengths(counts)
    assert lengths.max() == seastate.MAX_LENGTH
    assert sum(Fraction(1, 2 ** int(v)) for v in lengths) == 1


def test_absent_classes_get_no_codeword_and_one_class_gets_length_one() -> None:
    assert seastate.limited_lengths(np.array([0, 5, 0, 3])).tolist() == [0, 1, 0, 1]
    assert seastate.limited_lengths(np.array([0, 0, 9])).tolist() == [0, 0, 1]
    assert seastate.limited_lengths(np.array([0, 0])).tolist() == [0, 0]


@pytest.mark.parametrize(
    "classes",
    [[], [0], [15], [3, 3, 3], [0, 15], list(range(16)), [7] * 1000 + [0]],
)
def test_round_trip_small_batches(classes: list[int]) -> None:
    x = np.array(classes, dtype=np.int64)
    assert seastate.decode(seastate.encode(x), x.size).tolist() == classes


def test_shipped_table_is_the_table_the_encoder_used() -> None:
    x = np.array([2, 2, 2, 2, 5, 5, 9])
    assert seastate.shipped_table(seastate.encode(x)) == seastate.batch_table(x)


@pytest.mark.parametrize("bad", [16, -1, 255])
def test_class_outside_the_table_is_named(bad: int) -> None:
    pattern = rf"sea-state class {bad} outside 0\.\.15 \(first at index 2\)"
    with pytest.raises(ValueError, match=pattern):
        seastate.encode(np.array([0, 1, bad, 3]))


def test_wrong_count_truncation_and_bad_tables_are_rejected() -> None:
    message = seastate.encode(np.array([0, 1, 2, 3, 0, 0]))
    with pytest.raises(ValueError, match="holds 6 symbols, caller asked for n=7"):
        seastate.decode(message, 7)
    with pytest.raises(ValueError, match="truncated"):
        seastate.decode(message[:2], 6)
    # Table 0010 | 001 001 001: three codes of length 1 over-subscribe the code space.
    with pytest.raises(ValueError, match="not a complete prefix code"):
        seastate.decode(bytes([1, 0b0010_0010, 0b0100_1000]), 1)
