"""Entropy, varentropy, information, pmf tables, specs and parameter errors of the
memoryless reference sources, checked against scipy, mpmath and textbook facts."""

from __future__ import annotations

import math
import re

import mpmath
import numpy as np
import pytest
import scipy.stats

from pytest_ratefloor import sources

REL = 1e-12  # relative accuracy asked of every exact entropy figure


@pytest.fixture(autouse=True)
def _fifty_digits():
    with mpmath.workdps(50):
        yield


def mp_log2(x):
    return mpmath.log(x, 2)


def mp_binary_entropy(p):
    """h(p) at 50 digits, 0 log 0 = 0 (from memory: the binary entropy function)."""
    p = mpmath.mpf(p)
    q = 1 - p
    return sum((-v * mp_log2(v) for v in (p, q) if v > 0), mpmath.mpf(0))


def assert_close(actual, expected, rel=REL):
    expected = float(expected)
    assert actual == pytest.approx(expected, rel=rel, abs=1e-300), (actual, expected)


# --------------------------------------------------------------------------
# uniform and Bernoulli


@pytest.mark.parametrize("k", [1, 2, 3, 10, 256, 1000, 65536])
def test_uniform_entropy_is_log2_k(k):
    src = sources.uniform(k)
    assert_close(src.entropy, mpmath.log(k, 2))  # from memory: H(uniform on k) = log2 k
    # scipy.stats.entropy normalises the weights
    assert src.entropy == pytest.approx(scipy.stats.entropy(np.ones(k), base=2), rel=1e-14, abs=0)
    assert src.varentropy == 0.0


@pytest.mark.parametrize("p", [1e-12, 1e-9, 1e-3, 0.01, 0.1, 0.3, 0.5, 0.9, 0.999, 1 - 1e-9])
def test_bernoulli_entropy_against_mpmath(p):
    src = sources.bernoulli(p)
    assert_close(src.entropy, mp_binary_entropy(p))
    # scipy.stats.entropy of the pmf, base 2 (looser: scipy computes log(1-p) plainly)
    assert src.entropy == pytest.approx(scipy.stats.entropy([1 - p, p], base=2), rel=1e-6)


def test_binary_entropy_landmarks():
    # from memory: h(1/2) = 1 bit is the maximum, h(0) = h(1) = 0
    assert sources.bernoulli(0.5).entropy == 1.0
    assert sources.bernoulli(0.0).entropy == 0.0
    assert sources.bernoulli(1.0).entropy == 0.0
    grid = [sources.bernoulli(p).entropy for p in np.linspace(0.01, 0.99, 99)]
    assert max(grid) == pytest.approx(1.0)
    assert grid.index(max(grid)) == 49
    # symmetry h(p) = h(1-p)
    assert sources.bernoulli(0.2).entropy == pytest.approx(
        sources.bernoulli(0.8).entropy, rel=1e-15
    )


def test_skewed_bernoulli_is_far_below_one_bit():
    # common practice: a symbol-by-symbol code spends >= 1 bit per binary symbol
    src = sources.bernoulli(0.01)
    assert 0.08 < src.entropy < 0.081
    assert src in sources.standard_suite()


@pytest.mark.parametrize("p", [1e-9, 0.01, 0.3, 0.5, 0.999])
def test_bernoulli_varentropy_against_mpmath(p):
    mp_p = mpmath.mpf(p)
    h = mp_binary_entropy(p)
    expected = mp_p * (-mp_log2(mp_p) - h) ** 2 + (1 - mp_p) * (-mp_log2(1 - mp_p) - h) ** 2
    assert_close(sources.bernoulli(p).varentropy, expected)
    assert sources.bernoulli(0.0).varentropy == 0.0
    assert sources.bernoulli(1.0).varentropy == 0.0


# --------------------------------------------------------------------------
# geometric and two-sided geometric


def mp_geometric_moments(p):
    """(H, varentropy) of P(x) = (1-p)^x p by direct series sums (mpmath.nsum)."""
    p = mpmath.mpf(p)
    q = 1 - p

    def info(x):
        return -mp_log2(p) - x * mp_log2(q)

    h = mpmath.nsum(lambda x: p * q**x * info(x), [0, mpmath.inf])
    v = mpmath.nsum(lambda x: p * q**x * (info(x) - h) ** 2, [0, mpmath.inf])
    return h, v


