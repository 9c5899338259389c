"""The Sardinas–Patterson search of :mod:`~pytest_ratefloor.codes.decodability` on
integers, a layer at a time.

Sardinas & Patterson (1953): a code is uniquely decodable iff no dangling suffix is a
codeword. The search explores dangling suffixes by the length of the longer of the two
parses (its cost) and stops at the first suffix that is a codeword. The text search
(:func:`~pytest_ratefloor.codes.decodability._ambiguity_text`) keeps a heap ordered by
(cost, kind, push order). This module gives the same answers with numpy:

* a bit string ``s`` of at most 61 bits is the integer ``(1 << len(s)) | value(s)``
  (a leading 1 keeps the length), and every dangling suffix is a proper suffix of a
  codeword, so the suffixes are numbered once (``np.unique``);
* costs are whole numbers of bits, so the heap is a row of buckets, one per cost, each
  a first-in first-out queue: within one cost the heap pops in push order, and pushes
  happen in the order the suffixes settle (each suffix's pushes in a fixed order: the
  codewords it starts with, shortest first, then the codewords that extend it, in
  lexicographic order);
* a bucket is settled a wave at a time: the items queued in it, in order, settle the
  suffixes they reach first; their zero-cost children (a codeword the suffix starts
  with) are the next wave of the same bucket, and their other children join later
  buckets, in order.

So each suffix settles from the same item, in the same order, as in the heap, the
first codeword reached (or a duplicated codeword, whose item comes first at its cost)
is the same, and ``limit`` stops the search at the same suffix.
"""

from __future__ import annotations

from typing import Any, NamedTuple

import numpy as np
import numpy.typing as npt

from pytest_ratefloor.errors import SearchLimitError

#: The longest codeword searched as integers: a suffix and its leading 1 fit an int64
#: with room for the left-aligned keys of the lexicographic order.
FAST_MAX_BITS = 62

IntArray = npt.NDArray[np.int64]
_ONE = np.int64(1)


class Duplicate(NamedTuple):
    """Two symbols with one codeword: the first one listed, and a later one."""

    first: int
    second: int


class Derivation(NamedTuple):
    """A derivation: the parse that leads starts with ``long_first``, the other with
    ``short_first`` (a prefix of it); ``steps`` are (symbol, lead changes) from the
    end back to the start; ``last`` closes the lagging parse exactly."""

    long_first: int
    short_first: int
    steps: list[tuple[int, bool]]
    last: int


def limit_error(name: str, limit: int) -> SearchLimitError:
    """The refusal once ``limit`` dangling suffixes gave no verdict."""
    return SearchLimitError(
        f"Sardinas–Patterson search on codebook {name!r} passed limit={limit} "
        f"dangling suffixes without a verdict; raise limit= to search further"
    )


class _Queue(NamedTuple):
    """Items of one bucket (or one wave), in push order."""

    node: IntArray  # the dangling suffix reached (its number)
    parent: IntArray  # the suffix it came from (-1: a start item)
    symbol: IntArray  # the codeword added (a start item: the shorter first codeword)
    swapped: npt.NDArray[np.bool_]  # the lagging parse now leads
    long: IntArray  # a start item: the longer first codeword (else -1)


def _joined(parts: list[_Queue]) -> _Queue:
    if len(parts) == 1:
        return parts[0]
    return _Queue(*(np.concatenate([getattr(p, f) for p in parts]) for f in _Queue._fields))


def _taken(q: _Queue, index: npt.NDArray[Any]) -> _Queue:
    return _Queue(*(getattr(q, f)[index] for f in _Queue._fields))


class _Code(NamedTuple):
    """The distinct codewords, as integers with a leading 1, both sorted (``key``,
    with ``key_symbol``) and in lexicographic order (``lex_*``)."""

    key: IntArray
    key_symbol: IntArray
    lex_left: IntArray  # the words left-aligned to ``top`` bits (sorted)
    lex_len: IntArray
    lex_value: IntArray
    lex_symbol: IntArray
    lengths: list[int]  # the distinct codeword lengths, ascending
    top: int


