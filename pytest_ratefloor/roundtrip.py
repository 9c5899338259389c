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

import hashlib
import time
from collections.abc import Callable, Hashable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, TypeVar

import numpy as np

from pytest_ratefloor.codecs import ByteCodec, Codec, Encoded, as_codec
from pytest_ratefloor.edge_cases import PASSED, EdgeCaseLengths, plan_edge_cases
from pytest_ratefloor.errors import (
    CodecContractError,
    CodecMisbehaviour,
    LayoutError,
    PluginMemoryError,
    RoundTripFailure,
)
from pytest_ratefloor.isolation import step

if TYPE_CHECKING:
    from pytest_ratefloor.sources import Source

__all__ = ["CONTRACT_SLICE", "RoundTrip", "narrow_dtype", "run_roundtrip"]

_T = TypeVar("_T")

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

    def out_of_memory(self, doing: str, exc: BaseException) -> PluginMemoryError:
        """The plugin's own allocation failed: say so, with ``n`` and the step."""
        detail = f" ({exc})" if str(exc) else ""
        return PluginMemoryError(
            f"ratefloor ran out of memory at n={self.n} while {doing}{detail}: the plugin's "
            f"own allocation failed, not codec {self.codec.name!r}; check a smaller n or "
            f"give the test more memory\n  ({self.origin})"
        )

    def misbehaviour(self, case: str, detail: str) -> CodecMisbehaviour:
        return CodecMisbehaviour(
            f"codec {self.codec.name!r} misbehaved on {case}: {detail}\n  ({self.origin})"
        )


def _encode(codec: Codec, symbols: np.ndarray, run: _Run, case: str) -> Encoded:
    __tracebackhide__ = True
    step(f"encoding {case}")
    try:
        return codec.encode(symbols)
    except PluginMemoryError as exc:
        raise run.out_of_memory(f"encoding {case}", exc) from None
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
    except PluginMemoryError as exc:
        raise run.out_of_memory(f"decoding {case}", exc) from None
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


def _plugin_step(run: _Run, doing: str, work: Callable[[], _T]) -> _T:
    """Run one of the plugin's own steps; its ``MemoryError`` is the plugin's, named so."""
    __tracebackhide__ = True
    try:
        return work()
    except MemoryError as exc:
        raise run.out_of_memory(doing, exc) from None


#: The narrow dtypes a sample is kept in, narrowest first, with the symbols each holds.
_NARROW: tuple[tuple[str, int, int], ...] = (
    ("u1", 0, 0xFF), ("<u2", 0, 0xFFFF), ("<i4", -(2**31), 2**31 - 1),
)


def narrow_dtype(source: Source) -> np.dtype[Any]:
    """The narrowest of ``u1``, ``u2``, ``i4`` holding the source's declared range
    (``int64`` when the range is undeclared or wider): the dtype a check keeps its
    sample in. Values, and so fingerprints, do not depend on it."""
    lo, hi = source.min_symbol, source.max_symbol
    if lo is not None and hi is not None:
        for dtype, low, high in _NARROW:
            if low <= int(lo) and int(hi) <= high:
                return np.dtype(dtype)
    return np.dtype(np.int64)


def _as_input(codec: Codec, symbols: np.ndarray, run: _Run) -> np.ndarray:
    """What the codec is given: a ``ByteCodec`` packs any integer dtype itself; every
    other codec gets int64 symbols, as its contract says."""
    if type(codec) is ByteCodec or symbols.dtype == np.int64:
        return symbols
    return _plugin_step(run, f"widening {len(symbols)} symbols to int64 for the codec",
                        lambda: symbols.astype(np.int64))


