"""The object behind the ``ratefloor`` fixture, and ``gate()``.

``RateFloorHarness.check`` runs the round trip (with edge cases) and the
rate check on one encoding of the sample (see :mod:`pytest_ratefloor.checks`),
records the measurement — in ``harness.measurements``, through the
``on_measurement`` callback the plugin passes (ledger, report, summary), and
as JUnit XML properties of the test — and only then raises a rate failure.

JUnit properties: each measurement appends these ``(name, value)`` pairs to
``node.user_properties`` (builtin ``str``/``int``/``float`` values only, so
they also cross the pytest-xdist channel): ``ratefloor.codec``,
``ratefloor.source``, ``ratefloor.n``, ``ratefloor.seed``, ``ratefloor.bits``,
``ratefloor.rate``, ``ratefloor.floor``, ``ratefloor.floor_rate``,
``ratefloor.entropy``, ``ratefloor.efficiency`` (figures rounded to 12
significant digits as the ledger keeps them, so no float noise such as
``2.4650000000000003``). A test that checks several
sources appends one such group per check, in order. The plugin does not add
them again.

``gate(codec, ...)`` returns a test function parametrized over reference
sources (default ``sources.standard_suite()``) whose ids are the source
specs; it uses no markers. Sources given as a mapping carry their own
options (tolerance, floor, ...) over the gate's.
"""

from __future__ import annotations

import dataclasses
import math
import sys
from collections.abc import Callable, Iterable, Mapping
from typing import TYPE_CHECKING, Any, cast, overload

import pytest

from pytest_ratefloor import checks
from pytest_ratefloor.checks import CheckOptions, CheckPlan, SaveDir, plan_for_case
from pytest_ratefloor.codecs import as_codec
from pytest_ratefloor.floors import DEFAULT_FLOOR, Floor
from pytest_ratefloor.lossy.codec import LossyCodec
from pytest_ratefloor.lossy.gating import LossyOptions, LossyPlan, run_lossy_check
from pytest_ratefloor.measurement import Measurement, figure

if TYPE_CHECKING:
    from typing_extensions import Unpack

    from pytest_ratefloor.session import GateSession
    from pytest_ratefloor.sources import Source

__all__ = ["RateFloorHarness", "gate", "junit_properties"]


def junit_properties(m: Measurement) -> list[tuple[str, str | int | float]]:
    """The ``(name, value)`` pairs a measurement contributes to JUnit XML."""
    out: list[tuple[str, str | int | float]] = [
        ("ratefloor.codec", str(m.codec)),
        ("ratefloor.source", str(m.source)),
        ("ratefloor.n", int(m.n)),
        ("ratefloor.seed", int(m.seed)),
        ("ratefloor.bits", int(m.bits)),
        ("ratefloor.rate", figure(m.rate)),
        ("ratefloor.floor", str(m.floor)),
        ("ratefloor.floor_rate", figure(m.floor_rate)),
    ]
    if math.isfinite(m.entropy):  # a real-valued source (lossy) has none
        out.append(("ratefloor.entropy", figure(m.entropy)))
    out.append(("ratefloor.efficiency", figure(m.efficiency)))
    if m.distortion is not None:
        out += [("ratefloor.distortion", figure(m.distortion)),
                ("ratefloor.distortion_measure", str(m.distortion_measure)),
                ("ratefloor.gap", figure(m.excess))]
        if m.snr_db is not None and math.isfinite(m.snr_db):
            out.append(("ratefloor.snr_db", figure(m.snr_db)))
    return out



