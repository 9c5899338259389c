"""Adapters that give every codec shape under test one interface.

A codec under test comes in one of these shapes:

* ``StreamCodec(encode, decode)`` — the team's own bit/byte stream coder:
  ``encode(symbols) -> bytes | bytearray | memoryview | bitarray | (bytes, nbits)``
  and ``decode(data, n) -> sequence of n ints``;
* ``ByteCodec(compress, decompress, symbol=...)`` — a general byte
  compressor (zlib, bz2, lzma, ...): the symbols are packed into bytes first
  (``pass_n=True``: the decompressor is also told ``n``);
* a ``Codebook`` (a symbol code from :mod:`pytest_ratefloor.codes`), encoded
  and decoded by bitarray's C prefix-code encoder and decode tree;
* ``CommandCodec(encode_cmd, decode_cmd)`` — an encoder and a decoder program
  (:mod:`pytest_ratefloor.command`).

:func:`as_codec` turns any of them (and an ``(encode, decode)`` pair of
functions, or an object with those two methods, as a ``StreamCodec``) into a
:class:`Codec`, whose ``encode`` returns an :class:`Encoded` (the payload
handed back to the decoder plus the exact bit count) and whose ``decode``
returns an ``int64`` array of exactly ``n`` symbols. Contract breaches that
the adapter itself detects (wrong return type, wrong length, inconsistent
bit count) raise :class:`CodecContractError`; the checks turn it into a
``CodecMisbehaviour`` that names the codec, the source, ``n`` and the seed.
A symbol that does not fit the chosen symbol layout raises
:class:`LayoutError` (a ``ValueError``): that is a configuration mistake,
not a codec fault.

Rate accounting: exact bits for a ``bitarray`` or ``(bytes, nbits)``;
``8 · len`` for a byte string. Everything the decoder receives is counted
(the decoder is told only ``n`` besides the payload).

Symbol layouts (``ByteCodec(symbol=...)``, ``"auto"`` by default) are described
in :mod:`pytest_ratefloor.layouts`; ``packing=`` is accepted as the older
name of the same option. Each adapter's read-only ``layout`` says how the
symbols reach the codec: the layout name for a ``ByteCodec`` (``"auto"`` until
bound to a source), the command and layout for a ``CommandCodec``, ``None``
for the adapters that hand the codec the symbols themselves.

Replaying damaged streams (what the corruption check needs from a codec):
:attr:`Encoded.stream` is the payload as bytes, :attr:`Encoded.shape` (a
:class:`PayloadShape`) turns damaged bytes back into a payload of the shape
the encoder returned and serialises that shape for a replay file, and every
adapter's ``replay_call`` says which of the user's objects its decoder is and
how it is called (a :class:`ReplayCall`); :mod:`pytest_ratefloor.corruption.replay`
finds a name for that object and writes the line.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping
from collections.abc import Set as AbstractSet
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Literal, Protocol, get_args, runtime_checkable

import numpy as np
from bitarray import bitarray

from pytest_ratefloor import validation
from pytest_ratefloor.errors import CodecContractError, LayoutError
from pytest_ratefloor.layouts import AUTO, LAYOUTS, pack, packed_size, resolve_layout, unpack

if TYPE_CHECKING:
    from pytest_ratefloor.sources import Source

__all__ = [
    "PAYLOAD_KINDS",
    "ByteCodec",
    "CodebookCodec",
    "Codec",
    "CodecContractError",
    "Encoded",
    "LayoutError",
    "PayloadKind",
    "PayloadShape",
    "ReplayCall",
    "StreamCodec",
    "as_codec",
    "decoded_array",
    "encoded_from_stream",
    "symbols_from_decoder",
]

#: The three payload shapes an encoder may return (see :func:`encoded_from_stream`).
PayloadKind = Literal["bytes", "bitarray", "pair"]
PAYLOAD_KINDS: tuple[PayloadKind, ...] = get_args(PayloadKind)

BitOrder = Literal["big", "little"]
_BIT_ORDERS: tuple[BitOrder, ...] = get_args(BitOrder)


@dataclass(frozen=True)
class Encoded:
    """What one encoder call produced.

    ``payload`` is handed back to the decoder unchanged (byte strings are
    snapshotted as ``bytes`` so a buffer the encoder reuses cannot change them
    afterwards); ``bits`` is the exact length charged to the codec. The
    payload is one of the shapes of :data:`PAYLOAD_KINDS`: ``bytes``, a
    ``bitarray`` or a ``(bytes, nbits)`` pair.
    """

    payload: Any
    bits: int

    @property
    def stream(self) -> bytes:
        """The payload as bytes: a byte string as it is, a ``bitarray`` with its
        last byte padded by zero bits, the bytes of a ``(bytes, nbits)`` pair."""
        data = self.payload
        if isinstance(data, tuple):
            data = data[0]
        if isinstance(data, bitarray):
            return data.tobytes()
        return bytes(data)

    @property
    def shape(self) -> PayloadShape:
        """The payload's shape: what :meth:`rebuild` needs besides the bytes."""
        data = self.payload
        if isinstance(data, bitarray):
            endian: BitOrder = "little" if data.endian == "little" else "big"
            return PayloadShape("bitarray", pad=-len(data) % 8, endian=endian)
        if isinstance(data, tuple):
            return PayloadShape("pair", pad=8 * len(data[0]) - self.bits)
        if isinstance(data, (bytes, bytearray, memoryview)):
            return PayloadShape("bytes")
        raise TypeError(
            f"payload of type {_type_name(data)} has no stream shape; expected one of "
            f"{_ENCODER_SHAPES}"
        )

    def rebuild(self, data: bytes) -> Encoded:
        """``data`` (e.g. a damaged copy of :attr:`stream`) in this payload's shape."""
        return self.shape.rebuild(data)

    def signature(self) -> tuple[int, bytes]:
        """Canonical (bits, bytes) of the payload, for determinism comparisons."""
        return self.bits, self.stream


