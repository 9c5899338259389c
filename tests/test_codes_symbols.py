"""Code tables keyed by the team's own symbols (pytest_ratefloor.codes): characters,
strings, bytes, tuples and mixed keys are analysed as they are keyed; integers are
needed only to encode samples; a bool is never a symbol.

Expectations are computed independently in this file: prefix pairs by brute force over
all ordered pairs, Kraft sums as sums of ``Fraction(1, 2**len)``, shortest ambiguous
strings by enumerating codeword sequences, and prefix-freeness by bitarray's own
``decodetree`` (which refuses a code that is not prefix-free).
"""

from __future__ import annotations

import contextlib
import itertools
import random
import re
from collections.abc import Hashable, Iterator, Mapping
from fractions import Fraction
from typing import Any

import numpy as np
import pytest
from bitarray import bitarray, decodetree
from bitarray.util import huffman_code

from pytest_ratefloor import codes
from pytest_ratefloor.codes import Codebook
from pytest_ratefloor.errors import AmbiguousCode, CodeShapeFailure, KraftFailure, PrefixFailure

#: The table of the report: 'a' (0) is a prefix of 'b' (01).
QUOTED = {"a": "0", "b": "01", "c": "11"}


def brute_prefix_pairs(words: Mapping[Any, str]) -> set[tuple[Any, Any]]:
    """All (a, b), a != b, where word a is a prefix of (or equal to) word b: O(N²)."""
    return {
        (a, b) for (a, wa), (b, wb) in itertools.permutations(words.items(), 2) if wb.startswith(wa)
    }


def fraction_kraft(words: Mapping[Any, str]) -> Fraction:
    """Σ 2^-ℓ as a sum of fractions, one codeword at a time."""
    return sum((Fraction(1, 2 ** len(w)) for w in words.values()), Fraction(0))


def bitarray_says_prefix_free(words: Mapping[Any, str]) -> bool:
    """bitarray's decode tree refuses a code in which one codeword is a prefix of another."""
    try:
        decodetree({s: bitarray(w) for s, w in words.items()})
    except ValueError:
        return False
    return True


def brute_shortest_ambiguity(
    words: Mapping[Any, str], bound: int
) -> tuple[int, set[str]] | None:
    """The length of the shortest bit string with two parses (codeword sequences), and
    every such string of that length; None if none up to ``bound`` bits."""
    by_total: dict[int, dict[str, set[tuple[Any, ...]]]] = {0: {"": {()}}}
    for total in range(1, bound + 1):
        reached: dict[str, set[tuple[Any, ...]]] = {}
        for sym, w in words.items():
            for head, parses in by_total.get(total - len(w), {}).items():
                for parse in parses:
                    reached.setdefault(head + w, set()).add((*parse, sym))
        twice = {text for text, parses in reached.items() if len(parses) > 1}
        if twice:
            return total, twice
        by_total[total] = reached
    return None


def relabelled(words: Mapping[Any, str]) -> tuple[dict[int, str], list[Any]]:
    """The same code keyed by integers 0..n-1 in symbol order (ascending keys when they
    compare, else the table's order), and the keys by rank."""
    keys = list(words)
    with contextlib.suppress(TypeError):  # kinds that do not compare keep the table's order
        keys.sort()
    return {i: words[k] for i, k in enumerate(keys)}, keys


# ------------------------------------------------------------- the quoted table


def test_the_quoted_table_fails_with_the_prefix_witness_in_its_own_symbols() -> None:
    assert brute_prefix_pairs(QUOTED) == {("a", "b")}
    assert not bitarray_says_prefix_free(QUOTED)
    assert codes.prefix_witness(QUOTED) == (("a", "0"), ("b", "01"))
    with pytest.raises(PrefixFailure) as info:
        codes.assert_prefix_free(QUOTED)
    assert str(info.value) == (
        "codebook 'codebook' is not prefix-free: the codeword of symbol 'a' ('0') is a prefix "
        "of the codeword of symbol 'b' ('01'); a decoder that has read '0' cannot tell "
        "whether symbol 'a' has ended"
    )


