"""The rate verdict over many seeds: false alarms of a correct coder, power against a worse one.

The codecs are length-only model coders (an arithmetic coder's length without
the coder): the encoder returns ``(bytes, nbits)`` with ``nbits`` computed from
a law (the source's own, or a mismatched one), the decoder hands back the
sample the encoder saw through a side channel. Every verdict goes through
``pytest_ratefloor.checks.check``. ``benchmarks/stat_verdicts.py`` runs the same
measurement on the whole standard suite with 1000 seeds.
"""

from __future__ import annotations

import contextlib
import math
import warnings
from collections.abc import Callable

import numpy as np
import pytest
from scipy.special import logsumexp
from scipy.stats import binom, norm

from pytest_ratefloor import sources
from pytest_ratefloor.checks import check
from pytest_ratefloor.codecs import StreamCodec
from pytest_ratefloor.errors import NoisyToleranceWarning, RateFailure
from pytest_ratefloor.floors import Floor
from pytest_ratefloor.measurement import Measurement
from pytest_ratefloor.sources import Source

_LN2 = math.log(2.0)


def _model_codec(bits: Callable[[np.ndarray], float], overhead: int, name: str) -> StreamCodec:
    """``⌈bits(x)⌉ + overhead`` bits; the decoder returns the last sample encoded."""
    seen: dict[str, np.ndarray] = {}

    def encode(symbols: np.ndarray) -> tuple[bytes, int]:
        seen["last"] = np.array(symbols, dtype=np.int64)
        nbits = math.ceil(bits(symbols)) + overhead
        return bytes((nbits + 7) // 8), nbits

    def decode(data: object, n: int) -> np.ndarray:
        assert seen["last"].size == n
        return seen["last"]

    return StreamCodec(encode, decode, name=name)


def ideal_codec(source: Source, overhead: int = 0) -> StreamCodec:
    """An arithmetic coder for the true law: ⌈−log2 P(x)⌉ + overhead bits."""
    return _model_codec(source.information, overhead, f"ideal+{overhead}")


def tempered_codec(source: Source, factor: float = 1.03, overhead: int = 32) -> StreamCodec:
    """The same coder for q ∝ p^β (memoryless source), β < 1 chosen by bisection so that
    the cross-entropy Σ p·(−log2 q) is ``factor``·H; ⌈Σ −log2 q(xᵢ)⌉ + overhead bits.

    −log2 q(x) = β·I(x) + log2 Z(β), Z = Σ p^β over ``pmf_table()`` (which misses at
    most 2⁻⁶⁰ of the mass: negligible in Z for β near 1).
    """
    symbols, probs = source.pmf_table()
    info = np.asarray(source.self_information(symbols[probs > 0]))
    weights = probs[probs > 0] / probs[probs > 0].sum()
    target = factor * source.entropy

    def log2_z(beta: float) -> float:
        return float(logsumexp(-beta * info * _LN2) / _LN2)

    lo, hi = 0.0, 1.0  # the cross-entropy β·H + log2 Z(β) decreases in β
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        if mid * float(np.dot(weights, info)) + log2_z(mid) > target:
            lo = mid
        else:
            hi = mid
    beta = 0.5 * (lo + hi)
    z = log2_z(beta)
    return _model_codec(lambda x: beta * source.information(x) + z * len(x), overhead,
                        f"tempered{factor}")


def _fails(codec: StreamCodec, source: Source, n: int, seed: int, floor: Floor = "sample",
           rel: float | None = None) -> bool:
    """Whether the check fails with a ``RateFailure`` (any other exception propagates)."""
    try:
        check(codec, source, n=n, seed=seed, floor=floor, rel=rel, edge_cases=False,
              isolate=False)
    except RateFailure:
        return True
    return False


# -- the audit's case, reproduced --------------------------------------------------------


def test_audit_case_passes_at_the_default_floor_and_fails_at_the_entropy_floor() -> None:
    # The audit's figures as given: the ⌈I(x)⌉-bit coder on bernoulli(0.1), n = 10⁵,
    # seed 0 needed 47,458 bits; n·H·1.01 = 47,368.6 allowed under the entropy floor.
    source, codec = sources.bernoulli(0.1), ideal_codec(sources.bernoulli(0.1))
    seen: list[Measurement] = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        m = check(codec, source, n=100_000, seed=0, edge_cases=False, isolate=False)
    assert m.floor == "sample"
    assert m.bits == 47_458
    assert not [w for w in caught if issubclass(w.category, NoisyToleranceWarning)]

    with pytest.warns(NoisyToleranceWarning), pytest.raises(RateFailure):
        check(codec, source, on_measurement=seen.append, n=100_000, seed=0,
              floor="entropy", edge_cases=False, isolate=False)
    (m,) = seen
    assert m.bits == 47_458
    assert m.floor_bits + (m.tolerance_bits or 0.0) == pytest.approx(47_368.6, abs=0.05)


# -- the entropy floor's false alarms: as the normal approximation predicts ---------------


def test_entropy_floor_false_alarms_match_the_normal_approximation() -> None:
    # The ideal ⌈I(x)⌉ coder fails floor="entropy", rel=0.01 when I(x) + ½ (the mean
    # rounding) exceeds 1.01·n·H; by the central limit theorem I(x) ≈ N(n·H, n·V), so
    # P(fail) ≈ Φ̄((0.01·n·H − ½)/√(n·V)) ≈ 0.313 for bernoulli(0.1) at n = 10⁴
    # (σ = 95 bits, lattice step log2 9 ≈ 3.2 bits: the approximation is good).
    source, n, seeds = sources.bernoulli(0.1), 10_000, 200
    predicted = float(norm.sf((0.01 * n * source.entropy - 0.5)
                              / math.sqrt(n * source.varentropy)))
    assert predicted == pytest.approx(0.313, abs=0.005)
    codec = ideal_codec(source)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NoisyToleranceWarning)
        failures = sum(_fails(codec, source, n, seed, floor="entropy", rel=0.01)
                       for seed in range(seeds))
    # 99.9 % binomial interval of the count around the prediction: scipy.stats.binom.
    low, high = binom.interval(0.999, seeds, predicted)
    assert low <= failures <= high, (failures, predicted, (low, high))


