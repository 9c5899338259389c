"""The round-trip and rate checks: ``measure``, ``assert_roundtrip``, ``assert_rate``, ``check``.

Every check takes the same arguments, validated once into a :class:`CheckPlan`
(the one place their defaults and rules live), runs one round trip
(:mod:`pytest_ratefloor.roundtrip`), builds the case record and, where a
tolerance applies, the rate verdict (:mod:`pytest_ratefloor.rate`). With
``corruption=True`` the decoder must also survive damaged streams of the very
encoding the round trip made (:mod:`pytest_ratefloor.corruption`).

Failures are ``AssertionError`` subclasses from :mod:`pytest_ratefloor.errors`.
"""

from __future__ import annotations

import dataclasses
import os
import warnings
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, TypedDict, TypeVar

from pytest_ratefloor import isolation, validation
from pytest_ratefloor.codecs import as_codec
from pytest_ratefloor.edge_cases import edge_case_inputs
from pytest_ratefloor.errors import NoisyToleranceWarning, RateFloorFailure
from pytest_ratefloor.floors import DEFAULT_FLOOR, Floor, check_floor
from pytest_ratefloor.measurement import CaseKey, Measurement, sample_fingerprint
from pytest_ratefloor.rate import (
    DEFAULT_ABS,
    DEFAULT_REL,
    IMPOSSIBLE_CONFIDENCE_BITS,
    allowed_excess_bits,
    elias_delta_length,
    impossible_margin,
    measurement_of,
    noise_warning,
    rate_verdict,
    sample_information,
    tolerance,
)
from pytest_ratefloor.roundtrip import RoundTrip, run_roundtrip

if TYPE_CHECKING:
    from typing_extensions import Unpack

    from pytest_ratefloor.sources import Source

__all__ = [
    "CORRUPTION_N",
    "DEFAULT_ABS",
    "DEFAULT_N",
    "DEFAULT_REL",
    "IMPOSSIBLE_CONFIDENCE_BITS",
    "ROUNDTRIP_N",
    "CheckOptions",
    "CheckPlan",
    "assert_rate",
    "assert_roundtrip",
    "check",
    "edge_case_inputs",
    "elias_delta_length",
    "impossible_margin",
    "measure",
    "rate_verdict",
    "run_check",
    "sample_fingerprint",
    "sample_information",
    "tolerance",
]

#: Default sample size of every check that measures a rate.
DEFAULT_N = 100_000
#: Default sample size of ``assert_roundtrip`` (no rate is measured, so a shorter sample).
ROUNDTRIP_N = 10_000
#: The sample size of the damaged-stream check run by ``check(..., corruption=True)``
#: (capped: each damaged stream is decoded in a worker process).
CORRUPTION_N = 10_000

_T = TypeVar("_T")

#: Where damaged streams of a failed corruption check are saved (called only on failure).
SaveDir = Callable[[], "str | os.PathLike[str] | None"]


class CheckOptions(TypedDict, total=False):
    """The keyword arguments every check takes; defaults and rules are :class:`CheckPlan`'s.

    ``n``: symbols in the sample (default 100 000); ``seed``: the sample's
    seed (0); ``floor``: the floor the rate is measured from (``"sample"``,
    the sample's self-information: no sampling noise; see
    :data:`~pytest_ratefloor.floors.DEFAULT_FLOOR`);
    ``rel``/``abs``: the tolerance over the floor (default ``rel=0.01``);
    ``edge_cases``: also round-trip the edge cases (``True``); ``corruption``:
    also feed the decoder damaged streams (``False``); ``isolate``: run the
    codec in a forked child so that it cannot end or stall the test session
    (default: on where ``fork`` is safe; see :mod:`pytest_ratefloor.isolation`).
    """

    n: int
    seed: int
    floor: Floor
    rel: float | None
    abs: float | None
    edge_cases: bool
    corruption: bool
    isolate: bool | None


