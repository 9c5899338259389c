"""A codec cannot end, interrupt or stall the test session unseen (pytest_ratefloor.isolation).

Each reproduction is a codec that ends the process (``os._exit``, a C-level
``exit()`` through ctypes, a fatal signal), raises ``KeyboardInterrupt`` or
``SystemExit``, or leaves a thread or a child process running: each must
fail its case with a message naming what happened, and a pytest run holding
such a codec must never exit with status 0.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import os
import signal
import subprocess
import sys
import threading
import time
import zlib
from pathlib import Path

import pytest

from pytest_ratefloor import isolation, sources
from pytest_ratefloor.checks import assert_roundtrip, check, measure
from pytest_ratefloor.codecs import ByteCodec
from pytest_ratefloor.errors import CodecMisbehaviour

N = 2000
SOURCE = sources.uniform(16)

needs_fork = pytest.mark.skipif(not isolation.FORK_AVAILABLE, reason="needs fork isolation")
needs_proc = pytest.mark.skipif(not Path("/proc/self/task").exists(), reason="needs /proc")


def _codec(decompress=zlib.decompress, compress=zlib.compress, name: str = "z"):  # type: ignore[no-untyped-def]
    return ByteCodec(compress, decompress, name=name)


def _exit_in_decoder(data: bytes) -> bytes:
    os._exit(0)


@needs_fork
def test_os_exit_in_the_child_fails_the_case_with_the_status_and_the_step() -> None:
    with pytest.raises(CodecMisbehaviour) as info:
        check(_codec(_exit_in_decoder), SOURCE, n=N, rel=0.5, isolate=True)
    text = str(info.value)
    assert text.startswith("codec 'z' on uniform(k=16), n=2000, seed=0: ")
    assert "ended with exit status 0" in text
    assert "while decoding the sample (2000 symbols)" in text


def test_os_exit_in_process_is_intercepted() -> None:
    with pytest.raises(CodecMisbehaviour,
                       match=r"called os\._exit\(0\) while decoding the sample"):
        check(_codec(_exit_in_decoder), SOURCE, n=N, rel=0.5, isolate=False)
    assert os._exit.__name__ == "_exit"  # the real one is back


@needs_fork
def test_a_c_level_exit_is_caught_in_the_child() -> None:
    libc = ctypes.CDLL(ctypes.util.find_library("c"))

    def c_exit(data: bytes) -> bytes:
        libc.exit(0)
        return data

    with pytest.raises(CodecMisbehaviour, match="ended with exit status 0"):
        measure(_codec(c_exit), SOURCE, n=N, isolate=True)


@needs_fork
def test_a_fatal_signal_is_named() -> None:
    def crash(data: bytes) -> bytes:
        os.kill(os.getpid(), signal.SIGKILL)
        return data

    with pytest.raises(CodecMisbehaviour, match="was killed by SIGKILL"):
        assert_roundtrip(_codec(crash), SOURCE, n=N, isolate=True)


@pytest.mark.parametrize("isolate", [True, False])
@pytest.mark.parametrize("exc", [KeyboardInterrupt, SystemExit])
def test_keyboard_interrupt_or_system_exit_from_the_codec_fails_the_case(
    isolate: bool, exc: type[BaseException]
) -> None:
    def interrupting(data: bytes) -> bytes:
        raise exc()

    with pytest.raises(CodecMisbehaviour, match=rf"{exc.__name__}|sys\.exit"):
        check(_codec(compress=interrupting), SOURCE, n=N, rel=0.5, isolate=isolate)


@pytest.mark.parametrize("isolate", [True, False])
def test_a_real_ctrl_c_still_stops_the_session(isolate: bool) -> None:
    """A SIGINT delivered to the test process is the user's, not the codec's."""

    def slow(data: bytes) -> bytes:
        time.sleep(5)
        return zlib.decompress(data)

    timer = threading.Timer(0.3, os.kill, (os.getpid(), signal.SIGINT))
    timer.start()
    started = time.monotonic()
    try:
        with pytest.raises(KeyboardInterrupt):
            check(_codec(slow), SOURCE, n=N, rel=0.5, edge_cases=False, isolate=isolate)
    finally:
        timer.cancel()
    assert time.monotonic() - started < 4.5  # interrupted, not waited out


@pytest.mark.parametrize("isolate", [True, False])
def test_a_non_daemon_thread_left_running_is_named(isolate: bool) -> None:
    stop = threading.Event()

    def leaky(data: bytes) -> bytes:
        threading.Thread(target=stop.wait, args=(3,), name="leaky-flusher").start()
        return zlib.decompress(data)

    try:
        with pytest.raises(CodecMisbehaviour, match=r"non-daemon thread.*leaky-flusher"):
            check(_codec(leaky), SOURCE, n=N, rel=0.5, edge_cases=False, isolate=isolate)
    finally:
        stop.set()


@pytest.mark.parametrize("isolate", [True, False])
def test_a_thread_that_ends_in_time_is_fine(isolate: bool) -> None:
    def brief(data: bytes) -> bytes:
        threading.Thread(target=time.sleep, args=(0.01,)).start()
        return zlib.decompress(data)

    check(_codec(brief), SOURCE, n=N, rel=0.5, edge_cases=False, isolate=isolate)


@needs_proc
@pytest.mark.parametrize("isolate", [True, False])
def test_a_child_process_left_running_is_named_and_killed(isolate: bool,
                                                          tmp_path: Path) -> None:
    pid_file = tmp_path / "pid"

    def spawning(data: bytes) -> bytes:
        proc = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(30)"])
        pid_file.write_text(str(proc.pid))
        return zlib.decompress(data)

    with pytest.raises(CodecMisbehaviour, match=r"child process\(es\) pid \d+ .*now killed"):
        check(_codec(spawning), SOURCE, n=N, rel=0.5, edge_cases=False, isolate=isolate)
    pid = int(pid_file.read_text())
    deadline = time.monotonic() + 5
    while Path(f"/proc/{pid}").exists() and time.monotonic() < deadline:
        time.sleep(0.02)
    assert not Path(f"/proc/{pid}").exists()


@needs_fork
def test_the_codec_state_changes_stay_in_the_child() -> None:
    """Documented: a check does not change the codec objects of the test process."""
    calls: list[int] = []

    def counting(data: bytes) -> bytes:
        calls.append(len(data))
        return zlib.compress(data)

    check(_codec(compress=counting), SOURCE, n=N, rel=0.5, edge_cases=False, isolate=True)
    assert calls == []
    check(_codec(compress=counting), SOURCE, n=N, rel=0.5, edge_cases=False, isolate=False)
    assert calls != []


PLUGIN_CASE = """
import os, zlib
from pytest_ratefloor import sources
from pytest_ratefloor.codecs import ByteCodec