# -- the default check: no false alarms, full power ------------------------------------------

# At n = 10⁴ the ideal coder (+32 bits) fails the default check only if 0.01·I(x) < 33,
# i.e. I(x) < 3300: ≥ 14 standard deviations below n·H for each of these sources (CLT).
# The 3 %-worse coder passes only if Σ g(xᵢ) + 32 ≤ 0, g = −log2 q − 1.01·I of mean
# 0.02·H per symbol: ≥ 6.3 standard deviations away (normal approximation, computed in
# benchmarks/stat_verdicts.py). Both outcomes below are then certain in practice.
_DEFAULT_CASES = [sources.bernoulli(0.3), sources.bernoulli(0.1), sources.geometric(0.2),
                  sources.zipf(256, 1.1)]


@pytest.mark.parametrize("source", _DEFAULT_CASES, ids=lambda s: s.spec)
def test_default_check_separates_the_ideal_coder_from_a_3_percent_worse_one(
    source: Source,
) -> None:
    n, seeds = 10_000, 100
    ideal, worse = ideal_codec(source, overhead=32), tempered_codec(source)
    # the worse coder really is 3 % worse: its mean rate over a long sample (LLN)
    long = source.sample(200_000, seed=12345)
    rate = (worse.encode(long).bits - 32) / len(long)
    assert rate == pytest.approx(1.03 * source.entropy, rel=0.005)
    with warnings.catch_warnings():
        warnings.simplefilter("error", NoisyToleranceWarning)  # none at these n
        false_alarms = [s for s in range(seeds) if _fails(ideal, source, n, s)]
        passes = [s for s in range(seeds) if not _fails(worse, source, n, s)]
    assert false_alarms == []
    assert passes == []


# -- the warning: where the tolerance sits inside the noise, and only there ----------------


@pytest.mark.parametrize("floor", ["sample", "entropy"])
def test_noisy_tolerance_warning_fires_for_a_tiny_tolerance(floor: Floor) -> None:
    # bernoulli(0.01) at n = 10³: rel·I ≈ 0.8 bits, under one bit (sample floor), and
    # √(n·V) ≈ 20.9 bits of sampling spread, 3·20.9 ≫ 0.8 (entropy floor).
    source = sources.bernoulli(0.01)
    with pytest.warns(NoisyToleranceWarning, match="luck of this"), \
            contextlib.suppress(RateFailure):
        check(ideal_codec(source), source, n=1_000, seed=0, floor=floor, rel=0.01,
              edge_cases=False, isolate=False)


@pytest.mark.parametrize("floor", ["sample", "entropy"])
def test_noisy_tolerance_warning_silent_where_the_tolerance_is_meaningful(floor: Floor) -> None:
    # geometric(0.01) at n = 10⁵: rel·n·H ≈ 8079 bits against 3·√(n·V) ≈ 1369 bits.
    source = sources.geometric(0.01)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        check(ideal_codec(source, overhead=32), source, n=100_000, seed=0, floor=floor,
              rel=0.01, edge_cases=False, isolate=False)
    assert not [w for w in caught if issubclass(w.category, NoisyToleranceWarning)]
