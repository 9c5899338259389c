"""Efficiency reports: Markdown and JSON files, the CI job summary, the plot.

Everything here turns rows — :class:`~pytest_ratefloor.verdicts.Comparison`
records, a case beside its ledger entry, or a case on its own for a plain
listing — into text or an image; nothing here reads pytest state and nothing
here recomputes a figure the case record or the comparison already holds.
The terminal summary is :mod:`pytest_ratefloor.summary`; the small cell
formatters it shares with the reports and the CLI are here.

The Markdown report (``--ratefloor-report *.md``, the GitHub job summary,
``ratefloor show``) names the run (date, git commit, plugin, Python, numpy,
platform), the ledger tally, the cases that fail first, one table per codec
(worst verdict first: source, n, seed, layout, entropy, floor and its kind, rate,
bits, the rate the tolerance allowed, efficiency, the test's outcome and the
change against the ledger) and a legend of the floors used. The job summary
folds the unchanged cases away under a ``<details>`` block.

The JSON report (``--ratefloor-report *.json``) carries the same per case, with
the test ids that measured it, the tolerance, the verdicts and the run's
timestamp; its layout is published as a JSON Schema in the package
(``pytest_ratefloor/schemas/report.schema.json``, see :func:`schema_path`).

Each case shows its ``layout`` — how the codec turned symbols into bytes or
bits (a byte packing such as ``u8``, or a command), ``–`` when unknown.

Codec names, source specs, codec versions, layouts, floor names and ledger paths come
from users' code or from a ledger file, so they are untrusted text: every
place that shows one passes it through :func:`markdown_text` or :func:`md_name`
(Markdown) or :func:`plot_text` (matplotlib labels). JSON output keeps the raw
strings (``json.dumps`` escapes them) and never writes ``NaN`` or ``Infinity``
(:func:`json_safe`, ``allow_nan=False``).
"""

from __future__ import annotations

