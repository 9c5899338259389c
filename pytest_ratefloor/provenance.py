"""Where a run's figures came from: when it started and which git commit it measured.

The Markdown and JSON reports carry both, so that a figure pasted into a release
note can be traced to the code that produced it. Neither is ever required: a
run outside a git repository, or without ``git`` installed, has no commit, and
the reports say nothing about one.
"""

from __future__ import annotations

import datetime
import os
import subprocess
from pathlib import Path

__all__ = ["GIT_TIMEOUT", "git_commit", "run_started"]

#: Seconds ``git`` may take to name the commit before the run goes on without it.
GIT_TIMEOUT = 5.0
_HASH_CHARS = 12


def run_started(now: datetime.datetime | None = None) -> str:
    """The time in UTC, ISO 8601 to the second (``2026-12-03T02:50:11Z``)."""
    moment = (now or datetime.datetime.now(datetime.timezone.utc)).astimezone(
        datetime.timezone.utc)
    return moment.strftime("%Y-%m-%dT%H:%M:%SZ")


def _git(directory: Path, *args: str) -> str | None:
    env = {**os.environ, "GIT_TERMINAL_PROMPT": "0", "LC_ALL": "C"}
    try:
        proc = subprocess.run(["git", *args], cwd=directory, stdin=subprocess.DEVNULL,
                              capture_output=True, timeout=GIT_TIMEOUT, env=env, check=False)
    except (OSError, subprocess.SubprocessError):  # no git, no directory, too slow
        return None
    if proc.returncode != 0:
        return None
    return proc.stdout.decode("ascii", "replace").strip()


def git_commit(directory: Path) -> str | None:
    """The commit checked out in ``directory`` (12 hex digits, ``+dirty`` when tracked files
    differ from it), or ``None`` outside a git work tree or without git."""
    head = _git(directory, "rev-parse", "--verify", "--quiet", "HEAD")
    if not head or not all(c in "0123456789abcdef" for c in head):
        return None
    changes = _git(directory, "status", "--porcelain", "--untracked-files=no")
    return head[:_HASH_CHARS] + ("+dirty" if changes else "")
