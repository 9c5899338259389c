"""Run a codec where it cannot end, interrupt or stall the test session unseen.

A codec under test is foreign code. If it calls ``os._exit(0)`` (or a C
extension calls ``exit()``) inside a check, the whole pytest process ends
with exit status 0 and only the header printed: a green CI job for a run
that verified nothing. If it raises ``KeyboardInterrupt`` the session
stops as if the user had pressed Ctrl-C. If it leaves a non-daemon thread
or a child process running, the run hangs at exit for as long as they live.

:func:`guarded` runs the codec-facing part of a check so that each of these
becomes a :class:`~pytest_ratefloor.errors.CodecMisbehaviour` of that case,
or, where the process itself ends, a failed run that names the check:

* **watched, in process** (the default in a pytest run where ``fork`` is
  safe: Linux and other POSIX systems except macOS, the same rule as the
  damaged-stream worker): the session runs under a
  :mod:`~pytest_ratefloor.supervisor`, a parent process forked once when
  the run starts, or in an xdist worker, whose controller sees it end. The
  work runs in the test process under the in-process guards below and notes
  its case and step (:func:`step`) on a page the supervisor shares. If the
  codec ends the process anyway (native code calling ``exit()`` or
  ``_exit()``, a fatal signal), the supervisor names the case and step and
  the run's exit status is not 0; the tests after it do not run. Costs about
  a microsecond per step (see ``benchmarks/bench_check.py``).
* **isolated** (``isolate=True``; the default outside such a run, e.g. a
  script, or a pytest run nested in another process's run): the work runs
  in a forked child, which sends back its result (or the failure it raised,
  with the codec's traceback as text) through a pipe and ends. Whatever
  the codec does to that process — exit with any status, die on a signal,
  raise ``KeyboardInterrupt``/``SystemExit``, start threads or processes
  that outlive the work — is seen by the parent, which fails that case
  only, naming it and the step; the tests after it still run. A Ctrl-C
  from the user reaches the parent too and stops the session as usual (the
  child is killed). Costs one ``fork`` per check, about 2.5 ms of CPU.
  What the codec changes in its own objects during the check stays in the
  child: a test that inspects a codec's state after a check sees it as it
  was before. A codec that keeps a thread pool created *before* the check
  cannot use it in a forked child (its threads do not exist there).
* **in process** (``isolate=False``, ini ``ratefloor_isolate = false``, or
  where ``fork`` is unavailable): ``os._exit`` is intercepted while the
  work runs, ``KeyboardInterrupt`` and ``SystemExit`` raised by the codec
  (not by a real Ctrl-C, which is told apart by its signal) fail the case,
  and threads or child processes the work left behind are named. Without a
  watching process, a C-level ``exit()`` cannot be caught.
"""

from __future__ import annotations

import atexit
import contextlib
import gc
import os
import pickle
import signal
import struct
import sys
import threading
import time
import traceback
import warnings
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any, NoReturn, TypeVar

from pytest_ratefloor.boards import StepBoard
from pytest_ratefloor.errors import CodecMisbehaviour, CodecTraceback, RateFloorFailure

__all__ = ["FORK_AVAILABLE", "Watch", "default_isolate", "guarded", "pop_watch", "push_watch",
           "reap_children", "step", "watched_runs"]

T = TypeVar("T")

#: Isolation by ``fork`` is used where it is safe (macOS: system frameworks
#: are not fork-safe, so the damaged-stream worker avoids it there too).
FORK_AVAILABLE = hasattr(os, "fork") and sys.platform != "darwin"

#: Seconds a thread or process the codec started gets to end by itself once
#: the work has returned, before it counts as left behind (common practice:
#: long enough for a pool to wind down, short enough not to slow a suite).
LEFTOVER_GRACE = 0.5

#: the length of the pickled outcome the child sends ahead of it
_FRAME = struct.Struct(">Q")
#: exit status of a child whose result could not be sent (sysexits EX_SOFTWARE)
_CHILD_BROKEN = 70


_START = "starting the check"


_boards: dict[int, StepBoard] = {}


