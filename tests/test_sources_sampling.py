"""Sampling of the reference sources: reproducibility, the exact integer inverse
CDF, agreement of the fast paths with exact arithmetic, and frequencies that
converge to the pmf (scipy.stats.chisquare)."""

from __future__ import annotations

import decimal
import hashlib
import math
from fractions import Fraction

import mpmath
import numpy as np
import pytest
import scipy.stats

from pytest_ratefloor import sources
from pytest_ratefloor.sources.sampling import (
    _geometric_table,
    _GeometricCounter,
    _InverseCdf,
    _mulhi,
    _two_sided_table,
    _uniform_below_2_32,
)

WORD = 1 << 64


def words(n, seed=12345):
    return np.random.PCG64(seed).random_raw(n)


def memoryless_examples():
    return [
        *sources.standard_suite(),
        sources.geometric(1e-6),  # logarithm path
        sources.two_sided_geometric(0.9999),  # logarithm path
        sources.uniform(1_000_003),
        sources.uniform(2**40 + 1),
        sources.zipf(65536, 1.07),  # alias table
        sources.poisson(1000.0),
    ]


# --------------------------------------------------------------------------
# reproducibility


@pytest.mark.parametrize("index", range(len(memoryless_examples())))
def test_sampling_is_reproducible_and_prefix_stable(index):
    src = memoryless_examples()[index]
    a = src.sample(5000, seed=7)
    assert a.dtype == np.int64
    assert a.shape == (5000,)
    assert np.array_equal(a, src.sample(5000, seed=7))
    assert np.array_equal(a[:1234], src.sample(1234, seed=7))  # one word per symbol
    assert src.sample(0).shape == (0,)
    again = memoryless_examples()[index]  # a fresh instance builds its own tables
    assert again.spec == src.spec
    assert np.array_equal(again.sample(5000, seed=7), a)


def test_words_are_numpys_pcg64_stream():
    # uniform(256) is the top byte of each raw PCG64 word; bernoulli one compare per word
    for seed in (0, 1, 99):
        raw = np.random.PCG64(seed).random_raw(70_000)
        assert np.array_equal(sources.uniform(256).sample(70_000, seed=seed), raw >> np.uint64(56))
        expected = raw < np.uint64(round(Fraction(0.1) * WORD))
        assert np.array_equal(sources.bernoulli(0.1).sample(70_000, seed=seed), expected)
    src = sources.geometric(0.2)  # chunked drawing keeps one word per symbol
    assert np.array_equal(src.sample(200_000)[:150_000], src.sample(150_000))


def test_seeds_give_different_samples():
    src = sources.uniform(256)
    assert not np.array_equal(src.sample(100, seed=0), src.sample(100, seed=1))
    assert np.array_equal(src.sample(100, seed=np.int64(3)), src.sample(100, seed=3))


# the same bad n or seed gives the same answer as every other entry point (no "where")
@pytest.mark.parametrize(
    ("n", "error", "match"),
    [
        (-1, ValueError, r"^n must be an integer >= 0, got -1$"),
        (2.5, TypeError, r"^n must be an integer, got 2\.5$"),
        (True, TypeError, r"^n must be an integer, got True$"),
        ("10", TypeError, r"^n must be an integer, got '10'$"),
        (None, TypeError, r"^n must be an integer, got None$"),
    ],
)
def test_bad_sample_sizes(n, error, match):
    with pytest.raises(error, match=match):
        sources.bernoulli(0.5).sample(n)


@pytest.mark.parametrize(
    ("seed", "error", "match"),
    [
        (-3, ValueError, r"^seed must be an integer >= 0, got -3$"),
        (None, TypeError, r"^seed must be an integer, got None$"),
        (True, TypeError, r"^seed must be an integer, got True$"),
        (1.0, TypeError, r"^seed must be an integer, got 1\.0$"),
    ],
)
def test_bad_seeds(seed, error, match):
    with pytest.raises(error, match=match):
        sources.bernoulli(0.5).sample(10, seed=seed)


# --------------------------------------------------------------------------
# frequencies converge to the pmf


