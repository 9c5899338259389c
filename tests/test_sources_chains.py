"""Markov sources and the empirical (data-fitted) sources: entropy rates, stationary
distributions, plug-in estimates, sampling and errors."""

from __future__ import annotations

import math
import struct
from collections import Counter

import mpmath
import numpy as np
import pytest
import scipy.linalg
import scipy.stats

from pytest_ratefloor import layouts, sources
from pytest_ratefloor.errors import LayoutError


def h2(p):
    """Binary entropy in bits at 50 digits (from memory: h(p) = -p log2 p - (1-p) log2(1-p))."""
    with mpmath.workdps(50):
        p = mpmath.mpf(p)
        return sum((-v * mpmath.log(v, 2) for v in (p, 1 - p) if v > 0), mpmath.mpf(0))


def left_eigenvector(P):
    """Stationary distribution from scipy's eigen-decomposition of P transposed."""
    values, vectors = scipy.linalg.eig(np.asarray(P).T)
    v = np.real(vectors[:, np.argmin(np.abs(values - 1))])
    return v / v.sum()


def random_chain(size, seed):
    rng = np.random.default_rng(seed)
    P = rng.dirichlet(np.full(size, 0.7), size=size)
    return P


# --------------------------------------------------------------------------
# Markov: entropy rate, stationary distribution, varentropy


@pytest.mark.parametrize(("a", "b"), [(0.1, 0.3), (0.5, 0.5), (1e-6, 0.2), (0.9, 0.05), (1.0, 1.0)])
def test_two_state_entropy_rate_closed_form(a, b):
    # from memory: P = [[1-a, a], [b, 1-b]] has π = (b, a)/(a+b) and H = (b h(a) + a h(b))/(a+b)
    src = sources.markov([[1 - a, a], [b, 1 - b]])
    with mpmath.workdps(50):
        expected = (b * h2(a) + a * h2(b)) / (mpmath.mpf(a) + b)
    assert src.entropy == pytest.approx(float(expected), rel=1e-12, abs=1e-300)
    assert src.stationary == pytest.approx([b / (a + b), a / (a + b)], rel=1e-14)


def test_periodic_chain_has_zero_entropy_rate():
    src = sources.markov([[0.0, 1.0], [1.0, 0.0]])
    assert src.entropy == 0.0
    x = src.sample(10, seed=4)
    assert np.all(np.diff(x) != 0)


@pytest.mark.parametrize("seed", range(4))
def test_stationary_distribution_matches_eigenvector(seed):
    P = random_chain(3 + seed * 2, seed)
    src = sources.markov(P)
    assert src.stationary == pytest.approx(left_eigenvector(P), rel=1e-10)
    # numpy.linalg: π P = π
    assert src.stationary @ src.transition == pytest.approx(src.stationary, rel=1e-13)
    # entropy rate: Σ π_i H(row i) with scipy.stats.entropy of each row
    rows = [scipy.stats.entropy(row, base=2) for row in P]
    assert src.entropy == pytest.approx(float(np.dot(left_eigenvector(P), rows)), rel=1e-10)
    symbols, probs = src.pmf_table()
    assert symbols.tolist() == list(range(P.shape[0]))
    assert probs == pytest.approx(src.stationary)


def test_nearly_decomposable_chain_keeps_its_digits():
    # π = (b, a)/(a+b) exactly; state reduction has no cancellation even for tiny a, b
    a, b = 1e-13, 3e-13
    src = sources.markov([[1 - a, a], [b, 1 - b]])
    assert src.stationary == pytest.approx([0.75, 0.25], rel=1e-12)


def exact_information_variance(P, init, steps):
    """Var of the total information of ``steps`` transitions, by forward recursion."""
    f = np.where(P > 0, -np.log2(np.where(P > 0, P, 1.0)), 0.0)
    alpha = np.array(init, dtype=float)
    m1 = np.zeros_like(alpha)
    m2 = np.zeros_like(alpha)
    out = []
    for _ in range(steps):
        m2 = ((m2[:, None] + 2 * f * m1[:, None] + f**2 * alpha[:, None]) * P).sum(axis=0)
        m1 = ((m1[:, None] + f * alpha[:, None]) * P).sum(axis=0)
        alpha = alpha @ P
        out.append(m2.sum() - m1.sum() ** 2)
    return out


