"""The round-trip and rate checks: ``measure``, ``assert_roundtrip``, ``assert_rate``, ``check``.

Every check takes the same arguments, validated once into a :class:`CheckPlan`
(the one place their defaults and rules live), runs one round trip
(:mod:`pytest_ratefloor.roundtrip`), builds the case record and, where a
tolerance applies, the rate verdict (:mod:`pytest_ratefloor.rate`). With
``corruption=True`` the decoder must also survive damaged streams of the very
encoding the round trip made (:mod:`pytest_ratefloor.corruption`).
:func:`plan_for_case` merges one case's own options over shared ones (what
``gate(sources={source: {...}})`` does for each source).

Failures are ``AssertionError`` subclasses from :mod:`pytest_ratefloor.errors`.
"""

from __future__ import annotations

import dataclasses
import enum
import os
import sys
import warnings
from collections.abc import Callable, Hashable, Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Final, TypedDict, TypeVar

import numpy as np

from pytest_ratefloor import isolation, validation
from pytest_ratefloor.codecs import as_codec, codec_identity
from pytest_ratefloor.edge_cases import (
    EDGE_CASE_SETS,
    PASSED,
    EdgeCaseLengths,
    EdgeCaseSetting,
    edge_case_inputs,
    edge_case_lengths,
)
from pytest_ratefloor.errors import NoisyToleranceWarning, PluginMemoryError, RateFloorFailure
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
    "DAMAGE_OPTIONS",
    "DEFAULT_ABS",
    "DEFAULT_N",
    "DEFAULT_REL",
    "IMPOSSIBLE_CONFIDENCE_BITS",
    "OPTION_NAMES",
    "ROUNDTRIP_N",
    "TOLERANCE_OPTIONS",
    "UNSET",
    "CheckOptions",
    "CheckPlan",
    "DamageSettings",
    "assert_rate",
    "assert_roundtrip",
    "check",
    "edge_case_inputs",
    "elias_delta_length",
    "impossible_margin",
    "measure",
    "merge_options",
    "plan_for_case",
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

#: The two options that make one tolerance: a case that gives either replaces both.
TOLERANCE_OPTIONS: Final = ("rel", "abs")
#: The settings of the damaged-stream check: each needs ``corruption=True``.
DAMAGE_OPTIONS: Final = ("must_detect", "trials", "timeout", "memory_limit")


class _Unset(enum.Enum):
    """The value of a damaged-stream setting that was not given (its default applies)."""

    UNSET = "unset"

    def __repr__(self) -> str:
        return "UNSET"


#: A :class:`CheckPlan` damaged-stream setting that was not given.
UNSET: Final = _Unset.UNSET


class CheckOptions(TypedDict, total=False):
    """The keyword arguments every check takes; defaults, rules and costs are :class:`CheckPlan`'s.

    ``n``, ``seed``, ``floor``, ``rel``, ``abs``, ``edge_cases`` (``True``,
    ``False``, a maximum length or ``"short"``/``"long"``), ``corruption``
    and its settings ``must_detect``, ``trials``, ``timeout``,
    ``memory_limit`` (each only with ``corruption=True``), ``isolate``.
    """

    n: int
    seed: int
    floor: Floor
    rel: float | None
    abs: float | None
    edge_cases: EdgeCaseSetting
    corruption: bool
    isolate: bool | None
    must_detect: bool
    trials: int
    timeout: float
    memory_limit: int | None


class DamageSettings(TypedDict):
    """The settings :func:`pytest_ratefloor.corruption.survive_damage` is called with."""

    must_detect: bool
    trials: int
    timeout: float
    memory_limit: int | None


_EDGE_CASES_RULE = ("True, False, a maximum length (an integer >= 1) or one of "
                    + ", ".join(repr(name) for name in EDGE_CASE_SETS))
_DAMAGE_RULE = "given only with corruption=True (a setting of the damaged-stream check)"


