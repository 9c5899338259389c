"""The cheaper paths of :mod:`pytest_ratefloor.isolation` guard as much as the dear ones.

A forked check notes its steps on a page of shared memory (no pipe write and
no wake-up of the parent per step), asks ``waitid`` before reading ``/proc``
for child processes, and freezes the collector's view of what it inherited.
Each test here shows one of these keeps what isolation promises: the step a
dying child was at is named, child processes are found without taking their
exit status from their owner, and garbage is still collected. Timings are in
``benchmarks/bench_check.py``, not here.
"""

from __future__ import annotations

import gc
import os
import signal
import subprocess
import sys
import time
import zlib
from pathlib import Path

import pytest

from pytest_ratefloor import isolation, sources
from pytest_ratefloor.boards import StepBoard
from pytest_ratefloor.checks import check
from pytest_ratefloor.codecs import ByteCodec
from pytest_ratefloor.errors import CodecMisbehaviour

needs_fork = pytest.mark.skipif(not isolation.FORK_AVAILABLE, reason="needs fork isolation")
needs_proc = pytest.mark.skipif(not Path("/proc/self/task").exists(), reason="needs /proc")
needs_waitid = pytest.mark.skipif(not hasattr(os, "waitid"), reason="needs os.waitid")

SOURCE = sources.uniform(16)


# -- the step board ------------------------------------------------------------------------


def test_the_board_reads_back_the_last_step_and_starts_empty() -> None:
    board = StepBoard()
    assert board.read() == ""
    assert board.read("starting the check") == "starting the check"
    board.write("encoding the sample")
    board.write("décodage — 解码")  # non-ASCII survives as UTF-8
    assert board.read("starting the check") == "décodage — 解码"
    board.clear()
    assert board.read("starting the check") == "starting the check"


def test_a_step_cut_off_mid_write_leaves_the_last_whole_one() -> None:
    board = StepBoard()
    board.write("decoding the sample")
    # what a child killed inside write() leaves: the other slot half written, not shown
    hidden = board._offset(1 - board.memory[0])
    board.memory[hidden:hidden + 4] = (40).to_bytes(4, "little")
    board.memory[hidden + 4:hidden + 9] = b"packi"
    assert board.read() == "decoding the sample"


def test_a_step_longer_than_a_slot_is_cut_to_it() -> None:
    board = StepBoard()
    text = "é" * board.SLOT  # 2 bytes each in UTF-8: the cut lands on a character
    board.write(text)
    read = board.read()
    assert read.encode("utf-8") == text.encode("utf-8")[: board.SLOT]  # an even cut here
    board.write("x" + text)  # now the cut splits a character: replaced, not an error
    cut = board.read()
    assert cut.startswith("xé")
    assert cut.endswith("\ufffd")


@needs_fork
def test_a_child_killed_after_many_steps_is_named_at_its_last_step() -> None:
    def work() -> None:
        for i in range(200):
            isolation.step(f"step {i}")
        os.kill(os.getpid(), signal.SIGKILL)

    with pytest.raises(CodecMisbehaviour, match=r"killed by SIGKILL .* while step 199;"):
        isolation.guarded(work, case="codec 'k' on test", isolate=True)


@needs_fork
def test_a_check_nested_in_the_child_names_its_own_step_and_leaves_the_outer_board() -> None:
    def inner() -> None:
        isolation.step("inner decoding")
        os._exit(3)

    def nested_failure() -> None:
        isolation.step("outer encoding")
        isolation.guarded(inner, case="codec 'in' on test", isolate=True)

    with pytest.raises(CodecMisbehaviour,
                       match=r"codec 'in' on test: .*exit status 3 .* while inner decoding;"):
        isolation.guarded(nested_failure, case="codec 'out' on test", isolate=True)

    def outer_after_nested() -> None:
        isolation.step("outer encoding")
        isolation.guarded(lambda: isolation.step("inner decoding"), case="codec 'in' on test",
                          isolate=True)
        os._exit(4)  # the nested check's steps were its own: the outer one is still here

    with pytest.raises(CodecMisbehaviour,
                       match=r"codec 'out' on test: .*exit status 4 .* while outer encoding;"):
        isolation.guarded(outer_after_nested, case="codec 'out' on test", isolate=True)


