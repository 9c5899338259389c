"""The lossy checks: measure a codec's rate and distortion against R(D), and assert on them.

:func:`measure_lossy` runs one round trip (:mod:`pytest_ratefloor.lossy.codec`)
and returns a :class:`LossyMeasurement`; :func:`assert_lossy` also fails on a
gap or a distortion over the allowed, and :func:`assert_error_bound` on a
reconstructed sample farther from its original than the promised bound. Every
check fails with :class:`~pytest_ratefloor.errors.ImpossibleRate` when the
stream is shorter than any decoder told only ``n`` could use for the measured
distortion (see :mod:`pytest_ratefloor.lossy.converse`).

Figures (bits per sample, computed here only):

* ``rate = bits / n``; ``distortion`` the mean per-sample distortion ``D̂``;
* ``rd_floor = R(D̂)`` of the *model* source at the distortion actually reached,
  ``gap = rate − rd_floor`` (≥ 0 on average for every codec, by the converse of
  the rate–distortion theorem; a single sample may fall a little below);
* MSE only: ``snr_db = 10·log10(σ²/D̂)`` with ``σ²`` the source's variance (of
  one sample), and ``snr_gap_db = 20·log10(2)·rate − snr_db``: the distance
  below the Gaussian bound ``SNR(R) = 10·log10(2^(2R)) ≈ 6.02·R`` dB. That
  bound is the exact D(R) of the memoryless Gaussian source and is reachable
  for *every* source of that variance (the Gaussian is the hardest to code
  under MSE: Cover & Thomas, ch. 10, from memory); a source with memory or a
  non-Gaussian one can do better, so a negative ``snr_gap_db`` is no error
  there.

R(D) of a model source says nothing certain about real signals: these
figures grade a codec on synthetic data whose statistics are known.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import asdict, dataclass, fields
from typing import Any, TypeVar

import numpy as np

from pytest_ratefloor import validation
from pytest_ratefloor.errors import (
    DistortionFailure,
    ErrorBoundFailure,
    ImpossibleRate,
    LossyRateFailure,
    RateFloorFailure,
)
from pytest_ratefloor.isolation import guarded
from pytest_ratefloor.lossy.codec import LossyCodec, LossyRoundTrip, LossyRun, run_lossy
from pytest_ratefloor.lossy.converse import CONVERSE_CONFIDENCE_BITS, Converse, converse_bound
from pytest_ratefloor.lossy.distortion import Distortion, LossySource, resolve_distortion
from pytest_ratefloor.measurement import CaseKey, figure

__all__ = [
    "DECIBELS_PER_BIT",
    "DEFAULT_LOSSY_N",
    "LossyMeasurement",
    "assert_error_bound",
    "assert_lossy",
    "error_bound_failure",
    "lossy_verdict",
    "measure_lossy",
    "worst_window",
]

DEFAULT_LOSSY_N = 100_000
#: 20·log10(2): the SNR a Gaussian source gains per extra bit per sample at the bound.
DECIBELS_PER_BIT = 20.0 * math.log10(2.0)
_RECORD_KIND = "lossy"
_T = TypeVar("_T")


def worst_window(per_sample: np.ndarray) -> tuple[int, int, float]:
    """The stretch of the sample coded worst: ``(start, stop, mean distortion)``.

    The window is ``max(64, n // 64)`` samples long (the whole sample when
    shorter); of the windows with the largest mean distortion the first is named.
    """
    n = len(per_sample)
    width = min(n, max(64, n // 64))
    if width == 0:
        return 0, 0, 0.0
    sums = np.concatenate(([0.0], np.cumsum(per_sample, dtype=np.float64)))
    window = sums[width:] - sums[:-width]
    start = int(np.argmax(window))
    return start, start + width, float(window[start] / width)


@dataclass(frozen=True)
class LossyMeasurement:
    """One lossy case: what the codec spent and what it reached on one sample.

    Stored: the case (``codec``, ``version``, ``source`` spec, ``n``, ``seed``,
    ``measure``: the distortion measure's label), ``bits`` (exact stream
    length), ``distortion`` (measured mean ``D̂``), ``rd_floor`` (``R(D̂)`` in
    bits/sample; ``inf`` for a real-valued source reconstructed exactly,
    ``None`` where the source has no R(D) for this measure), ``variance``
    (the source's, for MSE; else ``None``), ``max_abs_error`` (largest
    ``|x − x̂|``), the worst window (``worst_start``, ``worst_stop``,
    ``worst_distortion``), and the impossible-point figures
    (``converse_bits``: the stream length below which the case is impossible,
    ``None`` where no bound is known for the source). Derived, here only:
    :attr:`rate`, :attr:`gap`, :attr:`snr_db`, :attr:`snr_gap_db`.
    """

    codec: str
    version: str | None
    source: str
    n: int
    seed: int
    measure: str
    bits: int
    distortion: float
    rd_floor: float | None
    variance: float | None
    max_abs_error: float
    worst_start: int
    worst_stop: int
    worst_distortion: float
    converse_bits: float | None

    @property
    def rate(self) -> float:
        """Bits per sample."""
        return self.bits / self.n

    @property
    def gap(self) -> float | None:
        """``rate − R(D̂)`` in bits/sample (``None`` without an R(D))."""
        return None if self.rd_floor is None else self.rate - self.rd_floor

    @property
    def snr_db(self) -> float | None:
        """MSE only: ``10·log10(σ²/D̂)``, σ² the source variance (``inf`` when ``D̂ = 0``)."""
        if self.variance is None:
            return None
        if self.distortion <= 0.0:
            return math.inf
        return 10.0 * math.log10(self.variance / self.distortion)

    @property
    def snr_gap_db(self) -> float | None:
        """MSE only: ``6.02·rate − snr_db`` dB, the distance below the Gaussian bound."""
        snr = self.snr_db
        return None if snr is None else DECIBELS_PER_BIT * self.rate - snr

    @property
    def key(self) -> CaseKey:
        """The case's ledger key (codec name, source spec, ``n``, seed), as for lossless cases."""
        return CaseKey(self.codec, self.source, self.n, self.seed)

    @property
    def case(self) -> str:
        """The case in messages: codec, source, n, seed and measure."""
        return (f"codec {self.codec!r} on {self.source} (n={self.n}, seed={self.seed}, "
                f"{self.measure} distortion)")

    def summary(self) -> str:
        """The figures on a few lines (for failure messages and reports)."""
        rd = "unknown" if self.rd_floor is None else f"{self.rd_floor:.6g}"
        gap = "unknown" if self.gap is None else f"{self.gap:+.6g}"
        lines = [
            f"  rate {self.rate:.6g} bits/sample ({self.bits} bits), distortion "
            f"{self.distortion:.6g}, R(D) {rd} bits/sample, gap {gap} bits/sample",
        ]
        if self.snr_db is not None and self.snr_gap_db is not None:
            lines.append(f"  SNR {self.snr_db:.4g} dB (σ² = {self.variance:.6g}), "
                         f"{self.snr_gap_db:.4g} dB below the 6.02 dB/bit Gaussian bound")
        lines.append(f"  worst-coded samples [{self.worst_start}:{self.worst_stop}]: mean "
                     f"distortion {self.worst_distortion:.6g}")
        return "\n".join(lines)

    def to_record(self) -> dict[str, Any]:
        """Builtin-only dict for a ledger or a JSON report.

        Floats are rounded to 12 significant digits (as the ledger keeps them, so
        a recording on another machine gives no last-digit noise); an infinite
        R(D) is the string ``"inf"``.
        """
        record = asdict(self)
        for name, value in record.items():
            if isinstance(value, float) and math.isfinite(value):
                record[name] = figure(value)
        if self.rd_floor is not None and math.isinf(self.rd_floor):
            record["rd_floor"] = "inf"
        record["kind"] = _RECORD_KIND
        return record

    @classmethod
    def from_record(cls, record: Mapping[str, Any]) -> LossyMeasurement:
        """The measurement a :meth:`to_record` dict describes (fields checked).

        :raises TypeError: a field of the wrong type. :raises ValueError: a
            missing field, a wrong ``kind`` or a bad value.
        """
        where = "lossy record"
        if not isinstance(record, Mapping):
            raise TypeError(validation.message("record", "a mapping", record, where))
        if record.get("kind", _RECORD_KIND) != _RECORD_KIND:
            raise ValueError(validation.message("kind", repr(_RECORD_KIND),
                                                record.get("kind"), where))
        names = [f.name for f in fields(cls)]
        missing = [name for name in names if name not in record]
        if missing:
            raise ValueError(validation.message("record", f"a dict with the field {missing[0]!r}",
                                                validation.Described("none"), where))
        version = record["version"]
        if version is not None and not isinstance(version, str):
            raise TypeError(validation.message("version", "a string or None", version, where))
        rd = record["rd_floor"]
        rd_floor = math.inf if rd == "inf" else (
            None if rd is None else validation.real(rd, "rd_floor", minimum=0.0, where=where))
        variance = record["variance"]
        conv = record["converse_bits"]
        return cls(
            codec=validation.text(record["codec"], "codec", where=where),
            version=version,
            source=validation.text(record["source"], "source", where=where),
            n=validation.integer(record["n"], "n", minimum=1, where=where),
            seed=validation.integer(record["seed"], "seed", minimum=0, where=where),
            measure=validation.text(record["measure"], "measure", where=where),
            bits=validation.integer(record["bits"], "bits", minimum=0, where=where),
            distortion=validation.real(record["distortion"], "distortion", minimum=0.0,
                                       where=where),
            rd_floor=rd_floor,
            variance=None if variance is None else validation.real(
                variance, "variance", minimum=0.0, low_open=True, where=where),
            max_abs_error=validation.real(record["max_abs_error"], "max_abs_error",
                                          minimum=0.0, where=where),
            worst_start=validation.integer(record["worst_start"], "worst_start", minimum=0,
                                           where=where),
            worst_stop=validation.integer(record["worst_stop"], "worst_stop", minimum=0,
                                          where=where),
            worst_distortion=validation.real(record["worst_distortion"], "worst_distortion",
                                             minimum=0.0, where=where),
            converse_bits=None if conv is None else validation.real(conv, "converse_bits",
                                                                    where=where),
        )


