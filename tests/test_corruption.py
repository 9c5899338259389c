"""Tests of the corruption check: the damage schedule, the isolated worker, the
classification of hangs/crashes/memory growth/silent damage, and replay files.

Timeouts are short (a hang costs one timeout) so the module runs in seconds.
"""

from __future__ import annotations

import json
import lzma
import os
import re
import signal
import struct
import sys
import zlib
from collections import Counter
from pathlib import Path
from typing import get_args

import numpy as np
import pytest
from bitarray import bitarray

from pytest_ratefloor.codecs import ByteCodec, Encoded, as_codec, encoded_from_stream
from pytest_ratefloor.corruption import (
    CORRUPTION_KINDS,
    DEFAULT_MEMORY_LIMIT,
    Corruption,
    CorruptionKind,
    CorruptionSetupError,
    TrialStatus,
    assert_survives_corruption,
    corruption_schedule,
    load_damaged,
    run_corruption_trials,
    survive_damage,
)
from pytest_ratefloor.corruption.replay import save_damaged
from pytest_ratefloor.corruption.worker import FAILING_STATUSES, TRIAL_STATUSES
from pytest_ratefloor.errors import CodecMisbehaviour, CorruptionFailure

linux_only = pytest.mark.skipif(
    not sys.platform.startswith("linux"), reason="fork, RLIMIT_AS and signals as on Linux"
)

SYMBOLS = np.random.default_rng(7).integers(0, 16, 2_000).astype(np.int64)


# ---------------------------------------------------------------------------
# a toy framed format: 4-byte big-endian count, one byte per symbol, CRC-32 trailer


def toy_encode(symbols: np.ndarray) -> bytes:
    body = np.asarray(symbols, dtype=np.uint8).tobytes()
    return struct.pack(">I", len(symbols)) + body + struct.pack(">I", zlib.crc32(body))


def _toy_parts(data: bytes) -> tuple[int, bytes, int]:
    (count,) = struct.unpack(">I", data[:4])
    return count, data[4:-4], struct.unpack(">I", data[-4:])[0]


def toy_decode_checked(data: bytes, n: int) -> np.ndarray:
    """A careful decoder: checks the length and the CRC, raises ValueError."""
    if len(data) != n + 8:
        raise ValueError(f"stream of {len(data)} bytes, expected {n + 8}")
    count, body, crc = _toy_parts(data)
    if count != n or zlib.crc32(body) != crc:
        raise ValueError("count or CRC-32 mismatch")
    return np.frombuffer(body, dtype=np.uint8)


def toy_decode_hangs_when_short(data: bytes, n: int) -> np.ndarray:
    """Waits forever for bytes that never come (a read loop on a truncated stream)."""
    if len(data) < n + 8:
        while True:
            pass
    return toy_decode_checked(data, n)


def toy_decode_aborts_on_damage(data: bytes, n: int) -> np.ndarray:
    """Stands in for a C decoder that segfaults on a bad checksum."""
    if len(data) == n + 8 and zlib.crc32(_toy_parts(data)[1]) != _toy_parts(data)[2]:
        os.abort()
    return toy_decode_checked(data, n)


def toy_decode_hoards_on_garbage(data: bytes, n: int) -> np.ndarray:
    """Grows a buffer without bound when there are bytes after the frame."""
    if len(data) > n + 8:
        hoard = []
        while True:
            hoard.append(bytearray(1 << 20))
    return toy_decode_checked(data, n)


def toy_decode_ignores_crc(data: bytes, n: int) -> np.ndarray:
    """Never raises: pads or cuts the body to n symbols and ignores the CRC."""
    body = data[4:-4] if len(data) >= 8 else b""
    return np.frombuffer(body[:n].ljust(n, b"\0"), dtype=np.uint8)


def toy_decode_exits(data: bytes, n: int) -> np.ndarray:
    if len(data) != n + 8:
        sys.exit(2)
    return toy_decode_checked(data, n)


def _flip_reference(data: bytes, bits: tuple[int, ...]) -> bytes:
    """Independent flip: bitarray's big-endian bit numbering, inverted with bitarray."""
    ref = bitarray(endian="big")
    ref.frombytes(data)
    for bit in bits:
        ref.invert(bit)
    return ref.tobytes()


# ---------------------------------------------------------------------------
# Corruption objects


def test_truncate_matches_slicing() -> None:
    data = bytes(range(40))
    for keep in (0, 1, 17, 39):
        c = Corruption.truncate(40, keep)
        assert c.apply(data) == data[:keep]  # reference: bytes slicing
        assert c.damaged_length == keep
        assert c.length == 40 - keep
    assert "all 40 bytes cut" in Corruption.truncate(40, 0).describe()
    assert "kept the first 39 of 40 bytes (1 cut)" in Corruption.truncate(40, 39).describe()


