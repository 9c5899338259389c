"""Symbol layouts: how integer symbols are written as bytes, and read back.

One table serves every place that turns symbols into bytes or bytes into
symbols: a ``ByteCodec`` packs the sample before compressing it
(``ByteCodec(symbol=...)``), ``sources.from_file(path, symbol=...)`` reads a
file's bytes as symbols, and ``ratefloor entropy --symbol`` does the same on
the command line. The option is called ``symbol`` everywhere.

========================  ====================================================
``"bits"``                symbols 0/1, 8 per byte, first symbol in the most
                          significant bit; with ``n`` known the tail bits of
                          the last byte are padding (zero)
``"u8"``                  one byte per symbol, 0..255
``"u16le"``/``"u32le"``   little-endian unsigned 16/32-bit words
``"i32le"``               little-endian two's-complement 32-bit words
``"zigzag-u8"`` etc.      signed symbols mapped by zig-zag (0, −1, 1, −2, 2, …
                          → 0, 1, 2, 3, 4, …) then ``u8``/``u16le``/``u32le``
``"auto"``                (codecs only) chosen from the source's alphabet:
                          ⊆ {0, 1} → ``"bits"``; ⊆ 0..255 → ``"u8"``; else the
                          narrowest of ``"u16le"``/``"u32le"``; alphabets with
                          negative symbols use zig-zag (common practice for
                          residuals: small magnitudes stay small) with the
                          narrowest word that fits. For an unbounded alphabet
                          the range is that of ``source.pmf_table()`` (all but
                          2⁻⁶⁰ of the mass).
========================  ====================================================
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Literal, get_args

import numpy as np

from pytest_ratefloor.errors import LayoutError

if TYPE_CHECKING:
    from pytest_ratefloor.sources import Source

__all__ = [
    "AUTO",
    "LAYOUTS",
    "Layout",
    "LayoutName",
    "layout_for_range",
    "pack",
    "packed_size",
    "resolve_layout",
    "source_symbol_range",
    "unpack",
]

LayoutName = Literal[
    "bits", "u8", "u16le", "u32le", "i32le", "zigzag-u8", "zigzag-u16le", "zigzag-u32le",
]
#: The layout a codec resolves from its source's alphabet.
AUTO = "auto"


@dataclass(frozen=True)
class Layout:
    """One symbol layout: the numpy dtype of a word and the symbols it holds."""

    name: LayoutName
    dtype: str | None  # numpy dtype of one packed word; None for "bits"
    lo: int
    hi: int
    zigzag: bool = False

    @property
    def bytes_per_symbol(self) -> float:
        """1/8 for ``bits``, else the word size."""
        return 0.125 if self.dtype is None else float(np.dtype(self.dtype).itemsize)

    def holds(self, lo: int, hi: int) -> bool:
        """Whether every symbol of ``lo..hi`` fits."""
        return self.lo <= lo and hi <= self.hi


LAYOUTS: dict[str, Layout] = {
    layout.name: layout
    for layout in (
        Layout("bits", None, 0, 1),
        Layout("u8", "u1", 0, 0xFF),
        Layout("u16le", "<u2", 0, 0xFFFF),
        Layout("u32le", "<u4", 0, 0xFFFF_FFFF),
        Layout("i32le", "<i4", -(2**31), 2**31 - 1),
        Layout("zigzag-u8", "u1", -(2**7), 2**7 - 1, zigzag=True),
        Layout("zigzag-u16le", "<u2", -(2**15), 2**15 - 1, zigzag=True),
        Layout("zigzag-u32le", "<u4", -(2**31), 2**31 - 1, zigzag=True),
    )
}
assert tuple(LAYOUTS) == get_args(LayoutName)


def layout_for_range(lo: int, hi: int) -> LayoutName:
    """The ``"auto"`` rule for a symbol range ``lo..hi``."""
    names: tuple[LayoutName, ...] = (
        ("bits", "u8", "u16le", "u32le") if lo >= 0
        else ("zigzag-u8", "zigzag-u16le", "zigzag-u32le")
    )
    for name in names:
        if LAYOUTS[name].holds(lo, hi):
            return name
    raise LayoutError(
        f"no symbol layout holds the symbol range {lo}..{hi} (widest: 32-bit words); "
        "wrap the codec in a StreamCodec instead"
    )


def source_symbol_range(source: Source) -> tuple[int, int]:
    """The symbol range a layout must hold for ``source``.

    The declared ``min_symbol``/``max_symbol`` where finite; for an unbounded
    side the extreme of ``source.pmf_table()`` (all but 2⁻⁶⁰ of the mass).
    """
    lo, hi = source.min_symbol, source.max_symbol
    if lo is None or hi is None:
        table_symbols, _ = source.pmf_table()
        if lo is None:
            lo = int(np.min(table_symbols))
        if hi is None:
            hi = int(np.max(table_symbols))
    return int(lo), int(hi)


def resolve_layout(name: object, source: Source | None = None, *,
                   allow_auto: bool = True) -> LayoutName:
    """Check a layout name; resolve ``"auto"`` from the source's alphabet.

    :raises LayoutError: unknown name, or ``"auto"`` without a source.
    """
    if name == AUTO and allow_auto:
        if source is None:
            raise LayoutError(
                "symbol='auto' is resolved from the source's alphabet; bind the codec to a "
                f"source with .for_source(source) or name a layout ({', '.join(LAYOUTS)})"
            )
        return layout_for_range(*source_symbol_range(source))
    if not isinstance(name, str) or name not in LAYOUTS:
        allowed = ", ".join(repr(n) for n in ((AUTO,) if allow_auto else ()) + tuple(LAYOUTS))
        raise LayoutError(f"symbol must be one of {allowed}, got {name!r}")
    return LAYOUTS[name].name


def pack(symbols: np.ndarray, layout: str, trusted: bool = False) -> bytes:
    """Write int symbols as bytes; a symbol that does not fit raises LayoutError naming it.

    ``trusted=True`` skips the range scan when the caller guarantees that
    every symbol fits (a sample of a source whose declared range fits).
    """
    p = LAYOUTS[layout]
    arr = np.asarray(symbols)
    if len(arr) and not trusted:
        lo, hi = int(arr.min()), int(arr.max())
        if not p.holds(lo, hi):
            bad = np.flatnonzero((arr < p.lo) | (arr > p.hi))[0]
            raise LayoutError(
                f"symbol {int(arr[bad])} at index {bad} does not fit layout {layout!r} "
                f"(symbols {p.lo}..{p.hi})"
            )
    if p.dtype is None:
        return np.packbits(arr.astype(np.uint8)).tobytes()
    if p.zigzag:
        wide = arr.astype(np.int64)
        arr = np.where(wide >= 0, 2 * wide, -2 * wide - 1)
    return arr.astype(p.dtype).tobytes()


def packed_size(n: int, layout: str) -> int:
    """Bytes that ``n`` symbols take in ``layout``."""
    p = LAYOUTS[layout]
    if p.dtype is None:
        return (n + 7) // 8
    return n * np.dtype(p.dtype).itemsize


def unpack(data: bytes, n: int | None, layout: str) -> np.ndarray:
    """Inverse of :func:`pack`: ``n`` symbols (``None``: every whole symbol in ``data``).

    :raises LayoutError: ``data`` is not a whole number of words.
    """
    p = LAYOUTS[layout]
    raw = np.frombuffer(data, dtype=np.uint8)
    if p.dtype is None:
        return np.unpackbits(raw, count=n).astype(np.int64)
    width = np.dtype(p.dtype).itemsize
    if len(data) % width:
        raise LayoutError(
            f"{len(data)} bytes are not a whole number of {layout!r} symbols "
            f"({width} bytes each)"
        )
    words = np.frombuffer(data, dtype=p.dtype).astype(np.int64)
    if p.zigzag:
        words = np.where(words & 1, -(words >> 1) - 1, words >> 1)
    return words
