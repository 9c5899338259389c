"""``LossyCodec`` and one lossy round trip: encode once, decode once, catch misbehaviour.

A lossy codec is two functions: ``encode(samples) -> bytes | bytearray |
memoryview | bitarray | (bytes, nbits)`` and ``decode(data, n) -> n
reconstructed samples``. The samples are a read-only ``float64`` array for a
real-valued source and an ``int64`` array for a finite-alphabet one; the
reconstruction must be ``n`` finite numbers (a list, tuple or 1-D numpy array;
integers for a finite-alphabet source). Everything the decoder receives is
counted, exactly as for lossless codecs (:func:`pytest_ratefloor.streams.encoded_from_stream`):
besides the payload it is told only ``n``.

Misbehaviour is reported as :class:`~pytest_ratefloor.errors.CodecMisbehaviour`
in the wording of the lossless round trip (:mod:`pytest_ratefloor.roundtrip`):
the encoder or decoder raised, returned the wrong type or length, a
reconstruction that is not finite, wrote into its input, or encoded the same
input differently twice (checked on a short slice: two extra small encodes).
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from pytest_ratefloor import validation
from pytest_ratefloor.codecs import FunctionPair
from pytest_ratefloor.errors import CodecContractError, CodecMisbehaviour
from pytest_ratefloor.isolation import step
from pytest_ratefloor.streams import (
    Encoded,
    encoded_from_stream,
    not_a_sequence,
    symbols_from_decoder,
    type_name,
)

if TYPE_CHECKING:
    from pytest_ratefloor.lossy.distortion import LossySource

__all__ = ["CONTRACT_SLICE", "LossyCodec", "LossyRun", "reconstruction_array", "run_lossy"]

#: Samples of the slice on which mutation and determinism are checked.
CONTRACT_SLICE = 4096


class LossyCodec(FunctionPair):
    """A lossy codec given as two functions.

    ``encode(samples: numpy.ndarray) -> bytes | bytearray | memoryview |
    bitarray | (bytes, nbits)``; ``decode(data, n) -> n reconstructed samples``.
    ``name`` defaults to the encoder's qualified name; ``version`` is free
    text (``None``: unversioned). The samples handed to ``encode`` must be
    treated as read-only.
    """

    def encode(self, samples: np.ndarray) -> Encoded:
        """Call the user's encoder and count the bits of what it returned."""
        return encoded_from_stream(self._encode(samples))

    def decode(self, encoded: Encoded, n: int, real: bool) -> np.ndarray:
        """Call the user's decoder and check its reconstruction (:func:`reconstruction_array`)."""
        return reconstruction_array(self._decode(encoded.payload, n), n, real)


def _plainly_not_samples(value: object) -> str | None:
    """What a reconstruction is, when it is plainly no sequence of numbers (bytes included:
    a lossy decoder returns samples, not a stream)."""
    if isinstance(value, (str, bytes, bytearray, memoryview)):
        return f"{type_name(value)} {validation.show(value)} (not a sequence of numbers)"
    return not_a_sequence(value)


def reconstruction_array(value: object, n: int, real: bool) -> np.ndarray:
    """A decoder's reconstruction as a ``float64`` (``real``) or ``int64`` array of ``n`` values.

    :raises CodecContractError: no flat sequence of ``n`` numbers, a number
        that is not finite, or (for a finite-alphabet source) a non-integer.
    """
    if not real:
        return symbols_from_decoder(value, n)
    expected = f"expected a sequence or array of {n} finite numbers"
    problem = _plainly_not_samples(value)
    if problem is not None:
        raise CodecContractError(f"decoder returned {problem}; {expected}")
    try:
        arr = value if isinstance(value, np.ndarray) else np.asarray(value)
    except (TypeError, ValueError, OverflowError) as exc:
        raise CodecContractError(
            f"decoder returned {type_name(value)} that is not a sequence of numbers ({exc}); "
            f"{expected}") from exc
    if arr.ndim != 1:
        raise CodecContractError(
            f"decoder returned {type_name(value)} of shape {arr.shape}; expected a flat (1-D) "
            f"sequence of {n} numbers")
    if arr.dtype.kind not in "iuf" and not (arr.size == 0 and arr.dtype.kind == "O"):
        first = validation.show(arr[0]) if arr.size else "none"
        raise CodecContractError(
            f"decoder returned {type_name(value)} of dtype {arr.dtype} (first {first}); "
            "expected real numbers")
    if len(arr) != n:
        raise CodecContractError(f"decoder returned {len(arr)} samples; expected n={n}")
    out = arr.astype(np.float64)
    bad = np.flatnonzero(~np.isfinite(out))
    if bad.size:
        i = int(bad[0])
        raise CodecContractError(
            f"decoder returned a non-finite reconstruction: {out[i]} at index {i} "
            f"({bad.size} of {n} values not finite)")
    return out


