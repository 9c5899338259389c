"""Verdicts that respect sampling noise: the spread of a floor, the smallest detectable
excess, the warning for a tolerance inside the noise, drops on the same sample.

Reference figures: the one-sided normal quantile Φ⁻¹(0.999) from scipy.stats; the
varentropy of Bernoulli(p), p(1−p)·log2((1−p)/p)², from its definition (Var of
−log2 P(X) for a two-point law); the CLT for the spread √(n·V) of a sum of n i.i.d.
self-informations.
"""

from __future__ import annotations

import dataclasses
import json
import math
import warnings
import zlib
from pathlib import Path

import pytest
from scipy.stats import norm

from pytest_ratefloor import ByteCodec, report, sources, summary
from pytest_ratefloor.checks import check
from pytest_ratefloor.errors import NoisyToleranceWarning
from pytest_ratefloor.floors import DEFAULT_FLOOR
from pytest_ratefloor.measurement import DETECTION_Z, NOISY_FLOORS, Measurement
from pytest_ratefloor.rate import CODER_OVERHEAD_BITS, NOISE_SPREADS, noise_warning
from pytest_ratefloor.verdicts import SUSPICIOUS_SPREADS, compare


def _case(floor: str = "entropy", n: int = 10_000, p: float = 0.1, rel: float = 0.01,
          bits: int | None = None, fingerprint: str = "f") -> Measurement:
    h = -(p * math.log2(p) + (1 - p) * math.log2(1 - p))
    v = p * (1 - p) * math.log2((1 - p) / p) ** 2
    return Measurement(
        codec="c", source=f"bernoulli(p={p})", n=n, seed=0,
        bits=bits if bits is not None else math.ceil(n * h), entropy=h, floor=floor,
        floor_bits=n * h, fingerprint=fingerprint, sample_information=n * h,
        spread=math.sqrt(v / n), tolerance_bits=rel * n * h,
    )


def test_the_detection_quantile_is_the_normal_one() -> None:
    assert norm.ppf(0.999) == pytest.approx(DETECTION_Z, abs=1e-12)  # scipy.stats


def test_the_default_floor_has_no_sampling_noise() -> None:
    assert DEFAULT_FLOOR == "sample"
    assert DEFAULT_FLOOR not in NOISY_FLOORS
    assert _case(floor="sample").floor_spread_bits == 0.0


def test_spread_and_detectable_excess_of_a_noisy_floor() -> None:
    m = _case(n=10_000, p=0.1, rel=0.01)
    v = 0.1 * 0.9 * math.log2(9) ** 2  # Bernoulli varentropy (definition)
    assert m.floor_spread_bits == pytest.approx(math.sqrt(10_000 * v))  # CLT: √(n·V)
    h = m.entropy
    expected = (0.01 * 10_000 * h + DETECTION_Z * math.sqrt(10_000 * v)) / 10_000
    assert m.detectable_excess == pytest.approx(expected)
    # on the sample floor only the tolerance is left
    s = _case(floor="sample", n=10_000, p=0.1, rel=0.01)
    assert s.detectable_excess == pytest.approx(0.01 * h)
    # a ledger entry has no spread: nothing to say
    assert dataclasses.replace(m, spread=None).detectable_excess is None


def test_the_warning_names_the_case_the_spread_and_the_n_that_suffices() -> None:
    m = _case(n=1000, p=0.01, rel=0.01)
    text = noise_warning(m)
    assert text is not None
    assert "codec 'c' on bernoulli(p=0.01), n=1000, seed=0" in text
    assert f"±{m.floor_spread_bits:,.1f} bits" in text
    needed = int(text.split("n >= ")[1].split(" ")[0].replace(",", ""))
    # at that n the same relative tolerance clears 3 spreads (and one bit); just below, not
    at = _case(n=needed, p=0.01, rel=0.01)
    assert at.tolerance_bits >= NOISE_SPREADS * at.floor_spread_bits
    assert noise_warning(at) is None
    below = _case(n=needed - 2, p=0.01, rel=0.01)
    assert noise_warning(below) is not None


def test_the_sample_floor_warns_only_below_a_coders_fixed_cost() -> None:
    # bernoulli(0.01): H = 0.0808 bits, so 1 % of n·H is 32 bits at n ≈ 39,600
    text = noise_warning(_case(floor="sample", n=10_000, p=0.01, rel=0.01))
    assert text is not None
    assert "32 bits a correct coder spends on termination" in text
    needed = int(text.split("n >= ")[1].split(" ")[0].replace(",", ""))
    assert needed == math.ceil(CODER_OVERHEAD_BITS / (0.01 * _case(p=0.01).entropy))
    assert noise_warning(_case(floor="sample", n=needed, p=0.01, rel=0.01)) is None
    exact = dataclasses.replace(_case(floor="sample"), tolerance_bits=0.0)
    assert noise_warning(exact) is None  # an exact code asked to be exact: deliberate