def _codewords(values: IntArray, lengths: IntArray) -> tuple[_Code, Duplicate | None, int]:
    """The distinct codewords (a codeword's symbol is the first position listing it)
    and the duplicate found first by the heap (shortest, then latest listed first)."""
    keys = (_ONE << lengths) | values
    unique, first = np.unique(keys, return_index=True)
    dup: Duplicate | None = None
    dup_cost = -1
    if unique.size < keys.size:
        where = np.searchsorted(unique, keys)
        later = np.flatnonzero(first[where] != np.arange(keys.size))
        pick = int(later[np.argmin(lengths[later])])  # argmin: the first of the shortest
        dup = Duplicate(int(first[where[pick]]), pick)
        dup_cost = int(lengths[pick])
    top = int(lengths.max())
    u_len = lengths[first]
    u_val = values[first]
    left = u_val << (top - u_len)
    lex = np.lexsort((u_len, left))
    code = _Code(
        unique,
        first.astype(np.int64),
        left[lex],
        u_len[lex],
        u_val[lex],
        first[lex].astype(np.int64),
        np.unique(u_len).tolist(),
        top,
    )
    return code, dup, dup_cost


def _suffix_numbers(code: _Code) -> IntArray:
    """Every proper non-empty suffix of a codeword, as a key, sorted: the suffixes the
    search can reach."""
    parts = []
    for length in range(1, code.top):
        longer = code.lex_len > length
        parts.append((_ONE << length) | (code.lex_value[longer] & ((_ONE << length) - 1)))
    return np.unique(np.concatenate(parts)) if parts else np.zeros(0, dtype=np.int64)


def _lookup(sorted_keys: IntArray, keys: IntArray) -> tuple[IntArray, npt.NDArray[np.bool_]]:
    """Positions of ``keys`` in ``sorted_keys`` and whether each is there."""
    at = np.searchsorted(sorted_keys, keys)
    at = np.minimum(at, sorted_keys.size - 1)
    return at, sorted_keys[at] == keys


def _split_key(keys: IntArray) -> tuple[IntArray, IntArray]:
    """(length, value) of keys with a leading 1."""
    lengths = np.zeros(keys.size, dtype=np.int64)
    rest = keys.copy()
    # the position of the leading 1, by halving (keys are below 2**62)
    for shift in (32, 16, 8, 4, 2, 1):
        big = rest >= (_ONE << shift)
        lengths[big] += shift
        rest[big] >>= shift
    return lengths, keys ^ (_ONE << lengths)


def _starts_with_codeword(code: _Code, lens: IntArray, vals: IntArray) -> tuple[
    IntArray, IntArray, IntArray
]:
    """For each bit string (``lens``, ``vals``) and each codeword it properly starts
    with: (string index, codeword symbol, key of the rest), in order of string, then
    codeword length."""
    idx, sym, rest = [], [], []
    for length in code.lengths:
        longer = np.flatnonzero(lens > length)
        if longer.size == 0:
            break
        drop = lens[longer] - length
        at, hit = _lookup(code.key, (_ONE << length) | (vals[longer] >> drop))
        if not hit.any():
            continue
        longer, drop, at = longer[hit], drop[hit], at[hit]
        idx.append(longer)
        sym.append(code.key_symbol[at])
        rest.append((_ONE << drop) | (vals[longer] & ((_ONE << drop) - 1)))
    if not idx:
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty, empty
    i, s, r = np.concatenate(idx), np.concatenate(sym), np.concatenate(rest)
    order = np.argsort(i, kind="stable")  # lengths were taken shortest first
    return i[order], s[order], r[order]