class RateFloorHarness:
    """Run the round-trip and rate checks inside a test and record every measurement.

    The plugin's ``ratefloor`` fixture builds one per test
    (:meth:`for_test`). Outside pytest, ``RateFloorHarness()`` works too:
    ``node`` (anything with ``user_properties``) receives the JUnit
    properties, ``on_measurement`` sees every measurement, and ``save_dir``
    (called only when a damaged-stream check fails) says where the damaged
    streams go, and ``isolate`` is the default for checks that do not say
    (``None``: as the run decides from its ini ``ratefloor_isolate``; see
    :mod:`pytest_ratefloor.isolation`).
    """

    def __init__(
        self,
        node: Any = None,
        on_measurement: Callable[[Measurement], None] | None = None,
        save_dir: SaveDir | None = None,
        isolate: bool | None = None,
    ) -> None:
        self.node = node
        self._on_measurement = on_measurement
        self._save_dir = save_dir
        self._isolate = isolate
        self.measurements: list[Measurement] = []

    @classmethod
    def for_test(cls, request: pytest.FixtureRequest, session: GateSession) -> RateFloorHarness:
        """The harness of one test: gated on the run's ledger, damaged streams in ``tmp_path``."""
        item = request.node

        def on_measurement(m: Measurement) -> None:
            __tracebackhide__ = True
            session.gate_measurement(item, m)

        # isolate=None: the run's ini ratefloor_isolate decided the process default
        # (isolation.push_watch in GateSession.watch_process)
        return cls(item, on_measurement, save_dir=lambda: request.getfixturevalue("tmp_path"))

    def _record(self, m: Measurement) -> None:
        __tracebackhide__ = True  # a ledger regression raised below belongs to the user's test
        self.measurements.append(m)
        properties = getattr(self.node, "user_properties", None)
        if properties is not None:
            properties.extend(junit_properties(m))
        if self._on_measurement is not None:
            self._on_measurement(m)

    def run(self, codec: Any, source: Source, plan: CheckPlan) -> Measurement:
        """:meth:`check` with its arguments already validated (what ``gate()`` calls)."""
        __tracebackhide__ = True
        if plan.isolate is None:
            plan = dataclasses.replace(plan, isolate=self._isolate)
        return checks.run_check(codec, source, plan, on_measurement=self._record,
                                save_dir=self._save_dir)

    def run_lossy(self, codec: LossyCodec, source: Any, plan: LossyPlan) -> Measurement:
        """A lossy check with its options already validated (what ``gate()`` calls)."""
        __tracebackhide__ = True
        return run_lossy_check(codec, source, plan, on_measurement=self._record,
                               default_isolate=self._isolate)

    @overload
    def check(self, codec: LossyCodec, source: Any, **options: Unpack[LossyOptions]
              ) -> Measurement: ...

    @overload
    def check(self, codec: Any, source: Source, **options: Unpack[CheckOptions]
              ) -> Measurement: ...

    def check(self, codec: Any, source: Any, **options: Any) -> Measurement:
        """Round trip (sample and edge cases), rate within tolerance, recorded.

        A :class:`~pytest_ratefloor.LossyCodec` is checked against the source's
        rate–distortion function instead: its options are ``n``, ``seed``,
        ``distortion``, ``max_gap``, ``max_distortion``, ``max_abs`` and
        ``isolate`` (see :class:`~pytest_ratefloor.lossy.gating.LossyPlan`); the
        ledger keeps its bits and its distortion.

        ``options`` are the :class:`~pytest_ratefloor.checks.CheckOptions`:
        ``n`` (default 100 000; a corpus file: all of it), ``seed`` (0), ``floor`` (``"sample"``),
        ``rel``/``abs`` (default ``rel=0.01``), ``edge_cases`` (``True``;
        or ``False``, a maximum length, ``"short"``, ``"long"``),
        ``corruption`` (``False``) with ``must_detect`` (``False``),
        ``trials`` (200), ``timeout`` (2.0 s) and ``memory_limit`` (1 GiB),
        and ``isolate`` (the run's setting); rules and what each costs are
        in :class:`~pytest_ratefloor.checks.CheckPlan`. With
        ``corruption=True`` the decoder must then also survive damaged
        streams of the same encoding (on at most
        10 000 symbols of the sample; see
        :func:`pytest_ratefloor.corruption.assert_survives_corruption` for what
        counts as surviving; damaged streams of failures are saved in the
        test's ``tmp_path``); ``must_detect``, ``trials``, ``timeout`` and
        ``memory_limit`` are its settings and need ``corruption=True``
        (given without it they are a ``ValueError``). Returns the measurement.
        """
        __tracebackhide__ = True
        if isinstance(codec, LossyCodec):
            return self.run_lossy(codec, source, LossyPlan.of(options))
        return self.run(codec, source, CheckPlan(**cast("CheckOptions", options)))

    def measure(
        self,
        codec: Any,
        source: Source,
        n: int | None = None,
        seed: int = 0,
        floor: Floor = DEFAULT_FLOOR,
        isolate: bool | None = None,
    ) -> Measurement:
        """Measure and record without a tolerance (the sample must still round-trip)."""
        __tracebackhide__ = True
        m = checks.measure(codec, source, n=n, seed=seed, floor=floor,
                           isolate=self._isolate if isolate is None else isolate)
        self._record(m)
        return m


@overload
def gate(codec: LossyCodec, sources: Any = None, **options: Unpack[LossyOptions]
         ) -> Callable[..., None]: ...


@overload
def gate(codec: Any,
         sources: Source | Iterable[Source] | Mapping[Source, CheckOptions] | None = None,
         **options: Unpack[CheckOptions]) -> Callable[..., None]: ...


