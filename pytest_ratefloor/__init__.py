"""pytest-ratefloor: hold a lossless codec to the entropy floor in its own test suite.

The public API is re-exported here lazily (PEP 562), so that loading the
plugin at pytest start-up does not import numpy-heavy modules a run may not
need. See README.md for usage and DEVELOPERS.md for the architecture.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

_EXPORTS: dict[str, str] = {
    # reference sources and code analysis, also importable as modules
    "sources": "pytest_ratefloor.sources",
    "codes": "pytest_ratefloor.codes",
    # codecs under test
    "StreamCodec": "pytest_ratefloor.codecs",
    "ByteCodec": "pytest_ratefloor.codecs",
    "CommandCodec": "pytest_ratefloor.command",
    "Codebook": "pytest_ratefloor.codes",
    # checks
    "measure": "pytest_ratefloor.checks",
    "assert_roundtrip": "pytest_ratefloor.checks",
    "assert_rate": "pytest_ratefloor.checks",
    "assert_prefix_free": "pytest_ratefloor.codes",
    "assert_kraft": "pytest_ratefloor.codes",
    "assert_uniquely_decodable": "pytest_ratefloor.codes",
    "assert_survives_corruption": "pytest_ratefloor.corruption",
    "Measurement": "pytest_ratefloor.measurement",
    "Floor": "pytest_ratefloor.floors",
    # lossy codecs and checks
    "LossyCodec": "pytest_ratefloor.lossy",
    "LossyMeasurement": "pytest_ratefloor.lossy",
    "measure_lossy": "pytest_ratefloor.lossy",
    "assert_lossy": "pytest_ratefloor.lossy",
    "assert_error_bound": "pytest_ratefloor.lossy",
    "lossy_curve": "pytest_ratefloor.lossy",
    # the pytest side
    "gate": "pytest_ratefloor.harness",
    "RateFloorHarness": "pytest_ratefloor.harness",
    # failures
    "RateFloorFailure": "pytest_ratefloor.errors",
    "RoundTripFailure": "pytest_ratefloor.errors",
    "CodecMisbehaviour": "pytest_ratefloor.errors",
    "RateFailure": "pytest_ratefloor.errors",
    "ImpossibleRate": "pytest_ratefloor.errors",
    "PrefixFailure": "pytest_ratefloor.errors",
    "KraftFailure": "pytest_ratefloor.errors",
    "CodeShapeFailure": "pytest_ratefloor.errors",
    "AmbiguousCode": "pytest_ratefloor.errors",
    "RegressionFailure": "pytest_ratefloor.errors",
    "CorruptionFailure": "pytest_ratefloor.errors",
    "NewCaseFailure": "pytest_ratefloor.errors",
    "LossyRateFailure": "pytest_ratefloor.errors",
    "DistortionFailure": "pytest_ratefloor.errors",
    "ErrorBoundFailure": "pytest_ratefloor.errors",
    "NoisyToleranceWarning": "pytest_ratefloor.errors",
    "LedgerError": "pytest_ratefloor.errors",
    "PluginMemoryError": "pytest_ratefloor.errors",
}

__all__ = ["__version__", *_EXPORTS]


def __getattr__(name: str) -> Any:
    module_name = _EXPORTS.get(name)
    if module_name is None:
        raise AttributeError(f"module 'pytest_ratefloor' has no attribute {name!r}")
    module = importlib.import_module(module_name)
    value = module if module_name.rsplit(".", 1)[-1] == name else getattr(module, name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(__all__)


if TYPE_CHECKING:  # pragma: no cover - for type checkers only
    from pytest_ratefloor import codes as codes
    from pytest_ratefloor import sources as sources
    from pytest_ratefloor.checks import assert_rate as assert_rate
    from pytest_ratefloor.checks import assert_roundtrip as assert_roundtrip
    from pytest_ratefloor.checks import measure as measure
    from pytest_ratefloor.codecs import ByteCodec as ByteCodec
    from pytest_ratefloor.codecs import StreamCodec as StreamCodec
    from pytest_ratefloor.codes import Codebook as Codebook
    from pytest_ratefloor.codes import assert_kraft as assert_kraft
    from pytest_ratefloor.codes import assert_prefix_free as assert_prefix_free
    from pytest_ratefloor.codes import assert_uniquely_decodable as assert_uniquely_decodable
    from pytest_ratefloor.command import CommandCodec as CommandCodec
    from pytest_ratefloor.corruption import assert_survives_corruption as assert_survives_corruption
    from pytest_ratefloor.errors import (
        AmbiguousCode as AmbiguousCode,
    )
    from pytest_ratefloor.errors import (
        CodecMisbehaviour as CodecMisbehaviour,
    )
    from pytest_ratefloor.errors import (
        CodeShapeFailure as CodeShapeFailure,
    )
    from pytest_ratefloor.errors import (
        CorruptionFailure as CorruptionFailure,
    )
    from pytest_ratefloor.errors import (
        DistortionFailure as DistortionFailure,
    )
    from pytest_ratefloor.errors import (
        ErrorBoundFailure as ErrorBoundFailure,
    )
    from pytest_ratefloor.errors import (
        ImpossibleRate as ImpossibleRate,
    )
    from pytest_ratefloor.errors import (
        KraftFailure as KraftFailure,
    )
    from pytest_ratefloor.errors import (
        LedgerError as LedgerError,
    )
    from pytest_ratefloor.errors import (
        LossyRateFailure as LossyRateFailure,
    )
    from pytest_ratefloor.errors import (
        NewCaseFailure as NewCaseFailure,
    )
    from pytest_ratefloor.errors import (
        NoisyToleranceWarning as NoisyToleranceWarning,
    )
    from pytest_ratefloor.errors import (
        PluginMemoryError as PluginMemoryError,
    )
    from pytest_ratefloor.errors import (
        PrefixFailure as PrefixFailure,
    )
    from pytest_ratefloor.errors import (
        RateFailure as RateFailure,
    )
    from pytest_ratefloor.errors import (
        RateFloorFailure as RateFloorFailure,
    )
    from pytest_ratefloor.errors import (
        RegressionFailure as RegressionFailure,
    )
    from pytest_ratefloor.errors import (
        RoundTripFailure as RoundTripFailure,
    )
    from pytest_ratefloor.floors import Floor as Floor
    from pytest_ratefloor.harness import RateFloorHarness as RateFloorHarness
    from pytest_ratefloor.harness import gate as gate
    from pytest_ratefloor.lossy import LossyCodec as LossyCodec
    from pytest_ratefloor.lossy import LossyMeasurement as LossyMeasurement
    from pytest_ratefloor.lossy import assert_error_bound as assert_error_bound
    from pytest_ratefloor.lossy import assert_lossy as assert_lossy
    from pytest_ratefloor.lossy import lossy_curve as lossy_curve
    from pytest_ratefloor.lossy import measure_lossy as measure_lossy
    from pytest_ratefloor.measurement import Measurement as Measurement