def _board() -> StepBoard:
    """This process's board (a child running a nested check makes its own)."""
    board = _boards.get(os.getpid())
    if board is None:
        _boards.clear()  # inherited from the parent: not ours to reuse
        board = _boards[os.getpid()] = StepBoard()
    return board


@dataclass
class _Progress:
    """Where the current check is (a forked child also notes it on its parent's board)."""

    text: str = _START
    board: StepBoard | None = None


_progress = _Progress()


def step(text: str) -> None:
    """Note what the check is doing now; named if the codec ends the process there."""
    _progress.text = text
    if _progress.board is not None:
        _progress.board.write(text)


@dataclass(frozen=True)
class Watch:
    """Checks run in this process: something else sees it end, or the run asked for that.

    ``case``/``step`` are the boards a :mod:`~pytest_ratefloor.supervisor`
    reads when the process ends without finishing its run (``None`` where
    nothing reads them: an xdist controller names the test that was running;
    ``ratefloor_isolate = false`` has no watcher at all).
    """

    case: StepBoard | None = None
    step: StepBoard | None = None


#: one entry per pytest run in this process, innermost last; ``None``: nothing
#: watches that run, so its checks fork a child each (see :func:`default_isolate`)
_watches: list[Watch | None] = []


def push_watch(watch: Watch | None) -> None:
    """A pytest run starts in this process, watched by ``watch`` (or by nothing)."""
    _watches.append(watch)


def pop_watch(watch: Watch | None) -> None:
    """The run that pushed ``watch`` ends (the innermost run with that watch)."""
    for at in range(len(_watches) - 1, -1, -1):
        if _watches[at] is watch:
            del _watches[at]
            return


def watched_runs() -> int:
    """How many pytest runs in this process have started and not ended (nesting depth)."""
    return len(_watches)


def _watch() -> Watch | None:
    return _watches[-1] if _watches else None


def default_isolate() -> bool:
    """Whether a check that does not say forks a child: yes unless something watches the run."""
    return _watch() is None


def guarded(work: Callable[[], T], *, case: str, isolate: bool | None = None) -> T:
    """Run ``work`` (which calls the codec) so that the codec cannot end the session.

    ``case`` names the codec and sample in messages (``codec 'x' on ...``).
    With ``isolate`` (``None``: :func:`default_isolate`) and
    :data:`FORK_AVAILABLE` the work runs in a forked child and its return
    value must pickle; otherwise it runs in this process under the
    in-process guards described in the module docstring.

    :raises CodecMisbehaviour: the codec ended the process, raised
        ``KeyboardInterrupt``/``SystemExit``, or left threads or child
        processes running.
    """
    __tracebackhide__ = True
    if isolate is None:
        isolate = default_isolate()
    if isolate and FORK_AVAILABLE:
        return _in_child(work, case)
    return _in_process(work, case)


# -- isolated: a forked child ------------------------------------------------------------


def _send(fd: int, payload: bytes) -> None:
    data = memoryview(_FRAME.pack(len(payload)) + payload)
    while data:
        written = os.write(fd, data)
        data = data[written:]


def _cause_of(exc: BaseException) -> tuple[BaseException, str] | None:
    """The codec exception a failure was raised from, and its traceback as text."""
    cause = exc.__cause__
    if cause is None:
        return None
    text = "".join(traceback.format_exception(type(cause), cause, cause.__traceback__))
    return _portable(cause), text


def _portable(exc: BaseException) -> BaseException:
    """``exc`` if it survives pickling, else a failure carrying its text."""
    try:
        copy = pickle.loads(pickle.dumps(exc))
    except Exception:
        return RateFloorFailure(f"{type(exc).__name__}: {exc}")
    return copy if isinstance(copy, BaseException) else RateFloorFailure(str(exc))


