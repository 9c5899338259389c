"""Sensor-fault flag codec: an adaptive binary range coder with Krichevsky–Trofimov counts.

Each flag (0 = sensor fine, 1 = fault) is coded with the sequential estimate
P(next = 0) = (c0 + 1/2) / (c0 + c1 + 1) from the flags seen so far (Krichevsky &
Trofimov, "The performance of universal encoding", IEEE Trans. Inf. Theory 27(2),
1981), so a batch costs close to the KT ideal code length
log2( Γ(n+1) Γ(1/2)² / (Γ(c0+1/2) Γ(c1+1/2)) ) with no table at all.

The coder is a byte-oriented range coder (G. N. N. Martin, "Range encoding: an
algorithm for removing redundancy from a digitised message", 1979): a 32-bit window
``low`` of the interval's lower end and its width ``range``, renormalised a byte at a
time whenever the width drops below 2**24. When adding to ``low`` overflows the
window, the carry is pushed into the bytes already written: a run of 0xFF bytes
turns into 0x00 bytes and the byte before the run goes up by one. The code value
stays below 1, so a carry never runs past the first byte.

Termination writes the shortest byte string whose value (read with zero bytes
after its end) lies in the final interval, then drops trailing zero bytes, since
the decoder reads missing bytes as zero.

Message layout: the LEB128 symbol count of ``kelpwick.frame``, then the range-coded bytes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kelpwick.frame import as_int_array, open_message, write_count

NAME = "kelpwick-faults-range"
VERSION = "1.0"
WINDOW = 1 << 32
TOP = 1 << 24  # renormalise when the range width drops below this


@dataclass
class CoderStats:
    """What one encoding did (for tests of the carry path)."""

    carries: int = 0  # carries pushed into bytes already written
    longest_carry_chain: int = 0  # most 0xFF bytes one carry turned into 0x00
    renormalisations: int = 0  # bytes shifted out of the window


def zero_split(width: int, c0: int, c1: int) -> int:
    """Width of the sub-interval for a 0 under the KT estimate, kept within 1..width-1."""
    split = width * (2 * c0 + 1) // (2 * (c0 + c1) + 2)
    return min(max(split, 1), width - 1)


def encode_bits(bits: np.ndarray) -> tuple[bytes, CoderStats]:
    """Range-code a 0/1 array with the adaptive KT model; return (payload bytes, stats)."""
    stats = CoderStats()
    out = bytearray()
    low = 0
    width = WINDOW
    c0 = c1 = 0
    shifted = 0
    for bit in bits.tolist():
        split = width * (2 * c0 + 1) // (2 * (c0 + c1) + 2)
        split = 1 if split < 1 else (width - 1 if split >= width else split)
        if bit:
            low += split
            width -= split
            c1 += 1
        else:
            width = split
            c0 += 1
        if low >= WINDOW:
            low -= WINDOW
            _carry(out, stats)
        while width < TOP:
            out.append(low >> 24)
            low = (low << 8) & (WINDOW - 1)
            width <<= 8
            shifted += 1
    stats.renormalisations = shifted
    # Termination: the value in [low, low + width) with the fewest significant bytes.
    for n_bytes in range(5):
        unit = 1 << (32 - 8 * n_bytes)
        value = -(-low // unit) * unit
        if value < low + width:
            break
    if value >= WINDOW:
        value -= WINDOW
        _carry(out, stats)
    out.extend(value.to_bytes(4, "big")[:n_bytes])
    return bytes(out.rstrip(b"\x00")), stats


def _carry(out: bytearray, stats: CoderStats) -> None:
    """Add one to the number written so far: trailing 0xFF bytes become 0x00."""
    i = len(out) - 1
    while i >= 0 and out[i] == 0xFF:
        out[i] = 0x00
        i -= 1
    if i < 0:  # the code value would reach 1: impossible while the interval stays in [0, 1)
        raise AssertionError(f"{NAME}: carry out of the first byte (coder bug)")
    out[i] += 1
    stats.carries += 1
    stats.longest_carry_chain = max(stats.longest_carry_chain, len(out) - 1 - i)


def decode_bits(payload: bytes, n: int) -> np.ndarray:
    """Decode ``n`` flags from range-coded ``payload`` (missing bytes read as zero)."""
    data = bytes(payload)
    size = len(data)
    code = int.from_bytes(data[:4].ljust(4, b"\x00"), "big")
    pos = 4
    width = WINDOW
    c0 = c1 = 0
    out = bytearray(n)
    for i in range(n):
        split = width * (2 * c0 + 1) // (2 * (c0 + c1) + 2)
        split = 1 if split < 1 else (width - 1 if split >= width else split)
        if code < split:
            width = split
            c0 += 1
        else:
            code -= split
            width -= split
            c1 += 1
            out[i] = 1
        while width < TOP:
            code = (code << 8) | (data[pos] if pos < size else 0)
            pos += 1
            width <<= 8
    if code >= width:
        raise ValueError(f"{NAME}: code value outside the final interval: corrupt message")
    if size > pos:
        raise ValueError(f"{NAME}: {size - pos} stray bytes after the last flag")
    return np.frombuffer(bytes(out), dtype=np.uint8).astype(np.int64)


def encode(symbols: np.ndarray) -> bytes:
    """Encode fault flags (0/1) into one message."""
    x = as_int_array(symbols, NAME)
    if x.size:
        bad = np.flatnonzero((x != 0) & (x != 1))
        if bad.size:
            i = int(bad[0])
            raise ValueError(f"{NAME}: fault flag must be 0 or 1, got {int(x[i])} at index {i}")
    payload, _ = encode_bits(x)
    return write_count(x.size) + payload


def decode(data: bytes, n: int) -> np.ndarray:
    """Decode ``n`` fault flags from a message written by :func:`encode`."""
    offset = open_message(data, n, NAME)
    return decode_bits(bytes(data)[offset:], n)
