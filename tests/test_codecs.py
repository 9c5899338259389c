"""Tests of the codec adapters (pytest_ratefloor.codecs)."""

from __future__ import annotations

import bz2
import lzma
import zlib

import numpy as np
import pytest
from bitarray import bitarray

from pytest_ratefloor import sources
from pytest_ratefloor.codecs import (
    PAYLOAD_KINDS,
    ByteCodec,
    CodebookCodec,
    CodecContractError,
    Encoded,
    PayloadShape,
    StreamCodec,
    as_codec,
    encoded_from_stream,
    symbols_from_decoder,
)
from pytest_ratefloor.errors import LayoutError

# ------------------------------------------------------------- stream output

def test_encoded_bit_counts() -> None:
    assert encoded_from_stream(b"abc").bits == 24
    assert encoded_from_stream(bitarray("10110")).bits == 5
    assert encoded_from_stream((b"\xff\x80", 9)).bits == 9
    assert encoded_from_stream((b"", 0)).bits == 0
    assert encoded_from_stream((bytearray(b"\x01"), np.int64(3))).bits == 3


def test_byte_buffers_are_snapshotted() -> None:
    # An encoder that reuses its output buffer must not change an earlier result.
    buffer = bytearray(b"\x01\x02")
    encoded = encoded_from_stream(memoryview(buffer))
    buffer[0] = 99
    assert encoded.payload == b"\x01\x02"
    assert encoded.signature() == (16, b"\x01\x02")


@pytest.mark.parametrize(
    ("value", "message"),
    [
        (None, "encoder returned NoneType"),
        ("0101", "encoder returned str"),
        (3.5, "encoder returned float"),
        ([0, 1], "encoder returned list"),
        ((b"ab", 3), r"2 bytes with nbits=3; 2 bytes hold 9..16 bits"),
        ((b"ab", 17), r"nbits=17"),
        ((b"", 1), r"nbits=1"),
        ((b"ab", 9.0), "nbits must be an int, got float"),
        (("ab", 9), r"first item must be bytes"),
        ((b"a", 1, 2), "tuple of 3 items"),
    ],
)
def test_bad_encoder_output_is_named(value: object, message: str) -> None:
    with pytest.raises(CodecContractError, match=message):
        encoded_from_stream(value)


def test_decoder_output_normalised() -> None:
    assert symbols_from_decoder([1, 2, 3], 3).tolist() == [1, 2, 3]
    assert symbols_from_decoder(np.array([1, 0], dtype=np.uint8), 2).dtype == np.int64
    assert symbols_from_decoder(b"\x05\x06", 2).tolist() == [5, 6]
    assert symbols_from_decoder(bitarray("101"), 3).tolist() == [1, 0, 1]
    assert symbols_from_decoder(np.array([True, False]), 2).tolist() == [1, 0]
    assert symbols_from_decoder(np.array([2**40, 3], dtype=object), 2).tolist() == [2**40, 3]


@pytest.mark.parametrize(
    ("value", "message"),
    [
        (None, "decoder returned NoneType"),
        ("012", "decoder returned str"),
        ([0.0, 1.0, 2.0], "decoder returned floats"),
        (np.zeros((3, 1), dtype=np.int64), r"shape \(3, 1\)"),
        ([1, 2], "decoder returned 2 symbols; expected n=3"),
        (np.array([1, 2, 3, 4]), "decoder returned 4 symbols; expected n=3"),
        (np.array([1, "a", 3], dtype=object), "decoder returned object values"),
        (np.array([2**64 - 1, 0, 0], dtype=np.uint64), "outside the int64 range"),
    ],
)
def test_bad_decoder_output_is_named(value: object, message: str) -> None:
    with pytest.raises(CodecContractError, match=message):
        symbols_from_decoder(value, 3)


# ------------------------------------------------------------------ adapters

