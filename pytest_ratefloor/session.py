"""The plugin's run state: one :class:`GateSession` per pytest process.

Built in ``pytest_configure`` and kept under one ``StashKey``
(:data:`SESSION_KEY`); removed in ``pytest_unconfigure``. It holds the
settings, the run's comparisons with the ledger, the xdist workers whose
measurements were lost, the deselection count and, at the end, what the
terminal summary prints. The hooks in :mod:`pytest_ratefloor.plugin` only
call its methods.

Under pytest-xdist each worker has its own session: it gates its own tests
and ships its measurements home as plain records
(:meth:`~pytest_ratefloor.verdicts.LedgerRun.payload`) in
``config.workeroutput``; only the controller writes the ledger, the reports
and the summary, and a worker that goes down without sending its payload
fails the run.
"""

from __future__ import annotations

import dataclasses
import os
import shlex
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest

from pytest_ratefloor import isolation, report, summary, supervisor
from pytest_ratefloor.errors import (
    LedgerError,
    NewerLedgerError,
    RateFloorFailure,
    UnreadableLedgerError,
)
from pytest_ratefloor.ledger import UNREADABLE_SUFFIX, Ledger
from pytest_ratefloor.measurement import Measurement
from pytest_ratefloor.provenance import git_commit, run_started
from pytest_ratefloor.recording import clean_stale_temporaries
from pytest_ratefloor.recording import record as record_ledger
from pytest_ratefloor.settings import Settings, marker_slack, read_settings
from pytest_ratefloor.verdicts import VERDICTS, Comparison, LedgerRun

__all__ = ["PAYLOAD", "SESSION_KEY", "GateSession", "command_line_id", "is_worker",
           "short_failure_line"]

#: Name of the worker payload in ``config.workeroutput``.
PAYLOAD = "ratefloor"


def is_worker(config: pytest.Config) -> bool:
    """True in a pytest-xdist worker process."""
    return hasattr(config, "workerinput")


def command_line_id(item: pytest.Item) -> str:
    """The test id as typed from the directory pytest was started in (what FAILED lines show).

    ``item.nodeid`` is relative to the rootdir, which differs from the working
    directory when a sub-project is run from above (``pytest example_project``).
    """
    path = os.path.relpath(item.path, item.config.invocation_params.dir)
    _, _, rest = item.nodeid.partition("::")
    posix = Path(path).as_posix()
    return f"{posix}::{rest}" if rest else posix


def _open_ledger(settings: Settings, hint: str) -> tuple[Ledger, str | None]:
    """Load the ledger; ``pytest.UsageError`` for a ledger that cannot be used.

    A corrupt ledger stops the run unless the user records, in which case it
    is replaced (a copy is kept beside it); the second item then says why. A
    newer-schema ledger always stops it. In strict mode a missing ledger
    stops the run too, unless recording.
    """
    try:
        ledger = Ledger.load(settings.ledger_path)
        if settings.strict and not settings.record and not ledger.exists:
            raise pytest.UsageError(
                f"ratefloor strict mode: no ledger at {settings.ledger_path}; every case would "
                f"pass as new. Record one on the release branch ({hint}) and commit it, or "
                "name the committed one with --ratefloor-ledger / ini ratefloor_ledger"
            )
        return ledger, None
    except NewerLedgerError as exc:
        raise pytest.UsageError(f"ratefloor: {exc}") from None
    except UnreadableLedgerError as exc:
        if not settings.record:
            raise pytest.UsageError(
                f"ratefloor: {exc}. The ledger was left untouched; restore it from version "
                f"control, or replace it by recording ({hint}; the unreadable file is then "
                f"kept as {settings.ledger_path.name}{UNREADABLE_SUFFIX})"
            ) from None
        return Ledger(path=settings.ledger_path), str(exc)

def short_failure_line(excinfo: pytest.ExceptionInfo[BaseException] | None) -> str | None:
    """What the short test summary shows for a failure of this plugin: its first line,
    which for rate, regression and impossible-length failures starts with the figures
    (``+2.960% bits vs ledger ...``), without the exception's module path; ``None`` for
    anything else (pytest's own line stays)."""
    if excinfo is None or not isinstance(excinfo.value, RateFloorFailure):
        return None
    exc = excinfo.value
    first = next((line for line in str(exc).splitlines() if line.strip()), "")
    if getattr(exc, "figures_first", False):
        return first
    return f"{type(exc).__name__}: {first}" if first else type(exc).__name__