@pytest.mark.parametrize("seed", range(3))
def test_varentropy_and_its_rate_against_exact_variances(seed):
    P = random_chain(4, 10 + seed)
    src = sources.markov(P)
    var = exact_information_variance(src.transition, src.stationary, 120)
    # one step from stationarity: the per-symbol varentropy
    assert src.varentropy == pytest.approx(var[0], rel=1e-10)
    # increments of Var(S_n) converge (geometrically) to the asymptotic rate
    assert src.varentropy_rate == pytest.approx(var[-1] - var[-2], rel=1e-8)


def test_memoryless_chain_rate_equals_varentropy():
    row = [0.5, 0.25, 0.25]
    src = sources.markov([row, row, row])
    assert src.entropy == pytest.approx(1.5, rel=1e-15)
    assert src.varentropy_rate == pytest.approx(src.varentropy, rel=1e-12)
    assert src.varentropy == pytest.approx(sources.categorical(row).varentropy, rel=1e-12)


def test_zero_transitions_contribute_nothing():
    P = [[0.5, 0.5, 0.0], [0.0, 0.5, 0.5], [1.0, 0.0, 0.0]]
    src = sources.markov(P)
    pi = left_eigenvector(P)
    assert src.entropy == pytest.approx(
        pi[0] + pi[1], rel=1e-12
    )  # rows 0, 1 carry 1 bit, row 2 none


# --------------------------------------------------------------------------
# Markov: information, sampling


def test_markov_information_is_a_direct_sum():
    P = np.array([[0.2, 0.5, 0.3], [0.1, 0.1, 0.8], [0.6, 0.3, 0.1]])
    init = [0.5, 0.25, 0.25]
    src = sources.markov(P, initial=init)
    x = src.sample(500, seed=9)
    expected = -math.log2(init[x[0]]) - math.fsum(
        math.log2(P[i, j]) for i, j in zip(x[:-1].tolist(), x[1:].tolist())
    )
    assert src.information(x) == pytest.approx(expected, rel=1e-13)
    per = src.self_information(x)
    assert per[0] == pytest.approx(-math.log2(init[x[0]]))
    assert per.sum() == pytest.approx(expected, rel=1e-13)


def test_markov_information_names_impossible_steps():
    src = sources.markov([[0.0, 1.0], [0.5, 0.5]], initial=[0.0, 1.0])
    with pytest.raises(ValueError, match=r"transition 0->0 at index 2 has probability 0"):
        src.information([1, 0, 0])
    with pytest.raises(ValueError, match=r"symbol 0 at index 0 has initial probability 0"):
        src.information([0, 1])
    with pytest.raises(
        ValueError, match=r"symbol 2 at index 1 is not a state \(states are 0\.\.1\)"
    ):
        src.information([1, 2])


def test_markov_transition_frequencies_match_the_rows():
    P = np.array([[0.7, 0.2, 0.1], [0.3, 0.3, 0.4], [0.05, 0.15, 0.8]])
    src = sources.markov(P)
    x = src.sample(150_000, seed=11)
    counts = np.zeros((3, 3))
    np.add.at(counts, (x[:-1], x[1:]), 1)
    # given the previous state the next one is independent: one chi-square per row
    for i in range(3):
        assert scipy.stats.chisquare(counts[i], P[i] * counts[i].sum()).pvalue > 1e-3, i


