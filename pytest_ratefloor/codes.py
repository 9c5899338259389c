"""Symbol-code analysis: codebooks, prefix-freeness, Kraft, unique decodability and
optimal-length floors.

What this module holds
----------------------
* :class:`Codebook` — a table ``{symbol: codeword}`` that is both the object the
  checks analyse and a working codec (``encode``/``decode`` at bitarray's C speed).
* Checks on a table: :func:`prefix_witness` / :func:`assert_prefix_free`,
  :func:`kraft_sum` / :func:`assert_kraft`, :func:`ambiguity` /
  :func:`assert_uniquely_decodable` (Sardinas–Patterson), :func:`is_canonical`, and
  the length cap of a format (``max_length=``).
* Floors for the "huffman" reference line: :func:`huffman_lengths`,
  :func:`length_limited_lengths` (package-merge), :func:`canonical_codebook`, the
  Golomb/Rice parameters of geometric sources and their exact expected lengths, and
  :func:`expected_length` / :func:`redundancy` / :func:`excess_by_symbol`.

Conventions
-----------
* Codewords are bit strings written most-significant bit first: ``"0110"``, a
  ``bitarray`` (its logical bit order, whatever its endianness) or ``(value, length)``
  meaning the low ``length`` bits of ``value``, MSB first. Witnesses in results and
  messages are given as ``"0110"`` text.
* A zero probability gets no codeword (length 0 in length vectors): a symbol that
  never occurs needs no room in the code space.
* A source with a single possible symbol gets one 1-bit codeword. A zero-length
  codeword would make the stream carry no bits at all, so the symbol count could not
  be recovered from the stream; every real symbol-code format spends at least one bit.
  Such a code has Kraft sum 1/2 and is the one incomplete code ``assert_kraft(...,
  complete=True)`` accepts.
* Kraft sums are exact :class:`fractions.Fraction` values (integer arithmetic only).
"""

from __future__ import annotations

import heapq
import itertools
import math
import operator
from bisect import bisect_left
from collections.abc import Mapping
from fractions import Fraction
from typing import Any, NoReturn, Union

import numpy as np
import numpy.typing as npt
from bitarray import bitarray, decodetree, frozenbitarray

from pytest_ratefloor.errors import (
    AmbiguousCode,
    CodeShapeFailure,
    KraftFailure,
    PrefixFailure,
    SearchLimitError,
)

__all__ = [
    "SP_SUFFIX_LIMIT",
    "Codebook",
    "ambiguity",
    "assert_kraft",
    "assert_prefix_free",
    "assert_uniquely_decodable",
    "canonical_codebook",
    "entropy_bits",
    "excess_by_symbol",
    "expected_length",
    "golomb_expected_length",
    "golomb_parameter",
    "huffman_lengths",
    "is_canonical",
    "kraft_sum",
    "length_limited_lengths",
    "prefix_witness",
    "redundancy",
    "rice_parameter",
]

#: Default bound of the Sardinas–Patterson search: the number of distinct dangling
#: suffixes it may settle before giving up with :class:`SearchLimitError`. The
#: dangling suffixes of a code are suffixes of its codewords, so the search always
#: ends by itself after at most Σℓ of them; the bound only keeps a huge table from
#: running for minutes. Each settled suffix costs O(ℓmax + matches) dictionary work.
SP_SUFFIX_LIMIT = 200_000

#: bitarray's decode tree handles codewords up to this many bits; longer codes fall
#: back to a (slower) pure-Python decoder.
_DECODETREE_MAX_BITS = 256

_INT64_MIN = -(2**63)
_INT64_MAX = 2**63 - 1

CodeLike = Union["Codebook", Mapping[Any, Any]]
IntArray = npt.NDArray[np.int64]


# --------------------------------------------------------------------------- Codebook


def _symbol_of(key: object) -> int:
    """The table key as a Python int (numpy integers accepted), or a clear error."""
    if isinstance(key, (float, np.floating, complex, str, bytes)):
        raise ValueError(f"codebook symbol {key!r} is not an integer (type {type(key).__name__})")
    try:
        sym = operator.index(key)  # type: ignore[arg-type]
    except TypeError:
        raise ValueError(
            f"codebook symbol {key!r} is not an integer (type {type(key).__name__})"
        ) from None
    if not _INT64_MIN <= sym <= _INT64_MAX:
        raise ValueError(f"codebook symbol {sym} does not fit in a signed 64-bit integer")
    return sym


def _parse_codeword(sym: int, word: object) -> tuple[int, int]:
    """(value, length) of one table entry, MSB first; ValueError naming the symbol."""
    if isinstance(word, bitarray):
        if len(word) == 0:
            raise ValueError(f"symbol {sym} has an empty codeword")
        return int(word.to01(), 2), len(word)
    if isinstance(word, str):
        if word == "":
            raise ValueError(f"symbol {sym} has an empty codeword")
        bad = word.replace("0", "").replace("1", "")
        if bad:
            raise ValueError(
                f"codeword {word!r} of symbol {sym} contains {bad[0]!r}; "
                "only the characters '0' and '1' are allowed"
            )
        return int(word, 2), len(word)
    if isinstance(word, (tuple, list)) and len(word) == 2:
        try:
            value = operator.index(word[0])
            length = operator.index(word[1])
        except TypeError:
            raise ValueError(
                f"codeword {word!r} of symbol {sym}: (value, length) must both be integers"
            ) from None
        if length < 0:
            raise ValueError(f"codeword {word!r} of symbol {sym} has a negative length {length}")
        if length == 0:
            raise ValueError(f"symbol {sym} has an empty codeword (length 0)")
        if value < 0 or value >> length:
            raise ValueError(
                f"codeword {word!r} of symbol {sym}: value {value} does not fit in "
                f"{length} bit{'s' if length != 1 else ''}"
            )
        return value, length
    raise ValueError(
        f"codeword of symbol {sym} must be a '0'/'1' string, a bitarray or a "
        f"(value, length) pair; got {type(word).__name__} {word!r}"
    )


def _word_text(value: int, length: int) -> str:
    return format(value, f"0{length}b")


