"""Figures that must be exact, not merely close: the Golomb and Rice parameters of a
geometric source decided by their published rules for every float p, and the entropy
and varentropy of Zipf sources whose mass sits almost all on one symbol.

References: the Gallager–van Voorhis rule (Gallager & van Voorhis 1975, from memory)
and the expected lengths of Golomb/Rice codes, evaluated in mpmath at 60–80 digits or
exactly with Fraction (every float is a dyadic rational, so θ = 1 − p is exact); Zipf
sums evaluated in mpmath at 50 digits.
"""

from __future__ import annotations

import math

import mpmath
import pytest

from pytest_ratefloor import codes, sources

# ---------------------------------------------------------------- Golomb and Rice


def mp_theta(p: float) -> mpmath.mpf:
    """θ = 1 − p in the current mpmath precision (exact while p's binary places fit)."""
    return 1 - mpmath.mpf(p)


def gvv_rule(p: float) -> int:
    """The Gallager–van Voorhis m (from memory: θ^m + θ^(m+1) ≤ 1 < θ^(m−1) + θ^m, i.e.
    m = ⌈ln(1+θ) / −ln θ⌉), at 80 digits; asserts the digits decide it."""
    with mpmath.workdps(80):
        theta = mp_theta(p)  # exact: 80 digits hold 266 bits, p ≥ 1e-19 needs < 120
        ratio = mpmath.log(1 + theta) / -mpmath.log(theta)
        nearest = mpmath.nint(ratio)
        assert abs(ratio - nearest) > mpmath.mpf(10) ** -60, p  # 80 digits decide
        return max(1, int(mpmath.ceil(ratio)))


def mp_golomb_length(theta: mpmath.mpf, m: int) -> mpmath.mpf:
    """Expected Golomb codeword length for P(x) = (1−θ) θ^x (from memory: unary quotient,
    E⌊X/m⌋ = θ^m/(1−θ^m); truncated-binary remainder with b = ⌈log2 m⌉ bits, one less for
    the 2^b − m smallest remainders, whose probability is (1 − θ^c)/(1 − θ^m))."""
    b = (m - 1).bit_length()
    c = 2**b - m
    tail = theta**m
    return 1 + tail / (1 - tail) + b - (1 - theta**c) / (1 - tail)


def rice_by_length(p: float, digits: int = 60) -> int:
    """The k whose Rice code (m = 2**k) has the least expected length, at ``digits``
    digits, over every k up to well past the optimum; asserts the best is strict."""
    with mpmath.workdps(digits):
        theta = mp_theta(p)
        top = max(4, int(math.log2(1.0 / p)) + 4)
        lengths = [mp_golomb_length(theta, 2**k) for k in range(top)]
        best = min(range(top), key=lambda k: lengths[k])
        others = [lengths[k] for k in range(top) if k != best]
        assert min(others) - lengths[best] > mpmath.mpf(10) ** (10 - digits), p
        return best


def test_golomb_parameter_where_floats_misplaced_the_tie() -> None:
    # p = 1e-9: the rule at 80 digits gives 693147180; so do exact expected lengths
    # (the float formula gave 693147179)
    p = 1e-9
    assert gvv_rule(p) == 693147180
    with mpmath.workdps(80):
        theta = mp_theta(p)
        lengths = {m: mp_golomb_length(theta, m) for m in (693147179, 693147180, 693147181)}
    assert min(lengths, key=lambda m: lengths[m]) == 693147180
    assert lengths[693147179] - lengths[693147180] > mpmath.mpf(10) ** -20
    assert lengths[693147181] - lengths[693147180] > mpmath.mpf(10) ** -20
    assert codes.golomb_parameter(p) == 693147180


def test_rice_parameter_at_the_golden_ratio() -> None:
    # θ = 1 − p within 1e-17 of 1/φ, where Rice k = 0 and k = 1 nearly tie; expected
    # lengths at 60 digits put k = 1 ahead (the float comparison picked 0)
    p = 0.3819660112501051
    with mpmath.workdps(60):
        theta = mp_theta(p)
        l0, l1 = mp_golomb_length(theta, 1), mp_golomb_length(theta, 2)
        assert 0 < l0 - l1 < mpmath.mpf(10) ** -15
    assert rice_by_length(p) == 1
    assert codes.rice_parameter(p) == 1


SMALL_PS = [10.0 ** (-12 + 7 * i / 399) for i in range(400)]  # log-spaced in [1e-12, 1e-5]


def test_golomb_parameter_sweep_of_small_p() -> None:
    wrong = [(p, codes.golomb_parameter(p), gvv_rule(p)) for p in SMALL_PS]
    wrong = [row for row in wrong if row[1] != row[2]]
    assert wrong == []


def test_rice_parameter_sweep_of_small_p() -> None:
    # reference: least expected length over k at 60 digits (Rice lengths, from memory)
    wrong = [(p, codes.rice_parameter(p), rice_by_length(p)) for p in SMALL_PS]
    wrong = [row for row in wrong if row[1] != row[2]]
    assert wrong == []