def scipy_twin(src):
    """The same distribution as a frozen scipy.stats distribution (support shifted to ours)."""
    p = src.params
    if src.family == "uniform":
        return scipy.stats.randint(0, p["k"])
    if src.family == "bernoulli":
        return scipy.stats.bernoulli(p["p"])
    if src.family == "geometric":
        return scipy.stats.geom(p["p"], loc=-1)  # scipy's support starts at 1
    if src.family == "two_sided_geometric":
        return scipy.stats.dlaplace(-math.log(p["theta"]))  # P(x) ∝ exp(-a|x|)
    if src.family == "zipf":
        return scipy.stats.zipfian(p["s"], p["k"], loc=-1)
    if src.family == "poisson":
        return scipy.stats.poisson(p["lam"])
    if src.family == "categorical":
        return scipy.stats.rv_discrete(values=(src.symbols, src.probs))
    raise AssertionError(src.family)


def binned_chisquare(src, n, seed, bins=40):
    """Chi-square of a sample against scipy's cdf, symbols pooled into ~equiprobable bins."""
    dist = scipy_twin(src)
    edges = np.unique(dist.ppf(np.linspace(0, 1, bins + 1)[1:-1]))
    cdf = dist.cdf(edges)
    edges, cdf = edges[cdf < 1], cdf[cdf < 1]
    expected = np.diff(np.concatenate([[0.0], cdf, [1.0]]))
    x = src.sample(n, seed=seed)
    observed = np.bincount(np.searchsorted(edges, x, side="left"), minlength=expected.size)
    return scipy.stats.chisquare(observed, expected * n)


@pytest.mark.parametrize("src", memoryless_examples(), ids=lambda s: s.spec)
def test_frequencies_match_the_pmf(src):
    # fixed seed: the p-value is deterministic; a broken sampler lands far below 1e-3
    result = binned_chisquare(src, 200_000, seed=2024)
    assert result.pvalue > 1e-3, result


def test_chisquare_check_can_fail():
    # the check above is not vacuous: a slightly wrong pmf is rejected
    wrong = sources.bernoulli(0.105)
    x = wrong.sample(200_000, seed=2024)
    observed = np.bincount(x, minlength=2)
    assert scipy.stats.chisquare(observed, [180_000, 20_000]).pvalue < 1e-3


def test_two_sided_geometric_is_symmetric():
    x = sources.two_sided_geometric(0.8).sample(100_000, seed=5)
    pos, neg = np.count_nonzero(x > 0), np.count_nonzero(x < 0)
    assert scipy.stats.binomtest(pos, pos + neg).pvalue > 1e-3


# --------------------------------------------------------------------------
# the integer thresholds are the exact inverse CDF


@pytest.mark.parametrize("p", [0.5, 0.2, 0.05])
def test_geometric_thresholds_are_exact(p):
    # X >= m  <=>  2**64 - u <= floor(2**64 (1-p)^m): the table holds 2**64 - floor(...)
    r = Fraction(1) - Fraction(p)
    table = _geometric_table(r)
    expected = []
    m = 1
    while True:
        s = math.floor(WORD * r**m)
        if s == 0:
            break
        expected.append(WORD - s)
        m += 1
    assert table.thresholds.tolist() == expected


def test_two_sided_thresholds_are_exact():
    r = Fraction(0.8)
    table = _two_sided_table(r)
    expected = []
    m = 1
    while True:
        a = math.floor(2 * WORD * r**m / (1 + r))  # Z >= 2m - 1
        s = math.floor(WORD * r**m)  # Z >= 2m
        if a == 0:
            break
        expected += [WORD - a, WORD - s]
        m += 1
    expected = [t for t in expected if t < WORD]
    assert table.thresholds.tolist() == expected
    assert table.values[:5].tolist() == [0, -1, 1, -2, 2]


def test_poisson_thresholds_match_mpmath():
    src = sources.poisson(4.0)
    first, thresholds = src._thresholds()
    assert first == 0
    with mpmath.workdps(50):
        cdf = mpmath.mpf(0)
        for x, t in enumerate(thresholds):
            cdf += mpmath.exp(-4) * mpmath.mpf(4) ** x / mpmath.factorial(x)
            assert t == min(int(mpmath.floor(cdf * WORD)), WORD), x


