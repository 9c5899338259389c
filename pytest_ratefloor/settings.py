"""The plugin's configuration: command-line options, ini keys, and their one parsed form.

:func:`add_options` registers the options and ini keys; :func:`read_settings`
reads and validates all of them at once in ``pytest_configure`` (pytest checks
ini values lazily, so a bad value would otherwise surface as an error in
every test that uses the fixture). The command line beats the ini file;
paths from the command line are relative to the invocation folder, paths
from the ini file to the ini file's folder.
"""

from __future__ import annotations

import os
import stat
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import pytest

from pytest_ratefloor import report, validation
from pytest_ratefloor.ledger import DEFAULT_LEDGER_NAME

__all__ = [
    "MARKER",
    "PROJECT_MARKERS",
    "Isolation",
    "Settings",
    "add_options",
    "check_marker",
    "default_ledger_path",
    "marker_slack",
    "read_settings",
    "usage_slack",
]

MARKER = (
    "ratefloor(slack=REL): compare this test's measurements with the ledger allowing "
    "a relative increase of REL (overrides --ratefloor-slack / ratefloor_slack)"
)
#: The keyword arguments the marker takes.
MARKER_KEYWORDS = ("slack",)
#: The environment variable naming the CI job summary file the report is appended to.
STEP_SUMMARY_ENV = "GITHUB_STEP_SUMMARY"
#: ini ``ratefloor_isolate``: a supervisor over the run, a forked child per check, or neither
Isolation = Literal["session", "check", "off"]
#: What marks the top folder of a project when pytest found no configuration file.
PROJECT_MARKERS = (".git", ".hg", "pyproject.toml", "setup.py", "setup.cfg")


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
    #: CI mode: a missing ledger, a case without an entry or a stale entry fails
    strict: bool = False
    #: how a codec is kept from ending the run unseen (see pytest_ratefloor.isolation):
    #: "session" (a supervisor over the run), "check" (a child per check), "off"
    isolate: Isolation = "session"


def add_options(parser: pytest.Parser) -> None:
    """Register the ``--ratefloor-*`` options and the ``ratefloor_*`` ini keys."""
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
        "--ratefloor-strict", dest="ratefloor_strict", action="store_true", default=None,
        help="CI mode: fail on a missing or unreadable ledger, on a case with no ledger "
             "entry and (in a full run) on ledger entries no test measured",
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
    parser.addini("ratefloor_strict", "CI mode (see --ratefloor-strict)", type="bool",
                  default=False)
    parser.addini("ratefloor_isolate", "keep a codec from ending the run unseen: true (a "
                  "supervisor process over the run, checks in process; the default), check "
                  "(each check in a forked child) or false", type="string", default="true")


def usage_slack(value: object, origin: str) -> float:
    """A relative slack from an option, ini key or marker; ``pytest.UsageError`` naming it."""
    try:
        return validation.slack(value, origin)
    except (TypeError, ValueError) as exc:
        raise pytest.UsageError(str(exc)) from None


def check_marker(item: pytest.Item) -> None:
    """Refuse a ``ratefloor`` marker with positional or unknown arguments (``pytest.UsageError``).

    Called for every collected test, so ``@pytest.mark.ratefloor(0.5)`` or a
    misspelt ``slak=`` stops the run before any test instead of being ignored.
    """
    for marker in item.iter_markers("ratefloor"):
        where = f"{item.nodeid}: @pytest.mark.ratefloor"
        if marker.args:
            raise pytest.UsageError(
                f"{where} takes keyword arguments only (slack=REL), got positional "
                f"{', '.join(repr(a) for a in marker.args)}"
            )
        unknown = sorted(set(marker.kwargs) - set(MARKER_KEYWORDS))
        if unknown:
            raise pytest.UsageError(
                f"{where} got unknown keyword(s) {', '.join(unknown)}; it takes "
                f"{', '.join(k + '=' for k in MARKER_KEYWORDS)}"
            )
        if "slack" in marker.kwargs:
            usage_slack(marker.kwargs["slack"], f"{where}(slack=...)")


def marker_slack(item: pytest.Item) -> float | None:
    """The ``@pytest.mark.ratefloor(slack=...)`` of a test, if it has one."""
    marker = item.get_closest_marker("ratefloor")
    if marker is None or "slack" not in marker.kwargs:
        return None
    return usage_slack(marker.kwargs["slack"], f"{item.nodeid}: ratefloor(slack=...)")


