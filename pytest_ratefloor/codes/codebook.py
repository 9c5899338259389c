"""The :class:`Codebook` and the parsing of code tables.

A codebook is a table ``{symbol: codeword}`` that is both the object the checks in
:mod:`pytest_ratefloor.codes` analyse and a working codec (``encode``/``decode`` at
bitarray's C speed). This module turns the spellings a table may come in into one
validated form, and holds the small helpers every other module of the package uses
to accept a table or a symbol array (:func:`_as_codebook`, :func:`_symbol_array`).

Codewords are bit strings written most-significant bit first: ``"0110"``, a
``bitarray`` (its logical bit order, whatever its endianness) or ``(value, length)``
meaning the low ``length`` bits of ``value``, MSB first. A bad table raises
``TypeError`` (a symbol or codeword of the wrong type) or ``ValueError`` (a right
type with a bad value), naming the symbol and the codeword. A symbol is an integer,
never a ``bool`` (``{True: "0"}`` is refused, not read as symbol 1), and a codeword
is at most :data:`MAX_CODEWORD_BITS` bits long.
"""

from __future__ import annotations

import itertools
import operator
from collections.abc import Mapping
from typing import Any, NoReturn, Union

import numpy as np
import numpy.typing as npt
from bitarray import bitarray, decodetree, frozenbitarray

from pytest_ratefloor.validation import integer, message, sample_size, show

__all__ = ["MAX_CODEWORD_BITS", "CodeLike", "Codebook", "IntArray"]

#: bitarray's decode tree handles codewords up to this many bits; longer codes fall
#: back to a (slower) pure-Python decoder.
_DECODETREE_MAX_BITS = 256

#: The longest codeword a table may hold, in bits (2**16). Formats cap lengths far
#: lower (DEFLATE at 15 bits, RFC 1951 §3.2.7), so this is no format's limit but a
#: guard: a length is an integer the table builds words, Kraft sums (``1 << length``)
#: and text from, so ``(0, 2**40)`` would ask for terabytes instead of being refused.
#: 2**16 leaves room for unary-like tables of tens of thousands of symbols while each
#: codeword stays an 8 KiB integer (a project choice).
MAX_CODEWORD_BITS = 1 << 16

_INT64_MIN = -(2**63)
_INT64_MAX = 2**63 - 1

CodeLike = Union["Codebook", Mapping[Any, Any]]
IntArray = npt.NDArray[np.int64]


def _symbol_of(key: object, where: str | None = None) -> int:
    """A table key as a Python int: an integer (numpy integers accepted) in the signed
    64-bit range. ``TypeError`` for a bool, float, string or other non-integer."""
    if type(key) is int or isinstance(key, np.integer):  # the common cases, fast
        sym = int(key)
        if _INT64_MIN <= sym <= _INT64_MAX:
            return sym
    sym = integer(key, "symbol", where=where)  # the type, and the message for either error
    if not _INT64_MIN <= sym <= _INT64_MAX:
        head = f"{where}: " if where else ""
        raise ValueError(f"{head}symbol must be an integer in the signed 64-bit range, got {sym}")
    return sym


_CODEWORD_RULE = "a '0'/'1' string, a bitarray or a (value, length) pair"
_LENGTH_RULE = f"an integer in [1, {MAX_CODEWORD_BITS}] (MAX_CODEWORD_BITS)"


def _check_length(sym: int, length: int, where: str) -> None:
    """Refuse a codeword longer than :data:`MAX_CODEWORD_BITS`, naming the symbol."""
    if length > MAX_CODEWORD_BITS:
        raise ValueError(message(f"length of the codeword of symbol {sym}", _LENGTH_RULE,
                                 length, where))


def _parse_codeword(sym: int, word: object, where: str) -> tuple[int, int]:
    """(value, length) of one table entry, MSB first; errors name the symbol and the
    codeword (``where`` says which table)."""
    if isinstance(word, str):
        if word == "" or word.replace("0", "").replace("1", ""):
            raise ValueError(
                f"{where}: codeword of symbol {sym} must be a non-empty string of the "
                f"characters '0' and '1', got {show(word)}"
            )
        _check_length(sym, len(word), where)
        return int(word, 2), len(word)
    if isinstance(word, bitarray):
        if len(word) == 0:
            raise ValueError(
                f"{where}: codeword of symbol {sym} must be a non-empty bitarray, got {show(word)}"
            )
        _check_length(sym, len(word), where)
        return int(word.to01(), 2), len(word)
    if isinstance(word, (tuple, list)) and len(word) == 2:
        value, length = word
        if (  # the common case, fast; anything else is checked in full
            type(value) is int and type(length) is int and 0 < length <= MAX_CODEWORD_BITS
            and value >= 0 and not value >> length
        ):
            return value, length
        return _parse_pair(sym, word, where)
    raise TypeError(f"{where}: codeword of symbol {sym} must be {_CODEWORD_RULE}, got {show(word)}")


def _parse_pair(sym: int, word: tuple[Any, Any] | list[Any], where: str) -> tuple[int, int]:
    """A ``(value, length)`` codeword checked in full: both integers, length in
    ``[1, MAX_CODEWORD_BITS]``, and the value within ``length`` bits."""
    what = f"codeword {show(word)} of symbol {sym}"
    value = integer(word[0], f"value of {what}", where=where)
    length = integer(word[1], f"length of {what}", minimum=1, where=where)
    if length > MAX_CODEWORD_BITS:
        raise ValueError(message(f"length of {what}", _LENGTH_RULE, length, where))
    if value < 0 or value >> length:
        raise ValueError(
            f"{where}: value of {what} must be an integer in [0, 2**{length} - 1] "
            f"(it must fit in {length} bit{'s' if length != 1 else ''}), got {value}"
        )
    return value, length


