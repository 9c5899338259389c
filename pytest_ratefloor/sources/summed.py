"""Memoryless families whose entropy is a sum: Zipf, Poisson, categorical.

Zipf and categorical sum over their whole finite alphabet; Poisson sums over
a window around its mode with a stated geometric bound on what is left out
(``truncation_bound``). Sums use :func:`math.fsum`, so the result does not
depend on the platform's summation order. Sampling thresholds come from
exact rational weights or fixed-digit :mod:`decimal` arithmetic (see
:mod:`pytest_ratefloor.sources.sampling`).
"""

from __future__ import annotations

import decimal
import math
from decimal import Decimal
from fractions import Fraction

import numpy as np
from numpy.typing import ArrayLike

from pytest_ratefloor import validation
from pytest_ratefloor.sources.base import (
    _INT64_MAX,
    _LN2,
    _digest,
    _fmt,
    _fmt_list,
    _log2_ratio,
    _Memoryless,
    _positive_support,
)
from pytest_ratefloor.sources.sampling import (
    _WORD,
    _decimal_context,
    _exact_weights,
    _InverseCdf,
    _thresholds_from_weights,
)

_SHORT_LIST = 8  # longer pmfs get a hashed spec
_POISSON_MAX_LAMBDA = 1e5
_ZIPF_MAX_K = 1 << 20
# Zipf s above which H < 2^-s (s + 2) and s^2 2^-s are below 2^-1075 (they round to 0)
_ZIPF_NEGLIGIBLE_S = 1100.0


