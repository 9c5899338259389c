"""Programs as codecs: ``CommandCodec`` runs an encoder program and a decoder program.

A codec that exists as an executable (a C tool, a script, a build of the
team's reference encoder) is tested as it ships: the symbols go to the encoder
program on its standard input and the stream is what it writes to standard
output; the decoder program gets the stream on standard input and writes the
symbols back. The rate is ``8 · len(stream)``.

The symbols on standard input are written in the layout ``symbol``:

* a byte layout of :mod:`pytest_ratefloor.layouts` (``"u8"``, ``"bits"``,
  ``"u16le"``, ``"zigzag-u8"``, …) as for a ``ByteCodec``, ``"auto"`` (the
  default) resolved from the source when the checks bind the codec to it;
* ``"text"``: one decimal integer per line (``"-3\\n0\\n17\\n"``); the
  decoder's output is read as integers separated by any whitespace.

The decoder is told ``n`` (the number of symbols) in two ways: every ``{n}``
in its command's words is replaced by ``n``, and the environment variable
``RATEFLOOR_N`` holds it. Nothing else reaches it but the stream.

A command is an argv list (``["./rle", "-d", "{n}"]``) or a string split as a
POSIX shell would split words (``shlex.split``), with no shell in between:
there is no globbing, piping or variable expansion unless the command itself
is ``["sh", "-c", "..."]``. A program name without a slash is looked up on
``PATH``.

What fails a run (each a :class:`CommandError` naming the role, the command,
the exit status and the last :data:`STDERR_LINES` lines of its standard
error; the checks report it as a ``CodecMisbehaviour`` naming the codec, the
source, ``n`` and the seed): a program that cannot be started, a non-zero exit
status, death by a signal, any output on standard error unless
``stderr="allow"``, and a run longer than ``timeout`` seconds. Output of the
wrong size is a contract breach (:class:`~pytest_ratefloor.errors.CodecContractError`),
as for the other adapters. In the damaged-stream check a decoder program that
exits with an error status on a damaged stream has *detected* the damage
(the trial counts as raised), as a decompressor raising an exception would.
A decoder program killed by a signal there is reported as a crash, and one
killed for running past this codec's ``timeout`` as a hang (the worker reads
:attr:`CommandError.signal` and ``timed_out``).

Each program runs in a session, and so a process group, of its own; on a time
out (or any interruption, Ctrl-C included) the whole group is killed with
SIGKILL and the program reaped. Processes that leave the group (a daemon
calling ``setsid``), and processes still running after the program itself
exited with its output closed, are out of reach. One exception: when the
calling process leads its own session — the damaged-stream check's worker
does, so that one kill ends it and everything it started — the program stays
in the caller's group, where that kill reaches it; a time out then kills the
program itself. So in the damaged-stream check a decoder that hangs for
longer than the check's per-trial ``timeout`` (2 s by default, below this
codec's default of 10 s) is reported as a hang and its whole group ended,
with nothing left behind; with the codec's ``timeout`` below the check's, the
codec's own time limit ends the program and the trial is a hang all the same.

Processes a check starts — each encode and each decode runs the program once,
started directly (``fork``/``exec``, no shell), so a small compiled program
costs about a millisecond and a Python script about 10–30 ms:

* ``check(...)`` and ``assert_roundtrip(...)``: the encoder and the decoder
  on the sample, the encoder twice on the contract slice (mutation and
  determinism), then the encoder and the decoder once per edge case:
  ``4 + 2·E`` processes, where ``E`` is the number of edge cases run
  (:func:`pytest_ratefloor.edge_cases.edge_case_inputs`: all of them, the
  default, are at most 27 — 27 for a source with two or more symbols — so at
  most **58**; a smaller ``edge_cases`` setting runs fewer);
* ``measure``, ``assert_rate`` and ``edge_cases=False``: **4**;
* ``corruption=True`` adds one decoder run per damaged stream (200 by
  default), and one encoder run when ``n`` exceeds the damaged-stream check's
  10 000-symbol prefix; ``assert_survives_corruption`` runs the encoder once
  and the decoder once per trial.
"""