@dataclass(frozen=True)
class PayloadShape:
    """How a payload is laid out apart from its bytes, so that other bytes
    (a damaged copy of the stream, a saved file) can be handed to the decoder
    in the shape the encoder returned.

    ``kind`` is one of :data:`PAYLOAD_KINDS`; ``pad`` the number of unused
    bits at the end of the last byte (0..7; always 0 for ``"bytes"``);
    ``endian`` the bit order of a ``bitarray`` payload.
    """

    kind: PayloadKind
    pad: int = 0
    endian: BitOrder = "big"

    def __post_init__(self) -> None:
        validation.choice(self.kind, "payload kind", PAYLOAD_KINDS)
        validation.integer(self.pad, "pad", minimum=0, maximum=0 if self.kind == "bytes" else 7)
        validation.choice(self.endian, "endian", _BIT_ORDERS)

    def bits_of(self, size: int) -> int:
        """The bit count of a stream of ``size`` bytes in this shape:
        ``8·size`` less the padding (never below 0)."""
        return max(0, 8 * size - self.pad)

    def rebuild(self, data: bytes) -> Encoded:
        """``data`` as a payload of this shape, with its bit count.

        ``"bytes"`` → the bytes; ``"bitarray"`` → a ``bitarray`` of the same
        endianness holding the first :meth:`bits_of` ``(len(data))`` bits;
        ``"pair"`` → ``(data, that many bits)``. So an unchanged length keeps
        the exact bit count, a cut removes whole bytes from the end, appended
        bytes add 8 bits each, and flips in padding bits change nothing.
        """
        if type(data) is not bytes:
            data = bytes(data)
        if self.kind == "bytes":
            return Encoded(payload=data, bits=8 * len(data))
        nbits = self.bits_of(len(data))
        if self.kind == "pair":
            return Encoded(payload=(data, nbits), bits=nbits)
        bits = bitarray(endian=self.endian)
        bits.frombytes(data)
        del bits[nbits:]
        return Encoded(payload=bits, bits=nbits)

    def to_record(self, size: int) -> dict[str, Any]:
        """Builtin-only description of a ``size``-byte stream in this shape
        (``shape``, ``nbits``, ``endian``), e.g. for a JSON file beside it."""
        return {"shape": self.kind, "nbits": self.bits_of(size), "endian": self.endian}

    @classmethod
    def from_record(cls, record: Mapping[str, Any], size: int) -> PayloadShape:
        """The shape described by :meth:`to_record` for a stream of ``size`` bytes.

        Missing fields mean a plain byte string (``shape``), a full last byte
        (``nbits``) and big-endian bits (``endian``).
        """
        kind = record.get("shape", "bytes")
        nbits = validation.integer(record.get("nbits", 8 * size), "nbits", minimum=0)
        pad = 0 if kind == "bytes" or size == 0 else 8 * size - nbits
        return cls(kind, pad=pad, endian=record.get("endian", "big"))


