"""The case record: one codec on one reference sample, and the key that names it.

A :class:`Measurement` is the one record of a case. A check builds it from a
run; the ledger stores its recorded form (:meth:`Measurement.recorded`) and
reads it back as a ``Measurement``; reports, the terminal summary and
``ratefloor diff`` show it through a :class:`~pytest_ratefloor.verdicts.Comparison`.
Its derived figures (rate, floor rate, excess, efficiency) are computed here
and nowhere else, and :class:`CaseKey` is the one place that spells a case's
name.

It is plain data on purpose: ``to_record()`` gives only builtin Python types
(``int``, ``float``, ``str``, ``None``, ``dict``) so it can cross the
pytest-xdist channel (execnet rejects numpy scalars and dataclasses) and be
written to JSON; ``from_record()`` reads it back.
"""

from __future__ import annotations

import dataclasses
import hashlib
import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, NamedTuple

if TYPE_CHECKING:  # numpy is imported where a sample is hashed, not at pytest start-up
    from numpy.typing import ArrayLike

__all__ = [
    "DETECTION_Z",
    "LOSSY_FLOOR",
    "NOISY_FLOORS",
    "CaseKey",
    "Measurement",
    "figure",
    "sample_fingerprint",
]

#: Floors taken from the source's law rather than from the sample (see
#: :mod:`pytest_ratefloor.floors`): an ideal coder's length differs from them by
#: the sample's luck, about √(n·V) bits with V the varentropy rate. The others
#: (``sample``, ``empirical``, ``adaptive``) are computed on the very sample.
NOISY_FLOORS = frozenset({"entropy", "huffman"})
#: The floor of a lossy case: n·R(D̂), the source's rate–distortion function at the
#: distortion the codec reached on the sample (bits; see pytest_ratefloor.ratedistortion).
LOSSY_FLOOR = "rate-distortion"
#: One-sided standard normal quantile for 99.9 %: Φ⁻¹(0.999) = 3.0902 (tables;
#: scipy.stats.norm.ppf(0.999) gives 3.090232306). A coder whose expected excess
#: is the detectable excess fails on at least 99.9 % of samples.
DETECTION_Z = 3.090232306167813


class CaseKey(NamedTuple):
    """What identifies a case in the ledger: codec name, source spec, ``n`` and seed."""

    codec: str
    source: str
    n: int
    seed: int

    @property
    def label(self) -> str:
        """The ledger's JSON key and the stale-entry line: ``codec | source | n=.. | seed=..``."""
        return f"{self.codec} | {self.source} | n={self.n} | seed={self.seed}"

    @property
    def phrase(self) -> str:
        """The case in a sentence: ``codec 'x' on bernoulli(p=0.1), n=100000, seed=0``."""
        return f"codec {self.codec!r} on {self.source}, n={self.n}, seed={self.seed}"


def figure(value: float) -> float:
    """A float as the ledger keeps it: rounded to 12 significant digits.

    A recording on another machine then produces no last-digit diff noise.
    """
    return float(f"{value:.12g}")


