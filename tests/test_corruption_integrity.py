"""Integrity of the corruption check: nothing the decoder starts outlives the
check, ``MemoryError`` means growth only when the worker really grew, and the
replay lines of a failure run as printed.

Timeouts are short (a hang costs one timeout) so the module runs in seconds.
"""

from __future__ import annotations

import functools
import gzip
import os
import shutil
import struct
import subprocess
import sys
import time
import zlib
from collections import Counter
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from pytest_ratefloor.codecs import ByteCodec
from pytest_ratefloor.corruption import (
    assert_survives_corruption,
    corruption_schedule,
    run_corruption_trials,
)
from pytest_ratefloor.errors import CorruptionFailure

linux_only = pytest.mark.skipif(
    not sys.platform.startswith("linux"), reason="fork, process groups and /proc as on Linux"
)

SYMBOLS = (np.arange(300) * 7 % 11).astype(np.int64)


def frame_encode(symbols: np.ndarray) -> bytes:
    """A 4-byte count, then one byte per symbol."""
    return struct.pack(">I", len(symbols)) + np.asarray(symbols, dtype=np.uint8).tobytes()


CLEAN = frame_encode(SYMBOLS)


def exit_on_damage(data: bytes, n: int) -> np.ndarray:
    """Ends the interpreter on any stream but the clean one: a failure every trial,
    and one a replay reproduces (``SystemExit``)."""
    if data != CLEAN:
        raise SystemExit(f"damaged stream of {len(data)} bytes")
    return np.frombuffer(data[4:], dtype=np.uint8)


def exit_with_code(data: bytes, n: int, code: int = 1) -> None:
    raise SystemExit(code)


# ---------------------------------------------------------------------------
# 1. processes the decoder starts die with the worker


def _live_members(pgid: int) -> list[int]:
    """Processes of group ``pgid`` that are not zombies, from /proc (proc(5): the
    fields after the parenthesised command are state, ppid, pgrp)."""
    alive = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
        except OSError:
            continue  # gone in between
        fields = stat.rsplit(")", 1)[1].split()
        if int(fields[2]) == pgid and fields[0] != "Z":
            alive.append(int(entry.name))
    return alive


def _group_is_gone(pgid: int, within: float = 2.0) -> bool:
    """True once no live process is left in group ``pgid`` (killed processes may
    stay zombies until init reaps them; those are not alive)."""
    deadline = time.monotonic() + within
    while True:
        try:
            os.killpg(pgid, 0)
        except ProcessLookupError:
            return True
        if not _live_members(pgid):
            return True
        if time.monotonic() > deadline:
            return False
        time.sleep(0.02)


def _recorded_groups(record: Path) -> list[tuple[int, int]]:
    """(worker pid, process group) pairs the decoder wrote, one line per call."""
    return [
        (int(pid), int(group))
        for pid, group in (line.split() for line in record.read_text().splitlines())
    ]


def _recording(record: Path, decode: Callable[[bytes, int], Any]) -> Callable[[bytes, int], Any]:
    def decoder(data: bytes, n: int) -> Any:
        with open(record, "a") as fh:
            fh.write(f"{os.getpid()} {os.getpgrp()}\n")
        return decode(data, n)

    return decoder


@linux_only
def test_a_hung_decoder_takes_its_child_processes_with_it(tmp_path: Path) -> None:
    record, child_file = tmp_path / "groups", tmp_path / "child"

    def starts_sleep_and_hangs(data: bytes, n: int) -> None:
        child = subprocess.Popen(["sleep", "30"])
        child_file.write_text(str(child.pid))
        child.wait()

    started = time.monotonic()
    run = run_corruption_trials(
        _recording(record, starts_sleep_and_hangs), b"abc", 3, corruption_schedule(3, 1),
        timeout=0.3,
    )
    assert [o.status for o in run.outcomes] == ["hang"]
    [(worker, group)] = _recorded_groups(record)
    assert group == worker  # the worker leads a group of its own ...
    assert group != os.getpgrp()  # ... not the test session's
    assert _group_is_gone(group), f"still alive in group {group}: {_live_members(group)}"
    sleeper = int(child_file.read_text())
    assert sleeper not in _live_members(group)
    assert time.monotonic() - started < 3.0


