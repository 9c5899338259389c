"""Unique decodability (Sardinas–Patterson) in pytest_ratefloor.codes, checked against
brute-force enumeration of codeword concatenations."""

from __future__ import annotations

import random
import re
from fractions import Fraction

import numpy as np
import pytest

from pytest_ratefloor import codes
from pytest_ratefloor.codes import Codebook
from pytest_ratefloor.errors import AmbiguousCode, SearchLimitError


def brute_shortest_ambiguity(
    words: dict[int, str], bound: int
) -> tuple[int, str, tuple[int, ...], tuple[int, ...]] | None:
    """Enumerate all codeword sequences by total length up to ``bound`` bits and stop
    at the first bit string reached by two different sequences."""
    by_total: dict[int, dict[str, tuple[int, ...]]] = {0: {"": ()}}
    for total in range(1, bound + 1):
        reached: dict[str, tuple[int, ...]] = {}
        for sym, w in words.items():
            for head, parse in by_total.get(total - len(w), {}).items():
                text, seq = head + w, (*parse, sym)
                if text in reached and reached[text] != seq:
                    return total, text, reached[text], seq
                reached[text] = seq
        by_total[total] = reached
    return None


def check_parses(words: dict[int, str], found: tuple[str, list[int], list[int]]) -> None:
    bits, parse_a, parse_b = found
    assert parse_a != parse_b
    assert "".join(words[s] for s in parse_a) == bits
    assert "".join(words[s] for s in parse_b) == bits


def test_zero_oh_one_ten_is_ambiguous_at_010() -> None:
    # {0, 01, 10} is not uniquely decodable: 010 = 0·10 = 01·0 (checked by hand).
    words = {0: "0", 1: "01", 2: "10"}
    assert codes.ambiguity(words) == ("010", [0, 2], [1, 0])
    assert brute_shortest_ambiguity(words, 6) is not None
    with pytest.raises(AmbiguousCode) as info:
        codes.assert_uniquely_decodable(Codebook(words, name="gauge"))
    msg = str(info.value)
    assert "'010'" in msg
    assert "[0, 2] = '0'·'10'" in msg
    assert "[1, 0] = '01'·'0'" in msg


def test_uniquely_decodable_but_not_prefix_free() -> None:
    # {0, 01, 011}: every codeword starts with 0, so the stream splits before each 0
    # (a fact of the trade); '0' is a prefix of '01', so it is not prefix-free.
    words = {0: "0", 1: "01", 2: "011"}
    assert codes.prefix_witness(words) is not None
    assert codes.ambiguity(words) is None
    assert brute_shortest_ambiguity(words, 14) is None
    codes.assert_uniquely_decodable(words)


def test_five_word_example() -> None:
    # A standard illustration of the test (from memory): {1, 011, 01110, 1110, 10011}
    # is not uniquely decodable. The brute force confirms and gives the shortest length.
    words = dict(enumerate(["1", "011", "01110", "1110", "10011"]))
    found = codes.ambiguity(words)
    assert found is not None
    check_parses(words, found)
    brute = brute_shortest_ambiguity(words, 16)
    assert brute is not None
    assert len(found[0]) == brute[0]


def test_duplicate_codewords_are_ambiguous_by_themselves() -> None:
    words = {3: "0", 5: "10", 9: "10"}
    assert codes.ambiguity(words) == ("10", [5], [9])
    with pytest.raises(AmbiguousCode, match=r"'10' \(2 bits\) has two parses: \[5\]"):
        codes.assert_uniquely_decodable(words)


