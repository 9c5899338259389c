"""The isolated decode worker and the trial runner.

Each damaged stream is decoded in one worker process that runs the trials in
order and reports each outcome over a pipe; the parent waits at most
``timeout`` per report, kills a hung worker, reaps a dead one and starts a
fresh worker for the next trial; each worker leads a process group of its
own, which is killed whole when the worker is torn down. The worker's memory
is guarded as the package docstring of :mod:`pytest_ratefloor.corruption`
describes (:mod:`~pytest_ratefloor.corruption.memory`: ``RLIMIT_AS`` on Linux,
the peak resident size elsewhere). The outcome of a trial is a
:data:`TrialStatus`; :data:`TRIAL_STATUSES` is the one table of what each
status means and how messages name it.
"""

from __future__ import annotations

import contextlib
import faulthandler
import io
import multiprocessing
import os
import pickle
import signal
import sys
import time
from collections import Counter
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from multiprocessing.connection import Connection
from types import MappingProxyType
from typing import Any, Literal

import numpy as np

from pytest_ratefloor import validation
from pytest_ratefloor.codecs import (
    Codec,
    CodecContractError,
    Encoded,
    PayloadShape,
    decoded_array,
    encoded_from_stream,
)
from pytest_ratefloor.corruption.memory import (
    GROWTH_SHARE,
    MemoryMark,
    growth,
    guard_memory,
    peak_rss,
    size_text,
)
from pytest_ratefloor.corruption.schedule import Corruption
from pytest_ratefloor.errors import CodecMisbehaviour, CorruptionSetupError

__all__ = [
    "DEFAULT_MEMORY_LIMIT",
    "FAILING_STATUSES",
    "MAX_FAILURES",
    "TRIAL_STATUSES",
    "CorruptionRun",
    "StatusText",
    "TrialOutcome",
    "TrialStatus",
    "run_corruption_trials",
]

#: Default growth of the worker's address space allowed per run (1 GiB).
DEFAULT_MEMORY_LIMIT = 1 << 30

#: A run stops after this many failed trials: each hang costs a full timeout,
#: and the first few failures are what a maintainer acts on.
MAX_FAILURES = 5

#: Outcome of one trial (see :data:`TRIAL_STATUSES`).
TrialStatus = Literal["raised", "returned", "original", "hang", "crash", "memory", "exit", "silent"]


@dataclass(frozen=True)
class StatusText:
    """How one trial status reads, and whether it fails the check."""

    title: str  # heads a failed trial's line: "trial 3: <title>: <detail>"
    counted: str  # follows the count in a run summary: "2 <counted>"
    fails: bool


#: Every trial status, in the order a run summary lists them. The first three
#: are survivals: an ordinary exception, any result, the original symbols.
TRIAL_STATUSES: Mapping[TrialStatus, StatusText] = MappingProxyType({
    "raised": StatusText("raised", "raised", fails=False),
    "returned": StatusText("returned a result", "returned a result", fails=False),
    "original": StatusText(
        "returned the original symbols", "returned the original symbols", fails=False
    ),
    "hang": StatusText("hang", "hung", fails=True),
    "crash": StatusText("crash", "crashed", fails=True),
    "memory": StatusText("memory growth past the limit", "grew memory past the limit", fails=True),
    "exit": StatusText("interpreter exit", "ended the interpreter", fails=True),
    "silent": StatusText("silently wrong data", "returned wrong data silently", fails=True),
})
FAILING_STATUSES: frozenset[TrialStatus] = frozenset(
    status for status, text in TRIAL_STATUSES.items() if text.fails
)


# --------------------------------------------------------------------------
# what the worker calls


@dataclass(frozen=True)
class _WrongReturn:
    """Stands for a decoder output that the codec adapter rejected (wrong type or
    length): the decoder returned without raising, so it did not detect the damage."""

    message: str


@dataclass(frozen=True, repr=False)
class _CallDecoder:
    """A bare ``decode(payload, n)`` function, given the damaged payload."""

    decode: Callable[[Any, int], Any]

    def __call__(self, damaged: Encoded, n: int) -> Any:
        return self.decode(damaged.payload, n)

    def __repr__(self) -> str:
        return repr(self.decode)


@dataclass(frozen=True, repr=False)
class CodecDecoder:
    """A bound codec's ``decode(encoded, n)``; output its adapter rejects becomes
    a :class:`_WrongReturn` (module level so that it pickles under spawn)."""

    codec: Codec

    def __call__(self, damaged: Encoded, n: int) -> Any:
        try:
            return self.codec.decode(damaged, n)
        except CodecContractError as exc:
            return _WrongReturn(str(exc))

    def __repr__(self) -> str:
        return repr(self.codec)


Decoder = Callable[[Encoded, int], Any]


@dataclass(frozen=True)
class _Job:
    """Everything the worker needs; inherited under fork, pickled under spawn."""

    decoder: Decoder
    stream: bytes  # the clean stream, as bytes
    shape: PayloadShape  # how damaged bytes go back to the decoder
    n: int
    schedule: tuple[Corruption, ...]
    expected: np.ndarray | None  # the original symbols, in must-detect mode
    memory_limit: int | None


