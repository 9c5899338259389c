"""The :class:`Codebook`: a code table as the checks analyse it and as a working codec.

A codebook is a table ``{symbol: codeword}`` that is both the object the checks in
:mod:`pytest_ratefloor.codes` analyse and a working codec (``encode``/``decode`` at
bitarray's C speed). It builds one validated form from the spellings a table may
come in (each entry read by :mod:`pytest_ratefloor.codes.entries`), and holds
:func:`_as_codebook`, with which every other module of the package accepts a table.

Codewords are bit strings written most-significant bit first: ``"0110"``, a
``bitarray`` (its logical bit order, whatever its endianness) or ``(value, length)``
meaning the low ``length`` bits of ``value``, MSB first. A bad table raises
``TypeError`` (a symbol or codeword of the wrong type) or ``ValueError`` (a right
type with a bad value), naming the symbol and the codeword. A codeword is at most
:data:`MAX_CODEWORD_BITS` bits long.

A big table keyed by integers, its codewords all ``(value, length)`` tuples or all
``'0'/'1'`` strings, is read with a few array operations over all entries
(:mod:`pytest_ratefloor.codes.bulk`: 2**20 entries in a fraction of a second); any
other table, and any table with a bad entry, is read entry by entry, so the table
built and the message naming a bad entry are the same either way.

Symbols are the team's own keys: integers, characters, strings, bytes, tuples, any
hashable value, so a text or tokeniser table is analysed as it is keyed. Two rules:

* a ``bool`` is never a symbol, in any table (``{True: "0"}`` is refused by name):
  Python takes ``True`` for ``1`` (equal, same hash), so ``True`` beside ``'a'``
  would be ambiguous with symbol ``1`` and ``{True: ..., 1: ...}`` one entry;
* an integer symbol is a sample value, within the signed 64-bit range, and only a
  table keyed by integers alone encodes or decodes samples (``encode``/``decode``,
  a codec in a check); the analysis (prefix-freeness, Kraft, unique decodability,
  canonical order, length caps) takes any table. Integer tables keep their fast
  array path; other tables keep their keys in a list.

Symbol order (``Codebook.symbols``, ties between witnesses, the canonical
assignment): ascending when the symbols compare with one another (all numbers, all
strings, all bytes, tuples of those), otherwise the order the table lists them in
(e.g. a table mixing ``int`` and ``str`` keys). Messages show symbols with ``repr``:
``'a'``, ``b'a'``, ``('a', 1)``, ``7``.
"""

from __future__ import annotations

import itertools
from collections.abc import Hashable, Mapping
from typing import Any, Generic, NoReturn, TypeVar, Union

import numpy as np
import numpy.typing as npt
from bitarray import bitarray, decodetree, frozenbitarray

from pytest_ratefloor.codes.bulk import bulk_table
from pytest_ratefloor.codes.entries import (
    MAX_CODEWORD_BITS,
    _bool_refused,
    _index_of,
    _is_bool,
    _key_kind,
    _keyed_table,
    _NotAnInteger,
    _parse_codeword,
    _symbol_array,
    _symbol_of,
    _word_text,
)
from pytest_ratefloor.validation import sample_size, show

__all__ = ["MAX_CODEWORD_BITS", "CodeLike", "Codebook", "IntArray"]

#: bitarray's decode tree handles codewords up to this many bits; longer codes fall
#: back to a (slower) pure-Python decoder.
_DECODETREE_MAX_BITS = 256

K = TypeVar("K", bound=Hashable)

CodeLike = Union["Codebook[Any]", Mapping[Any, Any]]
IntArray = npt.NDArray[np.int64]