def _edge_cases(value: object) -> EdgeCaseSetting:
    """The ``edge_cases`` option, checked: a flag, a maximum length or a set's name."""
    if isinstance(value, str):
        return validation.choice(value, "edge_cases", tuple(EDGE_CASE_SETS))
    try:
        return validation.flag(value, "edge_cases")
    except TypeError:
        pass
    try:
        return validation.integer(value, "edge_cases", minimum=1)
    except TypeError:
        raise TypeError(validation.message("edge_cases", _EDGE_CASES_RULE, value)) from None


@dataclass(frozen=True)
class CheckPlan:
    """The arguments of one check, validated once, and what each costs.

    A wrong type raises ``TypeError``, a bad value ``ValueError``, each
    naming the argument and the value. Costs are for one check; "a round
    trip" is one encode and one decode.

    ``n`` (integer >= 1; default 100 000, or the whole file for a corpus source)
        Symbols in the sample. The sample is drawn, encoded and decoded
        once (the measurement reuses that encoding), and the codec contract
        costs two more encodes of its first 4 096 symbols: time grows
        linearly in ``n``.
    ``seed`` (integer >= 0, default 0)
        The sample's seed (and the damage schedule's). Costs nothing.
    ``floor`` (one of :data:`~pytest_ratefloor.floors.FLOORS`, default ``"sample"``)
        The floor the rate is measured from. The sample's self-information is
        computed for every check (the impossible-rate rule needs it), so
        ``"sample"`` and ``"entropy"`` cost nothing more; ``"empirical"`` a
        histogram of the sample; ``"adaptive"`` a histogram and one log-gamma
        per symbol value (per context for sources with memory); ``"huffman"``
        Huffman code lengths of the pmf (about 0.05 s for 2¹⁶ symbols; one
        code per state or context for sources with memory).
    ``rel``/``abs`` (numbers >= 0; default ``rel=0.01``, see :mod:`pytest_ratefloor.rate`)
        The tolerance over the floor. Cost nothing.
    ``edge_cases`` (default ``True``)
        Which edge cases (:func:`~pytest_ratefloor.edge_cases.edge_case_inputs`)
        are round-tripped, each as its own round trip. A case the same codec
        already passed on the same input earlier in the session is not run
        again (:class:`~pytest_ratefloor.edge_cases.PassedEdgeCases`: the same
        functions or objects, name, version and layout, the same answers to
        the probe cases — the empty input, the single symbols, the alternation
        and every symbol once when that is short, which run in every check —
        and the same input: a constant run of the same symbol, a prefix of the
        same draw). So the long cases cost once per codec and alphabet (the
        sample prefixes once per source, seed and ``n``), and a failing case
        fails every check that includes it, with the same message. Measured
        on zlib-6 and ``uniform(256)`` at ``n`` = 100 000, in process
        (``benchmarks/bench_check.py``): 5.1 ms without edge cases, 5.7 ms
        with them once shared (the bare zlib round trip: 4.6 ms), 15–30 ms
        for the codec's first check, which runs them all.

        * ``True``: all, 27 round trips (fewer for a one-symbol support) of
          337 763 symbols plus the alphabet's size (every symbol once, at
          most 65 536) the first time — about 3.4 times the default sample,
          almost all of it in the five long cases: the two 70 000-symbol
          constant runs and the sample prefixes of 65 535, 65 536 and 65 537
          symbols. When ``n`` < 65 537 those prefixes need a draw of 65 537
          symbols of their own (once per source and seed).
        * ``False``: none; costs nothing.
        * a maximum length (integer >= 1): only the cases of at most that
          many symbols. ``17`` keeps the empty input, one smallest and one
          largest symbol and the sample prefixes of 1…17 symbols (at most
          155 symbols); ``1000`` adds the 1 000-symbol alternation of the
          smallest and largest symbol; "every symbol once" is kept when the
          maximum is at least its length (the support's size, or 4 096 for
          the spread of a larger or unbounded alphabet); ``65535``…``65537``
          add the prefixes of those lengths one by one; ``70000`` or more
          keeps all.
        * ``"short"``: the cases of at most 4 096 symbols (``edge_cases=4096``):
          the empty input, one smallest and one largest symbol, the
          alternation, every symbol once (when the support has at most 4 096
          symbols; the 4 096-symbol spread of a larger or unbounded
          alphabet) and the prefixes of 1…17 symbols: 22 round trips of at
          most 5 251 symbols in all (1 411 for ``uniform(256)``). It leaves
          out what catches 16-bit run and length counters overflowing.
        * ``"long"``: the rest, the cases of more than 4 096 symbols: the two
          70 000-symbol constant runs, the prefixes of 65 535, 65 536 and
          65 537 symbols and every symbol once when the support has 4 097 to
          65 536 symbols: at least 336 608 symbols (and the extra draw when
          ``n`` < 65 537). ``"short"`` and ``"long"`` together are ``True``.
    ``corruption`` (``bool``, default ``False``)
        After the rate passed, feed the decoder damaged copies of the encoding
        of at most :data:`CORRUPTION_N` (10 000) symbols of the same sample (a
        prefix; encoded once more when ``n`` is larger) in a forked worker
        process: ``trials`` decodes plus the worker's start, 23–54 ms for
        200 trials of a fast decoder (``benchmarks/bench_corruption.py``).
    ``must_detect`` (``bool``, default ``False``), ``trials`` (integer >= 1,
    default 200), ``timeout`` (seconds > 0, default 2.0), ``memory_limit``
    (bytes >= 1 of growth, or ``None`` for no limit; default 1 GiB)
        The damaged-stream settings, with the names and rules of
        :func:`~pytest_ratefloor.corruption.assert_survives_corruption`,
        passed to :func:`~pytest_ratefloor.corruption.survive_damage`.
        Each is given only with ``corruption=True``: one given without it is
        a ``ValueError`` (so that ``timeout=10`` is not taken for a limit on
        the round trip, and never turns on a check nobody asked for); a
        field not given holds :data:`UNSET` and :attr:`damage` fills in its
        default. ``must_detect`` costs one comparison of each decoded output
        with the sample; the time grows linearly in ``trials``; ``timeout``
        costs time only when a decode hangs, and a run stops after 5 failed
        trials, so hangs cost at most 5 × ``timeout``; ``memory_limit``
        costs nothing (an address-space limit on the worker on Linux, a
        check after each trial elsewhere).
    ``isolate`` (``bool``, or ``None``: as the run decides, ini ``ratefloor_isolate``)
        How the codec is kept from ending the run unseen
        (:mod:`pytest_ratefloor.isolation`). ``None`` in a pytest run: in this
        process, with a supervisor process over the whole run that names the
        check if the codec ends the process (no cost per check); outside one,
        a forked child. ``True``: a forked child per check, so that only its
        case fails if the codec ends the process; about 2.5 ms of CPU per
        check (``benchmarks/bench_check.py``). ``False``: in process, with
        no supervisor's help.
    """

    n: int | None = None
    seed: int = 0
    floor: Floor = DEFAULT_FLOOR
    rel: float | None = None
    abs: float | None = None
    edge_cases: EdgeCaseSetting = True
    corruption: bool = False
    isolate: bool | None = None
    must_detect: bool | _Unset = UNSET
    trials: int | _Unset = UNSET
    timeout: float | _Unset = UNSET
    memory_limit: int | _Unset | None = UNSET

    def __post_init__(self) -> None:
        setattr_ = object.__setattr__
        if self.n is not None:
            setattr_(self, "n", validation.sample_size(self.n))
        setattr_(self, "seed", validation.seed(self.seed))
        setattr_(self, "floor", check_floor(self.floor))
        tolerance(self.rel, self.abs)
        setattr_(self, "edge_cases", _edge_cases(self.edge_cases))
        setattr_(self, "corruption", validation.flag(self.corruption, "corruption"))
        if self.isolate is not None:
            setattr_(self, "isolate", validation.flag(self.isolate, "isolate"))
        if not isinstance(self.must_detect, _Unset):
            setattr_(self, "must_detect", validation.flag(self.must_detect, "must_detect"))
        if not isinstance(self.trials, _Unset):
            setattr_(self, "trials", validation.integer(self.trials, "trials", minimum=1))
        if not isinstance(self.timeout, _Unset):
            setattr_(self, "timeout", validation.seconds(self.timeout, "timeout"))
        if not isinstance(self.memory_limit, _Unset) and self.memory_limit is not None:
            setattr_(self, "memory_limit",
                     validation.integer(self.memory_limit, "memory_limit", minimum=1))
        if not self.corruption:
            for name in DAMAGE_OPTIONS:
                value = getattr(self, name)
                if not isinstance(value, _Unset):
                    raise ValueError(validation.message(name, _DAMAGE_RULE, value))

    def for_source(self, source: Source, default_n: int = DEFAULT_N) -> CheckPlan:
        """This plan with ``n`` decided: as given, else the whole of a fixed-length
        source (a corpus file's ``length``), else ``default_n``."""
        if self.n is not None:
            return self
        length = getattr(source, "length", None)
        n = int(length) if isinstance(length, int) and length > 0 else default_n
        return dataclasses.replace(self, n=n)

    @property
    def size(self) -> int:
        """``n`` once decided (see :meth:`for_source`)."""
        assert self.n is not None, "CheckPlan.for_source decides n before a check runs"
        return self.n

    @property
    def edge_case_lengths(self) -> EdgeCaseLengths | None:
        """The lengths of the edge cases run (``None``: none)."""
        return edge_case_lengths(self.edge_cases)

    @property
    def damage(self) -> DamageSettings | None:
        """The damaged-stream settings, defaults filled in (``None`` without ``corruption``)."""
        if not self.corruption:
            return None
        from pytest_ratefloor.corruption.check import DEFAULT_TIMEOUT, DEFAULT_TRIALS
        from pytest_ratefloor.corruption.worker import DEFAULT_MEMORY_LIMIT

        return DamageSettings(
            must_detect=False if isinstance(self.must_detect, _Unset) else self.must_detect,
            trials=DEFAULT_TRIALS if isinstance(self.trials, _Unset) else self.trials,
            timeout=DEFAULT_TIMEOUT if isinstance(self.timeout, _Unset) else self.timeout,
            memory_limit=(DEFAULT_MEMORY_LIMIT if isinstance(self.memory_limit, _Unset)
                          else self.memory_limit),
        )

