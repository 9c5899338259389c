"""Raw PCG64 words to symbols: the integer arithmetic every source samples with.

Sampling contract
-----------------
``sample(n, seed)`` draws raw 64-bit words from ``numpy.random.PCG64(seed)``
(``random_raw``) and turns them into symbols with this module's own integer
arithmetic. numpy promises a stable stream only for its bit generators, not
for the distribution methods of ``Generator``, so none of those is used.

A memoryless source gives every symbol an integer *mass*: the number of the
2**64 possible words that map to it, fixed once per source from cumulative
thresholds ``T[i] ~ 2**64 * P(first i+1 symbols)`` computed with exact
rational or integer arithmetic (or with :mod:`decimal`, which is software
arithmetic and gives the same digits everywhere). Word ``u`` then becomes
symbol number ``j = #{i : T[i] <= u}`` (the inverse CDF, through a guide
table on the word's top 16 bits), or, for long tables, goes through an alias
table over the same masses. Either way a word is only ever compared with
integers, so no libm or SIMD rounding difference can change a sample, and
one word gives one symbol, so ``sample(n)[:m] == sample(m)``. Each symbol is
drawn with probability within about ``2**-64`` of its exact probability
(Zipf: within a relative ``2**-39`` plus ``2**-64``, see
:class:`~pytest_ratefloor.sources.Zipf`);
mass below ``2**-64`` in the far tail of an unbounded family is what a single
64-bit word cannot express, and those symbols are never drawn. Chains (Markov,
empirical of order k > 0) draw one word per symbol too, in a loop over time
(:mod:`pytest_ratefloor.sources.chains`).

This module holds the pieces: exact integer weights and thresholds, the
multiply-high helpers, the inverse CDF with its guide and alias tables
(:class:`_InverseCdf`), the geometric tables and the logarithm counter with
its exact fix-up (:class:`_GeometricCounter`), and chunked drawing.
"""

from __future__ import annotations

import decimal
import sys
from collections.abc import Callable, Iterator, Sequence
from decimal import Decimal
from fractions import Fraction

import numpy as np

_WORD = 1 << 64  # number of distinct raw words
_INT64_MIN = -(1 << 63)
_LOW48 = (1 << 48) - 1  # a word's bits below the top 16
_CHUNK = 1 << 16  # words per step: keeps the working arrays in cache


# --------------------------------------------------------------------------
# exact integer weights and thresholds