@runtime_checkable
class Codec(Protocol):
    """The one interface the checks use."""

    name: str
    version: str | None
    #: the symbols the codec has codewords for (a table), or ``None``: any symbol
    #: of the source. Edge cases stay inside a table.
    symbols: list[int] | None

    def encode(self, symbols: np.ndarray) -> Encoded:
        """Encode an int64 symbol array."""
        ...

    def decode(self, encoded: Encoded, n: int) -> np.ndarray:
        """Decode exactly ``n`` symbols (int64 array)."""
        ...

    def for_source(self, source: Source) -> Codec:
        """The codec as used on ``source`` (resolves source-dependent settings)."""
        ...

    def replay_call(self, payload: str, n: int) -> ReplayCall:
        """How this codec's own decoder is called on ``payload`` (the text of an
        expression giving a payload of the encoder's shape)."""
        ...


@dataclass(frozen=True)
class ReplayCall:
    """The call that decodes a saved payload, for a replay line.

    ``target`` is the user's own object: the decoder function, the decompressor,
    or the codebook; ``method`` the method called on it (``"decode"`` for a
    codebook), or ``None`` when ``target`` itself is called; ``args`` the text of
    the arguments; ``role`` the variable name a replay uses when the object has
    no name it can reach (``decode``, ``decompress``, ``codebook``).
    """

    target: object
    args: str
    role: str
    method: str | None = None

    def call(self, name: str) -> str:
        """The call on the object named by the expression ``name``."""
        attribute = f".{self.method}" if self.method else ""
        return f"{name}{attribute}({self.args})"


def _type_name(value: object) -> str:
    return type(value).__name__


def _callable_name(fn: Callable[..., Any]) -> str:
    module = getattr(fn, "__module__", None)
    qual = getattr(fn, "__qualname__", None) or getattr(fn, "__name__", None)
    if qual is None:
        return _type_name(fn)
    return f"{module}.{qual}" if module and module != "builtins" else str(qual)


def _check_name(name: object, parameter: str = "name") -> str:
    return validation.text(name, f"codec {parameter}")


def _check_version(version: object) -> str | None:
    if version is not None and not isinstance(version, str):
        raise TypeError(validation.message("codec version", "a string or None", version))
    return version


def _bytes_of(value: object) -> bytes | None:
    """``bytes`` for bytes-like values (snapshot), ``None`` for anything else."""
    if isinstance(value, bytes):
        return value
    if isinstance(value, (bytearray, memoryview)):
        return bytes(value)
    return None


_ENCODER_SHAPES = "bytes, bytearray, memoryview, bitarray or a (bytes, nbits) pair"