class Codebook(Generic[K]):
    """A symbol code: every symbol mapped to a codeword.

    ``mapping`` is ``{symbol: codeword}`` where a codeword is ``"0110"``, a
    ``bitarray`` or ``(value, length)`` (the low ``length`` bits of ``value``, most
    significant first). A symbol is any hashable value but a ``bool``: an integer
    (numpy integers are stored as ``int``) within the signed 64-bit range, a
    character, a string, bytes, a tuple... (numpy scalars are stored as the Python
    value they hold). A bad entry raises ``TypeError`` (a bool symbol, a codeword of
    the wrong type) or ``ValueError`` (an empty codeword, a character other than
    '0'/'1', a value that does not fit its length), naming the symbol and codeword.
    Two symbols sharing one codeword are accepted here: that is a defect of the code,
    reported by :func:`assert_prefix_free`, not a malformed table.

    As a codec, ``encode(symbols)`` returns a ``bitarray`` and ``decode(bits, n)``
    returns exactly ``n`` symbols (int64). Decoding needs a prefix-free code, and both
    need a table keyed by integers (samples are integer arrays): another table raises
    ``TypeError`` saying so. Every analysis takes any table.

    Attributes: ``name``, ``codewords`` (symbol → frozenbitarray, big-endian),
    ``symbols`` (in symbol order: ascending when the symbols compare with one
    another, else as the table lists them), ``lengths`` (symbol → length),
    ``max_length``, ``version`` (``None``: a table has no release of its own). Treat
    them as read-only; the table is built once.
    """

    version: str | None = None

    def __init__(self, mapping: Mapping[K, Any] | Codebook[K], name: str = "codebook") -> None:
        if not isinstance(name, str):
            raise TypeError(f"codebook name must be a string, got {show(name)}")
        self.name = name
        if isinstance(mapping, Codebook):
            self._set_table(mapping._ints, mapping._keys, mapping._lengths, mapping._values,
                            mapping._index, mapping._values64)
            return
        where = f"codebook {name!r}"
        if not isinstance(mapping, Mapping):
            raise TypeError(
                f"{where}: mapping must be a {{symbol: codeword}} mapping or a Codebook, "
                f"got {show(mapping)}"
            )
        if len(mapping) == 0:
            raise ValueError(f"{where}: mapping must hold at least one codeword, got {{}}")
        bulk = bulk_table(mapping)  # a big table of a common shape, read at once
        if bulk is not None:
            self._set_table(bulk.symbols, None, bulk.lengths, bulk.values, None, bulk.values64)
            return
        # entry by entry: any table, and the one message naming a bad entry
        syms: list[int] = []
        values: list[int] = []
        lengths: list[int] = []
        try:  # integer symbols: the array path (a table may hold 2^20 of them)
            for key, word in mapping.items():
                sym = _symbol_of(key, where)
                value, length = _parse_codeword(sym, word, where)
                syms.append(sym)
                values.append(value)
                lengths.append(length)
        except _NotAnInteger:  # a key of another kind: the table of any symbols
            keys, lens, vals, index = _keyed_table(mapping.items(), where)
            self._set_table(None, keys, lens, vals, index)
            return
        sym_arr = np.array(syms, dtype=np.int64)
        order = np.argsort(sym_arr, kind="stable")
        sym_arr = sym_arr[order]
        if sym_arr.size > 1 and bool(np.any(sym_arr[1:] == sym_arr[:-1])):
            dup = int(sym_arr[1:][sym_arr[1:] == sym_arr[:-1]][0])
            raise ValueError(f"{where}: symbols must be distinct, got {dup} twice")
        idx = order.tolist()
        self._set_table(
            sym_arr,
            None,
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
    ) -> Codebook[int]:
        """Fast path for integer tables built here (symbols ascending, entries valid)."""
        self: Codebook[int] = Codebook.__new__(Codebook)
        self.name = name
        self._set_table(symbols, None, lengths, values, None, values64)
        return self

    @classmethod
    def _from_keys(
        cls, keys: list[Any], values: list[int], lengths: IntArray, name: str
    ) -> Codebook[Any]:
        """Fast path for tables of other symbols built here (``keys`` normalised and in
        symbol order, entries valid)."""
        self: Codebook[Any] = Codebook.__new__(Codebook)
        self.name = name
        self._set_table(None, keys, lengths, values, _index_of(keys, f"codebook {name!r}"))
        return self

    def _set_table(
        self,
        ints: IntArray | None,
        keys: list[Any] | None,
        lengths: IntArray,
        values: list[int] | None,
        index: dict[Any, int] | None = None,
        values64: npt.NDArray[np.uint64] | None = None,
    ) -> None:
        # Exactly one of ``ints`` (integer symbols, ascending) and ``keys`` (any symbols,
        # in symbol order, with ``index``: key → position) is set. Entries are stored in
        # symbol order, so a position stands for a symbol in every analysis. The values
        # are kept as Python ints, as uint64, or both (at least one; each made from the
        # other when first needed).
        if values is None and values64 is None:
            raise ValueError("a codebook needs its codeword values")  # an internal invariant
        self._ints = ints
        self._keys = keys
        self._index = index
        self._lengths = lengths
        self._values = values
        self._max_length = int(lengths.max())
        self._codewords: dict[Any, bitarray] | None = None
        self._encode_table: dict[Any, bitarray] | None = None
        self._tree: decodetree | None = None
        self._values64 = values64 if self._max_length <= 64 else None

    # ---- symbols
    def _integers(self, doing: str) -> IntArray:
        """The integer symbols, ascending; ``TypeError`` saying what needs them for a
        table keyed by other symbols."""
        if self._ints is not None:
            return self._ints
        keys = self._keys or []
        key = next((k for k in keys if type(k) is not int), keys[0] if keys else None)
        raise TypeError(
            f"codebook {self.name!r}: {doing} needs integer symbols; this table is keyed "
            f"by {_key_kind(key)} such as {show(key)}"
        )

    @property
    def _symbols(self) -> IntArray:
        """The integer symbols as an array (ascending), for analyses against a pmf of
        integer symbols; ``TypeError`` for a table keyed by other symbols."""
        return self._integers("measuring against a pmf of integer symbols")

    def _key(self, position: int) -> Any:
        """The symbol stored at ``position`` (symbol order), as the user keyed it."""
        if self._keys is not None:
            return self._keys[position]
        assert self._ints is not None
        return int(self._ints[position])

    def _symbol_list(self) -> list[Any]:
        if self._keys is not None:
            return list(self._keys)
        assert self._ints is not None
        return list(self._ints.tolist())

    def _position(self, symbol: object) -> int:
        """Where ``symbol`` is stored: ``TypeError`` for a bool (never a symbol) or an
        unhashable value, ``KeyError`` when the table has no such symbol."""
        if _is_bool(symbol):
            raise _bool_refused(symbol, f"codebook {self.name!r}")
        if self._index is not None:
            key = symbol.item() if isinstance(symbol, np.generic) else symbol
            found = self._index.get(key)
            if found is None:
                raise KeyError(symbol)
            return found
        assert self._ints is not None
        try:
            sym = _symbol_of(symbol)
        except (TypeError, ValueError):  # no integer, or none a table can hold
            hash(symbol)  # an unhashable value is a TypeError, as a dict lookup says
            raise KeyError(symbol) from None
        i = int(np.searchsorted(self._ints, sym))
        if i >= self._ints.size or int(self._ints[i]) != sym:
            raise KeyError(symbol)
        return i

    # ---- attributes (built lazily: a 2^20-entry table stays cheap to analyse)
    @property
    def codewords(self) -> dict[K, bitarray]:
        """symbol → codeword as a big-endian ``frozenbitarray``."""
        if self._codewords is None:
            self._codewords = {s: frozenbitarray(w) for s, w in self._codec_table().items()}
        return self._codewords

    def _codec_table(self) -> dict[Any, bitarray]:
        """symbol → codeword as private (plain, never handed out) bitarrays for
        bitarray's encode and decodetree: slices of one concatenation, so a 2^20-entry
        table costs about a second rather than the several of frozen copies."""
        if self._encode_table is None:
            whole = _concatenation(self)
            ends = np.cumsum(self._lengths).tolist()
            starts = [0, *ends[:-1]]
            self._encode_table = {
                s: whole[a:b] for s, a, b in zip(self._symbol_list(), starts, ends)
            }
        return self._encode_table

    @property
    def symbols(self) -> list[K]:
        """The symbols in symbol order: ascending when they compare with one another
        (integers always), else as the table lists them."""
        return self._symbol_list()

    def sample_symbols(self) -> list[int]:
        """The symbols as sample values (ascending ints): what a codec built on this
        table encodes. ``TypeError`` for a table keyed by other symbols (``"encoding
        samples needs integer symbols; this table is keyed by str such as 'a'"``)."""
        return list(self._integers("encoding samples").tolist())

    @property
    def lengths(self) -> dict[K, int]:
        """symbol → codeword length in bits."""
        return dict(zip(self._symbol_list(), self._lengths.tolist()))

    @property
    def max_length(self) -> int:
        """The longest codeword, in bits."""
        return self._max_length

    def word(self, symbol: K) -> str:
        """The codeword of ``symbol`` as '0'/'1' text (``KeyError`` if it has none;
        ``TypeError`` for a ``bool``, never a symbol, or an unhashable value)."""
        i = self._position(symbol)
        return _word_text(self._value(i), int(self._lengths[i]))

    def __len__(self) -> int:
        return int(self._lengths.size)

    def __contains__(self, symbol: object) -> bool:
        try:
            self._position(symbol)
        except (KeyError, TypeError):  # a bool is not a symbol; nor is an unhashable value
            return False
        return True

    def __repr__(self) -> str:
        return (
            f"Codebook({self.name!r}, {len(self)} symbols, "
            f"lengths {int(self._lengths.min())}..{self._max_length} bits)"
        )

    # ---- internal views used by the analysis functions
    @property
    def _pyvalues(self) -> list[int]:
        """Codeword values as Python ints, in symbol order."""
        if self._values is None:
            assert self._values64 is not None
            self._values = self._values64.tolist()
        return self._values

    def _value(self, position: int) -> int:
        """The codeword value at ``position`` as a Python int."""
        if self._values is not None:
            return self._values[position]
        assert self._values64 is not None
        return int(self._values64[position])

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
        """Concatenate the codewords of ``symbols`` (1-D integers) into a bitarray.

        ``TypeError`` for a table keyed by other symbols than integers."""
        ints = self._integers("encoding samples")
        arr = _symbol_array(symbols, "symbols")
        out = bitarray(endian="big")
        if arr.size == 0:
            return out
        try:
            out.encode(self._codec_table(), arr.tolist())
        except ValueError:
            missing = ~np.isin(arr, ints)
            if not bool(missing.any()):
                raise
            i = int(np.flatnonzero(missing)[0])
            raise ValueError(
                f"symbol {int(arr[i])} at index {i} has no codeword in codebook {self.name!r} "
                f"({len(self)} symbols, {int(ints[0])}..{int(ints[-1])})"
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
        ``TypeError`` for a table keyed by other symbols than integers.
        """
        self._integers("decoding samples")
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
        ints = self._integers("decoding samples")
        idx = np.searchsorted(ints, np.array(decoded, dtype=np.int64))
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
        table = dict(zip(self._texts(), self._integers("decoding samples").tolist()))
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


def _concatenation(cb: Codebook[Any]) -> bitarray:
    """All codewords, in symbol order, back to back in one big-endian bitarray."""
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


def _as_codebook(code: CodeLike) -> Codebook[Any]:
    """``code`` as a :class:`Codebook` (a mapping is parsed; ``TypeError`` otherwise)."""
    if isinstance(code, Codebook):
        return code
    if isinstance(code, Mapping):
        return Codebook(code)
    raise TypeError(
        f"code must be a Codebook or a {{symbol: codeword}} mapping, got {show(code)}"
    )
