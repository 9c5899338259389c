"""The ``Measurement`` record: one codec run on one reference sample.

It is plain data on purpose. ``to_record()`` gives only builtin Python types
(``int``, ``float``, ``str``, ``None``, ``dict``) so it can cross the
pytest-xdist channel (execnet rejects numpy scalars and dataclasses) and be
written to JSON; ``from_record()`` reads it back.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any


@dataclass(frozen=True)
class Measurement:
    """The outcome of encoding one sample with one codec.

    ``bits`` is the exact encoded length (headers and side information
    included); ``rate = bits / n``. ``floor_bits`` is the floor named by
    ``floor`` for this very sample; ``floor_rate = floor_bits / n``.
    ``efficiency = floor_rate / rate`` (1.0 means the floor was met).
    ``fingerprint`` identifies the sample (a hash of its symbols) so that a
    ledger entry is only ever compared with a measurement of the same data.
    """

    codec: str
    source: str
    n: int
    seed: int
    bits: int
    entropy: float
    floor: str
    floor_bits: float
    sample_information: float
    spread: float
    fingerprint: str
    codec_version: str | None = None
    encode_seconds: float = 0.0
    decode_seconds: float = 0.0
    source_family: str = ""
    source_params: dict[str, float] = field(default_factory=dict)
    alphabet_size: int | None = None

    @property
    def key(self) -> tuple[str, str, int, int]:
        """The ledger key: codec name, source spec, n and seed."""
        return (self.codec, self.source, self.n, self.seed)

    @property
    def rate(self) -> float:
        """Measured bits per symbol (0.0 for an empty sample)."""
        return self.bits / self.n if self.n else 0.0

    @property
    def floor_rate(self) -> float:
        """The floor in bits per symbol."""
        return self.floor_bits / self.n if self.n else 0.0

    @property
    def excess(self) -> float:
        """rate − floor_rate, bits per symbol."""
        return self.rate - self.floor_rate

    @property
    def efficiency(self) -> float:
        """floor_rate / rate; 1.0 when both are zero."""
        if self.bits == 0:
            return 1.0 if self.floor_bits <= 0 else float("inf")
        return self.floor_rate / self.rate

    def to_record(self) -> dict[str, Any]:
        """A dict of builtin types only (safe for execnet and JSON)."""
        out: dict[str, Any] = {}
        for f in dataclasses.fields(self):
            out[f.name] = _plain(getattr(self, f.name))
        return out

    @classmethod
    def from_record(cls, record: dict[str, Any]) -> Measurement:
        """Rebuild a measurement from ``to_record()`` output."""
        names = {f.name for f in dataclasses.fields(cls)}
        missing = {"codec", "source", "n", "seed", "bits"} - record.keys()
        if missing:
            raise ValueError(f"measurement record lacks fields {sorted(missing)}: {record!r}")
        return cls(**{k: v for k, v in record.items() if k in names})


def _plain(value: Any) -> Any:
    """Coerce numpy scalars and containers to builtin types, recursively."""
    if value is None or isinstance(value, (bool, str)):
        return value
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if hasattr(value, "item") and not isinstance(value, (int, float)):
        value = value.item()  # numpy scalar
    if isinstance(value, bool):
        return value
    if isinstance(value, int):
        return int(value)
    if isinstance(value, float):
        return float(value)
    kind = type(value).__name__
    raise TypeError(f"measurement field value {value!r} of type {kind} is not plain data")
