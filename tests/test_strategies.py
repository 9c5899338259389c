"""Tests of the hypothesis strategies: edge cases reachable, values inside the
alphabet, corruptions valid, and a clear hint when hypothesis is missing."""

from __future__ import annotations

import importlib
import lzma
import sys
import zlib

import numpy as np
import pytest
from bitarray import bitarray

hypothesis = pytest.importorskip("hypothesis")
from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

from pytest_ratefloor.corruption import CORRUPTION_KINDS, Corruption  # noqa: E402
from pytest_ratefloor.strategies import (  # noqa: E402
    LARGE_LENGTHS,
    MAX_EVERY_SYMBOL,
    alphabet_of,
    corruption_schedules,
    corruptions,
    symbol_sequences,
)

FAST = settings(max_examples=40, deadline=None, database=None)
FIND = settings(max_examples=400, deadline=None, database=None, derandomize=True)
ALPHABET = [-3, 0, 5, 9]


class _TideSource:
    """Stand-in for a reference source: a finite pmf with one zero-probability symbol."""

    spec = "tide_stand_in()"
    symbols = np.array([2, 3, 4, 7], dtype=np.int64)
    probs = np.array([0.5, 0.25, 0.0, 0.25])

    def pmf_table(self, tail: float = 2.0**-60) -> tuple[np.ndarray, np.ndarray]:
        return self.symbols, self.probs

    def sample(self, n: int, seed: int = 0) -> np.ndarray:
        rng = np.random.Generator(np.random.PCG64(seed))
        return rng.choice(self.symbols, size=n, p=self.probs).astype(np.int64)


def _find(strategy: st.SearchStrategy[np.ndarray], condition) -> np.ndarray:  # type: ignore[no-untyped-def]
    return hypothesis.find(strategy, condition, settings=FIND)


# ---------------------------------------------------------------------------
# without hypothesis