from __future__ import annotations

import contextlib
import os
import shlex
import signal
import subprocess
from collections.abc import Sequence
from typing import TYPE_CHECKING, Literal, get_args

import numpy as np

from pytest_ratefloor import validation
from pytest_ratefloor.codecs import Encoded, ReplayCall, check_name, check_version
from pytest_ratefloor.errors import CodecContractError, CommandError, LayoutError
from pytest_ratefloor.layouts import AUTO, LAYOUTS, pack, packed_size, resolve_layout, unpack

if TYPE_CHECKING:
    from pytest_ratefloor.sources import Source

__all__ = [
    "DEFAULT_TIMEOUT",
    "N_PLACEHOLDER",
    "N_VARIABLE",
    "STDERR_LINES",
    "TEXT",
    "Command",
    "CommandCodec",
    "CommandError",
    "StderrPolicy",
    "run_decoder",
]

#: A command: an argv list (items ``str`` or path-like) or a string split with ``shlex``.
Command = str | Sequence[str | os.PathLike[str]]
#: What output on standard error means: ``"fail"`` the run, or ``"allow"`` it.
StderrPolicy = Literal["fail", "allow"]
_STDERR_POLICIES: tuple[StderrPolicy, ...] = get_args(StderrPolicy)

#: The ``symbol`` value for decimal text, one integer per line.
TEXT = "text"
#: Seconds one run of a program may take (per encode or decode call).
DEFAULT_TIMEOUT = 10.0
#: Lines of a program's standard error that an error message shows (the last ones).
STDERR_LINES = 10
#: The placeholder for ``n`` in the decoder's command.
N_PLACEHOLDER = "{n}"
#: The environment variable that holds ``n`` for the decoder.
N_VARIABLE = "RATEFLOOR_N"

_WHERE = "CommandCodec"
_LINE_WIDTH = 200


# ---------------------------------------------------------------- arguments


def _argv(command: object, parameter: str) -> tuple[str, ...]:
    """A command as its words: a string split with ``shlex``, or a list of words."""
    rule = "an argv list of strings or a command-line string"
    if isinstance(command, str):
        try:
            words = shlex.split(command)
        except ValueError as exc:  # an unclosed quote
            raise ValueError(
                validation.message(parameter, f"a command line shlex can split ({exc})",
                                   command, _WHERE)
            ) from None
    elif isinstance(command, (list, tuple)):
        words = []
        for word in command:
            if isinstance(word, os.PathLike):
                word = os.fspath(word)
            if not isinstance(word, str):
                raise TypeError(validation.message(
                    parameter, f"{rule} (item {validation.show(word)} is not a string)",
                    command, _WHERE))
            words.append(word)
    else:
        raise TypeError(validation.message(parameter, rule, command, _WHERE))
    if not words or not words[0]:
        raise ValueError(validation.message(parameter, "a non-empty command", command, _WHERE))
    if any("\0" in word for word in words):
        raise ValueError(validation.message(parameter, "free of NUL characters", command, _WHERE))
    return tuple(words)


def _symbol(symbol: object) -> str:
    """``"auto"``, ``"text"`` or a layout name; anything else is a :class:`LayoutError`."""
    if symbol in (AUTO, TEXT):
        return str(symbol)
    if isinstance(symbol, str) and symbol in LAYOUTS:
        return symbol
    allowed = ", ".join(repr(name) for name in (AUTO, TEXT, *LAYOUTS))
    raise LayoutError(f"{_WHERE}: symbol must be one of {allowed}, got {symbol!r}")


def _shown(argv: Sequence[str]) -> str:
    """A command as a shell would read it back (for messages)."""
    return shlex.join(argv)


