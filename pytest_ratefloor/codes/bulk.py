"""Reading a whole code table at once: the fast path of :class:`Codebook` from a mapping.

A table of 2**20 entries read entry by entry (:mod:`pytest_ratefloor.codes.entries`)
spends about a microsecond of Python per entry. This module reads the common shapes
of a big table with a few passes of C code over all entries together:

* keys that are all Python (or numpy) integers in the signed 64-bit range, and
* codewords that are all ``(value, length)`` tuples of integers, or all ``'0'/'1'``
  strings.

It never decides that a table is bad. Whenever an entry falls outside those shapes or
breaks a rule (a bool, a length out of range, a value that does not fit its length, a
character other than '0'/'1', a symbol listed twice, a key of another kind...) it
returns ``None`` and the caller reads the table entry by entry, which raises the one
message naming the symbol and the codeword. So a table gets the same result, and a
bad table the same error, whichever path reads it.
"""

from __future__ import annotations

from collections.abc import Collection, Mapping
from operator import itemgetter
from typing import Any, NamedTuple

import numpy as np
import numpy.typing as npt

from pytest_ratefloor.codes.entries import MAX_CODEWORD_BITS

IntArray = npt.NDArray[np.int64]
U64Array = npt.NDArray[np.uint64]

#: Below this many entries the entry-by-entry reading is as quick: skip the set-up.
_BULK_MIN_ENTRIES = 64

#: Longest codeword the '0'/'1' text path extracts with 64-bit windows (a window read
#: at a byte boundary holds the 57 bits after any bit offset 0..7).
_WINDOW_BITS = 57

_BOOL_TYPES = (bool, np.bool_)


class BulkTable(NamedTuple):
    """An integer-keyed table read in bulk, entries in ascending symbol order."""

    symbols: IntArray  #: ascending, distinct
    lengths: IntArray  #: codeword lengths, >= 1
    #: codeword values as Python ints, and as uint64; at least one is given (the
    #: Codebook makes the other when first needed; no uint64 beyond 64 bits)
    values: list[int] | None
    values64: U64Array | None


def bulk_table(mapping: Mapping[Any, Any]) -> BulkTable | None:
    """``mapping`` read in bulk, or ``None`` when it must be read entry by entry (a
    small table, keys other than integers, codewords of mixed or other kinds, or any
    entry the entry-by-entry reading would refuse)."""
    n = len(mapping)
    if n < _BULK_MIN_ENTRIES:
        return None
    keys = list(mapping.keys())
    # a dict's own view is read four times over as fast as a list, without a copy
    words: Collection[Any] = (
        mapping.values() if type(mapping) is dict else list(mapping.values())
    )
    if len(keys) != n or len(words) != n:
        return None
    symbols = _int64s(keys)
    if symbols is None:
        return None
    first = type(next(iter(words)))
    if first is tuple:
        parsed = _pairs(words)
    elif first is str:
        parsed = _texts(words)
    else:
        return None
    if parsed is None:
        return None
    lengths, values, values64 = parsed
    if symbols.size > 1 and not bool(np.all(symbols[1:] > symbols[:-1])):
        order = np.argsort(symbols, kind="stable")
        symbols = symbols[order]
        if bool(np.any(symbols[1:] == symbols[:-1])):
            return None  # a symbol listed twice: the entry-by-entry reading names it
        lengths = lengths[order]
        if values64 is not None:
            values64 = values64[order]
            values = None
        else:
            assert values is not None
            values = [values[i] for i in order.tolist()]
    return BulkTable(symbols, lengths, values, values64)


def _int64s(items: list[Any]) -> IntArray | None:
    """``items`` as int64 when every one is a Python or numpy integer (never a bool)
    in the signed 64-bit range; else None."""
    try:
        # Python's sum stays an exact int over ints and bools alone (a float, a numpy
        # scalar or a Fraction changes its type; a string raises): a C-speed type check
        with np.errstate(all="ignore"):  # numpy scalars may wrap around: no matter
            total = sum(items)
    except TypeError:
        return None
    try:
        if type(total) is int and total <= 255 * len(items):  # maybe all bytes (lengths)
            try:
                arr = np.frombuffer(bytes(items), dtype=np.uint8).astype(np.int64)
            except ValueError:  # one is negative or above 255
                arr = np.array(items, dtype=np.int64)
        elif type(total) is int:
            arr = np.array(items, dtype=np.int64)
        else:  # numpy integers, or something else: let numpy tell
            arr = np.array(items)
            if arr.ndim != 1 or arr.dtype.kind not in "iu":
                return None
            if arr.dtype.kind == "u" and int(arr.max()) > np.iinfo(np.int64).max:
                return None
            arr = arr.astype(np.int64)
    except (ValueError, TypeError, OverflowError):
        return None  # beyond 64 bits
    # a bool reads as 0 or 1, so one can only hide where the array holds 0 or 1
    hides = np.flatnonzero(arr.view(np.uint64) <= 1).tolist()
    if any(isinstance(items[i], _BOOL_TYPES) for i in hides):
        return None
    return arr


