"""Big code tables read in bulk (pytest_ratefloor.codes.bulk) and the layered
Sardinas–Patterson search (pytest_ratefloor.codes.sp_layers).

Both are fast paths that must change nothing but the time: a table read in bulk is
the table read entry by entry (checked against bitarray's own reading of each
codeword), a bad entry gets the one message the entry-by-entry reading gives, and the
layered search returns the same shortest ambiguous string and parses, and stops at
the same ``limit``, as the text search it replaces (copied below as the reference).
"""

from __future__ import annotations

import heapq
import itertools
import random
from bisect import bisect_left
from collections.abc import Callable
from typing import Any

import numpy as np
import pytest
from bitarray import bitarray
from bitarray.util import ba2int, int2ba

from pytest_ratefloor import codes
from pytest_ratefloor.codes import Codebook, bulk, codebook, properties
from pytest_ratefloor.codes import decodability as sp
from pytest_ratefloor.errors import SearchLimitError

BIG = 200  # entries: above the bulk reader's threshold


def entry_by_entry(monkeypatch: pytest.MonkeyPatch) -> None:
    """Make Codebook read every table entry by entry (the reading before bulk)."""
    monkeypatch.setattr(codebook, "bulk_table", lambda mapping: None)


def table_view(cb: Codebook[Any]) -> tuple[list[Any], dict[Any, str]]:
    return cb.symbols, {s: cb.word(s) for s in cb.symbols}


def random_table(rng: random.Random, n: int, max_len: int) -> dict[int, str]:
    keys = rng.sample(range(-(2**40), 2**40), n)
    return {k: "".join(rng.choice("01") for _ in range(rng.randint(1, max_len))) for k in keys}


# ------------------------------------------------------------------ bulk reading


@pytest.mark.parametrize("max_len", [1, 8, 57, 58, 63, 64, 65, 200])
def test_bulk_tables_equal_bitarrays_reading_of_each_codeword(max_len: int) -> None:
    rng = random.Random(max_len)
    texts = random_table(rng, BIG, max_len)
    # the words as bitarray reads them (its own parser), and as (value, length) pairs
    pairs = {k: (ba2int(bitarray(w)), len(w)) for k, w in texts.items()}
    for table in (texts, pairs):
        # pairs beyond 63 bits are read entry by entry (an int64 holds no more)
        read_in_bulk = bulk.bulk_table(table) is not None
        assert read_in_bulk == (table is texts or max(map(len, texts.values())) <= 63)
        cb = Codebook(table)
        assert cb.symbols == sorted(texts)
        for k, w in texts.items():
            assert cb.word(k) == w
            assert cb.word(k) == int2ba(pairs[k][0], length=len(w), endian="big").to01()
        assert cb.lengths == {k: len(w) for k, w in texts.items()}
        assert cb._pyvalues == [pairs[k][0] for k in sorted(texts)]
        values64 = cb._values_u64()
        if max_len <= 64:
            assert values64 is not None
            assert values64.tolist() == [pairs[k][0] for k in sorted(texts)]
        else:
            assert values64 is None


def test_small_values_of_long_codewords_are_read_in_bulk() -> None:
    # (1, 100): a 100-bit word, 99 zeros and a one; the value fits an int64
    table = {k: (k, 100) for k in range(BIG)}
    assert bulk.bulk_table(table) is not None
    cb = Codebook(table)
    assert cb.word(5) == int2ba(5, length=100, endian="big").to01()
    assert cb._values_u64() is None
    assert cb._pyvalues == list(range(BIG))


def test_bulk_and_entry_by_entry_readings_agree(monkeypatch: pytest.MonkeyPatch) -> None:
    rng = random.Random(2026)
    tables: list[dict[Any, Any]] = []
    for n in (64, 65, 300, 1000):
        texts = random_table(rng, n, 20)
        tables.append(texts)
        tables.append({k: (int(w, 2), len(w)) for k, w in texts.items()})
        tables.append(dict(sorted(texts.items())))  # already in symbol order
    lengths = codes.huffman_lengths(np.random.default_rng(5).random(4096))
    canon = codes.canonical_codebook((np.arange(4096), lengths))
    tables.append({s: canon.word(s) for s in canon.symbols})
    tables.append({np.int64(s): canon.word(s) for s in canon.symbols})  # numpy keys
    tables.append({np.uint32(s): canon.word(s) for s in canon.symbols})
    fast = [table_view(Codebook(t)) for t in tables]
    entry_by_entry(monkeypatch)
    slow = [table_view(Codebook(t)) for t in tables]
    assert fast == slow
    assert table_view(Codebook(tables[-3])) == table_view(canon)


