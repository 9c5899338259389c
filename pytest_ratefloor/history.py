"""``ratefloor history``: the committed ledger release by release, read through git.

::

    ratefloor history [REV ...] [--ledger PATH] [--format text|md|json] [--repo DIR]

Without REV the releases are the repository's tags, oldest first by creation
date (``git for-each-ref --sort=creatordate``: the tagging date of an annotated
tag, the commit date of a lightweight one), tags created in the same second in
version order. Given REVs are shown in the order given.

At each release the ledger (``--ledger``, relative to the repository root,
default ``ratefloor-ledger.json``) is read as committed there with
``git cat-file``, never from the working tree, bounded to
:data:`~pytest_ratefloor.ledger.MAX_LEDGER_BYTES`, and parsed strictly by
:meth:`~pytest_ratefloor.ledger.Ledger.parse`. A release without the ledger is
a note in the output; a ledger that does not parse is an error naming the
release.

One table per codec: cases (source, n, seed) down, releases across. A cell holds
the case's efficiency (floor rate / rate) and its bits, and the change in bits
from the previous release holding the ledger, as decided by
:func:`~pytest_ratefloor.verdicts.compare`: a percentage, ``!`` after a
regression (more bits), ``~`` for a case measured on another sample (not
comparable), ``new`` for a case the previous release lacked, ``=`` for the same
bits. A case missing from a release shows ``–``.

Errors (one line on stderr, exit status 2, as the other commands): ``git`` not
found, ``--repo`` not inside a git repository, a revision that names no commit,
no tags when no revision is given, an absolute or escaping ``--ledger`` path, a
ledger that git cannot give within the bounds or that does not parse.

git runs without a shell, with a time-out, with its output read up to a bound.
This module knows nothing of pytest and imports no numpy at module level.
"""

from __future__ import annotations

import json
import os
import subprocess
import tempfile
import threading
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path, PurePosixPath
from typing import Any

from pytest_ratefloor.errors import CommandLineError, LedgerError
from pytest_ratefloor.escaping import json_safe, markdown_text, md_name, terminal_text
from pytest_ratefloor.ledger import DEFAULT_LEDGER_NAME, MAX_LEDGER_BYTES, Ledger
from pytest_ratefloor.measurement import Measurement
from pytest_ratefloor.report import align, finite, signed_pct
from pytest_ratefloor.verdicts import Comparison, compare

__all__ = [
    "HISTORY_SCHEMA_VERSION",
    "History",
    "Release",
    "collect",
    "render",
]

#: Layout of ``ratefloor history --format json``.
HISTORY_SCHEMA_VERSION = 1
#: Longest any git command may run (seconds).
GIT_TIMEOUT = 60.0
#: Most bytes read from a git command other than the ledger blob itself.
GIT_OUTPUT_LIMIT = 4 * 1024 * 1024
#: Most bytes of git's error output kept for a message.
_STDERR_KEPT = 4096

#: The markers of a cell, and what they mean (the legend of every format).
REGRESSED_MARK = "!"
RESAMPLED_MARK = "~"
LEGEND = (
    "Each cell: efficiency (floor rate / rate), bits, and the change in bits from the "
    "previous release holding the ledger. "
    f"'{REGRESSED_MARK}' regressed (more bits); '{RESAMPLED_MARK}' measured on another "
    "sample (not comparable); 'new' not in the previous release; '=' same bits; "
    "'–' not in this release."
)


# -- git -------------------------------------------------------------------------------


@dataclass(frozen=True)
class _GitResult:
    status: int
    out: bytes
    err: str
    #: the output went past the bound (and was cut there)
    overflow: bool


