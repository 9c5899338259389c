"""A parent process that sees how the test session ends, so a codec cannot end it unseen.

When a pytest run starts, :func:`start` forks once. The child goes on to run
the whole session as usual; the parent only waits for it, passes on the
signals sent to it, and ends with the child's exit status. The child notes
on shared pages (:class:`~pytest_ratefloor.boards.StepBoard`) which test is
running, which check, and the check's step, and at the very end of the run
(``pytest_unconfigure``) that the session finished. If the child ends before
that — native code in a codec called ``exit(0)`` or ``_exit(0)``, a fatal
signal, a test called ``os._exit`` — the parent prints what was running
and ends with a non-zero status: the exit status of a run that verified
nothing can never be 0.

This costs one ``fork`` per run instead of one per check
(:mod:`pytest_ratefloor.isolation`), so checks run in the test process. What
it gives up: a codec that ends the process ends the run there (the tests
after it do not run; a check forked per case, ``isolate=True``, fails only
that case).

No supervisor is started (and checks fork a child each, as before) when the
run is nested in another run in the same process (``pytester`` in process),
in an xdist worker (the controller reports a worker that died, naming its
test), when ``fork`` is unsafe or unavailable, when Python threads already
run (they would not exist in the child), or when the run's
``ratefloor_isolate`` is ``false`` or ``check``.

The parent passes on SIGTERM, SIGHUP, SIGUSR1 and SIGUSR2, and SIGINT and
SIGQUIT sent by a process; a Ctrl-C typed at a terminal already reaches the
child, which is in the same process group. On Linux the child is also sent
SIGTERM if the parent is killed.
"""

from __future__ import annotations

import contextlib
import os
import signal
import sys
import threading
from typing import NoReturn

from pytest_ratefloor import isolation
from pytest_ratefloor.boards import StepBoard

__all__ = ["Supervisor", "can_supervise", "start", "watch_run"]

#: signals the parent passes on to the child
_PASSED_ON = tuple(getattr(signal, name) for name in
                   ("SIGTERM", "SIGHUP", "SIGINT", "SIGQUIT", "SIGUSR1", "SIGUSR2")
                   if hasattr(signal, name))  # Windows has only some of them
#: ``si_code`` of a signal the kernel sent (a terminal's Ctrl-C or Ctrl-\\): the child,
#: in the same foreground process group, received it too (Linux value)
_SI_KERNEL = 0x80
_FROM_TERMINAL = {getattr(signal, name) for name in ("SIGINT", "SIGQUIT") if hasattr(signal, name)}
#: exit status when the session ended with status 0 before finishing (pytest's TESTS_FAILED)
_ENDED_EARLY = 1
_PR_SET_PDEATHSIG = 1  # prctl option (linux/prctl.h)


class Supervisor:
    """The child's side: the shared pages it notes its progress on."""

    def __init__(self) -> None:
        self.test = StepBoard()  #: node id of the test running now
        self.case = StepBoard()  #: the check's case while a check runs (isolation)
        self.step = StepBoard()  #: the check's step while a check runs (isolation)
        self.state = StepBoard()  #: "finished" once the run has ended in order
        #: signals the parent passed on to the child (parent's side only)
        self.passed_on: set[int] = set()

    def test_started(self, nodeid: str) -> None:
        """Note the test that runs now (``pytest_runtest_logstart``)."""
        self.test.write(nodeid)

    def finished(self) -> None:
        """Note that the run ended in order (``pytest_unconfigure``): its exit status stands."""
        self.state.write("finished")

    def is_finished(self) -> bool:
        return self.state.read() == "finished"

    def account(self, status: int) -> tuple[int, str | None]:
        """The parent's exit status for the child's wait ``status``, and what to print."""
        if os.WIFSIGNALED(status):
            number = os.WTERMSIG(status)
            code, how = 128 + number, f"was killed by {_signal_name(number)}"
        else:
            code = os.WEXITSTATUS(status) if os.WIFEXITED(status) else _ENDED_EARLY
            how = f"ended with exit status {code}"
        if os.WIFSIGNALED(status) and os.WTERMSIG(status) in self.passed_on:
            return code, None  # stopped from outside, as asked: nothing to explain
        if self.is_finished():
            if os.WIFSIGNALED(status):
                return code, f"ratefloor: the test process {how} after the session finished"
            return code, None
        case = self.case.read()
        if case:
            where = f"during the check of {case}, while {self.step.read('starting the check')}"
            advice = ("A codec must return or raise, never end the process; `isolate=True` "
                      "runs a check in a child process of its own, so that only its case fails.")
        else:
            test = self.test.read()
            where = (f"while running {test}, outside any ratefloor check" if test
                     else "before any test ran")
            advice = "A test, fixture or plugin ended the process."
        message = (
            f"ratefloor: the test process {how} {where}, before the session finished. "
            f"Nothing after that point was tested or reported, so this run fails. {advice}"
        )
        return (code if code != 0 else _ENDED_EARLY), message


