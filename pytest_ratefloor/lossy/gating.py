"""A lossy check inside a test: one round trip, its case record for the ledger, the verdict.

``ratefloor.check(LossyCodec(...), source, ...)`` and ``gate(lossy_codec, ...)``
come here. The options (:class:`LossyOptions`) are validated once into a
:class:`LossyPlan`; :func:`run_lossy_check` runs the codec once (in a forked
child unless isolation is off), measures rate, distortion and R(D) on that one
encoding (:mod:`pytest_ratefloor.lossy.measure`), turns the figures into the
run's case record (:func:`case_record`, a
:class:`~pytest_ratefloor.measurement.Measurement` with its distortion), hands
it to the ledger gate, and only then raises what the allowances found: a gap
over ``max_gap``, a distortion over ``max_distortion``, a sample farther than
``max_abs`` from its original. An impossible point fails first, as it does
for ``measure_lossy``.

The ledger compares a lossy case on two figures: its bits and its mean
distortion (see :func:`pytest_ratefloor.verdicts.compare`).
"""

from __future__ import annotations

import hashlib
import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any, TypedDict

import numpy as np

from pytest_ratefloor import validation
from pytest_ratefloor.errors import RateFloorFailure
from pytest_ratefloor.isolation import guarded
from pytest_ratefloor.lossy.codec import LossyCodec, LossyRun, run_lossy
from pytest_ratefloor.lossy.distortion import Distortion
from pytest_ratefloor.lossy.measure import (
    DEFAULT_LOSSY_N,
    LossyMeasurement,
    _measurement,
    _setup,
    error_bound_failure,
    lossy_verdict,
)
from pytest_ratefloor.measurement import LOSSY_FLOOR, Measurement

__all__ = ["LOSSY_OPTIONS", "LossyOptions", "LossyPlan", "case_record", "lossy_fingerprint",
           "run_lossy_check"]


class LossyOptions(TypedDict, total=False):
    """The options of a lossy check (``ratefloor.check`` and ``gate`` with a LossyCodec)."""

    n: int
    seed: int
    distortion: Any
    max_gap: float | None
    max_distortion: float | None
    max_abs: float | None
    isolate: bool | None


LOSSY_OPTIONS = frozenset(LossyOptions.__annotations__)


@dataclass(frozen=True)
class LossyPlan:
    """A lossy check's options, validated once (every bad value a ``TypeError`` or
    ``ValueError`` naming it).

    ``n`` samples (default 100 000) from ``seed``; ``distortion`` the measure
    (``None``: the source's default; Hamming for a finite alphabet); ``max_gap``
    the largest ``rate − R(D̂)`` allowed (bits/sample), ``max_distortion`` the
    largest mean distortion, ``max_abs`` the largest ``|x − x̂|`` of any sample —
    each ``None`` for no limit; ``isolate`` as for lossless checks.
    """

    n: int = DEFAULT_LOSSY_N
    seed: int = 0
    distortion: Any = None
    max_gap: float | None = None
    max_distortion: float | None = None
    max_abs: float | None = None
    isolate: bool | None = None

    def __post_init__(self) -> None:
        where = "lossy check"
        set_ = object.__setattr__
        set_(self, "n", validation.sample_size(self.n))
        set_(self, "seed", validation.seed(self.seed))
        for name in ("max_gap", "max_distortion", "max_abs"):
            value = getattr(self, name)
            if value is not None:
                set_(self, name, validation.real(value, name, minimum=0.0, where=where))
        if self.isolate is not None:
            set_(self, "isolate", validation.flag(self.isolate, "isolate"))

    @classmethod
    def of(cls, options: Mapping[str, Any], where: str | None = None) -> LossyPlan:
        """The plan of ``options`` (a mapping); an unknown key is a ``ValueError`` naming it."""
        unknown = sorted(str(k) for k in options if k not in LOSSY_OPTIONS)
        if unknown:
            raise ValueError(validation.message(
                unknown[0], f"an option of a lossy check ({', '.join(sorted(LOSSY_OPTIONS))})",
                options[unknown[0]], where))
        return cls(**options)


def lossy_fingerprint(sample: np.ndarray) -> str:
    """16 hex digits of SHA-256 over the sample as little-endian float64 (real-valued) or
    int64 (finite alphabet): equal fingerprints mean the same sample."""
    arr = np.ascontiguousarray(sample, dtype="<f8" if sample.dtype.kind == "f" else "<i8")
    return hashlib.sha256(arr.tobytes()).hexdigest()[:16]


def case_record(m: LossyMeasurement, source: Any, fingerprint: str,
                encode_seconds: float = 0.0, decode_seconds: float = 0.0) -> Measurement:
    """The case record of a lossy measurement: floor n·R(D̂) (:data:`LOSSY_FLOOR`), the
    distortion and its measure, the source's entropy where it has one (NaN for a
    real-valued source). A case with no R(D) for its measure cannot be gated: ValueError."""
    if m.rd_floor is None or not math.isfinite(m.rd_floor):
        raise ValueError(validation.message(
            "distortion", "a measure the source has a finite R(D) for at the distortion reached",
            m.measure, m.case))
    try:  # a finite-alphabet source has an entropy in bits; a real-valued one has none
        entropy = float(source.entropy)
    except (AttributeError, TypeError, ValueError):
        entropy = math.nan
    params = getattr(source, "params", {})
    return Measurement(
        codec=m.codec, source=m.source, n=m.n, seed=m.seed, bits=m.bits, entropy=entropy,
        floor=LOSSY_FLOOR, floor_bits=m.rd_floor * m.n, fingerprint=fingerprint,
        codec_version=m.version, encode_seconds=encode_seconds, decode_seconds=decode_seconds,
        source_family=str(getattr(source, "family", "")),
        source_params={str(k): v for k, v in dict(params).items()},
        distortion=m.distortion, distortion_measure=m.measure, variance=m.variance,
    )


def _work(run: LossyRun, measure: Distortion, plan: LossyPlan
          ) -> tuple[Measurement, LossyMeasurement, RateFloorFailure | None]:
    __tracebackhide__ = True
    trip = run_lossy(run)
    m, _ = _measurement(run, trip, measure)
    case = case_record(m, run.source, lossy_fingerprint(trip.sample),
                       trip.encode_seconds, trip.decode_seconds)
    failure = lossy_verdict(m, plan.max_gap, plan.max_distortion)
    if failure is None and plan.max_abs is not None:
        failure = error_bound_failure(m, trip, plan.max_abs)
    return case, m, failure


def run_lossy_check(codec: LossyCodec, source: Any, plan: LossyPlan,
                    on_measurement: Callable[[Measurement], None] | None = None,
                    default_isolate: bool | None = None) -> Measurement:
    """Measure, record (``on_measurement``: the ledger gate, JUnit, the summary), then raise
    the failure the plan's allowances found, if any. Returns the case record."""
    __tracebackhide__ = True
    run, measure = _setup(codec, source, plan.n, plan.seed, plan.distortion)
    isolate = default_isolate if plan.isolate is None else plan.isolate
    case, _m, failure = guarded(lambda: _work(run, measure, plan),
                                case=f"codec {codec.name!r} on {run.origin}", isolate=isolate)
    if on_measurement is not None:
        on_measurement(case)
    if failure is not None:
        raise failure
    return case