class Codebook:
    """A symbol code: every integer symbol mapped to a codeword.

    ``mapping`` is ``{symbol: codeword}`` where a codeword is ``"0110"``, a
    ``bitarray`` or ``(value, length)`` (the low ``length`` bits of ``value``, most
    significant first). Symbols are integers (numpy integers are stored as ``int``)
    within the signed 64-bit range. Bad entries raise ``ValueError`` naming the symbol.
    Two symbols sharing one codeword are accepted here: that is a defect of the code,
    reported by :func:`assert_prefix_free`, not a malformed table.

    As a codec, ``encode(symbols)`` returns a ``bitarray`` and ``decode(bits, n)``
    returns exactly ``n`` symbols (int64). Decoding needs a prefix-free code.

    Attributes: ``name``, ``codewords`` (symbol → frozenbitarray, big-endian),
    ``symbols`` (ascending), ``lengths`` (symbol → length), ``max_length``,
    ``version`` (``None``: a table has no release of its own). Treat them as
    read-only; the table is built once.
    """

    version: str | None = None

    def __init__(self, mapping: CodeLike, name: str = "codebook") -> None:
        if not isinstance(name, str):
            raise ValueError(f"codebook name must be a string, got {name!r}")
        self.name = name
        if isinstance(mapping, Codebook):
            self._set_table(mapping._symbols, mapping._lengths, mapping._pyvalues)
            return
        if not isinstance(mapping, Mapping):
            raise ValueError(
                f"codebook {name!r}: expected a mapping {{symbol: codeword}}, "
                f"got {type(mapping).__name__}"
            )
        if len(mapping) == 0:
            raise ValueError(f"codebook {name!r} is empty: a code needs at least one codeword")
        syms: list[int] = []
        values: list[int] = []
        lengths: list[int] = []
        for key, word in mapping.items():
            sym = _symbol_of(key)
            value, length = _parse_codeword(sym, word)
            syms.append(sym)
            values.append(value)
            lengths.append(length)
        sym_arr = np.array(syms, dtype=np.int64)
        order = np.argsort(sym_arr, kind="stable")
        sym_arr = sym_arr[order]
        if sym_arr.size > 1 and bool(np.any(sym_arr[1:] == sym_arr[:-1])):
            dup = int(sym_arr[1:][sym_arr[1:] == sym_arr[:-1]][0])
            raise ValueError(f"codebook {name!r} lists symbol {dup} twice")
        idx = order.tolist()
        self._set_table(
            sym_arr,
            np.array(lengths, dtype=np.int64)[order],
            [values[i] for i in idx],
        )

    @classmethod
    def _from_arrays(
        cls,
        symbols: IntArray,
        values: list[int],
        lengths: IntArray,
        name: str,
        values64: npt.NDArray[np.uint64] | None = None,
    ) -> Codebook:
        """Fast path for tables built here (symbols ascending, entries already valid)."""
        self = cls.__new__(cls)
        self.name = name
        self._set_table(symbols, lengths, values)
        self._values64 = values64
        return self

    def _set_table(self, symbols: IntArray, lengths: IntArray, values: list[int]) -> None:
        self._symbols = symbols
        self._lengths = lengths
        self._pyvalues = values
        self._max_length = int(lengths.max())
        self._codewords: dict[int, bitarray] | None = None
        self._encode_table: dict[int, bitarray] | None = None
        self._tree: decodetree | None = None
        self._values64: npt.NDArray[np.uint64] | None = None

    # ---- attributes (built lazily: a 2^20-entry table stays cheap to analyse)
    @property
    def codewords(self) -> dict[int, bitarray]:
        """symbol → codeword as a big-endian ``frozenbitarray``."""
        if self._codewords is None:
            self._codewords = {s: frozenbitarray(w) for s, w in self._codec_table().items()}
        return self._codewords

    def _codec_table(self) -> dict[int, bitarray]:
        """symbol → codeword as private (plain, never handed out) bitarrays for
        bitarray's encode and decodetree: slices of one concatenation, so a 2^20-entry
        table costs about a second rather than the several of frozen copies."""
        if self._encode_table is None:
            whole = _concatenation(self)
            ends = np.cumsum(self._lengths).tolist()
            starts = [0, *ends[:-1]]
            self._encode_table = {
                s: whole[a:b] for s, a, b in zip(self._symbols.tolist(), starts, ends)
            }
        return self._encode_table

    @property
    def symbols(self) -> list[int]:
        """The symbols, ascending."""
        return list(self._symbols.tolist())

    @property
    def lengths(self) -> dict[int, int]:
        """symbol → codeword length in bits."""
        return dict(zip(self._symbols.tolist(), self._lengths.tolist()))

    @property
    def max_length(self) -> int:
        """The longest codeword, in bits."""
        return self._max_length

    def word(self, symbol: int) -> str:
        """The codeword of ``symbol`` as '0'/'1' text (KeyError if it has none)."""
        if symbol not in self:
            raise KeyError(symbol)
        i = int(np.searchsorted(self._symbols, symbol))
        if i >= self._symbols.size or int(self._symbols[i]) != symbol:
            raise KeyError(symbol)
        return _word_text(self._pyvalues[i], int(self._lengths[i]))

    def __len__(self) -> int:
        return int(self._symbols.size)

    def __contains__(self, symbol: object) -> bool:
        try:
            sym = operator.index(symbol)  # type: ignore[arg-type]
        except TypeError:
            return False
        if not _INT64_MIN <= sym <= _INT64_MAX:
            return False
        i = int(np.searchsorted(self._symbols, sym))
        return i < self._symbols.size and int(self._symbols[i]) == sym

    def __repr__(self) -> str:
        return (
            f"Codebook({self.name!r}, {len(self)} symbols, "
            f"lengths {int(self._lengths.min())}..{self._max_length} bits)"
        )

    # ---- internal views used by the analysis functions
    def _texts(self) -> list[str]:
        return [_word_text(v, ln) for v, ln in zip(self._pyvalues, self._lengths.tolist())]

    def _values_u64(self) -> npt.NDArray[np.uint64] | None:
        """Codeword values as uint64 (None when a codeword is longer than 64 bits)."""
        if self._max_length > 64:
            return None
        if self._values64 is None:
            self._values64 = np.array(self._pyvalues, dtype=np.uint64)
        return self._values64

    # ---- the codec
    def encode(self, symbols: npt.ArrayLike) -> bitarray:
        """Concatenate the codewords of ``symbols`` (1-D integers) into a bitarray."""
        arr = _symbol_array(symbols, "symbols")
        out = bitarray(endian="big")
        if arr.size == 0:
            return out
        try:
            out.encode(self._codec_table(), arr.tolist())
        except ValueError:
            missing = ~np.isin(arr, self._symbols)
            if not bool(missing.any()):
                raise
            i = int(np.flatnonzero(missing)[0])
            raise ValueError(
                f"symbol {int(arr[i])} at index {i} has no codeword in codebook {self.name!r} "
                f"({len(self)} symbols, {int(self._symbols[0])}..{int(self._symbols[-1])})"
            ) from None
        return out

    def decode(self, bits: bitarray | bytes | bytearray, n: int) -> IntArray:
        """Read exactly ``n`` symbols from the front of ``bits``.

        Bits after the ``n``-th codeword are ignored (padding of a byte-aligned stream,
        or any trailing data), so a stream padded with bit patterns an incomplete code
        does not use still decodes. ``bytes`` are read MSB first. Raises ``ValueError``
        when the code is not prefix-free, when the bits before the ``n``-th symbol match
        no codeword, or when the stream ends early.
        """
        try:
            count = operator.index(n)
        except TypeError:
            raise ValueError(f"n must be an integer symbol count, got {n!r}") from None
        if count < 0:
            raise ValueError(f"n must be >= 0, got {count}")
        if isinstance(bits, (bytes, bytearray, memoryview)):
            stream = bitarray(endian="big")
            stream.frombytes(bytes(bits))
        elif isinstance(bits, bitarray):
            stream = bits
        else:
            raise ValueError(
                f"codebook {self.name!r} decodes a bitarray or bytes, got {type(bits).__name__}"
            )
        if count == 0:
            return np.zeros(0, dtype=np.int64)
        if self._max_length > _DECODETREE_MAX_BITS:
            return self._decode_long(stream, count)
        tree = self._decode_tree()
        out: list[int] = []
        try:
            out.extend(itertools.islice(stream.decode(tree), count))
        except ValueError:
            self._raise_stuck(stream, out, count)
        if len(out) < count:
            self._raise_short(stream, out, count)
        return np.array(out, dtype=np.int64)

    def _decode_tree(self) -> decodetree:
        if self._tree is None:
            witness = prefix_witness(self)
            if witness is not None:
                raise ValueError(
                    f"codebook {self.name!r} cannot be decoded symbol by symbol: "
                    f"{_prefix_phrase(witness)} (not prefix-free; see assert_uniquely_decodable)"
                )
            self._tree = decodetree(self._codec_table())
        return self._tree

    def _consumed_bits(self, decoded: list[int]) -> int:
        if not decoded:
            return 0
        idx = np.searchsorted(self._symbols, np.array(decoded, dtype=np.int64))
        return int(self._lengths[idx].sum())

    def _raise_stuck(self, stream: bitarray, decoded: list[int], count: int) -> NoReturn:
        pos = self._consumed_bits(decoded)
        rest = stream[pos : pos + self._max_length].to01()
        truncated = len(stream) - pos < self._max_length and any(
            w.startswith(rest) for w in self._texts()
        )
        what = "end inside a codeword" if truncated else "match no codeword"
        raise ValueError(
            f"codebook {self.name!r}: the bits at position {pos} ({rest!r}) {what}; "
            f"decoded {len(decoded)} of {count} symbols from a {len(stream)}-bit stream"
        )

    def _raise_short(self, stream: bitarray, decoded: list[int], count: int) -> NoReturn:
        pos = self._consumed_bits(decoded)
        raise ValueError(
            f"codebook {self.name!r}: the {len(stream)}-bit stream holds only "
            f"{len(decoded)} complete codewords ({pos} bits), {count} symbols were asked for"
        )

    def _decode_long(self, stream: bitarray, count: int) -> IntArray:
        witness = prefix_witness(self)
        if witness is not None:
            raise ValueError(
                f"codebook {self.name!r} cannot be decoded symbol by symbol: "
                f"{_prefix_phrase(witness)} (not prefix-free)"
            )
        table = dict(zip(self._texts(), self._symbols.tolist()))
        widths = sorted(set(self._lengths.tolist()))
        text = stream.to01()
        out: list[int] = []
        pos = 0
        while len(out) < count:
            for w in widths:
                sym = table.get(text[pos : pos + w]) if pos + w <= len(text) else None
                if sym is not None:
                    out.append(sym)
                    pos += w
                    break
            else:
                if pos >= len(text):
                    self._raise_short(stream, out, count)
                self._raise_stuck(stream, out, count)
        return np.array(out, dtype=np.int64)


