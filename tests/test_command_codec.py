"""Tests of CommandCodec (pytest_ratefloor.command): programs as codecs.

Two real programs stand in for a team's codec: a small C program built here
with the system compiler (a byte copy and a run-length coder; skipped where
no compiler exists) and a Python script run as a program (zlib, checked
against the stdlib's zlib in this process).
"""

from __future__ import annotations

import os
import pickle
import shutil
import subprocess
import sys
import time
import zlib
from pathlib import Path

import numpy as np
import pytest

import pytest_ratefloor
from pytest_ratefloor import sources
from pytest_ratefloor.checks import check
from pytest_ratefloor.codecs import as_codec
from pytest_ratefloor.command import CommandCodec, CommandError, run_decoder
from pytest_ratefloor.corruption import assert_survives_corruption
from pytest_ratefloor.corruption.replay import replay_lines
from pytest_ratefloor.edge_cases import edge_case_inputs
from pytest_ratefloor.errors import (
    CodecContractError,
    CodecMisbehaviour,
    CorruptionFailure,
    LayoutError,
)

# The run-length format: (byte, run length - 1) pairs, runs of at most 256.
# "rle-d N" checks that RATEFLOOR_N equals N and that the stream holds exactly N
# bytes; "rle-hang N FILE" decodes the same way but, on a bad stream, appends its
# pid to FILE and waits forever (a decoder that hangs on damage).
C_SOURCE = r"""
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

static int fail(const char *why, const char *pidfile) {
    if (pidfile) {
        FILE *f = fopen(pidfile, "a");
        if (f) { fprintf(f, "%ld\n", (long)getpid()); fclose(f); }
        for (;;) pause();
    }
    fprintf(stderr, "rle: %s\n", why);
    return 3;
}

int main(int argc, char **argv) {
    if (argc == 2 && strcmp(argv[1], "copy") == 0) {
        char buf[65536];
        size_t k;
        while ((k = fread(buf, 1, sizeof buf, stdin)) > 0) fwrite(buf, 1, k, stdout);
        return 0;
    }
    if (argc == 2 && strcmp(argv[1], "rle-c") == 0) {
        int prev = getchar(), c;
        unsigned run = 1;
        if (prev == EOF) return 0;
        while ((c = getchar()) != EOF) {
            if (c == prev && run < 256) { run++; continue; }
            putchar(prev); putchar((int)(run - 1));
            prev = c; run = 1;
        }
        putchar(prev); putchar((int)(run - 1));
        return 0;
    }
    if (argc >= 3 && (strcmp(argv[1], "rle-d") == 0 || strcmp(argv[1], "rle-hang") == 0)) {
        const char *pidfile = strcmp(argv[1], "rle-hang") == 0 && argc == 4 ? argv[3] : NULL;
        long want = strtol(argv[2], NULL, 10), got = 0;
        const char *env = getenv("RATEFLOOR_N");
        int b, r, i;
        if (!env || strtol(env, NULL, 10) != want) return fail("RATEFLOOR_N is not N", NULL);
        while ((b = getchar()) != EOF) {
            if ((r = getchar()) == EOF) return fail("odd stream length", pidfile);
            if (got + r + 1 > want) return fail("more symbols than N", pidfile);
            for (i = 0; i <= r; i++) putchar(b);
            got += r + 1;
        }
        if (got != want) return fail("fewer symbols than N", pidfile);
        return 0;
    }
    fprintf(stderr, "usage: rle copy | rle-c | rle-d N | rle-hang N FILE\n");
    return 64;
}
"""

# zlib as a program; "d" checks that RATEFLOOR_N equals its argument. The other
# modes misbehave on purpose.
PY_SOURCE = r"""
import os, sys, time, zlib

mode = sys.argv[1]
data = sys.stdin.buffer.read()
if mode == "c":
    sys.stdout.buffer.write(zlib.compress(data, 9))
elif mode == "d":
    if os.environ.get("RATEFLOOR_N") != sys.argv[2]:
        sys.exit("RATEFLOOR_N is not the n of the command line")
    sys.stdout.buffer.write(zlib.decompress(data))
elif mode == "fail":
    for i in range(12):
        print(f"decoder trouble, line {i}", file=sys.stderr)
    sys.exit(3)
elif mode == "noisy":
    print("warning: this build is verbose", file=sys.stderr)
    sys.stdout.buffer.write(data)
elif mode == "echo":
    sys.stdout.write(sys.argv[2])
elif mode == "fragile":  # decodes good streams; dies on a signal at any damage
    try:
        sys.stdout.buffer.write(zlib.decompress(data))
    except zlib.error:
        import signal
        os.kill(os.getpid(), signal.SIGSEGV)
elif mode == "slow-on-damage":  # decodes good streams; hangs past its time limit on damage
    try:
        sys.stdout.buffer.write(zlib.decompress(data))
    except zlib.error:
        time.sleep(30)
"""


