"""The paths that keep a check cheap: shared edge cases, narrow samples, lazy imports.

What is checked here:

* edge cases a codec already passed on the same input are skipped in later
  checks of the session — in process and under fork isolation (the child sends
  the passes home) — while the probe cases run every time; a codec that is
  another object, another version, or that answers the probes differently runs
  every case again; a failing shared case fails every check with the same
  message; the memo is bounded;
* a ``ByteCodec`` check keeps its sample narrow and compares packed bytes, yet
  gives the same fingerprint, bits and sample information as the int64 sample
  (against ``zlib`` and ``numpy`` directly); a decoded stream that differs only
  in the padding of a ``bits`` layout still passes;
* an allocation failure in the plugin's own steps is reported as the plugin
  running out of memory at that ``n`` (naming the step), a ``MemoryError``
  raised by the decoder as the decoder's;
* ``measure`` on a memoryless source does not import scipy (a fresh process).
"""

from __future__ import annotations

import json
import subprocess
import sys
import zlib
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from pytest_ratefloor import checks, sources
from pytest_ratefloor.codecs import ByteCodec, StreamCodec, codec_identity
from pytest_ratefloor.edge_cases import (
    CONSTANT_RUN,
    PASSED,
    WORD_BOUNDARY_LENGTHS,
    PassedEdgeCases,
    edge_case_inputs,
)
from pytest_ratefloor.errors import CodecMisbehaviour, PluginMemoryError, RoundTripFailure
from pytest_ratefloor.isolation import FORK_AVAILABLE
from pytest_ratefloor.measurement import sample_fingerprint
from pytest_ratefloor.rate import sample_information

N = 3000
LONG = {CONSTANT_RUN, *WORD_BOUNDARY_LENGTHS}


@pytest.fixture(autouse=True)
def _fresh_memo() -> Any:
    PASSED.clear()
    yield
    PASSED.clear()


def _compress(data: bytes) -> bytes:
    return zlib.compress(data, 6)


def _logging_codec(log: Path, name: str = "logged", version: str | None = None) -> ByteCodec:
    """zlib through ByteCodec; every compressed input's length (in bytes = symbols for
    u8) is appended to ``log`` — a file, so a forked child's calls are seen too."""

    def compress(data: bytes) -> bytes:
        with log.open("a") as f:
            f.write(f"{len(data)}\n")
        return zlib.compress(data, 6)

    return ByteCodec(compress, zlib.decompress, name=name, version=version, symbol="u8")


def _lengths(log: Path) -> list[int]:
    lengths = [int(x) for x in log.read_text().split()] if log.exists() else []
    log.write_text("")
    return lengths


@pytest.mark.parametrize("isolate", [False, pytest.param(True, marks=pytest.mark.skipif(
    not FORK_AVAILABLE, reason="fork isolation is not available here"))])
def test_long_edge_cases_run_once_per_codec_and_input(tmp_path: Path, isolate: bool) -> None:
    log = tmp_path / "calls"
    codec = _logging_codec(log)
    source = sources.uniform(256)
    checks.check(codec, source, n=N, isolate=isolate)
    first = _lengths(log)
    assert set(first) >= LONG  # the first check runs every case
    checks.check(codec, source, n=N, isolate=isolate)
    second = _lengths(log)
    # the sample, the contract slice twice and the probes (empty, the two single
    # symbols, the alternation, every symbol once) — nothing long, no prefix again
    assert second == [N, N, N, 0, 1, 1, 1000, 256]
    # another seed: the prefixes are of another sample, so they run; the runs do not
    checks.check(codec, source, n=N, seed=1, isolate=isolate)
    third = _lengths(log)
    assert set(third) >= set(WORD_BOUNDARY_LENGTHS)
    assert CONSTANT_RUN not in third
    assert sorted(third[3:]) == sorted([0, 1, 1, 1000, 256, *range(1, 18),
                                        *WORD_BOUNDARY_LENGTHS])


