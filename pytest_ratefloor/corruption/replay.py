"""Replay files: damaged streams saved by a failed check, read back, and the
line that replays one.

A failed trial's damaged stream is saved as ``<stem>.bin`` with a
``<stem>.json`` sidecar: the payload shape of the stream
(:meth:`~pytest_ratefloor.codecs.PayloadShape.to_record`: ``shape``,
``nbits``, ``endian``) and what was done to it. :func:`load_damaged` reads a
saved stream back in the shape the encoder returned, through the same
:meth:`~pytest_ratefloor.codecs.PayloadShape.rebuild` the worker used, so the
replayed payload equals the one that failed.

The replay line (:func:`replay_lines`) must run as printed, so the decoder it
calls is named by something that reaches it, tried in this order:

1. its import path, when ``module.qualname`` leads back to the very object
   (module-level functions, builtins such as ``zlib.decompress``): the line runs
   anywhere;
2. for a ``functools.partial``, ``functools.partial(<its function>, <arguments>)``
   when the function has an import path and the arguments are literals;
3. a name bound to it in the calling test's module or function (a module-level
   ``DECODE = lambda ...``, a local ``codec = MyCodec()`` whose ``.decode`` was
   passed): the line runs in that module or function, and a note says which;
4. a module-level name in the module that defined it (``import m; m.CODEC.decode``);
5. for a bound method, the same for its instance (``codec.decode``); for a
   partial, the same for its function; for a codebook of up to
   :data:`TABLE_MAX` codewords, its table written out.

A decoder reached by none of these (a lambda or closure with no name in reach)
is called under the adapter's variable name (``decode``, ``decompress``,
``codebook``), and a second line says in plain words what to bind that name to.
"""

from __future__ import annotations

import ast
import functools
import itertools
import json
import keyword
import os
import re
import sys
import types
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from pytest_ratefloor.codecs import Codec, PayloadShape, ReplayCall
from pytest_ratefloor.codes import Codebook

__all__ = ["load_damaged", "replay_lines", "save_damaged", "stem_for"]

#: The import that replay lines start with (the package re-exports it).
_LOAD = "from pytest_ratefloor.corruption import load_damaged"

#: Frames of the caller searched for a name of the decoder, nearest first.
_CALLER_FRAMES = 4

#: A codebook of at most this many codewords is written out in full in a replay
#: line when it has no name the line can use (a longer table would bury the line).
TABLE_MAX = 32


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


@dataclass(frozen=True)
class _Reference:
    """An expression that gives the decoder, the imports it needs, and where it
    holds (``""``: anywhere)."""

    expression: str
    imports: tuple[str, ...] = ()
    scope: str = ""


def replay_lines(codec: Codec, path: Path, n: int) -> list[str]:
    """The line that feeds the saved stream at ``path`` to the codec's decoder
    (``replay: ...``), and a note when the line holds only in some scope or needs a
    name bound first (see the module docstring)."""
    call = codec.replay_call(f"load_damaged({str(path)!r})", n)
    try:
        found = _reference(call.target, _caller_frames()) or _written_table(call.target)
    except Exception:  # user objects with odd attributes: the failure must still be told
        found = None
    if found is None:
        return [
            f"replay: {_LOAD}; {call.call(call.role)}",
            f"({call.role}: {_describe(call.target)}, which the line cannot name; "
            f"bind {call.role} = <{_what(call)} you passed> first)",
        ]
    head = "; ".join(dict.fromkeys((_LOAD, *found.imports)))
    lines = [f"replay: {head}; {call.call(found.expression)}"]
    if found.scope:
        lines.append(f"(runs {found.scope})")
    return lines


def _what(call: ReplayCall) -> str:
    return {"decode": "the decoder", "decompress": "the decompressor"}.get(
        call.role, f"the {call.role}"
    )


# ---------------------------------------------------------------------- naming


def _caller_frames() -> list[types.FrameType]:
    """The frames that called into this package (the test and its helpers), nearest
    first, stopping at pytest's own machinery."""
    frames: list[types.FrameType] = []
    frame = sys._getframe(1)
    while frame is not None and len(frames) < _CALLER_FRAMES:
        module = str(frame.f_globals.get("__name__", ""))
        if module.split(".")[0] in ("_pytest", "pluggy", "pytest"):
            break
        if module.split(".")[0] != "pytest_ratefloor":
            frames.append(frame)
        frame = frame.f_back  # type: ignore[assignment]
    return frames


def _reference(target: object, frames: list[types.FrameType]) -> _Reference | None:
    """An expression giving ``target`` (see the module docstring for the order)."""
    found = _import_path(target)
    if found is None and isinstance(target, functools.partial):
        written = _partial(target, frames)
        found = written if written is not None and not written.scope else None
    found = found or _name_in_frames(target, frames) or _module_name(target)
    if found is not None:
        return found
    owner = getattr(target, "__self__", None)
    method = getattr(target, "__name__", None)
    if owner is not None and owner is not target and not isinstance(owner, types.ModuleType) \
            and isinstance(method, str):
        if getattr(owner, method, None) == target:
            base = _reference(owner, frames)
            if base is not None:
                return _Reference(f"{base.expression}.{method}", base.imports, base.scope)
        return None
    if isinstance(target, functools.partial):
        return _partial(target, frames)
    return None