@pytest.mark.parametrize("p", [1e-12, 1e-9, 1e-6, 1e-3, 0.01, 0.2, 0.5, 0.9, 0.999999])
def test_geometric_entropy_and_varentropy_against_mpmath_sums(p):
    src = sources.geometric(p)
    h, v = mp_geometric_moments(p)
    assert_close(src.entropy, h)
    assert_close(src.varentropy, v, rel=1e-11)
    # closed form from memory: H = h(p)/p
    assert_close(src.entropy, mp_binary_entropy(p) / mpmath.mpf(p))


@pytest.mark.parametrize("p", [0.001, 0.05, 0.2, 0.5, 0.8])
def test_geometric_entropy_against_scipy(p):
    # scipy.stats.geom has support 1, 2, ...; a shift does not change entropy (nats -> bits)
    assert sources.geometric(p).entropy == pytest.approx(
        scipy.stats.geom(p).entropy() / math.log(2), rel=1e-12
    )


def test_geometric_landmarks():
    # p = 1/2: P(x) = 2^-(x+1) is dyadic; its unary code has expected length 2 (common practice)
    assert sources.geometric(0.5).entropy == 2.0
    one = sources.geometric(1.0)  # the constant 0
    assert one.entropy == 0.0
    assert one.varentropy == 0.0
    assert np.all(one.sample(1000) == 0)
    assert one.information([0, 0, 0]) == 0.0


def mp_two_sided_moments(theta):
    t = mpmath.mpf(theta)
    c = (1 - t) / (1 + t)

    def info(m):
        return -mp_log2(c) - m * mp_log2(t)

    h = c * info(0) + mpmath.nsum(lambda m: 2 * c * t**m * info(m), [1, mpmath.inf])
    v = c * (info(0) - h) ** 2 + mpmath.nsum(
        lambda m: 2 * c * t**m * (info(m) - h) ** 2, [1, mpmath.inf]
    )
    return h, v


@pytest.mark.parametrize("theta", [1e-9, 0.1, 0.5, 0.8, 0.99, 0.999999])
def test_two_sided_geometric_against_mpmath_sums(theta):
    src = sources.two_sided_geometric(theta)
    h, v = mp_two_sided_moments(theta)
    assert_close(src.entropy, h)
    assert_close(src.varentropy, v, rel=1e-11)


def test_two_sided_geometric_zero_is_constant():
    src = sources.two_sided_geometric(0.0)
    assert src.entropy == 0.0
    assert src.varentropy == 0.0
    assert np.all(src.sample(100) == 0)


def test_two_sided_geometric_is_the_difference_of_two_geometrics():
    # from memory: X - Y for i.i.d. geometric X, Y is two-sided geometric with theta = 1 - p
    p = 0.3
    x, px = sources.geometric(p).pmf_table(tail=1e-18)
    diff = np.convolve(px, px[::-1])
    support = np.arange(-x[-1], x[-1] + 1)
    pick = np.abs(support) <= 20
    symbols, probs = sources.two_sided_geometric(1 - p).pmf_table(tail=1e-18)
    mine = dict(zip(symbols.tolist(), probs.tolist()))
    for s, q in zip(support[pick].tolist(), diff[pick].tolist()):
        assert mine[s] == pytest.approx(q, rel=1e-12)


# --------------------------------------------------------------------------
# Zipf, Poisson, categorical


@pytest.mark.parametrize(("k", "s"), [(1, 1.0), (256, 0.0), (256, 1.1), (1000, 0.5), (64, 2.0)])
def test_zipf_against_mpmath_sums(k, s):
    src = sources.zipf(k, s)
    w = [mpmath.mpf(i) ** (-mpmath.mpf(s)) for i in range(1, k + 1)]
    z = mpmath.fsum(w)
    info = [-mp_log2(wi / z) for wi in w]
    h = mpmath.fsum(wi / z * ii for wi, ii in zip(w, info))
    v = mpmath.fsum(wi / z * (ii - h) ** 2 for wi, ii in zip(w, info))
    assert_close(src.entropy, h)
    assert src.varentropy == pytest.approx(float(v), rel=1e-11, abs=1e-15)
    pmf = np.arange(1, k + 1, dtype=float) ** -s
    assert src.entropy == pytest.approx(scipy.stats.entropy(pmf, base=2), rel=1e-13)


