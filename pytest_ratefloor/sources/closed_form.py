"""Memoryless families whose entropy has a closed form.

Uniform, Bernoulli, geometric and two-sided geometric: entropy and
varentropy are exact closed forms, evaluated so that no digits cancel near
the ends of the parameter range (``log1p`` where a probability is near 1).
Also here: :func:`binary_entropy`, the one binary-entropy helper of the
project. Sampling goes through :mod:`pytest_ratefloor.sources.sampling`.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from fractions import Fraction

import numpy as np

from pytest_ratefloor import validation
from pytest_ratefloor.sources.base import _LN2, _TABLE_LIMIT, _fmt, _Memoryless, _positive_support
from pytest_ratefloor.sources.sampling import (
    _WORD,
    _geometric_table,
    _GeometricCounter,
    _InverseCdf,
    _mulhi,
    _two_sided_table,
    _uniform_below_2_32,
)

_UNIFORM_MAX_K = 1 << 62
# Parameter ranges where geometric-type sources still sample from a table;
# beyond them a logarithm with an exact check is used (see _GeometricCounter).
_GEOMETRIC_TABLE_MIN_P = 2.0**-10
_TWO_SIDED_TABLE_MAX_THETA = 1.0 - 2.0**-10
# Smallest geometric p / largest theta gap: keeps symbols far inside int64
# and the logarithm path's flagged fraction small.
_GEOMETRIC_MIN_P = 1e-12


class Uniform(_Memoryless):
    """Symbols 0..k-1 equally likely (1 <= k <= 2**62). H = log2 k, varentropy 0.

    Sampling: symbol = floor(u * k / 2**64) (the multiply-high of Lemire's
    method, without rejection: each symbol gets floor or ceil of 2**64 / k
    words). For k a power of two that is the word's top log2(k) bits (a
    shift); otherwise it is computed through the guide table for k <= 65536,
    from the high half of the word with an exact fix-up for k < 2**32, and
    with full 64x64-bit products above.
    """

    def __init__(self, k: int) -> None:
        self.k = validation.integer(k, "k", minimum=1, maximum=_UNIFORM_MAX_K, where="uniform")
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
        if k & (k - 1) == 0 and k > 1:  # a power of two: the top bits of the word
            return (words >> np.uint64(65 - k.bit_length())).astype(np.int64)
        if k > 1 << 16:
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

    def _pmf_table(self, tail: float) -> tuple[np.ndarray, np.ndarray]:
        if self.k > _TABLE_LIMIT:
            raise ValueError(
                f"{self.spec}.pmf_table: {self.k} symbols exceed the limit {_TABLE_LIMIT}"
            )
        return np.arange(self.k, dtype=np.int64), np.full(self.k, 1.0 / self.k)


def binary_entropy(p: float) -> float:
    """h(p) = -p log2 p - (1-p) log2(1-p) in bits, for 0 <= p <= 1 (0 at p in {0, 1}).

    Accurate for p near 0 and near 1 (``log1p`` for the larger probability).
    The one binary-entropy helper of the project (Bernoulli sources, the
    report's plot).
    """
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
        self.p = validation.probability(p, "p", where="bernoulli")
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
        return binary_entropy(self.p)

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

    def _pmf_table(self, tail: float) -> tuple[np.ndarray, np.ndarray]:
        return _positive_support(np.array([0, 1]), np.array([1.0 - self.p, self.p]))

    def rate_distortion(self, D: float, distortion: object = "hamming") -> float:
        """Hamming: h(p) − h(D) for D <= min(p, 1−p), else 0 (closed form); a matrix: the base."""
        from pytest_ratefloor import ratedistortion

        if not (isinstance(distortion, str) and distortion == "hamming"):
            return super().rate_distortion(D, distortion)
        value = ratedistortion.check_distortion(
            D, where=f"{self.spec}.rate_distortion", allow_zero=True)
        return ratedistortion.bernoulli_hamming_rd(self.p, value)

    def distortion_rate(self, R: float, distortion: object = "hamming") -> float:
        """Hamming: the D <= min(p, 1−p) with h(p) − h(D) = R (closed form inverted); else base."""
        from pytest_ratefloor import ratedistortion

        if not (isinstance(distortion, str) and distortion == "hamming"):
            return super().distortion_rate(R, distortion)
        value = ratedistortion.check_rate(R, where=f"{self.spec}.distortion_rate")
        return ratedistortion.bernoulli_hamming_dr(self.p, value)


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
        self.p = validation.probability(p, "p", low_open=True, where="geometric")
        if self.p < _GEOMETRIC_MIN_P:
            raise ValueError(
                f"geometric: p must be >= {_GEOMETRIC_MIN_P:g} (smaller p makes symbols "
                f"of order 1/p that the sampler cannot resolve), got {validation.show(p)}"
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
            return binary_entropy(p) / p
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

    def _pmf_table(self, tail: float) -> tuple[np.ndarray, np.ndarray]:
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

    def optimal_code_rate(self) -> float:
        """Expected length of the optimal Golomb code, in bits/symbol.

        The Golomb code with the best parameter is the optimal prefix code of
        the whole infinite alphabet (Gallager & van Voorhis 1975, from
        memory), so no truncated table is needed. p = 1: only the symbol 0
        occurs, 0 bits.
        """
        if self.p == 1.0:
            return 0.0
        from pytest_ratefloor import codes

        return float(codes.golomb_expected_length(self.p, codes.golomb_parameter(self.p)))


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
        self.theta = validation.probability(
            theta, "theta", high_open=True, where="two_sided_geometric"
        )
        if self.theta > 1.0 - _GEOMETRIC_MIN_P:
            raise ValueError(
                f"two_sided_geometric: theta must be <= 1 - {_GEOMETRIC_MIN_P:g} (closer to 1 "
                f"makes symbols the sampler cannot resolve), got {validation.show(theta)}"
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

    def _pmf_table(self, tail: float) -> tuple[np.ndarray, np.ndarray]:
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

