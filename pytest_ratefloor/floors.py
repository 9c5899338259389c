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
    true pmf (Huffman 1952), times ``n``: Huffman code lengths on
    ``source.pmf_table()``. For geometric sources the optimal Golomb code
    instead (Gallager & van Voorhis 1975, from memory), which is the optimal
    prefix code of the infinite alphabet. For Markov sources one Huffman
    code per state (for the row of the transition matrix), weighted by the
    stationary distribution. For other sources with an unbounded alphabet
    (Poisson, two-sided geometric) Huffman on ``pmf_table()`` truncated at
    a tail of 2⁻⁶⁰: the missing mass changes the expected length by less
    than 2⁻⁵⁰ bits/symbol, far below any tolerance. A source with a single
    possible symbol needs 0 bits. An expected length, not a bound for one
    sample.
``"adaptive"``
    The exact ideal code length of the Krichevsky–Trofimov sequential
    estimator (½-counts) on the very sample (Krichevsky & Trofimov 1981;
    Rissanen 1984 for its optimality, both from memory), via log-gamma:
    ``L = log₂Γ(n + k/2) − log₂Γ(k/2) − Σₐ [log₂Γ(nₐ + ½) − log₂Γ(½)]``
    over an alphabet of ``k`` symbols — what an adaptive arithmetic coder
    with ½-counts reaches within a few bits. ``k`` is the source's alphabet
    size; for an unbounded alphabet it is the range ``max − min + 1`` of the
    sample (the coder is assumed to know that range). For Markov sources one
    estimator per context (the previous symbol), the first symbol costing
    ``log₂ k``. The asymptotic form ``n·Ĥ + (k−1)/2·log₂ n`` is *not* used:
    its constant term is negative for ``k ≥ 4``, so it overshoots a correct
    KT coder.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Literal

import numpy as np
from numpy.typing import ArrayLike
from scipy.special import gammaln

from pytest_ratefloor import validation

if TYPE_CHECKING:
    from pytest_ratefloor.sources import Source

__all__ = [
    "FLOORS",
    "HUFFMAN_TAIL",
    "Floor",
    "adaptive_bits",
    "check_floor",
    "empirical_bits",
    "floor_bits",
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
    "huffman": "the optimal symbol-by-symbol prefix code for the true pmf (Golomb for geometric)",
    "adaptive": "the Krichevsky–Trofimov ideal code length of the sample",
}

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
    c = c[c > 0]
    if k < max(1, len(c)):
        raise ValueError(f"alphabet size k={k} is smaller than the {len(c)} distinct symbols")
    n = float(c.sum())
    if n == 0:
        return 0.0
    half_k = k / 2.0
    nats = (
        gammaln(n + half_k)
        - gammaln(half_k)
        - float(np.sum(gammaln(c + 0.5))) + len(c) * gammaln(0.5)
    )
    return max(0.0, float(nats) / _LN2)


def adaptive_bits(source: Source, sample: ArrayLike) -> float:
    """The ``"adaptive"`` floor: KT code length of ``sample`` (per context for Markov sources)."""
    arr = np.asarray(sample, dtype=np.int64).ravel()
    if arr.size == 0:
        return 0.0
    transition = getattr(source, "transition", None)
    if transition is not None:
        states = int(np.asarray(transition).shape[0])
        pairs = arr[:-1] * states + arr[1:]
        table = np.bincount(pairs, minlength=states * states).reshape(states, states)
        return math.log2(states) + sum(kt_bits(row, states) for row in table)
    k = source.alphabet_size
    if k is None:
        k = int(arr.max()) - int(arr.min()) + 1
    return kt_bits(symbol_counts(arr), int(k))


def _huffman_expected(probs: ArrayLike) -> float:
    """Expected Huffman length (bits/symbol) of a pmf; 0 for a single possible symbol."""
    from pytest_ratefloor import codes

    p = np.asarray(probs, dtype=np.float64).ravel()
    p = p[p > 0]
    if len(p) <= 1:
        return 0.0
    lengths = np.asarray(codes.huffman_lengths(p), dtype=np.float64)
    return float(np.dot(p, lengths))


def huffman_rate(source: Source) -> float:
    """The ``"huffman"`` floor in bits/symbol (see the module docstring); cached by spec."""
    cached = _huffman_cache.get(source.spec)
    if cached is not None:
        return cached
    transition = getattr(source, "transition", None)
    if source.family == "geometric" and hasattr(source, "p"):
        from pytest_ratefloor import codes

        p = float(source.p)
        rate = float(codes.golomb_expected_length(p, codes.golomb_parameter(p)))
    elif transition is not None:
        t = np.asarray(transition, dtype=np.float64)
        pi = np.asarray(getattr(source, "stationary"), dtype=np.float64)  # noqa: B009
        rate = float(sum(pi[s] * _huffman_expected(t[s]) for s in range(t.shape[0])))
    else:
        _, probs = source.pmf_table(tail=HUFFMAN_TAIL)
        rate = _huffman_expected(probs)
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