def mp_poisson_moments(lam):
    """(H, varentropy) of Poisson(lam) by direct sums over the mass (mpmath, 50 digits)."""
    lam = mpmath.mpf(lam)
    mode = int(mpmath.floor(lam))
    spread = int(14 * mpmath.sqrt(lam)) + 60  # beyond 14 sigma the mass is below 1e-40
    xs = range(max(0, mode - spread), mode + spread)
    logp = [-lam + x * mpmath.log(lam) - mpmath.loggamma(x + 1) for x in xs]
    p = [mpmath.exp(v) for v in logp]
    h = -mpmath.fsum(pi * v for pi, v in zip(p, logp)) / mpmath.log(2)
    v = mpmath.fsum(pi * (-v / mpmath.log(2) - h) ** 2 for pi, v in zip(p, logp))
    return h, v


@pytest.mark.parametrize("lam", [1e-6, 0.5, 4.0, 37.5, 1000.0, 1e5])
def test_poisson_against_mpmath_sums(lam):
    src = sources.poisson(lam)
    h, v = mp_poisson_moments(lam)
    assert_close(src.entropy, h)
    assert_close(src.varentropy, v, rel=1e-10)
    # the stated truncation bound of the entropy sum is <= 1e-15 relative
    assert 0 <= src.truncation_bound <= 1e-15 * src.entropy


@pytest.mark.parametrize("lam", [0.5, 4.0, 50.0])
def test_poisson_entropy_against_scipy(lam):
    # scipy.stats.poisson(...).entropy() is in nats
    expected = scipy.stats.poisson(lam).entropy() / math.log(2)
    assert sources.poisson(lam).entropy == pytest.approx(expected, rel=1e-9)


def test_poisson_tiny_and_zero_rates():
    lam = 1e-300
    # H = λ(1 - ln λ)/ln 2 + O(λ²) for tiny λ (from the series of -Σ P ln P)
    expected = lam * (1 - math.log(lam)) / math.log(2)
    assert sources.poisson(lam).entropy == pytest.approx(expected, rel=1e-12)
    zero = sources.poisson(0.0)
    assert zero.entropy == 0.0
    assert zero.varentropy == 0.0
    assert np.all(zero.sample(50) == 0)


def test_dyadic_categorical_matches_its_prefix_code():
    # common practice: for a dyadic pmf the Huffman code 0, 10, 110, 1110, 1111 meets the entropy
    probs = [0.5, 0.25, 0.125, 0.0625, 0.0625]
    lengths = [1, 2, 3, 4, 4]
    src = sources.categorical(probs)
    assert src.entropy == sum(p * n for p, n in zip(probs, lengths)) == 1.875
    assert src in sources.standard_suite()


def test_zero_probabilities_contribute_nothing():
    # 0 log 0 = 0 (from memory: the convention by continuity)
    assert sources.categorical([0.5, 0.0, 0.5]).entropy == 1.0
    assert sources.categorical([0.0, 1.0]).entropy == 0.0
    src = sources.categorical([0.25, 0.0, 0.75])
    assert src.entropy == pytest.approx(scipy.stats.entropy([0.25, 0.0, 0.75], base=2), rel=1e-15)
    with pytest.raises(ValueError, match=r"symbol 1 at index 2 has probability 0"):
        src.information([0, 2, 1])


@pytest.mark.parametrize("seed", range(5))
def test_categorical_against_scipy_and_mpmath(seed):
    rng = np.random.default_rng(seed)
    probs = rng.dirichlet(np.full(12 + seed * 7, 0.3))
    src = sources.categorical(probs)
    assert src.entropy == pytest.approx(scipy.stats.entropy(probs, base=2), rel=1e-13)
    mp_p = [mpmath.mpf(float(x)) for x in probs]
    total = mpmath.fsum(mp_p)
    h = -mpmath.fsum(x / total * mp_log2(x / total) for x in mp_p if x > 0)
    v = mpmath.fsum(x / total * (-mp_log2(x / total) - h) ** 2 for x in mp_p if x > 0)
    assert_close(src.entropy, h)
    assert_close(src.varentropy, v, rel=1e-11)


def test_near_deterministic_categorical_keeps_its_digits():
    probs = [1 - 1e-9, 1e-9]
    mp_p = [mpmath.mpf(x) for x in probs]
    total = mpmath.fsum(mp_p)
    h = -mpmath.fsum(x / total * mp_log2(x / total) for x in mp_p)
    assert_close(sources.categorical(probs).entropy, h)