def _short(argv: Sequence[str]) -> str:
    """A command with paths cut to their last part: stable from machine to machine
    (for the default name and the layout text)."""
    return shlex.join(
        os.path.basename(word.rstrip(os.sep)) or word if os.sep in word else word
        for word in argv
    )


# ------------------------------------------------------------------ running


def _own_session() -> bool:
    """Whether a program should get a session of its own: yes, unless this process
    leads its own session (then whoever made it so ends its group, program included)."""
    getsid = getattr(os, "getsid", None)
    return getsid is None or getsid(0) != os.getpid()


def _end(proc: subprocess.Popen[bytes], group: bool) -> None:
    """SIGKILL the program (its whole process group when it has one of its own) and reap it.

    The group id is the program's pid, which cannot be reused before the program
    is reaped here; the pipes are closed first, so a process that escaped the
    group and keeps them open cannot hold up the wait.
    """
    killpg = getattr(os, "killpg", None)
    if group and killpg is not None:
        with contextlib.suppress(ProcessLookupError, PermissionError):
            killpg(proc.pid, signal.SIGKILL)
    with contextlib.suppress(ProcessLookupError):
        proc.kill()
    for stream in (proc.stdin, proc.stdout, proc.stderr):
        if stream is not None:
            with contextlib.suppress(OSError):
                stream.close()
    proc.wait()


def _printable(line: str) -> str:
    text = "".join(c if c.isprintable() else f"\\x{ord(c):02x}" for c in line)
    return text if len(text) <= _LINE_WIDTH else text[: _LINE_WIDTH - 3] + "..."


def _stderr_tail(stderr: bytes) -> str:
    """The last :data:`STDERR_LINES` lines of standard error, indented, for a message."""
    lines = stderr.decode("utf-8", "replace").rstrip().splitlines()
    if not lines:
        return "\n  stderr: (empty)"
    shown = lines[-STDERR_LINES:]
    which = f"last {len(shown)} of {len(lines)} lines" if len(shown) < len(lines) else (
        f"{len(lines)} line{'s' if len(lines) != 1 else ''}")
    return f"\n  stderr ({which}):" + "".join(f"\n    | {_printable(s)}" for s in shown)


def _exit_text(returncode: int) -> str:
    if returncode >= 0:
        return f"exited with status {returncode}"
    try:
        name = signal.Signals(-returncode).name
    except ValueError:
        name = f"signal {-returncode}"
    return f"was killed by {name}"


def _run(
    argv: tuple[str, ...],
    data: bytes,
    *,
    role: str,
    timeout: float,
    stderr: StderrPolicy,
    env: dict[str, str] | None = None,
) -> bytes:
    """Run ``argv`` once with ``data`` on standard input; its standard output.

    :raises CommandError: see the module docstring.
    """
    group = _own_session()
    what = f"{role} command `{_shown(argv)}`"
    try:
        proc = subprocess.Popen(
            argv,
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            env=env,
            start_new_session=group,
        )
    except OSError as exc:
        raise CommandError(f"cannot start {what}: {exc}", argv) from None
    try:
        out, err = proc.communicate(data, timeout=timeout)
    except subprocess.TimeoutExpired as exc:
        _end(proc, group)
        whom = "its process group was" if group else "it was"
        partial = exc.stderr if isinstance(exc.stderr, bytes) else b""
        raise CommandError(
            f"{what} did not finish within {timeout:g} s (or a process it started kept "
            f"its output open); {whom} killed with SIGKILL" + _stderr_tail(partial),
            argv, proc.returncode, partial, timed_out=True,
        ) from None
    finally:
        if proc.returncode is None:  # interrupted (Ctrl-C): leave nothing running
            _end(proc, group)
    if proc.returncode != 0:
        raise CommandError(
            f"{what} {_exit_text(proc.returncode)}" + _stderr_tail(err),
            argv, proc.returncode, err,
        )
    if err and stderr == "fail":
        raise CommandError(
            f"{what} wrote to standard error (exit status 0); pass stderr='allow' to the "
            "CommandCodec if that output is expected" + _stderr_tail(err),
            argv, proc.returncode, err,
        )
    return out


