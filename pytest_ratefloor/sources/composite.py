"""Sources built from other sources: random walks and piecewise concatenations.

:class:`RandomWalk` sums the symbols of a step source (``Xₜ = Xₜ₋₁ + Dₜ``):
its samples drift, but its information is exactly that of the steps, so its
entropy rate is the step's entropy. :class:`Piecewise` takes segments from
several sources in turn (a signal whose statistics change). Both sample
through the inner sources' own samplers (:mod:`pytest_ratefloor.sources.sampling`),
so they are as reproducible across numpy releases as those are; a piecewise
source seeds each piece with a :class:`numpy.random.SeedSequence` child,
whose output numpy keeps as stable as the bit generators seeded from it.
"""

from __future__ import annotations

import itertools
import math
from bisect import bisect_right
from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike

from pytest_ratefloor import validation
from pytest_ratefloor.sources.base import _INT64_MAX, Source, _as_symbols

__all__ = ["Piecewise", "RandomWalk"]

_INT64_MIN = -_INT64_MAX - 1


def _is_fixed(source: Source) -> bool:
    """Whether the source's sample is fixed data (a corpus) rather than a draw."""
    return bool(getattr(source, "fixed_sample", False))


def _check_source(value: object, name: str, where: str) -> Source:
    if not isinstance(value, Source):
        raise TypeError(validation.message(name, "a pytest_ratefloor source", value, where))
    return value


# --------------------------------------------------------------------------
# random walk


def _steps_of(x: np.ndarray, start: int) -> tuple[np.ndarray, np.ndarray]:
    """(steps xᵢ − xᵢ₋₁ with x₋₁ = start, mask of the steps that do not fit int64).

    int64 arithmetic wraps; a difference wrapped exactly when its sign
    disagrees with the order of the two symbols.
    """
    previous = np.empty_like(x)
    if x.size:
        previous[0] = start
        previous[1:] = x[:-1]
    steps = x - previous
    wrapped = (x >= previous) != (steps >= 0)
    return steps, wrapped


