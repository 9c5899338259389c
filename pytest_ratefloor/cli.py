"""The ``ratefloor`` console script: show a ledger, diff two ledgers, prune stale entries,
estimate a file's entropy.

::

    ratefloor show LEDGER [--format md|json]
    ratefloor diff OLD NEW [--slack REL] [--format text|md] [--allow-dropped]
    ratefloor prune LEDGER --report REPORT.json [--dry-run]
    ratefloor entropy FILE... [--symbol LAYOUT] [--order K]
    ratefloor history [REV ...] [--ledger PATH] [--format text|md|json] [--repo DIR]

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
import lzma
import math
import sys
import zlib
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from pytest_ratefloor import validation
from pytest_ratefloor.errors import CommandLineError, LedgerError
from pytest_ratefloor.escaping import json_safe, markdown_text, md_name, terminal_text
from pytest_ratefloor.layouts import LAYOUTS
from pytest_ratefloor.ledger import (
    DEFAULT_LEDGER_NAME,
    Environment,
    Ledger,
    entry_json,
    read_case,
    read_json_strictly,
)
from pytest_ratefloor.measurement import CaseKey, Measurement
from pytest_ratefloor.recording import ledger_lock, write_atomic
from pytest_ratefloor.report import (
    CAUTION,
    REPORT_KIND,
    REPORT_SCHEMA_VERSION,
    align,
    finite,
    markdown_tables,
    signed_pct,
)
from pytest_ratefloor.verdicts import VERDICTS, Comparison, compare, counts_of, listed

#: Layout of ``ratefloor show --format json``.
SHOW_SCHEMA_VERSION = 1


def _unreadable(path: str, message: str) -> CommandLineError:
    """The one-line error for a ledger that cannot be used; it always names the file."""
    text = message.strip() or "cannot be read"
    if path not in text and str(Path(path)) not in text:
        text = f"{path}: {text}"
    return CommandLineError(text)


def _check_figures(ledger: Ledger, path: str) -> None:
    """Every figure a listing or a diff shows can be computed (no overflow on display)."""
    for key, case in ledger.entries.items():
        try:
            # float() of an int too large for a double raises; so do the derived figures
            figures = (float(case.bits), float(case.n), case.rate, case.floor_rate,
                       case.efficiency, case.excess)
            for value in figures:
                format(value, ".4f")
            for number in (case.bits, case.n, case.seed):
                format(number, ",")  # ValueError past Python's int-to-text digit limit
        except (OverflowError, ValueError) as exc:
            raise _unreadable(
                path, f"case {key.label!r} holds figures out of range ({exc})"
            ) from None


def _load(path: str) -> Ledger:
    """Read a ledger for a command; :class:`CommandLineError` (one line) when it is unusable.

    Anything :meth:`Ledger.load` rejects is an error here too, and so is a path
    that is missing, a directory or another non-regular file (a FIFO would block).
    """
    p = Path(path)
    if not p.exists():
        raise CommandLineError(f"{path}: no such file")
    if p.is_dir():
        raise CommandLineError(f"{path}: is a directory, not a ledger file")
    if not p.is_file():
        raise CommandLineError(f"{path}: not a regular file")
    try:
        ledger = Ledger.load(p)
    except LedgerError as exc:
        raise _unreadable(path, str(exc)) from None
    # a loader that fails in an unforeseen way must still give one line, not a traceback
    except (ValueError, OverflowError, RecursionError, MemoryError) as exc:
        raise _unreadable(path, f"not a readable ledger ({type(exc).__name__}: {exc})") from None
    if not ledger.exists:  # removed between the checks and the read
        raise CommandLineError(f"{path}: no such file")
    _check_figures(ledger, path)
    return ledger


# -- show ------------------------------------------------------------------------------


def show(ledger: Ledger, fmt: str) -> str:
    """The ledger as release-notes Markdown or as versioned JSON.

    The JSON keeps strings raw (``json.dumps`` escapes them) and writes ``null``
    for a figure that is not finite.
    """
    rows = [listed(ledger.entries[k]) for k in sorted(ledger.entries)]
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


def render_diff(old: Ledger, new: Ledger, lines: Sequence[Comparison], fmt: str,
                allow_dropped: bool = False) -> str:
    """A table of every case, the count of each verdict (no average to hide behind), the result.

    The last line is the result of :func:`diff_outcome`: ``OK: ...`` or ``FAILED: ...``.
    """
    counts = counts_of(lines)
    tally = ", ".join(f"{counts[s]} {s}" for s in VERDICTS)
    _, result = diff_outcome(lines, allow_dropped)
    header = ["codec", "source", "n", "seed", "old bits", "new bits", "Δ bits", "Δ %", "verdict"]
    rows = []
    for line in lines:
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


# -- prune -----------------------------------------------------------------------------


def _report_error(path: str, message: str) -> CommandLineError:
    return CommandLineError(f"{path}: {message}")


def _case_key(obj: object, where: str, path: str) -> CaseKey:
    """The key of one measured case of a report (only the four naming fields are checked)."""
    if not isinstance(obj, dict):
        raise _report_error(path, f"{where} is not a JSON object")
    codec, source, n, seed = (obj.get(name) for name in ("codec", "source", "n", "seed"))
    if isinstance(codec, str) and isinstance(source, str) and isinstance(n, int) \
            and isinstance(seed, int) and not isinstance(n, bool) and not isinstance(seed, bool):
        return CaseKey(codec, source, n, seed)
    raise _report_error(path, f"{where} lacks a well-formed codec, source, n or seed")


def read_stale_report(path: str) -> list[Measurement]:
    """The stale entries a full run's JSON report lists, read strictly.

    :raises CommandLineError: (one line naming the report) the file cannot be
        read as strict JSON, is not a pytest-ratefloor JSON report, has a newer or
        bad schema, has no ledger block, was written by a partial run, or lists a
        stale entry that is malformed, repeated or also among the measured cases.
    """
    try:
        doc = read_json_strictly(Path(path), "report")
    except LedgerError as exc:
        raise _unreadable(path, str(exc)) from None
    if not isinstance(doc, dict) or doc.get("kind") != REPORT_KIND:
        raise _report_error(path, f"not a pytest-ratefloor JSON report (no \"kind\": "
                                  f"{REPORT_KIND!r})")
    schema = doc.get("schema")
    if isinstance(schema, bool) or not isinstance(schema, int) or schema < 1:
        raise _report_error(path, f"bad report schema {schema!r}")
    if schema > REPORT_SCHEMA_VERSION:
        raise _report_error(path, f"report schema {schema} is newer than this pytest-ratefloor "
                                  f"understands (schema {REPORT_SCHEMA_VERSION}); upgrade it")
    block = doc.get("ledger")
    if not isinstance(block, dict):
        raise _report_error(path, "has no 'ledger' block: the run compared with no ledger")
    full, reasons = block.get("full_run"), block.get("partial_reasons")
    if not isinstance(full, bool) or not isinstance(reasons, list) \
            or not all(isinstance(r, str) for r in reasons):
        raise _report_error(path, "'ledger' lacks a well-formed 'full_run' (true or false) "
                                  "and 'partial_reasons' (a list of strings)")
    if not full or reasons:
        why = "; ".join(reasons) or "the report says it was not a full run"
        raise _report_error(path, f"comes from a partial run ({why}), which cannot tell which "
                                  "entries are stale; prune with the report of a full run")
    stale, cases = block.get("stale"), doc.get("cases")
    if not isinstance(stale, list) or not isinstance(cases, list):
        raise _report_error(path, "lacks the lists 'cases' and 'ledger.stale'")
    measured = {_case_key(obj, f"case {i}", path) for i, obj in enumerate(cases)}
    entries: dict[CaseKey, Measurement] = {}
    for i, obj in enumerate(stale):
        try:
            entry = read_case(obj, f"{path}: stale entry {i}")
        except LedgerError as exc:
            raise _unreadable(path, str(exc)) from None
        if entry.key in entries or entry.key in measured:
            what = "twice" if entry.key in entries else "as stale and as measured"
            raise _report_error(path, f"lists the case {entry.key.label!r} {what}; "
                                      "not a report this plugin wrote")
        entries[entry.key] = entry
    return list(entries.values())


@dataclass(frozen=True)
class Pruning:
    """What ``prune`` does to a ledger: the entries that go and what it leaves."""

    #: the ledger with the stale entries removed (its environment block kept)
    kept: Ledger
    #: entries removed (or, in a dry run, that would be)
    removed: tuple[Measurement, ...]
    #: stale in the report, but recorded again since with other figures: kept
    changed: tuple[Measurement, ...]
    #: stale in the report, but no longer in the ledger
    gone: tuple[Measurement, ...]


def plan_pruning(ledger: Ledger, stale: Sequence[Measurement]) -> Pruning:
    """Remove from ``ledger`` each stale entry it still holds exactly as the report quotes it."""
    entries = dict(ledger.entries)
    removed, changed, gone = [], [], []
    for quoted in sorted(stale, key=lambda m: m.key):
        held = entries.get(quoted.key)
        if held is None:
            gone.append(quoted)
        elif entry_json(held) == entry_json(quoted):
            removed.append(entries.pop(quoted.key))
        else:
            changed.append(quoted)
    kept = Ledger(path=ledger.path, entries=entries,
                  environment=ledger.environment or Environment.current(), exists=ledger.exists)
    return Pruning(kept, tuple(removed), tuple(changed), tuple(gone))


def render_pruning(ledger_path: str, report_path: str, plan: Pruning, dry_run: bool) -> str:
    """One line per stale entry (what happened to it), then the outcome."""
    where = terminal_text(ledger_path)
    lines = [f"ratefloor prune: {where}, stale entries of the full run in "
             f"{terminal_text(report_path)}"]
    verb = "would remove" if dry_run else "removed"
    lines += [f"{verb}: {terminal_text(m.key.label)}" for m in plan.removed]
    lines += [f"kept (recorded again since the report): {terminal_text(m.key.label)}"
              for m in plan.changed]
    lines += [f"not in the ledger: {terminal_text(m.key.label)}" for m in plan.gone]
    count = len(plan.removed)
    entries = f"{count} stale entr{'y' if count == 1 else 'ies'}"
    left = len(plan.kept.entries)
    if not count:
        lines.append(f"no stale entry to remove; {where} not written")
    elif dry_run:
        lines.append(f"dry run: {entries} would be removed, {left} kept; {where} not written")
    else:
        lines.append(f"removed {entries}; {left} kept in {where}")
    return "\n".join(lines) + "\n"


def prune(ledger_path: str, report_path: str, dry_run: bool = False) -> str:
    """Remove the stale entries of a full run's report from the ledger; the text to print.

    The report and the ledger are read first (errors before any lock). Then,
    unless ``dry_run``, under the ledger's lock: the ledger is read as it is
    now, pruned and, if anything goes, replaced atomically.

    :raises CommandLineError: unreadable input, a partial run's report, the lock not
        obtained (one line each).
    """
    stale = read_stale_report(report_path)
    plan = plan_pruning(_load(ledger_path), stale)
    if dry_run or not plan.removed:
        return render_pruning(ledger_path, report_path, plan, dry_run)
    try:
        with ledger_lock(Path(ledger_path)) as target:
            plan = plan_pruning(_load(ledger_path), stale)  # the file as it is now
            if plan.removed:
                write_atomic(target, plan.kept.dumps())
    except LedgerError as exc:  # the lock was not obtained in time
        raise CommandLineError(str(exc)) from None
    return render_pruning(ledger_path, report_path, plan, dry_run)


# -- entropy ---------------------------------------------------------------------------


@dataclass(frozen=True)
class EntropyFigures:
    """Order-0 and order-K empirical entropy of one file, with stdlib compressors for comparison."""

    path: Path
    size: int
    symbol: str
    symbols: int
    distinct: int
    order: int
    h0: float
    hk: float | None
    contexts: int | None
    zlib_bytes: int
    lzma_bytes: int

    @staticmethod
    def floor_bytes(h: float, n: int) -> int:
        return math.ceil(h * n / 8.0 - 1e-9)


def entropy_figures(path: Path, symbol: str, order: int) -> EntropyFigures:
    """Read ``path`` and compute its figures (``sources.from_file`` gives the estimates)."""
    if not path.is_file():
        raise CommandLineError(f"{path}: no such file")
    data = path.read_bytes()
    width = LAYOUTS[symbol].bytes_per_symbol
    if width > 1 and len(data) % int(width):
        raise CommandLineError(
            f"{path}: {len(data)} bytes is not a whole number of {symbol} symbols"
        )

    import numpy as np

    from pytest_ratefloor import sources
    try:
        zeroth = sources.from_file(path, symbol=symbol, order=0)
        higher = sources.from_file(path, symbol=symbol, order=order) if order > 0 else None
    except ValueError as exc:
        raise CommandLineError(str(exc)) from None
    symbols = np.asarray(zeroth.data)
    contexts = None
    if order > 0:
        windows = np.lib.stride_tricks.sliding_window_view(symbols, order)
        contexts = len(np.unique(windows, axis=0))
    return EntropyFigures(
        path=path, size=len(data), symbol=symbol, symbols=int(zeroth.n),
        distinct=int(zeroth.alphabet_size or 0), order=order, h0=float(zeroth.entropy),
        hk=None if higher is None else float(higher.entropy), contexts=contexts,
        zlib_bytes=len(zlib.compress(data, 9)),
        lzma_bytes=len(lzma.compress(data, preset=9)),
    )


def render_entropy(f: EntropyFigures) -> str:
    n = f.symbols

    def per_symbol(nbytes: int) -> str:
        return f"{8.0 * nbytes / n:.4f} bits/symbol" if n else "–"

    lines = [
        f"{terminal_text(str(f.path))}: {f.size:,} bytes = {n:,} symbols "
        f"(layout {f.symbol}), {f.distinct:,} distinct",
        f"  order-0 entropy (estimate):  {f.h0:.4f} bits/symbol -> floor "
        f"{EntropyFigures.floor_bytes(f.h0, n):,} bytes",
    ]
    if f.hk is not None:
        note = ""
        # a model with more free counts than a quarter of the data mostly memorises it
        if f.contexts is not None and f.contexts * max(f.distinct - 1, 1) * 4 > n:
            note = (f"  [{f.contexts:,} contexts x {f.distinct:,} symbols for {n:,} symbols "
                    "of data: the model memorises the file, so this estimate is optimistic]")
        lines.append(
            f"  order-{f.order} conditional entropy (estimate):  {f.hk:.4f} bits/symbol -> "
            f"floor {EntropyFigures.floor_bytes(f.hk, n):,} bytes{note}"
        )
    lines += [
        f"  zlib level 9:  {f.zlib_bytes:,} bytes ({per_symbol(f.zlib_bytes)})",
        f"  lzma preset 9: {f.lzma_bytes:,} bytes ({per_symbol(f.lzma_bytes)})",
    ]
    return "\n".join(lines)


ENTROPY_NOTE = (
    "Estimates are plug-in entropies of the file's own symbol counts: they describe this "
    "file, not where it came from. They omit the cost of describing the model, which a "
    "coder must learn or transmit; a coder using longer contexts can beat a lower order."
)


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
    p_show.add_argument("ledger", metavar="LEDGER")
    p_show.add_argument("--format", choices=("md", "json"), default="md")
    p_diff = sub.add_parser(
        "diff", help="compare two ledgers case by case (exit 1: regressed, resampled or dropped)"
    )
    p_diff.add_argument("old", metavar="OLD")
    p_diff.add_argument("new", metavar="NEW")
    p_diff.add_argument("--slack", default="0", metavar="REL",
                        help="relative increase in bits not counted as a regression (default 0)")
    p_diff.add_argument("--format", choices=("text", "md"), default="text")
    p_diff.add_argument("--allow-dropped", action="store_true",
                        help="cases in OLD but not in NEW do not fail the diff "
                             "(they are still listed)")
    p_prune = sub.add_parser(
        "prune", help="remove the ledger entries a full run's JSON report lists as stale"
    )
    p_prune.add_argument("ledger", metavar="LEDGER")
    p_prune.add_argument("--report", required=True, metavar="REPORT.json",
                         help="the JSON report of a full pytest run against LEDGER "
                              "(pytest --ratefloor-report REPORT.json)")
    p_prune.add_argument("--dry-run", action="store_true",
                         help="print what would be removed; write nothing")
    p_ent = sub.add_parser("entropy", help="empirical entropy of files, with zlib/lzma sizes")
    p_ent.add_argument("files", nargs="+", metavar="FILE")
    p_ent.add_argument("--symbol", choices=tuple(LAYOUTS), default="u8",
                       help="how the bytes form symbols (default u8)")
    p_ent.add_argument("--order", type=int, default=1, metavar="K",
                       help="context length of the conditional estimate (default 1; 0: none)")
    p_hist = sub.add_parser(
        "history", help="the committed ledger at each release (git tags or REVs), per codec"
    )
    p_hist.add_argument("revisions", nargs="*", metavar="REV",
                        help="revisions to compare, in this order (default: every tag, "
                             "oldest first by creation date)")
    p_hist.add_argument("--ledger", default=DEFAULT_LEDGER_NAME, metavar="PATH",
                        help="the ledger, relative to the repository root "
                             f"(default {DEFAULT_LEDGER_NAME})")
    p_hist.add_argument("--format", choices=("text", "md", "json"), default="text")
    p_hist.add_argument("--repo", default=".", metavar="DIR",
                        help="a directory inside the git repository (default: .)")
    return parser


def _run(args: argparse.Namespace) -> int:
    if args.command == "show":
        sys.stdout.write(show(_load(args.ledger), args.format))
        return 0
    if args.command == "diff":
        try:
            slack = validation.slack(args.slack, "--slack")
        except ValueError as exc:
            raise CommandLineError(str(exc)) from None
        old, new = _load(args.old), _load(args.new)
        lines = diff(old, new, slack)
        sys.stdout.write(render_diff(old, new, lines, args.format, args.allow_dropped))
        status, _ = diff_outcome(lines, args.allow_dropped)
        return status
    if args.command == "prune":
        sys.stdout.write(prune(args.ledger, args.report, args.dry_run))
        return 0
    if args.command == "entropy":
        if args.order < 0:
            raise CommandLineError(f"--order: must be >= 0, got {args.order}")
        figures = [entropy_figures(Path(f), args.symbol, args.order) for f in args.files]
        sys.stdout.write("\n".join(render_entropy(f) for f in figures) + "\n")
        sys.stdout.write(ENTROPY_NOTE + "\n")
        return 0
    if args.command == "history":
        from pytest_ratefloor import history

        found = history.collect(Path(args.repo), args.revisions, args.ledger)
        sys.stdout.write(history.render(found, args.format))
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