@linux_only
@pytest.mark.skipif(shutil.which("gzip") is None, reason="needs the gzip command")
def test_a_shell_pipeline_that_falls_back_to_sleep_leaves_no_orphans(tmp_path: Path) -> None:
    # the decoder of the report: gzip refuses the damaged stream, then `sleep 30`
    record = tmp_path / "groups"

    def shell_decoder(data: bytes, n: int) -> bytes:
        out = subprocess.run(
            ["sh", "-c", "gzip -dc || sleep 30"], input=data, capture_output=True, check=False
        )
        return out.stdout

    def gzip_encode(symbols: np.ndarray) -> bytes:
        return gzip.compress(np.asarray(symbols, dtype=np.uint8).tobytes())

    codec = (gzip_encode, _recording(record, shell_decoder))
    with pytest.raises(CorruptionFailure) as info:
        assert_survives_corruption(
            codec, SYMBOLS, trials=2, timeout=0.3, save_dir=tmp_path / "saved"
        )
    assert "trial 0: hang: did not return within 0.3 s" in str(info.value)
    groups = _recorded_groups(record)
    assert len(groups) == 2  # one worker per hung trial
    for worker, group in groups:
        assert group == worker != os.getpgrp()
        assert _group_is_gone(group), f"still alive in group {group}: {_live_members(group)}"


@linux_only
def test_a_background_child_of_a_decoder_that_returns_is_ended_too(tmp_path: Path) -> None:
    record = tmp_path / "groups"

    def leaves_a_daemon(data: bytes, n: int) -> list[int]:
        subprocess.Popen(["sleep", "30"])  # never waited for
        return [0] * n

    run = run_corruption_trials(
        _recording(record, leaves_a_daemon), b"abc", 3, corruption_schedule(3, 3)
    )
    assert [o.status for o in run.outcomes] == ["returned"] * 3
    [(worker, group)] = set(_recorded_groups(record))
    assert group == worker
    assert _group_is_gone(group), f"still alive in group {group}: {_live_members(group)}"


# ---------------------------------------------------------------------------
# 2. MemoryError: a refusal, or growth


def refuses_huge_header(data: bytes, n: int) -> np.ndarray:
    """Reads a size from the header and refuses it at once, as a careful C decoder
    does when malloc would fail (6·10^18 bytes here)."""
    if data != CLEAN:
        raise MemoryError("header asks for 6000000000000000000 bytes")
    return np.frombuffer(data[4:], dtype=np.uint8)


def grows_without_bound(data: bytes, n: int) -> np.ndarray:
    """Appends to a buffer until memory runs out."""
    if data != CLEAN:
        buffer = bytearray()
        while True:
            buffer += bytes(1 << 20)
    return np.frombuffer(data[4:], dtype=np.uint8)


@linux_only
@pytest.mark.parametrize("limit", [64 << 20, None], ids=["64MiB", "no-limit"])
def test_an_immediate_memory_error_is_an_ordinary_rejection(limit: int | None) -> None:
    run = assert_survives_corruption(
        (frame_encode, refuses_huge_header), SYMBOLS, trials=6, memory_limit=limit
    )
    assert Counter(o.status for o in run.outcomes) == {"raised": 6}
    assert "6 raised (MemoryError 6)" in run.summary()


@linux_only
def test_real_growth_is_still_memory_growth(tmp_path: Path) -> None:
    with pytest.raises(CorruptionFailure) as info:
        assert_survives_corruption(
            (frame_encode, grows_without_bound), SYMBOLS, trials=2, memory_limit=64 << 20,
            save_dir=tmp_path,
        )
    message = str(info.value)
    assert "trial 0: memory growth past the limit: raised MemoryError after the worker grew by" \
        in message
    assert "(limit: 64 MiB of growth, guard: address-space)" in message
    assert "2 grew memory past the limit" in message


@linux_only
def test_one_run_tells_refusal_from_growth() -> None:
    def both(data: bytes, n: int) -> None:
        if len(data) == 0:
            raise MemoryError  # refused at once
        grows_without_bound(data, n)

    run = run_corruption_trials(
        both, CLEAN, len(SYMBOLS), corruption_schedule(len(CLEAN), 3), memory_limit=64 << 20
    )
    statuses = [o.status for o in run.outcomes]
    assert statuses == ["raised", "memory", "memory"]
    assert run.outcomes[0].detail == "MemoryError"


# ---------------------------------------------------------------------------
# 3. replay lines run as printed