def _rd_floor(source: Any, distortion: Distortion, dhat: float, real: bool) -> float | None:
    method = getattr(source, "rate_distortion", None)
    if method is None:
        return None
    if real and dhat <= 0.0:
        return math.inf  # an exact real-valued reconstruction: R(0) is infinite
    try:
        return float(method(dhat, distortion=distortion.argument))
    except (ValueError, NotImplementedError):
        return None  # no R(D) known for this source and measure


def _max_abs_error(sample: np.ndarray, recon: np.ndarray) -> float:
    if len(sample) == 0:
        return 0.0
    return float(np.max(np.abs(sample.astype(np.float64) - recon.astype(np.float64))))


def _impossible(m: LossyMeasurement, conv: Converse) -> ImpossibleRate:
    rd = "unknown" if m.rd_floor is None else f"{m.rd_floor:.6g}"
    return ImpossibleRate(
        f"{m.case}: impossible rate {m.rate:.6g} bits/sample ({m.bits} bits) at distortion "
        f"{m.distortion:.6g} (R(D) {rd} bits/sample)\n"
        f"  the sample's tilted information at that distortion is {conv.tilted_bits:.1f} bits; "
        f"no decoder told only n gets within {conv.margin_bits:.0f} bits of it except with "
        f"probability 2^-{CONVERSE_CONFIDENCE_BITS} (single-shot rate-distortion converse, "
        f"{conv.method})\n"
        "  the decoder must be getting information from outside the stream (shared state, "
        "a side channel, the sample itself), or the bit count is wrong"
    )


