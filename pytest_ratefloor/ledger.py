"""The committed rate ledger: its JSON layout, loading, comparison and atomic writing.

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
produce last-digit diff noise. This module knows nothing of pytest: ``LedgerRun``
holds one run's measurements and verdicts, and plugin.py wires it to hooks.
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import platform
import shlex
import shutil
import stat
import sys
import tempfile
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal, Protocol

from pytest_ratefloor.errors import (
    LedgerError,
    NewerLedgerError,
    RegressionFailure,
    SampleMismatchError,
    UnreadableLedgerError,
)
from pytest_ratefloor.measurement import Measurement

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

Key = tuple[str, str, int, int]
Status = Literal["unchanged", "improved", "within-slack", "regressed", "new", "resampled"]
#: Display order of verdicts (worst first).
STATUSES: tuple[Status, ...] = (
    "regressed", "resampled", "within-slack", "improved", "new", "unchanged",
)





def case_label(key: Key) -> str:
    """The human-readable JSON key of a case: ``codec | source | n=.. | seed=..``."""
    codec, source, n, seed = key
    return f"{codec} | {source} | n={n} | seed={seed}"


def _figure(value: float | None) -> float | None:
    """A float rounded to 12 significant digits for the file; non-finite → None."""
    if value is None or not math.isfinite(value):
        return None
    return float(f"{value:.12g}")


@dataclass(frozen=True)
class LedgerEntry:
    """One recorded case."""

    codec: str
    source: str
    n: int
    seed: int
    bits: int
    rate: float | None = None
    floor: str = ""
    floor_rate: float | None = None
    entropy: float | None = None
    fingerprint: str = ""
    codec_version: str | None = None

    @property
    def key(self) -> Key:
        return (self.codec, self.source, self.n, self.seed)

    @classmethod
    def from_measurement(cls, m: Measurement) -> LedgerEntry:
        """The entry a recording writes for measurement ``m``."""
        return cls(
            codec=str(m.codec), source=str(m.source), n=int(m.n), seed=int(m.seed),
            bits=int(m.bits), rate=_figure(float(m.rate)), floor=str(m.floor),
            floor_rate=_figure(float(m.floor_rate)), entropy=_figure(float(m.entropy)),
            fingerprint=str(m.fingerprint),
            codec_version=None if m.codec_version is None else str(m.codec_version),
        )

    def to_json(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "codec": self.codec, "source": self.source, "n": self.n, "seed": self.seed,
            "bits": self.bits, "rate": self.rate, "floor": self.floor,
            "floor_rate": self.floor_rate, "entropy": self.entropy,
            "fingerprint": self.fingerprint,
        }
        if self.codec_version is not None:
            out["codec_version"] = self.codec_version
        return out

    @classmethod
    def from_json(cls, label: str, obj: object, path: Path) -> LedgerEntry:
        """Validate one entry of a loaded file; errors name the file and the case."""
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

        entry = cls(
            codec=need("codec", str), source=need("source", str), n=need("n", int),
            seed=need("seed", int), bits=need("bits", int),
            rate=_opt_float(need("rate", (int, float), optional=True)),
            floor=need("floor", str, optional=True) or "",
            floor_rate=_opt_float(need("floor_rate", (int, float), optional=True)),
            entropy=_opt_float(need("entropy", (int, float), optional=True)),
            fingerprint=need("fingerprint", str, optional=True) or "",
            codec_version=need("codec_version", str, optional=True),
        )
        if entry.bits < 0 or entry.n < 0:
            raise UnreadableLedgerError(f"{where} has a negative bit count or size")
        if case_label(entry.key) != label:
            raise UnreadableLedgerError(
                f"{where} does not match its fields (expected key {case_label(entry.key)!r}); "
                "was the file edited by hand?"
            )
        return entry


def _opt_float(value: int | float | None) -> float | None:
    return None if value is None else float(value)


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
            raise UnreadableLedgerError(f"{path}: 'recorded_with' is not a well-formed block: {obj!r}")
        return cls(plugin=obj["plugin"], numpy=obj["numpy"], python=obj["python"],
                   platform=obj["platform"])


@dataclass
class Ledger:
    """The cases of one ledger file (possibly not existing yet)."""

    path: Path
    entries: dict[Key, LedgerEntry] = field(default_factory=dict)
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
            raise UnreadableLedgerError(f"{path}: not UTF-8 text ({exc.reason}); corrupt?") from None
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
        entries: dict[Key, LedgerEntry] = {}
        for label, obj in cases.items():
            entry = LedgerEntry.from_json(label, obj, path)
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
            entry = LedgerEntry.from_measurement(m)
            entries[entry.key] = entry
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
            "cases": {case_label(k): e.to_json() for k, e in self.entries.items()},
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


@dataclass(frozen=True)
class Verdict:
    """How one measurement compares with its ledger entry."""

    key: Key
    status: Status
    bits: int
    ledger_bits: int | None
    slack: float = 0.0

    @property
    def delta_bits(self) -> int | None:
        return None if self.ledger_bits is None else self.bits - self.ledger_bits

    @property
    def delta_pct(self) -> float | None:
        """Change relative to the ledger, percent (None for a new case)."""
        if self.ledger_bits is None:
            return None
        if self.ledger_bits == 0:
            return 0.0 if self.bits == 0 else math.inf
        return 100.0 * (self.bits - self.ledger_bits) / self.ledger_bits


class Case(Protocol):
    """What :func:`compare` needs of a measurement (a LedgerEntry also qualifies)."""

    @property
    def key(self) -> Key: ...
    @property
    def bits(self) -> int: ...
    @property
    def fingerprint(self) -> str: ...


def compare(m: Case, entry: LedgerEntry | None, slack: float) -> Verdict:
    """Compare a measurement with its ledger entry (``None``: not in the ledger).

    A case regresses when ``bits > ledger_bits * (1 + slack)``; more bits within
    the slack is ``within-slack``. A fingerprint that differs (both non-empty)
    gives ``resampled``: the sample changed, so the counts are not comparable.
    """
    bits = int(m.bits)
    if entry is None:
        return Verdict(m.key, "new", bits, None, slack)
    status: Status
    if entry.fingerprint and m.fingerprint and entry.fingerprint != m.fingerprint:
        status = "resampled"
    elif bits == entry.bits:
        status = "unchanged"
    elif bits < entry.bits:
        status = "improved"
    elif bits > entry.bits * (1.0 + slack):
        status = "regressed"
    else:
        status = "within-slack"
    return Verdict(m.key, status, bits, entry.bits, slack)


def _describe_case(key: Key) -> str:
    codec, source, n, seed = key
    return f"codec {codec!r} on {source}, n={n}, seed={seed}"


def regression_message(verdict: Verdict, ledger_path: Path, record_hint: str) -> str:
    """The text of a RegressionFailure: both figures, the delta, the ledger and the fix."""
    assert verdict.ledger_bits is not None
    assert verdict.delta_pct is not None
    return (
        f"rate regression: {_describe_case(verdict.key)} needs {verdict.bits:,} bits; "
        f"the ledger holds {verdict.ledger_bits:,} bits\n"
        f"  delta: {verdict.delta_bits:+,} bits ({verdict.delta_pct:+.3f}%), "
        f"allowed slack {100.0 * verdict.slack:g}%\n"
        f"  ledger: {ledger_path}\n"
        f"  if the increase is intended, record the new figure: {record_hint}"
    )


def resampled_message(entry: LedgerEntry, m: Measurement, ledger_path: Path,
                      record_hint: str) -> str:
    """The text of a SampleMismatchError."""
    return (
        f"ledger entry cannot be compared: {_describe_case(m.key)} was recorded on a "
        f"different sample (fingerprint {entry.fingerprint} in the ledger, {m.fingerprint} now)\n"
        f"  the source spec {m.source!r} now draws different symbols (a changed sampler or "
        f"source definition), so {entry.bits:,} recorded bits and {m.bits:,} measured bits "
        f"are not the same experiment\n"
        f"  ledger: {ledger_path}\n"
        f"  re-record the case: {record_hint}"
    )


def conflict_message(first: Measurement, second: Measurement) -> str:
    """Two measurements of the same ledger key disagree within one run."""
    return (
        f"two measurements of {_describe_case(first.key)} disagree in one run: "
        f"{first.bits:,} bits (fingerprint {first.fingerprint}) and "
        f"{second.bits:,} bits (fingerprint {second.fingerprint}); give each codec "
        "a distinct name and make sure its encoder is deterministic"
    )


@dataclass
class LedgerRun:
    """One test run's measurements against a baseline ledger.

    In the process that runs a test, the ``ratefloor`` fixture calls
    :meth:`observe` then :meth:`enforce` for every measurement. On the xdist
    controller, :meth:`absorb` takes the workers' plain records without
    enforcing (the workers already did).
    """

    baseline: Ledger
    slack: float = 0.0
    record: bool = False
    record_hint: str = "pytest --ratefloor-record"
    measurements: dict[Key, Measurement] = field(default_factory=dict)
    #: per-case slack that overrides :attr:`slack` (from a test's marker)
    slacks: dict[Key, float] = field(default_factory=dict)
    conflicts: list[str] = field(default_factory=list)
    #: why this run does not cover the whole suite (empty: a full run)
    partial_reasons: list[str] = field(default_factory=list)

    def slack_for(self, key: Key) -> float:
        return self.slacks.get(key, self.slack)

    def observe(self, m: Measurement, slack: float | None = None) -> Verdict:
        """Store ``m`` and return its verdict.

        :raises LedgerError: an earlier measurement of the same case in this run
            had other bits or another sample (also kept in :attr:`conflicts`).
        """
        earlier = self.measurements.get(m.key)
        if earlier is not None and (
            earlier.bits != m.bits or earlier.fingerprint != m.fingerprint
        ):
            message = conflict_message(earlier, m)
            self.conflicts.append(message)
            raise LedgerError(message)
        self.measurements[m.key] = m
        if slack is not None:
            self.slacks[m.key] = slack
        return compare(m, self.baseline.entries.get(m.key), self.slack_for(m.key))

    def enforce(self, m: Measurement, verdict: Verdict, nodeid: str | None = None) -> None:
        """Raise for a regression or a resampled case, unless recording.

        :raises RegressionFailure: more bits than the ledger allows.
        :raises SampleMismatchError: the ledger entry was measured on another sample.
        """
        __tracebackhide__ = True
        if self.record or verdict.status not in ("regressed", "resampled"):
            return
        hint = self.record_hint + ("" if nodeid is None else " " + shlex.quote(nodeid))
        if verdict.status == "regressed":
            raise RegressionFailure(regression_message(verdict, self.baseline.path, hint))
        entry = self.baseline.entries[m.key]
        raise SampleMismatchError(resampled_message(entry, m, self.baseline.path, hint))

    def admit(self, m: Measurement, slack: float | None = None,
              nodeid: str | None = None) -> Verdict:
        """:meth:`observe` then :meth:`enforce`; returns the verdict."""
        __tracebackhide__ = True
        verdict = self.observe(m, slack)
        self.enforce(m, verdict, nodeid)
        return verdict

    def payload(self) -> dict[str, Any]:
        """What an xdist worker sends home: builtin types only (execnet rejects the rest)."""
        return {
            "measurements": [m.to_record() for m in self.measurements.values()],
            "slacks": [[*key, float(value)] for key, value in self.slacks.items()],
            "partial": [str(r) for r in self.partial_reasons],
            "conflicts": [str(c) for c in self.conflicts],
        }

    def absorb(self, payload: Mapping[str, Any]) -> None:
        """Merge a worker's :meth:`payload`; conflicts between workers are collected."""
        for codec, source, n, seed, value in payload.get("slacks", []):
            self.slacks[(codec, source, n, seed)] = float(value)
        for record in payload.get("measurements", []):
            m = Measurement.from_record(dict(record))
            with contextlib.suppress(LedgerError):  # kept in self.conflicts
                self.observe(m)
        for message in payload.get("conflicts", []):
            if message not in self.conflicts:
                self.conflicts.append(message)
        for reason in payload.get("partial", []):
            if reason not in self.partial_reasons:
                self.partial_reasons.append(reason)

    def verdicts(self) -> list[tuple[Measurement, Verdict]]:
        """Every measurement with its verdict, sorted by key."""
        return [
            (m, compare(m, self.baseline.entries.get(key), self.slack_for(key)))
            for key, m in sorted(self.measurements.items())
        ]

    @property
    def is_full(self) -> bool:
        return not self.partial_reasons

    def stale(self) -> list[LedgerEntry]:
        """Ledger entries nobody measured; empty unless this was a full run."""
        if not self.is_full:
            return []
        return [e for k, e in sorted(self.baseline.entries.items()) if k not in self.measurements]

    def counts(self) -> dict[str, int]:
        """Number of cases per verdict, plus ``stale``."""
        out: dict[str, int] = dict.fromkeys(STATUSES, 0)
        for _, v in self.verdicts():
            out[v.status] += 1
        out["stale"] = len(self.stale())
        return out

    def recorded(self) -> Ledger:
        """The ledger a recording writes: the baseline merged with this run."""
        return self.baseline.merged(self.measurements[k] for k in sorted(self.measurements))