def encoded_from_stream(value: object) -> Encoded:
    """Validate what a stream encoder returned and count its bits.

    ``bitarray`` → ``len`` bits; ``bytes``/``bytearray``/``memoryview`` →
    ``8·len`` bits; ``(bytes-like, nbits)`` → ``nbits`` bits, which must lie in
    ``(8·(len−1), 8·len]`` (or be 0 for an empty byte string) so that the
    bytes carry no unaccounted whole byte.
    """
    if isinstance(value, bitarray):
        return Encoded(payload=value, bits=len(value))
    raw = _bytes_of(value)
    if raw is not None:
        return Encoded(payload=raw, bits=8 * len(raw))
    if isinstance(value, tuple):
        if len(value) != 2:
            raise CodecContractError(
                f"encoder returned a tuple of {len(value)} items; expected {_ENCODER_SHAPES}"
            )
        data, nbits = value
        raw = _bytes_of(data)
        if raw is None:
            raise CodecContractError(
                f"encoder returned ({_type_name(data)}, nbits); the first item must be "
                "bytes, bytearray or memoryview"
            )
        if isinstance(nbits, (bool, np.bool_)) or not isinstance(nbits, (int, np.integer)):
            raise CodecContractError(
                f"encoder returned (bytes, {nbits!r}): nbits must be an int, "
                f"got {_type_name(nbits)}"
            )
        nbits = int(nbits)
        lo, hi = (8 * (len(raw) - 1) + 1, 8 * len(raw)) if raw else (0, 0)
        if not lo <= nbits <= hi:
            raise CodecContractError(
                f"encoder returned {len(raw)} bytes with nbits={nbits}; {len(raw)} bytes hold "
                f"{lo}..{hi} bits (a whole unused byte would be information the rate "
                "does not count)"
            )
        return Encoded(payload=(raw, nbits), bits=nbits)
    raise CodecContractError(f"encoder returned {_type_name(value)}; expected {_ENCODER_SHAPES}")


def _expected(n: int) -> str:
    return f"expected a sequence or array of {n} integers (a list, tuple or 1-D numpy array)"


def _not_a_sequence(value: object) -> str | None:
    """What a decoder's output is, when it is plainly no sequence of symbols."""
    kind = _type_name(value)
    if value is None:
        return "NoneType (nothing: a missing return statement?)"
    if isinstance(value, str):
        return f"str {validation.show(value)} (text, not symbols)"
    if isinstance(value, Mapping):
        return f"{kind} (a mapping, not a sequence)"
    if isinstance(value, AbstractSet):
        return f"{kind} (a set: its order is arbitrary)"
    if isinstance(value, Iterator):
        return (
            f"{kind} (an iterator or generator: it can be read once only, so it cannot be "
            "checked; return a list or an array)"
        )
    return None


def decoded_array(value: object, n: int) -> np.ndarray:
    """A decoder's output as a flat int64 array, of whatever length it has.

    The checks of :func:`symbols_from_decoder` except the length: what is no
    sequence of integers raises :class:`CodecContractError` naming the type
    returned (and the value, or the first item that is no integer) and what was
    expected (``n`` integers).
    """
    problem = _not_a_sequence(value)
    if problem is not None:
        raise CodecContractError(f"decoder returned {problem}; {_expected(n)}")
    if isinstance(value, bitarray):
        arr: np.ndarray = np.frombuffer(value.unpack(), dtype=np.uint8)
    elif isinstance(value, (bytes, bytearray)) or (
        isinstance(value, memoryview) and value.format in ("B", "b", "c")
    ):
        arr = np.frombuffer(bytes(value), dtype=np.uint8)
    elif isinstance(value, np.ndarray):
        arr = value
    else:
        try:
            arr = np.asarray(value)
        except (TypeError, ValueError, OverflowError) as exc:
            raise CodecContractError(
                f"decoder returned {_type_name(value)} that is not a sequence of integers "
                f"({exc}); {_expected(n)}"
            ) from exc
    if arr.ndim == 0:
        raise CodecContractError(
            f"decoder returned {_type_name(value)} {validation.show(value)}, a single value "
            f"and not a sequence; {_expected(n)}"
        )
    if arr.ndim != 1:
        raise CodecContractError(
            f"decoder returned {_type_name(value)} of shape {arr.shape}; expected a flat "
            f"(1-D) sequence of {n} integers"
        )
    if arr.size == 0 and arr.dtype.kind in "fO":
        arr = np.zeros(0, dtype=np.int64)  # an empty list has no integer dtype of its own
    if arr.dtype.kind == "O":
        bad = next(
            (i for i, v in enumerate(arr.tolist())
             if isinstance(v, bool) or not isinstance(v, int)),
            None,
        )
        if bad is not None:
            item = arr[bad]
            raise CodecContractError(
                f"decoder returned object values ({_type_name(value)} of dtype object holding "
                f"{_type_name(item)} {validation.show(item)} at index {bad}); expected integers"
            )
        try:
            arr = arr.astype(np.int64)
        except OverflowError as exc:
            raise CodecContractError("decoder returned integers outside the int64 range") from exc
    elif arr.dtype.kind not in "iub":
        kind = {"f": "floats", "c": "complex numbers", "U": "strings", "S": "bytes"}.get(
            arr.dtype.kind, f"{arr.dtype} values"
        )
        first = validation.show(arr[0]) if arr.size else "none"
        raise CodecContractError(
            f"decoder returned {kind} ({_type_name(value)} of dtype {arr.dtype}, first "
            f"{first}); expected integers"
        )
    if arr.dtype == np.uint64 and len(arr) and int(arr.max()) > np.iinfo(np.int64).max:
        raise CodecContractError(
            f"decoder returned integers outside the int64 range (up to {int(arr.max())})"
        )
    return arr if arr.dtype == np.int64 else arr.astype(np.int64)


