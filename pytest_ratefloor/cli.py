"""The ``ratefloor`` console script: show a ledger, diff two ledgers, prune stale entries,
estimate a file's entropy.

::

    ratefloor show LEDGER [--format text|md|json]
    ratefloor diff OLD NEW [--slack REL] [--format text|md|json] [--allow-dropped]
                   [--changed-only]
    ratefloor prune LEDGER --report REPORT.json [--dry-run]
    ratefloor entropy FILE|FOLDER... [--symbol LAYOUT] [--order K] [--format text|md|json]
    ratefloor history [REV ...] [--ledger PATH] [--format text|md|json] [--repo DIR] [--plot PATH]

``history`` shows the ledger as committed at each tag (or each REV) through git,
one table per codec (:mod:`pytest_ratefloor.history`).

``show`` lists each case with its layout (how the codec turned symbols into
bytes or bits, when the ledger knows it).

``prune`` removes, on purpose, the ledger entries a full pytest run found stale
(no test measured them). REPORT.json is that run's JSON report
(``pytest --ratefloor-report REPORT.json``, run against LEDGER): its
``ledger.stale`` list names the entries. The report is read as strictly as a
ledger (bounded, strict JSON, its kind and schema, each stale entry checked
field by field; fields prune does not use are ignored) and is refused when the
run was partial (``ledger.full_run`` false or ``ledger.partial_reasons``
non-empty: ``-k``, ``-m``, deselection, named test ids, ``-x``, an interrupted
run, a lost xdist worker), since such a run cannot tell what is stale. An entry
is removed only while the ledger still holds it exactly as the report quotes
it; one recorded again since (other figures) is kept, and one already gone is
noted. Each removed case is printed (``removed: <case>``); ``--dry-run`` prints
what would go (``would remove: <case>``) and writes nothing. The write takes
the ledger's lock, re-reads the file as it is now and replaces it atomically
(:mod:`pytest_ratefloor.recording`); every other entry and the
``recorded_with`` block are written back unchanged. A test that failed before
it measured its case leaves that case stale too: prune from the report of a
run whose tests passed.

Exit status:

- 0: success. For ``diff``: no case regressed (needs more bits than in OLD,
  beyond ``--slack``), none was resampled (measured on another sample, so not
  comparable) and none was dropped (in OLD, not in NEW); ``--allow-dropped``
  accepts dropped cases, which are still listed. For ``prune``: done, also when
  nothing was stale.
- 1: ``diff`` only: a case regressed, was resampled, or was dropped without
  ``--allow-dropped``. The last line of the output says which, so the command
  can gate a release job.
- 2: any error, reported as exactly one line on stderr: a ledger that is
  missing, a directory or another non-regular file, corrupt, or rejected by
  :meth:`~pytest_ratefloor.ledger.Ledger.load` for any reason (the line names
  the file), an unreadable data file, a bad argument; for ``prune`` also a
  report that is unreadable, not a JSON report, of a newer schema, of a partial
  run or inconsistent, and a ledger lock not obtained in time.

Codec names, source specs, layouts, case labels and paths are shown through
:func:`~pytest_ratefloor.escaping.terminal_text` (text) and
:func:`~pytest_ratefloor.escaping.markdown_text` (Markdown); the JSON listing
keeps them raw and never holds NaN or Infinity.
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Sequence
from pathlib import Path

from pytest_ratefloor import file_entropy, pruning, validation
from pytest_ratefloor.errors import CommandLineError
from pytest_ratefloor.escaping import json_safe, markdown_text, md_name, terminal_text
from pytest_ratefloor.layouts import LAYOUTS
from pytest_ratefloor.ledger import (
    DEFAULT_LEDGER_NAME,
    Ledger,
    entry_json,
    load_named,
)
from pytest_ratefloor.report import (
    CAUTION,
    align,
    check_plot_path,
    figure_text,
    finite,
    floor_cell,
    layout_cell,
    markdown_tables,
    percent_text,
    signed_pct,
)
from pytest_ratefloor.verdicts import VERDICTS, Comparison, compare, counts_of, listed

#: Layout of ``ratefloor show --format json``.
SHOW_SCHEMA_VERSION = 1


# -- show ------------------------------------------------------------------------------


def _show_text(ledger: Ledger, rows: Sequence[Comparison]) -> str:
    """The ledger as one aligned plain table, every user string through ``terminal_text``."""
    head = [f"ratefloor show: {terminal_text(str(ledger.path))}", CAUTION]
    env = ledger.environment
    if env is not None:
        head.append(
            f"recorded with pytest-ratefloor {terminal_text(env.plugin)}, numpy "
            f"{terminal_text(env.numpy)}, Python {terminal_text(env.python)} on "
            f"{terminal_text(env.platform)}"
        )
    if not rows:
        return "\n".join([*head, "The ledger holds no case."]) + "\n"
    header = ["codec", "source", "n", "seed", "layout", "entropy (bit/sym)", "floor (bit/sym)",
              "rate (bit/sym)", "efficiency"]
    table = [header]
    for r in rows:
        m = r.case
        table.append([terminal_text(m.codec), terminal_text(m.source), str(m.n), str(m.seed),
                      layout_cell(m, terminal_text), figure_text(m.entropy),
                      floor_cell(m, terminal_text), figure_text(m.rate),
                      percent_text(m.efficiency)])
    return "\n".join([*head, *align(table, {2, 3, 5, 6, 7, 8})]) + "\n"


def show(ledger: Ledger, fmt: str) -> str:
    """The ledger as an aligned plain table (``text``), release-notes Markdown (``md``)
    or versioned JSON (``json``).

    The JSON keeps strings raw (``json.dumps`` escapes them) and writes ``null``
    for a figure that is not finite.
    """
    rows = [listed(ledger.entries[k]) for k in sorted(ledger.entries)]
    if fmt == "text":
        return _show_text(ledger, rows)
    if fmt == "json":
        env = ledger.environment
        doc = {
            "kind": "pytest-ratefloor ledger listing", "schema": SHOW_SCHEMA_VERSION,
            "ledger": str(ledger.path), "caution": CAUTION,
            "recorded_with": None if env is None else env.to_json(),
            "cases": [
                {**entry_json(r.case), "layout": r.case.layout,
                 "efficiency": finite(r.case.efficiency)} for r in rows
            ],
        }
        return json.dumps(json_safe(doc), indent=2, sort_keys=True, allow_nan=False) + "\n"
    head = [f"## Rate ledger {md_name(ledger.path.name)}", "", f"> {CAUTION}", ""]
    if ledger.environment is not None:
        env = ledger.environment
        head += [f"Recorded with pytest-ratefloor {markdown_text(env.plugin)}, "
                 f"numpy {markdown_text(env.numpy)}, Python {markdown_text(env.python)} "
                 f"on {markdown_text(env.platform)}.", ""]
    if not rows:
        return "\n".join([*head, "The ledger holds no case."]) + "\n"
    body = markdown_tables(rows, with_ledger=False)
    return "\n".join(head) + "\n" + body.rstrip("\n") + "\n"


# -- diff ------------------------------------------------------------------------------


def diff(old: Ledger, new: Ledger, slack: float = 0.0) -> list[Comparison]:
    """Per case: regressed / within-slack / improved / unchanged / resampled / new / dropped."""
    return [compare(new.entries.get(key), old.entries.get(key), slack)
            for key in sorted(set(old.entries) | set(new.entries))]


def _bits(value: int | None) -> str:
    return "–" if value is None else f"{value:,}"


def _delta(line: Comparison) -> tuple[str, str]:
    if line.delta_bits is None or line.delta_pct is None:
        return "–", "–"
    return f"{line.delta_bits:+,}", signed_pct(line.delta_pct)


def diff_outcome(lines: Sequence[Comparison], allow_dropped: bool = False) -> tuple[int, str]:
    """The exit status of ``ratefloor diff`` and the line that says why.

    1 when a case has a verdict the gate fails on (regressed, resampled: see
    :data:`~pytest_ratefloor.verdicts.VERDICTS`) or was dropped (unless
    ``allow_dropped``); else 0.
    """
    counts = counts_of(lines)
    failing = [f"{counts[name]} {name}" for name, kind in VERDICTS.items()
               if kind.fails and counts[name]]
    dropped = counts["dropped"]
    if dropped and not allow_dropped:
        failing.append(f"{dropped} dropped (--allow-dropped accepts dropped cases)")
    if failing:
        return 1, "FAILED: " + ", ".join(failing)
    accepted = f"; {dropped} dropped, accepted by --allow-dropped" if dropped else ""
    what = "regressed or was resampled" if allow_dropped else "regressed, was resampled or dropped"
    return 0, f"OK: no case {what}{accepted}"


#: Layout of ``ratefloor diff --format json``.
DIFF_SCHEMA_VERSION = 1


def _diff_json(old: Ledger, new: Ledger, lines: Sequence[Comparison], shown: list[Comparison],
               allow_dropped: bool) -> str:
    """The diff as plain data: every shown case, the verdict counts, the exit status."""
    status, result = diff_outcome(lines, allow_dropped)
    cases = []
    for line in shown:
        codec, source, n, seed = line.key
        cases.append({
            "codec": codec, "source": source, "n": n, "seed": seed,
            "old_bits": line.ledger_bits,
            "new_bits": None if line.current is None else line.current.bits,
            "delta_bits": line.delta_bits, "delta_pct": finite(line.delta_pct),
            "verdict": line.status,
        })
    doc = {
        "kind": "pytest-ratefloor ledger diff", "schema": DIFF_SCHEMA_VERSION,
        "old": str(old.path), "new": str(new.path), "counts": counts_of(lines),
        "cases": cases, "allow_dropped": allow_dropped, "exit_status": status,
        "result": result,
    }
    return json.dumps(json_safe(doc), indent=2, sort_keys=True, allow_nan=False) + "\n"


def render_diff(old: Ledger, new: Ledger, lines: Sequence[Comparison], fmt: str,
                allow_dropped: bool = False, changed_only: bool = False) -> str:
    """A table of every case, the count of each verdict (no average to hide behind), the result.

    ``fmt`` is ``text``, ``md`` or ``json``. With ``changed_only`` the table
    leaves out the unchanged cases; the tally still counts them. For ``text``
    and ``md`` the last line is the result of :func:`diff_outcome`: ``OK: ...``
    or ``FAILED: ...``; the JSON holds it with the exit status it implies.
    """
    shown = [line for line in lines if not (changed_only and line.status == "unchanged")]
    if fmt == "json":
        return _diff_json(old, new, lines, shown, allow_dropped)
    counts = counts_of(lines)
    # every verdict, zero or not; "traded" (lossy cases only) when it occurs
    tally = ", ".join(f"{counts[s]} {s}" for s in VERDICTS if counts[s] or s != "traded")
    _, result = diff_outcome(lines, allow_dropped)
    header = ["codec", "source", "n", "seed", "old bits", "new bits", "Δ bits", "Δ %", "verdict"]
    rows = []
    for line in shown:
        codec, source, n, seed = line.key
        new_bits = None if line.current is None else line.current.bits
        rows.append([codec, source, str(n), str(seed), _bits(line.ledger_bits),
                     _bits(new_bits), *_delta(line), str(line.status)])
    if fmt == "md":
        out = [f"## Rate ledger changes: {md_name(old.path.name)} → {md_name(new.path.name)}",
               "", f"**{tally}**", ""]
        if rows:
            out += ["| " + " | ".join(header) + " |",
                    "| " + " | ".join(["---", "---", "---:", "---:", "---:", "---:", "---:",
                                       "---:", "---"]) + " |"]
            # codec and source are the user's text; the other cells are figures and verdicts
            out += ["| " + " | ".join([md_name(r[0]), md_name(r[1]), *r[2:]]) + " |"
                    for r in rows]
            out.append("")
        out.append(f"**{result}**")
        return "\n".join(out) + "\n"
    table = [header, *([terminal_text(c) for c in r] for r in rows)]
    text = [f"ratefloor diff: {terminal_text(str(old.path))} -> {terminal_text(str(new.path))}",
            *align(table, {2, 3, 4, 5, 6, 7}), f"cases: {tally}", result]
    return "\n".join(text) + "\n"


# -- command line ----------------------------------------------------------------------


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="ratefloor",
        description="Inspect and prune pytest-ratefloor ledgers and estimate the entropy of "
                    "data files.",
    )
    from pytest_ratefloor import __version__

    parser.add_argument("--version", action="version", version=f"ratefloor {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    p_show = sub.add_parser("show", help="print a ledger as a release-notes table")
    p_show.add_argument("ledger", metavar="LEDGER", help="the ledger file to list")
    p_show.add_argument("--format", choices=("text", "md", "json"), default="md",
                        help="text: an aligned plain table; md: release-notes Markdown "
                             "(default); json: versioned plain data")
    p_diff = sub.add_parser(
        "diff", help="compare two ledgers case by case (exit 1: regressed, resampled or dropped)"
    )
    p_diff.add_argument("old", metavar="OLD", help="the ledger to compare against (baseline)")
    p_diff.add_argument("new", metavar="NEW", help="the ledger compared with OLD")
    p_diff.add_argument("--slack", default="0", metavar="REL",
                        help="relative increase in bits not counted as a regression (default 0)")
    p_diff.add_argument("--format", choices=("text", "md", "json"), default="text",
                        help="text: an aligned table (default); md: Markdown; json: plain "
                             "data with the verdict counts and the exit status")
    p_diff.add_argument("--changed-only", action="store_true",
                        help="leave unchanged cases out of the table (the tally still "
                             "counts them)")
    p_diff.add_argument("--allow-dropped", action="store_true",
                        help="cases in OLD but not in NEW do not fail the diff "
                             "(they are still listed)")
    p_prune = sub.add_parser(
        "prune", help="remove the ledger entries a full run's JSON report lists as stale"
    )
    p_prune.add_argument("ledger", metavar="LEDGER", help="the ledger file to prune")
    p_prune.add_argument("--report", required=True, metavar="REPORT.json",
                         help="the JSON report of a full pytest run against LEDGER "
                              "(pytest --ratefloor-report REPORT.json)")
    p_prune.add_argument("--dry-run", action="store_true",
                         help="print what would be removed; write nothing")
    p_ent = sub.add_parser("entropy", help="empirical entropy of files, with zlib/lzma sizes")
    p_ent.add_argument("files", nargs="+", metavar="FILE",
                       help="data files, or folders (each file in them, sorted)")
    p_ent.add_argument("--symbol", choices=tuple(LAYOUTS), default="u8",
                       help="how the bytes form symbols (default u8)")
    p_ent.add_argument("--order", type=int, default=1, metavar="K",
                       help="context length of the conditional estimate (default 1; 0: none)")
    p_ent.add_argument("--format", choices=("text", "md", "json"), default="text",
                       help="text: one block per file (default); md: a Markdown table; "
                            "json: plain data")
    p_hist = sub.add_parser(
        "history", help="the committed ledger at each release (git tags or REVs), per codec"
    )
    p_hist.add_argument("revisions", nargs="*", metavar="REV",
                        help="revisions to compare, in this order (default: every tag, "
                             "oldest first by creation date)")
    p_hist.add_argument("--ledger", default=DEFAULT_LEDGER_NAME, metavar="PATH",
                        help="the ledger, relative to the repository root "
                             f"(default {DEFAULT_LEDGER_NAME})")
    p_hist.add_argument("--format", choices=("text", "md", "json"), default="text",
                        help="text: aligned tables (default); md: Markdown; json: plain data")
    p_hist.add_argument("--repo", default=".", metavar="DIR",
                        help="a directory inside the git repository (default: .)")
    p_hist.add_argument("--plot", default=None, metavar="PATH",
                        help="also plot each case's efficiency across releases (.png, .svg, "
                             ".pdf; needs the 'plot' extra)")
    return parser


def _run(args: argparse.Namespace) -> int:
    if args.command == "show":
        sys.stdout.write(show(load_named(args.ledger), args.format))
        return 0
    if args.command == "diff":
        try:
            slack = validation.slack(args.slack, "--slack")
        except ValueError as exc:
            raise CommandLineError(str(exc)) from None
        old, new = load_named(args.old), load_named(args.new)
        lines = diff(old, new, slack)
        sys.stdout.write(render_diff(old, new, lines, args.format, args.allow_dropped,
                                     args.changed_only))
        status, _ = diff_outcome(lines, args.allow_dropped)
        return status
    if args.command == "prune":
        sys.stdout.write(pruning.prune(args.ledger, args.report, args.dry_run))
        return 0
    if args.command == "entropy":
        if args.order < 0:
            raise CommandLineError(f"--order: must be >= 0, got {args.order}")
        figures = [file_entropy.entropy_figures(p, args.symbol, args.order)
                   for f in args.files for p in file_entropy.entropy_files(Path(f))]
        sys.stdout.write(file_entropy.render_entropy_all(figures, args.format))
        return 0
    if args.command == "history":
        from pytest_ratefloor import history

        plot_path = None if args.plot is None else Path(args.plot)
        if plot_path is not None:
            try:
                check_plot_path(plot_path)
            except (ValueError, RuntimeError) as exc:
                raise CommandLineError(f"--plot: {exc}") from None
        found = history.collect(Path(args.repo), args.revisions, args.ledger)
        sys.stdout.write(history.render(found, args.format))
        if plot_path is not None:
            from pytest_ratefloor.plotting import plot_history

            plot_history(plot_path, found)
            sys.stderr.write(f"written: {terminal_text(str(plot_path))}\n")
        return 0
    raise CommandLineError(f"unknown command {args.command!r}")  # pragma: no cover


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``ratefloor`` command; returns the exit status."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse already printed its one-line usage error
        code = exc.code if isinstance(exc.code, int) else 2
        return code
    try:
        return _run(args)
    except CommandLineError as exc:
        _error(str(exc))
        return 2
    except OSError as exc:
        _error(f"{exc.filename or ''}: {exc.strerror or exc}")
        return 2


def _error(message: str) -> None:
    """Print one line on stderr (control characters and newlines shown escaped)."""
    print(f"ratefloor: error: {terminal_text(message)}", file=sys.stderr)


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