def test_the_quoted_table_is_complete_and_uniquely_decodable() -> None:
    # Kraft: 1/2 + 1/4 + 1/4 = 1. Its reversed words {0, 10, 11} are prefix-free, so
    # the code is suffix-free and hence uniquely decodable (read from the end).
    assert codes.kraft_sum(QUOTED) == fraction_kraft(QUOTED) == 1
    codes.assert_kraft(QUOTED, complete=True)
    assert bitarray_says_prefix_free({s: w[::-1] for s, w in QUOTED.items()})
    assert brute_shortest_ambiguity(QUOTED, 12) is None
    assert codes.ambiguity(QUOTED) is None
    codes.assert_uniquely_decodable(QUOTED)


# --------------------------------------------------------- prefix-free tables pass


@pytest.mark.parametrize(
    "words",
    [
        {"e": "0", "t": "10", "a": "110", "o": "111"},
        {"the": "00", " ": "01", "ing": "100", "er": "101", "<unk>": "11"},
        {b"\x00": "0", b"ab": "10", b"\xff": "11"},
        {("ctx", 0): "0", ("ctx", 1): "10", ("eos",): "11"},
        {0: "00", "a": "01", b"a": "10", ("a",): "110", 2.5: "111"},  # mixed kinds
    ],
    ids=["chars", "tokens", "bytes", "tuples", "mixed"],
)
def test_prefix_free_tables_of_any_symbols_pass_every_check(words: dict[Hashable, str]) -> None:
    assert brute_prefix_pairs(words) == set()
    assert bitarray_says_prefix_free(words)
    assert codes.kraft_sum(words) == fraction_kraft(words) == 1
    codes.assert_prefix_free(words, max_length=3)
    codes.assert_kraft(words, complete=True, max_length=3)
    codes.assert_uniquely_decodable(words)
    assert codes.prefix_witness(words) is None
    assert codes.ambiguity(words) is None
    cb = Codebook(words)
    assert cb.lengths == {s: len(w) for s, w in words.items()}
    assert {s: w.to01() for s, w in cb.codewords.items()} == words
    assert all(cb.word(s) == w and s in cb for s, w in words.items())


def test_a_huffman_code_keyed_by_text_from_bitarray_passes() -> None:
    # bitarray builds Huffman codes keyed by any hashable symbol: complete, prefix-free
    rng = random.Random(11)
    counts = {"".join(rng.choices("abcdefgh", k=rng.randint(1, 4))): rng.randint(1, 99)
              for _ in range(300)}
    table = {s: w.to01() for s, w in huffman_code(counts).items()}  # type: ignore[arg-type]
    codes.assert_prefix_free(table)
    codes.assert_kraft(table, complete=True)
    codes.assert_uniquely_decodable(table)
    assert codes.kraft_sum(table) == fraction_kraft(table) == 1


# ------------------------------------------------ random tables against brute force


KEY_MAKERS = {
    "str": lambda rng, i: "".join(rng.choices("xyz", k=rng.randint(1, 3))) + str(i),
    "bytes": lambda rng, i: bytes([rng.randrange(256), i % 256]) + i.to_bytes(2, "big"),
    "tuple": lambda rng, i: (rng.choice("pq"), i),
    "mixed": lambda rng, i: [i, str(i), (i,), bytes([i % 256]) + b"!"][i % 4],
}


