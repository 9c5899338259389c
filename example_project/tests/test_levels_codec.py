"""Unit tests of the level-change Rice codec (kelpwick.levels)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from kelpwick import levels

EXTREMES = np.array(
    [0, -1, 1, 2**31 - 1, -(2**31), 2**62, -(2**62), 2**63 - 1, -(2**63), 37, -38],
    dtype=np.int64,
)


def test_zigzag_matches_the_protocol_buffers_table() -> None:
    # Protocol Buffers encoding guide, "signed integers" (sint32/sint64 ZigZag):
    # 0->0, -1->1, 1->2, -2->3, 2147483647->4294967294, -2147483648->4294967295.
    x = np.array([0, -1, 1, -2, 2147483647, -2147483648, 2**63 - 1, -(2**63)], dtype=np.int64)
    expected = [0, 1, 2, 3, 4294967294, 4294967295, 2**64 - 2, 2**64 - 1]
    assert levels.zigzag(x).tolist() == expected
    assert levels.unzigzag(levels.zigzag(x)).tolist() == x.tolist()


def test_rice_codeword_worked_by_hand() -> None:
    # x = -5 zig-zags to 9; with k = 2: quotient 2 -> "110", remainder 1 -> "01" (Rice code
    # definition). Message: count 01, k 02, bits 11001 padded to 11001000 = c8.
    assert levels.encode(np.array([-5]), k=2) == bytes.fromhex("0102c8")
    assert levels.decode(bytes.fromhex("0102c8"), 1).tolist() == [-5]


def _rice_bits(z: np.ndarray, k: int) -> int:
    # Bits of the sections from the layout: unary (capped at the escape) + closing zero,
    # k remainder bits, 64 bits per escaped quotient.
    q = [int(v) >> k for v in z.tolist()]
    return sum(min(v, levels.ESCAPE_QUOTIENT) + 1 + k + (64 if v >= levels.ESCAPE_QUOTIENT else 0)
               for v in q)


@pytest.mark.parametrize("k", range(levels.MAX_K + 1))
def test_k_sweep_round_trips_extremes_with_the_expected_size(k: int) -> None:
    rng = np.random.default_rng(k)
    x = np.concatenate([EXTREMES, rng.integers(-3000, 3000, size=200)])
    message = levels.encode(x, k=k)
    assert levels.decode(message, x.size).tolist() == x.tolist()
    expected_bytes = 2 + 1 + math.ceil(_rice_bits(levels.zigzag(x), k) / 8)  # count 211 is 2 bytes
    assert len(message) == expected_bytes


def _exact_rice_length(q: float, k: int) -> float:
    # E[k + 1 + floor(z / 2**k)] for z ~ Geometric on {0, 1, ...} with P(z) = (1-q) q**z,
    # summed over scipy's pmf (scipy.stats.geom is on {1, 2, ...}: shift by loc=-1).
    z = np.arange(0, int(60 / (1 - q)) + 200)
    pmf = stats.geom.pmf(z, 1 - q, loc=-1)
    return float(k + 1 + (pmf * (z >> k)).sum())


@pytest.mark.parametrize("q", [0.05, 0.3, 0.5, 0.6, 0.7, 0.8, 0.9, 0.95, 0.97, 0.99, 0.995])
def test_gvv_rule_picks_the_best_rice_parameter_for_a_geometric_source(q: float) -> None:
    mean = q / (1 - q)  # mean of the geometric pmf (1-q) q**z
    k = levels.gvv_parameter(mean)
    lengths = {j: _exact_rice_length(q, j) for j in range(12)}
    assert lengths[k] == pytest.approx(min(lengths.values()), abs=1e-12)


@pytest.mark.parametrize("q", [0.3, 0.6, 0.8, 0.9, 0.95, 0.99, 0.999])
def test_gvv_modulus_satisfies_the_gallager_van_voorhis_condition(q: float) -> None:
    # GvV 1975: the optimal Golomb modulus m satisfies q**m + q**(m+1) <= 1 < q**(m-1) + q**m;
    # the Rice k must be floor or ceil of log2 m.
    m = next(m for m in range(1, 100_000) if q**m + q ** (m + 1) <= 1)
    assert q ** (m - 1) + q**m > 1
    k = levels.gvv_parameter(q / (1 - q))
    assert k in {math.floor(math.log2(m)), math.ceil(math.log2(m))}


@pytest.mark.parametrize("mean", [0.0, 0.4, 1.0, 2.33, 8.4, 11.8, 27.1, 38.5, 1e6])
def test_naive_rule_is_never_below_the_gvv_rule(mean: float) -> None:
    # The best m is about ln 2 * mean (GvV), so "2**k nearest the mean" can only err high.
    assert levels.naive_parameter(mean) >= levels.gvv_parameter(mean)


def test_naive_and_gvv_rules_differ_at_theta_093(monkeypatch: pytest.MonkeyPatch) -> None:
    # Zig-zag mean of a two-sided geometric with theta = 0.93 is about 27 (log2 27 = 4.76):
    # naive rounds up to k = 5, GvV picks k = 4. This is the ledger demo's regression.
    z = np.full(1000, 27, dtype=np.uint64)
    monkeypatch.delenv(levels.RULE_VARIABLE, raising=False)
    assert levels.choose_parameter(z) == 4
    monkeypatch.setenv(levels.RULE_VARIABLE, "naive")
    assert levels.choose_parameter(z) == 5
    monkeypatch.setenv(levels.RULE_VARIABLE, "magic")
    with pytest.raises(ValueError, match=r"KELPWICK_RICE_RULE='magic' is not a known rule"):
        levels.choose_parameter(z)


def test_escape_path_round_trips_and_costs_64_bits() -> None:
    x = np.array([0, 40, -40, 3], dtype=np.int64)  # z = 0, 80, 79, 6; with k=1: q 0, 40, 39, 3
    message = levels.encode(x, k=1)
    assert levels.decode(message, 4).tolist() == x.tolist()
    assert len(message) == 1 + 1 + math.ceil(_rice_bits(levels.zigzag(x), 1) / 8)


@pytest.mark.parametrize("x", [[], [0], [-1], [5] * 7, [-(2**63)], [2**63 - 1, 0]])
def test_round_trip_small_batches(x: list[int]) -> None:
    a = np.array(x, dtype=np.int64)
    assert levels.decode(levels.encode(a), a.size).tolist() == x


def test_corrupt_messages_are_rejected() -> None:
    message = levels.encode(np.arange(-50, 50))
    with pytest.raises(ValueError, match="holds 100 symbols, caller asked for n=99"):
        levels.decode(message, 99)
    with pytest.raises(ValueError, match="truncated"):
        levels.decode(message[: len(message) // 2], 100)
    with pytest.raises(ValueError, match="unexpected bits after the last symbol"):
        levels.decode(message + b"\x80", 100)
    with pytest.raises(ValueError, match="Rice parameter byte 64 exceeds 63"):
        levels.decode(message[:1] + b"\x40" + message[2:], 100)


def test_bad_input_is_named() -> None:
    with pytest.raises(ValueError, match=r"Rice parameter k must be in 0\.\.63, got k=64"):
        levels.encode(np.array([1, 2]), k=64)
    with pytest.raises(ValueError, match="must be integers, got dtype float64"):
        levels.encode(np.array([1.5]))