def test_tables_bulk_passes_to_the_entry_reading_still_work() -> None:
    # each of these is valid but not of a shape the bulk reader takes: it says None
    # and the entry-by-entry reading gives the table
    base = {k: format(k, "08b") for k in range(BIG)}
    mixed: dict[Any, Any] = dict(base)
    mixed[7] = (7, 8)  # strings and one pair
    listed = {k: [int(w, 2), 8] for k, w in base.items()}  # lists, not tuples
    with_bits: dict[Any, Any] = dict(base)
    with_bits[9] = bitarray("00001001")
    keyed = {f"s{k}": w for k, w in base.items()}  # string symbols
    for table in (mixed, listed, with_bits, keyed):
        assert bulk.bulk_table(table) is None
        cb = Codebook(table)
        assert [cb.word(k) for k in table] == list(base.values())
    numpy_words = {k: (np.int64(int(w, 2)), np.uint8(8)) for k, w in base.items()}
    assert bulk.bulk_table(numpy_words) is not None  # numpy integers are integers
    cb = Codebook(numpy_words)
    assert [cb.word(k) for k in numpy_words] == list(base.values())
    assert all(type(v) is int for v in cb._pyvalues)


def big_table_with(key: Any, word: Any, position: int) -> dict[Any, Any]:
    """A valid BIG-entry table of 8-bit words with ``key: word`` put at ``position``
    (the other keys avoid ``key``'s value)."""
    table: dict[Any, Any] = {}
    others = (k for k in itertools.count(100) if k != key)
    for i in range(BIG):
        if i == position:
            table[key] = word
        else:
            k = next(others)
            table[k] = format(k % 256, "08b")
    return table


BAD_ENTRIES: list[tuple[Any, Any]] = [
    (7, (5, 2)),  # value does not fit the length
    (7, (-1, 3)),
    (7, (1, 0)),
    (7, (1, 2**16 + 1)),
    (7, (1.0, 3)),
    (7, (1, 3.0)),
    (7, (True, 1)),
    (7, (1, True)),
    (7, (np.True_, 1)),
    (7, (1, 2, 3)),
    (7, (1,)),
    (7, "012"),
    (7, ""),
    (7, " 01"),
    (7, "0_1"),
    (7, "1" * (2**16 + 1)),
    (7, None),
    (7, 3.5),
    (True, "0"),
    (np.False_, "0"),
    (2**63, "0"),
    (-(2**63) - 1, "0"),
    (100, "0"),  # a symbol listed twice (the table's own 100 comes first)
]


@pytest.mark.parametrize(("key", "word"), BAD_ENTRIES, ids=repr)
@pytest.mark.parametrize("position", [0, 57, BIG - 1])
@pytest.mark.parametrize("spelling", ["text", "pairs"])
def test_a_bad_entry_in_a_big_table_gets_the_entry_readings_message(
    monkeypatch: pytest.MonkeyPatch, key: Any, word: Any, position: int, spelling: str
) -> None:
    table = big_table_with(key, word, position)
    if key == 100:  # a symbol listed twice: only a mapping that repeats a key does that
        pairs = [*table.items(), (key, word)]
        table = _RepeatingMapping(pairs)
    if spelling == "pairs":
        table = {k: (int(w, 2), 8) if (k, w) != (key, word) and isinstance(w, str) else w
                 for k, w in table.items()} if not isinstance(table, _RepeatingMapping) else table
    with pytest.raises((TypeError, ValueError)) as fast:
        Codebook(table, name="gauge")
    entry_by_entry(monkeypatch)
    with pytest.raises((TypeError, ValueError)) as slow:
        Codebook(table, name="gauge")
    assert type(fast.value) is type(slow.value)
    assert str(fast.value) == str(slow.value)
    assert str(fast.value).startswith("codebook 'gauge': ")
    # the same message a one-entry table gives, naming the symbol and the codeword
    if key != 100:
        with pytest.raises(type(fast.value)) as alone:
            Codebook({key: word}, name="gauge")
        assert str(alone.value) == str(fast.value)


class _RepeatingMapping(dict[Any, Any]):
    """A mapping whose items repeat a key (a broken Mapping; dicts cannot)."""

    def __init__(self, pairs: list[tuple[Any, Any]]) -> None:
        super().__init__(pairs)
        self._pairs = pairs

    def items(self) -> Any:
        return iter(self._pairs)

    def keys(self) -> Any:
        return [k for k, _ in self._pairs]

    def values(self) -> Any:
        return [w for _, w in self._pairs]

    def __len__(self) -> int:
        return len(self._pairs)


