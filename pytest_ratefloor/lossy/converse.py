"""The impossible point of a lossy codec: a length no decoder told only ``n`` can reach.

Statement. Fix an output law ``Q`` on reconstructions and a slope ``λ ≥ 0``
(bits per unit of distortion), and let ``f(x) = −log₂ E_{Y~Q} 2^{−λ d(x,Y)}``
and ``C = sup_y E_X 2^{f(X) − λ d(X,y)}`` for the source's marginal law.
Then for every deterministic codec, with ``ℓ`` its length on the sample
``Xⁿ`` (bits), ``D̂`` its measured mean distortion and ``c > 0``::

    P[ ℓ + log₂((ℓ+1)(ℓ+2)) + 2 + c  <  T(Xⁿ) ]  ≤  2⁻ᶜ,
    T(Xⁿ) = Σᵢ f(Xᵢ) − λ·n·D̂ − n·log₂ C        (the sample's tilted information)

Derivation (the single-shot converse of Kostina & Verdú 2012, "Fixed-length
lossy compression in the finite blocklength regime", from memory, extended to
variable length as the lossless rule of :mod:`pytest_ratefloor.rate`
extends Kraft). For one reconstruction ``yⁿ`` and a memoryless source,
``E 2^{Σ f(Xᵢ) − λ d(Xᵢ,yᵢ)} = Πᵢ c(yᵢ) ≤ Cⁿ``, so by Markov's inequality
``P[Σ f − λ Σ d − n log₂ C ≥ a] ≤ 2⁻ᵃ``. The decoder sees only the stream and
``n``, so at most ``2^ℓ`` reconstructions have a stream of ``ℓ`` bits
(times 4 for the payload's shape: bytes, a ``(bytes, nbits)`` pair, a big- or
little-endian bitarray — hence the ``+ 2``). Give each such reconstruction
the weight ``w = 2^{−ℓ}/(4(ℓ+1)(ℓ+2))`` (the weights sum to at most 1) and
take ``a = −log₂ w + c``; the union bound over all reconstructions gives the
statement. A union over a grid of ``K`` slopes fixed before the sample is
drawn costs ``log₂ K`` more, so the rule checked is::

    impossible  ⇔  ℓ  <  T_best − margin,
    margin = c + 2 + log₂((ℓ+1)(ℓ+2)) + log₂ K,   c = 32

(``T_best``: the largest ``T`` over the grid points next to the measured
distortion). A correct codec trips it with probability below 2⁻³²; it holds
for every ``n``, for fixed- and variable-rate codecs alike, with no
approximation: no normal law of the distortion or the rate is assumed. The
price is that ``T`` is the sample's own tilted information, which spreads
around ``n·R(D̂)`` by about ``√(n·V)`` bits (``V``, the dispersion: for the
Gaussian source under MSE ``V = ½·log₂²e``, Kostina & Verdú, from memory).
So a rate is called impossible when it lies below ``R(D̂)`` by more than
``(margin ± √(nV))/n`` bits/sample (about 0.003 bits/sample at ``n = 10⁵``).

The tilted informations used (``Q`` the law that achieves ``R(D)`` and
``λ = −R'(D)``, so that ``C = 1`` and ``E T = n·R(D)``; ``T`` is largest at
``D = D̂``):

* Gaussian, MSE (``Q = N(0, σ²−D)``, ``λ = log₂e/(2D)``):
  ``T = (n/2)·log₂(σ²/D) + (log₂e/2)·(Σx²/σ² − Σd/D)``;
* Laplacian, absolute error (``Q`` = an atom ``(D/b)²`` at 0 plus the
  Laplacian(b) with the rest, Berger 1971, from memory; ``λ = log₂e/D``):
  ``T = n·log₂(b/D) + log₂e·(Σ|x|/b − Σd/D)``;
* Gauss–Markov (stationary AR(1), MSE), with ``Q = N(0, Σₙ − D·I)``, valid
  for ``D ≤ σ²(1−|ρ|)/(1+|ρ|)`` (the least value of the spectral density, a
  lower bound of every eigenvalue of the covariance ``Σₙ``; Grenander–Szegő,
  from memory): ``T = ½log₂det Σₙ − (n/2)·log₂D + (log₂e/2)·(xᵀΣₙ⁻¹x − Σd/D)``
  with ``det Σₙ = σ²ⁿ(1−ρ²)ⁿ⁻¹`` and ``xᵀΣₙ⁻¹x = x₁²/σ² + Σ(xₜ−ρxₜ₋₁)²/(σ²(1−ρ²))``.
  The source has memory: the statement holds for the whole block at once
  (``Xⁿ`` is one Gaussian vector). Above that distortion the bound is taken
  at its top (still sound, weaker: a water-filled ``Q`` needs the
  eigenvectors of ``Σₙ``);
* a finite-alphabet memoryless source, any distortion matrix (Hamming:
  ``d = 1 − I``): ``Q`` from Blahut–Arimoto iterations at slope ``λ``
  (Blahut 1972, Arimoto 1972) and ``C = max_y Σₓ P(x)2^{−λd(x,y)}/Z(x)``,
  ``Z(x) = Σ_y Q(y)2^{−λd(x,y)} = 2^{−f(x)}``, computed exactly, so an
  unconverged ``Q`` only weakens the bound. A reconstruction outside the
  alphabet costs 1 against every symbol under Hamming, so it is dominated.

Finite precision. The statement is about the continuous model; a drawn
sample is a function of 53-bit uniforms (see
:mod:`pytest_ratefloor.sources.continuous`), so a codec that sends those bits
reproduces it exactly at 53 bits/sample, which the continuous model calls
impossible. Couple the two: the continuous uniform in each 2⁻⁵³ cell gives a
continuous sample ``X`` with the model's law, the cell's midpoint the drawn
``X'``. A codec for ``X'`` is then a codec for ``X`` with mean squared error
at most ``(√D̂ + ε)²`` (mean absolute error at most ``D̂ + ε``), ``ε²`` the
realised mean of ``|X − X'|²``. The expected ``|X − X'|²`` per sample is below
``2⁻⁵⁰`` (in units of σ², b²): Box–Muller's radius and the Laplacian's
``−b·ln v`` move by ``2⁻⁵³/u`` across a cell at ``u``, and summed over the cells
this is dominated by the first one, about ``2⁻⁵³``. By Markov's inequality
``ε² ≤ 2⁻⁵⁰·2³³ = 2⁻¹⁷`` except with probability ``2⁻³³``, so ``T`` is taken
with ``ε = 2⁻⁸·⁵`` (:data:`RESOLUTION`; ``σ/(1−|ρ|)`` for Gauss–Markov, whose
filter adds up the drive's errors) added to the distortion and subtracted
from the sample's energy (triangle inequality). The total false-alarm
probability is then below ``2⁻³² + 2⁻³³``, and no real-valued case is called
impossible from precision finer than about 8.5 bits per sample (a cheat that
reads the sample still is: it claims infinitely many).

Grids (fixed by ``n`` and the source): distortions ``D_k = D_top·(1+1/√n)^{−k}``
down to ``D_top·2^{−128}`` (an off-grid ``D̂`` loses under half a bit); slopes
``λ_k = 2k/(d_max·√n)`` up to ``64/d_min``. Other sources (chains, empirical
models, sources the list above does not name) get no impossible-point check:
:func:`converse_bound` returns ``None`` and the record says so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from pytest_ratefloor.sources.base import Source

if TYPE_CHECKING:
    from pytest_ratefloor.lossy.distortion import Distortion, LossySource

__all__ = ["CONVERSE_CONFIDENCE_BITS", "RESOLUTION", "Converse", "converse_bound"]

#: ``c`` of the rule: a correct codec is called impossible with probability ≤ 2⁻ᶜ.
CONVERSE_CONFIDENCE_BITS = 32
#: Bound ``e`` on the root-mean-square distance between a real-valued sample as
#: drawn (finite precision) and the continuous one it stands for, in units of
#: the source's scale (σ, b; σ/(1−|ρ|) for Gauss–Markov); holds except with
#: probability 2⁻³³ (see the module docstring).
RESOLUTION = 2.0**-8.5
#: Bits for the payload's shape (bytes, pair, big- or little-endian bitarray).
_SHAPE_BITS = 2.0
#: Largest alphabet for which the finite-alphabet bound is computed, and the
#: largest distortion matrix (entries) for it.
_MAX_ALPHABET = 4096
_MAX_MATRIX = 1 << 16
_LOG2E = 1.0 / math.log(2.0)
_BA_ITERATIONS = 2000


@dataclass(frozen=True)
class Converse:
    """The lower limit on a stream's length that the impossible-point rule uses.

    ``tilted_bits`` is ``T`` (see the module docstring) at the best grid
    point, ``margin_bits`` the allowance (confidence, payload shape, length
    weight, grid), ``limit_bits = tilted_bits − margin_bits``: a stream shorter
    than that is impossible. ``slope`` is the ``λ`` used (bits per unit of
    distortion), ``grid_size`` the ``K`` of the union bound.
    """

    tilted_bits: float
    margin_bits: float
    slope: float
    grid_size: int
    method: str

    @property
    def limit_bits(self) -> float:
        return self.tilted_bits - self.margin_bits


def _margin(bits: int, grid_size: int) -> float:
    return (CONVERSE_CONFIDENCE_BITS + _SHAPE_BITS + math.log2((bits + 1) * (bits + 2))
            + math.log2(grid_size))


def _distortion_grid(top: float, n: int, dhat: float) -> tuple[list[float], int]:
    """The one or two grid distortions next to ``dhat``, and the grid's size."""
    step = math.log1p(1.0 / math.sqrt(n))
    size = math.ceil(128 * math.log(2.0) / step) + 1
    if dhat <= 0.0:
        return [top * math.exp(-step * (size - 1))], size
    k = math.log(top / dhat) / step
    ks = {min(size - 1, max(0, math.floor(k))), min(size - 1, max(0, math.ceil(k)))}
    return [top * math.exp(-step * j) for j in sorted(ks)], size


