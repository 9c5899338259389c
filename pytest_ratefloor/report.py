"""Efficiency reports: the terminal summary, Markdown and JSON files, the CI job summary, the plot.

Everything here turns rows — :class:`~pytest_ratefloor.verdicts.Comparison`
records, a case beside its ledger entry, or a case on its own for a plain
listing — into text or an image; nothing here reads pytest state and nothing
here recomputes a figure the case record or the comparison already holds.
The same Markdown table serves the ``--ratefloor-report`` file, the GitHub job
summary and ``ratefloor show``.

Each case shows its ``layout`` — how the codec turned symbols into bytes or
bits (a byte packing such as ``u8``, or a command), ``–`` when unknown: a
column of the ``-v`` summary, a column of a Markdown codec table when any of its
cases has one, and a field of the JSON report (``null`` when unknown).

Codec names, source specs, codec versions, layouts, floor names and ledger paths come
from users' code or from a ledger file, so they are untrusted text: every
place that shows one passes it through :func:`terminal_text` (terminal and
plain-text output), :func:`markdown_text` (Markdown) or :func:`plot_text`
(matplotlib labels). JSON output keeps the raw strings (``json.dumps``
escapes them) and never writes ``NaN`` or ``Infinity`` (:func:`json_safe`,
``allow_nan=False``).
"""

from __future__ import annotations

import importlib.util
import math
import os
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from pytest_ratefloor.escaping import json_safe, markdown_text, md_name, terminal_text
from pytest_ratefloor.ledger import Environment, entry_json
from pytest_ratefloor.measurement import Measurement
from pytest_ratefloor.recording import write_atomic
from pytest_ratefloor.verdicts import (
    SUSPICIOUS_SPREADS,
    VERDICTS,
    Colour,
    Comparison,
    counts_of,
)

#: Version of the JSON report layout.
REPORT_SCHEMA_VERSION = 1
REPORT_KIND = "pytest-ratefloor efficiency report"
#: The one-line caution every report carries.
CAUTION = (
    "Caution: efficiency measured on synthetic reference sources is not a promise "
    "about real data."
)
TITLE = "Rate floor report"
SUMMARY_TITLE = "ratefloor: measured rate against the floor"
PLOT_HINT = "--ratefloor-plot needs matplotlib: pip install 'pytest-ratefloor[plot]'"
REPORT_SUFFIXES: dict[str, Literal["md", "json"]] = {
    ".md": "md", ".markdown": "md", ".json": "json",
}
PLOT_SUFFIXES = (".png", ".svg", ".pdf")


@dataclass(frozen=True)
class RunOutcome:
    """What a run adds to its rows: ledger counts, stale entries, problems.

    ``strict`` and ``not_recorded`` came later and have defaults, so a caller that
    names only the earlier fields keeps working.
    """

    ledger_path: Path | None = None
    #: False when no ledger file existed and none was written (every case is new)
    ledger_exists: bool = True
    slack: float = 0.0
    recorded: bool = False
    counts: Mapping[str, int] = field(default_factory=dict)
    stale: Sequence[Measurement] = ()
    partial_reasons: Sequence[str] = ()
    problems: Sequence[str] = ()
    #: the run gated in strict mode (shown beside the ledger in every summary)
    strict: bool = False
    #: (case label, reason) of each case a recording left out because its test failed
    not_recorded: tuple[tuple[str, str], ...] = ()


# -- small formatters ---------------------------------------------------------------


def figure_text(value: float | None, digits: int = 4) -> str:
    """A figure in a table cell: fixed decimals, ``–`` when missing, ``inf`` when infinite."""
    if value is None:
        return "–"
    if math.isinf(value):
        return "inf"
    return f"{value:.{digits}f}"


def percent_text(value: float | None) -> str:
    """A ratio as a percentage cell (``99.31%``), ``–`` when missing."""
    if value is None:
        return "–"
    if math.isinf(value):
        return "inf"
    return f"{100.0 * value:.2f}%"