def test_sp_agrees_with_brute_force_on_random_small_codes() -> None:
    rng = random.Random(1953)
    bound = 12
    seen = {"ud": 0, "ambiguous": 0}
    for trial in range(700):
        n = rng.randint(2, 5)
        words = {s: "".join(rng.choice("01") for _ in range(rng.randint(1, 5))) for s in range(n)}
        found = codes.ambiguity(words)
        brute = brute_shortest_ambiguity(words, bound)
        if found is None:
            assert brute is None, (trial, words, brute)
            # McMillan: a uniquely decodable code has Kraft sum ≤ 1.
            assert codes.kraft_sum(words) <= 1
            seen["ud"] += 1
        else:
            check_parses(words, found)
            if len(found[0]) <= bound:  # shortest: brute force agrees on the length
                assert brute is not None, (trial, words)
                assert brute[0] == len(found[0]), (trial, words, found, brute)
            else:
                assert brute is None
            seen["ambiguous"] += 1
    assert seen["ud"] > 100
    assert seen["ambiguous"] > 100


def test_overfull_codes_are_always_found_ambiguous() -> None:
    # McMillan's theorem: Kraft sum > 1 implies not uniquely decodable.
    rng = random.Random(7)
    checked = 0
    for _ in range(400):
        words = {s: "".join(rng.choice("01") for _ in range(rng.randint(1, 4))) for s in range(6)}
        if sum(Fraction(1, 2 ** len(w)) for w in words.values()) > 1:
            found = codes.ambiguity(words)
            assert found is not None, words
            check_parses(words, found)
            checked += 1
    assert checked > 100


def test_suffix_free_codes_are_uniquely_decodable() -> None:
    # Fact of the trade: reversing a prefix-free code gives a suffix-free code, which
    # decodes from the back, so it is uniquely decodable (often not prefix-free).
    rng = np.random.default_rng(3)
    not_prefix_free = 0
    for _ in range(60):
        probs = rng.random(int(rng.integers(2, 12)))
        cb = codes.canonical_codebook((np.arange(probs.size), codes.huffman_lengths(probs)))
        reversed_words = {s: cb.word(s)[::-1] for s in cb.symbols}
        assert codes.ambiguity(reversed_words) is None
        not_prefix_free += codes.prefix_witness(reversed_words) is not None
    assert not_prefix_free > 10


def test_prefix_free_codes_pass_at_once_even_when_large() -> None:
    lengths = codes.huffman_lengths(np.random.default_rng(0).random(1 << 16))
    cb = codes.canonical_codebook((np.arange(lengths.size), lengths))
    assert codes.ambiguity(cb, limit=1) is None
    codes.assert_uniquely_decodable(cb, limit=1)


def test_search_limit_is_named_when_exceeded() -> None:
    # {0, 01, 011} needs the dangling suffixes '1' and '11' before it can say "UD".
    with pytest.raises(SearchLimitError, match=r"limit=1 dangling suffixes"):
        codes.assert_uniquely_decodable(Codebook({0: "0", 1: "01", 2: "011"}, name="x"), limit=1)
    assert codes.ambiguity({0: "0", 1: "01", 2: "011"}, limit=2) is None
    for check in (codes.ambiguity, codes.assert_uniquely_decodable):
        with pytest.raises(ValueError, match="limit must be an integer >= 1, got 0"):
            check({0: "0", 1: "01"}, limit=0)
        for wrong in (2.5, True, "10", None):
            expected = re.escape(f"limit must be an integer, got {wrong!r}")
            with pytest.raises(TypeError, match=expected):
                check({0: "0", 1: "01"}, limit=wrong)  # type: ignore[arg-type]
    with pytest.raises(TypeError, match="code must be a Codebook or a"):
        codes.ambiguity(["0", "01"])  # type: ignore[arg-type]


@pytest.mark.parametrize(
    "table",
    [
        # 0·1111111110 = 01·11111111·0: the lagging parse needs a long codeword
        ["01", "0", "1111111110", "11111111"],
        # found by a random search over 3-word codes: the shortest ambiguous string
        # is 14 bits, longer than any codeword pair
        ["01110", "110111", "1"],
    ],
)
def test_long_ambiguities_are_shortest_by_brute_force(table: list[str]) -> None:
    words = dict(enumerate(table))
    found = codes.ambiguity(words)
    assert found is not None
    check_parses(words, found)
    brute = brute_shortest_ambiguity(words, 18)
    assert brute is not None
    assert brute[0] == len(found[0])
