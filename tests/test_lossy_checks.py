"""Lossy checks: rate, distortion and R(D); the impossible point; misbehaviour; curves.

Outside references, named beside each check: scipy (normal CDF, quadrature,
the multivariate normal density, entropy), closed forms (Gish & Pierce 1968,
from memory; Cover & Thomas ch. 10, from memory; Kostina & Verdú 2012, from
memory), and numpy computations of the figures from the raw sample.
"""

from __future__ import annotations

import json
import math
import re
import sys
from pathlib import Path

import numpy as np
import pytest
from bitarray import bitarray
from scipy import integrate, stats

from pytest_ratefloor import sources
from pytest_ratefloor.errors import (
    CodecMisbehaviour,
    DistortionFailure,
    ErrorBoundFailure,
    ImpossibleRate,
    LossyRateFailure,
)
from pytest_ratefloor.lossy import (
    DECIBELS_PER_BIT,
    LossyCodec,
    LossyMeasurement,
    assert_error_bound,
    assert_lossy,
    converse_bound,
    lossy_curve,
    measure_lossy,
    resolve_distortion,
    worst_window,
)
from pytest_ratefloor.lossy.distortion import LossySource

sys.path.insert(0, str(Path(__file__).parent))
import lossy_coders as coders

GAUSS = sources.gaussian(1.0)
#: ½·log2(πe/6): the gap of an entropy-coded uniform quantizer at high rate
#: (Gish & Pierce 1968, from memory).
GISH_PIERCE = 0.5 * math.log2(math.pi * math.e / 6.0)


# -- the test coders themselves ---------------------------------------------------------


def test_gish_pierce_constant() -> None:
    # ½·log2(πe/6) = 0.2546 bits (the 1.53 dB "space-filling loss", from memory)
    assert pytest.approx(0.2546, abs=1e-4) == GISH_PIERCE
    assert 10 * math.log10(math.pi * math.e / 6) == pytest.approx(1.533, abs=1e-3)


@pytest.mark.parametrize("n", [20_000, 100_000])
def test_rans_reaches_the_empirical_entropy_and_decodes(n: int) -> None:
    step = 0.1
    k, probs = coders.gaussian_index_model(step, 1.0)
    assert probs.sum() == pytest.approx(1.0, abs=1e-12)
    coder = coders.StaticRans(coders.quantized_frequencies(probs))
    x = GAUSS.sample(n, seed=5)
    idx = np.clip(np.round(x / step), -k, k).astype(np.int64) + k
    data = coder.encode(idx)
    assert np.array_equal(coder.decode(data, n), idx)
    counts = np.bincount(idx)
    empirical = stats.entropy(counts[counts > 0], base=2)  # scipy's plug-in entropy
    assert 8 * len(data) / n == pytest.approx(empirical, abs=0.01)
    assert 8 * len(data) == pytest.approx(coder.ideal_bits(idx), abs=64)


# -- figures ------------------------------------------------------------------------------


@pytest.mark.parametrize("step", [0.05, 0.1, 0.2])
def test_entropy_coded_quantizer_sits_gish_pierce_above_rd(step: float) -> None:
    m = measure_lossy(coders.entropy_coded_quantizer(step), GAUSS, n=40_000, seed=1)
    # the expected gap of this very quantizer at this step, from scipy's normal law:
    # H(index) − ½log2(σ²/E(x − x̂)²), the quadrature done cell by cell
    k, probs = coders.gaussian_index_model(step, 1.0)
    cells = np.arange(-k, k + 1) * step
    mse = sum(integrate.quad(lambda t, c=c: (t - c) ** 2 * stats.norm.pdf(t),
                             c - step / 2, c + step / 2)[0] for c in cells[1:-1])
    expected_gap = stats.entropy(probs, base=2) - 0.5 * math.log2(1.0 / mse)
    assert expected_gap == pytest.approx(GISH_PIERCE, abs=0.02)
    assert m.gap == pytest.approx(GISH_PIERCE, abs=0.03)
    assert m.gap == pytest.approx(expected_gap, abs=0.02)
    # Δ²/12 (Bennett 1948, from memory)
    assert m.distortion == pytest.approx(step**2 / 12, rel=0.03)


