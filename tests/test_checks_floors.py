"""Tests of the floors (pytest_ratefloor.floors) against outside references."""

from __future__ import annotations

import itertools
import math
import subprocess
import sys
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
    context_kt_bits,
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
    with pytest.raises(ValueError, match=r"floor must be one of 'entropy', 'sample'.*'shannon'"):
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
    # README, floors: n·Ĥ + (k−1)/2·log2 n overshoots the exact KT length for k ≥ 4
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


# --------------------------------------------------------------------------
# the floors ask the source: chains and order-k models answer per context


def _kt_one_symbol_bits(m: int, k: int) -> float:
    """KT length of one symbol repeated m times over k symbols, by mpmath.loggamma:
    P = Γ(m + ½) Γ(k/2) / (Γ(½) Γ(m + k/2)) (the KT product, from memory)."""
    with mpmath.workdps(40):
        nats = (mpmath.loggamma(m + mpmath.mpf(k) / 2) - mpmath.loggamma(mpmath.mpf(k) / 2)
                - mpmath.loggamma(m + mpmath.mpf(1) / 2) + mpmath.loggamma(mpmath.mpf(1) / 2))
        return float(nats / mpmath.log(2))


def test_an_order_one_model_gets_the_floors_of_the_same_markov_chain() -> None:
    # The alternating chain, once fitted to data and once as a transition matrix:
    # entropy 0, so the floors must be (near) 0 for both, not those of a fair coin.
    fitted = sources.empirical(np.tile([0, 1], 5000), order=1)
    chain = sources.markov([[0, 1], [1, 0]])
    assert fitted.entropy == chain.entropy == 0.0
    n = 10_000
    for source in (fitted, chain):
        sample = source.sample(n, seed=1)
        assert np.all(np.diff(sample) != 0)
        # every context has a single successor: nothing needs sending
        assert huffman_rate(source) == 0.0
        assert floor_bits("huffman", source, sample) == 0.0
        # first symbol log2 2 = 1 bit, then each context's estimator sees one symbol
        # repeated; reference: mpmath.loggamma on the KT product
        counts = np.bincount(sample[:-1], minlength=2)
        expected = 1.0 + sum(_kt_one_symbol_bits(int(c), 2) for c in counts)
        assert floor_bits("adaptive", source, sample) == pytest.approx(expected, rel=1e-12)
        assert 14 < floor_bits("adaptive", source, sample) < 16
    sample = chain.sample(n, seed=3)
    assert adaptive_bits(fitted, sample) == pytest.approx(adaptive_bits(chain, sample), rel=1e-13)


LETTERS = list(b"abracadabra, abracadabra! cadabra abra; dabra cab " * 3)


@pytest.mark.parametrize("order", [1, 2, 3])
def test_adaptive_floor_of_an_order_k_model_is_per_context(order: int) -> None:
    src = sources.empirical(LETTERS, order=order)
    seq = src.sample(400, seed=order).tolist()
    k = int(src.alphabet_size)
    follow: dict[tuple[int, ...], list[int]] = {}
    for i in range(order, len(seq)):
        follow.setdefault(tuple(seq[i - order : i]), []).append(seq[i])
    # Reference: the KT definition symbol by symbol with exact fractions, one
    # estimator per context; the first `order` symbols cost log2 k each.
    expected = order * math.log2(k) + sum(_kt_sequential_bits(g, k) for g in follow.values())
    assert adaptive_bits(src, np.array(seq)) == pytest.approx(expected, rel=1e-12)
    assert adaptive_bits(src, np.array(seq[:order])) == pytest.approx(order * math.log2(k))
    assert adaptive_bits(src, np.zeros(0, dtype=np.int64)) == 0.0


@pytest.mark.parametrize("order", [0, 1, 2])
def test_huffman_floor_of_an_order_k_model_is_per_context(order: int) -> None:
    src = sources.empirical(LETTERS, order=order)
    n = len(LETTERS)
    ring = LETTERS + LETTERS[:order]  # the model reads its data as a ring
    follow: dict[tuple[int, ...], dict[int, int]] = {}
    for i in range(n):
        after = follow.setdefault(tuple(ring[i : i + order]), {})
        after[ring[i + order]] = after.get(ring[i + order], 0) + 1
    expected = 0.0
    for after in follow.values():
        if len(after) > 1:
            # Reference: bitarray.util.huffman_code on the context's successor counts
            code = huffman_code(after)
            expected += sum(c * len(code[s]) for s, c in after.items()) / n
    assert huffman_rate(src) == pytest.approx(expected, rel=1e-12)
    assert src.entropy - 1e-12 <= huffman_rate(src) < src.entropy + 1