@pytest.fixture(scope="module")
def rle(tmp_path_factory: pytest.TempPathFactory) -> str:
    """The C program, built with the system compiler."""
    compiler = shutil.which("cc") or shutil.which("gcc")
    if compiler is None:
        pytest.skip("no C compiler (cc or gcc) on PATH")
    directory = tmp_path_factory.mktemp("rle")
    source = directory / "rle.c"
    source.write_text(C_SOURCE)
    program = directory / "rle"
    built = subprocess.run([compiler, "-O2", "-o", str(program), str(source)],
                           capture_output=True, text=True, check=False)
    if built.returncode != 0:
        pytest.skip(f"the C compiler failed: {built.stderr.strip()[:200]}")
    return str(program)


@pytest.fixture(scope="module")
def script(tmp_path_factory: pytest.TempPathFactory) -> list[str]:
    """The Python script as a program: its argv prefix (-S: no site start-up)."""
    path = tmp_path_factory.mktemp("script") / "zcodec.py"
    path.write_text(PY_SOURCE)
    return [sys.executable, "-S", str(path)]


def _running(pid: int, *, group: bool) -> bool:
    """Whether a process (``group``: any process of the group ``pid``) still runs.

    A zombie does not count on Linux, where ``/proc`` tells: it has ended and
    waits only for whoever adopted it to reap it (which may take a while in a
    container whose init reaps slowly).
    """
    try:
        (os.killpg if group else os.kill)(pid, 0)
    except ProcessLookupError:
        return False
    proc = Path("/proc")
    if not proc.is_dir():
        return True
    for stat in proc.glob("[0-9]*/stat"):
        try:
            state, _, pgrp = stat.read_text().rsplit(")", 1)[1].split()[:3]
        except (OSError, IndexError, ValueError):
            continue  # ended meanwhile
        if (int(pgrp) == pid if group else int(stat.parent.name) == pid) and state != "Z":
            return True
    return False


def _gone(pid: int, *, group: bool, within: float = 5.0) -> bool:
    """Whether a process (group) has stopped running, waiting up to ``within`` seconds."""
    deadline = time.monotonic() + within
    while _running(pid, group=group):
        if time.monotonic() > deadline:
            return False
        time.sleep(0.02)
    return True


def _rle_reference(data: bytes) -> bytes:
    """The run-length format written out in Python, to check the C encoder's stream."""
    out = bytearray()
    i = 0
    while i < len(data):
        j = i
        while j < len(data) and data[j] == data[i] and j - i < 256:
            j += 1
        out += bytes((data[i], j - i - 1))
        i = j
    return bytes(out)


# ------------------------------------------------------------- real programs


def test_c_byte_copy_passes_the_check_at_the_exact_packed_size(rle: str) -> None:
    codec = CommandCodec([rle, "copy"], [rle, "copy"], name="copy")
    byte_sample = check(codec, sources.uniform(256), n=20_000, rel=0.01)
    assert byte_sample.bits == 8 * 20_000  # one byte per symbol, as numpy's uint8 bytes
    assert codec.for_source(sources.uniform(256)).layout == "command `rle copy` (u8 on stdin)"
    bit_sample = check(codec, sources.bernoulli(0.5), n=20_001, rel=0.01)
    assert bit_sample.bits == 8 * len(np.packbits(np.zeros(20_001, np.uint8)))  # 8 flips a byte


def test_c_run_length_coder_is_told_n_and_round_trips(rle: str) -> None:
    codec = CommandCodec(f"{rle} rle-c", [rle, "rle-d", "{n}"], name="rle", symbol="u8")
    source = sources.bernoulli(0.02)
    # (byte, run) pairs cost about 2·8 bits per run: far above the floor, hence the rel
    m = check(codec, source, n=20_000, rel=5.0)
    sample = np.asarray(source.sample(20_000, 0), dtype=np.uint8)
    bound = codec.for_source(source)
    encoded = bound.encode(sample.astype(np.int64))
    assert encoded.payload == _rle_reference(sample.tobytes())
    assert m.bits == encoded.bits
    assert bound.decode(encoded, 20_000).tolist() == sample.tolist()