def test_figures_against_closed_forms() -> None:
    codec = coders.fixed_rate_quantizer(3)
    m = measure_lossy(codec, GAUSS, n=5000, seed=2)
    x = GAUSS.sample(5000, seed=2)
    step = 8.0 / 8
    idx = np.clip(np.floor(x / step + 4), 0, 7)
    recon = (idx - 4 + 0.5) * step
    d = float(np.mean((x - recon) ** 2))
    assert m.bits == 3 * 5000
    assert m.rate == 3.0
    assert m.distortion == pytest.approx(d, rel=1e-12)
    assert m.rd_floor == pytest.approx(0.5 * math.log2(1.0 / d), rel=1e-12)  # Cover & Thomas 10.3
    assert m.gap == pytest.approx(3.0 - 0.5 * math.log2(1.0 / d), rel=1e-12)
    assert m.snr_db == pytest.approx(10 * math.log10(1.0 / d), rel=1e-12)
    # 6.02 dB per bit is 20·log10(2); at the bound SNR = 10·log10(2^(2R))
    assert pytest.approx(6.0206, abs=1e-4) == DECIBELS_PER_BIT
    assert m.snr_db is not None
    assert m.snr_gap_db == pytest.approx(10 * math.log10(2 ** (2 * 3.0)) - m.snr_db, rel=1e-12)
    assert m.max_abs_error == pytest.approx(float(np.max(np.abs(x - recon))), rel=1e-12)


def test_variance_of_the_source_sets_the_snr() -> None:
    src = sources.gaussian(3.0)
    m = measure_lossy(coders.send_nothing(), src, n=2000, seed=0)
    x = src.sample(2000, seed=0)
    assert m.variance == 9.0
    assert m.snr_db == pytest.approx(10 * math.log10(9.0 / float(np.mean(x**2))), rel=1e-12)


def test_laplacian_absolute_error_figures() -> None:
    src = sources.laplacian(2.0)
    step = 0.5
    codec = LossyCodec(lambda x: np.round(x / step).astype(np.int16).tobytes(),
                       lambda d, n: np.frombuffer(d, np.int16) * step, name="uq16")
    m = measure_lossy(codec, src, n=4000, seed=3)
    x = src.sample(4000, seed=3)
    d = float(np.mean(np.abs(x - np.round(x / step) * step)))
    assert m.measure == "abs"
    assert m.distortion == pytest.approx(d, rel=1e-12)
    assert m.rd_floor == pytest.approx(math.log2(2.0 / d), rel=1e-12)  # Berger 1971, from memory
    assert m.snr_db is None
    assert m.snr_gap_db is None


def test_bernoulli_hamming_figures() -> None:
    src = sources.bernoulli(0.3)

    def encode(x: np.ndarray) -> bitarray:  # keep every other symbol; the rest guessed 0
        out = bitarray()
        out.pack(x[::2].astype(np.uint8).tobytes())
        return out

    def decode(data: bitarray, n: int) -> np.ndarray:
        out = np.zeros(n, dtype=np.int64)
        out[::2] = np.frombuffer(data.unpack(), dtype=np.uint8)
        return out

    m = measure_lossy(LossyCodec(encode, decode, name="half"), src, n=3000, seed=4)
    x = src.sample(3000, seed=4)
    d = float(np.mean(x[1::2] != 0)) / 2
    assert m.distortion == pytest.approx(d, rel=1e-12)
    h = stats.entropy([0.3, 0.7], base=2) - stats.entropy([d, 1 - d], base=2)  # h(p) − h(D)
    assert m.rd_floor == pytest.approx(h, abs=1e-6)
    assert m.rate == 0.5