@dataclass(frozen=True)
class Measurement:
    """The outcome of encoding one sample with one codec.

    ``bits`` is the exact encoded length (headers and side information
    included); ``rate = bits / n``. ``floor_bits`` is the floor named by
    ``floor`` for this very sample; ``floor_rate = floor_bits / n``.
    ``efficiency = floor_rate / rate`` (1.0 means the floor was met).
    ``fingerprint`` identifies the sample (a hash of its symbols) so that a
    ledger entry is only ever compared with a measurement of the same data.

    The fields after ``fingerprint`` describe the run that produced the
    figures; a case read back from a ledger does not have them
    (``sample_information`` and ``spread`` are then ``None``), except
    ``codec_version`` and ``layout``, which the ledger keeps.
    """

    codec: str
    source: str
    n: int
    seed: int
    bits: int
    entropy: float
    floor: str
    floor_bits: float
    fingerprint: str
    sample_information: float | None = None
    spread: float | None = None
    codec_version: str | None = None
    encode_seconds: float = 0.0
    decode_seconds: float = 0.0
    source_family: str = ""
    source_params: dict[str, float] = field(default_factory=dict)
    alphabet_size: int | None = None
    #: bits the check allowed over ``floor_bits`` (its tolerance); ``None`` without one
    tolerance_bits: float | None = None
    #: how the codec turned symbols into bytes or bits: a byte packing such as ``"u8"`` or
    #: ``"zigzag-u16le"``, a short command description, or ``None`` (unknown, or a codec that
    #: has none). Unlike the other run details it is kept in the ledger.
    layout: str | None = None
    #: lossy cases only (``None`` for a lossless one): the measured mean distortion D̂ and
    #: the measure's label (``mse``, ``abs``, ``hamming``, ``matrix:<hash>``). A lossy
    #: case's floor is :data:`LOSSY_FLOOR`: ``floor_bits`` is n·R(D̂), and ``entropy`` is
    #: NaN for a real-valued source (it has no entropy in bits). Both are kept in the ledger.
    distortion: float | None = None
    distortion_measure: str | None = None
    #: lossy cases under MSE: the source's variance σ² (for the SNR); a run detail
    variance: float | None = None

    @property
    def key(self) -> CaseKey:
        """The ledger key: codec name, source spec, n and seed."""
        return CaseKey(self.codec, self.source, self.n, self.seed)

    @property
    def lossy(self) -> bool:
        """A lossy case: it has a measured distortion and the rate–distortion floor."""
        return self.distortion is not None

    @property
    def snr_db(self) -> float | None:
        """MSE cases with a known variance: 10·log10(σ²/D̂) dB (``inf`` at D̂ = 0)."""
        if self.variance is None or self.distortion is None or self.distortion_measure != "mse":
            return None
        if self.distortion <= 0.0:
            return math.inf
        return 10.0 * math.log10(self.variance / self.distortion)

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
        """floor_rate / rate; 1.0 when both are zero, ``inf`` for 0 bits above a floor."""
        if self.bits == 0:
            return 1.0 if self.floor_bits <= 0 else math.inf
        return self.floor_rate / self.rate

    @property
    def floor_spread_bits(self) -> float | None:
        """Sampling spread of the floor against an ideal coder's length, in bits.

        n·``spread`` (= √(n·V), V the varentropy rate) for a floor taken from the
        source's law (:data:`NOISY_FLOORS`); 0 for a floor computed on the sample
        itself; ``None`` when the run did not record the spread (a ledger entry).
        """
        if self.floor not in NOISY_FLOORS:
            return 0.0
        if self.spread is None:
            return None
        return self.spread * self.n  # spread is √(V/n) bits per symbol

    @property
    def detectable_excess(self) -> float | None:
        """The smallest expected excess over the floor (bits/symbol) this case fails on
        at least 99.9 % of samples: the tolerance plus :data:`DETECTION_Z` sampling
        spreads of the floor (none for floors computed on the sample). ``None``
        without a tolerance or a spread.
        """
        spread = self.floor_spread_bits
        if self.tolerance_bits is None or spread is None or not self.n:
            return None
        return (self.tolerance_bits + DETECTION_Z * spread) / self.n

    def recorded(self) -> Measurement:
        """The form a ledger keeps: figures rounded (see :func:`figure`), run details dropped.

        The codec version and the layout are kept (an empty layout reads as none).
        Loading a ledger gives back exactly this record.
        """
        n = int(self.n)
        floor_rate = figure(float(self.floor_rate)) if n else 0.0
        return Measurement(
            codec=str(self.codec), source=str(self.source), n=n, seed=int(self.seed),
            bits=int(self.bits), entropy=figure(float(self.entropy)), floor=str(self.floor),
            floor_bits=floor_rate * n, fingerprint=str(self.fingerprint),
            codec_version=None if self.codec_version is None else str(self.codec_version),
            layout=str(self.layout) if self.layout else None,
            distortion=None if self.distortion is None else figure(float(self.distortion)),
            distortion_measure=(None if self.distortion_measure is None
                                else str(self.distortion_measure)),
        )

    def to_record(self) -> dict[str, Any]:
        """A dict of builtin types only (safe for execnet and JSON)."""
        return {f.name: _plain(getattr(self, f.name)) for f in dataclasses.fields(self)}

    @classmethod
    def from_record(cls, record: dict[str, Any]) -> Measurement:
        """Rebuild a measurement from ``to_record()`` output."""
        names = {f.name for f in dataclasses.fields(cls)}
        missing = {"codec", "source", "n", "seed", "bits"} - record.keys()
        if missing:
            raise ValueError(f"measurement record lacks fields {sorted(missing)}: {record!r}")
        return cls(**{k: v for k, v in record.items() if k in names})


def sample_fingerprint(symbols: ArrayLike, bounds: tuple[int, int] | None = None) -> str:
    """A short hex hash (16 hex digits of SHA-256) identifying a sample's symbols.

    Defined on the values only, independent of dtype and platform: the
    symbols are written in the narrowest of ``u1``, ``<u2``, ``<i4``, ``<i8``
    that holds them, after the header ``b"ratefloor-sample-v1:<tag>:<n>:"``.
    ``bounds`` — a guaranteed (min, max) of the symbols, e.g. a source's
    declared range — only lets the range scan be skipped; the result is the same.
    """
    import numpy as np

    arr = np.asarray(symbols).ravel()
    if arr.dtype.kind not in "iub":
        raise ValueError(f"sample_fingerprint needs integer symbols, got dtype {arr.dtype}")
    if bounds is not None and bounds[0] >= 0 and bounds[1] <= 0xFF:
        lo, hi = 0, 0xFF  # u1 holds them: the narrowest candidate, no scan needed
    else:
        lo, hi = (int(arr.min()), int(arr.max())) if arr.size else (0, 0)
    fitting = [
        dtype
        for dtype in ("u1", "<u2", "<i4", "<i8")
        if np.iinfo(np.dtype(dtype)).min <= lo and hi <= np.iinfo(np.dtype(dtype)).max
    ]
    if not fitting:
        raise ValueError(f"sample_fingerprint: symbols {lo}..{hi} exceed the int64 range")
    dtype = fitting[0]
    digest = hashlib.sha256(f"ratefloor-sample-v1:{dtype.lstrip('<')}:{arr.size}:".encode())
    digest.update(np.ascontiguousarray(arr, dtype=dtype).data.cast("B"))
    return digest.hexdigest()[:16]


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
