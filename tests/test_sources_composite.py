"""Random walks and piecewise sources: information, entropy, sampling, specs and errors.

Outside references named beside each check: exact enumeration of every sequence over
small alphabets (its probabilities must sum to 1, its mean information is the entropy
figure), scipy.stats.entropy, itertools.accumulate for the walk, scipy's chi-square test
for the segments, numpy's SeedSequence for the seeding convention; end to end through the
real check with zlib.
"""

from __future__ import annotations

import hashlib
import itertools
import math
import zlib

import numpy as np
import pytest
import scipy.stats

from pytest_ratefloor import checks, sources
from pytest_ratefloor.codecs import ByteCodec
from pytest_ratefloor.sources import Piecewise, RandomWalk

INT64_MAX = 2**63 - 1
INT64_MIN = -(2**63)

# golden samples: sha256 of sample(1000, seed=0).astype("<i8").tobytes(), recorded when these
# families were written; a new value means every ledger measured on that source is void
GOLDEN_WALK = "12377d09cc2395122ee091b8951a1d752e9d2f5e0d5b5893e01f1ee06bced082"
GOLDEN_PIECEWISE = "44fd9d4d4f393a8126836b3a44ec7b2ad976624e36ae3fa841a048b64fed279b"
GOLDEN_MIXED = "4bd3704f0af21e96b4e211d3c658449c24e482051527f21d66a3b5afcbfd7173"


def sample_hash(src, n: int = 1000, seed: int = 0) -> str:
    return hashlib.sha256(src.sample(n, seed).astype("<i8").tobytes()).hexdigest()


def enumerate_sequences(alphabets):
    """Every sequence with position i drawn from alphabets[i] (a dict symbol -> probability),
    with its exact probability (a product of the given pmf values)."""
    for combo in itertools.product(*(sorted(a.items()) for a in alphabets)):
        yield [s for s, _ in combo], math.prod(p for _, p in combo)


# --------------------------------------------------------------------------
# random walk


def test_random_walk_spec_and_attributes():
    step = sources.two_sided_geometric(0.8)
    walk = sources.random_walk(step)
    assert walk.spec == "random_walk(step=two_sided_geometric(theta=0.8),start=0)"
    assert isinstance(walk, RandomWalk)
    assert walk.family == "random_walk"
    assert walk.params == {"start": 0, "step.theta": 0.8}
    assert (walk.min_symbol, walk.max_symbol, walk.alphabet_size) == (None, None, None)
    assert not walk.memoryless
    assert not walk.is_estimate
    assert walk.fixed_sample is False
    assert sources.random_walk(step, start=-7).spec.endswith(",start=-7)")
    assert sources.random_walk(step) == walk
    assert sources.random_walk(step, start=1) != walk


def test_random_walk_entropy_is_the_steps():
    step = sources.categorical([0.3, 0.7], [-1, 1])
    walk = sources.random_walk(step, start=10)
    # scipy.stats.entropy of the step pmf
    assert walk.entropy == pytest.approx(scipy.stats.entropy([0.3, 0.7], base=2), rel=1e-13)
    assert walk.varentropy == step.varentropy
    assert walk.varentropy_rate == step.varentropy_rate
    chain = sources.markov([[0.9, 0.1], [0.4, 0.6]])
    walk = sources.random_walk(chain)
    assert walk.entropy == chain.entropy
    assert walk.varentropy_rate == chain.varentropy_rate  # not the one-step varentropy
    assert walk.varentropy_rate != walk.varentropy


