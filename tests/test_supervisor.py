"""The supervisor: one fork per run sees the test process end before the session finished.

Each run below is a real pytest process (``runpytest_subprocess`` or
``subprocess``), since the supervisor splits the process that pytest starts
in. Exit statuses follow the shell's convention for a process killed by a
signal, 128 + its number (POSIX ``sh``, "Exit Status"; common practice).
"""

from __future__ import annotations

import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from pytest_ratefloor import isolation, supervisor
from pytest_ratefloor.supervisor import Supervisor

INNER = ("-p", "no:cacheprovider", "-p", "no:hypothesispytest")
needs_supervisor = pytest.mark.skipif(
    not (isolation.FORK_AVAILABLE and hasattr(signal, "sigwaitinfo")),
    reason="the supervisor needs fork and sigwaitinfo",
)
pytestmark = needs_supervisor

NATIVE_EXIT = """
import ctypes, zlib
from pytest_ratefloor import sources
from pytest_ratefloor.codecs import ByteCodec

LIBC = ctypes.CDLL(None)

def test_before():
    pass

def test_codec_ends_the_process(ratefloor):
    def decode(data):
        LIBC._exit(0)  # native code: no Python-level intercept can see this
    ratefloor.check(ByteCodec(zlib.compress, decode, name="abrupt"), sources.uniform(16),
                    n=2000, rel=0.5)

def test_after():
    pass
"""

WATCH_STATE = """
from pytest_ratefloor import isolation
from pytest_ratefloor.session import SESSION_KEY

def test_state(request):
    gate = request.config.stash[SESSION_KEY]
    state = f"SUPERVISED {gate.supervisor is not None} FORKS {isolation.default_isolate()}"
    print(state)
    (request.config.rootpath / "state.txt").write_text(state)
"""


def _said(result: pytest.RunResult) -> str:
    return " ".join((result.stdout.str() + result.stderr.str()).split())


def test_native_exit_in_a_check_fails_the_run_naming_case_and_step(
    pytester: pytest.Pytester,
) -> None:
    pytester.makepyfile(test_codecs=NATIVE_EXIT)
    result = pytester.runpytest_subprocess(*INNER)
    assert result.ret == pytest.ExitCode.TESTS_FAILED  # not the 0 the codec asked for
    said = _said(result)
    assert ("ratefloor: the test process ended with exit status 0 during the check of "
            "codec 'abrupt' on uniform(k=16), n=2000, seed=0, while decoding the sample "
            "(2000 symbols), before the session finished") in said
    assert "isolate=True" in said


def test_the_same_codec_forked_per_check_fails_only_its_case(pytester: pytest.Pytester) -> None:
    pytester.makepyfile(test_codecs=NATIVE_EXIT)
    result = pytester.runpytest_subprocess(*INNER, "-o", "ratefloor_isolate=check")
    result.assert_outcomes(passed=2, failed=1)
    assert result.ret == pytest.ExitCode.TESTS_FAILED
    assert "codec 'abrupt'" in _said(result)
    assert "ended with exit status 0" in _said(result)
    assert "before the session finished" not in _said(result)


def test_a_test_ending_the_process_outside_a_check_is_named(pytester: pytest.Pytester) -> None:
    pytester.makepyfile(test_plain="""
        import ctypes
        def test_quits():
            ctypes.CDLL(None)._exit(0)
    """)
    result = pytester.runpytest_subprocess(*INNER)
    assert result.ret == pytest.ExitCode.TESTS_FAILED
    assert ("ended with exit status 0 while running test_plain.py::test_quits, outside any "
            "ratefloor check") in _said(result)


def test_a_fatal_signal_ends_the_run_as_a_shell_reports_it(pytester: pytest.Pytester) -> None:
    pytester.makepyfile(test_crash="""
        import os, signal
        def test_crash():
            os.kill(os.getpid(), signal.SIGSEGV)
    """)
    result = pytester.runpytest_subprocess(*INNER, "-p", "no:faulthandler")
    assert result.ret == 128 + signal.SIGSEGV
    assert "was killed by SIGSEGV while running test_crash.py::test_crash" in _said(result)


def test_ordinary_runs_keep_their_exit_status_and_say_nothing_more(
    pytester: pytest.Pytester,
) -> None:
    pytester.makepyfile(test_fine="def test_ok():\n    pass\n")
    passing = pytester.runpytest_subprocess(*INNER)
    assert passing.ret == pytest.ExitCode.OK
    pytester.makepyfile(test_fine="def test_bad():\n    assert False\n")
    failing = pytester.runpytest_subprocess(*INNER)
    assert failing.ret == pytest.ExitCode.TESTS_FAILED
    # a usage error raised after the supervisor forked: the run still ends in order
    pytester.makeconftest("""
        import pytest
        def pytest_configure(config):
            raise pytest.UsageError("the tide table is missing")
    """)
    refused = pytester.runpytest_subprocess(*INNER)
    assert refused.ret == pytest.ExitCode.USAGE_ERROR
    assert "the tide table is missing" in _said(refused)
    for result in (passing, failing, refused):
        assert "ratefloor: the test process" not in _said(result)


def test_a_run_is_supervised_and_its_checks_stay_in_process(pytester: pytest.Pytester) -> None:
    pytester.makepyfile(test_state=WATCH_STATE)
    result = pytester.runpytest_subprocess(*INNER, "-s")
    assert "SUPERVISED True FORKS False" in result.stdout.str()


@pytest.mark.parametrize(("value", "expected"), [
    ("check", "SUPERVISED False FORKS True"),
    ("false", "SUPERVISED False FORKS False"),
    ("true", "SUPERVISED True FORKS False"),
])
def test_the_ini_key_chooses(pytester: pytest.Pytester, value: str, expected: str) -> None:
    pytester.makepyfile(test_state=WATCH_STATE)
    result = pytester.runpytest_subprocess(*INNER, "-s", "-o", f"ratefloor_isolate={value}")
    assert expected in result.stdout.str()