def _roundtrip_one(codec: Codec, symbols: np.ndarray, run: _Run, case: str) -> Encoded:
    __tracebackhide__ = True
    given = _as_input(codec, symbols, run)
    encoded = _encode(codec, _readonly(given), run, case)
    _compare(symbols, _decode(codec, encoded, len(symbols), run, case), run, case)
    return encoded


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
    head = _as_input(codec, sample[:CONTRACT_SLICE], run)
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
    """One passed round trip: the bound codec, the sample, its encoding and the timings.

    ``sample`` is int64, or for a ``ByteCodec`` the narrowest dtype of the
    source's declared range (:func:`narrow_dtype`); ``passed_edge_cases`` are
    the keys of the edge cases this round trip ran and passed (for
    :data:`~pytest_ratefloor.edge_cases.PASSED`).
    """

    codec: Codec
    source: Source
    seed: int
    sample: np.ndarray
    encoded: Encoded
    encode_seconds: float
    decode_seconds: float
    passed_edge_cases: tuple[Hashable, ...] = ()

    def prefix(self, count: int) -> tuple[np.ndarray, Encoded]:
        """The first ``count`` symbols and their encoding (this round trip's own for all of it).

        A shorter prefix is encoded once, through the same misbehaviour checks.
        """
        __tracebackhide__ = True
        if count >= len(self.sample):
            return self.sample, self.encoded
        head = self.sample[:count]
        run = _Run(self.codec, self.source, len(self.sample), self.seed)
        return head, _encode(self.codec, _readonly(_as_input(self.codec, head, run)), run,
                             f"the first {count} symbols of the sample")


def _sample_roundtrip(bound: Codec, sample: np.ndarray, run: _Run,
                      case: str) -> tuple[Encoded, float, float]:
    """Encode and decode the sample once and compare: (encoding, encode s, decode s).

    A ``ByteCodec`` is compared on the packed bytes (the sample's packed copy against
    what the decompressor returned), so no int64 copy of the decoded symbols is made;
    bytes that differ are read back as symbols and compared as such (a ``bits``
    layout may differ only in its padding).
    """
    __tracebackhide__ = True
    if type(bound) is not ByteCodec:  # a subclass may encode otherwise: the general path
        start = time.perf_counter()
        encoded = _encode(bound, _readonly(_as_input(bound, sample, run)), run, case)
        encode_seconds = time.perf_counter() - start
        start = time.perf_counter()
        decoded = _decode(bound, encoded, run.n, run, case)
        decode_seconds = time.perf_counter() - start
        _compare(sample, decoded, run, case)
        return encoded, encode_seconds, decode_seconds
    start = time.perf_counter()
    step(f"packing {case}")
    try:
        packed = bound.pack_symbols(_readonly(sample))
    except PluginMemoryError as exc:
        raise run.out_of_memory(f"packing {case}", exc) from None
    except LayoutError as exc:
        raise LayoutError(f"{exc} — codec {bound.name!r} on {case} ({run.origin})") from None
    encoded = _call(bound, lambda: bound.compress_packed(packed), run, case, "encod")
    encode_seconds = time.perf_counter() - start
    start = time.perf_counter()
    raw = _call(bound, lambda: bound.decompress_packed(encoded, run.n), run, case, "decod")
    decode_seconds = time.perf_counter() - start
    if raw != packed:
        del packed
        decoded = _plugin_step(run, f"reading back {case}",
                               lambda: bound.unpack_symbols(raw, run.n))
        _compare(sample, decoded, run, case)
    return encoded, encode_seconds, decode_seconds


def _call(codec: Codec, work: Callable[[], _T], run: _Run, case: str, verb: str) -> _T:
    """One codec call of the byte path, with the messages of :func:`_encode`/:func:`_decode`
    (``verb`` is ``"encod"`` or ``"decod"``)."""
    __tracebackhide__ = True
    step(f"{verb}ing {case}")
    role = "encoder" if verb == "encod" else "decoder"
    try:
        return work()
    except CodecContractError as exc:
        raise run.misbehaviour(case, str(exc)) from None
    except Exception as exc:
        raise run.misbehaviour(case, f"the {role} raised {type(exc).__name__}: {exc}") from exc
    except SystemExit as exc:
        raise run.misbehaviour(case, f"the {role} called sys.exit({exc.code!r})") from exc