def _concatenation(cb: Codebook) -> bitarray:
    """All codewords, ascending by symbol, back to back in one big-endian bitarray."""
    values = cb._values_u64()
    out = bitarray(endian="big")
    if values is None:  # beyond 64 bits: go through text
        out.extend("".join(cb._texts()))
        return out
    lengths = cb._lengths
    starts = np.concatenate(([0], np.cumsum(lengths)[:-1]))
    bits = np.zeros(int(lengths.sum()), dtype=np.uint8)
    for j in range(cb.max_length):  # bit j of every codeword longer than j
        live = np.flatnonzero(lengths > j)
        shift = (lengths[live] - 1 - j).astype(np.uint64)
        bits[starts[live] + j] = (values[live] >> shift) & np.uint64(1)
    out.frombytes(np.packbits(bits).tobytes())
    del out[bits.size :]
    return out


def _symbol_array(values: npt.ArrayLike, what: str) -> IntArray:
    arr = np.asarray(values)
    if arr.ndim != 1:
        raise ValueError(f"{what} must be a 1-D array, got shape {arr.shape}")
    if arr.size and arr.dtype.kind not in "iub":
        raise ValueError(f"{what} must be integers, got dtype {arr.dtype}")
    if arr.dtype.kind == "u" and arr.size and int(arr.max()) > _INT64_MAX:
        raise ValueError(f"{what} holds {int(arr.max())}, beyond the signed 64-bit range")
    return arr.astype(np.int64, copy=False)


def _as_codebook(code: CodeLike) -> Codebook:
    if isinstance(code, Codebook):
        return code
    if isinstance(code, Mapping):
        return Codebook(code)
    raise ValueError(
        f"expected a Codebook or a mapping {{symbol: codeword}}, got {type(code).__name__}"
    )


# --------------------------------------------------------------------- prefix-freeness

Witness = tuple[tuple[int, str], tuple[int, str]]