def gate(
    codec: Any,
    sources: Any = None,
    **options: Any,
) -> Callable[..., None]:
    """A test function that checks ``codec`` on every source (default: the standard suite).

    Use it as a module attribute whose name starts with ``test``::

        test_tide_codec = gate(codec, rel=0.02)

    ``options`` are those of :meth:`RateFloorHarness.check`
    (:class:`~pytest_ratefloor.checks.CheckOptions`; rules and costs in
    :class:`~pytest_ratefloor.checks.CheckPlan`) and apply to every source; for a
    :class:`~pytest_ratefloor.LossyCodec` they are those of a lossy check
    (:class:`~pytest_ratefloor.lossy.gating.LossyPlan`: ``n``, ``seed``,
    ``distortion``, ``max_gap``, ``max_distortion``, ``max_abs``, ``isolate``).

    ``sources`` is an iterable of sources, or a mapping from each source to
    its own options, which are merged over the gate's::

        test_flags = gate(codec, sources={
            sources.bernoulli(0.01): dict(abs=0.002, floor="adaptive"),
            sources.bernoulli(0.2): dict(corruption=True, must_detect=True),
            sources.uniform(256): {},          # the gate's options alone
        }, rel=0.02)

    A source's own option replaces the gate's of the same name, except that
    the tolerance is one setting — a source that gives ``rel`` or ``abs``
    replaces both of the gate's (above, ``bernoulli(p=0.01)`` is held to
    ``abs=0.002`` alone, the others to ``rel=0.02``) — and that
    ``corruption=False`` also drops the gate's damaged-stream settings for
    that source (see :func:`~pytest_ratefloor.checks.merge_options`).

    The arguments are checked now, so a typo fails at collection: a bad
    gate-level option as :class:`~pytest_ratefloor.checks.CheckPlan` says,
    and for a source's own options an error that starts with
    ``gate source <spec>:`` and names the key — a key that is no option
    (``ValueError``, a non-string key ``TypeError``), options that are not a
    mapping (``TypeError``), or a bad value. Test ids are the source specs
    either way.
    """
    lossy = isinstance(codec, LossyCodec)
    if not lossy:
        as_codec(codec)
    plan: CheckPlan | LossyPlan = (LossyPlan.of(options) if lossy
                                   else CheckPlan(**cast("CheckOptions", options)))
    own: Mapping[Source, object] = {}
    if sources is None:
        from pytest_ratefloor.sources import standard_suite

        suite = list(standard_suite())
    elif isinstance(sources, Mapping):
        suite = list(sources)
        own = sources
    elif isinstance(getattr(sources, "spec", None), str):
        suite = [cast("Source", sources)]  # one source (one corpus file): a suite of one
    else:
        suite = list(cast("Iterable[Source]", sources))
    if not suite:
        raise ValueError("gate(sources=...) needs at least one source, got none")
    for s in suite:
        if not isinstance(getattr(s, "spec", None), str):
            raise TypeError(f"gate sources must be reference sources, got {s!r}")
    plans: dict[str, CheckPlan | LossyPlan] = {
        s.spec: (_lossy_plan_for_case(options, own[s], f"gate source {s.spec}") if lossy
                 else plan_for_case(options, own[s], f"gate source {s.spec}"))
        if s in own else plan for s in suite}

    @pytest.mark.parametrize("ratefloor_source", suite, ids=[s.spec for s in suite])
    def test_ratefloor_gate(ratefloor: RateFloorHarness, ratefloor_source: Source) -> None:
        __tracebackhide__ = True
        case_plan = plans[ratefloor_source.spec]
        if isinstance(case_plan, LossyPlan):
            ratefloor.run_lossy(codec, ratefloor_source, case_plan)
        else:
            ratefloor.run(codec, ratefloor_source, case_plan)

    caller = sys._getframe(1)
    # pytest reports a test at its function's source; these tests are the user's gate() call
    test_ratefloor_gate.place_as = _anchor_at(  # type: ignore[attr-defined]
        caller.f_code.co_filename, caller.f_lineno)
    return test_ratefloor_gate


def _lossy_plan_for_case(shared: Mapping[str, Any], own: object, where: str) -> LossyPlan:
    """A lossy gate source's own options merged over the gate's (a source's own value
    replaces the gate's of the same name)."""
    if not isinstance(own, Mapping):
        raise TypeError(f"{where}: options must be a mapping, got {own!r}")
    for key in own:
        if not isinstance(key, str):
            raise TypeError(f"{where}: option names must be strings, got {key!r}")
    return LossyPlan.of({**shared, **own}, where)


def _anchor_at(filename: str, lineno: int) -> Callable[[], None]:
    """A function that is never called, whose code claims to be at ``filename:lineno``.

    pytest locates a test (in its failure headers, ``--collect-only``, IDEs and
    JUnit XML) at the source of its function, or of the object the function's
    ``place_as`` names; a gate's tests then point at the user's ``gate()`` line
    rather than at this module.
    """
    def anchor() -> None:
        """The place of a gate() call."""

    anchor.__code__ = anchor.__code__.replace(co_filename=filename, co_firstlineno=lineno)
    return anchor
