"""R(D) of finite-alphabet sources by Blahut–Arimoto, its bounds, the closed forms,
the Gauss–Markov reverse water-filling, curves and argument errors — each checked
against something this project did not write (named beside the check)."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.integrate
import scipy.optimize
import scipy.special

from pytest_ratefloor import ratedistortion as rd
from pytest_ratefloor import sources


def h2(x: float) -> float:
    """Binary entropy in bits (from memory: the textbook definition), written out here."""
    if x in (0.0, 1.0):
        return 0.0
    return -x * math.log2(x) - (1 - x) * math.log2(1 - x)


def uniform_hamming(k: int, D: float) -> float:
    """log2 k − h(D) − D log2(k−1) for D <= (k−1)/k (Cover & Thomas ch. 10, from memory)."""
    if (k - 1) / k <= D:
        return 0.0
    return math.log2(k) - h2(D) - D * math.log2(k - 1)


def textbook_ba(p: np.ndarray, d: np.ndarray, beta: float, iterations: int = 20_000
                ) -> tuple[float, float]:
    """Plain Blahut–Arimoto written from the published algorithm (Blahut 1972, from memory).

    Alternates Q(y|x) ∝ q(y) 2^(−beta d(x,y)) and q(y) = Σ_x p(x) Q(y|x); no
    bounds, a fixed number of steps. Returns (rate in bits, distortion).
    """
    m = d.shape[1]
    q = np.full(m, 1.0 / m)
    weights = np.exp2(-beta * d)
    for _ in range(iterations):
        cond = q * weights
        cond /= cond.sum(axis=1, keepdims=True)
        q = p @ cond
    cond = q * weights
    cond /= cond.sum(axis=1, keepdims=True)
    q = p @ cond
    joint = p[:, None] * cond
    mask = joint > 0
    rate = float(np.sum(joint[mask] * np.log2(cond[mask] / np.broadcast_to(q, cond.shape)[mask])))
    return rate, float(np.sum(joint * d))


def convex_program(p: np.ndarray, d: np.ndarray, D: float) -> float:
    """min I(X;Y) over channels with E d <= D, by scipy.optimize (SLSQP), in bits."""
    k, m = d.shape

    def info(flat: np.ndarray) -> float:
        cond = np.clip(flat.reshape(k, m), 1e-300, None)
        q = p @ cond
        return float(np.sum(p[:, None] * cond * np.log2(cond / q)))

    cons = [
        {"type": "eq", "fun": lambda f: f.reshape(k, m).sum(axis=1) - 1.0},
        {"type": "ineq", "fun": lambda f: D - float(np.sum(p[:, None] * f.reshape(k, m) * d))},
    ]
    best = math.inf
    rng = np.random.default_rng(5)
    for _ in range(2):
        start = rng.dirichlet(np.ones(m), size=k).ravel()
        res = scipy.optimize.minimize(info, start, method="SLSQP", bounds=[(0.0, 1.0)] * (k * m),
                                      constraints=cons, options={"ftol": 1e-12, "maxiter": 2000})
        if res.success:
            best = min(best, info(res.x))
    return best


# --------------------------------------------------------------------------
# Blahut–Arimoto against closed forms


@pytest.mark.parametrize("k", [2, 3, 5, 10, 256])
@pytest.mark.parametrize("D", [1e-4, 0.01, 0.1, 0.3, 0.45])
def test_uniform_hamming_matches_closed_form(k: int, D: float) -> None:
    expected = uniform_hamming(k, D)
    res = sources.uniform(k).rate_distortion(D)
    assert res == pytest.approx(expected, abs=1e-9)
    full = rd.blahut_arimoto(np.full(k, 1.0 / k), target_distortion=D)
    assert full.rate_lower - 1e-12 <= expected <= full.rate_upper + 1e-12
    assert full.rate_upper - full.rate_lower <= 1e-9
    if k <= 10:  # the dense-matrix path (no closed-form start) too
        dense = rd.blahut_arimoto(np.full(k, 1.0 / k), 1.0 - np.eye(k), target_distortion=D)
        assert dense.rate_lower - 1e-12 <= expected <= dense.rate_upper + 1e-12
        assert dense.converged


@pytest.mark.parametrize("p", [0.5, 0.3, 0.1, 0.01, 0.9])
def test_bernoulli_closed_form_and_blahut_arimoto_agree(p: float) -> None:
    src = sources.bernoulli(p)
    same = sources.categorical([1 - p, p])  # no closed form: Blahut–Arimoto
    for D in (1e-6, 0.001, 0.005, 0.05, 0.2, 0.49):
        # h(p) − h(D) for D <= min(p, 1−p) (Cover & Thomas ch. 10, from memory)
        expected = max(0.0, h2(p) - h2(D)) if min(p, 1 - p) > D else 0.0
        assert src.rate_distortion(D) == pytest.approx(expected, abs=1e-12)
        assert same.rate_distortion(D) == pytest.approx(expected, abs=1e-9)
    assert src.rate_distortion(0) == pytest.approx(h2(p), abs=1e-15)
    for R in (0.0, 0.01, 0.5 * h2(p)):
        D = src.distortion_rate(R)
        assert h2(p) - h2(D) == pytest.approx(R, abs=1e-9) if R > 0 else min(p, 1 - p) == D
        assert same.distortion_rate(R) == pytest.approx(D, abs=1e-8)


def test_slope_parametrisation_of_the_binary_symmetric_case() -> None:
    # uniform binary, Hamming: R'(D) = −log2((1−D)/D), so slope −s gives D = 1/(1 + 2^s)
    # (differentiating 1 − h(D); Cover & Thomas ch. 10, from memory)
    for s in (0.5, 1.0, 3.0, 10.0):
        res = rd.blahut_arimoto([0.5, 0.5], slope=-s)
        D = 1.0 / (1.0 + 2.0**s)
        assert res.distortion == pytest.approx(D, rel=1e-12)
        assert res.rate == pytest.approx(1.0 - h2(D), abs=1e-12)
        assert res.slope == -s
        assert res.converged


# --------------------------------------------------------------------------
# Blahut–Arimoto against independent implementations


def random_problems(count: int, seed: int) -> list[tuple[np.ndarray, np.ndarray]]:
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(count):
        k, m = int(rng.integers(2, 6)), int(rng.integers(2, 6))
        p = rng.dirichlet(np.ones(k))
        d = rng.uniform(0.0, 2.0, size=(k, m))
        out.append((p, d))
    return out


@pytest.mark.parametrize(("p", "d"), random_problems(8, seed=1))
def test_random_problems_against_textbook_blahut_arimoto(p: np.ndarray, d: np.ndarray) -> None:
    for beta in (0.7, 3.0, 9.0):
        rate, dist = textbook_ba(p, d, beta)
        ours = rd.blahut_arimoto(p, d, slope=-beta)
        assert ours.distortion == pytest.approx(dist, abs=1e-7)
        assert ours.rate == pytest.approx(rate, abs=1e-7)
        at = rd.blahut_arimoto(p, d, target_distortion=dist)
        # the textbook channel is a real channel: its rate can't be below our lower bound
        assert rate >= at.rate_lower - 1e-9
        assert at.rate == pytest.approx(rate, abs=1e-7)


@pytest.mark.parametrize(("p", "d"), random_problems(3, seed=2))
def test_random_problems_against_scipy_convex_program(p: np.ndarray, d: np.ndarray) -> None:
    floor = float(p @ d.min(axis=1))
    top = float((p @ d).min())
    for frac in (0.25, 0.6):
        D = floor + frac * (top - floor)
        ours = rd.blahut_arimoto(p, d, target_distortion=D)
        best = convex_program(p, d, D)
        assert ours.rate_lower <= best + 1e-9  # scipy's optimum is a feasible channel
        assert best == pytest.approx(ours.rate, abs=2e-5)  # SLSQP stops near 1e-6..1e-5


def test_against_dit_if_installed() -> None:
    dit_ba = pytest.importorskip("dit.rate_distortion.blahut_arimoto")
    compared = 0
    for p, d_rect in random_problems(5, seed=3):
        k = p.size
        d = np.resize(d_rect, (k, k))  # dit wants a square matrix
        for beta in (3.0, 8.0):
            if rd.blahut_arimoto(p, d, slope=-beta).rate < 0.02:
                continue  # near R = 0 dit's stopping rule leaves it far from converged
            # restarts=1: dit's first start is the uniform channel (no random draws)
            result, _ = dit_ba.blahut_arimoto(p, beta, distortion=lambda px, q, d=d: d,
                                              max_iters=5000, restarts=1)
            ours = rd.blahut_arimoto(p, d, target_distortion=float(result.distortion))
            # dit's channel is a real channel: never below our lower bound
            assert float(result.rate) >= ours.rate_lower - 1e-9
            # dit stops when successive distortions pass np.isclose (rtol 1e-5)
            assert float(result.rate) == pytest.approx(ours.rate, abs=1e-4)
            compared += 1
    assert compared >= 4


# --------------------------------------------------------------------------
# sources: tables, truncation, memory, matrices


def test_unbounded_source_truncation_against_a_plain_table() -> None:
    # geometric(0.5): P(x) = 2^-(x+1); a plain 70-symbol table (mass 2^-70 left out) with the
    # textbook iteration must land within the reported bounds (plus the tiny truncation)
    src = sources.geometric(0.5)
    p = np.array([2.0 ** -(x + 1) for x in range(70)])
    p /= p.sum()
    for D in (0.05, 0.2):
        res = rd.discrete_rate_distortion(src, D)
        at = rd.blahut_arimoto(p, target_distortion=D)
        assert res.rate_lower - 1e-12 <= at.rate <= res.rate_upper + 1e-12
        assert res.rate_upper - res.rate_lower <= 1e-9
    # R(0) is the entropy: 2 bits for geometric(1/2)
    assert src.rate_distortion(0.0) == 2.0


def test_every_standard_source_has_a_consistent_curve() -> None:
    for src in sources.standard_suite():
        ds = np.array([0.0, 0.001, 0.02, 0.1, 0.3])
        _, rs = rd.curve(src, "hamming", distortions=ds)
        assert rs[0] == pytest.approx(src.entropy, rel=1e-12)
        assert np.all(np.diff(rs) <= 1e-9)  # non-increasing
        assert np.all(rs >= 0)
        slopes = np.diff(rs) / np.diff(ds)
        assert np.all(np.diff(slopes[1:]) >= -1e-6)  # convex


def test_distortion_matrix_convention_rows_follow_pmf_table() -> None:
    # a 3-symbol source reproduced by 2 symbols: "0 is cheap to confuse with 1, 2 is far"
    src = sources.categorical([0.5, 0.3, 0.2], symbols=[4, 7, 9])
    d = np.array([[0.0, 1.0], [0.2, 1.0], [1.0, 0.0]])
    res = rd.discrete_rate_distortion(src, 0.1, d)
    assert res.rate == pytest.approx(rd.blahut_arimoto([0.5, 0.3, 0.2], d,
                                                       target_distortion=0.1).rate, abs=1e-12)
    assert res.rate == pytest.approx(textbook_rate_at(np.array([0.5, 0.3, 0.2]), d, 0.1), abs=1e-6)
    # the least distortion is 0.3 * 0.2 = 0.06; at or below it, a clear error
    with pytest.raises(ValueError, match=r"target_distortion must be > the least possible"):
        src.rate_distortion(0.05, d)
    assert src.rate_distortion(10.0, d) == 0.0


def textbook_rate_at(p: np.ndarray, d: np.ndarray, D: float) -> float:
    """R(D) by bisecting beta in the textbook iteration (interpolating the two nearest points)."""
    lo, hi = 0.0, 200.0
    for _ in range(45):
        mid = 0.5 * (lo + hi)
        _, dist = textbook_ba(p, d, mid, iterations=2000)
        lo, hi = (mid, hi) if dist > D else (lo, mid)
    return textbook_ba(p, d, 0.5 * (lo + hi), iterations=2000)[0]


def test_sources_with_memory_refuse_and_offer_the_shannon_lower_bound() -> None:
    chain = sources.markov([[0.9, 0.1], [0.1, 0.9]])
    with pytest.raises(ValueError, match=r"has memory; R\(D\) of the process"):
        chain.rate_distortion(0.01)
    with pytest.raises(ValueError, match="has memory"):
        chain.distortion_rate(0.5)
    # binary symmetric Markov source: the bound is h(0.1) − h(D) (exact for small D, Gray 1971,
    # from memory)
    assert rd.hamming_lower_bound(chain, 0.01) == pytest.approx(h2(0.1) - h2(0.01), abs=1e-12)
    assert rd.hamming_lower_bound(chain, 0.6) == 0.0
    assert rd.hamming_lower_bound(sources.uniform(4), 0.1) == pytest.approx(
        uniform_hamming(4, 0.1), abs=1e-12)
    with pytest.raises(ValueError, match="needs a finite alphabet"):
        rd.hamming_lower_bound(sources.geometric(0.3), 0.1)


# --------------------------------------------------------------------------
# Gauss–Markov reverse water-filling


def quad_water_filling(rho: float, sigma: float, D: float) -> float:
    """R(D) from the defining integrals by scipy.integrate.quad and scipy.optimize.brentq.

    S(w) = σ²(1−ρ²)/(1−2ρ cos w+ρ²); D(θ) = (1/π)∫_0^π min(θ, S), R(θ) = (1/π)∫_0^π
    max(0, ½ log2(S/θ)) (reverse water-filling, Cover & Thomas ch. 10, from memory).
    """
    def spec(w: float) -> float:
        return sigma**2 * (1 - rho**2) / (1 - 2 * rho * math.cos(w) + rho**2)

    def edges(theta: float) -> list[float] | None:
        # where S(w) = θ, solved from the spectrum's formula: a breakpoint for quad
        if rho == 0.0:
            return None
        c = (1 + rho**2 - sigma**2 * (1 - rho**2) / theta) / (2 * rho)
        return [math.acos(c)] if -1.0 < c < 1.0 else None

    def dist(theta: float) -> float:
        return scipy.integrate.quad(lambda w: min(theta, spec(w)), 0, math.pi,
                                    points=edges(theta), limit=400, epsabs=1e-13,
                                    epsrel=1e-13)[0] / math.pi

    lo, hi = min(spec(0), spec(math.pi)), max(spec(0), spec(math.pi))
    if lo >= D:
        theta = D
    else:
        theta = scipy.optimize.brentq(lambda t: dist(t) - D, lo, hi, xtol=1e-15, rtol=1e-15)
    return scipy.integrate.quad(lambda w: max(0.0, 0.5 * math.log2(spec(w) / theta)), 0,
                                math.pi, points=edges(theta), limit=400, epsabs=1e-13,
                                epsrel=1e-13)[0] / math.pi


@pytest.mark.parametrize("rho", [0.0, 0.3, 0.9, 0.99, -0.7])
@pytest.mark.parametrize("frac", [0.02, 0.3, 0.7, 0.95])
def test_gauss_markov_against_quad(rho: float, frac: float) -> None:
    sigma = 1.5
    D = frac * sigma**2
    ours = sources.gauss_markov(rho, sigma).rate_distortion(D)
    assert ours == pytest.approx(quad_water_filling(rho, sigma, D), abs=1e-8)


@pytest.mark.parametrize("rho", [0.5, -0.5, 0.95])
def test_gauss_markov_closed_form_region(rho: float) -> None:
    src = sources.gauss_markov(rho, 2.0)
    limit = 4.0 * (1 - abs(rho)) / (1 + abs(rho))
    for D in (limit, 0.5 * limit, 1e-3 * limit):
        # ½ log2(σ²(1−ρ²)/D) (Berger 1971, from memory)
        assert src.rate_distortion(D) == pytest.approx(0.5 * math.log2(4.0 * (1 - rho**2) / D),
                                                       rel=1e-12)
    # continuity just above the limit, and below the memoryless Gaussian everywhere
    assert src.rate_distortion(limit * (1 + 1e-9)) == pytest.approx(
        src.rate_distortion(limit), abs=1e-7)
    for D in np.linspace(0.01, 3.99, 9):
        assert src.rate_distortion(float(D)) < sources.gaussian(2.0).rate_distortion(float(D))
    assert src.rate_distortion(4.0) == 0.0


def test_dilogarithm_identity_used_for_the_rate() -> None:
    # Σ a^k sin(kw)/k² (the Fourier series, summed directly) = Im Li2(a e^{iw}) = Im spence(1 − z)
    for a, w in ((0.3, 1.0), (0.9, 0.2), (0.99, 2.5)):
        k = np.arange(1, 20_000)
        direct = float(np.sum(a**k * np.sin(k * w) / k**2))
        via = float(scipy.special.spence(1 - a * complex(math.cos(w), math.sin(w))).imag)
        assert via == pytest.approx(direct, abs=1e-13)


# --------------------------------------------------------------------------
# curves and errors


def test_curve_in_both_directions() -> None:
    g = sources.gaussian(2.0)
    ds, rs = rd.curve(g, rates=[0.0, 1.0, 2.0])
    np.testing.assert_allclose(ds, [4.0, 1.0, 0.25], rtol=1e-15)
    np.testing.assert_array_equal(rs, [0.0, 1.0, 2.0])
    ds, rs = rd.curve(sources.laplacian(), distortions=[0.25, 0.5, 2.0])
    np.testing.assert_allclose(rs, [2.0, 1.0, 0.0], rtol=1e-15)
    with pytest.raises(TypeError, match="exactly one of rates and distortions"):
        rd.curve(g)
    with pytest.raises(TypeError, match="curve: source must be a source"):
        rd.curve(3, rates=[1.0])


@pytest.mark.parametrize(
    ("call", "exc", "text"),
    [
        (lambda: rd.blahut_arimoto([0.5, 0.5]), TypeError, "exactly one of slope"),
        (lambda: rd.blahut_arimoto([0.5, 0.5], slope=-1, target_distortion=0.1), TypeError,
         "exactly one of slope"),
        (lambda: rd.blahut_arimoto([0.5, 0.6], slope=-1), ValueError,
         "blahut_arimoto: pmf must be a pmf summing to 1"),
        (lambda: rd.blahut_arimoto([0.5, 0.5], slope=0.0), ValueError,
         "blahut_arimoto: slope must be a finite number < 0, got 0.0"),
        (lambda: rd.blahut_arimoto([0.5, 0.5], target_distortion=-0.1), ValueError,
         "target_distortion must be a finite number >= 0, got -0.1"),
        (lambda: rd.blahut_arimoto([0.5, 0.5], target_distortion=0.1, tol=0), ValueError,
         "tol must be a finite number > 0"),
        (lambda: rd.blahut_arimoto([0.5, 0.5], [[0, 1]], slope=-1), ValueError,
         "distortion must be a matrix with 2 rows"),
        (lambda: rd.blahut_arimoto([0.5, 0.5], [[0, 1], [1, -1]], slope=-1), ValueError,
         "distortion[1, 1] must be finite and >= 0, got -1.0"),
        (lambda: rd.blahut_arimoto([0.5, 0.5], "ab", slope=-1), TypeError,
         "distortion must be a 2-D array of numbers"),
        (lambda: sources.uniform(3).rate_distortion(-0.1), ValueError,
         "uniform(k=3).rate_distortion: D must be a finite number >= 0, got -0.1"),
        (lambda: sources.uniform(3).rate_distortion(None), TypeError, "D must be a number"),
        (lambda: sources.uniform(3).rate_distortion(0.1, "mse"), ValueError,
         "distortion 'mse' needs a real-valued source"),
        (lambda: sources.uniform(3).rate_distortion(0.1, "l1"), ValueError,
         "distortion must be one of 'mse', 'abs', 'hamming'"),
        (lambda: sources.uniform(3).rate_distortion(0.1, np.eye(2)), ValueError,
         "must be a matrix with 3 rows (one per source symbol)"),
        (lambda: sources.geometric(0.3).rate_distortion(0.1, np.eye(2)), ValueError,
         "a distortion matrix needs a finite alphabet"),
        (lambda: sources.bernoulli(0.3).distortion_rate(-1), ValueError,
         "bernoulli(p=0.3).distortion_rate: R must be a finite number >= 0, got -1"),
        (lambda: sources.uniform(3).distortion_rate(math.nan), ValueError, "R must be a finite"),
    ],
)
def test_bad_arguments(call, exc, text) -> None:
    with pytest.raises(exc) as info:
        call()
    assert text in str(info.value)


def test_dense_matrix_path_agrees_with_the_hamming_path_on_a_skewed_pmf() -> None:
    # the dense path has no closed-form start: it must still meet the Hamming answer, which is
    # itself checked against the closed forms above
    _, p = sources.zipf(16, 1.3).pmf_table()
    for D in (0.02, 0.2, 0.5):
        dense = rd.blahut_arimoto(p, 1.0 - np.eye(16), target_distortion=D)
        fast = rd.blahut_arimoto(p, target_distortion=D)
        assert dense.converged
        assert fast.converged
        assert dense.rate == pytest.approx(fast.rate, abs=1e-9)
        assert dense.rate_lower <= fast.rate_upper + 1e-12
        assert fast.rate_lower <= dense.rate_upper + 1e-12


def test_a_small_step_budget_reports_unconverged_bounds_that_still_hold() -> None:
    p = np.array([0.5, 0.3, 0.2])
    d = np.array([[0.0, 1.0, 3.0], [1.0, 0.0, 1.0], [3.0, 1.0, 0.0]])
    exact = rd.blahut_arimoto(p, d, target_distortion=0.3)
    short = rd.blahut_arimoto(p, d, target_distortion=0.3, max_iterations=3)
    assert not short.converged
    assert short.rate_lower <= exact.rate + 1e-12
    assert exact.rate <= short.rate_upper + 1e-12
    assert exact.iterations > 3
