"""Tests of the floors (pytest_ratefloor.floors) against outside references."""

from __future__ import annotations

import itertools
import math
from fractions import Fraction

import mpmath
import numpy as np
import pytest
import scipy.stats
from bitarray.util import huffman_code

from pytest_ratefloor import sources
from pytest_ratefloor.floors import (
    adaptive_bits,
    check_floor,
    empirical_bits,
    floor_bits,
    huffman_rate,
    kt_bits,
)


def _bitarray_huffman_rate(symbols: np.ndarray, probs: np.ndarray) -> float:
    """Expected length of bitarray's Huffman code for a pmf (an independent Huffman)."""
    code = huffman_code({int(s): float(p) for s, p in zip(symbols, probs) if p > 0})
    return sum(float(p) * len(code[int(s)]) for s, p in zip(symbols, probs) if p > 0)


def _kt_sequential_bits(sequence: list[int], k: int) -> float:
    """−log2 of the KT probability computed symbol by symbol with exact fractions.

    Definition (Krichevsky & Trofimov 1981, from memory):
    P(x_t = a | past) = (count_a + 1/2) / (t + k/2).
    """
    prob = Fraction(1)
    counts: dict[int, int] = {}
    for t, a in enumerate(sequence):
        prob *= Fraction(2 * counts.get(a, 0) + 1, 2 * t + k)
        counts[a] = counts.get(a, 0) + 1
    return -float(mpmath.log(mpmath.mpf(prob.numerator) / prob.denominator, 2))


def test_floor_names_are_checked() -> None:
    assert check_floor("adaptive") == "adaptive"
    with pytest.raises(ValueError, match="floor must be one of 'entropy', 'sample'.*got 'shannon'"):
        check_floor("shannon")


def test_empirical_matches_scipy() -> None:
    # Reference: scipy.stats.entropy of the histogram, base 2.
    sample = np.random.default_rng(5).integers(0, 37, 5000)
    _, counts = np.unique(sample, return_counts=True)
    expected = len(sample) * scipy.stats.entropy(counts, base=2)
    assert empirical_bits(sample) == pytest.approx(expected, rel=1e-12)
    assert empirical_bits(np.array([4, 4, 4])) == 0.0
    assert empirical_bits(np.zeros(0, dtype=np.int64)) == 0.0
    wide = np.array([0, 2**40, 2**40, -(2**40)])  # sparse wide range: np.unique path
    assert empirical_bits(wide) == pytest.approx(4 * scipy.stats.entropy([1, 2, 1], base=2))


@pytest.mark.parametrize("k", [2, 3, 4, 16])
def test_kt_matches_the_sequential_definition(k: int) -> None:
    rng = np.random.default_rng(k)
    for n in (1, 2, 7, 60):
        seq = rng.integers(0, k, n).tolist()
        counts = np.bincount(seq, minlength=k)
        assert kt_bits(counts, k) == pytest.approx(_kt_sequential_bits(seq, k), rel=1e-12)
    # one symbol of a k-ary alphabet costs exactly log2 k
    assert kt_bits([1], k) == pytest.approx(math.log2(k), rel=1e-14)


def test_kt_matches_mpmath_loggamma_at_scale() -> None:
    # Reference: mpmath.loggamma at 50 digits on the log-gamma formula.
    counts = [70_000, 20_000, 9_000, 999, 1]
    k = 8
    n = sum(counts)
    mpmath.mp.dps = 50
    nats = (
        mpmath.loggamma(n + mpmath.mpf(k) / 2)
        - mpmath.loggamma(mpmath.mpf(k) / 2)
        - sum(mpmath.loggamma(c + mpmath.mpf(1) / 2) - mpmath.loggamma(mpmath.mpf(1) / 2)
              for c in counts)
    )
    mpmath.mp.dps = 15
    assert kt_bits(counts, k) == pytest.approx(float(nats / mpmath.log(2)), rel=1e-12)


def test_kt_is_below_the_asymptotic_form_for_k_at_least_4() -> None:
    # DESIGN.md: n·Ĥ + (k−1)/2·log2 n overshoots the exact KT length for k ≥ 4
    # (the constant term is negative), so it would be a wrong floor.
    sample = np.random.default_rng(9).integers(0, 16, 20_000)
    counts = np.bincount(sample, minlength=16)
    asymptotic = empirical_bits(sample) + 15 / 2 * math.log2(len(sample))
    assert kt_bits(counts, 16) < asymptotic
    with pytest.raises(ValueError, match="alphabet size k=2 is smaller than the 3 distinct"):
        kt_bits([1, 1, 1], 2)


def test_adaptive_floor_uses_the_source_alphabet_or_the_sample_range() -> None:
    finite = sources.uniform(10)
    sample = np.array([0, 1, 1, 3])
    assert adaptive_bits(finite, sample) == pytest.approx(
        _kt_sequential_bits(sample.tolist(), 10), rel=1e-12)
    unbounded = sources.geometric(0.3)
    sample = np.array([2, 5, 2, 3])  # range 2..5: k = 4
    assert adaptive_bits(unbounded, sample) == pytest.approx(
        _kt_sequential_bits([0, 3, 0, 1], 4), rel=1e-12)


