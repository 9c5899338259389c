"""Tests of the symbol layouts (pytest_ratefloor.layouts): packing against struct and bitarray."""

from __future__ import annotations

import struct
import zlib
from types import SimpleNamespace

import numpy as np
import pytest
from bitarray import bitarray

from pytest_ratefloor.codecs import ByteCodec
from pytest_ratefloor.errors import LayoutError
from pytest_ratefloor.layouts import LAYOUTS, pack, packed_size, resolve_layout, unpack


def _alphabet(lo: int | None, hi: int | None, table: tuple[int, int] = (0, 0)) -> SimpleNamespace:
    """A stand-in with the alphabet attributes of a source (what resolve_layout reads)."""
    return SimpleNamespace(
        min_symbol=lo,
        max_symbol=hi,
        pmf_table=lambda tail=2.0**-60: (np.array(table, dtype=np.int64), np.array([0.5, 0.5])),
    )


# ------------------------------------------------------------------ packing

def test_bits_packing_matches_bitarray() -> None:
    # Reference: bitarray (big-endian bit order: first symbol in the most significant bit).
    rng = np.random.default_rng(1)
    for n in range(0, 30):
        symbols = rng.integers(0, 2, n)
        assert pack(symbols, "bits") == bitarray(symbols.tolist(), endian="big").tobytes()
        assert packed_size(n, "bits") == (n + 7) // 8


@pytest.mark.parametrize(
    ("packing", "fmt", "lo", "hi"),
    [
        ("u8", "B", 0, 255),
        ("u16le", "<H", 0, 65535),
        ("u32le", "<I", 0, 2**32 - 1),
        ("i32le", "<i", -(2**31), 2**31 - 1),
    ],
)
def test_word_packings_match_struct(packing: str, fmt: str, lo: int, hi: int) -> None:
    # Reference: the stdlib struct module's little-endian formats.
    values = [lo, hi, lo + 1, hi - 1, (lo + hi) // 2, 0 if lo <= 0 else lo]
    symbols = np.array(values, dtype=np.int64)
    assert pack(symbols, packing) == b"".join(struct.pack(fmt, v) for v in values)
    assert np.array_equal(unpack(pack(symbols, packing), len(values), packing), symbols)


@pytest.mark.parametrize(("packing", "fmt"), [("zigzag-u8", "B"), ("zigzag-u16le", "<H"),
                                              ("zigzag-u32le", "<I")])
def test_zigzag_matches_the_shift_xor_definition(packing: str, fmt: str) -> None:
    # Reference: zig-zag as (x << 1) ^ (x >> 63) on two's-complement integers
    # (the varint encoding of signed fields in Protocol Buffers, from memory);
    # 0, -1, 1, -2, 2 -> 0, 1, 2, 3, 4.
    p = LAYOUTS[packing]
    values = [0, -1, 1, -2, 2, p.lo, p.hi, p.lo + 1, p.hi - 1]
    expected = b"".join(struct.pack(fmt, (v << 1) ^ (v >> 63)) for v in values)
    symbols = np.array(values, dtype=np.int64)
    assert pack(symbols, packing) == expected
    assert np.array_equal(unpack(expected, len(values), packing), symbols)
    assert pack(np.array([0, -1, 1, -2, 2]), "zigzag-u8") == bytes([0, 1, 2, 3, 4])


@pytest.mark.parametrize("packing", sorted(LAYOUTS))
def test_every_packing_round_trips_random_symbols(packing: str) -> None:
    p = LAYOUTS[packing]
    rng = np.random.default_rng(7)
    for n in (0, 1, 7, 8, 9, 1000):
        symbols = rng.integers(p.lo, p.hi, n, endpoint=True)
        data = pack(symbols, packing)
        assert len(data) == packed_size(n, packing)
        back = unpack(data, n, packing)
        assert back.dtype == np.int64
        assert np.array_equal(back, symbols)


@pytest.mark.parametrize(
    ("packing", "bad"), [("bits", 2), ("u8", 256), ("u8", -1), ("u16le", 65536), ("zigzag-u8", 128)]
)
def test_symbol_outside_the_packing_is_named(packing: str, bad: int) -> None:
    symbols = np.array([0, 1, 0, bad, 1])
    message = rf"symbol {bad} at index 3 does not fit layout '{packing}'"
    with pytest.raises(LayoutError, match=message):
        pack(symbols, packing)


@pytest.mark.parametrize(
    ("lo", "hi", "table", "expected"),
    [
        (0, 1, (0, 0), "bits"),
        (0, 0, (0, 0), "bits"),
        (0, 255, (0, 0), "u8"),
        (0, 256, (0, 0), "u16le"),
        (0, 65535, (0, 0), "u16le"),
        (0, 65536, (0, 0), "u32le"),
        (-3, 3, (0, 0), "zigzag-u8"),
        (-128, 127, (0, 0), "zigzag-u8"),
        (-129, 0, (0, 0), "zigzag-u16le"),
        (0, None, (0, 90), "u8"),  # unbounded above: range of the pmf table
        (0, None, (0, 300), "u16le"),
        (None, None, (-200, 200), "zigzag-u16le"),
    ],
)
def test_auto_packing_rule(lo: int | None, hi: int | None, table: tuple[int, int],
                           expected: str) -> None:
    assert resolve_layout("auto", _alphabet(lo, hi, table)) == expected  # type: ignore[arg-type]


def test_auto_packing_needs_a_source_and_unknown_packing_is_named() -> None:
    with pytest.raises(LayoutError, match="resolved from the source"):
        resolve_layout("auto")
    with pytest.raises(LayoutError, match=r"symbol must be one of .*got 'u12'"):
        ByteCodec(zlib.compress, zlib.decompress, packing="u12")
    with pytest.raises(LayoutError, match=r"no symbol layout holds the symbol range 0\.\.42949"):
        resolve_layout("auto", _alphabet(0, 2**32))  # type: ignore[arg-type]


def test_symbol_and_packing_name_one_option() -> None:
    assert ByteCodec(zlib.compress, zlib.decompress, symbol="u8").symbol == "u8"
    assert ByteCodec(zlib.compress, zlib.decompress, packing="u8").symbol == "u8"
    with pytest.raises(ValueError, match="name the same option"):
        ByteCodec(zlib.compress, zlib.decompress, symbol="u16le", packing="u8")


def test_unpack_of_a_partial_word_is_named() -> None:
    with pytest.raises(LayoutError, match="3 bytes are not a whole number of 'u16le' symbols"):
        unpack(b"abc", None, "u16le")
