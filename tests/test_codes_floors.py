"""Optimal-length floors of pytest_ratefloor.codes: Huffman, package-merge, Golomb and
Rice parameters, and lengths measured against a pmf."""

from __future__ import annotations

import itertools
import math
import re
from fractions import Fraction

import mpmath
import numpy as np
import pytest
from bitarray.util import huffman_code
from scipy.stats import entropy as scipy_entropy

from pytest_ratefloor import codes


def reference_cost(weights: list[int]) -> int:
    """Σ w·ℓ of bitarray.util.huffman_code on the same weights (reference library)."""
    table = huffman_code(dict(enumerate(weights)))
    return sum(weights[s] * len(w) for s, w in table.items())


def kraft(lengths: np.ndarray) -> Fraction:
    return sum((Fraction(1, 2 ** int(ln)) for ln in lengths if ln > 0), Fraction(0))


# ---------------------------------------------------------------------- Huffman


def test_huffman_cost_equals_bitarray_huffman_code() -> None:
    # Integer weights: the costs are integers and must be equal exactly (individual
    # lengths may differ where ties are broken differently).
    rng = np.random.default_rng(1)
    for n in [2, 3, 4, 5, 7, 16, 33, 100, 257, 1000, 4096]:
        for spread in (10, 1_000_000):
            weights = rng.integers(1, spread, size=n).tolist()
            ours = codes.huffman_lengths(weights)
            assert int(np.dot(ours, weights)) == reference_cost(weights), (n, spread)


def test_huffman_cost_equals_bitarray_on_float_and_skewed_weights() -> None:
    rng = np.random.default_rng(2)
    for n in (3, 50, 700):
        probs = rng.dirichlet(np.full(n, 0.1))  # very skewed pmfs
        probs = probs[probs > 0]
        table = huffman_code(dict(enumerate(probs.tolist())))
        ref = sum(probs[s] * len(w) for s, w in table.items())
        ours = float(np.dot(codes.huffman_lengths(probs), probs))
        assert ours == pytest.approx(ref, rel=1e-12)


@pytest.mark.parametrize(
    ("probs", "mean_length"),
    [
        # Textbook worked example (from memory): p = .4 .2 .2 .1 .1 → L = 2.2 bits.
        ([0.4, 0.2, 0.2, 0.1, 0.1], 2.2),
        # Cover & Thomas, Elements of Information Theory, Huffman example (from
        # memory): p = .25 .25 .2 .15 .15 → lengths 2 2 2 3 3, L = 2.3 bits.
        ([0.25, 0.25, 0.2, 0.15, 0.15], 2.3),
    ],
)
def test_textbook_huffman_examples(probs: list[float], mean_length: float) -> None:
    lengths = codes.huffman_lengths(probs)
    assert float(np.dot(lengths, probs)) == pytest.approx(mean_length, abs=1e-12)


def test_cover_thomas_example_lengths() -> None:
    # Same example: the optimal lengths are 2,2,2,3,3 (from memory).
    assert codes.huffman_lengths([0.25, 0.25, 0.2, 0.15, 0.15]).tolist() == [2, 2, 2, 3, 3]


def test_dyadic_pmf_gets_minus_log2_p() -> None:
    # A fact of the trade: for a dyadic pmf the optimal lengths are −log2 p, L = H.
    probs = [1 / 2, 1 / 8, 1 / 4, 1 / 16, 1 / 16]
    assert codes.huffman_lengths(probs).tolist() == [1, 3, 2, 4, 4]


@pytest.mark.parametrize("n", [2, 3, 5, 6, 7, 8, 100, 256, 1000])
def test_uniform_pmf_uses_floor_and_ceil_of_log2(n: int) -> None:
    # Fact of the trade: with k = ⌊log2 n⌋, an optimal code for n equiprobable symbols
    # has 2^(k+1) − n words of length k and 2(n − 2^k) of length k+1.
    k = n.bit_length() - 1
    lengths = codes.huffman_lengths(np.ones(n))
    assert np.count_nonzero(lengths == k) == 2 ** (k + 1) - n
    assert np.count_nonzero(lengths == k + 1) == 2 * (n - 2**k)