def test_python_script_as_a_program_passes_the_check(script: list[str]) -> None:
    codec = CommandCodec([*script, "c"], [*script, "d", "{n}"], name="zlib-script")
    source = sources.bernoulli(0.5)
    # edge cases off: a Python start-up costs 10-40 ms, and the 54 edge-case runs are
    # the C program's to show (test_processes_per_check_match_the_documented_count)
    m = check(codec, source, n=20_000, rel=0.01, edge_cases=False)
    packed = np.packbits(np.asarray(source.sample(20_000, 0), dtype=np.uint8)).tobytes()
    assert m.bits == 8 * len(zlib.compress(packed, 9))  # the stdlib's zlib, in this process


def test_text_symbols_one_integer_per_line(script: list[str]) -> None:
    codec = CommandCodec([*script, "c"], [*script, "d", "{n}"], name="zlib-text", symbol="text")
    source = sources.two_sided_geometric(0.6)  # negative symbols too
    bound = codec.for_source(source)
    assert bound.symbol == "text"
    assert bound.layout.endswith("(text on stdin)")
    symbols = np.asarray(source.sample(2000, 1), dtype=np.int64)
    encoded = bound.encode(symbols)
    assert zlib.decompress(encoded.payload) == "".join(f"{v}\n" for v in symbols).encode()
    assert bound.decode(encoded, 2000).tolist() == symbols.tolist()
    check(codec, source, n=5000, rel=3.0, edge_cases=False)


def test_processes_per_check_match_the_documented_count(rle: str, tmp_path: Path) -> None:
    counter = tmp_path / "count"
    wrapper = tmp_path / "counting"
    wrapper.write_text('#!/bin/sh\nprintf x >> "$1"\nshift\nexec "$@"\n')
    wrapper.chmod(0o755)
    program = [str(wrapper), str(counter), rle, "copy"]
    codec = CommandCodec(program, program, name="counted-copy")

    def spawned(**options: object) -> int:
        counter.write_text("")
        check(codec, source, n=1000, rel=0.01, **options)  # type: ignore[arg-type]
        return len(counter.read_text())

    source = sources.uniform(256)
    cases = edge_case_inputs(source, np.asarray(source.sample(1000, 0)), 0)
    assert spawned() == 4 + 2 * len(cases)  # sample, contract slice ×2, each edge case
    assert len(cases) <= 27  # so at most 58, as the module docstring says
    assert spawned(edge_cases=False) == 4


# ----------------------------------------------------------------- failures


def test_non_zero_exit_is_a_misbehaviour_naming_codec_command_status_and_stderr(
    rle: str, script: list[str]
) -> None:
    codec = CommandCodec([rle, "copy"], [*script, "fail"], name="failing")
    with pytest.raises(CodecMisbehaviour) as info:
        check(codec, sources.uniform(256), n=100, edge_cases=False)
    text = str(info.value)
    assert "codec 'failing' misbehaved on the sample (100 symbols)" in text
    assert f"decoder command `{sys.executable} -S " in text
    assert "exited with status 3" in text
    assert "stderr (last 10 of 12 lines):" in text
    assert "| decoder trouble, line 11" in text
    assert "line 1\n" not in text  # only the last lines
    assert "n=100, seed=0" in text


def test_stderr_output_fails_unless_allowed(rle: str, script: list[str]) -> None:
    noisy = [*script, "noisy"]
    with pytest.raises(CodecMisbehaviour, match="wrote to standard error") as info:
        check(CommandCodec(noisy, [rle, "copy"], name="noisy"), sources.uniform(256), n=1000,
              edge_cases=False)
    assert "pass stderr='allow'" in str(info.value)
    assert "| warning: this build is verbose" in str(info.value)
    allowed = CommandCodec(noisy, [rle, "copy"], name="noisy", stderr="allow")
    assert check(allowed, sources.uniform(256), n=1000, edge_cases=False).bits == 8000