def test_worst_window_names_the_planted_region() -> None:
    per = np.full(10_000, 0.01)
    per[6000:6300] = 1.0
    start, stop, mean = worst_window(per)
    assert stop - start == 156  # 10000 // 64
    assert start >= 6000
    assert stop <= 6300
    assert mean == pytest.approx(1.0)
    assert worst_window(np.ones(10))[:2] == (0, 10)


# -- the impossible point -----------------------------------------------------------------


@pytest.mark.parametrize("source", [
    sources.gaussian(1.0), sources.laplacian(0.5), sources.gauss_markov(0.9, 2.0),
    sources.bernoulli(0.2), sources.uniform(5),
], ids=str)
def test_cheating_codec_is_impossible(source: LossySource) -> None:
    with pytest.raises(ImpossibleRate, match="outside the stream") as info:
        measure_lossy(coders.cheat(), source, n=500, seed=0)
    assert "0 bits" in str(info.value)


def test_correct_codecs_are_never_impossible_over_seeds() -> None:
    # Codecs at or near R(D) on some samples: sending nothing (rate 0 < R(D̂) on
    # about half the samples), one sign bit, a fixed-rate quantizer. The benchmark
    # runs 300+ seeds at larger n (benchmarks/lossy_false_alarms.py).
    cases = [(coders.send_nothing(), GAUSS), (coders.sign_quantizer(), GAUSS),
             (coders.fixed_rate_quantizer(2), GAUSS),
             (coders.send_nothing(), sources.laplacian(1.0)),
             (coders.send_nothing(), sources.gauss_markov(0.8))]
    below_rd = 0
    for codec, src in cases:
        for seed in range(25):
            m = measure_lossy(codec, src, n=256, seed=seed, isolate=False)
            assert m.converse_bits is not None
            assert m.bits >= m.converse_bits
            below_rd += m.gap is not None and m.gap < 0
    assert below_rd > 10  # the naive rule "rate < R(D̂)" would have fired this often


def test_gaussian_tilted_information_meets_the_csiszar_condition() -> None:
    # For Q = N(0, σ²−D), λ = 1/(2D) nats: E_X exp(f(X) − λ(X − y)²) = 1 for every y
    # (Csiszár 1974 / Kostina & Verdú 2012, from memory), by scipy quadrature.
    sigma2, dist = 1.0, 0.2
    def f(x: float) -> float:
        return 0.5 * math.log(sigma2 / dist) + x * x / (2 * sigma2)
    for y in (-1.5, 0.0, 0.7):
        value = integrate.quad(
            lambda x, y=y: stats.norm.pdf(x) * math.exp(f(x) - (x - y) ** 2 / (2 * dist)),
            -np.inf, np.inf)[0]
        assert value == pytest.approx(1.0, rel=1e-8)


def test_laplacian_tilted_information_meets_the_csiszar_condition() -> None:
    b, dist = 1.0, 0.3
    def f(x: float) -> float:
        return math.log(b / dist) + abs(x) / b - 1.0  # λD = 1 taken out
    pdf = stats.laplace(scale=b).pdf
    for y in (-2.0, 0.0, 0.4):
        value = integrate.quad(lambda x, y=y: pdf(x) * math.exp(f(x) + 1.0 - abs(x - y) / dist),
                               -60.0, 60.0, points=sorted({0.0, y}), limit=200)[0]
        assert value == pytest.approx(1.0, rel=1e-7)


def test_gauss_markov_tilted_information_against_scipy_density() -> None:
    src = sources.gauss_markov(0.6, 1.5)
    n = 40
    x = src.sample(n, seed=9)
    dist = 0.2  # below σ²(1−ρ)/(1+ρ) = 0.5625
    per = np.full(n, dist)
    conv = converse_bound(src, resolve_distortion("mse", src), x, per, bits=100, resolution=0)
    assert conv is not None
    cov = 1.5**2 * 0.6 ** np.abs(np.subtract.outer(np.arange(n), np.arange(n)))
    logpdf = stats.multivariate_normal(np.zeros(n), cov).logpdf(x)
    # T = −log2 φ_Σ(x) − (n/2)·log2(2πD) − (log2e/2)·ΣD/D at D = D̂
    expected = -logpdf / math.log(2) - n / 2 * math.log2(2 * math.pi * dist) - n / (2 * math.log(2))
    assert conv.tilted_bits == pytest.approx(expected, abs=0.01)


