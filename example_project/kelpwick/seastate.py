"""Sea-state class codec: a length-limited canonical Huffman code built per batch.

Message layout (after the LEB128 symbol count of ``kelpwick.frame``), MSB first:

- 4 bits   number of classes in the table minus one (at most 16 classes: 0..15);
- 3 bits   per class: its code length, 0 = class absent from this batch
           (the length cap of 7 is what lets each length fit in 3 bits);
- the codewords, then zero bits up to the byte boundary.

Code lengths come from the class counts of the batch itself, limited to
``MAX_LENGTH`` bits by the package-merge algorithm (Larmore & Hirschberg,
"A fast algorithm for optimal length-limited Huffman codes", J. ACM 37(3), 1990),
so they are optimal among prefix codes with that cap. Codewords are assigned
canonically as in DEFLATE (RFC 1951 §3.2.2): shorter codes first, equal lengths
in increasing class order, so only the lengths travel.
"""

from __future__ import annotations

import itertools

import numpy as np
from bitarray import bitarray, decodetree
from numpy.typing import ArrayLike

from kelpwick.frame import as_int_array, open_message, read_count, write_count

NAME = "kelpwick-seastate-huffman"
VERSION = "1.0"
MAX_CLASSES = 16
MAX_LENGTH = 7
_CLASS_FIELD = 4
_LENGTH_FIELD = 3

# Names of the classes a gauge reports (an invented scale, calmest first).
SEA_STATES = (
    "glassy",
    "rippled",
    "slight",
    "moderate",
    "choppy",
    "rough",
    "very rough",
    "heavy",
)
# Long-run class frequencies of the invented network, used as the reference source.
SEA_STATE_FREQUENCIES = (0.31, 0.27, 0.18, 0.11, 0.065, 0.035, 0.02, 0.01)


def limited_lengths(counts: ArrayLike, max_length: int = MAX_LENGTH) -> np.ndarray:
    """Optimal prefix-code lengths for ``counts`` with no length above ``max_length``.

    Package-merge: every used symbol is a coin of each denomination 2**-1..2**-max_length;
    the cheapest 2(m-1) items of the final merged list (m = used symbols) give each
    symbol's length as the number of items it appears in. Symbols with count 0 get
    length 0 (no codeword). A single used symbol gets length 1.
    """
    weights = np.asarray(counts)
    if weights.ndim != 1 or (weights.size and weights.dtype.kind not in "iu"):
        raise ValueError(
            f"counts must be a 1-D integer array, got shape {weights.shape} dtype {weights.dtype}"
        )
    if weights.size and int(weights.min()) < 0:
        raise ValueError(f"counts must be >= 0, got {int(weights.min())}")
    used = [int(s) for s in np.flatnonzero(weights)]
    lengths = np.zeros(weights.size, dtype=np.int64)
    if not used:
        return lengths
    if len(used) == 1:
        lengths[used[0]] = 1
        return lengths
    if len(used) > 1 << max_length:
        raise ValueError(
            f"max_length={max_length} cannot code {len(used)} symbols (at most {1 << max_length})"
        )
    # Items are (weight, symbols it covers); sorted() is stable, so ties are deterministic.
    leaves: list[tuple[int, tuple[int, ...]]] = sorted(
        ((int(weights[s]), (s,)) for s in used), key=lambda item: item[0]
    )
    current = list(leaves)
    for _ in range(max_length - 1):
        packages = [
            (current[i][0] + current[i + 1][0], current[i][1] + current[i + 1][1])
            for i in range(0, len(current) - 1, 2)
        ]
        current = sorted(leaves + packages, key=lambda item: item[0])
    for _, symbols in current[: 2 * len(used) - 2]:
        for s in symbols:
            lengths[s] += 1
    return lengths


def canonical_code(lengths: ArrayLike) -> dict[int, bitarray]:
    """Canonical codewords for per-class ``lengths`` (0 = no codeword), RFC 1951 §3.2.2."""
    lens = [int(v) for v in np.asarray(lengths).ravel()]
    if any(v < 0 for v in lens):
        raise ValueError(f"code lengths must be >= 0, got {lens}")
    code: dict[int, bitarray] = {}
    value = 0
    previous = 0
    for length, symbol in sorted((v, s) for s, v in enumerate(lens) if v > 0):
        value <<= length - previous
        if value >= 1 << length:
            raise ValueError(f"code lengths {lens} over-subscribe the code space (Kraft sum > 1)")
        code[symbol] = bitarray(format(value, f"0{length}b"))
        value += 1
        previous = length
    return code