def _child_main(work: Callable[[], Any], fd: int, board: StepBoard,
                case: str) -> NoReturn:
    """The forked child: run the work, check what it left behind, send the outcome, end."""
    status = 0
    try:
        # The objects inherited from the parent leave the collector's view: a
        # collection here would write to every one of them and so copy every
        # page they sit on (a full collection in a session of 300 000 objects:
        # a 15 ms check became 60 ms). Garbage the work makes is still collected.
        gc.freeze()
        _progress.board = board
        outcome: tuple[Any, ...]
        try:
            outcome = ("ok", work())
        except BaseException as exc:  # everything, KeyboardInterrupt included, goes home
            outcome = ("raise", _portable(exc), _cause_of(exc))
        left = _leftovers(threads_before=set(), children_before=set())
        if left and outcome[0] == "ok":
            outcome = ("raise", CodecMisbehaviour(_leftover_message(case, left)), None)
        try:
            payload = pickle.dumps(outcome)
        except Exception as exc:  # the work's value did not pickle: a plugin bug, say so
            payload = pickle.dumps(("raise", RateFloorFailure(
                f"the check's result could not be sent from its child process: {exc}"), None))
        _send(fd, payload)
    except BaseException:
        status = _CHILD_BROKEN
    finally:
        for stream in (sys.stdout, sys.stderr):
            with contextlib.suppress(Exception):
                stream.flush()
        os._exit(status)


_trim: Callable[[int], int] | bool | None = False  # not looked up yet


def _release_free_heap() -> None:
    """Hand the heap's free pages back to the system before forking (glibc ``malloc_trim``).

    Pages a test freed but the allocator kept would otherwise be shared with
    the child copy-on-write, and the child's first writes to them would copy
    them one by one: on the zlib benchmark that made the check some 20 %
    slower than in process; trimmed, the child gets fresh pages instead. Where
    the C library has no ``malloc_trim`` this does nothing.
    """
    global _trim
    if _trim is False:
        try:
            import ctypes

            _trim = ctypes.CDLL(None).malloc_trim
        except (AttributeError, OSError):
            _trim = None
    if callable(_trim):
        _trim(0)


#: Children that sent their result and are ending: reaped later, so the test
#: does not wait for the kernel to tear down the child's memory.
_ending: list[int] = []


def reap_children() -> None:
    """Wait for every child that sent its result to end (a benchmark calls this to count
    the children's CPU time; the next check and the end of the process do it anyway)."""
    while _ending:
        pid = _ending.pop()
        with contextlib.suppress(OSError):
            os.waitpid(pid, 0)


atexit.register(reap_children)


def _fork() -> int:
    reap_children()
    _release_free_heap()
    with warnings.catch_warnings():
        # Python 3.12+ warns when a process with threads forks (xdist's I/O
        # thread, for one); the child only runs the codec and writes to its pipe.
        warnings.filterwarnings("ignore", message=".*fork.*", category=DeprecationWarning)
        return os.fork()


def _in_child(work: Callable[[], T], case: str) -> T:
    __tracebackhide__ = True
    board = _board()
    board.clear()
    read_fd, write_fd = os.pipe()
    pid = _fork()
    if pid == 0:  # pragma: no cover - runs in the child, which never returns
        os.close(read_fd)
        _child_main(work, write_fd, board, case)
    os.close(write_fd)
    result: bytes | None = None
    reaped = False
    try:
        with os.fdopen(read_fd, "rb") as pipe:
            header = pipe.read(_FRAME.size)
            if len(header) == _FRAME.size:  # else the child ended without sending it
                (length,) = _FRAME.unpack(header)
                body = pipe.read(length)
                result = body if len(body) == length else None
        if result is not None:  # it is ending on its own: reap it later
            _ending.append(pid)
            status = 0
        else:
            _, status = os.waitpid(pid, 0)
        reaped = True
    finally:
        if not reaped:  # Ctrl-C, a test time-out: the child must not outlive us
            with contextlib.suppress(OSError):
                os.kill(pid, signal.SIGKILL)
            with contextlib.suppress(OSError):
                os.waitpid(pid, 0)
    if result is None:
        raise CodecMisbehaviour(_ended_message(case, status, board.read(_START)))
    outcome = pickle.loads(result)
    if outcome[0] == "ok":
        return outcome[1]
    _, exc, cause = outcome
    if not isinstance(exc, Exception):  # KeyboardInterrupt, SystemExit, GeneratorExit
        raise CodecMisbehaviour(_base_exception_message(case, exc, board.read(_START)))
    if cause is not None:  # the codec's own exception (a copy), with its traceback as text
        original, text = cause
        original.__cause__ = CodecTraceback(text)
        raise exc from original
    raise exc