def test_adaptive_floor_of_a_markov_source_is_per_context() -> None:
    chain = sources.markov([[0.9, 0.1], [0.2, 0.8]])
    seq = [0, 0, 1, 1, 1, 0, 1, 0, 0, 0]
    # first symbol: log2 k; then one KT estimator per previous symbol
    after0 = [b for a, b in itertools.pairwise(seq) if a == 0]
    after1 = [b for a, b in itertools.pairwise(seq) if a == 1]
    expected = 1.0 + _kt_sequential_bits(after0, 2) + _kt_sequential_bits(after1, 2)
    assert adaptive_bits(chain, np.array(seq)) == pytest.approx(expected, rel=1e-12)


def test_huffman_floor_meets_the_entropy_on_a_dyadic_pmf() -> None:
    # Fact of the trade: for a dyadic pmf Huffman lengths are exactly −log2 p.
    dyadic = sources.categorical([0.5, 0.25, 0.125, 0.0625, 0.0625])
    assert huffman_rate(dyadic) == 1.875
    assert dyadic.entropy == pytest.approx(1.875, abs=1e-12)


@pytest.mark.parametrize("k", [2, 3, 5, 6, 7, 100, 256])
def test_huffman_floor_of_uniform_sources(k: int) -> None:
    # Closed form (fact of the trade): with m = ⌊log2 k⌋ and r = k − 2^m, the
    # Huffman code of a uniform pmf has 2r words of length m+1, the rest m.
    m = math.floor(math.log2(k))
    r = k - 2**m
    assert huffman_rate(sources.uniform(k)) == pytest.approx(m + 2 * r / k, abs=1e-12)


@pytest.mark.parametrize(
    "source",
    [sources.zipf(10, 1.2), sources.poisson(3.0), sources.two_sided_geometric(0.6),
     sources.categorical([0.3, 0.3, 0.2, 0.1, 0.1])],
    ids=lambda s: s.spec,
)
def test_huffman_floor_matches_bitarray_huffman(source: sources.Source) -> None:
    # Reference: bitarray.util.huffman_code on the (truncated) pmf table.
    symbols, probs = source.pmf_table()
    assert huffman_rate(source) == pytest.approx(_bitarray_huffman_rate(symbols, probs), abs=1e-9)
    assert huffman_rate(source) >= source.entropy - 1e-12
    assert huffman_rate(source) < source.entropy + 1  # Huffman is within 1 bit of H


@pytest.mark.parametrize("p", [0.5, 0.3, 0.1, 0.02])
def test_huffman_floor_of_geometric_is_the_golomb_code(p: float) -> None:
    # Reference: Huffman (bitarray) on the geometric pmf truncated far out
    # approaches the optimal code of the infinite alphabet, which is the
    # Golomb code (Gallager & van Voorhis 1975, from memory).
    geo = sources.geometric(p)
    symbols, probs = geo.pmf_table(tail=2.0**-40)
    assert huffman_rate(geo) == pytest.approx(_bitarray_huffman_rate(symbols, probs), abs=1e-6)
    if p == 0.5:
        assert huffman_rate(geo) == pytest.approx(2.0)  # unary code; H = 2 bits


def test_huffman_floor_of_a_markov_source_is_per_state() -> None:
    # Rows with dyadic probabilities: each per-state Huffman code meets the
    # row entropy, so the floor is the entropy rate Σ π_s H(row_s).
    t = np.array([[0.5, 0.25, 0.25], [0.5, 0.5, 0.0], [0.25, 0.25, 0.5]])
    chain = sources.markov(t)
    w, v = np.linalg.eig(t.T)  # stationary distribution: left eigenvector for eigenvalue 1
    pi = np.real(v[:, np.argmin(np.abs(w - 1))])
    pi = pi / pi.sum()
    rate = sum(pi[s] * scipy.stats.entropy(t[s], base=2) for s in range(3))
    assert huffman_rate(chain) == pytest.approx(rate, abs=1e-12)
    binary = sources.markov([[0.9, 0.1], [0.3, 0.7]])
    assert huffman_rate(binary) == pytest.approx(1.0)  # every state: two words of 1 bit


def test_floor_bits_dispatch() -> None:
    source = sources.bernoulli(0.2)
    sample = source.sample(1000, 3)
    h = scipy.stats.entropy([0.8, 0.2], base=2)
    assert floor_bits("entropy", source, sample) == pytest.approx(1000 * h, rel=1e-12)
    info = float(-(np.where(sample == 1, math.log2(0.2), math.log2(0.8))).sum())
    assert floor_bits("sample", source, sample) == pytest.approx(info, rel=1e-12)
    assert floor_bits("sample", source, sample, sample_information=12.5) == 12.5
    assert floor_bits("empirical", source, sample) == pytest.approx(
        1000 * scipy.stats.entropy(np.bincount(sample), base=2), rel=1e-12)
    assert floor_bits("huffman", source, sample) == 1000.0
    assert floor_bits("adaptive", source, sample) == pytest.approx(
        kt_bits(np.bincount(sample), 2), rel=1e-15)
