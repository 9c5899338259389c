"""The committed rate ledger: its JSON layout, strict and bounded loading, validation.

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
          "floor_rate": 0.46899, "layout": "u8",                 # layout only if known
          "n": 100000, "rate": 0.46968, "seed": 0, "source": "bernoulli(p=0.1)"
        }
      },
      "kind": "pytest-ratefloor rate ledger",
      "note": "...",
      "recorded_with": {"numpy": "...", "platform": "...", "plugin": "...", "python": "..."},
      "schema": 1
    }

``codec_version``, ``fingerprint``, ``layout`` and ``rate`` are optional. ``layout``
(added within schema 1: a file without it stays readable, and an entry without a
layout is written exactly as before) names how the codec turned symbols into bytes
or bits — a byte packing such as ``"u8"`` or ``"zigzag-u16le"``, or a short command
description — and is absent when unknown or when the codec has none.

Only the integer ``bits`` is compared; the floats are for readers and reports and
are rounded to 12 significant digits so a recording on another machine does not
produce last-digit diff noise. Each case is read back as the
:class:`~pytest_ratefloor.measurement.Measurement` its recording wrote
(:meth:`~pytest_ratefloor.measurement.Measurement.recorded`); comparing cases
is :mod:`pytest_ratefloor.verdicts`' job. This module knows nothing of pytest.

Reading is strict and bounded. Only a regular file of at most
:data:`MAX_LEDGER_BYTES` is read (a FIFO or a device is refused without
blocking); a repeated JSON name, ``NaN``/``Infinity``, nesting too deep to
parse, an integer too long to convert, an unknown field or a figure out of range
each give one :class:`~pytest_ratefloor.errors.UnreadableLedgerError` whose
message is one line naming the file (and the case and field). A ledger that
loads can be shown and compared: every count is below 2**63 and every figure
finite.

Writing the file safely (lock, merge, atomic replace) is
:mod:`pytest_ratefloor.recording`'s job.
"""

from __future__ import annotations

import codecs
import json
import math
import os
import platform
import reprlib
import stat
import sys
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from pytest_ratefloor.errors import (
    CommandLineError,
    LedgerError,
    NewerLedgerError,
    UnreadableLedgerError,
)
from pytest_ratefloor.measurement import LOSSY_FLOOR, CaseKey, Measurement, figure

#: Version of the ledger layout this plugin reads and writes.
SCHEMA_VERSION = 1
#: Marker string that identifies a ledger file (so a stray JSON file is not mistaken for one).
LEDGER_KIND = "pytest-ratefloor rate ledger"
#: Default file name, at the pytest rootdir.
DEFAULT_LEDGER_NAME = "ratefloor-ledger.json"
#: Suffix under which an unreadable ledger is set aside when the user records over it.
UNREADABLE_SUFFIX = ".unreadable"
#: Largest ledger file read (bytes); a ledger of 64 MiB holds some 200,000 cases.
MAX_LEDGER_BYTES = 64 * 1024 * 1024

_NOTE = (
    "Committed rate ledger of pytest-ratefloor. Only 'bits' is compared; "
    "re-record with: pytest --ratefloor-record"
)
#: every count (bits, n, seed) is below this: a signed 64-bit integer holds it
_COUNT_LIMIT = 2**63
#: longest integer literal converted: CPython's default int_max_str_digits
_MAX_INT_DIGITS = 4300
_TOP_FIELDS = ("cases", "kind", "note", "recorded_with", "schema")
_REQUIRED_FIELDS = ("bits", "codec", "floor", "floor_rate", "n", "seed", "source")
#: ``entropy`` is required of a lossless case; a lossy case (``distortion`` and
#: ``distortion_measure``, both or neither) of a real-valued source has none
_OPTIONAL_FIELDS = ("codec_version", "distortion", "distortion_measure", "entropy",
                    "fingerprint", "layout", "rate")
_CASE_FIELDS = tuple(sorted((*_REQUIRED_FIELDS, *_OPTIONAL_FIELDS)))
_ENVIRONMENT_FIELDS = ("numpy", "platform", "plugin", "python")
_FILE_KINDS = (
    (stat.S_ISDIR, "a directory"), (stat.S_ISFIFO, "a FIFO"),
    (stat.S_ISCHR, "a character device"), (stat.S_ISBLK, "a block device"),
    (stat.S_ISSOCK, "a socket"),
)

