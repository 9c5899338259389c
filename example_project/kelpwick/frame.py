"""Message framing shared by the kelpwick codecs: the symbol count at the head of a message.

The count is an unsigned LEB128 varint (7 bits per byte, low group first, high
bit set on every byte but the last), so a short batch pays one or two bytes.
"""

from __future__ import annotations

import numpy as np

MAX_COUNT_BYTES = 10  # enough for any count below 2**70; anything longer is a corrupt message


def write_count(n: int) -> bytes:
    """Encode a symbol count as an unsigned LEB128 varint."""
    if n < 0:
        raise ValueError(f"symbol count must be >= 0, got n={n}")
    out = bytearray()
    while True:
        group = n & 0x7F
        n >>= 7
        if n:
            out.append(group | 0x80)
        else:
            out.append(group)
            return bytes(out)


def read_count(data: bytes) -> tuple[int, int]:
    """Decode the LEB128 count at the start of ``data``; return (count, bytes used)."""
    n = 0
    for i, byte in enumerate(data[:MAX_COUNT_BYTES]):
        n |= (byte & 0x7F) << (7 * i)
        if not byte & 0x80:
            return n, i + 1
    if len(data) < MAX_COUNT_BYTES:
        raise ValueError(f"message truncated inside the symbol count ({len(data)} bytes)")
    raise ValueError(f"symbol count longer than {MAX_COUNT_BYTES} bytes: corrupt message")


def open_message(data: bytes, n: int, codec: str) -> int:
    """Check the count heading ``data`` against the caller's ``n``; return the body offset."""
    if n < 0:
        raise ValueError(f"{codec}: n must be >= 0, got n={n}")
    count, offset = read_count(bytes(data))
    if count != n:
        raise ValueError(f"{codec}: message holds {count} symbols, caller asked for n={n}")
    return offset


def as_int_array(symbols: np.ndarray, codec: str) -> np.ndarray:
    """Return ``symbols`` as a 1-D int64 array (no copy if it already is one), or raise."""
    arr = np.asarray(symbols)
    if arr.ndim != 1:
        raise ValueError(f"{codec}: symbols must be a 1-D array, got shape {arr.shape}")
    if arr.size and arr.dtype.kind not in "iub":
        raise ValueError(f"{codec}: symbols must be integers, got dtype {arr.dtype}")
    if arr.dtype.kind == "u" and arr.size and arr.dtype.itemsize == 8 and int(arr.max()) >= 2**63:
        raise ValueError(f"{codec}: symbol {int(arr.max())} does not fit in int64")
    return arr.astype(np.int64, copy=False)