def prefix_witness(code: CodeLike) -> Witness | None:
    """The first pair of codewords where one is a prefix of (or equal to) the other.

    Returns ``((symbol_a, word_a), (symbol_b, word_b))`` with ``word_a`` a prefix of
    ``word_b`` (possibly equal), or ``None`` for a prefix-free code. "First" means
    first in lexicographic order of the codewords (ties by symbol).

    O(N log N): sort the codewords lexicographically (as left-aligned integers, ties
    by length); a word is then followed by its extensions, so if ``u`` is a prefix of
    any word it is a prefix of the word right after it, and adjacent pairs suffice.
    """
    cb = _as_codebook(code)
    n = len(cb)
    if n < 2:
        return None
    values = cb._values_u64()
    if values is None:  # codewords beyond 64 bits: compare as text
        return _prefix_witness_text(cb)
    lengths = cb._lengths
    top = cb.max_length
    keys = values << (top - lengths).astype(np.uint64)
    if top <= 57:  # key and length fit one uint64 sort key (stable: ties by symbol)
        order = np.argsort((keys << np.uint64(7)) | lengths.astype(np.uint64), kind="stable")
    else:
        order = np.lexsort((cb._symbols, lengths, keys))
    a, b = order[:-1], order[1:]
    diff = lengths[b] - lengths[a]
    shift = np.where(diff > 0, diff, 0).astype(np.uint64)
    hit = (diff >= 0) & ((values[b] >> shift) == values[a])
    if not bool(hit.any()):
        return None
    k = int(np.argmax(hit))
    ia, ib = int(a[k]), int(b[k])
    return (
        (int(cb._symbols[ia]), _word_text(cb._pyvalues[ia], int(lengths[ia]))),
        (int(cb._symbols[ib]), _word_text(cb._pyvalues[ib], int(lengths[ib]))),
    )


def _prefix_witness_text(cb: Codebook) -> Witness | None:
    """:func:`prefix_witness` on '0'/'1' text, for codewords longer than 64 bits."""
    texts = cb._texts()
    syms = cb._symbols.tolist()
    ranked = sorted(range(len(texts)), key=lambda i: (texts[i], syms[i]))
    for i, j in itertools.pairwise(ranked):
        if texts[j].startswith(texts[i]):
            return (syms[i], texts[i]), (syms[j], texts[j])
    return None


def _prefix_phrase(witness: Witness) -> str:
    (sa, wa), (sb, wb) = witness
    if wa == wb:
        return f"symbols {sa} and {sb} share the codeword {wa!r}"
    return (
        f"the codeword of symbol {sa} ({wa!r}) is a prefix of the codeword of symbol {sb} ({wb!r})"
    )


def assert_prefix_free(
    code: CodeLike, max_length: int | None = None, canonical: bool = False
) -> None:
    """Fail (:class:`PrefixFailure`) if a codeword is a prefix of another or two are equal.

    ``max_length`` also checks the format's length cap and ``canonical=True`` the
    canonical assignment (both :class:`CodeShapeFailure`).
    """
    __tracebackhide__ = True
    cb = _as_codebook(code)
    witness = prefix_witness(cb)
    if witness is not None:
        (sa, wa), _ = witness
        raise PrefixFailure(
            f"codebook {cb.name!r} is not prefix-free: {_prefix_phrase(witness)}; "
            f"a decoder that has read {wa!r} cannot tell whether symbol {sa} has ended"
        )
    _check_shape(cb, max_length, canonical)


# ------------------------------------------------------------------------------ Kraft


def _length_counts(cb: Codebook) -> dict[int, int]:
    counts = np.bincount(cb._lengths)
    return {int(ln): int(c) for ln, c in enumerate(counts.tolist()) if c}


def kraft_sum(code: CodeLike) -> Fraction:
    """Σ 2^−ℓ over the codewords, exactly: Σ 2^(ℓmax−ℓ) / 2^ℓmax in integers."""
    cb = _as_codebook(code)
    top = cb.max_length
    total = sum(c << (top - ln) for ln, c in _length_counts(cb).items())
    return Fraction(total, 1 << top)


def _histogram_text(cb: Codebook, limit: int = 12) -> str:
    items = sorted(_length_counts(cb).items())
    parts = [f"{c}×{ln}" for ln, c in items[:limit]]
    if len(items) > limit:
        parts.append(f"... ({len(items) - limit} more lengths)")
    return "codewords×bits: " + ", ".join(parts)


def _unused_prefix(cb: Codebook) -> str | None:
    """A bit string that no codeword starts with or is a prefix of (from the first
    gap in the code space), or None when there is no gap or codewords are too long."""
    values = cb._values_u64()
    top = cb.max_length
    if values is None or top > 62:
        return None
    lengths = cb._lengths
    span = np.left_shift(np.int64(1), top - lengths)
    keys = (values << (top - lengths).astype(np.uint64)).astype(np.int64)
    order = np.argsort(keys, kind="stable")
    keys, span = keys[order], span[order]
    ends = np.maximum.accumulate(keys + span)
    starts = np.concatenate(([0], ends))
    stops = np.concatenate((keys, [1 << top]))
    gaps = np.flatnonzero(stops > starts)
    if gaps.size == 0:
        return None
    g, e = int(starts[gaps[0]]), int(stops[gaps[0]])
    t = top
    while t > 0 and (g % (1 << t) or g + (1 << t) > e):
        t -= 1
    return _word_text(g >> t, top - t) if top > t else ""


def assert_kraft(
    code: CodeLike,
    complete: bool = False,
    max_length: int | None = None,
    canonical: bool = False,
) -> None:
    """Fail (:class:`KraftFailure`) if the Kraft sum exceeds 1.

    ``complete=True`` also fails a code whose sum is below 1, with the unused share
    of the code space (except the one-symbol code with a 1-bit codeword, the only
    code a one-symbol alphabet can have). ``max_length`` and ``canonical`` as in
    :func:`assert_prefix_free`.
    """
    __tracebackhide__ = True
    cb = _as_codebook(code)
    total = kraft_sum(cb)
    if total > 1:
        raise KraftFailure(
            f"codebook {cb.name!r} is over-full: Kraft sum Σ2^-ℓ = {total} > 1 "
            f"(over by {total - 1}); by McMillan's theorem no uniquely decodable code "
            f"can have a Kraft sum above 1, so some bit strings have two parses "
            f"({len(cb)} codewords; {_histogram_text(cb)})"
        )
    single = len(cb) == 1 and cb.max_length == 1
    if complete and total < 1 and not single:
        unused = 1 - total
        hole = _unused_prefix(cb)
        example = f"; e.g. no codeword starts with {hole!r}" if hole else ""
        raise KraftFailure(
            f"codebook {cb.name!r} is incomplete: Kraft sum Σ2^-ℓ = {total} < 1, so "
            f"{unused} of the code space ({float(unused) * 100:.6g}%) is unused{example} "
            f"({len(cb)} codewords; {_histogram_text(cb)})"
        )
    _check_shape(cb, max_length, canonical)