def test_import_without_hypothesis_gives_a_one_line_install_hint(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    monkeypatch.setitem(sys.modules, "hypothesis", None)
    monkeypatch.setitem(sys.modules, "hypothesis.strategies", None)
    monkeypatch.delitem(sys.modules, "pytest_ratefloor.strategies")
    with pytest.raises(ImportError) as info:
        importlib.import_module("pytest_ratefloor.strategies")
    message = str(info.value)
    assert "\n" not in message
    assert "pip install 'pytest-ratefloor[hypothesis]'" in message
    assert info.value.__cause__ is None


# ---------------------------------------------------------------------------
# alphabets


def test_alphabet_of_its_three_forms() -> None:
    assert alphabet_of(4).tolist() == [0, 1, 2, 3]
    assert alphabet_of([9, -3, 5, 9]).tolist() == [-3, 5, 9]
    # a zero-probability symbol is outside the support
    assert alphabet_of(_TideSource()).tolist() == [2, 3, 7]
    assert alphabet_of(4).dtype == np.int64


def test_alphabet_of_rejects_bad_input_by_name() -> None:
    with pytest.raises(ValueError, match=r"^alphabet size must be an integer >= 1, got 0$"):
        alphabet_of(0)
    with pytest.raises(ValueError, match="the alphabet is empty"):
        alphabet_of([])
    with pytest.raises(TypeError, match="expected a reference source"):
        alphabet_of("abc")
    with pytest.raises(ValueError, match=r"^max_length must be an integer >= 1, got 0$"):
        symbol_sequences(4, max_length=0)
    with pytest.raises(TypeError, match=r"^max_length must be an integer, got 8\.0$"):
        symbol_sequences(4, max_length=8.0)  # type: ignore[arg-type]
    with pytest.raises(TypeError, match=r"^large must be True or False, got 1$"):
        symbol_sequences(4, large=1)  # type: ignore[arg-type]


# ---------------------------------------------------------------------------
# symbol sequences


@FAST
@given(symbol_sequences(ALPHABET))
def test_sequences_are_int64_arrays_inside_the_alphabet(symbols: np.ndarray) -> None:
    assert isinstance(symbols, np.ndarray)
    assert symbols.dtype == np.int64
    assert symbols.ndim == 1
    assert set(symbols.tolist()) <= set(ALPHABET)


@FAST
@given(symbol_sequences(_TideSource(), max_length=30))
def test_sequences_of_a_source_stay_in_its_support(symbols: np.ndarray) -> None:
    assert set(symbols.tolist()) <= {2, 3, 7}


EDGE_CASES = {
    "empty": lambda a: a.size == 0,
    "the minimum alone": lambda a: a.tolist() == [-3],
    "the maximum alone": lambda a: a.tolist() == [9],
    "a constant run": lambda a: a.size >= 5 and len(set(a.tolist())) == 1,
    "two symbols alternating": lambda a: (
        a.size >= 4 and a[0] != a[1] and (a[::2] == a[0]).all() and (a[1::2] == a[1]).all()
    ),
    "every symbol once": lambda a: sorted(a.tolist()) == ALPHABET,
    "a length around 2**16": lambda a: a.size in LARGE_LENGTHS,
    **{f"length {k}": (lambda a, k=k: a.size == k) for k in range(1, 18)},
}


def _drawn(strategy: st.SearchStrategy[np.ndarray], examples: int) -> list[np.ndarray]:
    """The examples hypothesis generates (derandomized: the same on every run)."""
    out: list[np.ndarray] = []

    @settings(max_examples=examples, deadline=None, database=None, derandomize=True)
    @given(strategy)
    def record(symbols: np.ndarray) -> None:
        out.append(symbols)

    record()
    return out


def test_every_edge_case_is_drawn() -> None:
    strategy = symbol_sequences(ALPHABET)
    drawn = _drawn(strategy, 300)
    # hypothesis does not draw independently; a case one pass missed is searched for
    for name, hit in EDGE_CASES.items():
        if not any(map(hit, drawn)):
            assert hit(_find(strategy, hit)), name
    # and only rarely the large case
    assert sum(a.size >= 2**16 - 1 for a in drawn) <= 0.1 * len(drawn)


def test_large_case_can_be_turned_off() -> None:
    drawn = _drawn(symbol_sequences(ALPHABET, large=False), 150)
    assert max(a.size for a in drawn) <= 64


def test_every_symbol_once_is_skipped_for_huge_alphabets() -> None:
    big = MAX_EVERY_SYMBOL + 1
    drawn = _drawn(symbol_sequences(big, large=False), 100)
    assert max(a.size for a in drawn) <= 64


# ---------------------------------------------------------------------------
# corruptions


@FAST
@given(corruptions(40))
def test_corruptions_are_valid_for_the_stream(c: Corruption) -> None:
    data = bytes(range(40))
    damaged = c.apply(data)
    assert c.stream_length == 40
    assert len(damaged) == c.damaged_length
    if c.kind in ("flip", "burst"):
        # reference: bitarray comparison of the two streams
        before, after = bitarray(endian="big"), bitarray(endian="big")
        before.frombytes(data)
        after.frombytes(damaged)
        assert [i for i in range(len(before)) if before[i] != after[i]] == list(c.bits)
        assert c.bits[-1] - c.bits[0] < 32


def _framed(body: bytes) -> bytes:
    return body + zlib.crc32(body).to_bytes(4, "big")


BODY = b"kelpwick harbour gauge 7: +0.42 m"


@FAST
@given(corruptions(len(BODY) + 4, kinds=["flip"]))
def test_crc32_detects_every_single_bit_flip(c: Corruption) -> None:
    # A CRC whose generator has more than one term detects every single-bit
    # error (from memory: Peterson & Brown, "Cyclic codes for error detection", 1961).
    damaged = c.apply(_framed(BODY))
    assert zlib.crc32(damaged[:-4]) != int.from_bytes(damaged[-4:], "big")


LZMA_STREAM = lzma.compress(b"tide 0.42 0.43 0.45 0.44 " * 8)


@settings(max_examples=40, deadline=None, database=None)
@given(corruptions(len(LZMA_STREAM)))
def test_lzma_rejects_damage_or_returns_the_original(c: Corruption) -> None:
    # The .xz container checks its headers with CRC-32 and the data with CRC-64
    # (Python's lzma module docs: FORMAT_XZ, CHECK_CRC64 by default).
    try:
        out = lzma.decompress(c.apply(LZMA_STREAM))
    except lzma.LZMAError:
        return
    assert out == lzma.decompress(LZMA_STREAM)


def test_corruptions_shrink_toward_cutting_everything() -> None:
    found = hypothesis.find(corruptions(40), lambda c: True, settings=FIND)
    assert found == Corruption.truncate(40, 0)


def test_corruptions_of_an_empty_stream_are_appends() -> None:
    @FAST
    @given(corruptions(0))
    def check(c: Corruption) -> None:
        assert c.kind == "append"
        assert len(c.apply(b"")) == c.length

    check()
    with pytest.raises(ValueError, match="an empty stream can only be damaged by 'append'"):
        corruptions(0, kinds=["flip"])


def test_corruption_kinds_are_checked() -> None:
    with pytest.raises(ValueError, match="kinds must be a non-empty subset"):
        corruptions(10, kinds=["smudge"])
    with pytest.raises(ValueError, match="kinds must be a non-empty subset"):
        corruptions(10, kinds=[])
    with pytest.raises(TypeError, match="kinds must be a non-empty subset"):
        corruptions(10, kinds="flip")
    with pytest.raises(TypeError, match="kinds must be a non-empty subset"):
        corruptions(10, kinds=[3])  # type: ignore[list-item]
    with pytest.raises(ValueError, match=r"^stream_length must be an integer >= 0, got -1$"):
        corruptions(-1)
    with pytest.raises(TypeError, match=r"^stream_length must be an integer, got 1\.5$"):
        corruptions(1.5)  # type: ignore[arg-type]
    with pytest.raises(ValueError, match=r"^trials must be an integer >= 1, got 0$"):
        corruption_schedules(10, trials=0)
    with pytest.raises(TypeError, match=r"^trials must be an integer, got True$"):
        corruption_schedules(10, trials=True)


def test_every_damage_kind_is_drawn() -> None:
    # the strategy's kinds are the corruption package's one table
    kinds: set[str] = set()

    @settings(max_examples=60, deadline=None, database=None, derandomize=True)
    @given(corruptions(40))
    def record(c: Corruption) -> None:
        kinds.add(c.kind)

    record()
    assert kinds == set(CORRUPTION_KINDS)


@settings(
    max_examples=10, deadline=None, database=None, suppress_health_check=[HealthCheck.too_slow]
)
@given(corruption_schedules(100, trials=12))
def test_schedules_fit_the_stream(schedule: list[Corruption]) -> None:
    assert 1 <= len(schedule) <= 12
    assert len(set(schedule)) == len(schedule)
    assert all(c.stream_length == 100 for c in schedule)
    assert schedule[0] == Corruption.truncate(100, 0)


# ---------------------------------------------------------------------------
# with the project's reference sources


def test_sequences_over_reference_sources() -> None:
    from pytest_ratefloor import sources

    geometric = sources.geometric(0.3)
    table, _ = geometric.pmf_table()

    @FAST
    @given(symbol_sequences(geometric), symbol_sequences(sources.bernoulli(0.1)))
    def check(geo: np.ndarray, bits: np.ndarray) -> None:
        assert geo.size == 0 or 0 <= geo.min() <= geo.max() <= table.max()
        assert set(bits.tolist()) <= {0, 1}

    check()
    # the negative extreme of a two-sided source is drawn on its own
    two_sided = sources.two_sided_geometric(0.5)
    lowest = int(two_sided.pmf_table()[0].min())
    assert lowest < 0
    assert _find(symbol_sequences(two_sided), lambda a: a.tolist() == [lowest]).tolist() == [lowest]