def test_fibonacci_weights_give_the_deepest_tree() -> None:
    # Fact of the trade: Fibonacci weights make Huffman's tree a path: lengths n−1,
    # n−1, n−2, ..., 1.
    fib = [1, 1]
    while len(fib) < 30:
        fib.append(fib[-1] + fib[-2])
    lengths = codes.huffman_lengths(fib)
    assert lengths.tolist() == [29, 29, *range(28, 0, -1)]


def test_degenerate_pmfs() -> None:
    assert codes.huffman_lengths([1.0]).tolist() == [1]  # one symbol: one 1-bit word
    assert codes.huffman_lengths([0.0, 0.7, 0.0]).tolist() == [0, 1, 0]
    assert codes.huffman_lengths([0.0, 0.3, 0.7]).tolist() == [0, 1, 1]
    assert codes.huffman_lengths([5, 5]).tolist() == [1, 1]


@pytest.mark.parametrize(
    ("probs", "needle"),
    [
        ([], r"probs must be a non-empty 1-D sequence of weights, got shape \(0,\)"),
        ([0.0, 0.0], r"probs must be weights not all zero, got \[0.0, 0.0\]"),
        ([0.5, float("nan")], r"probs\[1\] must be finite and >= 0, got nan"),
        ([0.5, -0.1, 0.6], r"probs\[1\] must be finite and >= 0, got -0.1"),
        ([[0.5, 0.5]], r"probs must be a non-empty 1-D sequence of weights, got shape \(1, 2\)"),
    ],
)
def test_huffman_rejects_bad_pmfs(probs: list, needle: str) -> None:
    for floor in (codes.huffman_lengths, codes.entropy_bits):
        with pytest.raises(ValueError, match=needle):
            floor(probs)
    with pytest.raises(ValueError, match=needle):
        codes.length_limited_lengths(probs, 4)


@pytest.mark.parametrize("probs", [["a", "b"], "ab", [0.5, "x"]])
def test_huffman_rejects_pmfs_of_the_wrong_type(probs: object) -> None:
    for floor in (codes.huffman_lengths, codes.entropy_bits):
        with pytest.raises(TypeError, match="probs must be a sequence of weights, got"):
            floor(probs)  # type: ignore[arg-type]


def test_entropy_bits_matches_scipy() -> None:
    # 0·log 0 = 0; weights that do not sum to 1 are taken as they are (not normalised).
    probs = np.array([0.5, 0.25, 0.125, 0.125, 0.0])
    assert codes.entropy_bits(probs) == pytest.approx(float(scipy_entropy(probs, base=2)))
    assert codes.entropy_bits([1.0]) == 0.0


def test_huffman_is_within_one_bit_of_entropy_and_kraft_complete() -> None:
    # Shannon's source-coding theorem: H ≤ L* < H + 1 (entropy from scipy). Every
    # Huffman code on ≥ 2 symbols is complete: Kraft sum exactly 1.
    rng = np.random.default_rng(3)
    for trial in range(200):
        n = int(rng.integers(2, 200))
        probs = rng.dirichlet(np.full(n, float(rng.choice([0.05, 0.5, 5.0]))))
        probs = probs / probs.sum()
        lengths = codes.huffman_lengths(probs)
        h = float(scipy_entropy(probs, base=2))
        mean = float(np.dot(lengths, probs))
        assert h - 1e-12 <= mean < h + 1, trial
        assert np.count_nonzero(lengths) == np.count_nonzero(probs)
        if np.count_nonzero(probs) >= 2:
            assert kraft(lengths) == 1, trial


def test_huffman_lengths_are_canonicalisable_and_prefix_free() -> None:
    rng = np.random.default_rng(4)
    probs = rng.random(3000)
    lengths = codes.huffman_lengths(probs)
    cb = codes.canonical_codebook((np.arange(probs.size), lengths))
    codes.assert_prefix_free(cb, canonical=True)
    codes.assert_kraft(cb, complete=True)


# ------------------------------------------------------------------- package-merge


def brute_best_cost(weights: list[int], cap: int) -> int:
    """Minimum Σ w·ℓ over all length vectors in [1, cap]^n with Kraft sum ≤ 1."""
    best = None
    for lengths in itertools.product(range(1, cap + 1), repeat=len(weights)):
        if sum(Fraction(1, 2**ln) for ln in lengths) <= 1:
            cost = sum(w * ln for w, ln in zip(weights, lengths))
            best = cost if best is None else min(best, cost)
    assert best is not None
    return best


