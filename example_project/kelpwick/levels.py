"""Water-level change codec: zig-zag mapping + a Rice code with a per-batch parameter.

A level change ``x`` (signed millimetres) is folded onto ``z = 2x`` for x >= 0 and
``z = -2x - 1`` for x < 0 (zig-zag), then Rice-coded with parameter k: quotient
``z >> k`` in unary (ones closed by a zero), remainder in k plain bits.

Message layout (after the LEB128 symbol count of ``kelpwick.frame``):

- 1 byte   k (0..63);
- section 1: the unary quotients of all symbols, in order;
- section 2: the k-bit remainders of all symbols, in order, MSB first;
- section 3: for each symbol whose quotient reached ``ESCAPE_QUOTIENT`` (written in
  section 1 as that many ones and a zero), its true quotient as 64 plain bits;
- zero bits up to the byte boundary.

Putting the unary and fixed-width parts in separate sections costs nothing (every
symbol still takes exactly its Rice codeword's bits) and lets numpy encode and
decode whole batches without a per-symbol Python loop.

Choosing k: the zig-zagged values of a two-sided geometric source are close to
geometric, P(z) ≈ (1-q) q**z, and the mean z̄ = q/(1-q) estimates q. Gallager and
van Voorhis ("Optimal source codes for geometrically distributed integer
alphabets", IEEE Trans. Inf. Theory 21(2), 1975) show the best Golomb modulus is
the m with q**m + q**(m+1) <= 1 < q**(m-1) + q**m, i.e.
m = ceil(log(1+q) / -log q). A Rice code needs m = 2**k, so k is whichever of the
two powers of two around m has the smaller expected length
k + 1 + q**(2**k) / (1 - q**(2**k)) under that geometric model.

The environment variable ``KELPWICK_RICE_RULE`` selects the rule: ``gvv`` (default,
the rule above) or ``naive`` (2**k nearest the mean in log scale, k = round(log2 z̄),
which is too large by up to one because the best m is about ln 2 · z̄). The naive
rule is a deliberate regression switch for demonstrating the rate ledger.
"""

from __future__ import annotations

import math
import os

import numpy as np

from kelpwick.frame import as_int_array, open_message, write_count

NAME = "kelpwick-levels-rice"
VERSION = "1.0"
RULE_VARIABLE = "KELPWICK_RICE_RULE"
RULES = ("gvv", "naive")
ESCAPE_QUOTIENT = 32
MAX_K = 63
_U64 = np.uint64


def zigzag(x: np.ndarray) -> np.ndarray:
    """Fold int64 values onto uint64: 0, -1, 1, -2, 2, ... -> 0, 1, 2, 3, 4, ..."""
    x = np.asarray(x, dtype=np.int64)
    folded: np.ndarray = (x.view(np.uint64) << _U64(1)) ^ (x >> np.int64(63)).view(np.uint64)
    return folded


def unzigzag(z: np.ndarray) -> np.ndarray:
    """Inverse of :func:`zigzag` (uint64 -> int64)."""
    z = np.asarray(z, dtype=np.uint64)
    unfolded: np.ndarray = (z >> _U64(1)).view(np.int64) ^ -((z & _U64(1)).view(np.int64))
    return unfolded


def gvv_parameter(mean: float) -> int:
    """Rice parameter k for zig-zag values of mean ``mean`` (Gallager–van Voorhis rule)."""
    if not mean >= 0 or math.isinf(mean):
        raise ValueError(f"mean must be finite and >= 0, got mean={mean}")
    if mean == 0:
        return 0
    q = mean / (1.0 + mean)
    log_q = -math.log1p(1.0 / mean)  # log q, accurate when q is close to 1
    m = max(1, math.ceil(math.log1p(q) / -log_q))
    low = m.bit_length() - 1
    candidates = {low, low if m == 1 << low else low + 1}

    def expected_length(k: int) -> float:
        tail = math.exp(min(0.0, (2.0**k) * log_q))  # q ** (2**k)
        return k + 1 + tail / -math.expm1((2.0**k) * log_q)

    return min(min(candidates, key=lambda k: (expected_length(k), k)), MAX_K)


def naive_parameter(mean: float) -> int:
    """The regression rule: 2**k nearest the mean, k = round(log2 mean)."""
    if not mean >= 0 or math.isinf(mean):
        raise ValueError(f"mean must be finite and >= 0, got mean={mean}")
    if mean <= 0.5:
        return 0
    return min(max(0, round(math.log2(mean))), MAX_K)


