"""The gate cannot be bypassed (pytester, end to end).

Each test is a reproduction of a path that once let a regression through or
lost the user's data: a ledger not found from a subfolder, a changed ``n``
turning a regression into a "new" case, recording failed measurements,
concurrent recordings, an output path that is the ledger, a symlinked
ledger, a ledger path that names a folder or a FIFO, misspelt markers.
Each must now end in a clear failure or error, with nothing lost.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time

import pytest
from test_plugin import (  # _clean_environment: the autouse fixture of those runs
    ALPHA_BITS,
    BETA_BITS,
    INNER,
    LEDGER_NAME,
    TESTS,
    _clean_environment,  # noqa: F401
    ledger_bits,
    make_project,
    run,
    set_pad,
)

# -- the ledger is found the same way from any folder ---------------------------------------


def test_a_run_from_a_subfolder_finds_the_projects_ledger(
    pytester: pytest.Pytester, monkeypatch: pytest.MonkeyPatch
) -> None:
    """``cd tests && pytest`` in a project with no pytest configuration."""
    (pytester.path / ".git").mkdir()  # the project's top folder
    tests = pytester.mkpydir("tests")
    (tests / "__init__.py").unlink()
    (tests / "rfcase.py").write_text(make_project.__globals__["RFCASE"])
    (tests / "test_rf_gated.py").write_text(TESTS)
    monkeypatch.chdir(tests)
    result = pytester.runpytest(*INNER, "--ratefloor-record")
    result.assert_outcomes(passed=2)
    top = pytester.path / LEDGER_NAME
    assert ledger_bits(top) == {"alpha": ALPHA_BITS, "beta": BETA_BITS}
    assert not (tests / LEDGER_NAME).exists()
    (tests / "pad_alpha.txt").write_text("5")  # a 5-byte regression
    result = pytester.runpytest(*INNER)
    result.assert_outcomes(passed=1, failed=1)
    result.stdout.fnmatch_lines([f"*{top}*"])  # the summary names the file it used


# -- strict mode ---------------------------------------------------------------------------


def test_strict_mode_refuses_a_missing_ledger(pytester: pytest.Pytester) -> None:
    ledger = make_project(pytester)
    result = run(pytester, "--ratefloor-strict")
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    result.stderr.fnmatch_lines([f"*strict mode: no ledger at {ledger}*"])
    # recording under strict mode creates it
    run(pytester, "--ratefloor-strict", "--ratefloor-record").assert_outcomes(passed=2)
    assert ledger.exists()


def test_strict_mode_fails_a_case_whose_n_changed(pytester: pytest.Pytester) -> None:
    """``gate(..., n=99_999)`` once hid a regression as a new case."""
    make_project(pytester)
    run(pytester, "--ratefloor-record").assert_outcomes(passed=2)
    make_project(pytester, TESTS.replace("n=4000", "n=3999"))
    set_pad(pytester, "alpha", 3)
    run(pytester).assert_outcomes(passed=2)  # the lax default lets it through as "new"
    result = run(pytester, "--ratefloor-strict")
    result.assert_outcomes(passed=1, failed=1)
    result.stdout.fnmatch_lines([
        "*NewCaseFailure: new case: codec 'alpha' on uniform(k=256), n=3999, seed=0 has no entry*",
        "*the ledger holds uniform(k=256) as codec 'alpha' n=4000 seed=0: did n, the seed or "
        "the codec name change?*",
    ])
    assert result.ret == pytest.ExitCode.TESTS_FAILED


def test_strict_mode_from_the_ini_file_fails_stale_entries_of_a_full_run(
    pytester: pytest.Pytester,
) -> None:
    make_project(pytester)
    run(pytester, "--ratefloor-record").assert_outcomes(passed=2)
    pytester.makeini("[pytest]\nratefloor_strict = true\n")
    make_project(pytester, TESTS.split("def test_beta")[0])  # beta's test is gone
    result = run(pytester)
    result.assert_outcomes(passed=1)
    assert result.ret == pytest.ExitCode.TESTS_FAILED
    # the summary wraps its lines at the terminal's width: search the words
    assert "strict mode: 1 ledger entry no test measured" in " ".join(result.stdout.str().split())
    result.stdout.fnmatch_lines(["ERROR: strict mode: 1 ledger entry*", "*beta*"])
    # a partial run cannot know what is stale: no verdict on it
    assert run(pytester, "-k", "alpha").ret == pytest.ExitCode.OK


# -- recording writes only what passed ------------------------------------------------------


CHEATS = '''
import numpy as np
from pytest_ratefloor import StreamCodec, sources
from rfcase import ALPHA, SOURCE

def _encode(symbols):
    return b"x"  # 8 bits for thousands of symbols: the decoder knows the data already

_DATA = {}

def _remember(symbols):
    _DATA["s"] = np.array(symbols)
    return b"x"

CHEAT = StreamCodec(_remember, lambda d, n: _DATA["s"][:n], name="cheat")

def test_alpha(ratefloor):
    ratefloor.check(ALPHA, SOURCE, n=4000, rel=0.5, edge_cases=False)

def test_cheat(ratefloor):
    ratefloor.check(CHEAT, SOURCE, n=4000, rel=0.5, edge_cases=False, isolate=False)

def test_too_slack(ratefloor):
    ratefloor.check(ALPHA, SOURCE, n=2000, rel=0.5, edge_cases=False)
    assert False, "something else in the test failed"
'''


def test_recording_keeps_only_cases_whose_tests_passed(pytester: pytest.Pytester) -> None:
    ledger = make_project(pytester, CHEATS)
    result = run(pytester, "--ratefloor-record")
    result.assert_outcomes(passed=1, failed=2)
    doc = json.loads(ledger.read_text())
    assert [c["codec"] for c in doc["cases"].values()] == ["alpha"]
    assert all(c["n"] == 4000 for c in doc["cases"].values())
    result.stdout.fnmatch_lines(["*not recorded*", "*cheat*test_cheat*"])
    assert "test_cheat: its test failed" in " ".join(result.stdout.str().split())


def test_a_failed_case_keeps_its_previous_entry(pytester: pytest.Pytester) -> None:
    ledger = make_project(pytester)
    run(pytester, "--ratefloor-record").assert_outcomes(passed=2)
    before = ledger_bits(ledger)
    make_project(pytester, TESTS.replace(
        "edge_cases=False)\n\n\ndef test_beta",
        "edge_cases=False)\n    raise RuntimeError('later step')\n\n\ndef test_beta"))
    set_pad(pytester, "alpha", 7)
    set_pad(pytester, "beta", 1)
    run(pytester, "--ratefloor-record").assert_outcomes(passed=1, failed=1)
    after = ledger_bits(ledger)
    assert after["alpha"] == before["alpha"]  # its test failed: the old figure stays
    assert after["beta"] == BETA_BITS + 8


# -- concurrent recordings merge --------------------------------------------------------------


def test_two_recordings_at_once_both_land(pytester: pytest.Pytester) -> None:
    ledger = make_project(pytester)
    slow = "import time\ntime.sleep(0.3)\n"
    (pytester.path / "test_rf_one.py").write_text(slow + TESTS.split("def test_beta")[0])
    (pytester.path / "test_rf_two.py").write_text(
        slow + "from rfcase import BETA, SOURCE\n\n" + "def test_beta" +
        TESTS.split("def test_beta")[1])
    (pytester.path / "test_rf_gated.py").unlink()
    env = {k: v for k, v in os.environ.items()
           if not k.startswith("PYTEST_XDIST") and k != "PYTEST_ADDOPTS"}
    procs = [
        subprocess.Popen([sys.executable, "-m", "pytest", *INNER, "--ratefloor-record",
                          "-q", name], cwd=pytester.path, env=env,
                         stdout=subprocess.PIPE, stderr=subprocess.STDOUT)
        for name in ("test_rf_one.py", "test_rf_two.py")
    ]
    outputs = [p.communicate(timeout=120)[0].decode() for p in procs]
    assert [p.returncode for p in procs] == [0, 0], outputs
    assert ledger_bits(ledger) == {"alpha": ALPHA_BITS, "beta": BETA_BITS}
    assert sorted(p.name for p in pytester.path.iterdir() if p.name.startswith(".")) == []


# -- outputs never overwrite the ledger; a symlinked ledger is written through -----------------


def test_a_report_path_that_is_the_ledger_is_refused(pytester: pytest.Pytester) -> None:
    ledger = make_project(pytester)
    run(pytester, "--ratefloor-record").assert_outcomes(passed=2)
    before = ledger.read_bytes()
    result = run(pytester, "--ratefloor-report", LEDGER_NAME)
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    result.stderr.fnmatch_lines(["*report '*/ratefloor-ledger.json' is the same file as the "
                                 "ledger; nothing was written*"])
    assert ledger.read_bytes() == before


def test_a_symlinked_ledger_is_written_through(pytester: pytest.Pytester) -> None:
    make_project(pytester)
    store = pytester.mkdir("store")
    target = store / "real-ledger.json"
    link = pytester.path / LEDGER_NAME
    run(pytester, "--ratefloor-record", "--ratefloor-ledger", str(target)).assert_outcomes(
        passed=2)
    link.symlink_to(target)
    set_pad(pytester, "beta", 2)
    run(pytester, "--ratefloor-record").assert_outcomes(passed=2)
    assert link.is_symlink()
    assert ledger_bits(target)["beta"] == BETA_BITS + 16


# -- bad ledger paths and markers ---------------------------------------------------------------


def test_an_ini_ledger_path_naming_a_folder_is_refused(pytester: pytest.Pytester) -> None:
    make_project(pytester)
    pytester.makeini("[pytest]\nratefloor_ledger = sub/\n")
    result = run(pytester, "--ratefloor-record")
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    result.stderr.fnmatch_lines(["*ratefloor_ledger = 'sub/' names a folder*"])
    assert not (pytester.path / "sub").exists()


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs FIFOs")
def test_a_fifo_ledger_fails_at_once(pytester: pytest.Pytester) -> None:
    make_project(pytester)
    os.mkfifo(pytester.path / LEDGER_NAME)
    started = time.monotonic()
    result = run(pytester)
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    assert time.monotonic() - started < 30
    result.stderr.fnmatch_lines(["*not a regular file*"])


def test_an_absurd_bit_count_stops_the_run_before_any_test(pytester: pytest.Pytester) -> None:
    ledger = make_project(pytester)
    run(pytester, "--ratefloor-record").assert_outcomes(passed=2)
    ledger.write_text(ledger.read_text().replace(f'"bits": {ALPHA_BITS}', '"bits": ' + "9" * 400))
    result = run(pytester)
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    result.stderr.fnmatch_lines([f"*{LEDGER_NAME}*"])
    assert "Traceback" not in result.stderr.str()


@pytest.mark.parametrize(
    ("marker", "message"),
    [
        ("ratefloor(0.5)", "*takes keyword arguments only (slack=REL), got positional 0.5*"),
        ("ratefloor(slak=0.5)", "*got unknown keyword(s) slak; it takes slack=*"),
    ],
)
def test_marker_arguments_are_checked(pytester: pytest.Pytester, marker: str,
                                      message: str) -> None:
    make_project(pytester, TESTS.replace(
        "def test_alpha", f"import pytest\n\n@pytest.mark.{marker}\ndef test_alpha"))
    result = run(pytester)
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    result.stderr.fnmatch_lines([message])


def test_under_xdist_recording_also_keeps_only_passed_cases(pytester: pytest.Pytester) -> None:
    pytest.importorskip("xdist")
    ledger = make_project(pytester, CHEATS)
    result = run(pytester, "-n", "2", "--ratefloor-record")
    result.assert_outcomes(passed=1, failed=2)
    assert list(ledger_bits(ledger)) == ["alpha"]
    assert json.loads(ledger.read_text())["cases"].popitem()[1]["n"] == 4000


def test_gate_tests_are_located_at_the_users_gate_call(pytester: pytest.Pytester) -> None:
    source = (
        "import zlib\n"
        "from pytest_ratefloor import ByteCodec, gate, sources\n"
        "\n"
        "CODEC = ByteCodec(zlib.compress, zlib.decompress, name='z')\n"
        "test_bytes = gate(CODEC, sources=[sources.uniform(256), sources.uniform(4)])\n"
    )
    items = pytester.getitems(source)
    assert len(items) == 2
    for item in items:
        path, lineno, _ = item.location
        assert path.endswith(".py")
        assert "harness" not in path
        assert lineno == 4  # 0-based: the gate() line, fifth of the file