def _measurement(run: LossyRun, trip: LossyRoundTrip, distortion: Distortion
                 ) -> tuple[LossyMeasurement, np.ndarray]:
    __tracebackhide__ = True
    bad = distortion.bad_reconstruction(trip.reconstruction)
    if bad is not None:
        raise run.misbehaviour(
            f"the sample ({run.n} samples)",
            f"the decoder returned {int(trip.reconstruction[bad])} at index {bad}, which has no "
            f"column in the {distortion.label} distortion matrix")
    per_sample = distortion.per_sample(trip.sample, trip.reconstruction)
    dhat = float(np.mean(per_sample)) if run.n else 0.0
    start, stop, worst = worst_window(per_sample)
    conv = converse_bound(run.source, distortion, trip.sample, per_sample, trip.encoded.bits)
    variance = getattr(run.source, "variance", None) if distortion.kind == "mse" else None
    if variance is None and distortion.kind == "mse":
        variance = float(np.var(np.asarray(trip.sample, dtype=np.float64)))
    m = LossyMeasurement(
        codec=run.codec.name, version=run.codec.version, source=run.source.spec, n=run.n,
        seed=run.seed, measure=distortion.label, bits=trip.encoded.bits, distortion=dhat,
        rd_floor=_rd_floor(run.source, distortion, dhat, trip.real),
        variance=None if variance is None else float(variance),
        max_abs_error=_max_abs_error(trip.sample, trip.reconstruction),
        worst_start=start, worst_stop=stop, worst_distortion=worst,
        converse_bits=None if conv is None else conv.limit_bits,
    )
    if conv is not None and m.bits < conv.limit_bits:
        raise _impossible(m, conv)
    return m, per_sample


