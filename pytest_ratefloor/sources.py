"""Reference sources of known entropy, sampled reproducibly.

This module holds the sources that codecs are measured on: memoryless
families with exact (closed-form or truncation-bounded) entropy, a finite
stationary Markov chain whose entropy *rate* is known, and empirical sources
fitted to the user's own data whose entropy is a plug-in *estimate*.

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
(Zipf: within a relative ``2**-40``, see :class:`Zipf`); mass below ``2**-64``
in the far tail of an unbounded family is what a single 64-bit word cannot
express, and those symbols are never drawn. Chains (Markov, empirical of
order k > 0) draw one word per symbol too, in a loop over time.

Entropies are exact closed forms where they exist (uniform, Bernoulli,
geometric, two-sided geometric) and exact finite or truncation-bounded sums
elsewhere. ``0 * log 0 = 0`` throughout. Empirical sources report an
*estimate* (``is_estimate = True``): an entropy measured on one sample of
data says nothing certain about other data from the same origin.
"""

from __future__ import annotations

import abc
import decimal
import hashlib
import math
import os
import re
import sys
from bisect import bisect_right
from collections.abc import Callable, Iterator, Sequence
from decimal import Decimal
from fractions import Fraction

import numpy as np
from numpy.typing import ArrayLike

__all__ = [
    "Bernoulli",
    "Categorical",
    "Empirical",
    "Geometric",
    "Markov",
    "Poisson",
    "Source",
    "TwoSidedGeometric",
    "Uniform",
    "Zipf",
    "bernoulli",
    "categorical",
    "empirical",
    "from_file",
    "geometric",
    "markov",
    "poisson",
    "standard_suite",
    "two_sided_geometric",
    "uniform",
    "zipf",
]

_WORD = 1 << 64  # number of distinct raw words
_LN2 = math.log(2.0)
_SUM_TOLERANCE = 1e-9  # allowed |sum(probs) - 1|
_SHORT_LIST = 8  # longer pmfs get a hashed spec
_HASH_CHARS = 12
_TABLE_LIMIT = 1 << 24  # most symbols a pmf_table / sampling table may hold
_INT64_MIN = -(1 << 63)
_LOW48 = (1 << 48) - 1  # a word's bits below the top 16
_INT64_MAX = (1 << 63) - 1
# Parameter ranges where geometric-type sources still sample from a table;
# beyond them a logarithm with an exact check is used (see _GeometricCounter).
_GEOMETRIC_TABLE_MIN_P = 2.0**-10
_TWO_SIDED_TABLE_MAX_THETA = 1.0 - 2.0**-10
# Smallest geometric p / largest theta gap: keeps symbols far inside int64
# and the logarithm path's flagged fraction small.
_GEOMETRIC_MIN_P = 1e-12
_POISSON_MAX_LAMBDA = 1e5
_ZIPF_MAX_K = 1 << 20
_UNIFORM_MAX_K = 1 << 62


# --------------------------------------------------------------------------
# parameter checking and spec formatting


def _show(value: object) -> str:
    """Render a user value for an error message (numpy scalars as plain numbers)."""
    if isinstance(value, np.generic):
        value = value.item()
    return repr(value)


def _is_int(value: object) -> bool:
    return isinstance(value, (int, np.integer)) and not isinstance(value, (bool, np.bool_))


def _integer(where: str, name: str, value: object, minimum: int, maximum: int | None = None) -> int:
    """Return ``value`` as an int in [minimum, maximum] or raise ValueError naming it."""
    if _is_int(value):
        number = int(value)  # type: ignore[call-overload]
        if number >= minimum and (maximum is None or number <= maximum):
            return number
    upper = "" if maximum is None else f" and <= {maximum}"
    raise ValueError(f"{where}: {name} must be an integer >= {minimum}{upper}, got {_show(value)}")


def _real(where: str, name: str, value: object) -> float:
    """Return ``value`` as a float, or raise ValueError if it is not a real number."""
    if isinstance(value, (bool, np.bool_)) or not isinstance(
        value, (int, float, np.integer, np.floating)
    ):
        raise ValueError(f"{where}: {name} must be a real number, got {_show(value)}")
    try:
        return float(value) + 0.0  # + 0.0 turns -0.0 into 0.0 so specs stay canonical
    except OverflowError:
        raise ValueError(f"{where}: {name} is too large, got {_show(value)}") from None


def _fmt(x: float) -> str:
    """Shortest round-tripping text of a float (``repr``), e.g. ``0.1``, ``1e-09``."""
    return repr(float(x) + 0.0)


def _fmt_list(values: Sequence[float]) -> str:
    return "[" + ",".join(_fmt(v) for v in values) + "]"


def _digest(*parts: bytes) -> str:
    h = hashlib.sha256()
    for part in parts:
        h.update(len(part).to_bytes(8, "little"))
        h.update(part)
    return h.hexdigest()[:_HASH_CHARS]


def _probability_vector(where: str, name: str, values: ArrayLike) -> np.ndarray:
    """Check a finite pmf (finite, >= 0, sum 1 within 1e-9) and return it as float64."""
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise ValueError(
            f"{where}: {name} must be a sequence of probabilities, got {values!r}"
        ) from exc
    if arr.ndim != 1 or arr.size == 0:
        raise ValueError(f"{where}: {name} must be a non-empty 1-D sequence, got shape {arr.shape}")
    bad = np.flatnonzero(~np.isfinite(arr) | (arr < 0))
    if bad.size:
        i = int(bad[0])
        raise ValueError(f"{where}: {name}[{i}] must be finite and >= 0, got {_fmt(arr[i])}")
    total = math.fsum(arr.tolist())
    if abs(total - 1.0) > _SUM_TOLERANCE:
        raise ValueError(f"{where}: {name} must sum to 1 within {_SUM_TOLERANCE:g}, got {total!r}")
    return arr + 0.0