def _param(source: LossySource, *names: str) -> float | None:
    for name in names:
        value = source.params.get(name)
        if value is not None:
            return float(value)
    return None


def _mse_with_resolution(dsum: float, n: int, e: float) -> float:
    """Mean squared distortion from the continuous sample: ``(√D̂ + e)²`` (Minkowski)."""
    return (math.sqrt(max(dsum, 0.0) / n) + e) ** 2


def _gaussian(source: LossySource, x: np.ndarray, dsum: float, n: int, resolution: float
              ) -> tuple[float, float, int] | None:
    sigma = _param(source, "sigma")
    if sigma is None:
        return None
    var = sigma * sigma
    e = sigma * resolution
    energy = max(0.0, math.sqrt(float(np.dot(x, x))) - math.sqrt(n) * e) ** 2 / var
    dhat = _mse_with_resolution(dsum, n, e)
    grid, size = _distortion_grid(var, n, dhat)
    best = max(((n / 2) * math.log2(var / d) + (_LOG2E / 2) * (energy - n * dhat / d), d)
               for d in grid)
    return best[0], _LOG2E / (2 * best[1]), size


def _laplacian(source: LossySource, x: np.ndarray, dsum: float, n: int, resolution: float
               ) -> tuple[float, float, int] | None:
    b = _param(source, "scale", "b")
    if b is None:
        return None
    e = b * resolution
    spread = max(0.0, float(np.sum(np.abs(x))) - n * e) / b
    dhat = dsum / n + e  # mean |x − x̂| ≤ mean |x' − x̂| + rms |x − x'|
    grid, size = _distortion_grid(b, n, dhat)
    best = max((n * math.log2(b / d) + _LOG2E * (spread - n * dhat / d), d) for d in grid)
    return best[0], _LOG2E / best[1], size


