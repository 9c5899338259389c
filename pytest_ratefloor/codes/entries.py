"""Reading a code table's entries: its symbols and its codewords.

Symbols are the team's own keys (any hashable value but a ``bool``); an integer
symbol is a sample value within the signed 64-bit range. Codewords are written
most-significant bit first: a ``'0'/'1'`` string, a ``bitarray`` or a
``(value, length)`` pair, at most :data:`MAX_CODEWORD_BITS` bits. A bad entry
raises ``TypeError`` (wrong type) or ``ValueError`` (bad value), naming the symbol
and the codeword. :class:`~pytest_ratefloor.codes.codebook.Codebook` builds on
these; the rest of the package accepts symbol arrays through :func:`_symbol_array`.
"""

from __future__ import annotations

import numbers
from collections.abc import Hashable, Iterable
from typing import Any

import numpy as np
import numpy.typing as npt
from bitarray import bitarray

from pytest_ratefloor.validation import integer, message, show

__all__ = ["MAX_CODEWORD_BITS"]

IntArray = npt.NDArray[np.int64]

#: The longest codeword a table may hold, in bits (2**16). Formats cap lengths far
#: lower (DEFLATE at 15 bits, RFC 1951 §3.2.7), so this is no format's limit but a
#: guard: a length is an integer the table builds words, Kraft sums (``1 << length``)
#: and text from, so ``(0, 2**40)`` would ask for terabytes instead of being refused.
#: 2**16 leaves room for unary-like tables of tens of thousands of symbols while each
#: codeword stays an 8 KiB integer (a project choice).
MAX_CODEWORD_BITS = 1 << 16

_INT64_MIN = -(2**63)
_INT64_MAX = 2**63 - 1


class _NotAnInteger(TypeError):
    """A table key that is no integer: the table is keyed by other symbols."""


def _is_bool(value: object) -> bool:
    return isinstance(value, (bool, np.bool_))


def _bool_refused(key: object, where: str | None) -> TypeError:
    """The one refusal of a bool symbol, in every table and lookup."""
    head = f"{where}: " if where else ""
    return TypeError(
        f"{head}symbol must not be a bool (Python takes True for 1 and False for 0, so it "
        f"would be ambiguous with those integers; use 1/0 or a string), got {show(key)}"
    )


def _symbol_of(key: object, where: str | None = None) -> int:
    """A table key as a Python int: an integer (numpy integers accepted) in the signed
    64-bit range. ``TypeError`` for a bool; :class:`_NotAnInteger` (a ``TypeError``)
    for any other non-integer, which a caller may take as a table of other symbols."""
    if type(key) is int or isinstance(key, np.integer):  # the common cases, fast
        sym = int(key)
        if _INT64_MIN <= sym <= _INT64_MAX:
            return sym
    elif _is_bool(key):
        raise _bool_refused(key, where)
    try:
        sym = integer(key, "symbol", where=where)  # other integral types
    except TypeError as exc:
        raise _NotAnInteger(str(exc)) from None
    if not _INT64_MIN <= sym <= _INT64_MAX:
        head = f"{where}: " if where else ""
        raise ValueError(f"{head}symbol must be an integer in the signed 64-bit range, got {sym}")
    return sym


def _key_of(key: object, where: str | None = None) -> Hashable:
    """A table key of any kind: an integer as by :func:`_symbol_of` (bools refused),
    a numpy scalar as the Python value it holds, anything else as it is (hashable)."""
    if type(key) is str or type(key) is bytes:  # the common keys of a text table, fast
        return key
    if isinstance(key, (numbers.Integral, np.bool_)):  # numpy integers and bools included
        return _symbol_of(key, where)
    if isinstance(key, np.generic):  # np.str_('a') is 'a', np.float64(0.5) is 0.5
        key = key.item()
    try:
        hash(key)
    except TypeError:
        raise TypeError(message("symbol", "hashable", key, where)) from None
    return key


def _symbol_order(keys: list[Any]) -> list[int]:
    """Positions of ``keys`` in symbol order: ascending when they compare with one
    another, else the order given (keys of kinds Python cannot order, e.g. int and str)."""
    try:
        return sorted(range(len(keys)), key=keys.__getitem__)
    except TypeError:
        return list(range(len(keys)))


def _index_of(keys: list[Any], where: str | None) -> dict[Any, int]:
    """key → position; ``ValueError`` naming a symbol listed twice."""
    index: dict[Any, int] = {}
    for i, k in enumerate(keys):
        if index.setdefault(k, i) != i:
            head = f"{where}: " if where else ""
            raise ValueError(f"{head}symbols must be distinct, got {show(k)} twice")
    return index


def _key_kind(key: object) -> str:
    return type(key).__name__


_CODEWORD_RULE = "a '0'/'1' string, a bitarray or a (value, length) pair"
_LENGTH_RULE = f"an integer in [1, {MAX_CODEWORD_BITS}] (MAX_CODEWORD_BITS)"


def _check_length(sym: object, length: int, where: str) -> None:
    """Refuse a codeword longer than :data:`MAX_CODEWORD_BITS`, naming the symbol."""
    if length > MAX_CODEWORD_BITS:
        raise ValueError(message(f"length of the codeword of symbol {show(sym)}", _LENGTH_RULE,
                                 length, where))


def _parse_codeword(sym: object, word: object, where: str) -> tuple[int, int]:
    """(value, length) of one table entry, MSB first; errors name the symbol and the
    codeword (``where`` says which table)."""
    if isinstance(word, str):
        if word == "" or word.replace("0", "").replace("1", ""):
            raise ValueError(
                f"{where}: codeword of symbol {show(sym)} must be a non-empty string of the "
                f"characters '0' and '1', got {show(word)}"
            )
        _check_length(sym, len(word), where)
        return int(word, 2), len(word)
    if isinstance(word, bitarray):
        if len(word) == 0:
            raise ValueError(
                f"{where}: codeword of symbol {show(sym)} must be a non-empty bitarray, "
                f"got {show(word)}"
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
    raise TypeError(
        f"{where}: codeword of symbol {show(sym)} must be {_CODEWORD_RULE}, got {show(word)}"
    )


def _parse_pair(sym: object, word: tuple[Any, Any] | list[Any], where: str) -> tuple[int, int]:
    """A ``(value, length)`` codeword checked in full: both integers, length in
    ``[1, MAX_CODEWORD_BITS]``, and the value within ``length`` bits."""
    what = f"codeword {show(word)} of symbol {show(sym)}"
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


def _keyed_table(
    items: Iterable[tuple[Any, Any]], where: str
) -> tuple[list[Any], IntArray, list[int], dict[Any, int]]:
    """A table of any symbols: (keys in symbol order, lengths, values, key → position)."""
    keys: list[Any] = []
    values: list[int] = []
    lengths: list[int] = []
    for key, word in items:
        sym = _key_of(key, where)
        value, length = _parse_codeword(sym, word, where)
        keys.append(sym)
        values.append(value)
        lengths.append(length)
    order = _symbol_order(keys)
    keys = [keys[i] for i in order]
    index = _index_of(keys, where)
    return keys, np.array(lengths, dtype=np.int64)[order], [values[i] for i in order], index


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