def signed_pct(value: float) -> str:
    return f"{value:+.3f}%" if math.isfinite(value) else ("+inf%" if value > 0 else "-inf%")


def delta_text(row: Comparison) -> str:
    """The ``vs. ledger`` cell: ``new``, ``= ledger``, or ``+12 bits (+0.010%) regressed``."""
    if row.status is None:
        return ""
    if row.status == "new":
        return "new"
    if row.status == "resampled":
        return "resampled (not comparable: re-record)"
    if row.status == "unchanged":
        return "= ledger"
    if row.delta_bits is None or row.delta_pct is None:
        return row.status
    return f"{row.delta_bits:+,} bits ({signed_pct(row.delta_pct)}) {row.status}"


def counts_text(counts: Mapping[str, int]) -> str:
    """``1 regressed, 2 improved, ...`` in a fixed order, zero counts of rare kinds omitted."""
    parts = []
    for name in (*VERDICTS, "stale"):
        value = counts.get(name, 0)
        if value or (name in VERDICTS and VERDICTS[name].always_counted):
            parts.append(f"{value} {name}")
    return ", ".join(parts)


def layout_cell(m: Measurement, escape: Callable[[str], str]) -> str:
    """The layout (escaped: it comes from the codec or a ledger file), ``–`` when unknown."""
    return escape(m.layout) if m.layout else "–"


def floor_cell(m: Measurement, escape: Callable[[str], str]) -> str:
    """The floor rate, with the floor's name (escaped: a ledger file may hold any text)."""
    text = figure_text(m.floor_rate)
    return text if m.floor in ("", "entropy") else f"{text} ({escape(m.floor)})"


# -- terminal summary -------------------------------------------------------------


def align(table: list[list[str]], right: set[int]) -> list[str]:
    widths = [max(len(r[i]) for r in table) for i in range(len(table[0]))]
    lines = []
    for r in table:
        cells = [c.rjust(w) if i in right else c.ljust(w) for i, (c, w) in
                 enumerate(zip(r, widths))]
        lines.append("  ".join(cells).rstrip())
    return lines


@dataclass(frozen=True)
class Line:
    """One line of the terminal summary and the colour its status gives it."""

    text: str
    colour: Colour = ""


def _tally_colour(outcome: RunOutcome) -> Colour:
    """Red when the run fails on the ledger, yellow for what deserves a look, else green."""
    if outcome.problems or any(
        outcome.counts.get(name, 0) for name, kind in VERDICTS.items() if kind.fails
    ):
        return "red"
    if outcome.stale or outcome.not_recorded or any(
        outcome.counts.get(name, 0) for name, kind in VERDICTS.items() if kind.colour == "yellow"
    ):
        return "yellow"
    return "green"


#: How many not-recorded cases the summary lists (``-v`` lists all, ``-q`` fewer).
NOT_RECORDED_SHOWN = 20
NOT_RECORDED_HEADING = "not recorded (their tests failed):"


def _first_line(text: str) -> str:
    lines = str(text).strip().splitlines()
    return lines[0] if lines else ""


#: How a recording describes what it wrote, by the verdict the case had against the old entry.
_WRITTEN_AS: dict[str, str] = {
    "regressed": "re-recorded with more bits", "resampled": "re-recorded on a new sample",
    "within-slack": "re-recorded within the slack", "improved": "re-recorded with fewer bits",
    "new": "new", "unchanged": "unchanged",
}


def recorded_text(rows: Sequence[Comparison], outcome: RunOutcome) -> str:
    """What a recording wrote: ``wrote 13 cases (1 re-recorded with more bits, 2 new, ...)``
    and how many cases it left out because their tests failed."""
    skipped = {label for label, _ in outcome.not_recorded}
    written = [r for r in rows if r.current is not None and r.key.label not in skipped]
    by_verdict = counts_of(written)
    parts = [f"{by_verdict[v]} {text}" for v, text in _WRITTEN_AS.items() if by_verdict.get(v)]
    text = f"wrote {len(written)} case{'s' if len(written) != 1 else ''}"
    if parts:
        text += f" ({', '.join(parts)})"
    if skipped:
        text += f"; {len(skipped)} not recorded (their tests failed)"
    return text