def _exact_weights(values: Sequence[float]) -> list[int]:
    """Integers proportional to the given non-negative floats, exactly."""
    ratios = [float(v).as_integer_ratio() for v in values]
    common = max(den for _, den in ratios)  # every denominator is a power of two
    return [num * (common // den) for num, den in ratios]


def _log2_ratio(num: int, den: int) -> float:
    """log2(num / den) for integers 0 < num <= den, accurate also when the ratio is near 1."""
    if 2 * num > den:
        return math.log1p((num - den) / den) / _LN2
    ratio = num / den
    if ratio > 0.0:
        return math.log2(ratio)
    return math.log2(num) - math.log2(den)  # ratio underflows: use the integers


def _thresholds_from_weights(weights: Sequence[int]) -> list[int]:
    """Cumulative thresholds floor(2**64 * W_i / W) of integer weights (exact)."""
    total = sum(weights)
    out: list[int] = []
    cumulative = 0
    for w in weights[:-1]:
        cumulative += w
        out.append((cumulative << 64) // total)
    return out


def _check_count(value: object) -> int:
    if not _is_int(value) or int(value) < 0:  # type: ignore[call-overload]
        raise ValueError(f"sample: n must be a non-negative integer, got {_show(value)}")
    return int(value)  # type: ignore[call-overload]


def _check_seed(value: object) -> int:
    if not _is_int(value) or int(value) < 0:  # type: ignore[call-overload]
        raise ValueError(f"sample: seed must be a non-negative integer, got {_show(value)}")
    return int(value)  # type: ignore[call-overload]


def _as_symbols(symbols: ArrayLike) -> np.ndarray:
    """Symbols as a 1-D int64 array, or ValueError."""
    arr = np.asarray(symbols)
    if arr.ndim != 1:
        raise ValueError(f"symbols must be a 1-D sequence of integers, got shape {arr.shape}")
    kind = arr.dtype.kind
    if kind == "b":
        return arr.astype(np.int64)
    if kind == "u":
        if arr.size and int(arr.max()) > _INT64_MAX:
            i = int(np.argmax(arr > _INT64_MAX))
            raise ValueError(f"symbol {int(arr[i])} at index {i} is outside the support")
        return arr.astype(np.int64)
    if kind == "i":
        return arr.astype(np.int64, copy=False)
    if arr.size == 0:
        return np.zeros(0, dtype=np.int64)
    raise ValueError(f"symbols must be integers, got dtype {arr.dtype}")


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
    """

    def __init__(
        self,
        thresholds: Sequence[int],
        values: np.ndarray,
        resolve: Callable[[np.ndarray], np.ndarray] | None = None,
    ) -> None:
        kept = [t for t in thresholds if t < _WORD]
        self.thresholds = np.array(kept, dtype=np.uint64)
        self.values = np.asarray(values[: len(kept) + 1], dtype=np.int64)
        self._resolve = resolve or self._search
        self._guide: np.ndarray | None = None
        self._sentinel = 0
        self._alias: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None

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

    def _search(self, words: np.ndarray) -> np.ndarray:
        """Symbols for words whose guide cell holds thresholds (binary search)."""
        return self.values[np.searchsorted(self.thresholds, words, side="right")]

    def _guide_table(self) -> np.ndarray:
        if self._guide is None:
            starts = np.arange(1 << 16, dtype=np.uint64) << np.uint64(48)
            ends = starts | np.uint64((1 << 48) - 1)
            first = np.searchsorted(self.thresholds, starts, side="right")
            last = np.searchsorted(self.thresholds, ends, side="right")
            guide = self.values[first]
            present = set(self.values.tolist())
            sentinel = _INT64_MIN
            while sentinel in present:
                sentinel += 1
            guide[first != last] = sentinel
            self._sentinel = sentinel
            self._guide = guide
            split_cells = int(np.count_nonzero(first != last))
            if (
                split_cells > (1 << 12)
                and self.values.size <= (1 << 16)
                and self._resolve == self._search
            ):
                self._build_alias()
        return self._guide

    def __call__(self, words: np.ndarray) -> np.ndarray:
        if self.thresholds.size == 0:
            return np.full(words.shape, self.values[0], dtype=np.int64)
        guide = self._guide_table()
        if self._alias is not None:
            return self._draw_alias(words)
        out = guide[_top16(words)]
        split = np.flatnonzero(out == self._sentinel)
        if split.size:
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


# --------------------------------------------------------------------------
# the source base classes


class Source(abc.ABC):
    """A reference source of symbols with known entropy.

    Attributes: ``spec`` (canonical text, stable, used in test ids and ledger
    keys; equal specs mean equal distributions), ``family``, ``params``
    (builtin numbers only), ``alphabet_size``/``min_symbol``/``max_symbol``
    (``None`` when unbounded), ``is_estimate`` (True when the entropy is a
    plug-in estimate from data), ``memoryless``.
    """

    def __init__(
        self,
        *,
        family: str,
        spec: str,
        params: dict[str, float | int],
        alphabet_size: int | None,
        min_symbol: int | None,
        max_symbol: int | None,
        is_estimate: bool = False,
        memoryless: bool = True,
    ) -> None:
        self.family = family
        self.spec = spec
        self.params = params
        self.alphabet_size = alphabet_size
        self.min_symbol = min_symbol
        self.max_symbol = max_symbol
        self.is_estimate = is_estimate
        self.memoryless = memoryless
        self._entropy: float | None = None
        self._varentropy: float | None = None

    def __repr__(self) -> str:
        return self.spec

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Source) and other.spec == self.spec

    def __hash__(self) -> int:
        return hash(self.spec)

    @property
    def entropy(self) -> float:
        """Entropy in bits/symbol (entropy rate for chains; an estimate for data)."""
        if self._entropy is None:
            self._entropy = float(self._compute_entropy())
        return self._entropy

    @property
    def varentropy(self) -> float:
        """Variance of -log2 P(X) in bits^2 (chains: of -log2 P(X_t | past), see subclass)."""
        if self._varentropy is None:
            self._varentropy = float(self._compute_varentropy())
        return self._varentropy

    def sample(self, n: int, seed: int = 0) -> np.ndarray:
        """``n`` symbols (int64), the same for the same ``seed`` on every platform."""
        count = _check_count(n)
        bitgen = np.random.PCG64(_check_seed(seed))
        return self._sample(count, bitgen)

    def information(self, symbols: ArrayLike) -> float:
        """Total self-information -sum log2 P(x_i) of ``symbols`` in bits."""
        return float(np.sum(self.self_information(symbols)))

    def self_information(self, symbols: ArrayLike) -> np.ndarray:
        """Per-symbol -log2 P (float64); ValueError naming a symbol of probability 0."""
        x = _as_symbols(symbols)
        info = self._self_information(x)
        bad = np.flatnonzero(~np.isfinite(info))
        if bad.size:
            i = int(bad[0])
            raise ValueError(f"{self.spec}: {self._why_impossible(x, i)}")
        return info

    def describe(self) -> str:
        """One line for people: the spec and what its entropy figure is."""
        kind = "plug-in entropy estimate" if self.is_estimate else "entropy"
        if not self.memoryless:
            kind += " rate"
        return f"{self.spec}: {kind} {self.entropy:.6g} bits/symbol"

    def _why_impossible(self, x: np.ndarray, i: int) -> str:
        return f"symbol {int(x[i])} at index {i} has probability 0 (outside the support)"

    @abc.abstractmethod
    def _compute_entropy(self) -> float: ...

    @abc.abstractmethod
    def _compute_varentropy(self) -> float: ...

    @abc.abstractmethod
    def _sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray: ...

    @abc.abstractmethod
    def _self_information(self, x: np.ndarray) -> np.ndarray:
        """-log2 P per position, inf where the probability is 0."""

    @abc.abstractmethod
    def pmf_table(self, tail: float = 2.0**-60) -> tuple[np.ndarray, np.ndarray]:
        """(symbols ascending int64, probabilities float64) missing at most ``tail`` mass.

        Finite sources give their exact support (symbols of probability > 0);
        chains give their stationary marginal.
        """


def _check_tail(where: str, tail: object, finite: bool) -> float:
    value = _real(f"{where}.pmf_table", "tail", tail)
    if not (0.0 <= value < 1.0) or (not finite and value == 0.0):
        low = "[0" if finite else "(0"
        raise ValueError(f"{where}.pmf_table: tail must be in {low}, 1), got {_show(tail)}")
    return value


def _positive_support(symbols: np.ndarray, probs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    keep = probs > 0
    return symbols[keep].astype(np.int64), probs[keep].astype(np.float64)


_CHUNK = 1 << 16  # words per step: keeps the working arrays in cache


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


class _Memoryless(Source):
    """A source of independent, identically distributed symbols."""

    def _sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        return _draw_in_chunks(self._draw, n, bitgen)

    @abc.abstractmethod
    def _draw(self, words: np.ndarray) -> np.ndarray:
        """Symbols (int64) for raw words, one word each."""


# --------------------------------------------------------------------------
# memoryless families


class Uniform(_Memoryless):
    """Symbols 0..k-1 equally likely (1 <= k <= 2**62). H = log2 k, varentropy 0.

    Sampling: symbol = floor(u * k / 2**64) (the multiply-high of Lemire's
    method, without rejection: each symbol gets floor or ceil of 2**64 / k
    words). It is computed through the guide table for k <= 65536, from the
    high half of the word with an exact fix-up for k < 2**32, and with full
    64x64-bit products above.
    """

    def __init__(self, k: int) -> None:
        self.k = _integer("uniform", "k", k, 1, _UNIFORM_MAX_K)
        super().__init__(
            family="uniform",
            spec=f"uniform(k={self.k})",
            params={"k": self.k},
            alphabet_size=self.k,
            min_symbol=0,
            max_symbol=self.k - 1,
        )
        self._table: _InverseCdf | None = None

    def _compute_entropy(self) -> float:
        return math.log2(self.k)

    def _compute_varentropy(self) -> float:
        return 0.0

    def _draw(self, words: np.ndarray) -> np.ndarray:
        k = self.k
        if k > 1 << 16:
            if k & (k - 1) == 0:
                return (words >> np.uint64(65 - k.bit_length())).astype(np.int64)
            if k < 1 << 32:
                return _uniform_below_2_32(words, k)
            return _mulhi(words, k)
        if self._table is None:
            thresholds = [-((-i << 64) // k) for i in range(1, k)]  # ceil(i 2**64 / k)
            self._table = _InverseCdf(
                thresholds, np.arange(k, dtype=np.int64), resolve=lambda w: _mulhi(w, k)
            )
        return self._table(words)

    def _self_information(self, x: np.ndarray) -> np.ndarray:
        info = np.full(x.shape, math.log2(self.k))
        info[(x < 0) | (x >= self.k)] = np.inf
        return info

    def pmf_table(self, tail: float = 2.0**-60) -> tuple[np.ndarray, np.ndarray]:
        _check_tail(self.spec, tail, finite=True)
        if self.k > _TABLE_LIMIT:
            raise ValueError(
                f"{self.spec}.pmf_table: {self.k} symbols exceed the limit {_TABLE_LIMIT}"
            )
        return np.arange(self.k, dtype=np.int64), np.full(self.k, 1.0 / self.k)


def _binary_entropy(p: float) -> float:
    """h(p) in bits, accurate for p near 0 and near 1 (0 at p in {0, 1})."""
    if p > 0.5:
        p = 1.0 - p  # exact for p >= 0.5
    if p == 0.0:
        return 0.0
    return -p * math.log2(p) - (1.0 - p) * math.log1p(-p) / _LN2


def _log2_pair(p: float) -> tuple[float, float]:
    """(log2 p, log2(1 - p)) with the small one of p, 1-p taken exactly."""
    if p <= 0.5:
        return math.log2(p) if p > 0 else -math.inf, math.log1p(-p) / _LN2
    q = 1.0 - p  # exact
    return math.log1p(-q) / _LN2, math.log2(q) if q > 0 else -math.inf


class Bernoulli(_Memoryless):
    """Symbols {0, 1} with P(1) = p, 0 <= p <= 1 (p in {0, 1}: a constant, H = 0).

    H = h(p) = -p log2 p - (1-p) log2(1-p); varentropy p(1-p) log2(p/(1-p))^2.
    Sampling: symbol 1 exactly when u < round(p * 2**64), one compare per word.
    """

    def __init__(self, p: float) -> None:
        self.p = _real("bernoulli", "p", p)
        if not 0.0 <= self.p <= 1.0:
            raise ValueError(f"bernoulli: p must be in [0, 1], got {_show(p)}")
        super().__init__(
            family="bernoulli",
            spec=f"bernoulli(p={_fmt(self.p)})",
            params={"p": self.p},
            alphabet_size=2,
            min_symbol=0,
            max_symbol=1,
        )
        self.threshold = round(Fraction(self.p) * _WORD)

    def _compute_entropy(self) -> float:
        return _binary_entropy(self.p)

    def _compute_varentropy(self) -> float:
        p = self.p
        if p in (0.0, 1.0):
            return 0.0
        lp, lq = _log2_pair(p)
        return p * (1.0 - p) * (lp - lq) ** 2

    def _draw(self, words: np.ndarray) -> np.ndarray:
        if self.threshold >= _WORD:
            return np.ones(words.shape, dtype=np.int64)
        out = np.empty(words.shape, dtype=np.int64)
        np.less(words, np.uint64(self.threshold), out=out, casting="unsafe")
        return out

    def _self_information(self, x: np.ndarray) -> np.ndarray:
        lp, lq = _log2_pair(self.p)
        info = np.full(x.shape, np.inf)
        info[x == 1] = -lp
        info[x == 0] = -lq
        return info

    def pmf_table(self, tail: float = 2.0**-60) -> tuple[np.ndarray, np.ndarray]:
        _check_tail(self.spec, tail, finite=True)
        return _positive_support(np.array([0, 1]), np.array([1.0 - self.p, self.p]))


class Geometric(_Memoryless):
    """Symbols 0, 1, 2, ... with P(x) = (1-p)^x p, 1e-12 <= p <= 1 (p = 1: the constant 0).

    H = h(p)/p bits; varentropy = log2(1-p)^2 (1-p)/p^2 (−log2 P is affine in x).
    Sampling: the inverse CDF on v = 2**64 - u, X = max{x : v <= 2**64 (1-p)^x}
    with 1 - p taken exactly. For p >= 2**-10 its exact integer thresholds
    form a table covering every word (the largest symbol is the one that needs
    v = 1; the mass below 2**-64 that a word cannot express is never drawn),
    drawn through an alias table when it is long; for smaller p the inverse
    CDF is evaluated with a logarithm and every borderline word is decided
    exactly (slower, see benchmarks/bench_sampling.py).
    """

    def __init__(self, p: float) -> None:
        self.p = _real("geometric", "p", p)
        if not 0.0 < self.p <= 1.0:
            raise ValueError(f"geometric: p must be in (0, 1], got {_show(p)}")
        if self.p < _GEOMETRIC_MIN_P:
            raise ValueError(
                f"geometric: p must be >= {_GEOMETRIC_MIN_P:g} (smaller p makes symbols "
                f"of order 1/p that the sampler cannot resolve), got {_show(p)}"
            )
        super().__init__(
            family="geometric",
            spec=f"geometric(p={_fmt(self.p)})",
            params={"p": self.p},
            alphabet_size=None,
            min_symbol=0,
            max_symbol=None,
        )
        self._sampler: Callable[[np.ndarray], np.ndarray] | None = None

    def _log2q(self) -> float:
        return _log2_pair(self.p)[1]

    def _compute_entropy(self) -> float:
        p = self.p
        if p == 1.0:
            return 0.0
        if p >= 0.5:
            return _binary_entropy(p) / p
        return -math.log2(p) - (1.0 - p) / p * self._log2q()

    def _compute_varentropy(self) -> float:
        p = self.p
        if p == 1.0:
            return 0.0
        return self._log2q() ** 2 * (1.0 - p) / (p * p)

    def _draw(self, words: np.ndarray) -> np.ndarray:
        if self._sampler is None:
            r = 1 - Fraction(self.p)  # exactly; the float 1.0 - p may be rounded
            if self.p >= _GEOMETRIC_TABLE_MIN_P:
                self._sampler = _geometric_table(r)
            else:
                counter = _GeometricCounter(r, [Fraction(1)])
                self._sampler = lambda w: counter.counts(w)[0]
        return self._sampler(words)

    def _self_information(self, x: np.ndarray) -> np.ndarray:
        if self.p == 1.0:
            info = np.where(x == 0, 0.0, np.inf)
        else:
            info = -math.log2(self.p) - x * self._log2q()
            info[x < 0] = np.inf
        return np.asarray(info, dtype=np.float64)

    def pmf_table(self, tail: float = 2.0**-60) -> tuple[np.ndarray, np.ndarray]:
        tail = _check_tail(self.spec, tail, finite=False)
        if self.p == 1.0:
            return np.array([0], dtype=np.int64), np.array([1.0])
        ln_q = math.log1p(-self.p)
        count = max(1, math.ceil(math.log(tail) / ln_q))  # q**count <= tail
        if count > _TABLE_LIMIT:
            raise ValueError(
                f"{self.spec}.pmf_table: tail={tail!r} needs {count} symbols, "
                f"more than {_TABLE_LIMIT}"
            )
        x = np.arange(count, dtype=np.int64)
        return x, self.p * np.exp(x * ln_q)


class TwoSidedGeometric(_Memoryless):
    """All integers, P(x) = (1-θ)/(1+θ) θ^|x|, 0 <= θ <= 1 - 1e-12 (θ = 0: the constant 0).

    H = log2((1+θ)/(1-θ)) - E|X| log2 θ with E|X| = 2θ/((1+θ)(1-θ));
    varentropy = log2(θ)^2 Var|X|, Var|X| = 2θ(1+θ²)/((1+θ)²(1-θ)²).
    Sampling: inverse CDF in the order 0, -1, 1, -2, 2, ... on v = 2**64 - u,
    i.e. Z = N1 + N2 with N1 = max{m : v <= 2**64 θ^m} and
    N2 = max{m : v <= 2**65 θ^m/(1+θ)}; a table for θ <= 1 - 2**-10, a
    logarithm with an exact check beyond (see Geometric).
    """

    def __init__(self, theta: float) -> None:
        self.theta = _real("two_sided_geometric", "theta", theta)
        if not 0.0 <= self.theta < 1.0:
            raise ValueError(f"two_sided_geometric: theta must be in [0, 1), got {_show(theta)}")
        if self.theta > 1.0 - _GEOMETRIC_MIN_P:
            raise ValueError(
                f"two_sided_geometric: theta must be <= 1 - {_GEOMETRIC_MIN_P:g} (closer to 1 "
                f"makes symbols the sampler cannot resolve), got {_show(theta)}"
            )
        super().__init__(
            family="two_sided_geometric",
            spec=f"two_sided_geometric(theta={_fmt(self.theta)})",
            params={"theta": self.theta},
            alphabet_size=None,
            min_symbol=None,
            max_symbol=None,
        )
        self._sampler: Callable[[np.ndarray], np.ndarray] | None = None

    def _mean_abs(self) -> float:
        t = self.theta
        return 2.0 * t / ((1.0 + t) * (1.0 - t))

    def _log2_c(self) -> float:
        """log2 P(0) = log2((1-θ)/(1+θ))."""
        return (math.log1p(-self.theta) - math.log1p(self.theta)) / _LN2

    def _compute_entropy(self) -> float:
        if self.theta == 0.0:
            return 0.0
        return -self._log2_c() - self._mean_abs() * math.log2(self.theta)

    def _compute_varentropy(self) -> float:
        t = self.theta
        if t == 0.0:
            return 0.0
        var_abs = 2.0 * t * (1.0 + t * t) / ((1.0 + t) ** 2 * (1.0 - t) ** 2)
        return math.log2(t) ** 2 * var_abs

    def _draw(self, words: np.ndarray) -> np.ndarray:
        if self._sampler is None:
            r = Fraction(self.theta)
            if self.theta <= _TWO_SIDED_TABLE_MAX_THETA:
                self._sampler = _two_sided_table(r)
            else:
                counter = _GeometricCounter(r, [Fraction(1), 2 / (1 + r)])

                def draw(w: np.ndarray) -> np.ndarray:
                    n1, n2 = counter.counts(w)
                    return np.where(n1 == n2, n1, -n2)

                self._sampler = draw
        return self._sampler(words)

    def _self_information(self, x: np.ndarray) -> np.ndarray:
        if self.theta == 0.0:
            return np.where(x == 0, 0.0, np.inf)
        return -self._log2_c() - np.abs(x) * math.log2(self.theta)

    def pmf_table(self, tail: float = 2.0**-60) -> tuple[np.ndarray, np.ndarray]:
        tail = _check_tail(self.spec, tail, finite=False)
        t = self.theta
        if t == 0.0:
            return np.array([0], dtype=np.int64), np.array([1.0])
        # P(|X| > M) = 2 θ^(M+1) / (1+θ) <= tail
        reach = max(0, math.ceil((math.log(tail * (1.0 + t) / 2.0)) / math.log(t)) - 1)
        if 2 * reach + 1 > _TABLE_LIMIT:
            raise ValueError(
                f"{self.spec}.pmf_table: tail={tail!r} needs {2 * reach + 1} symbols, "
                f"more than {_TABLE_LIMIT}"
            )
        x = np.arange(-reach, reach + 1, dtype=np.int64)
        return x, np.exp2(self._log2_c() + np.abs(x) * math.log2(t))


class Zipf(_Memoryless):
    """Symbols 0..k-1 with P(i) ∝ 1/(i+1)^s, 1 <= k <= 2**20, s >= 0 (a truncated Zipf law).

    Entropy and varentropy are finite sums over all k terms (no truncation);
    the terms are summed with math.fsum, so the relative error is a few ulps
    (below 1e-15) of float64 powers and logarithms.

    Sampling thresholds come from the weights (i+1)^-s rounded to 40
    significant bits: float64 powers decide the rounding where they are far
    from a rounding boundary, 30-digit decimal powers decide the rest, so the
    thresholds are the same on every platform. The sampled probabilities are
    within a relative 2**-40 of the exact ones.
    """

    def __init__(self, k: int, s: float) -> None:
        self.k = _integer("zipf", "k", k, 1, _ZIPF_MAX_K)
        self.s = _real("zipf", "s", s)
        if not (math.isfinite(self.s) and self.s >= 0.0):
            raise ValueError(f"zipf: s must be finite and >= 0, got {_show(s)}")
        super().__init__(
            family="zipf",
            spec=f"zipf(k={self.k},s={_fmt(self.s)})",
            params={"k": self.k, "s": self.s},
            alphabet_size=self.k,
            min_symbol=0,
            max_symbol=self.k - 1,
        )
        ranks = np.arange(1, self.k + 1, dtype=np.float64)
        self._weights = np.power(ranks, -self.s)
        self._log2_rank = np.log2(ranks)
        self._norm = math.fsum(self._weights.tolist())
        self._probs = self._weights / self._norm
        self._table: _InverseCdf | None = None

    def _compute_entropy(self) -> float:
        # -log2 P(i) = log2 Z + s log2(i+1)
        mean_log = math.fsum((self._weights * self._log2_rank).tolist()) / self._norm
        return math.log2(self._norm) + self.s * mean_log

    def _compute_varentropy(self) -> float:
        mean_log = math.fsum((self._probs * self._log2_rank).tolist())
        dev = self._log2_rank - mean_log
        return self.s**2 * math.fsum((self._probs * dev * dev).tolist())

    def _fixed_point_weights(self) -> list[int]:
        mantissa, exponent = np.frexp(self._weights)
        scaled = np.ldexp(mantissa, 40)  # exact, in [2**39, 2**40)
        rounded = np.rint(scaled)
        near_tie = np.abs(scaled - np.floor(scaled) - 0.5) < 2.0**-6
        q_list = rounded.astype(np.int64).tolist()
        e_list = exponent.astype(np.int64).tolist()
        ctx = _decimal_context(30)
        minus_s = Decimal(-self.s)
        for i in np.flatnonzero(near_tie).tolist():
            y = Fraction(ctx.power(Decimal(i + 1), minus_s))
            e = e_list[i]
            while y < Fraction(2) ** (e - 1):
                e -= 1
            while y >= Fraction(2) ** e:
                e += 1
            q_list[i] = round(y * Fraction(2) ** (40 - e))
            e_list[i] = e
        # common fixed point 2**-100: value q 2**(e-40) -> q 2**(e+60)
        return [q << (e + 60) if e + 60 >= 0 else q >> -(e + 60) for q, e in zip(q_list, e_list)]

    def _draw(self, words: np.ndarray) -> np.ndarray:
        if self._table is None:
            thresholds = _thresholds_from_weights(self._fixed_point_weights())
            self._table = _InverseCdf(thresholds, np.arange(self.k, dtype=np.int64))
        return self._table(words)

    def _self_information(self, x: np.ndarray) -> np.ndarray:
        inside = (x >= 0) & (x < self.k)
        info = np.full(x.shape, np.inf)
        info[inside] = math.log2(self._norm) + self.s * self._log2_rank[x[inside]]
        return info

    def pmf_table(self, tail: float = 2.0**-60) -> tuple[np.ndarray, np.ndarray]:
        _check_tail(self.spec, tail, finite=True)
        return np.arange(self.k, dtype=np.int64), self._probs.copy()


class Poisson(_Memoryless):
    """Symbols 0, 1, 2, ... with P(x) = e^-λ λ^x / x!, 0 <= λ <= 1e5 (λ = 0: the constant 0).

    Entropy and varentropy are sums over a window around the mode, computed
    from log-ratios log1p((λ-x)/x) and normalised with log1p, so nothing
    cancels. The window stops where a geometric bound on everything left out
    (both tails; stored as ``truncation_bound``, in bits) is below 1e-18 of
    the entropy, so the truncation error is far below 1e-15 relative; the
    float64 rounding of the sums is of order 1e-15 relative.

    Sampling thresholds floor(2**64 F(x)) use 40-digit decimal arithmetic
    (P(x+1) = P(x) λ/(x+1) from P(0) = e^-λ), the same on every platform.
    """

    def __init__(self, lam: float) -> None:
        self.lam = _real("poisson", "lam", lam)
        if not 0.0 <= self.lam <= _POISSON_MAX_LAMBDA:
            raise ValueError(
                f"poisson: lam must be in [0, {_POISSON_MAX_LAMBDA:g}], got {_show(lam)}"
            )
        super().__init__(
            family="poisson",
            spec=f"poisson(lam={_fmt(self.lam)})",
            params={"lam": self.lam},
            alphabet_size=None,
            min_symbol=0,
            max_symbol=None,
        )
        self._table: _InverseCdf | None = None
        self._window()

    def _window(self) -> None:
        """Window [lo, lo+len) of relative log-pmf ell(x) = ln P(x) - ln P(mode)."""
        lam = self.lam
        if lam == 0.0:
            self._lo, self._ell, self.truncation_bound = 0, np.zeros(1), 0.0
            self._ln_norm = 0.0
            self._probs = np.ones(1)
            return
        mode = math.floor(lam)
        target = 1e-18 * 0.36 * min(lam, 1.0)  # H >= 0.36 min(λ, 1) nats for every λ

        def tail_bound(p0: float, rho: float) -> float | None:
            """Bound on sum of -P ln P over terms <= p0, p0 rho, p0 rho^2, ... (nats)."""
            if p0 == 0.0:
                return 0.0
            if rho >= 1.0 or p0 >= 1.0 / math.e:
                return None
            if rho == 0.0:
                return p0 * -math.log(p0)
            return p0 * -math.log(p0) / (1 - rho) + p0 * -math.log(rho) * rho / (1 - rho) ** 2

        def ln_ratio(x: int) -> float:
            """ln(λ/x) without cancellation near λ = x."""
            if 0.5 < lam / x < 2.0:
                return math.log1p((lam - x) / x)
            return math.log(lam) - math.log(x)

        right = [0.0]
        x, ell = mode, 0.0
        while True:
            x += 1
            ell += ln_ratio(x)
            right.append(ell)
            bound_right = tail_bound(math.exp(ell) * lam / (x + 1), lam / (x + 2))
            if bound_right is not None and bound_right <= target:
                break
        left: list[float] = []
        x, ell = mode, 0.0
        bound_left = 0.0
        while x > 0:
            ell -= ln_ratio(x)  # ln P(x-1) - ln P(x) = ln(x/λ)
            x -= 1
            left.append(ell)
            if x == 0:
                break
            bound = tail_bound(math.exp(ell) * x / lam, (x - 1) / lam)
            if bound is not None and bound <= target:
                bound_left = bound
                break
        self._lo = mode - len(left)
        self._ell = np.array(left[::-1] + right)
        self.truncation_bound = (bound_left + bound_right) / _LN2
        others = np.exp(np.delete(self._ell, len(left)))
        self._ln_norm = math.log1p(math.fsum(others.tolist()))
        self._probs = np.exp(self._ell - self._ln_norm)

    def _compute_entropy(self) -> float:
        mean_ell = math.fsum((self._probs * self._ell).tolist())
        return (self._ln_norm - mean_ell) / _LN2

    def _compute_varentropy(self) -> float:
        mean_ell = math.fsum((self._probs * self._ell).tolist())
        dev = self._ell - mean_ell
        return math.fsum((self._probs * dev * dev).tolist()) / _LN2**2

    def _thresholds(self) -> tuple[int, list[int]]:
        ctx = _decimal_context(40)
        lam = Decimal(self.lam)
        scale = Decimal(_WORD)
        term = ctx.exp(-lam)
        cdf = term
        first: int | None = None
        thresholds: list[int] = []
        x = 0
        while True:
            t = int(ctx.multiply(cdf, scale).to_integral_value(rounding=decimal.ROUND_FLOOR))
            if first is None and t > 0:
                first = x
            if first is not None:
                thresholds.append(t)
            if t >= _WORD - 1:
                return (x if first is None else first), thresholds
            x += 1
            term = ctx.divide(ctx.multiply(term, lam), x)
            cdf = ctx.add(cdf, term)

    def _draw(self, words: np.ndarray) -> np.ndarray:
        if self._table is None:
            first, thresholds = self._thresholds()
            values = first + np.arange(len(thresholds) + 1, dtype=np.int64)
            self._table = _InverseCdf(thresholds, values)
        return self._table(words)

    def _self_information(self, x: np.ndarray) -> np.ndarray:
        if self.lam == 0.0:
            return np.where(x == 0, 0.0, np.inf)
        info = np.full(x.shape, np.inf)
        inside = (x >= self._lo) & (x < self._lo + self._ell.size)
        info[inside] = (self._ln_norm - self._ell[x[inside] - self._lo]) / _LN2
        far = np.flatnonzero((x >= 0) & ~inside)
        for i in far.tolist():
            xi = int(x[i])
            info[i] = (self.lam - xi * math.log(self.lam) + math.lgamma(xi + 1)) / _LN2
        return info

    def pmf_table(self, tail: float = 2.0**-60) -> tuple[np.ndarray, np.ndarray]:
        tail = _check_tail(self.spec, tail, finite=False)
        probs = self._probs
        cum = np.cumsum(probs)
        lo = int(np.searchsorted(cum, tail / 2, side="right"))  # drop a left prefix <= tail/2
        rev = np.cumsum(probs[::-1])
        hi = probs.size - int(np.searchsorted(rev, tail / 2, side="right"))
        x = np.arange(self._lo + lo, self._lo + hi, dtype=np.int64)
        return x, probs[lo:hi].copy()


class Categorical(_Memoryless):
    """Any finite pmf over distinct integer symbols (default 0..k-1).

    ``probs`` must be finite, >= 0 and sum to 1 within 1e-9; they are then
    normalised exactly (zero probabilities are allowed: 0 log 0 = 0). Symbols
    are kept in ascending order, so listing them differently gives the same
    source. Sampling thresholds come from the exact rational pmf.
    """

    def __init__(self, probs: ArrayLike, symbols: ArrayLike | None = None) -> None:
        p = _probability_vector("categorical", "probs", probs)
        if symbols is None:
            sym = np.arange(p.size, dtype=np.int64)
            default_symbols = True
        else:
            raw = np.asarray(symbols)
            if raw.ndim != 1 or raw.dtype.kind not in "iu" or raw.size != p.size:
                raise ValueError(
                    f"categorical: symbols must be {p.size} integers (one per probability), "
                    f"got {symbols!r}"
                )
            if raw.size and (int(raw.max()) > _INT64_MAX):
                raise ValueError(f"categorical: symbols must fit in int64, got {int(raw.max())}")
            sym = raw.astype(np.int64)
            uniq, counts = np.unique(sym, return_counts=True)
            if uniq.size != sym.size:
                dup = int(uniq[np.argmax(counts > 1)])
                raise ValueError(f"categorical: symbols must be distinct, got {dup} more than once")
            default_symbols = bool(np.array_equal(sym, np.arange(sym.size)))
        order = np.argsort(sym, kind="stable")
        sym, p = sym[order], p[order]
        self.symbols = sym
        weights = _exact_weights(p.tolist())
        total = sum(weights)
        self._weights = weights
        self._total = total
        self.probs = np.array([w / total for w in weights])
        self._neg_log2 = np.array([-_log2_ratio(w, total) if w else np.inf for w in weights])
        k = int(p.size)
        if k <= _SHORT_LIST:
            spec = f"categorical(probs={_fmt_list(p.tolist())}"
            if not default_symbols:
                spec += ",symbols=[" + ",".join(str(int(s)) for s in sym) + "]"
            spec += ")"
        else:
            sha = _digest(b"categorical", p.astype("<f8").tobytes(), sym.astype("<i8").tobytes())
            spec = f"categorical(k={k},sha={sha})"
        super().__init__(
            family="categorical",
            spec=spec,
            params={"k": k},
            alphabet_size=k,
            min_symbol=int(sym[0]),
            max_symbol=int(sym[-1]),
        )
        self._table: _InverseCdf | None = None

    def _compute_entropy(self) -> float:
        live = self._neg_log2 < np.inf
        return math.fsum((self.probs[live] * self._neg_log2[live]).tolist())

    def _compute_varentropy(self) -> float:
        live = self._neg_log2 < np.inf
        dev = self._neg_log2[live] - self.entropy
        return math.fsum((self.probs[live] * dev * dev).tolist())

    def _draw(self, words: np.ndarray) -> np.ndarray:
        if self._table is None:
            self._table = _InverseCdf(_thresholds_from_weights(self._weights), self.symbols)
        return self._table(words)

    def _self_information(self, x: np.ndarray) -> np.ndarray:
        pos = np.searchsorted(self.symbols, x)
        pos = np.minimum(pos, self.symbols.size - 1)
        found = self.symbols[pos] == x
        return np.where(found, self._neg_log2[pos], np.inf)

    def pmf_table(self, tail: float = 2.0**-60) -> tuple[np.ndarray, np.ndarray]:
        _check_tail(self.spec, tail, finite=True)
        return _positive_support(self.symbols, self.probs)


# --------------------------------------------------------------------------
# sources with memory: a chain over states, sampled one step at a time


class _ChainSampler:
    """Sequential sampler over states: the first word picks a start state (emitting
    its ``prefix`` symbols), each further word picks a row of the current state
    by exact integer thresholds; the row gives the emitted symbol and next state.
    """

    def __init__(
        self,
        start_weights: Sequence[int],
        prefixes: Sequence[Sequence[int]],
        row_weights: Sequence[Sequence[int]],
        row_symbols: Sequence[Sequence[int]],
        row_next: Sequence[Sequence[int]],
    ) -> None:
        self.start_thresholds = _thresholds_from_weights(start_weights)
        self.prefixes = [list(p) for p in prefixes]
        self.thresholds: list[int] = []
        self.symbols: list[int] = []
        self.next: list[int] = []
        self.begin: list[int] = []
        self.last: list[int] = []
        for weights, syms, nxt in zip(row_weights, row_symbols, row_next):
            self.begin.append(len(self.thresholds))
            self.thresholds.extend(_thresholds_from_weights(weights))
            self.thresholds.append(_WORD)  # last row of a state: never passed
            self.symbols.extend(syms)
            self.next.extend(nxt)
            self.last.append(len(self.thresholds) - 1)

    def sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        if n == 0:
            return np.zeros(0, dtype=np.int64)
        first = int(bitgen.random_raw(1)[0])
        state = bisect_right(self.start_thresholds, first)
        out = list(self.prefixes[state][:n])
        steps = n - len(out)
        thresholds, symbols, nxt = self.thresholds, self.symbols, self.next
        begin, last = self.begin, self.last
        append = out.append
        while steps > 0:  # chunks keep the list of words small
            chunk = min(steps, _CHUNK)
            steps -= chunk
            for word in bitgen.random_raw(chunk).tolist():
                row = bisect_right(thresholds, word, begin[state], last[state])
                append(symbols[row])
                state = nxt[row]
        return np.array(out, dtype=np.int64)


def _stationary_gth(P: np.ndarray) -> np.ndarray:
    """Stationary distribution of an irreducible stochastic matrix.

    Grassmann–Taksar–Heyman state reduction (from memory: Grassmann, Taksar &
    Heyman 1985): no subtractions, so it stays accurate for nearly
    decomposable chains; reductions use math.fsum so the result does not
    depend on the platform's summation order.
    """
    A = np.array(P, dtype=np.float64)
    size = A.shape[0]
    for k in range(size - 1, 0, -1):
        s = math.fsum(A[k, :k].tolist())
        A[:k, k] /= s
        A[:k, :k] += np.outer(A[:k, k], A[k, :k])
    pi = [1.0] + [0.0] * (size - 1)
    for k in range(1, size):
        pi[k] = math.fsum(pi[i] * float(A[i, k]) for i in range(k))
    total = math.fsum(pi)
    return np.array([v / total for v in pi])


def _unreachable(adjacent: np.ndarray) -> int | None:
    """A state not reachable from state 0 along ``adjacent`` edges, or None."""
    seen = np.zeros(adjacent.shape[0], dtype=bool)
    seen[0] = True
    frontier = [0]
    while frontier:
        nxt = np.flatnonzero(adjacent[frontier].any(axis=0) & ~seen)
        seen[nxt] = True
        frontier = nxt.tolist()
    missing = np.flatnonzero(~seen)
    return int(missing[0]) if missing.size else None


class Markov(Source):
    """A stationary finite-state Markov chain on states/symbols 0..S-1.

    ``transition[i][j] = P(X_t = j | X_{t-1} = i)``: rows finite, >= 0,
    summing to 1 within 1e-9 (then normalised exactly), irreducible. The
    first symbol follows ``initial`` (default: the stationary distribution
    ``stationary``, so the chain is stationary from the start).

    ``entropy`` is the entropy rate H = -Σ_i π_i Σ_j P_ij log2 P_ij.
    ``varentropy`` is the per-symbol variance of -log2 P(X_t | X_{t-1}) under
    stationarity; ``varentropy_rate`` is the asymptotic variance per symbol of
    the sample's total information (it adds the autocorrelation terms, via
    the fundamental matrix Z = (I - P + 1π)^-1), i.e. Var(information of n
    symbols) ≈ n * varentropy_rate for large n.
    Sampling is a loop over time steps (one word per symbol, bisection on
    exact integer thresholds of the current row).
    """

    def __init__(self, transition: ArrayLike, initial: ArrayLike | None = None) -> None:
        try:
            P = np.asarray(transition, dtype=np.float64)
        except (TypeError, ValueError) as exc:
            raise ValueError(
                f"markov: transition must be a square matrix of probabilities, got {transition!r}"
            ) from exc
        if P.ndim != 2 or P.shape[0] != P.shape[1] or P.shape[0] == 0:
            raise ValueError(
                f"markov: transition must be a non-empty square matrix, got shape {P.shape}"
            )
        bad = np.argwhere(~np.isfinite(P) | (P < 0))
        if bad.size:
            i, j = (int(v) for v in bad[0])
            raise ValueError(
                f"markov: transition[{i}][{j}] must be finite and >= 0, got {_fmt(P[i, j])}"
            )
        for i, row in enumerate(P.tolist()):
            total = math.fsum(row)
            if abs(total - 1.0) > _SUM_TOLERANCE:
                raise ValueError(
                    f"markov: transition row {i} must sum to 1 within {_SUM_TOLERANCE:g}, "
                    f"got {total!r}"
                )
        P = P + 0.0
        lost = _unreachable(P > 0)
        if lost is not None:
            raise ValueError(
                f"markov: transition is reducible: state {lost} cannot be reached from state 0"
            )
        lost = _unreachable((P > 0).T)
        if lost is not None:
            raise ValueError(
                f"markov: transition is reducible: state 0 cannot be reached from state {lost}"
            )
        size = P.shape[0]
        self._row_weights = [_exact_weights(row) for row in P.tolist()]
        self._row_totals = [sum(w) for w in self._row_weights]
        self.transition = np.array(
            [[w / t for w in ws] for ws, t in zip(self._row_weights, self._row_totals)]
        )
        self._neg_log2 = np.array(
            [
                [-_log2_ratio(w, t) if w else np.inf for w in ws]
                for ws, t in zip(self._row_weights, self._row_totals)
            ]
        )
        self.stationary = _stationary_gth(self.transition)
        if initial is None:
            self.initial = self.stationary.copy()
            self._initial_given = False
        else:
            init = _probability_vector("markov", "initial", initial)
            if init.size != size:
                raise ValueError(
                    f"markov: initial must have {size} entries (one per state), got {init.size}"
                )
            self.initial = init
            self._initial_given = True
        self._initial_weights = _exact_weights(self.initial.tolist())
        init_total = sum(self._initial_weights)
        self._initial_neg_log2 = np.array(
            [-_log2_ratio(w, init_total) if w else np.inf for w in self._initial_weights]
        )
        if size <= 3:
            spec = "markov(transition=[" + ",".join(_fmt_list(r) for r in P.tolist()) + "]"
            if self._initial_given:
                spec += f",initial={_fmt_list(self.initial.tolist())}"
            spec += ")"
        else:
            init_bytes = (
                self.initial.astype("<f8").tobytes() if self._initial_given else b"stationary"
            )
            sha = _digest(b"markov", P.astype("<f8").tobytes(), init_bytes)
            spec = f"markov(states={size},sha={sha})"
        super().__init__(
            family="markov",
            spec=spec,
            params={"states": size},
            alphabet_size=size,
            min_symbol=0,
            max_symbol=size - 1,
            memoryless=False,
        )
        self._chain: _ChainSampler | None = None

    def _cond_terms(self) -> tuple[np.ndarray, np.ndarray]:
        """(joint stationary weights π_i P_ij, -log2 P_ij with 0 where P_ij = 0)."""
        joint = self.stationary[:, None] * self.transition
        info = np.where(self.transition > 0, self._neg_log2, 0.0)
        return joint, info

    def _compute_entropy(self) -> float:
        joint, info = self._cond_terms()
        return math.fsum((joint * info).ravel().tolist())

    def _compute_varentropy(self) -> float:
        joint, info = self._cond_terms()
        dev = info - self.entropy
        return math.fsum((joint * dev * dev).ravel().tolist())

    @property
    def varentropy_rate(self) -> float:
        """lim Var(information of n symbols) / n, in bits^2 per symbol."""
        joint, info = self._cond_terms()
        size = self.transition.shape[0]
        row_entropy = (self.transition * info).sum(axis=1)  # g_i = E[f | X_{t-1} = i]
        pi_row = np.tile(self.stationary, (size, 1))
        fundamental = np.linalg.inv(np.eye(size) - self.transition + pi_row)
        centred = (fundamental - pi_row) @ row_entropy  # Σ_{m>=0} (P^m - Π) g
        cross = math.fsum((joint * info * centred[None, :]).ravel().tolist())
        return self.varentropy + 2.0 * cross

    def _sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        if self._chain is None:
            size = self.transition.shape[0]
            states = list(range(size))
            self._chain = _ChainSampler(
                self._initial_weights,
                [[s] for s in states],
                self._row_weights,
                [states] * size,
                [states] * size,
            )
        return self._chain.sample(n, bitgen)

    def _self_information(self, x: np.ndarray) -> np.ndarray:
        size = self.transition.shape[0]
        info = np.full(x.shape, np.inf)
        if x.size == 0:
            return info
        inside = (x >= 0) & (x < size)
        if not inside.all():
            return np.where(inside, 0.0, np.inf)  # caller reports the first outside symbol
        info[0] = self._initial_neg_log2[x[0]]
        info[1:] = self._neg_log2[x[:-1], x[1:]]
        return info

    def _why_impossible(self, x: np.ndarray, i: int) -> str:
        size = self.transition.shape[0]
        if not 0 <= x[i] < size:
            return f"symbol {int(x[i])} at index {i} is not a state (states are 0..{size - 1})"
        if i == 0:
            return f"symbol {int(x[0])} at index 0 has initial probability 0"
        return f"transition {int(x[i - 1])}->{int(x[i])} at index {i} has probability 0"

    def pmf_table(self, tail: float = 2.0**-60) -> tuple[np.ndarray, np.ndarray]:
        _check_tail(self.spec, tail, finite=True)
        return _positive_support(np.arange(self.stationary.size), self.stationary)


def _lookup_rows(model: np.ndarray, query: np.ndarray) -> np.ndarray:
    """Index of each query row among the distinct ``model`` rows, -1 if absent."""
    if query.shape[0] == 0:
        return np.zeros(0, dtype=np.int64)
    _, inverse = np.unique(np.vstack([model, query]), axis=0, return_inverse=True)
    inverse = inverse.ravel()
    where = np.full(int(inverse.max()) + 1, -1, dtype=np.int64)
    where[inverse[: model.shape[0]]] = np.arange(model.shape[0])
    return where[inverse[model.shape[0] :]]


def _context_model(
    data: np.ndarray, k: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Counts of the (k+1)-grams of ``data`` read as a ring.

    Returns (grams, counts, contexts, gram_context, gram_next): the distinct
    grams in lexicographic order with their counts, the distinct k-gram
    contexts (lexicographic), and for each gram the index of its context
    (first k symbols) and of the context it leads to (last k symbols).
    Symbols are replaced by their ranks and each gram packed into one int64
    when the alphabet allows, so long data is counted with 1-D sorts.
    """
    n = data.size
    width = k + 1
    alphabet, ranks = np.unique(data, return_inverse=True)
    ranks = ranks.ravel().astype(np.int64)
    base = int(alphabet.size)
    if base**width < 1 << 62:
        ring = np.concatenate([ranks, ranks[:k]])
        code = np.zeros(n, dtype=np.int64)
        for j in range(width):
            code *= base
            code += ring[j : j + n]
        codes, counts = np.unique(code, return_counts=True)
        span = base**k
        ctx_codes, ctx_ids = np.unique(
            np.concatenate([codes // base, codes % span]), return_inverse=True
        )

        def unpack(packed: np.ndarray, size: int) -> np.ndarray:
            out = np.empty((packed.size, size), dtype=np.int64)
            rest = packed.copy()
            for j in range(size - 1, -1, -1):
                out[:, j] = rest % base
                rest //= base
            return alphabet[out].astype(np.int64)

        grams, contexts = unpack(codes, width), unpack(ctx_codes, k)
    else:
        windows = np.lib.stride_tricks.sliding_window_view(np.concatenate([data, data[:k]]), width)
        grams, counts = np.unique(windows, axis=0, return_counts=True)
        contexts, ctx_ids = np.unique(
            np.vstack([grams[:, :k], grams[:, 1:]]), axis=0, return_inverse=True
        )
    ctx_ids = ctx_ids.ravel()
    rows = grams.shape[0]
    return grams, counts.astype(np.int64), contexts, ctx_ids[:rows], ctx_ids[rows:]


class Empirical(Source):
    """A source fitted to data; its entropy is a plug-in *estimate*.

    ``order=0``: the histogram of the data; entropy estimate
    Ĥ0 = -Σ (c_x/n) log2(c_x/n); sampling resamples the histogram (i.i.d.).

    ``order=k>0``: an order-k context model fitted to the data read as a ring
    (the last k symbols are followed by the first ones, so every context has
    a successor and the k-gram frequencies are the model's stationary
    distribution). Entropy estimate: the conditional plug-in entropy
    Ĥk = -Σ (c(w,x)/n) log2(c(w,x)/c(w)) over the n cyclic (k+1)-grams w·x,
    which is exactly the entropy rate of the fitted model (it differs from
    the linear count over positions k..n-1 by O(k/n)). Sampling starts with a
    k-gram drawn by its frequency and then draws each symbol from the
    counts that followed its context; ``varentropy`` is the per-symbol
    variance of -log2 P(x | context) under the same frequencies.

    An estimate from one stretch of data is not a property of its origin:
    it is biased low (a plug-in estimate never sees unseen symbols), more so
    for large k and short data.
    """

    def __init__(
        self, data: ArrayLike | bytes, order: int = 0, *, _spec: str | None = None
    ) -> None:
        where = "from_file" if _spec else "empirical"
        self.order = _integer(where, "order", order, 0)
        if isinstance(data, (bytes, bytearray, memoryview)):
            arr = np.frombuffer(bytes(data), dtype=np.uint8).astype(np.int64)
        else:
            raw = np.asarray(data)
            if raw.ndim != 1:
                raise ValueError(
                    f"{where}: data must be a 1-D sequence of integer symbols, "
                    f"got shape {raw.shape}"
                )
            if raw.size == 0:
                arr = np.zeros(0, dtype=np.int64)
            elif raw.dtype.kind in "iub":
                if raw.dtype.kind == "u" and int(raw.max()) > _INT64_MAX:
                    raise ValueError(
                        f"{where}: data symbols must fit in int64, got {int(raw.max())}"
                    )
                arr = raw.astype(np.int64)
            else:
                raise ValueError(f"{where}: data must be integer symbols, got dtype {raw.dtype}")
        n = int(arr.size)
        if n == 0:
            raise ValueError(
                f"{where}: data is empty; an entropy estimate needs at least one symbol"
            )
        if self.order >= n:
            raise ValueError(
                f"{where}: order must be less than the data length {n}, got {self.order}"
            )
        self.data = arr
        self.n = n
        self.path: str | None = None  # set by from_file
        k = self.order
        rows, counts, contexts, row_ctx, row_next = _context_model(arr, k)
        self._rows = rows  # distinct (k+1)-grams, lexicographic, so contexts are contiguous
        self._counts = counts
        self._contexts = contexts
        self._row_ctx = row_ctx
        self._row_next = row_next
        self._ctx_counts = np.bincount(row_ctx, weights=counts, minlength=len(contexts)).astype(
            np.int64
        )
        # -log2(c(w x) / c(w)), via log1p where the ratio is near 1
        c = counts.astype(np.float64)
        t = self._ctx_counts[row_ctx].astype(np.float64)
        near_one = 2 * c > t
        self._row_neg_log2 = np.where(
            near_one,
            -np.log1p(np.where(near_one, (c - t) / t, 0.0)) / _LN2,
            np.log2(t) - np.log2(c),
        )
        symbols, sym_counts = np.unique(arr, return_counts=True)
        self.symbols = symbols
        self.counts = sym_counts.astype(np.int64)
        if _spec is None:
            sha = _digest(b"empirical", arr.astype("<i8").tobytes())
            _spec = f"empirical(n={n},sha={sha},order={k})"
        super().__init__(
            family="empirical",
            spec=_spec,
            params={"n": n, "order": k},
            alphabet_size=int(symbols.size),
            min_symbol=int(symbols[0]),
            max_symbol=int(symbols[-1]),
            is_estimate=True,
            memoryless=k == 0,
        )
        self._table: _InverseCdf | None = None
        self._chain: _ChainSampler | None = None

    def _compute_entropy(self) -> float:
        return math.fsum((self._counts * self._row_neg_log2).tolist()) / self.n

    def _compute_varentropy(self) -> float:
        dev = self._row_neg_log2 - self.entropy
        return math.fsum((self._counts * dev * dev).tolist()) / self.n

    def _sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        if self.order == 0:
            if self._table is None:
                self._table = _InverseCdf(
                    _thresholds_from_weights(self.counts.tolist()), self.symbols
                )
            return _draw_in_chunks(self._table, n, bitgen)
        if self._chain is None:
            bounds = np.flatnonzero(np.diff(self._row_ctx)) + 1
            groups = np.split(np.arange(self._rows.shape[0]), bounds)
            self._chain = _ChainSampler(
                self._ctx_counts.tolist(),
                self._contexts.tolist(),
                [self._counts[g].tolist() for g in groups],
                [self._rows[g, -1].tolist() for g in groups],
                [self._row_next[g].tolist() for g in groups],
            )
        return self._chain.sample(n, bitgen)

    def _self_information(self, x: np.ndarray) -> np.ndarray:
        k = self.order
        info = np.full(x.shape, np.inf)
        if x.size == 0:
            return info
        previous = self.n
        for i in range(min(k, x.size)):  # P(x_i | x_0..x_{i-1}) from the k-gram frequencies
            match = (self._contexts[:, : i + 1] == x[: i + 1]).all(axis=1)
            count = int(self._ctx_counts[match].sum())
            if count == 0:
                break
            info[i] = -_log2_ratio(count, previous)
            previous = count
        if x.size > k:
            grams = np.lib.stride_tricks.sliding_window_view(x, k + 1)
            found = _lookup_rows(self._rows, grams)
            ok = found >= 0
            info[k:][ok] = self._row_neg_log2[found[ok]]
        return info

    def _why_impossible(self, x: np.ndarray, i: int) -> str:
        k = self.order
        if k == 0:
            return (
                f"symbol {int(x[i])} at index {i} never occurs in the data "
                "(probability 0 under the estimate)"
            )
        if i < k:
            start = ",".join(str(int(s)) for s in x[: i + 1])
            return (
                f"the opening symbols ({start}) never occur in the data "
                "(probability 0 under the estimate)"
            )
        ctx = ",".join(str(int(s)) for s in x[i - k : i])
        return f"symbol {int(x[i])} at index {i} never follows context ({ctx}) in the data"

    def pmf_table(self, tail: float = 2.0**-60) -> tuple[np.ndarray, np.ndarray]:
        _check_tail(self.spec, tail, finite=True)
        return self.symbols.astype(np.int64), np.array([c / self.n for c in self.counts.tolist()])


# --------------------------------------------------------------------------
# public factories


def uniform(k: int) -> Uniform:
    """Symbols 0..k-1, equally likely (1 <= k <= 2**62)."""
    return Uniform(k)


def bernoulli(p: float) -> Bernoulli:
    """Symbols {0, 1} with P(1) = p (0 <= p <= 1)."""
    return Bernoulli(p)


def geometric(p: float) -> Geometric:
    """Symbols 0, 1, 2, ... with P(x) = (1-p)^x p."""
    return Geometric(p)


def two_sided_geometric(theta: float) -> TwoSidedGeometric:
    """All integers, P(x) = (1-theta)/(1+theta) theta^|x|."""
    return TwoSidedGeometric(theta)


def zipf(k: int, s: float) -> Zipf:
    """Symbols 0..k-1 with P(i) proportional to 1/(i+1)^s."""
    return Zipf(k, s)


def poisson(lam: float) -> Poisson:
    """Symbols 0, 1, 2, ... with P(x) = e^-lam lam^x / x!."""
    return Poisson(lam)


def categorical(probs: ArrayLike, symbols: ArrayLike | None = None) -> Categorical:
    """Any finite pmf; ``symbols`` default to 0..len(probs)-1."""
    return Categorical(probs, symbols)


def markov(transition: ArrayLike, initial: ArrayLike | None = None) -> Markov:
    """A stationary finite-state Markov chain; its entropy is the entropy rate."""
    return Markov(transition, initial)


def empirical(data: ArrayLike | bytes, order: int = 0) -> Empirical:
    """A source fitted to ``data`` (order-k context model); entropy is an estimate."""
    return Empirical(data, order)


_SYMBOL_FORMATS = {"u8": "<u1", "u16le": "<u2", "u32le": "<u4"}


def from_file(path: str | os.PathLike[str], symbol: str = "u8", order: int = 0) -> Empirical:
    """An empirical source read from a file; entropy is a plug-in estimate.

    ``symbol``: ``"u8"`` (one symbol per byte), ``"bit"`` (eight symbols per
    byte, most significant bit first), ``"u16le"`` / ``"u32le"`` (unsigned
    little-endian words; the file length must be a multiple of the word size).
    The spec carries the file name and a hash of its content.
    """
    if symbol not in ("u8", "bit", "u16le", "u32le"):
        raise ValueError(
            f"from_file: symbol must be one of 'u8', 'bit', 'u16le', 'u32le', got {_show(symbol)}"
        )
    order = _integer("from_file", "order", order, 0)
    name = os.fspath(path)
    with open(name, "rb") as handle:
        content = handle.read()
    if not content:
        raise ValueError(
            f"from_file: {name} is empty; an entropy estimate needs at least one symbol"
        )
    if symbol == "bit":
        data = np.unpackbits(np.frombuffer(content, dtype=np.uint8)).astype(np.int64)
    else:
        width = np.dtype(_SYMBOL_FORMATS[symbol]).itemsize
        if len(content) % width:
            raise ValueError(
                f"from_file: {name} has {len(content)} bytes, not a multiple of {width} "
                f"as symbol={symbol!r} needs"
            )
        data = np.frombuffer(content, dtype=_SYMBOL_FORMATS[symbol]).astype(np.int64)
    label = re.sub(r"[^A-Za-z0-9._-]", "_", os.path.basename(name)) or "file"
    spec = f"from_file(name={label},symbol={symbol},order={order},sha={_digest(b'file', content)})"
    source = Empirical(data, order, _spec=spec)
    source.path = name
    return source


def standard_suite() -> list[Source]:
    """The default sources of ``gate()``: 13 memoryless sources, cheap at n = 100_000.

    Uniform (a non-power-of-two and the byte alphabet), Bernoulli from
    moderate to very skewed (p = 0.01: H ≈ 0.081 bits while any
    symbol-by-symbol code needs >= 1 bit/symbol), geometric from dyadic
    (p = 0.5, where unary coding meets the entropy) to long-tailed, and one
    each of two-sided geometric, Zipf, Poisson and a dyadic categorical
    (whose entropy a Huffman code meets exactly).
    """
    return [
        uniform(10),
        uniform(256),
        bernoulli(0.3),
        bernoulli(0.1),
        bernoulli(0.01),
        geometric(0.5),
        geometric(0.2),
        geometric(0.05),
        geometric(0.01),
        two_sided_geometric(0.8),
        zipf(256, 1.1),
        poisson(4.0),
        categorical([0.5, 0.25, 0.125, 0.0625, 0.0625]),
    ]
