"""Replay files: damaged streams saved by a failed check, and read back.

A failed trial's damaged stream is saved as ``<stem>.bin`` with a
``<stem>.json`` sidecar: the payload shape of the stream
(:meth:`~pytest_ratefloor.codecs.PayloadShape.to_record`: ``shape``,
``nbits``, ``endian``) and what was done to it. :func:`load_damaged` reads a
saved stream back in the shape the encoder returned, through the same
:meth:`~pytest_ratefloor.codecs.PayloadShape.rebuild` the worker used, so the
replayed payload equals the one that failed.
"""

from __future__ import annotations

import itertools
import json
import os
import re
from pathlib import Path
from typing import Any

from pytest_ratefloor.codecs import Codec, PayloadShape

__all__ = ["load_damaged", "replay_statement", "save_damaged", "stem_for"]

#: The import that replay statements start with (the package re-exports it).
_LOAD = "from pytest_ratefloor.corruption import load_damaged"


def stem_for(codec_name: str, seed: int, trial: int, kind: str) -> str:
    """The file name (without suffix) of a saved damaged stream."""
    slug = re.sub(r"[^A-Za-z0-9._-]+", "_", codec_name).strip("_")[:60] or "codec"
    return f"{slug}-seed{seed}-trial{trial:03d}-{kind}"


def save_damaged(
    directory: Path, stem: str, damaged: bytes, shape: PayloadShape, meta: dict[str, Any]
) -> Path:
    """Write ``<stem>.bin`` (the damaged bytes) and ``<stem>.json`` (its shape and
    ``meta``) under ``directory``; if either name is taken, ``-1``, ``-2``, ...
    is added to the stem: nothing existing is overwritten."""
    directory.mkdir(parents=True, exist_ok=True)
    text = (json.dumps({**shape.to_record(len(damaged)), **meta}, indent=2) + "\n").encode()
    for attempt in itertools.count():
        name = stem if attempt == 0 else f"{stem}-{attempt}"
        path = directory / f"{name}.bin"
        if path.with_suffix(".json").exists():
            continue
        try:
            with open(path, "xb") as fh:
                fh.write(damaged)
        except FileExistsError:
            continue
        try:
            with open(path.with_suffix(".json"), "xb") as fh:
                fh.write(text)
        except FileExistsError:  # taken in between: give up this name
            path.unlink()
            continue
        return path
    raise AssertionError("unreachable")  # pragma: no cover


def load_damaged(path: str | os.PathLike[str]) -> Any:
    """Read a damaged stream saved by a failed corruption check, in the shape the
    encoder returned: ``bytes``, a ``bitarray`` of the exact bit count, or a
    ``(bytes, nbits)`` pair (from the ``.json`` file saved beside it)."""
    path = Path(path)
    data = path.read_bytes()
    sidecar = path.with_suffix(".json")
    if not sidecar.exists():
        return data
    shape = PayloadShape.from_record(json.loads(sidecar.read_text()), len(data))
    return shape.rebuild(data).payload


def replay_statement(codec: Codec, path: Path, n: int) -> str:
    """One line of Python that feeds the saved stream at ``path`` to the codec's decoder."""
    return f"{_LOAD}; " + codec.replay_statement(f"load_damaged({str(path)!r})", n)