def test_random_walk_information_by_exact_enumeration():
    # every walk of 4 steps over steps {-1, 0, +2}: the information is -log2 of the product of
    # the step probabilities, the probabilities sum to 1 and the mean information is 4·H
    pmf = {-1: 0.2, 0: 0.5, 2: 0.3}
    walk = sources.random_walk(sources.categorical(list(pmf.values()), list(pmf)), start=5)
    n = 4
    total = 0.0
    mean = 0.0
    for steps, p in enumerate_sequences([pmf] * n):
        x = list(itertools.accumulate(steps, initial=5))[1:]  # X1..Xn, X0 = start not emitted
        info = walk.information(x)
        assert info == pytest.approx(-math.log2(p), rel=1e-12, abs=1e-12)
        total += 2.0**-info
        mean += p * info
    assert total == pytest.approx(1.0, rel=1e-12)
    assert mean == pytest.approx(n * walk.entropy, rel=1e-12)
    assert mean == pytest.approx(n * scipy.stats.entropy(list(pmf.values()), base=2), rel=1e-12)


def test_random_walk_sample_is_the_cumulative_sum_of_the_steps():
    step = sources.two_sided_geometric(0.8)
    walk = sources.random_walk(step, start=-3)
    x = walk.sample(5000, seed=11)
    # itertools.accumulate in Python integers, from the step's own sample with the same seed
    reference = list(itertools.accumulate(step.sample(5000, seed=11).tolist(), initial=-3))[1:]
    assert x.tolist() == reference
    assert x.dtype == np.int64
    assert walk.information(x) == pytest.approx(step.information(np.diff(x, prepend=-3)), rel=1e-14)
    # the steps follow their pmf (scipy's chi-square test on |step| <= 4 and the rest)
    steps = np.diff(walk.sample(200_000, seed=2), prepend=0)
    symbols, probs = step.pmf_table()
    inner = np.abs(symbols) <= 4
    expected = np.append(probs[inner], 1.0 - probs[inner].sum()) * steps.size
    observed = [int(np.count_nonzero(steps == s)) for s in symbols[inner]]
    observed.append(steps.size - sum(observed))
    assert scipy.stats.chisquare(observed, expected).pvalue > 1e-4


def test_random_walk_is_reproducible():
    walk = sources.random_walk(sources.two_sided_geometric(0.8))
    assert np.array_equal(walk.sample(1000, seed=4), walk.sample(1000, seed=4))
    assert not np.array_equal(walk.sample(1000, seed=4), walk.sample(1000, seed=5))
    assert np.array_equal(walk.sample(1000, seed=4)[:300], walk.sample(300, seed=4))
    # golden: the walk of the step's golden sampler; a change here voids every ledger entry
    assert sample_hash(walk) == GOLDEN_WALK


def test_random_walk_bounds_when_derivable():
    up = sources.random_walk(sources.geometric(0.5), start=5)  # steps >= 0: never below 5
    assert (up.min_symbol, up.max_symbol, up.alphabet_size) == (5, None, None)
    assert up.sample(1000).min() >= 5
    down = sources.random_walk(sources.categorical([0.5, 0.5], [-2, -1]), start=0)
    assert (down.min_symbol, down.max_symbol) == (None, -1)
    still = sources.random_walk(sources.categorical([1.0], [0]), start=9)
    assert (still.min_symbol, still.max_symbol, still.alphabet_size) == (9, 9, 1)
    assert still.sample(10).tolist() == [9] * 10


def test_random_walk_floors_ask_the_step():
    step = sources.two_sided_geometric(0.8)
    walk = sources.random_walk(step, start=100)
    x = walk.sample(3000, seed=1)
    assert walk.optimal_code_rate() == step.optimal_code_rate()
    assert walk.adaptive_code_length(x) == step.adaptive_code_length(np.diff(x, prepend=100))
    symbols, probs = walk.pmf_table()  # the law of X1 = start + D1
    step_symbols, step_probs = step.pmf_table()
    assert symbols.tolist() == (step_symbols + 100).tolist()
    assert probs.tolist() == step_probs.tolist()