def test_categorical_symbols_and_order():
    src = sources.categorical([0.2, 0.8], symbols=[7, -3])
    same = sources.categorical([0.8, 0.2], symbols=[-3, 7])
    assert src.spec == same.spec == "categorical(probs=[0.8,0.2],symbols=[-3,7])"
    assert src == same
    assert (src.min_symbol, src.max_symbol, src.alphabet_size) == (-3, 7, 2)
    table = src.pmf_table()
    assert table[0].tolist() == [-3, 7]
    assert table[1].tolist() == [0.8, 0.2]
    assert set(np.unique(src.sample(1000)).tolist()) == {-3, 7}


# --------------------------------------------------------------------------
# information() and self_information()


def reference_pmfs():
    """(source, exact pmf function from scipy) pairs for the information checks."""
    return [
        (sources.bernoulli(0.1), lambda x: scipy.stats.bernoulli(0.1).pmf(x)),
        (sources.geometric(0.05), lambda x: scipy.stats.geom(0.05).pmf(x + 1)),
        (sources.poisson(4.0), lambda x: scipy.stats.poisson(4.0).pmf(x)),
        (sources.uniform(10), lambda x: np.full(len(x), 0.1)),
        (sources.two_sided_geometric(0.8), lambda x: scipy.stats.dlaplace(-math.log(0.8)).pmf(x)),
    ]


@pytest.mark.parametrize(("src", "pmf"), reference_pmfs(), ids=lambda v: getattr(v, "spec", ""))
def test_information_is_the_sum_of_minus_log2_pmf(src, pmf):
    x = src.sample(300, seed=3)
    expected = math.fsum(-math.log2(v) for v in pmf(x))
    assert src.information(x) == pytest.approx(expected, rel=1e-12)
    per_symbol = src.self_information(x)
    assert per_symbol.dtype == np.float64
    assert per_symbol.shape == x.shape
    assert src.information(x) == pytest.approx(float(per_symbol.sum()), rel=1e-15)


def test_information_of_zipf_and_categorical_against_mpmath():
    src = sources.zipf(50, 1.3)
    x = src.sample(200, seed=1)
    w = [mpmath.mpf(i) ** mpmath.mpf(-1.3) for i in range(1, 51)]
    z = mpmath.fsum(w)
    expected = mpmath.fsum(-mp_log2(w[int(i)] / z) for i in x)
    assert_close(src.information(x), expected)
    cat = sources.categorical([0.1, 0.2, 0.3, 0.4])
    y = cat.sample(200, seed=2)
    expected = mpmath.fsum(-mp_log2(mpmath.mpf([0.1, 0.2, 0.3, 0.4][int(i)])) for i in y)
    assert cat.information(y) == pytest.approx(float(expected), rel=1e-13)


def test_information_of_small_p_geometric_keeps_its_digits():
    p = 1e-9
    src = sources.geometric(p)
    x = np.array([0, 5, 10**9, 3 * 10**9])
    mp_p = mpmath.mpf(p)
    expected = mpmath.fsum(-mp_log2(mp_p) - int(v) * mp_log2(1 - mp_p) for v in x)
    assert_close(src.information(x), expected)


def test_information_accepts_lists_bools_and_empty():
    src = sources.bernoulli(0.25)
    assert src.information([]) == 0.0
    assert src.information([True, False]) == pytest.approx(2 - math.log2(0.75) + 0.0, rel=1e-15)
    assert src.information(np.array([1, 1], dtype=np.uint8)) == pytest.approx(4.0)


@pytest.mark.parametrize(
    ("src", "symbols", "match"),
    [
        (
            sources.bernoulli(0.0),
            [0, 1],
            r"bernoulli\(p=0\.0\): symbol 1 at index 1 has probability 0",
        ),
        (sources.bernoulli(0.5), [0, 2], r"symbol 2 at index 1"),
        (sources.uniform(4), [3, 4], r"uniform\(k=4\): symbol 4 at index 1"),
        (sources.geometric(0.5), [1, -1], r"symbol -1 at index 1"),
        (sources.poisson(2.0), [-2], r"symbol -2 at index 0"),
        (sources.zipf(8, 1.0), [8], r"symbol 8 at index 0"),
        (sources.geometric(1.0), [0, 0, 3], r"symbol 3 at index 2"),
        (
            sources.uniform(4),
            np.array([2**64 - 1], dtype=np.uint64),
            r"symbol 18446744073709551615",
        ),
    ],
)
def test_information_names_the_impossible_symbol(src, symbols, match):
    with pytest.raises(ValueError, match=match):
        src.information(symbols)