_short_repr = reprlib.Repr()  # case labels run to ~120 characters; a hostile string is cut
_short_repr.maxstring, _short_repr.maxother = 200, 80
_short_repr.maxlevel, _short_repr.maxdict, _short_repr.maxlist = 2, 4, 4


def _shown(value: object) -> str:
    """A short one-line rendering of a value read from a file, for messages."""
    if isinstance(value, int) and not isinstance(value, bool) and value.bit_length() > 64:
        return f"an integer of {value.bit_length()} bits"
    try:
        return _short_repr.repr(value)
    except (ValueError, RecursionError):  # an int too long for repr, a pathological nest
        return f"a {type(value).__name__}"


def _is_text(value: object) -> bool:
    """True for a string that can be written as UTF-8 (no lone surrogate from a ``\\ud800``)."""
    if not isinstance(value, str):
        return False
    try:
        value.encode("utf-8")
    except UnicodeEncodeError:
        return False
    return True


def entry_json(m: Measurement) -> dict[str, Any]:
    """The JSON object of one case (its recorded form; see :meth:`Measurement.recorded`)."""
    out: dict[str, Any] = {
        "codec": m.codec, "source": m.source, "n": m.n, "seed": m.seed, "bits": m.bits,
        "rate": figure(m.rate), "floor": m.floor, "floor_rate": figure(m.floor_rate),
        "entropy": figure(m.entropy), "fingerprint": m.fingerprint,
    }
    if m.codec_version is not None:
        out["codec_version"] = m.codec_version
    if m.layout:  # absent when unknown: entries without one keep their bytes
        out["layout"] = m.layout
    if m.distortion is not None:  # a lossy case: its distortion is compared too
        out["distortion"] = figure(m.distortion)
        out["distortion_measure"] = m.distortion_measure or ""
        if not math.isfinite(m.entropy):  # a real-valued source has no entropy in bits
            del out["entropy"]
    return out


def _count(obj: dict[str, Any], name: str, low: int, where: str) -> int:
    value = obj[name]
    # bool is an int subclass: a 'true' bit count is corruption, not a number
    if isinstance(value, bool) or not isinstance(value, int) or not low <= value < _COUNT_LIMIT:
        raise UnreadableLedgerError(
            f"{where} has a bad {name!r}: {_shown(value)} "
            f"(must be an integer, {low} <= {name} < 2**63)"
        )
    return value


def _number(obj: dict[str, Any], name: str, where: str) -> float:
    value = obj[name]
    if not isinstance(value, bool) and isinstance(value, (int, float)):
        try:
            number = float(value)
        except OverflowError:
            number = math.inf
        if math.isfinite(number) and number >= 0:
            return number + 0.0  # -0.0 reads as 0.0
    raise UnreadableLedgerError(
        f"{where} has a bad {name!r}: {_shown(value)} (must be a finite number >= 0)"
    )


def _text(obj: dict[str, Any], name: str, where: str, *, empty: bool = False) -> str:
    value = obj[name]
    if _is_text(value) and (empty or value):
        return str(value)
    rule = "a string of UTF-8 text" if empty else "a non-empty string of UTF-8 text"
    raise UnreadableLedgerError(f"{where} has a bad {name!r}: {_shown(value)} (must be {rule})")


def read_entry(label: str, obj: object, path: Path) -> Measurement:
    """Validate one case of a loaded file; errors name the file, the case and the field."""
    where = f"{path}: case {_shown(label)}"
    entry = read_case(obj, where)
    if entry.key.label != label:
        raise UnreadableLedgerError(
            f"{where} does not match its fields (expected key {_shown(entry.key.label)}); "
            "was the file edited by hand?"
        )
    return entry