def test_package_merge_is_optimal_by_brute_force() -> None:
    rng = np.random.default_rng(5)
    cases = 0
    for n in range(2, 7):
        for cap in range(max(1, (n - 1).bit_length()), 5):
            for _ in range(4):
                weights = rng.integers(1, 60, size=n).tolist()
                if rng.random() < 0.5:  # skewed, so the cap binds
                    weights = sorted(int(w) * 3**i for i, w in enumerate(weights))
                lengths = codes.length_limited_lengths(weights, cap)
                assert int(lengths.max()) <= cap
                assert kraft(lengths) <= 1
                assert int(np.dot(lengths, weights)) == brute_best_cost(weights, cap), (
                    weights,
                    cap,
                )
                cases += 1
    assert cases > 50


def test_package_merge_reaches_the_unconstrained_optimum_when_the_cap_is_loose() -> None:
    # The package-merge routine itself (not the short cut to Huffman) with a cap at
    # or above the Huffman depth must reach bitarray's Huffman cost.
    rng = np.random.default_rng(6)
    for n in (2, 3, 10, 100, 600):
        weights = np.sort(rng.integers(1, 10_000, size=n))
        depth = int(codes.huffman_lengths(weights).max())
        for cap in (depth, depth + 3):
            lengths = codes._package_merge(weights.astype(np.float64), cap)
            assert int(np.dot(lengths, weights)) == reference_cost(weights.tolist())


def test_package_merge_on_skewed_weights_is_capped_complete_and_monotone() -> None:
    fib = [1, 1]
    while len(fib) < 40:
        fib.append(fib[-1] + fib[-2])
    previous = None
    for cap in range(6, 40):
        lengths = codes.length_limited_lengths(fib, cap)
        assert int(lengths.max()) <= cap
        assert kraft(lengths) == 1  # optimal length-limited codes are complete
        cost = int(np.dot(lengths, fib))
        if previous is not None:
            assert cost <= previous  # a looser cap can only help
        previous = cost
    assert previous == reference_cost(fib)


def test_cap_equal_to_log2_alphabet_forces_fixed_length() -> None:
    # With 2^L symbols and cap L, the only complete code is the fixed-length one.
    rng = np.random.default_rng(7)
    lengths = codes.length_limited_lengths(rng.random(64) ** 4, 6)
    assert lengths.tolist() == [6] * 64


def test_length_limit_errors() -> None:
    with pytest.raises(
        ValueError,
        match=r"max_length must be >= 4 to give each of the 9 symbols of nonzero probability "
        r"a codeword \(2\*\*max_length >= 9\), got 3",
    ):
        codes.length_limited_lengths(np.ones(9), 3)
    with pytest.raises(ValueError, match="max_length must be an integer >= 1, got 0"):
        codes.length_limited_lengths([0.5, 0.5], 0)
    for bad in (2.5, True, "3", None):
        expected = re.escape(f"max_length must be an integer, got {bad!r}")
        with pytest.raises(TypeError, match=expected):
            codes.length_limited_lengths([0.5, 0.5], bad)  # type: ignore[arg-type]
    assert codes.length_limited_lengths([0.0, 2.0], 1).tolist() == [0, 1]


# ---------------------------------------------------------------- Golomb and Rice


def golomb_word_length(x: int, m: int) -> int:
    """Length of the Golomb codeword of x: unary quotient + truncated-binary
    remainder (Golomb 1966, as taught; written here independently)."""
    quotient, remainder = divmod(x, m)
    b = math.ceil(math.log2(m)) if m > 1 else 0
    cutoff = 2**b - m
    return quotient + 1 + (b - 1 if remainder < cutoff else b)


def direct_expected_length(p: float, m: int) -> mpmath.mpf:
    """Σ_x (1−p)^x p · len(x), summed term by term in 30-digit arithmetic until the
    remaining probability mass (1−p)^x is below 1e-22."""
    with mpmath.workdps(30):
        pp = mpmath.mpf(p)
        q = 1 - pp
        total = mpmath.mpf(0)
        tail = mpmath.mpf(1)  # (1−p)^x = P(X ≥ x)
        eps = mpmath.mpf(10) ** -22
        x = 0
        while tail > eps or x < 2 * m:
            total += tail * pp * golomb_word_length(x, m)
            tail *= q
            x += 1
        return total


