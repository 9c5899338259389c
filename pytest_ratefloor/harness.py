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
``ratefloor.entropy``, ``ratefloor.efficiency``. A test that checks several
sources appends one such group per check, in order. The plugin does not add
them again.

``gate(codec, ...)`` returns a test function parametrized over reference
sources (default ``sources.standard_suite()``) whose ids are the source
specs; it uses no markers.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterable
from typing import TYPE_CHECKING, Any

import pytest

from pytest_ratefloor import checks
from pytest_ratefloor.codecs import as_codec
from pytest_ratefloor.floors import check_floor
from pytest_ratefloor.measurement import Measurement

if TYPE_CHECKING:
    from pytest_ratefloor.sources import Source

__all__ = ["RateFloorHarness", "gate", "junit_properties"]

#: The sample size of the corruption check run by ``check(..., corruption=True)``
#: (capped: each damaged stream is decoded in a worker process).
CORRUPTION_N = 10_000


def junit_properties(m: Measurement) -> list[tuple[str, str | int | float]]:
    """The ``(name, value)`` pairs a measurement contributes to JUnit XML."""
    return [
        ("ratefloor.codec", str(m.codec)),
        ("ratefloor.source", str(m.source)),
        ("ratefloor.n", int(m.n)),
        ("ratefloor.seed", int(m.seed)),
        ("ratefloor.bits", int(m.bits)),
        ("ratefloor.rate", float(m.rate)),
        ("ratefloor.floor", str(m.floor)),
        ("ratefloor.floor_rate", float(m.floor_rate)),
        ("ratefloor.entropy", float(m.entropy)),
        ("ratefloor.efficiency", float(m.efficiency)),
    ]


def _tmp_dir(node: Any) -> str | os.PathLike[str] | None:
    """The test's ``tmp_path`` if it can be had, else ``None``."""
    funcargs = getattr(node, "funcargs", None) or {}
    if "tmp_path" in funcargs:
        return funcargs["tmp_path"]
    request = getattr(node, "_request", None)  # pytest's FixtureRequest of a Function item
    if request is not None:
        try:
            return request.getfixturevalue("tmp_path")
        except Exception:
            return None
    return None


class RateFloorHarness:
    """Run the round-trip and rate checks inside a test and record every measurement.

    Built by the plugin's ``ratefloor`` fixture as
    ``RateFloorHarness(request.node, on_measurement=...)``; ``node`` may be
    ``None`` outside pytest (then nothing is attached to a test).
    """

    def __init__(
        self,
        node: Any = None,
        on_measurement: Callable[[Measurement], None] | None = None,
    ) -> None:
        self.node = node
        self._on_measurement = on_measurement
        self.measurements: list[Measurement] = []

    def _record(self, m: Measurement) -> None:
        __tracebackhide__ = True  # a ledger regression raised below belongs to the user's test
        self.measurements.append(m)
        properties = getattr(self.node, "user_properties", None)
        if properties is not None:
            properties.extend(junit_properties(m))
        if self._on_measurement is not None:
            self._on_measurement(m)

    def check(
        self,
        codec: Any,
        source: Source,
        n: int = 100_000,
        seed: int = 0,
        floor: str = "entropy",
        rel: float | None = None,
        abs: float | None = None,
        edge_cases: bool = True,
        corruption: bool = False,
    ) -> Measurement:
        """Round trip (sample and edge cases), rate within tolerance, recorded.

        With ``corruption=True`` the decoder must then also survive damaged
        streams (:func:`pytest_ratefloor.corruption.assert_survives_corruption`
        on ``min(n, 10 000)`` symbols; damaged streams of failures are saved
        in the test's ``tmp_path``). Returns the measurement.
        """
        __tracebackhide__ = True
        m = checks.check(
            codec,
            source,
            n=n,
            seed=seed,
            floor=floor,
            rel=rel,
            abs=abs,
            edge_cases=edge_cases,
            on_measurement=self._record,
        )
        if corruption:
            from pytest_ratefloor.corruption import assert_survives_corruption

            assert_survives_corruption(
                as_codec(codec).for_source(source),
                source,
                n=min(n, CORRUPTION_N),
                seed=seed,
                save_dir=_tmp_dir(self.node),
            )
        return m

    def measure(
        self,
        codec: Any,
        source: Source,
        n: int = 100_000,
        seed: int = 0,
        floor: str = "entropy",
    ) -> Measurement:
        """Measure and record without a tolerance (the sample must still round-trip)."""
        __tracebackhide__ = True
        m = checks.measure(codec, source, n=n, seed=seed, floor=floor)
        self._record(m)
        return m


def gate(
    codec: Any,
    sources: Iterable[Source] | None = None,
    n: int = 100_000,
    seed: int = 0,
    floor: str = "entropy",
    rel: float | None = None,
    abs: float | None = None,
    edge_cases: bool = True,
) -> Callable[..., None]:
    """A test function that checks ``codec`` on every source (default: the standard suite).

    Use it as a module attribute whose name starts with ``test``::

        test_tide_codec = gate(codec, rel=0.02)

    The arguments are checked now, so a typo fails at collection.
    """
    as_codec(codec)
    check_floor(floor)
    checks.tolerance(rel, abs)
    if sources is None:
        from pytest_ratefloor.sources import standard_suite

        suite = list(standard_suite())
    else:
        suite = list(sources)
    if not suite:
        raise ValueError("gate(sources=...) needs at least one source, got none")
    for s in suite:
        if not isinstance(getattr(s, "spec", None), str):
            raise TypeError(f"gate sources must be reference sources, got {s!r}")

    @pytest.mark.parametrize("ratefloor_source", suite, ids=[s.spec for s in suite])
    def test_ratefloor_gate(ratefloor: RateFloorHarness, ratefloor_source: Source) -> None:
        __tracebackhide__ = True
        ratefloor.check(
            codec,
            ratefloor_source,
            n=n,
            seed=seed,
            floor=floor,
            rel=rel,
            abs=abs,
            edge_cases=edge_cases,
        )

    return test_ratefloor_gate