def test_repeated_symbol_message() -> None:
    table = _RepeatingMapping([(k, format(k, "08b")) for k in range(BIG)] + [(5, "1")])
    with pytest.raises(ValueError, match=r"^codebook 'gauge': symbols must be distinct, got 5 "):
        Codebook(table, name="gauge")


def test_bulk_table_of_float_keys_is_a_table_of_float_symbols() -> None:
    # 1.5 is no integer: the table is keyed by other symbols, as entry by entry
    table: dict[Any, str] = {k: format(k, "08b") for k in range(BIG)}
    table[1.5] = "11111111"
    cb = Codebook(table)
    assert 1.5 in cb.symbols
    with pytest.raises(TypeError, match="needs integer symbols; this table is keyed by float"):
        cb.encode([1])


def test_assert_prefix_free_and_kraft_on_big_dicts_match_the_arrays() -> None:
    lengths = codes.huffman_lengths(np.random.default_rng(9).random(1 << 12))
    canon = codes.canonical_codebook((np.arange(lengths.size), lengths))
    texts = {s: canon.word(s) for s in canon.symbols}
    pairs = {s: (int(w, 2), len(w)) for s, w in texts.items()}
    for table in (texts, pairs):
        codes.assert_prefix_free(table, canonical=True)
        codes.assert_kraft(table, complete=True)
        assert codes.kraft_sum(table) == 1  # a Huffman code is complete (Kraft equality)
    # two symbols sharing a codeword, found the same way from the dict and the arrays
    texts[4095] = texts[17]
    witness = codes.prefix_witness(texts)
    assert witness == ((17, texts[17]), (4095, texts[17]))
    with pytest.raises(AssertionError, match="share the codeword"):
        codes.assert_prefix_free(texts)


@pytest.mark.parametrize("seed", range(6))
def test_packed_prefix_witness_agrees_with_text_order(seed: int) -> None:
    # the one-sort path against the text path (sorted '0'/'1' strings, Python's
    # startswith): the same first pair, ties in symbol order
    rng = random.Random(seed)
    for n in (2, 5, 70, 400):
        words = {s: "".join(rng.choice("01") for _ in range(rng.randint(1, 9))) for s in range(n)}
        if rng.random() < 0.5:
            words[n] = words[rng.randrange(n)]  # a shared codeword
        cb = Codebook(words)
        assert properties.prefix_witness(cb) == properties._prefix_witness_text(cb)


# ------------------------------------------------------ Sardinas–Patterson search

_DONE, _STATE = 0, 1


def reference_ambiguity(
    cb: Codebook[Any], limit: int
) -> tuple[str, list[int], list[int]] | None:
    """The Sardinas–Patterson search as it stood before the layered search: a heap of
    (cost, kind, push order) over '0'/'1' text (copied unchanged, as the reference)."""
    if codes.prefix_witness(cb) is None:
        return None
    texts = cb._texts()
    first_symbol: dict[str, int] = {}
    heap: list[tuple[Any, ...]] = []
    seq = itertools.count()
    for sym, w in enumerate(texts):
        if w in first_symbol:
            heapq.heappush(heap, (len(w), _DONE, next(seq), None, ([first_symbol[w]], [sym])))
        else:
            first_symbol[w] = sym
    words = sorted(first_symbol)
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
            return reference_rebuild(how, settled, texts)
        if suffix in settled:
            continue
        settled[suffix] = how
        if len(settled) > limit:
            raise SearchLimitError(
                f"Sardinas–Patterson search on codebook {cb.name!r} passed limit={limit} "
                f"dangling suffixes without a verdict; raise limit= to search further"
            )
        exact = first_symbol.get(suffix)
        if exact is not None:
            heapq.heappush(heap, (cost, _DONE, next(seq), None, ("end", suffix, exact)))
        for k in range(1, len(suffix)):
            c = first_symbol.get(suffix[:k])
            if c is not None and suffix[k:] not in settled:
                heapq.heappush(
                    heap, (cost, _STATE, next(seq), suffix[k:], ("step", suffix, c, False))
                )
        i = bisect_left(words, suffix)
        while i < len(words) and words[i].startswith(suffix):
            w = words[i]
            i += 1
            rest = w[len(suffix) :]
            if rest and rest not in settled:
                heapq.heappush(
                    heap,
                    (cost + len(rest), _STATE, next(seq), rest,
                     ("step", suffix, first_symbol[w], True)),
                )
    return None