@pytest.mark.parametrize("kind", sorted(KEY_MAKERS))
def test_random_tables_match_brute_force_and_their_integer_relabelling(kind: str) -> None:
    rng = random.Random(f"keys-{kind}")
    found = 0
    for _ in range(150):
        n = rng.randint(1, 9)
        words = {
            KEY_MAKERS[kind](rng, i): "".join(rng.choices("01", k=rng.randint(1, 4)))
            for i in range(n)
        }
        pairs = brute_prefix_pairs(words)
        witness = codes.prefix_witness(words)
        assert (witness is None) == (not pairs) == bitarray_says_prefix_free(words)
        assert codes.kraft_sum(words) == fraction_kraft(words)
        ints, by_rank = relabelled(words)
        int_witness = codes.prefix_witness(ints)
        if witness is None:
            assert int_witness is None
            codes.assert_prefix_free(words)
            continue
        found += 1
        (sa, wa), (sb, wb) = witness
        assert (sa, sb) in pairs
        assert (words[sa], words[sb]) == (wa, wb)
        assert int_witness is not None  # the same pair, the same rule
        assert (by_rank[int_witness[0][0]], by_rank[int_witness[1][0]]) == (sa, sb)
        with pytest.raises(PrefixFailure) as info:
            codes.assert_prefix_free(words)
        named = (
            f"symbols {sa!r} and {sb!r} share the codeword {wa!r}" if wa == wb
            else f"symbol {sa!r} ({wa!r}) is a prefix of the codeword of symbol {sb!r} ({wb!r})"
        )
        assert named in str(info.value)
    assert found > 50


@pytest.mark.parametrize("kind", sorted(KEY_MAKERS))
def test_random_ambiguous_tables_give_a_shortest_witness_in_their_own_symbols(
    kind: str,
) -> None:
    rng = random.Random(f"sp-{kind}")
    ambiguous = 0
    for _ in range(120):
        n = rng.randint(2, 5)
        words = {
            KEY_MAKERS[kind](rng, i): "".join(rng.choices("01", k=rng.randint(1, 3)))
            for i in range(n)
        }
        brute = brute_shortest_ambiguity(words, 10)
        found = codes.ambiguity(words)
        if found is None:
            assert brute is None
            continue
        ambiguous += 1
        bits, parse_a, parse_b = found
        assert brute is not None
        assert len(bits) == brute[0]
        assert bits in brute[1]
        assert parse_a != parse_b
        assert all(s in words for s in (*parse_a, *parse_b))
        assert "".join(words[s] for s in parse_a) == bits == "".join(words[s] for s in parse_b)
        ints, by_rank = relabelled(words)
        int_found = codes.ambiguity(ints)
        assert int_found is not None
        assert int_found[0] == bits
        assert [by_rank[i] for i in int_found[1]] == parse_a
        assert [by_rank[i] for i in int_found[2]] == parse_b
    assert ambiguous > 30


# -------------------------------------------------------------- an ambiguous table


def test_an_ambiguous_text_table_names_two_parses_in_its_own_symbols() -> None:
    # {x: 0, y: 01, z: 10}: 010 = x·z = y·x (checked by hand); no shorter string has two
    # parses (the brute force agrees).
    words = {"x": "0", "y": "01", "z": "10"}
    assert brute_shortest_ambiguity(words, 8) == (3, {"010"})
    assert codes.ambiguity(words) == ("010", ["x", "z"], ["y", "x"])
    with pytest.raises(AmbiguousCode) as info:
        codes.assert_uniquely_decodable(Codebook(words, name="words"))
    assert str(info.value) == (
        "codebook 'words' is not uniquely decodable: the bit string '010' (3 bits) has two "
        "parses: ['x', 'z'] = '0'·'10' and ['y', 'x'] = '01'·'0'"
    )


def test_tuple_and_bytes_symbols_are_shown_with_repr_in_parses() -> None:
    words = {(1, "a"): "0", b"q": "01", ("z",): "10"}
    bits, parse_a, parse_b = codes.ambiguity(words) or ("", [], [])
    assert bits == "010"
    assert {tuple(parse_a), tuple(parse_b)} == {((1, "a"), ("z",)), (b"q", (1, "a"))}
    with pytest.raises(AmbiguousCode) as info:
        codes.assert_uniquely_decodable(words)
    msg = str(info.value)
    assert "[(1, 'a'), ('z',)] = '0'·'10'" in msg
    assert "[b'q', (1, 'a')] = '01'·'0'" in msg