def test_a_hang_is_killed_with_its_whole_process_group(tmp_path: Path) -> None:
    pidfile = tmp_path / "pid"
    # a shell that starts a second process in its group, then waits forever
    hang = ["sh", "-c", 'echo $$ > "$1"; sleep 30 & sleep 30', "sh", str(pidfile)]
    codec = CommandCodec(hang, ["cat"], name="hangs", timeout=0.5)
    began = time.monotonic()
    with pytest.raises(CodecMisbehaviour) as info:
        check(codec, sources.uniform(256), n=100, edge_cases=False)
    assert time.monotonic() - began < 5
    text = str(info.value)
    assert "codec 'hangs' misbehaved on the sample" in text
    assert "encoder command `sh -c" in text
    assert "did not finish within 0.5 s" in text
    assert "its process group was killed with SIGKILL" in text
    pgid = int(pidfile.read_text())  # the shell leads the session the codec made for it
    assert _gone(pgid, group=True)  # os.killpg(pgid, 0) raises ProcessLookupError, or only
    # zombies are left for whoever adopted the second process to reap


def test_a_program_that_cannot_start_and_output_of_the_wrong_size(rle: str) -> None:
    missing = CommandCodec(["/nonexistent/encoder"], [rle, "copy"], symbol="u8")
    with pytest.raises(CommandError, match=r"^cannot start encoder command `/nonexistent/"):
        missing.encode(np.arange(3))
    short = CommandCodec([rle, "copy"], ["head", "-c", "9"], symbol="u8")
    with pytest.raises(CodecContractError,
                       match="`head -c 9` wrote 9 bytes; 10 symbols in layout 'u8' take 10"):
        short.decode(short.encode(np.arange(10)), 10)


def test_text_output_that_is_no_integers(script: list[str]) -> None:
    codec = CommandCodec(["cat"], [*script, "echo", "4\n-2\nx7\n"], symbol="text")
    encoded = codec.encode(np.array([4, -2, 7]))
    assert encoded.payload == b"4\n-2\n7\n"
    with pytest.raises(CodecContractError, match=r"wrote 'x7' as item 2, which is no integer"):
        codec.decode(encoded, 3)
    two = CommandCodec(["cat"], [*script, "echo", "4 -2"], symbol="text")
    with pytest.raises(CodecContractError, match="wrote 2 integers; expected n=3"):
        two.decode(encoded, 3)


def test_command_error_keeps_its_fields_across_processes() -> None:
    error = CommandError("decoder command `x` was killed by SIGSEGV", ("x",), -11, b"boom")
    copy = pickle.loads(pickle.dumps(error))
    assert (str(copy), copy.command, copy.returncode, copy.stderr, copy.timed_out) == (
        str(error), ("x",), -11, b"boom", False)
    assert copy.signal == 11
    assert CommandError("t", ("x",), -9, timed_out=True).signal is None


# ---------------------------------------------------------- damaged streams


def test_damaged_stream_check_runs_on_a_command_codec(rle: str) -> None:
    codec = CommandCodec([rle, "rle-c"], [rle, "rle-d", "{n}"], name="rle", symbol="u8")
    source = sources.bernoulli(0.05)
    check(codec, source, n=3000, rel=5.0, edge_cases=False, corruption=True)
    run = assert_survives_corruption(codec, source, n=3000, trials=40)
    assert len(run.outcomes) == 40
    # a decoder program that exits with an error status has detected the damage
    assert "pytest_ratefloor.errors.CommandError" in run.summary()


def test_a_decoder_program_that_hangs_on_damage_is_a_hang_and_is_ended(
    rle: str, tmp_path: Path
) -> None:
    pids = tmp_path / "pids"
    codec = CommandCodec([rle, "rle-c"], [rle, "rle-hang", "{n}", str(pids)], name="rle-hang",
                         symbol="u8")
    with pytest.raises(CorruptionFailure, match=r"hang: did not return within 0\.3 s"):
        assert_survives_corruption(codec, sources.bernoulli(0.05), n=2000, trials=2,
                                   timeout=0.3, save_dir=tmp_path / "damaged")
    hung = [int(p) for p in pids.read_text().split()]
    assert hung
    # the program stayed in the worker's process group, which the check killed whole
    assert all(_gone(pid, group=False) for pid in hung)


