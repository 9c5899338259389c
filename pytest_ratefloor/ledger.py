"""The committed rate ledger: its JSON layout, loading, validation and atomic writing.

The ledger is one JSON file a team commits next to its code. Each *case* is keyed
by codec name, source spec, sample size ``n`` and ``seed`` and holds the exact bit
count the codec needed, with the figures that explain it (rate, floor, entropy),
the fingerprint of the sample and the codec version. A file-level header names the
schema and the environment of the last recording (plugin, numpy, Python, platform),
because a figure without its configuration cannot be acted on.

Layout (schema 1), written with sorted keys, two-space indent and a trailing
newline so a release's diff shows one small block per changed case::

    {
      "cases": {
        "<codec> | <source spec> | n=<n> | seed=<seed>": {
          "bits": 46968, "codec": "...", "codec_version": "2.1",   # version only if given
          "entropy": 0.468995593589, "fingerprint": "...", "floor": "entropy",
          "floor_rate": 0.46899, "n": 100000, "rate": 0.46968, "seed": 0,
          "source": "bernoulli(p=0.1)"
        }
      },
      "kind": "pytest-ratefloor rate ledger",
      "note": "...",
      "recorded_with": {"numpy": "...", "platform": "...", "plugin": "...", "python": "..."},
      "schema": 1
    }

Only the integer ``bits`` is compared; the floats are for readers and reports and
are rounded to 12 significant digits so a recording on another machine does not
produce last-digit diff noise. Each case is read back as the
:class:`~pytest_ratefloor.measurement.Measurement` its recording wrote
(:meth:`~pytest_ratefloor.measurement.Measurement.recorded`); comparing cases
is :mod:`pytest_ratefloor.verdicts`' job. This module knows nothing of pytest.
"""

from __future__ import annotations

import contextlib
import json
import os
import platform
import shutil
import stat
import sys
import tempfile
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from pytest_ratefloor.errors import (
    NewerLedgerError,
    UnreadableLedgerError,
)
from pytest_ratefloor.measurement import CaseKey, Measurement, figure

#: Version of the ledger layout this plugin reads and writes.
SCHEMA_VERSION = 1
#: Marker string that identifies a ledger file (so a stray JSON file is not mistaken for one).
LEDGER_KIND = "pytest-ratefloor rate ledger"
#: Default file name, at the pytest rootdir.
DEFAULT_LEDGER_NAME = "ratefloor-ledger.json"
#: Suffix under which an unreadable ledger is set aside when the user records over it.
UNREADABLE_SUFFIX = ".unreadable"

_NOTE = (
    "Committed rate ledger of pytest-ratefloor. Only 'bits' is compared; "
    "re-record with: pytest --ratefloor-record"
)


def entry_json(m: Measurement) -> dict[str, Any]:
    """The JSON object of one case (its recorded form; see :meth:`Measurement.recorded`)."""
    out: dict[str, Any] = {
        "codec": m.codec, "source": m.source, "n": m.n, "seed": m.seed, "bits": m.bits,
        "rate": figure(m.rate), "floor": m.floor, "floor_rate": figure(m.floor_rate),
        "entropy": figure(m.entropy), "fingerprint": m.fingerprint,
    }
    if m.codec_version is not None:
        out["codec_version"] = m.codec_version
    return out