def _pairs(words: Collection[Any]) -> tuple[IntArray, list[int] | None, U64Array | None] | None:
    """``(value, length)`` tuples: lengths, values (the caller's order)."""
    if set(map(type, words)) != {tuple}:  # lists and tuple subclasses: entry by entry
        return None
    try:
        lengths = _int64s(list(map(itemgetter(1), words)))
    except IndexError:
        return None
    # every tuple has two items or more, so this sum says each has exactly two
    if lengths is None or sum(map(len, words)) != 2 * len(words):
        return None
    values = _int64s(list(map(itemgetter(0), words)))  # beyond 63 bits: entry by entry
    if values is None:
        return None
    if int(lengths.min()) < 1 or int(lengths.max()) > MAX_CODEWORD_BITS or int(values.min()) < 0:
        return None
    if int(lengths.max()) < 63:
        if bool(np.any(values >> lengths)):
            return None
    else:
        short = lengths < 63  # a non-negative int64 always fits 63 bits or more
        if bool(np.any(values[short] >> lengths[short])):
            return None
    if int(lengths.max()) > 64:  # no uint64 table for codewords this long
        return lengths, values.tolist(), None
    return lengths, None, values.astype(np.uint64)  # Python ints from it when needed


def _texts(words: Collection[Any]) -> tuple[IntArray, list[int] | None, U64Array | None] | None:
    """'0'/'1' strings: lengths, values (the caller's order)."""
    try:
        joined = "".join(words)  # TypeError unless every word is a string
    except TypeError:
        return None
    try:  # word lengths below 256 (the common case) pack into bytes at C speed
        lengths = np.frombuffer(bytes(map(len, words)), dtype=np.uint8).astype(np.int64)
    except ValueError:
        lengths = np.array(list(map(len, words)), dtype=np.int64)
    if int(lengths.min()) < 1 or int(lengths.max()) > MAX_CODEWORD_BITS:
        return None
    try:
        raw = joined.encode("ascii")
    except UnicodeEncodeError:
        return None
    if raw.translate(None, b"01"):  # a character other than '0' and '1'
        return None
    if int(lengths.max()) > _WINDOW_BITS:
        values = list(map(int, words, [2] * len(words)))
        return lengths, values, _as_u64(values, lengths)
    return lengths, None, _extract(np.packbits(np.frombuffer(raw, dtype=np.uint8) & 1), lengths)


def _as_u64(values: list[int], lengths: IntArray) -> U64Array | None:
    return np.array(values, dtype=np.uint64) if int(lengths.max()) <= 63 else None


def _extract(bits: npt.NDArray[np.uint8], lengths: IntArray) -> U64Array:
    """The codewords laid end to end in ``bits`` (packed, most significant bit first),
    each at most :data:`_WINDOW_BITS` bits, as uint64 values: one unaligned 64-bit
    read per word."""
    starts = np.cumsum(lengths) - lengths
    packed = np.concatenate((bits, np.zeros(8, dtype=np.uint8)))
    # windows[b] is the big-endian 64-bit word starting at byte b (unaligned view)
    windows = np.lib.stride_tricks.as_strided(
        np.frombuffer(packed.data, dtype=">u8", count=1),
        shape=(packed.size - 7,),
        strides=(1,),
        writeable=False,
    )
    window = windows[starts >> 3].astype(np.uint64)
    drop = (64 - (starts & 7) - lengths).astype(np.uint64)
    mask = (np.uint64(1) << lengths.astype(np.uint64)) - np.uint64(1)
    values: U64Array = (window >> drop) & mask
    return values