def _layout_text(codec: Codec) -> Hashable:
    layout = getattr(codec, "layout", None)
    return layout if isinstance(layout, (str, tuple)) else repr(layout)


def _edge_cases(bound: Codec, source: Source, sample: np.ndarray, run: _Run,
                lengths: EdgeCaseLengths, identity: Hashable | None) -> tuple[Hashable, ...]:
    """Run the edge cases in their order; those this codec already passed on the same
    input are skipped.

    The probe cases (short, not drawn from the sample) run every time, and what
    the codec made of those before a case joins that case's key (see
    :class:`~pytest_ratefloor.edge_cases.PassedEdgeCases`). Returns the keys
    of the cases passed here (``()`` without an ``identity``: nothing is shared).
    """
    __tracebackhide__ = True
    scope = None if identity is None else (
        identity, bound.name, bound.version, _layout_text(bound))
    behaviour = hashlib.blake2b(digest_size=16)
    answers = behaviour.hexdigest()
    passed: list[Hashable] = []
    for case in plan_edge_cases(source, sample, run.seed, bound.symbols, lengths):
        if case.probe:
            symbols = case.make()
            if symbols is not None:
                bits, stream = _roundtrip_one(bound, symbols, run, case.name).signature()
                behaviour.update(f"{case.key!r}:{bits}:{len(stream)}:".encode())
                behaviour.update(stream)
                answers = behaviour.hexdigest()
            continue
        key = None if scope is None else (scope, answers, case.key)
        if key is not None and key in PASSED:
            continue
        symbols = case.make()
        if symbols is None:
            continue
        _roundtrip_one(bound, symbols, run, case.name)
        if key is not None:
            passed.append(key)
    return tuple(passed)


def run_roundtrip(
    codec: Any, source: Source, n: int, seed: int, edge_cases: bool | EdgeCaseLengths,
    identity: Hashable | None = None,
) -> RoundTrip:
    """Encode and decode the sample once, check the contract and the edge cases.

    ``edge_cases``: ``True`` for all of them, ``False`` for none, or the
    :class:`~pytest_ratefloor.edge_cases.EdgeCaseLengths` to run. ``identity``
    (the key of :func:`~pytest_ratefloor.codecs.codec_identity`, or ``None``)
    lets edge cases this codec already passed in the session be skipped; the
    keys of those passed here are in :attr:`RoundTrip.passed_edge_cases`. The
    arguments are already validated (see :class:`pytest_ratefloor.checks.CheckPlan`).
    """
    __tracebackhide__ = True
    bound = as_codec(codec).for_source(source)
    run = _Run(bound, source, n, seed)
    # a ByteCodec packs the symbols itself: its sample is kept narrow (memory); every
    # other codec is handed the sample itself, as int64
    dtype = narrow_dtype(source) if type(bound) is ByteCodec else np.dtype(np.int64)
    sample = _plugin_step(
        run, f"drawing the sample ({n} symbols) and keeping it as {dtype}",
        lambda: np.asarray(source.sample(n, seed)).astype(dtype, copy=False))
    case = f"the sample ({n} symbols)"
    try:
        encoded, encode_seconds, decode_seconds = _sample_roundtrip(bound, sample, run, case)
    except RoundTripFailure:
        _check_untouched(source, sample, run, case)
        raise
    _check_contract(bound, sample, run)
    passed: tuple[Hashable, ...] = ()
    if edge_cases is not False:
        lengths = EdgeCaseLengths() if edge_cases is True else edge_cases
        passed = _edge_cases(bound, source, sample, run, lengths, identity)
    return RoundTrip(bound, source, seed, sample, encoded, encode_seconds, decode_seconds,
                     passed)