def _ledger_line(outcome: RunOutcome, rows: Sequence[Comparison]) -> Line | None:
    """The one line that names the ledger file and, once there is one, its tally (after a
    recording: what was written)."""
    any_rows = bool(rows)
    if outcome.ledger_path is None:
        return None
    path = terminal_text(str(outcome.ledger_path))
    strict = ", strict mode" if outcome.strict else ""
    if not outcome.ledger_exists and not outcome.recorded:
        what = "every case is new" if any_rows else "nothing was measured"
        return Line(f"no ledger at {path} yet{strict}: {what}; "
                    "create it with: pytest --ratefloor-record", "yellow")
    slack = f", slack {100.0 * outcome.slack:g}%" if outcome.slack else ""
    if outcome.recorded:
        return Line(f"ledger recorded into {path}{strict}: {recorded_text(rows, outcome)}",
                    _tally_colour(outcome))
    return Line(f"ledger compared with {path}{slack}{strict}: {counts_text(outcome.counts)}",
                _tally_colour(outcome))


def _capped(items: Sequence[str], limit: int | None, more_hint: str) -> list[Line]:
    """``items`` as indented lines, at most ``limit`` of them (``None``: all)."""
    shown = items if limit is None else items[:limit]
    lines = [Line(f"  {text}") for text in shown]
    if len(shown) < len(items):
        lines.append(Line(f"  ... and {len(items) - len(shown)} more{more_hint}"))
    return lines


def suspicious_lines(rows: Sequence[Comparison], escape: Callable[[str], str]) -> list[Line]:
    """A note naming cases whose bits dropped on the same sample by more than the sampling
    spread (see :attr:`~pytest_ratefloor.verdicts.Comparison.suspicious_drop`)."""
    flagged = [r for r in rows if r.suspicious_drop]
    if not flagged:
        return []
    out = [Line(f"worth a look: {len(flagged)} case(s) dropped on the same sample by more "
                f"than {SUSPICIOUS_SPREADS:g} sampling spreads (genuine, or a decoder fed "
                "from outside the stream):", "yellow")]
    for r in flagged[:NOT_RECORDED_SHOWN]:
        out.append(Line(f"  {escape(r.key.label)}: {r.delta_bits:+,} bits", "yellow"))
    return out