def test_bernoulli_tilted_information_is_information_minus_h_of_d() -> None:
    # binary memoryless source: j(x, D) = ı(x) − h(D) (Kostina & Verdú 2012, from memory)
    src = sources.bernoulli(0.25)
    n = 20_000
    x = src.sample(n, seed=3)
    dhat = 0.05
    per = np.zeros(n)
    per[: int(dhat * n)] = 1.0
    conv = converse_bound(src, resolve_distortion("hamming", src), x, per, bits=10)
    assert conv is not None
    info = float(np.sum(np.where(x == 1, -math.log2(0.25), -math.log2(0.75))))
    expected = info - n * stats.entropy([dhat, 1 - dhat], base=2)
    assert conv.tilted_bits <= expected + 1e-6
    assert conv.tilted_bits == pytest.approx(expected, abs=1.0)  # grid loss under a bit
    assert conv.slope == pytest.approx(math.log2((1 - dhat) / dhat), rel=0.02)


def test_converse_margin_is_documented_size() -> None:
    m = measure_lossy(coders.fixed_rate_quantizer(2), GAUSS, n=10_000, seed=0)
    assert m.converse_bits is not None
    conv = converse_bound(GAUSS, resolve_distortion("mse", GAUSS), GAUSS.sample(10_000),
                          np.full(10_000, m.distortion), m.bits)
    assert conv is not None
    expected = 32 + 2 + math.log2((m.bits + 1) * (m.bits + 2)) + math.log2(conv.grid_size)
    assert conv.margin_bits == pytest.approx(expected)
    assert conv.grid_size == math.ceil(128 * math.log(2) / math.log1p(1 / 100)) + 1


def test_no_converse_for_sources_without_one() -> None:
    chain = sources.markov([[0.9, 0.1], [0.2, 0.8]])
    m = measure_lossy(coders.cheat(), chain, n=300, seed=0)
    assert m.converse_bits is None


# -- assertions ---------------------------------------------------------------------------


def test_assert_lossy_passes_and_fails_with_the_worst_region() -> None:
    codec = coders.entropy_coded_quantizer(0.1)
    m = assert_lossy(codec, GAUSS, n=20_000, seed=0, max_gap=0.3, max_distortion=0.001)
    assert isinstance(m, LossyMeasurement)
    with pytest.raises(LossyRateFailure) as info:
        assert_lossy(codec, GAUSS, n=20_000, seed=0, max_gap=0.2)
    text = str(info.value)
    assert "allowed gap 0.2" in text
    assert re.search(r"worst-coded samples \[\d+:\d+\]: mean distortion", text)
    assert f"rate {m.rate:.6g} bits/sample" in text
    with pytest.raises(DistortionFailure, match=r"exceeds the allowed 0\.0005"):
        assert_lossy(codec, GAUSS, n=20_000, seed=0, max_distortion=0.0005)


def test_assert_error_bound_names_the_index() -> None:
    eps = 0.05
    good = coders.entropy_coded_quantizer(2 * eps)  # |x − x̂| ≤ Δ/2 inside the range
    assert assert_error_bound(good, GAUSS, max_abs=eps, n=5000).max_abs_error <= eps
    coarse = coders.entropy_coded_quantizer(2.5 * eps)
    x = GAUSS.sample(5000, seed=0)
    err = np.abs(x - np.round(x / (2.5 * eps)) * 2.5 * eps)
    first = int(np.flatnonzero(err > eps)[0])
    with pytest.raises(ErrorBoundFailure) as info:
        assert_error_bound(coarse, GAUSS, max_abs=eps, n=5000)
    text = str(info.value)
    assert f"first at index {first}: value {x[first]!r}" in text
    assert f"{int(np.sum(err > eps))} of 5000 reconstructed samples" in text


