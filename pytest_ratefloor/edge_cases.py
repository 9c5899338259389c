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

import hashlib
import math
from collections import OrderedDict
from collections.abc import Callable, Hashable, Iterable, Mapping
from dataclasses import dataclass
from functools import partial
from types import MappingProxyType
from typing import TYPE_CHECKING, NamedTuple, TypeAlias

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
    "PASSED",
    "SHORT_CASE_LIMIT",
    "SHORT_LENGTHS",
    "SPREAD_SYMBOLS",
    "WORD_BOUNDARY_LENGTHS",
    "EdgeCase",
    "EdgeCaseLengths",
    "EdgeCaseSetting",
    "PassedEdgeCases",
    "edge_case_inputs",
    "edge_case_lengths",
    "plan_edge_cases",
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


#: Supports already computed, by source class, spec and codec table (equal specs are
#: equal distributions); bounded, oldest out.
_SUPPORTS: OrderedDict[Hashable, np.ndarray] = OrderedDict()
_SUPPORTS_KEPT = 64


def _support(source: Source, codec_symbols: list[int] | None) -> np.ndarray:
    """Sorted symbols used for the symbol edge cases (see :func:`edge_case_inputs`),
    computed once per source spec and codec table."""
    key = (type(source).__qualname__, source.spec,
           None if codec_symbols is None else tuple(codec_symbols))
    known = _SUPPORTS.get(key)
    if known is None:
        known = _SUPPORTS[key] = _support_of(source, codec_symbols)
        known.flags.writeable = False
        while len(_SUPPORTS) > _SUPPORTS_KEPT:
            _SUPPORTS.popitem(last=False)
    return known


def _support_of(source: Source, codec_symbols: list[int] | None) -> np.ndarray:
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


class EdgeCase(NamedTuple):
    """One edge case, built only when it runs.

    ``key`` says what the input is: two cases with equal keys have equal
    inputs (the case's kind and length, the symbols it is made of, or a digest
    of the sample prefix it is taken from). ``probe`` marks the short cases that
    do not depend on the sample (the empty input, the single symbols, the
    alternation, every symbol once when that is short): they run in every
    check, and what the codec made of them joins the key under which the other
    cases are remembered (:class:`PassedEdgeCases`). ``make`` returns the
    int64 input, or ``None`` when the source cannot produce it.
    """

    name: str
    key: Hashable
    length: int
    probe: bool
    make: Callable[[], np.ndarray | None]


def _digest(symbols: np.ndarray) -> str:
    """A digest of ``symbols`` and their dtype (equal digests: equal values; the same
    values in another dtype only miss a chance to share)."""
    arr = np.ascontiguousarray(symbols)
    digest = hashlib.blake2b(f"{arr.dtype.str}:{arr.size}:".encode(), digest_size=16)
    digest.update(arr.data.cast("B"))
    return digest.hexdigest()


def _head(whole: Callable[[], np.ndarray], length: int) -> np.ndarray:
    return whole()[:length]


def plan_edge_cases(
    source: Source,
    sample: np.ndarray,
    seed: int = 0,
    codec_symbols: list[int] | None = None,
    lengths: EdgeCaseLengths = ALL_EDGE_CASES,
) -> list[EdgeCase]:
    """The edge cases of :func:`edge_case_inputs`, in its order, each built on demand.

    Nothing long is allocated here: the constant runs, the long prefixes (and
    the draw behind them when ``sample`` is shorter) are made by
    :attr:`EdgeCase.make`. A prefix is keyed by what it is cut from: the
    source's class and spec, ``seed`` and the length of the draw (``sample``
    is ``source.sample(len(sample), seed)``, or a fresh draw of the longest
    prefix when ``sample`` is shorter). Equal specs are equal distributions
    (a file's spec holds its hash) and a draw is fixed by its seed and length,
    as the ledger's sample fingerprints also rely on.
    """
    keeps = lengths.keeps
    cases: list[EdgeCase] = []
    if keeps(0):
        cases.append(EdgeCase("edge case 'empty input'", ("empty",), 0, True,
                              lambda: np.zeros(0, np.int64)))
    support = _support(source, codec_symbols)

    def checked(values: Callable[[], np.ndarray]) -> Callable[[], np.ndarray | None]:
        if source.memoryless:  # any string of symbols of the support has a probability > 0
            return values

        def make() -> np.ndarray | None:
            arr = values()
            return arr if _valid(source, arr) else None
        return make

    if len(support):
        low, high = int(support[0]), int(support[-1])
        ends = [low] if low == high else [low, high]
        if keeps(1):
            for s in ends:
                which = "smallest" if s == low else "largest"
                cases.append(EdgeCase(
                    f"edge case 'single {which} symbol {s}'", ("single", s), 1, True,
                    checked(partial(np.full, 1, s, np.int64))))
        if keeps(CONSTANT_RUN):
            for s in ends:
                cases.append(EdgeCase(
                    f"edge case 'constant run of {s}'", ("constant", s, CONSTANT_RUN),
                    CONSTANT_RUN, False,
                    checked(partial(np.full, CONSTANT_RUN, s, np.int64))))
        if low != high and keeps(ALTERNATING_RUN):
            cases.append(EdgeCase(
                f"edge case 'alternating {low}/{high}'",
                ("alternating", low, high, ALTERNATING_RUN), ALTERNATING_RUN, True,
                checked(lambda: np.where(np.arange(ALTERNATING_RUN) % 2 == 0, low, high)
                        .astype(np.int64))))
        everything = _spread(support, MAX_ALPHABET_CASE if len(support) <= MAX_ALPHABET_CASE
                             else SPREAD_SYMBOLS)
        if keeps(len(everything)):
            label = ("every symbol once" if len(everything) == len(support)
                     else "a spread of symbols")
            if source.alphabet_size is None:
                label = "a spread of symbols of the likely range"
            cases.append(EdgeCase(
                f"edge case '{label}' ({len(everything)} symbols)",
                ("symbols", _digest(everything)), len(everything),
                len(everything) <= SHORT_CASE_LIMIT, checked(lambda: everything)))
    # a source of fixed length (a corpus file) has no longer sample to take a prefix of
    available = getattr(source, "length", None)
    prefixes = [n for n in (*SHORT_LENGTHS, *WORD_BOUNDARY_LENGTHS) if keeps(n)
                and (available is None or n <= max(int(available), len(sample)))]
    if prefixes:
        longest = max(prefixes)
        drawn: list[np.ndarray] = []

        def long() -> np.ndarray:
            if len(sample) >= longest:
                return sample
            if not drawn:
                drawn.append(np.asarray(source.sample(longest, seed)))
            return drawn[0]

        # what the prefixes are cut from, named without reading it: the spec fixes the
        # distribution (and names a file by its hash), the seed and length fix the draw
        origin: Hashable = (type(source).__qualname__, source.spec, seed,
                            len(sample) if len(sample) >= longest else ("drawn", longest))
        for length in prefixes:
            cases.append(EdgeCase(
                f"edge case 'sample prefix of length {length}'", ("prefix", length, origin),
                length, False, partial(_head, long, length)))
    return cases


