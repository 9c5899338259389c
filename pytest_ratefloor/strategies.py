"""Hypothesis strategies for codec property tests (the ``hypothesis`` extra).

Teams that already use hypothesis can fold the plugin's edge cases into their
own property tests:

* :func:`symbol_sequences` draws int64 symbol arrays over a source's alphabet
  with the edge cases of the round-trip check (empty, one symbol at the
  alphabet's minimum or maximum, constant runs, alternating pairs, every
  short length 1..17, every symbol once, a typical sample of the source,
  and, sparingly, lengths around 2**16);
* :func:`corruptions` draws single :class:`~pytest_ratefloor.corruption.Corruption`
  objects for a stream of a given length (shrinking toward "cut everything");
* :func:`corruption_schedules` draws whole seeded schedules as the corruption
  check runs them.

Example::

    from hypothesis import given
    from pytest_ratefloor import sources
    from pytest_ratefloor.strategies import symbol_sequences

    @given(symbol_sequences(sources.geometric(0.2)))
    def test_round_trip(symbols):
        assert (decode(encode(symbols), len(symbols)) == symbols).all()
"""

from __future__ import annotations

try:
    from hypothesis import strategies as st
except ImportError:  # pragma: no cover - exercised by a test that hides hypothesis
    raise ImportError(
        "pytest_ratefloor.strategies needs hypothesis: pip install 'pytest-ratefloor[hypothesis]'"
    ) from None

from collections.abc import Iterable
from typing import Any

import numpy as np

from pytest_ratefloor import validation
from pytest_ratefloor.corruption import CORRUPTION_KINDS, Corruption, corruption_schedule

__all__ = [
    "MAX_EVERY_SYMBOL",
    "alphabet_of",
    "corruption_schedules",
    "corruptions",
    "symbol_sequences",
]

#: Alphabets up to this size get the "every symbol once" case.
MAX_EVERY_SYMBOL = 4096

#: Lengths of the rare large case: around 2**16, where 16-bit counters wrap.
LARGE_LENGTHS = (2**16 - 1, 2**16, 2**16 + 1)

_SHORT = 17  # every length 1..17 covers each residue of 8 and 16 plus one


def alphabet_of(source_or_alphabet: object) -> np.ndarray:
    """The symbols to draw from, sorted, as int64.

    Accepts a reference source (its ``pmf_table()``: the exact support of a
    finite source; for an unbounded one all symbols but the last 2**-60 of the
    mass), an int ``k`` (symbols ``0..k-1``) or a sequence of ints.
    """
    obj = source_or_alphabet
    if hasattr(obj, "pmf_table"):
        symbols, probs = obj.pmf_table()
        symbols = np.asarray(symbols, dtype=np.int64)[np.asarray(probs) > 0]
    elif isinstance(obj, (int, np.integer)) and not isinstance(obj, (bool, np.bool_)):
        symbols = np.arange(validation.integer(obj, "alphabet size", minimum=1), dtype=np.int64)
    elif isinstance(obj, Iterable) and not isinstance(obj, (str, bytes)):
        try:
            symbols = np.asarray(list(obj), dtype=np.int64)
        except (TypeError, ValueError, OverflowError) as exc:
            raise ValueError(f"alphabet must hold int64 symbols: {exc}") from None
    else:
        raise TypeError(
            f"expected a reference source, an alphabet size or a sequence of symbols, got {obj!r}"
        )
    symbols = np.unique(symbols)
    if symbols.size == 0:
        raise ValueError("the alphabet is empty")
    return symbols


def _array(values: Any) -> np.ndarray:
    return np.asarray(values, dtype=np.int64).reshape(-1)


def symbol_sequences(
    source_or_alphabet: object,
    *,
    max_length: int = 64,
    large: bool = True,
) -> st.SearchStrategy[np.ndarray]:
    """Symbol arrays (int64, one-dimensional) over a source's alphabet.

    Edge cases are drawn on purpose, not left to chance: the empty sequence;
    one symbol (the minimum, the maximum or any); a constant run; two symbols
    alternating (the extremes or any pair); any symbols at every length
    1..17; any symbols up to ``max_length``; every symbol of the alphabet once
    (sorted, reversed or shuffled; alphabets up to :data:`MAX_EVERY_SYMBOL`);
    a sample of the source itself when a source is given; and, in about one
    example in 40 unless ``large=False``, a run, alternation or cycle through
    the alphabet of length 2**16 - 1, 2**16 or 2**16 + 1. Examples shrink
    toward the empty sequence.
    """
    max_length = validation.integer(max_length, "max_length", minimum=1)
    large = validation.flag(large, "large")
    alphabet = alphabet_of(source_or_alphabet)
    symbols = [int(s) for s in alphabet]
    lo, hi = symbols[0], symbols[-1]
    any_symbol = st.sampled_from(symbols)
    # the extremes often, any symbol otherwise
    symbol = st.one_of(st.sampled_from([lo, hi]), any_symbol)
    short = st.sampled_from(range(1, _SHORT + 1))  # every short length, evenly
    sampler = source_or_alphabet if hasattr(source_or_alphabet, "sample") else None

    families: list[st.SearchStrategy[np.ndarray]] = []
    weights: list[int] = []

    def add(strategy: st.SearchStrategy[np.ndarray], weight: int) -> None:
        families.append(strategy)
        weights.append(weight)

    add(st.just(np.zeros(0, dtype=np.int64)), 2)
    add(symbol.map(lambda s: _array([s])), 3)
    add(
        st.tuples(symbol, st.integers(1, max(max_length, _SHORT))).map(
            lambda t: np.full(t[1], t[0], dtype=np.int64)
        ),
        4,
    )
    add(st.tuples(symbol, symbol, short).map(lambda t: _array([t[i % 2] for i in range(t[2])])), 4)
    add(short.flatmap(lambda k: st.lists(any_symbol, min_size=k, max_size=k)).map(_array), 8)
    add(st.lists(symbol, max_size=max_length).map(_array), 6)
    if alphabet.size <= MAX_EVERY_SYMBOL:
        add(
            st.tuples(
                st.sampled_from(["sorted", "reversed", "shuffled"]), st.integers(0, 2**32)
            ).map(lambda t: _every_once(alphabet, *t)),
            3,
        )
    if sampler is not None:
        add(
            st.tuples(st.integers(1, max_length), st.integers(0, 2**32)).map(
                lambda t: _array(sampler.sample(t[0], seed=t[1]))
            ),
            8,
        )
    if large:
        add(
            st.tuples(
                st.sampled_from(LARGE_LENGTHS),
                st.sampled_from(["run", "alternate", "cycle"]),
                symbol,
                symbol,
            ).map(lambda t: _large(alphabet, *t)),
            1,
        )

    # Pick a family by weight (an index into the repeated list shrinks toward the first).
    table = [i for i, w in enumerate(weights) for _ in range(w)]
    return st.sampled_from(table).flatmap(lambda i: families[i])