# ------------------------------------------------------------------ canonical & shape


def _canonical_values(lengths: list[int]) -> list[int]:
    """Canonical codeword values for lengths given in (length, symbol) order.

    code_0 = 0 and code_i = (code_{i-1} + 1) << (ℓ_i − ℓ_{i-1}) (RFC 1951 §3.2.2),
    i.e. code_i = Σ_{j<i} 2^(ℓ_i−ℓ_j). Values may overflow their length when the
    Kraft sum exceeds 1.
    """
    out: list[int] = []
    code = -1
    prev = lengths[0] if lengths else 0
    for ln in lengths:
        code = (code + 1) << (ln - prev)
        out.append(code)
        prev = ln
    return out


def _canonical_values_np(lengths: IntArray) -> IntArray | None:
    """Vectorised :func:`_canonical_values` (lengths ascending) as the left-aligned
    partial Kraft sums shifted down; None when int64 could overflow."""
    top = int(lengths.max())
    if top > 62 or lengths.size >= (1 << (63 - top)):
        return None
    steps = np.left_shift(np.int64(1), top - lengths)
    left = np.concatenate(([0], np.cumsum(steps)[:-1]))
    return np.right_shift(left, top - lengths)


def _canonical_mismatch(cb: Codebook) -> tuple[int, str, str | None] | None:
    """(symbol, its codeword, the canonical one or None if none exists) of the first
    symbol in (length, symbol) order whose codeword is not the canonical one."""
    order = np.lexsort((cb._symbols, cb._lengths))
    lens = cb._lengths[order]
    canon = _canonical_values_np(lens)
    values = cb._values_u64()
    if canon is not None and values is not None:
        differ = np.flatnonzero(values[order].astype(np.int64) != canon)
        if differ.size == 0:
            return None
        k = int(differ[0])
        want, ln = int(canon[k]), int(lens[k])
        i = int(order[k])
    else:
        exact = _canonical_values(lens.tolist())
        actual = [cb._pyvalues[i] for i in order.tolist()]
        first = next((k for k, (a, b) in enumerate(zip(exact, actual)) if a != b), None)
        if first is None:
            return None
        want, ln, i = exact[first], int(lens[first]), int(order[first])
    expected = _word_text(want, ln) if want < (1 << ln) else None
    return int(cb._symbols[i]), _word_text(cb._pyvalues[i], ln), expected


def is_canonical(code: CodeLike) -> bool:
    """True if the codewords are the canonical code of their lengths: assigned in
    order of (length, symbol), consecutive within a length, each length starting at
    (previous codeword + 1) shifted left by the length difference (RFC 1951 §3.2.2)."""
    return _canonical_mismatch(_as_codebook(code)) is None


def _check_shape(cb: Codebook, max_length: int | None, canonical: bool) -> None:
    __tracebackhide__ = True
    if max_length is not None:
        cap = operator.index(max_length)
        over = np.flatnonzero(cb._lengths > cap)
        if over.size:
            i = int(over[0])
            j = int(np.argmax(cb._lengths))
            raise CodeShapeFailure(
                f"codebook {cb.name!r} breaks the length cap: symbol {int(cb._symbols[i])} "
                f"has a {int(cb._lengths[i])}-bit codeword but max_length={cap} "
                f"({over.size} codeword{'s' if over.size != 1 else ''} over the cap; longest "
                f"{int(cb._lengths[j])} bits, symbol {int(cb._symbols[j])})"
            )
    if canonical:
        bad = _canonical_mismatch(cb)
        if bad is not None:
            sym, got, want = bad
            if want is None:
                raise CodeShapeFailure(
                    f"codebook {cb.name!r} is not canonical: its lengths admit no canonical "
                    f"code (Kraft sum {kraft_sum(cb)} > 1); assignment overflows at symbol {sym}"
                )
            raise CodeShapeFailure(
                f"codebook {cb.name!r} is not canonical: symbol {sym} has codeword {got!r} "
                f"but the canonical code (order of (length, symbol), consecutive values) "
                f"gives it {want!r}"
            )


def canonical_codebook(
    lengths: Mapping[int, int] | tuple[npt.ArrayLike, npt.ArrayLike],
    name: str = "canonical",
) -> Codebook:
    """The canonical prefix code with the given lengths.

    ``lengths`` is ``{symbol: length}`` or ``(symbols, lengths)`` arrays; length 0
    means "no codeword" (as :func:`huffman_lengths` returns for zero probabilities).
    ValueError if the Kraft sum of the lengths exceeds 1 (no prefix code exists).
    """
    if isinstance(lengths, Mapping):
        syms = np.array([_symbol_of(s) for s in lengths], dtype=np.int64)
        lens = np.array([operator.index(v) for v in lengths.values()], dtype=np.int64)
    else:
        if len(lengths) != 2:
            raise ValueError("lengths must be {symbol: length} or a (symbols, lengths) pair")
        syms = _symbol_array(lengths[0], "symbols")
        lens = _symbol_array(lengths[1], "lengths")
        if syms.shape != lens.shape:
            raise ValueError(f"symbols and lengths differ in size: {syms.size} and {lens.size}")
    if lens.size and int(lens.min()) < 0:
        i = int(np.argmin(lens))
        raise ValueError(f"symbol {int(syms[i])} has a negative length {int(lens[i])}")
    keep = lens > 0
    syms, lens = syms[keep], lens[keep]
    if syms.size == 0:
        raise ValueError("no symbol has a positive length: the code would be empty")
    top = int(lens.max())
    counts = np.bincount(lens)
    total = sum(int(c) << (top - ln) for ln, c in enumerate(counts.tolist()) if c)
    if total > (1 << top):
        raise ValueError(
            f"lengths have Kraft sum {Fraction(total, 1 << top)} > 1: no prefix code exists"
        )
    order = np.lexsort((syms, lens))
    lens_o = lens[order]
    by_symbol = np.argsort(syms[order], kind="stable")
    sorted_syms = syms[order][by_symbol]
    twice = np.flatnonzero(sorted_syms[1:] == sorted_syms[:-1])
    if twice.size:
        raise ValueError(f"symbol {int(sorted_syms[twice[0]])} is listed twice in the lengths")
    sorted_lens = lens_o[by_symbol]
    fast = _canonical_values_np(lens_o)
    if fast is not None:
        values = fast[by_symbol]
        return Codebook._from_arrays(
            sorted_syms, values.tolist(), sorted_lens, name, values.astype(np.uint64)
        )
    exact = _canonical_values(lens_o.tolist())
    return Codebook._from_arrays(
        sorted_syms, [exact[i] for i in by_symbol.tolist()], sorted_lens, name
    )