def _exact_weights(values: Sequence[float]) -> list[int]:
    """Integers proportional to the given non-negative floats, exactly."""
    ratios = [float(v).as_integer_ratio() for v in values]
    common = max(den for _, den in ratios)  # every denominator is a power of two
    return [num * (common // den) for num, den in ratios]


def _thresholds_from_weights(weights: Sequence[int]) -> list[int]:
    """Cumulative thresholds floor(2**64 * W_i / W) of integer weights (exact)."""
    total = sum(weights)
    out: list[int] = []
    cumulative = 0
    for w in weights[:-1]:
        cumulative += w
        out.append((cumulative << 64) // total)
    return out


def _decimal_context(prec: int) -> decimal.Context:
    return decimal.Context(prec=prec, Emin=decimal.MIN_EMIN, Emax=decimal.MAX_EMAX)


# --------------------------------------------------------------------------
# turning raw words into symbols


def _top16(words: np.ndarray) -> np.ndarray:
    """The top 16 bits of each uint64 word, as a strided view (no copy)."""
    halves = words.view(np.uint16)
    return halves[3::4] if sys.byteorder == "little" else halves[0::4]


def _uniform_below_2_32(words: np.ndarray, k: int) -> np.ndarray:
    """floor(words * k / 2**64) for k < 2**32 from the high 32 bits of each word.

    With a = (word >> 32) * k, floor(a / 2**32) is the answer unless the low 32
    bits of a are above 2**32 - k (probability below k / 2**32); those words
    are recomputed with the full product.
    """
    halves = words.view(np.uint32)
    little = sys.byteorder == "little"
    high = halves[1::2] if little else halves[0::2]
    product = high * np.uint64(k)
    out = (product >> np.uint64(32)).view(np.int64)
    product_halves = product.view(np.uint32)
    low = product_halves[0::2] if little else product_halves[1::2]
    carry = np.flatnonzero(low > np.uint32((1 << 32) - k))
    if carry.size:
        out[carry] = _mulhi(words[carry], k)
    return out


def _mulhi(words: np.ndarray, k: int) -> np.ndarray:
    """floor(words * k / 2**64) for uint64 words and 1 <= k < 2**64, exactly."""
    low32 = np.uint64(0xFFFFFFFF)
    s32 = np.uint64(32)
    k_lo = np.uint64(k & 0xFFFFFFFF)
    k_hi = np.uint64(k >> 32)
    w_lo = words & low32
    w_hi = words >> s32
    cross = (w_lo * k_lo) >> s32
    hl = w_hi * k_lo
    cross += hl & low32
    cross += w_lo * k_hi  # cannot overflow: the three terms sum to < 2**64
    high = w_hi * k_hi
    high += hl >> s32
    high += cross >> s32
    return high.astype(np.int64)


class _InverseCdf:
    """Exact inverse CDF on raw words: ``values[#{i : thresholds[i] <= word}]``.

    ``thresholds`` are non-decreasing integers in [0, 2**64]; those equal to
    2**64 can never be reached by a word and are dropped. A 65536-cell guide
    table on the top 16 bits of the word answers every word whose cell holds
    no threshold; the rest go to ``resolve`` (default: binary search over the
    thresholds).

    When more than 1/16 of the cells hold thresholds (long tables) and there
    are at most 65536 symbols, the same integer masses T[i] - T[i-1] are
    drawn with Walker's alias method instead (Walker 1977; built exactly in
    integers the way Vose 1991 describes; from memory): word u goes to bucket
    u >> 48 and to the bucket's larger or smaller share by comparing u mod 2**48
    with the bucket's integer cut. Either way every symbol gets exactly its mass.
    Longer tables keep the inverse CDF (their samples were always drawn that
    way) in the same layout (:meth:`_build_positional`), and so does an
    ``ordered`` table (the chain sampler needs the index of the word's
    interval, not only a symbol of the right mass). A cell holding two or
    more thresholds is split again on the word's next bits into about two
    sub-cells per threshold (:meth:`_refine`), so even a table of 2**20
    symbols or more resolves almost every word with one or two lookups and
    one comparison; any answer is the same ``#{i : T[i] <= u}``.
    """

    def __init__(
        self,
        thresholds: Sequence[int],
        values: np.ndarray,
        resolve: Callable[[np.ndarray], np.ndarray] | None = None,
        *,
        ordered: bool = False,
    ) -> None:
        kept = [t for t in thresholds if t < _WORD]
        self.thresholds = np.array(kept, dtype=np.uint64)
        self.values = np.asarray(values[: len(kept) + 1], dtype=np.int64)
        self._resolve = resolve or self._search
        self._ordered = ordered
        self._guide: np.ndarray | None = None
        self._first = np.zeros(0, dtype=np.intp)  # per guide cell: thresholds at or below its start
        self._inside = np.zeros(0, dtype=np.intp)  # per guide cell: thresholds inside it
        self._sentinel = 0
        self._alias: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None
        self._positional = False  # the alias layout holds the inverse CDF (long tables)
        #: cells holding 2+ thresholds, split again (see _refine): per cell a base and a
        #: shift (a word's entry is its bits above the shift plus the base); per sub-cell
        #: the thresholds at or below its start (one more entry closes each cell)
        self._refined: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None

    def _build_alias(self) -> None:
        """Integer alias table over 65536 buckets of 2**48 words each."""
        bounds = [0, *self.thresholds.tolist(), _WORD]
        mass = [bounds[i + 1] - bounds[i] for i in range(len(bounds) - 1)]
        buckets = 1 << 16
        capacity = 1 << 48
        mass += [0] * (buckets - len(mass))
        cut = [capacity] * buckets
        alias = list(range(buckets))
        small = [i for i in range(buckets) if mass[i] < capacity]
        large = [i for i in range(buckets) if mass[i] >= capacity]
        while small and large:
            low, high = small.pop(), large.pop()
            cut[low], alias[low] = mass[low], high
            mass[high] -= capacity - mass[low]
            (small if mass[high] < capacity else large).append(high)
        symbol = np.zeros(buckets, dtype=np.int64)
        symbol[: self.values.size] = self.values
        first = np.arange(buckets)
        second = np.array(alias)
        cuts = np.array(cut, dtype=np.uint64)
        # put the larger share of each bucket first, so most words need one lookup
        swap = cuts < np.uint64(capacity // 2)
        first[swap], second[swap] = second[swap], first[swap]
        cuts[swap] = np.uint64(capacity) - cuts[swap]
        # compare whole words: u >= (bucket << 48) + cut  <=>  u mod 2**48 >= cut;
        # a full bucket (cut = 2**48) cannot hold that limit, so both its shares
        # name the same symbol and any limit will do
        full = cuts == np.uint64(capacity)
        second[full] = first[full]
        starts = np.arange(buckets, dtype=np.uint64) << np.uint64(48)
        limits = starts | np.uint64(_LOW48)
        limits[~full] = starts[~full] + cuts[~full]
        cut16 = np.minimum(cuts >> np.uint64(32), np.uint64(0xFFFF)).astype(np.uint16)
        self._alias = (limits, cut16, np.concatenate([symbol[first], symbol[second]]))

    def _draw_alias(self, words: np.ndarray) -> np.ndarray:
        assert self._alias is not None
        limits, cut16, shares = self._alias
        halves = words.view(np.uint16)
        little = sys.byteorder == "little"
        bucket = (halves[3::4] if little else halves[0::4]).astype(np.intp)
        position = halves[2::4] if little else halves[1::4]  # bits 32..47 of the word
        # the top 16 of the 48 bits below the bucket decide unless they equal the cut's
        cut = np.take(cut16, bucket)
        over = position > cut
        tie = np.flatnonzero(position == cut)
        if tie.size:
            over[tie] = words[tie] >= limits[bucket[tie]]
        bucket += over.astype(np.intp) << 16  # second shares follow the first ones
        return np.take(shares, bucket)

    def _build_positional(self) -> None:
        """The alias layout of :meth:`_draw_alias` holding the inverse CDF itself.

        Bucket b (words with top 16 bits b) holding one threshold T sends the
        words below T to the symbol below it and the rest to the one above;
        a bucket holding none names one symbol twice; a bucket holding two or
        more names the sentinel, and those words are searched (:meth:`rows`).
        """
        buckets = 1 << 16
        first, inside = self._first, self._inside
        top = self.values.size - 1
        below = self.values[np.minimum(first, top)]
        above = self.values[np.minimum(first + 1, top)]
        one = inside == 1
        second = np.where(one, above, below)
        below[inside > 1] = self._sentinel
        second[inside > 1] = self._sentinel
        starts = np.arange(buckets, dtype=np.uint64) << np.uint64(48)
        limits = starts | np.uint64(_LOW48)
        split = self.thresholds[np.minimum(first[one], self.thresholds.size - 1)]
        limits[one] = split
        cut16 = ((limits - starts) >> np.uint64(32)).astype(np.uint16)
        cut16[~one] = np.uint16(0xFFFF)
        self._alias = (limits, cut16, np.concatenate([below, second]))
        self._positional = True

    def _search(self, words: np.ndarray) -> np.ndarray:
        """Symbols for words whose guide cell holds thresholds (binary search)."""
        return self.values[np.searchsorted(self.thresholds, words, side="right")]

    def rows(self, words: np.ndarray) -> np.ndarray:
        """``#{i : thresholds[i] <= word}`` for each word (intp), as ``np.searchsorted`` gives it.

        Only the thresholds inside the word's guide cell can lie between the
        word and the cell's start: one comparison decides when the cell holds
        one threshold; a cell holding more is split again (:meth:`_refine`).
        """
        self._guide_table()
        cells = _top16(words)
        low = self._first[cells]
        if self.thresholds.size == 0:
            return low
        count = self._inside[cells]
        last = np.minimum(low, self.thresholds.size - 1)
        row = low + ((count > 0) & (self.thresholds[last] <= words))
        many = np.flatnonzero(count > 1)
        if many.size:
            row[many] = self._refined_rows(words[many], cells[many])
        return row

    #: rounds of one comparison each in a sub-cell before a search of the whole table
    _STEPS = 4

    def _refined_rows(self, words: np.ndarray, cells: np.ndarray) -> np.ndarray:
        """:meth:`rows` of words whose cell holds two or more thresholds."""
        if self._refined is None:
            self._refine()
        assert self._refined is not None
        base, shift, first = self._refined
        sub = base[cells] + (words >> shift[cells]).astype(np.intp)
        row = first[sub].astype(np.intp)
        bound = first[sub + 1]  # thresholds at or below the next sub-cell's start
        thresholds = self.thresholds
        # thresholds are sorted, so those <= word among the sub-cell's are a prefix
        active = np.flatnonzero(row < bound)
        for _ in range(self._STEPS):
            if not active.size:
                return row
            up = thresholds[row[active]] <= words[active]
            active = active[up]
            row[active] += 1
            active = active[row[active] < bound[active]]
        if active.size:  # thresholds piled up (equal ones: symbols of zero mass)
            row[active] = np.searchsorted(thresholds, words[active], side="right")
        return row

    def _refine(self) -> None:
        """Split each cell holding c >= 2 thresholds into 2**(ceil(log2 c) + 1) sub-cells.

        Two to four sub-cells per threshold, so a word's sub-cell holds none
        or one in most cases. The number of sub-cells only decides how fast
        a word is resolved, never its row.
        """
        crowded = np.flatnonzero(self._inside > 1)
        counts = self._inside[crowded]
        bits = np.minimum(np.ceil(np.log2(counts)).astype(np.int64) + 1, 32)
        sizes = (np.int64(1) << bits) + 1  # one more entry closes the cell
        ends = np.cumsum(sizes)
        # a word w of cell c is in sub-cell (w >> shift) - (c << bits) of the cell,
        # entry (w >> shift) + base[c] of the table
        base = np.zeros(1 << 16, dtype=np.intp)
        base[crowded] = ends - sizes - (crowded.astype(np.intp) << bits)
        shift = np.zeros(1 << 16, dtype=np.uint64)
        shift[crowded] = (48 - bits).astype(np.uint64)
        total = int(ends[-1]) if ends.size else 0
        cell_of = np.repeat(crowded.astype(np.uint64), sizes)
        j = (np.arange(total, dtype=np.int64) - np.repeat(ends - sizes, sizes)).astype(np.uint64)
        step = np.uint64(1) << np.repeat((48 - bits).astype(np.uint64), sizes)
        # sub-cell j starts at cell << 48 plus j steps; the closing entry (j = 2**bits) is
        # the cell's last word, so it counts every threshold of the cell
        starts = (cell_of << np.uint64(48)) + np.minimum(j * step, np.uint64(_LOW48))
        first = np.searchsorted(self.thresholds, starts, side="right")
        dtype = np.int32 if self.thresholds.size < (1 << 31) else np.int64
        self._refined = (base, shift, first.astype(dtype))

    def _guide_table(self) -> np.ndarray:
        if self._guide is None:
            split_cells = self._index_cells()
            if split_cells > (1 << 12) and self._resolve == self._search:
                if self.values.size <= (1 << 16) and not self._ordered:
                    self._build_alias()
                else:
                    self._build_positional()
        assert self._guide is not None
        return self._guide

    def _index_cells(self) -> int:
        """The guide: per cell the thresholds at or below its start and inside it; split cells."""
        shift = np.uint64(48)
        starts = np.arange(1 << 16, dtype=np.uint64) << shift
        ends = starts | ((np.uint64(1) << shift) - np.uint64(1))
        first = np.searchsorted(self.thresholds, starts, side="right")
        last = np.searchsorted(self.thresholds, ends, side="right")
        self._first = first.astype(np.intp)
        self._inside = (last - first).astype(np.intp)
        guide = self.values[first]
        present = set(self.values.tolist())
        sentinel = _INT64_MIN
        while sentinel in present:
            sentinel += 1
        guide[first != last] = sentinel
        self._sentinel = sentinel
        self._guide = guide
        return int(np.count_nonzero(first != last))

    def __call__(self, words: np.ndarray) -> np.ndarray:
        if self.thresholds.size == 0:
            return np.full(words.shape, self.values[0], dtype=np.int64)
        guide = self._guide_table()
        if self._alias is not None:
            out = self._draw_alias(words)
            if not self._positional:
                return out
        else:
            out = guide[_top16(words)]
        split = np.flatnonzero(out == self._sentinel)
        if split.size:
            if self._positional:  # the word's cell holds 2+ thresholds: its sub-cell decides
                some = words[split]
                out[split] = self.values[self._refined_rows(some, _top16(some))]
            else:
                out[split] = self._resolve(words[split])
        return out


def _power_floors(r: Fraction, two_sided: bool) -> Iterator[tuple[int, int]]:
    """Yield (floor(2**64 r**m), floor(2**65 r**m / (1 + r))) for m = 1, 2, ...

    ``r`` is a dyadic rational in [0, 1) (a float, or 1 minus one, taken
    exactly). Integer fixed point with 128 guard bits: exact whenever the value
    is a dyadic rational (the only way it can be an integer), otherwise off
    only if the true value lies within m * 2**-128 of an integer.
    """
    guard = 128
    num, den = r.as_integer_ratio()
    shift = den.bit_length() - 1
    w = 1 << (64 + guard)
    while True:
        w = (w * num) >> shift
        s = w >> guard
        a = (w * 2 * den) // ((den + num) << guard) if two_sided else s
        if a == 0:
            return
        yield s, a


def _zigzag_values(count: int) -> np.ndarray:
    """Symbol of each index in the order 0, -1, 1, -2, 2, ... (z odd -> negative)."""
    z = np.arange(count, dtype=np.int64)
    return np.where(z % 2 == 1, -(z + 1) // 2, z // 2)


def _geometric_table(r: Fraction) -> _InverseCdf:
    """Table sampler of X = max{m >= 0 : 2**64 - u <= 2**64 r**m} (geometric, ratio r)."""
    thresholds = [_WORD - s for s, _ in _power_floors(r, two_sided=False)]
    return _InverseCdf(thresholds, np.arange(len(thresholds) + 1, dtype=np.int64))


def _two_sided_table(r: Fraction) -> _InverseCdf:
    """Table sampler of the two-sided geometric in zigzag order (see _GeometricCounter)."""
    thresholds: list[int] = []
    for s, a in _power_floors(r, two_sided=True):
        thresholds.append(_WORD - a)  # Z >= 2m - 1  <=>  v <= A_m
        thresholds.append(_WORD - s)  # Z >= 2m      <=>  v <= S_m
    return _InverseCdf(thresholds, _zigzag_values(len(thresholds) + 1))


class _GeometricCounter:
    """Counts N_K(v) = max{m >= 0 : v <= 2**64 K r**m}, v = 2**64 - u, for every word u.

    Used where a table would be too long (small geometric p, theta near 1).
    The float value t = (ln(2**64/v) + ln K) / ln(1/r) gives N_K = floor(t);
    its rounding error is below 2**-49 t + 2**-52 / ln(1/r) for any libm
    logarithm within 4 ulps, so words with t within 16 times that of an
    integer are decided again exactly (integer comparison, or 60-digit decimal logarithms when the
    integers would be huge). The answer is therefore the same on every
    platform, and equals what a table of exact thresholds would give.
    """

    def __init__(self, r: Fraction, factors: Sequence[Fraction]) -> None:
        ctx = _decimal_context(80)
        self.num, den = r.as_integer_ratio()
        self.shift = den.bit_length() - 1
        self.ln_r = ctx.subtract(
            ctx.ln(Decimal(self.num)), ctx.multiply(self.shift, ctx.ln(Decimal(2)))
        )
        self.inv_neg_ln_r = float(ctx.divide(Decimal(-1), self.ln_r))
        self.factors = list(factors)
        self.ln_factors = [
            ctx.subtract(ctx.ln(Decimal(f.numerator)), ctx.ln(Decimal(f.denominator)))
            for f in factors
        ]

    def _holds(self, v: int, k: int, m: int) -> bool:
        """Exactly (or to 60+ digits) whether v <= 2**64 * K_k * r**m."""
        factor = self.factors[k]
        if self.shift * m <= 20000:
            lhs = v * factor.denominator << (self.shift * m)
            rhs = (factor.numerator * self.num**m) << 64
            return lhs <= rhs
        for prec in (60, 150):
            ctx = _decimal_context(prec)
            diff = ctx.subtract(
                ctx.add(
                    ctx.multiply(64, ctx.ln(Decimal(2))),
                    ctx.add(self.ln_factors[k], ctx.multiply(m, self.ln_r)),
                ),
                ctx.ln(Decimal(v)),
            )
            if abs(diff) > Decimal(10) ** (20 - prec):
                break
        return diff >= 0

    def counts(self, words: np.ndarray) -> list[np.ndarray]:
        # -ln w with w = v / 2**64 in (0, 1]; ~u + 1 = v (rounded once or twice)
        neg_ln_w = (~words).astype(np.float64)
        neg_ln_w += 1.0
        neg_ln_w *= 2.0**-64
        np.log(neg_ln_w, out=neg_ln_w)
        np.negative(neg_ln_w, out=neg_ln_w)
        inv = self.inv_neg_ln_r
        results = []
        for k, ln_factor in enumerate(self.ln_factors):
            # |error of t| <= 2**-49 t + 2**-52 / ln(1/r); margin is 16 times that
            t = neg_ln_w + float(ln_factor)
            t *= inv
            count = t.astype(np.int64)  # t >= 0: truncation is floor
            frac = t - count
            frac -= 0.5
            np.abs(frac, out=frac)
            widest = (44.37 + float(ln_factor)) * inv * 2.0**-45 + inv * 2.0**-48 + 2.0**-60
            for i in np.flatnonzero(frac > 0.5 - widest).tolist():
                ti = float(t[i])
                m = round(ti)
                if abs(ti - m) > ti * 2.0**-45 + inv * 2.0**-48 + 2.0**-60:
                    continue  # far enough from an integer for this word's own error bound
                v = _WORD - int(words[i])
                count[i] = m if m == 0 or self._holds(v, k, m) else m - 1
            results.append(count)
        return results


def _draw_in_chunks(
    draw: Callable[[np.ndarray], np.ndarray], n: int, bitgen: np.random.PCG64
) -> np.ndarray:
    """``draw`` applied to n raw words, taken in cache-sized chunks (same words, same order)."""
    if n <= _CHUNK:
        return draw(np.asarray(bitgen.random_raw(n), dtype=np.uint64))
    out = np.empty(n, dtype=np.int64)
    for start in range(0, n, _CHUNK):
        chunk = np.asarray(bitgen.random_raw(min(_CHUNK, n - start)), dtype=np.uint64)
        out[start : start + chunk.size] = draw(chunk)
    return out