def summary_lines(rows: Sequence[Comparison], outcome: RunOutcome, verbose: bool = False,
                  quiet: bool = False) -> list[Line]:
    """The terminal summary: one line per case, then the ledger line and the caution.

    Compact: codec, source, entropy, floor, rate, efficiency, change against the
    ledger. ``verbose`` adds n, seed, the layout, bits, ledger bits, excess, the smallest
    excess the case detects (``Measurement.detectable_excess``: the tolerance
    plus 3.09 sampling spreads of a noisy floor) and timings, and
    lists every stale entry and every case left out of a recording (compact lists
    at most five and :data:`NOT_RECORDED_SHOWN`). ``quiet`` leaves out the cases
    whose bits equal the ledger's and shortens the lists, but the line naming the
    ledger file is always there when the outcome has one. Each line's colour comes
    from the verdict table (:data:`~pytest_ratefloor.verdicts.VERDICTS`), never
    from its text. Every user-supplied string goes through :func:`terminal_text`.
    """
    lines: list[Line] = []
    all_rows = rows
    if quiet:
        rows = [r for r in rows if r.status != "unchanged"]
    if rows:
        header = ["codec", "source", "H b/sym", "floor b/sym", "rate b/sym", "eff."]
        if verbose:
            header += ["n", "seed", "layout", "bits", "ledger bits", "excess b/sym",
                       "detects b/sym", "enc s", "dec s"]
        header.append("vs. ledger")
        table = [header]
        for r in rows:
            m = r.case
            name = m.codec if not (verbose and m.codec_version) else f"{m.codec} {m.codec_version}"
            cells = [terminal_text(name), terminal_text(m.source), figure_text(m.entropy),
                     floor_cell(m, terminal_text), figure_text(m.rate), percent_text(m.efficiency)]
            if verbose:
                cells += [str(m.n), str(m.seed), layout_cell(m, terminal_text), f"{m.bits:,}",
                          "–" if r.ledger_bits is None else f"{r.ledger_bits:,}",
                          figure_text(m.excess), figure_text(m.detectable_excess),
                          figure_text(m.encode_seconds, 3), figure_text(m.decode_seconds, 3)]
            cells.append(delta_text(r))
            table.append(cells)
        right = {2, 3, 4, 5} | ({6, 7, 9, 10, 11, 12, 13, 14} if verbose else set())
        texts = align(table, right)
        lines.append(Line(texts[0]))
        lines += [Line(t, "" if r.status is None else VERDICTS[r.status].colour)
                  for t, r in zip(texts[1:], rows)]
    lines += suspicious_lines(all_rows, terminal_text)
    ledger_line = _ledger_line(outcome, all_rows)
    if ledger_line is not None:
        lines.append(ledger_line)
    if outcome.not_recorded:
        lines.append(Line(NOT_RECORDED_HEADING, "yellow"))
        limit = None if verbose else (5 if quiet else NOT_RECORDED_SHOWN)
        lines += _capped([f"{terminal_text(label)}: {terminal_text(_first_line(why))}"
                          for label, why in outcome.not_recorded], limit, " (-v lists all)")
    if outcome.stale:
        count = len(outcome.stale)
        lines.append(Line(
            f"stale: {count} ledger entr{'y' if count == 1 else 'ies'} not measured by this "
            "full run (kept in the ledger; if the case is gone, 'ratefloor prune LEDGER "
            "--report REPORT.json' with this run's JSON report removes it):", "yellow"))
        lines += _capped([terminal_text(e.key.label) for e in outcome.stale],
                         None if verbose else 5, " (-v lists all)")
    elif outcome.partial_reasons:
        why = "; ".join(terminal_text(str(r)) for r in outcome.partial_reasons)
        lines.append(Line(f"stale entries not listed: partial run ({why})"))
    lines += [Line(f"ERROR: {terminal_text(str(p))}", "red") for p in outcome.problems]
    if rows or (all_rows and not quiet):
        lines.append(Line(CAUTION))
    return lines


# -- Markdown ------------------------------------------------------------------------


def md_cell(text: str) -> str:
    """Any text as one literal GitHub-flavoured Markdown table cell (see :func:`markdown_text`)."""
    return markdown_text(str(text))


def markdown_tables(rows: Sequence[Comparison], with_ledger: bool = True) -> str:
    """One table per codec (sorted), cases sorted by source, n, seed.

    A codec's table has a ``layout`` column (after ``seed``) when any of its
    cases knows its layout; the other tables look as they did before layouts
    were recorded.
    """
    by_codec: dict[tuple[str, str | None], list[Comparison]] = {}
    for r in rows:
        by_codec.setdefault((r.case.codec, r.case.codec_version), []).append(r)
    header = ["source", "n", "seed", "entropy (bit/sym)", "floor (bit/sym)", "rate (bit/sym)",
              "efficiency"]
    align = ["---", "---:", "---:", "---:", "---:", "---:", "---:"]
    if with_ledger:
        header.append("vs. ledger")
        align.append("---")
    out: list[str] = []
    for (codec, version), group in sorted(by_codec.items(),
                                          key=lambda kv: (kv[0][0], kv[0][1] or "")):
        title = f"### Codec {md_name(codec)}"
        if version:
            title += f" (version {md_cell(version)})"
        laid_out = any(r.case.layout for r in group)
        names = [*header[:3], "layout", *header[3:]] if laid_out else header
        marks = [*align[:3], "---", *align[3:]] if laid_out else align
        out += [title, "", "| " + " | ".join(names) + " |", "| " + " | ".join(marks) + " |"]
        for r in sorted(group, key=lambda r: r.key):
            m = r.case
            layout = [layout_cell(m, md_name)] if laid_out else []
            cells = [md_name(m.source), str(m.n), str(m.seed), *layout, figure_text(m.entropy),
                     floor_cell(m, markdown_text), figure_text(m.rate), percent_text(m.efficiency)]
            if with_ledger:
                cells.append(delta_text(r))  # figures and verdict names only
            out.append("| " + " | ".join(cells) + " |")
        out.append("")
    return "\n".join(out)