def test_the_replay_line_of_a_command_codec_runs_as_printed(rle: str, tmp_path: Path) -> None:
    codec = CommandCodec([rle, "rle-c"], [rle, "rle-d", "{n}"], name="rle")
    bound = codec.for_source(sources.uniform(256))
    encoded = bound.encode(np.array([7, 7, 7, 1]))
    damaged = tmp_path / "damaged.bin"
    damaged.write_bytes(encoded.payload[:-1])  # cut: an odd length
    line, *notes = replay_lines(bound, damaged, 4)
    assert notes == []  # it runs anywhere: the command is written out in full
    assert "pytest_ratefloor.command.run_decoder(load_damaged(" in line
    with pytest.raises(CommandError, match=r"rle-d 4` exited with status 3"):
        exec(line.removeprefix("replay: "), {})
    assert run_decoder(encoded.payload, 4, [rle, "rle-d", "{n}"], "u8").tolist() == [7, 7, 7, 1]


# ------------------------------------------------------------------ the API


def test_commands_and_settings_are_checked() -> None:
    codec = CommandCodec("/usr/local/bin/coder -c 'a b'", "coder -d {n}", symbol="u16le")
    assert codec.encode_cmd == ("/usr/local/bin/coder", "-c", "a b")
    assert codec.decode_cmd == ("coder", "-d", "{n}")
    assert codec.name == "coder -c 'a b'"  # paths cut: stable from machine to machine
    assert codec.layout == "command `coder -c 'a b'` (u16le on stdin)"
    assert (codec.timeout, codec.stderr, codec.version, codec.symbols) == (10.0, "fail", None,
                                                                           None)
    assert as_codec(codec) is codec
    assert pytest_ratefloor.CommandCodec is CommandCodec
    assert CommandCodec([Path("/bin/prog")], ["prog"]).encode_cmd == ("/bin/prog",)
    with pytest.raises(AttributeError):
        codec.layout = "u8"  # type: ignore[misc]
    bad: list[tuple[dict[str, object], type[Exception], str]] = [
        ({"encode_cmd": 3}, TypeError, "CommandCodec: encode_cmd must be an argv list"),
        ({"encode_cmd": []}, ValueError, "encode_cmd must be a non-empty command"),
        ({"decode_cmd": ""}, ValueError, "decode_cmd must be a non-empty command"),
        ({"decode_cmd": ["x", b"y"]}, TypeError, "item b'y' is not a string"),
        ({"decode_cmd": "x 'y"}, ValueError, "a command line shlex can split"),
        ({"symbol": "u9"}, LayoutError, "symbol must be one of 'auto', 'text', 'bits'"),
        ({"timeout": 0}, ValueError, "CommandCodec: timeout must be a finite number > 0, got 0"),
        ({"timeout": "1"}, TypeError, "timeout must be a number"),
        ({"stderr": "ignore"}, ValueError, "stderr must be one of 'fail', 'allow'"),
        ({"name": ""}, ValueError, "codec name must be a non-empty string"),
        ({"version": 3}, TypeError, "codec version must be a string or None"),
    ]
    for change, kind, message in bad:
        arguments: dict[str, object] = {"encode_cmd": ["e"], "decode_cmd": ["d"], **change}
        with pytest.raises(kind, match=message.replace("(", r"\(")):
            CommandCodec(**arguments)  # type: ignore[arg-type]
    with pytest.raises(LayoutError, match="bind the codec to a source"):
        CommandCodec(["cat"], ["cat"]).encode(np.arange(3))


def test_a_decoder_program_crashing_on_damage_is_a_crash(script: list[str],
                                                         tmp_path: Path) -> None:
    """The worker reads the program's fate from the error: a signal is a crash, not a
    rejection (a crashing C decoder must not pass as having detected the damage)."""
    codec = CommandCodec([*script, "c"], [*script, "fragile"], name="fragile", symbol="u8")
    with pytest.raises(CorruptionFailure, match=r"crash: \S*CommandError: .*SIGSEGV"):
        assert_survives_corruption(codec, sources.uniform(16), n=2000, trials=6,
                                   save_dir=tmp_path / "damaged")


def test_a_program_past_the_codecs_own_time_limit_on_damage_is_a_hang(
    script: list[str], tmp_path: Path
) -> None:
    codec = CommandCodec([*script, "c"], [*script, "slow-on-damage"], name="slow",
                         symbol="u8", timeout=0.3)
    with pytest.raises(CorruptionFailure, match=r"hang: \S*CommandError: the decoder program ran "
                                                "past its time limit"):
        assert_survives_corruption(codec, sources.uniform(16), n=2000, trials=3, timeout=5.0,
                                   save_dir=tmp_path / "damaged")