def _every_once(alphabet: np.ndarray, order: str, seed: int) -> np.ndarray:
    if order == "sorted":
        return alphabet.copy()
    if order == "reversed":
        return alphabet[::-1].copy()
    return np.random.Generator(np.random.PCG64(seed)).permutation(alphabet)


def _large(alphabet: np.ndarray, length: int, pattern: str, a: int, b: int) -> np.ndarray:
    if pattern == "run":
        return np.full(length, a, dtype=np.int64)
    if pattern == "alternate":
        out = np.full(length, a, dtype=np.int64)
        out[1::2] = b
        return out
    return np.resize(alphabet, length).astype(np.int64)


def _kinds(kinds: Iterable[str] | None) -> tuple[str, ...]:
    """The chosen damage kinds: a non-empty subset of ``CORRUPTION_KINDS``."""
    rule = f"a non-empty subset of {CORRUPTION_KINDS}"
    if kinds is None:
        return CORRUPTION_KINDS
    if isinstance(kinds, str) or not isinstance(kinds, Iterable):
        raise TypeError(f"kinds must be {rule}, got {validation.show(kinds)}")
    chosen = tuple(kinds)
    if not all(isinstance(k, str) for k in chosen):
        raise TypeError(f"kinds must be {rule}, got {validation.show(chosen)}")
    if not chosen or not set(chosen) <= set(CORRUPTION_KINDS):
        raise ValueError(f"kinds must be {rule}, got {validation.show(chosen)}")
    return chosen


def corruptions(
    stream_length: int, kinds: Iterable[str] | None = None
) -> st.SearchStrategy[Corruption]:
    """Single corruptions of a stream of ``stream_length`` bytes.

    ``kinds`` limits them to some of
    :data:`~pytest_ratefloor.corruption.CORRUPTION_KINDS`: ``"truncate"``,
    ``"flip"``, ``"burst"`` (2..32 bits within a span of at most 32),
    ``"append"`` (1..64 garbage bytes) and ``"random"`` (all bytes replaced).
    An empty stream only gets appends. Shrinks toward truncation to nothing,
    then toward early bits and short garbage.
    """
    length = validation.integer(stream_length, "stream_length", minimum=0)
    chosen = _kinds(kinds)
    if length == 0:
        if "append" not in chosen:
            raise ValueError("an empty stream can only be damaged by 'append'")
        chosen = ("append",)
    key = st.integers(0, 2**64 - 1)
    options: dict[str, st.SearchStrategy[Corruption]] = {
        "append": st.builds(Corruption.append, st.just(length), st.integers(1, 64), key),
    }
    if length:
        total = 8 * length
        options["truncate"] = st.integers(0, length - 1).map(
            lambda keep: Corruption.truncate(length, keep)
        )
        options["flip"] = st.integers(0, total - 1).map(lambda bit: Corruption.flip(length, bit))
        options["burst"] = (
            st.integers(0, total - 2)
            .flatmap(
                lambda start: st.tuples(
                    st.just(start),
                    st.integers(2, min(32, total - start)),
                    st.integers(0, 2**30 - 1),
                )
            )
            .map(lambda t: _burst(length, *t))
        )
        options["random"] = key.map(lambda k: Corruption.randomize(length, k))
    return st.one_of([options[k] for k in CORRUPTION_KINDS if k in chosen])


def _burst(length: int, start: int, width: int, inner: int) -> Corruption:
    bits = [start, start + width - 1]
    bits += [start + j for j in range(1, width - 1) if (inner >> (j - 1)) & 1]
    return Corruption.burst(length, bits)


def corruption_schedules(
    stream_length: int, trials: int = 20
) -> st.SearchStrategy[list[Corruption]]:
    """Whole schedules as :func:`~pytest_ratefloor.corruption.corruption_schedule`
    makes them, for a drawn seed (shrinks toward seed 0)."""
    length = validation.integer(stream_length, "stream_length", minimum=0)
    trials = validation.integer(trials, "trials", minimum=1)
    return st.integers(0, 2**63 - 1).map(lambda seed: corruption_schedule(length, trials, seed))