import importlib.util
import math
import os
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from pytest_ratefloor.escaping import json_safe, markdown_text, md_name
from pytest_ratefloor.ledger import Environment, entry_json
from pytest_ratefloor.measurement import LOSSY_FLOOR, Measurement
from pytest_ratefloor.recording import write_atomic
from pytest_ratefloor.verdicts import (
    SUSPICIOUS_SPREADS,
    VERDICTS,
    Comparison,
    worst_first,
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
    #: (what, path) of each file the run wrote besides the ledger: report, plot, job summary
    written: tuple[tuple[str, str], ...] = ()
    #: the run's start, ISO 8601 in UTC (``None``: not known, e.g. ``ratefloor show``)
    started: str | None = None
    #: the git commit the run measured (``abc123def456`` or ``abc123def456+dirty``)
    commit: str | None = None
    #: the node ids of the tests that measured each case (by case label)
    test_ids: Mapping[str, tuple[str, ...]] = field(default_factory=dict)
    #: node id -> why that test did not pass (tests absent here passed)
    failed_tests: Mapping[str, str] = field(default_factory=dict)

    def test_outcome(self, label: str) -> str | None:
        """``passed``/``failed`` for the tests that measured the case, ``None`` if unknown."""
        ids = self.test_ids.get(label, ())
        if not ids:
            return None
        return "failed" if any(i in self.failed_tests for i in ids) else "passed"


# -- small formatters ---------------------------------------------------------------


def figure_text(value: float | None, digits: int = 4) -> str:
    """A figure in a table cell: fixed decimals, ``–`` when missing (or NaN: a real-valued
    source's entropy), ``inf`` when infinite."""
    if value is None or math.isnan(value):
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


def delta_text(row: Comparison, short: bool = False) -> str:
    """The ``vs. ledger`` cell: ``new``, ``= ledger``, ``+12 bits (+0.010%) regressed``;
    ``short`` leaves out the bits (``+0.010% regressed``). A lossy case adds the change of
    its distortion (``+12 bits (+0.010%), D +1.250% regressed``)."""
    if row.status is None:
        return ""
    if row.status == "new":
        return "new"
    if row.status == "resampled":
        return "resampled: re-record" if short else "resampled (not comparable: re-record)"
    if row.status == "unchanged":
        return "= ledger"
    if row.delta_bits is None or row.delta_pct is None:
        return row.status
    text = signed_pct(row.delta_pct) if short else \
        f"{row.delta_bits:+,} bits ({signed_pct(row.delta_pct)})"
    d_pct = row.delta_distortion_pct
    if d_pct:  # a lossy case whose distortion moved
        text += f", D {signed_pct(d_pct)}"
    return f"{text} {row.status}"


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


# -- plain-text tables ----------------------------------------------------------------


def align(table: list[list[str]], right: set[int]) -> list[str]:
    """Rows of cells as lines: each column as wide as its widest cell, columns in
    ``right`` right-aligned, two spaces between columns."""
    widths = [max(len(r[i]) for r in table) for i in range(len(table[0]))]
    lines = []
    for r in table:
        cells = [c.rjust(w) if i in right else c.ljust(w) for i, (c, w) in
                 enumerate(zip(r, widths))]
        lines.append("  ".join(cells).rstrip())
    return lines


def first_line(text: str) -> str:
    """The first line of a (failure) text, stripped; ``""`` for none."""
    lines = str(text).strip().splitlines()
    return lines[0] if lines else ""


# -- Markdown ------------------------------------------------------------------------


def md_cell(text: str) -> str:
    """Any text as one literal GitHub-flavoured Markdown table cell (see :func:`markdown_text`)."""
    return markdown_text(str(text))


def allowed_rate(m: Measurement) -> float | None:
    """The rate the case's tolerance allowed (floor + tolerance, bits/symbol); ``None``
    without a tolerance (a ``measure`` call, a ledger entry)."""
    if m.tolerance_bits is None or not m.n:
        return None
    return (m.floor_bits + m.tolerance_bits) / m.n


def markdown_tables(rows: Sequence[Comparison], with_ledger: bool = True,
                    outcome: RunOutcome | None = None) -> str:
    """One table per codec (sorted by name), cases worst verdict first.

    A codec's table has a ``layout`` column (after ``seed``) when any of its
    cases knows its layout, an ``allowed`` column (the rate its tolerance
    allowed) when any case had a tolerance, and a ``test`` column (passed or
    failed) when ``outcome`` knows which tests measured the cases.
    """
    by_codec: dict[tuple[str, str | None], list[Comparison]] = {}
    for r in rows:
        by_codec.setdefault((r.case.codec, r.case.codec_version), []).append(r)
    out: list[str] = []
    for (codec, version), group in sorted(by_codec.items(),
                                          key=lambda kv: (kv[0][0], kv[0][1] or "")):
        title = f"### Codec {md_name(codec)}"
        if version:
            title += f" (version {md_cell(version)})"
        laid_out = any(r.case.layout for r in group)
        tolerant = any(allowed_rate(r.case) is not None for r in group)
        tested = outcome is not None and any(
            outcome.test_outcome(r.key.label) is not None for r in group)
        columns: list[tuple[str, str]] = [("source", "---"), ("n", "---:"), ("seed", "---:")]
        if laid_out:
            columns.append(("layout", "---"))
        columns += [("entropy (bit/sym)", "---:"), ("floor", "---"), ("floor (bit/sym)", "---:"),
                    ("rate (bit/sym)", "---:"), ("bits", "---:")]
        if tolerant:
            columns.append(("allowed (bit/sym)", "---:"))
        lossy = any(r.case.lossy for r in group)
        if lossy:
            columns += [("distortion", "---:"), ("SNR (dB)", "---:")]
        columns.append(("efficiency", "---:"))
        if tested:
            columns.append(("test", "---"))
        if with_ledger:
            columns.append(("vs. ledger", "---"))
        out += [title, "", "| " + " | ".join(c for c, _ in columns) + " |",
                "| " + " | ".join(a for _, a in columns) + " |"]
        for r in worst_first(group):
            m = r.case
            cells = [md_name(m.source), f"{m.n:,}", str(m.seed)]
            if laid_out:
                cells.append(layout_cell(m, md_name))
            cells += [figure_text(m.entropy), md_name(m.floor or "entropy"),
                      figure_text(m.floor_rate), figure_text(m.rate), f"{m.bits:,}"]
            if tolerant:
                cells.append(figure_text(allowed_rate(m)))
            if lossy:
                measure = f" ({md_name(m.distortion_measure)})" if m.distortion_measure else ""
                cells += ["–" if m.distortion is None else f"{m.distortion:.6g}{measure}",
                          figure_text(m.snr_db, 2)]
            cells.append(percent_text(m.efficiency))
            if tested:
                assert outcome is not None
                cells.append(outcome.test_outcome(r.key.label) or "–")
            if with_ledger:
                cells.append(delta_text(r))  # figures and verdict names only
            out.append("| " + " | ".join(cells) + " |")
        out.append("")
    return "\n".join(out)


def run_line(outcome: RunOutcome, environment: Environment | None = None) -> str:
    """``Run `2026-12-03T02:50:11Z` · commit `808ab63d1f2e` · pytest-ratefloor `0.1.0` ·
    Python `3.11.7` · numpy `2.4.6` · `Linux-x86_64```: what a release note needs to place
    the figures (each value a code span, or escaped text when it could not be one)."""
    env = environment or Environment.current()
    parts = []
    if outcome.started:
        parts.append(f"Run {md_name(outcome.started)}")
    if outcome.commit:
        parts.append(f"commit {md_name(outcome.commit)}")
    parts += [f"pytest-ratefloor {md_name(env.plugin)}", f"Python {md_name(env.python)}",
              f"numpy {md_name(env.numpy)}", md_name(env.platform)]
    return " · ".join(parts)


def floor_legend(rows: Iterable[Comparison]) -> list[str]:
    """The meaning of each floor the rows use, as Markdown list items."""
    from pytest_ratefloor.floors import FLOORS  # numpy-heavy: only when a report is written

    used = sorted({r.case.floor or "entropy" for r in rows})
    meanings: dict[str, str] = {str(k): v for k, v in FLOORS.items()}
    meanings[LOSSY_FLOOR] = ("n·R(D̂), the source's rate–distortion function at the distortion "
                             "the codec reached (lossy codecs; R(D) of a model source says "
                             "nothing certain about real signals)")
    return [f"- **{md_name(name)}**: {markdown_text(meanings.get(name, 'unknown floor'))}"
            for name in used]


def markdown_report(rows: Sequence[Comparison], outcome: RunOutcome, title: str = TITLE,
                    *, fold_unchanged: bool = False,
                    environment: Environment | None = None) -> str:
    """The release-notes report: title, caution, the run, the ledger tally, the cases that
    fail, per-codec tables, the floors' legend, the stale list.

    Cases a recording left out (their tests failed) and the run's problems follow.
    ``fold_unchanged`` (the CI job summary) puts the cases whose bits equal the ledger's
    in a collapsed ``<details>`` block. Every user-supplied string is escaped
    (:func:`md_name`, :func:`markdown_text`).
    """
    out = [f"## {title}", "", f"> {CAUTION}", "", run_line(outcome, environment), ""]
    strict = " (strict mode)" if outcome.strict else ""
    with_ledger = outcome.ledger_path is not None
    if outcome.ledger_path is not None:
        name = md_name(outcome.ledger_path.name)
        if not outcome.ledger_exists and not outcome.recorded:
            out += [f"No ledger {name} yet{strict}: every case is new.", ""]
        else:
            verb = "Recorded into" if outcome.recorded else "Compared with"
            out += [f"{verb} ledger {name}{strict}: {counts_text(outcome.counts)}.", ""]
    failing = [r for r in worst_first(rows) if r.fails]
    if failing:
        out += ["**Failing the gate:**", ""]
        out += [f"- {md_name(r.case.codec)} on {md_name(r.case.source)}, n={r.case.n:,}, "
                f"seed={r.case.seed}: {delta_text(r)}" for r in failing]
        out.append("")
    if rows:
        unchanged = [r for r in rows if r.status == "unchanged"] if fold_unchanged else []
        shown = [r for r in rows if r not in unchanged] if unchanged else list(rows)
        if shown:
            out.append(markdown_tables(shown, with_ledger=with_ledger, outcome=outcome))
        if unchanged:
            count = len(unchanged)
            out += ["<details>",
                    f"<summary>{count} unchanged case{'s' if count != 1 else ''} "
                    "(the same bits as the ledger)</summary>", "",
                    markdown_tables(unchanged, with_ledger=with_ledger, outcome=outcome),
                    "</details>", ""]
        out += ["Floors:", "", *floor_legend(rows), ""]
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
        out += [f"- {markdown_text(label)}: {markdown_text(first_line(why))}"
                for label, why in outcome.not_recorded]
        out.append("")
    if outcome.stale:
        out += ["Stale ledger entries (not measured by this full run):", ""]
        out += [f"- {md_name(e.codec)} on {md_name(e.source)}, n={e.n:,}, seed={e.seed}"
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


def row_json(r: Comparison, outcome: RunOutcome | None = None) -> dict[str, Any]:
    """One case of the JSON report (with its ledger comparison when there is one).

    ``test_ids`` are the tests that measured the case and ``test`` how they ended
    (``passed``, ``failed``, ``null`` when not known); ``allowed_rate`` is the rate
    the tolerance allowed (``null`` without one)."""
    m = r.case
    label = r.key.label
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
        "allowed_rate": finite(allowed_rate(m)),
        "distortion": finite(m.distortion), "distortion_measure": m.distortion_measure,
        "snr_db": finite(m.snr_db),
        "test_ids": list(outcome.test_ids.get(label, ())) if outcome is not None else [],
        "test": outcome.test_outcome(label) if outcome is not None else None,
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
        "timestamp": outcome.started, "commit": outcome.commit,
        "cases": [row_json(r, outcome) for r in worst_first(rows)],
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