def markdown_report(rows: Sequence[Comparison], outcome: RunOutcome, title: str = TITLE) -> str:
    """The release-notes report: title, caution, ledger tally, per-codec tables, stale list.

    Cases a recording left out (their tests failed) and the run's problems follow.
    Every user-supplied string is escaped (:func:`md_name`, :func:`markdown_text`).
    """
    out = [f"## {title}", "", f"> {CAUTION}", ""]
    strict = " (strict mode)" if outcome.strict else ""
    if outcome.ledger_path is not None:
        name = md_name(outcome.ledger_path.name)
        if not outcome.ledger_exists and not outcome.recorded:
            out += [f"No ledger {name} yet{strict}: every case is new.", ""]
        else:
            verb = "Recorded into" if outcome.recorded else "Compared with"
            out += [f"{verb} ledger {name}{strict}: {counts_text(outcome.counts)}.", ""]
    if rows:
        out.append(markdown_tables(rows, with_ledger=outcome.ledger_path is not None))
    else:
        out += ["No case was measured.", ""]
    flagged = [r for r in rows if r.suspicious_drop]
    if flagged:
        out += [f"Worth a look: dropped on the same sample by more than "
                f"{SUSPICIOUS_SPREADS:g} sampling spreads (genuine, or a decoder fed from "
                "outside the stream):", ""]
        out += [f"- {markdown_text(r.key.label)}: {r.delta_bits:+,} bits" for r in flagged]
        out.append("")
    if outcome.not_recorded:
        out += ["Not recorded (their tests failed):", ""]
        out += [f"- {markdown_text(label)}: {markdown_text(_first_line(why))}"
                for label, why in outcome.not_recorded]
        out.append("")
    if outcome.stale:
        out += ["Stale ledger entries (not measured by this full run):", ""]
        out += [f"- {md_name(e.codec)} on {md_name(e.source)}, n={e.n}, seed={e.seed}"
                for e in outcome.stale]
        out.append("")
    if outcome.problems:
        out += [f"**Error:** {md_cell(p)}" for p in outcome.problems]
        out.append("")
    return "\n".join(out).rstrip("\n") + "\n"


# -- JSON ------------------------------------------------------------------------------


def finite(value: float | None) -> float | None:
    """``value`` for a JSON file: ``None`` for a missing or non-finite figure."""
    return None if value is None or not math.isfinite(value) else float(value)


def row_json(r: Comparison) -> dict[str, Any]:
    """One case of the JSON report (with its ledger comparison when there is one)."""
    m = r.case
    out: dict[str, Any] = {
        "codec": m.codec, "codec_version": m.codec_version, "source": m.source,
        "source_family": m.source_family, "source_params": dict(m.source_params),
        "n": m.n, "seed": m.seed, "bits": m.bits, "rate": finite(m.rate),
        "entropy": finite(m.entropy), "floor": m.floor, "floor_rate": finite(m.floor_rate),
        "efficiency": finite(m.efficiency), "fingerprint": m.fingerprint, "layout": m.layout,
        "tolerance_bits": finite(m.tolerance_bits),
        "floor_spread_bits": finite(m.floor_spread_bits),
        "detectable_excess": finite(m.detectable_excess),
        "encode_seconds": finite(m.encode_seconds), "decode_seconds": finite(m.decode_seconds),
    }
    if r.status is not None:
        out["ledger"] = {"status": r.status, "bits": r.ledger_bits, "delta_bits": r.delta_bits,
                         "delta_pct": finite(r.delta_pct), "suspicious_drop": r.suspicious_drop}
    return out