def ending(data):
    os._exit(0)

def test_ends_the_process(ratefloor):
    ratefloor.check(ByteCodec(zlib.compress, ending, name="ender"), sources.uniform(16),
                    n=2000, rel=0.5)

def interrupting(data):
    raise KeyboardInterrupt

def test_interrupts(ratefloor):
    ratefloor.check(ByteCodec(interrupting, zlib.decompress, name="ctrl"), sources.uniform(16),
                    n=2000, rel=0.5)

def test_after(ratefloor):
    ratefloor.check(ByteCodec(zlib.compress, zlib.decompress, name="fine"),
                    sources.uniform(16), n=2000, rel=0.5)
"""


@needs_fork
def test_a_pytest_run_with_a_process_ending_codec_does_not_exit_0(
    pytester: pytest.Pytester,
) -> None:
    """The default run: checks in process under the supervisor; os._exit is intercepted."""
    pytester.makepyfile(test_codecs=PLUGIN_CASE)
    result = pytester.runpytest_subprocess("-p", "no:cacheprovider")
    result.assert_outcomes(passed=1, failed=2)  # the session went on after both
    assert result.ret == pytest.ExitCode.TESTS_FAILED
    result.stdout.fnmatch_lines(["*codec 'ender'*called os._exit(0)*"])
    result.stdout.fnmatch_lines(["*codec 'ctrl'*raised KeyboardInterrupt*"])


@needs_fork
def test_checks_forked_one_by_one_name_the_exit_status(pytester: pytest.Pytester) -> None:
    pytester.makeini("[pytest]\nratefloor_isolate = check\n")
    pytester.makepyfile(test_codecs=PLUGIN_CASE)
    result = pytester.runpytest_subprocess("-p", "no:cacheprovider")
    result.assert_outcomes(passed=1, failed=2)
    assert result.ret == pytest.ExitCode.TESTS_FAILED
    result.stdout.fnmatch_lines(["*codec 'ender'*ended with exit status 0*"])
    result.stdout.fnmatch_lines(["*codec 'ctrl'*raised KeyboardInterrupt*"])


def test_the_ini_key_turns_isolation_off_and_the_guards_still_hold(
    pytester: pytest.Pytester,
) -> None:
    pytester.makeini("[pytest]\nratefloor_isolate = false\n")
    pytester.makepyfile(test_codecs=PLUGIN_CASE)
    result = pytester.runpytest_subprocess("-p", "no:cacheprovider")
    result.assert_outcomes(passed=1, failed=2)
    assert result.ret == pytest.ExitCode.TESTS_FAILED
    result.stdout.fnmatch_lines(["*codec 'ender'*called os._exit(0)*"])
