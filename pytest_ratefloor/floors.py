"""The floors a measured code length is compared with.

Each floor is a number of bits for one sample ``x₁…xₙ`` of a source:

``"entropy"``
    ``n·H``, the entropy (rate) of the source times ``n`` (Shannon 1948). The
    usual target; a correct coder's length on one sample scatters around it
    by about ``√(n·V)`` bits (``V`` the varentropy), so it is a reference
    line, not a hard bound.
``"sample"``
    The self-information ``−log₂ P(x₁…xₙ)`` of the very sample drawn
    (``source.information``): removes the sampling noise. It is the only hard
    floor for one sample: by the Kraft–McMillan inequality and Barron's
    competitive-optimality lemma (Barron 1985, from memory) a decodable code
    beats it by ``c`` bits with probability at most ``2⁻ᶜ`` (see
    :func:`pytest_ratefloor.checks.impossible_margin`).
``"empirical"``
    ``n·Ĥ`` of the sample's own order-0 histogram (the plug-in entropy). No
    code that must describe its model can reach it; useful as the target of
    a static two-pass coder. Order 0 even for Markov sources (a context
    coder can beat it there).
``"huffman"``
    The expected length of the optimal symbol-by-symbol prefix code for the
    true distribution, times ``n``: what the source answers as
    ``source.optimal_code_rate()``. Memoryless sources: Huffman code lengths
    on ``source.pmf_table()`` (Huffman 1952); for an unbounded alphabet
    (Poisson, two-sided geometric) truncated at a tail of
    :data:`HUFFMAN_TAIL` = 2⁻⁶⁰, where the missing mass changes the
    expected length by less than 2⁻⁵⁰ bits/symbol, far below any tolerance.
    Geometric sources: the optimal Golomb code instead (Gallager & van
    Voorhis 1975, from memory), which is the optimal prefix code of the
    infinite alphabet. Markov sources and order-k empirical models: one
    Huffman code per state or context (for the symbols that follow it),
    weighted by the stationary or context distribution. A source, state or
    context with a single possible symbol needs 0 bits. An expected length,
    not a bound for one sample.
``"adaptive"``
    The exact ideal code length of the Krichevsky–Trofimov sequential
    estimator (½-counts) on the very sample (Krichevsky & Trofimov 1981;
    Rissanen 1984 for its optimality, both from memory), via log-gamma:
    ``L = log₂Γ(n + k/2) − log₂Γ(k/2) − Σₐ [log₂Γ(nₐ + ½) − log₂Γ(½)]``
    over an alphabet of ``k`` symbols — what an adaptive arithmetic coder
    with ½-counts reaches within a few bits; the source answers it as
    ``source.adaptive_code_length(sample)``. ``k`` is the source's alphabet
    size; for an unbounded alphabet it is the range ``max − min + 1`` of the
    sample (the coder is assumed to know that range). Markov sources and
    order-k empirical models: one estimator per context (the previous
    symbol, the k previous symbols), the first symbols costing ``log₂ k``
    each. The asymptotic form ``n·Ĥ + (k−1)/2·log₂ n`` is *not* used:
    its constant term is negative for ``k ≥ 4``, so it overshoots a correct
    KT coder.

This module holds the arithmetic (KT lengths, Huffman expected lengths,
histograms) and the dispatch by floor name; which distribution or which
contexts a source has is the source's own answer. scipy is imported only
when a KT length is computed.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Literal

import numpy as np
from numpy.typing import ArrayLike

from pytest_ratefloor import validation

if TYPE_CHECKING:
    from pytest_ratefloor.sources import Source

__all__ = [
    "FLOORS",
    "HUFFMAN_TAIL",
    "Floor",
    "adaptive_bits",
    "check_floor",
    "context_kt_bits",
    "empirical_bits",
    "floor_bits",
    "huffman_expected_length",
    "huffman_rate",
    "kt_bits",
    "symbol_counts",
]

#: The name of a floor, as ``floor=`` takes it.
Floor = Literal["entropy", "sample", "empirical", "huffman", "adaptive"]

FLOORS: dict[Floor, str] = {
    "entropy": "n·H, the entropy of the source",
    "sample": "the self-information of the sample, −log2 P(x1…xn)",
    "empirical": "n·Ĥ of the sample's order-0 histogram",
    "huffman": "the optimal symbol-by-symbol prefix code for the source (one per context)",
    "adaptive": "the Krichevsky–Trofimov ideal code length of the sample",
}

#: The floor a check measures from when ``floor=`` is not given: the sample's own
#: self-information. It has no sampling noise: a correct coder built for the source
#: sits a few bits above it on every sample, so a tolerance over it separates a good
#: coder from a worse one whatever the luck of the draw; ``entropy`` (n·H) moves
#: with the sample by about √(n·V) bits (V the varentropy rate) and at practical n
#: that is often more than the tolerance. See the README's floors section.
DEFAULT_FLOOR: Floor = "sample"

HUFFMAN_TAIL = 2.0**-60
_LN2 = math.log(2.0)
_huffman_cache: dict[str, float] = {}


def check_floor(floor: object) -> Floor:
    """Return ``floor`` if it names a floor (TypeError / ValueError naming it otherwise)."""
    return validation.choice(floor, "floor", FLOORS)


def symbol_counts(sample: ArrayLike) -> np.ndarray:
    """The positive counts of the distinct symbols of ``sample`` (order irrelevant)."""
    arr = np.asarray(sample).ravel()
    if arr.size == 0:
        return np.zeros(0, dtype=np.int64)
    lo, hi = int(arr.min()), int(arr.max())
    if hi - lo < 1 << 22:
        counts = np.bincount((arr - lo).astype(np.intp, copy=False))
        return counts[counts > 0]
    return np.unique(arr, return_counts=True)[1]


def empirical_bits(sample: ArrayLike) -> float:
    """``n·Ĥ`` in bits: ``Σₐ nₐ·log₂(n/nₐ)`` over the sample's histogram."""
    counts = symbol_counts(sample).astype(np.float64)
    n = counts.sum()
    if n == 0:
        return 0.0
    return max(0.0, float(n * math.log2(n) - np.dot(counts, np.log2(counts))))


