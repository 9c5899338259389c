"""The plugin end to end (pytester): ledger gate, recording, partial runs, bad ledgers,
options and ini keys, reports, JUnit properties.

The user project is written by :func:`make_project`: a module ``rfcase.py`` with
byte-per-symbol codecs whose encoder appends as many zero bytes as a file
``pad_<codec>.txt`` says (to inject a regression or an improvement of exactly
8 bits per byte), and a test file that checks two of them through the real
``ratefloor`` fixture and harness. test_xdist.py reuses these helpers.
"""

from __future__ import annotations

import contextlib
import importlib
import json
import os
import signal
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

# Import what the inner runs import now: pytester drops modules first imported during
# an in-process run, and numpy cannot be loaded twice in one process.
for _name in ("numpy", "pytest_ratefloor.harness", "pytest_ratefloor.sources"):
    importlib.import_module(_name)
for _name in ("matplotlib.figure", "matplotlib.backends.backend_agg"):  # the plot extra
    with contextlib.suppress(ImportError):
        importlib.import_module(_name)

RFCASE = '''
"""Byte-per-symbol codecs with a controllable trailer, for the ledger gate."""
import pathlib

import numpy as np

from pytest_ratefloor import StreamCodec, sources

HERE = pathlib.Path(__file__).parent

SOURCE = sources.uniform(256)


def padded(name):
    def encode(symbols):
        pad_file = HERE / f"pad_{name}.txt"
        pad = int(pad_file.read_text()) if pad_file.exists() else 0
        return np.asarray(symbols, dtype=np.uint8).tobytes() + bytes(pad)

    def decode(data, n):
        return np.frombuffer(bytes(data)[:n], dtype=np.uint8)

    return StreamCodec(encode, decode, name=name)


ALPHA = padded("alpha")
BETA = padded("beta")
'''

TESTS = '''
from rfcase import ALPHA, BETA, SOURCE


def test_alpha(ratefloor):
    ratefloor.check(ALPHA, SOURCE, n=4000, rel=0.5, edge_cases=False)


def test_beta(ratefloor):
    ratefloor.check(BETA, SOURCE, n=2000, seed=3, rel=0.5, edge_cases=False)
'''

LEDGER_NAME = "ratefloor-ledger.json"
ALPHA_BITS = 4000 * 8
BETA_BITS = 2000 * 8


def make_project(pytester: pytest.Pytester, tests: str = TESTS) -> Path:
    """Write the user project; return the default ledger path (not created).

    Module names are unusual on purpose: in-process runs share sys.modules with the
    outer suite, so an inner ``test_codecs.py`` would clash with ours.
    """
    pytester.makepyfile(rfcase=RFCASE, test_rf_gated=tests)
    return pytester.path / LEDGER_NAME


def set_pad(pytester: pytest.Pytester, codec: str, nbytes: int) -> None:
    (pytester.path / f"pad_{codec}.txt").write_text(str(nbytes))


def ledger_bits(path: Path) -> dict[str, int]:
    """codec name -> recorded bits, read with the stdlib json module."""
    doc = json.loads(path.read_text(encoding="utf-8"))
    return {case["codec"]: case["bits"] for case in doc["cases"].values()}


@pytest.fixture(autouse=True)
def _clean_environment(monkeypatch: pytest.MonkeyPatch) -> None:
    # our own suite may run under xdist or in CI: the inner runs must not see that
    for name in list(os.environ):
        if name.startswith("PYTEST_XDIST") or name in ("PYTEST_ADDOPTS", "GITHUB_STEP_SUMMARY"):
            monkeypatch.delenv(name)


#: Inner runs leave out the cache and hypothesis's plugin (its summary hook imports
#: hypothesis afresh in every in-process run: seconds each).
INNER = ("-p", "no:cacheprovider", "-p", "no:hypothesispytest")


def run(pytester: pytest.Pytester, *args: str) -> pytest.RunResult:
    return pytester.runpytest(*INNER, *args)


# -- the gate, step by step ----------------------------------------------------------


