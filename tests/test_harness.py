"""Tests of the fixture object and gate() (pytest_ratefloor.harness), directly and via pytester."""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET
import zlib
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import numpy as np
import pytest

from pytest_ratefloor import sources
from pytest_ratefloor.codecs import ByteCodec, StreamCodec
from pytest_ratefloor.errors import RateFailure, RegressionFailure
from pytest_ratefloor.harness import RateFloorHarness, gate, junit_properties
from pytest_ratefloor.measurement import Measurement

N = 2000
ZLIB = ByteCodec(lambda b: zlib.compress(b, 9), zlib.decompress, name="zlib-9")


def _node(**funcargs: Any) -> SimpleNamespace:
    return SimpleNamespace(user_properties=[], funcargs=funcargs)


# ------------------------------------------------------------------ direct use

def test_check_records_the_measurement_everywhere() -> None:
    node = _node()
    seen: list[Measurement] = []
    harness = RateFloorHarness(node, on_measurement=seen.append)
    m = harness.check(ZLIB, sources.uniform(256), n=N, rel=0.05)
    assert harness.measurements == [m]
    assert seen == [m]
    props = dict(node.user_properties)
    assert props["ratefloor.codec"] == "zlib-9"
    assert props["ratefloor.source"] == "uniform(k=256)"
    assert props["ratefloor.n"] == N
    assert props["ratefloor.bits"] == m.bits
    assert props["ratefloor.rate"] == m.bits / N
    assert props["ratefloor.floor"] == "sample"  # the default floor
    # uniform(256): every symbol carries exactly 8 bits, so the sample floor is 8 too
    assert props["ratefloor.floor_rate"] == 8.0
    assert props["ratefloor.entropy"] == 8.0
    assert props["ratefloor.efficiency"] == pytest.approx(8.0 * N / m.bits)
    for name, value in node.user_properties:  # builtin types only (JUnit, xdist)
        assert type(value) in (str, int, float), name


def test_measurement_is_recorded_before_a_rate_failure() -> None:
    node = _node()
    seen: list[Measurement] = []
    harness = RateFloorHarness(node, on_measurement=seen.append)
    with pytest.raises(RateFailure):
        harness.check(ZLIB, sources.bernoulli(0.1), n=N, rel=0.01)
    assert len(seen) == 1
    assert len(harness.measurements) == 1
    assert dict(node.user_properties)["ratefloor.source"] == "bernoulli(p=0.1)"


def test_regression_from_on_measurement_propagates() -> None:
    def ledger(m: Measurement) -> None:
        raise RegressionFailure(f"{m.codec}: {m.bits} bits exceed the ledger")

    harness = RateFloorHarness(_node(), on_measurement=ledger)
    with pytest.raises(RegressionFailure, match=r"zlib-9: \d+ bits exceed the ledger"):
        harness.check(ZLIB, sources.uniform(256), n=N, rel=0.05)


def test_measure_records_without_tolerance() -> None:
    harness = RateFloorHarness(None)
    m = harness.measure(ZLIB, sources.bernoulli(0.1), n=N, floor="adaptive")
    assert m.rate > m.floor_rate  # far over: no failure from measure
    assert harness.measurements == [m]


def test_several_checks_append_one_property_group_each() -> None:
    node = _node()
    harness = RateFloorHarness(node)
    harness.check(ZLIB, sources.uniform(256), n=N, rel=0.05, edge_cases=False)
    harness.check(ZLIB, sources.uniform(4), n=N, rel=0.5, edge_cases=False)
    sources_seen = [v for k, v in node.user_properties if k == "ratefloor.source"]
    assert sources_seen == ["uniform(k=256)", "uniform(k=4)"]
    assert len(node.user_properties) == 2 * len(junit_properties(harness.measurements[0]))


