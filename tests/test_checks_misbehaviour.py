"""Misbehaving and subtly broken codecs are reported with clear messages, never crash the run."""

from __future__ import annotations

import itertools
import re
import struct
import zlib

import numpy as np
import pytest
from bitarray import bitarray

from pytest_ratefloor import sources
from pytest_ratefloor.checks import assert_rate, assert_roundtrip, check, measure
from pytest_ratefloor.codecs import ByteCodec, StreamCodec
from pytest_ratefloor.errors import CodecMisbehaviour, CodecTraceback, RoundTripFailure

N = 1000
SOURCE = sources.uniform(16)
WHERE = "(source uniform(k=16), n=1000, seed=3)"


def u8_encode(symbols: np.ndarray) -> bytes:
    return np.asarray(symbols, dtype=np.uint8).tobytes()


def u8_decode(data: bytes, n: int) -> np.ndarray:
    return np.frombuffer(data, dtype=np.uint8)


def stream(encode=u8_encode, decode=u8_decode, name: str = "bad") -> StreamCodec:  # type: ignore[no-untyped-def]
    return StreamCodec(encode, decode, name=name)


def _raise(exc: Exception):  # type: ignore[no-untyped-def]
    def fn(*args: object) -> object:
        raise exc

    return fn


def test_a_correct_codec_passes() -> None:
    assert_roundtrip(stream(name="good"), SOURCE, n=N, seed=3)


def _same_exception(cause: BaseException | None, original: BaseException, isolate: bool) -> None:
    """In process the cause is the codec's very exception; from the child process it is a
    copy (same type and text) whose own cause holds the codec's traceback as text."""
    if not isolate:
        assert cause is original
        return
    assert type(cause) is type(original)
    assert cause.args == original.args
    assert isinstance(cause.__cause__, CodecTraceback)
    assert "in fn\n    raise exc" in cause.__cause__.text  # the codec's own frame


@pytest.mark.parametrize("isolate", [True, False])
def test_encoder_that_raises_keeps_the_original_as_cause(isolate: bool) -> None:
    original = ZeroDivisionError("table of size 0")
    with pytest.raises(CodecMisbehaviour) as info:
        assert_roundtrip(stream(encode=_raise(original)), SOURCE, n=N, seed=3, isolate=isolate)
    text = str(info.value)
    assert text.startswith("codec 'bad' misbehaved on the sample (1000 symbols): "
                           "the encoder raised ZeroDivisionError: table of size 0")
    assert WHERE in text
    _same_exception(info.value.__cause__, original, isolate)


@pytest.mark.parametrize("isolate", [True, False])
def test_decoder_that_raises_keeps_the_original_as_cause(isolate: bool) -> None:
    original = IndexError("list index out of range")
    with pytest.raises(CodecMisbehaviour, match="the decoder raised IndexError") as info:
        assert_roundtrip(stream(decode=_raise(original)), SOURCE, n=N, seed=3, isolate=isolate)
    _same_exception(info.value.__cause__, original, isolate)
    assert WHERE in str(info.value)


def test_decoder_calling_sys_exit_does_not_end_the_run() -> None:
    import sys

    with pytest.raises(CodecMisbehaviour, match=r"the decoder called sys\.exit\(3\)"):
        assert_roundtrip(stream(decode=lambda d, n: sys.exit(3)), SOURCE, n=N, seed=3)


@pytest.mark.parametrize(
    ("encode", "message"),
    [
        (lambda s: None, "encoder returned NoneType; expected bytes"),
        (lambda s: "0101", "encoder returned str"),
        (lambda s: 3.25, "encoder returned float"),
    ],
    ids=["None", "str", "float"],
)
def test_encoder_returning_the_wrong_type(encode, message: str) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(CodecMisbehaviour, match=message) as info:
        assert_roundtrip(stream(encode=encode), SOURCE, n=N, seed=3)
    assert "codec 'bad' misbehaved on the sample (1000 symbols)" in str(info.value)
    assert WHERE in str(info.value)


