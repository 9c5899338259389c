"""Per-case settings of gate(), damaged-stream settings and edge-case selection.

What is checked here: a source's own tolerance and floor in ``gate(sources={...})``
decide its case (and reach the JUnit properties of a real run); ``must_detect``,
``trials``, ``timeout`` and ``memory_limit`` reach ``survive_damage``; an
``edge_cases`` maximum length or set name runs exactly the cases documented in
``CheckPlan``; every bad value gives the documented error before any codec runs.
"""

from __future__ import annotations

import dataclasses
import xml.etree.ElementTree as ET
import zlib
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from pytest_ratefloor import sources
from pytest_ratefloor.checks import (
    DAMAGE_OPTIONS,
    OPTION_NAMES,
    UNSET,
    CheckOptions,
    CheckPlan,
    assert_roundtrip,
    check,
    merge_options,
    plan_for_case,
)
from pytest_ratefloor.codecs import ByteCodec, StreamCodec
from pytest_ratefloor.corruption import DEFAULT_MEMORY_LIMIT
from pytest_ratefloor.edge_cases import (
    EDGE_CASE_SETS,
    SHORT_CASE_LIMIT,
    EdgeCaseLengths,
    edge_case_inputs,
)
from pytest_ratefloor.errors import CorruptionFailure, RateFailure
from pytest_ratefloor.harness import RateFloorHarness, gate
from pytest_ratefloor.measurement import Measurement
from pytest_ratefloor.rate import allowed_excess_bits

N = 2000


def _bytewise(name: str = "bytewise", seen: list[int] | None = None) -> StreamCodec:
    """One byte per symbol: exactly 8 bits/symbol, no checksum (``seen`` gets input lengths)."""

    def encode(symbols: np.ndarray) -> bytes:
        if seen is not None:
            seen.append(len(symbols))
        return symbols.astype(np.uint8).tobytes()

    return StreamCodec(encode, lambda data, n: list(data), name=name)


def _gate_cases(fn: Any) -> list[Any]:
    (mark,) = [m for m in fn.pytestmark if m.name == "parametrize"]
    return list(mark.args[1])


def _run_gate(fn: Any, harness: RateFloorHarness) -> dict[str, Exception | Measurement]:
    """Every case of a gate() test function: its measurement or the failure it raised."""
    outcome: dict[str, Exception | Measurement] = {}
    for source in _gate_cases(fn):
        try:
            fn(harness, source)
        except AssertionError as exc:
            outcome[source.spec] = exc
        else:
            outcome[source.spec] = harness.measurements[-1]
    return outcome


# ------------------------------------------------------------------ per-case settings

def test_each_case_is_held_to_its_own_tolerance() -> None:
    # The bytewise codec spends 8 bits/symbol. uniform(16) has a sample floor of exactly
    # 4 bits/symbol and uniform(4) of 2 (every symbol carries log2 k bits).
    # Gate: rel=0.5, i.e. 2 bits/symbol allowed on uniform(16), 1 on uniform(4).
    fn = gate(_bytewise(), sources={
        sources.uniform(16): dict(abs=4.5),   # excess 4 <= 4.5: passes on its own tolerance
        sources.uniform(4): {},               # excess 6 > 1: fails on the gate's
        sources.uniform(8): dict(rel=0.99),   # floor 3: excess 5 > 2.97: fails on its own
    }, n=N, rel=0.5, edge_cases=False, isolate=False)
    outcome = _run_gate(fn, RateFloorHarness())
    passed = outcome["uniform(k=16)"]
    assert isinstance(passed, Measurement)
    assert passed.tolerance_bits == allowed_excess_bits(passed.floor_bits, N, None, 4.5)
    assert passed.tolerance_bits == pytest.approx(4.5 * N)  # abs alone: the gate's rel dropped
    assert isinstance(outcome["uniform(k=4)"], RateFailure)
    assert isinstance(outcome["uniform(k=8)"], RateFailure)


def test_a_cases_tolerance_replaces_both_of_the_gates() -> None:
    # A huge gate-level rel would pass everything; the case's abs=0.5 replaces it whole.
    fn = gate(_bytewise(), sources={sources.uniform(16): dict(abs=0.5)},
              n=N, rel=10.0, edge_cases=False, isolate=False)
    with pytest.raises(RateFailure, match="misses the sample floor on uniform"):
        fn(RateFloorHarness(), sources.uniform(16))