def _ended_message(case: str, status: int, last_step: str) -> str:
    if os.WIFSIGNALED(status):
        number = os.WTERMSIG(status)
        try:
            name = signal.Signals(number).name
        except ValueError:
            name = f"signal {number}"
        how = f"was killed by {name} (a crash in native code, or the codec killed it)"
    else:
        code = os.WEXITSTATUS(status) if os.WIFEXITED(status) else status
        how = (f"ended with exit status {code} (the codec called os._exit or sys.exit "
               "from a thread, or native code called exit())")
    return (
        f"{case}: the process running the codec {how} while {last_step}; a codec must "
        "return or raise, never end the process (in the test process this would end the "
        "whole run, with an exit status that reports nothing)"
    )


def _base_exception_message(case: str, exc: BaseException, last_step: str) -> str:
    name = type(exc).__name__
    detail = f"({exc})" if str(exc) else ""
    return (
        f"{case}: the codec raised {name}{detail} while {last_step}; {name} from a codec "
        "would stop the whole test session (a real Ctrl-C still does)"
    )


# -- what the work left behind ---------------------------------------------------------


@dataclass(frozen=True)
class _Leftovers:
    threads: tuple[str, ...]
    processes: tuple[str, ...]

    def __bool__(self) -> bool:
        return bool(self.threads or self.processes)


def _live_threads() -> set[threading.Thread]:
    return {t for t in threading.enumerate()
            if t is not threading.current_thread() and t.is_alive() and not t.daemon}


def _has_children() -> bool:
    """Whether this process has any child process, running or ended, reaping none.

    One ``waitid(WNOWAIT)`` call, which leaves every child waitable (a codec's
    ``Popen`` still gets its exit status): about 3 µs, where reading ``/proc``
    costs 50-300 µs on a virtual machine, twice per in-process check and once
    per forked one. Where ``waitid`` is missing it answers yes and ``/proc``
    decides.
    """
    waitid = getattr(os, "waitid", None)
    if waitid is None:
        return True
    try:
        waitid(os.P_ALL, 0, os.WEXITED | os.WNOHANG | os.WNOWAIT)
    except ChildProcessError:
        return False
    except OSError:
        return True
    return True


def _child_pids() -> set[int]:
    """This process's live child processes (Linux ``/proc``; empty elsewhere)."""
    pids: set[int] = set()
    if not _has_children():
        return pids
    tasks = f"/proc/{os.getpid()}/task"
    try:
        names = os.listdir(tasks)
    except OSError:
        return set()
    for task in names:  # plain os calls: this runs twice per in-process check
        try:
            with open(f"{tasks}/{task}/children", "rb") as f:
                pids.update(int(p) for p in f.read().split())
        except OSError:
            pass
    return pids


def _reaped(pid: int) -> bool:
    """True when ``pid`` has ended (and is now reaped, if it was ours)."""
    try:
        done, _ = os.waitpid(pid, os.WNOHANG)
    except ChildProcessError:
        return not Path(f"/proc/{pid}").exists()
    except OSError:
        return True
    return done == pid


def _command_of(pid: int) -> str:
    try:
        raw = Path(f"/proc/{pid}/cmdline").read_bytes()
    except OSError:
        return f"pid {pid}"
    words = [w.decode("utf-8", "replace") for w in raw.split(b"\0") if w]
    return f"pid {pid} ({' '.join(words)[:80]})" if words else f"pid {pid}"