def test_pass_record_regress_improve(pytester: pytest.Pytester) -> None:
    ledger = make_project(pytester)

    # 1. no ledger yet: everything passes and is listed as new; nothing is written
    result = run(pytester)
    result.assert_outcomes(passed=2)
    result.stdout.fnmatch_lines(["*= ratefloor: measured rate against the floor =*",
                                 "alpha", "  uniform(k=256)*8.0000*100.00%*new",
                                 f"no ledger at {ledger.name} yet: every case is new; *",
                                 "  *pytest --ratefloor-record",
                                 "Caution: efficiency measured on synthetic*"])
    assert not ledger.exists()

    # 2. record
    result = run(pytester, "--ratefloor-record")
    result.assert_outcomes(passed=2)
    assert ledger_bits(ledger) == {"alpha": ALPHA_BITS, "beta": BETA_BITS}
    result.stdout.fnmatch_lines([f"ledger recorded into {ledger.name}: *2 new*"])
    recorded = ledger.read_bytes()

    # 3. unchanged run
    run(pytester).stdout.fnmatch_lines(["*0 regressed*2 unchanged*"])

    # 4. an injected regression (+1 byte = +8 bits) fails exactly that test
    set_pad(pytester, "alpha", 1)
    result = run(pytester)
    result.assert_outcomes(passed=1, failed=1)
    result.stdout.fnmatch_lines([
        "*RegressionFailure: +0.025% bits vs ledger (+8 bits, slack 0%): codec 'alpha' on "
        "uniform(k=256), n=4000, seed=0",
        "*rate regression: needs 32,008 bits; the ledger holds 32,000 bits",
        f"*ledger: {ledger}",
        "*if the increase is intended, record the new figure: pytest --ratefloor-record "
        "test_rf_gated.py::test_alpha",
        "FAILED test_rf_gated.py::test_alpha*",
    ])
    result.stdout.fnmatch_lines(["alpha", "  uniform(k=256)*+0.025% regressed", "*1 regressed*"])
    # the short summary line starts with the figures, not the exception's module path
    result.stdout.fnmatch_lines(["FAILED test_rf_gated.py::test_alpha - +0.025% bits vs ledger*"])
    assert ledger.read_bytes() == recorded  # reading never writes

    # 5. the slack lets it through (CLI) and the delta is still shown
    result = run(pytester, "--ratefloor-slack", "0.001")
    result.assert_outcomes(passed=2)
    result.stdout.fnmatch_lines(["alpha", "  uniform(k=256)*+0.025% within-slack"])

    # 6. an improvement passes and is listed as such
    set_pad(pytester, "alpha", 0)
    set_pad(pytester, "beta", 0)
    run(pytester, "--ratefloor-record")  # baseline: no padding
    set_pad(pytester, "beta", 0)
    text = ledger.read_text()
    ledger.write_text(text.replace(f'"bits": {BETA_BITS}', f'"bits": {BETA_BITS + 16}'))
    result = run(pytester)
    result.assert_outcomes(passed=2)
    result.stdout.fnmatch_lines(["beta", "  uniform(k=256)*-0.100% improved", "*1 improved*"])


def test_partial_record_keeps_unmeasured_entries_and_stale_listing(
        pytester: pytest.Pytester) -> None:
    ledger = make_project(pytester)
    run(pytester, "--ratefloor-record").assert_outcomes(passed=2)

    # a -k run records only alpha; beta's entry stays, and nothing is called stale
    set_pad(pytester, "alpha", 2)
    set_pad(pytester, "beta", 5)
    result = run(pytester, "-k", "alpha", "--ratefloor-record")
    result.assert_outcomes(passed=1, deselected=1)
    assert ledger_bits(ledger) == {"alpha": ALPHA_BITS + 16, "beta": BETA_BITS}
    result.stdout.fnmatch_lines(["stale entries not listed: partial run (-k; 1 deselected)"])
    result.stdout.no_fnmatch_line("stale: *")

    # -x stop: not a full run either
    set_pad(pytester, "alpha", 3)
    result = run(pytester, "-x")
    result.assert_outcomes(failed=1)
    result.stdout.fnmatch_lines(
        ["stale entries not listed: partial run (stopped early; 1 test(s) failed)"])

    # -m, and an interrupted run (Ctrl-C inside a test) are not full runs either
    result = run(pytester, "-m", "not slow", "-p", "no:warnings")
    # (alpha still regresses: a run with a failed test cannot judge staleness either)
    result.stdout.fnmatch_lines(["stale entries not listed: partial run (-m; 2 test(s) failed)"])
    pytester.makepyfile(test_rf_stop=(
        "def test_zz_stop(ratefloor):\n    raise KeyboardInterrupt\n"))
    result = pytester.runpytest(*INNER, no_reraise_ctrlc=True)
    assert result.ret == pytest.ExitCode.INTERRUPTED
    result.stdout.fnmatch_lines(
        ["stale entries not listed: partial run (interrupted; 2 test(s) failed)"])
    (pytester.path / "test_rf_stop.py").unlink()

    # a full run without beta's test lists beta's entry as stale (and keeps it)
    pytester.makepyfile(test_rf_gated=TESTS.split("def test_beta")[0])
    set_pad(pytester, "alpha", 2)
    result = run(pytester, "--ratefloor-record")
    result.assert_outcomes(passed=1)
    result.stdout.fnmatch_lines(["stale: 1 ledger entry not measured by this full run*",
                                 "  beta | uniform(k=256) | n=2000 | seed=3"])
    assert "beta" in ledger_bits(ledger)


