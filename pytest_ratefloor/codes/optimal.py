"""Optimal code lengths and lengths measured against a pmf: the "huffman" floors.

* :func:`huffman_lengths` — optimal prefix-code lengths (Huffman 1952), by the linear
  two-queue merge (van Leeuwen 1976) after one sort.
* :func:`length_limited_lengths` — optimal lengths under a cap (package-merge,
  Larmore & Hirschberg 1990).
* :func:`golomb_parameter`, :func:`rice_parameter`, :func:`golomb_expected_length` —
  the Golomb/Rice codes of a geometric source (Gallager & van Voorhis 1975) and their
  exact expected lengths.
* :func:`entropy_bits`, :func:`expected_length`, :func:`redundancy`,
  :func:`excess_by_symbol` — a code's lengths against a pmf.

A zero probability gets no codeword (length 0): a symbol that never occurs needs no
room in the code space. A source with a single possible symbol gets one 1-bit
codeword (what a real prefix-code format must emit).
"""

from __future__ import annotations

import decimal
import math
from collections.abc import Callable
from decimal import Decimal
from fractions import Fraction

import numpy as np
import numpy.typing as npt

from pytest_ratefloor.codes.codebook import (
    Codebook,
    CodeLike,
    IntArray,
    _as_codebook,
)
from pytest_ratefloor.codes.entries import (
    _symbol_array,
)
from pytest_ratefloor.validation import (
    integer,
    message,
    probability,
    probability_vector,
    weights,
)


def _huffman_merge(w: list[float]) -> list[int]:
    """Two-queue Huffman (van Leeuwen 1976) on ascending weights.

    Internal nodes are made in non-decreasing weight order, so the two smallest
    items are always at the heads of the leaf queue and the internal queue.
    Returns parent[k] (index of the internal node that absorbed internal node k).
    """
    n = len(w)
    q = [0.0] * (n - 1)
    parent = [n - 2] * (n - 1)
    i = j = 0
    for k in range(n - 1):
        if i < n and (j >= k or w[i] <= q[j]):
            a = w[i]
            i += 1
        else:
            a = q[j]
            parent[j] = k
            j += 1
        if i < n and (j >= k or w[i] <= q[j]):
            b = w[i]
            i += 1
        else:
            b = q[j]
            parent[j] = k
            j += 1
        q[k] = a + b
    return parent


def _leaf_lengths(parent: list[int], n: int) -> IntArray:
    """Leaf depths (ascending-weight order, so non-increasing) from internal parents."""
    up = np.array(parent, dtype=np.int64)
    root = n - 2
    dist = np.ones(n - 1, dtype=np.int64)
    dist[root] = 0
    while bool((up != root).any()):  # pointer jumping: depth in O(log depth) passes
        dist = dist + dist[up]
        up = up[up]
    internal = np.bincount(dist)
    depth = internal.size  # leaves sit one level below the deepest internal node at most
    below = np.concatenate(([0], internal))  # internal nodes at depth d-1
    here = np.concatenate((internal, [0]))
    leaves = 2 * below - here  # nodes at depth d (two per parent) minus internal ones
    leaves[0] = 0  # depth 0 holds the root alone
    lengths_desc = np.arange(depth, -1, -1, dtype=np.int64)
    return np.repeat(lengths_desc, leaves[::-1])


def huffman_lengths(probs: npt.ArrayLike) -> IntArray:
    """Optimal prefix-code lengths (Huffman 1952), in the order of ``probs``.

    ``probs`` may be probabilities or any non-negative weights (counts). Zero weights
    get length 0 (no codeword). One nonzero weight gets length 1 (see module notes).
    O(N log N): a stable sort, then the linear two-queue merge (van Leeuwen 1976).
    Ties are broken towards leaves, which keeps the longest codeword short.
    """
    w = weights(probs, "probs")
    out = np.zeros(w.size, dtype=np.int64)
    nz = np.flatnonzero(w > 0)
    if nz.size == 1:
        out[nz] = 1
        return out
    order = nz[np.argsort(w[nz], kind="stable")]
    parent = _huffman_merge(w[order].tolist())
    out[order] = _leaf_lengths(parent, nz.size)
    return out


