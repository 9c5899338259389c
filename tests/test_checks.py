"""Tests of the round-trip and rate checks (pytest_ratefloor.checks) on real and broken codecs."""

from __future__ import annotations

import bz2
import hashlib
import itertools
import lzma
import math
import re
import zlib

import numpy as np
import pytest
from bitarray import bitarray
from bitarray.util import huffman_code

from pytest_ratefloor import sources
from pytest_ratefloor.checks import (
    DEFAULT_REL,
    assert_rate,
    assert_roundtrip,
    check,
    edge_case_inputs,
    elias_delta_length,
    impossible_margin,
    measure,
    sample_fingerprint,
    tolerance,
)
from pytest_ratefloor.codecs import ByteCodec, LayoutError, StreamCodec
from pytest_ratefloor.codes import Codebook
from pytest_ratefloor.errors import (
    ImpossibleRate,
    RateFailure,
    RegressionFailure,
)

N = 2000


def zlib_codec(level: int = 9, packing: str = "auto") -> ByteCodec:
    return ByteCodec(lambda b: zlib.compress(b, level), zlib.decompress, name=f"zlib-{level}",
                     packing=packing)


def raw_bits_codec(name: str = "raw") -> StreamCodec:
    """Binary symbols stored one bit each, exact nbits (the 1-bit/symbol identity code)."""
    return StreamCodec(lambda s: bitarray(s.tolist()), lambda d, n: d.tolist(), name=name)