def test_the_same_functions_in_a_new_adapter_share_their_passes(tmp_path: Path) -> None:
    log = tmp_path / "calls"
    codec = _logging_codec(log)
    source = sources.bernoulli(0.3)
    checks.assert_roundtrip(codec, source, n=N, isolate=False)
    _lengths(log)
    again = ByteCodec(codec._compress, codec._decompress, name="logged", symbol="u8")
    checks.assert_roundtrip(again, source, n=N, isolate=False)
    assert CONSTANT_RUN not in _lengths(log)


@pytest.mark.parametrize("change", ["object", "name", "version", "behaviour"])
def test_a_changed_codec_runs_every_case_again(tmp_path: Path, change: str) -> None:
    log = tmp_path / "calls"
    level = [6]

    def compress(data: bytes) -> bytes:
        with log.open("a") as f:
            f.write(f"{len(data)}\n")
        return zlib.compress(data, level[0])

    codec = ByteCodec(compress, zlib.decompress, name="z", symbol="u8")
    source = sources.uniform(256)
    checks.check(codec, source, n=N, isolate=False)
    _lengths(log)
    if change == "object":  # equal behaviour, but another function object
        codec = _logging_codec(log, name="z")
    elif change == "name":
        codec = ByteCodec(compress, zlib.decompress, name="z2", symbol="u8")
    elif change == "version":
        codec = ByteCodec(compress, zlib.decompress, name="z", version="2", symbol="u8")
    else:  # the same objects, answering differently (zlib level 1 vs 6 on the probes)
        level[0] = 1
    checks.check(codec, source, n=N, isolate=False)
    assert set(_lengths(log)) >= LONG


def _breaks_long_runs() -> StreamCodec:
    """A run-length coder with a 16-bit run counter: runs over 65 535 wrap around."""

    def encode(symbols: np.ndarray) -> bytes:
        out = bytearray()
        i = 0
        while i < len(symbols):
            j = i
            while j < len(symbols) and symbols[j] == symbols[i]:
                j += 1
            out += int(symbols[i]).to_bytes(1, "little") + ((j - i) & 0xFFFF).to_bytes(2, "little")
            i = j
        return bytes(out)

    def decode(data: bytes, n: int) -> list[int]:
        out: list[int] = []
        for k in range(0, len(data), 3):
            out += [data[k]] * int.from_bytes(data[k + 1:k + 3], "little")
        return (out + [0] * n)[:n]

    return StreamCodec(encode, decode, name="rle16")


@pytest.mark.parametrize("isolate", [False, pytest.param(True, marks=pytest.mark.skipif(
    not FORK_AVAILABLE, reason="fork isolation is not available here"))])
def test_a_failing_shared_case_fails_every_check_with_the_same_message(isolate: bool) -> None:
    codec = _breaks_long_runs()
    source = sources.bernoulli(0.5)
    messages = []
    for _ in range(3):
        with pytest.raises(RoundTripFailure) as info:
            checks.assert_roundtrip(codec, source, n=200, isolate=isolate)
        messages.append(str(info.value))
    assert "does not round-trip edge case 'constant run of 1'" in messages[0]
    assert messages == [messages[0]] * 3


def test_the_memo_is_bounded_least_recently_used_first_out() -> None:
    memo = PassedEdgeCases(limit=3)
    memo.remember(["a", "b", "c"], ())
    assert "a" in memo  # used: now the most recent
    memo.remember(["d"], ())
    assert len(memo) == 3
    assert "b" not in memo
    assert all(k in memo for k in ("a", "c", "d"))


def test_codec_identity_holds_the_objects_and_refuses_mappings() -> None:
    codec = ByteCodec(_compress, zlib.decompress, name="z")
    key, refs = codec_identity(codec) or ((), ())
    assert _compress in refs
    assert zlib.decompress in refs
    assert ("id", id(_compress)) in key
    assert codec_identity({0: "0", 1: "1"}) is None  # a dict may change in place


@pytest.mark.parametrize("source", [sources.uniform(256), sources.uniform(1000),
                                    sources.zipf(256, 1.1), sources.bernoulli(0.2)],
                         ids=lambda s: s.spec)
