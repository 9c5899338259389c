"""``Source.varentropy_rate``: lim Var(information of n symbols) / n, the figure whose
square root √(V/n) is the sampling spread of a sample's information around n·H.

Memoryless sources (the rate is the one-step varentropy), two-state chains (a closed
form, covariance sums, enumeration of every sequence, and the spread over many seeds),
larger and periodic chains, and the order-k empirical models solved on their sparse
context graphs, each against a dense fundamental-matrix computation written here.
"""

from __future__ import annotations

import math
from collections import Counter

import mpmath
import numpy as np
import pytest
import scipy.stats

from pytest_ratefloor import sources
from pytest_ratefloor.sources import chains
from pytest_ratefloor.sources.base import Source

# --------------------------------------------------------------------------
# references written here


def fundamental_matrix_rate(P, f, pi):
    """Asymptotic variance per step of Σ f(X_{t-1}, X_t) for a stationary chain.

    From memory (Kemeny & Snell, *Finite Markov Chains*: the fundamental matrix
    Z = (I − P + Π)⁻¹, Π = 1π): Var rate = Var f_0 + 2 Σ_{k≥1} Cov(f_0, f_k), and
    Cov(f_0, f_k) = Σ_{x,y} π_x P_xy f_xy ((P^{k-1} g)_y − H) with g = row means of f,
    whose sum over k ≥ 1 is ((Z − Π) g)_y. A dense inverse: small chains only.
    """
    P, f, pi = np.asarray(P, float), np.asarray(f, float), np.asarray(pi, float)
    size = P.shape[0]
    joint = pi[:, None] * P
    h = (joint * f).sum()
    one_step = (joint * (f - h) ** 2).sum()
    g = (P * f).sum(axis=1)
    Pi = np.tile(pi, (size, 1))
    Z = np.linalg.inv(np.eye(size) - P + Pi)
    return float(one_step + 2.0 * (joint * f * ((Z - Pi) @ g)[None, :]).sum())


def covariance_sum_rate(P, pi, terms):
    """Var f_0 + 2 Σ_{k=1}^{terms} Cov(f_0, f_k) for f = −log2 P(X_t | X_{t-1}), summed with
    numpy matrix powers (the definition of the long-run variance, from memory)."""
    P = np.asarray(P, float)
    f = np.where(P > 0, -np.log2(np.where(P > 0, P, 1.0)), 0.0)
    joint = pi[:, None] * P
    h = (joint * f).sum()
    g = (P * f).sum(axis=1)
    total = (joint * (f - h) ** 2).sum()
    ahead = g.copy()  # P^{k-1} g: E[f_k | X_0 = y]
    for _ in range(terms):
        total += 2.0 * ((joint * f).sum(axis=0) @ ahead - h * h)
        ahead = P @ ahead
    return float(total)


def enumerated_variance(P, pi, n):
    """Var of −log2 P(x_1..x_n) over all 2^n sequences of a stationary two-state chain."""
    P = np.asarray(P, float)
    seqs = (np.arange(2**n)[:, None] >> np.arange(n)[None, :]) & 1
    with np.errstate(divide="ignore"):
        logp = np.log2(pi[seqs[:, 0]]) + np.log2(P[seqs[:, :-1], seqs[:, 1:]]).sum(axis=1)
    prob = np.exp2(logp)
    keep = prob > 0
    info = -logp[keep]
    mean = (prob[keep] * info).sum()
    return float((prob[keep] * (info - mean) ** 2).sum())


def exact_information_variances(P, init, steps):
    """Var of the information of 1..steps symbols, by forward recursion over states."""
    P = np.asarray(P, float)
    f = np.where(P > 0, -np.log2(np.where(P > 0, P, 1.0)), 0.0)
    alpha = np.asarray(init, float)
    with np.errstate(divide="ignore"):
        f0 = np.where(alpha > 0, -np.log2(np.where(alpha > 0, alpha, 1.0)), 0.0)
    m1, m2 = alpha * f0, alpha * f0**2
    out = [m2.sum() - m1.sum() ** 2]
    for _ in range(steps - 1):
        m2 = ((m2[:, None] + 2 * f * m1[:, None] + f**2 * alpha[:, None]) * P).sum(axis=0)
        m1 = ((m1[:, None] + f * alpha[:, None]) * P).sum(axis=0)
        alpha = alpha @ P
        out.append(m2.sum() - m1.sum() ** 2)
    return out


