"""pytest-xdist: the controller gathers the workers' measurements, writes the same ledger as a
single-process run, and fails the run when a worker's measurements are lost."""

from __future__ import annotations

import pytest
from test_plugin import INNER, LEDGER_NAME, make_project, set_pad

pytest.importorskip("xdist")

MANY_TESTS = '''
import pytest
from rfcase import ALPHA, BETA, SOURCE


@pytest.mark.parametrize("n", [1000, 2000, 3000, 4000])
def test_alpha(ratefloor, n):
    ratefloor.check(ALPHA, SOURCE, n=n, rel=0.5, edge_cases=False)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_beta(ratefloor, seed):
    ratefloor.check(BETA, SOURCE, n=2000, seed=seed, rel=0.5, edge_cases=False)
'''

DROP_PAYLOAD = '''
import pytest

@pytest.hookimpl(trylast=True)
def pytest_sessionfinish(session):
    # runs after the plugin's hook: as if the worker's payload never made it home
    if hasattr(session.config, "workerinput"):
        session.config.workeroutput.pop("ratefloor", None)
'''


@pytest.fixture(autouse=True)
def _clean_environment(monkeypatch: pytest.MonkeyPatch) -> None:
    import os

    for name in list(os.environ):
        if name.startswith("PYTEST_XDIST") or name in ("PYTEST_ADDOPTS", "GITHUB_STEP_SUMMARY"):
            monkeypatch.delenv(name)


def test_two_workers_write_the_same_ledger_as_one_process(pytester: pytest.Pytester) -> None:
    ledger = make_project(pytester, MANY_TESTS)
    single = pytester.runpytest(*INNER, "--ratefloor-record", "--ratefloor-report", "one.json")
    single.assert_outcomes(passed=7)
    one = ledger.read_bytes()
    ledger.unlink()

    result = pytester.runpytest(*INNER, "-n", "2", "--ratefloor-record",
                                "--ratefloor-report", "two.json")
    result.assert_outcomes(passed=7)
    assert ledger.read_bytes() == one
    result.stdout.fnmatch_lines(["*7 new*"])
    assert not list(pytester.path.glob(f".{LEDGER_NAME}.*"))  # no stray temporary files

    # a regression found by a worker fails that test; the controller reports it
    set_pad(pytester, "beta", 1)
    result = pytester.runpytest(*INNER, "-n", "2")
    result.assert_outcomes(passed=4, failed=3)
    assert "3 regressed, 0 improved, 0 new, 4 unchanged" in " ".join(result.stdout.str().split())
    assert ledger.read_bytes() == one


def test_lost_worker_payload_fails_the_run(pytester: pytest.Pytester) -> None:
    ledger = make_project(pytester, MANY_TESTS)
    pytester.makeconftest(DROP_PAYLOAD)
    result = pytester.runpytest(*INNER, "-n", "2", "--ratefloor-record")
    result.assert_outcomes(passed=7)  # every test passed ...
    assert result.ret == pytest.ExitCode.TESTS_FAILED  # ... but the run fails
    result.stdout.fnmatch_lines([
        "ERROR: xdist worker(s) gw* went down without*",
        "ERROR: ledger *",
    ])
    assert "not written" in " ".join(result.stdout.str().split())
    assert not ledger.exists()


def test_crashed_worker_fails_the_run(pytester: pytest.Pytester) -> None:
    make_project(pytester, MANY_TESTS + '''

def test_crash():
    import os
    os._exit(3)
''')
    result = pytester.runpytest(*INNER, "-n", "2", "--max-worker-restart", "1")
    assert result.ret == pytest.ExitCode.TESTS_FAILED
    result.stdout.fnmatch_lines(["ERROR: xdist worker(s) gw* went down without sending*"])