@pytest.mark.parametrize("bit", [0, 7, 8, 99, 319])
def test_flip_matches_bitarray(bit: int) -> None:
    data = bytes(range(100, 140))
    c = Corruption.flip(40, bit)
    damaged = c.apply(data)
    assert damaged == _flip_reference(data, (bit,))
    # exactly one bit differs (popcount of the XOR, stdlib int.bit_count)
    diff = int.from_bytes(data, "big") ^ int.from_bytes(damaged, "big")
    assert bin(diff).count("1") == 1
    text = c.describe()
    assert f"stream bit {bit}" in text
    assert f"byte {bit // 8} of 40" in text
    assert f"mask 0x{0x80 >> (bit % 8):02x}" in text


def test_burst_matches_bitarray_and_names_every_bit() -> None:
    data = bytes(64)
    c = Corruption.burst(64, [131, 100, 103, 100])
    assert c.bits == (100, 103, 131)
    assert (c.offset, c.length) == (12, 5)  # bytes 12..16
    assert c.apply(data) == _flip_reference(data, (100, 103, 131))
    text = c.describe()
    assert "3 bits inverted within stream bits 100..131" in text
    assert "bytes 12..16 of 64" in text
    assert "bits 100, 103, 131" in text


def _pcg64_bytes(key: int, count: int) -> bytes:
    """Reference garbage: raw PCG64 words written little-endian with int.to_bytes."""
    words = np.random.PCG64(key).random_raw((count + 7) // 8)
    return b"".join(int(w).to_bytes(8, "little") for w in words)[:count]


def test_append_and_random_are_pcg64_garbage() -> None:
    data = b"tide gauge frame"
    app = Corruption.append(len(data), 13, key=0x5EED)
    out = app.apply(data)
    assert out[: len(data)] == data
    assert out[len(data) :] == _pcg64_bytes(0x5EED, 13)
    assert "13 garbage bytes after the 16-byte stream" in app.describe()
    rnd = Corruption.randomize(len(data), key=99)
    assert rnd.apply(data) == _pcg64_bytes(99, len(data))
    assert rnd.damaged_length == len(data)


def test_corruption_rejects_bad_arguments_by_name() -> None:
    with pytest.raises(ValueError, match=r"bit must be below 32 \(8 \* stream_length\), got 32"):
        Corruption.flip(4, 32)
    with pytest.raises(ValueError, match="keep must be below stream_length=4"):
        Corruption.truncate(4, 4)
    with pytest.raises(ValueError, match="at least 2 distinct bits"):
        Corruption.burst(4, [3, 3])
    with pytest.raises(ValueError, match="made for a stream of 4 bytes; data has 5"):
        Corruption.flip(4, 0).apply(b"12345")
    with pytest.raises(ValueError, match=r"kind must be one of 'truncate', .*, got 'smudge'"):
        Corruption("smudge", 4, 0, 0)  # type: ignore[arg-type]
    with pytest.raises(TypeError, match=r"kind must be one of .*, got 3"):
        Corruption(3, 4, 0, 0)  # type: ignore[arg-type]
    with pytest.raises(TypeError, match=r"count must be an integer, got 1\.5"):
        Corruption.append(4, 1.5, 0)  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="count must be an integer >= 1, got 0"):
        Corruption.append(4, 0, 0)
    with pytest.raises(TypeError, match="bit must be an integer, got True"):
        Corruption.flip(4, True)
    with pytest.raises(
        ValueError, match=r"bit position must be below 32 \(8 \* stream_length\), got 40"
    ):
        Corruption("flip", 4, 5, 1, (40,))
    with pytest.raises(ValueError, match=r"bits must be strictly increasing, got \(3, 1\)"):
        Corruption("burst", 4, 0, 1, (3, 1))


def test_damage_kinds_are_one_table() -> None:
    assert get_args(CorruptionKind) == CORRUPTION_KINDS
    assert CORRUPTION_KINDS == ("truncate", "flip", "burst", "append", "random")
    # every kind is drawn by the schedule of a long enough stream
    assert {c.kind for c in corruption_schedule(100, 40)} == set(CORRUPTION_KINDS)


def test_trial_statuses_are_one_table() -> None:
    assert tuple(TRIAL_STATUSES) == get_args(TrialStatus)
    assert {"hang", "crash", "memory", "exit", "silent"} == FAILING_STATUSES
    assert all(TRIAL_STATUSES[s].fails == (s in FAILING_STATUSES) for s in TRIAL_STATUSES)
    assert TRIAL_STATUSES["memory"].title == "memory growth past the limit"
    assert TRIAL_STATUSES["hang"].counted == "hung"


# ---------------------------------------------------------------------------
# the schedule