def test_information_rejects_non_integer_symbols():
    with pytest.raises(ValueError, match=r"symbols must be integers, got dtype float64"):
        sources.uniform(4).information([0.5, 1.0])
    with pytest.raises(ValueError, match=r"symbols must be a 1-D sequence"):
        sources.uniform(4).information([[0, 1]])


# --------------------------------------------------------------------------
# pmf tables


@pytest.mark.parametrize(
    "src",
    [
        sources.geometric(0.01),
        sources.geometric(0.5),
        sources.two_sided_geometric(0.8),
        sources.poisson(4.0),
        sources.poisson(1000.0),
    ],
    ids=lambda s: s.spec,
)
@pytest.mark.parametrize("tail", [2.0**-60, 1e-6, 0.01])
def test_pmf_table_of_unbounded_sources_misses_at_most_tail(src, tail):
    symbols, probs = src.pmf_table(tail)
    assert symbols.dtype == np.int64
    assert probs.dtype == np.float64
    assert np.all(np.diff(symbols) == 1)  # ascending, contiguous
    assert -1e-15 <= 1 - math.fsum(probs.tolist()) <= tail + 1e-15
    assert np.all(probs > 0)


def test_pmf_tables_agree_with_scipy():
    symbols, probs = sources.poisson(4.0).pmf_table(1e-12)
    assert probs == pytest.approx(scipy.stats.poisson(4.0).pmf(symbols), rel=1e-12)
    symbols, probs = sources.geometric(0.2).pmf_table(1e-12)
    assert probs == pytest.approx(scipy.stats.geom(0.2).pmf(symbols + 1), rel=1e-12)
    symbols, probs = sources.zipf(30, 1.5).pmf_table()
    assert probs == pytest.approx(scipy.stats.zipfian(1.5, 30).pmf(symbols + 1), rel=1e-12)


def test_pmf_table_of_finite_sources_is_the_exact_support():
    symbols, probs = sources.categorical([0.5, 0.0, 0.25, 0.25]).pmf_table()
    assert symbols.tolist() == [0, 2, 3]
    assert probs.tolist() == [0.5, 0.25, 0.25]
    symbols, probs = sources.bernoulli(1.0).pmf_table()
    assert symbols.tolist() == [1]
    assert probs.tolist() == [1.0]
    symbols, probs = sources.uniform(5).pmf_table()
    assert symbols.tolist() == [0, 1, 2, 3, 4]
    assert probs.tolist() == [0.2] * 5


def test_pmf_table_errors():
    with pytest.raises(
        ValueError, match=r"geometric\(p=0\.5\)\.pmf_table: tail must be .*\(0, 1\), got 0\.0"
    ):
        sources.geometric(0.5).pmf_table(0.0)
    with pytest.raises(ValueError, match=r"tail must be a finite number in \[0, 1\), got 1\.5"):
        sources.uniform(4).pmf_table(1.5)
    with pytest.raises(ValueError, match=r"tail must be .*got nan"):
        sources.poisson(4.0).pmf_table(float("nan"))
    with pytest.raises(TypeError, match=r"uniform\(k=4\)\.pmf_table: tail must be .*got '0'"):
        sources.uniform(4).pmf_table("0")
    assert sources.uniform(4).pmf_table(0.0)[0].tolist() == [0, 1, 2, 3]  # finite: tail 0 is fine
    with pytest.raises(ValueError, match=r"geometric\(p=1e-09\)\.pmf_table: .* symbols"):
        sources.geometric(1e-9).pmf_table()


# --------------------------------------------------------------------------
# specs, params and descriptive attributes


def test_specs_are_canonical_and_round_trip_floats():
    assert sources.bernoulli(0.1).spec == "bernoulli(p=0.1)"
    assert sources.bernoulli(np.float64(0.1)).spec == "bernoulli(p=0.1)"
    assert sources.bernoulli(-0.0).spec == "bernoulli(p=0.0)"
    assert sources.uniform(np.int64(256)).spec == "uniform(k=256)"
    assert sources.geometric(0.2).spec == "geometric(p=0.2)"
    assert sources.geometric(1e-9).spec == "geometric(p=1e-09)"
    assert sources.two_sided_geometric(0.8).spec == "two_sided_geometric(theta=0.8)"
    assert sources.zipf(256, 1).spec == "zipf(k=256,s=1.0)"
    assert sources.poisson(4).spec == "poisson(lam=4.0)"
    p = 0.1 + 0.2  # 0.30000000000000004: the spec must keep every digit
    spec = sources.bernoulli(p).spec
    assert float(re.search(r"p=([^)]*)", spec).group(1)) == p