def test_random_walk_overflow_is_named():
    one = sources.categorical([1.0], [1])
    edge = sources.random_walk(one, start=INT64_MAX - 3)
    assert edge.sample(3).tolist() == [INT64_MAX - 2, INT64_MAX - 1, INT64_MAX]
    with pytest.raises(
        OverflowError,
        match=r"^random_walk\(step=categorical\(.*\): the walk leaves the int64 range at index 3 "
        rf"of 4 \(from {INT64_MAX} by a step of 1\); draw fewer symbols",
    ):
        edge.sample(4)
    low = sources.random_walk(sources.categorical([1.0], [-(2**62)]), start=-(2**62))
    with pytest.raises(OverflowError, match=r"leaves the int64 range at index 1 of 5"):
        low.sample(5)
    wide = sources.random_walk(sources.uniform(2**62))
    with pytest.raises(OverflowError, match=r"leaves the int64 range"):
        wide.sample(64)


def test_random_walk_errors_are_named():
    with pytest.raises(
        TypeError, match=r"^random_walk: step must be a pytest_ratefloor source, got 0\.8$"
    ):
        sources.random_walk(0.8)
    with pytest.raises(TypeError, match=r"^random_walk: start must be an integer, got 1\.5$"):
        sources.random_walk(sources.bernoulli(0.5), start=1.5)
    with pytest.raises(
        ValueError, match=rf"^random_walk: start must be an integer in \[.*\], got {2**63}$"
    ):
        sources.random_walk(sources.bernoulli(0.5), start=2**63)
    walk = sources.random_walk(sources.bernoulli(0.5), start=0)
    with pytest.raises(
        ValueError,
        match=r"the step 2 from 1 to 3 at index 1 is impossible under bernoulli\(p=0\.5\) "
        r"\(symbol 2 at index 1 has probability 0",
    ):
        walk.information([1, 3])
    free = sources.random_walk(sources.two_sided_geometric(0.5))
    with pytest.raises(
        ValueError, match=rf"the step from {INT64_MAX} to {INT64_MIN} at index 1 does not fit int64"
    ):
        free.information([INT64_MAX, INT64_MIN])


# --------------------------------------------------------------------------
# piecewise


def test_piecewise_spec_and_attributes():
    src = sources.piecewise([(sources.bernoulli(0.1), 1000), (sources.bernoulli(0.4), 1000)])
    assert src.spec == "piecewise([bernoulli(p=0.1)*1000,bernoulli(p=0.4)*1000],repeat=True)"
    assert isinstance(src, Piecewise)
    assert src.family == "piecewise"
    assert src.params == {"pieces": 2, "cycle": 2000, "repeat": 1}
    assert (src.min_symbol, src.max_symbol, src.alphabet_size) == (0, 1, 2)
    assert not src.memoryless
    assert not src.is_estimate
    assert src.fixed_sample is False
    once = sources.piecewise([(sources.uniform(3), 5), (sources.geometric(0.5), 2)], repeat=False)
    assert once.spec == "piecewise([uniform(k=3)*5,geometric(p=0.5)*2],repeat=False)"
    assert (once.min_symbol, once.max_symbol, once.alphabet_size) == (0, None, None)


def test_piecewise_entropy_is_the_length_weighted_mean():
    src = sources.piecewise([(sources.bernoulli(0.1), 1000), (sources.bernoulli(0.4), 3000)])
    h1 = scipy.stats.entropy([0.9, 0.1], base=2)  # scipy, per piece
    h2 = scipy.stats.entropy([0.6, 0.4], base=2)
    assert src.entropy == pytest.approx((1000 * h1 + 3000 * h2) / 4000, rel=1e-13)
    # entropy_bits(n): count each position's piece by brute force
    for n in (0, 1, 999, 1000, 1001, 4000, 4500, 9999):
        first = sum(1 for p in range(n) if p % 4000 < 1000)
        assert src.entropy_bits(n) == pytest.approx(
            first * h1 + (n - first) * h2, rel=1e-12, abs=1e-12
        )
    assert src.entropy_bits(8000) == pytest.approx(8000 * src.entropy, rel=1e-13)


# small pieces for exact enumeration: positions 0,1 Bernoulli(0.3); position 2 a categorical
PIECE_A = {0: 0.7, 1: 0.3}
PIECE_B = {0: 0.5, 2: 0.25, 5: 0.25}