def test_a_narrow_sample_measures_exactly_as_the_int64_one(source: sources.Source) -> None:
    n = 300_000  # long enough for the histogram path of the sample information
    codec = ByteCodec(_compress, zlib.decompress, name="zlib-6")
    m = checks.measure(codec, source, n=n, seed=4, isolate=False)
    wide = np.asarray(source.sample(n, 4), dtype=np.int64)
    assert m.fingerprint == sample_fingerprint(wide)
    layout = codec.for_source(source).layout
    packed = {"bits": np.packbits(wide.astype(np.uint8)).tobytes(),
              "u8": wide.astype(np.uint8).tobytes(),
              "u16le": wide.astype("<u2").tobytes()}[layout]
    assert m.bits == 8 * len(zlib.compress(packed, 6))  # zlib itself, on numpy's packing
    # the histogram path adds the same terms as the source's own sum, in another order
    assert m.floor_bits == pytest.approx(float(source.information(wide)), rel=1e-12)
    assert sample_information(source, wide.astype(np.uint16)) == pytest.approx(
        float(source.information(wide)), rel=1e-12)


@pytest.mark.parametrize("length", [1000, (1 << 18), (1 << 18) + 1, 3 * (1 << 20) + 7])
@pytest.mark.parametrize("size", [2, 200, 256, 300])
def test_byte_samples_are_counted_by_pairs_exactly(length: int, size: int) -> None:
    # the pair table's two marginals against collections.Counter, odd and even lengths,
    # bytes above the declared alphabet (dropped) and alphabets wider than a byte (padded)
    from collections import Counter

    from pytest_ratefloor.rate import _histogram

    sample = np.random.default_rng(length + size).integers(0, 256, length).astype(np.uint8)
    sample[:5] = [0, 255, 255, 1, 0]
    counted = Counter(sample.tolist())
    want = [counted.get(symbol, 0) for symbol in range(size)]
    assert _histogram(sample, size).tolist() == want


def test_padding_bits_that_differ_still_round_trip() -> None:
    # 'bits' layout: a decompressor that sets the unused tail bits of the last byte
    def decompress(data: bytes) -> bytes:
        raw = bytearray(zlib.decompress(data))
        raw[-1] |= 0x01
        return bytes(raw)

    codec = ByteCodec(_compress, decompress, name="noisy-padding", symbol="bits")
    checks.assert_roundtrip(codec, sources.bernoulli(0.3), n=1001, isolate=False,
                            edge_cases=False)


def test_a_wrong_byte_is_named_as_a_symbol_mismatch() -> None:
    def decompress(data: bytes) -> bytes:
        raw = bytearray(zlib.decompress(data))
        raw[5] ^= 0xFF
        return bytes(raw)

    codec = ByteCodec(_compress, decompress, name="flip", symbol="u8")
    source = sources.uniform(256)
    expected = int(source.sample(N, 0)[5])
    with pytest.raises(RoundTripFailure, match=(
            rf"first mismatch at index 5: expected {expected}, decoded {expected ^ 0xFF}")):
        checks.check(codec, source, n=N, isolate=False, edge_cases=False)


def test_the_plugin_running_out_of_memory_is_named_as_such(
        monkeypatch: pytest.MonkeyPatch) -> None:
    import pytest_ratefloor.codecs as codecs_module

    def no_memory(*args: Any, **kwargs: Any) -> bytes:
        raise MemoryError("Unable to allocate 763. MiB for an array")

    monkeypatch.setattr(codecs_module, "pack", no_memory)
    codec = ByteCodec(_compress, zlib.decompress, name="zlib-6", symbol="zigzag-u8")
    with pytest.raises(PluginMemoryError) as info:
        checks.check(codec, sources.uniform(10), n=N, isolate=False)
    text = str(info.value)
    assert f"ran out of memory at n={N} while packing the sample ({N} symbols)" in text
    assert "not codec 'zlib-6'" in text
    assert "raised MemoryError" not in text


def test_the_plugin_widening_decoded_symbols_is_named_as_such(
        monkeypatch: pytest.MonkeyPatch) -> None:
    import pytest_ratefloor.codecs as codecs_module

    def no_memory(value: object, n: int) -> np.ndarray:
        raise MemoryError()

    monkeypatch.setattr(codecs_module, "symbols_from_decoder", no_memory)
    codec = StreamCodec(lambda s: s.astype(np.uint8).tobytes(), lambda d, n: list(d), name="u8")
    with pytest.raises(PluginMemoryError, match=(
            rf"ran out of memory at n={N} while decoding the sample \({N} symbols\) "
            rf"\(converting the decoder's {N} symbols to int64\)")):
        checks.measure(codec, sources.uniform(256), n=N, isolate=False)