def test_schedule_is_deterministic_and_seed_dependent() -> None:
    a = corruption_schedule(5_000, 200, seed=3)
    assert a == corruption_schedule(5_000, 200, seed=3)
    assert a != corruption_schedule(5_000, 200, seed=4)
    assert len(a) == 200
    assert len(set(a)) == 200


def test_schedule_opens_with_the_edge_cases() -> None:
    s = corruption_schedule(300, 6, seed=0)
    assert s[0] == Corruption.truncate(300, 0)  # 0 bytes
    assert s[1] == Corruption.truncate(300, 299)  # one byte short
    assert [c.kind for c in s[2:]] == ["flip", "append", "random", "burst"]


def test_schedule_mix_and_bounds() -> None:
    length = 10_000
    s = corruption_schedule(length, 200, seed=1)
    kinds = Counter(c.kind for c in s)
    # documented mix: 6 opening trials, then 30/30/20/10/10 % of the other 194
    assert abs(kinds["truncate"] - (2 + 0.3 * 194)) <= 2
    assert abs(kinds["flip"] - (1 + 0.3 * 194)) <= 2
    assert abs(kinds["burst"] - (1 + 0.2 * 194)) <= 2
    assert abs(kinds["append"] - (1 + 0.1 * 194)) <= 2
    assert abs(kinds["random"] - (1 + 0.1 * 194)) <= 2
    for c in s:
        assert c.stream_length == length
        c.apply(bytes(length))  # every corruption fits the stream
        if c.kind == "burst":
            assert len(c.bits) >= 2
            assert c.bits[-1] - c.bits[0] < 32
        if c.kind == "append":
            assert 1 <= c.length <= 64
    cuts = [c.offset for c in s if c.kind == "truncate"]
    # truncations spread over the stream, with some in the head and in the tail
    assert any(k < 16 for k in cuts[2:])
    assert any(k >= length - 16 for k in cuts[2:])
    assert any(1000 < k < length - 1000 for k in cuts)


def test_schedule_for_tiny_and_empty_streams() -> None:
    one = corruption_schedule(1, 200, seed=0)
    assert len(set(one)) == len(one) <= 200
    assert Corruption.truncate(1, 0) in one
    assert {c.kind for c in one} >= {"truncate", "flip", "append", "random"}
    empty = corruption_schedule(0, 5, seed=0)
    assert len(empty) == 5
    assert all(c.kind == "append" for c in empty)


def test_schedule_rejects_bad_arguments() -> None:
    with pytest.raises(ValueError, match=r"^trials must be an integer >= 1, got 0$"):
        corruption_schedule(10, 0)
    with pytest.raises(ValueError, match=r"^stream_length must be an integer >= 0, got -1$"):
        corruption_schedule(-1, 5)
    with pytest.raises(TypeError, match=r"^seed must be an integer, got 'x'$"):
        corruption_schedule(10, 5, seed="x")  # type: ignore[arg-type]
    with pytest.raises(TypeError, match=r"^trials must be an integer, got 2\.0$"):
        corruption_schedule(10, 2.0)  # type: ignore[arg-type]


# ---------------------------------------------------------------------------
# the check: codecs that survive


def _check_toy(decode, **kwargs):  # type: ignore[no-untyped-def]
    kwargs.setdefault("timeout", 2.0)
    return assert_survives_corruption((toy_encode, decode), SYMBOLS, **kwargs)


@linux_only
def test_careful_decoder_passes_in_must_detect_mode() -> None:
    run = _check_toy(toy_decode_checked, trials=60, must_detect=True)
    assert not run.failures
    assert len(run.outcomes) == 60
    assert run.start_method == "fork"
    assert run.workers_started == 1
    assert run.memory_guard == "address-space"
    # CRC-32 catches every burst of up to 32 bits (a fact of CRCs of degree 32),
    # and the length check every truncation and append: all 60 must raise.
    assert Counter(o.status for o in run.outcomes) == {"raised": 60}
    assert "60 raised (ValueError 60)" in run.summary()


def _zlib_decompress(data: bytes) -> bytes:
    return zlib.decompress(data)


@linux_only
@pytest.mark.parametrize(
    ("compress", "decompress"),
    [(zlib.compress, zlib.decompress), (lzma.compress, lzma.decompress)],
    ids=["zlib", "lzma"],
)
def test_stdlib_checksummed_formats_pass_must_detect(compress, decompress) -> None:  # type: ignore[no-untyped-def]
    # zlib streams end in an Adler-32 of the data (RFC 1950); lzma.compress writes
    # the .xz container with a CRC-64 check by default (Python docs, lzma module).
    codec = ByteCodec(compress, decompress, name=compress.__module__, packing="u8")
    run = assert_survives_corruption(codec, SYMBOLS, trials=80, must_detect=True, timeout=2.0)
    assert not run.failures
    statuses = Counter(o.status for o in run.outcomes)
    assert statuses["raised"] > 50
    # what got through unchanged is the original data (trailing garbage is ignored)
    assert set(statuses) <= {"raised", "original"}


