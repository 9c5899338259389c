"""Properties of a code table: prefix-freeness, Kraft sums, canonical order, caps.

* Prefix-freeness with a witness: :func:`prefix_witness` finds the first pair of
  codewords where one is a prefix of (or equal to) the other; :func:`assert_prefix_free`
  fails with it (:class:`~pytest_ratefloor.errors.PrefixFailure`).
* Exact Kraft sums Σ2^-ℓ as :class:`fractions.Fraction` values (integer arithmetic
  only): :func:`kraft_sum`, :func:`assert_kraft`
  (:class:`~pytest_ratefloor.errors.KraftFailure`). Kraft's inequality (Kraft 1949)
  bounds the lengths of every prefix code and McMillan's theorem (McMillan 1956) those
  of every uniquely decodable code (years from memory): a sum above 1 means some bit
  string has two parses.
* Canonical order (RFC 1951 §3.2.2): :func:`is_canonical`, :func:`canonical_codebook`
  (the canonical prefix code of given lengths), and the length cap of a format; both
  shape checks fail with :class:`~pytest_ratefloor.errors.CodeShapeFailure`.

The one-symbol code with a 1-bit codeword has Kraft sum 1/2 and is the one incomplete
code ``assert_kraft(..., complete=True)`` accepts: a zero-length codeword would make
the stream carry no bits, so every real symbol-code format spends at least one bit.

Every function here takes a table of any symbols (integers, characters, strings,
bytes, tuples; never a ``bool``), and its witnesses and messages name the symbols as
the table keys them, shown with ``repr``. Ties and the canonical assignment follow
the symbol order of :mod:`~pytest_ratefloor.codes.codebook` (ascending when the
symbols compare with one another, else the table's own order).
"""

from __future__ import annotations

import itertools
from collections.abc import Mapping
from fractions import Fraction
from typing import Any

import numpy as np
import numpy.typing as npt

from pytest_ratefloor.codes.codebook import (
    Codebook,
    CodeLike,
    IntArray,
    _as_codebook,
)
from pytest_ratefloor.codes.entries import (
    MAX_CODEWORD_BITS,
    _index_of,
    _key_of,
    _NotAnInteger,
    _symbol_array,
    _symbol_of,
    _symbol_order,
    _word_text,
)
from pytest_ratefloor.errors import CodeShapeFailure, KraftFailure, PrefixFailure
from pytest_ratefloor.validation import integer, show

#: ``((symbol_a, word_a), (symbol_b, word_b))``: the table's own symbols and their
#: codewords as '0'/'1' text, ``word_a`` a prefix of (or equal to) ``word_b``.
Witness = tuple[tuple[Any, str], tuple[Any, str]]