def test_markov_sampling_is_reproducible_and_starts_from_initial():
    src = sources.markov([[0.9, 0.1], [0.4, 0.6]], initial=[0.0, 1.0])
    a = src.sample(3000, seed=2)
    assert np.array_equal(a, src.sample(3000, seed=2))
    assert np.array_equal(a[:100], src.sample(100, seed=2))
    assert all(src.sample(5, seed=s)[0] == 1 for s in range(20))
    assert np.array_equal(src.sample(100_000)[:70_000], src.sample(70_000))  # across chunks
    assert src.sample(0).shape == (0,)
    stationary = sources.markov([[0.9, 0.1], [0.4, 0.6]])
    firsts = [stationary.sample(1, seed=s)[0] for s in range(2000)]
    assert scipy.stats.binomtest(sum(firsts), 2000, 0.2).pvalue > 1e-3  # π = (0.8, 0.2)


def test_markov_specs_and_attributes():
    src = sources.markov([[0.9, 0.1], [0.5, 0.5]])
    assert src.spec == "markov(transition=[[0.9,0.1],[0.5,0.5]])"
    assert (src.family, src.params, src.alphabet_size) == ("markov", {"states": 2}, 2)
    assert not src.memoryless
    assert not src.is_estimate
    given = sources.markov([[0.9, 0.1], [0.5, 0.5]], initial=[1.0, 0.0])
    assert given.spec == "markov(transition=[[0.9,0.1],[0.5,0.5]],initial=[1.0,0.0])"
    big = sources.markov(random_chain(5, 1))
    assert big.spec.startswith("markov(states=5,sha=")
    assert big.spec == sources.markov(random_chain(5, 1)).spec
    assert big.spec != sources.markov(random_chain(5, 1), initial=[0.2] * 5).spec
    assert "entropy rate" in src.describe()


@pytest.mark.parametrize(
    ("transition", "initial", "error", "match"),
    [
        (
            [[0.5, 0.5]],
            None,
            ValueError,
            r"markov: transition must be a non-empty square matrix of probabilities, "
            r"got shape \(1, 2\)",
        ),
        ([0.5, 0.5], None, ValueError, r"must be a non-empty square matrix.*got shape \(2,\)"),
        ([], None, ValueError, r"must be a non-empty square matrix.*got shape \(0,\)"),
        (
            [[1.1, -0.1], [0.5, 0.5]],
            None,
            ValueError,
            r"markov: transition\[0\]\[1\] must be finite and >= 0, got -0\.1",
        ),
        (
            [[0.5, 0.5], [float("nan"), 1.0]],
            None,
            ValueError,
            r"transition\[1\]\[0\] must be finite .*got nan",
        ),
        (
            [[0.5, 0.4], [0.5, 0.5]],
            None,
            ValueError,
            r"markov: transition\[0\] must be a pmf summing to 1 within 1e-09, got a sum of 0\.9",
        ),
        (
            [[1.0, 0.0], [0.5, 0.5]],
            None,
            ValueError,
            r"markov: transition must be irreducible .*got state 1 unreachable from state 0",
        ),
        (
            [[0.5, 0.5], [0.0, 1.0]],
            None,
            ValueError,
            r"markov: transition must be irreducible .*got state 0 unreachable from state 1",
        ),
        (
            [[0.5, 0.5], [0.5, 0.5]],
            [1.0],
            ValueError,
            r"markov: initial must have 2 entries \(one per state\), got 1",
        ),
        (
            [[0.5, 0.5], [0.5, 0.5]],
            [0.6, 0.6],
            ValueError,
            r"markov: initial must be a pmf summing to 1 within 1e-09, got a sum of 1\.2",
        ),
        (
            [[0.5, 0.5], [0.5, 0.5]],
            [1.5, -0.5],
            ValueError,
            r"markov: initial\[1\] must be finite and >= 0",
        ),
        (
            [[0.5, 0.5], [0.5, 0.5]],
            "ab",
            TypeError,
            r"markov: initial must be a sequence of probabilities, got 'ab'",
        ),
        (
            [[0.5, "x"], [0.5, 0.5]],
            None,
            TypeError,
            r"markov: transition must be a non-empty square matrix of probabilities, got \[\[",
        ),
        (
            "0.5",
            None,
            TypeError,
            r"markov: transition must be a non-empty square matrix of probabilities, got '0\.5'",
        ),
    ],
)
def test_bad_markov_parameters(transition, initial, error, match):
    with pytest.raises(error, match=match):
        sources.markov(transition, initial)


