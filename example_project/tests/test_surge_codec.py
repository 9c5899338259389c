"""Unit tests of the surge-residual DPCM codec (kelpwick.surge)."""

from __future__ import annotations

import numpy as np
import pytest

from kelpwick import surge


def test_every_sample_is_within_half_a_step() -> None:
    # closed-loop DPCM: the error of each sample is its own quantization error (|e| <= step/2)
    rng = np.random.default_rng(7)
    x = np.cumsum(rng.normal(0.0, 0.01, 5_000))
    for step in (0.001, 0.01, 0.1):
        y = surge.decode(surge.encode(x, step), x.size)
        assert np.max(np.abs(x - y)) <= step / 2 + 1e-12


def test_fine_step_mse_is_a_twelfth_of_the_step_squared() -> None:
    # uniform quantization noise at fine steps: D = step**2 / 12 (common practice)
    rng = np.random.default_rng(8)
    x = rng.normal(0.0, 1.0, 50_000)
    step = 0.01
    y = surge.decode(surge.encode(x, step), x.size)
    assert np.mean((x - y) ** 2) == pytest.approx(step**2 / 12, rel=0.03)


def test_error_bound_step_and_bad_arguments() -> None:
    step, name = surge.for_error_bound(0.01)
    assert name == "kelpwick-surge-dpcm-bound-0.01"
    assert 0.02 * (1 - 1e-8) < step < 0.02
    with pytest.raises(ValueError, match="epsilon"):
        surge.for_error_bound(0.0)
    with pytest.raises(ValueError, match="step"):
        surge.encode(np.zeros(3), step=-1.0)
    with pytest.raises(ValueError, match="finite"):
        surge.encode(np.array([0.0, np.nan]))
    with pytest.raises(ValueError, match="shorter than its header"):
        surge.decode(b"\x00", 1)


def test_empty_and_constant_batches() -> None:
    assert surge.decode(surge.encode(np.zeros(0)), 0).size == 0
    y = surge.decode(surge.encode(np.full(10, 0.25), 0.01), 10)
    assert np.max(np.abs(y - 0.25)) <= 0.005 + 1e-12
    # the error-bounded step keeps the bound in floating point too
    step, _ = surge.for_error_bound(0.005)
    rng = np.random.default_rng(9)
    x = np.cumsum(rng.normal(0.0, 0.02, 20_000))
    assert np.max(np.abs(surge.decode(surge.encode(x, step), x.size) - x)) <= 0.005