def test_a_check_emits_the_warning_through_pytest(pytester: pytest.Pytester) -> None:
    pytester.makepyfile(test_noisy="""
        import zlib
        from pytest_ratefloor import ByteCodec, sources

        def test_noisy(ratefloor):
            codec = ByteCodec(lambda b: zlib.compress(b, 9), zlib.decompress, name="z")
            try:
                ratefloor.check(codec, sources.bernoulli(0.01), n=1000, rel=0.01,
                                edge_cases=False)
            except AssertionError:
                pass
    """)
    result = pytester.runpytest("-p", "no:cacheprovider")
    result.stdout.fnmatch_lines(["*NoisyToleranceWarning: ratefloor: the tolerance of codec "
                                 "'z' on bernoulli(p=0.01), n=1000, seed=0*"])


def test_the_power_is_in_the_verbose_summary_and_the_json_report(tmp_path: Path) -> None:
    m = _case(n=10_000)
    row = compare(m, None)
    outcome = report.RunOutcome(ledger_path=tmp_path / "l.json", ledger_exists=False)
    lines = [line.text for line in summary.summary_lines([row], outcome, verbose=True)]
    assert "detects b/sym" in lines[0]
    assert f"{m.detectable_excess:.4f}" in lines[1]
    doc = report.json_report([row], outcome)
    case = doc["cases"][0]
    assert case["detectable_excess"] == pytest.approx(m.detectable_excess)
    assert case["tolerance_bits"] == pytest.approx(m.tolerance_bits)
    assert case["floor_spread_bits"] == pytest.approx(m.floor_spread_bits)
    json.dumps(doc, allow_nan=False)


def test_a_drop_on_the_same_sample_beyond_the_spread_is_shown_not_failed() -> None:
    base = _case(n=10_000, bits=5000).recorded()
    spread = _case(n=10_000).floor_spread_bits
    assert spread is not None
    big = _case(n=10_000, bits=5000 - math.ceil(SUSPICIOUS_SPREADS * spread) - 1)
    small = _case(n=10_000, bits=5000 - math.floor(SUSPICIOUS_SPREADS * spread) + 1)
    other_sample = _case(n=10_000, bits=big.bits, fingerprint="g")
    assert compare(big, base).suspicious_drop
    assert not compare(big, base).fails
    assert not compare(small, base).suspicious_drop
    assert not compare(other_sample, base).suspicious_drop  # resampled: its own verdict
    lines = summary.summary_lines(
        [compare(big, base)], report.RunOutcome(ledger_path=Path("l.json")))
    assert any("worth a look" in line.text for line in lines)


def test_the_default_check_warns_nothing_on_a_well_sized_case() -> None:
    codec = ByteCodec(lambda b: zlib.compress(b, 9), zlib.decompress, name="z")
    with warnings.catch_warnings():
        warnings.simplefilter("error", NoisyToleranceWarning)
        check(codec, sources.uniform(256), n=20_000, rel=0.05, edge_cases=False)


def test_the_warning_points_at_the_users_line() -> None:
    codec = ByteCodec(lambda b: zlib.compress(b, 9), zlib.decompress, name="z")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        with pytest.raises(AssertionError):  # zlib misses 1 % of a tiny floor
            check(codec, sources.bernoulli(0.01), n=1000, rel=0.01, edge_cases=False)
    noisy = [w for w in caught if issubclass(w.category, NoisyToleranceWarning)]
    assert noisy
    assert noisy[0].filename == __file__  # not a frame inside the plugin


def test_after_recording_the_tally_says_what_was_written() -> None:
    """A recording accepts a regression: the tally names it as re-recorded, not as 'regressed'."""
    base = _case(n=10_000, bits=5000).recorded()
    worse = compare(_case(n=10_000, bits=5100), base)
    new = compare(_case(n=20_000), None)
    failed = compare(_case(n=30_000), None)
    outcome = report.RunOutcome(
        ledger_path=Path("l.json"), recorded=True,
        not_recorded=((failed.key.label, "its test failed"),),
    )
    lines = [line.text for line in summary.summary_lines([worse, new, failed], outcome)]
    tally = next(t for t in lines if t.startswith("ledger recorded into"))
    assert tally.endswith("wrote 2 cases (1 re-recorded with more bits, 1 new); "
                          "1 not recorded (their tests failed)")
    assert "regressed" not in tally


def test_junit_figures_carry_no_float_noise() -> None:
    from pytest_ratefloor.harness import junit_properties

    m = dataclasses.replace(_case(n=1000), bits=2465, floor_bits=2465.0)  # rate 2.465
    props = dict(junit_properties(m))
    assert str(props["ratefloor.rate"]) == "2.465"  # 2465 / 1000 in float64 prints as 2.465
    assert repr(0.1 * 3) == "0.30000000000000004"  # the kind of noise that is rounded away
    assert str(dict(junit_properties(dataclasses.replace(m, entropy=0.1 * 3)))[
        "ratefloor.entropy"]) == "0.3"
