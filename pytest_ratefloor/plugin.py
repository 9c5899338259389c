"""pytest hooks of pytest-ratefloor (kept thin; the work lives in ledger.py and report.py).

Here: the command-line options and ini keys, the ``ratefloor`` marker, the
``ratefloor`` fixture, the per-measurement ledger gate, the pytest-xdist relay
(workers ship plain measurement records home in ``config.workeroutput``; only
the controller writes files and reports) and the terminal summary. Run state
lives in ``config.stash``.
"""

from __future__ import annotations

import dataclasses
import os
import shlex
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pytest

from pytest_ratefloor import report
from pytest_ratefloor.ledger import (
    DEFAULT_LEDGER_NAME,
    UNREADABLE_SUFFIX,
    Ledger,
    LedgerRun,
    NewerLedgerError,
    UnreadableLedgerError,
    keep_copy,
)

if TYPE_CHECKING:
    from pytest_ratefloor.harness import RateFloorHarness
    from pytest_ratefloor.measurement import Measurement

#: Every measurement taken in this process, in order (duplicates included).
MEASUREMENTS_KEY = pytest.StashKey[list["Measurement"]]()
SETTINGS_KEY = pytest.StashKey["Settings"]()
RUN_KEY = pytest.StashKey[LedgerRun]()
#: xdist workers whose measurements never arrived (controller only).
LOST_KEY = pytest.StashKey[list[str]]()
#: Items deselected in this process (-k, -m, --lf, other plugins).
DESELECTED_KEY = pytest.StashKey[list[int]]()
#: What the terminal summary prints, decided in pytest_sessionfinish.
OUTCOME_KEY = pytest.StashKey[tuple[list[report.CaseRow], report.RunOutcome]]()
#: Name of the worker payload in config.workeroutput.
PAYLOAD = "ratefloor"

MARKER = (
    "ratefloor(slack=REL): compare this test's measurements with the ledger allowing "
    "a relative increase of REL (overrides --ratefloor-slack / ratefloor_slack)"
)


@dataclass(frozen=True)
class Settings:
    """The options and ini keys of one run, parsed and validated."""

    ledger_path: Path
    #: the ledger path came from --ratefloor-ledger (so the record command repeats it)
    ledger_from_cli: bool
    record: bool
    slack: float
    report_path: Path | None
    plot_path: Path | None
    #: the ledger could not be read and --ratefloor-record will replace it
    replacing_unreadable: str | None = None


def _is_worker(config: pytest.Config) -> bool:
    return hasattr(config, "workerinput")


def parse_slack(text: str, origin: str) -> float:
    """A relative slack ≥ 0 from option/ini text; UsageError naming ``origin`` otherwise."""
    try:
        value = float(text)
    except ValueError:
        raise pytest.UsageError(
            f"{origin}: expected a relative slack such as 0.01, got {text!r}"
        ) from None
    if not value >= 0.0 or value == float("inf"):  # also rejects NaN
        raise pytest.UsageError(f"{origin}: the slack must be a finite number >= 0, got {text!r}")
    return value


def _path_setting(config: pytest.Config, option: str, ini: str) -> tuple[Path | None, bool]:
    """CLI value (relative to the invocation dir) or ini value (relative to the ini file);
    the flag tells whether it came from the command line."""
    cli = config.getoption(option)
    if cli:
        return config.invocation_params.dir / str(cli), True
    value = str(config.getini(ini) or "").strip()
    if value:
        base = config.inipath.parent if config.inipath is not None else config.rootpath
        return base / value, False
    return None, False


def read_settings(config: pytest.Config) -> Settings:
    """Read every option and ini key now, so a bad configuration fails the run at once."""
    ledger_path, from_cli = _path_setting(config, "ratefloor_ledger", "ratefloor_ledger")
    cli_slack = config.getoption("ratefloor_slack")
    if cli_slack is not None:
        slack = parse_slack(str(cli_slack), "--ratefloor-slack")
    else:
        ini_slack = str(config.getini("ratefloor_slack") or "").strip()
        slack = parse_slack(ini_slack, "ini key ratefloor_slack") if ini_slack else 0.0
    report_path, _ = _path_setting(config, "ratefloor_report", "ratefloor_report")
    plot_path, _ = _path_setting(config, "ratefloor_plot", "ratefloor_plot")
    try:
        if report_path is not None:
            report.report_format(report_path)
        if plot_path is not None:
            report.check_plot_path(plot_path)
    except (ValueError, RuntimeError) as exc:
        raise pytest.UsageError(str(exc)) from None
    return Settings(
        ledger_path=ledger_path or config.rootpath / DEFAULT_LEDGER_NAME,
        ledger_from_cli=from_cli,
        record=bool(config.getoption("ratefloor_record")),
        slack=slack,
        report_path=report_path,
        plot_path=plot_path,
    )