def reference_rebuild(
    how: tuple[Any, ...], settled: dict[str, tuple[Any, ...]], text_of: list[str]
) -> tuple[str, list[int], list[int]]:
    if how[0] != "end":
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
    assert bits == "".join(text_of[s] for s in behind)
    first, second = (ahead, behind) if ahead[0] == short_first else (behind, ahead)
    return bits, first, second


def outcome(search: Callable[[Codebook[Any], int], Any], cb: Codebook[Any], limit: int) -> Any:
    """The search's answer, or "limit" and the message where it gave up."""
    try:
        return search(cb, limit)
    except SearchLimitError as exc:
        return "limit", str(exc)


def reversed_huffman(rng: np.random.Generator, n: int) -> dict[int, str]:
    """A suffix code: a canonical Huffman code with every word reversed; uniquely
    decodable (it decodes from the back) and usually not prefix-free."""
    lengths = codes.huffman_lengths(rng.random(n) + 1e-9)
    cb = codes.canonical_codebook((np.arange(n), lengths))
    return {s: cb.word(s)[::-1] for s in cb.symbols}


@pytest.mark.parametrize("seed", range(4))
def test_layered_search_equals_the_reference_on_random_small_codes(seed: int) -> None:
    rng = random.Random(1953 + seed)
    seen = {"ud": 0, "ambiguous": 0, "limit": 0}
    for _ in range(600):
        n = rng.randint(2, 8)
        words = {s: "".join(rng.choice("01") for _ in range(rng.randint(1, 7))) for s in range(n)}
        cb = Codebook(words)
        for limit in (1, 2, 4, 10_000):
            got = outcome(sp._ambiguity, cb, limit)
            assert got == outcome(reference_ambiguity, cb, limit), (words, limit)
            key = "ud" if got is None else "limit" if got[0] == "limit" else "ambiguous"
            seen[key] += 1
    assert min(seen.values()) > 100, seen


@pytest.mark.parametrize("seed", range(3))
def test_layered_search_equals_the_reference_on_suffix_codes(seed: int) -> None:
    rng = np.random.default_rng(seed)
    pick = random.Random(seed)
    seen = {"ud": 0, "ambiguous": 0}
    for _ in range(25):
        words = reversed_huffman(rng, int(rng.integers(3, 400)))
        if pick.random() < 0.6:  # one more word makes most of them ambiguous
            words[len(words)] = "".join(pick.choice("01") for _ in range(pick.randint(1, 9)))
        if pick.random() < 0.2:  # and a shared codeword
            words[len(words)] = words[pick.randrange(len(words))]
        cb = Codebook(words)
        got = sp._ambiguity(cb, 10**6)
        assert got == reference_ambiguity(cb, 10**6), words
        seen["ud" if got is None else "ambiguous"] += 1
        for limit in (3, 50):
            assert outcome(sp._ambiguity, cb, limit) == outcome(reference_ambiguity, cb, limit)
    assert min(seen.values()) >= 5, seen


def test_long_codewords_take_the_text_search_with_the_same_answers() -> None:
    # 63 bits and more: the text search; the answers still match the reference
    words = {0: "0", 1: "01", 2: "1" * 70 + "0", 3: "1" * 70}
    cb = Codebook(words)
    assert cb.max_length > 62
    assert sp._ambiguity(cb, 1000) == reference_ambiguity(cb, 1000)
    words[4] = "10"  # 0·10 = 01·0
    cb = Codebook(words)
    assert sp._ambiguity(cb, 1000) == reference_ambiguity(cb, 1000) == ("010", [0, 4], [1, 0])


def test_layered_search_on_a_large_suffix_code_is_uniquely_decodable() -> None:
    words = reversed_huffman(np.random.default_rng(11), 1 << 11)
    cb = Codebook(words)
    assert codes.prefix_witness(cb) is not None  # so the search runs
    assert codes.ambiguity(cb) is None
    # a codeword and its two-word spelling: the shortest ambiguity is found
    a, b = words[0], words[1]
    words[len(words)] = a + b
    found = codes.ambiguity(words)
    assert found == reference_ambiguity(Codebook(words), 10**6)
    assert found is not None
    bits, parse_a, parse_b = found  # the symbols are the positions here
    assert "".join(words[s] for s in parse_a) == bits == "".join(words[s] for s in parse_b)