@linux_only
def test_silent_decoder_is_fine_without_must_detect() -> None:
    run = _check_toy(toy_decode_ignores_crc, trials=40)
    assert not run.failures
    assert Counter(o.status for o in run.outcomes)["returned"] == 40


# ---------------------------------------------------------------------------
# the check: each failure class, its message and its replay file


def _replay_path(message: str, trial: int) -> Path:
    for line in message.splitlines():
        if "damaged stream:" in line and f"trial{trial:03d}" in line:
            return Path(line.split("damaged stream: ", 1)[1].rsplit(" (", 1)[0])
    raise AssertionError(f"no replay file for trial {trial} in:\n{message}")


@linux_only
def test_hang_on_truncation_is_reported_with_replay(tmp_path: Path) -> None:
    clean = toy_encode(SYMBOLS)
    with pytest.raises(CorruptionFailure) as info:
        _check_toy(toy_decode_hangs_when_short, trials=3, timeout=0.3, save_dir=tmp_path)
    message = str(info.value)
    assert "failed 2 corruption trials (survival mode)" in message
    assert "trial 0: hang: did not return within 0.3 s" in message
    assert f"truncate: all {len(clean)} bytes cut (empty stream)" in message
    assert "trial 1: hang" in message
    assert f"truncate: kept the first {len(clean) - 1} of {len(clean)} bytes (1 cut)" in message
    assert "trial 2:" not in message
    first, second = _replay_path(message, 0), _replay_path(message, 1)
    assert first.read_bytes() == b""
    assert second.read_bytes() == clean[:-1]
    assert str(second) in message
    assert (
        "replay: from pytest_ratefloor.corruption import load_damaged; "
        f"import {__name__}; {__name__}.toy_decode_hangs_when_short("
        f"load_damaged({str(second)!r}), {len(SYMBOLS)})"
    ) in message
    meta = json.loads(second.with_suffix(".json").read_text())
    assert meta["status"] == "hang"
    assert meta["trial"] == 1
    assert meta["corruption"]["offset"] == len(clean) - 1
    assert "3 of 3 trials ran: 1 raised (ValueError 1), 2 hung" in message


@linux_only
def test_abort_on_flipped_bit_is_a_crash(tmp_path: Path) -> None:
    clean = toy_encode(SYMBOLS)
    with pytest.raises(CorruptionFailure) as info:
        _check_toy(toy_decode_aborts_on_damage, trials=6, save_dir=tmp_path)
    message = str(info.value)
    schedule = corruption_schedule(len(clean), 6, seed=0)
    flip = schedule[2]
    assert flip.kind == "flip"
    assert "trial 2: crash: the worker process was killed by SIGABRT" in message
    assert flip.describe() in message
    assert repr(flip) in message
    saved = _replay_path(message, 2)
    assert saved.read_bytes() == _flip_reference(clean, flip.bits)
    # the random replacement and the burst (same length, CRC broken) crash too;
    # the worker was restarted after each crash and the remaining trials ran
    assert "trial 4: crash" in message
    assert "trial 5: crash" in message
    assert "6 of 6 trials ran" in message


@linux_only
def test_unbounded_allocation_on_garbage_hits_the_memory_limit(tmp_path: Path) -> None:
    clean = toy_encode(SYMBOLS)
    with pytest.raises(CorruptionFailure) as info:
        _check_toy(toy_decode_hoards_on_garbage, trials=4, memory_limit=64 << 20, save_dir=tmp_path)
    message = str(info.value)
    append = corruption_schedule(len(clean), 4, seed=0)[3]
    assert append.kind == "append"
    # the message says how far the worker grew before the limit stopped it
    assert re.search(
        r"trial 3: memory growth past the limit: raised MemoryError after the worker grew "
        r"by [\d.]+ MiB \(limit: 64 MiB of growth, guard: address-space\)",
        message,
    ), message
    assert append.describe() in message
    saved = _replay_path(message, 3)
    assert saved.read_bytes() == clean + _pcg64_bytes(append.key, append.length)


def _kill_self(data: bytes, n: int) -> np.ndarray:
    os.kill(os.getpid(), signal.SIGKILL)
    raise AssertionError("unreachable")


@linux_only
def test_sigkill_reads_as_the_out_of_memory_killer() -> None:
    run = run_corruption_trials(_kill_self, b"abc", 3, corruption_schedule(3, 2), timeout=2.0)
    assert [o.status for o in run.outcomes] == ["memory", "memory"]
    assert "out-of-memory killer" in run.outcomes[0].detail
    assert run.workers_started == 2