def open_run(settings: Settings) -> tuple[LedgerRun, Settings]:
    """Load the ledger and start the run; UsageError for a ledger that cannot be used.

    A corrupt ledger stops the run unless the user records, in which case it is
    replaced (a copy is kept beside it). A newer-schema ledger always stops it.
    """
    hint = "pytest --ratefloor-record"
    if settings.ledger_from_cli:
        hint += f" --ratefloor-ledger {shlex.quote(str(settings.ledger_path))}"
    try:
        baseline = Ledger.load(settings.ledger_path)
    except NewerLedgerError as exc:
        raise pytest.UsageError(f"ratefloor: {exc}") from None
    except UnreadableLedgerError as exc:
        if not settings.record:
            raise pytest.UsageError(
                f"ratefloor: {exc}. The ledger was left untouched; restore it from version "
                f"control, or replace it by recording ({hint}; the unreadable file is then "
                f"kept as {settings.ledger_path.name}{UNREADABLE_SUFFIX})"
            ) from None
        baseline = Ledger(path=settings.ledger_path)
        settings = dataclasses.replace(settings, replacing_unreadable=str(exc))
    run = LedgerRun(baseline=baseline, slack=settings.slack, record=settings.record,
                    record_hint=hint)
    return run, settings


# -- hooks ----------------------------------------------------------------------------


def pytest_addoption(parser: pytest.Parser) -> None:
    group = parser.getgroup("ratefloor", "ratefloor: codec rates against the entropy floor")
    group.addoption(
        "--ratefloor-ledger", dest="ratefloor_ledger", default=None, metavar="PATH",
        help=f"the committed rate ledger (default: {DEFAULT_LEDGER_NAME} at the rootdir)",
    )
    group.addoption(
        "--ratefloor-record", dest="ratefloor_record", action="store_true", default=False,
        help="merge this run's measurements into the ledger (written atomically)",
    )
    group.addoption(
        "--ratefloor-slack", dest="ratefloor_slack", default=None, metavar="REL",
        help="allowed relative increase in bits over the ledger (default 0)",
    )
    group.addoption(
        "--ratefloor-report", dest="ratefloor_report", default=None, metavar="PATH",
        help="write the efficiency report; .md (Markdown) or .json",
    )
    group.addoption(
        "--ratefloor-plot", dest="ratefloor_plot", default=None, metavar="PATH",
        help="plot rate against entropy (.png, .svg, .pdf; needs the 'plot' extra)",
    )
    parser.addini("ratefloor_ledger", f"ledger path (default {DEFAULT_LEDGER_NAME})",
                  type="string", default="")
    parser.addini("ratefloor_slack", "allowed relative increase over the ledger, e.g. 0.01",
                  type="string", default="")
    parser.addini("ratefloor_report", "efficiency report path (.md or .json)",
                  type="string", default="")
    parser.addini("ratefloor_plot", "plot path (.png, .svg, .pdf)", type="string", default="")


def pytest_configure(config: pytest.Config) -> None:
    config.addinivalue_line("markers", MARKER)
    config.stash[MEASUREMENTS_KEY] = []
    config.stash[LOST_KEY] = []
    config.stash[DESELECTED_KEY] = [0]
    if config.option.help or config.option.version:
        return  # --help must work even beside a broken ledger
    settings = read_settings(config)
    run, settings = open_run(settings)
    config.stash[SETTINGS_KEY] = settings
    config.stash[RUN_KEY] = run
    if settings.replacing_unreadable and not _is_worker(config):
        config.issue_config_time_warning(
            pytest.PytestWarning(
                f"ratefloor: {settings.replacing_unreadable}; --ratefloor-record replaces it "
                f"(a copy is kept as {settings.ledger_path.name}{UNREADABLE_SUFFIX})"
            ),
            stacklevel=2,
        )


