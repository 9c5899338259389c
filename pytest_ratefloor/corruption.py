"""Robustness of a decoder against damaged streams.

This module holds the corruption check: a deterministic schedule of damage
(truncations, single and burst bit flips, appended garbage, random bytes of
the same length), the isolated worker process that feeds each damaged stream
to the decoder, and :func:`assert_survives_corruption`, which turns what went
wrong into a :class:`~pytest_ratefloor.errors.CorruptionFailure` with a
replay file.

What counts as surviving
    For every damaged stream the decoder must return within ``timeout``
    seconds and either raise an ordinary exception (any ``Exception`` other
    than ``MemoryError``) or return something. A wrong result is acceptable,
    because a format without an integrity check cannot know. With
    ``must_detect=True`` (formats that promise detection, e.g. with a
    checksum) returning anything other than the original symbols is a
    failure; returning the original exactly (as decoders that ignore trailing
    garbage do) is not.

    A failure is one of: ``hang`` (no answer within the timeout), ``crash``
    (the interpreter died: a signal such as SIGSEGV/SIGABRT, or an exit),
    ``memory`` (``MemoryError`` once the worker's address space grew past
    ``memory_limit``, or the worker was killed by SIGKILL, which is what the
    kernel's out-of-memory killer sends), ``exit`` (the decoder raised
    ``SystemExit``/``KeyboardInterrupt``, which would end a test session) and
    ``silent`` (must-detect mode only: wrong data returned without an error).

Isolation
    Decodes run in one worker process that runs the trials one after another
    and reports each outcome over a pipe; the parent waits at most
    ``timeout`` for each report. A hung worker is killed, a dead one is
    reaped, the trial is recorded as failed, and a fresh worker continues
    with the next trial. On Linux (and other non-macOS systems that have it)
    the worker is started with ``fork``: it inherits the decoder, so closures
    and lambdas defined in test files work. Elsewhere (macOS, where ``fork``
    is unsafe with system libraries, and Windows) it is started with
    ``spawn``, which needs the decoder to pickle; if it does not, a
    :class:`CorruptionSetupError` says so. There is deliberately no
    in-process fallback: a hang there would stall the whole test session,
    the very thing the check exists to prevent. When the worker dies of a
    signal, ``faulthandler`` prints its Python traceback (the decoder's frame
    on top) to standard error, which pytest captures and shows with the
    failure. A run stops after :data:`MAX_FAILURES` failed trials.

Memory limit
    ``memory_limit`` bytes is the growth allowed to the worker's address
    space beyond what it holds when it starts (the forked copy of the test
    process). On Linux it is enforced with ``setrlimit(RLIMIT_AS)``, so an
    unbounded allocation raises ``MemoryError`` (or kills a C extension that
    does not check ``malloc``). Where ``RLIMIT_AS`` is not available or not
    enforced (macOS, Windows) the worker instead compares its peak resident
    size after each trial with the limit, which catches growth after the
    fact but cannot stop an allocation that exhausts the machine.

Bit-level payloads
    The schedule damages bytes. When the encoder returns a ``bitarray`` the
    check corrupts ``payload.tobytes()`` and passes a ``bitarray`` of the same
    endianness back to the decoder, of length ``8 * len(damaged) - pad``
    where ``pad`` is the number of padding bits of the original (so an
    unchanged length keeps the exact bit count, a truncation removes whole
    bytes from the end and appended garbage adds 8 bits per byte). A
    ``(bytes, nbits)`` payload is handled the same way and passed back as a
    ``(bytes, nbits)`` pair. Flips that land in padding bits change nothing.
"""

from __future__ import annotations

import contextlib
import dataclasses
import faulthandler
import io
import itertools
import json
import math
import multiprocessing
import os
import pickle
import re
import signal
import sys
import tempfile
import time
from collections import Counter
from collections.abc import Callable, Iterable, Iterator, Sequence
from dataclasses import dataclass
from multiprocessing.connection import Connection
from pathlib import Path
from typing import Any, Literal, cast

import numpy as np
from bitarray import bitarray

from pytest_ratefloor.errors import CodecMisbehaviour, CorruptionFailure, CorruptionSetupError

__all__ = [
    "DEFAULT_MEMORY_LIMIT",
    "Corruption",
    "CorruptionRun",
    "CorruptionSetupError",
    "TrialOutcome",
    "assert_survives_corruption",
    "corruption_schedule",
    "load_damaged",
    "run_corruption_trials",
]

#: Default growth of the worker's address space allowed per run (1 GiB).
DEFAULT_MEMORY_LIMIT = 1 << 30

#: A run stops after this many failed trials: each hang costs a full timeout,
#: and the first few failures are what a maintainer acts on.
MAX_FAILURES = 5

CorruptionKind = Literal["truncate", "flip", "burst", "append", "random"]
_KINDS: tuple[str, ...] = ("truncate", "flip", "burst", "append", "random")

#: Outcome of one trial. The first four are survivals.
Status = Literal["returned", "original", "raised", "hang", "crash", "memory", "exit", "silent"]
FAILING_STATUSES = frozenset({"hang", "crash", "memory", "exit", "silent"})

_STATUS_TITLES = {
    "hang": "hang",
    "crash": "crash",
    "memory": "memory growth past the limit",
    "exit": "interpreter exit",
    "silent": "silently wrong data",
}


_STATUS_COUNTED = {
    "hang": "hung",
    "crash": "crashed",
    "memory": "grew memory past the limit",
    "exit": "ended the interpreter",
    "silent": "returned wrong data silently",
}