def test_stream_codec_passes_the_encoder_output_back() -> None:
    seen: list[object] = []

    def encode(symbols: np.ndarray) -> tuple[bytes, int]:
        return bitarray(symbols.tolist()).tobytes(), len(symbols)

    def decode(data: object, n: int) -> list[int]:
        seen.append(data)
        raw, nbits = data  # type: ignore[misc]
        return bitarray(bytes(raw))[:nbits].tolist()

    codec = StreamCodec(encode, decode, name="raw bits", version="1.2")
    encoded = codec.encode(np.array([1, 0, 1, 1, 0, 0, 0, 0, 1]))
    assert encoded.bits == 9
    assert codec.decode(encoded, 9).tolist() == [1, 0, 1, 1, 0, 0, 0, 0, 1]
    assert seen == [(b"\xb0\x80", 9)]
    assert codec.name == "raw bits"
    assert codec.version == "1.2"


def test_codec_names_and_arguments_are_checked() -> None:
    assert StreamCodec(zlib.compress, zlib.decompress).name == "zlib.compress"
    with pytest.raises(TypeError, match="encode must be callable, got 3"):
        StreamCodec(3, zlib.decompress)  # type: ignore[arg-type]
    with pytest.raises(TypeError, match="decompress must be callable"):
        ByteCodec(zlib.compress, None)  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="codec name must be a non-empty string, got ''"):
        ByteCodec(zlib.compress, zlib.decompress, name="")
    with pytest.raises(TypeError, match="codec name must be a non-empty string, got 3"):
        ByteCodec(zlib.compress, zlib.decompress, name=3)  # type: ignore[arg-type]
    with pytest.raises(TypeError, match="codec version must be a string or None, got 3"):
        ByteCodec(zlib.compress, zlib.decompress, version=3)  # type: ignore[arg-type]


@pytest.mark.parametrize(
    ("compress", "decompress"),
    [(zlib.compress, zlib.decompress), (bz2.compress, bz2.decompress),
     (lzma.compress, lzma.decompress)],
)
def test_byte_codec_round_trip_with_stdlib_compressors(compress, decompress) -> None:  # type: ignore[no-untyped-def]
    codec = ByteCodec(compress, decompress, name="c", packing="u16le")
    symbols = np.random.default_rng(3).integers(0, 1000, 5000)
    encoded = codec.encode(symbols)
    assert encoded.bits == 8 * len(encoded.payload)
    assert np.array_equal(codec.decode(encoded, len(symbols)), symbols)


def test_zlib_cannot_beat_one_bit_per_fair_coin_flip() -> None:
    # Counting argument (fact of the trade): no lossless compressor shortens
    # uniformly random bits on average; zlib adds its header and stored-block
    # framing, so 8 fair flips per byte stay at >= 1 bit/flip.
    codec = ByteCodec(lambda b: zlib.compress(b, 9), zlib.decompress, name="zlib", packing="bits")
    flips = np.random.default_rng(11).integers(0, 2, 80_000)
    encoded = codec.encode(flips)
    assert encoded.bits >= len(flips)
    assert np.array_equal(codec.decode(encoded, len(flips)), flips)


def test_byte_codec_wrong_decompressed_size_and_type() -> None:
    short = ByteCodec(zlib.compress, lambda b: zlib.decompress(b)[:-1], name="short", packing="u8")
    encoded = short.encode(np.arange(10))
    with pytest.raises(CodecContractError, match="returned 9 bytes; 10 symbols in layout 'u8'"):
        short.decode(encoded, 10)
    texty = ByteCodec(lambda b: b.hex(), bytes.fromhex, name="hex", packing="u8")
    with pytest.raises(CodecContractError, match="compressor returned str"):
        texty.encode(np.arange(3))
    with pytest.raises(LayoutError, match="bind the codec to a source"):
        ByteCodec(zlib.compress, zlib.decompress).encode(np.arange(3))


