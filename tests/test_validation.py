"""One answer per mistake: the same bad argument gives the same error through every door.

The rules (pytest_ratefloor.validation): a wrong type is a ``TypeError``, a
bad value a ``ValueError``, and every message reads
``"[<where>: ]<name> must be <rule>, got <value>"``.
"""

from __future__ import annotations

import re
import zlib
from collections.abc import Callable
from typing import Any

import numpy as np
import pytest

from pytest_ratefloor import codes, sources, validation
from pytest_ratefloor.checks import assert_rate, assert_roundtrip, check, measure
from pytest_ratefloor.cli import main
from pytest_ratefloor.codecs import ByteCodec
from pytest_ratefloor.corruption import assert_survives_corruption, corruption_schedule
from pytest_ratefloor.harness import RateFloorHarness, gate
from pytest_ratefloor.settings import usage_slack

ZLIB = ByteCodec(zlib.compress, zlib.decompress, name="zlib")
SOURCE = sources.uniform(4)

#: Every public door that takes a sample size ``n`` and a ``seed``.
SAMPLE_DOORS: dict[str, Callable[..., Any]] = {
    "measure": lambda **kw: measure(ZLIB, SOURCE, **kw),
    "assert_roundtrip": lambda **kw: assert_roundtrip(ZLIB, SOURCE, **kw),
    "assert_rate": lambda **kw: assert_rate(ZLIB, SOURCE, **kw),
    "check": lambda **kw: check(ZLIB, SOURCE, **kw),
    "fixture check": lambda **kw: RateFloorHarness().check(ZLIB, SOURCE, **kw),
    "gate": lambda **kw: gate(ZLIB, sources=[SOURCE], **kw),
    "corruption": lambda **kw: assert_survives_corruption(ZLIB, SOURCE, trials=1, **kw),
    "Source.sample": lambda **kw: SOURCE.sample(**{"n": 10, **kw}),
}


@pytest.mark.parametrize("door", SAMPLE_DOORS)
@pytest.mark.parametrize(
    ("bad", "kind", "message"),
    [
        ({"n": 1.5}, TypeError, "n must be an integer, got 1.5"),
        ({"n": "100"}, TypeError, "n must be an integer, got '100'"),
        ({"n": True}, TypeError, "n must be an integer, got True"),
        ({"seed": 1.5}, TypeError, "seed must be an integer, got 1.5"),
        ({"seed": np.float64(2.0)}, TypeError, "seed must be an integer, got 2.0"),
        ({"seed": -1}, ValueError, "seed must be an integer >= 0, got -1"),
    ],
)
def test_sample_size_and_seed_get_one_answer(door: str, bad: dict[str, object],
                                             kind: type[Exception], message: str) -> None:
    with pytest.raises(kind) as info:
        SAMPLE_DOORS[door](**bad)
    assert type(info.value) is kind
    assert str(info.value) == message


@pytest.mark.parametrize("door", ["measure", "check", "fixture check", "gate"])
def test_a_check_needs_a_sample(door: str) -> None:
    # a rate needs at least one symbol; the message names the rule of that door
    with pytest.raises(ValueError, match=r"^n must be an integer >= 1, got 0$"):
        SAMPLE_DOORS[door](n=0)


@pytest.mark.parametrize(
    "door",
    [
        lambda trials: assert_survives_corruption(ZLIB, SOURCE, n=100, trials=trials),
        lambda trials: corruption_schedule(100, trials),
    ],
)
@pytest.mark.parametrize(
    ("trials", "kind", "message"),
    [
        (2.5, TypeError, "trials must be an integer, got 2.5"),
        (0, ValueError, "trials must be an integer >= 1, got 0"),
    ],
)
def test_trials_get_one_answer(door: Callable[[object], object], trials: object,
                               kind: type[Exception], message: str) -> None:
    with pytest.raises(kind, match=f"^{re.escape(message)}$"):
        door(trials)


@pytest.mark.parametrize(
    "door",
    [
        sources.bernoulli,
        sources.geometric,
        codes.golomb_parameter,
        codes.rice_parameter,
        lambda p: codes.golomb_expected_length(p, 2),
    ],
)
def test_a_probability_of_the_wrong_type_gets_one_answer(door: Callable[[object], object]) -> None:
    with pytest.raises(TypeError, match=r"(^|: )p must be a number, got 'x'$"):
        door("x")
    range_rule = r"(^|: )p must be a finite number in [\[(]0, 1\], got nan$"
    with pytest.raises(ValueError, match=range_rule):
        door(float("nan"))


SLACK_MESSAGE = "must be a finite number >= 0 (a relative slack such as 0.01), got"


@pytest.mark.parametrize("bad", ["wide", "-0.1", "nan", "inf"])
def test_a_slack_gets_one_answer_from_options_ini_markers_and_the_command_line(
    bad: str, capsys: pytest.CaptureFixture[str]
) -> None:
    expected = f"{SLACK_MESSAGE} {bad!r}"
    with pytest.raises(ValueError) as direct:
        validation.slack(bad, "--ratefloor-slack")
    assert str(direct.value) == f"--ratefloor-slack {expected}"
    with pytest.raises(pytest.UsageError) as usage:
        usage_slack(bad, "ini key ratefloor_slack")
    assert str(usage.value) == f"ini key ratefloor_slack {expected}"
    assert main(["diff", "a.json", "b.json", "--slack", bad]) == 2
    assert capsys.readouterr().err.strip() == f"ratefloor: error: --slack {expected}"


def test_numbers_from_numpy_are_numbers_and_bools_are_not() -> None:
    assert validation.integer(np.int32(5), "n") == 5
    assert validation.real(np.float32(0.5), "p") == 0.5
    with pytest.raises(TypeError, match=r"^n must be an integer, got True$"):
        validation.integer(np.bool_(True), "n")
    with pytest.raises(TypeError, match=r"^p must be a number, got False$"):
        validation.real(False, "p")
    assert validation.real(-0.0, "x") == 0.0  # -0.0 would make two specs of one source
    assert str(validation.real(-0.0, "x")) == "0.0"