def read_entry(label: str, obj: object, path: Path) -> Measurement:
    """Validate one case of a loaded file; errors name the file and the case."""
    where = f"{path}: case {label!r}"
    if not isinstance(obj, dict):
        raise UnreadableLedgerError(f"{where} is not a JSON object")

    def need(name: str, kind: type | tuple[type, ...], optional: bool = False) -> Any:
        if name not in obj:
            if optional:
                return None
            raise UnreadableLedgerError(f"{where} lacks the field {name!r}")
        value = obj[name]
        if value is None and optional:
            return None
        # bool is an int subclass: a 'true' bit count is corruption, not a number
        if isinstance(value, bool) or not isinstance(value, kind):
            raise UnreadableLedgerError(f"{where} has a bad {name!r}: {value!r}")
        return value

    n, bits = need("n", int), need("bits", int)
    if bits < 0 or n < 0:
        raise UnreadableLedgerError(f"{where} has a negative bit count or size")
    floor_rate = float(need("floor_rate", (int, float)))
    entry = Measurement(
        codec=need("codec", str), source=need("source", str), n=n, seed=need("seed", int),
        bits=bits, entropy=float(need("entropy", (int, float))),
        floor=need("floor", str), floor_bits=floor_rate * n,
        fingerprint=need("fingerprint", str, optional=True) or "",
        codec_version=need("codec_version", str, optional=True),
    )
    if entry.key.label != label:
        raise UnreadableLedgerError(
            f"{where} does not match its fields (expected key {entry.key.label!r}); "
            "was the file edited by hand?"
        )
    return entry


@dataclass(frozen=True)
class Environment:
    """What a recording ran on (the file-level ``recorded_with`` block)."""

    plugin: str
    numpy: str
    python: str
    platform: str

    @classmethod
    def current(cls) -> Environment:
        from pytest_ratefloor import __version__

        try:
            import numpy

            numpy_version = str(numpy.__version__)
        except ImportError:  # pragma: no cover - numpy is a runtime dependency
            numpy_version = "absent"
        # system-machine only: the kernel build would make every CI host a diff
        return cls(
            plugin=__version__, numpy=numpy_version,
            python=".".join(str(v) for v in sys.version_info[:3]),
            platform=f"{platform.system()}-{platform.machine()}",
        )

    def to_json(self) -> dict[str, str]:
        return {"plugin": self.plugin, "numpy": self.numpy, "python": self.python,
                "platform": self.platform}

    @classmethod
    def from_json(cls, obj: object, path: Path) -> Environment:
        if not isinstance(obj, dict) or not all(
            isinstance(obj.get(k), str) for k in ("plugin", "numpy", "python", "platform")
        ):
            raise UnreadableLedgerError(
                f"{path}: 'recorded_with' is not a well-formed block: {obj!r}"
            )
        return cls(plugin=obj["plugin"], numpy=obj["numpy"], python=obj["python"],
                   platform=obj["platform"])