def _git(repo: Path, args: Sequence[str], limit: int = GIT_OUTPUT_LIMIT) -> _GitResult:
    """Run ``git ARGS`` in ``repo``; stdout read up to ``limit`` + 1 bytes, stderr kept short.

    stderr goes to a temporary file, so a chatty git cannot block on a full pipe
    while stdout is read.
    """
    env = {**os.environ, "GIT_TERMINAL_PROMPT": "0", "LC_ALL": "C", "GIT_PAGER": "cat"}
    with tempfile.TemporaryFile() as err_file:
        try:
            proc = subprocess.Popen(
                ["git", *args], cwd=repo, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE,
                stderr=err_file, env=env,
            )
        except FileNotFoundError:  # the directory was checked before: git itself is missing
            raise CommandLineError("git is not installed (not found on PATH)") from None
        assert proc.stdout is not None
        expired = threading.Event()

        def stop() -> None:  # a git that hangs is stopped
            expired.set()
            proc.kill()

        timer = threading.Timer(GIT_TIMEOUT, stop)
        timer.start()
        chunks: list[bytes] = []
        got = 0
        try:
            while got <= limit:
                chunk = proc.stdout.read(min(limit + 1 - got, 1 << 20))
                if not chunk:
                    break
                chunks.append(chunk)
                got += len(chunk)
        finally:
            overflow = got > limit
            if overflow:
                proc.kill()
            proc.stdout.close()
            status = proc.wait()
            timer.cancel()
        if expired.is_set():
            raise CommandLineError(f"git {args[0]} took longer than {GIT_TIMEOUT:g} s; stopped")
        err_file.seek(0)
        err = err_file.read(_STDERR_KEPT).decode("utf-8", "replace")
    return _GitResult(status, b"".join(chunks)[:limit], _first_line(err), overflow)


def _first_line(text: str) -> str:
    for line in text.splitlines():
        line = line.strip()
        if line:
            return line.removeprefix("fatal: ").removeprefix("error: ")
    return ""


def _text_of(result: _GitResult, what: str) -> str:
    if result.overflow:
        raise CommandLineError(f"{what}: git output over {GIT_OUTPUT_LIMIT:,} bytes")
    return result.out.decode("utf-8", "replace")


def _check_repository(repo: Path) -> None:
    if not repo.exists():
        raise CommandLineError(f"{repo}: no such directory")
    if not repo.is_dir():
        raise CommandLineError(f"{repo}: not a directory")
    result = _git(repo, ["rev-parse", "--git-dir"])
    if result.status != 0:
        raise CommandLineError(f"{repo}: not inside a git repository"
                               + (f" ({result.err})" if result.err else ""))


def _commit_of(repo: Path, rev: str) -> str | None:
    """The full hash of the commit ``rev`` names, or ``None`` when it names none."""
    if not rev or rev.startswith("-") or "\x00" in rev:
        return None
    result = _git(repo, ["rev-parse", "--verify", "--quiet", f"{rev}^{{commit}}"])
    text = _text_of(result, rev).strip()
    if result.status != 0 or not text or any(c not in "0123456789abcdef" for c in text):
        return None
    return text


def _tags(repo: Path) -> list[str]:
    """Tag names, oldest first by creation date; the same second in version order.

    git sorts by the last ``--sort`` key first, the earlier ones break its ties.
    """
    result = _git(repo, ["for-each-ref", "--sort=version:refname", "--sort=creatordate",
                         "--format=%(refname:strip=2)", "refs/tags"])
    if result.status != 0:
        raise CommandLineError(f"{repo}: cannot list tags ({result.err or 'git failed'})")
    return [line for line in _text_of(result, "tags").splitlines() if line]


def _ledger_path(path: str) -> str:
    """The ledger path as git names it within a tree: relative, POSIX, inside the root."""
    if not path or "\x00" in path:
        raise CommandLineError("--ledger: must be a path relative to the repository root")
    pure = PurePosixPath(path.replace(os.sep, "/"))
    if pure.is_absolute() or Path(path).is_absolute():
        raise CommandLineError(f"--ledger: {path}: must be relative to the repository root, "
                               "not absolute")
    parts = [p for p in pure.parts if p != "."]
    if not parts or ".." in parts:
        raise CommandLineError(f"--ledger: {path}: must name a file inside the repository")
    return "/".join(parts)