class Zipf(_Memoryless):
    """Symbols 0..k-1 with P(i) ∝ 1/(i+1)^s, 1 <= k <= 2**20, s >= 0 (a truncated Zipf law).

    Entropy and varentropy are finite sums over all k terms (no truncation)
    of positive terms, summed with math.fsum, so the relative error is a few
    ulps (below 1e-15) of float64 powers and logarithms, also when nearly all
    the mass is on symbol 0 and the figures are tiny: they are computed from
    the tail weights ((i+1)/2)^-s of symbols 1..k-1, scaled by 2^-s only at
    the end, and log2 Z from log1p of the tail sum (see ``_tail_sums``).
    For s > 1100 both figures are below half the least subnormal float: 0.

    Sampling thresholds come from the weights (i+1)^-s rounded to 40
    significant bits: float64 powers decide the rounding where they are far
    from a rounding boundary, 30-digit decimal powers decide the rest, so the
    thresholds are the same on every platform. Each sampled probability
    P'(i) = mass(i) / 2**64 satisfies
    |P'(i) - P(i)| <= (1 + 2**-35) (2**-39 P(i) + 2**-64).
    Proof sketch: each weight is off by a relative 2**-40 at most (half a
    unit in the last of 40 bits, the leading bit being 1), then cut to a
    multiple of 2**-100 (absolute, below 2**-100 each and k 2**-100 <= 2**-80
    in all, against a total Z >= 1); the total is therefore off by a relative
    2**-40 (a weighted mean of the weights' errors) plus 2**-80, so a weight
    over the total is off by a relative 2**-39 (1 + 2**-39) plus 2**-99; and
    a mass is a difference of two floors floor(2**64 C/W) of cumulative
    weights, within one word of 2**64 times that quotient. No relative bound
    alone is possible: a symbol of probability below 2**-64 may get no word.
    """

    def __init__(self, k: int, s: float) -> None:
        self.k = validation.integer(k, "k", minimum=1, maximum=_ZIPF_MAX_K, where="zipf")
        self.s = validation.real(s, "s", minimum=0.0, where="zipf")
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
        self._tails: tuple[int, float, float, float, float] | None = None
        self._tail_u = np.zeros(0)

    def _tail_sums(self) -> tuple[int, float, float, float, float]:
        """Sums over symbols 1..k-1, scaled so that nothing underflows: (n, f, U, A, Z).

        With u_i = ((i+1)/2)^-s (u_1 = 1, and (i+1)/2 is exact) the weights are
        w_i = 2^-s u_i, and 2^-s = f 2^-n with n = floor(s), f = 2^(n-s) in (1/2, 1].
        U = sum u_i and A = sum u_i log2(i+1) (both math.fsum of positive terms), and
        Z = 1 + 2^-s U is the normaliser (w_0 = 1).
        """
        if self._tails is None:
            n = math.floor(self.s)
            f = 2.0 ** (n - self.s)  # n - s is exact
            u = np.power(np.arange(2, self.k + 1, dtype=np.float64) / 2.0, -self.s)
            big_u = math.fsum(u.tolist())
            big_a = math.fsum((u * self._log2_rank[1:]).tolist())
            self._tail_u = u
            self._tails = (n, f, big_u, big_a, 1.0 + math.ldexp(f * big_u, -n))
        return self._tails

    def _log2_norm(self) -> float:
        """log2 Z to full relative precision, also when Z is 1 + a tiny tail."""
        n, f, big_u, _, big_z = self._tail_sums()
        tail = math.ldexp(f * big_u, -n)
        if tail >= 1.0:
            return math.log2(big_z)  # no cancellation; exact for s = 0 and k a power of 2
        if tail >= 2.0**-1000:
            return math.log1p(tail) / _LN2
        return math.ldexp(f * big_u / _LN2, -n)  # log1p(t) = t to far below an ulp

    def _compute_entropy(self) -> float:
        # H = log2 Z + s E[log2(i+1)], E[log2(i+1)] = 2^-s A / Z: two sums of positive terms
        if self.k == 1 or self.s > _ZIPF_NEGLIGIBLE_S:
            return 0.0
        n, f, big_u, big_a, big_z = self._tail_sums()
        tail = math.ldexp(f * big_u, -n)
        if tail >= 2.0**-1000:
            return self._log2_norm() + self.s * math.ldexp(f * big_a, -n) / big_z
        # log2 Z = 2^-s U / ln 2 here: scale by 2^-n once, after the sum
        return math.ldexp(f * (big_u / _LN2 + self.s * big_a / big_z), -n)

    def _compute_varentropy(self) -> float:
        # s^2 Var[log2(i+1)], with mean m = 2^-s A / Z and log2(1) = 0:
        # Var = (2^-s / Z) (sum_{i>=1} u_i (log2(i+1) - m)^2 + 2^-s A^2 / Z^2),
        # a sum of positive terms scaled by 2^-s only at the end
        if self.k == 1 or self.s > _ZIPF_NEGLIGIBLE_S:
            return 0.0
        n, f, _, big_a, big_z = self._tail_sums()
        mean = math.ldexp(f * big_a, -n) / big_z
        dev = self._log2_rank[1:] - mean
        spread = math.fsum((self._tail_u * dev * dev).tolist())
        spread += math.ldexp(f * big_a * big_a, -n) / (big_z * big_z)
        return math.ldexp(f * self.s * self.s * spread, -n) / big_z

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
        info[inside] = self._log2_norm() + self.s * self._log2_rank[x[inside]]
        return info

    def _pmf_table(self, tail: float) -> tuple[np.ndarray, np.ndarray]:
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
        self.lam = validation.real(
            lam, "lam", minimum=0.0, maximum=_POISSON_MAX_LAMBDA, where="poisson"
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

    def _pmf_table(self, tail: float) -> tuple[np.ndarray, np.ndarray]:
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
        p = validation.probability_vector(probs, "probs", where="categorical")
        if symbols is None:
            sym = np.arange(p.size, dtype=np.int64)
            default_symbols = True
        else:
            head = f"categorical: symbols must be {p.size} distinct integers (one per probability)"
            try:
                raw = np.asarray(symbols)
            except (TypeError, ValueError):
                raise TypeError(f"{head}, got {validation.show(symbols)}") from None
            if raw.size and raw.dtype.kind not in "iu":
                raise TypeError(f"{head}, got {validation.show(symbols)}")
            if raw.ndim != 1 or raw.size != p.size:
                raise ValueError(f"{head}, got {validation.show(symbols)}")
            if raw.size and (int(raw.max()) > _INT64_MAX):
                raise ValueError(f"categorical: symbols must fit in int64, got {int(raw.max())}")
            sym = raw.astype(np.int64)
            uniq, counts = np.unique(sym, return_counts=True)
            if uniq.size != sym.size:
                dup = int(uniq[np.argmax(counts > 1)])
                raise ValueError(f"{head}, got {dup} more than once")
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

    def _pmf_table(self, tail: float) -> tuple[np.ndarray, np.ndarray]:
        return _positive_support(self.symbols, self.probs)