# -- misbehaviour ---------------------------------------------------------------------------


def _encode_f64(x: np.ndarray) -> bytes:
    return np.asarray(x, dtype=np.float32).tobytes()


def _decode_f64(data: bytes, n: int) -> np.ndarray:
    return np.frombuffer(data, dtype=np.float32).astype(np.float64)


def _raise(exc: Exception):  # type: ignore[no-untyped-def]
    def fn(*args: object) -> object:
        raise exc
    return fn


def _mutating(x: np.ndarray) -> bytes:
    x[0] = 99.0
    return _encode_f64(x)


_counter = iter(range(10**9))


@pytest.mark.parametrize(("encode", "decode", "pattern"), [
    (_raise(RuntimeError("boom")), _decode_f64, "the encoder raised RuntimeError: boom"),
    (_encode_f64, _raise(KeyError("k")), "the decoder raised KeyError"),
    (lambda x: "text", _decode_f64, "encoder returned str"),
    (_encode_f64, lambda d, n: None, "decoder returned NoneType"),
    (_encode_f64, lambda d, n: np.zeros(n - 1), r"decoder returned 99 samples; expected n=100"),
    (_encode_f64, lambda d, n: np.full(n, np.nan), r"non-finite reconstruction: nan at index 0"),
    (_encode_f64, lambda d, n: np.zeros((n, 1)), r"shape \(100, 1\)"),
    (_encode_f64, lambda d, n: ["a"] * n, "expected real numbers"),
    (_mutating, _decode_f64, "writes into its input array"),
    (lambda x: _encode_f64(x) + bytes([next(_counter) % 256]),
     lambda d, n: _decode_f64(d[: 4 * n], n), "not deterministic"),
])
def test_misbehaviour_is_reported(encode, decode, pattern) -> None:  # type: ignore[no-untyped-def]
    codec = LossyCodec(encode, decode, name="bad")
    with pytest.raises(CodecMisbehaviour, match=pattern) as info:
        measure_lossy(codec, GAUSS, n=100, seed=3)
    assert "codec 'bad' misbehaved" in str(info.value)
    assert "(source gaussian(sigma=1.0), n=100, seed=3)" in str(info.value)


def test_finite_alphabet_reconstruction_must_be_integers_and_in_the_matrix() -> None:
    src = sources.uniform(3)
    floats = LossyCodec(lambda x: b"", lambda d, n: np.zeros(n) + 0.5, name="f")
    with pytest.raises(CodecMisbehaviour, match="floats"):
        measure_lossy(floats, src, n=50)
    matrix = [[0, 1], [1, 0], [0.5, 0.5]]
    wide = LossyCodec(lambda x: b"", lambda d, n: np.full(n, 2), name="w")
    with pytest.raises(CodecMisbehaviour, match="no column in the matrix 3x2"):
        measure_lossy(wide, src, n=50, distortion=matrix)


def test_matrix_distortion_values() -> None:
    src = sources.uniform(3)
    matrix = np.array([[0.0, 1.0], [1.0, 0.0], [0.5, 0.5]])
    codec = LossyCodec(lambda x: (x == 1).astype(np.uint8).tobytes(),
                       lambda d, n: np.frombuffer(d, np.uint8).astype(np.int64), name="m")
    m = measure_lossy(codec, src, n=600, seed=1, distortion=matrix)
    x = src.sample(600, seed=1)
    assert m.distortion == pytest.approx(float(np.mean(matrix[x, (x == 1).astype(int)])))
    assert m.measure == "matrix 3x2"


# -- arguments --------------------------------------------------------------------------------