def kt_bits(counts: ArrayLike, k: int) -> float:
    """Krichevsky–Trofimov code length in bits of any sequence with these symbol counts.

    ``counts`` are the occurrences of the symbols that occur (zeros allowed
    and ignored), over an alphabet of ``k`` symbols.
    """
    c = np.asarray(counts, dtype=np.float64).ravel()
    return context_kt_bits(c, np.zeros(c.size, dtype=np.int64), k)


def context_kt_bits(counts: ArrayLike, contexts: ArrayLike, k: int) -> float:
    """Total KT code length in bits with one estimator per context, each over ``k`` symbols.

    ``counts[i]`` is how often one (context, symbol) pair occurs (zeros
    allowed and ignored) and ``contexts[i]`` labels its context (any
    integers); the result is the sum over contexts of :func:`kt_bits` of
    that context's counts, computed in one vectorised pass.
    """
    from scipy.special import gammaln

    c = np.asarray(counts, dtype=np.float64).ravel()
    labels = np.asarray(contexts).ravel()
    if labels.shape != c.shape:
        raise ValueError(f"counts and contexts differ in length: {c.size} != {labels.size}")
    live = c > 0
    c, labels = c[live], labels[live]
    _, ctx, distinct = np.unique(labels, return_inverse=True, return_counts=True)
    widest = int(distinct.max()) if distinct.size else 0
    if k < max(1, widest):
        where = "" if distinct.size <= 1 else " of one context"
        raise ValueError(
            f"alphabet size k={k} is smaller than the {widest} distinct symbols{where}"
        )
    if c.size == 0:
        return 0.0
    totals = np.bincount(ctx.ravel(), weights=c)
    half_k = k / 2.0
    nats = (
        float(np.sum(gammaln(totals + half_k)))
        - totals.size * gammaln(half_k)
        - float(np.sum(gammaln(c + 0.5))) + c.size * gammaln(0.5)
    )
    return max(0.0, float(nats) / _LN2)


def adaptive_bits(source: Source, sample: ArrayLike) -> float:
    """The ``"adaptive"`` floor: ``source.adaptive_code_length(sample)`` (see the module doc)."""
    return float(source.adaptive_code_length(sample))


def huffman_expected_length(probs: ArrayLike) -> float:
    """Expected Huffman length (bits/symbol) of a pmf; 0 when one symbol at most is possible.

    ``probs`` are probabilities (a pmf, possibly missing a tiny tail); the
    lengths come from :func:`pytest_ratefloor.codes.huffman_lengths`.
    """
    p = np.asarray(probs, dtype=np.float64).ravel()
    p = p[p > 0]
    if len(p) <= 1:
        return 0.0
    from pytest_ratefloor import codes

    lengths = np.asarray(codes.huffman_lengths(p), dtype=np.float64)
    return float(np.dot(p, lengths))


def huffman_rate(source: Source) -> float:
    """The ``"huffman"`` floor in bits/symbol: ``source.optimal_code_rate()``, cached by spec."""
    cached = _huffman_cache.get(source.spec)
    if cached is not None:
        return cached
    rate = float(source.optimal_code_rate())
    _huffman_cache[source.spec] = rate
    return rate


def floor_bits(
    floor: str,
    source: Source,
    sample: ArrayLike,
    sample_information: float | None = None,
) -> float:
    """Bits of the floor named ``floor`` for ``sample`` of ``source``.

    ``sample_information`` may pass an already computed
    ``source.information(sample)``.
    """
    check_floor(floor)
    arr = np.asarray(sample)
    n = arr.size
    if floor == "entropy":
        return n * float(source.entropy)
    if floor == "sample":
        if sample_information is None:
            sample_information = float(source.information(arr))
        return float(sample_information)
    if floor == "empirical":
        return empirical_bits(arr)
    if floor == "huffman":
        return n * huffman_rate(source)
    return adaptive_bits(source, arr)