def _signal_name(number: int) -> str:
    try:
        return signal.Signals(number).name
    except ValueError:
        return f"signal {number}"


def watch_run(mode: str, *, xdist_worker: bool = False
              ) -> tuple[Supervisor | None, isolation.Watch | None]:
    """What will see this process end during a check, for a run with ini ``ratefloor_isolate``
    ``mode`` ("session", "check" or "off"); starts the supervisor (forks) when it can.

    The caller pushes the watch (:func:`pytest_ratefloor.isolation.push_watch`)
    and, at the run's end, pops it and calls :meth:`Supervisor.finished`.
    """
    if mode == "off":
        return None, isolation.Watch()  # in process, unwatched: as the user asked
    if mode != "session":
        return None, None
    if xdist_worker:
        return None, isolation.Watch()  # the controller fails a test whose worker died
    if isolation.watched_runs() or not isolation.FORK_AVAILABLE or not can_supervise():
        return None, None
    supervisor = start()
    return supervisor, isolation.Watch(supervisor.case, supervisor.step)


def can_supervise() -> bool:
    """Whether this process can be split into a waiting parent and a child that runs on."""
    if not hasattr(os, "fork") or sys.platform == "darwin" or not hasattr(signal, "sigwaitinfo"):
        return False
    return threading.active_count() == 1  # threads would not exist in the child


def start() -> Supervisor:
    """Fork: return in the child (which runs the session); the parent waits and never returns."""
    for stream in (sys.stdout, sys.stderr):
        with contextlib.suppress(Exception):
            stream.flush()
    supervisor = Supervisor()
    waited = {*_PASSED_ON, signal.SIGCHLD}  # can_supervise: a POSIX system
    # blocked before the fork, so that no signal to the parent is lost before it waits
    previous = signal.pthread_sigmask(signal.SIG_BLOCK, waited)
    parent = os.getpid()
    pid = os.fork()
    if pid == 0:
        signal.pthread_sigmask(signal.SIG_SETMASK, previous)
        _end_with_parent(parent)
        return supervisor
    _wait_and_end(pid, supervisor, waited)


def _end_with_parent(parent: int) -> None:
    """Linux: have the kernel send this child SIGTERM when the parent dies."""
    if not sys.platform.startswith("linux"):
        return
    try:
        import ctypes

        ctypes.CDLL(None, use_errno=True).prctl(_PR_SET_PDEATHSIG, int(signal.SIGTERM), 0, 0, 0)
    except (AttributeError, OSError):
        return
    if os.getppid() != parent:  # the parent died before the request took effect
        os.kill(os.getpid(), signal.SIGTERM)


def _wait_and_end(pid: int, supervisor: Supervisor, waited: set[signal.Signals]) -> NoReturn:
    """The parent: wait for the child, pass signals on, end as the child's run says."""
    code = 3  # pytest's INTERNAL_ERROR, should anything below fail
    try:
        status = _wait(pid, waited, supervisor.passed_on)
        code, message = supervisor.account(status)
        if message is not None:
            os.write(2, f"\n{message}\n".encode("utf-8", "replace"))
    finally:
        os._exit(code)


def _wait(pid: int, waited: set[signal.Signals], passed_on: set[int]) -> int:
    """The child's wait status, passing on the signals sent to this process meanwhile."""
    while True:
        done, status = os.waitpid(pid, os.WNOHANG)
        if done == pid:
            return status
        info = signal.sigwaitinfo(waited)
        if info.si_signo == signal.SIGCHLD:
            continue
        if info.si_code == _SI_KERNEL and info.si_signo in _FROM_TERMINAL:
            continue  # typed at the terminal: the child has it already
        passed_on.add(info.si_signo)
        with contextlib.suppress(ProcessLookupError):
            os.kill(pid, info.si_signo)