def edge_case_inputs(
    source: Source,
    sample: np.ndarray,
    seed: int = 0,
    codec_symbols: list[int] | None = None,
    lengths: EdgeCaseLengths = ALL_EDGE_CASES,
) -> list[tuple[str, np.ndarray]]:
    """The edge-case inputs for ``source``: a list of (name, array).

    * empty input;
    * length 1 with the smallest and with the largest symbol;
    * constant runs (70 000, past 2¹⁶) of the smallest and the largest symbol;
    * 1 000 symbols alternating smallest/largest;
    * prefixes of length 1…17 and 65 535, 65 536, 65 537 of a source sample
      (``sample`` if it is as long as the longest prefix kept, else
      ``source.sample(<that length>, seed)``; of the sample's dtype);
    * every symbol of a finite alphabet once, ascending (alphabets over
      65 536 symbols, and unbounded ones: an even spread of 4 096 symbols).

    "Smallest/largest symbol" and "every symbol" are taken from the support
    (positive probability) — for an unbounded alphabet from its likely range
    (all but 2⁻³⁰ of the mass) — and, for a codebook, from its table too.
    Cases that the source cannot produce (zero probability, e.g. a constant
    run through a forbidden Markov transition) are left out, so every input
    is valid for the source.

    Only the cases whose length ``lengths`` keeps are built (default: all);
    the order of the cases kept is that of the full list above. A check
    builds them one at a time through :func:`plan_edge_cases` and skips those
    the same codec already passed (:class:`PassedEdgeCases`).
    """
    cases = []
    for case in plan_edge_cases(source, sample, seed, codec_symbols, lengths):
        arr = case.make()
        if arr is not None:
            cases.append((case.name, arr))
    return cases


class PassedEdgeCases:
    """The edge cases a codec passed in this session, so that a check skips those it
    would only repeat.

    An entry's key is the codec's identity (the user's own objects — functions,
    codebook, command — held here so that their ids cannot be reused while the
    entry lives — with their settings), its name, version and layout, the
    digest of what it made of the probe cases of this check (see
    :class:`EdgeCase`) and the case's :attr:`EdgeCase.key`. So a case is
    skipped only for the very same input to the very same codec objects,
    which gave the very same output on the probe inputs in this check; a codec
    rebuilt, renamed, re-versioned or behaving differently on the probes runs
    every case again. Only passes are remembered: a failing case runs (and
    fails, with its own message) in every check that includes it.
    The entries are bounded (:attr:`limit`, least recently used first out).
    Under fork isolation the child sends the keys it passed back with its
    result and the parent remembers them (:func:`pytest_ratefloor.checks.run_check`).
    """

    def __init__(self, limit: int = 4096) -> None:
        self.limit = limit
        self._entries: OrderedDict[Hashable, tuple[object, ...]] = OrderedDict()

    def __len__(self) -> int:
        return len(self._entries)

    def __contains__(self, key: object) -> bool:
        if key in self._entries:
            self._entries.move_to_end(key)
            return True
        return False

    def remember(self, keys: Iterable[Hashable], refs: tuple[object, ...]) -> None:
        """Note ``keys`` as passed; ``refs`` are the objects whose ids the keys hold."""
        for key in keys:
            self._entries[key] = refs
            self._entries.move_to_end(key)
        while len(self._entries) > self.limit:
            self._entries.popitem(last=False)

    def clear(self) -> None:
        """Forget every pass (every edge case runs again)."""
        self._entries.clear()


#: The session's passed edge cases (one per process; each xdist worker has its own).
PASSED = PassedEdgeCases()