@dataclass(frozen=True)
class CheckPlan:
    """The arguments of one check, validated once.

    ``n`` (integer >= 1), ``seed`` (integer >= 0), ``floor`` (one of
    :data:`~pytest_ratefloor.floors.FLOORS`), ``rel``/``abs`` (the tolerance,
    see :mod:`pytest_ratefloor.rate`), ``edge_cases`` and ``corruption``
    (``bool``), ``isolate`` (``bool``, or ``None``: the run's setting,
    ini ``ratefloor_isolate``, on by default). A wrong type raises
    ``TypeError``, a bad value ``ValueError``, each naming the argument and
    the value.
    """

    n: int = DEFAULT_N
    seed: int = 0
    floor: Floor = DEFAULT_FLOOR
    rel: float | None = None
    abs: float | None = None
    edge_cases: bool = True
    corruption: bool = False
    isolate: bool | None = None

    def __post_init__(self) -> None:
        setattr_ = object.__setattr__
        setattr_(self, "n", validation.sample_size(self.n))
        setattr_(self, "seed", validation.seed(self.seed))
        setattr_(self, "floor", check_floor(self.floor))
        tolerance(self.rel, self.abs)
        setattr_(self, "edge_cases", validation.flag(self.edge_cases, "edge_cases"))
        setattr_(self, "corruption", validation.flag(self.corruption, "corruption"))
        if self.isolate is not None:
            setattr_(self, "isolate", validation.flag(self.isolate, "isolate"))

    @property
    def isolated(self) -> bool:
        """Whether the codec runs in a child process (``None`` means yes)."""
        return self.isolate is not False


def _check_source(source: object) -> None:
    for attr in ("spec", "sample", "information", "entropy"):
        if not hasattr(source, attr):
            raise TypeError(
                f"source must be a pytest_ratefloor.sources source, got {type(source).__name__} "
                f"(no {attr!r})"
            )


def _roundtrip(codec: Any, source: Source, plan: CheckPlan) -> RoundTrip:
    __tracebackhide__ = True
    isolation.step("drawing the sample")
    return run_roundtrip(codec, source, plan.n, plan.seed, plan.edge_cases)


def _measurement(trip: RoundTrip, plan: CheckPlan) -> Measurement:
    isolation.step("measuring the rate")
    return measurement_of(trip.codec, trip.source, trip.sample, plan.seed, trip.encoded,
                          plan.floor, trip.encode_seconds, trip.decode_seconds)


def _survive_damage(trip: RoundTrip, save_dir: SaveDir | None) -> None:
    """The damaged-stream check on the round trip's own encoding (a prefix when n is large)."""
    __tracebackhide__ = True
    from pytest_ratefloor.corruption import survive_damage

    isolation.step("feeding damaged streams to the decoder")
    sample, encoded = trip.prefix(CORRUPTION_N)  # a prefix of the one sample, not a re-draw
    survive_damage(trip.codec, sample, encoded, source=trip.source.spec, seed=trip.seed,
                   save_dir=save_dir)


def _case(codec: Any, source: Source, plan: CheckPlan) -> str:
    """The case in messages about the codec's process (checked before any work)."""
    _check_source(source)
    return CaseKey(as_codec(codec).name, source.spec, plan.n, plan.seed).phrase


def _guarded(work: Callable[[], _T], codec: Any, source: Source, plan: CheckPlan) -> _T:
    """Run the codec-facing ``work`` where the codec cannot end or stall the session."""
    __tracebackhide__ = True
    return isolation.guarded(work, case=_case(codec, source, plan), isolate=plan.isolated)