def length_limited_lengths(probs: npt.ArrayLike, max_length: int) -> IntArray:
    """Optimal prefix-code lengths no longer than ``max_length`` (package-merge,
    Larmore & Hirschberg 1990), in the order of ``probs``; zero weights get 0.

    ``max_length`` is an integer >= 1; ValueError if 2**max_length is smaller than
    the number of nonzero weights.
    """
    w = weights(probs, "probs")
    cap = integer(max_length, "max_length", minimum=1)
    nz = np.flatnonzero(w > 0)
    m = int(nz.size)
    if m > (1 << min(cap, 64)):
        raise ValueError(
            f"max_length must be >= {(m - 1).bit_length()} to give each of the {m} symbols "
            f"of nonzero probability a codeword (2**max_length >= {m}), got {cap}"
        )
    free = huffman_lengths(w)
    if int(free.max()) <= cap:  # the unconstrained optimum already fits
        return free
    order = nz[np.argsort(w[nz], kind="stable")]
    out = np.zeros(w.size, dtype=np.int64)
    out[order] = _package_merge(w[order], cap)
    return out


def _package_merge(leaves: npt.NDArray[np.float64], cap: int) -> IntArray:
    """Package-merge on ascending positive weights (at least two, at most 2**cap):
    code lengths, non-increasing, optimal among codes no longer than ``cap``.

    Coin-collector view: every leaf is a coin of face value 2^-l at each level
    l = 1..cap; pick coins of total face value n−1 at least weight. From the finest
    level up, pair neighbours into packages and merge them with the leaves; at level
    1 take the 2n−2 lightest items. A leaf's length is the number of levels at which
    it is taken (directly or inside a package).
    """
    m = int(leaves.size)
    # Per level (first entry: level `cap`, leaves only; last: level 1), which items
    # of the sorted merged list are leaves rather than packages.
    is_leaf_by_level: list[npt.NDArray[np.bool_]] = [np.ones(m, dtype=bool)]
    items = leaves
    for _ in range(cap - 1):
        pairs = items.size // 2
        packages = items[0 : 2 * pairs : 2] + items[1 : 2 * pairs : 2]
        merged = np.concatenate((leaves, packages))
        pick = np.argsort(merged, kind="stable")  # ties: leaves first
        items = merged[pick]
        is_leaf_by_level.append(pick < m)
    lengths_sorted = np.zeros(m, dtype=np.int64)
    take = 2 * m - 2
    for is_leaf in reversed(is_leaf_by_level):
        chosen = int(np.count_nonzero(is_leaf[:take]))
        lengths_sorted[:chosen] += 1  # the lightest leaves are taken at this level
        take = 2 * (take - chosen)
    return lengths_sorted


# -------------------------------------------------------------------- Golomb & Rice


#: The largest Golomb parameter m the functions here take or give: the signed 64-bit
#: range, the same bound as a symbol's (a codec keeps m in a machine word; a larger
#: m belongs to a source whose symbols, of order m, overflow int64 anyway).
GOLOMB_MAX_M = 2**63 - 1


def _geometric_p(p: object) -> float:
    """The parameter of a geometric source: a probability in (0, 1]."""
    return probability(p, "p", low_open=True)


def golomb_expected_length(p: float, m: int) -> float:
    """Exact mean Golomb codeword length (bits/symbol) with parameter ``m`` for the
    geometric source P(x) = (1−p)^x p, x = 0, 1, 2, ...

    Codeword of x: the quotient x // m in unary (quotient + 1 bits) and the
    remainder in truncated binary (b − 1 bits below the cutoff c = 2^b − m, else b
    bits, b = ⌈log2 m⌉). With q = 1 − p the quotient is geometric, E = q^m/(1−q^m),
    and P(remainder < c) = (1 − q^c)/(1 − q^m), so
    L = 1 + q^m/(1−q^m) + b − (1 − q^c)/(1 − q^m).

    ``m`` is an integer in ``[1, GOLOMB_MAX_M]`` (``TypeError``/``ValueError``).
    """
    pf = _geometric_p(p)
    mm = integer(m, "m", minimum=1)
    if mm > GOLOMB_MAX_M:
        raise ValueError(message("m", "an integer <= GOLOMB_MAX_M = 2**63 - 1", m))
    b = (mm - 1).bit_length()  # ⌈log2 m⌉
    c = (1 << b) - mm
    if pf == 1.0:  # q = 0: only x = 0 occurs
        return 1.0 + b - (1.0 if c > 0 else 0.0)
    log_q = math.log1p(-pf)
    one_minus_qm = -math.expm1(mm * log_q)  # expm1: accurate when q^m is near 1
    qm = math.exp(mm * log_q)
    below = -math.expm1(c * log_q) if c else 0.0
    return 1.0 + qm / one_minus_qm + b - below / one_minus_qm