def json_report(rows: Sequence[Comparison], outcome: RunOutcome,
                environment: Environment | None = None) -> dict[str, Any]:
    """The versioned JSON report (builtin types only, no non-finite float: see :func:`json_safe`).

    Strings are kept raw: ``json.dumps`` escapes whatever they hold. With a
    ledger, ``ledger.full_run`` and ``ledger.partial_reasons`` say whether the
    run could tell which entries are stale, and ``ledger.stale`` quotes each
    stale entry in its ledger form (:func:`~pytest_ratefloor.ledger.entry_json`);
    ``ratefloor prune`` reads exactly these and refuses a partial run's report.
    """
    env = environment or Environment.current()
    doc: dict[str, Any] = {
        "kind": REPORT_KIND, "schema": REPORT_SCHEMA_VERSION, "caution": CAUTION,
        "environment": env.to_json(),
        "cases": [row_json(r) for r in rows],
        "problems": list(outcome.problems),
        "not_recorded": [{"case": label, "reason": why} for label, why in outcome.not_recorded],
    }
    if outcome.ledger_path is not None:
        doc["ledger"] = {
            "path": str(outcome.ledger_path), "exists": outcome.ledger_exists,
            "slack": outcome.slack, "strict": outcome.strict,
            "recorded": outcome.recorded, "counts": dict(outcome.counts),
            "full_run": not outcome.partial_reasons,
            "partial_reasons": list(outcome.partial_reasons),
            "stale": [entry_json(e) for e in outcome.stale],
        }
    safe: dict[str, Any] = json_safe(doc)
    return safe


# -- files ---------------------------------------------------------------------------


def report_format(path: Path) -> Literal["md", "json"]:
    """The report format for ``path``'s suffix; ValueError naming the path otherwise."""
    kind = REPORT_SUFFIXES.get(Path(path).suffix.lower())
    if kind is None:
        raise ValueError(
            f"--ratefloor-report {path}: unknown suffix {Path(path).suffix!r}; "
            "use .md (Markdown) or .json"
        )
    return kind


def write_report(path: Path, rows: Sequence[Comparison], outcome: RunOutcome) -> None:
    """Write the Markdown or JSON report, chosen by suffix."""
    import json

    if report_format(path) == "md":
        text = markdown_report(rows, outcome)
    else:
        text = json.dumps(json_report(rows, outcome), indent=2, sort_keys=True,
                          allow_nan=False) + "\n"
    write_atomic(Path(path), text)


def append_step_summary(markdown: str, environ: Mapping[str, str] | None = None) -> Path | None:
    """Append to the file named by ``GITHUB_STEP_SUMMARY`` if set; return it."""
    target = (os.environ if environ is None else environ).get("GITHUB_STEP_SUMMARY", "")
    if not target:
        return None
    path = Path(target)
    with path.open("a", encoding="utf-8") as fh:
        fh.write(markdown if markdown.endswith("\n") else markdown + "\n")
    return path


def plot_available() -> bool:
    """True when matplotlib can be imported."""
    return importlib.util.find_spec("matplotlib") is not None


def check_plot_path(path: Path) -> None:
    """ValueError for a bad suffix; RuntimeError (install hint) when matplotlib is absent."""
    if Path(path).suffix.lower() not in PLOT_SUFFIXES:
        raise ValueError(
            f"--ratefloor-plot {path}: unknown suffix {Path(path).suffix!r}; "
            f"use one of {', '.join(PLOT_SUFFIXES)}"
        )
    if not plot_available():
        raise RuntimeError(PLOT_HINT)


def write_plot(path: Path, rows: Iterable[Comparison]) -> None:
    """Write the run's plot (see :func:`pytest_ratefloor.plotting.plot_run`): each case's
    excess over the floor it used, the ledger's value beside it, regressions in their own
    colour, a Bernoulli panel on a log p axis, a bounded legend."""
    from pytest_ratefloor.plotting import plot_run

    plot_run(path, list(rows))