def _ledger_at(repo: Path, commit: str, name: str, path: str) -> tuple[Ledger | None, str]:
    """The ledger committed at ``commit`` (``None`` and a note when it has none)."""
    spec = f"{commit}:{path}"
    kind = _git(repo, ["cat-file", "-t", spec])
    if kind.status != 0:
        return None, f"{name}: no {path} at that revision"
    if _text_of(kind, name).strip() != "blob":
        return None, f"{name}: {path} is not a file at that revision"
    blob = _git(repo, ["cat-file", "blob", spec], limit=MAX_LEDGER_BYTES)
    shown = f"{name}:{path}"
    if blob.overflow:
        raise CommandLineError(f"{shown}: over the ledger size limit of "
                               f"{MAX_LEDGER_BYTES:,} bytes (MAX_LEDGER_BYTES); not a ledger?")
    if blob.status != 0:
        raise CommandLineError(f"{shown}: git cannot read it ({blob.err or 'git failed'})")
    try:
        text = blob.out.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise CommandLineError(f"{shown}: not UTF-8 text (byte {exc.start})") from None
    try:
        return Ledger.parse(text, Path(shown)), ""
    except LedgerError as exc:
        raise CommandLineError(str(exc)) from None
    except (ValueError, OverflowError, RecursionError, MemoryError) as exc:
        raise CommandLineError(f"{shown}: not a readable ledger "
                               f"({type(exc).__name__}: {exc})") from None


# -- the history -----------------------------------------------------------------------


@dataclass(frozen=True)
class Release:
    """One column: a tag or a revision, its commit and the ledger committed there."""

    name: str
    commit: str
    #: ``None``: the revision holds no ledger at the path (see ``note``)
    ledger: Ledger | None
    note: str = ""


@dataclass(frozen=True)
class History:
    """The releases, oldest first, and how they were chosen."""

    repo: Path
    path: str
    #: ``"tags"`` (by creation date) or ``"revisions"`` (as given)
    chosen: str
    releases: tuple[Release, ...]
    #: tags skipped because they name no commit
    skipped: tuple[str, ...] = ()

    @property
    def notes(self) -> list[str]:
        out = [r.note for r in self.releases if r.note]
        out += [f"tag {t}: names no commit; skipped" for t in self.skipped]
        return out


def collect(repo: Path, revisions: Sequence[str], path: str = DEFAULT_LEDGER_NAME) -> History:
    """Read the ledger at each revision (or each tag when none is given).

    :raises CommandLineError: outside a repository, a bad revision, no tags and
        no revision, a bad ledger path, a ledger that does not parse.
    """
    repo = Path(repo)
    path = _ledger_path(path)
    _check_repository(repo)
    skipped: list[str] = []
    named: list[tuple[str, str]] = []
    if revisions:
        for rev in revisions:
            commit = _commit_of(repo, rev)
            if commit is None:
                raise CommandLineError(f"{rev}: not a revision of the repository in {repo}")
            named.append((rev, commit))
        chosen = "revisions"
    else:
        for tag in _tags(repo):
            commit = _commit_of(repo, f"refs/tags/{tag}")
            if commit is None:
                skipped.append(tag)
            else:
                named.append((tag, commit))
        if not named:
            raise CommandLineError(f"{repo}: the repository has no tags; name the revisions "
                                   "to compare (ratefloor history REV ...)")
        chosen = "tags"
    releases = []
    for name, commit in named:
        ledger, note = _ledger_at(repo, commit, name, path)
        releases.append(Release(name, commit, ledger, note))
    return History(repo, path, chosen, tuple(releases), tuple(skipped))


#: a case within a codec's table
_Row = tuple[str, int, int]


def _tables(history: History) -> dict[str, dict[_Row, list[Comparison | None]]]:
    """codec → (source, n, seed) → one cell per release (``None``: not in that release).

    A cell compares the case with the previous release holding a ledger.
    """
    codecs: dict[str, dict[_Row, list[Comparison | None]]] = {}
    width = len(history.releases)
    previous: Ledger | None = None
    for column, release in enumerate(history.releases):
        if release.ledger is None:
            continue
        for key, case in release.ledger.entries.items():
            before = None if previous is None else previous.entries.get(key)
            rows = codecs.setdefault(key.codec, {})
            cells = rows.setdefault((key.source, key.n, key.seed), [None] * width)
            cells[column] = compare(case, before) if previous is not None else \
                Comparison(key, None, case, None)
        previous = release.ledger
    return {c: dict(sorted(rows.items())) for c, rows in sorted(codecs.items())}


def _change(cell: Comparison) -> str:
    """The change part of a cell: empty in the first release with a ledger."""
    if cell.status is None:
        return ""
    if cell.status == "new":
        return "new"
    if cell.status == "resampled":
        return RESAMPLED_MARK
    if cell.status == "unchanged":
        return "="
    pct = cell.delta_pct
    text = signed_pct(pct) if pct is not None else "?"
    return f"{text} {REGRESSED_MARK}" if cell.status == "regressed" else text