def _check_source(source: object) -> None:
    for attr in ("spec", "sample", "information", "entropy"):
        if not hasattr(source, attr):
            raise TypeError(
                f"source must be a pytest_ratefloor.sources source, got {type(source).__name__} "
                f"(no {attr!r})"
            )


def _roundtrip(codec: Any, source: Source, plan: CheckPlan,
               identity: Hashable | None = None) -> RoundTrip:
    __tracebackhide__ = True
    isolation.step("drawing the sample")
    lengths = plan.edge_case_lengths
    return run_roundtrip(codec, source, plan.size, plan.seed,
                         False if lengths is None else lengths, identity)


def _measurement(trip: RoundTrip, plan: CheckPlan) -> Measurement:
    isolation.step("measuring the rate")
    try:
        return measurement_of(trip.codec, trip.source, trip.sample, plan.seed, trip.encoded,
                              plan.floor, trip.encode_seconds, trip.decode_seconds)
    except MemoryError as exc:  # the floor and the sample's information: the plugin's own
        raise PluginMemoryError(
            f"ratefloor ran out of memory at n={plan.size} while measuring the {plan.floor} "
            f"floor and the sample's information ({exc}); not codec {trip.codec.name!r}: "
            f"check a smaller n or give the test more memory\n  (source {trip.source.spec}, "
            f"n={plan.size}, seed={plan.seed})") from None


