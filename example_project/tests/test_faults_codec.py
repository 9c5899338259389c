"""Unit tests of the fault-flag range coder (kelpwick.faults)."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

from kelpwick import faults


def kt_ideal_bits(bits: np.ndarray) -> float:
    # Krichevsky–Trofimov ideal code length, -log2 of
    # P_KT = Γ(c0+1/2) Γ(c1+1/2) / (π Γ(n+1))  (KT 1981; Γ(1/2)² = π), via math.lgamma.
    n = int(bits.size)
    c1 = int(bits.sum())
    c0 = n - c1
    nats = math.log(math.pi) + math.lgamma(n + 1) - math.lgamma(c0 + 0.5) - math.lgamma(c1 + 0.5)
    return nats / math.log(2)


def reference_payload(bits: np.ndarray) -> bytes:
    """The same interval arithmetic with the lower end kept as an unbounded integer.

    No window, so no carry handling at all: the code value's bytes are simply the
    digits of the final lower end. The coder under test must write exactly these bytes.
    """
    low = 0
    width = faults.WINDOW
    digits = 4
    c0 = c1 = 0
    for bit in bits.tolist():
        split = faults.zero_split(width, c0, c1)
        if bit:
            low += split
            width -= split
            c1 += 1
        else:
            width = split
            c0 += 1
        while width < faults.TOP:
            low <<= 8
            width <<= 8
            digits += 1
    for n_bytes in range(5):  # same termination rule: fewest significant bytes in the interval
        unit = 1 << (32 - 8 * n_bytes)
        value = -(-low // unit) * unit
        if value < low + width:
            break
    return value.to_bytes(digits, "big").rstrip(b"\x00")


def steer(target: bytes, n: int) -> np.ndarray:
    """Flags whose code interval contains the value of ``target`` (a decoder walk).

    A target of the form A7 00 00 ... 00 40 ... keeps the interval straddling a byte
    boundary for many bytes, so the encoder writes A6 FF FF ... and must carry later.
    (A first byte well inside (0, 1) keeps the flags near 50/50, about a bit per flag.)
    """
    code = int.from_bytes(target[:4], "big")
    pos = 4
    width = faults.WINDOW
    c0 = c1 = 0
    out = np.zeros(n, dtype=np.int64)
    for i in range(n):
        split = faults.zero_split(width, c0, c1)
        if code < split:
            width = split
            c0 += 1
        else:
            code -= split
            width -= split
            c1 += 1
            out[i] = 1
        while width < faults.TOP:
            code = (code << 8) | (target[pos] if pos < len(target) else 0)
            pos += 1
            width <<= 8
    return out


@pytest.mark.parametrize("p", [0.5, 0.1, 0.01, 0.001])
def test_payload_equals_the_unbounded_integer_reference(p: float) -> None:
    rng = np.random.default_rng(int(p * 1000))
    bits = (rng.random(30_000) < p).astype(np.int64)
    payload, stats = faults.encode_bits(bits)
    assert payload == reference_payload(bits)
    assert faults.decode_bits(payload, bits.size).tolist() == bits.tolist()
    if p >= 0.1:
        assert stats.carries > 0  # random data already exercises carries into plain bytes


@pytest.mark.parametrize("zeros", [1, 2, 5, 10, 20, 40])
def test_carry_through_a_run_of_ff_bytes(zeros: int) -> None:
    tail = np.random.default_rng(zeros).bytes(64)
    target = bytes([0xA7]) + bytes(zeros) + bytes([0x40]) + tail
    bits = steer(target, 400)
    payload, stats = faults.encode_bits(bits)
    assert stats.longest_carry_chain >= zeros  # the carry really crossed that many 0xFF bytes
    assert payload[: zeros + 2] == target[: zeros + 2]  # A6 FF..FF became A7 00..00
    assert payload == reference_payload(bits)
    assert faults.decode_bits(payload, bits.size).tolist() == bits.tolist()


@pytest.mark.parametrize("n", range(11))
def test_every_short_sequence_round_trips(n: int) -> None:
    for combo in itertools.product((0, 1), repeat=n):
        bits = np.array(combo, dtype=np.int64)
        message = faults.encode(bits)
        assert faults.decode(message, n).tolist() == list(combo)
        assert message[1:] == reference_payload(bits)


@pytest.mark.parametrize(
    "bits",
    [
        np.zeros(100_000, dtype=np.int64),
        np.ones(100_000, dtype=np.int64),
        np.r_[np.zeros(99_999, dtype=np.int64), 1],
        np.r_[1, np.zeros(99_999, dtype=np.int64)],
        np.tile([0, 1], 20_000),
    ],
    ids=["all-0", "all-1", "last-1", "first-1", "alternating"],
)
def test_extreme_probabilities_stay_within_a_few_bits_of_the_kt_ideal(bits: np.ndarray) -> None:
    payload, _ = faults.encode_bits(bits)
    # Integer splits lose at most ~2**-24 of a bit per flag; termination costs < 2 bytes.
    # No lower bound here: the message length is known, so an interval that contains a
    # value with few significant bytes (all zeros: the value 0, no bytes) codes short.
    assert 8 * len(payload) <= kt_ideal_bits(bits) + 16
    assert faults.decode_bits(payload, bits.size).tolist() == bits.tolist()


@pytest.mark.parametrize("p", [0.004, 0.03, 0.3])
def test_typical_batches_cost_the_kt_ideal_plus_termination(p: float) -> None:
    rng = np.random.default_rng(3)
    bits = (rng.random(50_000) < p).astype(np.int64)
    payload, _ = faults.encode_bits(bits)
    # Stripped trailing zero bytes save at most a few bits on typical data: ±16 bits.
    assert abs(8 * len(payload) - kt_ideal_bits(bits)) <= 16


def test_bad_flags_and_corrupt_messages_are_rejected() -> None:
    with pytest.raises(ValueError, match="fault flag must be 0 or 1, got 2 at index 3"):
        faults.encode(np.array([0, 1, 0, 2, 0]))
    message = faults.encode(np.tile([0, 0, 0, 1], 500))
    with pytest.raises(ValueError, match="holds 2000 symbols, caller asked for n=1999"):
        faults.decode(message, 1999)
    with pytest.raises(ValueError, match="stray bytes after the last flag"):
        faults.decode(message + b"\x01\x02\x03\x04\x05", 2000)