def _word_text(value: int, length: int) -> str:
    return format(value, f"0{length}b")


class Codebook:
    """A symbol code: every integer symbol mapped to a codeword.

    ``mapping`` is ``{symbol: codeword}`` where a codeword is ``"0110"``, a
    ``bitarray`` or ``(value, length)`` (the low ``length`` bits of ``value``, most
    significant first). Symbols are integers (numpy integers are stored as ``int``)
    within the signed 64-bit range. A bad entry raises ``TypeError`` (a symbol or
    codeword of the wrong type) or ``ValueError`` (an empty codeword, a character other
    than '0'/'1', a value that does not fit its length), naming the symbol and codeword.
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
            raise TypeError(f"codebook name must be a string, got {show(name)}")
        self.name = name
        if isinstance(mapping, Codebook):
            self._set_table(mapping._symbols, mapping._lengths, mapping._pyvalues)
            return
        where = f"codebook {name!r}"
        if not isinstance(mapping, Mapping):
            raise TypeError(
                f"{where}: mapping must be a {{symbol: codeword}} mapping or a Codebook, "
                f"got {show(mapping)}"
            )
        if len(mapping) == 0:
            raise ValueError(f"{where}: mapping must hold at least one codeword, got {{}}")
        syms: list[int] = []
        values: list[int] = []
        lengths: list[int] = []
        for key, word in mapping.items():
            sym = _symbol_of(key, where)
            value, length = _parse_codeword(sym, word, where)
            syms.append(sym)
            values.append(value)
            lengths.append(length)
        sym_arr = np.array(syms, dtype=np.int64)
        order = np.argsort(sym_arr, kind="stable")
        sym_arr = sym_arr[order]
        if sym_arr.size > 1 and bool(np.any(sym_arr[1:] == sym_arr[:-1])):
            dup = int(sym_arr[1:][sym_arr[1:] == sym_arr[:-1]][0])
            raise ValueError(f"{where}: symbols must be distinct, got {dup} twice")
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
        """The codeword of ``symbol`` as '0'/'1' text (KeyError if it has none;
        TypeError for a non-integer such as a ``bool``)."""
        integer(symbol, "symbol", where=f"codebook {self.name!r}")
        if symbol not in self:
            raise KeyError(symbol)
        i = int(np.searchsorted(self._symbols, symbol))
        if i >= self._symbols.size or int(self._symbols[i]) != symbol:
            raise KeyError(symbol)
        return _word_text(self._pyvalues[i], int(self._lengths[i]))

    def __len__(self) -> int:
        return int(self._symbols.size)

    def __contains__(self, symbol: object) -> bool:
        if isinstance(symbol, (bool, np.bool_)):  # a bool is not a symbol
            return False
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
        no codeword, or when the stream ends early; ``n`` is an integer >= 0 and
        ``bits`` a bitarray or bytes (``TypeError``/``ValueError`` otherwise).
        """
        count = sample_size(n, minimum=0)
        if isinstance(bits, (bytes, bytearray, memoryview)):
            stream = bitarray(endian="big")
            stream.frombytes(bytes(bits))
        elif isinstance(bits, bitarray):
            stream = bits
        else:
            raise TypeError(
                f"codebook {self.name!r}: bits must be a bitarray or bytes, got {show(bits)}"
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
            # properties imports this module: import it here, once per table
            from pytest_ratefloor.codes.properties import _prefix_phrase, prefix_witness

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
        from pytest_ratefloor.codes.properties import _prefix_phrase, prefix_witness  # see above

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


def _symbol_array(values: npt.ArrayLike, what: str, *, bools: bool = True) -> IntArray:
    """``values`` as a 1-D int64 array (``what`` names the argument in messages).

    ``TypeError`` for a string or an array of non-integers (floats included; an empty
    array of any dtype is accepted); ``ValueError`` for a shape other than 1-D or an
    unsigned value beyond the signed 64-bit range. Bools read as 0 and 1, as in a
    sample of a binary source, unless ``bools=False`` (the symbols and lengths that
    define a table, where a bool, like a bool key, is a mistake).
    """
    rule = "a 1-D array of integers"
    if isinstance(values, (str, bytes)):
        raise TypeError(f"{what} must be {rule}, got {show(values)}")
    arr = np.asarray(values)
    if arr.size and arr.dtype.kind not in ("iub" if bools else "iu"):
        first = arr.reshape(-1)[0]
        raise TypeError(
            f"{what} must be {rule}, got dtype {arr.dtype} (first value {show(first)})"
        )
    if arr.ndim != 1:
        raise ValueError(f"{what} must be {rule}, got shape {arr.shape}")
    if arr.dtype.kind == "u" and arr.size and int(arr.max()) > _INT64_MAX:
        raise ValueError(
            f"{what} must be integers in the signed 64-bit range, got {int(arr.max())}"
        )
    return arr.astype(np.int64, copy=False)


def _as_codebook(code: CodeLike) -> Codebook:
    """``code`` as a :class:`Codebook` (a mapping is parsed; ``TypeError`` otherwise)."""
    if isinstance(code, Codebook):
        return code
    if isinstance(code, Mapping):
        return Codebook(code)
    raise TypeError(
        f"code must be a Codebook or a {{symbol: codeword}} mapping, got {show(code)}"
    )