@linux_only
def test_silent_wrong_data_fails_must_detect(tmp_path: Path) -> None:
    with pytest.raises(CorruptionFailure) as info:
        _check_toy(toy_decode_ignores_crc, trials=3, must_detect=True, save_dir=tmp_path)
    message = str(info.value)
    assert "(must-detect mode)" in message
    # truncation to 0 bytes: the zero-padded body differs from the sample at index 0 or later
    assert "trial 0: silently wrong data: returned 2000 symbols without an error; " in message
    first = int(np.argmax(SYMBOLS != 0))
    assert f"first difference at index {first}: expected {SYMBOLS[first]}, got 0" in message
    assert _replay_path(message, 1).read_bytes() == toy_encode(SYMBOLS)[:-1]


@linux_only
def test_wrong_length_in_must_detect_mode_is_silent() -> None:
    def returns_short(data: bytes, n: int) -> list[int]:
        return [0] * (n - 1)

    run = run_corruption_trials(
        returns_short,
        toy_encode(SYMBOLS),
        len(SYMBOLS),
        corruption_schedule(len(SYMBOLS) + 8, 2),
        expected=SYMBOLS,
    )
    assert [o.status for o in run.outcomes] == ["silent", "silent"]
    assert "returned 1999 symbols instead of 2000" in run.outcomes[0].detail
    # through the adapter the contract error is likewise counted as silent damage
    with pytest.raises(CorruptionFailure, match="returned without an error, but decoder returned"):
        assert_survives_corruption((toy_encode, returns_short), SYMBOLS, trials=2, must_detect=True)


@linux_only
def test_system_exit_and_plain_exit_are_failures() -> None:
    with pytest.raises(CorruptionFailure, match=r"interpreter exit: raised SystemExit\(2\)"):
        _check_toy(toy_decode_exits, trials=2)

    def hard_exit(data: bytes, n: int) -> None:
        os._exit(3)

    run = run_corruption_trials(hard_exit, b"xy", 2, corruption_schedule(2, 1))
    assert run.outcomes[0].status == "crash"
    assert run.outcomes[0].detail == "the worker process exited with status 3"


@linux_only
def test_closures_and_lambdas_work_under_fork() -> None:
    clean = toy_encode(SYMBOLS)
    calls = {"short": 0}

    def closure(data: bytes, n: int) -> np.ndarray:
        calls["short"] += 1  # runs in the worker: the parent's dict is untouched
        return toy_decode_checked(data, n)

    run = _check_toy(closure, trials=5)
    assert not run.failures
    assert calls["short"] == 0
    run = run_corruption_trials(lambda d, n: len(d), clean, 1, corruption_schedule(len(clean), 5))
    assert [o.status for o in run.outcomes] == ["returned"] * 5


def test_spawn_refuses_a_decoder_that_does_not_pickle() -> None:
    with pytest.raises(
        CorruptionSetupError, match=r"started with 'spawn', which needs the decoder"
    ):
        run_corruption_trials(
            lambda d, n: d, b"abc", 3, corruption_schedule(3, 2), start_method="spawn"
        )


def spawn_decode(data: bytes, n: int) -> bytes:
    return zlib.decompress(data)


def test_spawn_runs_a_module_level_decoder() -> None:
    clean = zlib.compress(b"harbour tide gauge" * 20)
    run = run_corruption_trials(
        spawn_decode, clean, 360, corruption_schedule(len(clean), 8), start_method="spawn"
    )
    assert run.start_method == "spawn"
    assert len(run.outcomes) == 8
    assert not run.failures


# ---------------------------------------------------------------------------
# bit-level payloads


def _bits_encode(symbols: np.ndarray) -> bitarray:
    out = bitarray(endian="little")
    out.extend(int(s) & 1 for s in symbols)
    return out


def _bits_decode_strict(bits: object, n: int) -> list[int]:
    # nbits = 1001 = 8*125 + 1 -> the handed-back length keeps 1 (mod 8), or is 0
    if not isinstance(bits, bitarray) or bits.endian != "little":
        raise SystemExit("wrong payload type")  # would be reported as a failure
    if len(bits) and len(bits) % 8 != 1:
        raise SystemExit(f"wrong bit count {len(bits)}")
    return bits.tolist()[:n] + [0] * max(0, n - len(bits))


@linux_only
def test_bitarray_payload_comes_back_as_bitarray_of_the_right_length(tmp_path: Path) -> None:
    symbols = SYMBOLS[:1001] & 1
    run = assert_survives_corruption(
        (_bits_encode, _bits_decode_strict), symbols, trials=60, save_dir=tmp_path
    )
    assert not run.failures
    assert len(run.outcomes) == 60