def two_state_closed_form(a, b):
    """Rate of P = [[1-a, a], [b, 1-b]] at 40 digits.

    Derived by hand for this test (Poisson equation, from memory: Meyn & Tweedie's
    CLT for Markov chains): g − H = c·(a, −b)/(a+b) with c = (h(a) − h(b))/(a+b) is a
    right eigenvector of P with eigenvalue 1 − a − b, so u = (g − H)/(a+b) and
    u(0) − u(1) = c. Each row is a two-point law, variance p(1−p)Δ²:
    rate = [b·a(1−a)(log2(a/(1−a)) + c)² + a·b(1−b)(log2((1−b)/b) + c)²]/(a+b).
    """
    with mpmath.workdps(40):
        a, b = mpmath.mpf(a), mpmath.mpf(b)

        def h(p):
            return -p * mpmath.log(p, 2) - (1 - p) * mpmath.log(1 - p, 2)

        c = (h(a) - h(b)) / (a + b)
        row0 = b * a * (1 - a) * (mpmath.log(a / (1 - a), 2) + c) ** 2
        row1 = a * b * (1 - b) * (mpmath.log((1 - b) / b, 2) + c) ** 2
        return float((row0 + row1) / (a + b))


def ring_model(data, k):
    """The order-k model of ``data`` read as a ring, with Counters: (P, f, π) on contexts."""
    n = len(data)
    ring = list(data) + list(data[:k])
    grams = Counter(tuple(ring[i : i + k + 1]) for i in range(n))
    contexts = Counter()
    for gram, c in grams.items():
        contexts[gram[:k]] += c
    index = {w: i for i, w in enumerate(sorted(contexts))}
    P = np.zeros((len(index), len(index)))
    f = np.zeros_like(P)
    for gram, c in grams.items():
        i, j = index[gram[:k]], index[gram[1:]]
        P[i, j] = c / contexts[gram[:k]]
        f[i, j] = -math.log2(c / contexts[gram[:k]])
    pi = np.array([contexts[w] / n for w in sorted(contexts)])
    return P, f, pi


# --------------------------------------------------------------------------
# memoryless sources: the rate is the varentropy


MEMORYLESS = [
    sources.uniform(7),
    sources.bernoulli(0.1),
    sources.geometric(0.3),
    sources.two_sided_geometric(0.6),
    sources.zipf(50, 1.3),
    sources.poisson(4.5),
    sources.categorical([0.5, 0.25, 0.125, 0.125]),
    sources.empirical(b"abracadabra, said the tide gauge at 07:00"),
]


@pytest.mark.parametrize(
    "source", MEMORYLESS + [s for s in sources.standard_suite() if s.memoryless], ids=repr
)
def test_memoryless_rate_is_the_varentropy(source):
    # independent symbols: the variance of a sum is the sum of the variances (Bienaymé)
    assert source.memoryless
    assert source.varentropy_rate == source.varentropy


@pytest.mark.parametrize("probs", [[0.2, 0.8], [0.5, 0.3, 0.2]])
def test_memoryless_rate_against_every_sequence(probs):
    # Var(information of n i.i.d. symbols) / n over all sequences, by enumeration here
    source = sources.categorical(probs)
    n = 6
    k = len(probs)
    seqs = np.array(np.meshgrid(*[np.arange(k)] * n, indexing="ij")).reshape(n, -1).T
    logs = np.log2(np.array(probs))[seqs].sum(axis=1)
    weight = np.exp2(logs)
    mean = (weight * -logs).sum()
    variance = (weight * (-logs - mean) ** 2).sum()
    assert source.varentropy_rate == pytest.approx(variance / n, rel=1e-12)


# --------------------------------------------------------------------------
# two-state chains