def test_huffman_floor_of_a_markov_source_matches_bitarray_per_state() -> None:
    t = np.random.default_rng(4).dirichlet(np.full(6, 0.6), size=6)
    chain = sources.markov(t)
    w, v = np.linalg.eig(t.T)  # stationary distribution: left eigenvector for eigenvalue 1
    pi = np.real(v[:, np.argmin(np.abs(w - 1))])
    pi = pi / pi.sum()
    # Reference: bitarray.util.huffman_code on each row, weighted by numpy's π
    expected = sum(pi[s] * _bitarray_huffman_rate(np.arange(6), t[s]) for s in range(6))
    assert huffman_rate(chain) == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize(
    "source",
    [sources.geometric(1.0), sources.bernoulli(0.0), sources.poisson(0.0),
     sources.two_sided_geometric(0.0), sources.categorical([0.0, 1.0, 0.0]), sources.uniform(1),
     sources.markov([[1.0]]), sources.empirical([7] * 50), sources.empirical([7] * 50, order=2)],
    ids=lambda s: s.spec,
)
def test_a_single_possible_symbol_needs_no_bits(source: sources.Source) -> None:
    # the floors module's convention: nothing needs sending when n is known
    assert huffman_rate(source) == 0.0
    assert source.optimal_code_rate() == 0.0
    sample = source.sample(100)
    if source.alphabet_size == 1:  # KT over one symbol: every probability is 1
        assert adaptive_bits(source, sample) == 0.0


def test_context_kt_bits_is_one_estimator_per_context() -> None:
    table = np.random.default_rng(8).integers(0, 40, size=(6, 5))
    table[2] = 0  # a context never seen
    table[3, :4] = 0  # a context with one successor
    contexts = np.repeat(np.arange(6), 5)
    per_row = sum(kt_bits(row, 5) for row in table)
    assert context_kt_bits(table.ravel(), contexts, 5) == pytest.approx(per_row, rel=1e-13)
    # Reference: mpmath.loggamma at 40 digits on the log-gamma formula, per context
    with mpmath.workdps(40):
        half = mpmath.mpf(1) / 2
        nats = mpmath.fsum(
            mpmath.loggamma(int(row.sum()) + mpmath.mpf(5) / 2) - mpmath.loggamma(mpmath.mpf(5) / 2)
            - mpmath.fsum(mpmath.loggamma(int(c) + half) - mpmath.loggamma(half) for c in row)
            for row in table
        )
        expected = float(nats / mpmath.log(2))
    assert context_kt_bits(table.ravel(), contexts, 5) == pytest.approx(expected, rel=1e-12)
    # context labels are any integers, in any order
    shuffled = np.random.default_rng(1).permutation(table.size)
    labels = (contexts * 1000 - 7)[shuffled]
    assert context_kt_bits(table.ravel()[shuffled], labels, 5) == pytest.approx(per_row, rel=1e-13)
    assert context_kt_bits([], [], 3) == 0.0
    with pytest.raises(ValueError, match=r"k=2 is smaller than the 3 distinct symbols of one"):
        context_kt_bits([1, 1, 1, 4], [0, 0, 0, 1], 2)


def test_adaptive_floor_of_a_markov_source_names_a_symbol_that_is_no_state() -> None:
    chain = sources.markov([[0.9, 0.1], [0.2, 0.8]])
    with pytest.raises(ValueError, match=r"symbol 2 at index 1 is not a state"):
        adaptive_bits(chain, np.array([0, 2, 1]))


def test_scipy_and_codes_are_imported_lazily() -> None:
    # importing the sources and the floors must not pull in scipy (pytest start-up cost)
    code = (
        "import sys, pytest_ratefloor.sources, pytest_ratefloor.floors; "
        "print([m for m in ('scipy', 'pytest_ratefloor.codes') if m in sys.modules])"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert done.stdout.strip() == "[]"