class SideChannel:
    """A codec that keeps the symbols in memory and claims a chosen bit count.

    It stands in for an ideal entropy coder whose length is known exactly
    (arithmetic coding reaches ⌈−log2 P⌉ + 1 bits; fact of the trade), and
    for a cheater that hides information outside the stream.
    """

    def __init__(self, length: object, name: str = "side-channel") -> None:
        self.length = length  # callable symbols -> bits
        self.name = name
        self.version = None
        self.stored: dict[tuple[bytes, int], np.ndarray] = {}

    def encode(self, symbols: np.ndarray) -> tuple[bytes, int]:
        nbits = int(self.length(symbols))  # type: ignore[operator]
        digest = hashlib.sha256(np.ascontiguousarray(symbols).tobytes()).digest()
        data = (digest * (nbits // 256 + 1))[: (nbits + 7) // 8]  # deterministic filler
        self.stored[(data, len(symbols))] = np.array(symbols)
        return data, nbits

    def decode(self, data: tuple[bytes, int], n: int) -> np.ndarray:
        return self.stored[(data[0], n)]


# ---------------------------------------------------------------- helpers

def test_sample_fingerprint_definition() -> None:
    # Reference: hashlib.sha256 over the documented header and narrowest words.
    expected = hashlib.sha256(b"ratefloor-sample-v1:u1:3:" + bytes([1, 2, 255])).hexdigest()[:16]
    assert sample_fingerprint(np.array([1, 2, 255])) == expected
    assert sample_fingerprint(np.array([1, 2, 255], dtype=np.int32)) == expected
    assert sample_fingerprint([1, 2, 255]) == expected
    assert sample_fingerprint([1, 2, 255], bounds=(0, 255)) == expected  # skips the scan only
    assert sample_fingerprint([1, 2, 3], bounds=(0, 9)) == sample_fingerprint([1, 2, 3])
    wide = hashlib.sha256(b"ratefloor-sample-v1:i4:2:" + (-1).to_bytes(4, "little", signed=True)
                          + (7).to_bytes(4, "little", signed=True)).hexdigest()[:16]
    assert sample_fingerprint(np.array([-1, 7])) == wide
    assert sample_fingerprint(np.array([1, 2])) != sample_fingerprint(np.array([2, 1]))
    with pytest.raises(ValueError, match="integer symbols, got dtype float64"):
        sample_fingerprint(np.array([0.5]))


def _elias_delta_word(m: int) -> str:
    """The Elias delta codeword built from its definition (Elias 1975, from memory):
    the Elias gamma code of L = bit length of m, then m's bits without the leading 1."""
    length = m.bit_length()
    gamma = "0" * (length.bit_length() - 1) + format(length, "b")
    return gamma + format(m, "b")[1:]


def test_elias_delta_lengths() -> None:
    assert _elias_delta_word(1) == "1"
    assert _elias_delta_word(2) == "0100"
    assert _elias_delta_word(17) == "001010001"
    for m in itertools.chain(range(1, 300), [2**20 - 1, 2**20, 2**40 + 3]):
        assert elias_delta_length(m) == len(_elias_delta_word(m))
    with pytest.raises(ValueError, match="m >= 1, got m=0"):
        elias_delta_length(0)


def test_impossible_margin_is_c_plus_a_length_description() -> None:
    assert impossible_margin(0) == 32 + 1
    # at least c + log2(bits + 1): the one-to-one-code bound with max bits = bits
    for bits in (1, 7, 1000, 10**6, 10**9):
        assert impossible_margin(bits) >= 32 + math.log2(bits + 1)
        assert impossible_margin(bits) <= 32 + math.log2(bits + 1) + 2 * math.log2(
            math.log2(bits + 2) + 1) + 1


def test_tolerance_defaults_and_validation() -> None:
    assert tolerance(None, None) == (DEFAULT_REL, 0.0) == (0.01, 0.0)
    assert tolerance(0.05, None) == (0.05, 0.0)
    assert tolerance(None, 0.1) == (0.0, 0.1)
    assert tolerance(0, 0) == (0.0, 0.0)
    with pytest.raises(ValueError, match=r"rel must be a finite number >= 0, got -0\.1"):
        tolerance(-0.1, None)
    with pytest.raises(TypeError, match="abs must be a number, got '1'"):
        tolerance(None, "1")  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="abs must be a finite number >= 0, got inf"):
        tolerance(None, math.inf)


def test_arguments_are_checked() -> None:
    with pytest.raises(ValueError, match="n must be an integer >= 1, got 0"):
        measure(zlib_codec(), sources.uniform(4), n=0)
    with pytest.raises(TypeError, match=r"seed must be an integer, got 1\.5"):
        assert_roundtrip(zlib_codec(), sources.uniform(4), seed=1.5)  # type: ignore[arg-type]
    with pytest.raises(ValueError, match=r"floor must be one of 'entropy'.*got 'shanon'"):
        assert_rate(zlib_codec(), sources.uniform(4), floor="shanon")
    with pytest.raises(TypeError, match=r"must be a pytest_ratefloor\.sources source, got list"):
        measure(zlib_codec(), [1, 2, 3])  # type: ignore[arg-type]


# ---------------------------------------------------------------- edge cases

def test_edge_cases_cover_the_brief() -> None:
    source = sources.uniform(256)
    sample = source.sample(100, 0)
    cases = dict(edge_case_inputs(source, sample, seed=0))
    lengths = {name: len(arr) for name, arr in cases.items()}
    assert lengths["edge case 'empty input'"] == 0
    assert cases["edge case 'single smallest symbol 0'"].tolist() == [0]
    assert cases["edge case 'single largest symbol 255'"].tolist() == [255]
    assert set(cases["edge case 'constant run of 0'"].tolist()) == {0}
    assert lengths["edge case 'constant run of 255'"] >= 1000
    assert cases["edge case 'alternating 0/255'"][:4].tolist() == [0, 255, 0, 255]
    assert cases["edge case 'every symbol once' (256 symbols)"].tolist() == list(range(256))
    prefix_lengths = sorted(len(a) for n, a in cases.items() if "prefix" in n)
    assert prefix_lengths == [*range(1, 18), 65_535, 65_536, 65_537]
    long = source.sample(65_537, 0)
    assert np.array_equal(cases["edge case 'sample prefix of length 65537'"], long)


def test_edge_cases_stay_in_the_support() -> None:
    # bernoulli: alphabet {0, 1}; a codebook restricts the symbols further;
    # a Markov chain without the 0->0 transition drops the run of 0s.
    for name, arr in edge_case_inputs(sources.bernoulli(0.3), np.array([0, 1])):
        assert set(arr.tolist()) <= {0, 1}, name
    cases = dict(edge_case_inputs(sources.uniform(8), np.arange(8), codec_symbols=[2, 3, 5]))
    assert cases["edge case 'every symbol once' (3 symbols)"].tolist() == [2, 3, 5]
    assert cases["edge case 'single largest symbol 5'"].tolist() == [5]
    chain = sources.markov([[0.0, 1.0], [0.5, 0.5]])
    names = [n for n, _ in edge_case_inputs(chain, chain.sample(10))]
    assert "edge case 'constant run of 0'" not in names
    assert "edge case 'constant run of 1'" in names
    for name, arr in edge_case_inputs(chain, chain.sample(10)):
        assert math.isfinite(chain.information(arr)), name


def test_edge_cases_of_an_unbounded_alphabet_use_its_likely_range() -> None:
    source = sources.two_sided_geometric(0.5)
    cases = dict(edge_case_inputs(source, source.sample(50)))
    spread = next(a for n, a in cases.items() if "spread" in n)
    assert spread.min() < 0 < spread.max()
    assert source.information(spread) < math.inf
    # all but 2^-30 of the mass: |x| up to about 30 for theta = 1/2
    assert 20 <= spread.max() <= 40


# ---------------------------------------------------------------- real codecs

@pytest.mark.parametrize(
    ("compress", "decompress"),
    [(zlib.compress, zlib.decompress), (bz2.compress, bz2.decompress),
     (lzma.compress, lzma.decompress)],
    ids=["zlib", "bz2", "lzma"],
)
def test_stdlib_compressors_round_trip_and_cannot_beat_uniform_bytes(compress, decompress) -> None:  # type: ignore[no-untyped-def]
    # Counting argument (fact of the trade): uniformly random bytes do not
    # compress; every format adds a header, so the rate is above 8 bits/symbol.
    codec = ByteCodec(compress, decompress, name="c")
    source = sources.uniform(256)
    assert_roundtrip(codec, source, n=N)
    m = measure(codec, source, n=N)
    assert m.rate > 8.0
    assert m.bits == 8 * len(compress(source.sample(N, 0).astype(np.uint8).tobytes()))


def test_zlib_on_fair_coin_flips_stays_above_one_bit() -> None:
    m = check(zlib_codec(), sources.bernoulli(0.5), n=8 * N, rel=0.1)
    assert m.rate >= 1.0
    assert m.floor_rate == 1.0


def test_zlib_compresses_a_skewed_source_but_not_to_the_entropy() -> None:
    source = sources.bernoulli(0.05)
    m = measure(zlib_codec(), source, n=40_000)
    h = -(0.05 * math.log2(0.05) + 0.95 * math.log2(0.95))  # binary entropy
    assert m.entropy == pytest.approx(h)
    assert h < m.rate < 1.0  # compresses, stays above the entropy
    with pytest.raises(RateFailure):
        assert_rate(zlib_codec(), source, n=40_000, rel=0.05)


def test_huffman_code_from_bitarray_meets_a_dyadic_source_exactly() -> None:
    # bitarray's Huffman code on a dyadic pmf has lengths −log2 p, so the
    # length of any sample is its self-information: the "sample" floor is met
    # with zero tolerance, and the "huffman" floor equals the entropy.
    probs = [0.5, 0.25, 0.125, 0.0625, 0.0625]
    source = sources.categorical(probs)
    book = Codebook(huffman_code(dict(enumerate(probs))), name="bitarray-huffman")
    m = check(book, source, n=N, floor="sample", rel=0, abs=0)
    assert m.bits == m.sample_information
    assert m.floor_bits == m.bits
    h = assert_rate(book, source, n=N, floor="huffman", rel=0.05)
    assert h.floor_rate == pytest.approx(1.875)
    assert h.floor_rate == pytest.approx(h.entropy, abs=1e-12)


def test_measurement_fields() -> None:
    source = sources.bernoulli(0.1)
    m = measure(zlib_codec(), source, n=N, seed=4, floor="empirical")
    sample = source.sample(N, 4)
    assert (m.codec, m.source, m.n, m.seed, m.floor) == ("zlib-9", "bernoulli(p=0.1)", N, 4,
                                                         "empirical")
    assert m.bits == 8 * len(zlib.compress(np.packbits(sample.astype(np.uint8)).tobytes(), 9))
    assert m.fingerprint == sample_fingerprint(sample)
    assert m.sample_information == pytest.approx(source.information(sample))
    # varentropy of Bernoulli(p): p(1−p)·log2((1−p)/p)^2 (fact of the trade)
    v = 0.1 * 0.9 * math.log2(9) ** 2
    assert m.spread == pytest.approx(math.sqrt(v / N), rel=1e-9)
    assert m.source_family == "bernoulli"
    assert m.source_params == {"p": 0.1}
    assert m.alphabet_size == 2
    assert m.encode_seconds > 0
    assert m.decode_seconds > 0
    assert m.codec_version is None
    m.to_record()  # builtin types only


def test_every_floor_is_measurable() -> None:
    source = sources.geometric(0.3)
    rates = {f: measure(zlib_codec(), source, n=N, floor=f).floor_rate
             for f in ("entropy", "sample", "empirical", "huffman", "adaptive")}
    assert rates["huffman"] >= rates["entropy"]
    assert rates["adaptive"] > rates["empirical"]  # the KT coder pays for learning


# ---------------------------------------------------------------- impossible rate

def test_a_decoder_with_a_side_channel_is_impossible() -> None:
    source = sources.bernoulli(0.5)
    with pytest.raises(ImpossibleRate) as info:
        assert_rate(SideChannel(lambda s: 0, name="cheat"), source, n=N)
    text = str(info.value)
    assert "codec 'cheat' reports an impossible length on bernoulli(p=0.5) (n=2000, seed=0)" in text
    assert "0 bits, but the sample's self-information is 2,000.0 bits" in text
    assert "33 bits below it" in text  # margin 32 + δ(1) = 33


def test_impossible_rate_threshold() -> None:
    source = sources.bernoulli(0.5)  # self-information = n bits exactly
    margin = impossible_margin(N - 100)
    assert margin < 100
    with pytest.raises(ImpossibleRate):
        assert_rate(SideChannel(lambda s: N - 100), source, n=N, floor="sample", abs=1)
    assert_rate(SideChannel(lambda s: N - 40), source, n=N, floor="sample", abs=1)


@pytest.mark.filterwarnings("ignore::pytest_ratefloor.errors.NoisyToleranceWarning")
def test_ideal_coders_below_the_entropy_never_trip_the_impossible_rule() -> None:
    # On a lucky (low-information) sample an ideal arithmetic coder is below
    # n·H; the KT code is even below the sample's self-information when the
    # histogram is uneven. Neither may be reported as impossible.
    source = sources.bernoulli(0.1)
    n = 400
    h = source.entropy
    lucky = [s for s in range(200) if source.information(source.sample(n, s)) < n * h - 40]
    assert lucky, "no lucky seed among 200 (test setup)"
    arithmetic = SideChannel(lambda s: math.ceil(source.information(s)) + 1, name="ideal-ac")
    for seed in lucky[:5]:
        m = assert_rate(arithmetic, source, n=n, seed=seed, floor="entropy", rel=0)
        assert m.rate < h
    from pytest_ratefloor.floors import adaptive_bits

    fair = sources.bernoulli(0.5)
    kt = SideChannel(lambda s: math.ceil(adaptive_bits(fair, s)) + 2, name="ideal-kt")
    below = 0
    for seed in range(40):
        m = assert_rate(kt, fair, n=n, seed=seed, floor="adaptive", abs=0.01)
        below += m.bits < m.sample_information
    assert below > 0  # the rule was exercised where it matters


# ---------------------------------------------------------------- rate failures

def test_rate_failure_message() -> None:
    source = sources.bernoulli(0.1)
    with pytest.raises(RateFailure) as info:
        assert_rate(zlib_codec(), source, n=N, seed=2, floor="entropy", rel=0.01)
    text = str(info.value)
    m = measure(zlib_codec(), source, n=N, seed=2, floor="entropy")
    h = -(0.1 * math.log2(0.1) + 0.9 * math.log2(0.9))
    spread = math.sqrt(0.1 * 0.9 * math.log2(9) ** 2 / N)
    assert "codec 'zlib-9' misses the entropy floor on bernoulli(p=0.1) (n=2000, seed=2)" in text
    assert f"measured rate  {m.rate:.6f} bits/symbol ({m.bits:,} bits)" in text
    assert f"floor          {h:.6f} bits/symbol (entropy: n·H" in text
    assert f"entropy        {h:.6f}" in text
    assert f"allowed        {1.01 * h:.6f} bits/symbol (rel=0.01, abs=0)" in text
    assert f"excess         {m.rate - h:+.6f} bits/symbol ({100 * (m.rate - h) / h:+.3f}%" in text
    assert f"sample spread  ±{spread:.6f} bits/symbol" in text


def test_abs_tolerance_is_in_bits_per_symbol() -> None:
    source = sources.bernoulli(0.5)
    raw = raw_bits_codec()  # exactly 1 bit/symbol = H
    assert_rate(raw, source, n=N, rel=0, abs=0)
    over = StreamCodec(lambda s: bitarray(s.tolist()) + bitarray("0" * 200),
                       lambda d, n: d[:n].tolist(), name="padded")  # +0.1 bit/symbol
    assert_rate(over, source, n=N, abs=0.1)
    with pytest.raises(RateFailure, match=r"rel=0, abs=0.09"):
        assert_rate(over, source, n=N, abs=0.09)
    assert_rate(over, source, n=N, rel=0.1)  # larger of rel·floor and abs
    assert_rate(over, source, n=N, rel=0.001, abs=0.1)


def test_codebook_failure_names_the_most_wasteful_codewords() -> None:
    # A Huffman code designed for the reversed pmf: the likely symbols get the
    # long codewords. Waste per symbol = p·(ℓ + log2 p) (codes.excess_by_symbol).
    probs = [0.4, 0.3, 0.15, 0.1, 0.05]
    source = sources.categorical(probs)
    book = Codebook(huffman_code(dict(enumerate(reversed(probs)))), name="backwards")
    with pytest.raises(RateFailure) as info:
        assert_rate(book, source, n=N, floor="huffman", rel=0.01)
    text = str(info.value)
    assert "codewords wasting the most" in text
    lengths = {s: len(w) for s, w in book.codewords.items()}
    waste = sorted(((p * (lengths[s] + math.log2(p)), s) for s, p in enumerate(probs)),
                   reverse=True)[:3]
    named = [int(x) for x in re.findall(r"symbol (\d+): p=", text)]
    assert named == [s for _, s in waste]
    assert f"waste {waste[0][0]:+.6f} bits/symbol" in text


def test_check_records_before_raising() -> None:
    seen = []
    with pytest.raises(RateFailure):
        check(zlib_codec(), sources.bernoulli(0.1), n=N, rel=0, on_measurement=seen.append)
    assert len(seen) == 1
    assert seen[0].codec == "zlib-9"

    def regression(m: object) -> None:
        raise RegressionFailure("bits grew over the ledger")

    with pytest.raises(RateFailure, match="also: bits grew over the ledger"):
        check(zlib_codec(), sources.bernoulli(0.1), n=N, rel=0, on_measurement=regression)
    with pytest.raises(RegressionFailure, match="bits grew"):
        check(zlib_codec(), sources.uniform(256), n=N, rel=0.1, on_measurement=regression)


def test_packing_that_does_not_fit_is_a_clear_error() -> None:
    with pytest.raises(LayoutError, match=r"symbol \d+ at index \d+ does not fit layout 'bits'.*"
                                           r"codec 'zlib-9'.*source uniform\(k=4\)"):
        measure(zlib_codec(packing="bits"), sources.uniform(4), n=N)


@pytest.mark.parametrize(
    "source",
    [sources.uniform(256), sources.bernoulli(0.1), sources.zipf(256, 1.1),
     sources.categorical([0.5, 0.25, 0.125, 0.0625, 0.0625]), sources.geometric(0.2),
     sources.markov([[0.9, 0.1], [0.4, 0.6]])],
    ids=lambda s: s.spec,
)
def test_sample_information_equals_the_sources_own_sum(source: sources.Source) -> None:
    from pytest_ratefloor.checks import sample_information

    sample = source.sample(300_000, 1)  # large enough for the histogram path
    expected = math.fsum(source.self_information(sample).tolist())  # exactly rounded sum
    assert sample_information(source, sample) == pytest.approx(expected, rel=1e-12)
    bad = sample.copy()
    bad[-1] = 10**6 if source.max_symbol is not None else -1
    with pytest.raises(ValueError, match=r"1000000|-1"):
        sample_information(source, bad)
