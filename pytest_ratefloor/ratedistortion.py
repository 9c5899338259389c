"""Rate–distortion functions: closed forms, reverse water-filling, Blahut–Arimoto.

R(D) is the least number of bits per sample with which any code — however
long its blocks — can describe a source so that the mean distortion is at
most D (Shannon 1959); D(R) is its inverse. Everything here is in bits per
sample, and is a property of the *model* source: R(D) of a Gaussian says
nothing certain about a real signal, whose statistics differ.

Distortion measures (per sample, averaged over the sample):

* ``"mse"``: (x − y)², for real-valued sources;
* ``"abs"``: |x − y|, for real-valued sources;
* ``"hamming"``: 0 if y = x else 1, for finite-alphabet sources (D is then
  the symbol error rate);
* a matrix ``d[x, y] >= 0`` (array-like, 2-D): row ``i`` is the source
  symbol ``source.pmf_table()[0][i]`` (the symbols of positive probability,
  ascending), column ``j`` is reproduction symbol number ``j`` (the columns
  are the codec's own reproduction alphabet; their number may differ from
  the rows').

Results:

* Gaussian, MSE: R(D) = max(0, ½ log2(σ²/D)) (Cover & Thomas, *Elements of
  Information Theory*, ch. 10 — from memory).
* Laplacian with scale b, absolute error: R(D) = log2(b/D) for D <= b, else
  0 (Berger 1971, *Rate Distortion Theory* — from memory).
* Gauss–Markov (stationary AR(1), correlation ρ), MSE: reverse water-filling
  over the power spectrum S(w) = σ²(1−ρ²)/(1 − 2ρ cos w + ρ²) (Kolmogorov
  1956; Berger 1971 — from memory), evaluated in closed form except one
  dilogarithm; for D <= σ²(1−|ρ|)/(1+|ρ|) it is ½ log2(σ²(1−ρ²)/D).
* Bernoulli(p), Hamming: h(p) − h(D) for D <= min(p, 1−p), else 0.
* Any finite pmf with Hamming or a matrix: the Blahut–Arimoto algorithm
  (Blahut 1972; Arimoto 1972) with Blahut's upper and lower bounds, iterated
  until they are within ``tol`` (default 1e-9 bits), see :func:`blahut_arimoto`.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import ArrayLike

from pytest_ratefloor import validation
from pytest_ratefloor.blahut_arimoto import (
    BlahutArimotoResult,
    _prepare,
    blahut_arimoto,
    distortion_matrix,
)

if TYPE_CHECKING:
    from pytest_ratefloor.sources.base import Source

__all__ = [
    "MEASURES",
    "BlahutArimotoResult",
    "bernoulli_hamming_dr",
    "bernoulli_hamming_rd",
    "blahut_arimoto",
    "check_distortion",
    "check_rate",
    "continuous_measure",
    "curve",
    "discrete_distortion_rate",
    "discrete_rate_distortion",
    "distortion_matrix",
    "gauss_markov_dr",
    "gauss_markov_rd",
    "gaussian_dr",
    "gaussian_rd",
    "hamming_lower_bound",
    "laplacian_dr",
    "laplacian_rd",
]

_LN2 = math.log(2.0)

#: The distortion measures named by text.
MEASURES = ("mse", "abs", "hamming")


# --------------------------------------------------------------------------
# argument checks


def check_distortion(D: object, *, where: str | None = None, allow_zero: bool = False) -> float:
    """A distortion level: a finite number > 0 (>= 0 when ``allow_zero``)."""
    return validation.real(D, "D", minimum=0.0, low_open=not allow_zero, where=where)


def check_rate(R: object, *, where: str | None = None) -> float:
    """A rate in bits per sample: a finite number >= 0."""
    return validation.real(R, "R", minimum=0.0, where=where)


def continuous_measure(source: object, distortion: object) -> str:
    """The distortion name for a real-valued source (``None``: its default)."""
    spec = getattr(source, "spec", None)
    where = f"{spec}" if spec else None
    if distortion is None:
        return str(getattr(source, "default_distortion", "mse"))
    if not isinstance(distortion, str):
        raise TypeError(validation.message(
            "distortion", "'mse' or 'abs' (a distortion matrix needs a finite-alphabet source)",
            distortion, where))
    return validation.choice(distortion, "distortion", MEASURES, where=where)


# --------------------------------------------------------------------------
# closed forms


def gaussian_rd(variance: float, D: float) -> float:
    """max(0, ½ log2(σ²/D)): R(D) of N(0, σ²) under MSE (Cover & Thomas ch. 10, from memory)."""
    if variance <= D:
        return 0.0
    return 0.5 * math.log2(variance / D)


def gaussian_dr(variance: float, R: float) -> float:
    """σ² 2^(−2R): D(R) of N(0, σ²) under MSE."""
    return variance * 2.0 ** (-2.0 * R)


def laplacian_rd(scale: float, D: float) -> float:
    """log2(b/D) for D <= b, else 0: Laplacian under absolute error (Berger 1971, from memory)."""
    if scale <= D:
        return 0.0
    return math.log2(scale / D)


def laplacian_dr(scale: float, R: float) -> float:
    """b 2^(−R): D(R) of the Laplacian under absolute error."""
    return scale * 2.0 ** (-R)


def _binary_entropy(p: float) -> float:
    from pytest_ratefloor.sources.closed_form import binary_entropy

    return binary_entropy(p)


def bernoulli_hamming_rd(p: float, D: float) -> float:
    """h(p) − h(D) for D <= min(p, 1−p), else 0 (Cover & Thomas ch. 10, from memory)."""
    low = min(p, 1.0 - p)
    if low <= D:
        return 0.0
    return max(0.0, _binary_entropy(p) - _binary_entropy(D))


def bernoulli_hamming_dr(p: float, R: float) -> float:
    """The D in [0, min(p, 1−p)] with h(p) − h(D) = R (0 when R >= h(p))."""
    hp = _binary_entropy(p)
    low = min(p, 1.0 - p)
    if hp <= R:
        return 0.0
    if R <= 0.0:
        return low
    return _bisect_decreasing(lambda d: hp - _binary_entropy(d), R, 0.0, low)


def _bisect_decreasing(f: Callable[[float], float], y: float, lo: float, hi: float) -> float:
    """The x in [lo, hi] with f(x) = y for a decreasing f, to the last bit (bisection)."""
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if mid in (lo, hi):
            break
        if f(mid) > y:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


# --------------------------------------------------------------------------
# Gauss–Markov: reverse water-filling over the AR(1) spectrum


def _gm_point(a: float, variance: float, w0: float) -> tuple[float, float]:
    """(D, R) of reverse water-filling for AR(1) with |ρ| = a, water level θ = S(w0).

    S(w) = σ²(1−a²)/g(w), g(w) = 1 − 2a cos w + a², decreases on [0, π], so
    the band where S > θ is [0, w0] (for ρ < 0 the mirror band; S_ρ(w) =
    S_{−ρ}(π − w) gives the same D and R). With the antiderivative
    ∫ (1−a²)/g = 2 arctan(((1+a)/(1−a)) tan(w/2)) and the Fourier series
    ln g(w) = −2 Σ a^k cos(kw)/k:

    D = (1/π)[θ w0 + σ²(π − 2 arctan(((1+a)/(1−a)) tan(w0/2)))]
    R = (1/(2π ln 2))[w0 ln g(w0) + 2 Im Li₂(a e^{i w0})]

    (Im Li₂(a e^{iw}) = Σ a^k sin(kw)/k², from scipy's ``spence``:
    Li₂(z) = spence(1 − z)).
    """
    from scipy.special import spence

    g0 = 1.0 - 2.0 * a * math.cos(w0) + a * a
    theta = variance * (1.0 - a) * (1.0 + a) / g0
    half = 0.5 * w0
    band = 2.0 * math.atan2((1.0 + a) * math.sin(half), (1.0 - a) * math.cos(half))
    distortion = (theta * w0 + variance * (math.pi - band)) / math.pi
    z = a * complex(math.cos(w0), math.sin(w0))
    li2_imag = float(spence(1.0 - z).imag)
    rate = (w0 * math.log(g0) + 2.0 * li2_imag) / (2.0 * math.pi * _LN2)
    return distortion, max(0.0, rate)


def _gm_closed_form_limit(a: float, variance: float) -> float:
    """σ²(1−|ρ|)/(1+|ρ|): the least spectral value; below it R(D) = ½ log2(σ²(1−ρ²)/D)."""
    return variance * (1.0 - a) / (1.0 + a)


def gauss_markov_rd(rho: float, sigma: float, D: float) -> float:
    """R(D) under MSE of the stationary Gaussian AR(1) process, bits per sample.

    Closed form ½ log2(σ²(1−ρ²)/D) for D <= σ²(1−|ρ|)/(1+|ρ|); between that
    and σ² the water level is found by bisection on the band edge w0 (each
    step evaluates D(w0) in closed form), then R(w0) as in :func:`_gm_point`;
    0 for D >= σ².
    """
    a = abs(rho)
    variance = sigma * sigma
    if variance <= D:
        return 0.0
    if _gm_closed_form_limit(a, variance) >= D:
        return 0.5 * math.log2(variance * (1.0 - a) * (1.0 + a) / D)
    w0 = _bisect_decreasing(lambda w: _gm_point(a, variance, w)[0], D, 0.0, math.pi)
    return _gm_point(a, variance, w0)[1]


def gauss_markov_dr(rho: float, sigma: float, R: float) -> float:
    """D(R) under MSE of the stationary Gaussian AR(1) process (inverse of gauss_markov_rd)."""
    a = abs(rho)
    variance = sigma * sigma
    if R <= 0.0:
        return variance
    if math.log2(1.0 + a) <= R:  # the rate at the closed-form limit
        return variance * (1.0 - a) * (1.0 + a) * 2.0 ** (-2.0 * R)
    w0 = _bisect_decreasing(lambda w: -_gm_point(a, variance, w)[1], -R, 0.0, math.pi)
    return _gm_point(a, variance, w0)[0]


# --------------------------------------------------------------------------
# finite-alphabet sources

#: Mass left out of the table of an unbounded source (see :func:`discrete_rate_distortion`).
UNBOUNDED_TAIL = 1e-15
#: Most symbols a source may have for R(D) by Blahut–Arimoto (Hamming: O(k) per step,
#: a matrix: O(k·m), so matrices are held to fewer).
HAMMING_SYMBOL_LIMIT = 1 << 20
MATRIX_ENTRY_LIMIT = 1 << 24


def _discrete_setup(source: Source, distortion: object, where: str
                    ) -> tuple[np.ndarray, np.ndarray | None, float]:
    """(probabilities, matrix or None for Hamming, tail mass left out of the table)."""
    if not source.memoryless:
        raise ValueError(
            f"{where}: {source.spec} has memory; R(D) of the process is not that of its "
            "one-symbol marginal and has no general closed form here "
            "(ratedistortion.hamming_lower_bound gives the Shannon lower bound)")
    if isinstance(distortion, str):
        name = validation.choice(distortion, "distortion", MEASURES, where=where)
        if name != "hamming":
            raise ValueError(f"{where}: distortion {name!r} needs a real-valued source; "
                             f"{source.spec} has integer symbols (use 'hamming' or a matrix)")
        matrix = None
    else:
        matrix = distortion
    if source.alphabet_size is None:
        if matrix is not None:
            raise ValueError(f"{where}: a distortion matrix needs a finite alphabet; "
                             f"{source.spec} is unbounded (use 'hamming')")
        _, probs = source.pmf_table(tail=UNBOUNDED_TAIL)
        tail = max(0.0, 1.0 - math.fsum(probs.tolist()))
    else:
        _, probs = source.pmf_table(tail=0.0)
        tail = 0.0
    if probs.size > HAMMING_SYMBOL_LIMIT:
        raise ValueError(f"{where}: {source.spec} has {probs.size} symbols, more than "
                         f"{HAMMING_SYMBOL_LIMIT} for Blahut–Arimoto")
    d = None
    if matrix is not None:
        d = distortion_matrix(matrix, rows=probs.size, where=where)  # type: ignore[arg-type]
        if d.size > MATRIX_ENTRY_LIMIT:
            raise ValueError(f"{where}: a {d.shape} distortion matrix exceeds "
                             f"{MATRIX_ENTRY_LIMIT} entries")
    return probs / math.fsum(probs.tolist()), d, tail


def discrete_rate_distortion(source: Source, D: object, distortion: object = "hamming", *,
                             tol: float = 1e-9) -> BlahutArimotoResult:
    """R(D) of a memoryless finite- or countable-alphabet source, with bounds.

    Hamming (D = symbol error rate; R(0) = the entropy) or a matrix whose
    rows follow ``source.pmf_table()[0]``. By :func:`blahut_arimoto` on the
    pmf. An unbounded source is truncated to a table missing τ <=
    :data:`UNBOUNDED_TAIL` of mass; with R_T the curve of the renormalised
    table and B the indicator of the tail, I(X;Y) >= I(X;Y|B) gives R(D) >=
    (1−τ) R_T(D/(1−τ)), and coding the table at (D−τ)/(1−τ) while sending
    nothing for tail symbols gives R(D) <= (1−τ) R_T((D−τ)/(1−τ)) + h(τ);
    the reported bounds include both (their width grows by about h(τ) ≈
    5e-14 bits). The figure is that of the model: for a source fitted to
    data it is an estimate.
    """
    where = f"{source.spec}.rate_distortion"
    value = check_distortion(D, where=where, allow_zero=True)
    probs, d, tail = _discrete_setup(source, distortion, where)
    if d is None and value == 0.0:
        h = source.entropy
        return BlahutArimotoResult(h, 0.0, h, h, 0, -math.inf)
    if tail == 0.0:
        return blahut_arimoto(probs, d, target_distortion=value, tol=tol)
    inner = (value - tail) / (1.0 - tail)
    if inner <= 0.0:
        h = source.entropy
        return BlahutArimotoResult(h, value, 0.0, h, 0, -math.inf, False)
    res = blahut_arimoto(probs, None, target_distortion=inner, tol=tol)
    upper = (1.0 - tail) * res.rate_upper + _binary_entropy(tail)
    # the supporting line at `inner` with the result's slope bounds R_T at D/(1-τ) from below
    lower = (1.0 - tail) * max(0.0, res.rate_lower + res.slope * (value / (1.0 - tail) - inner))
    return BlahutArimotoResult(0.5 * (upper + lower), value, lower, upper, res.iterations,
                               res.slope, res.converged)


def discrete_distortion_rate(source: Source, R: object, distortion: object = "hamming", *,
                             tol: float = 1e-12) -> float:
    """D(R): the least distortion at rate ``R`` (inverse of :func:`discrete_rate_distortion`).

    Found by bisection on D, about 40 evaluations of R(D), until the interval
    is below ``tol`` (absolute, in distortion units). Each R is known to
    1e-9 bits, so D is accurate to about 1e-9 / |dR/dD| (or ``tol``, if
    larger). A large distortion matrix makes this slow (each R(D) costs
    O(k·m) per Blahut–Arimoto step).
    """
    where = f"{source.spec}.distortion_rate"
    value = check_rate(R, where=where)
    probs, d, _ = _discrete_setup(source, distortion, where)
    p, kernel, floor = _prepare(probs, d, where)
    hi = floor + kernel.max_distortion(p)
    lo = floor
    if value == 0.0:
        return hi
    if d is None and value >= source.entropy:
        return 0.0
    for _ in range(200):
        if hi - lo <= tol:
            break
        mid = 0.5 * (lo + hi)
        if mid <= floor:
            break
        if discrete_rate_distortion(source, mid, distortion).rate > value:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def hamming_lower_bound(source: Source, D: object) -> float:
    """Shannon lower bound under Hamming: max(0, H − h(D) − D log2(k−1)), D <= (k−1)/k.

    H is the entropy (rate) of ``source`` and k its alphabet size: a lower
    bound on R(D) for any stationary source over k symbols (from Fano's
    inequality, Cover & Thomas ch. 10, from memory), also for sources with
    memory, where the exact R(D) is unknown here; for some binary Markov
    sources it is exact at small D (Gray 1971, from memory). It is a
    *lower bound*: a gap measured against it overstates the true gap.
    """
    where = f"{source.spec}.hamming_lower_bound"
    value = check_distortion(D, where=where, allow_zero=True)
    k = source.alphabet_size
    if k is None:
        raise ValueError(f"{where}: needs a finite alphabet, {source.spec} is unbounded")
    if k == 1 or value >= (k - 1) / k:
        return 0.0
    bound = source.entropy - _binary_entropy(value) - value * math.log2(k - 1)
    return max(0.0, bound)


# --------------------------------------------------------------------------
# curves


def curve(source: object, distortion: object = None, *, rates: ArrayLike | None = None,
          distortions: ArrayLike | None = None) -> tuple[np.ndarray, np.ndarray]:
    """(distortions, rates) of the source's R(D) curve, for plotting.

    Give ``distortions`` (R is computed at each) or ``rates`` (D is
    computed at each); ``distortion`` is the measure (``None``: the source's
    default, Hamming for integer sources).
    """
    if (rates is None) == (distortions is None):
        raise TypeError("curve: give exactly one of rates and distortions")
    measure = distortion
    if measure is None:
        measure = getattr(source, "default_distortion", "hamming")
    rd = getattr(source, "rate_distortion", None)
    dr = getattr(source, "distortion_rate", None)
    if rd is None or dr is None:
        raise TypeError(validation.message("source", "a source", source, "curve"))
    if distortions is not None:
        ds = np.asarray(distortions, dtype=np.float64).ravel()
        return ds, np.array([rd(float(x), measure) for x in ds], dtype=np.float64)
    rs = np.asarray(rates, dtype=np.float64).ravel()
    return np.array([dr(float(x), measure) for x in rs], dtype=np.float64), rs