def _survive_damage(trip: RoundTrip, settings: DamageSettings, save_dir: SaveDir | None) -> None:
    """The damaged-stream check on the round trip's own encoding (a prefix when n is large)."""
    __tracebackhide__ = True
    from pytest_ratefloor.corruption import survive_damage

    isolation.step("feeding damaged streams to the decoder")
    sample, encoded = trip.prefix(CORRUPTION_N)  # a prefix of the one sample, not a re-draw
    survive_damage(trip.codec, sample.astype(np.int64), encoded, source=trip.source.spec,
                   seed=trip.seed, save_dir=save_dir, **settings)


def _outside_the_package() -> int:
    """The ``stacklevel`` that points a warning at the first caller outside this package
    (the user's test line, however many of the plugin's frames lie between)."""
    package = os.path.dirname(os.path.abspath(__file__))
    frame = sys._getframe(2)  # the caller of the function that asks
    level = 2
    while frame is not None and os.path.abspath(frame.f_code.co_filename).startswith(package):
        frame = frame.f_back  # type: ignore[assignment]
        level += 1
    return level


def _case(codec: Any, source: Source, plan: CheckPlan) -> str:
    """The case in messages about the codec's process (the source is checked already)."""
    return CaseKey(as_codec(codec).name, source.spec, plan.size, plan.seed).phrase


