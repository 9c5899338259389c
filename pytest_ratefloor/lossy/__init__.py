"""Lossy codecs held to the rate–distortion function R(D) of a model source.

=====================  ======================================================
``codec``              :class:`LossyCodec`, one round trip and its
                       misbehaviour reports
``distortion``         the distortion measures (MSE, absolute, Hamming, a
                       matrix) and their per-sample values
``converse``           the impossible point: a stream too short for the
                       distortion reached (the derivation is there)
``measure``            :class:`LossyMeasurement`, :func:`measure_lossy`,
                       :func:`assert_lossy`, :func:`assert_error_bound`
``curves``             :func:`lossy_curve`: a codec at several qualities, and
                       R(D) for comparison
=====================  ======================================================
"""

from __future__ import annotations

from pytest_ratefloor.lossy.codec import LossyCodec
from pytest_ratefloor.lossy.converse import Converse, converse_bound
from pytest_ratefloor.lossy.curves import CurvePoint, LossyCurve, lossy_curve, rd_reference
from pytest_ratefloor.lossy.distortion import Distortion, resolve_distortion
from pytest_ratefloor.lossy.measure import (
    DECIBELS_PER_BIT,
    LossyMeasurement,
    assert_error_bound,
    assert_lossy,
    lossy_verdict,
    measure_lossy,
    worst_window,
)

__all__ = [
    "DECIBELS_PER_BIT",
    "Converse",
    "CurvePoint",
    "Distortion",
    "LossyCodec",
    "LossyCurve",
    "LossyMeasurement",
    "assert_error_bound",
    "assert_lossy",
    "converse_bound",
    "lossy_curve",
    "lossy_verdict",
    "measure_lossy",
    "rd_reference",
    "resolve_distortion",
    "worst_window",
]