def _import_path(target: object) -> _Reference | None:
    """``module.qualname`` when it leads back to ``target`` itself."""
    module = getattr(target, "__module__", None)
    qualname = getattr(target, "__qualname__", None)
    if not isinstance(module, str) or not isinstance(qualname, str) or "<" in qualname:
        return None
    if module in ("__main__", "builtins") or module not in sys.modules:
        return None
    obj: Any = sys.modules[module]
    for part in qualname.split("."):
        obj = getattr(obj, part, None)
    if obj is not target:
        return None
    return _Reference(f"{module}.{qualname}", (f"import {module}",))


def _names_of(target: object, namespace: Mapping[str, Any]) -> Iterator[str]:
    for name, value in list(namespace.items()):
        if value is target and name.isidentifier() and not keyword.iskeyword(name):
            yield name


def _name_in_frames(target: object, frames: list[types.FrameType]) -> _Reference | None:
    """A name bound to ``target`` in the caller's module, else in a caller's function."""
    if not frames:
        return None
    module = frames[0].f_globals
    for name in _names_of(target, module):
        return _Reference(name, (), f"in {_module_place(module)}")
    for frame in frames:
        for name in _names_of(target, frame.f_locals):
            code = frame.f_code
            where = f"{_short_path(code.co_filename)}:{frame.f_lineno}"
            return _Reference(name, (), f"in {code.co_name} ({where}), where {name} is local")
    return None


def _module_name(target: object) -> _Reference | None:
    """A module-level name bound to ``target`` (or, for an instance, in the module of
    its class), reached by importing that module."""
    modules = [getattr(target, "__module__", None), type(target).__module__]
    for module in dict.fromkeys(m for m in modules if isinstance(m, str)):
        if module in ("__main__", "builtins") or module not in sys.modules:
            continue
        for name in _names_of(target, vars(sys.modules[module])):
            return _Reference(f"{module}.{name}", (f"import {module}",))
    return None


def _literal(value: object) -> str | None:
    """``repr(value)`` when it reads back as an equal literal, else None."""
    text = repr(value)
    try:
        same = ast.literal_eval(text) == value
    except (ValueError, SyntaxError, TypeError, MemoryError, RecursionError):
        return None
    return text if same else None


def _partial(target: functools.partial[Any], frames: list[types.FrameType]) -> _Reference | None:
    """``functools.partial(<function>, <literal arguments>)``."""
    base = _reference(target.func, frames)
    if base is None:
        return None
    args = [_literal(a) for a in target.args]
    keywords = {k: _literal(v) for k, v in target.keywords.items()}
    if any(a is None for a in args) or any(v is None for v in keywords.values()):
        return None
    parts = [base.expression, *map(str, args), *(f"{k}={v}" for k, v in keywords.items())]
    return _Reference(
        f"functools.partial({', '.join(parts)})", ("import functools", *base.imports), base.scope
    )


def _written_table(target: object) -> _Reference | None:
    """``Codebook({...}, name=...)`` for a codebook of at most :data:`TABLE_MAX`
    codewords (its table written out: an equal codebook, built from scratch)."""
    if not isinstance(target, Codebook) or len(target) > TABLE_MAX:
        return None
    table = ", ".join(f"{s}: {target.word(s)!r}" for s in target.symbols)
    return _Reference(
        f"Codebook({{{table}}}, name={target.name!r})",
        ("from pytest_ratefloor.codes import Codebook",),
    )


def _short_path(filename: str) -> str:
    try:
        return os.path.relpath(filename)
    except ValueError:  # another drive (Windows)
        return filename


def _module_place(namespace: Mapping[str, Any]) -> str:
    filename = namespace.get("__file__")
    module = namespace.get("__name__", "the test module")
    return _short_path(filename) if isinstance(filename, str) else str(module)


def _describe(target: object) -> str:
    """What ``target`` is, in words, for the note of a line that cannot name it."""
    if isinstance(target, functools.partial):
        return f"a functools.partial of {_describe(target.func)}"
    owner = getattr(target, "__self__", None)
    method = getattr(target, "__name__", None)
    if owner is not None and not isinstance(owner, types.ModuleType) and method:
        return f"the {method} method of a {type(owner).__qualname__} instance"
    code = getattr(target, "__code__", None)
    qualname = getattr(target, "__qualname__", None)
    if isinstance(code, types.CodeType) and isinstance(qualname, str):
        where = f"defined at {_short_path(code.co_filename)}:{code.co_firstlineno}"
        if qualname.endswith("<lambda>"):
            return f"a lambda {where}"
        if "<locals>" in qualname:
            return f"the nested function {qualname} {where}"
        return f"the function {qualname} {where}"
    if isinstance(qualname, str):
        return qualname
    text = repr(target)
    if not text.startswith("<") and len(text) <= 100:  # a repr of its own, e.g. a Codebook's
        return text
    return f"a {type(target).__qualname__} object"