def _gauss_markov(source: LossySource, x: np.ndarray, dsum: float, n: int, resolution: float
                  ) -> tuple[float, float, int] | None:
    rho, sigma = _param(source, "rho"), _param(source, "sigma")
    if rho is None or sigma is None or not abs(rho) < 1.0:
        return None
    var = sigma * sigma
    innovation = var * (1.0 - rho * rho)
    top = var * (1.0 - abs(rho)) / (1.0 + abs(rho))
    e = sigma * resolution / (1.0 - abs(rho))  # the filter's gain on the drive's error
    resid = x[1:] - rho * x[:-1]
    quad_sample = float(x[0] * x[0]) / var + float(np.dot(resid, resid)) / innovation
    quad = max(0.0, math.sqrt(quad_sample) - math.sqrt(n * e * e / top)) ** 2
    logdet = math.log2(var) + (n - 1) * math.log2(innovation)
    dhat = _mse_with_resolution(dsum, n, e)
    grid, size = _distortion_grid(top, n, dhat)
    best = max((logdet / 2 - (n / 2) * math.log2(d) + (_LOG2E / 2) * (quad - n * dhat / d), d)
               for d in grid)
    return best[0], _LOG2E / (2 * best[1]), size


class _Kernel:
    """``A = 2^{−λ d}`` as the two products Blahut–Arimoto needs: ``A q`` and ``Aᵀ v``.

    Hamming (``d = 1 − I`` over ``k`` symbols) is done in O(k):
    ``A = 2^{−λ}·J + (1 − 2^{−λ})·I``; a matrix is dense.
    """

    def __init__(self, d: np.ndarray | None, size: int, slope: float) -> None:
        self.dense = None if d is None else np.exp2(-slope * d)
        self.off = 2.0 ** -slope
        self.size = size

    def apply(self, q: np.ndarray) -> np.ndarray:
        if self.dense is not None:
            return np.asarray(self.dense @ q)
        return self.off * float(q.sum()) + (1.0 - self.off) * q

    def apply_t(self, v: np.ndarray) -> np.ndarray:
        if self.dense is not None:
            return np.asarray(self.dense.T @ v)
        return self.off * float(v.sum()) + (1.0 - self.off) * v