def test_byte_codec_for_source_resolves_auto_once() -> None:
    codec = ByteCodec(zlib.compress, zlib.decompress, name="z")
    bound = codec.for_source(sources.bernoulli(0.5))
    assert bound.symbol == "bits"
    assert codec.symbol == "auto"  # the user's codec is left as it was
    assert bound.name == "z"
    assert bound.for_source(sources.uniform(256)).packing == "bits"
    symbols = np.array([1, 0, 1, 1, 1, 0, 0, 0, 1, 1])
    encoded = bound.encode(symbols)
    assert zlib.decompress(encoded.payload) == bitarray(symbols.tolist()).tobytes()
    assert bound.decode(encoded, 10).tolist() == symbols.tolist()


def raw_deflate(data: bytes) -> bytes:
    packer = zlib.compressobj(9, zlib.DEFLATED, -15)  # raw deflate: no header, no checksum
    return packer.compress(data) + packer.flush()


def raw_inflate(data: bytes, n: int) -> bytes:
    return zlib.decompress(data, -15, bufsize=n)


def test_byte_codec_pass_n_tells_the_decompressor_the_symbol_count() -> None:
    from pytest_ratefloor.checks import check

    seen: list[int] = []

    def inflate(data: bytes, n: int) -> bytes:
        seen.append(n)
        return raw_inflate(data, n)

    codec = ByteCodec(raw_deflate, inflate, name="raw-deflate", pass_n=True)
    source = sources.geometric(0.3)
    m = check(codec, source, n=20_000, rel=0.5, isolate=False)
    sample = np.asarray(source.sample(20_000, 0), dtype=np.uint8)
    assert m.bits == 8 * len(raw_deflate(sample.tobytes()))  # the same bytes, deflated here
    assert {0, 20_000} <= set(seen)  # the sample's n, and the empty edge case's
    bound = codec.for_source(source)
    assert bound.layout == "u8"
    assert bound.pass_n
    assert bound.decode(bound.encode(np.arange(5)), 5).tolist() == [0, 1, 2, 3, 4]
    call = bound.replay_call("P", 7)
    assert (call.target, call.call("inflate")) == (inflate, "inflate(P, 7)")
    assert "pass_n=True" in repr(bound)
    with pytest.raises(TypeError, match=r"^ByteCodec pass_n must be True or False, got 1$"):
        ByteCodec(raw_deflate, inflate, pass_n=1)  # type: ignore[arg-type]


def test_layout_says_how_the_symbols_reach_the_codec() -> None:
    from pytest_ratefloor.codes import Codebook

    codec = ByteCodec(zlib.compress, zlib.decompress, name="z")
    assert codec.layout == "auto"
    assert codec.for_source(sources.uniform(256)).layout == "u8"
    assert codec.for_source(sources.bernoulli(0.5)).layout == "bits"
    assert codec.for_source(sources.uniform(1000)).layout == "u16le"
    assert codec.for_source(sources.two_sided_geometric(0.99)).layout == "zigzag-u16le"
    assert ByteCodec(zlib.compress, zlib.decompress, symbol="u32le").layout == "u32le"
    assert StreamCodec(u8_encode, u8_decode).layout is None
    assert as_codec(Codebook({0: "0", 1: "1"})).layout is None
    with pytest.raises(AttributeError):
        codec.layout = "u8"  # type: ignore[misc]


def test_as_codec_shapes() -> None:
    stream = StreamCodec(zlib.compress, zlib.decompress, name="s")
    assert as_codec(stream) is stream

    class Home:
        name = "home-made"
        version = "0.3"

        def encode(self, symbols: np.ndarray) -> bytes:
            return symbols.astype(np.uint8).tobytes()

        def decode(self, data: bytes, n: int) -> np.ndarray:
            return np.frombuffer(data, dtype=np.uint8)

    wrapped = as_codec(Home())
    assert isinstance(wrapped, StreamCodec)
    assert (wrapped.name, wrapped.version) == ("home-made", "0.3")
    enc = wrapped.encode(np.array([3, 4]))
    assert isinstance(enc, Encoded)
    assert wrapped.decode(enc, 2).tolist() == [3, 4]
    with pytest.raises(TypeError, match="cannot use int as a codec") as info:
        as_codec(42)
    assert "an (encode, decode) pair of callables" in str(info.value)