def test_bad_arguments() -> None:
    with pytest.raises(TypeError, match="LossyCodec encode must be callable, got 3"):
        LossyCodec(3, _decode_f64)  # type: ignore[arg-type]
    with pytest.raises(TypeError, match="codec version must be a string or None, got 1"):
        LossyCodec(_encode_f64, _decode_f64, version=1)  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="codec name must be a non-empty string"):
        LossyCodec(_encode_f64, _decode_f64, name=" ")
    codec = LossyCodec(_encode_f64, _decode_f64)
    assert codec.name.endswith("_encode_f64")
    with pytest.raises(TypeError, match="codec must be a LossyCodec"):
        measure_lossy((_encode_f64, _decode_f64), GAUSS)  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="n must be an integer >= 1, got 0"):
        measure_lossy(codec, GAUSS, n=0)
    with pytest.raises(ValueError, match="distortion must be one of 'mse', 'abs', 'hamming'"):
        measure_lossy(codec, GAUSS, n=10, distortion="l2")
    with pytest.raises(ValueError, match="max_gap must be a finite number >= 0, got -1"):
        assert_lossy(codec, GAUSS, n=10, max_gap=-1)
    with pytest.raises(ValueError, match="max_abs must be a finite number >= 0, got nan"):
        assert_error_bound(codec, GAUSS, max_abs=float("nan"), n=10)
    with pytest.raises(ValueError, match="distortion matrix must be one row per alphabet symbol"):
        measure_lossy(codec, sources.uniform(3), n=10, distortion=[[0, 1], [1, 0]])
    with pytest.raises(TypeError, match="isolate must be True or False"):
        measure_lossy(codec, GAUSS, n=10, isolate=1)  # type: ignore[arg-type]


def test_record_round_trip_through_json() -> None:
    m = measure_lossy(coders.fixed_rate_quantizer(2), GAUSS, n=1000, seed=7)
    back = LossyMeasurement.from_record(json.loads(json.dumps(m.to_record())))
    assert back.bits == m.bits
    assert back.key == m.key == ("fixed-rate(2 bits)", "gaussian(sigma=1.0)", 1000, 7)
    assert back.distortion == pytest.approx(m.distortion, rel=1e-11)
    assert back.converse_bits == pytest.approx(m.converse_bits, rel=1e-11)
    assert LossyMeasurement.from_record(back.to_record()) == back  # stable once rounded
    exact = LossyCodec(lambda x: x.astype(np.float64).tobytes(),
                       lambda d, n: np.frombuffer(d, np.float64), name="raw")
    m_exact = measure_lossy(exact, GAUSS, n=10, seed=0)
    assert m_exact.rd_floor == math.inf
    assert m_exact.to_record()["rd_floor"] == "inf"
    assert LossyMeasurement.from_record(m_exact.to_record()).rd_floor == math.inf
    record = m.to_record()
    record["bits"] = -1
    with pytest.raises(ValueError, match="lossy record: bits must be an integer >= 0, got -1"):
        LossyMeasurement.from_record(record)
    del record["bits"]
    with pytest.raises(ValueError, match="with the field 'bits'"):
        LossyMeasurement.from_record(record)


# -- curves -------------------------------------------------------------------------------------


def test_lossy_curve_points_and_reference() -> None:
    curve = lossy_curve(coders.fixed_rate_quantizer, GAUSS, [1, 2, 3, 4], n=4000, seed=2,
                        reference=True)
    rates = [p.rate for p in curve.points]
    dists = [p.distortion for p in curve.points]
    assert rates == [1.0, 2.0, 3.0, 4.0]
    assert dists == sorted(dists, reverse=True)
    assert all(p.gap is not None and p.gap > 0 for p in curve.points)
    assert len(curve.reference) == 64
    for point in curve.reference:  # Cover & Thomas 10.3: R(D) = ½log2(σ²/D) below σ²
        assert point.rate == pytest.approx(max(0.0, 0.5 * math.log2(1.0 / point.distortion)))
    with pytest.raises(TypeError, match=r"factory\(1\) must be a LossyCodec"):
        lossy_curve(lambda q: None, GAUSS, [1], n=10)  # type: ignore[arg-type,return-value]
    with pytest.raises(ValueError, match="qualities must be a non-empty sequence"):
        lossy_curve(coders.fixed_rate_quantizer, GAUSS, [], n=10)