class RandomWalk(Source):
    """A random walk ``Xₜ = Xₜ₋₁ + Dₜ`` over the integers, steps ``Dₜ`` from ``step``.

    ``X₀ = start`` is fixed and not emitted: a sample of ``n`` symbols is
    ``X₁ … Xₙ``, i.e. ``n`` steps, ``Xₜ = start + D₁ + … + Dₜ``. Then

    * ``information(x) = step.information(x − [start, x₁, …, xₙ₋₁])``: the
      steps' information, exactly (the walk and its steps determine each other
      given ``start``), so the ``"sample"`` floor is exact;
    * ``entropy = step.entropy`` (an entropy *rate*), and ``n·entropy`` is the
      mean of ``information(sample(n))`` for a memoryless step; ``varentropy``
      and ``varentropy_rate`` are the step's;
    * ``sample(n, seed) = start + cumsum(step.sample(n, seed))``, the step's
      own words (reproducible as the step's sampler is); a walk that leaves
      the int64 range raises ``OverflowError`` naming where.

    ``step`` may be any source (``two_sided_geometric(0.8)``, a categorical of
    ±1, even a Markov chain of steps). Bounds: the walk is unbounded unless
    the steps cannot go down (``min_symbol = start + step.min_symbol`` when
    that is ``>= 0``) or up (likewise ``max_symbol``). ``pmf_table`` is the law
    of the first symbol ``X₁ = start + D₁`` (a walk has no stationary law), so
    ``ByteCodec(symbol="auto")`` would size its words from one step: name a
    layout wide enough for the walk instead (``"i32le"``, ``"zigzag-u16le"``).
    The ``"huffman"`` floor is the step's (a code for the differences), the
    ``"adaptive"`` floor the step's KT length of the differences.
    """

    def __init__(self, step: Source, start: int = 0) -> None:
        where = "random_walk"
        self.step = _check_source(step, "step", where)
        self.start = validation.integer(
            start, "start", minimum=_INT64_MIN, maximum=_INT64_MAX, where=where
        )
        down, up = step.min_symbol, step.max_symbol
        lo = self.start + down if down is not None and down >= 0 else None
        hi = self.start + up if up is not None and up <= 0 else None
        params: dict[str, float | int] = {"start": self.start}
        params.update({f"step.{k}": v for k, v in step.params.items()})
        super().__init__(
            family="random_walk",
            spec=f"random_walk(step={step.spec},start={self.start})",
            params=params,
            alphabet_size=None if lo is None or hi is None else hi - lo + 1,
            min_symbol=lo,
            max_symbol=hi,
            is_estimate=step.is_estimate,
            memoryless=False,
        )
        self.fixed_sample = _is_fixed(step)

    def _compute_entropy(self) -> float:
        return self.step.entropy

    def _compute_varentropy(self) -> float:
        return self.step.varentropy

    def _compute_varentropy_rate(self) -> float:
        """The step's: the walk's information is the steps' information."""
        return self.step.varentropy_rate

    def _sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        steps = np.asarray(self.step._sample(n, bitgen), dtype=np.int64)
        if n == 0:
            return steps
        lo, hi = self.step.min_symbol, self.step.max_symbol
        if lo is None or hi is None:  # the steps drawn, then (Python integers: no overflow)
            lo, hi = int(steps.min()), int(steps.max())
        if abs(self.start) + n * max(abs(lo), abs(hi)) <= _INT64_MAX:
            return self.start + np.cumsum(steps)  # cannot leave int64
        chain = np.empty(n + 1, dtype=np.int64)
        chain[0] = self.start
        chain[1:] = steps
        walk = np.cumsum(chain)  # int64 arrays wrap silently; found below
        before, after = walk[:-1], walk[1:]
        up, down = (steps > 0) & (after < before), (steps < 0) & (after > before)
        wrapped = np.flatnonzero(up | down)
        if wrapped.size:
            i = int(wrapped[0])
            raise OverflowError(
                f"{self.spec}: the walk leaves the int64 range at index {i} of {n} "
                f"(from {int(before[i])} by a step of {int(steps[i])}); draw fewer symbols or "
                "use a step source of smaller magnitude"
            )
        return after

    def _self_information(self, x: np.ndarray) -> np.ndarray:
        steps, wrapped = _steps_of(x, self.start)
        info = np.asarray(self.step._self_information(steps), dtype=np.float64)
        if wrapped.any():
            info = info.copy()
            info[wrapped] = np.inf
        return info

    def _why_impossible(self, x: np.ndarray, i: int) -> str:
        steps, wrapped = _steps_of(x, self.start)
        before = self.start if i == 0 else int(x[i - 1])
        if wrapped[i]:
            return (
                f"the step from {before} to {int(x[i])} at index {i} does not fit int64 "
                "(no step source draws it)"
            )
        return (
            f"the step {int(steps[i])} from {before} to {int(x[i])} at index {i} is impossible "
            f"under {self.step.spec} ({self.step._why_impossible(steps, i)})"
        )

    def _pmf_table(self, tail: float) -> tuple[np.ndarray, np.ndarray]:
        """The law of the first symbol ``X₁ = start + D₁``."""
        symbols, probs = self.step.pmf_table(tail)
        return np.asarray(symbols, dtype=np.int64) + self.start, probs

    def optimal_code_rate(self) -> float:
        """The step's best symbol code, applied to the differences."""
        return self.step.optimal_code_rate()

    def adaptive_code_length(self, sample: ArrayLike) -> float:
        """The step's KT code length of the differences ``xᵢ − xᵢ₋₁`` (``x₋₁ = start``)."""
        steps, _ = _steps_of(_as_symbols(sample), self.start)
        return self.step.adaptive_code_length(steps)


# --------------------------------------------------------------------------
# piecewise