def test_zipf_weights_equal_full_decimal_rounding():
    # floats decide most roundings; redoing all of them in decimal must change nothing
    src = sources.zipf(600, 1.1)
    mine = src._fixed_point_weights()
    ctx = decimal.Context(prec=40)
    for i in range(1, 601):
        y = Fraction(ctx.power(decimal.Decimal(i), decimal.Decimal.from_float(-1.1)))
        e = math.floor(math.log2(y)) + 1
        while y < Fraction(2) ** (e - 1):
            e -= 1
        while y >= Fraction(2) ** e:
            e += 1
        q = round(y * Fraction(2) ** (40 - e))
        shift = e + 60
        assert mine[i - 1] == (q << shift if shift >= 0 else q >> -shift), i


def zipf_masses(src):
    """Each symbol's number of words, read off the sampler's integer thresholds."""
    src.sample(1)
    table = src._table
    bounds = [0, *table.thresholds.tolist(), WORD]
    masses = [0] * src.k
    for i, v in enumerate(table.values.tolist()[: len(bounds) - 1]):
        masses[v] = bounds[i + 1] - bounds[i]
    return masses


@pytest.mark.parametrize(
    ("k", "s"),
    [(256, 1.1), (3, 0.3), (1000, 2.0), (1000, 60.0), (2, 100.0), (65536, 1.07), (2**20, 1.0)],
)
def test_zipf_sampled_masses_meet_the_documented_bound(k, s):
    # documented (sources.Zipf): |P'(i) - P(i)| <= (1 + 2**-35) (2**-39 P(i) + 2**-64), with
    # P' = mass / 2**64; exact P(i) = i**-s / Z from mpmath at 50 digits, Z from the Hurwitz
    # zeta function (Z = zeta(s) - zeta(s, k+1); the harmonic number for s = 1) and, for
    # small k, also from a direct sum
    masses = zipf_masses(sources.zipf(k, s))
    assert sum(masses) == WORD
    with mpmath.workdps(50):
        ss = mpmath.mpf(s)
        z = mpmath.harmonic(k) if s == 1.0 else mpmath.zeta(ss) - mpmath.zeta(ss, k + 1)
        if k <= 1000:
            assert abs(z / mpmath.fsum(mpmath.mpf(i) ** -ss for i in range(1, k + 1)) - 1) < 1e-40
        if k <= 5000:
            ranks = range(1, k + 1)
        else:  # every symbol at both ends, a log-spaced selection between
            middle = np.unique(np.geomspace(1, k, 3000).astype(np.int64)).tolist()
            ranks = sorted({*range(1, 1001), *middle, *range(k - 1000, k + 1)})
        slack = 1 + mpmath.mpf(2) ** -35
        worst = mpmath.mpf(0)
        for r in ranks:
            exact = WORD * mpmath.mpf(r) ** -ss / z  # 2**64 P, in words
            allowed = slack * (exact * mpmath.mpf(2) ** -39 + 1)
            worst = max(worst, abs(masses[r - 1] - exact) / allowed)
    assert worst <= 1, float(worst)


def test_no_relative_bound_alone_holds_for_zipf():
    # zipf(2, 100): symbol 1 has probability 1/(2**100 + 1) (by hand), far below one word
    # in 2**64; the one word it gets is 2**36 times too many, within the absolute 2**-64
    assert zipf_masses(sources.zipf(2, 100.0)) == [WORD - 1, 1]


def test_categorical_thresholds_are_exact_rationals():
    probs = [0.1, 0.2, 0.3, 0.4]
    src = sources.categorical(probs)
    src.sample(1)
    exact = [Fraction(p) for p in probs]
    total = sum(exact)
    cumulative = np.cumsum(exact)
    assert src._table.thresholds.tolist() == [math.floor(c / total * WORD) for c in cumulative[:-1]]