def test_long_categorical_specs_are_hashed_and_stable():
    probs = np.full(40, 1 / 40)
    spec = sources.categorical(probs).spec
    assert re.fullmatch(r"categorical\(k=40,sha=[0-9a-f]{12}\)", spec)
    assert sources.categorical(list(probs)).spec == spec
    other = probs.copy()
    other[0] += 1e-12
    other[1] -= 1e-12
    assert sources.categorical(other).spec != spec


def test_specs_are_safe_test_ids():
    for src in sources.standard_suite():
        assert re.fullmatch(r"[A-Za-z0-9_.,=()\[\]+-]+", src.spec), src.spec


def test_params_and_attributes():
    src = sources.geometric(0.2)
    assert (src.family, src.params, src.p) == ("geometric", {"p": 0.2}, 0.2)
    assert (src.alphabet_size, src.min_symbol, src.max_symbol) == (None, 0, None)
    assert src.memoryless
    assert not src.is_estimate
    tsg = sources.two_sided_geometric(0.5)
    assert (tsg.alphabet_size, tsg.min_symbol, tsg.max_symbol, tsg.theta) == (None, None, None, 0.5)
    z = sources.zipf(10, 2.0)
    assert (z.params, z.alphabet_size, z.max_symbol) == ({"k": 10, "s": 2.0}, 10, 9)
    for s in sources.standard_suite():
        assert all(type(v) in (int, float) for v in s.params.values()), s.spec
        assert isinstance(s.entropy, float)
        assert isinstance(s.varentropy, float)
    assert repr(src) == "geometric(p=0.2)"
    assert "entropy 3.60964" in src.describe()


def test_standard_suite_shape():
    suite = sources.standard_suite()
    assert 12 <= len(suite) <= 16
    families = [s.family for s in suite]
    for family in ("uniform", "geometric", "bernoulli"):
        assert families.count(family) >= 2, family
    for family in ("two_sided_geometric", "zipf", "poisson", "categorical"):
        assert family in families
    assert len({s.spec for s in suite}) == len(suite)
    assert all(s.memoryless for s in suite)
    assert not any(s.is_estimate for s in suite)
    assert min(s.entropy for s in suite if s.family == "bernoulli") < 0.1  # a skewed one


# --------------------------------------------------------------------------
# bad parameters