def symbols_from_decoder(value: object, n: int) -> np.ndarray:
    """Validate a decoder's output: exactly ``n`` integers, as an int64 array.

    Accepted: numpy integer arrays, numpy bool arrays and ``bitarray`` (each item
    one binary symbol, 0 or 1), sequences of ints (a list, a tuple, a ``range``,
    an object array of Python ints), ``bytes``/``bytearray`` and byte
    ``memoryview`` (each byte one symbol; a ``memoryview`` of wider items gives
    its items). Rejected with a :class:`CodecContractError` naming the type
    returned and what is expected: ``None``, ``str``, mappings, sets, iterators
    and generators (which would be used up by reading them), single values,
    arrays of more than one dimension, floats and other non-integers (an object
    array holding a ``bool``, a float or ``None`` names the first such item), and
    any length other than ``n``.
    """
    arr = decoded_array(value, n)
    if len(arr) != n:
        raise CodecContractError(f"decoder returned {len(arr)} symbols; expected n={n}")
    return arr


class StreamCodec:
    """A codec given as two functions.

    ``encode(symbols: numpy.ndarray) -> bytes | bytearray | memoryview |
    bitarray | (bytes, nbits)``; ``decode(data, n) -> sequence of n ints``.
    The decoder receives the encoder's output back in the same shape (a
    ``(bytes, nbits)`` pair stays a pair; byte strings arrive as ``bytes``).
    The symbols passed to ``encode`` are an ``int64`` array that must be
    treated as read-only.
    """

    def __init__(
        self,
        encode: Callable[[np.ndarray], Any],
        decode: Callable[[Any, int], Any],
        name: str | None = None,
        version: str | None = None,
    ) -> None:
        validation.function(encode, "StreamCodec encode")
        validation.function(decode, "StreamCodec decode")
        self._encode = encode
        self._decode = decode
        self.name = _check_name(name if name is not None else _callable_name(encode))
        self.version = _check_version(version)
        self.symbols: list[int] | None = None

    def __repr__(self) -> str:
        return f"StreamCodec(name={self.name!r}, version={self.version!r})"

    @property
    def layout(self) -> None:
        """``None``: the encoder gets the symbols themselves."""
        return None

    def encode(self, symbols: np.ndarray) -> Encoded:
        """Call the user's encoder and validate what it returned."""
        return encoded_from_stream(self._encode(symbols))

    def decode(self, encoded: Encoded, n: int) -> np.ndarray:
        """Call the user's decoder and validate what it returned."""
        return symbols_from_decoder(self._decode(encoded.payload, n), n)

    def for_source(self, source: Source) -> StreamCodec:
        """Nothing to resolve: the same codec."""
        return self

    def replay_call(self, payload: str, n: int) -> ReplayCall:
        """The user's ``decode(payload, n)``."""
        return ReplayCall(self._decode, f"{payload}, {n}", role="decode")