def prefix_witness(code: CodeLike) -> Witness | None:
    """The first pair of codewords where one is a prefix of (or equal to) the other.

    Returns ``((symbol_a, word_a), (symbol_b, word_b))`` with ``word_a`` a prefix of
    ``word_b`` (possibly equal), or ``None`` for a prefix-free code; the symbols are
    the table's own keys. "First" means first in lexicographic order of the codewords
    (ties in symbol order).

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
    # entries are stored in symbol order, so ties by position are ties by symbol
    index_bits = max(1, (n - 1).bit_length())
    length_bits = top.bit_length()
    if top + length_bits + index_bits <= 64:  # key, length, position in one uint64
        return _packed_witness(cb, keys, length_bits, index_bits)
    if top <= 57:  # key and length fit one uint64 sort key (stable: ties by symbol)
        order = np.argsort((keys << np.uint64(7)) | lengths.astype(np.uint64), kind="stable")
    else:
        order = np.lexsort((np.arange(n), lengths, keys))
    a, b = order[:-1], order[1:]
    diff = lengths[b] - lengths[a]
    shift = np.where(diff > 0, diff, 0).astype(np.uint64)
    hit = (diff >= 0) & ((values[b] >> shift) == values[a])
    if not bool(hit.any()):
        return None
    k = int(np.argmax(hit))
    return _witness_pair(cb, int(a[k]), int(b[k]))


def _witness_pair(cb: Codebook[Any], ia: int, ib: int) -> Witness:
    return (
        (cb._key(ia), _word_text(cb._value(ia), int(cb._lengths[ia]))),
        (cb._key(ib), _word_text(cb._value(ib), int(cb._lengths[ib]))),
    )


def _packed_witness(
    cb: Codebook[Any], keys: npt.NDArray[np.uint64], length_bits: int, index_bits: int
) -> Witness | None:
    """:func:`prefix_witness` with one plain sort of (left-aligned word, length,
    position) packed in a uint64. In that order ``a`` comes right before ``b`` with
    ``ka <= kb``, and ``a`` is a prefix of (or equal to) ``b`` exactly when ``kb``
    lies in the span of ``a``: ``kb - ka < 2**(top - la)``."""
    low = np.uint64(index_bits)
    packed = (
        (keys << np.uint64(length_bits + index_bits))
        | (cb._lengths.astype(np.uint64) << low)
        | np.arange(len(cb), dtype=np.uint64)
    )
    packed.sort()
    key = packed >> np.uint64(length_bits + index_bits)
    length = (packed >> low) & np.uint64((1 << length_bits) - 1)
    span = np.left_shift(np.uint64(1), np.uint64(cb.max_length) - length[:-1])
    hit = np.flatnonzero((key[1:] - key[:-1]) < span)
    if hit.size == 0:
        return None
    k = int(hit[0])
    position = np.uint64((1 << index_bits) - 1)
    return _witness_pair(cb, int(packed[k] & position), int(packed[k + 1] & position))


def _prefix_witness_text(cb: Codebook[Any]) -> Witness | None:
    """:func:`prefix_witness` on '0'/'1' text, for codewords longer than 64 bits."""
    texts = cb._texts()
    ranked = sorted(range(len(texts)), key=lambda i: (texts[i], i))  # ties: symbol order
    for i, j in itertools.pairwise(ranked):
        if texts[j].startswith(texts[i]):
            return (cb._key(i), texts[i]), (cb._key(j), texts[j])
    return None


def _prefix_phrase(witness: Witness) -> str:
    """The witness in words, naming the symbols with ``repr`` (``'a'``, ``7``)."""
    (sa, wa), (sb, wb) = witness
    if wa == wb:
        return f"symbols {show(sa)} and {show(sb)} share the codeword {wa!r}"
    return (
        f"the codeword of symbol {show(sa)} ({wa!r}) is a prefix of the codeword of symbol "
        f"{show(sb)} ({wb!r})"
    )


def assert_prefix_free(
    code: CodeLike, max_length: int | None = None, canonical: bool = False
) -> None:
    """Fail (:class:`PrefixFailure`) if a codeword is a prefix of another or two are equal.

    ``max_length`` (an integer >= 1) also checks the format's length cap and
    ``canonical=True`` the canonical assignment (both :class:`CodeShapeFailure`).
    """
    __tracebackhide__ = True
    cb = _as_codebook(code)
    cap = _length_cap(max_length)
    witness = prefix_witness(cb)
    if witness is not None:
        (sa, wa), _ = witness
        raise PrefixFailure(
            f"codebook {cb.name!r} is not prefix-free: {_prefix_phrase(witness)}; "
            f"a decoder that has read {wa!r} cannot tell whether symbol {show(sa)} has ended"
        )
    _check_shape(cb, cap, canonical)


def _length_cap(max_length: object) -> int | None:
    """The ``max_length=`` of the assert functions: None, or an integer >= 1."""
    return None if max_length is None else integer(max_length, "max_length", minimum=1)


# ------------------------------------------------------------------------------ Kraft


def _length_counts(cb: Codebook[Any]) -> dict[int, int]:
    counts = np.bincount(cb._lengths)
    return {int(ln): int(c) for ln, c in enumerate(counts.tolist()) if c}


def kraft_sum(code: CodeLike) -> Fraction:
    """Σ 2^−ℓ over the codewords, exactly: Σ 2^(ℓmax−ℓ) / 2^ℓmax in integers."""
    cb = _as_codebook(code)
    top = cb.max_length
    total = sum(c << (top - ln) for ln, c in _length_counts(cb).items())
    return Fraction(total, 1 << top)


def _histogram_text(cb: Codebook[Any], limit: int = 12) -> str:
    items = sorted(_length_counts(cb).items())
    parts = [f"{c}×{ln}" for ln, c in items[:limit]]
    if len(items) > limit:
        parts.append(f"... ({len(items) - limit} more lengths)")
    return "codewords×bits: " + ", ".join(parts)


def _unused_prefix(cb: Codebook[Any]) -> str | None:
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
    cap = _length_cap(max_length)
    total = kraft_sum(cb)
    if total > 1:
        witness = prefix_witness(cb)  # an over-full code is never prefix-free
        pair = f"; not prefix-free either: {_prefix_phrase(witness)}" if witness else ""
        raise KraftFailure(
            f"codebook {cb.name!r} is over-full: Kraft sum Σ2^-ℓ = {total} > 1 "
            f"(over by {total - 1}); by McMillan's theorem no uniquely decodable code "
            f"can have a Kraft sum above 1, so some bit strings have two parses "
            f"({len(cb)} codewords; {_histogram_text(cb)}){pair}"
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
    _check_shape(cb, cap, canonical)


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


def _canonical_mismatch(cb: Codebook[Any]) -> tuple[Any, str, str | None] | None:
    """(symbol, its codeword, the canonical one or None if none exists) of the first
    symbol in (length, symbol) order whose codeword is not the canonical one."""
    order = np.argsort(cb._lengths, kind="stable")  # entries are stored in symbol order
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
    return cb._key(i), _word_text(cb._value(i), ln), expected


def is_canonical(code: CodeLike) -> bool:
    """True if the codewords are the canonical code of their lengths: assigned in
    order of (length, symbol), consecutive within a length, each length starting at
    (previous codeword + 1) shifted left by the length difference (RFC 1951 §3.2.2)."""
    return _canonical_mismatch(_as_codebook(code)) is None


def _check_shape(cb: Codebook[Any], cap: int | None, canonical: bool) -> None:
    """The length cap (``cap``, already validated) and the canonical assignment."""
    __tracebackhide__ = True
    if cap is not None:
        over = np.flatnonzero(cb._lengths > cap)
        if over.size:
            i = int(over[0])
            j = int(np.argmax(cb._lengths))
            raise CodeShapeFailure(
                f"codebook {cb.name!r} breaks the length cap: symbol {show(cb._key(i))} "
                f"has a {int(cb._lengths[i])}-bit codeword but max_length={cap} "
                f"({over.size} codeword{'s' if over.size != 1 else ''} over the cap; longest "
                f"{int(cb._lengths[j])} bits, symbol {show(cb._key(j))})"
            )
    if canonical:
        bad = _canonical_mismatch(cb)
        if bad is not None:
            sym, got, want = bad
            if want is None:
                raise CodeShapeFailure(
                    f"codebook {cb.name!r} is not canonical: its lengths admit no canonical "
                    f"code (Kraft sum {kraft_sum(cb)} > 1); assignment overflows at symbol "
                    f"{show(sym)}"
                )
            raise CodeShapeFailure(
                f"codebook {cb.name!r} is not canonical: symbol {show(sym)} has codeword {got!r} "
                f"but the canonical code (order of (length, symbol), consecutive values) "
                f"gives it {want!r}"
            )


def canonical_codebook(
    lengths: Mapping[Any, int] | tuple[npt.ArrayLike, npt.ArrayLike],
    name: str = "canonical",
) -> Codebook[Any]:
    """The canonical prefix code with the given lengths.

    ``lengths`` is ``{symbol: length}`` or ``(symbols, lengths)`` arrays; length 0
    means "no codeword" (as :func:`huffman_lengths` returns for zero probabilities).
    The mapping may be keyed by any symbols (``{'a': 1, 'b': 2, 'c': 2}``; codewords
    go in order of (length, symbol), see the module notes); the arrays are integers.
    ``TypeError`` for arguments of the wrong type (a ``bool`` symbol or length
    included); ``ValueError`` for a negative length or one above
    :data:`~pytest_ratefloor.codes.codebook.MAX_CODEWORD_BITS`, a symbol listed
    twice, no positive length at all, or lengths whose Kraft sum exceeds 1 (no
    prefix code exists).
    """
    if not isinstance(name, str):
        raise TypeError(f"codebook name must be a string, got {show(name)}")
    if isinstance(lengths, Mapping):
        try:
            syms = np.array([_symbol_of(s) for s in lengths], dtype=np.int64)
        except _NotAnInteger:
            return _canonical_keyed(lengths, name)
        given = list(lengths.values())
        if not all(type(v) is int for v in given):  # check types; signs are checked below
            given = [integer(v, f"length of symbol {s}", minimum=0) for s, v in lengths.items()]
        lens = np.array(given, dtype=np.int64)
    else:
        rule = "a {symbol: length} mapping or a (symbols, lengths) pair"
        try:
            pair = len(lengths) == 2
        except TypeError:
            raise TypeError(f"lengths must be {rule}, got {show(lengths)}") from None
        if not pair:
            raise ValueError(f"lengths must be {rule}, got {show(lengths)}")
        syms = _symbol_array(lengths[0], "symbols", bools=False)
        lens = _symbol_array(lengths[1], "lengths", bools=False)
        if syms.shape != lens.shape:
            raise ValueError(
                f"symbols and lengths must be the same size, got {syms.size} and {lens.size}"
            )
    if lens.size and int(lens.min()) < 0:
        i = int(np.argmin(lens))
        raise ValueError(
            f"length of symbol {int(syms[i])} must be an integer >= 0, got {int(lens[i])}"
        )
    if lens.size and int(lens.max()) > MAX_CODEWORD_BITS:
        i = int(np.argmax(lens))
        raise ValueError(
            f"length of symbol {int(syms[i])} must be an integer in [0, {MAX_CODEWORD_BITS}] "
            f"(MAX_CODEWORD_BITS), got {int(lens[i])}"
        )
    keep = lens > 0
    syms, lens = syms[keep], lens[keep]
    if syms.size == 0:
        raise ValueError(
            f"lengths must give at least one symbol a positive length (a code needs a "
            f"codeword), got {show(lengths)}"
        )
    top = int(lens.max())
    counts = np.bincount(lens)
    total = sum(int(c) << (top - ln) for ln, c in enumerate(counts.tolist()) if c)
    if total > (1 << top):
        raise ValueError(
            f"lengths must have a Kraft sum Σ2^-ℓ <= 1 (else no prefix code exists), "
            f"got a Kraft sum of {Fraction(total, 1 << top)}"
        )
    order = np.lexsort((syms, lens))
    lens_o = lens[order]
    by_symbol = np.argsort(syms[order], kind="stable")
    sorted_syms = syms[order][by_symbol]
    twice = np.flatnonzero(sorted_syms[1:] == sorted_syms[:-1])
    if twice.size:
        raise ValueError(f"symbols must be distinct, got {int(sorted_syms[twice[0]])} twice")
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


def _canonical_keyed(lengths: Mapping[Any, Any], name: str) -> Codebook[Any]:
    """:func:`canonical_codebook` of a ``{symbol: length}`` mapping keyed by symbols
    other than integers alone (the same rules and messages, symbols shown by ``repr``)."""
    keys: list[Any] = []
    lens: list[int] = []
    for key, given in lengths.items():
        sym = _key_of(key)
        length = integer(given, f"length of symbol {show(sym)}", minimum=0)
        if length > MAX_CODEWORD_BITS:
            raise ValueError(
                f"length of symbol {show(sym)} must be an integer in [0, {MAX_CODEWORD_BITS}] "
                f"(MAX_CODEWORD_BITS), got {length}"
            )
        if length:
            keys.append(sym)
            lens.append(length)
    if not keys:
        raise ValueError(
            f"lengths must give at least one symbol a positive length (a code needs a "
            f"codeword), got {show(lengths)}"
        )
    top = max(lens)
    total = sum(1 << (top - ln) for ln in lens)
    if total > (1 << top):
        raise ValueError(
            f"lengths must have a Kraft sum Σ2^-ℓ <= 1 (else no prefix code exists), "
            f"got a Kraft sum of {Fraction(total, 1 << top)}"
        )
    by_symbol = _symbol_order(keys)
    keys = [keys[i] for i in by_symbol]
    lens = [lens[i] for i in by_symbol]
    _index_of(keys, None)  # a symbol listed twice (a mapping that repeats a key)
    canonical = sorted(range(len(keys)), key=lens.__getitem__)  # stable: (length, symbol)
    values = [0] * len(keys)
    for i, v in zip(canonical, _canonical_values([lens[i] for i in canonical])):
        values[i] = v
    return Codebook._from_keys(keys, values, np.array(lens, dtype=np.int64), name)