def default_ledger_path(rootpath: Path, configured: bool) -> Path:
    """Where the ledger is when no path is given, the same from whichever folder pytest starts.

    With a pytest configuration file the rootdir is the project's top: the
    ledger is there. Without one, pytest's rootdir is the folder the run
    started from (``cd tests && pytest`` gives ``tests``), so the ledger is
    looked for upwards from it: the first folder that holds one wins, and
    the search stops at the project's top folder (one holding any of
    :data:`PROJECT_MARKERS`), where a new ledger goes.
    """
    if configured:
        return rootpath / DEFAULT_LEDGER_NAME
    for folder in (rootpath, *rootpath.parents):
        candidate = folder / DEFAULT_LEDGER_NAME
        if candidate.exists() or candidate.is_symlink():
            return candidate
        if any((folder / name).exists() for name in PROJECT_MARKERS):
            return candidate
    return rootpath / DEFAULT_LEDGER_NAME


def _ledger_file(path: Path, origin: str, text: str) -> Path:
    """The ledger path must name a file: not a folder, FIFO or device (``pytest.UsageError``).

    ``text`` is the value as the user wrote it (a trailing slash means a folder).
    """
    if text.endswith(("/", os.sep)) or path.is_dir():
        raise pytest.UsageError(
            f"{origin} = {text!r} names a folder; give the ledger file's path, e.g. "
            f"{(path / DEFAULT_LEDGER_NAME).as_posix()}"
        )
    try:
        mode = path.stat().st_mode
    except OSError:
        return path  # missing (a first recording creates it), or a dangling link
    if not stat.S_ISREG(mode):
        raise pytest.UsageError(
            f"{origin} = {text!r} is not a regular file (a FIFO, device or socket); "
            "the ledger must be a JSON file"
        )
    return path


def _distinct_outputs(named: dict[str, Path | None]) -> None:
    """No two of the ledger, the report, the plot and the job summary may be one file."""
    seen: dict[str, str] = {}
    for name, path in named.items():
        if path is None:
            continue
        real = os.path.realpath(path)
        if real in seen:
            raise pytest.UsageError(
                f"{name} {str(path)!r} is the same file as the {seen[real]}; nothing was "
                "written (the ledger is unchanged): give each output its own path"
            )
        seen[real] = name


#: ini ``ratefloor_isolate`` values, as pytest's own bool ini values are spelt, plus "check"
_ISOLATION_WORDS: dict[str, Isolation] = {
    **dict.fromkeys(("true", "yes", "on", "1", "session"), "session"),
    **dict.fromkeys(("false", "no", "off", "0"), "off"),
    "check": "check",
}


def _isolation_ini(config: pytest.Config) -> Isolation:
    value = str(config.getini("ratefloor_isolate")).strip()
    try:
        return _ISOLATION_WORDS[value.lower()]
    except KeyError:
        raise pytest.UsageError(
            f"ini key ratefloor_isolate: expected true, check or false, got {value!r}"
        ) from None


def _bool_ini(config: pytest.Config, name: str) -> bool:
    try:
        return bool(config.getini(name))
    except ValueError as exc:
        raise pytest.UsageError(f"ini key {name}: {exc}") from None


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
        slack = usage_slack(str(cli_slack), "--ratefloor-slack")
    else:
        ini_slack = str(config.getini("ratefloor_slack") or "").strip()
        slack = usage_slack(ini_slack, "ini key ratefloor_slack") if ini_slack else 0.0
    report_path, _ = _path_setting(config, "ratefloor_report", "ratefloor_report")
    plot_path, _ = _path_setting(config, "ratefloor_plot", "ratefloor_plot")
    try:
        if report_path is not None:
            report.report_format(report_path)
        if plot_path is not None:
            report.check_plot_path(plot_path)
    except (ValueError, RuntimeError) as exc:
        raise pytest.UsageError(str(exc)) from None
    if ledger_path is None:
        ledger_path = default_ledger_path(config.rootpath, config.inipath is not None)
        ledger_path = _ledger_file(ledger_path, "the ledger", str(ledger_path))
    else:
        raw = config.getoption("ratefloor_ledger") if from_cli else config.getini(
            "ratefloor_ledger")
        ledger_path = _ledger_file(
            ledger_path, "--ratefloor-ledger" if from_cli else "ini key ratefloor_ledger",
            str(raw).strip())
    summary = os.environ.get(STEP_SUMMARY_ENV, "").strip()
    _distinct_outputs({
        "ledger": ledger_path, "report": report_path, "plot": plot_path,
        f"job summary (${STEP_SUMMARY_ENV})": Path(summary) if summary else None,
    })
    cli_strict = config.getoption("ratefloor_strict")
    return Settings(
        ledger_path=ledger_path,
        ledger_from_cli=from_cli,
        record=bool(config.getoption("ratefloor_record")),
        slack=slack,
        report_path=report_path,
        plot_path=plot_path,
        strict=bool(cli_strict) if cli_strict is not None else _bool_ini(config,
                                                                          "ratefloor_strict"),
        isolate=_isolation_ini(config),
    )