def u8_encode(symbols: np.ndarray) -> bytes:
    return symbols.astype(np.uint8).tobytes()


def u8_decode(data: bytes, n: int) -> np.ndarray:
    return np.frombuffer(data, dtype=np.uint8)


@pytest.mark.parametrize("container", [tuple, list])
def test_as_codec_accepts_an_encode_decode_pair(container: type) -> None:
    codec = as_codec(container([u8_encode, u8_decode]))
    assert isinstance(codec, StreamCodec)
    assert codec.name == "u8_decode"  # named after the decoder's qualname
    assert codec.version is None
    assert codec.for_source(sources.uniform(4)) is codec
    encoded = codec.encode(np.array([3, 1, 4]))
    assert encoded == Encoded(b"\x03\x01\x04", 24)
    assert codec.decode(encoded, 3).tolist() == [3, 1, 4]
    # a lambda keeps its qualname, as the corruption check has always named it
    named = as_codec((u8_encode, lambda d, n: d)).name
    assert named == "test_as_codec_accepts_an_encode_decode_pair.<locals>.<lambda>"


def test_as_codec_pair_items_must_be_callable() -> None:
    with pytest.raises(TypeError, match=r"^codec pair must be two callables \(encode, decode\)"):
        as_codec((u8_encode, 3))
    with pytest.raises(TypeError, match="cannot use tuple as a codec"):
        as_codec((u8_encode, u8_decode, u8_decode))


# ------------------------------------------------------------ payload shapes

def test_encoded_stream_and_shape_of_each_payload_kind() -> None:
    raw = encoded_from_stream(bytearray(b"\x01\x02"))
    assert (raw.stream, raw.shape) == (b"\x01\x02", PayloadShape("bytes"))
    bits = encoded_from_stream(bitarray("1011001110001", endian="little"))
    # reference: bitarray's own byte conversion (zero padding at the end)
    assert bits.stream == bitarray("1011001110001", endian="little").tobytes()
    assert bits.shape == PayloadShape("bitarray", pad=3, endian="little")
    pair = encoded_from_stream((b"\xab\xc0", 10))
    assert (pair.stream, pair.shape) == (b"\xab\xc0", PayloadShape("pair", pad=6))
    assert {raw.shape.kind, bits.shape.kind, pair.shape.kind} == set(PAYLOAD_KINDS)
    with pytest.raises(TypeError, match="payload of type list has no stream shape"):
        _ = Encoded([1, 2], 16).shape


@pytest.mark.parametrize(
    ("payload", "damaged", "expected"),
    [
        (b"abc", b"ab", (b"ab", 16)),
        (b"abc", b"abcdef", (b"abcdef", 48)),
        ((b"\xab\xc0", 10), b"\xab", ((b"\xab", 2), 2)),
        ((b"\xab\xc0", 10), b"\xab\xc0\x01", ((b"\xab\xc0\x01", 18), 18)),
        ((b"\xab\xc0", 10), b"", ((b"", 0), 0)),
        (bitarray("1" * 13, endian="big"), b"\xff\x00", (bitarray("1" * 8 + "0" * 5), 13)),
        (bitarray("1" * 13, endian="big"), b"", (bitarray(), 0)),
        (bitarray("1" * 13, endian="big"), b"\xff\xff\x0f", (bitarray("1" * 16 + "00001"), 21)),
    ],
)
def test_rebuild_keeps_the_shape_and_the_padding(
    payload: object, damaged: bytes, expected: tuple[object, int]
) -> None:
    # length 8·len(damaged) − pad: unchanged length keeps the bit count, a cut
    # removes whole bytes, appended bytes add 8 bits each
    rebuilt = encoded_from_stream(payload).rebuild(damaged)
    assert (rebuilt.payload, rebuilt.bits) == expected
    assert type(rebuilt.payload) is type(encoded_from_stream(payload).payload)