TWO_STATE = [
    (0.1, 0.3),
    (0.3, 0.5),
    (0.1, 0.01),
    (0.05, 0.002),
    (0.999, 0.4),
    (0.3, 0.7),  # a + b = 1: i.i.d. rows, the rate is the one-step varentropy
    (0.9, 0.6),
]


@pytest.mark.parametrize(("a", "b"), TWO_STATE)
def test_two_state_rate_closed_form(a, b):
    src = sources.markov([[1 - a, a], [b, 1 - b]])
    assert src.varentropy_rate == pytest.approx(two_state_closed_form(a, b), rel=1e-11)


@pytest.mark.parametrize(("a", "b"), TWO_STATE)
def test_two_state_rate_against_covariance_sum(a, b):
    # the defining sum of autocovariances, truncated where |1-a-b|^k < 1e-18
    src = sources.markov([[1 - a, a], [b, 1 - b]])
    pi = np.array([b, a]) / (a + b)  # from memory: π = (b, a)/(a+b)
    lam = abs(1 - a - b)
    terms = 1 + int(math.log(1e-18) / math.log(lam)) if lam > 0 else 1
    expected = covariance_sum_rate([[1 - a, a], [b, 1 - b]], pi, terms)
    assert src.varentropy_rate == pytest.approx(expected, rel=1e-10)


@pytest.mark.parametrize(("a", "b"), [(0.3, 0.5), (0.9, 0.4), (0.6, 0.7)])
def test_two_state_rate_against_enumeration(a, b):
    # Var(S_{n+1}) − Var(S_n) over all 2^n sequences tends to the rate like |1-a-b|^n
    P = np.array([[1 - a, a], [b, 1 - b]])
    pi = np.array([b, a]) / (a + b)
    n = 15
    step = enumerated_variance(P, pi, n + 1) - enumerated_variance(P, pi, n)
    src = sources.markov(P)
    assert src.varentropy_rate == pytest.approx(step, rel=1e-6, abs=1e-9)
    # one symbol: the variance of −log2 π(X)
    one = float((pi * np.log2(pi) ** 2).sum() - (pi * np.log2(pi)).sum() ** 2)
    assert enumerated_variance(P, pi, 1) == pytest.approx(one, rel=1e-12)


SEEDS = 400


@pytest.mark.parametrize(
    ("a", "b", "n"),
    [
        (0.1, 0.01, 20_000),  # sticky: state 1 keeps itself 99 % of the time; rate > one step
        (0.999, 0.4, 2_000),  # anti-persistent: state 0 almost always leaves; rate < one step
    ],
)
def test_sample_spread_over_seeds_is_the_rate(a, b, n):
    # the observed std of the sample information / √n over 400 seeds, with the chi-square
    # confidence interval of a standard deviation from normal data (99.9 %, scipy.stats.chi2)
    src = sources.markov([[1 - a, a], [b, 1 - b]])
    info = np.array([src.information(src.sample(n, seed=seed)) for seed in range(SEEDS)])
    spread = float(info.std(ddof=1)) / math.sqrt(n)
    dof = SEEDS - 1
    low = spread * math.sqrt(dof / scipy.stats.chi2.ppf(0.9995, dof))
    high = spread * math.sqrt(dof / scipy.stats.chi2.ppf(0.0005, dof))
    assert high / low < 1.3  # about ±12 %: narrow enough to tell the two figures apart
    assert low <= math.sqrt(src.varentropy_rate) <= high
    one_step = math.sqrt(src.varentropy)
    assert not low <= one_step <= high
    assert abs(one_step / spread - 1) > 0.2  # the one-step figure is off by over 20 %


# --------------------------------------------------------------------------
# larger and periodic chains


def random_sparse_chain(size, seed, *, stay=0.0):
    rng = np.random.default_rng(seed)
    P = np.zeros((size, size))
    for i in range(size):
        P[i, rng.choice(size, 3, replace=False)] = rng.dirichlet([1.0, 1.0, 1.0])
        P[i, (i + 1) % size] += 0.1  # a ring through every state: irreducible
    P /= P.sum(axis=1, keepdims=True)
    return (1 - stay) * P + stay * np.eye(size)