def read_case(obj: object, where: str) -> Measurement:
    """Validate one case object (the fields :func:`entry_json` writes) and read it back.

    Used for the ledger's cases and for ledger entries quoted elsewhere (the
    stale entries of a JSON report). Every message starts with ``where``.

    :raises UnreadableLedgerError: not an object, a missing, unknown or wrongly
        typed field, or a figure out of range.
    """
    if not isinstance(obj, dict):
        raise UnreadableLedgerError(f"{where} is not a JSON object")
    unknown = sorted(str(k) for k in obj if k not in _CASE_FIELDS)
    if unknown:
        raise UnreadableLedgerError(
            f"{where} has an unknown field {_shown(unknown[0])}; schema {SCHEMA_VERSION} has: "
            + ", ".join(_CASE_FIELDS)
        )
    for name in _REQUIRED_FIELDS:
        if name not in obj:
            raise UnreadableLedgerError(f"{where} lacks the field {name!r}")
    from pytest_ratefloor.floors import FLOORS  # imports numpy: not at pytest start-up

    n, bits = _count(obj, "n", 1, where), _count(obj, "bits", 0, where)
    seed = _count(obj, "seed", 0, where)
    lossy = "distortion" in obj or "distortion_measure" in obj
    distortion: float | None = None
    measure: str | None = None
    if lossy:
        for name in ("distortion", "distortion_measure"):
            if name not in obj:
                raise UnreadableLedgerError(f"{where} lacks the field {name!r} (a lossy case "
                                            "has both 'distortion' and 'distortion_measure')")
        distortion = _number(obj, "distortion", where)
        if distortion < 0.0:
            raise UnreadableLedgerError(f"{where} has a bad 'distortion': {distortion!r} "
                                        "(must be >= 0)")
        measure = _text(obj, "distortion_measure", where)
    elif "entropy" not in obj:
        raise UnreadableLedgerError(f"{where} lacks the field 'entropy'")
    floor_rate = _number(obj, "floor_rate", where)
    entropy = _number(obj, "entropy", where) if "entropy" in obj else math.nan
    if "rate" in obj:
        _number(obj, "rate", where)  # derived from bits and n on reading; checked all the same
    floor = _text(obj, "floor", where)
    known = (LOSSY_FLOOR,) if lossy else tuple(FLOORS)
    if floor not in known:
        raise UnreadableLedgerError(
            f"{where} has an unknown 'floor': {_shown(floor)}; known"
            f"{' for a lossy case' if lossy else ''}: {', '.join(known)}"
        )
    floor_bits = floor_rate * n
    if not math.isfinite(floor_bits):
        raise UnreadableLedgerError(f"{where} has a bad 'floor_rate': {floor_rate!r} "
                                    f"(floor_rate * n overflows for n={n})")
    return Measurement(
        codec=_text(obj, "codec", where), source=_text(obj, "source", where), n=n, seed=seed,
        bits=bits, entropy=entropy, floor=floor, floor_bits=floor_bits,
        fingerprint=_text(obj, "fingerprint", where, empty=True) if "fingerprint" in obj else "",
        codec_version=(_text(obj, "codec_version", where, empty=True)
                       if "codec_version" in obj else None),
        layout=_text(obj, "layout", where) if "layout" in obj else None,
        distortion=distortion, distortion_measure=measure,
    )


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
        """Read the ``recorded_with`` block: exactly the four names, each a string."""
        if not isinstance(obj, dict) or sorted(obj) != list(_ENVIRONMENT_FIELDS) or not all(
            _is_text(obj[k]) for k in _ENVIRONMENT_FIELDS
        ):
            raise UnreadableLedgerError(
                f"{path}: 'recorded_with' is not a well-formed block: {_shown(obj)} "
                f"(schema {SCHEMA_VERSION} has: {', '.join(_ENVIRONMENT_FIELDS)}, each a string)"
            )
        return cls(plugin=obj["plugin"], numpy=obj["numpy"], python=obj["python"],
                   platform=obj["platform"])


# -- reading: bounded bytes, strict JSON ----------------------------------------------


def _checked_file(path: Path, st: os.stat_result, what: str = "ledger") -> None:
    """Refuse anything but a regular file of at most :data:`MAX_LEDGER_BYTES`."""
    if not stat.S_ISREG(st.st_mode):
        kind = next((name for test, name in _FILE_KINDS if test(st.st_mode)), "a special file")
        raise UnreadableLedgerError(f"{path}: is {kind}, not a {what} file")
    if st.st_size > MAX_LEDGER_BYTES:
        raise _too_large(path, f"{st.st_size:,} bytes", what)


def _too_large(path: Path, size: str, what: str = "ledger") -> UnreadableLedgerError:
    return UnreadableLedgerError(
        f"{path}: is {size}, over the {what} size limit of {MAX_LEDGER_BYTES:,} bytes "
        f"(MAX_LEDGER_BYTES); not a {what}?"
    )


def read_json_strictly(path: Path, what: str) -> Any:
    """Another file of the project's (``what`` names it: ``"report"``) read like a ledger.

    The same bounds and strictness as the ledger: a regular file of at most
    :data:`MAX_LEDGER_BYTES`, UTF-8 without a byte order mark, JSON without
    repeated names, ``NaN``/``Infinity``, over-long integers or deep nesting.
    What the document must hold is the caller's to check.

    :raises UnreadableLedgerError: missing, or any of the above (one line naming the file).
    """
    path = Path(path)
    data = _read_bounded(path, what)
    if data is None:
        raise UnreadableLedgerError(f"{path}: no such file")
    return _strict_json(_decoded(data, path), path, what)


