"""Edge-case inputs: the short, long and boundary inputs every codec must round-trip.

Chosen to hit what breaks real codecs (see the failure classes in the
project's notes): an empty input, single symbols, constant runs longer than
2¹⁶ (16-bit run or length counters overflow on them), alternation, every
length 1…17 (each residue of 8 and 16 bits) and the lengths around 2¹⁶, and
every symbol of the alphabet once.

A check may run all of them, none, those up to a maximum length, or a named
set (:data:`EDGE_CASE_SETS`); :func:`edge_case_lengths` turns the ``edge_cases``
option into the :class:`EdgeCaseLengths` kept, and :func:`edge_case_inputs`
builds only the cases kept (the long ones, and the long sample draw behind
the prefixes around 2¹⁶, cost nothing when they are left out).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import TYPE_CHECKING, TypeAlias

import numpy as np

if TYPE_CHECKING:
    from pytest_ratefloor.sources import Source

__all__ = [
    "ALL_EDGE_CASES",
    "ALTERNATING_RUN",
    "CONSTANT_RUN",
    "EDGE_CASE_SETS",
    "LIKELY_TAIL",
    "MAX_ALPHABET_CASE",
    "SHORT_CASE_LIMIT",
    "SHORT_LENGTHS",
    "SPREAD_SYMBOLS",
    "WORD_BOUNDARY_LENGTHS",
    "EdgeCaseLengths",
    "EdgeCaseSetting",
    "edge_case_inputs",
    "edge_case_lengths",
]

#: Longer than 2¹⁶, so a 16-bit run or length counter overflows on it.
CONSTANT_RUN = 70_000
ALTERNATING_RUN = 1_000
SHORT_LENGTHS = tuple(range(1, 18))
WORD_BOUNDARY_LENGTHS = (65_535, 65_536, 65_537)
#: Finite alphabets up to this size get an "every symbol once" case in full;
#: larger (and unbounded) alphabets get an evenly spread subset of this many.
MAX_ALPHABET_CASE = 65_536
SPREAD_SYMBOLS = 4096
#: An unbounded alphabet's "likely range": all but this much probability mass.
LIKELY_TAIL = 2.0**-30
#: The longest case of the ``"short"`` set (the longest alternating run and
#: spread of symbols fit; the constant runs and the prefixes around 2¹⁶ do not).
SHORT_CASE_LIMIT = 4096

#: The ``edge_cases`` option: ``True`` (all), ``False`` (none), a maximum
#: length (an integer >= 1) or the name of a set in :data:`EDGE_CASE_SETS`.
EdgeCaseSetting: TypeAlias = bool | int | str


@dataclass(frozen=True)
class EdgeCaseLengths:
    """The edge cases a check runs: those whose length is in ``[shortest, longest]``.

    ``longest=None`` means no upper bound. The arguments are already
    validated (see :class:`pytest_ratefloor.checks.CheckPlan`).
    """

    shortest: int = 0
    longest: int | None = None

    def keeps(self, length: int) -> bool:
        """Whether a case of ``length`` symbols is run."""
        return self.shortest <= length and (self.longest is None or length <= self.longest)


#: Every edge case (``edge_cases=True``).
ALL_EDGE_CASES = EdgeCaseLengths()

#: The named sets of edge cases, by the lengths they keep. ``"short"`` and
#: ``"long"`` split the full set in two: ``"short"`` + ``"long"`` = ``True``.
EDGE_CASE_SETS: Mapping[str, EdgeCaseLengths] = MappingProxyType({
    # empty input, one smallest / one largest symbol, the 1 000-symbol
    # alternation, every symbol once when the support has at most 4 096 symbols
    # (and the 4 096-symbol spread of a larger or unbounded alphabet), sample
    # prefixes of 1...17: at most about 5 250 symbols in all, a few milliseconds
    "short": EdgeCaseLengths(0, SHORT_CASE_LIMIT),
    # the two 70 000-symbol constant runs, the prefixes of 65 535, 65 536 and
    # 65 537 symbols, every symbol once when the support has 4 097...65 536
    # symbols: 336 608 symbols or more, about 3.4 samples of the default n
    "long": EdgeCaseLengths(SHORT_CASE_LIMIT + 1, None),
})


def edge_case_lengths(setting: EdgeCaseSetting) -> EdgeCaseLengths | None:
    """The cases a validated ``edge_cases`` option keeps (``None``: no edge cases)."""
    if setting is True:
        return ALL_EDGE_CASES
    if setting is False:
        return None
    if isinstance(setting, str):
        return EDGE_CASE_SETS[setting]
    return EdgeCaseLengths(0, int(setting))


def _spread(symbols: np.ndarray, count: int) -> np.ndarray:
    if len(symbols) <= count:
        return symbols
    return symbols[np.unique(np.linspace(0, len(symbols) - 1, count).round().astype(np.intp))]


def _support(source: Source, codec_symbols: list[int] | None) -> np.ndarray:
    """Sorted symbols used for the symbol edge cases (see :func:`edge_case_inputs`)."""
    size = source.alphabet_size
    if size is not None and size <= MAX_ALPHABET_CASE:
        symbols, probs = source.pmf_table()
        symbols = np.asarray(symbols, dtype=np.int64)[np.asarray(probs) > 0]
    elif size is not None and source.min_symbol is not None and source.max_symbol is not None:
        symbols = np.unique(
            np.linspace(source.min_symbol, source.max_symbol, SPREAD_SYMBOLS).round()
        ).astype(np.int64)
    else:
        symbols, probs = source.pmf_table(tail=LIKELY_TAIL)
        symbols = np.asarray(symbols, dtype=np.int64)[np.asarray(probs) > 0]
    symbols = np.unique(symbols)
    if codec_symbols is not None:
        symbols = np.intersect1d(symbols, np.asarray(codec_symbols, dtype=np.int64))
    return symbols


def _valid(source: Source, symbols: np.ndarray) -> bool:
    try:
        return math.isfinite(float(source.information(symbols)))
    except (ValueError, IndexError, KeyError, OverflowError):
        return False


def edge_case_inputs(
    source: Source,
    sample: np.ndarray,
    seed: int = 0,
    codec_symbols: list[int] | None = None,
    lengths: EdgeCaseLengths = ALL_EDGE_CASES,
) -> list[tuple[str, np.ndarray]]:
    """The edge-case inputs for ``source``: a list of (name, int64 array).

    * empty input;
    * length 1 with the smallest and with the largest symbol;
    * constant runs (70 000, past 2¹⁶) of the smallest and the largest symbol;
    * 1 000 symbols alternating smallest/largest;
    * prefixes of length 1…17 and 65 535, 65 536, 65 537 of a source sample
      (``sample`` if it is as long as the longest prefix kept, else
      ``source.sample(<that length>, seed)``);
    * every symbol of a finite alphabet once, ascending (alphabets over
      65 536 symbols, and unbounded ones: an even spread of 4 096 symbols).

    "Smallest/largest symbol" and "every symbol" are taken from the support
    (positive probability) — for an unbounded alphabet from its likely range
    (all but 2⁻³⁰ of the mass) — and, for a codebook, from its table too.
    Cases that the source cannot produce (zero probability, e.g. a constant
    run through a forbidden Markov transition) are left out, so every input
    is valid for the source.

    Only the cases whose length ``lengths`` keeps are built (default: all);
    the order of the cases kept is that of the full list above.
    """
    keeps = lengths.keeps
    cases: list[tuple[str, np.ndarray]] = []
    if keeps(0):
        cases.append(("edge case 'empty input'", np.zeros(0, np.int64)))
    candidates: list[tuple[str, np.ndarray]] = []
    support = _support(source, codec_symbols)
    if len(support):
        low, high = int(support[0]), int(support[-1])
        ends = [low] if low == high else [low, high]
        if keeps(1):
            for s in ends:
                which = "smallest" if s == low else "largest"
                candidates.append(
                    (f"edge case 'single {which} symbol {s}'", np.array([s], np.int64)))
        if keeps(CONSTANT_RUN):
            for s in ends:
                candidates.append(
                    (f"edge case 'constant run of {s}'", np.full(CONSTANT_RUN, s, np.int64)))
        if low != high and keeps(ALTERNATING_RUN):
            alt = np.where(np.arange(ALTERNATING_RUN) % 2 == 0, low, high).astype(np.int64)
            candidates.append((f"edge case 'alternating {low}/{high}'", alt))
        everything = _spread(support, MAX_ALPHABET_CASE if len(support) <= MAX_ALPHABET_CASE
                             else SPREAD_SYMBOLS)
        if keeps(len(everything)):
            label = ("every symbol once" if len(everything) == len(support)
                     else "a spread of symbols")
            if source.alphabet_size is None:
                label = "a spread of symbols of the likely range"
            candidates.append((f"edge case '{label}' ({len(everything)} symbols)", everything))
    cases.extend((name, arr) for name, arr in candidates if _valid(source, arr))
    # a source of fixed length (a corpus file) has no longer sample to take a prefix of
    available = getattr(source, "length", None)
    prefixes = [n for n in (*SHORT_LENGTHS, *WORD_BOUNDARY_LENGTHS) if keeps(n)
                and (available is None or n <= max(int(available), len(sample)))]
    if prefixes:
        longest = max(prefixes)
        long = sample if len(sample) >= longest else np.asarray(source.sample(longest, seed))
        for length in prefixes:
            cases.append((f"edge case 'sample prefix of length {length}'", long[:length]))
    return cases
