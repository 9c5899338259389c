"""Rate–distortion curves: a codec measured at several quality settings, and R(D) to compare.

:func:`lossy_curve` calls the user's factory ``quality -> LossyCodec`` once per
quality and measures each codec on the same sample (same ``n`` and seed), so
the points differ only by the setting. With ``reference=True`` it also returns
the source's R(D) sampled on a grid of distortions spanning the measured ones,
for a plot (``rate`` against ``distortion``, or for MSE the SNR in dB against
bits/sample, the form engineers read). No plotting happens here.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from pytest_ratefloor import validation
from pytest_ratefloor.lossy.codec import LossyCodec
from pytest_ratefloor.lossy.distortion import LossySource, resolve_distortion
from pytest_ratefloor.lossy.measure import DEFAULT_LOSSY_N, LossyMeasurement, measure_lossy

__all__ = ["CurvePoint", "LossyCurve", "lossy_curve", "rd_reference"]

_REFERENCE_POINTS = 64


@dataclass(frozen=True)
class CurvePoint:
    """One point of a source's R(D): ``distortion``, ``rate`` (bits/sample) and, for
    MSE, ``snr_db = 10·log10(σ²/D)``."""

    distortion: float
    rate: float
    snr_db: float | None


@dataclass(frozen=True)
class LossyCurve:
    """The measured points (one per quality, in the order given) and the R(D) reference."""

    qualities: tuple[Any, ...]
    points: tuple[LossyMeasurement, ...]
    reference: tuple[CurvePoint, ...]


def rd_reference(source: LossySource, distortion: object, low: float, high: float,
                 count: int = _REFERENCE_POINTS) -> list[CurvePoint]:
    """R(D) of ``source`` at ``count`` distortions, log-spaced from ``low`` to ``high``.

    Computed by :func:`pytest_ratefloor.ratedistortion.curve` (the source's own
    ``rate_distortion``); empty when the source has none for the measure.
    """
    lo = validation.real(low, "low", minimum=0.0, low_open=True)
    hi = validation.real(high, "high", minimum=lo)
    size = validation.integer(count, "count", minimum=2)
    from pytest_ratefloor import ratedistortion

    measure = resolve_distortion(distortion, source)
    variance = getattr(source, "variance", None) if measure.kind == "mse" else None
    try:
        ds, rs = ratedistortion.curve(source, measure.argument,
                                      distortions=np.geomspace(lo, hi, size))
    except (TypeError, ValueError, NotImplementedError):
        return []  # no R(D) for this source and measure
    return [CurvePoint(d, r, None if variance is None else 10.0 * math.log10(variance / d))
            for d, r in zip(ds.tolist(), rs.tolist())]


def lossy_curve(factory: Callable[[Any], LossyCodec], source: LossySource, qualities: Sequence[Any],
                n: int = DEFAULT_LOSSY_N, seed: int = 0, distortion: object = None, *,
                reference: bool = False, isolate: bool | None = None) -> LossyCurve:
    """Measure ``factory(q)`` at each quality ``q`` on the same sample of ``source``.

    ``reference=True`` adds R(D) of the source at 64 distortions spanning the
    measured ones (a decade either side, capped at the source's variance for MSE).
    Each measurement may raise what :func:`measure_lossy` raises.
    """
    __tracebackhide__ = True
    validation.function(factory, "factory")
    if isinstance(qualities, (str, bytes)) or not isinstance(qualities, Sequence):
        raise TypeError(validation.message("qualities", "a sequence of quality settings",
                                           qualities))
    if len(qualities) == 0:
        raise ValueError(validation.message("qualities", "a non-empty sequence", qualities))
    points = []
    for quality in qualities:
        codec = factory(quality)
        if not isinstance(codec, LossyCodec):
            raise TypeError(validation.message(f"factory({validation.show(quality)})",
                                               "a LossyCodec", codec))
        points.append(measure_lossy(codec, source, n, seed, distortion, isolate=isolate))
    ref: list[CurvePoint] = []
    if reference:
        reached = [p.distortion for p in points if p.distortion > 0]
        if reached:
            ref = rd_reference(source, distortion, min(reached) / 10, max(reached) * 10)
    return LossyCurve(tuple(qualities), tuple(points), tuple(ref))