GEOMETRIC_PS = [0.9, 0.6, 0.5, 0.3, 0.2, 0.1, 0.05, 0.02]


@pytest.mark.parametrize("p", GEOMETRIC_PS)
def test_golomb_expected_length_matches_a_direct_sum(p: float) -> None:
    for m in (1, 2, 3, 4, 5, 7, 8, 12, 33):
        assert codes.golomb_expected_length(p, m) == pytest.approx(
            float(direct_expected_length(p, m)), rel=1e-12
        )


@pytest.mark.parametrize("p", GEOMETRIC_PS[:-1])
def test_golomb_parameter_is_the_brute_force_optimum(p: float) -> None:
    near = math.log(2) / p  # the optimum is close to ln 2 / p; search well around it
    lengths = {m: direct_expected_length(p, m) for m in range(1, int(2 * near) + 4)}
    best = min(lengths.values())
    m = codes.golomb_parameter(p)
    assert lengths[m] == pytest.approx(best, rel=1e-15)


def test_gallager_van_voorhis_formula_against_brute_force() -> None:
    # Gallager & van Voorhis (1975): m = ⌈log(1+q) / −log q⌉ is optimal. Formula
    # evaluated in 50-digit arithmetic here, optimum found by exhaustive search.
    for p in [0.95, 0.7, 0.45, 0.33, 0.15, 0.08, 0.04]:
        with mpmath.workdps(50):
            q = 1 - mpmath.mpf(p)
            formula = int(mpmath.ceil(mpmath.log(1 + q) / -mpmath.log(q)))
        top = int(2 * math.log(2) / p) + 4
        lengths = {m: direct_expected_length(p, m) for m in range(1, top)}
        assert lengths[formula] == min(lengths.values())
        assert codes.golomb_parameter(p) == formula


def test_golomb_where_q_to_the_m_is_one_half() -> None:
    # From memory: when q^m = 1/2 the Golomb code with that m is optimal (it is the
    # Huffman code of the geometric source).
    for m in (1, 2, 3, 5, 16):
        p = 1 - 2 ** (-1 / m)
        assert codes.golomb_parameter(p) == m


def test_golomb_on_the_dyadic_geometric_source() -> None:
    # p = 1/2: P(x) = 2^-(x+1), unary (m = 1) codes x in x+1 bits, L = H = 2 bits.
    assert codes.golomb_parameter(0.5) == 1
    assert codes.golomb_expected_length(0.5, 1) == 2.0


def test_golomb_edge_p_equal_one() -> None:
    assert codes.golomb_parameter(1.0) == 1
    assert codes.golomb_expected_length(1.0, 1) == 1.0
    assert codes.golomb_expected_length(1.0, 3) == float(golomb_word_length(0, 3))
    assert codes.golomb_expected_length(1.0, 4) == float(golomb_word_length(0, 4))


def test_golomb_small_p_stays_accurate() -> None:
    # p = 1e-4: m ≈ ln 2 / p; exact length vs the direct sum would need ~10^6 terms,
    # so compare with the closed form evaluated independently in mpmath.
    p, m = 1e-4, codes.golomb_parameter(1e-4)
    assert abs(m - math.log(2) / p) < 2
    with mpmath.workdps(50):
        q = 1 - mpmath.mpf(p)
        b = math.ceil(math.log2(m))
        c = 2**b - m
        ref = 1 + q**m / (1 - q**m) + b - (1 - q**c) / (1 - q**m)
    assert codes.golomb_expected_length(p, m) == pytest.approx(float(ref), rel=1e-12)


@pytest.mark.parametrize("p", GEOMETRIC_PS)
def test_rice_parameter_is_the_best_power_of_two(p: float) -> None:
    lengths = {k: direct_expected_length(p, 2**k) for k in range(0, 10)}
    k = codes.rice_parameter(p)
    assert lengths[k] == pytest.approx(min(lengths.values()), rel=1e-15)


