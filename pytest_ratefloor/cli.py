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
import lzma
import math
import sys
import zlib
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

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
    tally = ", ".join(f"{counts[s]} {s}" for s in VERDICTS)
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


#: Bytes read at a time by ``ratefloor entropy`` (a multiple of every word size).
CHUNK_BYTES = 8 << 20


def _merge_counts(acc: tuple[Any, Any] | None, keys: Any, counts: Any) -> tuple[Any, Any]:
    """Sorted distinct ``keys`` with summed ``counts``: ``acc`` merged with one chunk's."""
    import numpy as np

    if acc is not None:
        keys, counts = np.concatenate([acc[0], keys]), np.concatenate([acc[1], counts])
    merged, inverse = np.unique(keys, return_inverse=True)
    total = np.zeros(merged.size, dtype=np.int64)
    np.add.at(total, inverse.ravel(), counts)
    return merged, total


def _neg_log2_terms(c: Any, t: Any) -> Any:
    """``-log2(c/t)`` per gram, computed as the empirical sources compute it."""
    import numpy as np

    from pytest_ratefloor.sources.base import _LN2

    c, t = c.astype(np.float64), t.astype(np.float64)
    near_one = 2 * c > t
    return np.where(near_one, -np.log1p(np.where(near_one, (c - t) / t, 0.0)) / _LN2,
                    np.log2(t) - np.log2(c))


def _plug_in(gram_counts: Any, ctx_of_gram: Any, n: int) -> float:
    """Conditional plug-in entropy from (k+1)-gram counts and each gram's context label."""
    import numpy as np

    _, ctx = np.unique(ctx_of_gram, return_inverse=True)
    ctx = ctx.ravel()
    ctx_counts = np.bincount(ctx, weights=gram_counts).astype(np.int64)
    terms = gram_counts * _neg_log2_terms(gram_counts, ctx_counts[ctx])
    return math.fsum(terms.tolist()) / n


class _GramCounter:
    """Counts of the (k+1)-grams of a symbol stream fed in chunks, read as a ring.

    The last k symbols of each chunk are carried into the next; the first k
    symbols are kept for the wrap-around grams. Grams are packed into one
    int64 (symbol minus the layout's lowest value, base the layout's span) when
    they fit, else counted as rows.
    """

    def __init__(self, k: int, lo: int, hi: int) -> None:
        import numpy as np

        self.k, self.lo, self.base = k, lo, hi - lo + 1
        self.packed = self.base ** (k + 1) < 1 << 62
        self.dense = self.packed and self.base ** (k + 1) <= 1 << 24
        self.tail = np.zeros(0, dtype=np.int64)
        self.head = np.zeros(0, dtype=np.int64)
        self.table: Any = np.zeros(self.base ** (k + 1) if self.dense else 0, dtype=np.int64)
        self.acc: tuple[Any, Any] | None = None

    def _count(self, stream: Any) -> None:
        import numpy as np

        width = self.k + 1
        if stream.size < width:
            return
        if self.packed:
            m = stream.size - self.k
            code = np.zeros(m, dtype=np.int64)
            for j in range(width):
                code *= self.base
                code += stream[j: j + m] - self.lo
            if self.dense:
                self.table += np.bincount(code, minlength=self.table.size)
                return
            keys, counts = np.unique(code, return_counts=True)
        else:
            rows = np.ascontiguousarray(np.lib.stride_tricks.sliding_window_view(stream, width))
            keys, counts = np.unique(rows.view(np.dtype((np.void, 8 * width))).ravel(),
                                     return_counts=True)
        self.acc = _merge_counts(self.acc, keys, counts.astype(np.int64))

    def feed(self, symbols: Any) -> None:
        import numpy as np

        if self.head.size < self.k:
            self.head = np.concatenate([self.head, symbols[: self.k - self.head.size]])
        stream = np.concatenate([self.tail, symbols])
        self._count(stream)
        self.tail = stream[stream.size - self.k:] if self.k else stream[:0]

    def finish(self) -> tuple[Any, Any, int]:
        """(gram counts, context label per gram, distinct linear k-grams)."""
        import numpy as np

        k = self.k
        self._count(np.concatenate([self.tail, self.head]))  # the k grams across the wrap
        if self.dense:
            keys = np.flatnonzero(self.table)
            counts = self.table[keys]
        else:
            assert self.acc is not None
            keys, counts = self.acc
        ctx: Any
        if self.packed:
            ctx = keys // self.base
        else:
            rows = keys.view(np.int64).reshape(-1, k + 1)
            ctx = np.ascontiguousarray(rows[:, :k]).view(np.dtype((np.void, 8 * k))).ravel()
        # k-grams of the linear data: those of the ring less the k-1 that cross the wrap
        labels, inverse = np.unique(ctx, return_inverse=True)
        ring = np.bincount(inverse.ravel(), weights=counts, minlength=labels.size)
        wrap = np.concatenate([self.tail[1:], self.head[: k - 1]])
        if k > 1:
            win = np.ascontiguousarray(np.lib.stride_tricks.sliding_window_view(wrap, k))
            if self.packed:
                code: Any = np.zeros(win.shape[0], dtype=np.int64)
                for j in range(k):
                    code = code * self.base + (win[:, j] - self.lo)
                wrap_labels: Any = code
            else:
                wrap_labels = win.view(np.dtype((np.void, 8 * k))).ravel()
            for label in wrap_labels:
                ring[np.searchsorted(labels, label)] -= 1
        return counts, ctx, int(np.count_nonzero(ring))


def _entropy_files(path: Path) -> list[Path]:
    """``path`` itself, or the regular files of a folder, sorted."""
    if path.is_dir():
        files = sorted(p for p in path.iterdir() if p.is_file())
        if not files:
            raise CommandLineError(f"{path}: folder holds no file")
        return files
    if not path.is_file():
        raise CommandLineError(f"{path}: no such file")
    return [path]