def _slope_certificate(probs: np.ndarray, kernel: _Kernel, q: np.ndarray, n: int
                       ) -> tuple[np.ndarray, float, np.ndarray]:
    """``f`` per alphabet symbol, ``log₂ C`` and ``Q`` at one slope.

    ``Q`` comes from Blahut–Arimoto iterations started at ``q``, stopped once
    ``n·log₂ C`` (what the bound loses to an unconverged ``Q``) is below
    0.01 bit; ``C`` is computed exactly for the ``Q`` reached, so stopping
    early only weakens the bound.
    """
    tol = 0.01 * math.log(2.0) / n  # log₂ C ≈ (C − 1)/ln 2
    for _ in range(_BA_ITERATIONS):
        c = kernel.apply_t(probs / kernel.apply(q))
        if float(np.max(c)) - 1.0 < tol:
            break
        q = q * c
        q /= q.sum()
    z = kernel.apply(q)
    log_c = max(0.0, math.log2(float(np.max(kernel.apply_t(probs / z)))))
    return -np.log2(z), log_c, q


def _finite(source: LossySource, x: np.ndarray, per_sample: np.ndarray,
            distortion: Distortion) -> tuple[float, float, int] | None:
    if not isinstance(source, Source) or not source.memoryless or source.alphabet_size is None:
        return None
    if source.alphabet_size > _MAX_ALPHABET:
        return None
    symbols, probs = source.pmf_table(tail=0.0)
    if distortion.matrix is not None:
        d: np.ndarray | None = distortion.matrix
        if distortion.matrix.size > _MAX_MATRIX:
            return None
        d_max, d_min = float(distortion.matrix.max()), distortion.matrix[distortion.matrix > 0]
        if d_min.size == 0:
            return None  # no reconstruction costs anything: nothing is impossible
        d_low, columns = float(d_min.min()), distortion.matrix.shape[1]
    elif distortion.kind == "hamming":
        d, d_max, d_low, columns = None, 1.0, 1.0, len(symbols)
    else:
        return None
    rows = np.searchsorted(symbols, x)
    if rows.size and (int(rows.max()) >= len(symbols) or not np.array_equal(symbols[rows], x)):
        return None  # a symbol outside the support: the sample is not from this source
    counts = np.bincount(rows, minlength=len(symbols)).astype(np.float64)
    n = len(x)
    dsum = float(np.sum(per_sample))
    step = 2.0 / (d_max * math.sqrt(n))
    size = math.floor(64.0 / d_low / step) + 1
    cache: dict[int, float] = {}
    start = [np.full(columns, 1.0 / columns)]

    def value(k: int) -> float:
        if k not in cache:
            kernel = _Kernel(d, columns, k * step)
            f, log_c, start[0] = _slope_certificate(probs, kernel, start[0], n)
            cache[k] = float(counts @ f) - k * step * dsum - n * log_c
        return cache[k]

    # Ternary search over the grid indices for the largest T. Every index gives
    # a sound bound, so a T that is not unimodal in k costs sharpness only.
    lo, hi = 0, size - 1
    while hi - lo > 2:
        third = (hi - lo) // 3
        if value(lo + third) < value(hi - third):
            lo = lo + third + 1
        else:
            hi = hi - third
    best_k = max(range(lo, hi + 1), key=value)
    return value(best_k), best_k * step, size


def converse_bound(source: LossySource, distortion: Distortion, sample: np.ndarray,
                   per_sample: np.ndarray, bits: int, *, resolution: float = RESOLUTION
                   ) -> Converse | None:
    """The impossible-point limit for a stream of ``bits`` bits, or ``None`` where none is known.

    ``sample`` is the source's sample, ``per_sample`` the distortion of each
    reconstructed sample under ``distortion``. ``resolution`` is the ``ε`` of a
    real-valued sample (in units of the source's scale; 0 treats the sample as
    exact, for checking the formulas).
    """
    n = len(sample)
    if n == 0:
        return None
    dsum = float(np.sum(per_sample))
    family = getattr(source, "family", "")
    found: tuple[float, float, int] | None = None
    method = ""
    if sample.dtype.kind == "f":
        x = sample.astype(np.float64)
        if family == "gaussian" and distortion.kind == "mse":
            found, method = _gaussian(source, x, dsum, n, resolution), "gaussian-mse"
        elif family == "laplacian" and distortion.kind == "abs":
            found, method = _laplacian(source, x, dsum, n, resolution), "laplacian-abs"
        elif family == "gauss_markov" and distortion.kind == "mse":
            found, method = _gauss_markov(source, x, dsum, n, resolution), "gauss-markov-mse"
    else:
        found, method = _finite(source, sample, per_sample, distortion), "blahut-arimoto-slope"
    if found is None:
        return None
    tilted, slope, size = found
    return Converse(tilted, _margin(bits, size), slope, size, method)