def fraction_gvv(p: float) -> int:
    """The Gallager–van Voorhis m (from memory: θ^m + θ^(m+1) ≤ 1 < θ^(m−1) + θ^m),
    decided in exact rationals: a float is a dyadic rational, so θ = 1 − p is exact."""
    theta = 1 - Fraction(p)
    m, power = 1, theta  # power = θ^m
    while power * (1 + theta) > 1:
        m, power = m + 1, power * theta
    return m


def fraction_rice(p: float) -> int:
    """The k of least exact expected Rice length k + 1/(1 − θ^(2^k)) (from memory:
    k + 1 bits plus the unary quotient, E⌊X/2^k⌋ = θ^(2^k)/(1 − θ^(2^k))), in rationals."""
    theta = 1 - Fraction(p)
    lengths, power = [], theta  # power = θ^(2^k)
    for k in range(max(3, int(math.log2(1 / p)) + 3)):
        lengths.append(k + 1 / (1 - power))
        power *= power
    best = min(lengths)
    assert lengths.count(best) == 1  # no ties in exact arithmetic
    return lengths.index(best)


# floats p in [1e-3, 1): random, dyadic, and next to the ones the float rule gets wrong
EXACT_PS = sorted(
    {float(x) for x in np.random.default_rng(7).uniform(1e-3, 1.0, 60)}
    | {float(x) for x in 10.0 ** np.random.default_rng(8).uniform(-3, 0, 60)}
    | {0.5, 0.25, 0.125, 1 - 2**-20, 2**-10, 0.3819660112501051}
    | {math.nextafter(0.3819660112501051, d) for d in (0.0, 1.0)}
)


def test_golomb_parameter_equals_the_rule_in_exact_rationals() -> None:
    wrong = [(p, codes.golomb_parameter(p), fraction_gvv(p)) for p in EXACT_PS]
    assert [row for row in wrong if row[1] != row[2]] == []


def test_rice_parameter_is_the_least_exact_expected_length() -> None:
    wrong = [(p, codes.rice_parameter(p), fraction_rice(p)) for p in EXACT_PS]
    assert [row for row in wrong if row[1] != row[2]] == []


def test_golomb_parameter_where_the_rule_switches_exactly() -> None:
    # For each small m, floats p on both sides of θ^m + θ^(m+1) = 1 (found by bisection
    # on exact rationals): the rule switches from m to m + 1 between neighbouring floats.
    for m in (1, 2, 3, 4, 9, 50):
        lo, hi = 0.005, 1.0  # fraction_gvv(lo) = 138 > m >= fraction_gvv(hi) = 1
        while math.nextafter(lo, 1.0) < hi:
            mid = (lo + hi) / 2
            if fraction_gvv(mid) > m:
                lo = mid
            else:
                hi = mid
        assert fraction_gvv(lo) == m + 1
        assert fraction_gvv(hi) == m
        assert codes.golomb_parameter(lo) == m + 1
        assert codes.golomb_parameter(hi) == m


GEOMETRIC_P_RULE = r"p must be a finite number in \(0, 1\], got "


@pytest.mark.parametrize("bad", [0.0, -0.1, 1.5, float("nan"), float("inf")])
def test_geometric_p_must_be_in_unit_interval(bad: float) -> None:
    for call in (
        codes.golomb_parameter,
        codes.rice_parameter,
        lambda p: codes.golomb_expected_length(p, 2),
    ):
        with pytest.raises(ValueError, match=GEOMETRIC_P_RULE):
            call(bad)


@pytest.mark.parametrize("bad", ["x", "0.5", True, None, [0.5]])
def test_geometric_p_must_be_a_number(bad: object) -> None:
    for call in (
        codes.golomb_parameter,
        codes.rice_parameter,
        lambda p: codes.golomb_expected_length(p, 2),
    ):
        with pytest.raises(TypeError, match=r"p must be a number, got "):
            call(bad)


def test_golomb_m_must_be_a_positive_integer() -> None:
    for bad in (0, -2):
        with pytest.raises(ValueError, match=f"m must be an integer >= 1, got {bad}"):
            codes.golomb_expected_length(0.5, bad)
    for wrong in (2.0, True, "2"):
        with pytest.raises(TypeError, match=re.escape(f"m must be an integer, got {wrong!r}")):
            codes.golomb_expected_length(0.5, wrong)  # type: ignore[arg-type]


