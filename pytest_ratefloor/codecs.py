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

import sys
from collections.abc import Callable, Hashable, Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Protocol, TypeGuard, runtime_checkable

import numpy as np
from bitarray import bitarray

from pytest_ratefloor import validation
from pytest_ratefloor.errors import CodecContractError, LayoutError, PluginMemoryError
from pytest_ratefloor.layouts import AUTO, LAYOUTS, pack, packed_size, resolve_layout, unpack
from pytest_ratefloor.streams import (
    PAYLOAD_KINDS,
    Encoded,
    PayloadKind,
    PayloadShape,
    bytes_of,
    decoded_array,
    encoded_from_stream,
    symbols_from_decoder,
    type_name,
)

if TYPE_CHECKING:
    from pytest_ratefloor.command import CommandCodec
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
    "codec_identity",
    "decoded_array",
    "encoded_from_stream",
    "symbols_from_decoder",
]

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


def _converted(value: object, n: int) -> np.ndarray:
    """A decoder's output checked and made int64; the plugin's own allocation failing
    is a :class:`PluginMemoryError`, not the decoder's."""
    try:
        return symbols_from_decoder(value, n)
    except MemoryError as exc:
        raise PluginMemoryError(f"converting the decoder's {n} symbols to int64") from exc


def callable_name(fn: Callable[..., Any]) -> str:
    """The default name of a codec: its encoder's qualified name (``module.func``)."""
    module = getattr(fn, "__module__", None)
    qual = getattr(fn, "__qualname__", None) or getattr(fn, "__name__", None)
    if qual is None:
        return type_name(fn)
    return f"{module}.{qual}" if module and module != "builtins" else str(qual)


def check_name(name: object, parameter: str = "name") -> str:
    """A codec's name: non-empty text (``TypeError``/``ValueError`` naming it otherwise)."""
    return validation.text(name, f"codec {parameter}")


def check_version(version: object) -> str | None:
    """A codec's version: a string or ``None`` (``TypeError`` naming it otherwise)."""
    if version is not None and not isinstance(version, str):
        raise TypeError(validation.message("codec version", "a string or None", version))
    return version


class FunctionPair:
    """What a codec given as two functions holds: the user's ``encode`` and ``decode``
    (checked callable, named after the adapter in a message), its ``name`` (default: the
    encoder's qualified name) and ``version`` (text or ``None``). The base of
    :class:`StreamCodec` and :class:`~pytest_ratefloor.LossyCodec`."""

    def __init__(
        self,
        encode: Callable[[np.ndarray], Any],
        decode: Callable[[Any, int], Any],
        name: str | None = None,
        version: str | None = None,
    ) -> None:
        adapter = type(self).__name__
        validation.function(encode, f"{adapter} encode")
        validation.function(decode, f"{adapter} decode")
        self._encode = encode
        self._decode = decode
        self.name = check_name(name if name is not None else callable_name(encode))
        self.version = check_version(version)

    def __repr__(self) -> str:
        return f"{type(self).__name__}(name={self.name!r}, version={self.version!r})"