def test_each_case_is_measured_against_its_own_floor() -> None:
    zlib9 = ByteCodec(lambda b: zlib.compress(b, 9), zlib.decompress, name="zlib-9")
    fn = gate(zlib9, sources={
        sources.bernoulli(0.1): dict(floor="adaptive", rel=3.0),
        sources.uniform(256): {},
    }, n=N, rel=0.05, edge_cases=False, isolate=False)
    outcome = _run_gate(fn, RateFloorHarness())
    adaptive, default = outcome["bernoulli(p=0.1)"], outcome["uniform(k=256)"]
    assert isinstance(adaptive, Measurement)
    assert isinstance(default, Measurement)
    assert (adaptive.floor, default.floor) == ("adaptive", "sample")
    assert default.tolerance_bits == pytest.approx(0.05 * default.floor_bits)


def test_a_plain_list_of_sources_still_works_and_ids_are_the_specs() -> None:
    suite = [sources.uniform(16), sources.uniform(4)]
    listed = gate(_bytewise(), sources=suite, n=N, rel=3.0, edge_cases=False, isolate=False)
    mapped = gate(_bytewise(), sources={source: {} for source in suite}, n=N, rel=3.0,
                  edge_cases=False, isolate=False)
    for fn in (listed, mapped):
        (mark,) = [m for m in fn.pytestmark if m.name == "parametrize"]  # type: ignore[attr-defined]
        assert mark.kwargs["ids"] == ["uniform(k=16)", "uniform(k=4)"]
        assert all(isinstance(m, Measurement) for m in _run_gate(fn, RateFloorHarness()).values())


def test_merge_rules() -> None:
    shared: CheckOptions = {"rel": 0.02, "n": 500, "corruption": True, "trials": 9}
    assert merge_options(shared, {"abs": 0.002}) == {
        "abs": 0.002, "n": 500, "corruption": True, "trials": 9}
    assert merge_options(shared, {"n": 800, "trials": 3}) == {
        "rel": 0.02, "n": 800, "corruption": True, "trials": 3}
    # corruption=False takes the gate's damaged-stream settings with it
    assert merge_options(shared, {"corruption": False}) == {
        "rel": 0.02, "n": 500, "corruption": False}
    plan = plan_for_case(shared, {"corruption": False}, "here")
    assert plan.damage is None
    assert plan.trials is UNSET
    assert shared == {"rel": 0.02, "n": 500, "corruption": True, "trials": 9}  # not changed


def test_option_names_are_the_typed_options() -> None:
    assert set(OPTION_NAMES) == set(CheckOptions.__annotations__)


def test_gate_with_a_mapping_shows_each_floor_in_junit(pytester: pytest.Pytester) -> None:
    pytester.makepyfile(test_user=(
        "import zlib\n"
        "from pytest_ratefloor import ByteCodec, gate, sources\n"
        "codec = ByteCodec(lambda b: zlib.compress(b, 9), zlib.decompress, name='zlib-9')\n"
        "test_zlib = gate(codec, sources={\n"
        "    sources.bernoulli(0.1): dict(floor='adaptive', rel=3.0),\n"
        "    sources.uniform(256): {},\n"
        "}, n=2000, rel=0.05, edge_cases='short')\n"))
    result = pytester.runpytest("-v", "--junitxml=out.xml", "-p", "no:cacheprovider",
                                "-p", "no:hypothesispytest")
    result.assert_outcomes(passed=2)
    result.stdout.fnmatch_lines(["*test_zlib?bernoulli(p=0.1)? PASSED*",
                                 "*test_zlib?uniform(k=256)? PASSED*"])
    root = ET.parse(pytester.path / "out.xml").getroot()
    floors = {}
    for case in root.iter("testcase"):
        props = {p.get("name"): p.get("value") for p in case.iter("property")}
        floors[props["ratefloor.source"]] = props["ratefloor.floor"]
    assert floors == {"bernoulli(p=0.1)": "adaptive", "uniform(k=256)": "sample"}


# ------------------------------------------------------------------ damaged streams

@pytest.fixture
def damage_calls(monkeypatch: pytest.MonkeyPatch) -> list[dict[str, Any]]:
    """Replaces survive_damage; each call's keyword arguments land in the list."""
    import pytest_ratefloor.corruption as corruption

    calls: list[dict[str, Any]] = []
    monkeypatch.setattr(corruption, "survive_damage",
                        lambda codec, sample, encoded, **kw: calls.append(kw))
    return calls


SETTINGS = dict(must_detect=True, trials=7, timeout=0.5, memory_limit=None)