# Both parameters are the least integer above a ratio of logarithms of θ = 1 − p: the
# Golomb m is ⌈R⌉ with R = ln(1+θ) / −ln θ, the Rice k the least k with 2^k > S,
# S = ln φ / −ln θ (φ the golden ratio). Neither ratio is ever an integer (or a power of
# two) for a float p in (0, 1): θ = a / 2^e with a odd and e >= 1, so
# θ^n (1+θ) = a^n (2^e + a) / 2^(e(n+1)) has an odd numerator and is not 1, and θ^(2^k)
# is rational while 1/φ is not. So a precise enough evaluation always decides, and there
# are no ties to break. A float evaluation decides almost every p; the rest are decided
# with correctly rounded decimal logarithms of θ taken exactly, at rising precision.

#: Relative error bound of the float ratios: a few ulps of log, log1p and the division
#: (below 2**-50 wherever the ratio is >= 1/2, the only place rounding can matter), with a
#: factor 16 to spare for a less careful libm.
_FLOAT_RATIO_ERROR = 2.0**-46
_LN_PHI = math.log((1.0 + math.sqrt(5.0)) / 2.0)
#: Digits that hold 1 − p and 2 − p exactly for every float p (a dyadic fraction with at
#: most 1074 binary places has at most 1074 decimal places).
_EXACT_DIGITS = 1100


def _least_index(
    p: float,
    float_ratio: float,
    numerator: Callable[[decimal.Context, Decimal], Decimal],
    index: Callable[[Fraction], int],
) -> int:
    """index(ratio) for ratio = numerator(θ) / −ln θ, θ = 1 − p exactly; ``index`` is
    non-decreasing and the true ratio never sits on one of its steps (see above).

    The float ratio decides when the whole interval its error bound allows maps to one
    index; otherwise the ratio is evaluated with decimal logarithms (each correctly
    rounded, so the quotient is within 10 units of its last digit) at 40, 80, 160, ...
    digits until its interval does.
    """
    spread = float_ratio * _FLOAT_RATIO_ERROR
    low, high = index(Fraction(float_ratio - spread)), index(Fraction(float_ratio + spread))
    if low == high:
        return low
    theta = decimal.Context(prec=_EXACT_DIGITS).subtract(Decimal(1), Decimal(p))
    digits = 40
    while True:  # ends: the ratio is never on a step of index (the notes above)
        ctx = decimal.Context(prec=digits, Emin=decimal.MIN_EMIN, Emax=decimal.MAX_EMAX)
        ratio = Fraction(ctx.divide(numerator(ctx, theta), ctx.minus(ctx.ln(theta))))
        slack = ratio * Fraction(1, 10 ** (digits - 2))
        low, high = index(ratio - slack), index(ratio + slack)
        if low == high:
            return low
        digits *= 2


def _golomb_index(ratio: Fraction) -> int:
    return max(1, math.ceil(ratio))


def _rice_index(ratio: Fraction) -> int:
    return max(0, math.floor(ratio)).bit_length()  # the least k with 2**k > ratio


def _ln_one_plus(ctx: decimal.Context, theta: Decimal) -> Decimal:
    return ctx.ln(decimal.Context(prec=_EXACT_DIGITS).add(Decimal(1), theta))


def _ln_phi(ctx: decimal.Context, theta: Decimal) -> Decimal:
    return ctx.ln(ctx.divide(ctx.add(Decimal(1), ctx.sqrt(Decimal(5))), Decimal(2)))


def golomb_parameter(p: float) -> int:
    """Optimal Golomb parameter m for P(x) = (1−p)^x p (Gallager & van Voorhis 1975).

    m is the integer with θ^m + θ^(m+1) ≤ 1 < θ^(m−1) + θ^m, θ = 1 − p, i.e.
    m = ⌈ln(1+θ) / −ln θ⌉; p = 1 gives m = 1. The rule is decided exactly for every
    float p: θ is taken exactly, and a float evaluation that its error bound cannot
    settle is redone with correctly rounded decimal logarithms. For a float p < 1 the
    two sides of the rule are never equal, so m is the unique best Golomb parameter.
    ``ValueError`` for a ``p`` so small that m would exceed :data:`GOLOMB_MAX_M`.
    """
    pf = _geometric_p(p)
    if pf == 1.0:
        return 1
    ratio = math.log(2.0 - pf) / -math.log1p(-pf)
    rule = "a probability whose Golomb parameter m ≈ ln 2 / p is at most GOLOMB_MAX_M"
    if not ratio < 2 * GOLOMB_MAX_M:  # inf for the smallest p
        raise ValueError(message("p", f"{rule} = 2**63 - 1", p))
    m = _least_index(pf, ratio, _ln_one_plus, _golomb_index)
    if m > GOLOMB_MAX_M:
        raise ValueError(message("p", f"{rule} = 2**63 - 1", p))
    return m