def pytest_deselected(items: list[pytest.Item]) -> None:
    if items:
        config = items[0].config
        counter = config.stash.get(DESELECTED_KEY, None)
        if counter is not None:
            counter[0] += len(items)


def _marker_slack(item: pytest.Item) -> float | None:
    marker = item.get_closest_marker("ratefloor")
    if marker is None or "slack" not in marker.kwargs:
        return None
    return parse_slack(str(marker.kwargs["slack"]), f"{item.nodeid}: ratefloor(slack=...)")


def gate_measurement(item: pytest.Item, m: Measurement) -> None:
    """The fixture's ``on_measurement``: record ``m``, compare it with the ledger, enforce.

    Adds the JUnit properties ``ratefloor.ledger_verdict``, ``ratefloor.ledger_bits``
    and ``ratefloor.ledger_delta_bits`` (str/int) before a regression is raised.
    """
    __tracebackhide__ = True
    config = item.config
    config.stash[MEASUREMENTS_KEY].append(m)
    run = config.stash[RUN_KEY]
    verdict = run.observe(m, slack=_marker_slack(item))
    item.user_properties.append(("ratefloor.ledger_verdict", verdict.status))
    if verdict.ledger_bits is not None and verdict.delta_bits is not None:
        item.user_properties.append(("ratefloor.ledger_bits", int(verdict.ledger_bits)))
        item.user_properties.append(("ratefloor.ledger_delta_bits", int(verdict.delta_bits)))
    run.enforce(m, verdict, nodeid=command_line_id(item))


def command_line_id(item: pytest.Item) -> str:
    """The test id as typed from the directory pytest was started in (what FAILED lines show).

    ``item.nodeid`` is relative to the rootdir, which differs from the working
    directory when a sub-project is run from above (``pytest example_project``).
    """
    path = os.path.relpath(item.path, item.config.invocation_params.dir)
    _, _, rest = item.nodeid.partition("::")
    posix = Path(path).as_posix()
    return f"{posix}::{rest}" if rest else posix


@pytest.fixture
def ratefloor(request: pytest.FixtureRequest) -> RateFloorHarness:
    """Check a codec against reference sources and gate it on the rate ledger.

    ``ratefloor.check(codec, source, n=100_000, seed=0, floor="entropy", rel=..., abs=...)``
    runs the round trip and the rate check and records the measurement for the
    ledger (a case needing more bits than its ledger entry fails the test), the
    terminal summary, the reports and JUnit XML properties.
    ``ratefloor.measure(...)`` records without a tolerance.
    """
    from pytest_ratefloor.harness import RateFloorHarness

    item = request.node

    def on_measurement(m: Measurement) -> None:
        __tracebackhide__ = True
        gate_measurement(item, m)

    return RateFloorHarness(item, on_measurement=on_measurement)


@pytest.hookimpl(optionalhook=True)
def pytest_testnodedown(node: Any, error: object) -> None:
    """xdist controller: take a finished worker's measurements, or note that they were lost."""
    config: pytest.Config = node.config
    payload = getattr(node, "workeroutput", {}).get(PAYLOAD)
    if error is not None or not isinstance(payload, dict):
        config.stash[LOST_KEY].append(str(node.gateway.id))
        return
    config.stash[RUN_KEY].absorb(payload)


def pytest_sessionfinish(session: pytest.Session, exitstatus: int) -> None:
    config = session.config
    if RUN_KEY not in config.stash or config.option.collectonly:
        return
    run = config.stash[RUN_KEY]
    reasons = _partial_reasons(session, int(exitstatus))
    run.partial_reasons.extend(r for r in reasons if r not in run.partial_reasons)
    if _is_worker(config):
        config.workeroutput[PAYLOAD] = run.payload()  # type: ignore[attr-defined]
        return
    settings = config.stash[SETTINGS_KEY]
    rows, outcome = finish_run(run, settings, config.stash[LOST_KEY])
    config.stash[OUTCOME_KEY] = (rows, outcome)
    if outcome.problems and session.exitstatus == pytest.ExitCode.OK:
        session.exitstatus = pytest.ExitCode.TESTS_FAILED