def _read_bounded(path: Path, what: str = "ledger") -> bytes | None:
    """The file's bytes (``None`` if missing), read without blocking and at most limit+1.

    ``stat`` first refuses a FIFO or device; the file is then opened non-blocking
    and checked again through its descriptor, so a swap in between is caught too.
    """
    try:
        _checked_file(path, os.stat(path), what)
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0)
                     | getattr(os, "O_NOCTTY", 0) | getattr(os, "O_BINARY", 0))
    except FileNotFoundError:
        return None
    except OSError as exc:
        raise UnreadableLedgerError(f"{path}: cannot be read ({exc.strerror or exc})") from None
    chunks: list[bytes] = []
    try:
        _checked_file(path, os.fstat(fd), what)
        got, limit = 0, MAX_LEDGER_BYTES
        while got <= limit:
            chunk = os.read(fd, min(limit + 1 - got, 1 << 20))
            if not chunk:
                break
            chunks.append(chunk)
            got += len(chunk)
    except OSError as exc:
        raise UnreadableLedgerError(f"{path}: cannot be read ({exc.strerror or exc})") from None
    finally:
        os.close(fd)
    if got > limit:  # grew after the check, or a file whose size stat does not know
        raise _too_large(path, f"more than {limit:,} bytes", what)
    return b"".join(chunks)


def _decoded(data: bytes, path: Path) -> str:
    if data.startswith(codecs.BOM_UTF8):
        # RFC 8259 §8.1: JSON text must not begin with a byte order mark
        raise UnreadableLedgerError(
            f"{path}: starts with a byte order mark; save it as UTF-8 without one"
        )
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise UnreadableLedgerError(
            f"{path}: not UTF-8 text ({exc.reason} at byte {exc.start}); corrupt?"
        ) from None


def _strict_json(text: str, path: Path, what: str = "ledger") -> Any:
    """``json.loads`` refusing repeated names, NaN/Infinity, long integers and deep nesting."""
    repeats: dict[int, tuple[dict[str, Any], str]] = {}

    def pairs(items: list[tuple[str, Any]]) -> dict[str, Any]:
        obj = dict(items)
        if len(obj) != len(items):
            seen: set[str] = set()
            for key, _ in items:
                if key in seen:
                    repeats[id(obj)] = (obj, key)
                    break
                seen.add(key)
        return obj

    def constant(name: str) -> Any:
        # RFC 8259 §6: NaN and Infinity are not JSON numbers
        raise UnreadableLedgerError(f"{path}: {name} is not a JSON number (RFC 8259 §6)")

    def integer(digits: str) -> int:
        if len(digits.lstrip("-")) > _MAX_INT_DIGITS:
            raise UnreadableLedgerError(
                f"{path}: an integer of {len(digits):,} digits is too long to convert "
                f"(limit {_MAX_INT_DIGITS} digits)"
            )
        return int(digits)

    try:
        doc = json.loads(text, object_pairs_hook=pairs, parse_constant=constant,
                         parse_int=integer)
    except json.JSONDecodeError as exc:
        # the project's files always end with a closing brace; without it, a write was cut short
        hint = "" if text.rstrip().endswith("}") else " (the file ends early: truncated?)"
        raise UnreadableLedgerError(
            f"{path}: not valid JSON at line {exc.lineno} column {exc.colno}: {exc.msg}{hint}"
        ) from None
    except RecursionError:
        raise UnreadableLedgerError(f"{path}: JSON nested too deeply to read; corrupt?") from None
    except ValueError as exc:  # e.g. int conversion limits of the interpreter
        reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise UnreadableLedgerError(f"{path}: not a readable {what} ({reason})") from None
    if repeats:
        where, name = _first_repeat(doc, repeats)
        # RFC 8259 §4: names within an object should be unique, else behaviour is unpredictable
        raise UnreadableLedgerError(f"{path}: {_repeat_phrase(where, name)} (RFC 8259 §4)")
    return doc