# ---------------------------------------------------------------- Sardinas–Patterson

_DONE, _STATE = 0, 1


def ambiguity(
    code: CodeLike, limit: int = SP_SUFFIX_LIMIT
) -> tuple[str, list[int], list[int]] | None:
    """A shortest ambiguous bit string and its two parses, or None if uniquely decodable.

    Sardinas & Patterson (1953): a code is uniquely decodable iff no dangling suffix
    is a codeword. Dangling suffixes are explored shortest-total-length first
    (Dijkstra on the length of the longer parse), recording how each arose, so both
    parses of the shortest ambiguous string can be rebuilt. A prefix-free code
    returns None at once. Raises :class:`SearchLimitError` after ``limit``
    distinct dangling suffixes.
    """
    cb = _as_codebook(code)
    limit = operator.index(limit)
    if limit < 1:
        raise ValueError(f"limit must be >= 1, got {limit}")
    if prefix_witness(cb) is None:
        return None
    texts = cb._texts()
    syms = cb._symbols.tolist()
    text_of = dict(zip(syms, texts))
    first_symbol: dict[str, int] = {}
    heap: list[tuple[Any, ...]] = []
    seq = itertools.count()
    for sym, w in zip(syms, texts):
        if w in first_symbol:  # two symbols, one codeword: ambiguous at once
            heapq.heappush(heap, (len(w), _DONE, next(seq), None, ([first_symbol[w]], [sym])))
        else:
            first_symbol[w] = sym
    words = sorted(first_symbol)
    # Start: u a proper prefix of v, so [v] is ahead of [u] by the dangling suffix.
    for v in words:
        for k in range(1, len(v)):
            u = first_symbol.get(v[:k])
            if u is not None:
                item = (len(v), _STATE, next(seq), v[k:], ("start", first_symbol[v], u))
                heapq.heappush(heap, item)
    settled: dict[str, tuple[Any, ...]] = {}
    while heap:
        cost, kind, _, suffix, how = heapq.heappop(heap)
        if kind == _DONE:
            return _rebuild(how, settled, text_of)
        if suffix in settled:
            continue
        settled[suffix] = how
        if len(settled) > limit:
            raise SearchLimitError(
                f"Sardinas–Patterson search on codebook {cb.name!r} passed limit={limit} "
                f"dangling suffixes without a verdict; raise limit= to search further"
            )
        exact = first_symbol.get(suffix)
        if exact is not None:  # the lagging parse catches up exactly
            heapq.heappush(heap, (cost, _DONE, next(seq), None, ("end", suffix, exact)))
        for k in range(1, len(suffix)):  # a codeword inside the dangling suffix
            c = first_symbol.get(suffix[:k])
            if c is not None and suffix[k:] not in settled:
                heapq.heappush(
                    heap, (cost, _STATE, next(seq), suffix[k:], ("step", suffix, c, False))
                )
        i = bisect_left(words, suffix)  # a codeword reaching past the dangling suffix
        while i < len(words) and words[i].startswith(suffix):
            w = words[i]
            i += 1
            rest = w[len(suffix) :]
            if rest and rest not in settled:
                heapq.heappush(
                    heap,
                    (
                        cost + len(rest),
                        _STATE,
                        next(seq),
                        rest,
                        ("step", suffix, first_symbol[w], True),
                    ),
                )
    return None


def _rebuild(
    how: tuple[Any, ...], settled: dict[str, tuple[Any, ...]], text_of: dict[int, str]
) -> tuple[str, list[int], list[int]]:
    """Replay the recorded derivation into two parses of one bit string."""
    if how[0] != "end":  # duplicate codeword
        a, b = how
        return text_of[a[0]], list(a), list(b)
    _, suffix, last = how
    steps: list[tuple[int, bool]] = []
    rec = settled[suffix]
    while rec[0] == "step":
        _, prev, sym, swapped = rec
        steps.append((sym, swapped))
        rec = settled[prev]
    _, long_first, short_first = rec
    ahead, behind = [long_first], [short_first]
    for sym, swapped in reversed(steps):
        behind.append(sym)
        if swapped:
            ahead, behind = behind, ahead
    behind.append(last)
    bits = "".join(text_of[s] for s in ahead)
    if bits != "".join(text_of[s] for s in behind):  # an internal invariant
        raise RuntimeError(f"Sardinas–Patterson rebuild gave unequal parses {ahead} {behind}")
    first, second = (ahead, behind) if ahead[0] == short_first else (behind, ahead)
    return bits, first, second


def assert_uniquely_decodable(code: CodeLike, limit: int = SP_SUFFIX_LIMIT) -> None:
    """Fail (:class:`AmbiguousCode`) with a shortest ambiguous bit string and its two
    parses. Prefix-free codes pass at once; otherwise Sardinas–Patterson, bounded by
    ``limit`` dangling suffixes (:class:`SearchLimitError` past it)."""
    __tracebackhide__ = True
    cb = _as_codebook(code)
    found = ambiguity(cb, limit=limit)
    if found is None:
        return
    bits, parse_a, parse_b = found
    text_of = {s: cb.word(s) for s in set(parse_a) | set(parse_b)}

    def shown(parse: list[int]) -> str:
        return f"{parse} = " + "·".join(repr(text_of[s]) for s in parse)

    raise AmbiguousCode(
        f"codebook {cb.name!r} is not uniquely decodable: the bit string {bits!r} "
        f"({len(bits)} bits) has two parses: {shown(parse_a)} and {shown(parse_b)}"
    )