# A wrong type raises TypeError, a right type with a bad value ValueError; every
# message reads "<family>: <name> must be <rule>, got <value>".
@pytest.mark.parametrize(
    ("make", "error", "match"),
    [
        (
            lambda: sources.bernoulli(1.5),
            ValueError,
            r"^bernoulli: p must be a finite number in \[0, 1\], got 1\.5$",
        ),
        (lambda: sources.bernoulli(-0.1), ValueError, r"bernoulli: p .*\[0, 1\], got -0\.1"),
        (lambda: sources.bernoulli(float("nan")), ValueError, r"bernoulli: p must be .*got nan"),
        (lambda: sources.bernoulli("0.5"), TypeError, r"bernoulli: p must be .*got '0\.5'"),
        (lambda: sources.bernoulli(True), TypeError, r"bernoulli: p must be .*got True"),
        (lambda: sources.bernoulli(None), TypeError, r"bernoulli: p must be .*got None"),
        (lambda: sources.geometric(0.0), ValueError, r"geometric: p must be .*\(0, 1\], got 0\.0"),
        (lambda: sources.geometric(1.2), ValueError, r"geometric: p must be .*\(0, 1\], got 1\.2"),
        (lambda: sources.geometric(float("inf")), ValueError, r"geometric: p must be .*got inf"),
        (lambda: sources.geometric("0.2"), TypeError, r"geometric: p must be .*got '0\.2'"),
        (lambda: sources.geometric(1e-13), ValueError, r"geometric: p must be >= 1e-12 .*1e-13"),
        (
            lambda: sources.two_sided_geometric(1.0),
            ValueError,
            r"two_sided_geometric: theta must be .*\[0, 1\), got 1\.0",
        ),
        (lambda: sources.two_sided_geometric(-0.5), ValueError, r"theta must be .*got -0\.5"),
        (lambda: sources.two_sided_geometric(True), TypeError, r"theta must be .*got True"),
        (
            lambda: sources.two_sided_geometric(1 - 1e-14),
            ValueError,
            r"two_sided_geometric: theta must be <= 1 - 1e-12",
        ),
        (
            lambda: sources.uniform(0),
            ValueError,
            r"^uniform: k must be an integer in \[1, .*\], got 0$",
        ),
        (lambda: sources.uniform(2.5), TypeError, r"uniform: k must be an integer.*got 2\.5"),
        (lambda: sources.uniform(True), TypeError, r"uniform: k must be an integer.*got True"),
        (
            lambda: sources.uniform(2**63),
            ValueError,
            r"uniform: k must be an integer in \[1, .*\], got 9223372036854775808",
        ),
        (lambda: sources.zipf(0, 1.0), ValueError, r"zipf: k must be an integer.*got 0"),
        (lambda: sources.zipf(2**20 + 1, 1.0), ValueError, r"zipf: k must be .*got 1048577"),
        (lambda: sources.zipf(10.0, 1.0), TypeError, r"zipf: k must be an integer.*got 10\.0"),
        (
            lambda: sources.zipf(10, -1.0),
            ValueError,
            r"^zipf: s must be a finite number >= 0, got -1\.0$",
        ),
        (lambda: sources.zipf(10, float("nan")), ValueError, r"zipf: s must be .*got nan"),
        (lambda: sources.zipf(10, float("inf")), ValueError, r"zipf: s must be .*got inf"),
        (lambda: sources.zipf(10, "1"), TypeError, r"zipf: s must be .*got '1'"),
        (
            lambda: sources.poisson(-1.0),
            ValueError,
            r"poisson: lam must be a finite number in \[0, 100000\], got -1\.0",
        ),
        (lambda: sources.poisson(float("nan")), ValueError, r"poisson: lam must be .*got nan"),
        (lambda: sources.poisson(1e6), ValueError, r"poisson: lam must be .*got 1000000\.0"),
        (lambda: sources.poisson(False), TypeError, r"poisson: lam must be .*got False"),
        (
            lambda: sources.categorical([]),
            ValueError,
            r"categorical: probs must be a non-empty 1-D sequence",
        ),
        (
            lambda: sources.categorical([0.5, -0.1, 0.6]),
            ValueError,
            r"categorical: probs\[1\] must be finite and >= 0, got -0\.1",
        ),
        (lambda: sources.categorical([0.5, float("nan")]), ValueError, r"probs\[1\] .*got nan"),
        (lambda: sources.categorical([0.5, float("inf")]), ValueError, r"probs\[1\] .*got inf"),
        (
            lambda: sources.categorical([0.5, 0.4]),
            ValueError,
            r"categorical: probs must be a pmf summing to 1 within 1e-09, got a sum of 0\.9",
        ),
        (
            lambda: sources.categorical([0.5, 0.5 + 2e-9]),
            ValueError,
            r"probs must be a pmf summing to 1 within 1e-09, got a sum of 1\.000000002",
        ),
        (
            lambda: sources.categorical([0.5, 0.5], symbols=[1, 1]),
            ValueError,
            r"categorical: symbols must be 2 distinct integers .*got 1 more than once",
        ),
        (
            lambda: sources.categorical([0.5, 0.5], symbols=[1]),
            ValueError,
            r"symbols must be 2 distinct integers",
        ),
        (
            lambda: sources.categorical([0.5, 0.5], symbols=[0.5, 1.5]),
            TypeError,
            r"symbols must be 2 distinct integers .*got \[0\.5, 1\.5\]",
        ),
        (
            lambda: sources.categorical([0.5, 0.5], symbols=[True, False]),
            TypeError,
            r"symbols must be 2 distinct integers",
        ),
        (
            lambda: sources.categorical("ab"),
            TypeError,
            r"categorical: probs must be a sequence of probabilities, got 'ab'",
        ),
    ],
)
def test_bad_parameters_are_named(make, error, match):
    with pytest.raises(error, match=match):
        make()


def test_probabilities_within_tolerance_are_normalised():
    src = sources.categorical([0.5, 0.5 + 5e-10])
    assert math.fsum(src.probs.tolist()) == pytest.approx(1.0, abs=1e-15)
    assert src.entropy == pytest.approx(1.0, abs=1e-15)