# --------------------------------------------------------------------------
# empirical sources: plug-in estimates


def ring_conditional_entropy(data, k):
    """Plug-in H(X | previous k) with Python dicts over the data read as a ring."""
    n = len(data)
    ring = list(data) + list(data[:k])
    joint = Counter(tuple(ring[i : i + k + 1]) for i in range(n))
    context = Counter()
    for gram, c in joint.items():
        context[gram[:k]] += c
    return -sum(c / n * math.log2(c / context[g[:k]]) for g, c in joint.items())


TIDE = b"gauge 07 1.42m rising; gauge 08 1.37m rising; gauge 07 1.44m slack; " * 9 + b"storm!"


def test_order_zero_estimate_matches_scipy():
    src = sources.empirical(TIDE)
    counts = np.bincount(np.frombuffer(TIDE, dtype=np.uint8))
    assert src.entropy == pytest.approx(scipy.stats.entropy(counts, base=2), rel=1e-13)
    assert src.is_estimate
    assert src.memoryless
    assert src.alphabet_size == np.count_nonzero(counts)
    assert (src.min_symbol, src.max_symbol) == (min(TIDE), max(TIDE))


@pytest.mark.parametrize("k", [1, 2, 3, 5])
def test_order_k_estimate_matches_dict_counts(k):
    data = list(TIDE)
    src = sources.empirical(data, order=k)
    assert src.entropy == pytest.approx(ring_conditional_entropy(data, k), rel=1e-12)
    assert src.is_estimate
    assert not src.memoryless
    assert src.params == {"n": len(data), "order": k}


def test_deterministic_data_has_zero_conditional_estimate():
    data = [3, 1, 4] * 50
    assert sources.empirical(data, order=1).entropy == 0.0
    assert sources.empirical(data).entropy == pytest.approx(math.log2(3), rel=1e-15)


def test_empirical_information_is_the_plug_in_code_length():
    data = list(TIDE)
    src = sources.empirical(data)
    counts = Counter(data)
    x = src.sample(400, seed=1)
    expected = -math.fsum(math.log2(counts[v] / len(data)) for v in x.tolist())
    assert src.information(x) == pytest.approx(expected, rel=1e-13)
    # over the data itself, the order-0 information is n times the estimate (common practice)
    assert src.information(data) == pytest.approx(len(data) * src.entropy, rel=1e-12)


def test_order_k_information_against_dict_counts():
    k = 2
    data = list(TIDE)
    src = sources.empirical(data, order=k)
    n = len(data)
    ring = data + data[:k]
    joint = Counter(tuple(ring[i : i + k + 1]) for i in range(n))
    ctx = Counter()
    for g, c in joint.items():
        ctx[g[:k]] += c
    x = src.sample(300, seed=3).tolist()
    prefix1 = sum(c for g, c in ctx.items() if g[0] == x[0])
    prefix2 = ctx[tuple(x[:2])]
    expected = -math.log2(prefix1 / n) - math.log2(prefix2 / prefix1)
    expected -= math.fsum(
        math.log2(joint[tuple(x[i - k : i + 1])] / ctx[tuple(x[i - k : i])])
        for i in range(k, len(x))
    )
    assert src.information(x) == pytest.approx(expected, rel=1e-12)
    with pytest.raises(ValueError, match=r"symbol 33 at index 2 never follows context"):
        src.information([ord("g"), ord("a"), 33])
    with pytest.raises(ValueError, match=r"the opening symbols \(200\) never occur in the data"):
        src.information([200, 1, 2])