# --------------------------------------------------------------------------
# corruptions


def _check_int(name: str, value: object, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise TypeError(f"{name} must be an integer, got {value!r}")
    if value < minimum:
        raise ValueError(f"{name} must be >= {minimum}, got {value!r}")
    return int(value)


def _garbage(key: int, count: int) -> bytes:
    """``count`` pseudo-random bytes from ``PCG64(key)`` raw words, little-endian."""
    if count == 0:
        return b""
    words = np.random.PCG64(key).random_raw((count + 7) // 8)
    return words.astype("<u8").tobytes()[:count]


@dataclass(frozen=True)
class Corruption:
    """One deterministic piece of damage to a stream of ``stream_length`` bytes.

    Fields:

    * ``kind``: ``"truncate"`` (keep the first ``offset`` bytes), ``"flip"``
      (one bit inverted), ``"burst"`` (several bits inverted inside a short
      span, first and last always), ``"append"`` (``length`` garbage bytes
      after the end), ``"random"`` (every byte replaced by garbage).
    * ``offset``: first byte touched (for ``truncate`` the number of bytes kept).
    * ``length``: bytes cut (truncate), spanned (flip/burst), appended (append)
      or replaced (random).
    * ``bits``: stream bit positions inverted; bit ``i`` is bit ``i % 8`` of
      byte ``i // 8`` counted from the most significant (mask ``0x80 >> i % 8``),
      the numbering of a big-endian ``bitarray``.
    * ``key``: seed of the ``PCG64`` generator whose raw words (little-endian)
      are the garbage bytes of ``append``/``random``.

    Build them with :meth:`truncate`, :meth:`flip`, :meth:`burst`,
    :meth:`append` and :meth:`randomize`, or get a whole schedule from
    :func:`corruption_schedule`.
    """

    kind: CorruptionKind
    stream_length: int
    offset: int
    length: int
    bits: tuple[int, ...] = ()
    key: int = 0

    def __post_init__(self) -> None:
        if self.kind not in _KINDS:
            raise ValueError(f"kind must be one of {', '.join(_KINDS)}; got {self.kind!r}")
        _check_int("stream_length", self.stream_length, 0)
        _check_int("offset", self.offset, 0)
        _check_int("length", self.length, 0)
        _check_int("key", self.key, 0)
        total_bits = 8 * self.stream_length
        for bit in self.bits:
            _check_int("bit position", bit, 0)
            if bit >= total_bits:
                raise ValueError(
                    f"bit position {bit} is outside a stream of {self.stream_length} bytes"
                )
        if list(self.bits) != sorted(set(self.bits)):
            raise ValueError(f"bits must be strictly increasing, got {self.bits!r}")

    # -- constructors -----------------------------------------------------

    @classmethod
    def truncate(cls, stream_length: int, keep: int) -> Corruption:
        """Keep the first ``keep`` bytes (0 <= keep < stream_length)."""
        stream_length = _check_int("stream_length", stream_length, 1)
        keep = _check_int("keep", keep, 0)
        if keep >= stream_length:
            raise ValueError(
                f"keep must be below stream_length={stream_length} to cut anything, got {keep}"
            )
        return cls("truncate", stream_length, keep, stream_length - keep)

    @classmethod
    def flip(cls, stream_length: int, bit: int) -> Corruption:
        """Invert stream bit ``bit`` (see the class docstring for the numbering)."""
        stream_length = _check_int("stream_length", stream_length, 1)
        bit = _check_int("bit", bit, 0)
        if bit >= 8 * stream_length:
            raise ValueError(
                f"bit must be below {8 * stream_length} (8 * stream_length), got {bit}"
            )
        return cls("flip", stream_length, bit // 8, 1, (bit,))

    @classmethod
    def burst(cls, stream_length: int, bits: Iterable[int]) -> Corruption:
        """Invert two or more stream bits (a burst: confined to a short span)."""
        stream_length = _check_int("stream_length", stream_length, 1)
        positions = tuple(sorted({_check_int("bit", b, 0) for b in bits}))
        if len(positions) < 2:
            raise ValueError(f"a burst flips at least 2 distinct bits, got {positions!r}")
        first, last = positions[0], positions[-1]
        return cls("burst", stream_length, first // 8, last // 8 - first // 8 + 1, positions)

    @classmethod
    def append(cls, stream_length: int, count: int, key: int) -> Corruption:
        """Append ``count`` garbage bytes drawn from ``PCG64(key)``."""
        stream_length = _check_int("stream_length", stream_length, 0)
        count = _check_int("count", count, 1)
        return cls("append", stream_length, stream_length, count, (), _check_int("key", key, 0))

    @classmethod
    def randomize(cls, stream_length: int, key: int) -> Corruption:
        """Replace every byte with garbage drawn from ``PCG64(key)`` (same length)."""
        stream_length = _check_int("stream_length", stream_length, 1)
        return cls("random", stream_length, 0, stream_length, (), _check_int("key", key, 0))

    # -- use ----------------------------------------------------------------

    @property
    def damaged_length(self) -> int:
        """Length in bytes of the damaged stream."""
        if self.kind == "truncate":
            return self.offset
        if self.kind == "append":
            return self.stream_length + self.length
        return self.stream_length

    def apply(self, data: bytes) -> bytes:
        """Return a damaged copy of ``data`` (which must be ``stream_length`` bytes)."""
        data = bytes(data)
        if len(data) != self.stream_length:
            raise ValueError(
                f"this corruption was made for a stream of {self.stream_length} bytes; "
                f"data has {len(data)}"
            )
        if self.kind == "truncate":
            return data[: self.offset]
        if self.kind == "append":
            return data + _garbage(self.key, self.length)
        if self.kind == "random":
            return _garbage(self.key, self.stream_length)
        damaged = bytearray(data)
        for bit in self.bits:
            damaged[bit // 8] ^= 0x80 >> (bit % 8)
        return bytes(damaged)

    def describe(self) -> str:
        """One readable line naming the damage exactly."""
        n = self.stream_length
        if self.kind == "truncate":
            if self.offset == 0:
                return f"truncate: all {n} bytes cut (empty stream)"
            return f"truncate: kept the first {self.offset} of {n} bytes ({self.length} cut)"
        if self.kind == "flip":
            (bit,) = self.bits
            return (
                f"flip: stream bit {bit} inverted "
                f"(byte {bit // 8} of {n}, mask 0x{0x80 >> (bit % 8):02x})"
            )
        if self.kind == "burst":
            first, last = self.bits[0], self.bits[-1]
            where = (
                f"byte {self.offset}"
                if self.length == 1
                else f"bytes {self.offset}..{self.offset + self.length - 1}"
            )
            listed = ", ".join(str(b) for b in self.bits)
            return (
                f"burst: {len(self.bits)} bits inverted within stream bits {first}..{last} "
                f"({where} of {n}): bits {listed}"
            )
        if self.kind == "append":
            return (
                f"append: {self.length} garbage bytes after the {n}-byte stream "
                f"(PCG64 key 0x{self.key:016x})"
            )
        return f"random: all {n} bytes replaced by garbage (PCG64 key 0x{self.key:016x})"


class _Words:
    """Raw 64-bit words of ``PCG64(seed)``, drawn in blocks (numpy promises this
    stream is stable across releases; the mapping to corruptions is our own)."""

    def __init__(self, seed: int) -> None:
        self._bitgen = np.random.PCG64(seed)
        self._block: list[int] = []

    def next(self) -> int:
        if not self._block:
            self._block = [int(w) for w in self._bitgen.random_raw(64)][::-1]
        return self._block.pop()

    def below(self, m: int) -> int:
        """A number in ``[0, m)``: multiply-shift of one word (bias below 2**-40 for m < 2**24)."""
        return (self.next() * m) >> 64


def _region_byte(words: _Words, stream_length: int) -> int:
    """A byte position: half the time anywhere, a quarter in the first 16 bytes
    (headers, tables), a quarter in the last 16 (trailers, checksums, final flush)."""
    region = words.below(4)
    span = min(stream_length, 16)
    if region == 2:
        return words.below(span)
    if region == 3:
        return stream_length - 1 - words.below(span)
    return words.below(stream_length)


def _draw_truncate(words: _Words, stream_length: int) -> Corruption:
    return Corruption.truncate(stream_length, _region_byte(words, stream_length))


def _draw_flip(words: _Words, stream_length: int) -> Corruption:
    byte = _region_byte(words, stream_length)
    return Corruption.flip(stream_length, 8 * byte + words.below(8))


def _draw_burst(words: _Words, stream_length: int) -> Corruption:
    total = 8 * stream_length
    width = min(2 + words.below(31), total)  # 2..32 bits
    start = words.below(total - width + 1)
    inner = words.next()
    bits = [start, start + width - 1]
    bits += [start + j for j in range(1, width - 1) if (inner >> (j - 1)) & 1]
    return Corruption.burst(stream_length, bits)


def _draw_append(words: _Words, stream_length: int) -> Corruption:
    count = 1 + words.below(64)
    return Corruption.append(stream_length, count, words.next())


def _draw_random(words: _Words, stream_length: int) -> Corruption:
    return Corruption.randomize(stream_length, words.next())


def _cut_all(words: _Words, stream_length: int) -> Corruption:
    return Corruption.truncate(stream_length, 0)


def _cut_last_byte(words: _Words, stream_length: int) -> Corruption:
    return Corruption.truncate(stream_length, stream_length - 1)


_Draw = Callable[[_Words, int], Corruption]
# Every kind appears within the first trials, so even a short run covers them.
_OPENING: tuple[_Draw, ...] = (
    _cut_all,
    _cut_last_byte,
    _draw_flip,
    _draw_append,
    _draw_random,
    _draw_burst,
)
_ROTATION: tuple[_Draw, ...] = (
    _draw_truncate,
    _draw_flip,
    _draw_burst,
    _draw_truncate,
    _draw_flip,
    _draw_append,
    _draw_truncate,
    _draw_flip,
    _draw_burst,
    _draw_random,
)


def corruption_schedule(stream_length: int, trials: int, seed: int = 0) -> list[Corruption]:
    """The deterministic list of corruptions for a stream of ``stream_length`` bytes.

    The same arguments give the same list on every platform and numpy release:
    positions, widths and garbage keys come from the raw 64-bit words of
    ``numpy.random.PCG64(seed)`` through the project's own mapping. The list
    opens with the edge cases (all bytes cut, one byte short, a flip, appended
    garbage, random bytes, a burst), then cycles truncations (30 %), single
    flips (30 %), bursts (20 %), appends (10 %) and random replacements (10 %).
    A duplicate is redrawn (up to 8 times) and then dropped, so a tiny stream
    may get fewer than ``trials`` entries; an empty stream only gets appends.
    """
    stream_length = _check_int("stream_length", stream_length, 0)
    trials = _check_int("trials", trials, 1)
    seed = _check_int("seed", seed, 0)
    words = _Words(seed)
    draws: Iterator[_Draw]
    if stream_length == 0:
        draws = itertools.repeat(_draw_append)
    else:
        draws = itertools.chain(_OPENING, itertools.cycle(_ROTATION))
    schedule: list[Corruption] = []
    seen: set[Corruption] = set()
    for turn, draw in enumerate(draws):
        if len(schedule) >= trials or turn >= 2 * trials + 16:
            break
        for _ in range(8):  # redraw the same kind on a duplicate, so the mix holds
            corruption = draw(words, stream_length)
            if corruption not in seen:
                seen.add(corruption)
                schedule.append(corruption)
                break
    return schedule


# --------------------------------------------------------------------------
# the encoded stream and its damaged forms


@dataclass(frozen=True)
class _Stream:
    """An encoded stream as bytes, plus what is needed to hand damaged bytes back
    to the decoder in the shape the encoder produced."""

    data: bytes
    shape: Literal["bytes", "bitarray", "pair"]
    nbits: int
    endian: str = "big"

    @classmethod
    def from_payload(cls, payload: object, what: str) -> _Stream:
        if isinstance(payload, (bytes, bytearray, memoryview)):
            data = bytes(payload)
            return cls(data, "bytes", 8 * len(data))
        if isinstance(payload, bitarray):
            return cls(payload.tobytes(), "bitarray", len(payload), payload.endian)
        if (
            isinstance(payload, tuple)
            and len(payload) == 2
            and isinstance(payload[0], (bytes, bytearray, memoryview))
            and isinstance(payload[1], (int, np.integer))
        ):
            data, nbits = bytes(payload[0]), int(payload[1])
            if not 0 <= nbits <= 8 * len(data) or 8 * len(data) - nbits >= 8:
                raise CodecMisbehaviour(
                    f"{what} returned ({len(data)} bytes, nbits={nbits}): "
                    f"nbits must be within the last byte of the data"
                )
            return cls(data, "pair", nbits)
        raise CodecMisbehaviour(
            f"{what} returned {type(payload).__name__}; expected bytes, bytearray, "
            f"memoryview, bitarray or (bytes, nbits)"
        )

    @property
    def pad(self) -> int:
        return 8 * len(self.data) - self.nbits

    def damaged_bits(self, damaged: bytes) -> int:
        """Bit count handed to the decoder for ``damaged`` (see the module docstring)."""
        return max(0, 8 * len(damaged) - self.pad)

    def rebuild(self, damaged: bytes) -> Any:
        """The damaged stream in the shape the encoder returned."""
        if self.shape == "bytes":
            return damaged
        nbits = self.damaged_bits(damaged)
        if self.shape == "pair":
            return (damaged, nbits)
        bits = bitarray(endian=self.endian)
        bits.frombytes(damaged)
        del bits[nbits:]
        return bits


# --------------------------------------------------------------------------
# the worker process


@dataclass(frozen=True)
class _Job:
    """Everything the worker needs; inherited under fork, pickled under spawn."""

    decode: Callable[[Any, int], Any]
    stream: _Stream
    n: int
    schedule: tuple[Corruption, ...]
    expected: np.ndarray | None  # the original symbols, in must-detect mode
    memory_limit: int | None


def _vm_size() -> int | None:
    """Current address-space size of this process in bytes (Linux), else None."""
    try:
        with open("/proc/self/statm") as fh:
            pages = int(fh.read().split()[0])
        return pages * os.sysconf("SC_PAGE_SIZE")
    except (OSError, ValueError, IndexError, AttributeError):
        return None


def _peak_rss() -> int | None:
    """Peak resident size of this process in bytes, where ``resource`` exists."""
    try:
        import resource
    except ImportError:
        return None
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return int(peak) if sys.platform == "darwin" else int(peak) * 1024  # macOS: bytes; else KiB


def _guard_memory(limit: int | None) -> tuple[str, int | None]:
    """Limit the worker's memory. Returns the guard used and, for the peak-RSS
    guard, the RSS ceiling to compare with after each trial."""
    try:
        import resource
    except ImportError:
        resource = None  # type: ignore[assignment]
    if resource is not None:
        with contextlib.suppress(ValueError, OSError):
            # No core files from decoders that crash on purpose-built damage.
            resource.setrlimit(
                resource.RLIMIT_CORE, (0, resource.getrlimit(resource.RLIMIT_CORE)[1])
            )
    if limit is None:
        return "none", None
    base = _vm_size()
    if resource is not None and base is not None and sys.platform.startswith("linux"):
        _soft, hard = resource.getrlimit(resource.RLIMIT_AS)
        ceiling = base + limit
        if hard != resource.RLIM_INFINITY:
            ceiling = min(ceiling, hard)
        try:
            resource.setrlimit(resource.RLIMIT_AS, (ceiling, hard))
            return "address-space", None
        except (ValueError, OSError):
            pass
    rss = _peak_rss()
    if rss is None:
        return "none", None
    return "peak-rss", rss + limit


def _same_symbols(result: object, expected: np.ndarray) -> tuple[bool, str]:
    """Whether a decode result equals the original symbols, and if not, how it differs."""
    try:
        got = np.asarray(result)
    except Exception as exc:
        return False, f"returned {type(result).__name__} that is not a sequence of symbols ({exc})"
    if got.ndim != 1:
        return False, f"returned {type(result).__name__} of shape {got.shape}"
    if got.shape[0] != expected.shape[0]:
        return False, f"returned {got.shape[0]} symbols instead of {expected.shape[0]}"
    try:
        equal = got == expected
    except Exception as exc:
        return False, f"returned values that cannot be compared with symbols ({exc})"
    if np.all(equal):
        return True, ""
    index = int(np.argmin(equal))
    value = got[index].item() if isinstance(got[index], np.generic) else got[index]
    return False, (
        f"returned {got.shape[0]} symbols without an error; first difference at "
        f"index {index}: expected {expected[index]}, got {value!r}"
    )


def _exception_name(exc: BaseException) -> str:
    cls = type(exc)
    module = cls.__module__
    return (
        cls.__qualname__ if module in ("builtins", "__main__") else f"{module}.{cls.__qualname__}"
    )


def _one_trial(job: _Job, index: int, rss_ceiling: int | None) -> tuple[Status, str]:
    corruption = job.schedule[index]
    payload = job.stream.rebuild(corruption.apply(job.stream.data))
    try:
        result = job.decode(payload, job.n)
    except MemoryError as exc:
        return "memory", f"raised {_exception_name(exc)}: {exc}".rstrip(": ")
    except Exception as exc:
        return "raised", _exception_name(exc)
    except BaseException as exc:  # SystemExit, KeyboardInterrupt, GeneratorExit
        return "exit", f"raised {_exception_name(exc)}({exc!s}), which would end a test session"
    if rss_ceiling is not None:
        peak = _peak_rss()
        if peak is not None and peak > rss_ceiling:
            return "memory", f"peak resident size reached {peak} bytes"
    if job.expected is None:
        return "returned", ""
    if isinstance(result, _WrongReturn):
        return "silent", f"returned without an error, but {result.message}"
    same, how = _same_symbols(result, job.expected)
    return ("original", "") if same else ("silent", how)


def _worker_main(conn: Connection, job: _Job, start: int) -> None:
    """Worker entry point: run trials ``start..`` in order, one message each."""
    with contextlib.suppress(ValueError, OSError, AttributeError):
        signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is the parent's to handle
    with contextlib.suppress(ValueError, OSError, AttributeError, io.UnsupportedOperation):
        # On a fatal signal, print the decoder's Python traceback to file descriptor 2,
        # which pytest captures and shows beside the failure.
        faulthandler.enable(file=sys.__stderr__ or sys.stderr)
    guard, rss_ceiling = _guard_memory(job.memory_limit)
    conn.send(("ready", guard))
    for index in range(start, len(job.schedule)):
        status, detail = _one_trial(job, index, rss_ceiling)
        conn.send((index, status, detail))
    conn.close()


def _start_method(requested: str | None) -> str:
    if requested is not None:
        if requested not in multiprocessing.get_all_start_methods():
            raise ValueError(
                f"start_method {requested!r} is not available here; "
                f"choose from {multiprocessing.get_all_start_methods()}"
            )
        return requested
    if "fork" in multiprocessing.get_all_start_methods() and sys.platform != "darwin":
        return "fork"
    return "spawn"


def _check_picklable(job: _Job, method: str) -> None:
    try:
        pickle.dumps(job)
    except Exception as exc:
        raise CorruptionSetupError(
            f"the corruption check runs the decoder in a worker process; on this platform "
            f"it is started with {method!r}, which needs the decoder to pickle, and "
            f"{job.decode!r} does not ({type(exc).__name__}: {exc}). Define the decoder "
            f"(and what it refers to) at module level, or run the check on Linux, where "
            f"the worker is forked and closures work."
        ) from exc


def _signal_name(number: int) -> str:
    try:
        return signal.Signals(number).name
    except ValueError:
        return f"signal {number}"


def _death(code: int | None) -> tuple[Status, str]:
    """Classify the death of a worker in the middle of a trial."""
    sigkill = getattr(signal, "SIGKILL", None)
    if sigkill is not None and code == -sigkill:
        return "memory", (
            "the worker was killed by SIGKILL, which the kernel's out-of-memory killer "
            "sends when memory runs out"
        )
    return "crash", f"the worker process {_Worker.exit_text(code)}"


class _Worker:
    """One worker process and the parent's end of its pipe."""

    def __init__(self, ctx: Any, job: _Job, start: int, startup_timeout: float) -> None:
        self.receiver, sender = ctx.Pipe(duplex=False)
        self.process = ctx.Process(
            target=_worker_main, args=(sender, job, start), name="ratefloor-corruption"
        )
        with _quiet_fork_warning():
            self.process.start()
        sender.close()  # so that the worker's death reads as EOF here
        self.guard = "none"
        if not self.receiver.poll(startup_timeout):
            self.stop()
            raise CorruptionSetupError(
                f"the corruption worker did not start within {startup_timeout:g} s"
            )
        try:
            message = self.receiver.recv()
        except EOFError:
            code = self.reap()
            raise CorruptionSetupError(
                f"the corruption worker {self.exit_text(code)} while starting; "
                f"its error output is above"
            ) from None
        self.guard = message[1]

    def reap(self) -> int | None:
        self.process.join(5.0)
        if self.process.exitcode is None:
            self.process.kill()
            self.process.join(5.0)
        return self.process.exitcode

    @staticmethod
    def exit_text(code: int | None) -> str:
        if code is None:
            return "ended with an unknown exit status"
        if code < 0:
            return f"was killed by {_signal_name(-code)}"
        return f"exited with status {code}"

    def stop(self) -> None:
        if self.process.is_alive():
            self.process.kill()
        self.process.join(5.0)
        self.receiver.close()
        with contextlib.suppress(ValueError):
            self.process.close()


@contextlib.contextmanager
def _quiet_fork_warning() -> Iterator[None]:
    # Python 3.12+ warns when forking a process that has threads (xdist, plugins).
    # The worker only decodes and writes to its pipe, so the warning is noise here.
    import warnings

    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=".*fork.*", category=DeprecationWarning)
        yield


# --------------------------------------------------------------------------
# running a schedule


@dataclass(frozen=True)
class TrialOutcome:
    """What one corruption did to the decoder."""

    trial: int
    corruption: Corruption
    status: Status
    detail: str = ""

    @property
    def failed(self) -> bool:
        return self.status in FAILING_STATUSES


@dataclass
class CorruptionRun:
    """The outcomes of a run of corruption trials (only those that ran)."""

    schedule: list[Corruption]
    outcomes: list[TrialOutcome]
    start_method: str
    memory_guard: str
    seconds: float
    workers_started: int

    @property
    def failures(self) -> list[TrialOutcome]:
        return [o for o in self.outcomes if o.failed]

    @property
    def stopped_early(self) -> bool:
        return len(self.outcomes) < len(self.schedule)

    def summary(self) -> str:
        """One line counting the outcomes, e.g. ``200 of 200 trials ran: 180 raised
        (ValueError 150, zlib.error 30), 20 returned a result``."""
        counts = Counter(o.status for o in self.outcomes)
        raised = Counter(o.detail for o in self.outcomes if o.status == "raised")
        parts = []
        if counts["raised"]:
            names = ", ".join(f"{name} {k}" for name, k in raised.most_common(4))
            more = ", ..." if len(raised) > 4 else ""
            parts.append(f"{counts['raised']} raised ({names}{more})")
        if counts["returned"]:
            parts.append(f"{counts['returned']} returned a result")
        if counts["original"]:
            parts.append(f"{counts['original']} returned the original symbols")
        for status in ("hang", "crash", "memory", "exit", "silent"):
            if counts[status]:
                parts.append(f"{counts[status]} {_STATUS_COUNTED[status]}")
        ran = f"{len(self.outcomes)} of {len(self.schedule)} trials ran"
        return f"{ran}: " + ", ".join(parts) if parts else ran


def run_corruption_trials(
    decode: Callable[[Any, int], Any],
    payload: object,
    n: int,
    schedule: Sequence[Corruption],
    *,
    expected: np.ndarray | None = None,
    timeout: float = 2.0,
    memory_limit: int | None = DEFAULT_MEMORY_LIMIT,
    start_method: str | None = None,
    max_failures: int = MAX_FAILURES,
) -> CorruptionRun:
    """Feed ``decode(damaged_payload, n)`` every corruption of ``payload`` in an
    isolated worker and classify what happened (no assertion: see
    :func:`assert_survives_corruption`).

    ``payload`` is what the encoder returned (bytes-like, ``bitarray`` or
    ``(bytes, nbits)``); ``expected`` the original symbols, given in
    must-detect mode only. ``start_method`` overrides the choice of
    ``fork``/``spawn`` described in the module docstring. The run stops after
    ``max_failures`` failed trials.
    """
    if not callable(decode):
        raise TypeError(f"decode must be callable, got {decode!r}")
    n = _check_int("n", n, 0)
    if not (isinstance(timeout, (int, float)) and math.isfinite(timeout) and timeout > 0):
        raise ValueError(f"timeout must be a positive number of seconds, got {timeout!r}")
    if memory_limit is not None:
        memory_limit = _check_int("memory_limit", memory_limit, 1)
    max_failures = _check_int("max_failures", max_failures, 1)
    stream = _Stream.from_payload(payload, "the encoder")
    for corruption in schedule:
        if corruption.stream_length != len(stream.data):
            raise ValueError(
                f"schedule was made for a {corruption.stream_length}-byte stream; "
                f"the encoded stream has {len(stream.data)} bytes"
            )
    if expected is not None:
        expected = np.asarray(expected)
    job = _Job(decode, stream, n, tuple(schedule), expected, memory_limit)
    method = _start_method(start_method)
    if method != "fork":
        _check_picklable(job, method)
    ctx = multiprocessing.get_context(method)
    startup_timeout = max(timeout, 10.0 if method == "fork" else 60.0)

    began = time.perf_counter()
    outcomes: list[TrialOutcome] = []
    failures = 0
    workers = 0
    guard = "none"
    index = 0
    total = len(job.schedule)
    while index < total and failures < max_failures:
        worker = _Worker(ctx, job, index, startup_timeout)
        workers += 1
        guard = worker.guard
        try:
            while index < total and failures < max_failures:
                corruption = job.schedule[index]
                if not worker.receiver.poll(timeout):
                    outcomes.append(
                        TrialOutcome(
                            index, corruption, "hang", f"did not return within {timeout:g} s"
                        )
                    )
                    failures += 1
                    index += 1
                    break  # the worker is killed below; a new one takes the next trial
                status: Status
                try:
                    got, status, detail = worker.receiver.recv()
                except EOFError:
                    status, detail = _death(worker.reap())
                    outcomes.append(TrialOutcome(index, corruption, status, detail))
                    failures += 1
                    index += 1
                    break
                if got != index:  # pragma: no cover - protocol guard
                    raise RuntimeError(f"corruption worker reported trial {got}, expected {index}")
                outcome = TrialOutcome(index, corruption, status, detail)
                outcomes.append(outcome)
                failures += outcome.failed
                index += 1
        finally:
            worker.stop()
    return CorruptionRun(
        schedule=list(job.schedule),
        outcomes=outcomes,
        start_method=method,
        memory_guard=guard,
        seconds=time.perf_counter() - began,
        workers_started=workers,
    )


# --------------------------------------------------------------------------
# replay files


def _slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9._-]+", "_", text).strip("_")[:60] or "codec"


def _save_damaged(
    directory: Path, stem: str, damaged: bytes, stream: _Stream, meta: dict[str, Any]
) -> Path:
    """Write ``<stem>.bin`` (the damaged bytes) and ``<stem>.json`` (what was done)
    under ``directory``; if either name is taken, ``-1``, ``-2``, ... is added to
    the stem: nothing existing is overwritten."""
    directory.mkdir(parents=True, exist_ok=True)
    sidecar = {
        "shape": stream.shape,
        "nbits": stream.damaged_bits(damaged),
        "endian": stream.endian,
        **meta,
    }
    text = (json.dumps(sidecar, indent=2) + "\n").encode()
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
    meta = json.loads(sidecar.read_text())
    stream = _Stream(b"", meta.get("shape", "bytes"), 0, meta.get("endian", "big"))
    if stream.shape == "bytes":
        return data
    nbits = int(meta["nbits"])
    if stream.shape == "pair":
        return (data, nbits)
    bits = bitarray(endian=stream.endian)
    bits.frombytes(data)
    del bits[nbits:]
    return bits


def _size_text(size: int) -> str:
    for unit, scale in (("GiB", 1 << 30), ("MiB", 1 << 20), ("KiB", 1 << 10)):
        if size >= scale:
            return f"{size / scale:g} {unit}"
    return f"{size} bytes"


# --------------------------------------------------------------------------
# codecs and sources


@dataclass(frozen=True)
class _WrongReturn:
    """Stands for a decoder output that the codec adapter rejected (wrong type or
    length): the decoder returned without raising, so it did not detect the damage."""

    message: str


def _payload_bits(payload: Any) -> int:
    if isinstance(payload, bytes):
        return 8 * len(payload)
    if isinstance(payload, tuple):
        return int(payload[1])
    return len(payload)  # bitarray


@dataclass(frozen=True)
class _AdapterDecode:
    """Calls a codec's ``decode(encoded, n)`` with the damaged payload rewrapped in
    the codec's ``Encoded`` record (module level so that it pickles under spawn)."""

    codec: Any
    template: Any

    def __call__(self, payload: Any, n: int) -> Any:
        from pytest_ratefloor.codecs import CodecContractError

        encoded = dataclasses.replace(
            cast(Any, self.template), payload=payload, bits=_payload_bits(payload)
        )
        try:
            return self.codec.decode(encoded, n)
        except CodecContractError as exc:
            return _WrongReturn(str(exc))


@dataclass(frozen=True)
class _Target:
    name: str
    payload: Any
    decode: Callable[[Any, int], Any]
    replay: Callable[[Path, int], str]  # the replay statement for a saved file


def _replay_call(func: object, fallback: str, with_n: bool) -> Callable[[Path, int], str]:
    """A replay statement calling ``func`` (imported by module path where possible)."""
    module = getattr(func, "__module__", None)
    qualname = getattr(func, "__qualname__", None)
    if module and qualname and "<" not in qualname and module not in ("__main__", "builtins"):
        head, name = f"import {module}; ", f"{module}.{qualname}"
    else:
        head, name = "", fallback

    def line(path: Path, n: int) -> str:
        args = f"load_damaged({str(path)!r})" + (f", {n}" if with_n else "")
        return f"from pytest_ratefloor.corruption import load_damaged; {head}{name}({args})"

    return line


def _replay_for(codec: Any) -> Callable[[Path, int], str]:
    from pytest_ratefloor.codecs import ByteCodec, CodebookCodec, StreamCodec

    if isinstance(codec, StreamCodec):
        return _replay_call(getattr(codec, "_decode", None), "decode", with_n=True)
    if isinstance(codec, ByteCodec):
        return _replay_call(getattr(codec, "_decompress", None), "decompress", with_n=False)
    if isinstance(codec, CodebookCodec):
        return _replay_call(None, "codebook.decode", with_n=True)
    return _replay_call(None, "codec.decode", with_n=True)


def _resolve(codec: object, source: object, symbols: np.ndarray) -> _Target:
    """Adapt the codec (bound to the source where it needs one), encode the sample
    and find the decoder."""
    from pytest_ratefloor.codecs import CodecContractError, StreamCodec, as_codec

    if isinstance(codec, (tuple, list)) and len(codec) == 2 and all(map(callable, codec)):
        encode, decode = codec
        name = getattr(decode, "__qualname__", None) or type(decode).__name__
        adapted: Any = StreamCodec(encode, decode, name=name)
    else:
        try:
            adapted = as_codec(codec)
        except TypeError as exc:
            raise TypeError(
                f"codec must be a codec, a Codebook, a mapping or an (encode, decode) pair: {exc}"
            ) from None
    if hasattr(source, "sample") and callable(getattr(adapted, "for_source", None)):
        adapted = adapted.for_source(source)
    name = str(adapted.name)
    try:
        encoded = adapted.encode(symbols.copy())
    except CodecContractError as exc:
        raise CodecMisbehaviour(f"encoder of {name!r} on the clean sample: {exc}") from exc
    except Exception as exc:
        raise CodecMisbehaviour(
            f"encoder of {name!r} raised {type(exc).__name__}: {exc} on the clean sample"
        ) from exc
    return _Target(name, encoded.payload, _AdapterDecode(adapted, encoded), _replay_for(adapted))


def _sample(source: object, n: int, seed: int) -> tuple[np.ndarray, str]:
    if hasattr(source, "sample"):
        symbols = np.asarray(source.sample(n, seed=seed))
        return symbols.astype(np.int64, copy=False), str(getattr(source, "spec", source))
    try:
        symbols = np.asarray(source, dtype=np.int64)
    except (TypeError, ValueError) as exc:
        raise TypeError(
            f"source must be a reference source (with .sample) or a sequence of symbols, "
            f"got {source!r}"
        ) from exc
    if symbols.ndim != 1:
        raise ValueError(f"source symbols must be one-dimensional, got shape {symbols.shape}")
    return symbols, f"{symbols.shape[0]} given symbols"


# --------------------------------------------------------------------------
# the check


def assert_survives_corruption(
    codec: object,
    source: object,
    n: int = 10_000,
    seed: int = 0,
    trials: int = 200,
    timeout: float = 2.0,
    must_detect: bool = False,
    memory_limit: int | None = DEFAULT_MEMORY_LIMIT,
    save_dir: str | os.PathLike[str] | None = None,
) -> CorruptionRun:
    """Check that the decoder survives damaged streams.

    Encodes ``source.sample(n, seed)`` (``source`` may also be a sequence of
    symbols, then ``n`` is ignored), damages the stream ``trials`` ways from
    :func:`corruption_schedule` (seeded by ``seed``), and feeds each damaged
    stream to the decoder in an isolated worker (see the module docstring for
    what counts as surviving, the isolation and the memory limit).

    ``codec`` is anything :func:`pytest_ratefloor.codecs.as_codec` accepts,
    or an ``(encode, decode)`` pair of callables with ``encode(symbols)``
    returning bytes, a ``bitarray`` or ``(bytes, nbits)`` and
    ``decode(data, n)``. ``memory_limit`` is in bytes (growth allowed to the
    worker, default 1 GiB; ``None`` for no limit). Damaged streams of failed
    trials are saved under ``save_dir`` (default: a new temporary directory,
    whose path is printed), with a ``.json`` file beside each naming the
    corruption; :func:`load_damaged` reads one back for replay.

    With ``must_detect=True`` returning anything but the original symbols
    without raising is a failure; output that the codec adapter rejects
    (wrong type or length) counts as returned, not as detected.

    Raises :class:`~pytest_ratefloor.errors.CorruptionFailure` naming each
    failed corruption (the run stops after :data:`MAX_FAILURES`),
    :class:`~pytest_ratefloor.errors.CodecMisbehaviour` if the encoder fails
    on the clean sample, and :class:`CorruptionSetupError` if no worker can be
    started. Returns the :class:`CorruptionRun` when every trial survived.
    """
    __tracebackhide__ = True
    n = _check_int("n", n, 0)
    seed = _check_int("seed", seed, 0)
    trials = _check_int("trials", trials, 1)
    symbols, spec = _sample(source, n, seed)
    target = _resolve(codec, source, symbols)
    stream = _Stream.from_payload(target.payload, f"encoder of {target.name!r}")
    schedule = corruption_schedule(len(stream.data), trials, seed)
    run = run_corruption_trials(
        target.decode,
        target.payload,
        len(symbols),
        schedule,
        expected=symbols if must_detect else None,
        timeout=timeout,
        memory_limit=memory_limit,
    )
    if not run.failures:
        return run

    if save_dir is None:
        directory = Path(tempfile.mkdtemp(prefix="ratefloor-corruption-"))
        print(f"ratefloor: damaged streams saved under {directory}", file=sys.stderr)
    else:
        directory = Path(save_dir)
    mode = "must-detect" if must_detect else "survival"
    lines = [
        f"decoder of {target.name!r} failed {len(run.failures)} corruption trial"
        f"{'s' if len(run.failures) != 1 else ''} ({mode} mode) on {spec}, n={len(symbols)}, "
        f"seed={seed}; clean stream {len(stream.data)} bytes"
        + (f" ({stream.nbits} bits, {stream.shape})" if stream.shape != "bytes" else "")
    ]
    for outcome in run.failures:
        c = outcome.corruption
        damaged = c.apply(stream.data)
        stem = f"{_slug(target.name)}-seed{seed}-trial{outcome.trial:03d}-{c.kind}"
        meta = {
            "codec": target.name,
            "source": spec,
            "n": len(symbols),
            "seed": seed,
            "trial": outcome.trial,
            "status": outcome.status,
            "detail": outcome.detail,
            "corruption": dataclasses.asdict(c) | {"bits": list(c.bits)},
            "description": c.describe(),
        }
        path = _save_damaged(directory, stem, damaged, stream, meta)
        detail = outcome.detail
        if outcome.status == "memory" and memory_limit is not None:
            detail += f" (limit: {_size_text(memory_limit)} of growth, guard: {run.memory_guard})"
        lines += [
            f"  trial {outcome.trial}: {_STATUS_TITLES[outcome.status]}: {detail}",
            f"    corruption: {c.describe()}",
            f"    {c!r}",
            f"    damaged stream: {path} ({len(damaged)} bytes)",
            f"    replay: {target.replay(path, len(symbols))}",
        ]
    if run.stopped_early:
        lines.append(f"  stopped after {len(run.failures)} failures")
    lines.append(f"  {run.summary()}")
    raise CorruptionFailure("\n".join(lines))
