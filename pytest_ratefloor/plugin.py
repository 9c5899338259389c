"""pytest hooks of pytest-ratefloor, and nothing else.

Each hook is a few lines that call plain, typed code: the options and ini
keys are in :mod:`~pytest_ratefloor.settings`, the run state is one
:class:`~pytest_ratefloor.session.GateSession` under one ``StashKey``
(built in ``pytest_configure``, removed in ``pytest_unconfigure``), the
checks behind the fixture are in :mod:`~pytest_ratefloor.harness`.
"""

from __future__ import annotations

from collections.abc import Generator
from typing import TYPE_CHECKING, Any

import pytest

from pytest_ratefloor import report
from pytest_ratefloor.session import SESSION_KEY, GateSession, is_worker, short_failure_line
from pytest_ratefloor.settings import MARKER, add_options, check_marker

if TYPE_CHECKING:
    from pytest_ratefloor.harness import RateFloorHarness


def pytest_addoption(parser: pytest.Parser) -> None:
    add_options(parser)


@pytest.hookimpl(tryfirst=True)  # fork the supervisor before other plugins start threads
def pytest_configure(config: pytest.Config) -> None:
    config.addinivalue_line("markers", MARKER)
    if config.option.help or config.option.version:
        return  # --help must work even beside a broken ledger
    gate = config.stash[SESSION_KEY] = GateSession.start(config)
    config.pluginmanager.register(TestOutcomes(gate), _OUTCOMES_NAME)
    gate.watch_process(config)


def pytest_collection_modifyitems(items: list[pytest.Item]) -> None:
    for item in items:
        check_marker(item)


class TestOutcomes:
    """Registered for one run: hands every test report to the run's GateSession
    (``pytest_runtest_logreport`` receives no config, so it needs an object)."""

    def __init__(self, gate: GateSession) -> None:
        self.gate = gate

    def pytest_runtest_logreport(self, report: pytest.TestReport) -> None:
        self.gate.test_report(report)

    def pytest_runtest_logstart(self, nodeid: str) -> None:
        self.gate.test_started(nodeid)


_OUTCOMES_NAME = "ratefloor-test-outcomes"


@pytest.hookimpl(wrapper=True)
def pytest_runtest_makereport(
    item: pytest.Item, call: pytest.CallInfo[None]
) -> Generator[None, pytest.TestReport, pytest.TestReport]:
    """A failure of this plugin shows its figures first in the short summary line."""
    rep = yield
    line = short_failure_line(call.excinfo)
    crash = getattr(rep.longrepr, "reprcrash", None)
    if line is not None and crash is not None:
        crash.message = line
    return rep


def pytest_deselected(items: list[pytest.Item]) -> None:
    if items and SESSION_KEY in items[0].config.stash:
        items[0].config.stash[SESSION_KEY].deselected += len(items)


@pytest.fixture
def ratefloor(request: pytest.FixtureRequest) -> RateFloorHarness:
    """Check a codec against reference sources and gate it on the rate ledger.

    ``ratefloor.check(codec, source, n=100_000, seed=0, floor="sample", rel=..., abs=...)``
    runs the round trip and the rate check and records the measurement for the
    ledger (a case needing more bits than its ledger entry fails the test), the
    terminal summary, the reports and JUnit XML properties.
    ``ratefloor.measure(...)`` records without a tolerance.
    """
    from pytest_ratefloor.harness import RateFloorHarness

    return RateFloorHarness.for_test(request, request.config.stash[SESSION_KEY])


@pytest.hookimpl(optionalhook=True)
def pytest_testnodedown(node: Any, error: object) -> None:
    """xdist controller: a worker finished (or died)."""
    node.config.stash[SESSION_KEY].worker_down(node, error)


@pytest.hookimpl(tryfirst=True)  # before junitxml writes its file (see add_junit_tally)
def pytest_sessionfinish(session: pytest.Session, exitstatus: int) -> None:
    gate = session.config.stash.get(SESSION_KEY, None)
    if gate is not None and not session.config.option.collectonly:
        gate.finish(session, int(exitstatus))


def pytest_terminal_summary(terminalreporter: Any, config: pytest.Config) -> None:
    gate = config.stash.get(SESSION_KEY, None)
    if gate is None or is_worker(config):
        return
    lines = gate.summary_lines(int(config.getoption("verbose") or 0),
                               width=config.get_terminal_writer().fullwidth,
                               base=config.invocation_params.dir)
    if not lines:
        return
    terminalreporter.write_sep("=", report.SUMMARY_TITLE)
    for line in lines:
        terminalreporter.write_line(line.text, **({line.colour: True} if line.colour else {}))


@pytest.hookimpl(trylast=True)  # the supervisor's "finished" is the run's last word
def pytest_unconfigure(config: pytest.Config) -> None:
    outcomes = config.pluginmanager.get_plugin(_OUTCOMES_NAME)
    if outcomes is not None:
        config.pluginmanager.unregister(outcomes)
    if SESSION_KEY in config.stash:
        config.stash[SESSION_KEY].end_watch()
        del config.stash[SESSION_KEY]