class ByteCodec:
    """A general byte compressor: ``compress(bytes) -> bytes``, ``decompress(bytes) -> bytes``.

    The symbols are written as bytes first in the layout ``symbol`` (see
    :mod:`pytest_ratefloor.layouts`; ``packing`` is the older name of the same
    option); the rate is ``8 · len(compressed)``. ``symbol="auto"`` is
    resolved from the source when the checks bind the codec to it. With
    ``pass_n=True`` the decompressor is called as ``decompress(data, n)``, ``n``
    the number of symbols, for formats that need the output size from outside
    the stream (raw deflate with a known length, for one).
    """

    def __init__(
        self,
        compress: Callable[[bytes], Any],
        decompress: Callable[..., Any],
        name: str | None = None,
        version: str | None = None,
        symbol: str = AUTO,
        *,
        packing: str | None = None,
        pass_n: bool = False,
    ) -> None:
        validation.function(compress, "ByteCodec compress")
        validation.function(decompress, "ByteCodec decompress")
        if packing is not None:
            if symbol != AUTO and symbol != packing:
                raise ValueError(
                    f"ByteCodec: symbol={symbol!r} and packing={packing!r} name the same "
                    "option; give one"
                )
            symbol = packing
        if symbol != AUTO:
            resolve_layout(symbol)
        self._compress = compress
        self._decompress = decompress
        self.pass_n = validation.flag(pass_n, "ByteCodec pass_n")
        self.name = _check_name(name if name is not None else _callable_name(compress))
        self.version = _check_version(version)
        self.symbols: list[int] | None = None
        self.symbol = symbol
        # Set by for_source when the source's declared range fits the layout:
        # the source's samples then need no range scan.
        self._trusted = False

    @property
    def packing(self) -> str:
        """The older name of :attr:`symbol`."""
        return self.symbol

    @property
    def layout(self) -> str:
        """The symbol layout: its name (``"u8"``, ``"zigzag-u16le"``, ...) once bound to a
        source, ``"auto"`` before when it is left to the source."""
        return self.symbol

    def __repr__(self) -> str:
        extra = ", pass_n=True" if self.pass_n else ""
        return (f"ByteCodec(name={self.name!r}, version={self.version!r}, "
                f"symbol={self.symbol!r}{extra})")

    def for_source(self, source: Source) -> ByteCodec:
        """This codec as used on ``source``: an ``"auto"`` layout resolved.

        When the source declares a finite range that fits the layout, the
        bound codec skips the per-call range scan of the symbols (the checks
        only feed it symbols of that source).
        """
        layout = resolve_layout(self.symbol, source)
        bound = ByteCodec(
            self._compress, self._decompress, name=self.name, version=self.version,
            symbol=layout, pass_n=self.pass_n,
        )
        lo, hi = source.min_symbol, source.max_symbol
        bound._trusted = lo is not None and hi is not None and LAYOUTS[layout].holds(lo, hi)
        return bound

    def encode(self, symbols: np.ndarray) -> Encoded:
        """Write the symbols in the layout, compress, and charge ``8 · len`` bits."""
        layout = resolve_layout(self.symbol)
        out = self._compress(pack(symbols, layout, trusted=self._trusted))
        raw = _bytes_of(out)
        if raw is None:
            raise CodecContractError(
                f"compressor returned {_type_name(out)}; expected bytes, bytearray or memoryview"
            )
        return Encoded(payload=raw, bits=8 * len(raw))

    def decode(self, encoded: Encoded, n: int) -> np.ndarray:
        """Decompress (told ``n`` with ``pass_n``) and read back exactly ``n`` symbols."""
        layout = resolve_layout(self.symbol)
        if self.pass_n:
            out = self._decompress(encoded.payload, n)
        else:
            out = self._decompress(encoded.payload)
        raw = _bytes_of(out)
        if raw is None:
            raise CodecContractError(
                f"decompressor returned {_type_name(out)}; expected bytes, bytearray or "
                "memoryview"
            )
        want = packed_size(n, layout)
        if len(raw) != want:
            raise CodecContractError(
                f"decompressor returned {len(raw)} bytes; {n} symbols in layout {layout!r} "
                f"take {want} bytes"
            )
        return unpack(raw, n, layout)

    def replay_call(self, payload: str, n: int) -> ReplayCall:
        """The user's ``decompress(payload)``, or ``decompress(payload, n)`` with
        ``pass_n`` (the step that meets the damage)."""
        args = f"{payload}, {n}" if self.pass_n else payload
        return ReplayCall(self._decompress, args, role="decompress")