# ------------------------------------------------------- lengths against a pmf


def test_expected_length_redundancy_and_excess() -> None:
    words = {0: "0", 1: "10", 2: "110", 3: "111"}
    symbols = np.array([0, 1, 2, 3])
    probs = np.array([0.4, 0.3, 0.2, 0.1])
    mean = 0.4 * 1 + 0.3 * 2 + 0.2 * 3 + 0.1 * 3  # by hand: 1.9
    assert codes.expected_length(words, symbols, probs) == pytest.approx(mean, abs=1e-15)
    h = float(scipy_entropy(probs, base=2))  # entropy from scipy
    assert codes.redundancy(words, symbols, probs) == pytest.approx(mean - h, abs=1e-12)
    rows = codes.excess_by_symbol(words, symbols, probs)
    by_hand = {s: p * (len(words[s]) + math.log2(p)) for s, p in zip(range(4), probs)}
    assert [r[0] for r in rows] == sorted(by_hand, key=by_hand.get, reverse=True)
    for sym, p, length, share in rows:
        assert length == len(words[sym])
        assert p == probs[sym]
        assert share == pytest.approx(by_hand[sym], abs=1e-15)
    assert math.fsum(r[3] for r in rows) == pytest.approx(mean - h, abs=1e-12)
    assert len(codes.excess_by_symbol(words, symbols, probs, top=2)) == 2


def test_a_symbol_with_probability_needs_a_codeword() -> None:
    words = {0: "0", 1: "1"}
    with pytest.raises(ValueError, match=r"symbol 7 has probability 0.25 but no codeword"):
        codes.expected_length(words, [0, 1, 7], [0.5, 0.25, 0.25])
    # zero probability: no codeword needed, and no row in the excess table
    assert codes.expected_length(words, [0, 1, 7], [0.5, 0.5, 0.0]) == 1.0
    assert [r[0] for r in codes.excess_by_symbol(words, [0, 1, 7], [0.5, 0.5, 0.0])] == [0, 1]


def test_pmf_must_sum_to_one_and_match_symbols() -> None:
    words = {0: "0", 1: "1"}
    for measure in (codes.expected_length, codes.redundancy, codes.excess_by_symbol):
        with pytest.raises(ValueError, match=r"probs must be a pmf summing to 1 within 1e-09, got"):
            measure(words, [0, 1], [0.5, 0.6])
        with pytest.raises(ValueError, match="symbols and probs must be the same size, got 2 and"):
            measure(words, [0, 1], [1.0])
        with pytest.raises(ValueError, match=r"probs\[1\] must be finite and >= 0, got -0.5"):
            measure(words, [0, 1], [1.5, -0.5])
        with pytest.raises(TypeError, match="symbols must be a 1-D array of integers, got dtype"):
            measure(words, [0.0, 1.0], [0.5, 0.5])
        with pytest.raises(TypeError, match="probs must be a sequence of probabilities, got"):
            measure(words, [0, 1], ["a", "b"])


def test_excess_top_must_be_a_non_negative_integer() -> None:
    words, symbols, probs = {0: "0", 1: "1"}, [0, 1], [0.5, 0.5]
    assert codes.excess_by_symbol(words, symbols, probs, top=0) == []
    with pytest.raises(ValueError, match="top must be an integer >= 0, got -1"):
        codes.excess_by_symbol(words, symbols, probs, top=-1)
    for wrong in (1.5, True):
        expected = re.escape(f"top must be an integer, got {wrong!r}")
        with pytest.raises(TypeError, match=expected):
            codes.excess_by_symbol(words, symbols, probs, top=wrong)  # type: ignore[arg-type]


def test_huffman_floor_of_a_pmf_through_a_codebook() -> None:
    # The full path a floor takes: lengths → canonical code → expected length, equal
    # to bitarray's Huffman cost on the same pmf.
    rng = np.random.default_rng(9)
    weights = rng.integers(1, 1000, size=500)
    probs = weights / weights.sum()
    cb = codes.canonical_codebook((np.arange(500), codes.huffman_lengths(probs)))
    expected = reference_cost(weights.tolist()) / int(weights.sum())
    assert codes.expected_length(cb, np.arange(500), probs) == pytest.approx(expected, rel=1e-12)