@dataclass(frozen=True)
class LossyRun:
    """What every message names: the codec, the source, ``n`` and the seed."""

    codec: LossyCodec
    source: LossySource
    n: int
    seed: int

    @property
    def origin(self) -> str:
        return f"source {self.source.spec}, n={self.n}, seed={self.seed}"

    def misbehaviour(self, case: str, detail: str) -> CodecMisbehaviour:
        return CodecMisbehaviour(
            f"codec {self.codec.name!r} misbehaved on {case}: {detail}\n  ({self.origin})")


def _readonly(arr: np.ndarray) -> np.ndarray:
    view = arr.view()
    view.flags.writeable = False
    return view


def _encode(run: LossyRun, samples: np.ndarray, case: str) -> Encoded:
    __tracebackhide__ = True
    step(f"encoding {case}")
    try:
        return run.codec.encode(samples)
    except CodecContractError as exc:
        raise run.misbehaviour(case, str(exc)) from None
    except Exception as exc:
        if isinstance(exc, ValueError) and "read-only" in str(exc):
            raise run.misbehaviour(
                case, f"the encoder writes into its input array (numpy refused: {exc}); "
                "encoders must treat the samples as read-only") from exc
        raise run.misbehaviour(case, f"the encoder raised {type(exc).__name__}: {exc}") from exc
    except SystemExit as exc:  # would otherwise end the whole test session
        raise run.misbehaviour(case, f"the encoder called sys.exit({exc.code!r})") from exc


def _decode(run: LossyRun, encoded: Encoded, n: int, real: bool, case: str) -> np.ndarray:
    __tracebackhide__ = True
    step(f"decoding {case}")
    try:
        return run.codec.decode(encoded, n, real)
    except CodecContractError as exc:
        raise run.misbehaviour(case, str(exc)) from None
    except Exception as exc:
        raise run.misbehaviour(case, f"the decoder raised {type(exc).__name__}: {exc}") from exc
    except SystemExit as exc:
        raise run.misbehaviour(case, f"the decoder called sys.exit({exc.code!r})") from exc


def _value(x: object) -> str:
    return validation.show(x)


def _check_contract(run: LossyRun, sample: np.ndarray) -> None:
    """Mutation and determinism on a short slice (two extra small encodes)."""
    __tracebackhide__ = True
    head = sample[:CONTRACT_SLICE]
    case = f"the first {len(head)} samples"
    probe = head.copy()  # writable on purpose: a mutation must be seen, not refused
    first = _encode(run, probe, case)
    changed = np.flatnonzero(~((probe == head) | (np.isnan(probe) & np.isnan(head)))
                             if probe.dtype.kind == "f" else probe != head)
    if changed.size:
        i = int(changed[0])
        raise run.misbehaviour(
            case, f"the encoder modified its input array: index {i} was {_value(head[i])}, "
            f"now {_value(probe[i])}; encoders must not write into the samples they are given")
    second = _encode(run, head.copy(), case)
    bits_a, bytes_a = first.signature()
    bits_b, bytes_b = second.signature()
    if bits_a != bits_b or bytes_a != bytes_b:
        where = next((i for i, (a, b) in enumerate(zip(bytes_a, bytes_b)) if a != b),
                     min(len(bytes_a), len(bytes_b)))
        raise run.misbehaviour(
            case, f"the encoder is not deterministic: the same input gave {bits_a} bits, then "
            f"{bits_b} bits (first differing byte at offset {where})")


@dataclass(frozen=True)
class LossyRoundTrip:
    """One lossy round trip: the sample, its encoding, the reconstruction, the timings."""

    sample: np.ndarray
    encoded: Encoded
    reconstruction: np.ndarray
    real: bool
    encode_seconds: float
    decode_seconds: float


def run_lossy(run: LossyRun) -> LossyRoundTrip:
    """Draw the sample once, encode it once (read-only), decode once, check the contract.

    The arguments are already validated. The sample is ``float64`` when the
    source draws real numbers, else ``int64``.
    """
    __tracebackhide__ = True
    raw = np.asarray(run.source.sample(run.n, run.seed))
    real = raw.dtype.kind == "f"
    sample = raw.astype(np.float64 if real else np.int64, copy=False)
    case = f"the sample ({run.n} samples)"
    start = time.perf_counter()
    encoded = _encode(run, _readonly(sample), case)
    encode_seconds = time.perf_counter() - start
    start = time.perf_counter()
    recon = _decode(run, encoded, run.n, real, case)
    decode_seconds = time.perf_counter() - start
    pristine = np.asarray(run.source.sample(run.n, run.seed)).astype(sample.dtype, copy=False)
    if not np.array_equal(pristine, sample):
        i = int(np.flatnonzero(pristine != sample)[0])
        raise run.misbehaviour(
            case, f"the codec modified its input array (it cleared the read-only flag): index "
            f"{i} was {_value(pristine[i])}, now {_value(sample[i])}")
    _check_contract(run, sample)
    return LossyRoundTrip(sample, encoded, recon, real, encode_seconds, decode_seconds)
