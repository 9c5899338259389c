"""Real-valued reference sources with a known rate–distortion function.

:func:`~pytest_ratefloor.sources.gaussian`, :func:`~pytest_ratefloor.sources.laplacian`
and :func:`~pytest_ratefloor.sources.gauss_markov` build the classes here. A
continuous source has no entropy in bits (a real number needs infinitely
many), so it is not a :class:`~pytest_ratefloor.sources.Source`: what it
answers is its rate–distortion function ``rate_distortion(D)`` (bits per
sample needed to reproduce it within mean distortion ``D``, see
:mod:`pytest_ratefloor.ratedistortion`), its inverse ``distortion_rate(R)``,
its ``variance`` and reproducible float64 samples.

Sampling contract
-----------------
``sample(n, seed)`` draws raw 64-bit words from ``numpy.random.PCG64(seed)``
(``random_raw``: numpy keeps its bit streams stable across releases, not the
algorithms of ``Generator.normal`` and friends) and turns them into reals
with formulas written here:

* a uniform in the open interval (0, 1) is ``(w >> 11) * 2**-53 + 2**-54``
  (the word's top 53 bits; exact in float64, never 0 or 1);
* Gaussian: Box–Muller (Box & Muller 1958) on consecutive pairs of words,
  ``r = sqrt(-2 ln u1)``, ``x[2i] = σ r cos(2π u2)``, ``x[2i+1] = σ r sin(2π u2)``;
* Laplacian: the word's top bit is the sign, its low 52 bits a uniform
  ``v`` in (0, 1), and ``|x| = -b ln v`` (|X| is exponential with mean b);
* Gauss–Markov: the Gaussian stream ``z`` above, ``x[0] = σ z[0]`` and
  ``x[t] = ρ x[t-1] + sqrt(1-ρ²) σ z[t]``, run in float64 in time order.

Every sample is the same on every platform up to the last bits of the
transcendental functions: ``log``, ``cos`` and ``sin`` come from the
platform's math library or numpy's vectorised (SIMD) versions, which IEEE 754
does not require to be correctly rounded, so two machines may disagree in
the last unit in the last place of some values (and the autoregression
carries such a difference forward, shrinking by ρ each step). The integer
part — which words feed which sample — never differs, and
``sample(n)[:m] == sample(m)`` holds. The golden-hash tests therefore hash
values rounded to 9 decimals.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike

from pytest_ratefloor import validation
from pytest_ratefloor.sources.base import _fmt

_CHUNK = 1 << 16  # words per step when turning words into reals
_TWO_PI = 2.0 * math.pi
_U53 = 2.0**-53
_U52 = 2.0**-52


def _uniform53(words: np.ndarray) -> np.ndarray:
    """Reals in (0, 1) from the top 53 bits of each word: k * 2**-53 + 2**-54, exact."""
    return (words >> np.uint64(11)).astype(np.float64) * _U53 + 0.5 * _U53


def _standard_normal(n: int, bitgen: np.random.PCG64) -> np.ndarray:
    """n standard normal values by Box–Muller, two words per pair of values."""
    out = np.empty(n, dtype=np.float64)
    pairs = (n + 1) // 2
    done = 0
    step = _CHUNK // 2
    for start in range(0, pairs, step):
        count = min(step, pairs - start)
        words = np.asarray(bitgen.random_raw(2 * count), dtype=np.uint64)
        u1 = _uniform53(words[0::2])
        u2 = _uniform53(words[1::2])
        r = np.sqrt(-2.0 * np.log(u1))
        angle = _TWO_PI * u2
        block = np.empty(2 * count, dtype=np.float64)
        block[0::2] = r * np.cos(angle)
        block[1::2] = r * np.sin(angle)
        take = min(2 * count, n - done)
        out[done : done + take] = block[:take]
        done += take
    return out


class ContinuousSource:
    """A real-valued reference source with a known rate–distortion function.

    Attributes: ``spec`` (canonical text such as ``"gaussian(sigma=1.0)"``,
    stable, used in test ids and ledger keys; equal specs mean equal
    distributions), ``family``, ``params`` (builtin floats), ``memoryless``,
    ``variance`` (of one sample), ``default_distortion`` (the distortion
    measure whose R(D) has a closed form for this family: ``"mse"`` or
    ``"abs"``).

    ``rate_distortion(D)`` is a property of the *model*: it says how many
    bits per sample the best possible code needs on samples of this source,
    and nothing certain about real signals, whose statistics differ.
    """

    default_distortion: str = "mse"

    def __init__(self, *, family: str, spec: str, params: dict[str, float],
                 variance: float, memoryless: bool = True) -> None:
        self.family = family
        self.spec = spec
        self.params = params
        self.variance = variance
        self.memoryless = memoryless

    def __repr__(self) -> str:
        return self.spec

    def __eq__(self, other: object) -> bool:
        return isinstance(other, ContinuousSource) and other.spec == self.spec

    def __hash__(self) -> int:
        return hash(self.spec)

    def sample(self, n: int, seed: int = 0) -> np.ndarray:
        """``n`` float64 values, reproducible from ``seed`` (see the module's sampling contract)."""
        count = validation.sample_size(n, minimum=0)
        bitgen = np.random.PCG64(validation.seed(seed))
        return self._sample(count, bitgen)

    def rate_distortion(self, D: float, distortion: object = None) -> float:
        """R(D) in bits per sample: the least rate of any code with mean distortion <= ``D``.

        ``distortion`` is ``"mse"`` (mean of (x - y)²) or ``"abs"`` (mean of
        |x - y|); ``None`` means :attr:`default_distortion`. ``D`` must be a
        finite number > 0 (R(0) is infinite for a real-valued source). A
        combination without a known R(D) raises ``ValueError`` naming both.
        """
        from pytest_ratefloor import ratedistortion

        measure = ratedistortion.continuous_measure(self, distortion)
        value = ratedistortion.check_distortion(D, where=f"{self.spec}.rate_distortion")
        return self._rate_distortion(value, measure)

    def distortion_rate(self, R: float, distortion: object = None) -> float:
        """D(R): the least mean distortion any code of ``R`` bits per sample can reach.

        The inverse of :meth:`rate_distortion`; ``R`` must be a finite number
        >= 0 (D(0) is the distortion of sending nothing).
        """
        from pytest_ratefloor import ratedistortion

        measure = ratedistortion.continuous_measure(self, distortion)
        value = ratedistortion.check_rate(R, where=f"{self.spec}.distortion_rate")
        return self._distortion_rate(value, measure)

    def _rate_distortion(self, D: float, measure: str) -> float:
        raise ValueError(self._unsupported(measure))

    def _distortion_rate(self, R: float, measure: str) -> float:
        raise ValueError(self._unsupported(measure))

    def _unsupported(self, measure: str) -> str:
        return (f"{self.spec}: no rate-distortion function for distortion {measure!r} "
                f"(supported: {self.default_distortion!r})")

    def describe(self) -> str:
        """One line for people: the spec and its variance."""
        return f"{self.spec}: real-valued, variance {self.variance:.6g}"

    def _sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        raise NotImplementedError


class Gaussian(ContinuousSource):
    """Independent N(0, σ²) samples. With MSE, R(D) = max(0, ½ log2(σ²/D))."""

    default_distortion = "mse"

    def __init__(self, sigma: float = 1.0) -> None:
        self.sigma = validation.real(sigma, "sigma", minimum=0.0, low_open=True,
                                     where="gaussian")
        super().__init__(family="gaussian", spec=f"gaussian(sigma={_fmt(self.sigma)})",
                         params={"sigma": self.sigma}, variance=self.sigma**2)

    def _sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        return self.sigma * _standard_normal(n, bitgen)

    def _rate_distortion(self, D: float, measure: str) -> float:
        from pytest_ratefloor import ratedistortion

        if measure != "mse":
            raise ValueError(self._unsupported(measure))
        return ratedistortion.gaussian_rd(self.variance, D)

    def _distortion_rate(self, R: float, measure: str) -> float:
        from pytest_ratefloor import ratedistortion

        if measure != "mse":
            raise ValueError(self._unsupported(measure))
        return ratedistortion.gaussian_dr(self.variance, R)


class Laplacian(ContinuousSource):
    """Independent Laplacian samples, density e^(−|x|/b) / (2b), variance 2b².

    With absolute error, R(D) = log2(b/D) for D <= b and 0 beyond (Berger 1971).
    """

    default_distortion = "abs"

    def __init__(self, scale: float = 1.0) -> None:
        self.scale = validation.real(scale, "scale", minimum=0.0, low_open=True,
                                     where="laplacian")
        super().__init__(family="laplacian", spec=f"laplacian(scale={_fmt(self.scale)})",
                         params={"scale": self.scale}, variance=2.0 * self.scale**2)

    def _sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        out = np.empty(n, dtype=np.float64)
        for start in range(0, n, _CHUNK):
            words = np.asarray(bitgen.random_raw(min(_CHUNK, n - start)), dtype=np.uint64)
            low = (words & np.uint64((1 << 52) - 1)).astype(np.float64)
            v = low * _U52 + 0.5 * _U52  # in (0, 1)
            magnitude = -self.scale * np.log(v)
            negative = (words >> np.uint64(63)).astype(bool)
            out[start : start + words.size] = np.where(negative, -magnitude, magnitude)
        return out

    def _rate_distortion(self, D: float, measure: str) -> float:
        from pytest_ratefloor import ratedistortion

        if measure != "abs":
            raise ValueError(self._unsupported(measure))
        return ratedistortion.laplacian_rd(self.scale, D)

    def _distortion_rate(self, R: float, measure: str) -> float:
        from pytest_ratefloor import ratedistortion

        if measure != "abs":
            raise ValueError(self._unsupported(measure))
        return ratedistortion.laplacian_dr(self.scale, R)


class GaussMarkov(ContinuousSource):
    """Stationary first-order autoregressive Gaussian: X_t = ρ X_{t-1} + sqrt(1-ρ²) σ W_t.

    X_0 ~ N(0, σ²) and W_t independent N(0, 1), so every X_t is N(0, σ²) and
    the correlation of X_t and X_{t+k} is ρ^k (|ρ| < 1). Power spectrum
    S(w) = σ²(1−ρ²) / (1 − 2ρ cos w + ρ²). With MSE, R(D) comes from reverse
    water-filling over S (see :func:`pytest_ratefloor.ratedistortion.gauss_markov_rd`);
    it is the rate of the *process* (codes over long blocks that exploit the
    memory), below the memoryless Gaussian's ½ log2(σ²/D).
    """

    default_distortion = "mse"

    def __init__(self, rho: float, sigma: float = 1.0) -> None:
        self.rho = validation.real(rho, "rho", minimum=-1.0, maximum=1.0, low_open=True,
                                   high_open=True, where="gauss_markov")
        self.sigma = validation.real(sigma, "sigma", minimum=0.0, low_open=True,
                                     where="gauss_markov")
        super().__init__(
            family="gauss_markov",
            spec=f"gauss_markov(rho={_fmt(self.rho)},sigma={_fmt(self.sigma)})",
            params={"rho": self.rho, "sigma": self.sigma},
            variance=self.sigma**2,
            memoryless=False,
        )

    def _sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        z = _standard_normal(n, bitgen)
        if n == 0:
            return z
        gain = math.sqrt((1.0 - self.rho) * (1.0 + self.rho)) * self.sigma
        drive = gain * z
        drive[0] = self.sigma * z[0]
        return _ar1(drive, self.rho)

    def _rate_distortion(self, D: float, measure: str) -> float:
        from pytest_ratefloor import ratedistortion

        if measure != "mse":
            raise ValueError(self._unsupported(measure))
        return ratedistortion.gauss_markov_rd(self.rho, self.sigma, D)

    def _distortion_rate(self, R: float, measure: str) -> float:
        from pytest_ratefloor import ratedistortion

        if measure != "mse":
            raise ValueError(self._unsupported(measure))
        return ratedistortion.gauss_markov_dr(self.rho, self.sigma, R)

    def autocorrelation(self, lag: int) -> float:
        """Correlation of X_t and X_{t+lag}: ρ^|lag|."""
        k = validation.integer(lag, "lag", where=self.spec)
        return self.rho ** abs(k)


def _ar1(drive: ArrayLike, rho: float) -> np.ndarray:
    """y[0] = drive[0], y[t] = rho y[t-1] + drive[t], in float64 and time order.

    A plain Python loop over floats, one multiply and one add per value
    (no fused multiply-add, no reordering: the same rounding everywhere),
    about 0.1 µs per value.
    """
    values = np.asarray(drive, dtype=np.float64).tolist()
    acc = 0.0
    for t, d in enumerate(values):
        acc = rho * acc + d
        values[t] = acc
    return np.asarray(values, dtype=np.float64)