def layered_search(cb: Any, limit: int) -> Duplicate | Derivation | None:
    """The Sardinas–Patterson search of ``cb`` (a Codebook, not prefix-free, codewords
    of at most :data:`FAST_MAX_BITS` bits): ``None`` when uniquely decodable, else the
    derivation of the shortest ambiguous string the text search finds.
    :class:`SearchLimitError` where the text search gives up."""
    values64 = cb._values_u64()
    code, dup, dup_cost = _codewords(values64.astype(np.int64), cb._lengths)
    numbers = _suffix_numbers(code)
    settled = np.zeros(numbers.size, dtype=bool)
    parent_of = np.full(numbers.size, -1, dtype=np.int64)
    symbol_of = np.zeros(numbers.size, dtype=np.int64)
    swapped_of = np.zeros(numbers.size, dtype=bool)
    long_of = np.full(numbers.size, -1, dtype=np.int64)
    buckets: dict[int, list[_Queue]] = {}

    def push(cost: IntArray | int, q: _Queue) -> None:
        if q.node.size == 0:
            return
        if isinstance(cost, int):
            buckets.setdefault(cost, []).append(q)
            return
        order = np.argsort(cost, kind="stable")  # keeps push order within a cost
        ranked = cost[order]
        cuts = np.flatnonzero(ranked[1:] != ranked[:-1]) + 1
        for part in np.split(order, cuts):
            buckets.setdefault(int(cost[part[0]]), []).append(_taken(q, part))

    # start: a codeword v begins with a shorter codeword u; [v] leads by the rest
    v, u, rest = _starts_with_codeword(code, code.lex_len, code.lex_value)
    node = np.searchsorted(numbers, rest)
    push(code.lex_len[v], _Queue(node, np.full(v.size, -1, dtype=np.int64), u,
                                 np.zeros(v.size, dtype=bool), code.lex_symbol[v]))
    count = 0
    while buckets:
        cost = min(buckets)
        if dup is not None and dup_cost <= cost:
            return dup
        wave = _joined(buckets.pop(cost))
        while wave.node.size:
            fresh = np.flatnonzero(~settled[wave.node])
            _, first = np.unique(wave.node[fresh], return_index=True)
            pick = fresh[np.sort(first)]  # the first item reaching each new suffix
            new = _taken(wave, pick)
            keys = numbers[new.node]
            _, is_word = _lookup(code.key, keys)
            words = np.flatnonzero(is_word)
            j = int(words[0]) if words.size else new.node.size
            cut = limit - count  # the new suffix at this index is one too many
            if cut < new.node.size and cut <= j:
                raise limit_error(cb.name, limit)
            keep = slice(0, min(j + 1, new.node.size))
            nodes = new.node[keep]
            settled[nodes] = True
            parent_of[nodes] = new.parent[keep]
            symbol_of[nodes] = new.symbol[keep]
            swapped_of[nodes] = new.swapped[keep]
            long_of[nodes] = new.long[keep]
            count += nodes.size
            if j < new.node.size:
                at, _ = _lookup(code.key, keys[j : j + 1])
                return _derivation(int(nodes[-1]), int(code.key_symbol[at[0]]),
                                   parent_of, symbol_of, swapped_of, long_of)
            lens, vals = _split_key(keys)
            wave = _children_inside(code, numbers, settled, nodes, lens, vals)
            _children_beyond(code, numbers, settled, nodes, lens, vals, cost, push)
    if dup is not None:
        return dup
    return None


def _children_inside(
    code: _Code, numbers: IntArray, settled: npt.NDArray[np.bool_], nodes: IntArray,
    lens: IntArray, vals: IntArray,
) -> _Queue:
    """Zero-cost items: a codeword inside the dangling suffix (the lagging parse
    takes it and still lags), in order of suffix, then codeword length."""
    i, sym, rest = _starts_with_codeword(code, lens, vals)
    child = np.searchsorted(numbers, rest)
    live = ~settled[child]
    n = int(live.sum())
    return _Queue(child[live], nodes[i[live]], sym[live], np.zeros(n, dtype=bool),
                  np.full(n, -1, dtype=np.int64))


def _children_beyond(
    code: _Code, numbers: IntArray, settled: npt.NDArray[np.bool_], nodes: IntArray,
    lens: IntArray, vals: IntArray, cost: int, push: Any,
) -> None:
    """Items of a codeword reaching past the dangling suffix (the lagging parse takes
    it and leads by the rest), in order of suffix, then lexicographic order of the
    codeword; each costs the length of the rest more."""
    lo = np.searchsorted(code.lex_left, vals << (code.top - lens), side="left")
    hi = np.searchsorted(code.lex_left, (vals + 1) << (code.top - lens), side="left")
    counts = hi - lo
    total = int(counts.sum())
    if total == 0:
        return
    owner = np.repeat(np.arange(nodes.size), counts)
    word = np.arange(total) - np.repeat(np.cumsum(counts) - counts, counts) + lo[owner]
    rest_len = code.lex_len[word] - lens[owner]
    ok = rest_len > 0
    owner, word, rest_len = owner[ok], word[ok], rest_len[ok]
    rest = (_ONE << rest_len) | (code.lex_value[word] & ((_ONE << rest_len) - 1))
    child = np.searchsorted(numbers, rest)
    live = ~settled[child]
    n = int(live.sum())
    push(
        cost + rest_len[live],
        _Queue(child[live], nodes[owner[live]], code.lex_symbol[word[live]],
               np.ones(n, dtype=bool), np.full(n, -1, dtype=np.int64)),
    )


def _derivation(
    node: int, last: int, parent_of: IntArray, symbol_of: IntArray,
    swapped_of: npt.NDArray[np.bool_], long_of: IntArray,
) -> Derivation:
    steps: list[tuple[int, bool]] = []
    while int(parent_of[node]) >= 0:
        steps.append((int(symbol_of[node]), bool(swapped_of[node])))
        node = int(parent_of[node])
    return Derivation(int(long_of[node]), int(symbol_of[node]), steps, last)