# ------------------------------------------------------------------ optimal lengths


def _weights(probs: npt.ArrayLike, what: str = "probs") -> npt.NDArray[np.float64]:
    try:
        w = np.asarray(probs, dtype=np.float64)
    except (TypeError, ValueError):
        raise ValueError(f"{what} must be numbers, got {probs!r}") from None
    if w.ndim != 1:
        raise ValueError(f"{what} must be 1-D, got shape {w.shape}")
    if w.size == 0:
        raise ValueError(f"{what} is empty")
    bad = np.flatnonzero(~np.isfinite(w) | (w < 0))
    if bad.size:
        i = int(bad[0])
        raise ValueError(f"{what}[{i}] = {float(w[i])!r} is not a finite non-negative weight")
    if not bool((w > 0).any()):
        raise ValueError(f"{what} are all zero: no symbol can occur")
    return w


def _huffman_merge(w: list[float]) -> list[int]:
    """Two-queue Huffman (van Leeuwen 1976) on ascending weights.

    Internal nodes are made in non-decreasing weight order, so the two smallest
    items are always at the heads of the leaf queue and the internal queue.
    Returns parent[k] (index of the internal node that absorbed internal node k).
    """
    n = len(w)
    q = [0.0] * (n - 1)
    parent = [n - 2] * (n - 1)
    i = j = 0
    for k in range(n - 1):
        if i < n and (j >= k or w[i] <= q[j]):
            a = w[i]
            i += 1
        else:
            a = q[j]
            parent[j] = k
            j += 1
        if i < n and (j >= k or w[i] <= q[j]):
            b = w[i]
            i += 1
        else:
            b = q[j]
            parent[j] = k
            j += 1
        q[k] = a + b
    return parent


def _leaf_lengths(parent: list[int], n: int) -> IntArray:
    """Leaf depths (ascending-weight order, so non-increasing) from internal parents."""
    up = np.array(parent, dtype=np.int64)
    root = n - 2
    dist = np.ones(n - 1, dtype=np.int64)
    dist[root] = 0
    while bool((up != root).any()):  # pointer jumping: depth in O(log depth) passes
        dist = dist + dist[up]
        up = up[up]
    internal = np.bincount(dist)
    depth = internal.size  # leaves sit one level below the deepest internal node at most
    below = np.concatenate(([0], internal))  # internal nodes at depth d-1
    here = np.concatenate((internal, [0]))
    leaves = 2 * below - here  # nodes at depth d (two per parent) minus internal ones
    leaves[0] = 0  # depth 0 holds the root alone
    lengths_desc = np.arange(depth, -1, -1, dtype=np.int64)
    return np.repeat(lengths_desc, leaves[::-1])


def huffman_lengths(probs: npt.ArrayLike) -> IntArray:
    """Optimal prefix-code lengths (Huffman 1952), in the order of ``probs``.

    ``probs`` may be probabilities or any non-negative weights (counts). Zero weights
    get length 0 (no codeword). One nonzero weight gets length 1 (see module notes).
    O(N log N): a stable sort, then the linear two-queue merge (van Leeuwen 1976).
    Ties are broken towards leaves, which keeps the longest codeword short.
    """
    w = _weights(probs)
    out = np.zeros(w.size, dtype=np.int64)
    nz = np.flatnonzero(w > 0)
    if nz.size == 1:
        out[nz] = 1
        return out
    order = nz[np.argsort(w[nz], kind="stable")]
    parent = _huffman_merge(w[order].tolist())
    out[order] = _leaf_lengths(parent, nz.size)
    return out


def length_limited_lengths(probs: npt.ArrayLike, max_length: int) -> IntArray:
    """Optimal prefix-code lengths no longer than ``max_length`` (package-merge,
    Larmore & Hirschberg 1990), in the order of ``probs``; zero weights get 0.

    ValueError if 2**max_length is smaller than the number of nonzero weights.
    """
    w = _weights(probs)
    try:
        cap = operator.index(max_length)
    except TypeError:
        raise ValueError(f"max_length must be an integer, got {max_length!r}") from None
    if cap < 1:
        raise ValueError(f"max_length must be >= 1, got {cap}")
    nz = np.flatnonzero(w > 0)
    m = int(nz.size)
    if m > (1 << min(cap, 64)):
        raise ValueError(
            f"max_length={cap} allows at most {1 << cap} codewords but {m} symbols have "
            "nonzero probability"
        )
    free = huffman_lengths(w)
    if int(free.max()) <= cap:  # the unconstrained optimum already fits
        return free
    order = nz[np.argsort(w[nz], kind="stable")]
    out = np.zeros(w.size, dtype=np.int64)
    out[order] = _package_merge(w[order], cap)
    return out


def _package_merge(leaves: npt.NDArray[np.float64], cap: int) -> IntArray:
    """Package-merge on ascending positive weights (at least two, at most 2**cap):
    code lengths, non-increasing, optimal among codes no longer than ``cap``.

    Coin-collector view: every leaf is a coin of face value 2^-l at each level
    l = 1..cap; pick coins of total face value n−1 at least weight. From the finest
    level up, pair neighbours into packages and merge them with the leaves; at level
    1 take the 2n−2 lightest items. A leaf's length is the number of levels at which
    it is taken (directly or inside a package).
    """
    m = int(leaves.size)
    # Per level (first entry: level `cap`, leaves only; last: level 1), which items
    # of the sorted merged list are leaves rather than packages.
    is_leaf_by_level: list[npt.NDArray[np.bool_]] = [np.ones(m, dtype=bool)]
    items = leaves
    for _ in range(cap - 1):
        pairs = items.size // 2
        packages = items[0 : 2 * pairs : 2] + items[1 : 2 * pairs : 2]
        merged = np.concatenate((leaves, packages))
        pick = np.argsort(merged, kind="stable")  # ties: leaves first
        items = merged[pick]
        is_leaf_by_level.append(pick < m)
    lengths_sorted = np.zeros(m, dtype=np.int64)
    take = 2 * m - 2
    for is_leaf in reversed(is_leaf_by_level):
        chosen = int(np.count_nonzero(is_leaf[:take]))
        lengths_sorted[:chosen] += 1  # the lightest leaves are taken at this level
        take = 2 * (take - chosen)
    return lengths_sorted


# -------------------------------------------------------------------- Golomb & Rice