def run_check(
    codec: Any,
    source: Source,
    plan: CheckPlan,
    on_measurement: Callable[[Measurement], None] | None = None,
    save_dir: SaveDir | None = None,
) -> Measurement:
    """Round trip (with edge cases), rate and (if planned) damaged streams on one encoding.

    The codec runs under :func:`pytest_ratefloor.isolation.guarded` (in a
    child process unless ``plan.isolate`` is ``False``); ``on_measurement(m)``
    runs here, once the measurement exists, before a rate failure is raised.
    If it raises a failure itself (e.g. a ledger regression) and the rate
    also fails, the rate failure is raised with the other message appended.
    The damaged-stream check runs only when the rate passed; its failure is
    raised after the ledger had its say.
    """
    __tracebackhide__ = True

    def work() -> tuple[Measurement, RateFloorFailure | None, RateFloorFailure | None]:
        __tracebackhide__ = True
        trip = _roundtrip(codec, source, plan)
        m = _measurement(trip, plan)
        m = dataclasses.replace(
            m, tolerance_bits=allowed_excess_bits(m.floor_bits, m.n, plan.rel, plan.abs))
        failure = rate_verdict(m, plan.rel, plan.abs, codec=trip.codec, source=source)
        damage = None
        if plan.corruption and failure is None:
            try:
                _survive_damage(trip, save_dir)
            except RateFloorFailure as exc:
                damage = exc
        return m, failure, damage

    m, failure, damage = _guarded(work, codec, source, plan)
    noisy = noise_warning(m)
    if noisy is not None:
        warnings.warn(NoisyToleranceWarning(noisy), stacklevel=2)
    if on_measurement is not None:
        try:
            on_measurement(m)
        except RateFloorFailure as other:
            if failure is None:
                raise
            raise type(failure)(f"{failure}\n  also: {other}") from other
    if failure is not None:
        raise failure
    if damage is not None:
        raise damage
    return m


def measure(
    codec: Any, source: Source, n: int = DEFAULT_N, seed: int = 0, floor: Floor = DEFAULT_FLOOR,
    isolate: bool | None = None,
) -> Measurement:
    """Encode ``n`` symbols of ``source`` once and measure the length against ``floor``.

    The sample is also decoded and compared (a measurement of a codec that
    does not round-trip is meaningless) and the codec contract is checked on
    a short slice; no tolerance is applied and no edge cases are run.
    """
    __tracebackhide__ = True
    plan = CheckPlan(n=n, seed=seed, floor=floor, edge_cases=False, isolate=isolate)
    return _guarded(lambda: _measurement(_roundtrip(codec, source, plan), plan),
                    codec, source, plan)


def assert_roundtrip(
    codec: Any, source: Source, n: int = ROUNDTRIP_N, seed: int = 0, edge_cases: bool = True,
    isolate: bool | None = None,
) -> None:
    """Every input decodes back exactly: the sample and (by default) the edge cases.

    Also checks the codec contract (raises, wrong type or length, input
    mutation, determinism); see :func:`edge_case_inputs` for the cases.
    """
    __tracebackhide__ = True
    plan = CheckPlan(n=n, seed=seed, edge_cases=edge_cases, isolate=isolate)

    def work() -> None:  # the round trip itself stays in the child: only failures come back
        __tracebackhide__ = True
        _roundtrip(codec, source, plan)

    _guarded(work, codec, source, plan)


def assert_rate(
    codec: Any,
    source: Source,
    n: int = DEFAULT_N,
    seed: int = 0,
    floor: Floor = DEFAULT_FLOOR,
    rel: float | None = None,
    abs: float | None = None,
    isolate: bool | None = None,
) -> Measurement:
    """The measured rate is within the tolerance of ``floor`` and is not impossibly low.

    Returns the :class:`Measurement`. See :mod:`pytest_ratefloor.rate` for the
    tolerance and :func:`impossible_margin` for the impossible-rate rule.
    """
    __tracebackhide__ = True
    plan = CheckPlan(n=n, seed=seed, floor=floor, rel=rel, abs=abs, edge_cases=False,
                     isolate=isolate)
    return run_check(codec, source, plan)


def check(
    codec: Any,
    source: Source,
    on_measurement: Callable[[Measurement], None] | None = None,
    **options: Unpack[CheckOptions],
) -> Measurement:
    """Round trip (with edge cases) and rate in one pass over one encoding of the sample.

    ``options`` are the :class:`CheckOptions` (``n``, ``seed``, ``floor``,
    ``rel``, ``abs``, ``edge_cases``, ``corruption``). See :func:`run_check`
    for ``on_measurement``; with ``corruption=True`` the decoder must also
    survive damaged streams (on at most :data:`CORRUPTION_N` symbols of the
    same sample).
    """
    __tracebackhide__ = True
    return run_check(codec, source, CheckPlan(**options), on_measurement)