def batch_table(symbols: np.ndarray) -> dict[int, bitarray]:
    """The code table the encoder ships for this batch (class -> codeword)."""
    x = _checked_classes(symbols)
    counts = np.bincount(x, minlength=int(x.max()) + 1) if x.size else np.zeros(0, np.int64)
    return canonical_code(limited_lengths(counts))


def encode(symbols: np.ndarray) -> bytes:
    """Encode sea-state classes (integers 0..15) into one message."""
    x = _checked_classes(symbols)
    head = write_count(x.size)
    if x.size == 0:
        return head
    counts = np.bincount(x)
    lengths = limited_lengths(counts)
    bits = bitarray()
    bits.extend(format(lengths.size - 1, f"0{_CLASS_FIELD}b"))
    for length in lengths:
        bits.extend(format(int(length), f"0{_LENGTH_FIELD}b"))
    bits.encode(canonical_code(lengths), x.tolist())
    return head + bits.tobytes()


def decode(data: bytes, n: int) -> np.ndarray:
    """Decode ``n`` sea-state classes from a message written by :func:`encode`."""
    offset = open_message(data, n, NAME)
    if n == 0:
        if len(data) != offset:
            raise ValueError(f"{NAME}: {len(data) - offset} stray bytes after an empty batch")
        return np.zeros(0, dtype=np.int64)
    bits = bitarray()
    bits.frombytes(bytes(data[offset:]))
    lengths = read_lengths(bits)
    table_end = _CLASS_FIELD + _LENGTH_FIELD * lengths.size
    _check_complete(lengths)
    code = canonical_code(lengths)
    body = bits[table_end:]
    try:
        out = np.fromiter(
            itertools.islice(body.decode(decodetree(code)), n), dtype=np.int64, count=n
        )
    except ValueError as exc:  # undecodable bits, or fewer than n codewords in the message
        raise ValueError(f"{NAME}: corrupt or truncated message body: {exc}") from None
    return out


def read_lengths(bits: bitarray) -> np.ndarray:
    """Read the code-length table at the start of a message body."""
    if len(bits) < _CLASS_FIELD:
        raise ValueError(f"{NAME}: message truncated inside the class-count field")
    classes = int(bits[:_CLASS_FIELD].to01(), 2) + 1
    end = _CLASS_FIELD + _LENGTH_FIELD * classes
    if len(bits) < end:
        raise ValueError(f"{NAME}: message truncated inside the code-length table")
    fields = bits[_CLASS_FIELD:end].to01()
    return np.array(
        [int(fields[i : i + _LENGTH_FIELD], 2) for i in range(0, len(fields), _LENGTH_FIELD)],
        dtype=np.int64,
    )


def shipped_table(data: bytes) -> dict[int, bitarray]:
    """The code table carried by an encoded message (what actually went on air)."""
    count, offset = read_count(bytes(data))
    if count == 0:
        return {}
    bits = bitarray()
    bits.frombytes(bytes(data[offset:]))
    lengths = read_lengths(bits)
    _check_complete(lengths)
    return canonical_code(lengths)


def _check_complete(lengths: np.ndarray) -> None:
    used = lengths[lengths > 0]
    kraft = sum(2 ** (MAX_LENGTH - int(v)) for v in used)  # Kraft sum scaled by 2**MAX_LENGTH
    if used.size == 0:
        raise ValueError(f"{NAME}: code-length table is empty")
    if used.size == 1 and int(used[0]) != 1:
        raise ValueError(f"{NAME}: a one-class table must have length 1, got {int(used[0])}")
    if used.size > 1 and kraft != 1 << MAX_LENGTH:
        raise ValueError(
            f"{NAME}: code lengths {lengths.tolist()} are not a complete prefix code "
            f"(Kraft sum {kraft}/{1 << MAX_LENGTH})"
        )


def _checked_classes(symbols: np.ndarray) -> np.ndarray:
    x = as_int_array(symbols, NAME)
    if x.size:
        low, high = int(x.min()), int(x.max())
        if low < 0 or high >= MAX_CLASSES:
            bad = low if low < 0 else high
            raise ValueError(
                f"{NAME}: sea-state class {bad} outside 0..{MAX_CLASSES - 1} "
                f"(first at index {int(np.flatnonzero(x == bad)[0])})"
            )
    return x