@pytest.mark.parametrize(("size", "stay"), [(5, 0.0), (40, 0.9), (530, 0.0), (520, 0.98)])
def test_markov_rate_against_the_fundamental_matrix(size, stay):
    # above 512 states the package solves on the sparse graph; the reference inverts densely
    src = sources.markov(random_sparse_chain(size, size, stay=stay))
    P = src.transition
    f = np.where(P > 0, -np.log2(np.where(P > 0, P, 1.0)), 0.0)
    assert src.varentropy_rate == pytest.approx(
        fundamental_matrix_rate(P, f, src.stationary), rel=1e-10
    )


def bipartite_chain():
    """Period 2: states {0, 3} lead to {1, 2} and back."""
    return np.array(
        [
            [0.0, 0.3, 0.7, 0.0],
            [0.2, 0.0, 0.0, 0.8],
            [0.9, 0.0, 0.0, 0.1],
            [0.0, 0.5, 0.5, 0.0],
        ]
    )


@pytest.mark.parametrize("dense_states", [512, 0])
def test_periodic_chain_rate(monkeypatch, dense_states):
    # a periodic chain has no limit of Var(S_{n+1}) − Var(S_n); the mean of two
    # consecutive increments (forward recursion) converges to the rate
    monkeypatch.setattr(chains, "_DENSE_STATES", dense_states)
    src = sources.markov(bipartite_chain())
    var = exact_information_variances(src.transition, src.stationary, 200)
    assert src.varentropy_rate == pytest.approx((var[-1] - var[-3]) / 2, rel=1e-9)
    # a cycle carries no information: every sample of n symbols has the same
    assert sources.markov([[0.0, 1.0], [1.0, 0.0]]).varentropy_rate == 0.0


def test_rate_does_not_depend_on_the_first_symbol():
    P = [[0.9, 0.1], [0.4, 0.6]]
    assert sources.markov(P, initial=[1.0, 0.0]).varentropy_rate == pytest.approx(
        sources.markov(P).varentropy_rate, rel=1e-15
    )


# --------------------------------------------------------------------------
# empirical order-k models: chains on their contexts


TIDE = b"gauge 07 1.42m rising; gauge 08 1.37m rising; gauge 07 1.44m slack; " * 9 + b"storm!"


def synthetic_bytes(n, seed):
    """Bytes with structure: runs, repeated words and noise over a 40-symbol alphabet."""
    rng = np.random.default_rng(seed)
    words = [rng.integers(0, 40, rng.integers(2, 7)).tolist() for _ in range(30)]
    out: list[int] = []
    while len(out) < n:
        kind = rng.integers(0, 3)
        if kind == 0:
            out += [int(rng.integers(0, 40))] * int(rng.integers(2, 30))
        elif kind == 1:
            out += words[int(rng.integers(0, len(words)))]
        else:
            out += rng.integers(0, 40, 3).tolist()
    return bytes(out[:n])


@pytest.fixture
def solvers(monkeypatch):
    """(name, states) of each Poisson solve that ran and gave an answer."""
    ran: list[tuple[str, int]] = []
    for name in ("_solve_dense", "_solve_krylov", "_solve_direct"):
        inner = getattr(chains, name)

        def spy(*args, _inner=inner, _name=name):
            result = _inner(*args)
            if result is not None:
                ran.append((_name, int(result.size)))
            return result

        monkeypatch.setattr(chains, name, spy)
    return ran


@pytest.mark.parametrize("path", ["default", "krylov", "direct"])
def test_order_one_sparse_solution_equals_the_dense_one(monkeypatch, solvers, path):
    data = TIDE
    src = sources.empirical(data, order=1)
    if path != "default":  # no dense solve: the reductions, then GMRES or the sparse LU
        monkeypatch.setattr(chains, "_DENSE_STATES", 0)
    if path == "direct":
        monkeypatch.setattr(chains, "_KRYLOV_PRODUCTS", 0)
    expected = fundamental_matrix_rate(*ring_model(list(data), 1))
    assert src.varentropy_rate == pytest.approx(expected, rel=1e-10)
    solver = {"default": "_solve_dense", "krylov": "_solve_krylov", "direct": "_solve_direct"}
    assert [name for name, _ in solvers] == [solver[path]]