def test_a_bad_ini_value_is_a_usage_error_naming_it(pytester: pytest.Pytester) -> None:
    pytester.makepyfile(test_state=WATCH_STATE)
    result = pytester.runpytest_subprocess(*INNER, "-o", "ratefloor_isolate=sometimes")
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    assert ("ini key ratefloor_isolate: expected true, check or false, got 'sometimes'"
            in _said(result))


def test_threads_running_at_start_leave_the_checks_forked(pytester: pytest.Pytester) -> None:
    pytester.makeconftest("""
        import threading, time
        threading.Thread(target=time.sleep, args=(60,), daemon=True).start()
    """)
    pytester.makepyfile(test_state=WATCH_STATE)
    result = pytester.runpytest_subprocess(*INNER, "-s")
    assert "SUPERVISED False FORKS True" in result.stdout.str()


def test_a_run_nested_in_this_process_forks_its_checks(pytester: pytest.Pytester) -> None:
    pytester.makepyfile(test_state=WATCH_STATE)
    result = pytester.runpytest_inprocess(*INNER, "-s")
    assert "SUPERVISED False FORKS True" in result.stdout.str()
    assert isolation.watched_runs() >= 1  # the outer run's entry is still there


def test_xdist_workers_are_watched_by_their_controller(pytester: pytest.Pytester) -> None:
    pytester.makepyfile(test_state=WATCH_STATE, test_codecs=NATIVE_EXIT)
    result = pytester.runpytest_subprocess(*INNER, "-n", "2")
    assert (pytester.path / "state.txt").read_text() == "SUPERVISED False FORKS False"
    assert result.ret == pytest.ExitCode.TESTS_FAILED
    assert "crashed while running 'test_codecs.py::test_codec_ends_the_process'" in _said(result)


# -- signals ---------------------------------------------------------------------------


SLEEPER = """
import os, pathlib, time
def test_sleeps():
    pathlib.Path("child.pid").write_text(str(os.getpid()))
    time.sleep(60)
"""


def _start_sleeper(pytester: pytest.Pytester) -> tuple[subprocess.Popen[bytes], int]:
    pytester.makepyfile(test_sleep=SLEEPER)
    proc = subprocess.Popen([sys.executable, "-m", "pytest", *INNER, "-q"], cwd=pytester.path,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    marker = pytester.path / "child.pid"
    deadline = time.monotonic() + 60
    while not marker.exists() or not marker.read_text():
        assert time.monotonic() < deadline, "the test never started"
        time.sleep(0.02)
    return proc, int(marker.read_text())


def _gone(pid: int) -> bool:
    deadline = time.monotonic() + 10
    while Path(f"/proc/{pid}").exists() and time.monotonic() < deadline:
        time.sleep(0.02)
    return not Path(f"/proc/{pid}").exists()


@pytest.mark.skipif(not Path("/proc").is_dir(), reason="reads /proc")
def test_sigterm_to_the_supervisor_reaches_the_tests(pytester: pytest.Pytester) -> None:
    proc, child = _start_sleeper(pytester)
    assert child != proc.pid  # the tests run in the supervisor's child
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=30)
    assert proc.returncode == 128 + signal.SIGTERM
    assert b"ratefloor: the test process" not in err  # stopped as asked: nothing to explain
    assert _gone(child)


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="PR_SET_PDEATHSIG is Linux's")
def test_the_tests_end_when_the_supervisor_is_killed(pytester: pytest.Pytester) -> None:
    proc, child = _start_sleeper(pytester)
    proc.kill()
    proc.communicate(timeout=30)
    assert _gone(child)


def test_sigint_from_another_process_is_passed_on(pytester: pytest.Pytester) -> None:
    proc, _child = _start_sleeper(pytester)
    proc.send_signal(signal.SIGINT)
    out, _ = proc.communicate(timeout=30)
    assert proc.returncode == pytest.ExitCode.INTERRUPTED
    assert b"KeyboardInterrupt" in out


# -- the parent's account of a wait status (no fork needed) -------------------------------


def _exited(code: int) -> int:
    return code << 8  # the wait status of a normal exit (POSIX <sys/wait.h> layout on Linux)


def test_account_of_a_finished_run_is_its_own_status() -> None:
    watch = Supervisor()
    watch.finished()
    assert watch.account(_exited(0)) == (0, None)
    assert watch.account(_exited(1)) == (1, None)
    code, message = watch.account(signal.SIGABRT)
    assert code == 128 + signal.SIGABRT
    assert message is not None
    assert "after the session finished" in message


def test_account_of_an_early_end() -> None:
    watch = Supervisor()
    assert watch.account(_exited(0))[0] == 1  # never 0
    assert "before any test ran" in str(watch.account(_exited(0))[1])
    watch.test_started("tests/test_a.py::test_one")
    watch.case.write("codec 'x' on uniform(k=2), n=10, seed=0")
    watch.step.write("encoding the sample")
    code, message = watch.account(_exited(3))
    assert code == 3
    assert message is not None
    assert ("ended with exit status 3 during the check of codec 'x' on uniform(k=2), n=10, "
            "seed=0, while encoding the sample") in message


def test_supervision_needs_a_single_thread() -> None:
    import threading

    alone = threading.active_count() == 1
    assert supervisor.can_supervise() == (isolation.FORK_AVAILABLE and alone)
    started = threading.Event()
    helper = threading.Thread(target=started.wait, args=(10,))
    helper.start()
    try:
        assert not supervisor.can_supervise()
    finally:
        started.set()
        helper.join()