@needs_fork
def test_a_large_result_comes_back_whole() -> None:
    blob = bytes(range(256)) * 8192  # 2 MiB: many pipe buffers
    assert isolation.guarded(lambda: blob, case="codec 'big' on test", isolate=True) == blob


# -- child processes: waitid first, /proc only when there are any ----------------------------


@needs_waitid
def test_looking_for_child_processes_takes_no_exit_status_from_its_owner() -> None:
    proc = subprocess.Popen([sys.executable, "-c", "raise SystemExit(3)"])
    try:
        deadline = time.monotonic() + 10
        # wait until it has ended, without reaping it (as the check's scan would meet it)
        while (os.waitid(os.P_PID, proc.pid, os.WEXITED | os.WNOHANG | os.WNOWAIT) is None
               and time.monotonic() < deadline):
            time.sleep(0.01)
        assert isolation._has_children()
        isolation._child_pids()
        assert isolation._has_children()  # still there: neither call reaped it
    finally:
        code = proc.wait(timeout=10)
    assert code == 3  # subprocess gets the real status (an ECHILD would have made it 0)


@needs_waitid
def test_an_in_process_check_leaves_the_test_s_own_child_alone() -> None:
    proc = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(0.2); "
                             "raise SystemExit(5)"])
    try:
        check(ByteCodec(zlib.compress, zlib.decompress, name="z"), SOURCE, n=2000, rel=0.5,
              edge_cases=False, isolate=False)
    finally:
        code = proc.wait(timeout=10)
    assert code == 5


@needs_fork
@needs_waitid
def test_a_fresh_child_has_no_children_until_the_codec_starts_one() -> None:
    def work() -> tuple[bool, bool, bool]:
        alone = isolation._has_children()
        proc = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(30)"])
        running = isolation._has_children()
        proc.kill()
        proc.wait()
        return alone, running, isolation._has_children()

    assert isolation.guarded(work, case="codec 'p' on test", isolate=True) == (False, True, False)


@needs_fork
def test_an_in_process_check_first_reaps_the_children_of_earlier_forked_ones() -> None:
    isolation.guarded(lambda: None, case="codec 'f' on test", isolate=True)
    pids = list(isolation._ending)
    assert pids  # the forked child is reaped later, not while the test waits
    isolation.guarded(lambda: None, case="codec 'i' on test", isolate=False)
    assert isolation._ending == []
    for pid in pids:
        with pytest.raises(ChildProcessError):
            os.waitpid(pid, os.WNOHANG)  # gone: no child left for _child_pids to look up


@needs_proc
@pytest.mark.parametrize("isolate", [True, False])
def test_a_child_that_ended_unwaited_is_not_left_running(isolate: bool) -> None:
    def spawning(data: bytes) -> bytes:
        proc = subprocess.Popen([sys.executable, "-c", "pass"])
        deadline = time.monotonic() + 10
        while time.monotonic() < deadline:  # a zombie: ended, never waited for
            state = Path(f"/proc/{proc.pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
            if state == "Z":
                break
            time.sleep(0.01)
        proc.returncode = 0  # keep Popen's finaliser from waiting on it later
        return zlib.decompress(data)

    check(ByteCodec(zlib.compress, spawning, name="z"), SOURCE, n=2000, rel=0.5,
          edge_cases=False, isolate=isolate)


# -- the collector in the child ----------------------------------------------------------


class _Node:
    def __init__(self) -> None:
        self.other: _Node | None = None


@needs_fork
def test_the_child_freezes_what_it_inherited_and_still_collects_its_own_cycles() -> None:
    before = gc.get_freeze_count()

    def work() -> tuple[int, int]:
        frozen = gc.get_freeze_count()
        a, b = _Node(), _Node()
        a.other, b.other = b, a
        del a, b
        return frozen, gc.collect()

    frozen, collected = isolation.guarded(work, case="codec 'gc' on test", isolate=True)
    assert frozen > before  # the inherited objects left the collector's view in the child
    assert collected >= 2  # the two nodes of the cycle the work made, found and freed
    assert gc.get_freeze_count() == before  # and nothing changed in this process