def test_resampled_source_is_a_clear_error(pytester: pytest.Pytester) -> None:
    ledger = make_project(pytester)
    run(pytester, "--ratefloor-record")
    doc = json.loads(ledger.read_text())
    for case in doc["cases"].values():
        if case["codec"] == "beta":
            case["fingerprint"] = "0123456789abcdef"
    ledger.write_text(json.dumps(doc, indent=2, sort_keys=True) + "\n")
    result = run(pytester)
    result.assert_outcomes(passed=1, failed=1)
    result.stdout.fnmatch_lines([
        "*SampleMismatchError: ledger entry cannot be compared: codec 'beta' on uniform(k=256), "
        "n=2000, seed=3 was recorded on a different sample (fingerprint 0123456789abcdef*",
        "*re-record the case: pytest --ratefloor-record test_rf_gated.py::test_beta",
    ])
    # recording is the remedy
    run(pytester, "--ratefloor-record").assert_outcomes(passed=2)
    run(pytester).assert_outcomes(passed=2)


def test_marker_slack(pytester: pytest.Pytester) -> None:
    make_project(pytester, TESTS.replace(
        "def test_alpha", "import pytest\n\n@pytest.mark.ratefloor(slack=0.01)\ndef test_alpha"))
    run(pytester, "--ratefloor-record", "--strict-markers").assert_outcomes(passed=2)
    set_pad(pytester, "alpha", 1)
    set_pad(pytester, "beta", 1)
    result = run(pytester, "--strict-markers")
    result.assert_outcomes(passed=1, failed=1)  # alpha within its marker slack, beta not
    result.stdout.fnmatch_lines(["alpha", "*within-slack", "FAILED test_rf_gated.py::test_beta*"])
    make_project(pytester, TESTS.replace(
        "def test_alpha", "import pytest\n\n@pytest.mark.ratefloor(slack='lots')\ndef test_alpha"))
    result = run(pytester)
    # refused at collection, before any test runs (a usage error, exit status 4)
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    result.stderr.fnmatch_lines(
        ["*test_alpha: @pytest.mark.ratefloor(slack=...) must be a finite number >= 0*"
         "got 'lots'*"]
    )


# -- bad ledgers --------------------------------------------------------------------------


