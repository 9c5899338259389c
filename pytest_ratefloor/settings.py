"""The plugin's configuration: command-line options, ini keys, and their one parsed form.

:func:`add_options` registers the options and ini keys; :func:`read_settings`
reads and validates all of them at once in ``pytest_configure`` (pytest checks
ini values lazily, so a bad value would otherwise surface as an error in
every test that uses the fixture). The command line beats the ini file;
paths from the command line are relative to the invocation folder, paths
from the ini file to the ini file's folder.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pytest

from pytest_ratefloor import report, validation
from pytest_ratefloor.ledger import DEFAULT_LEDGER_NAME

__all__ = ["MARKER", "Settings", "add_options", "marker_slack", "read_settings", "usage_slack"]

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


def usage_slack(value: object, origin: str) -> float:
    """A relative slack from an option, ini key or marker; ``pytest.UsageError`` naming it."""
    try:
        return validation.slack(value, origin)
    except (TypeError, ValueError) as exc:
        raise pytest.UsageError(str(exc)) from None


def marker_slack(item: pytest.Item) -> float | None:
    """The ``@pytest.mark.ratefloor(slack=...)`` of a test, if it has one."""
    marker = item.get_closest_marker("ratefloor")
    if marker is None or "slack" not in marker.kwargs:
        return None
    return usage_slack(marker.kwargs["slack"], f"{item.nodeid}: ratefloor(slack=...)")


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
    return Settings(
        ledger_path=ledger_path or config.rootpath / DEFAULT_LEDGER_NAME,
        ledger_from_cli=from_cli,
        record=bool(config.getoption("ratefloor_record")),
        slack=slack,
        report_path=report_path,
        plot_path=plot_path,
    )