def rice_parameter(p: float) -> int:
    """Best Rice parameter k for P(x) = (1−p)^x p: the k >= 0 whose Rice code (the Golomb
    code with m = 2**k) has the least expected length among all powers of two.

    That length is k + 1/(1 − θ^(2^k)), θ = 1 − p, so going from k to k + 1 changes it
    by (1 − x − x²)/(1 − x²) with x = θ^(2^k): the length falls while θ^(2^k) > 1/φ
    (φ the golden ratio) and rises after. Hence k is the least k with θ^(2^k) < 1/φ,
    i.e. with 2^k > ln φ / −ln θ; p = 1 gives k = 0. Decided exactly for every float p
    like :func:`golomb_parameter`; θ^(2^k) is rational and 1/φ is not, so there are
    never two best k. ``ValueError`` when 2**k would exceed :data:`GOLOMB_MAX_M`.
    """
    pf = _geometric_p(p)
    if pf == 1.0:
        return 0
    ratio = _LN_PHI / -math.log1p(-pf)
    rule = "a probability whose Rice modulus 2**k (about 0.5 / p to 1 / p) is at most GOLOMB_MAX_M"
    if not ratio < 2 * GOLOMB_MAX_M:
        raise ValueError(message("p", f"{rule} = 2**63 - 1", p))
    k = _least_index(pf, ratio, _ln_phi, _rice_index)
    if (1 << k) > GOLOMB_MAX_M:
        raise ValueError(message("p", f"{rule} = 2**63 - 1", p))
    return k


# ------------------------------------------------------------- lengths against a pmf


def _pmf(symbols: npt.ArrayLike, probs: npt.ArrayLike) -> tuple[IntArray, npt.NDArray[np.float64]]:
    syms = _symbol_array(symbols, "symbols")
    p = probability_vector(probs, "probs")
    if syms.shape != p.shape:
        raise ValueError(
            f"symbols and probs must be the same size, got {syms.size} and {p.size}"
        )
    return syms, p


def _lengths_for(cb: Codebook, syms: IntArray, p: npt.NDArray[np.float64]) -> IntArray:
    idx = np.searchsorted(cb._symbols, syms)
    idx_c = np.minimum(idx, len(cb) - 1)
    found = cb._symbols[idx_c] == syms
    missing = np.flatnonzero(~found & (p > 0))
    if missing.size:
        i = int(missing[0])
        raise ValueError(
            f"symbol {int(syms[i])} has probability {p[i]:.6g} but no codeword in "
            f"codebook {cb.name!r}"
        )
    return np.where(found, cb._lengths[idx_c], 0)


def entropy_bits(probs: npt.ArrayLike) -> float:
    """Shannon entropy −Σ p log2 p in bits (0·log 0 = 0)."""
    p = weights(probs, "probs")
    nz = p[p > 0]
    return float(-np.sum(nz * np.log2(nz)))


def expected_length(code: CodeLike, symbols: npt.ArrayLike, probs: npt.ArrayLike) -> float:
    """Mean codeword length Σ p(s)·ℓ(s) in bits/symbol; ValueError naming a symbol of
    positive probability that has no codeword."""
    cb = _as_codebook(code)
    syms, p = _pmf(symbols, probs)
    return float(math.fsum((p * _lengths_for(cb, syms, p)).tolist()))


def redundancy(code: CodeLike, symbols: npt.ArrayLike, probs: npt.ArrayLike) -> float:
    """Expected length minus entropy, L − H, in bits/symbol."""
    return expected_length(code, symbols, probs) - entropy_bits(_pmf(symbols, probs)[1])


def excess_by_symbol(
    code: CodeLike,
    symbols: npt.ArrayLike,
    probs: npt.ArrayLike,
    top: int | None = None,
) -> list[tuple[int, float, int, float]]:
    """Per-symbol share of the redundancy, worst first.

    Each entry is (symbol, p, ℓ, p·(ℓ + log2 p)): the bits/symbol this symbol costs
    beyond its self-information. Entries sum to :func:`redundancy`; negative ones are
    symbols coded shorter than their information. Zero-probability symbols are left
    out. ``top`` (an integer >= 0) keeps only the first entries.
    """
    cb = _as_codebook(code)
    keep = None if top is None else integer(top, "top", minimum=0)
    syms, p = _pmf(symbols, probs)
    lens = _lengths_for(cb, syms, p)
    live = np.flatnonzero(p > 0)
    share = p[live] * (lens[live] + np.log2(p[live]))
    order = np.argsort(-share, kind="stable")
    if keep is not None:
        order = order[:keep]
    return [
        (int(syms[live[i]]), float(p[live[i]]), int(lens[live[i]]), float(share[i]))
        for i in order.tolist()
    ]