def test_a_shared_codeword_names_both_symbols_in_symbol_order() -> None:
    words = {"b": "0", "a": "0", "c": "1"}
    assert brute_prefix_pairs(words) == {("a", "b"), ("b", "a")}
    assert codes.prefix_witness(words) == (("a", "0"), ("b", "0"))
    with pytest.raises(PrefixFailure, match="symbols 'a' and 'b' share the codeword '0'"):
        codes.assert_prefix_free(words)
    assert codes.ambiguity(words) == ("0", ["a"], ["b"])


def test_codewords_beyond_64_bits_keep_the_symbols() -> None:
    # past 64 bits the witness search compares text: the same symbols come back
    words = {"long": "0" * 70 + "1", "short": "1", "prefix": "0" * 70, "w": "0" * 69 + "1"}
    assert brute_prefix_pairs(words) == {("prefix", "long")}
    assert codes.prefix_witness(words) == (("prefix", "0" * 70), ("long", "0" * 70 + "1"))
    lengths = {f"s{i:02d}": i + 1 for i in range(79)} | {"s79": 79}  # unary-like, complete
    cb = codes.canonical_codebook(lengths)
    assert cb.word("s00") == "0"
    assert cb.word("s78") == "1" * 78 + "0"
    assert cb.word("s79") == "1" * 79
    assert codes.kraft_sum(cb) == fraction_kraft({s: cb.word(s) for s in cb.symbols}) == 1
    codes.assert_prefix_free(cb, canonical=True)


# ------------------------------------------------------ Kraft and shape messages


def test_an_over_full_text_table_names_a_prefix_pair_of_its_symbols() -> None:
    words = {"a": "0", "b": "1", "c": "10"}
    assert fraction_kraft(words) == Fraction(5, 4)
    assert brute_prefix_pairs(words) == {("b", "c")}
    with pytest.raises(KraftFailure) as info:
        codes.assert_kraft(words)
    msg = str(info.value)
    assert "Kraft sum Σ2^-ℓ = 5/4 > 1 (over by 1/4)" in msg
    assert msg.endswith(
        "; not prefix-free either: the codeword of symbol 'b' ('1') is a prefix of the "
        "codeword of symbol 'c' ('10')"
    )


def test_an_incomplete_bytes_table_reports_the_unused_share() -> None:
    words = {b"A": "0", b"B": "10"}
    assert fraction_kraft(words) == Fraction(3, 4)
    with pytest.raises(KraftFailure, match=r"Kraft sum Σ2\^-ℓ = 3/4 < 1, so 1/4 of the code"):
        codes.assert_kraft(words, complete=True)


def test_length_cap_and_canonical_failures_name_symbols_with_repr() -> None:
    words = {"a": "0", "b": "10", "c": "110", "d": "111"}
    with pytest.raises(CodeShapeFailure, match=r"symbol 'c' has a 3-bit codeword but "
                                               r"max_length=2 \(2 codewords over the cap; "
                                               r"longest 3 bits, symbol 'c'\)"):
        codes.assert_prefix_free(words, max_length=2)
    codes.assert_prefix_free(words, canonical=True)  # a, b, c, d in (length, symbol) order
    # lengths 1, 2, 3, 3 in the order a, b, c, d: canonically 0, 10, 110, 111
    swapped = {"a": "0", "b": "11", "c": "100", "d": "101"}
    with pytest.raises(CodeShapeFailure, match=r"symbol 'b' has codeword '11' but the "
                                               r"canonical code .* gives it '10'"):
        codes.assert_kraft(swapped, canonical=True)


# ------------------------------------------------------------ canonical of letters