def _guarded(work: Callable[[], _T], codec: Any, source: Source, plan: CheckPlan) -> _T:
    """Run the codec-facing ``work`` where the codec cannot end or stall the session."""
    __tracebackhide__ = True
    return isolation.guarded(work, case=_case(codec, source, plan), isolate=plan.isolate)


def _sharing(codec: Any, plan: CheckPlan) -> tuple[Hashable | None, tuple[object, ...]]:
    """The codec's identity for the session's passed edge cases and the objects kept
    alive with it (``(None, ())``: nothing shared); decided in the test's process."""
    found = None if plan.edge_case_lengths is None else codec_identity(codec)
    return (None, ()) if found is None else found


def run_check(
    codec: Any,
    source: Source,
    plan: CheckPlan,
    on_measurement: Callable[[Measurement], None] | None = None,
    save_dir: SaveDir | None = None,
) -> Measurement:
    """Round trip (with edge cases), rate and (if planned) damaged streams on one encoding.

    The codec runs under :func:`pytest_ratefloor.isolation.guarded` (as
    ``plan.isolate`` says); ``on_measurement(m)``
    runs here, once the measurement exists, before a rate failure is raised.
    If it raises a failure itself (e.g. a ledger regression) and the rate
    also fails, the rate failure is raised with the other message appended.
    The damaged-stream check runs only when the rate passed; its failure is
    raised after the ledger had its say.
    """
    __tracebackhide__ = True
    _check_source(source)
    plan = plan.for_source(source)

    identity, refs = _sharing(codec, plan)

    def work() -> tuple[Measurement, RateFloorFailure | None, RateFloorFailure | None,
                        tuple[Hashable, ...]]:
        __tracebackhide__ = True
        trip = _roundtrip(codec, source, plan, identity)
        m = _measurement(trip, plan)
        m = dataclasses.replace(
            m, tolerance_bits=allowed_excess_bits(m.floor_bits, m.n, plan.rel, plan.abs))
        failure = rate_verdict(m, plan.rel, plan.abs, codec=trip.codec, source=source)
        damage = None
        settings = plan.damage
        if settings is not None and failure is None:
            try:
                _survive_damage(trip, settings, save_dir)
            except RateFloorFailure as exc:
                damage = exc
        return m, failure, damage, trip.passed_edge_cases

    m, failure, damage, passed = _guarded(work, codec, source, plan)
    PASSED.remember(passed, refs)  # in this process: a forked child sent them home
    noisy = noise_warning(m)
    if noisy is not None:
        warnings.warn(NoisyToleranceWarning(noisy), stacklevel=_outside_the_package())
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
    codec: Any, source: Source, n: int | None = None, seed: int = 0,
    floor: Floor = DEFAULT_FLOOR, isolate: bool | None = None,
) -> Measurement:
    """Encode ``n`` symbols of ``source`` once and measure the length against ``floor``.

    The sample is also decoded and compared (a measurement of a codec that
    does not round-trip is meaningless) and the codec contract is checked on
    a short slice; no tolerance is applied and no edge cases are run.
    """
    __tracebackhide__ = True
    _check_source(source)
    plan = CheckPlan(n=n, seed=seed, floor=floor, edge_cases=False,
                     isolate=isolate).for_source(source)
    return _guarded(lambda: _measurement(_roundtrip(codec, source, plan), plan),
                    codec, source, plan)