def small_piecewise(repeat: bool = True) -> Piecewise:
    return sources.piecewise(
        [(sources.bernoulli(0.3), 2), (sources.categorical([0.5, 0.25, 0.25], [0, 2, 5]), 1)],
        repeat=repeat,
    )


@pytest.mark.parametrize("n", [1, 3, 5, 6])
def test_piecewise_information_by_exact_enumeration(n):
    src = small_piecewise()
    layout = [PIECE_A, PIECE_A, PIECE_B] * 2
    total = 0.0
    mean = 0.0
    second = 0.0
    for x, p in enumerate_sequences(layout[:n]):
        info = src.information(x)
        assert info == pytest.approx(-math.log2(p), rel=1e-12, abs=1e-12)
        total += 2.0**-info
        mean += p * info
        second += p * info * info
    assert total == pytest.approx(1.0, rel=1e-12)  # a proper distribution over n symbols
    assert mean == pytest.approx(src.entropy_bits(n), rel=1e-12)  # exact for every n
    if n % 3 == 0:  # whole cycles: n·entropy and n·varentropy_rate are exact
        assert mean == pytest.approx(n * src.entropy, rel=1e-12)
        assert second - mean * mean == pytest.approx(n * src.varentropy_rate, rel=1e-10)


def test_piecewise_varentropy_is_the_variance_at_a_uniform_position():
    src = small_piecewise()
    # the information of the symbol at a uniform position of the cycle, enumerated
    cases = [(1 / 3 * p, -math.log2(p)) for p in PIECE_A.values()] * 2
    cases += [(1 / 3 * p, -math.log2(p)) for p in PIECE_B.values()]
    mean = sum(w * f for w, f in cases)
    assert mean == pytest.approx(src.entropy, rel=1e-13)
    assert src.varentropy == pytest.approx(sum(w * (f - mean) ** 2 for w, f in cases), rel=1e-12)


def test_piecewise_pmf_table_is_the_mixture():
    symbols, probs = small_piecewise().pmf_table()
    assert symbols.tolist() == [0, 1, 2, 5]
    assert probs.tolist() == pytest.approx(
        [2 / 3 * 0.7 + 1 / 3 * 0.5, 2 / 3 * 0.3, 1 / 3 * 0.25, 1 / 3 * 0.25], rel=1e-14
    )


def test_piecewise_segments_follow_their_sources():
    src = sources.piecewise([(sources.bernoulli(0.1), 1000), (sources.bernoulli(0.4), 1000)])
    x = src.sample(200_000, seed=9)
    first = (np.arange(x.size) % 2000) < 1000
    for mask, p in ((first, 0.1), (~first, 0.4)):  # scipy's chi-square test, per piece
        ones = int(x[mask].sum())
        size = int(mask.sum())
        observed = [size - ones, ones]
        assert scipy.stats.chisquare(observed, [size * (1 - p), size * p]).pvalue > 1e-4
    labelled = sources.piecewise([(sources.uniform(2), 3), (sources.categorical([1.0], [7]), 2)])
    y = labelled.sample(13, seed=0)
    assert y[[3, 4, 8, 9]].tolist() == [7, 7, 7, 7]
    assert set(y[[0, 1, 2, 5, 6, 7, 10, 11, 12]].tolist()) <= {0, 1}


def test_piecewise_seeding_convention():
    # piece j draws from PCG64(SeedSequence(w, spawn_key=(j,))), w the first word of PCG64(seed)
    a, b = sources.uniform(10), sources.geometric(0.3)
    src = sources.piecewise([(a, 4), (b, 3)])
    word = int(np.random.PCG64(21).random_raw(1)[0])
    draws = [
        piece._sample(count, np.random.PCG64(np.random.SeedSequence(word, spawn_key=(j,))))
        for j, (piece, count) in enumerate([(a, 8), (b, 6)])
    ]
    expected = np.concatenate([draws[0][:4], draws[1][:3], draws[0][4:], draws[1][3:]])
    assert src.sample(14, seed=21).tolist() == expected.tolist()