def test_damage_settings_reach_survive_damage(damage_calls: list[dict[str, Any]],
                                              tmp_path: Path) -> None:
    check(_bytewise(), sources.uniform(16), n=N, rel=1.5, edge_cases=False, isolate=False,
          corruption=True, **SETTINGS)  # type: ignore[arg-type]
    # through the fixture's object, with the run's isolate setting filled in afterwards
    harness = RateFloorHarness(save_dir=lambda: tmp_path, isolate=False)
    harness.check(_bytewise(), sources.uniform(16), n=N, rel=1.5, edge_cases=False,
                  corruption=True, trials=3, memory_limit=4096)
    first, second = damage_calls
    assert {k: first[k] for k in SETTINGS} == SETTINGS
    assert {k: second[k] for k in SETTINGS} == dict(
        must_detect=False, trials=3, timeout=2.0, memory_limit=4096)
    assert second["save_dir"]() == tmp_path


def test_damage_defaults_are_those_of_assert_survives_corruption(
        damage_calls: list[dict[str, Any]]) -> None:
    check(_bytewise(), sources.uniform(16), n=N, rel=1.5, edge_cases=False, isolate=False,
          corruption=True)
    assert {k: damage_calls[0][k] for k in DAMAGE_OPTIONS} == dict(
        must_detect=False, trials=200, timeout=2.0, memory_limit=DEFAULT_MEMORY_LIMIT)


def test_gate_cases_carry_their_own_damage_settings(damage_calls: list[dict[str, Any]]) -> None:
    fn = gate(_bytewise(), sources={
        sources.uniform(16): dict(trials=3, must_detect=True),
        sources.uniform(8): dict(corruption=False),     # drops the gate's trials=9 too
        sources.uniform(4): {},
        sources.uniform(2): dict(corruption=True, timeout=0.25),
    }, n=N, rel=8.0, edge_cases=False, isolate=False, corruption=True, trials=9)
    outcome = _run_gate(fn, RateFloorHarness())
    assert all(isinstance(m, Measurement) for m in outcome.values())
    assert [(kw["source"], kw["trials"], kw["must_detect"], kw["timeout"])
            for kw in damage_calls] == [
        ("uniform(k=16)", 3, True, 2.0),
        ("uniform(k=4)", 9, False, 2.0),
        ("uniform(k=2)", 9, False, 0.25),
    ]


def test_gate_turns_damage_on_for_one_case(damage_calls: list[dict[str, Any]]) -> None:
    fn = gate(_bytewise(), sources={
        sources.uniform(16): dict(corruption=True, trials=4),
        sources.uniform(4): {},
    }, n=N, rel=3.0, edge_cases=False, isolate=False)
    _run_gate(fn, RateFloorHarness())
    assert [(kw["source"], kw["trials"]) for kw in damage_calls] == [("uniform(k=16)", 4)]


def test_must_detect_is_used_for_real(tmp_path: Path) -> None:
    # Without a checksum the bytewise decoder returns damaged data silently: survival mode
    # accepts that, must-detect mode does not. Run in a forked child and real workers.
    harness = RateFloorHarness(save_dir=lambda: tmp_path)
    survive: CheckOptions = dict(n=500, rel=1.5, edge_cases=False, corruption=True, trials=12)
    detect: CheckOptions = {**survive, "must_detect": True}
    harness.check(_bytewise(), sources.uniform(16), **survive)
    with pytest.raises(CorruptionFailure, match=r"(?s)must-detect mode.*of 12 trials ran"):
        harness.check(_bytewise(), sources.uniform(16), **detect)


def test_replacing_isolate_keeps_the_damage_settings() -> None:
    plan = CheckPlan(corruption=True, trials=5, memory_limit=None)
    again = dataclasses.replace(plan, isolate=False)  # what RateFloorHarness.run does
    assert again.damage == plan.damage == dict(
        must_detect=False, trials=5, timeout=2.0, memory_limit=None)
    assert CheckPlan().damage is None
    assert "trials=UNSET" in repr(CheckPlan())


# ------------------------------------------------------------------ edge-case selection