def _check_p(p: float) -> float:
    try:
        pf = float(p)
    except (TypeError, ValueError):
        raise ValueError(f"p must be a number in (0, 1], got {p!r}") from None
    if not 0.0 < pf <= 1.0:
        raise ValueError(f"p must be in (0, 1] for a geometric source, got {p!r}")
    return pf


def golomb_expected_length(p: float, m: int) -> float:
    """Exact mean Golomb codeword length (bits/symbol) with parameter ``m`` for the
    geometric source P(x) = (1−p)^x p, x = 0, 1, 2, ...

    Codeword of x: the quotient x // m in unary (quotient + 1 bits) and the
    remainder in truncated binary (b − 1 bits below the cutoff c = 2^b − m, else b
    bits, b = ⌈log2 m⌉). With q = 1 − p the quotient is geometric, E = q^m/(1−q^m),
    and P(remainder < c) = (1 − q^c)/(1 − q^m), so
    L = 1 + q^m/(1−q^m) + b − (1 − q^c)/(1 − q^m).
    """
    pf = _check_p(p)
    try:
        mm = operator.index(m)
    except TypeError:
        raise ValueError(f"m must be a positive integer, got {m!r}") from None
    if mm < 1:
        raise ValueError(f"m must be a positive integer, got {mm}")
    b = (mm - 1).bit_length()  # ⌈log2 m⌉
    c = (1 << b) - mm
    if pf == 1.0:  # q = 0: only x = 0 occurs
        return 1.0 + b - (1.0 if c > 0 else 0.0)
    log_q = math.log1p(-pf)
    one_minus_qm = -math.expm1(mm * log_q)  # expm1: accurate when q^m is near 1
    qm = math.exp(mm * log_q)
    below = -math.expm1(c * log_q) if c else 0.0
    return 1.0 + qm / one_minus_qm + b - below / one_minus_qm


def golomb_parameter(p: float) -> int:
    """Optimal Golomb parameter m for P(x) = (1−p)^x p (Gallager & van Voorhis 1975).

    m = ⌈log(1+q) / (−log q)⌉ with q = 1−p (the m with q^m + q^(m+1) ≤ 1 < q^(m−1) + q^m).
    p = 1 gives m = 1. The formula is evaluated in floating point, so its neighbours
    are compared by exact expected length to settle rounding at the boundaries
    (where two values of m tie, the smaller is returned).
    """
    pf = _check_p(p)
    if pf == 1.0:
        return 1
    ratio = math.log(2.0 - pf) / -math.log1p(-pf)
    guess = max(1, math.ceil(ratio))
    candidates = [m for m in (guess - 1, guess, guess + 1) if m >= 1]
    return min(candidates, key=lambda m: (golomb_expected_length(pf, m), m))


def rice_parameter(p: float) -> int:
    """Best Rice parameter k (Golomb m = 2**k) for P(x) = (1−p)^x p, by exact expected
    length; the smaller k on ties."""
    pf = _check_p(p)
    m_opt = golomb_parameter(pf)
    top = max(1, m_opt.bit_length()) + 1
    return min(range(top + 1), key=lambda k: (golomb_expected_length(pf, 1 << k), k))


# ------------------------------------------------------------- lengths against a pmf


def _pmf(symbols: npt.ArrayLike, probs: npt.ArrayLike) -> tuple[IntArray, npt.NDArray[np.float64]]:
    syms = _symbol_array(symbols, "symbols")
    p = _weights(probs)
    if syms.shape != p.shape:
        raise ValueError(f"symbols and probs differ in size: {syms.size} and {p.size}")
    total = float(math.fsum(p.tolist()))
    if abs(total - 1.0) > 1e-9:
        raise ValueError(f"probs must sum to 1 (within 1e-9), they sum to {total!r}")
    return syms, p


def _lengths_for(cb: Codebook, syms: IntArray, p: npt.NDArray[np.float64]) -> IntArray:
    idx = np.searchsorted(cb._symbols, syms)
    idx_c = np.minimum(idx, len(cb) - 1)
    found = cb._symbols[idx_c] == syms
    missing = np.flatnonzero(~found & (p > 0))
    if missing.size:
        i = int(missing[0])
        raise ValueError(
            f"symbol {int(syms[i])} has probability {p[i]:.6g} but no codeword in "
            f"codebook {cb.name!r}"
        )
    return np.where(found, cb._lengths[idx_c], 0)


def entropy_bits(probs: npt.ArrayLike) -> float:
    """Shannon entropy −Σ p log2 p in bits (0·log 0 = 0)."""
    p = _weights(probs)
    nz = p[p > 0]
    return float(-np.sum(nz * np.log2(nz)))


def expected_length(code: CodeLike, symbols: npt.ArrayLike, probs: npt.ArrayLike) -> float:
    """Mean codeword length Σ p(s)·ℓ(s) in bits/symbol; ValueError naming a symbol of
    positive probability that has no codeword."""
    cb = _as_codebook(code)
    syms, p = _pmf(symbols, probs)
    return float(math.fsum((p * _lengths_for(cb, syms, p)).tolist()))


def redundancy(code: CodeLike, symbols: npt.ArrayLike, probs: npt.ArrayLike) -> float:
    """Expected length minus entropy, L − H, in bits/symbol."""
    return expected_length(code, symbols, probs) - entropy_bits(_pmf(symbols, probs)[1])


def excess_by_symbol(
    code: CodeLike,
    symbols: npt.ArrayLike,
    probs: npt.ArrayLike,
    top: int | None = None,
) -> list[tuple[int, float, int, float]]:
    """Per-symbol share of the redundancy, worst first.

    Each entry is (symbol, p, ℓ, p·(ℓ + log2 p)): the bits/symbol this symbol costs
    beyond its self-information. Entries sum to :func:`redundancy`; negative ones are
    symbols coded shorter than their information. Zero-probability symbols are left
    out. ``top`` keeps only the first entries.
    """
    cb = _as_codebook(code)
    syms, p = _pmf(symbols, probs)
    lens = _lengths_for(cb, syms, p)
    live = np.flatnonzero(p > 0)
    share = p[live] * (lens[live] + np.log2(p[live]))
    order = np.argsort(-share, kind="stable")
    if top is not None:
        order = order[: operator.index(top)]
    return [
        (int(syms[live[i]]), float(p[live[i]]), int(lens[live[i]]), float(share[i]))
        for i in order.tolist()
    ]