def test_public_names() -> None:
    import pytest_ratefloor as prf
    from pytest_ratefloor import errors

    assert prf.LossyCodec is LossyCodec
    assert prf.measure_lossy is measure_lossy
    assert prf.assert_lossy is assert_lossy
    assert prf.assert_error_bound is assert_error_bound
    assert prf.lossy_curve is lossy_curve
    assert prf.LossyMeasurement is LossyMeasurement
    for failure in (prf.LossyRateFailure, prf.DistortionFailure, prf.ErrorBoundFailure):
        assert issubclass(failure, errors.RateFloorFailure)
        assert issubclass(failure, AssertionError)


def _raw64() -> LossyCodec:
    return LossyCodec(lambda x: np.asarray(x, dtype=np.float64).tobytes(),
                      lambda d, n: np.frombuffer(d, np.float64), name="raw64")


@pytest.mark.parametrize("source", [
    sources.gaussian(1.0), sources.laplacian(1.0), sources.gauss_markov(0.5),
], ids=str)
def test_exact_copies_of_the_drawn_sample_are_possible(source: LossySource) -> None:
    # A drawn real sample has finite precision: 64 bits/sample reproduce it exactly.
    # The continuous model alone (resolution 0) would call that impossible.
    m = measure_lossy(_raw64(), source, n=2000, seed=1, isolate=False)
    assert m.distortion == 0.0
    assert m.rd_floor == math.inf
    x = source.sample(2000, seed=1)
    measure = resolve_distortion(None, source)
    exact = converse_bound(source, measure, x, np.zeros(2000), m.bits, resolution=0)
    assert exact is not None
    assert m.bits < exact.limit_bits


def test_gaussian_tilted_information_against_scipy_density() -> None:
    n, dist = 500, 0.1
    x = GAUSS.sample(n, seed=2)
    conv = converse_bound(GAUSS, resolve_distortion("mse", GAUSS), x, np.full(n, dist), 10,
                          resolution=0)
    assert conv is not None
    info = -float(np.sum(stats.norm.logpdf(x))) / math.log(2)
    expected = info - n / 2 * math.log2(2 * math.pi * dist) - n / (2 * math.log(2))
    assert conv.tilted_bits == pytest.approx(expected, abs=0.5)  # off-grid loss < ½ bit
    assert conv.tilted_bits <= expected + 1e-6


def test_codec_that_ends_the_process_is_misbehaviour() -> None:
    import os

    def encode(x: np.ndarray) -> bytes:
        os._exit(0)

    with pytest.raises(CodecMisbehaviour):
        measure_lossy(LossyCodec(encode, _decode_f64, name="quitter"), GAUSS, n=10)


def test_uniform_tilted_information_is_the_closed_form_rd() -> None:
    # equiprobable k-ary source, Hamming: j(x, D) = log2 k − h(D) − D·log2(k−1), the same
    # for every x (Kostina & Verdú 2012, from memory; R(D) of Cover & Thomas problem 10)
    k, n, dhat = 5, 10_000, 0.1
    src = sources.uniform(k)
    x = src.sample(n, seed=2)
    per = np.zeros(n)
    per[: int(dhat * n)] = 1.0
    hamming = converse_bound(src, resolve_distortion("hamming", src), x, per, bits=10)
    as_matrix = converse_bound(src, resolve_distortion(1.0 - np.eye(k), src), x, per, bits=10)
    assert hamming is not None
    assert as_matrix is not None
    expected = n * (math.log2(k) - stats.entropy([dhat, 1 - dhat], base=2)
                    - dhat * math.log2(k - 1))
    assert hamming.tilted_bits == pytest.approx(expected, abs=1.0)
    assert hamming.tilted_bits <= expected + 1e-6
    assert as_matrix.tilted_bits == pytest.approx(hamming.tilted_bits, abs=1e-6)