@dataclass
class Ledger:
    """The cases of one ledger file (possibly not existing yet)."""

    path: Path
    entries: dict[CaseKey, Measurement] = field(default_factory=dict)
    environment: Environment | None = None
    exists: bool = False

    @classmethod
    def load(cls, path: Path) -> Ledger:
        """Read ``path``; a missing file is an empty ledger.

        :raises UnreadableLedgerError: not JSON, truncated, or not a well-formed ledger.
        :raises NewerLedgerError: written with a schema newer than :data:`SCHEMA_VERSION`.
        """
        path = Path(path)
        try:
            text = path.read_text(encoding="utf-8")
        except FileNotFoundError:
            return cls(path=path)
        except IsADirectoryError:
            raise UnreadableLedgerError(f"{path}: is a directory, not a ledger file") from None
        except UnicodeDecodeError as exc:
            raise UnreadableLedgerError(
                f"{path}: not UTF-8 text ({exc.reason}); corrupt?"
            ) from None
        except OSError as exc:
            raise UnreadableLedgerError(f"{path}: cannot be read ({exc.strerror})") from None
        return cls.parse(text, path)

    @classmethod
    def parse(cls, text: str, path: Path) -> Ledger:
        """Parse ledger text (``path`` is used in messages and kept on the result)."""
        try:
            doc = json.loads(text)
        except json.JSONDecodeError as exc:
            # a ledger always ends with its closing brace; without it, the write was cut short
            hint = "" if text.rstrip().endswith("}") else " (the file ends early: truncated?)"
            raise UnreadableLedgerError(
                f"{path}: not valid JSON at line {exc.lineno} column {exc.colno}: "
                f"{exc.msg}{hint}"
            ) from None
        if not isinstance(doc, dict) or doc.get("kind") != LEDGER_KIND:
            raise UnreadableLedgerError(
                f"{path}: not a pytest-ratefloor ledger (no \"kind\": {LEDGER_KIND!r})"
            )
        schema = doc.get("schema")
        if isinstance(schema, bool) or not isinstance(schema, int) or schema < 1:
            raise UnreadableLedgerError(f"{path}: bad schema version {schema!r}")
        if schema > SCHEMA_VERSION:
            raise NewerLedgerError(
                f"{path}: ledger schema {schema} is newer than this pytest-ratefloor "
                f"understands (schema {SCHEMA_VERSION}); upgrade pytest-ratefloor"
            )
        cases = doc.get("cases")
        if not isinstance(cases, dict):
            raise UnreadableLedgerError(f"{path}: 'cases' is missing or not a JSON object")
        entries: dict[CaseKey, Measurement] = {}
        for label, obj in cases.items():
            entry = read_entry(label, obj, path)
            entries[entry.key] = entry
        env = doc.get("recorded_with")
        environment = None if env is None else Environment.from_json(env, path)
        return cls(path=path, entries=entries, environment=environment, exists=True)

    def merged(self, measurements: Iterable[Measurement],
               environment: Environment | None = None) -> Ledger:
        """A new ledger: this one's entries, overridden by ``measurements``.

        Entries that were not measured are kept (a partial run never drops them).
        """
        entries = dict(self.entries)
        for m in measurements:
            entries[m.key] = m.recorded()
        return Ledger(path=self.path, entries=entries,
                      environment=environment or Environment.current(), exists=self.exists)

    def dumps(self) -> str:
        """The file text: sorted keys, two-space indent, trailing newline."""
        env = self.environment or Environment.current()
        doc = {
            "kind": LEDGER_KIND,
            "schema": SCHEMA_VERSION,
            "note": _NOTE,
            "recorded_with": env.to_json(),
            "cases": {k.label: entry_json(e) for k, e in self.entries.items()},
        }
        return json.dumps(doc, indent=2, sort_keys=True, ensure_ascii=False,
                          allow_nan=False) + "\n"

    def write(self) -> None:
        """Write atomically to :attr:`path` (see :func:`write_atomic`)."""
        write_atomic(self.path, self.dumps())


def write_atomic(path: Path, text: str) -> None:
    """Replace ``path`` with ``text`` so that a reader only ever sees old or new content.

    The text goes to a temporary file in the same folder, is flushed and fsynced,
    then ``os.replace`` renames it over ``path`` (atomic on POSIX and Windows);
    the folder is fsynced so the rename survives a power cut. If anything fails
    the temporary file is removed and ``path`` is untouched.
    """
    path = Path(path)
    folder = path.parent
    folder.mkdir(parents=True, exist_ok=True)
    fd, tmp_name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=folder)
    tmp = Path(tmp_name)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        # mkstemp creates 0600; a committed file keeps its mode or gets the umask default
        try:
            mode = stat.S_IMODE(path.stat().st_mode)
        except FileNotFoundError:
            umask = os.umask(0)
            os.umask(umask)
            mode = 0o666 & ~umask
        os.chmod(tmp, mode)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise
    _fsync_folder(folder)


def _fsync_folder(folder: Path) -> None:
    if os.name != "posix":  # pragma: no cover - Windows cannot open folders
        return
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:  # pragma: no cover
        return
    try:
        os.fsync(fd)
    except OSError:  # pragma: no cover - some file systems refuse
        pass
    finally:
        os.close(fd)


def keep_copy(path: Path) -> Path:
    """Copy an unreadable ledger to ``<name>.unreadable`` (numbered if taken); return the copy.

    Used before a recording replaces a ledger that could not be read, so the
    user's bytes survive for repair by hand.
    """
    target = path.with_name(path.name + UNREADABLE_SUFFIX)
    number = 1
    while target.exists():
        target = path.with_name(f"{path.name}{UNREADABLE_SUFFIX}.{number}")
        number += 1
    shutil.copy2(path, target)
    return target
