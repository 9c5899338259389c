"""``ratefloor prune``: remove, on purpose, the ledger entries a full run found stale.

The run's JSON report (``pytest --ratefloor-report REPORT.json``) lists them in
``ledger.stale``. The report is read as strictly as a ledger and refused when
the run was partial, since such a run cannot tell what is stale. An entry is
removed only while the ledger still holds it exactly as the report quotes it;
the write takes the ledger's lock, re-reads the file and replaces it atomically
(:mod:`pytest_ratefloor.recording`). See :mod:`pytest_ratefloor.cli` for the
command's exit status.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from pytest_ratefloor.errors import CommandLineError, LedgerError
from pytest_ratefloor.escaping import terminal_text
from pytest_ratefloor.ledger import (
    Environment,
    Ledger,
    entry_json,
    load_named,
    read_case,
    read_json_strictly,
    unreadable,
)
from pytest_ratefloor.measurement import CaseKey, Measurement
from pytest_ratefloor.recording import ledger_lock, write_atomic
from pytest_ratefloor.report import REPORT_KIND, REPORT_SCHEMA_VERSION

__all__ = ["Pruning", "plan_pruning", "prune", "read_stale_report", "render_pruning"]

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
        raise unreadable(path, str(exc)) from None
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
            raise unreadable(path, str(exc)) from None
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
    plan = plan_pruning(load_named(ledger_path), stale)
    if dry_run or not plan.removed:
        return render_pruning(ledger_path, report_path, plan, dry_run)
    try:
        with ledger_lock(Path(ledger_path)) as target:
            plan = plan_pruning(load_named(ledger_path), stale)  # the file as it is now
            if plan.removed:
                write_atomic(target, plan.kept.dumps())
    except LedgerError as exc:  # the lock was not obtained in time
        raise CommandLineError(str(exc)) from None
    return render_pruning(ledger_path, report_path, plan, dry_run)