def test_bernoulli_is_one_compare():
    p = 0.3
    threshold = round(Fraction(p) * WORD)
    src = sources.bernoulli(p)
    probe = np.array([0, threshold - 1, threshold, WORD - 1], dtype=np.uint64)
    assert src._draw(probe).tolist() == [1, 1, 0, 0]
    assert sources.bernoulli(1.0)._draw(probe).tolist() == [1, 1, 1, 1]
    assert sources.bernoulli(0.0)._draw(probe).tolist() == [0, 0, 0, 0]


@pytest.mark.parametrize("k", [3, 10, 1000, 65536, 65537, 1_000_003, 2**32 - 1, 2**40 + 1, 2**62])
def test_uniform_is_floor_of_u_times_k(k):
    w = words(20_000)
    boundaries = [-((-i * WORD) // k) for i in (1, 2, k // 2, k - 1)]  # ceil(i 2**64 / k)
    probe = [b + d for b in boundaries for d in (-1, 0, 1) if 0 <= b + d < WORD]
    w = np.concatenate([w, np.array(probe, dtype=np.uint64)])
    expected = [(int(u) * k) >> 64 for u in w.tolist()]
    assert sources.uniform(k)._draw(w).tolist() == expected


def test_multiply_high_helpers_match_python_integers():
    w = np.concatenate([words(5000), np.array([0, 1, WORD - 1, 2**63, 2**32 - 1], dtype=np.uint64)])
    for k in (1, 2, 3, 2**32 - 1, 2**32, 2**32 + 1, 12345678901234567, 2**63 - 1, 2**64 - 1):
        assert _mulhi(w, k).tolist() == [
            ((int(u) * k) >> 64) - (1 << 64 if ((int(u) * k) >> 64) >= 2**63 else 0)
            for u in w.tolist()
        ]
    for k in (3, 1000, 2**31 + 11, 2**32 - 1):
        assert _uniform_below_2_32(w, k).tolist() == [(int(u) * k) >> 64 for u in w.tolist()]


# --------------------------------------------------------------------------
# the fast paths agree with the definition


def reference_inverse(thresholds, values, w):
    return values[np.searchsorted(thresholds, w, side="right")]


def test_guide_table_matches_a_plain_binary_search():
    rng = np.random.default_rng(0)
    t = np.sort(rng.integers(0, 2**63, 3000, dtype=np.uint64) * np.uint64(2))
    t[100:110] = t[100]  # zero-width bins
    t[-50:] = np.sort(WORD - 1 - rng.integers(0, 2**20, 50, dtype=np.uint64))  # crowded last cell
    values = np.arange(t.size + 1, dtype=np.int64) * 3 - 7
    table = _InverseCdf(t.tolist(), values)
    probe = np.concatenate([words(100_000), t, t + np.uint64(1), t[t > 0] - np.uint64(1)])
    expected = reference_inverse(t, values, probe)
    assert table._alias is None
    assert np.array_equal(table(probe), expected)


@pytest.mark.parametrize("src", [sources.zipf(65536, 1.07), sources.geometric(0.001)], ids=str)
def test_alias_table_gives_every_symbol_exactly_its_mass(src):
    src.sample(1)
    table = src._table if isinstance(src, sources.Zipf) else src._sampler
    assert table._alias is not None
    limits, _, shares = table._alias
    first, second = shares[: 1 << 16], shares[1 << 16 :]
    mass: dict[int, int] = {}
    for bucket, (limit, a, b) in enumerate(zip(limits.tolist(), first.tolist(), second.tolist())):
        share = limit - (bucket << 48)  # words of the bucket below the limit go to `first`
        if a == b:
            share = 1 << 48
        mass[a] = mass.get(a, 0) + share
        mass[b] = mass.get(b, 0) + (1 << 48) - share
    bounds = [0, *table.thresholds.tolist(), WORD]
    expected = {}
    for i, v in enumerate(table.values.tolist()):
        if bounds[i + 1] > bounds[i]:
            expected[v] = bounds[i + 1] - bounds[i]
    assert {k: v for k, v in mass.items() if v} == expected
    # words on either side of each bucket's limit go to its two shares
    pick = np.flatnonzero(first != second)[:: max(1, int(np.count_nonzero(first != second)) // 500)]
    probe = np.concatenate([limits[pick] - np.uint64(1), limits[pick]])
    want = np.concatenate([first[pick], second[pick]])
    assert np.array_equal(table(probe), want)


@pytest.mark.parametrize("p", [0.5, 0.2, 0.01, 2.0**-10])
def test_geometric_logarithm_path_equals_the_table(p):
    r = 1 - Fraction(p)
    table = _geometric_table(r)
    counter = _GeometricCounter(r, [Fraction(1)])
    t = table.thresholds
    edge = t[:: max(1, t.size // 3000)]
    probe = np.concatenate([words(50_000), edge, edge - np.uint64(1), edge[edge < WORD - 1] + 1])
    # the inverse CDF itself, not the table object (long tables are drawn by an alias table)
    assert np.array_equal(counter.counts(probe)[0], reference_inverse(t, table.values, probe))


@pytest.mark.parametrize("theta", [0.3, 0.8, 0.99])
def test_two_sided_logarithm_path_equals_the_table(theta):
    r = Fraction(theta)
    table = _two_sided_table(r)
    counter = _GeometricCounter(r, [Fraction(1), 2 / (1 + r)])
    t = table.thresholds
    edge = t[:: max(1, t.size // 3000)]
    probe = np.concatenate([words(50_000), edge, edge - np.uint64(1), edge[edge < WORD - 1] + 1])
    n1, n2 = counter.counts(probe)
    expected = reference_inverse(t, table.values, probe)
    assert np.array_equal(np.where(n1 == n2, n1, -n2), expected)


def test_logarithm_path_decides_borderline_words_exactly():
    # words at the thresholds of geometric(1e-6): X = max{m : 2**64 - u <= 2**64 r**m}
    p = 1e-6
    r = 1 - Fraction(p)
    src = sources.geometric(p)
    probe = []
    truth = []
    with mpmath.workdps(80):
        ln_r = mpmath.log(mpmath.mpf(r.numerator)) - mpmath.log(mpmath.mpf(r.denominator))
        for m in (1, 2, 3, 1000, 123457, 2_000_000, 40_000_000):
            s = int(mpmath.floor(WORD * mpmath.exp(m * ln_r)))
            for v in (s - 1, s, s + 1):
                probe.append(WORD - v)
                # 80 digits decide the floor unless t is within 1e-60 of an integer
                t = (64 * mpmath.log(2) - mpmath.log(v)) / -ln_r
                truth.append(int(mpmath.floor(t)))
        for m in (1, 2, 3, 1000):  # and exactly, with integers, where that is cheap
            s = math.floor(WORD * r**m)
            assert truth[probe.index(WORD - s)] >= m
            assert truth[probe.index(WORD - s - 1)] == m - 1
    assert src._draw(np.array(probe, dtype=np.uint64)).tolist() == truth


# --------------------------------------------------------------------------
# golden samples: a change of sampler must be deliberate

# sha256 of sample(10**5, seed=0).astype("<i8").tobytes(), recorded when the samplers were
# finished; a new value here means every ledger measured on that source is void
GOLDEN = {
    "uniform(k=10)": ("2d5bc72e79ab01daea77c444185cd06ffe84b481edae660dee9143e1f4ffade5"),
    "uniform(k=256)": ("d9c11e42821a3026a8e9c0bb2034df37bd5bc8d3d3c499178dad9323f1e0e455"),
    "bernoulli(p=0.3)": ("22244322797076ccda7bbcd325ba33ee5911fba56887d807f2899601c61a88d7"),
    "bernoulli(p=0.1)": ("0303988bc6f5b658a7c5abc71e1b6835483ecffe014a449d699abd3df778fd83"),
    "bernoulli(p=0.01)": ("fe40324be41e9268d624302322f563d74211d89b7b106963237ff3fbf7804ed3"),
    "geometric(p=0.5)": ("45bc575ad339f0e9b4d5e8fbbda40722dec1af45c352850c4606cc3b41855cca"),
    "geometric(p=0.2)": ("bd9a7e93b9c581e9f71ab025759d274ba14fb303a9ae2d37358c10d5df606e59"),
    "geometric(p=0.05)": ("1a2b763d83c19fbb4bd4cb04f6ea71447e46de1a47a67abf073b6c9cef0822f7"),
    "geometric(p=0.01)": ("14a29b33c8370df9fdb5dd98c2bbf54df6b7ddda7cf2dbbdad198e3cbd17e881"),
    "two_sided_geometric(theta=0.8)": (
        "a8d292245265e7949b5dd479ee91b6dab6581950071f6504a422b0b49665eadb"
    ),
    "zipf(k=256,s=1.1)": ("e27bf208e4de31017b2dbee1d8483b48eb6edbcde970259aa54445425c1a0ed3"),
    "poisson(lam=4.0)": ("e1e68997835516e4f4835ab3da43650d3a17e9d67c07a76a6e235fc5f08e955f"),
    "categorical(probs=[0.5,0.25,0.125,0.0625,0.0625])": (
        "2a604ffc8033553082f531211965ab5743d02cc6265f3cb7b5ee57ae1f2052d8"
    ),
    "geometric(p=1e-06)": ("f7ae7266df88eec89ee41209409a8096e139b66345a72511fba35b8a9e1679bf"),
    "two_sided_geometric(theta=0.9999)": (
        "592ceceb397f93d540ad00c05b1963a28633cf6193402cd2014700073abf47cb"
    ),
    "uniform(k=1000003)": ("1a88a49b4f935b225876e9dd713c5a2b78cf279cb07e9d7625e13cb5e23504c9"),
    "uniform(k=1099511627777)": (
        "594edf692a23539671a76a277f57dd48953195f9b22525354ec6510286b970af"
    ),
    "zipf(k=65536,s=1.07)": ("74205d640c4ed8dd7b6389bb811149925bbdf6f91e7c7274af43d53220d84aba"),
    "poisson(lam=1000.0)": ("35d2fa2447cffde5e17cd0f2db6c4c08a921182ddc71d955738d32cd4931c591"),
    "uniform(k=1048576)": ("4373de227232e44817e2392444b5a0d39ce261488c0161b928b45f2332eb5954"),
    "markov(transition=[[0.9,0.1],[0.4,0.6]])": (
        "fd6c0ca3e6c7ae68b742e04b07ea25722a12a7d8950ad97163564453235bab38"
    ),
    "markov(transition=[[0.2,0.5,0.3],[0.1,0.1,0.8],[0.6,0.3,0.1]],initial=[1.0,0.0,0.0])": (
        "80c32be058a0a9340b2f72fdccc164fedba1eed16eb0ac667f5024b63bd3db7d"
    ),
    "empirical(n=920,sha=9100312791f8,order=0)": (
        "663e22fcba8d5c32e9724a3dd3ef0203f76527b6d601b44982f4dd1d1c5db2ad"
    ),
    "empirical(n=920,sha=9100312791f8,order=2)": (
        "7166ddd8ca17f7ce9aa282a01270151dc287ca6cf5e2fb33d5d2784b75d7fa4f"
    ),
}


def golden_sources():
    tide = np.frombuffer(b"tide gauge 07: 1.42 m; tide gauge 08: 1.37 m; " * 20, dtype=np.uint8)
    return [
        *memoryless_examples(),
        sources.uniform(2**20),
        sources.markov([[0.9, 0.1], [0.4, 0.6]]),
        sources.markov(
            [[0.2, 0.5, 0.3], [0.1, 0.1, 0.8], [0.6, 0.3, 0.1]], initial=[1.0, 0.0, 0.0]
        ),
        sources.empirical(tide),
        sources.empirical(tide, order=2),
    ]


@pytest.mark.parametrize("src", golden_sources(), ids=lambda s: s.spec)
def test_golden_sample_hashes(src):
    digest = hashlib.sha256(src.sample(10**5, seed=0).astype("<i8").tobytes()).hexdigest()
    assert digest == GOLDEN.get(src.spec), (src.spec, digest)
