"""Real lossy coders for the lossy-check tests: quantizers and a static rANS entropy coder.

Nothing here is part of the plugin: these are codecs *under test*, built the
way a team would build them, so that the checks can be held to published
figures (Gish & Pierce 1968 for an entropy-coded uniform quantizer).

* :class:`StaticRans` — range asymmetric numeral systems (Duda 2009, from
  memory; the byte-wise renormalisation of the common 32-bit form, here with a
  64-bit state) with a fixed frequency table known to both ends;
* :func:`gaussian_index_model` — the probabilities of the cells of a uniform
  quantizer of step Δ on N(0, σ²) (scipy's normal CDF);
* codec factories: the entropy-coded uniform quantizer, a fixed-rate
  quantizer, "send nothing", the one-bit sign quantizer, and a cheat whose
  decoder reads the sample from a closure.
"""

from __future__ import annotations

import math

import numpy as np
from bitarray import bitarray
from scipy.stats import norm

from pytest_ratefloor.lossy import LossyCodec

_SCALE_BITS = 18
_TOTAL = 1 << _SCALE_BITS
_LOW = 1 << 31  # state lower bound; the state lives in [_LOW, 256·_LOW)
_STATE_BYTES = 5


def quantized_frequencies(probs: np.ndarray, total: int = _TOTAL) -> np.ndarray:
    """Integer frequencies summing to ``total``, each >= 1, close to ``probs · total``."""
    freq = np.maximum(1, np.round(np.asarray(probs, dtype=np.float64) * total)).astype(np.int64)
    freq[int(np.argmax(freq))] += total - int(freq.sum())
    if freq.min() < 1:
        raise ValueError("too many symbols for the frequency total")
    return freq


class StaticRans:
    """rANS over symbols ``0..k-1`` with a fixed frequency table (sum ``2**18``)."""

    def __init__(self, freq: np.ndarray) -> None:
        freq = np.asarray(freq, dtype=np.int64)
        if int(freq.sum()) != _TOTAL or int(freq.min()) < 1:
            raise ValueError("frequencies must be >= 1 and sum to 2**18")
        self.freq = [int(f) for f in freq]
        cum = np.concatenate(([0], np.cumsum(freq)))
        self.cum = [int(c) for c in cum[:-1]]
        self.slot_symbol = np.repeat(np.arange(len(freq)), freq).tolist()

    def ideal_bits(self, symbols: np.ndarray) -> float:
        """Σ −log2(freq/total): the length an ideal coder of this table would reach."""
        freq = np.asarray(self.freq, dtype=np.float64)
        return float(np.sum(_SCALE_BITS - np.log2(freq[symbols])))

    def encode(self, symbols: np.ndarray) -> bytes:
        freq, cum = self.freq, self.cum
        x = _LOW
        out = bytearray()
        shift = (_LOW >> _SCALE_BITS) << 8
        for s in reversed(symbols.tolist()):
            f = freq[s]
            x_max = shift * f
            while x >= x_max:
                out.append(x & 0xFF)
                x >>= 8
            q, r = divmod(x, f)
            x = (q << _SCALE_BITS) + r + cum[s]
        for _ in range(_STATE_BYTES):
            out.append(x & 0xFF)
            x >>= 8
        out.reverse()
        return bytes(out)

    def decode(self, data: bytes, n: int) -> np.ndarray:
        freq, cum, lookup = self.freq, self.cum, self.slot_symbol
        x = int.from_bytes(data[:_STATE_BYTES], "big")
        pos = _STATE_BYTES
        mask = _TOTAL - 1
        out = [0] * n
        size = len(data)
        for i in range(n):
            slot = x & mask
            s = lookup[slot]
            out[i] = s
            x = freq[s] * (x >> _SCALE_BITS) + slot - cum[s]
            while x < _LOW and pos < size:
                x = (x << 8) | data[pos]
                pos += 1
        return np.asarray(out, dtype=np.int64)


def gaussian_index_model(step: float, sigma: float, span: float = 8.0) -> tuple[int, np.ndarray]:
    """``(K, probs)``: cells ``-K..K`` of step ``step`` on N(0, σ²), the end cells open."""
    k = math.ceil(span * sigma / step)
    edges = (np.arange(-k, k + 2) - 0.5) * step / sigma
    edges[0], edges[-1] = -np.inf, np.inf
    return k, np.diff(norm.cdf(edges))


def entropy_coded_quantizer(step: float, sigma: float = 1.0) -> LossyCodec:
    """Uniform mid-tread quantizer of step ``step`` followed by static rANS of its indices."""
    k, probs = gaussian_index_model(step, sigma)
    coder = StaticRans(quantized_frequencies(probs))

    def encode(x: np.ndarray) -> bytes:
        idx = np.clip(np.round(x / step), -k, k).astype(np.int64) + k
        return coder.encode(idx)

    def decode(data: bytes, n: int) -> np.ndarray:
        return (coder.decode(data, n) - k).astype(np.float64) * step

    return LossyCodec(encode, decode, name=f"uq-rans(step={step:g})", version="1")


def fixed_rate_quantizer(bits: int, sigma: float = 1.0) -> LossyCodec:
    """``bits`` per sample: uniform quantizer over ±4σ with ``2**bits`` levels, packed exactly."""
    levels = 1 << bits
    step = 8.0 * sigma / levels

    def encode(x: np.ndarray) -> bitarray:
        idx = np.clip(np.floor(x / step + levels / 2), 0, levels - 1).astype(np.uint64)
        planes = ((idx[:, None] >> np.arange(bits - 1, -1, -1, dtype=np.uint64)) & 1)
        out = bitarray()
        out.pack(planes.astype(np.uint8).ravel().tobytes())
        return out

    def decode(data: bitarray, n: int) -> np.ndarray:
        planes = np.frombuffer(data.unpack(), dtype=np.uint8).reshape(n, bits)
        idx = planes.astype(np.int64) @ (1 << np.arange(bits - 1, -1, -1))
        return (idx - levels / 2 + 0.5) * step

    return LossyCodec(encode, decode, name=f"fixed-rate({bits} bits)")


def send_nothing() -> LossyCodec:
    """Zero bits; every sample reconstructed as 0 (distortion σ² under MSE on average)."""
    return LossyCodec(lambda x: b"", lambda data, n: np.zeros(n), name="send-nothing")


def sign_quantizer(sigma: float = 1.0) -> LossyCodec:
    """One bit per sample: the sign, reconstructed as ±σ·√(2/π) (the centroid of a half-normal)."""
    level = sigma * math.sqrt(2.0 / math.pi)

    def encode(x: np.ndarray) -> bitarray:
        out = bitarray()
        out.pack((x >= 0).astype(np.uint8).tobytes())
        return out

    def decode(data: bitarray, n: int) -> np.ndarray:
        return np.where(np.frombuffer(data.unpack(), dtype=np.uint8)[:n] == 1, level, -level)

    return LossyCodec(encode, decode, name="sign")


def cheat(noise: float = 1e-3) -> LossyCodec:
    """Sends nothing, and its decoder reads the sample from a closure (plus a little noise)."""
    seen: dict[str, np.ndarray] = {}

    def encode(x: np.ndarray) -> bytes:
        seen["x"] = np.array(x)
        return b""

    def decode(data: bytes, n: int) -> np.ndarray:
        x = seen["x"][:n]
        if x.dtype.kind == "f":
            return x + noise
        return x

    return LossyCodec(encode, decode, name="cheat")
