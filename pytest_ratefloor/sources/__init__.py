"""Reference sources of known entropy, sampled reproducibly: the factories.

A codec is measured on samples of these sources: memoryless families with
exact (closed-form or truncation-bounded) entropy, a finite stationary Markov
chain whose entropy *rate* is known, and empirical sources fitted to the
user's own data whose entropy is a plug-in *estimate*. This package module
holds the factory functions (``uniform``, ``bernoulli``, …,
``standard_suite``) and re-exports the source classes; each concern has its
own module:

=====================  ======================================================
``base``               the :class:`Source` contract (spec, entropy, sampling,
                       information, pmf table, the code lengths the floors ask
                       for) and spec helpers
``sampling``           raw PCG64 words to symbols: exact thresholds, inverse
                       CDF with guide and alias tables, the geometric counter,
                       chunked drawing (the sampling contract is stated there)
``closed_form``        uniform, Bernoulli, geometric, two-sided geometric
                       (closed-form entropy); :func:`binary_entropy`
``summed``             Zipf, Poisson, categorical (entropy as a sum)
``chains``             Markov chains and the chain sampler
``empirical``          data-fitted order-k context models, :func:`from_file`
``continuous``         real-valued sources with a known R(D): Gaussian,
                       Laplacian, Gauss–Markov (not :class:`Source`: no entropy)
=====================  ======================================================

Entropies are exact closed forms where they exist (uniform, Bernoulli,
geometric, two-sided geometric) and exact finite or truncation-bounded sums
elsewhere. ``0 * log 0 = 0`` throughout. Empirical sources report an
*estimate* (``is_estimate = True``): an entropy measured on one sample of
data says nothing certain about other data from the same origin.
"""

from __future__ import annotations

import os
from collections.abc import Sequence

from numpy.typing import ArrayLike

from pytest_ratefloor.sources.base import Source
from pytest_ratefloor.sources.chains import Markov
from pytest_ratefloor.sources.closed_form import (
    Bernoulli,
    Geometric,
    TwoSidedGeometric,
    Uniform,
)
from pytest_ratefloor.sources.closed_form import (
    binary_entropy as binary_entropy,  # for the report's plot; not in __all__
)
from pytest_ratefloor.sources.composite import Piecewise, RandomWalk
from pytest_ratefloor.sources.continuous import ContinuousSource, Gaussian, GaussMarkov, Laplacian
from pytest_ratefloor.sources.corpora import MAX_CORPUS_BYTES, Corpus
from pytest_ratefloor.sources.corpora import corpus as _corpus
from pytest_ratefloor.sources.corpora import corpus_files as _corpus_files
from pytest_ratefloor.sources.empirical import Empirical, from_file
from pytest_ratefloor.sources.summed import Categorical, Poisson, Zipf

__all__ = [
    "Bernoulli",
    "Categorical",
    "ContinuousSource",
    "Corpus",
    "Empirical",
    "GaussMarkov",
    "Gaussian",
    "Geometric",
    "Laplacian",
    "Markov",
    "Piecewise",
    "Poisson",
    "RandomWalk",
    "Source",
    "TwoSidedGeometric",
    "Uniform",
    "Zipf",
    "bernoulli",
    "categorical",
    "corpus",
    "corpus_files",
    "empirical",
    "from_file",
    "gauss_markov",
    "gaussian",
    "geometric",
    "laplacian",
    "markov",
    "piecewise",
    "poisson",
    "random_walk",
    "standard_suite",
    "two_sided_geometric",
    "uniform",
    "zipf",
]

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


def corpus(
    path: str | os.PathLike[str], symbol: str = "u8", *, max_bytes: int = MAX_CORPUS_BYTES
) -> Corpus | list[Corpus]:
    """A file's own symbols as a source (``sample(n)`` is its first n symbols, any seed);
    a folder or a glob gives one per file, as :func:`corpus_files` does (a list).

    Entropy: the order-0 plug-in estimate of the whole file (``is_estimate``);
    spec ``corpus(name=<base name>,sha=<12 hex of SHA-256>,symbol=<layout>)``.
    ``gate(codec, sources=corpus(...))`` takes either form. See :class:`Corpus`.
    """
    if isinstance(path, (str, os.PathLike)):  # anything else: the reader names it
        text = str(os.fspath(path))
        if os.path.isdir(text) or (not os.path.exists(text) and any(c in text for c in "*?[")):
            return _corpus_files(path, symbol, max_bytes=max_bytes)
    return _corpus(path, symbol, max_bytes=max_bytes)


def corpus_files(
    pattern: str | os.PathLike[str], symbol: str = "u8", *, max_bytes: int = MAX_CORPUS_BYTES
) -> list[Corpus]:
    """One :class:`Corpus` per file of a folder or a glob pattern (a list, sorted by path).

    A plain file gives a list of one. Specs name each file by its path
    relative to the folder (or the pattern's fixed leading folders).
    """
    return _corpus_files(pattern, symbol, max_bytes=max_bytes)


def random_walk(step: Source, start: int = 0) -> RandomWalk:
    """``Xₜ = Xₜ₋₁ + Dₜ``, ``X₀ = start`` (not emitted), steps ``Dₜ`` from ``step``.

    n symbols are n steps: information is exactly the steps' information and
    the entropy rate is ``step.entropy``. See :class:`RandomWalk`.
    """
    return RandomWalk(step, start)


def piecewise(pieces: Sequence[tuple[Source, int]], repeat: bool = True) -> Piecewise:
    """Segments of ``length`` symbols from each ``(source, length)`` in turn, cycled if ``repeat``.

    Entropy: the length-weighted mean over one cycle (``entropy_bits(n)``: the
    exact n-symbol figure); information: each segment's under its own
    source. See :class:`Piecewise`.
    """
    return Piecewise(pieces, repeat)


def gaussian(sigma: float = 1.0) -> Gaussian:
    """Independent real samples N(0, σ²); with MSE, R(D) = max(0, ½ log2(σ²/D))."""
    return Gaussian(sigma)


def laplacian(scale: float = 1.0) -> Laplacian:
    """Independent real samples of density e^(−|x|/b)/(2b), b = ``scale``.

    With absolute error, R(D) = log2(b/D) for D <= b, else 0 (Berger 1971).
    """
    return Laplacian(scale)


def gauss_markov(rho: float, sigma: float = 1.0) -> GaussMarkov:
    """Stationary AR(1): X_t = ρ X_{t-1} + sqrt(1−ρ²) σ W_t, |ρ| < 1, X_0 ~ N(0, σ²).

    With MSE, R(D) by reverse water-filling over its power spectrum; for
    D <= σ²(1−|ρ|)/(1+|ρ|) it is ½ log2(σ²(1−ρ²)/D).
    """
    return GaussMarkov(rho, sigma)


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