def _replay(message: str, trial: int) -> tuple[str, str]:
    """The replay line of ``trial`` (without ``replay: ``) and the line after it."""
    lines = message.splitlines()
    for i, line in enumerate(lines):
        if line.strip().startswith(f"trial {trial}:"):
            for j in range(i + 1, len(lines)):
                if lines[j].strip().startswith("replay: "):
                    after = lines[j + 1].strip() if j + 1 < len(lines) else ""
                    return lines[j].strip().removeprefix("replay: "), after
    raise AssertionError(f"no replay line for trial {trial} in:\n{message}")


def _failure(codec: object, tmp_path: Path, **kwargs: Any) -> str:
    kwargs.setdefault("trials", 2)
    with pytest.raises(CorruptionFailure) as info:
        assert_survives_corruption(codec, SYMBOLS, save_dir=tmp_path, **kwargs)
    return str(info.value)


class FrameCodec:
    """A codec object with encode/decode methods, as a team would write one."""

    name = "frame"

    def encode(self, symbols: np.ndarray) -> bytes:
        return frame_encode(symbols)

    def decode(self, data: bytes, n: int) -> np.ndarray:
        return exit_on_damage(data, n)


MODULE_CODEC = FrameCodec()


@linux_only
def test_replay_of_a_module_level_function_runs_anywhere(tmp_path: Path) -> None:
    line, after = _replay(_failure((frame_encode, exit_on_damage), tmp_path), 0)
    assert f"import {__name__}; {__name__}.exit_on_damage(load_damaged(" in line
    assert not after.startswith("(")  # no note: nothing to bind
    with pytest.raises(SystemExit, match="damaged stream of 0 bytes"):
        exec(line, {})


@linux_only
def test_replay_of_a_bound_method_names_the_instance(tmp_path: Path) -> None:
    codec = FrameCodec()
    with pytest.raises(CorruptionFailure) as info:
        assert_survives_corruption(codec, SYMBOLS, trials=2, save_dir=tmp_path)
    line, after = _replay(str(info.value), 1)
    assert "; codec.decode(load_damaged(" in line
    assert "test_replay_of_a_bound_method_names_the_instance" in after
    assert "where codec is local" in after
    # pasted into this test, where `codec` is in scope, it reproduces the failure
    with pytest.raises(SystemExit, match=f"damaged stream of {len(CLEAN) - 1} bytes"):
        exec(line, {"codec": codec})
    # the same through an (encode, decode) pair of the bound methods, via a helper
    # (whose `codec` is the pair): the nearest function with a name for the instance
    line, after = _replay(_failure((codec.encode, codec.decode), tmp_path), 0)
    assert "; codec.decode(load_damaged(" in line
    assert "(runs in test_replay_of_a_bound_method_names_the_instance (tests/" in after
    with pytest.raises(SystemExit):
        exec(line, {"codec": codec})


@linux_only
def test_replay_of_a_module_level_instance_runs_in_the_module(tmp_path: Path) -> None:
    line, after = _replay(_failure(MODULE_CODEC, tmp_path), 0)
    assert "; MODULE_CODEC.decode(load_damaged(" in line
    assert "test_corruption_integrity.py" in after
    with pytest.raises(SystemExit):
        exec(line, dict(globals()))  # the namespace of this test module


@linux_only
def test_replay_of_a_nameless_lambda_says_what_to_bind(tmp_path: Path) -> None:
    message = _failure((frame_encode, lambda data, n: exit_on_damage(data, n)), tmp_path)
    line, after = _replay(message, 0)
    assert line.startswith("from pytest_ratefloor.corruption import load_damaged; decode(")
    assert "(decode: a lambda defined at " in after
    assert "test_corruption_integrity.py:" in after
    assert "bind decode = <the decoder you passed> first" in after
    with pytest.raises(SystemExit):
        exec(line, {"decode": lambda data, n: exit_on_damage(data, n)})


def _make_decoder() -> Callable[[bytes, int], np.ndarray]:
    def closure(data: bytes, n: int) -> np.ndarray:
        return exit_on_damage(data, n)

    return closure