def _symbols_as_text(symbols: np.ndarray) -> bytes:
    values = np.asarray(symbols).tolist()
    return ("\n".join(map(str, values)) + "\n").encode("ascii") if values else b""


def _symbols_from_text(out: bytes, n: int, what: str) -> np.ndarray:
    words = out.split()
    try:
        values = [int(word) for word in words]
    except ValueError:
        index, word = next((i, w) for i, w in enumerate(words) if not _is_integer(w))
        raise CodecContractError(
            f"{what} wrote {validation.show(word.decode('utf-8', 'replace'))} as item {index}, "
            f"which is no integer; expected {n} decimal integers, one per line"
        ) from None
    if len(values) != n:
        raise CodecContractError(f"{what} wrote {len(values)} integers; expected n={n}")
    try:
        return np.array(values, dtype=np.int64)
    except OverflowError:
        raise CodecContractError(f"{what} wrote integers outside the int64 range") from None


def _is_integer(word: bytes) -> bool:
    try:
        int(word)
    except ValueError:
        return False
    return True


def _decode_with(
    argv: tuple[str, ...], data: bytes, n: int, symbol: str, timeout: float,
    stderr: StderrPolicy,
) -> np.ndarray:
    """One decoder run on checked arguments (``symbol`` resolved)."""
    words = tuple(word.replace(N_PLACEHOLDER, str(n)) for word in argv)
    env = {**os.environ, N_VARIABLE: str(n)}
    out = _run(words, data, role="decoder", timeout=timeout, stderr=stderr, env=env)
    what = f"decoder command `{_shown(words)}`"
    if symbol == TEXT:
        return _symbols_from_text(out, n, what)
    want = packed_size(n, symbol)
    if len(out) != want:
        raise CodecContractError(
            f"{what} wrote {len(out)} bytes; {n} symbols in layout {symbol!r} take {want} bytes"
        )
    return unpack(out, n, symbol)


def run_decoder(
    data: bytes,
    n: int,
    command: Command,
    symbol: str,
    *,
    timeout: float = DEFAULT_TIMEOUT,
    stderr: StderrPolicy = "fail",
) -> np.ndarray:
    """Run a decoder program once on ``data``, as :meth:`CommandCodec.decode` does:
    ``{n}`` in ``command`` and ``RATEFLOOR_N`` give ``n``; the output is read in the
    layout ``symbol`` (a layout name or ``"text"``). Returns ``n`` symbols (int64).

    A damaged-stream check's replay line calls this, so that it runs anywhere.

    :raises CommandError: the program failed (see the module docstring).
    :raises CodecContractError: its output has the wrong size or is no integers.
    """
    argv = _argv(command, "decode_cmd")
    n = validation.sample_size(n, minimum=0)
    layout = resolve_layout(symbol) if symbol != TEXT else TEXT
    return _decode_with(argv, bytes(data), n, layout,
                        validation.seconds(timeout), _stderr_policy(stderr))


def _stderr_policy(value: object) -> StderrPolicy:
    return validation.choice(value, "stderr", _STDERR_POLICIES, where=_WHERE)


# -------------------------------------------------------------------- codec