def assert_roundtrip(
    codec: Any, source: Source, n: int | None = None, seed: int = 0,
    edge_cases: EdgeCaseSetting = True, isolate: bool | None = None,
) -> None:
    """Every input decodes back exactly: the sample and (by default) the edge cases.

    Also checks the codec contract (raises, wrong type or length, input
    mutation, determinism); see :func:`edge_case_inputs` for the cases and
    :class:`CheckPlan` for ``edge_cases`` (``True``, ``False``, a maximum
    length, ``"short"`` or ``"long"``) and what each costs.
    """
    __tracebackhide__ = True
    _check_source(source)
    plan = CheckPlan(n=n, seed=seed, edge_cases=edge_cases,
                     isolate=isolate).for_source(source, ROUNDTRIP_N)

    identity, refs = _sharing(codec, plan)

    def work() -> tuple[Hashable, ...]:  # the round trip stays in the child: failures and
        __tracebackhide__ = True         # the keys of the edge cases passed come back
        return _roundtrip(codec, source, plan, identity).passed_edge_cases

    PASSED.remember(_guarded(work, codec, source, plan), refs)


def assert_rate(
    codec: Any,
    source: Source,
    n: int | None = None,
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
    ``rel``, ``abs``, ``edge_cases``, ``corruption``, ``must_detect``,
    ``trials``, ``timeout``, ``memory_limit``, ``isolate``; rules, defaults
    and costs in :class:`CheckPlan`). See :func:`run_check` for
    ``on_measurement``; with ``corruption=True`` the decoder must also
    survive damaged streams (on at most :data:`CORRUPTION_N` symbols of the
    same sample), with the damaged-stream settings given here.
    """
    __tracebackhide__ = True
    return run_check(codec, source, CheckPlan(**options), on_measurement)


#: Every option a check takes (the fields of :class:`CheckPlan`).
OPTION_NAMES: Final = tuple(field.name for field in dataclasses.fields(CheckPlan))


def merge_options(shared: Mapping[str, Any], own: Mapping[str, Any]) -> dict[str, Any]:
    """One case's ``own`` options over the ``shared`` ones, key by key, with two rules.

    * The tolerance is one setting: a case that gives ``rel`` or ``abs``
      replaces both shared values (so ``abs=0.002`` under a shared
      ``rel=0.02`` is ``abs=0.002`` alone, ``rel`` 0 by the usual rule).
    * ``corruption=False`` turns the damaged-stream check off for the case
      together with its shared settings (``must_detect``, ``trials``,
      ``timeout``, ``memory_limit``), which would otherwise be an error.

    Values are not checked here (:class:`CheckPlan` does that).
    """
    merged = dict(shared)
    if any(name in own for name in TOLERANCE_OPTIONS):
        for name in TOLERANCE_OPTIONS:
            merged.pop(name, None)
    if "corruption" in own and validation.flag(own["corruption"], "corruption") is False:
        for name in DAMAGE_OPTIONS:
            merged.pop(name, None)
    merged.update(own)
    return merged


def plan_for_case(shared: Mapping[str, Any], own: object, where: str) -> CheckPlan:
    """The plan of one case: its ``own`` options (a mapping) merged over ``shared`` ones.

    ``shared`` are options already checked (e.g. by ``CheckPlan(**shared)``);
    see :func:`merge_options` for the merge. Every error names the case:
    ``where`` (e.g. ``"gate source uniform(k=256)"``) leads the message. Not a
    mapping, or a key that is no option (:data:`OPTION_NAMES`), is a
    ``TypeError``/``ValueError``; so is a bad value, as :class:`CheckPlan`
    says, with the key named.
    """
    if not isinstance(own, Mapping):
        raise TypeError(validation.message(
            "its options", "a mapping of check options such as dict(rel=0.02)", own, where))
    for key in own:
        validation.choice(key, "option", OPTION_NAMES, where=where)
    try:
        return CheckPlan(**merge_options(shared, own))
    except (TypeError, ValueError) as exc:
        raise type(exc)(f"{where}: {exc}") from None