def test_corruption_option_reuses_the_round_trip(monkeypatch: pytest.MonkeyPatch,
                                                 tmp_path: Path) -> None:
    import pytest_ratefloor.corruption as corruption

    calls: list[tuple[Any, ...]] = []

    def fake(codec: Any, sample: Any, encoded: Any, **kw: Any) -> None:
        calls.append((codec, sample, encoded, kw))

    encodes: list[int] = []

    def counting_compress(data: bytes) -> bytes:
        encodes.append(len(data))
        return zlib.compress(data, 9)

    codec = ByteCodec(counting_compress, zlib.decompress, name="zlib-9")
    monkeypatch.setattr(corruption, "survive_damage", fake)
    source = sources.uniform(256)
    harness = RateFloorHarness(_node(), save_dir=lambda: tmp_path)
    harness.check(codec, source, n=50_000, seed=7, rel=0.05, edge_cases=False, corruption=True,
                  isolate=False)  # in process: the counters above must see the calls
    bound, sample, encoded, kw = calls[0]
    assert bound.name == "zlib-9"
    assert bound.symbol == "u8"  # bound to the source: "auto" resolved
    # the first 10 000 symbols of the one sample drawn (a prefix, not a re-draw) ...
    assert np.array_equal(sample, source.sample(10_000, seed=7))
    # ... encoded once more (a different input); the 50 000-symbol sample was encoded once,
    # the codec contract slice twice
    assert encodes == [50_000, 4096, 4096, 10_000]
    assert encoded.bits == 8 * len(zlib.compress(sample.astype(np.uint8).tobytes(), 9))
    assert kw["seed"] == 7
    assert kw["source"] == "uniform(k=256)"
    assert kw["save_dir"]() == tmp_path
    harness.check(codec, source, n=N, rel=0.05, edge_cases=False)
    assert len(calls) == 1  # off by default


def test_corruption_on_a_short_sample_reuses_its_encoding(monkeypatch: pytest.MonkeyPatch) -> None:
    import pytest_ratefloor.corruption as corruption

    seen: list[Any] = []
    monkeypatch.setattr(corruption, "survive_damage",
                        lambda codec, sample, encoded, **kw: seen.append(encoded))
    encodes: list[int] = []

    def counting_compress(data: bytes) -> bytes:
        encodes.append(len(data))
        return zlib.compress(data, 9)

    codec = ByteCodec(counting_compress, zlib.decompress, name="zlib-9")
    m = RateFloorHarness().check(codec, sources.uniform(256), n=N, rel=0.05, edge_cases=False,
                                 corruption=True, isolate=False)
    assert encodes == [N, N, N]  # the sample once, the contract slice (the whole sample) twice
    assert seen[0].bits == m.bits  # the very encoding that was measured


def test_corruption_check_runs_for_real() -> None:
    # zlib has an Adler-32 check; any outcome but hang/crash is survival.
    harness = RateFloorHarness(_node())
    harness.check(ZLIB, sources.uniform(16), n=500, rel=1.5, edge_cases=False, corruption=True)


def test_gate_builds_a_parametrized_test() -> None:
    suite = [sources.uniform(4), sources.bernoulli(0.5)]
    fn = gate(ZLIB, sources=suite, n=N, rel=0.5)
    (mark,) = [m for m in fn.pytestmark if m.name == "parametrize"]  # type: ignore[attr-defined]
    assert mark.args[0] == "ratefloor_source"
    assert list(mark.args[1]) == suite
    assert mark.kwargs["ids"] == ["uniform(k=4)", "bernoulli(p=0.5)"]
    harness = RateFloorHarness(None)
    fn(harness, suite[0])
    assert harness.measurements[0].source == "uniform(k=4)"