def test_order_zero_resampling_matches_the_histogram():
    src = sources.empirical(TIDE)
    x = src.sample(100_000, seed=8)
    counts = np.bincount(np.frombuffer(TIDE, dtype=np.uint8), minlength=256)
    seen = counts > 0
    observed = np.bincount(x, minlength=256)
    assert observed[~seen].sum() == 0
    expected = counts[seen] / counts.sum() * x.size
    assert scipy.stats.chisquare(observed[seen], expected).pvalue > 1e-3


def test_order_one_resampling_follows_the_fitted_transitions():
    data = np.array([0, 1, 1, 2, 0, 2, 2, 1, 0, 0, 1, 2] * 10)
    src = sources.empirical(data, order=1)
    x = src.sample(60_000, seed=6)
    ring = np.concatenate([data, data[:1]])
    fitted = np.zeros((3, 3))
    np.add.at(fitted, (ring[:-1], ring[1:]), 1)
    seen = np.zeros((3, 3))
    np.add.at(seen, (x[:-1], x[1:]), 1)
    for i in range(3):
        row = fitted[i] > 0
        assert seen[i, ~row].sum() == 0
        expected = fitted[i, row] / fitted[i].sum() * seen[i].sum()
        assert scipy.stats.chisquare(seen[i, row], expected).pvalue > 1e-3
    # the sample's own plug-in estimate approaches the source's entropy
    assert sources.empirical(x, order=1).entropy == pytest.approx(src.entropy, rel=0.02)
    assert np.array_equal(x[:500], src.sample(500, seed=6))


def test_empirical_specs():
    a = sources.empirical(TIDE)
    assert a.spec.startswith(f"empirical(n={len(TIDE)},sha=")
    assert a.spec.endswith(",order=0)")
    assert a.spec == sources.empirical(list(TIDE)).spec
    assert a.spec != sources.empirical(TIDE + b"x").spec
    assert sources.empirical(TIDE, order=2).spec.endswith(",order=2)")
    assert "estimate" in a.describe()


@pytest.mark.parametrize(
    ("data", "order", "error", "match"),
    [
        (
            [],
            0,
            ValueError,
            r"empirical: data is empty; an entropy estimate needs at least one symbol",
        ),
        (b"", 0, ValueError, r"empirical: data is empty"),
        ([1, 2, 3], -1, ValueError, r"^empirical: order must be an integer >= 0, got -1$"),
        ([1, 2, 3], 1.5, TypeError, r"^empirical: order must be an integer, got 1\.5$"),
        ([1, 2, 3], True, TypeError, r"^empirical: order must be an integer, got True$"),
        (
            [1, 2, 3],
            3,
            ValueError,
            r"empirical: order must be less than the data length 3, got 3",
        ),
        ([0.5, 1.5], 0, TypeError, r"empirical: data must be integer symbols, got dtype float64"),
        ("abc", 0, TypeError, r"empirical: data must be a 1-D sequence of integer symbols"),
        ([[1, 2]], 0, ValueError, r"empirical: data must be a 1-D sequence"),
    ],
)
def test_bad_empirical_parameters(data, order, error, match):
    with pytest.raises(error, match=match):
        sources.empirical(data, order=order)


# --------------------------------------------------------------------------
# from_file


def test_from_file_formats(tmp_path):
    path = tmp_path / "gauge 07.bin"
    content = bytes([0x80, 0x01, 0xFF, 0x00, 0x12, 0x34, 0x56, 0x78])
    path.write_bytes(content)
    u8 = sources.from_file(path)
    assert u8.data.tolist() == list(content)
    assert u8.entropy == pytest.approx(sources.empirical(content).entropy, rel=1e-15)
    assert u8.path == str(path)
    bits = sources.from_file(path, symbol="bits")
    assert bits.data[:16].tolist() == [1, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 1]  # MSB first
    assert bits.data.size == 64
    assert ",symbol=bits," in bits.spec
    u16 = sources.from_file(path, symbol="u16le")
    assert u16.data.tolist() == [0x0180, 0x00FF, 0x3412, 0x7856]
    u32 = sources.from_file(path, symbol="u32le", order=1)
    assert u32.data.tolist() == [0x00FF0180, 0x78563412]
    assert u32.order == 1


