"""The damage schedule: what is done to a stream, and in which order.

A :class:`Corruption` is one deterministic piece of damage to a stream of
bytes; :func:`corruption_schedule` draws a whole run of them from the raw
64-bit words of ``numpy.random.PCG64(seed)`` through the project's own
mapping, so the same arguments give the same list on every platform and
numpy release. The damage kinds are listed once, in :data:`CORRUPTION_KINDS`.
"""

from __future__ import annotations

import itertools
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass
from typing import Literal, get_args

import numpy as np

from pytest_ratefloor import validation

__all__ = ["CORRUPTION_KINDS", "Corruption", "CorruptionKind", "corruption_schedule"]

#: The kinds of damage, in the order the strategies shrink through them.
CorruptionKind = Literal["truncate", "flip", "burst", "append", "random"]
CORRUPTION_KINDS: tuple[CorruptionKind, ...] = get_args(CorruptionKind)


def _count(value: object, name: str, minimum: int = 0) -> int:
    """A length, position or key: an integer ``>= minimum``.

    A plain ``int`` in range is returned at once (a schedule builds thousands
    of these); anything else goes to :func:`pytest_ratefloor.validation.integer`,
    which accepts numpy integers and words the error.
    """
    if type(value) is int and value >= minimum:
        return value
    return validation.integer(value, name, minimum=minimum)