SHORT_LENGTHS = list(range(1, 18))
ALL = [0, 1, 1, 70_000, 70_000, 1000, 256, *SHORT_LENGTHS, 65_535, 65_536, 65_537]
SHORT = [0, 1, 1, 1000, 256, *SHORT_LENGTHS]
LONG = [70_000, 70_000, 65_535, 65_536, 65_537]
# (setting, the lengths of the edge cases run on uniform(256), in order); a list, since
# True == 1 as a dict key
SELECTIONS: list[tuple[object, list[int]]] = [
    (True, ALL),
    (False, []),
    (1, [0, 1, 1, 1]),
    (17, [0, 1, 1, *SHORT_LENGTHS]),
    (255, [0, 1, 1, *SHORT_LENGTHS]),                   # every symbol once is 256 long
    (256, [0, 1, 1, 256, *SHORT_LENGTHS]),
    (1000, SHORT),
    (65_536, [*SHORT, 65_535, 65_536]),
    (69_999, [*SHORT, 65_535, 65_536, 65_537]),
    (70_000, ALL),
    ("short", SHORT),
    ("long", LONG),
]


@pytest.mark.parametrize(("setting", "lengths"), SELECTIONS,
                         ids=[repr(s) for s, _ in SELECTIONS])
def test_edge_cases_select_the_documented_cases(setting: Any, lengths: list[int]) -> None:
    seen: list[int] = []
    check(_bytewise(seen=seen), sources.uniform(256), n=N, rel=0.01, abs=4.5, isolate=False,
          edge_cases=setting)
    # the sample, the contract slice twice, then the edge cases in their documented order
    assert seen[:3] == [N, N, N]
    assert seen[3:] == lengths


def test_short_and_long_split_all_edge_cases() -> None:
    assert sorted(SHORT + LONG) == sorted(ALL)
    assert EDGE_CASE_SETS["short"] == EdgeCaseLengths(0, SHORT_CASE_LIMIT)
    # a support of 5 000 symbols: every symbol once is a long case, not a short one
    source = sources.uniform(5000)
    sample = source.sample(100)
    short = [len(a) for _, a in edge_case_inputs(source, sample, lengths=EDGE_CASE_SETS["short"])]
    long = [len(a) for _, a in edge_case_inputs(source, sample, lengths=EDGE_CASE_SETS["long"])]
    assert 5000 in long
    assert 5000 not in short
    assert max(short) == 1000


def test_assert_roundtrip_takes_the_same_selection() -> None:
    seen: list[int] = []
    assert_roundtrip(_bytewise(seen=seen), sources.uniform(256), n=N, edge_cases="short",
                     isolate=False)
    assert seen[3:] == SHORT


def test_short_cases_draw_no_long_sample(monkeypatch: pytest.MonkeyPatch) -> None:
    source = sources.uniform(256)
    draws: list[int] = []
    real = source.sample

    def counting(n: int, seed: int = 0) -> np.ndarray:
        draws.append(n)
        return real(n, seed)

    monkeypatch.setattr(source, "sample", counting)
    names = [name for name, _ in edge_case_inputs(source, real(10), lengths=EdgeCaseLengths(0, 17))]
    assert draws == [17]  # the sample (10) is shorter than the longest prefix kept
    assert "edge case 'sample prefix of length 17'" in names
    edge_case_inputs(source, real(100), lengths=EDGE_CASE_SETS["short"])
    assert draws == [17]  # long enough: its own prefixes
    edge_case_inputs(source, real(100))
    assert draws == [17, 65_537]  # all cases: the prefixes around 2^16 need a draw


def test_a_selection_keeps_the_prefixes_of_the_full_set() -> None:
    source = sources.geometric(0.2)
    sample = source.sample(50, 3)
    full = dict(edge_case_inputs(source, sample, seed=3))
    some = dict(edge_case_inputs(source, sample, seed=3, lengths=EdgeCaseLengths(0, 65_535)))
    for name, arr in some.items():
        assert np.array_equal(full[name], arr), name


# ------------------------------------------------------------------ bad values

def _explodes(symbols: np.ndarray) -> bytes:
    raise AssertionError("the codec must not run when an option is bad")


EXPLODING = StreamCodec(_explodes, lambda data, n: list(data), name="never-run")