class Piecewise(Source):
    """Segments from several sources in turn: ``L₁`` symbols of the first, ``L₂`` of the next, …

    ``pieces`` is a sequence of ``(source, length)`` pairs (length >= 1); the
    *cycle* is ``C = L₁ + … + Lₘ`` symbols. With ``repeat=True`` the list is
    cycled until ``n`` symbols are drawn (the last segment cut short);
    with ``repeat=False`` the pieces play once and ``n`` must be at most ``C``.
    Segment ``g`` (counted over all cycles) is piece ``g mod m``. Each segment
    starts its source afresh: a chain or a walk restarts at its initial law
    (start value), a corpus gives its first symbols again.

    * ``information(x)``: the sum of each segment's information under its own
      source, exactly (``Σ_g piece_g.information(x[segment g])``), so the
      ``"sample"`` floor is exact (and a hard floor, unless a piece is fixed
      data such as a corpus: then ``fixed_sample`` is True).
    * ``entropy``: the length-weighted mean ``Σⱼ Lⱼ·Hⱼ / C`` over one cycle.
      ``n·entropy`` (the ``"entropy"`` floor) equals the mean of
      ``information(sample(n))`` when ``n`` is a whole number of cycles and
      every piece is memoryless; for other ``n`` the exact mean is
      :meth:`entropy_bits` ``(n)`` (the partial cycle counted by what it
      holds). For ``repeat=False`` the "cycle" is the one pass.
    * ``varentropy``: the variance of one symbol's information at a uniform
      position of the cycle, ``Σⱼ (Lⱼ/C)·(Vⱼ + (Hⱼ − H)²)``; ``varentropy_rate``
      ``Σⱼ Lⱼ·rⱼ / C`` with ``rⱼ`` the pieces' rates (exact for memoryless
      pieces: independent segments add their variances).
    * ``sample(n, seed)``: piece ``j`` draws from its own bit generator
      ``PCG64(SeedSequence(w, spawn_key=(j,)))``, ``w`` the first raw word of
      the sample's ``PCG64(seed)``; its segments take consecutive stretches of
      that stream (a memoryless piece draws all its segments' symbols in one
      call: one raw word per symbol either way). A change to one piece's
      sampler therefore moves only that piece's segments, and
      ``sample(n)[:k] == sample(k)``.

    ``pmf_table`` is the mixture ``Σⱼ (Lⱼ/C)·Pⱼ`` (the law of the symbol at a
    uniform position of the cycle); the bounds are the pieces' extremes and
    ``alphabet_size`` the size of the range they span. The ``"huffman"``
    floor is ``Σⱼ (Lⱼ/C)·(piece j's best symbol code)``; the ``"adaptive"``
    floor one KT estimator per piece (a memoryless piece's estimator runs on
    across its segments; a piece with memory restarts with each segment).
    """

    def __init__(self, pieces: Sequence[tuple[Source, int]], repeat: bool = True) -> None:
        where = "piecewise"
        rule = "a non-empty list of (source, length) pairs"
        if isinstance(pieces, (str, bytes)) or not isinstance(pieces, Sequence):
            raise TypeError(validation.message("pieces", rule, pieces, where))
        if not pieces:
            raise ValueError(validation.message("pieces", rule, pieces, where))
        sources: list[Source] = []
        lengths: list[int] = []
        for i, pair in enumerate(pieces):
            if not isinstance(pair, (tuple, list)) or len(pair) != 2:
                raise TypeError(
                    validation.message(f"pieces[{i}]", "a (source, length) pair", pair, where)
                )
            sources.append(_check_source(pair[0], f"pieces[{i}][0]", where))
            lengths.append(validation.integer(pair[1], f"pieces[{i}][1]", minimum=1, where=where))
            held = getattr(sources[-1], "length", None)  # a corpus holds this many symbols
            if _is_fixed(sources[-1]) and isinstance(held, int) and lengths[-1] > held:
                raise ValueError(
                    f"{where}: pieces[{i}][1] must be at most the {held} symbols of "
                    f"{sources[-1].spec}, got {lengths[-1]}"
                )
        self.repeat = validation.flag(repeat, "repeat")
        self.pieces: list[tuple[Source, int]] = list(zip(sources, lengths))
        self.cycle = sum(lengths)
        # piece j covers positions [starts[j], starts[j+1]) of each cycle
        self._starts = list(itertools.accumulate(lengths, initial=0))
        lows = [s.min_symbol for s in sources]
        highs = [s.max_symbol for s in sources]
        lo = None if any(v is None for v in lows) else min(v for v in lows if v is not None)
        hi = None if any(v is None for v in highs) else max(v for v in highs if v is not None)
        inner = ",".join(f"{s.spec}*{length}" for s, length in self.pieces)
        super().__init__(
            family="piecewise",
            spec=f"piecewise([{inner}],repeat={self.repeat})",
            params={"pieces": len(sources), "cycle": self.cycle, "repeat": int(self.repeat)},
            alphabet_size=(
                None if lo is None or hi is None or any(s.alphabet_size is None for s in sources)
                else hi - lo + 1
            ),
            min_symbol=lo,
            max_symbol=hi,
            is_estimate=any(s.is_estimate for s in sources),
            memoryless=False,
        )
        self.fixed_sample = any(_is_fixed(s) for s in sources)

    # -- the schedule of segments

    def _covered(self, n: int) -> int:
        """How many of the first ``n`` positions have a segment (all, unless ``repeat=False``)."""
        return n if self.repeat else min(n, self.cycle)

    def _positions(self, j: int, n: int) -> np.ndarray:
        """The positions (ascending) that piece ``j`` fills among the first ``n``."""
        last = self._covered(n)
        lo, hi = self._starts[j], self._starts[j + 1]
        full, rest = divmod(last, self.cycle)
        cycles = np.arange(full, dtype=np.int64)[:, None] * self.cycle
        inside = np.arange(lo, hi, dtype=np.int64)[None, :]
        positions = (cycles + inside).ravel()
        if rest > lo:
            base = full * self.cycle
            positions = np.concatenate(
                [positions, np.arange(base + lo, base + min(hi, rest), dtype=np.int64)]
            )
        return positions

    def _spans(self, j: int, n: int) -> list[tuple[int, int]]:
        """The segments ``(begin, end)`` of piece ``j`` among the first ``n`` positions."""
        last = self._covered(n)
        lo, hi = self._starts[j], self._starts[j + 1]
        return [
            (begin, min(begin + hi - lo, last)) for begin in range(lo, last, self.cycle)
        ]

    def _check_n(self, n: int) -> None:
        if not self.repeat and n > self.cycle:
            raise ValueError(
                f"{self.spec}: n={n} is more than the {self.cycle} symbols of the pieces; "
                "with repeat=False the pieces play once (pass repeat=True to cycle them)"
            )

    # -- figures

    def _weighted(self, values: Sequence[float]) -> float:
        return math.fsum(v * length for v, (_, length) in zip(values, self.pieces)) / self.cycle

    def _compute_entropy(self) -> float:
        return self._weighted([s.entropy for s, _ in self.pieces])

    def _compute_varentropy(self) -> float:
        h = self.entropy
        return self._weighted([s.varentropy + (s.entropy - h) ** 2 for s, _ in self.pieces])

    def _compute_varentropy_rate(self) -> float:
        """``Σⱼ Lⱼ·rⱼ / C``: independent segments add their variances (exact for memoryless
        pieces; a piece with memory adds ``O(1)`` per segment for its fresh start)."""
        return self._weighted([s.varentropy_rate for s, _ in self.pieces])

    def entropy_bits(self, n: int) -> float:
        """``Σ`` over the segments that ``n`` symbols cover of ``(segment length)·Hⱼ``, in bits.

        The mean of ``information(sample(n))`` exactly when every piece is
        memoryless, for any ``n`` (``n·entropy`` is that only for whole
        cycles). A segment of a piece with memory is counted at its entropy
        rate; its first symbols, drawn afresh, cost ``O(1)`` bits more or less.

        :raises ValueError: ``repeat=False`` and ``n`` is more than the pieces hold.
        """
        count = validation.sample_size(n, minimum=0)
        self._check_n(count)
        full, rest = divmod(count, self.cycle)
        used = [
            full * length + max(0, min(self._starts[j + 1], rest) - self._starts[j])
            for j, (_, length) in enumerate(self.pieces)
        ]
        return math.fsum(u * s.entropy for u, (s, _) in zip(used, self.pieces))

    # -- sampling and information

    def _iid(self, source: Source) -> bool:
        """Whether a piece's segments may be drawn in one call (i.i.d. draws, not fixed data)."""
        return source.memoryless and not _is_fixed(source)

    def _sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        self._check_n(n)
        out = np.empty(n, dtype=np.int64)
        if n == 0:
            return out
        word = int(bitgen.random_raw(1)[0])
        for j, (source, _) in enumerate(self.pieces):
            stream = np.random.PCG64(np.random.SeedSequence(word, spawn_key=(j,)))
            if self._iid(source):  # one raw word per symbol: one call draws every segment
                positions = self._positions(j, n)
                if positions.size:
                    out[positions] = source._sample(int(positions.size), stream)
            else:  # each segment restarts the source, as its information does
                for begin, end in self._spans(j, n):
                    out[begin:end] = source._sample(end - begin, stream)
        return out

    def _self_information(self, x: np.ndarray) -> np.ndarray:
        info = np.full(x.shape, np.inf)  # past the pieces (repeat=False): impossible
        for j, (source, _) in enumerate(self.pieces):
            if source.memoryless:  # per-symbol information does not depend on the segment
                positions = self._positions(j, x.size)
                info[positions] = source._self_information(x[positions])
            else:
                for begin, end in self._spans(j, x.size):
                    info[begin:end] = source._self_information(x[begin:end])
        return info

    def _why_impossible(self, x: np.ndarray, i: int) -> str:
        if i >= self._covered(x.size):
            return (
                f"index {i} is past the {self.cycle} symbols of the pieces "
                "(repeat=False: the pieces play once)"
            )
        c, phase = divmod(i, self.cycle)
        j = bisect_right(self._starts, phase) - 1
        begin = c * self.cycle + self._starts[j]
        end = min(c * self.cycle + self._starts[j + 1], x.size)
        source = self.pieces[j][0]
        segment = c * len(self.pieces) + j
        head = f"segment {segment} (piece {j}, {source.spec}, indices {begin}..{end - 1}"
        if source.memoryless:  # its reason depends on the symbol alone: keep the sample's index
            return f"{head}): {source._why_impossible(x, i)}"
        reason = source._why_impossible(x[begin:end], i - begin)
        return f"{head}; indices below count from the segment's start): {reason}"

    def _pmf_table(self, tail: float) -> tuple[np.ndarray, np.ndarray]:
        """The mixture ``Σⱼ (Lⱼ/C)·Pⱼ``; it misses at most ``tail`` (each piece does)."""
        tables = [(s.pmf_table(tail), length / self.cycle) for s, length in self.pieces]
        allsyms = np.concatenate([np.asarray(t[0], dtype=np.int64) for t, _ in tables])
        allprobs = np.concatenate([np.asarray(t[1], dtype=np.float64) * w for t, w in tables])
        symbols, where = np.unique(allsyms, return_inverse=True)
        probs = np.bincount(where.ravel(), weights=allprobs, minlength=symbols.size)
        return symbols, probs

    def optimal_code_rate(self) -> float:
        """``Σⱼ (Lⱼ/C)·`` piece j's best symbol code rate (the coder knows the schedule)."""
        return self._weighted([s.optimal_code_rate() for s, _ in self.pieces])

    def adaptive_code_length(self, sample: ArrayLike) -> float:
        """One KT estimator per piece: memoryless pieces across all their segments, pieces
        with memory restarted at each segment."""
        x = _as_symbols(sample)
        self._check_n(x.size)
        total = 0.0
        for j, (source, _) in enumerate(self.pieces):
            if source.memoryless:
                positions = self._positions(j, x.size)
                if positions.size:
                    total += source.adaptive_code_length(x[positions])
            else:
                spans = self._spans(j, x.size)
                total += math.fsum(source.adaptive_code_length(x[b:e]) for b, e in spans)
        return total