def test_rebuild_keeps_bit_order() -> None:
    little = encoded_from_stream(bitarray("1", endian="little"))
    rebuilt = little.rebuild(b"\x03")
    assert rebuilt.payload.endian == "little"
    assert rebuilt.payload == bitarray("1", endian="little")  # 7 padding bits dropped
    assert little.rebuild(b"\x03\x80").payload == bitarray("110000000", endian="little")


@pytest.mark.parametrize(
    "payload", [b"xyz", (b"\xab\xc0", 10), bitarray("10110", endian="little"), (b"", 0)]
)
@pytest.mark.parametrize("size", [0, 1, 2, 5])
def test_shape_records_round_trip(payload: object, size: int) -> None:
    shape = encoded_from_stream(payload).shape
    record = shape.to_record(size)
    assert set(record) == {"shape", "nbits", "endian"}
    data = bytes(range(size))
    again = PayloadShape.from_record(record, size)
    assert again.rebuild(data) == shape.rebuild(data)


def test_shape_records_are_checked() -> None:
    assert PayloadShape.from_record({}, 3) == PayloadShape("bytes")
    with pytest.raises(ValueError, match=r"^pad must be an integer in \[0, 7\], got 9$"):
        PayloadShape.from_record({"shape": "pair", "nbits": 7}, 2)
    with pytest.raises(ValueError, match=r"^payload kind must be one of 'bytes', 'bitarray'"):
        PayloadShape("text")  # type: ignore[arg-type]
    with pytest.raises(ValueError, match=r"^endian must be one of 'big', 'little', got 'middle'$"):
        PayloadShape("bitarray", endian="middle")  # type: ignore[arg-type]
    with pytest.raises(ValueError, match=r"^pad must be an integer in \[0, 0\], got 2$"):
        PayloadShape("bytes", pad=2)


# ---------------------------------------------------------- replay statements

def test_each_adapter_describes_its_own_replay_call() -> None:
    # which of the user's objects a replay line calls, and how; naming it is the
    # corruption package's (tests/test_corruption_integrity.py runs the lines)
    from pytest_ratefloor.codes import Codebook

    stream = as_codec((u8_encode, u8_decode)).replay_call("P", 7)
    assert (stream.target, stream.role, stream.method) == (u8_decode, "decode", None)
    assert stream.call("dec") == "dec(P, 7)"
    zlib_call = ByteCodec(zlib.compress, zlib.decompress, packing="u8").replay_call("P", 7)
    assert (zlib_call.target, zlib_call.role) == (zlib.decompress, "decompress")
    assert zlib_call.call("zlib.decompress") == "zlib.decompress(P)"
    book = Codebook({0: "0", 1: "1"}, name="coin")
    book_call = as_codec(book).replay_call("P", 7)
    assert (book_call.target, book_call.role, book_call.method) == (book, "codebook", "decode")
    assert book_call.call("cb") == "cb.decode(P, 7)"


def test_codebook_as_codec_uses_the_codebook() -> None:
    from pytest_ratefloor.codes import Codebook

    book = Codebook({0: "0", 1: "10", 2: "11"}, name="tiny")
    codec = as_codec(book)
    assert isinstance(codec, CodebookCodec)
    assert codec.name == "tiny"
    assert codec.symbols == [0, 1, 2]
    encoded = codec.encode(np.array([2, 0, 1, 0]))
    assert encoded.bits == 6
    assert encoded.payload == bitarray("110100")
    assert codec.decode(encoded, 4).tolist() == [2, 0, 1, 0]
    plain = as_codec({0: "1", 1: "0"})
    assert isinstance(plain, CodebookCodec)
    assert plain.encode(np.array([0, 1, 1])).payload == bitarray("100")
