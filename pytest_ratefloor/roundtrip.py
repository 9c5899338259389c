"""The round trip: encode once, decode once, compare — and catch a misbehaving codec.

One round trip draws the sample once, encodes it once (through a read-only
view, so an encoder that writes into its input is caught for free), decodes
it once and compares; the measurement reuses that very encoding. The codec
contract (no mutation of the input, same output for the same input) is
checked on a short slice of the sample, so it costs two small extra encodes
rather than doubling the work. Edge cases (see
:mod:`pytest_ratefloor.edge_cases`) are encoded separately.

Failures: ``RoundTripFailure`` (names the case, its length, the first
mismatching index, expected vs decoded and a window around it) and
``CodecMisbehaviour`` (raised, wrong type or length, mutated input, not
deterministic — naming the codec, the source, ``n`` and the seed).
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from pytest_ratefloor.codecs import Codec, Encoded, as_codec
from pytest_ratefloor.edge_cases import ALL_EDGE_CASES, EdgeCaseLengths, edge_case_inputs
from pytest_ratefloor.errors import (
    CodecContractError,
    CodecMisbehaviour,
    LayoutError,
    RoundTripFailure,
)
from pytest_ratefloor.isolation import step

if TYPE_CHECKING:
    from pytest_ratefloor.sources import Source

__all__ = ["CONTRACT_SLICE", "RoundTrip", "run_roundtrip"]

#: Symbols of the slice on which mutation and determinism are checked.
CONTRACT_SLICE = 4096
_WINDOW = 4


def _symbols_text(values: np.ndarray) -> str:
    return "[" + " ".join(str(int(v)) for v in values) + "]"


@dataclass(frozen=True)
class _Run:
    """What every message names: codec, source, n and seed."""

    codec: Codec
    source: Source
    n: int
    seed: int

    @property
    def origin(self) -> str:
        return f"source {self.source.spec}, n={self.n}, seed={self.seed}"

    def misbehaviour(self, case: str, detail: str) -> CodecMisbehaviour:
        return CodecMisbehaviour(
            f"codec {self.codec.name!r} misbehaved on {case}: {detail}\n  ({self.origin})"
        )


def _encode(codec: Codec, symbols: np.ndarray, run: _Run, case: str) -> Encoded:
    __tracebackhide__ = True
    step(f"encoding {case}")
    try:
        return codec.encode(symbols)
    except CodecContractError as exc:
        raise run.misbehaviour(case, str(exc)) from None
    except LayoutError as exc:
        raise LayoutError(
            f"{exc} — codec {codec.name!r} on {case} ({run.origin})"
        ) from None
    except Exception as exc:
        if isinstance(exc, ValueError) and "read-only" in str(exc):
            raise run.misbehaviour(
                case,
                f"the encoder writes into its input array (numpy refused: {exc}); "
                "encoders must treat the symbols as read-only",
            ) from exc
        raise run.misbehaviour(
            case, f"the encoder raised {type(exc).__name__}: {exc}"
        ) from exc
    except SystemExit as exc:  # would otherwise end the whole test session
        raise run.misbehaviour(case, f"the encoder called sys.exit({exc.code!r})") from exc


def _decode(codec: Codec, encoded: Encoded, n: int, run: _Run, case: str) -> np.ndarray:
    __tracebackhide__ = True
    step(f"decoding {case}")
    try:
        return codec.decode(encoded, n)
    except CodecContractError as exc:
        raise run.misbehaviour(case, str(exc)) from None
    except Exception as exc:
        raise run.misbehaviour(
            case, f"the decoder raised {type(exc).__name__}: {exc}"
        ) from exc
    except SystemExit as exc:
        raise run.misbehaviour(case, f"the decoder called sys.exit({exc.code!r})") from exc


def _compare(expected: np.ndarray, decoded: np.ndarray, run: _Run, case: str) -> None:
    __tracebackhide__ = True
    if np.array_equal(expected, decoded):
        return
    index = int(np.flatnonzero(expected != decoded)[0])
    lo, hi = max(0, index - _WINDOW), min(len(expected), index + _WINDOW + 1)
    raise RoundTripFailure(
        f"codec {run.codec.name!r} does not round-trip {case}\n"
        f"  input length {len(expected)}; first mismatch at index {index}: "
        f"expected {int(expected[index])}, decoded {int(decoded[index])}\n"
        f"  expected[{lo}:{hi}] = {_symbols_text(expected[lo:hi])}\n"
        f"  decoded [{lo}:{hi}] = {_symbols_text(decoded[lo:hi])}\n"
        f"  ({run.origin})"
    )


def _readonly(arr: np.ndarray) -> np.ndarray:
    view = arr.view()
    view.flags.writeable = False
    return view


def _roundtrip_one(codec: Codec, symbols: np.ndarray, run: _Run, case: str) -> None:
    __tracebackhide__ = True
    encoded = _encode(codec, _readonly(symbols), run, case)
    _compare(symbols, _decode(codec, encoded, len(symbols), run, case), run, case)


def _check_untouched(source: Source, sample: np.ndarray, run: _Run, case: str) -> None:
    """On a failed round trip: was the sample itself changed (read-only flag cleared)?

    Re-drawing the sample costs nothing on the passing path, unlike a copy.
    """
    __tracebackhide__ = True
    pristine = np.asarray(source.sample(run.n, run.seed), dtype=np.int64)
    if not np.array_equal(pristine, sample):
        index = int(np.flatnonzero(pristine != sample)[0])
        raise run.misbehaviour(
            case,
            f"the codec modified its input array (it cleared the read-only flag): index "
            f"{index} was {int(pristine[index])}, now {int(sample[index])}",
        )


def _check_contract(codec: Codec, sample: np.ndarray, run: _Run) -> None:
    """Mutation and determinism on a short slice (two extra small encodes)."""
    __tracebackhide__ = True
    head = sample[:CONTRACT_SLICE]
    case = f"the first {len(head)} symbols of the sample"
    probe = head.copy()  # writable on purpose: a mutation must be seen, not refused
    first = _encode(codec, probe, run, case)
    if not np.array_equal(probe, head):
        index = int(np.flatnonzero(probe != head)[0])
        raise run.misbehaviour(
            case,
            f"the encoder modified its input array: index {index} was {int(head[index])}, "
            f"now {int(probe[index])}; encoders must not write into the symbols they are given",
        )
    second = _encode(codec, head.copy(), run, case)
    bits_a, bytes_a = first.signature()
    bits_b, bytes_b = second.signature()
    if bits_a != bits_b or bytes_a != bytes_b:
        where = next(
            (i for i, (a, b) in enumerate(zip(bytes_a, bytes_b)) if a != b),
            min(len(bytes_a), len(bytes_b)),
        )
        raise run.misbehaviour(
            case,
            f"the encoder is not deterministic: the same input gave {bits_a} bits, then "
            f"{bits_b} bits (first differing byte at offset {where})",
        )


@dataclass(frozen=True)
class RoundTrip:
    """One passed round trip: the bound codec, the sample, its encoding and the timings."""

    codec: Codec
    source: Source
    seed: int
    sample: np.ndarray
    encoded: Encoded
    encode_seconds: float
    decode_seconds: float

    def prefix(self, count: int) -> tuple[np.ndarray, Encoded]:
        """The first ``count`` symbols and their encoding (this round trip's own for all of it).

        A shorter prefix is encoded once, through the same misbehaviour checks.
        """
        __tracebackhide__ = True
        if count >= len(self.sample):
            return self.sample, self.encoded
        head = self.sample[:count]
        run = _Run(self.codec, self.source, len(self.sample), self.seed)
        return head, _encode(self.codec, _readonly(head), run,
                             f"the first {count} symbols of the sample")


def run_roundtrip(
    codec: Any, source: Source, n: int, seed: int, edge_cases: bool | EdgeCaseLengths
) -> RoundTrip:
    """Encode and decode the sample once, check the contract and the edge cases.

    ``edge_cases``: ``True`` for all of them, ``False`` for none, or the
    :class:`~pytest_ratefloor.edge_cases.EdgeCaseLengths` to run. The
    arguments are already validated (see :class:`pytest_ratefloor.checks.CheckPlan`).
    """
    __tracebackhide__ = True
    bound = as_codec(codec).for_source(source)
    run = _Run(bound, source, n, seed)
    sample = np.asarray(source.sample(n, seed), dtype=np.int64)
    case = f"the sample ({n} symbols)"
    start = time.perf_counter()
    encoded = _encode(bound, _readonly(sample), run, case)
    encode_seconds = time.perf_counter() - start
    start = time.perf_counter()
    decoded = _decode(bound, encoded, n, run, case)
    decode_seconds = time.perf_counter() - start
    try:
        _compare(sample, decoded, run, case)
    except RoundTripFailure:
        _check_untouched(source, sample, run, case)
        raise
    _check_contract(bound, sample, run)
    if edge_cases is not False:
        lengths = ALL_EDGE_CASES if edge_cases is True else edge_cases
        for name, symbols in edge_case_inputs(source, sample, seed, bound.symbols, lengths):
            _roundtrip_one(bound, symbols, run, name)
    return RoundTrip(bound, source, seed, sample, encoded, encode_seconds, decode_seconds)