def _zigzag_decode(n):
    """Zig-zag back to a signed integer: (n >> 1) XOR -(n AND 1) (common practice, from memory)."""
    return (n >> 1) ^ -(n & 1)


# Reference decoding of each layout with the struct module (little-endian words).
LAYOUT_REFERENCE = {
    "u8": lambda b: list(struct.unpack(f"<{len(b)}B", b)),
    "u16le": lambda b: list(struct.unpack(f"<{len(b) // 2}H", b)),
    "u32le": lambda b: list(struct.unpack(f"<{len(b) // 4}I", b)),
    "i32le": lambda b: list(struct.unpack(f"<{len(b) // 4}i", b)),
    "zigzag-u8": lambda b: [_zigzag_decode(v) for v in struct.unpack(f"<{len(b)}B", b)],
    "zigzag-u16le": lambda b: [_zigzag_decode(v) for v in struct.unpack(f"<{len(b) // 2}H", b)],
    "zigzag-u32le": lambda b: [_zigzag_decode(v) for v in struct.unpack(f"<{len(b) // 4}I", b)],
    "bits": lambda b: [(byte >> (7 - i)) & 1 for byte in b for i in range(8)],
}


@pytest.mark.parametrize("symbol", sorted(layouts.LAYOUTS))
def test_from_file_reads_every_layout(tmp_path, symbol):
    content = bytes([0x80, 0x01, 0xFF, 0x00, 0x12, 0x34, 0x56, 0xF8])
    path = tmp_path / "words.bin"
    path.write_bytes(content)
    src = sources.from_file(path, symbol=symbol)
    assert src.data.tolist() == LAYOUT_REFERENCE[symbol](content)
    assert src.spec.startswith(f"from_file(name=words.bin,symbol={symbol},order=0,sha=")


def test_from_file_layouts_are_the_project_table():
    assert set(LAYOUT_REFERENCE) == set(layouts.LAYOUTS)


def test_from_file_spec_carries_name_and_content_hash(tmp_path):
    path = tmp_path / "gauge 07.bin"
    path.write_bytes(TIDE)
    spec = sources.from_file(path, order=2).spec
    assert spec.startswith("from_file(name=gauge_07.bin,symbol=u8,order=2,sha=")
    path.write_bytes(TIDE + b"!")  # same name, other content
    assert sources.from_file(path, order=2).spec != spec
    assert sources.from_file(path, order=2).is_estimate


def test_from_file_errors(tmp_path):
    empty = tmp_path / "empty.bin"
    empty.write_bytes(b"")
    with pytest.raises(ValueError, match=r"from_file: .*empty\.bin is empty; an entropy estimate"):
        sources.from_file(empty)
    odd = tmp_path / "odd.bin"
    odd.write_bytes(b"abc")
    with pytest.raises(
        LayoutError,
        match=r"from_file: .*odd\.bin: 3 bytes are not a whole number of 'u16le' symbols",
    ):
        sources.from_file(odd, symbol="u16le")
    assert issubclass(LayoutError, ValueError)
    with pytest.raises(
        ValueError, match=r"^from_file: symbol must be one of 'bits', 'u8', .*got 'u12'$"
    ):
        sources.from_file(odd, symbol="u12")
    with pytest.raises(ValueError, match=r"from_file: symbol must be one of .*got 'bit'$"):
        sources.from_file(odd, symbol="bit")  # the layout is called "bits"
    with pytest.raises(TypeError, match=r"from_file: symbol must be one of .*got 8$"):
        sources.from_file(odd, symbol=8)
    with pytest.raises(ValueError, match=r"^from_file: order must be an integer >= 0, got -2$"):
        sources.from_file(odd, order=-2)
    with pytest.raises(TypeError, match=r"^from_file: order must be an integer, got 1\.0$"):
        sources.from_file(odd, order=1.0)
    with pytest.raises(FileNotFoundError):
        sources.from_file(tmp_path / "missing.bin")