def test_many_contexts_are_solved_on_the_sparse_graph(solvers):
    # order 2 over 40 symbols: more than 512 contexts, so no dense matrix of them all
    data = synthetic_bytes(5000, 1)
    src = sources.empirical(data, order=2)
    assert len(src._contexts) > chains._DENSE_STATES
    expected = fundamental_matrix_rate(*ring_model(list(data), 2))
    assert src.varentropy_rate == pytest.approx(expected, rel=1e-10)
    assert solvers  # a dense solve only of the reduced chain, if it is small enough
    assert all(size <= chains._DENSE_STATES for name, size in solvers if name == "_solve_dense")


@pytest.mark.parametrize(
    ("data", "k"),
    [
        (b"aaab" * 30, 1),  # without its self-loop, the chain is one forced cycle
        (b"aaabaabab" * 30 + b"b", 1),
        (bytes([3, 1, 4] * 50), 1),  # deterministic: no information at all
        (b"abcd" * 50 + b"abce" * 3 + b"xyz" * 40 + b"q", 2),  # long forced paths
        (TIDE, 3),
        (synthetic_bytes(3000, 2), 1),  # runs: self-loops
    ],
)
@pytest.mark.parametrize("path", ["krylov", "direct"])
def test_reductions_keep_the_solution(monkeypatch, data, k, path):
    # the self-loop and forced-path reductions are exact: same rate as the dense reference
    monkeypatch.setattr(chains, "_DENSE_STATES", 0)
    if path == "direct":
        monkeypatch.setattr(chains, "_KRYLOV_PRODUCTS", 0)
    src = sources.empirical(data, order=k)
    expected = fundamental_matrix_rate(*ring_model(list(data), k))
    assert src.varentropy_rate == pytest.approx(expected, rel=1e-10, abs=1e-13)


def test_order_one_model_is_the_markov_chain_of_its_counts():
    data = list(synthetic_bytes(2000, 3))
    src = sources.empirical(data, order=1)
    P, _, _ = ring_model(data, 1)
    assert src.varentropy_rate == pytest.approx(sources.markov(P).varentropy_rate, rel=1e-9)
    assert src.varentropy_rate != pytest.approx(src.varentropy, rel=0.05)


def test_order_zero_and_from_file_orders(tmp_path):
    path = tmp_path / "tide.bin"
    path.write_bytes(TIDE)
    assert sources.from_file(path).varentropy_rate == sources.from_file(path).varentropy
    expected = fundamental_matrix_rate(*ring_model(list(TIDE), 2))
    assert sources.from_file(path, order=2).varentropy_rate == pytest.approx(expected, rel=1e-10)


# --------------------------------------------------------------------------
# the contract


class _Remembering(Source):
    """A source that says it has memory but gives no varentropy rate."""

    def __init__(self) -> None:
        super().__init__(
            family="stub",
            spec="stub()",
            params={},
            alphabet_size=2,
            min_symbol=0,
            max_symbol=1,
            memoryless=False,
        )

    def _compute_entropy(self) -> float:
        return 1.0

    def _compute_varentropy(self) -> float:
        return 0.0

    def _sample(self, n, bitgen):
        return np.zeros(n, dtype=np.int64)

    def _self_information(self, x):
        return np.ones(x.shape)

    def _pmf_table(self, tail):
        return np.array([0, 1]), np.array([0.5, 0.5])


def test_a_source_with_memory_must_give_its_rate():
    with pytest.raises(NotImplementedError, match=r"stub\(\): a source with memory must "):
        _ = _Remembering().varentropy_rate


def test_rate_is_computed_once(monkeypatch):
    calls = []
    inner = chains._chain_varentropy_rate

    def counting(*args):
        calls.append(1)
        return inner(*args)

    monkeypatch.setattr(chains, "_chain_varentropy_rate", counting)
    src = sources.markov([[0.9, 0.1], [0.4, 0.6]])
    assert src.varentropy_rate == src.varentropy_rate
    assert len(calls) == 1
    assert isinstance(src.varentropy_rate, float)