def test_damaged_bitarray_round_trips_through_load_damaged(tmp_path: Path) -> None:
    original = bitarray("1011001110001", endian="little")  # 13 bits, 3 pad bits
    encoded = encoded_from_stream(original)
    shape = encoded.shape
    assert (shape.kind, shape.pad, shape.endian) == ("bitarray", 3, "little")
    flip = Corruption.flip(2, 15)
    damaged = flip.apply(encoded.stream)
    rebuilt = encoded.rebuild(damaged)
    assert isinstance(rebuilt.payload, bitarray)
    assert rebuilt.bits == len(rebuilt.payload) == 13
    assert rebuilt.payload.endian == "little"
    # byte 1, mask 0x01: in a little-endian bitarray that is index 8
    expected = original.copy()
    expected.invert(8)
    assert rebuilt.payload == expected
    assert len(shape.rebuild(b"").payload) == 0
    assert len(shape.rebuild(encoded.stream + b"\xff\xff").payload) == 29
    path = save_damaged(tmp_path, "x", damaged, shape, {})
    again = load_damaged(path)
    assert again == rebuilt.payload
    assert again.endian == "little"
    assert json.loads(path.with_suffix(".json").read_text()) == {
        "shape": "bitarray", "nbits": 13, "endian": "little",
    }
    # nothing is overwritten: the same stem gets a new name
    second = save_damaged(tmp_path, "x", b"\x00", shape, {})
    assert second.name == "x-1.bin"
    assert path.read_bytes() == damaged


def test_pair_payload_is_handed_back_as_a_pair() -> None:
    shape = encoded_from_stream((b"\xab\xc0", 10)).shape
    assert shape.rebuild(b"\xab") == Encoded((b"\xab", 2), 2)
    assert shape.rebuild(b"\xab\xc0\x01") == Encoded((b"\xab\xc0\x01", 18), 18)
    # the one validation of an encoder's output is encoded_from_stream's
    with pytest.raises(CodecMisbehaviour, match=r"nbits=3"):
        run_corruption_trials(toy_decode_checked, (b"\xab\xc0", 3), 1, [])


_PAYLOADS = {
    "bytes": b"tide gauge frame 7",
    "bitarray-big": bitarray("1011001110001010111", endian="big"),
    "bitarray-little": bitarray("10110011100010101", endian="little"),
    "bitarray-whole-bytes": bitarray("1011001110001010", endian="big"),
    "pair": (b"\xab\xc0\x17", 21),
}


@pytest.mark.parametrize("name", list(_PAYLOADS))
def test_rebuild_and_load_damaged_give_equal_payloads(name: str, tmp_path: Path) -> None:
    encoded = encoded_from_stream(_PAYLOADS[name])
    stream = encoded.stream
    # unchanged bytes give back the payload itself
    assert encoded.rebuild(stream) == encoded
    for i, c in enumerate(corruption_schedule(len(stream), 40, seed=5)):
        damaged = c.apply(stream)
        rebuilt = encoded.rebuild(damaged)
        path = save_damaged(tmp_path, f"{name}-{i}", damaged, encoded.shape, {"trial": i})
        loaded = load_damaged(path)
        assert type(loaded) is type(rebuilt.payload), c
        assert loaded == rebuilt.payload, c
        if isinstance(loaded, bitarray):
            assert loaded.endian == rebuilt.payload.endian
        # the bit count: 8 per byte, less the original padding (never below 0)
        pad = 8 * len(stream) - encoded.bits
        assert rebuilt.bits == max(0, 8 * len(damaged) - pad), c


def test_load_damaged_without_a_sidecar_gives_bytes(tmp_path: Path) -> None:
    path = tmp_path / "bare.bin"
    path.write_bytes(b"\x01\x02")
    assert load_damaged(path) == b"\x01\x02"


# ---------------------------------------------------------------------------
# arguments, setup errors and defaults


def test_default_memory_limit_is_one_gibibyte() -> None:
    assert DEFAULT_MEMORY_LIMIT == 2**30


TOY = (toy_encode, toy_decode_checked)


@pytest.mark.parametrize(
    ("kwargs", "error", "message"),
    [
        ({"timeout": 0}, ValueError, "timeout must be a finite number > 0, got 0"),
        ({"timeout": "2"}, TypeError, "timeout must be a number, got '2'"),
        ({"timeout": float("inf")}, ValueError, "timeout must be a finite number > 0, got inf"),
        ({"trials": 0}, ValueError, "trials must be an integer >= 1, got 0"),
        ({"trials": 1.5}, TypeError, r"trials must be an integer, got 1\.5"),
        ({"memory_limit": 0}, ValueError, "memory_limit must be an integer >= 1, got 0"),
        ({"memory_limit": 1.5}, TypeError, r"memory_limit must be an integer, got 1\.5"),
        ({"n": 1.5}, TypeError, r"n must be an integer, got 1\.5"),
        ({"n": -1}, ValueError, "n must be an integer >= 0, got -1"),
        ({"seed": -1}, ValueError, "seed must be an integer >= 0, got -1"),
        ({"seed": True}, TypeError, "seed must be an integer, got True"),
        ({"must_detect": 1}, TypeError, "must_detect must be True or False, got 1"),
    ],
)
def test_bad_arguments_are_named(kwargs: dict[str, object], error: type, message: str) -> None:
    # n, seed and trials without a prefix: the same answer as every other entry point
    with pytest.raises(error, match=f"^{message}$"):
        assert_survives_corruption(TOY, SYMBOLS, **kwargs)  # type: ignore[arg-type]