def test_piecewise_is_reproducible():
    src = sources.piecewise([(sources.bernoulli(0.1), 1000), (sources.bernoulli(0.4), 1000)])
    assert np.array_equal(src.sample(5000, seed=3), src.sample(5000, seed=3))
    assert not np.array_equal(src.sample(5000, seed=3), src.sample(5000, seed=4))
    assert np.array_equal(src.sample(5000, seed=3)[:2500], src.sample(2500, seed=3))
    mixed = sources.piecewise([(sources.markov([[0.9, 0.1], [0.4, 0.6]]), 7), (src, 50)])
    assert np.array_equal(mixed.sample(400, seed=1)[:123], mixed.sample(123, seed=1))
    # golden: a change here voids every ledger entry measured on these sources
    assert sample_hash(src) == GOLDEN_PIECEWISE
    assert sample_hash(mixed) == GOLDEN_MIXED


def test_piecewise_with_memory_restarts_each_segment():
    chain = sources.markov([[0.9, 0.1], [0.2, 0.8]], initial=[1.0, 0.0])
    src = sources.piecewise([(chain, 5), (sources.uniform(2), 2)])
    x = src.sample(40, seed=6)
    assert x[[0, 7, 14, 21, 28, 35]].tolist() == [0] * 6  # each chain segment starts in state 0
    by_segment = sum(
        chain.information(x[b : b + 5]) + sources.uniform(2).information(x[b + 5 : b + 7])
        for b in range(0, 35, 7)
    ) + chain.information(x[35:40])
    assert src.information(x) == pytest.approx(by_segment, rel=1e-13)
    with pytest.raises(
        ValueError,
        match=r"segment 2 \(piece 0, markov\(.*\), indices 7\.\.11; indices below count from the "
        r"segment's start\): symbol 1 at index 0 has initial probability 0",
    ):
        src.information(np.concatenate([x[:7], [1], x[8:]]))


def test_piecewise_floors():
    a, b = sources.bernoulli(0.1), sources.uniform(5)
    src = sources.piecewise([(a, 30), (b, 10)])
    assert src.optimal_code_rate() == pytest.approx(
        (30 * a.optimal_code_rate() + 10 * b.optimal_code_rate()) / 40, rel=1e-14
    )
    x = src.sample(100, seed=2)
    mask = (np.arange(100) % 40) < 30
    assert src.adaptive_code_length(x) == pytest.approx(
        a.adaptive_code_length(x[mask]) + b.adaptive_code_length(x[~mask]), rel=1e-14
    )


def test_piecewise_repeat_false_plays_once():
    src = small_piecewise(repeat=False)
    assert src.sample(3, seed=0).size == 3
    with pytest.raises(
        ValueError,
        match=r"^piecewise\(\[.*\],repeat=False\): n=4 is more than the 3 symbols of the pieces; "
        r"with repeat=False the pieces play once",
    ):
        src.sample(4)
    with pytest.raises(ValueError, match=r"index 3 is past the 3 symbols of the pieces"):
        src.information([0, 0, 0, 0])
    with pytest.raises(ValueError, match=r"n=5 is more than the 3 symbols"):
        src.entropy_bits(5)
    assert src.entropy_bits(3) == pytest.approx(3 * src.entropy, rel=1e-14)