def _first_repeat(doc: Any, repeats: dict[int, tuple[dict[str, Any], str]]
                  ) -> tuple[list[str | int], str]:
    """The path (keys and indices) of the first object, in document order, with a repeated name."""
    parents: list[tuple[int, str | int]] = [(-1, "")]
    stack: list[tuple[Any, int]] = [(doc, 0)]
    while stack:
        value, node = stack.pop()
        if isinstance(value, dict):
            if id(value) in repeats:
                where: list[str | int] = []
                while node > 0:
                    node, key = parents[node]
                    where.append(key)
                return where[::-1], repeats[id(value)][1]
            children: list[tuple[str | int, Any]] = list(value.items())
        elif isinstance(value, list):
            children = list(enumerate(value))
        else:
            continue
        for key, child in reversed(children):
            if isinstance(child, (dict, list)):
                parents.append((node, key))
                stack.append((child, len(parents) - 1))
    raise AssertionError("a repeated name was seen but not found")  # pragma: no cover


def _repeat_phrase(where: list[str | int], name: str) -> str:
    if not where:
        return f"the key {_shown(name)} appears more than once at the top level"
    if where == ["cases"]:
        return f"the case {_shown(name)} appears more than once in 'cases'"
    if len(where) == 2 and where[0] == "cases":
        return f"case {_shown(where[1])} has the field {_shown(name)} more than once"
    inside = " / ".join(_shown(k) for k in where)
    return f"the key {_shown(name)} appears more than once in {inside}"


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

        Only a regular file of at most :data:`MAX_LEDGER_BYTES` is read; a
        directory, FIFO, device or socket is refused without blocking on it.

        :raises UnreadableLedgerError: not a regular file, too large, not UTF-8 JSON,
            truncated, or not a well-formed ledger (one line naming the file).
        :raises NewerLedgerError: written with a schema newer than :data:`SCHEMA_VERSION`.
        """
        path = Path(path)
        data = _read_bounded(path)
        if data is None:
            return cls(path=path)
        return cls.parse(_decoded(data, path), path)

    @classmethod
    def parse(cls, text: str, path: Path) -> Ledger:
        """Parse ledger text (``path`` is used in messages and kept on the result).

        :raises UnreadableLedgerError: for any text that is not a well-formed ledger.
        :raises NewerLedgerError: written with a schema newer than :data:`SCHEMA_VERSION`.
        """
        doc = _strict_json(text, path)
        if not isinstance(doc, dict) or doc.get("kind") != LEDGER_KIND:
            raise UnreadableLedgerError(
                f"{path}: not a pytest-ratefloor ledger (no \"kind\": {LEDGER_KIND!r})"
            )
        schema = doc.get("schema")
        if isinstance(schema, bool) or not isinstance(schema, int) or schema < 1:
            raise UnreadableLedgerError(f"{path}: bad schema version {_shown(schema)}")
        if schema > SCHEMA_VERSION:
            raise NewerLedgerError(
                f"{path}: ledger schema {_shown(schema)} is newer than this pytest-ratefloor "
                f"understands (schema {SCHEMA_VERSION}); upgrade pytest-ratefloor"
            )
        unknown = sorted(k for k in doc if k not in _TOP_FIELDS)
        if unknown:
            raise UnreadableLedgerError(
                f"{path}: unknown field {_shown(unknown[0])}; schema {SCHEMA_VERSION} has: "
                + ", ".join(_TOP_FIELDS)
            )
        if "note" in doc and not isinstance(doc["note"], str):
            raise UnreadableLedgerError(f"{path}: 'note' is not a string: {_shown(doc['note'])}")
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
        """Replace the file with exactly these entries, under the ledger's lock.

        Kept for callers that merged themselves;
        :func:`pytest_ratefloor.recording.record` re-reads the
        file under the lock and merges, so a concurrent recording is not lost.
        """
        from pytest_ratefloor.recording import ledger_lock, write_atomic

        with ledger_lock(self.path) as target:
            write_atomic(target, self.dumps())


# -- a ledger named on the command line -----------------------------------------------


def unreadable(path: str, message: str) -> CommandLineError:
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
            raise unreadable(
                path, f"case {key.label!r} holds figures out of range ({exc})"
            ) from None


def load_named(path: str) -> Ledger:
    """Read the ledger a command line names; one-line :class:`CommandLineError` if unusable.

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
        raise unreadable(path, str(exc)) from None
    # a loader that fails in an unforeseen way must still give one line, not a traceback
    except (ValueError, OverflowError, RecursionError, MemoryError) as exc:
        raise unreadable(path, f"not a readable ledger ({type(exc).__name__}: {exc})") from None
    if not ledger.exists:  # removed between the checks and the read
        raise CommandLineError(f"{path}: no such file")
    _check_figures(ledger, path)
    return ledger