def test_bad_codecs_and_runner_arguments_are_named() -> None:
    with pytest.raises(TypeError, match="cannot use int as a codec"):
        assert_survives_corruption(42, SYMBOLS)
    with pytest.raises(TypeError, match="codec pair must be two callables"):
        assert_survives_corruption((toy_encode, 3), SYMBOLS)
    with pytest.raises(TypeError, match="source must be a reference source"):
        assert_survives_corruption(TOY, object())
    with pytest.raises(ValueError, match=r"start_method must be one of .*, got 'teleport'"):
        run_corruption_trials(toy_decode_checked, b"x", 1, [], start_method="teleport")
    with pytest.raises(TypeError, match=r"^decode must be callable, got 3$"):
        run_corruption_trials(3, b"x", 1, [])  # type: ignore[arg-type]
    with pytest.raises(TypeError, match=r"^n must be an integer, got 1\.0$"):
        run_corruption_trials(toy_decode_checked, b"x", 1.0, [])  # type: ignore[arg-type]
    with pytest.raises(ValueError, match=r"^max_failures must be an integer >= 1, got 0$"):
        run_corruption_trials(toy_decode_checked, b"x", 1, [], max_failures=0)
    with pytest.raises(ValueError, match="schedule was made for a 3-byte stream"):
        run_corruption_trials(toy_decode_checked, b"x", 1, corruption_schedule(3, 1))
    with pytest.raises(ValueError, match=r"^trials must be an integer >= 1, got 0$"):
        survive_damage(as_codec(TOY), SYMBOLS, Encoded(b"x", 8), source="s", seed=0, trials=0)


