"""pytest hooks of pytest-ratefloor (kept thin; the work lives in other modules).

Minimal first version: the ``ratefloor`` fixture. The ledger engineer extends
this module with options, ini keys, the ledger gate, reports and the xdist relay.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import pytest

if TYPE_CHECKING:
    from pytest_ratefloor.harness import RateFloorHarness
    from pytest_ratefloor.measurement import Measurement

MEASUREMENTS_KEY = pytest.StashKey[list["Measurement"]]()


def pytest_configure(config: pytest.Config) -> None:
    config.stash[MEASUREMENTS_KEY] = []


@pytest.fixture
def ratefloor(request: pytest.FixtureRequest) -> RateFloorHarness:
    """Run round-trip and rate checks of a codec on reference sources and record the figures.

    ``ratefloor.check(codec, source, n=..., floor=..., rel=..., abs=...)``.
    """
    from pytest_ratefloor.harness import RateFloorHarness

    store = request.config.stash[MEASUREMENTS_KEY]
    return RateFloorHarness(request.node, on_measurement=store.append)