class StreamCodec(FunctionPair):
    """A codec given as two functions.

    ``encode(symbols: numpy.ndarray) -> bytes | bytearray | memoryview |
    bitarray | (bytes, nbits)``; ``decode(data, n) -> sequence of n ints``.
    The decoder receives the encoder's output back in the same shape (a
    ``(bytes, nbits)`` pair stays a pair; byte strings arrive as ``bytes``).
    The symbols passed to ``encode`` are an ``int64`` array that must be
    treated as read-only.
    """

    #: the alphabet the edge cases use: ``None``, the codec takes the source's
    symbols: list[int] | None = None

    @property
    def layout(self) -> None:
        """``None``: the encoder gets the symbols themselves."""
        return None

    def encode(self, symbols: np.ndarray) -> Encoded:
        """Call the user's encoder and validate what it returned."""
        return encoded_from_stream(self._encode(symbols))

    def decode(self, encoded: Encoded, n: int) -> np.ndarray:
        """Call the user's decoder and validate what it returned."""
        return _converted(self._decode(encoded.payload, n), n)

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
        self.name = check_name(name if name is not None else callable_name(compress))
        self.version = check_version(version)
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

    def pack_symbols(self, symbols: np.ndarray) -> bytes:
        """The symbols written in the layout (the bytes the compressor is given).

        :raises LayoutError: a symbol that does not fit the layout.
        :raises PluginMemoryError: no memory for the packed copy (the plugin's own
            allocation, not the codec's).
        """
        layout = resolve_layout(self.symbol)
        word = LAYOUTS[layout]
        try:
            arr = np.asarray(symbols)
            if (word.dtype is not None and not word.zigzag and arr.dtype == np.dtype(word.dtype)
                    and arr.ndim == 1):
                return arr.tobytes()  # already in the layout's words: one copy, no widening
            return pack(arr, layout, trusted=self._trusted)
        except MemoryError as exc:
            raise PluginMemoryError(
                f"packing {len(symbols)} symbols into layout {layout!r}") from exc

    def compress_packed(self, data: bytes) -> Encoded:
        """Compress packed symbols (:meth:`pack_symbols`) and charge ``8 · len`` bits."""
        out = self._compress(data)
        raw = bytes_of(out)
        if raw is None:
            raise CodecContractError(
                f"compressor returned {type_name(out)}; expected bytes, bytearray or memoryview"
            )
        return Encoded(payload=raw, bits=8 * len(raw))

    def encode(self, symbols: np.ndarray) -> Encoded:
        """Write the symbols in the layout, compress, and charge ``8 · len`` bits."""
        return self.compress_packed(self.pack_symbols(symbols))

    def decompress_packed(self, encoded: Encoded, n: int) -> bytes:
        """Decompress (told ``n`` with ``pass_n``): the packed bytes of ``n`` symbols,
        their length checked (compare with :meth:`pack_symbols`, or :meth:`unpack_symbols`)."""
        layout = resolve_layout(self.symbol)
        if self.pass_n:
            out = self._decompress(encoded.payload, n)
        else:
            out = self._decompress(encoded.payload)
        raw = bytes_of(out)
        if raw is None:
            raise CodecContractError(
                f"decompressor returned {type_name(out)}; expected bytes, bytearray or "
                "memoryview"
            )
        want = packed_size(n, layout)
        if len(raw) != want:
            raise CodecContractError(
                f"decompressor returned {len(raw)} bytes; {n} symbols in layout {layout!r} "
                f"take {want} bytes"
            )
        return raw

    def unpack_symbols(self, raw: bytes, n: int) -> np.ndarray:
        """``n`` symbols read back from packed bytes, as int64.

        :raises PluginMemoryError: no memory for the int64 copy (the plugin's own).
        """
        layout = resolve_layout(self.symbol)
        try:
            return unpack(raw, n, layout)
        except MemoryError as exc:
            raise PluginMemoryError(
                f"reading {n} decoded symbols of layout {layout!r} back as int64") from exc

    def decode(self, encoded: Encoded, n: int) -> np.ndarray:
        """Decompress (told ``n`` with ``pass_n``) and read back exactly ``n`` symbols."""
        return self.unpack_symbols(self.decompress_packed(encoded, n), n)

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
        self.name = check_name(getattr(codebook, "name", None) or "codebook")
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
            raise CodecContractError(f"codebook encoder returned {type_name(out)}, not bitarray")
        return Encoded(payload=out, bits=len(out))

    def decode(self, encoded: Encoded, n: int) -> np.ndarray:
        """Decode ``n`` symbols with the codebook's decode tree."""
        return _converted(self.codebook.decode(encoded.payload, n), n)

    def for_source(self, source: Source) -> CodebookCodec:
        """Nothing to resolve: the same codec."""
        return self

    def replay_call(self, payload: str, n: int) -> ReplayCall:
        """``codebook.decode(payload, n)``."""
        return ReplayCall(self.codebook, f"{payload}, {n}", role="codebook", method="decode")