def test_corrupt_ledger_stops_the_run_and_is_not_overwritten(pytester: pytest.Pytester) -> None:
    ledger = make_project(pytester)
    run(pytester, "--ratefloor-record")
    good = ledger.read_bytes()
    ledger.write_bytes(good[: len(good) // 2])  # truncated
    result = run(pytester)
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    result.stderr.fnmatch_lines([f"ERROR: ratefloor: {ledger}: not valid JSON at line *"
                                 "(the file ends early: truncated?)*left untouched*"
                                 "--ratefloor-record*"])
    assert ledger.read_bytes() == good[: len(good) // 2]
    assert run(pytester, "--help").ret == pytest.ExitCode.OK  # help still works

    # recording replaces it, keeping the unreadable bytes beside it
    result = run(pytester, "--ratefloor-record")
    result.assert_outcomes(passed=2, warnings=1)
    assert ledger_bits(ledger) == {"alpha": ALPHA_BITS, "beta": BETA_BITS}
    assert (pytester.path / (LEDGER_NAME + ".unreadable")).read_bytes() == good[: len(good) // 2]


def test_newer_schema_is_refused_even_when_recording(pytester: pytest.Pytester) -> None:
    ledger = make_project(pytester)
    text = json.dumps({"kind": "pytest-ratefloor rate ledger", "schema": 99, "cases": {}})
    ledger.write_text(text)
    for args in ((), ("--ratefloor-record",)):
        result = run(pytester, *args)
        assert result.ret == pytest.ExitCode.USAGE_ERROR
        result.stderr.fnmatch_lines(["*ledger schema 99 is newer than this pytest-ratefloor*"])
    assert ledger.read_text() == text


def test_failed_write_keeps_the_old_ledger(pytester: pytest.Pytester,
                                           monkeypatch: pytest.MonkeyPatch) -> None:
    ledger = make_project(pytester)
    run(pytester, "--ratefloor-record")
    before = ledger.read_bytes()
    real_replace = os.replace

    def failing_replace(src: str, dst: str) -> None:
        if str(dst).endswith(LEDGER_NAME):
            raise OSError(28, "No space left on device")
        real_replace(src, dst)

    monkeypatch.setattr(os, "replace", failing_replace)
    set_pad(pytester, "alpha", 4)
    result = run(pytester, "--ratefloor-record")
    monkeypatch.undo()
    assert result.ret == pytest.ExitCode.TESTS_FAILED
    result.stdout.fnmatch_lines(["ERROR: ledger *"])
    flat = " ".join(result.stdout.str().split())  # the summary wraps at the terminal's width
    assert "No space left on device" in flat
    assert "not written" in flat
    assert ledger.read_bytes() == before
    assert sorted(p.name for p in pytester.path.glob(f"*{LEDGER_NAME}*")) == [LEDGER_NAME]


KILL_CONFTEST = '''
import os, signal
import pytest
import pytest_ratefloor.recording as recording_module

_real_fsync = os.fsync

def _die(fd):
    # the ledger's temporary file is written but not yet renamed: kill the run here
    os.kill(os.getpid(), signal.SIGKILL)

@pytest.hookimpl(tryfirst=True)  # the plugin's own runs first too: be before it
def pytest_sessionfinish(session):
    recording_module.os.fsync = _die
'''


def test_killed_while_writing_leaves_the_old_ledger(pytester: pytest.Pytester) -> None:
    ledger = make_project(pytester)
    run(pytester, "--ratefloor-record")
    before = ledger.read_bytes()
    pytester.makeconftest(KILL_CONFTEST)
    set_pad(pytester, "alpha", 4)
    result = pytester.runpytest_subprocess(*INNER, "--ratefloor-record")
    # the supervisor saw its test process killed, said so, and ended as a shell would
    assert result.ret == 128 + signal.SIGKILL
    result.stderr.fnmatch_lines(["*ratefloor: the test process was killed by SIGKILL*"])
    assert ledger.read_bytes() == before
    assert json.loads(ledger.read_text())  # still a whole ledger


# -- options, ini keys, reports ----------------------------------------------------------


def test_ini_keys_and_cli_precedence(pytester: pytest.Pytester) -> None:
    make_project(pytester)
    pytester.makepyprojecttoml(
        '[tool.pytest.ini_options]\n'
        'ratefloor_ledger = "gate/ledger.json"\n'
        'ratefloor_slack = "0.01"\n'
        'ratefloor_report = "out/report.md"\n'
    )
    result = run(pytester, "--ratefloor-record")
    result.assert_outcomes(passed=2)
    assert ledger_bits(pytester.path / "gate" / "ledger.json")["alpha"] == ALPHA_BITS
    assert not (pytester.path / LEDGER_NAME).exists()
    assert "| `uniform(k=256)` |" in (pytester.path / "out" / "report.md").read_text()

    set_pad(pytester, "alpha", 1)  # +0.025 % is within the ini slack of 1 %
    run(pytester).assert_outcomes(passed=2)
    result = run(pytester, "--ratefloor-slack", "0")  # the command line wins
    result.assert_outcomes(passed=1, failed=1)
    # the ledger came from the ini file: the record command needs no ledger option
    result.stdout.fnmatch_lines(["*record the new figure: pytest --ratefloor-record "
                                 "test_rf_gated.py::test_alpha"])
    result = run(pytester, "--ratefloor-ledger", "elsewhere.json")
    result.assert_outcomes(passed=2)
    result.stdout.fnmatch_lines(["alpha", "*new"])
    run(pytester, "--ratefloor-ledger", "elsewhere.json", "--ratefloor-record")
    set_pad(pytester, "alpha", 2)
    result = run(pytester, "--ratefloor-ledger", "elsewhere.json", "--ratefloor-slack", "0")
    result.stdout.fnmatch_lines(["*record the new figure: pytest --ratefloor-record "
                                 f"--ratefloor-ledger {pytester.path / 'elsewhere.json'} "
                                 "test_rf_gated.py::test_alpha"])


@pytest.mark.parametrize(
    ("args", "ini", "message"),
    [
        (("--ratefloor-slack", "wide"), "",
         "*--ratefloor-slack must be a finite number >= 0 (a relative slack such as 0.01), "
         "got 'wide'"),
        (("--ratefloor-slack", "-0.1"), "", "*--ratefloor-slack must be a finite number*"),
        ((), 'ratefloor_slack = "nan"', "*ini key ratefloor_slack must be a finite number*"),
        (("--ratefloor-report", "r.txt"), "", "*--ratefloor-report *r.txt: unknown suffix '.txt'*"),
        ((), 'ratefloor_plot = "p.gif"', "*--ratefloor-plot *p.gif: unknown suffix '.gif'*"),
    ],
)
def test_bad_configuration_fails_at_once(pytester: pytest.Pytester, args: tuple[str, ...],
                                         ini: str, message: str) -> None:
    make_project(pytester)
    if ini:
        pytester.makepyprojecttoml(f"[tool.pytest.ini_options]\n{ini}\n")
    result = run(pytester, *args)
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    result.stderr.fnmatch_lines([message])


def test_plot_without_matplotlib_is_a_one_line_hint(pytester: pytest.Pytester,
                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    from pytest_ratefloor import report

    make_project(pytester)
    monkeypatch.setattr(report, "plot_available", lambda: False)
    result = run(pytester, "--ratefloor-plot", "rates.png")
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    result.stderr.fnmatch_lines(["ERROR: --ratefloor-plot needs matplotlib: "
                                 "pip install 'pytest-ratefloor[plot]'"])


def test_reports_plot_and_job_summary(pytester: pytest.Pytester,
                                      monkeypatch: pytest.MonkeyPatch) -> None:
    make_project(pytester)
    summary = pytester.path / "step-summary.md"
    monkeypatch.setenv("GITHUB_STEP_SUMMARY", str(summary))
    result = run(pytester, "--ratefloor-report", "r.json", "--ratefloor-plot", "rates.png")
    result.assert_outcomes(passed=2)
    doc = json.loads((pytester.path / "r.json").read_text())
    assert doc["schema"] == 1
    assert doc["caution"].startswith("Caution:")
    assert sorted(c["codec"] for c in doc["cases"]) == ["alpha", "beta"]
    assert (pytester.path / "rates.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    text = summary.read_text()
    assert "## Rate floor report" in text
    assert "### Codec `alpha`" in text


def test_junit_properties_carry_the_ledger_verdict(pytester: pytest.Pytester) -> None:
    make_project(pytester)
    run(pytester, "--ratefloor-record")
    set_pad(pytester, "alpha", 1)
    run(pytester, "--junitxml=junit.xml", "-o", "junit_family=legacy")
    root = ET.parse(pytester.path / "junit.xml").getroot()
    props = {
        case.get("name"): {p.get("name"): p.get("value") for p in case.iter("property")}
        for case in root.iter("testcase")
    }
    assert props["test_alpha"]["ratefloor.ledger_verdict"] == "regressed"
    assert props["test_alpha"]["ratefloor.ledger_bits"] == str(ALPHA_BITS)
    assert props["test_alpha"]["ratefloor.ledger_delta_bits"] == "8"
    assert props["test_beta"]["ratefloor.ledger_verdict"] == "unchanged"


def test_quiet_when_unused_and_under_collect_only(pytester: pytest.Pytester) -> None:
    pytester.makepyfile("def test_plain():\n    assert True\n")
    result = run(pytester)
    result.assert_outcomes(passed=1)
    result.stdout.no_fnmatch_line("*ratefloor:*")
    result.stdout.no_fnmatch_line("Caution*")
    make_project(pytester)
    result = run(pytester, "--collect-only", "--ratefloor-record")
    result.stdout.no_fnmatch_line("*ratefloor: measured*")
    assert not (pytester.path / LEDGER_NAME).exists()


def test_verbose_summary_has_full_columns(pytester: pytest.Pytester) -> None:
    make_project(pytester)
    result = run(pytester, "-v")
    result.stdout.fnmatch_lines(["codec *source *n *seed *bits *ledger bits *excess b/sym*",
                                 "alpha *uniform(k=256)* 4,000 *0 *32,000 *–*"])