def _partial_reasons(session: pytest.Session, exitstatus: int) -> list[str]:
    """Why this run may not have measured every case (stale entries are then not listed)."""
    config = session.config
    opt = config.option
    reasons = []
    if getattr(opt, "keyword", ""):
        reasons.append("-k")
    if getattr(opt, "markexpr", ""):
        reasons.append("-m")
    if getattr(opt, "lf", False) or getattr(opt, "stepwise", False):
        reasons.append("--lf/--sw")
    if config.stash[DESELECTED_KEY][0]:
        reasons.append(f"{config.stash[DESELECTED_KEY][0]} deselected")
    if any("::" in str(a) or os.path.isfile(str(a)) for a in config.args):
        reasons.append("selected files or test ids")
    if exitstatus == pytest.ExitCode.INTERRUPTED:
        reasons.append("interrupted")
    if exitstatus == pytest.ExitCode.NO_TESTS_COLLECTED:
        reasons.append("no tests collected")
    maxfail = int(getattr(opt, "maxfail", 0) or 0)
    if session.shouldstop or session.shouldfail or (maxfail and session.testsfailed >= maxfail):
        reasons.append("stopped early")
    if config.stash[LOST_KEY]:
        reasons.append("xdist worker lost")
    return reasons


def finish_run(run: LedgerRun, settings: Settings,
               lost: list[str]) -> tuple[list[report.CaseRow], report.RunOutcome]:
    """Controller (or single process): write the ledger if recording, then the reports.

    Returns the rows and outcome for the terminal summary; ``outcome.problems``
    non-empty means the run must fail.
    """
    problems: list[str] = []
    if lost:
        problems.append(
            f"xdist worker(s) {', '.join(lost)} went down without sending their measurements "
            "(crashed, or the payload was lost): ledger comparison and reports are incomplete"
        )
    problems += list(dict.fromkeys(run.conflicts))
    recorded = False
    if settings.record:
        if problems:
            problems.append(f"ledger {settings.ledger_path} not written: the run's data is "
                            "incomplete or inconsistent (see above); fix and record again")
        elif run.measurements or settings.replacing_unreadable:
            try:
                if settings.replacing_unreadable and settings.ledger_path.exists():
                    keep_copy(settings.ledger_path)
                run.recorded().write()
                recorded = True
            except OSError as exc:
                problems.append(f"ledger {settings.ledger_path} not written: {exc}")
    rows = [report.CaseRow.from_measurement(m, v) for m, v in run.verdicts()]
    outcome = report.RunOutcome(
        ledger_path=settings.ledger_path, ledger_exists=run.baseline.exists or recorded,
        slack=settings.slack, recorded=recorded, counts=run.counts(), stale=run.stale(),
        partial_reasons=tuple(run.partial_reasons), problems=tuple(problems),
    )
    extra: list[str] = []
    if settings.report_path is not None:
        try:
            report.write_report(settings.report_path, rows, outcome)
        except OSError as exc:
            extra.append(f"report {settings.report_path} not written: {exc}")
    if rows:
        try:
            report.append_step_summary(report.markdown_report(rows, outcome))
        except OSError as exc:
            extra.append(f"GITHUB_STEP_SUMMARY not appended: {exc}")
    if settings.plot_path is not None:
        try:
            report.write_plot(settings.plot_path, rows)
        except Exception as exc:  # matplotlib raises many kinds; the run must not crash
            extra.append(f"plot {settings.plot_path} not written: {type(exc).__name__}: {exc}")
    if extra:
        outcome = dataclasses.replace(outcome, problems=(*problems, *extra))
    return rows, outcome


def pytest_terminal_summary(terminalreporter: Any, config: pytest.Config) -> None:
    if _is_worker(config) or OUTCOME_KEY not in config.stash:
        return
    rows, outcome = config.stash[OUTCOME_KEY]
    if not rows and not outcome.stale and not outcome.problems:
        return
    verbosity = int(config.getoption("verbose") or 0)
    terminalreporter.write_sep("=", report.SUMMARY_TITLE)
    for line in report.summary_lines(rows, outcome, verbose=verbosity > 0, quiet=verbosity < 0):
        terminalreporter.write_line(line, red=line.startswith("ERROR"),
                                    yellow="regressed" in line and not line.startswith("ERROR"))


def pytest_unconfigure(config: pytest.Config) -> None:
    if RUN_KEY in config.stash:
        del config.stash[RUN_KEY]
    if OUTCOME_KEY in config.stash:
        del config.stash[OUTCOME_KEY]