# --------------------------------------------------------------------------
# the worker process


def _same_symbols(result: object, expected: np.ndarray) -> tuple[bool, str]:
    """Whether a decode result equals the original symbols, and if not, how it differs.
    Output that is no sequence of integers is named as the codec adapters name it."""
    try:
        got = decoded_array(result, expected.shape[0])
    except CodecContractError as exc:
        return False, f"returned without an error, but {exc}"
    if got.shape[0] != expected.shape[0]:
        return False, f"returned {got.shape[0]} symbols instead of {expected.shape[0]}"
    equal = got == expected
    if np.all(equal):
        return True, ""
    index = int(np.argmin(equal))
    return False, (
        f"returned {got.shape[0]} symbols without an error; first difference at "
        f"index {index}: expected {expected[index]}, got {int(got[index])!r}"
    )


def _exception_name(exc: BaseException) -> str:
    cls = type(exc)
    module = cls.__module__
    return (
        cls.__qualname__ if module in ("builtins", "__main__") else f"{module}.{cls.__qualname__}"
    )


def _one_trial(
    job: _Job, index: int, rss_ceiling: int | None, start: MemoryMark
) -> tuple[TrialStatus, str]:
    damaged = job.shape.rebuild(job.schedule[index].apply(job.stream))
    before = MemoryMark.now()
    try:
        result = job.decoder(damaged, job.n)
    except MemoryError as exc:
        grown = growth(start, before, MemoryMark.now())
        scale = DEFAULT_MEMORY_LIMIT if job.memory_limit is None else job.memory_limit
        if grown < scale * GROWTH_SHARE:
            # Refused at once (e.g. a header asking for 6·10^18 bytes): a rejection.
            return "raised", _exception_name(exc)
        return "memory", (
            f"raised {_exception_name(exc)} after the worker grew by {size_text(grown)}"
        )
    except Exception as exc:
        # a decoder program (CommandCodec) reports its own crash or hang as an exception
        if getattr(exc, "timed_out", False):
            return "hang", f"{_exception_name(exc)}: the decoder program ran past its time limit"
        if getattr(exc, "signal", None):
            return "crash", f"{_exception_name(exc)}: {exc}".splitlines()[0]
        return "raised", _exception_name(exc)
    except BaseException as exc:  # SystemExit, KeyboardInterrupt, GeneratorExit
        return "exit", f"raised {_exception_name(exc)}({exc!s}), which would end a test session"
    if rss_ceiling is not None:
        peak = peak_rss()
        if peak is not None and peak > rss_ceiling:
            return "memory", f"peak resident size reached {size_text(peak)}"
    if job.expected is None:
        return "returned", ""
    if isinstance(result, _WrongReturn):
        return "silent", f"returned without an error, but {result.message}"
    same, how = _same_symbols(result, job.expected)
    return ("original", "") if same else ("silent", how)


def _own_process_group() -> None:
    """Make the worker the leader of a new session, and so of a new process group
    that every process the decoder starts joins: the parent then ends them all with
    one ``killpg`` (see :meth:`_Worker.kill_group`). Where ``setsid`` does not exist
    (Windows) the worker stays in the parent's group and only it is killed."""
    setsid = getattr(os, "setsid", None)
    if setsid is not None:
        with contextlib.suppress(OSError):  # EPERM only for a group leader: not a new child
            setsid()


def _worker_main(conn: Connection, job: _Job, start: int) -> None:
    """Worker entry point: run trials ``start..`` in order, one message each."""
    _own_process_group()  # first, before the decoder can start anything
    with contextlib.suppress(ValueError, OSError, AttributeError):
        signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is the parent's to handle
    with contextlib.suppress(ValueError, OSError, AttributeError, io.UnsupportedOperation):
        # On a fatal signal, print the decoder's Python traceback to file descriptor 2,
        # which pytest captures and shows beside the failure.
        faulthandler.enable(file=sys.__stderr__ or sys.stderr)
    guard, rss_ceiling = guard_memory(job.memory_limit)
    mark = MemoryMark.now()
    conn.send(("ready", guard))
    for index in range(start, len(job.schedule)):
        status, detail = _one_trial(job, index, rss_ceiling, mark)
        conn.send((index, status, detail))
    conn.close()


def _start_method(requested: str | None) -> str:
    if requested is not None:
        return validation.choice(
            requested, "start_method", multiprocessing.get_all_start_methods()
        )
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
            f"{job.decoder!r} does not ({type(exc).__name__}: {exc}). Define the decoder "
            f"(and what it refers to) at module level, or run the check on Linux, where "
            f"the worker is forked and closures work."
        ) from exc


def _signal_name(number: int) -> str:
    try:
        return signal.Signals(number).name
    except ValueError:
        return f"signal {number}"