BAD: list[tuple[dict[str, Any], type[Exception], str]] = [
    (dict(edge_cases=0), ValueError, "edge_cases must be an integer >= 1, got 0"),
    (dict(edge_cases=-3), ValueError, "edge_cases must be an integer >= 1, got -3"),
    (dict(edge_cases="shrot"), ValueError,
     "edge_cases must be one of 'short', 'long', got 'shrot'"),
    (dict(edge_cases=1.5), TypeError,
     "edge_cases must be True, False, a maximum length (an integer >= 1) or one of "
     "'short', 'long', got 1.5"),
    (dict(edge_cases=None), TypeError, "edge_cases must be True, False, a maximum length"),
    (dict(corruption=True, trials=0), ValueError, "trials must be an integer >= 1, got 0"),
    (dict(corruption=True, trials=2.0), TypeError, "trials must be an integer, got 2.0"),
    (dict(corruption=True, timeout=0), ValueError,
     "timeout must be a finite number > 0, got 0"),
    (dict(corruption=True, timeout=float("inf")), ValueError,
     "timeout must be a finite number > 0, got inf"),
    (dict(corruption=True, timeout="1"), TypeError, "timeout must be a number, got '1'"),
    (dict(corruption=True, memory_limit=0), ValueError,
     "memory_limit must be an integer >= 1, got 0"),
    (dict(corruption=True, memory_limit=1.5), TypeError,
     "memory_limit must be an integer, got 1.5"),
    (dict(corruption=True, must_detect=1), TypeError, "must_detect must be True or False, got 1"),
    (dict(must_detect=True), ValueError,
     "must_detect must be given only with corruption=True (a setting of the damaged-stream "
     "check), got True"),
    (dict(corruption=False, timeout=10), ValueError,
     "timeout must be given only with corruption=True"),
    (dict(memory_limit=None), ValueError, "memory_limit must be given only with corruption=True"),
]


@pytest.mark.parametrize(("options", "kind", "text"), BAD,
                         ids=[repr(o) for o, _, _ in BAD])
def test_bad_values_are_refused_before_the_codec_runs(options: dict[str, Any],
                                                      kind: type[Exception], text: str) -> None:
    for call in (
        lambda: check(EXPLODING, sources.uniform(4), isolate=False, **options),
        lambda: RateFloorHarness(isolate=False).check(EXPLODING, sources.uniform(4), **options),
        lambda: gate(EXPLODING, sources=[sources.uniform(4)], **options),
    ):
        with pytest.raises(kind) as info:
            call()
        assert str(info.value).startswith(text)
    with pytest.raises(kind) as info:  # the same value as one source's own option
        gate(EXPLODING, sources={sources.uniform(4): options})
    assert str(info.value) == f"gate source uniform(k=4): {_plan_error(options)}"


def _plan_error(options: dict[str, Any]) -> str:
    try:
        CheckPlan(**options)
    except (TypeError, ValueError) as exc:
        return str(exc)
    raise AssertionError(f"{options} was accepted")


def test_assert_roundtrip_refuses_a_bad_selection() -> None:
    with pytest.raises(ValueError, match="edge_cases must be one of 'short', 'long', got 'all'"):
        assert_roundtrip(EXPLODING, sources.uniform(4), edge_cases="all", isolate=False)


def test_a_cases_own_options_are_checked_at_collection() -> None:
    u4 = sources.uniform(4)
    with pytest.raises(ValueError, match=(
            r"^gate source uniform\(k=4\): option must be one of 'n', 'seed', .*, got 'rell'$")):
        gate(EXPLODING, sources={u4: {"rell": 0.1}})
    with pytest.raises(TypeError, match=r"^gate source uniform\(k=4\): option must be one of "
                                        r".*, got 3$"):
        gate(EXPLODING, sources={u4: {3: 0.1}})
    with pytest.raises(TypeError, match=(
            r"^gate source uniform\(k=4\): its options must be a mapping of check options "
            r"such as dict\(rel=0\.02\), got 0\.02$")):
        gate(EXPLODING, sources={u4: 0.02})
    with pytest.raises(ValueError, match=(
            r"^gate source uniform\(k=4\): rel must be a finite number >= 0, got -1$")):
        gate(EXPLODING, sources={sources.uniform(2): {}, u4: dict(rel=-1)})
    with pytest.raises(ValueError, match=(
            r"^gate source uniform\(k=4\): floor must be one of .*got 'entropie'$")):
        gate(EXPLODING, sources={u4: dict(floor="entropie")})
    with pytest.raises(ValueError, match=(
            r"^gate source uniform\(k=4\): trials must be given only with corruption=True")):
        gate(EXPLODING, sources={u4: dict(trials=5)})
    with pytest.raises(TypeError, match=(
            r"^gate source uniform\(k=4\): corruption must be True or False, got 0$")):
        gate(EXPLODING, sources={u4: dict(corruption=0)}, corruption=True, trials=3)
    # a gate-level error is the gate's own, as before
    with pytest.raises(ValueError, match=r"^rel must be a finite number >= 0, got -1$"):
        gate(EXPLODING, sources={u4: {}}, rel=-1)
