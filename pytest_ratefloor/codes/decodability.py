"""Unique decodability: the Sardinas–Patterson test with a shortest witness.

Sardinas & Patterson (1953): a code is uniquely decodable iff no dangling suffix is a
codeword. :func:`ambiguity` explores the dangling suffixes shortest-total-length first
and rebuilds the two parses of a shortest ambiguous bit string;
:func:`assert_uniquely_decodable` fails with them
(:class:`~pytest_ratefloor.errors.AmbiguousCode`). Prefix-free codes pass at once. The
search is bounded by :data:`SP_SUFFIX_LIMIT` dangling suffixes
(:class:`~pytest_ratefloor.errors.SearchLimitError` past it).

The search runs on positions in the table; parses are given back in the table's own
symbols (any hashable keys), and the failure message shows them with ``repr``.

Two implementations of the one search give the same answers (the same shortest
string, the same two parses, the same point where ``limit`` stops them): codewords of
at most 62 bits are searched as integers, a whole layer of the
search at a time (:mod:`pytest_ratefloor.codes.sp_layers`); longer ones as text,
one dangling suffix at a time (:func:`_ambiguity_text`).
"""

from __future__ import annotations

import heapq
import itertools
from bisect import bisect_left
from collections.abc import Callable
from typing import Any

from pytest_ratefloor.codes.codebook import Codebook, CodeLike, _as_codebook
from pytest_ratefloor.codes.entries import _word_text
from pytest_ratefloor.codes.properties import prefix_witness
from pytest_ratefloor.codes.sp_layers import FAST_MAX_BITS as _FAST_MAX_BITS
from pytest_ratefloor.codes.sp_layers import Duplicate, layered_search, limit_error
from pytest_ratefloor.errors import AmbiguousCode
from pytest_ratefloor.validation import integer, show

#: Default bound of the Sardinas–Patterson search: the number of distinct dangling
#: suffixes it may settle before giving up with :class:`SearchLimitError`. The
#: dangling suffixes of a code are suffixes of its codewords, so the search always
#: ends by itself after at most Σℓ of them; the bound only keeps a huge table from
#: running for minutes. Each settled suffix costs O(ℓmax + matches) dictionary work.
SP_SUFFIX_LIMIT = 200_000

_DONE, _STATE = 0, 1


def ambiguity(
    code: CodeLike, limit: int = SP_SUFFIX_LIMIT
) -> tuple[str, list[Any], list[Any]] | None:
    """A shortest ambiguous bit string and its two parses, or None if uniquely decodable.

    Sardinas & Patterson (1953): a code is uniquely decodable iff no dangling suffix
    is a codeword. Dangling suffixes are explored shortest-total-length first
    (Dijkstra on the length of the longer parse), recording how each arose, so both
    parses of the shortest ambiguous string can be rebuilt. The parses are lists of
    the table's own symbols. A prefix-free code returns None at once. Raises
    :class:`SearchLimitError` after ``limit`` distinct dangling suffixes.
    """
    cb = _as_codebook(code)
    found = _ambiguity(cb, integer(limit, "limit", minimum=1))
    if found is None:
        return None
    bits, parse_a, parse_b = found
    return bits, [cb._key(i) for i in parse_a], [cb._key(i) for i in parse_b]


def _ambiguity(cb: Codebook[Any], limit: int) -> tuple[str, list[int], list[int]] | None:
    """:func:`ambiguity` on positions in the table (a position stands for a symbol)."""
    if prefix_witness(cb) is None:
        return None
    if cb.max_length <= _FAST_MAX_BITS:
        found = layered_search(cb, limit)
        if found is None:
            return None
        if isinstance(found, Duplicate):  # two symbols, one codeword
            return _text_of(cb, found.first), [found.first], [found.second]
        return _replay(found.long_first, found.short_first, found.steps, found.last,
                       lambda i: _text_of(cb, i))
    return _ambiguity_text(cb, limit)


def _text_of(cb: Codebook[Any], position: int) -> str:
    return _word_text(cb._value(position), int(cb._lengths[position]))


def _ambiguity_text(cb: Codebook[Any], limit: int) -> tuple[str, list[int], list[int]] | None:
    """The search on '0'/'1' text, one dangling suffix at a time (any codeword length).

    A heap of (cost, kind, push order): the first item popped for a suffix is how it
    arose, and the first ``_DONE`` popped is the answer."""
    texts = cb._texts()
    first_symbol: dict[str, int] = {}
    heap: list[tuple[Any, ...]] = []
    seq = itertools.count()
    for sym, w in enumerate(texts):
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
            return _rebuild(how, settled, texts)
        if suffix in settled:
            continue
        settled[suffix] = how
        if len(settled) > limit:
            raise limit_error(cb.name, limit)
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
    how: tuple[Any, ...], settled: dict[str, tuple[Any, ...]], text_of: list[str]
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
    return _replay(long_first, short_first, steps, last, text_of.__getitem__)


def _replay(
    long_first: int,
    short_first: int,
    steps: list[tuple[int, bool]],
    last: int,
    text_of: Callable[[int], str],
) -> tuple[str, list[int], list[int]]:
    """The two parses from a derivation: the start (the longer first codeword and the
    shorter one it begins with), the ``steps`` back from the end (a symbol added to
    the lagging parse, and whether that parse then leads), and the ``last`` symbol."""
    ahead, behind = [long_first], [short_first]
    for sym, swapped in reversed(steps):
        behind.append(sym)
        if swapped:
            ahead, behind = behind, ahead
    behind.append(last)
    bits = "".join(text_of(s) for s in ahead)
    if bits != "".join(text_of(s) for s in behind):  # an internal invariant
        raise RuntimeError(f"Sardinas–Patterson rebuild gave unequal parses {ahead} {behind}")
    first, second = (ahead, behind) if ahead[0] == short_first else (behind, ahead)
    return bits, first, second


def assert_uniquely_decodable(code: CodeLike, limit: int = SP_SUFFIX_LIMIT) -> None:
    """Fail (:class:`AmbiguousCode`) with a shortest ambiguous bit string and its two
    parses. Prefix-free codes pass at once; otherwise Sardinas–Patterson, bounded by
    ``limit`` dangling suffixes (:class:`SearchLimitError` past it)."""
    __tracebackhide__ = True
    cb = _as_codebook(code)
    found = _ambiguity(cb, integer(limit, "limit", minimum=1))
    if found is None:
        return
    bits, parse_a, parse_b = found

    def shown(parse: list[int]) -> str:
        symbols = ", ".join(show(cb._key(i)) for i in parse)
        return f"[{symbols}] = " + "·".join(repr(_text_of(cb, i)) for i in parse)

    raise AmbiguousCode(
        f"codebook {cb.name!r} is not uniquely decodable: the bit string {bits!r} "
        f"({len(bits)} bits) has two parses: {shown(parse_a)} and {shown(parse_b)}"
    )