def rice_rule() -> str:
    """The Rice-parameter rule selected by ``KELPWICK_RICE_RULE`` (default ``gvv``)."""
    rule = os.environ.get(RULE_VARIABLE, "gvv").strip().lower() or "gvv"
    if rule not in RULES:
        raise ValueError(f"{RULE_VARIABLE}={rule!r} is not a known rule; use one of {RULES}")
    return rule


def choose_parameter(z: np.ndarray) -> int:
    """Rice parameter for a batch of zig-zagged values, by the selected rule."""
    mean = float(np.mean(z.astype(np.float64))) if z.size else 0.0
    return naive_parameter(mean) if rice_rule() == "naive" else gvv_parameter(mean)


def encode(symbols: np.ndarray, k: int | None = None) -> bytes:
    """Encode signed level changes; ``k`` overrides the per-batch parameter choice."""
    x = as_int_array(symbols, NAME)
    head = write_count(x.size)
    if x.size == 0:
        return head
    z = zigzag(x)
    if k is None:
        k = choose_parameter(z)
    if not 0 <= k <= MAX_K:
        raise ValueError(f"{NAME}: Rice parameter k must be in 0..{MAX_K}, got k={k}")
    quotient = z >> _U64(k)
    escaped = quotient >= _U64(ESCAPE_QUOTIENT)
    unary = np.where(escaped, ESCAPE_QUOTIENT, quotient).astype(np.int64)

    # Section 1: all ones except one closing zero per symbol.
    closers = np.cumsum(unary + 1) - 1
    section1 = np.ones(int(closers[-1]) + 1, dtype=np.uint8)
    section1[closers] = 0
    # Section 2: k-bit remainders, MSB first.
    section2 = np.empty((x.size, k), dtype=np.uint8)
    for column, shift in enumerate(range(k - 1, -1, -1)):
        section2[:, column] = (z >> _U64(shift)) & _U64(1)
    # Section 3: 64-bit quotients of escaped symbols.
    section3 = np.unpackbits(quotient[escaped].astype(">u8").view(np.uint8))
    bits = np.concatenate([section1, section2.ravel(), section3])
    return head + bytes([k]) + np.packbits(bits).tobytes()


def decode(data: bytes, n: int) -> np.ndarray:
    """Decode ``n`` level changes from a message written by :func:`encode`."""
    offset = open_message(data, n, NAME)
    raw = bytes(data)
    if n == 0:
        if len(raw) != offset:
            raise ValueError(f"{NAME}: {len(raw) - offset} stray bytes after an empty batch")
        return np.zeros(0, dtype=np.int64)
    if len(raw) <= offset:
        raise ValueError(f"{NAME}: message truncated before the Rice parameter byte")
    k = raw[offset]
    if k > MAX_K:
        raise ValueError(f"{NAME}: Rice parameter byte {k} exceeds {MAX_K}: corrupt message")
    bits = np.unpackbits(np.frombuffer(raw, dtype=np.uint8, offset=offset + 1))

    closers = np.flatnonzero(bits == 0)[:n]
    if closers.size < n:
        raise ValueError(f"{NAME}: message truncated: {closers.size} of {n} unary codes found")
    unary = np.diff(closers, prepend=-1) - 1
    if int(unary.max()) > ESCAPE_QUOTIENT:
        raise ValueError(f"{NAME}: unary run longer than the escape length: corrupt message")
    pos = int(closers[-1]) + 1

    remainder_bits = bits[pos : pos + n * k]
    if remainder_bits.size < n * k:
        raise ValueError(f"{NAME}: message truncated inside the remainders")
    pos += n * k
    remainder = np.zeros(n, dtype=np.uint64)
    for column in remainder_bits.reshape(n, k).T if k else ():
        remainder = (remainder << _U64(1)) | column.astype(np.uint64)

    quotient = unary.astype(np.uint64)
    escaped = unary == ESCAPE_QUOTIENT
    n_escaped = int(escaped.sum())
    if n_escaped:
        escape_bits = bits[pos : pos + 64 * n_escaped]
        if escape_bits.size < 64 * n_escaped:
            raise ValueError(f"{NAME}: message truncated inside the escaped quotients")
        pos += 64 * n_escaped
        big = np.packbits(escape_bits).view(">u8").astype(np.uint64)
        if bool(np.any(big < _U64(ESCAPE_QUOTIENT))) or (k and bool(np.any(big >> _U64(64 - k)))):
            raise ValueError(f"{NAME}: escaped quotient out of range for k={k}: corrupt message")
        quotient[escaped] = big
    padding = bits[pos:]
    if padding.size >= 8 or padding.any():
        raise ValueError(f"{NAME}: {padding.size} unexpected bits after the last symbol")
    return unzigzag((quotient << _U64(k)) | remainder)