def test_gate_checks_its_arguments_at_collection() -> None:
    with pytest.raises(ValueError, match=r"floor must be one of .*got 'entropie'"):
        gate(ZLIB, floor="entropie")
    with pytest.raises(ValueError, match=r"rel must be a finite number >= 0, got -1"):
        gate(ZLIB, rel=-1)
    with pytest.raises(ValueError, match="needs at least one source"):
        gate(ZLIB, sources=[])
    with pytest.raises(TypeError, match="cannot use str as a codec"):
        gate("zlib")
    with pytest.raises(TypeError, match="gate sources must be reference sources, got 3"):
        gate(ZLIB, sources=[3])  # type: ignore[list-item]


# ------------------------------------------------------------------ pytester

# Inner runs skip the cache and hypothesis's plugin (whose summary hook imports
# hypothesis afresh in every in-process run: seconds each).
QUIET = ("-p", "no:cacheprovider", "-p", "no:hypothesispytest")
HEADER = "from pytest_ratefloor import ByteCodec, StreamCodec, gate, sources\nimport zlib\n"


def test_a_five_line_user_module_passes_for_a_correct_codec(pytester: pytest.Pytester) -> None:
    pytester.makepyfile(test_user=HEADER + (
        "codec = ByteCodec(lambda b: zlib.compress(b, 9), zlib.decompress, name='zlib-9')\n"
        "test_zlib = gate(codec, sources=[sources.uniform(256), sources.bernoulli(0.5)], "
        "n=2000, rel=0.05)\n"))
    result = pytester.runpytest("-v", *QUIET)
    result.assert_outcomes(passed=2)
    result.stdout.fnmatch_lines([
        "*test_zlib?uniform(k=256)? PASSED*",
        "*test_zlib?bernoulli(p=0.5)? PASSED*",
    ])


def test_gate_defaults_to_the_standard_suite(pytester: pytest.Pytester) -> None:
    pytester.makepyfile(test_user=HEADER + (
        "test_zlib = gate(ByteCodec(zlib.compress, zlib.decompress, name='z'))\n"))
    result = pytester.runpytest("--collect-only", "-q", *QUIET)
    specs = [s.spec for s in sources.standard_suite()]
    assert [f"test_user.py::test_zlib[{spec}]" for spec in specs] == [
        line for line in result.outlines if line.startswith("test_user.py::")]
    assert result.ret == 0


MISBEHAVIOURS = {
    "raises": (
        "codec = StreamCodec(lambda s: 1 // 0, lambda d, n: list(d), name='broken')",
        ["*CodecMisbehaviour: codec 'broken' misbehaved on the sample (500 symbols): "
         "the encoder raised ZeroDivisionError: integer division or modulo by zero",
         "*(source uniform(k=16), n=500, seed=0)"],
    ),
    "returns-none": (
        "codec = StreamCodec(lambda s: None, lambda d, n: list(d), name='broken')",
        ["*CodecMisbehaviour: codec 'broken' misbehaved on the sample (500 symbols): "
         "encoder returned NoneType; expected bytes*"],
    ),
    "wrong-length": (
        "codec = StreamCodec(lambda s: s.astype('u1').tobytes(), lambda d, n: list(d)[1:], "
        "name='broken')",
        ["*CodecMisbehaviour: *decoder returned 499 symbols; expected n=500"],
    ),
    "mutates-input": (
        "codec = StreamCodec(lambda s: (s.sort(), s.astype('u1').tobytes())[1], "
        "lambda d, n: list(d), name='broken')",
        ["*CodecMisbehaviour: *the encoder writes into its input array*read-only*"],
    ),
    "not-deterministic": (
        "import os\ncodec = StreamCodec(lambda s: os.urandom(16) + s.astype('u1').tobytes(), "
        "lambda d, n: list(d[16:]), name='broken')",
        ["*CodecMisbehaviour: *the encoder is not deterministic*"],
    ),
    "round-trip": (
        "codec = StreamCodec(lambda s: s.astype('u1').tobytes(), "
        "lambda d, n: [b ^ (i == 3) for i, b in enumerate(d)], name='broken')",
        ["*RoundTripFailure: codec 'broken' does not round-trip the sample (500 symbols)*",
         "*first mismatch at index 3: expected *, decoded *"],
    ),
    "rate": (
        "codec = StreamCodec(lambda s: s.astype('u1').tobytes(), lambda d, n: list(d), "
        "name='bytewise')",
        ["*RateFailure: +100.000% over the sample floor (allowed +1.000%): codec 'bytewise' "
         "misses the sample floor on uniform(k=16) (n=500, seed=0)",
         "*measured rate  8.000000 bits/symbol (4,000 bits)",
         "*floor          4.000000 bits/symbol (sample*",
         "*excess         +4.000000 bits/symbol (+100.000% over the floor)"],
    ),
    "impossible": (
        "box = {}\ncodec = StreamCodec(lambda s: box.__setitem__(len(s), s.copy()) or b'', "
        "lambda d, n: box[n], name='psychic')",
        ["*ImpossibleRate: 2,000 bits below the sample's information: codec 'psychic' reports "
         "an impossible length on uniform(k=16)*"],
    ),
}