def entropy_figures(path: Path, symbol: str, order: int,
                    chunk_bytes: int = CHUNK_BYTES) -> EntropyFigures:
    """Read ``path`` once in chunks of ``chunk_bytes`` and compute its figures.

    The estimates equal those of ``sources.from_file`` (plug-in entropies of the
    data read as a ring); memory stays bounded by the chunk size and the number
    of distinct grams.
    """
    if not path.is_file():
        raise CommandLineError(f"{path}: no such file")
    layout = LAYOUTS[symbol]
    width = layout.bytes_per_symbol
    size = path.stat().st_size
    if width > 1 and size % int(width):
        raise CommandLineError(f"{path}: {size} bytes is not a whole number of {symbol} symbols")
    if chunk_bytes <= 0 or chunk_bytes % 8:
        raise ValueError(f"chunk_bytes must be a positive multiple of 8, got {chunk_bytes}")

    import numpy as np

    from pytest_ratefloor import layouts

    zero = _GramCounter(0, layout.lo, layout.hi)
    higher = _GramCounter(order, layout.lo, layout.hi) if order > 0 else None
    deflate, xz = zlib.compressobj(9), lzma.LZMACompressor(preset=9)
    zlib_bytes = lzma_bytes = n = 0
    with open(path, "rb") as handle:
        while chunk := handle.read(chunk_bytes):
            symbols = layouts.unpack(chunk, None, symbol)
            n += int(symbols.size)
            zero.feed(symbols)
            if higher is not None:
                higher.feed(symbols)
            zlib_bytes += len(deflate.compress(chunk))
            lzma_bytes += len(xz.compress(chunk))
    zlib_bytes += len(deflate.flush())
    lzma_bytes += len(xz.flush())
    if n == 0:
        raise CommandLineError(
            f"from_file: {path} is empty; an entropy estimate needs at least one symbol")
    if order >= n:
        raise CommandLineError(
            f"from_file: order must be less than the data length {n}, got {order}")
    counts0, _, _ = zero.finish()
    h0 = _plug_in(counts0, np.zeros(counts0.size, dtype=np.int64), n)
    hk = contexts = None
    if higher is not None:
        counts, ctx, contexts = higher.finish()
        hk = _plug_in(counts, ctx, n)
    return EntropyFigures(
        path=path, size=size, symbol=symbol, symbols=n, distinct=int(counts0.size),
        order=order, h0=h0, hk=hk, contexts=contexts, zlib_bytes=zlib_bytes,
        lzma_bytes=lzma_bytes,
    )


def entropy_json(f: EntropyFigures) -> dict[str, Any]:
    """One file's figures as plain data (``null`` for a figure not computed)."""
    return {
        "path": str(f.path), "bytes": f.size, "symbol": f.symbol, "symbols": f.symbols,
        "distinct": f.distinct, "order": f.order, "h0": finite(f.h0),
        "floor0_bytes": EntropyFigures.floor_bytes(f.h0, f.symbols),
        "hk": finite(f.hk), "contexts": f.contexts,
        "floork_bytes": None if f.hk is None else EntropyFigures.floor_bytes(f.hk, f.symbols),
        "zlib_bytes": f.zlib_bytes, "lzma_bytes": f.lzma_bytes,
    }


def render_entropy_all(figures: Sequence[EntropyFigures], fmt: str) -> str:
    """Every file's figures as text blocks, one Markdown table or JSON, with the note."""
    if fmt == "json":
        doc = {"kind": "pytest-ratefloor entropy", "schema": 1, "note": ENTROPY_NOTE,
               "files": [entropy_json(f) for f in figures]}
        return json.dumps(json_safe(doc), indent=2, sort_keys=True, allow_nan=False) + "\n"
    if fmt == "md":
        out = ["| file | bytes | layout | symbols | distinct | order-0 (bit/sym) | order | "
               "order-k (bit/sym) | zlib -9 bytes | lzma -9 bytes |",
               "| --- | ---: | --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: |"]
        for f in figures:
            hk = "–" if f.hk is None else f"{f.hk:.4f}"
            out.append(f"| {md_name(str(f.path))} | {f.size:,} | {f.symbol} | {f.symbols:,} | "
                       f"{f.distinct:,} | {f.h0:.4f} | {f.order} | {hk} | {f.zlib_bytes:,} | "
                       f"{f.lzma_bytes:,} |")
        return "\n".join([*out, "", f"> {markdown_text(ENTROPY_NOTE)}"]) + "\n"
    return "\n".join(render_entropy(f) for f in figures) + "\n" + ENTROPY_NOTE + "\n"


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
        sys.stdout.write(show(_load(args.ledger), args.format))
        return 0
    if args.command == "diff":
        try:
            slack = validation.slack(args.slack, "--slack")
        except ValueError as exc:
            raise CommandLineError(str(exc)) from None
        old, new = _load(args.old), _load(args.new)
        lines = diff(old, new, slack)
        sys.stdout.write(render_diff(old, new, lines, args.format, args.allow_dropped,
                                     args.changed_only))
        status, _ = diff_outcome(lines, args.allow_dropped)
        return status
    if args.command == "prune":
        sys.stdout.write(prune(args.ledger, args.report, args.dry_run))
        return 0
    if args.command == "entropy":
        if args.order < 0:
            raise CommandLineError(f"--order: must be >= 0, got {args.order}")
        figures = [entropy_figures(p, args.symbol, args.order)
                   for f in args.files for p in _entropy_files(Path(f))]
        sys.stdout.write(render_entropy_all(figures, args.format))
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