def test_piecewise_errors_are_named():
    b = sources.bernoulli(0.5)
    with pytest.raises(ValueError, match=r"^piecewise: pieces must be a non-empty list of "
                       r"\(source, length\) pairs, got \[\]$"):
        sources.piecewise([])
    with pytest.raises(TypeError, match=r"^piecewise: pieces must be a non-empty list"):
        sources.piecewise("bernoulli")
    with pytest.raises(TypeError, match=r"^piecewise: pieces\[1\] must be a \(source, length\) "
                       r"pair, got bernoulli\(p=0\.5\)$"):
        sources.piecewise([(b, 2), b])
    with pytest.raises(TypeError, match=r"^piecewise: pieces\[0\]\[0\] must be a "
                       r"pytest_ratefloor source, got 'b'$"):
        sources.piecewise([("b", 2)])
    with pytest.raises(ValueError, match=r"^piecewise: pieces\[0\]\[1\] must be an integer "
                       r">= 1, got 0$"):
        sources.piecewise([(b, 0)])
    with pytest.raises(TypeError, match=r"^piecewise: pieces\[0\]\[1\] must be an integer, "
                       r"got 2\.5$"):
        sources.piecewise([(b, 2.5)])
    with pytest.raises(TypeError, match=r"^repeat must be True or False, got 1$"):
        sources.piecewise([(b, 2)], repeat=1)
    with pytest.raises(
        ValueError,
        match=r"segment 1 \(piece 1, uniform\(k=2\), indices 2\.\.3\): symbol 5 at index 3 "
        r"has probability 0",
    ):
        sources.piecewise([(b, 2), (sources.uniform(2), 2)]).information([0, 1, 1, 5])


def test_piecewise_of_a_corpus_repeats_its_first_symbols(tmp_path):
    path = tmp_path / "gauge.u8"
    path.write_bytes(b"0123456789")
    corpus = sources.corpus(path)
    src = sources.piecewise([(corpus, 4), (sources.categorical([1.0], [33]), 1)])
    assert bytes(src.sample(12, seed=5).astype(np.uint8)) == b"0123!0123!01"
    assert src.fixed_sample
    assert src.is_estimate
    with pytest.raises(ValueError, match=r"^piecewise: pieces\[0\]\[1\] must be at most the 10 "
                       r"symbols of corpus\(name=gauge\.u8,.*\), got 11$"):
        sources.piecewise([(corpus, 11)])


def test_a_walk_of_piecewise_steps():
    coin = sources.categorical([0.5, 0.5], [-1, 1])
    steps = sources.piecewise([(coin, 3), (sources.bernoulli(0.5), 2)])
    walk = sources.random_walk(steps, start=0)
    x = walk.sample(500, seed=3)
    assert x.tolist() == list(itertools.accumulate(steps.sample(500, seed=3).tolist()))
    assert walk.information(x) == pytest.approx(steps.information(np.diff(x, prepend=0)), rel=1e-14)
    assert walk.entropy == steps.entropy


# --------------------------------------------------------------------------
# end to end through the real check


def zlib_codec(symbol: str) -> ByteCodec:
    return ByteCodec(zlib.compress, zlib.decompress, name="z", symbol=symbol)


def test_check_passes_on_a_random_walk():
    walk = sources.random_walk(sources.two_sided_geometric(0.8))
    # zlib on the raw walk is about 2x the floor: it cannot see that the steps are small
    m = checks.check(zlib_codec("zigzag-u16le"), walk, n=20_000, rel=1.5, edge_cases=False)
    assert m.source == walk.spec
    assert m.floor_bits == pytest.approx(m.sample_information, rel=1e-12)
    m32 = checks.check(zlib_codec("i32le"), walk, n=20_000, rel=1.5)  # with the edge cases too
    assert m32.sample_information == m.sample_information


def test_check_passes_on_a_piecewise_source():
    src = sources.piecewise([(sources.bernoulli(0.1), 1000), (sources.bernoulli(0.4), 1000)])
    m = checks.check(zlib_codec("bits"), src, n=20_000, rel=0.4, edge_cases=False)
    assert m.source == src.spec
    assert m.entropy == src.entropy
    assert m.floor_bits == pytest.approx(src.information(src.sample(20_000)), rel=1e-12)
    entropy = checks.measure(zlib_codec("bits"), src, n=20_000, floor="entropy")
    assert entropy.floor_bits == pytest.approx(20_000 * src.entropy, rel=1e-12)  # whole cycles
    checks.check(ByteCodec(zlib.compress, zlib.decompress, name="z"), src, n=20_000, rel=0.4)