def test_canonical_code_of_the_rfc1951_example_keyed_by_its_letters() -> None:
    # RFC 1951 §3.2.2 worked example (from memory), with the letters it uses: lengths
    # (3,3,3,3,3,2,4,4) for A..H give F=00, A=010, B=011, C=100, D=101, E=110, G=1110,
    # H=1111. The mapping is given out of order: symbol order is the letters' order.
    lengths = dict(zip("HGFEDCBA", (4, 4, 2, 3, 3, 3, 3, 3)))
    cb = codes.canonical_codebook(lengths, name="rfc1951")
    assert cb.symbols == list("ABCDEFGH")
    assert {s: cb.word(s) for s in "ABCDEFGH"} == {
        "A": "010", "B": "011", "C": "100", "D": "101", "E": "110", "F": "00",
        "G": "1110", "H": "1111",
    }
    assert codes.is_canonical(cb)
    codes.assert_kraft(cb, complete=True, canonical=True, max_length=4)


def test_canonical_code_of_mixed_symbols_keeps_the_table_order() -> None:
    # int and str do not compare: the table's own order breaks ties within a length
    cb = codes.canonical_codebook({"z": 2, 7: 2, ("t",): 1})
    assert cb.symbols == ["z", 7, ("t",)]
    assert {s: cb.word(s) for s in cb.symbols} == {("t",): "0", "z": "10", 7: "11"}
    codes.assert_prefix_free(cb, canonical=True)


def test_canonical_of_text_refuses_bad_lengths_naming_the_symbol() -> None:
    with pytest.raises(ValueError, match="length of symbol 'b' must be an integer >= 0, got -1"):
        codes.canonical_codebook({"a": 1, "b": -1})
    with pytest.raises(ValueError, match=r"got a Kraft sum of 5/4"):
        codes.canonical_codebook({"a": 1, "b": 1, "c": 2})
    with pytest.raises(ValueError, match="at least one symbol a positive length"):
        codes.canonical_codebook({"a": 0})
    with pytest.raises(ValueError, match="symbols must be distinct, got 'a' twice"):
        codes.canonical_codebook(Repeated({"a": 2, "b": 2}))


# ------------------------------------------------------------- table behaviour


class Repeated(Mapping):
    """A mapping whose items list its first key twice (a dict cannot)."""

    def __init__(self, table: dict[Any, Any]) -> None:
        self.table = table

    def __getitem__(self, key: object) -> Any:
        return self.table[key]

    def __iter__(self) -> Iterator[Any]:
        return iter(self.table)

    def __len__(self) -> int:
        return len(self.table) + 1

    def items(self) -> list[tuple[Any, Any]]:  # type: ignore[override]
        first = next(iter(self.table.items()))
        return [first, *self.table.items()]


def test_symbol_order_is_ascending_when_keys_compare_else_the_tables() -> None:
    assert Codebook({"b": "0", "a": "10", "c": "11"}).symbols == ["a", "b", "c"]
    assert Codebook({b"b": "0", b"a": "1"}).symbols == [b"a", b"b"]
    assert Codebook({(2, "x"): "0", (1, "y"): "1"}).symbols == [(1, "y"), (2, "x")]
    assert Codebook({"b": "0", 3: "10", "a": "11"}).symbols == ["b", 3, "a"]


def test_numpy_scalars_are_stored_as_python_values() -> None:
    cb = Codebook({np.str_("a"): "0", np.bytes_(b"b"): "10", np.int64(3): "11"})
    assert cb.symbols == ["a", b"b", 3]
    assert [type(s) for s in cb.symbols] == [str, bytes, int]
    assert cb.word(np.str_("a")) == "0"
    assert np.int64(3) in cb


def test_lookups_in_a_text_table() -> None:
    cb = Codebook({"a": "0", "b": "10"})
    assert "a" in cb
    assert "z" not in cb
    assert 0 not in cb
    assert ["a"] not in cb
    with pytest.raises(KeyError):
        cb.word("z")
    with pytest.raises(TypeError, match="unhashable"):
        cb.word(["a"])  # type: ignore[arg-type]
    assert "a" not in Codebook({0: "0"})
    with pytest.raises(KeyError):
        Codebook({0: "0"}).word("a")  # type: ignore[arg-type]