def test_encoder_returning_text_is_codec_misbehaviour() -> None:
    with pytest.raises(CodecMisbehaviour, match="encoder of 'toy_decode_checked' on the clean"):
        assert_survives_corruption((lambda s: "text", toy_decode_checked), SYMBOLS)
    with pytest.raises(
        CodecMisbehaviour, match="encoder of 'toy_decode_checked' raised ZeroDivisionError"
    ):
        assert_survives_corruption((lambda s: 1 // 0, toy_decode_checked), SYMBOLS)


# ---------------------------------------------------------------------------
# one binding, one draw, one encoding


class _CountingEncoder:
    """The toy encoder, counting its calls (in this process: encodes never run in
    the worker)."""

    def __init__(self) -> None:
        self.calls = 0

    def __call__(self, symbols: np.ndarray) -> bytes:
        self.calls += 1
        return toy_encode(symbols)


class _CountingSource:
    """A stand-in source that counts its draws."""

    spec = "counting(k=16)"
    min_symbol, max_symbol = 0, 15

    def __init__(self) -> None:
        self.draws = 0

    def sample(self, n: int, seed: int = 0) -> np.ndarray:
        self.draws += 1
        return SYMBOLS[:n].copy()


@linux_only
def test_the_public_check_draws_and_encodes_once() -> None:
    encoder, source = _CountingEncoder(), _CountingSource()
    run = assert_survives_corruption(
        (encoder, toy_decode_checked), source, n=500, trials=10, must_detect=True
    )
    assert not run.failures
    assert (encoder.calls, source.draws) == (1, 1)


@linux_only
def test_survive_damage_uses_the_encoding_it_is_given(tmp_path: Path) -> None:
    encoder = _CountingEncoder()
    codec = as_codec((encoder, toy_decode_checked))
    symbols = SYMBOLS[:500]
    encoded = codec.encode(symbols)
    assert encoder.calls == 1
    run = survive_damage(codec, symbols, encoded, source="given(k=16)", seed=3, trials=10,
                         must_detect=True)
    assert not run.failures
    assert run.schedule == corruption_schedule(len(encoded.stream), 10, seed=3)
    assert encoder.calls == 1  # not re-encoded
    # on failure the message names the label and seed; save_dir may be a function,
    # called only then
    asked: list[int] = []

    def where() -> Path:
        asked.append(1)
        return tmp_path

    with pytest.raises(CorruptionFailure) as info:
        survive_damage(as_codec((encoder, toy_decode_hangs_when_short)), symbols, encoded,
                       source="given(k=16)", seed=3, trials=2, timeout=0.3, save_dir=where)
    assert encoder.calls == 1
    assert asked == [1]
    message = str(info.value)
    assert "on given(k=16), n=500, seed=3; clean stream 508 bytes" in message
    assert _replay_path(message, 0).parent == tmp_path


@linux_only
def test_an_empty_sample_is_damaged_by_appends_only() -> None:
    # n = 0 is allowed here (unlike the rate checks): a decoder told n=0 must
    # still survive garbage
    def raw_encode(symbols: np.ndarray) -> bytes:
        return symbols.astype(np.uint8).tobytes()

    def raw_decode(data: bytes, n: int) -> np.ndarray:
        if len(data) != n:
            raise ValueError(f"{len(data)} bytes for {n} symbols")
        return np.frombuffer(data, dtype=np.uint8)

    run = assert_survives_corruption(
        (raw_encode, raw_decode), _CountingSource(), n=0, trials=4, must_detect=True
    )
    assert [c.kind for c in run.schedule] == ["append"] * 4
    assert [o.status for o in run.outcomes] == ["raised"] * 4


@linux_only
def test_without_save_dir_a_temporary_directory_is_printed(
    capfd: pytest.CaptureFixture[str],
) -> None:
    with pytest.raises(CorruptionFailure) as info:
        _check_toy(toy_decode_hangs_when_short, trials=1, timeout=0.2)
    err = capfd.readouterr().err
    assert "ratefloor: damaged streams saved under " in err
    directory = Path(err.split("saved under ", 1)[1].split()[0])
    saved = _replay_path(str(info.value), 0)
    assert saved.parent == directory
    assert saved.read_bytes() == b""


# ---------------------------------------------------------------------------
# inside a pytest run


@linux_only
def test_a_crashing_decoder_fails_one_test_and_the_session_goes_on(
    pytester: pytest.Pytester,
) -> None:
    pytester.makepyfile(
        test_tide="""
        import os
        import zlib

        import numpy as np

        from pytest_ratefloor.corruption import assert_survives_corruption

        SYMBOLS = np.arange(3000) % 13

        def encode(symbols):
            return zlib.compress(np.asarray(symbols, dtype=np.uint8).tobytes())

        def test_decoder_that_aborts():
            def decode(data, n):
                if len(data) < 40:
                    os.abort()
                return np.frombuffer(zlib.decompress(data), dtype=np.uint8)

            assert_survives_corruption((encode, decode), SYMBOLS, trials=4, timeout=2.0)

        def test_decoder_that_hangs(tmp_path):
            def decode(data, n):
                while True:
                    pass

            assert_survives_corruption(
                (encode, decode), SYMBOLS, trials=1, timeout=0.2, save_dir=tmp_path
            )

        def test_after_the_crash():
            assert True
        """
    )
    result = pytester.runpytest("-p", "no:ratefloor", "-p", "no:cacheprovider")
    result.assert_outcomes(failed=2, passed=1)
    result.stdout.fnmatch_lines(
        [
            "*CorruptionFailure: decoder of 'test_decoder_that_aborts.<locals>.decode' failed*",
            "*trial 0: crash: the worker process was killed by SIGABRT*",
            "*corruption: truncate: all * bytes cut (empty stream)*",
            "*replay: from pytest_ratefloor.corruption import load_damaged; decode(load_damaged(*",
        ]
    )
    result.stdout.fnmatch_lines(["*trial 0: hang: did not return within 0.2 s*"])
    # the worker's faulthandler trace goes to the test's captured stderr
    result.stdout.fnmatch_lines(["*Captured stderr call*", "*Fatal Python error: Aborted*"])


@linux_only
def test_reference_source_is_named_in_the_failure(tmp_path: Path) -> None:
    from pytest_ratefloor import sources

    source = sources.uniform(16)
    codec = ByteCodec(zlib.compress, lambda data: b"\0" * 2000, name="zero-filler")
    with pytest.raises(CorruptionFailure) as info:
        assert_survives_corruption(
            codec, source, n=2000, seed=3, trials=2, must_detect=True, save_dir=tmp_path
        )
    message = str(info.value)
    assert "decoder of 'zero-filler' failed 2 corruption trials (must-detect mode)" in message
    assert "on uniform(k=16), n=2000, seed=3;" in message
    # the clean stream is zlib of the u8-packed sample (packing "auto" for 16 symbols)
    clean = zlib.compress(source.sample(2000, seed=3).astype(np.uint8).tobytes())
    assert f"clean stream {len(clean)} bytes" in message
    assert _replay_path(message, 1).read_bytes() == clean[:-1]
    assert "replay: from pytest_ratefloor.corruption import load_damaged; decompress(" in message