@linux_only
def test_replay_of_a_closure_uses_the_name_it_has_in_the_test(tmp_path: Path) -> None:
    unpack = _make_decoder()
    line, after = _replay(_failure((frame_encode, unpack), tmp_path), 0)
    assert "; unpack(load_damaged(" in line
    assert "where unpack is local" in after
    with pytest.raises(SystemExit):
        exec(line, {"unpack": unpack})
    # with no name in reach, the note names the nested function and where it is defined
    line, after = _replay(_failure((frame_encode, _make_decoder()), tmp_path), 0)
    assert "; decode(load_damaged(" in line
    assert "the nested function _make_decoder.<locals>.closure defined at" in after


@linux_only
def test_replay_of_a_partial_writes_out_its_arguments(tmp_path: Path) -> None:
    # a partial of an importable function with literal arguments is written out,
    # so the line runs anywhere (though the partial is local here)
    decoder = functools.partial(exit_with_code, code=3)
    line, after = _replay(_failure((frame_encode, decoder), tmp_path, trials=1), 0)
    assert f"import functools; import {__name__}; " in line
    assert f"functools.partial({__name__}.exit_with_code, code=3)(load_damaged(" in line
    assert not after.startswith("(")
    with pytest.raises(SystemExit) as exit_info:
        exec(line, {})
    assert exit_info.value.code == 3
    # arguments that are not literals: the partial's local name is used instead
    marker = object()
    odd = functools.partial(exit_with_code, code=marker)
    line, after = _replay(_failure((frame_encode, odd), tmp_path, trials=1), 0)
    assert "; odd(load_damaged(" in line
    assert "where odd is local" in after
    with pytest.raises(SystemExit) as exit_info:
        exec(line, {"odd": odd})
    assert exit_info.value.code is marker


@linux_only
def test_replay_of_a_table_given_as_a_mapping_rebuilds_the_table(tmp_path: Path) -> None:
    table = {0: "0", 1: "10", 2: "110", 3: "111"}
    symbols = SYMBOLS % 4
    with pytest.raises(CorruptionFailure) as info:
        assert_survives_corruption(
            dict(table), symbols, trials=4, must_detect=True, save_dir=tmp_path
        )
    message = str(info.value)
    trial = int(message.split("\n  trial ", 1)[1].split(":", 1)[0])
    line, _ = _replay(message, trial)
    assert "from pytest_ratefloor.codes import Codebook; " in line
    assert "Codebook({0: '0', 1: '10', 2: '110', 3: '111'}, name='codebook').decode(" in line
    # the trial returned wrong symbols silently; the replay returns the same ones
    imports, call = line.rsplit("; ", 1)
    namespace: dict[str, Any] = {}
    exec(imports, namespace)
    replayed = eval(call, namespace)
    assert len(replayed) == len(symbols)
    assert not np.array_equal(replayed, symbols)


@linux_only
def test_replay_of_a_bytecodec_builtin_and_bound_decompressor(tmp_path: Path) -> None:
    def always_exits(data: bytes) -> bytes:
        raise SystemExit("decompressor gave up")

    line, _ = _replay(_failure(ByteCodec(zlib.compress, always_exits, symbol="u8"), tmp_path), 0)
    assert "; always_exits(load_damaged(" in line
    with pytest.raises(SystemExit):
        exec(line, {"always_exits": always_exits})


def test_a_codebook_is_written_out_only_when_small_and_nameless() -> None:
    from pytest_ratefloor.codecs import as_codec
    from pytest_ratefloor.codes import Codebook
    from pytest_ratefloor.corruption.replay import TABLE_MAX, replay_lines

    saved = Path("saved.bin")
    [line] = replay_lines(as_codec(Codebook({0: "0", 1: "1"}, name="coin")), saved, 7)
    assert line.endswith(
        "from pytest_ratefloor.codes import Codebook; "
        "Codebook({0: '0', 1: '1'}, name='coin').decode(load_damaged('saved.bin'), 7)"
    )
    table = Codebook({s: format(s, "06b") for s in range(TABLE_MAX + 1)})
    line, note = replay_lines(as_codec(dict(table.codewords)), saved, 7)
    assert line.endswith("; codebook.decode(load_damaged('saved.bin'), 7)")
    assert note.startswith("(codebook: Codebook('codebook', 33 symbols, lengths 6..6 bits)")
    # a name in reach is used for a table of any size
    line, note = replay_lines(as_codec(table), saved, 7)
    assert line.endswith("; table.decode(load_damaged('saved.bin'), 7)")
    assert "where table is local" in note