def _leftovers(threads_before: set[threading.Thread], children_before: set[int]) -> _Leftovers:
    """Non-daemon threads and child processes started by the work and still running.

    Each gets :data:`LEFTOVER_GRACE` seconds to end; child processes still
    running after it are killed (they would outlive the run as orphans).
    """
    deadline = time.monotonic() + LEFTOVER_GRACE
    threads = _live_threads() - threads_before
    for t in threads:
        t.join(max(0.0, deadline - time.monotonic()))
    threads = {t for t in threads if t.is_alive()}
    pids = _child_pids() - children_before
    while pids and time.monotonic() < deadline:
        pids = {p for p in pids if not _reaped(p)}
        if pids:
            time.sleep(0.01)
    names = [_command_of(p) for p in sorted(pids)]
    for pid in pids:
        with contextlib.suppress(OSError):
            os.kill(pid, signal.SIGKILL)
        with contextlib.suppress(OSError):
            os.waitpid(pid, 0)
    return _Leftovers(tuple(sorted(t.name for t in threads)), tuple(names))


def _leftover_message(case: str, left: _Leftovers) -> str:
    parts = []
    if left.threads:
        parts.append(f"non-daemon thread(s) {', '.join(left.threads)}")
    if left.processes:
        parts.append(f"child process(es) {', '.join(left.processes)} (now killed)")
    return (
        f"{case}: the codec left {' and '.join(parts)} running after the check "
        f"(waited {LEFTOVER_GRACE:g} s); they would hold up the end of the test run. "
        "End them before encode/decode return, or make threads daemons"
    )


# -- in process --------------------------------------------------------------------------


class _ProcessEndRequest(BaseException):
    """Raised in place of ``os._exit`` while a guarded work runs in this process."""

    def __init__(self, code: object) -> None:
        super().__init__(code)
        self.code = code


@contextlib.contextmanager
def _intercept_exit() -> Iterator[None]:
    real_exit = os._exit
    me = os.getpid()

    def refuse(code: int) -> NoReturn:
        if os.getpid() != me:  # a forked child (the damaged-stream worker) really ends
            real_exit(code)
        raise _ProcessEndRequest(code)

    os._exit = refuse  # type: ignore[assignment]
    try:
        yield
    finally:
        os._exit = real_exit


@contextlib.contextmanager
def _sigint_watch() -> Iterator[list[bool]]:
    """Tell a real Ctrl-C (a SIGINT) from a ``KeyboardInterrupt`` the codec raises."""
    seen = [False]
    if threading.current_thread() is not threading.main_thread():
        yield seen
        return
    previous = signal.getsignal(signal.SIGINT)

    def on_sigint(signum: int, frame: Any) -> None:
        seen[0] = True
        if callable(previous):
            previous(signum, frame)
        else:
            raise KeyboardInterrupt

    signal.signal(signal.SIGINT, on_sigint)
    try:
        yield seen
    finally:
        signal.signal(signal.SIGINT, previous)


@contextlib.contextmanager
def _noted(watch: Watch | None, outer: StepBoard | None) -> Iterator[None]:
    """Clear the watcher's case when the work is over (returned or raised)."""
    try:
        yield
    finally:
        _progress.board = outer
        if watch is not None and watch.case is not None:
            watch.case.clear()


def _in_process(work: Callable[[], T], case: str) -> T:
    __tracebackhide__ = True
    reap_children()  # children of earlier forked checks would make _child_pids read /proc
    threads_before, children_before = _live_threads(), _child_pids()
    _progress.text = _START
    watch = _watch()
    if watch is not None and watch.case is not None:  # the supervisor names the case if it ends
        watch.case.write(case)
        if watch.step is not None:
            watch.step.clear()
    outer, _progress.board = _progress.board, watch.step if watch is not None else None
    with _sigint_watch() as sigint, _intercept_exit(), _noted(watch, outer):
        try:
            value = work()
        except _ProcessEndRequest as exc:
            raise CodecMisbehaviour(
                f"{case}: the codec called os._exit({exc.code!r}) while {_progress.text}; a "
                "codec must return or raise, never end the process"
            ) from None
        except (KeyboardInterrupt, SystemExit) as exc:
            if sigint[0]:
                raise  # the user pressed Ctrl-C
            raise CodecMisbehaviour(
                _base_exception_message(case, exc, _progress.text)
            ) from exc
    left = _leftovers(threads_before, children_before)
    if left:
        raise CodecMisbehaviour(_leftover_message(case, left))
    return value