def _death(code: int | None) -> tuple[TrialStatus, str]:
    """Classify the death of a worker in the middle of a trial."""
    sigkill = getattr(signal, "SIGKILL", None)
    if sigkill is not None and code == -sigkill:
        return "memory", (
            "the worker was killed by SIGKILL, which the kernel's out-of-memory killer "
            "sends when memory runs out"
        )
    return "crash", f"the worker process {_Worker.exit_text(code)}"


def _unreaped_child(pid: int) -> bool:
    """Whether ``pid`` is still a child of this process, running or not yet reaped
    (so the number cannot belong to anyone else). Asked without reaping it
    (``WNOWAIT``); where ``waitid`` does not exist, the callers' order is relied on."""
    waitid = getattr(os, "waitid", None)
    if waitid is None:
        return True
    try:
        waitid(os.P_PID, pid, os.WEXITED | os.WNOHANG | os.WNOWAIT)
    except ChildProcessError:
        return False
    return True


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

    def kill_group(self) -> None:
        """SIGKILL the worker's process group: the worker and every process the
        decoder started (they joined the group made by :func:`_own_process_group`).

        Done only while the worker is not yet reaped, so its pid (and so the group
        id) cannot have been reused, and only when the group is the worker's own:
        before ``setsid`` has run, the worker shares the parent's group, which must
        never be signalled. Processes that left the group themselves (a daemon that
        called ``setsid``) are out of reach.
        """
        pid = self.process.pid
        killpg = getattr(os, "killpg", None)
        sigkill = getattr(signal, "SIGKILL", None)
        if pid is None or killpg is None or sigkill is None or not _unreaped_child(pid):
            return
        with contextlib.suppress(ProcessLookupError, PermissionError):
            if os.getpgid(pid) == pid:
                killpg(pid, sigkill)

    def reap(self) -> int | None:
        """Wait for the dead (or dying) worker, its group killed first; the exit code."""
        self.kill_group()
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
        """End the worker and everything it started, and reap it."""
        self.kill_group()
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
    status: TrialStatus
    detail: str = ""

    @property
    def failed(self) -> bool:
        return TRIAL_STATUSES[self.status].fails


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
        parts = []
        for status, text in TRIAL_STATUSES.items():
            if not counts[status]:
                continue
            part = f"{counts[status]} {text.counted}"
            if status == "raised":
                raised = Counter(o.detail for o in self.outcomes if o.status == "raised")
                names = ", ".join(f"{name} {k}" for name, k in raised.most_common(4))
                part += f" ({names}{', ...' if len(raised) > 4 else ''})"
            parts.append(part)
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
    :func:`~pytest_ratefloor.corruption.assert_survives_corruption`).

    ``payload`` is what the encoder returned (bytes-like, ``bitarray`` or
    ``(bytes, nbits)``); ``expected`` the original symbols, given in
    must-detect mode only. ``start_method`` overrides the choice of
    ``fork``/``spawn`` described in the package docstring. The run stops
    after ``max_failures`` failed trials.
    """
    validation.function(decode, "decode")
    n = validation.sample_size(n, minimum=0)
    timeout, memory_limit = trial_limits(timeout, memory_limit)
    max_failures = validation.integer(max_failures, "max_failures", minimum=1)
    try:
        encoded = encoded_from_stream(payload)
    except CodecContractError as exc:
        raise CodecMisbehaviour(f"payload of the corruption trials: {exc}") from exc
    return run_trials(
        _CallDecoder(decode),
        encoded,
        n,
        schedule,
        expected=None if expected is None else np.asarray(expected),
        timeout=timeout,
        memory_limit=memory_limit,
        start_method=start_method,
        max_failures=max_failures,
    )


def trial_limits(timeout: object, memory_limit: object) -> tuple[float, int | None]:
    """``timeout`` (seconds > 0) and ``memory_limit`` (bytes >= 1, or ``None``), checked."""
    seconds = validation.seconds(timeout)
    if memory_limit is None:
        return seconds, None
    return seconds, validation.integer(memory_limit, "memory_limit", minimum=1)


def run_trials(
    decoder: Decoder,
    encoded: Encoded,
    n: int,
    schedule: Sequence[Corruption],
    *,
    expected: np.ndarray | None,
    timeout: float,
    memory_limit: int | None,
    start_method: str | None = None,
    max_failures: int = MAX_FAILURES,
) -> CorruptionRun:
    """The trial loop behind :func:`run_corruption_trials`, on checked arguments:
    ``decoder(damaged, n)`` gets each damaged stream as an :class:`Encoded` of
    ``encoded``'s shape (rebuilt by :meth:`PayloadShape.rebuild`)."""
    method = _start_method(start_method)
    stream = encoded.stream
    for corruption in schedule:
        if corruption.stream_length != len(stream):
            raise ValueError(
                f"schedule was made for a {corruption.stream_length}-byte stream; "
                f"the encoded stream has {len(stream)} bytes"
            )
    job = _Job(decoder, stream, encoded.shape, n, tuple(schedule), expected, memory_limit)
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
                status: TrialStatus
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