def add_junit_tally(config: pytest.Config, outcome: report.RunOutcome) -> None:
    """The run's ledger tally as suite-level JUnit XML properties (``ratefloor.tally``,
    e.g. ``1 regressed, 2 improved, 0 new, 15 unchanged``, and ``ratefloor.failing``,
    the number of cases that fail the gate), when ``--junitxml`` is on.

    pytest's junitxml plugin writes the file in its own ``pytest_sessionfinish``;
    the plugin's runs first (``tryfirst``), so the properties are in the file.
    """
    try:
        from _pytest.junitxml import xml_key  # what record_testsuite_property uses
    except ImportError:  # pragma: no cover - a pytest without it
        return
    xml = config.stash.get(xml_key, None)
    if xml is None or outcome.ledger_path is None:
        return
    failing = sum(count for name, count in outcome.counts.items()
                  if name in VERDICTS and VERDICTS[name].fails)
    xml.add_global_property("ratefloor.tally", report.counts_text(outcome.counts))
    xml.add_global_property("ratefloor.failing", failing)


@dataclass
class GateSession:
    """Everything the plugin knows about the current run, in one object."""

    settings: Settings
    run: LedgerRun
    #: the ledger could not be read and --ratefloor-record will replace it (why)
    replacing_unreadable: str | None = None
    #: xdist workers whose measurements never arrived (controller only)
    lost_workers: list[str] = field(default_factory=list)
    #: items deselected in this process (-k, -m, --lf, other plugins)
    deselected: int = 0
    #: node ids whose test call passed, and why the others did not (from the test reports)
    passed: set[str] = field(default_factory=set)
    not_passed: dict[str, str] = field(default_factory=dict)
    #: what the terminal summary prints, decided in :meth:`finish`
    rows: list[Comparison] = field(default_factory=list)
    outcome: report.RunOutcome | None = None
    #: when the run started (ISO 8601, UTC) and the directory whose git commit it measured
    started: str = field(default_factory=run_started)
    rootdir: Path | None = None
    #: what sees this process end while a check runs in it (None: checks fork a child each)
    watch: isolation.Watch | None = None
    #: the parent process watching this run, when one was started (see supervisor)
    supervisor: supervisor.Supervisor | None = None

    @classmethod
    def start(cls, config: pytest.Config) -> GateSession:
        """Read the settings and open the ledger (``pytest.UsageError`` when unusable)."""
        settings = read_settings(config)
        hint = "pytest --ratefloor-record"
        if settings.ledger_from_cli:
            hint += f" --ratefloor-ledger {shlex.quote(str(settings.ledger_path))}"
        baseline, replacing = _open_ledger(settings, hint)
        run = LedgerRun(baseline=baseline, slack=settings.slack, record=settings.record,
                        record_hint=hint, strict=settings.strict)
        session = cls(settings=settings, run=run, replacing_unreadable=replacing,
                      rootdir=Path(config.rootpath))
        if not is_worker(config):
            clean_stale_temporaries(settings.ledger_path)  # left by a writer that was killed
        if replacing and not is_worker(config):
            config.issue_config_time_warning(
                pytest.PytestWarning(
                    f"ratefloor: {replacing}; --ratefloor-record replaces it "
                    f"(a copy is kept as {settings.ledger_path.name}{UNREADABLE_SUFFIX})"
                ),
                stacklevel=2,
            )
        return session

    def watch_process(self, config: pytest.Config) -> None:
        """Decide what sees this process end during a check, starting a supervisor if it can.

        Called once the settings are read, before any test: the supervisor
        forks here and this process (the child) runs the session on.
        """
        self.supervisor, self.watch = supervisor.watch_run(self.settings.isolate,
                                                           xdist_worker=is_worker(config))
        isolation.push_watch(self.watch)

    def test_started(self, nodeid: str) -> None:
        """A test starts (the supervisor names it if the process ends outside a check)."""
        if self.supervisor is not None:
            self.supervisor.test_started(nodeid)

    def end_watch(self) -> None:
        """The run has ended in order: its exit status stands (the last thing it does)."""
        isolation.pop_watch(self.watch)
        if self.supervisor is not None:
            self.supervisor.finished()

    # -- during the tests -----------------------------------------------------------

    def gate_measurement(self, item: pytest.Item, m: Measurement) -> None:
        """The fixture's ``on_measurement``: compare ``m`` with the ledger and enforce.

        Adds the JUnit properties ``ratefloor.ledger_verdict``, ``ratefloor.ledger_bits``
        and ``ratefloor.ledger_delta_bits`` (str/int) before a regression is raised.
        """
        __tracebackhide__ = True
        comparison = self.run.observe(m, slack=marker_slack(item), origin=item.nodeid)
        item.user_properties.append(("ratefloor.ledger_verdict", str(comparison.status)))
        if comparison.ledger_bits is not None and comparison.delta_bits is not None:
            item.user_properties.append(("ratefloor.ledger_bits", int(comparison.ledger_bits)))
            item.user_properties.append(("ratefloor.ledger_delta_bits",
                                         int(comparison.delta_bits)))
        self.run.enforce(comparison, nodeid=command_line_id(item))

    def test_report(self, report: pytest.TestReport) -> None:
        """Note how each test ended (a recording writes only cases whose tests passed)."""
        nodeid = report.nodeid
        if report.failed:
            phase = "" if report.when == "call" else f" in {report.when}"
            self.not_passed.setdefault(nodeid, f"its test failed{phase}")
        elif report.when == "call":
            if report.passed:
                self.passed.add(nodeid)
            elif hasattr(report, "wasxfail"):
                self.not_passed.setdefault(nodeid, "its test xfailed")
            else:
                self.not_passed.setdefault(nodeid, "its test was skipped")
        elif report.skipped:
            self.not_passed.setdefault(nodeid, "its test was skipped")

    def worker_down(self, node: Any, error: object) -> None:
        """xdist controller: take a finished worker's measurements, or note that they were lost."""
        payload = getattr(node, "workeroutput", {}).get(PAYLOAD)
        if error is not None or not isinstance(payload, dict):
            self.lost_workers.append(str(node.gateway.id))
            return
        self.run.absorb(payload)

    # -- at the end -------------------------------------------------------------------

    def finish(self, session: pytest.Session, exitstatus: int) -> None:
        """Workers ship their payload; the controller records, reports and sets the status."""
        config = session.config
        for reason in self._partial_reasons(session, exitstatus):
            if reason not in self.run.partial_reasons:
                self.run.partial_reasons.append(reason)
        if is_worker(config):
            config.workeroutput[PAYLOAD] = self.run.payload()  # type: ignore[attr-defined]
            return
        self.rows, self.outcome = self._write_outputs()
        add_junit_tally(config, self.outcome)
        if self.outcome.problems and session.exitstatus == pytest.ExitCode.OK:
            session.exitstatus = pytest.ExitCode.TESTS_FAILED

    def summary_lines(self, verbosity: int, width: int | None = None,
                      base: Path | None = None) -> list[summary.Line]:
        """The terminal summary (empty when the run measured nothing and found nothing):
        ``verbosity`` is pytest's (-v: 1, -q: -1, -qq: -2), ``width`` the terminal's, paths
        shown relative to ``base``."""
        outcome = self.outcome
        if outcome is None or (not self.rows and not outcome.stale and not outcome.problems):
            return []
        return summary.summary_lines(self.rows, outcome, verbose=verbosity > 0,
                                     quiet=verbosity < 0, very_quiet=verbosity < -1,
                                     width=width, base=base)

    def _partial_reasons(self, session: pytest.Session, exitstatus: int) -> list[str]:
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
        if self.deselected:
            reasons.append(f"{self.deselected} deselected")
        if any("::" in str(a) or os.path.isfile(str(a)) for a in config.args):
            reasons.append("selected files or test ids")
        if exitstatus == pytest.ExitCode.INTERRUPTED:
            reasons.append("interrupted")
        if exitstatus == pytest.ExitCode.NO_TESTS_COLLECTED:
            reasons.append("no tests collected")
        maxfail = int(getattr(opt, "maxfail", 0) or 0)
        if session.shouldstop or session.shouldfail or (
            maxfail and session.testsfailed >= maxfail
        ):
            reasons.append("stopped early")
        if self.lost_workers:
            reasons.append("xdist worker lost")
        if session.testsfailed:  # a test that failed before measuring would look stale
            reasons.append(f"{session.testsfailed} test(s) failed")
        return reasons

    def _write_outputs(self) -> tuple[list[Comparison], report.RunOutcome]:
        """Controller (or single process): write the ledger if recording, then the reports.

        ``outcome.problems`` non-empty means the run must fail.
        """
        settings, run = self.settings, self.run
        problems: list[str] = []
        if self.lost_workers:
            problems.append(
                f"xdist worker(s) {', '.join(self.lost_workers)} went down without sending "
                "their measurements (crashed, or the payload was lost): ledger comparison and "
                "reports are incomplete"
            )
        problems += list(dict.fromkeys(run.conflicts))
        stale = run.stale()
        if settings.strict and stale and not settings.record:
            listed = "; ".join(e.key.label for e in stale[:20])
            more = f"; and {len(stale) - 20} more" if len(stale) > 20 else ""
            problems.append(
                f"strict mode: {len(stale)} ledger entr{'y' if len(stale) == 1 else 'ies'} "
                f"no test measured in this full run (stale): {listed}{more}. Remove them "
                "from the ledger on the release branch, or restore the tests that measured them"
            )
        recorded = False
        not_recorded: list[tuple[str, str]] = []
        if settings.record:
            if problems:
                problems.append(f"ledger {settings.ledger_path} not written: the run's data is "
                                "incomplete or inconsistent (see above); fix and record again")
            elif run.comparisons or self.replacing_unreadable:
                to_write, not_recorded = run.recordable(self.passed, self.not_passed)
                try:
                    if to_write or self.replacing_unreadable:
                        record_ledger(settings.ledger_path, to_write,
                                      replace_unreadable=bool(self.replacing_unreadable))
                        recorded = True
                except (OSError, LedgerError) as exc:
                    problems.append(f"ledger {settings.ledger_path} not written: {exc}")
        rows = run.sorted_comparisons()
        outcome = report.RunOutcome(
            ledger_path=settings.ledger_path, ledger_exists=run.baseline.exists or recorded,
            slack=settings.slack, recorded=recorded, counts=run.counts(), stale=stale,
            partial_reasons=tuple(run.partial_reasons), problems=tuple(problems),
            strict=settings.strict, not_recorded=tuple(not_recorded),
            started=self.started,
            commit=git_commit(self.rootdir) if self.rootdir is not None and rows else None,
            test_ids={k.label: tuple(sorted(v)) for k, v in run.origins.items()},
            failed_tests=dict(self.not_passed),
        )
        extra: list[str] = []
        written: list[tuple[str, str]] = []
        if settings.report_path is not None:
            try:
                report.write_report(settings.report_path, rows, outcome)
                written.append(("report", str(settings.report_path)))
            except OSError as exc:
                extra.append(f"report {settings.report_path} not written: {exc}")
        if rows:
            try:
                step = report.append_step_summary(
                    report.markdown_report(rows, outcome, fold_unchanged=True))
                if step is not None:
                    written.append(("job summary", str(step)))
            except OSError as exc:
                extra.append(f"GITHUB_STEP_SUMMARY not appended: {exc}")
        if settings.plot_path is not None:
            try:
                report.write_plot(settings.plot_path, rows)
                written.append(("plot", str(settings.plot_path)))
            except Exception as exc:  # matplotlib raises many kinds; the run must not crash
                extra.append(f"plot {settings.plot_path} not written: "
                             f"{type(exc).__name__}: {exc}")
        outcome = dataclasses.replace(outcome, problems=(*problems, *extra),
                                      written=tuple(written))
        return rows, outcome


#: The one stash entry of the plugin.
SESSION_KEY = pytest.StashKey[GateSession]()