def test_text_table_entries_are_checked_naming_the_symbol() -> None:
    with pytest.raises(ValueError, match="codebook 'gauge': symbols must be distinct, got 'a' "):
        Codebook(Repeated({"a": "0", "b": "1"}), name="gauge")
    with pytest.raises(ValueError, match=r"codeword of symbol 'a' must be a non-empty string"):
        Codebook({1: "1", "a": "012"})  # an integer first, then the table of any symbols
    with pytest.raises(TypeError, match=r"codebook 'gauge': symbol must be hashable, got \['x'\]"):
        Codebook(ListKeyed(), name="gauge")
    copy = Codebook(Codebook({"q": "1", "p": "0"}), name="copy")
    assert copy.symbols == ["p", "q"]
    assert copy.word("q") == "1"


class ListKeyed(Mapping):
    """A mapping whose second key is a list (unhashable: no dict can hold it)."""

    def __getitem__(self, key: object) -> str:
        return "0"

    def __iter__(self) -> Iterator[object]:
        return iter(["a", ["x"]])

    def __len__(self) -> int:
        return 2


# ------------------------------------------------------- samples need integers


ENCODING_NEEDS = (
    "codebook 'letters': encoding samples needs integer symbols; this table is keyed by str "
    "such as 'a'"
)


def test_encoding_samples_with_a_text_table_says_integers_are_needed() -> None:
    cb = Codebook(QUOTED | {"a": "00", "b": "01", "c": "1"}, name="letters")
    codes.assert_prefix_free(cb)  # the table itself is fine
    with pytest.raises(TypeError, match=f"^{re.escape(ENCODING_NEEDS)}$"):
        cb.encode(np.array([0, 1, 2]))
    with pytest.raises(TypeError, match=f"^{re.escape(ENCODING_NEEDS)}$"):
        cb.encode(["a", "b"])
    with pytest.raises(TypeError, match=f"^{re.escape(ENCODING_NEEDS)}$"):
        cb.sample_symbols()
    decoding = ENCODING_NEEDS.replace("encoding", "decoding")
    with pytest.raises(TypeError, match=f"^{re.escape(decoding)}$"):
        cb.decode(bitarray("0001"), 2)


def test_a_mixed_table_analyses_but_names_its_first_other_key_for_samples() -> None:
    words = {0: "0", "a": "01", (1, 2): "11"}
    assert brute_prefix_pairs(words) == {(0, "a")}
    with pytest.raises(PrefixFailure, match=r"symbol 0 \('0'\) is a prefix of the codeword of "
                                            r"symbol 'a' \('01'\)"):
        codes.assert_prefix_free(words)
    codes.assert_kraft(words, complete=True)  # 1/2 + 1/4 + 1/4
    codes.assert_uniquely_decodable(words)  # suffix-free: reversed 0, 10, 11
    assert Codebook(words).symbols == [0, "a", (1, 2)]
    with pytest.raises(TypeError, match="encoding samples needs integer symbols; this table is "
                                        "keyed by str such as 'a'"):
        Codebook(words).encode([0, 0])


def test_lengths_against_a_pmf_need_an_integer_table() -> None:
    with pytest.raises(TypeError, match="needs integer symbols; this table is keyed by str"):
        codes.expected_length(QUOTED, [0, 1, 2], [0.5, 0.25, 0.25])


def test_integer_tables_still_encode_decode_and_list_int_symbols() -> None:
    cb = Codebook({np.int64(2): "0", 0: "10", 1: "11"})
    assert cb.sample_symbols() == [0, 1, 2]
    bits = cb.encode([2, 0, 1, 2])
    assert bits == bitarray("010110")
    assert cb.decode(bits, 4).tolist() == [2, 0, 1, 2]


def test_a_text_table_as_a_codec_says_integers_are_needed() -> None:
    from pytest_ratefloor.codecs import as_codec

    with pytest.raises(TypeError, match="encoding samples needs integer symbols"):
        as_codec({"a": "0", "b": "1"})