def test_a_decoder_running_out_of_memory_is_the_decoders() -> None:
    def decompress(data: bytes) -> bytes:
        raise MemoryError("the decoder's own table")

    codec = ByteCodec(_compress, decompress, name="greedy", symbol="u8")
    with pytest.raises(CodecMisbehaviour, match="the decoder raised MemoryError"):
        checks.measure(codec, sources.uniform(256), n=N, isolate=False)


@pytest.mark.skipif(sys.platform != "linux", reason="an address-space limit (Linux)")
def test_a_real_allocation_failure_drawing_the_sample_names_n() -> None:
    program = """
import resource, zlib
from pytest_ratefloor import ByteCodec, sources
from pytest_ratefloor.checks import check
from pytest_ratefloor.errors import PluginMemoryError
codec = ByteCodec(lambda d: zlib.compress(d, 1), zlib.decompress, name="zlib-1")
check(codec, sources.uniform(256), n=1000, isolate=False, rel=0.5)  # all imported first
soft, hard = resource.getrlimit(resource.RLIMIT_AS)
used = int(open("/proc/self/statm").read().split()[0]) * resource.getpagesize()
resource.setrlimit(resource.RLIMIT_AS, (used + 400 * 2**20, hard))
try:
    check(codec, sources.uniform(256), n=10**9, isolate=False, rel=0.5)
except PluginMemoryError as exc:
    print(exc)
"""
    out = subprocess.run([sys.executable, "-c", program], capture_output=True, text=True,
                         timeout=120)
    assert "ran out of memory at n=1000000000 while drawing the sample" in out.stdout, (
        out.stdout + out.stderr)


def test_measure_on_a_memoryless_source_does_not_import_scipy_or_subprocess() -> None:
    program = """
import json, sys, zlib
from pytest_ratefloor import ByteCodec, measure, sources
from pytest_ratefloor.checks import check
codec = ByteCodec(lambda d: zlib.compress(d, 6), zlib.decompress, name="zlib-6")
for source in (sources.uniform(256), sources.geometric(0.2), sources.poisson(4.0)):
    measure(codec, source, n=2000)
check(codec, sources.bernoulli(0.1), n=2000, floor="entropy", rel=1.0)
print(json.dumps(sorted(m for m in sys.modules if m.split(".")[0] == "scipy"
                        or m in ("subprocess", "pytest_ratefloor.command"))))
"""
    out = subprocess.run([sys.executable, "-c", program], capture_output=True, text=True,
                         check=True, timeout=120)
    # nor the executable codecs' module and its subprocess machinery
    assert json.loads(out.stdout.strip().splitlines()[-1]) == []


def test_edge_case_inputs_still_list_every_case() -> None:
    # the public list is unchanged by the lazy plan: one of each, in the documented order
    source = sources.uniform(4)
    names = [name for name, _ in edge_case_inputs(source, source.sample(10), seed=0)]
    assert names[:6] == [
        "edge case 'empty input'", "edge case 'single smallest symbol 0'",
        "edge case 'single largest symbol 3'", "edge case 'constant run of 0'",
        "edge case 'constant run of 3'", "edge case 'alternating 0/3'",
    ]
    assert len(names) == 7 + 17 + 3


def test_the_plugin_running_out_of_memory_measuring_is_named_as_such(
        monkeypatch: pytest.MonkeyPatch) -> None:
    import pytest_ratefloor.checks as checks_module

    def no_memory(*args: Any, **kwargs: Any) -> None:
        raise MemoryError()

    monkeypatch.setattr(checks_module, "measurement_of", no_memory)
    codec = ByteCodec(_compress, zlib.decompress, name="zlib-6")
    with pytest.raises(PluginMemoryError, match=(
            rf"ran out of memory at n={N} while measuring the sample floor .*not codec 'zlib-6'")):
        checks.measure(codec, sources.uniform(256), n=N, isolate=False)