def golomb_switch(m: int) -> mpmath.mpf:
    """The p where the rule switches between m and m+1 (θ^m + θ^(m+1) = 1), at 80 digits."""
    with mpmath.workdps(80):
        theta = mpmath.findroot(lambda t: m * mpmath.log(t) + mpmath.log(1 + t), 1 - 0.69 / m)
        return 1 - theta


def float_neighbours(x: float, reach: int = 4) -> list[float]:
    out = [x]
    up = down = x
    for _ in range(reach):
        up, down = math.nextafter(up, 2.0), math.nextafter(down, 0.0)
        out += [up, down]
    return sorted(out)


@pytest.mark.parametrize("m", [1, 2, 3, 7, 100, 12345, 10**6, 693147180, 10**12, 2**40 + 3])
def test_golomb_parameter_at_the_switch_points(m: int) -> None:
    # floats on both sides of θ^m + θ^(m+1) = 1: the float ratio is within a few ulps
    # of the integer m there, so only exact arithmetic can decide
    switch = golomb_switch(m)
    ps = float_neighbours(float(switch))
    got = [codes.golomb_parameter(p) for p in ps]
    assert got == [gvv_rule(p) for p in ps]
    assert set(got) <= {m, m + 1}
    assert len(set(got)) == 2


@pytest.mark.parametrize("k", [0, 1, 2, 5, 11, 20, 30, 39])
def test_rice_parameter_at_the_switch_points(k: int) -> None:
    # Rice k and k+1 tie where θ^(2^k) = 1/φ (from the lengths above: L(k+1) − L(k) =
    # (1 − x − x²)/(1 − x²) with x = θ^(2^k)); floats on both sides of it
    with mpmath.workdps(80):
        switch = 1 - mpmath.power(mpmath.phi, -mpmath.mpf(2) ** -k)
    ps = float_neighbours(float(switch))
    got = [codes.rice_parameter(p) for p in ps]
    digits = 60 if k < 30 else 80
    assert got == [rice_by_length(p, digits) for p in ps]
    assert set(got) == {k, k + 1}


def test_parameters_agree_with_the_rules_for_tiny_p() -> None:
    # m up to ~2**62: the float ratio is off by thousands, exact arithmetic decides
    for p in (1e-13, 3.3e-15, 1e-16, 7.7e-18, 1e-18, 1.2e-19):
        assert codes.golomb_parameter(p) == gvv_rule(p)
        with mpmath.workdps(80):
            ratio = mpmath.log(mpmath.phi) / -mpmath.log(mp_theta(p))
        assert codes.rice_parameter(p) == int(mpmath.floor(ratio)).bit_length()  # 2^k > ratio


# ---------------------------------------------------------------- Zipf figures


def mp_zipf_figures(k: int, s: float) -> tuple[mpmath.mpf, mpmath.mpf]:
    """(H, varentropy) of P(i) ∝ i^-s, i = 1..k, at 50 digits: direct sums over the pmf,
    with log Z = log1p(tail) so that a tail far below 10^-50 still counts."""
    with mpmath.workdps(50):
        ss = mpmath.mpf(s)
        tail = mpmath.fsum(mpmath.mpf(i) ** -ss for i in range(2, k + 1))
        log2_z = mpmath.log1p(tail) / mpmath.log(2)
        z = 1 + tail
        probs = [mpmath.mpf(i) ** -ss / z for i in range(1, k + 1)]
        info = [log2_z + ss * mpmath.log(i, 2) for i in range(1, k + 1)]
        h = mpmath.fsum(p * v for p, v in zip(probs, info))
        var = mpmath.fsum(p * (v - h) ** 2 for p, v in zip(probs, info))
        return h, var


@pytest.mark.parametrize(
    ("k", "s"), [(1000, 60.0), (10, 40.0), (256, 1.1), (2, 100.0), (3, 700.0), (64, 2.0)]
)
def test_zipf_entropy_keeps_its_digits_when_it_is_tiny(k: int, s: float) -> None:
    h, var = mp_zipf_figures(k, s)
    src = sources.zipf(k, s)
    assert src.entropy == pytest.approx(float(h), rel=1e-13, abs=0)
    assert src.varentropy == pytest.approx(float(var), rel=1e-13, abs=0)
    # symbol 0 carries log2 Z bits, tiny but not zero
    with mpmath.workdps(50):
        tail = mpmath.fsum(mpmath.mpf(i) ** -mpmath.mpf(s) for i in range(2, k + 1))
        first = mpmath.log1p(tail) / mpmath.log(2)
    assert src.self_information([0])[0] == pytest.approx(float(first), rel=1e-13, abs=0)


def test_zipf_figures_beyond_the_float_range_are_zero() -> None:
    # H ≈ 2^-s (s + 1/ln 2) and s² 2^-s (the two-symbol case at 50 digits) round to 0
    src = sources.zipf(5, 1500.0)
    assert src.entropy == 0.0
    assert src.varentropy == 0.0
    h, var = mp_zipf_figures(5, 1500.0)
    assert 0 < h < mpmath.mpf(2) ** -1075
    assert 0 < var < mpmath.mpf(2) ** -1075
    assert sources.zipf(1, 3.0).entropy == 0.0
    assert sources.zipf(256, 0.0).entropy == 8.0  # uniform: log2 256 exactly
