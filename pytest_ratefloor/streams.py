"""What passes between a codec and the checks: the coded stream and the decoded symbols.

:class:`Encoded` is one encoder call's result — the payload handed back to the
decoder and the exact bit count charged to the codec — with its
:class:`PayloadShape` (how a damaged copy of the stream is rebuilt in the
encoder's own shape). :func:`encoded_from_stream` accepts what an encoder may
return (bytes, bytearray, memoryview, bitarray or a ``(bytes, nbits)`` pair);
:func:`decoded_array` and :func:`symbols_from_decoder` accept what a decoder
may return (a flat sequence or array of exactly ``n`` integers) and name
anything else. A breach raises :class:`~pytest_ratefloor.errors.CodecContractError`.
The adapters of :mod:`pytest_ratefloor.codecs` build on these.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from collections.abc import Set as AbstractSet
from dataclasses import dataclass
from typing import Any, Literal, get_args

import numpy as np
from bitarray import bitarray

from pytest_ratefloor import validation
from pytest_ratefloor.errors import CodecContractError

__all__ = [
    "PAYLOAD_KINDS",
    "Encoded",
    "PayloadKind",
    "PayloadShape",
    "bytes_of",
    "decoded_array",
    "encoded_from_stream",
    "symbols_from_decoder",
    "type_name",
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
            f"payload of type {type_name(data)} has no stream shape; expected one of "
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


def type_name(value: object) -> str:
    """The type of ``value`` as messages name it (``bytes``, ``generator``, ``ndarray``)."""
    return type(value).__name__


def bytes_of(value: object) -> bytes | None:
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
    raw = bytes_of(value)
    if raw is not None:
        return Encoded(payload=raw, bits=8 * len(raw))
    if isinstance(value, tuple):
        if len(value) != 2:
            raise CodecContractError(
                f"encoder returned a tuple of {len(value)} items; expected {_ENCODER_SHAPES}"
            )
        data, nbits = value
        raw = bytes_of(data)
        if raw is None:
            raise CodecContractError(
                f"encoder returned ({type_name(data)}, nbits); the first item must be "
                "bytes, bytearray or memoryview"
            )
        if isinstance(nbits, (bool, np.bool_)) or not isinstance(nbits, (int, np.integer)):
            raise CodecContractError(
                f"encoder returned (bytes, {nbits!r}): nbits must be an int, "
                f"got {type_name(nbits)}"
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
    raise CodecContractError(f"encoder returned {type_name(value)}; expected {_ENCODER_SHAPES}")


def _expected(n: int) -> str:
    return f"expected a sequence or array of {n} integers (a list, tuple or 1-D numpy array)"


def not_a_sequence(value: object) -> str | None:
    """What a decoder's output is, when it is plainly no sequence of symbols."""
    kind = type_name(value)
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
    problem = not_a_sequence(value)
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
                f"decoder returned {type_name(value)} that is not a sequence of integers "
                f"({exc}); {_expected(n)}"
            ) from exc
    if arr.ndim == 0:
        raise CodecContractError(
            f"decoder returned {type_name(value)} {validation.show(value)}, a single value "
            f"and not a sequence; {_expected(n)}"
        )
    if arr.ndim != 1:
        raise CodecContractError(
            f"decoder returned {type_name(value)} of shape {arr.shape}; expected a flat "
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
                f"decoder returned object values ({type_name(value)} of dtype object holding "
                f"{type_name(item)} {validation.show(item)} at index {bad}); expected integers"
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
            f"decoder returned {kind} ({type_name(value)} of dtype {arr.dtype}, first "
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