def _garbage(key: int, count: int) -> bytes:
    """``count`` pseudo-random bytes from ``PCG64(key)`` raw words, little-endian."""
    if count == 0:
        return b""
    words = np.random.PCG64(key).random_raw((count + 7) // 8)
    return words.astype("<u8").tobytes()[:count]


@dataclass(frozen=True)
class Corruption:
    """One deterministic piece of damage to a stream of ``stream_length`` bytes.

    Fields:

    * ``kind``: ``"truncate"`` (keep the first ``offset`` bytes), ``"flip"``
      (one bit inverted), ``"burst"`` (several bits inverted inside a short
      span, first and last always), ``"append"`` (``length`` garbage bytes
      after the end), ``"random"`` (every byte replaced by garbage).
    * ``offset``: first byte touched (for ``truncate`` the number of bytes kept).
    * ``length``: bytes cut (truncate), spanned (flip/burst), appended (append)
      or replaced (random).
    * ``bits``: stream bit positions inverted; bit ``i`` is bit ``i % 8`` of
      byte ``i // 8`` counted from the most significant (mask ``0x80 >> i % 8``),
      the numbering of a big-endian ``bitarray``.
    * ``key``: seed of the ``PCG64`` generator whose raw words (little-endian)
      are the garbage bytes of ``append``/``random``.

    Build them with :meth:`truncate`, :meth:`flip`, :meth:`burst`,
    :meth:`append` and :meth:`randomize`, or get a whole schedule from
    :func:`corruption_schedule`.
    """

    kind: CorruptionKind
    stream_length: int
    offset: int
    length: int
    bits: tuple[int, ...] = ()
    key: int = 0

    def __post_init__(self) -> None:
        if self.kind not in CORRUPTION_KINDS:
            validation.choice(self.kind, "kind", CORRUPTION_KINDS)  # raises, naming the kinds
        _count(self.stream_length, "stream_length")
        _count(self.offset, "offset")
        _count(self.length, "length")
        _count(self.key, "key")
        for bit in self.bits:
            _count(bit, "bit position")
            if bit >= 8 * self.stream_length:
                raise ValueError(
                    f"bit position must be below {8 * self.stream_length} (8 * stream_length), "
                    f"got {bit}"
                )
        if list(self.bits) != sorted(set(self.bits)):
            raise ValueError(f"bits must be strictly increasing, got {self.bits!r}")

    # -- constructors -----------------------------------------------------

    @classmethod
    def truncate(cls, stream_length: int, keep: int) -> Corruption:
        """Keep the first ``keep`` bytes (0 <= keep < stream_length)."""
        stream_length = _count(stream_length, "stream_length", 1)
        keep = _count(keep, "keep")
        if keep >= stream_length:
            raise ValueError(
                f"keep must be below stream_length={stream_length} to cut anything, got {keep}"
            )
        return cls("truncate", stream_length, keep, stream_length - keep)

    @classmethod
    def flip(cls, stream_length: int, bit: int) -> Corruption:
        """Invert stream bit ``bit`` (see the class docstring for the numbering)."""
        stream_length = _count(stream_length, "stream_length", 1)
        bit = _count(bit, "bit")
        if bit >= 8 * stream_length:
            raise ValueError(
                f"bit must be below {8 * stream_length} (8 * stream_length), got {bit}"
            )
        return cls("flip", stream_length, bit // 8, 1, (bit,))

    @classmethod
    def burst(cls, stream_length: int, bits: Iterable[int]) -> Corruption:
        """Invert two or more stream bits (a burst: confined to a short span)."""
        stream_length = _count(stream_length, "stream_length", 1)
        positions = tuple(sorted({_count(b, "bit") for b in bits}))
        if len(positions) < 2:
            raise ValueError(
                f"bits of a burst must be at least 2 distinct bits, got {positions!r}"
            )
        first, last = positions[0], positions[-1]
        return cls("burst", stream_length, first // 8, last // 8 - first // 8 + 1, positions)

    @classmethod
    def append(cls, stream_length: int, count: int, key: int) -> Corruption:
        """Append ``count`` garbage bytes drawn from ``PCG64(key)``."""
        stream_length = _count(stream_length, "stream_length")
        count = _count(count, "count", 1)
        return cls("append", stream_length, stream_length, count, (), _count(key, "key"))

    @classmethod
    def randomize(cls, stream_length: int, key: int) -> Corruption:
        """Replace every byte with garbage drawn from ``PCG64(key)`` (same length)."""
        stream_length = _count(stream_length, "stream_length", 1)
        return cls("random", stream_length, 0, stream_length, (), _count(key, "key"))

    # -- use ----------------------------------------------------------------

    @property
    def damaged_length(self) -> int:
        """Length in bytes of the damaged stream."""
        if self.kind == "truncate":
            return self.offset
        if self.kind == "append":
            return self.stream_length + self.length
        return self.stream_length

    def apply(self, data: bytes) -> bytes:
        """Return a damaged copy of ``data`` (which must be ``stream_length`` bytes)."""
        data = bytes(data)
        if len(data) != self.stream_length:
            raise ValueError(
                f"this corruption was made for a stream of {self.stream_length} bytes; "
                f"data has {len(data)}"
            )
        if self.kind == "truncate":
            return data[: self.offset]
        if self.kind == "append":
            return data + _garbage(self.key, self.length)
        if self.kind == "random":
            return _garbage(self.key, self.stream_length)
        damaged = bytearray(data)
        for bit in self.bits:
            damaged[bit // 8] ^= 0x80 >> (bit % 8)
        return bytes(damaged)

    def describe(self) -> str:
        """One readable line naming the damage exactly."""
        n = self.stream_length
        if self.kind == "truncate":
            if self.offset == 0:
                return f"truncate: all {n} bytes cut (empty stream)"
            return f"truncate: kept the first {self.offset} of {n} bytes ({self.length} cut)"
        if self.kind == "flip":
            (bit,) = self.bits
            return (
                f"flip: stream bit {bit} inverted "
                f"(byte {bit // 8} of {n}, mask 0x{0x80 >> (bit % 8):02x})"
            )
        if self.kind == "burst":
            first, last = self.bits[0], self.bits[-1]
            where = (
                f"byte {self.offset}"
                if self.length == 1
                else f"bytes {self.offset}..{self.offset + self.length - 1}"
            )
            listed = ", ".join(str(b) for b in self.bits)
            return (
                f"burst: {len(self.bits)} bits inverted within stream bits {first}..{last} "
                f"({where} of {n}): bits {listed}"
            )
        if self.kind == "append":
            return (
                f"append: {self.length} garbage bytes after the {n}-byte stream "
                f"(PCG64 key 0x{self.key:016x})"
            )
        return f"random: all {n} bytes replaced by garbage (PCG64 key 0x{self.key:016x})"


class _Words:
    """Raw 64-bit words of ``PCG64(seed)``, drawn in blocks (numpy promises this
    stream is stable across releases; the mapping to corruptions is our own)."""

    def __init__(self, seed: int) -> None:
        self._bitgen = np.random.PCG64(seed)
        self._block: list[int] = []

    def next(self) -> int:
        if not self._block:
            self._block = [int(w) for w in self._bitgen.random_raw(64)][::-1]
        return self._block.pop()

    def below(self, m: int) -> int:
        """A number in ``[0, m)``: multiply-shift of one word (bias below 2**-40 for m < 2**24)."""
        return (self.next() * m) >> 64


def _region_byte(words: _Words, stream_length: int) -> int:
    """A byte position: half the time anywhere, a quarter in the first 16 bytes
    (headers, tables), a quarter in the last 16 (trailers, checksums, final flush)."""
    region = words.below(4)
    span = min(stream_length, 16)
    if region == 2:
        return words.below(span)
    if region == 3:
        return stream_length - 1 - words.below(span)
    return words.below(stream_length)


def _draw_truncate(words: _Words, stream_length: int) -> Corruption:
    return Corruption.truncate(stream_length, _region_byte(words, stream_length))


def _draw_flip(words: _Words, stream_length: int) -> Corruption:
    byte = _region_byte(words, stream_length)
    return Corruption.flip(stream_length, 8 * byte + words.below(8))


def _draw_burst(words: _Words, stream_length: int) -> Corruption:
    total = 8 * stream_length
    width = min(2 + words.below(31), total)  # 2..32 bits
    start = words.below(total - width + 1)
    inner = words.next()
    bits = [start, start + width - 1]
    bits += [start + j for j in range(1, width - 1) if (inner >> (j - 1)) & 1]
    return Corruption.burst(stream_length, bits)


def _draw_append(words: _Words, stream_length: int) -> Corruption:
    count = 1 + words.below(64)
    return Corruption.append(stream_length, count, words.next())


def _draw_random(words: _Words, stream_length: int) -> Corruption:
    return Corruption.randomize(stream_length, words.next())


def _cut_all(words: _Words, stream_length: int) -> Corruption:
    return Corruption.truncate(stream_length, 0)


def _cut_last_byte(words: _Words, stream_length: int) -> Corruption:
    return Corruption.truncate(stream_length, stream_length - 1)


_Draw = Callable[[_Words, int], Corruption]
# Every kind appears within the first trials, so even a short run covers them.
_OPENING: tuple[_Draw, ...] = (
    _cut_all,
    _cut_last_byte,
    _draw_flip,
    _draw_append,
    _draw_random,
    _draw_burst,
)
_ROTATION: tuple[_Draw, ...] = (
    _draw_truncate,
    _draw_flip,
    _draw_burst,
    _draw_truncate,
    _draw_flip,
    _draw_append,
    _draw_truncate,
    _draw_flip,
    _draw_burst,
    _draw_random,
)


def corruption_schedule(stream_length: int, trials: int, seed: int = 0) -> list[Corruption]:
    """The deterministic list of corruptions for a stream of ``stream_length`` bytes.

    The same arguments give the same list on every platform and numpy release:
    positions, widths and garbage keys come from the raw 64-bit words of
    ``numpy.random.PCG64(seed)`` through the project's own mapping. The list
    opens with the edge cases (all bytes cut, one byte short, a flip, appended
    garbage, random bytes, a burst), then cycles truncations (30 %), single
    flips (30 %), bursts (20 %), appends (10 %) and random replacements (10 %).
    A duplicate is redrawn (up to 8 times) and then dropped, so a tiny stream
    may get fewer than ``trials`` entries; an empty stream only gets appends.
    """
    stream_length = _count(stream_length, "stream_length")
    trials = validation.integer(trials, "trials", minimum=1)
    seed = validation.seed(seed)
    words = _Words(seed)
    draws: Iterator[_Draw]
    if stream_length == 0:
        draws = itertools.repeat(_draw_append)
    else:
        draws = itertools.chain(_OPENING, itertools.cycle(_ROTATION))
    schedule: list[Corruption] = []
    seen: set[Corruption] = set()
    for turn, draw in enumerate(draws):
        if len(schedule) >= trials or turn >= 2 * trials + 16:
            break
        for _ in range(8):  # redraw the same kind on a duplicate, so the mix holds
            corruption = draw(words, stream_length)
            if corruption not in seen:
                seen.add(corruption)
                schedule.append(corruption)
                break
    return schedule