class CommandCodec:
    """An encoder program and a decoder program used as a codec.

    ``encode_cmd`` gets the symbols on standard input (in the layout ``symbol``)
    and writes the stream to standard output; ``decode_cmd`` gets the stream on
    standard input, ``n`` through ``{n}`` in its words and ``RATEFLOOR_N``, and
    writes the symbols. Either command is an argv list or a string split with
    ``shlex`` (no shell). ``timeout`` (seconds) bounds each run; ``stderr="allow"``
    accepts output on standard error, which otherwise fails the run. ``name``
    defaults to the encoder command with paths cut to their last part (give one
    to keep ledger entries stable when the command changes). See the module
    docstring for the failures and the number of processes a check starts.
    """

    def __init__(
        self,
        encode_cmd: Command,
        decode_cmd: Command,
        *,
        name: str | None = None,
        symbol: str = AUTO,
        timeout: float = DEFAULT_TIMEOUT,
        stderr: StderrPolicy = "fail",
        version: str | None = None,
    ) -> None:
        self._encode_argv = _argv(encode_cmd, "encode_cmd")
        self._decode_argv = _argv(decode_cmd, "decode_cmd")
        self.symbol = _symbol(symbol)
        self.timeout = validation.real(timeout, "timeout", minimum=0.0, low_open=True,
                                       where=_WHERE)
        self.stderr: StderrPolicy = _stderr_policy(stderr)
        self.name = check_name(name if name is not None else _short(self._encode_argv))
        self.version = check_version(version)
        self.symbols: list[int] | None = None
        # Set by for_source when the source's declared range fits the layout:
        # its samples then need no range scan.
        self._trusted = False

    @property
    def encode_cmd(self) -> tuple[str, ...]:
        """The encoder's argv."""
        return self._encode_argv

    @property
    def decode_cmd(self) -> tuple[str, ...]:
        """The decoder's argv (with ``{n}`` where ``n`` goes)."""
        return self._decode_argv

    @property
    def layout(self) -> str:
        """How the symbols reach the encoder, e.g. ``command `rle -c` (u8 on stdin)``
        (``auto`` until the codec is bound to a source)."""
        return f"command `{_short(self._encode_argv)}` ({self.symbol} on stdin)"

    def __repr__(self) -> str:
        return (
            f"CommandCodec({_shown(self._encode_argv)!r}, {_shown(self._decode_argv)!r}, "
            f"name={self.name!r}, symbol={self.symbol!r})"
        )

    def for_source(self, source: Source) -> CommandCodec:
        """This codec as used on ``source``: an ``"auto"`` layout resolved.

        When the source declares a finite range that fits the layout, the bound
        codec skips the per-call range scan of the symbols.
        """
        symbol = self.symbol if self.symbol == TEXT else resolve_layout(self.symbol, source)
        bound = CommandCodec(
            self._encode_argv, self._decode_argv, name=self.name, symbol=symbol,
            timeout=self.timeout, stderr=self.stderr, version=self.version,
        )
        lo, hi = source.min_symbol, source.max_symbol
        bound._trusted = (symbol != TEXT and lo is not None and hi is not None
                          and LAYOUTS[symbol].holds(lo, hi))
        return bound

    def _resolved(self) -> str:
        return self.symbol if self.symbol == TEXT else resolve_layout(self.symbol)

    def encode(self, symbols: np.ndarray) -> Encoded:
        """Write the symbols to the encoder program; its output is the stream (``8·len`` bits)."""
        symbol = self._resolved()
        if symbol == TEXT:
            data = _symbols_as_text(symbols)
        else:
            data = pack(symbols, symbol, trusted=self._trusted)
        out = _run(self._encode_argv, data, role="encoder", timeout=self.timeout,
                   stderr=self.stderr)
        return Encoded(payload=out, bits=8 * len(out))

    def decode(self, encoded: Encoded, n: int) -> np.ndarray:
        """Feed the stream to the decoder program and read back exactly ``n`` symbols."""
        return _decode_with(self._decode_argv, encoded.stream, n, self._resolved(),
                            self.timeout, self.stderr)

    def replay_call(self, payload: str, n: int) -> ReplayCall:
        """:func:`run_decoder` with this codec's decoder command and settings, written
        out in full so that the replay line runs anywhere."""
        args = (
            f"{payload}, {n}, {list(self._decode_argv)!r}, symbol={self.symbol!r}, "
            f"timeout={self.timeout!r}, stderr={self.stderr!r}"
        )
        return ReplayCall(run_decoder, args, role="decode")