class CodebookCodec:
    """A :class:`~pytest_ratefloor.codes.Codebook` used as a codec.

    Encoding and decoding go through the codebook's ``encode``/``decode``
    (bitarray's C prefix-code encoder and decode tree); the rate is the exact
    bit length. ``symbols`` lists the codebook's table so edge cases stay
    inside it.
    """

    def __init__(self, codebook: Any) -> None:
        self.codebook = codebook
        self.name = _check_name(getattr(codebook, "name", None) or "codebook")
        self.version: str | None = getattr(codebook, "version", None)
        self.symbols: list[int] | None = [int(s) for s in codebook.sample_symbols()]

    def __repr__(self) -> str:
        return f"CodebookCodec(name={self.name!r}, symbols={len(self.codebook)})"

    @property
    def layout(self) -> None:
        """``None``: the codebook gets the symbols themselves."""
        return None

    def encode(self, symbols: np.ndarray) -> Encoded:
        """Encode with the codebook; exact bits."""
        out = self.codebook.encode(symbols)
        if not isinstance(out, bitarray):
            raise CodecContractError(f"codebook encoder returned {_type_name(out)}, not bitarray")
        return Encoded(payload=out, bits=len(out))

    def decode(self, encoded: Encoded, n: int) -> np.ndarray:
        """Decode ``n`` symbols with the codebook's decode tree."""
        return symbols_from_decoder(self.codebook.decode(encoded.payload, n), n)

    def for_source(self, source: Source) -> CodebookCodec:
        """Nothing to resolve: the same codec."""
        return self

    def replay_call(self, payload: str, n: int) -> ReplayCall:
        """``codebook.decode(payload, n)``."""
        return ReplayCall(self.codebook, f"{payload}, {n}", role="codebook", method="decode")


def _is_codebook(obj: object) -> bool:
    return hasattr(obj, "codewords") and hasattr(obj, "encode") and hasattr(obj, "decode")


def as_codec(obj: object) -> Codec:
    """Give ``obj`` the :class:`Codec` interface.

    Accepts:

    * a ``StreamCodec``/``ByteCodec``/``CodebookCodec``/``CommandCodec`` (returned
      as is);
    * a ``Codebook``, or a plain ``{symbol: codeword}`` mapping (made into a
      ``Codebook``);
    * an ``(encode, decode)`` pair of callables (a tuple or a list), wrapped
      as a ``StreamCodec`` named after the decoder's ``__qualname__``;
    * any object with ``encode(symbols)`` and ``decode(data, n)`` methods
      (wrapped as a ``StreamCodec`` named by its ``name`` attribute or its
      class).

    :raises TypeError: anything else, or a pair whose items are not both callable.
    """
    from pytest_ratefloor.command import CommandCodec  # built on this module

    if isinstance(obj, (StreamCodec, ByteCodec, CodebookCodec, CommandCodec)):
        return obj
    if _is_codebook(obj):
        return CodebookCodec(obj)
    if isinstance(obj, Mapping):
        from pytest_ratefloor.codes import Codebook

        return CodebookCodec(Codebook(obj))
    if isinstance(obj, (tuple, list)) and len(obj) == 2:
        pair_encode, pair_decode = obj
        if not (callable(pair_encode) and callable(pair_decode)):
            raise TypeError(
                f"codec pair must be two callables (encode, decode), got {validation.show(obj)}"
            )
        name = getattr(pair_decode, "__qualname__", None) or _type_name(pair_decode)
        return StreamCodec(pair_encode, pair_decode, name=name)
    encode = getattr(obj, "encode", None)
    decode = getattr(obj, "decode", None)
    if callable(encode) and callable(decode) and not isinstance(obj, (str, bytes)):
        name = getattr(obj, "name", None)
        return StreamCodec(
            encode,
            decode,
            name=name if isinstance(name, str) and name else _type_name(obj),
            version=getattr(obj, "version", None)
            if isinstance(getattr(obj, "version", None), str)
            else None,
        )
    raise TypeError(
        f"cannot use {_type_name(obj)} as a codec; expected StreamCodec, ByteCodec, "
        "CommandCodec, Codebook, a {symbol: codeword} mapping, an (encode, decode) pair of "
        "callables, or an object with encode(symbols) and decode(data, n)"
    )