def _setup(codec: object, source: object, n: object, seed: object, distortion: object
           ) -> tuple[LossyRun, Distortion]:
    if not isinstance(codec, LossyCodec):
        raise TypeError(validation.message("codec", "a LossyCodec", codec))
    for attribute in ("spec", "sample"):
        if not hasattr(source, attribute):
            raise TypeError(validation.message(
                "source", "a source (from pytest_ratefloor.sources)", source))
    size = validation.sample_size(n)
    run = LossyRun(codec, source, size, validation.seed(seed))  # type: ignore[arg-type]
    return run, resolve_distortion(distortion, source)  # type: ignore[arg-type]


def _guard(work: Callable[[], _T], run: LossyRun, isolate: object) -> _T:
    __tracebackhide__ = True
    case = f"codec {run.codec.name!r} on {run.origin}"
    flag = None if isolate is None else validation.flag(isolate, "isolate")
    return guarded(work, case=case, isolate=flag)


def measure_lossy(codec: LossyCodec, source: LossySource, n: int = DEFAULT_LOSSY_N, seed: int = 0,
                  distortion: object = None, *, isolate: bool | None = None) -> LossyMeasurement:
    """Encode and decode one sample of ``source`` and measure rate, distortion and R(D).

    ``distortion``: ``"mse"``, ``"abs"``, ``"hamming"``, a matrix, or ``None``
    (the source's ``default_distortion``; Hamming for a finite alphabet).
    ``isolate``: ``True`` runs the codec in a forked child, ``False`` in this
    process, ``None`` as the run decides (see :mod:`pytest_ratefloor.isolation`).

    :raises CodecMisbehaviour: the codec raised, returned the wrong type or
        length, a non-finite reconstruction, wrote into its input or was not
        deterministic.
    :raises ImpossibleRate: the stream is shorter than any decoder told only
        ``n`` could use at the distortion reached.
    """
    __tracebackhide__ = True
    run, measure = _setup(codec, source, n, seed, distortion)
    return _guard(lambda: _measurement(run, run_lossy(run), measure)[0], run, isolate)