@pytest.mark.parametrize(
    ("decode", "message"),
    [
        (lambda d, n: None, "decoder returned NoneType"),
        (lambda d, n: d.hex(), "decoder returned str"),
        (lambda d, n: np.frombuffer(d, np.uint8) * 1.0, "decoder returned floats"),
        (lambda d, n: np.frombuffer(d, np.uint8)[:-1], "decoder returned 999 symbols; expected "
                                                       "n=1000"),
        (lambda d, n: np.frombuffer(d + b"\0", np.uint8), "decoder returned 1001 symbols"),
    ],
    ids=["None", "str", "floats", "short", "long"],
)
def test_decoder_returning_the_wrong_type_or_length(decode, message: str) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(CodecMisbehaviour, match=message) as info:
        assert_roundtrip(stream(decode=decode), SOURCE, n=N, seed=3)
    assert WHERE in str(info.value)


def test_encoder_writing_into_its_input_is_refused_and_named() -> None:
    def sorting_encoder(symbols: np.ndarray) -> bytes:
        symbols.sort()  # in place: the caller's sample would be destroyed
        return u8_encode(symbols)

    with pytest.raises(CodecMisbehaviour, match="the encoder writes into its input array") as info:
        measure(stream(encode=sorting_encoder), SOURCE, n=N, seed=3)
    assert isinstance(info.value.__cause__, ValueError)


def test_encoder_mutating_behind_the_read_only_flag_is_caught() -> None:
    # Clearing the flag on the view only works because the base array is
    # writable: the hash-before/after check on a writable copy catches it.
    def sneaky(symbols: np.ndarray) -> bytes:
        arr = np.asarray(symbols)
        try:
            arr.flags.writeable = True
        except ValueError:
            arr = arr.copy()
        out = u8_encode(arr)
        arr[:] = 0
        return out

    with pytest.raises(CodecMisbehaviour) as info:
        measure(stream(encode=sneaky), SOURCE, n=N, seed=3)
    text = str(info.value)
    assert "the codec modified its input array (it cleared the read-only flag): index 0" in text


def test_encoder_mutating_a_writable_input_is_caught_on_the_slice() -> None:
    def zeroing(symbols: np.ndarray) -> bytes:
        out = u8_encode(symbols)
        if symbols.flags.writeable:
            symbols[5] = 0 if symbols[5] else 1
        return out

    with pytest.raises(CodecMisbehaviour) as info:
        measure(stream(encode=zeroing), SOURCE, n=N, seed=3)
    text = str(info.value)
    sample = SOURCE.sample(N, 3)
    assert "misbehaved on the first 1000 symbols of the sample" in text
    assert f"the encoder modified its input array: index 5 was {sample[5]}, now " in text
    assert WHERE in text


def test_non_deterministic_encoder() -> None:
    counter = itertools.count()

    def stamped(symbols: np.ndarray) -> bytes:
        return struct.pack("<I", next(counter)) + u8_encode(symbols)

    codec = stream(encode=stamped, decode=lambda d, n: u8_decode(d[4:], n))
    with pytest.raises(CodecMisbehaviour) as info:
        assert_rate(codec, SOURCE, n=N, seed=3, rel=1)
    text = str(info.value)
    assert "the encoder is not deterministic: the same input gave 8032 bits, then 8032 bits " \
           "(first differing byte at offset 0)" in text
    assert WHERE in text


def test_round_trip_failure_names_index_values_and_window() -> None:
    def off_by_one_at_700(data: bytes, n: int) -> np.ndarray:
        out = u8_decode(data, n).astype(np.int64)
        if n > 700:
            out[700] ^= 1
        return out

    with pytest.raises(RoundTripFailure) as info:
        assert_roundtrip(stream(decode=off_by_one_at_700), SOURCE, n=N, seed=3)
    sample = SOURCE.sample(N, 3)
    text = str(info.value)
    window = " ".join(str(v) for v in sample[696:705])
    broken = sample[696:705].copy()
    broken[4] ^= 1
    assert "codec 'bad' does not round-trip the sample (1000 symbols)\n" in text
    assert (f"input length 1000; first mismatch at index 700: expected {sample[700]}, "
            f"decoded {sample[700] ^ 1}") in text
    assert f"expected[696:705] = [{window}]" in text
    assert f"decoded [696:705] = [{' '.join(str(v) for v in broken)}]" in text
    assert WHERE in text