def _is_codebook(obj: object) -> bool:
    return hasattr(obj, "codewords") and hasattr(obj, "encode") and hasattr(obj, "decode")


def _is_command_codec(obj: object) -> TypeGuard[CommandCodec]:
    """Whether ``obj`` is a ``CommandCodec``, without importing its module (and with it the
    subprocess machinery) where nothing has: then no such codec can exist."""
    module = sys.modules.get("pytest_ratefloor.command")
    return module is not None and isinstance(obj, module.CommandCodec)


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
    if isinstance(obj, (StreamCodec, ByteCodec, CodebookCodec)) or _is_command_codec(obj):
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
        name = getattr(pair_decode, "__qualname__", None) or type_name(pair_decode)
        return StreamCodec(pair_encode, pair_decode, name=name)
    encode = getattr(obj, "encode", None)
    decode = getattr(obj, "decode", None)
    if callable(encode) and callable(decode) and not isinstance(obj, (str, bytes)):
        name = getattr(obj, "name", None)
        return StreamCodec(
            encode,
            decode,
            name=name if isinstance(name, str) and name else type_name(obj),
            version=getattr(obj, "version", None)
            if isinstance(getattr(obj, "version", None), str)
            else None,
        )
    raise TypeError(
        f"cannot use {type_name(obj)} as a codec; expected StreamCodec, ByteCodec, "
        "CommandCodec, Codebook, a {symbol: codeword} mapping, an (encode, decode) pair of "
        "callables, or an object with encode(symbols) and decode(data, n)"
    )


def _parts(fn: object) -> tuple[object, ...]:
    """The objects a callable stands for: a bound method is its object and function
    (a fresh bound-method object is made at each attribute access)."""
    owner, func = getattr(fn, "__self__", None), getattr(fn, "__func__", None)
    if owner is not None and func is not None:
        return (owner, func)
    return (fn,)


def codec_identity(obj: object) -> tuple[tuple[Hashable, ...], tuple[object, ...]] | None:
    """What makes ``obj`` (a codec as a user passes it) the same codec as before.

    Returns ``(key, refs)``: ``key`` holds the ids of the user's own objects
    behind the codec (its functions, compressor, codebook, command object) and
    the settings that change what it does (layout option, ``pass_n``, the
    command lines); ``refs`` are those objects, to be kept alive while the key
    is used so that no other object can take their ids. Two codec objects
    built from the same functions and settings get the same key. ``None`` for
    a plain mapping used as a code table (a dict can change in place) and for
    anything :func:`as_codec` would refuse. The name and version are not in
    the key: the checks add those of the bound codec.
    """
    parts: tuple[object, ...]
    settings: tuple[Hashable, ...] = ()
    if isinstance(obj, StreamCodec):
        parts = (*_parts(obj._encode), *_parts(obj._decode))
    elif isinstance(obj, ByteCodec):
        parts = (*_parts(obj._compress), *_parts(obj._decompress))
        settings = ("bytes", obj.symbol, obj.pass_n)
    elif isinstance(obj, CodebookCodec):
        parts = (obj.codebook,)
    elif _is_command_codec(obj):
        parts = (obj,)
        settings = ("command", obj.encode_cmd, obj.decode_cmd, obj.symbol)
    elif _is_codebook(obj):
        parts = (obj,)
    elif isinstance(obj, Mapping):
        return None
    elif isinstance(obj, (tuple, list)) and len(obj) == 2 and all(callable(f) for f in obj):
        parts = (*_parts(obj[0]), *_parts(obj[1]))
    elif callable(getattr(obj, "encode", None)) and callable(getattr(obj, "decode", None)):
        parts = (obj, *_parts(obj.encode), *_parts(obj.decode))  # type: ignore[attr-defined]
    else:
        return None
    key = (type(obj).__qualname__, *(("id", id(p)) for p in parts), *settings)
    return key, parts