def assert_lossy(codec: LossyCodec, source: LossySource, n: int = DEFAULT_LOSSY_N, seed: int = 0,
                 distortion: object = None, max_gap: float | None = None,
                 max_distortion: float | None = None, *, isolate: bool | None = None
                 ) -> LossyMeasurement:
    """:func:`measure_lossy`, failing when the codec is over its allowance.

    ``max_gap`` (bits/sample, ``≥ 0``): the largest ``rate − R(D̂)`` allowed;
    ``max_distortion`` (``≥ 0``): the largest mean distortion allowed. Either
    may be ``None`` (not checked). Returns the measurement when it passes.

    :raises LossyRateFailure: the gap exceeds ``max_gap``.
    :raises DistortionFailure: the mean distortion exceeds ``max_distortion``.
    """
    __tracebackhide__ = True
    gap_limit = None if max_gap is None else validation.real(max_gap, "max_gap", minimum=0.0)
    d_limit = None if max_distortion is None else validation.real(
        max_distortion, "max_distortion", minimum=0.0)
    m = measure_lossy(codec, source, n, seed, distortion, isolate=isolate)
    failure = lossy_verdict(m, gap_limit, d_limit)
    if failure is not None:
        raise failure
    return m


def lossy_verdict(m: LossyMeasurement, max_gap: float | None, max_distortion: float | None
                  ) -> RateFloorFailure | None:
    """The failure ``m`` deserves under the allowances (limits already validated), or ``None``."""
    if max_gap is not None:
        if m.gap is None:
            raise ValueError(validation.message(
                "max_gap", "used only where the source has an R(D) for the measure",
                max_gap, f"{m.source} ({m.measure})"))
        if m.gap > max_gap + 1e-12:
            return LossyRateFailure(
                f"{m.case}: rate {m.rate:.6g} bits/sample is {m.gap:.6g} bits/sample above "
                f"R(D) = {m.rd_floor:.6g} at the measured distortion {m.distortion:.6g} "
                f"(allowed gap {max_gap:g})\n{m.summary()}")
    if max_distortion is not None and m.distortion > max_distortion:
        return DistortionFailure(
            f"{m.case}: mean distortion {m.distortion:.6g} exceeds the allowed "
            f"{max_distortion:g}\n{m.summary()}")
    return None


def error_bound_failure(m: LossyMeasurement, trip: LossyRoundTrip, max_abs: float
                        ) -> ErrorBoundFailure | None:
    """The failure of a round trip whose reconstruction strays farther than ``max_abs``
    (already validated) from some sample, or ``None``.

    The message names how many samples exceed the bound, the first such index with
    its value, reconstruction and error, and the largest error.
    """
    errors = np.abs(trip.sample.astype(np.float64) - trip.reconstruction.astype(np.float64))
    over = np.flatnonzero(errors > max_abs)
    if not over.size:
        return None
    i = int(over[0])
    worst = int(over[np.argmax(errors[over])])
    return ErrorBoundFailure(
        f"{m.case}: {over.size} of {m.n} reconstructed samples lie farther than "
        f"max_abs={max_abs:g} from the original\n"
        f"  first at index {i}: value {trip.sample[i]!r}, reconstruction "
        f"{trip.reconstruction[i]!r}, error {errors[i]:.6g}\n"
        f"  largest at index {worst}: value {trip.sample[worst]!r}, reconstruction "
        f"{trip.reconstruction[worst]!r}, error {errors[worst]:.6g}\n{m.summary()}")


def _error_bound(run: LossyRun, distortion: Distortion, eps: float) -> LossyMeasurement:
    __tracebackhide__ = True
    trip = run_lossy(run)
    m, _ = _measurement(run, trip, distortion)
    failure = error_bound_failure(m, trip, eps)
    if failure is not None:
        raise failure
    return m


def assert_error_bound(codec: LossyCodec, source: LossySource, max_abs: float,
                       n: int = DEFAULT_LOSSY_N, seed: int = 0, distortion: object = None,
                       *, isolate: bool | None = None) -> LossyMeasurement:
    """Every reconstructed sample within ``max_abs`` of its original (``|x − x̂| ≤ max_abs``).

    Returns the measurement (figures as :func:`measure_lossy`) when it passes.

    :raises ErrorBoundFailure: naming how many samples exceed the bound, the
        first such index with its value, reconstruction and error, and the largest error.
    """
    __tracebackhide__ = True
    eps = validation.real(max_abs, "max_abs", minimum=0.0)
    run, measure = _setup(codec, source, n, seed, distortion)
    return _guard(lambda: _error_bound(run, measure, eps), run, isolate)