def test_tail_bits_lost_when_the_length_is_not_a_multiple_of_8() -> None:
    # A bit packer that drops the last partial byte: the main sample (a
    # multiple of 8) round-trips, the edge case of length 1..7, 9.. does not.
    def pack(symbols: np.ndarray) -> bytes:
        whole = len(symbols) // 8 * 8
        return np.packbits(np.asarray(symbols[:whole], dtype=np.uint8)).tobytes()

    def unpack(data: bytes, n: int) -> np.ndarray:
        bits = np.unpackbits(np.frombuffer(data, np.uint8))
        return np.concatenate([bits, np.zeros(n - len(bits), np.uint8)])

    codec = stream(encode=pack, decode=unpack, name="lossy-tail")
    source = sources.bernoulli(0.5)
    assert_roundtrip(codec, source, n=64, edge_cases=False)
    with pytest.raises(RoundTripFailure) as info:
        assert_roundtrip(codec, source, n=64)
    text = str(info.value)
    assert re.search(r"does not round-trip edge case '[^']+'\n  input length (\d+);", text)
    length = int(re.search(r"input length (\d+);", text).group(1))  # type: ignore[union-attr]
    assert length % 8 != 0
    assert "source bernoulli(p=0.5), n=64, seed=0" in text


def test_sixteen_bit_run_counter_fails_at_the_word_boundary() -> None:
    # A run-length coder whose run counter is 16 bits wide: fine on short
    # inputs, wrong on the constant run and the 65 536-symbol prefix.
    def rle_encode(symbols: np.ndarray) -> bytes:
        out = bytearray()
        for value, group in itertools.groupby(symbols.tolist()):
            out += struct.pack("<BH", value, len(list(group)) & 0xFFFF)
        return bytes(out)

    def rle_decode(data: bytes, n: int) -> list[int]:
        out: list[int] = []
        for value, count in struct.iter_unpack("<BH", data):
            out += [value] * count
        return out

    codec = stream(encode=rle_encode, decode=rle_decode, name="rle16")
    source = sources.bernoulli(0.999)
    assert_roundtrip(codec, source, n=N, edge_cases=False)
    with pytest.raises((CodecMisbehaviour, RoundTripFailure), match="edge case"):
        assert_roundtrip(codec, source, n=N)


def test_encoder_failing_on_empty_input_is_named() -> None:
    def no_empty(symbols: np.ndarray) -> bytes:
        return zlib.compress(u8_encode(symbols)) if len(symbols) else b""[5]  # type: ignore[return-value]

    codec = stream(encode=no_empty, decode=lambda d, n: u8_decode(zlib.decompress(d), n))
    with pytest.raises(CodecMisbehaviour) as info:
        check(codec, SOURCE, n=N, seed=3, rel=1)
    assert "misbehaved on edge case 'empty input': the encoder raised IndexError" in str(info.value)


def test_compressor_misbehaviour_through_byte_codec() -> None:
    codec = ByteCodec(zlib.compress, lambda b: zlib.decompress(b)[1:], name="drops-a-byte")
    with pytest.raises(CodecMisbehaviour, match=r"decompressor returned 999 bytes; 1000 symbols "
                                                r"in layout 'u8' take 1000 bytes"):
        assert_roundtrip(codec, SOURCE, n=N, seed=3)


def test_bitarray_payload_is_counted_exactly() -> None:
    codec = StreamCodec(
        lambda s: bitarray("".join(format(int(v), "04b") for v in s)),
        lambda d, n: [int(d[4 * i: 4 * i + 4].to01(), 2) for i in range(n)],
        name="nibbles",
    )
    m = check(codec, SOURCE, n=N, seed=3, rel=0, abs=0)  # exactly 4 bits = log2 16
    assert m.bits == 4 * N