@pytest.mark.parametrize("case", sorted(MISBEHAVIOURS))
def test_a_five_line_user_module_fails_with_the_right_message(pytester: pytest.Pytester,
                                                              case: str) -> None:
    codec_line, expected = MISBEHAVIOURS[case]
    gate_line = "test_codec = gate(codec, sources=[sources.uniform(16)], n=500)"
    module = HEADER + codec_line + "\n" + gate_line + "\n"
    assert len(module.strip().splitlines()) <= 5
    pytester.makepyfile(test_user=module)
    result = pytester.runpytest(*QUIET)
    result.assert_outcomes(failed=1)
    result.stdout.fnmatch_lines(expected)


def test_figures_reach_junit_xml(pytester: pytest.Pytester) -> None:
    pytester.makepyfile(test_user=HEADER + (
        "def test_tides(ratefloor):\n"
        "    ratefloor.check(ByteCodec(zlib.compress, zlib.decompress, name='z'), "
        "sources.bernoulli(0.5), n=4000, rel=0.1)\n"))
    result = pytester.runpytest("--junitxml=out.xml", *QUIET)
    result.assert_outcomes(passed=1)
    root = ET.parse(pytester.path / "out.xml").getroot()
    props = {p.get("name"): p.get("value") for p in root.iter("property")}
    assert props["ratefloor.codec"] == "z"
    assert props["ratefloor.source"] == "bernoulli(p=0.5)"
    bits = int(props["ratefloor.bits"])  # type: ignore[arg-type]
    sample = sources.bernoulli(0.5).sample(4000, 0)
    assert bits == 8 * len(zlib.compress(np.packbits(sample.astype(np.uint8)).tobytes()))
    assert float(props["ratefloor.rate"]) == bits / 4000  # type: ignore[arg-type]
    assert float(props["ratefloor.floor_rate"]) == 1.0  # type: ignore[arg-type]
    assert math.isclose(float(props["ratefloor.efficiency"]), 4000 / bits)  # type: ignore[arg-type]
    assert "PytestWarning" not in result.stdout.str()


def test_stream_codec_in_fixture(pytester: pytest.Pytester) -> None:
    # The fixture path with a StreamCodec and the "sample" floor.
    pytester.makepyfile(test_user=HEADER + (
        "from bitarray import bitarray\n"
        "def test_bits(ratefloor):\n"
        "    codec = StreamCodec(lambda s: bitarray(s.tolist()), lambda d, n: d.tolist(), "
        "name='raw')\n"
        "    m = ratefloor.check(codec, sources.bernoulli(0.5), n=3000, floor='sample', rel=0)\n"
        "    assert m.bits == 3000\n"))
    pytester.runpytest(*QUIET).assert_outcomes(passed=1)


def test_stream_codec_name_defaults() -> None:
    assert StreamCodec(zlib.compress, zlib.decompress).name == "zlib.compress"