def _efficiency(case: Measurement) -> str:
    value = finite(case.efficiency)
    return "inf" if value is None else f"{value:.4f}"


def _cell_text(cell: Comparison | None) -> str:
    if cell is None:
        return "–"
    case = cell.case
    change = _change(cell)
    return f"{_efficiency(case)}  {case.bits:,}" + (f"  {change}" if change else "")


def _which(history: History) -> str:
    count = len(history.releases)
    if history.chosen == "tags":
        return f"{count} tag{'s' if count != 1 else ''}, oldest first by creation date"
    return f"{count} revision{'s' if count != 1 else ''} in the order given"


def render_text(history: History) -> str:
    out = [f"ratefloor history: {terminal_text(history.path)} at {_which(history)}"]
    out += [f"note: {terminal_text(n)}" for n in history.notes]
    tables = _tables(history)
    if not tables:
        out.append("no release holds a case")
        return "\n".join(out) + "\n"
    names = [terminal_text(r.name) for r in history.releases]
    for codec, rows in tables.items():
        out += ["", f"codec {terminal_text(codec)}"]
        table = [["source", "n", "seed", *names]]
        table += [[terminal_text(source), str(n), str(seed), *map(_cell_text, cells)]
                  for (source, n, seed), cells in rows.items()]
        out += align(table, {1, 2, *range(3, 3 + len(names))})
    out += ["", LEGEND]
    return "\n".join(out) + "\n"


def _md_cell(cell: Comparison | None) -> str:
    if cell is None:
        return "–"
    case = cell.case
    change = _change(cell)
    text = f"{_efficiency(case)} · {case.bits:,}"
    if cell.status == "regressed":
        change = f"**{change}**"
    return text + (f" · {change}" if change else "")


def render_markdown(history: History) -> str:
    out = [f"## Rate ledger history: {md_name(history.path)}", "",
           f"The ledger at {markdown_text(_which(history))}.", ""]
    if history.notes:
        out += [f"> note: {markdown_text(n)}  " for n in history.notes] + [""]
    tables = _tables(history)
    if not tables:
        return "\n".join([*out, "No release holds a case."]) + "\n"
    names = [md_name(r.name) for r in history.releases]
    for codec, rows in tables.items():
        out += [f"### Codec {md_name(codec)}", "",
                "| source | n | seed | " + " | ".join(names) + " |",
                "| --- | ---: | ---: | " + " | ".join("---:" for _ in names) + " |"]
        out += ["| " + " | ".join([md_name(source), str(n), str(seed),
                                   *map(_md_cell, cells)]) + " |"
                for (source, n, seed), cells in rows.items()]
        out.append("")
    out.append(markdown_text(LEGEND))
    return "\n".join(out) + "\n"


def _cell_json(cell: Comparison | None) -> dict[str, Any] | None:
    if cell is None:
        return None
    case = cell.case
    return {
        "bits": case.bits, "efficiency": finite(case.efficiency),
        "change": cell.status, "delta_bits": cell.delta_bits,
        "delta_pct": finite(cell.delta_pct),
    }


def render_json(history: History) -> str:
    doc = {
        "kind": "pytest-ratefloor ledger history", "schema": HISTORY_SCHEMA_VERSION,
        "ledger": history.path, "releases_from": history.chosen,
        "releases": [{"name": r.name, "commit": r.commit, "has_ledger": r.ledger is not None}
                     for r in history.releases],
        "notes": history.notes,
        "codecs": [
            {"codec": codec, "cases": [
                {"source": source, "n": n, "seed": seed, "cells": [_cell_json(c) for c in cells]}
                for (source, n, seed), cells in rows.items()
            ]}
            for codec, rows in _tables(history).items()
        ],
    }
    return json.dumps(json_safe(doc), indent=2, sort_keys=True, allow_nan=False) + "\n"


def render(history: History, fmt: str) -> str:
    """The history as ``text``, ``md`` or ``json``."""
    if fmt == "json":
        return render_json(history)
    if fmt == "md":
        return render_markdown(history)
    return render_text(history)
