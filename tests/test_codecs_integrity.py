"""Integrity of decoder output checks: whatever a decoder returns that is no
sequence of n integers is named — the codec, the type returned, and what was
expected — and never read as "an array of shape ()".
"""

from __future__ import annotations

import re
from collections.abc import Callable, Iterator
from typing import Any

import numpy as np
import pytest
from bitarray import bitarray

from pytest_ratefloor import sources
from pytest_ratefloor.codecs import (
    CodecContractError,
    StreamCodec,
    decoded_array,
    symbols_from_decoder,
)
from pytest_ratefloor.errors import CodecMisbehaviour
from pytest_ratefloor.roundtrip import run_roundtrip

SOURCE = sources.uniform(4)
N = 50


def u8_encode(symbols: np.ndarray) -> bytes:
    return np.asarray(symbols, dtype=np.uint8).tobytes()


def _generator(data: bytes, n: int) -> Iterator[int]:
    return (b for b in data)


EXPECTED = re.escape(f"expected a sequence or array of {N} integers")


@pytest.mark.parametrize(
    ("decode", "message"),
    [
        (_generator, rf"decoder returned generator \(an iterator or generator: it can be read "
                     rf"once only, so it cannot be checked; return a list or an array\); "
                     rf"{EXPECTED}"),
        (lambda d, n: iter(list(d)), rf"decoder returned list_iterator \(an iterator.*{EXPECTED}"),
        (lambda d, n: dict(enumerate(d)), rf"decoder returned dict \(a mapping, not a "
                                          rf"sequence\); {EXPECTED}"),
        (lambda d, n: set(d), rf"decoder returned set \(a set: its order is arbitrary\); "
                              rf"{EXPECTED}"),
        (lambda d, n: "0123", rf"decoder returned str '0123' \(text, not symbols\); {EXPECTED}"),
        (lambda d, n: 7, rf"decoder returned int 7, a single value and not a sequence; "
                         rf"{EXPECTED}"),
        (lambda d, n: np.int64(7), rf"decoder returned int64 7, a single value.*{EXPECTED}"),
        (lambda d, n: None, rf"decoder returned NoneType \(nothing: a missing return "
                            rf"statement\?\); {EXPECTED}"),
        (lambda d, n: np.frombuffer(d, np.uint8).reshape(5, 10),
         rf"decoder returned ndarray of shape \(5, 10\); expected a flat \(1-D\) sequence of "
         rf"{N} integers"),
        (lambda d, n: np.array([*d[:-1], "x"], dtype=object),
         r"decoder returned object values \(ndarray of dtype object holding str 'x' at index "
         r"49\); expected integers"),
        (lambda d, n: np.array([True, *d[1:]], dtype=object),
         r"holding bool True at index 0\); expected integers"),
        (lambda d, n: np.array([*d[:-1], None], dtype=object),
         r"holding NoneType None at index 49\); expected integers"),
        (lambda d, n: [float(b) for b in d],
         r"decoder returned floats \(list of dtype float64, first \d\.0\); expected integers"),
    ],
    ids=["generator", "iterator", "dict", "set", "str", "int", "numpy-scalar", "None", "2-D",
         "object-str", "object-bool", "object-None", "floats"],
)
def test_a_round_trip_names_the_codec_the_type_and_what_was_expected(
    decode: Callable[[bytes, int], Any], message: str
) -> None:
    codec = StreamCodec(u8_encode, decode, name="tide-u8")
    with pytest.raises(CodecMisbehaviour, match=message) as info:
        run_roundtrip(codec, SOURCE, N, 0, edge_cases=False)
    text = str(info.value)
    assert text.startswith(f"codec 'tide-u8' misbehaved on the sample ({N} symbols): ")
    assert "array of shape ()" not in text
    assert f"(source uniform(k=4), n={N}, seed=0)" in text


def test_generators_are_not_consumed_by_the_check() -> None:
    gen = (i for i in range(3))
    with pytest.raises(CodecContractError, match="generator"):
        symbols_from_decoder(gen, 3)
    assert list(gen) == [0, 1, 2]


@pytest.mark.parametrize(
    ("value", "expected"),
    [
        (np.array([True, False, True]), [1, 0, 1]),  # binary symbols, as a bit decoder gives
        (bitarray("101"), [1, 0, 1]),
        (range(3), [0, 1, 2]),
        ((4, 5, 6), [4, 5, 6]),
        (np.array([1, 2, 3], dtype=object), [1, 2, 3]),
        (b"\x01\x02\x03", [1, 2, 3]),
        # a memoryview of wider items gives its items, not its raw bytes
        (memoryview(np.array([7, 8, 9], dtype=np.int64)), [7, 8, 9]),
        (memoryview(b"\x07\x08\x09"), [7, 8, 9]),
    ],
    ids=["bool", "bitarray", "range", "tuple", "object-ints", "bytes", "memoryview-int64",
         "memoryview-bytes"],
)
def test_what_is_accepted(value: object, expected: list[int]) -> None:
    out = symbols_from_decoder(value, 3)
    assert out.dtype == np.int64
    assert out.tolist() == expected


def test_decoded_array_checks_everything_but_the_length() -> None:
    assert decoded_array([1, 2], 5).tolist() == [1, 2]
    with pytest.raises(CodecContractError, match=r"^decoder returned 2 symbols; expected n=5$"):
        symbols_from_decoder([1, 2], 5)
    with pytest.raises(CodecContractError, match="expected a sequence or array of 5 integers"):
        decoded_array((x for x in [1, 2]), 5)
    with pytest.raises(CodecContractError, match=r"outside the int64 range \(up to "
                                                 r"18446744073709551615\)"):
        decoded_array(np.array([2**64 - 1], dtype=np.uint64), 1)
