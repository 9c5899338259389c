"""The round-trip and rate checks: ``measure``, ``assert_roundtrip``, ``assert_rate``.

One check run draws the sample once, encodes it once (through a read-only
view, so an encoder that writes into its input is caught for free), decodes
it once and compares; the measurement reuses that very encoding. The codec
contract (no mutation of the input, same output for the same input) is
checked on a short slice of the sample, so it costs two small extra encodes
rather than doubling the work. Edge cases (empty input, single symbols,
constant runs, alternation, lengths 1…17 and around 2¹⁶, every symbol of
the alphabet) are encoded separately.

Failures are ``AssertionError`` subclasses from :mod:`pytest_ratefloor.errors`:
``RoundTripFailure`` (names the case, its length, the first mismatching
index, expected vs decoded and a window around it), ``CodecMisbehaviour``
(raised, wrong type or length, mutated input, not deterministic — naming
the codec, the source, ``n`` and the seed), ``RateFailure`` and
``ImpossibleRate``.

Tolerance (``rel``/``abs``, as in ``pytest.approx``): the measured rate may
exceed the floor rate by ``rel·floor_rate`` or by ``abs`` bits/symbol,
whichever is larger. When both are ``None`` the default is ``rel=0.01,
abs=0`` (1 % over the floor); when only one is given the other is 0. A
relative slack of 10⁻⁹ (floating-point noise in the floor) is always added.
"""

from __future__ import annotations

import hashlib
import math
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import ArrayLike

from pytest_ratefloor.codecs import (
    Codec,
    CodecContractError,
    Encoded,
    LayoutError,
    as_codec,
)
from pytest_ratefloor.errors import (
    CodecMisbehaviour,
    ImpossibleRate,
    RateFailure,
    RateFloorFailure,
    RoundTripFailure,
)
from pytest_ratefloor.floors import FLOORS, check_floor, floor_bits
from pytest_ratefloor.measurement import Measurement

if TYPE_CHECKING:
    from pytest_ratefloor.sources import Source

__all__ = [
    "DEFAULT_ABS",
    "DEFAULT_REL",
    "IMPOSSIBLE_CONFIDENCE_BITS",
    "assert_rate",
    "assert_roundtrip",
    "check",
    "edge_case_inputs",
    "elias_delta_length",
    "impossible_margin",
    "measure",
    "rate_verdict",
    "sample_fingerprint",
    "sample_information",
    "tolerance",
]

DEFAULT_REL = 0.01
DEFAULT_ABS = 0.0
#: ``c`` of the impossible-rate rule: a false alarm has probability ≤ 2⁻ᶜ.
IMPOSSIBLE_CONFIDENCE_BITS = 32
#: Symbols of the slice on which mutation and determinism are checked.
CONTRACT_SLICE = 4096
#: Longer than 2¹⁶, so a 16-bit run or length counter overflows on it.
CONSTANT_RUN = 70_000
ALTERNATING_RUN = 1_000
SHORT_LENGTHS = tuple(range(1, 18))
WORD_BOUNDARY_LENGTHS = (65_535, 65_536, 65_537)
#: Finite alphabets up to this size get an "every symbol once" case in full;
#: larger (and unbounded) alphabets get an evenly spread subset of this many.
MAX_ALPHABET_CASE = 65_536
SPREAD_SYMBOLS = 4096
#: An unbounded alphabet's "likely range": all but this much probability mass.
LIKELY_TAIL = 2.0**-30
_FLOAT_SLACK = 1e-9
_WINDOW = 4


# ------------------------------------------------------------------ helpers

def sample_fingerprint(symbols: ArrayLike, bounds: tuple[int, int] | None = None) -> str:
    """A short hex hash (16 hex digits of SHA-256) identifying a sample's symbols.

    Defined on the values only, independent of dtype and platform: the
    symbols are written in the narrowest of ``u1``, ``<u2``, ``<i4``, ``<i8``
    that holds them, after the header ``b"ratefloor-sample-v1:<tag>:<n>:"``.
    ``bounds`` — a guaranteed (min, max) of the symbols, e.g. a source's
    declared range — only lets the range scan be skipped; the result is the same.
    """
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


def elias_delta_length(m: int) -> int:
    """Length in bits of the Elias delta codeword of the integer ``m ≥ 1``.

    Elias 1975 (from memory): ``⌊log₂ m⌋ + 2·⌊log₂(⌊log₂ m⌋ + 1)⌋ + 1``.
    """
    if m < 1:
        raise ValueError(f"Elias delta codes integers m >= 1, got m={m}")
    n_bits = m.bit_length() - 1  # ⌊log₂ m⌋
    return n_bits + 2 * ((n_bits + 1).bit_length() - 1) + 1


def impossible_margin(bits: int, c: int = IMPOSSIBLE_CONFIDENCE_BITS) -> float:
    """How far below the sample's self-information a length of ``bits`` may fall.

    Derivation. Let ``ℓ(x)`` be the codec's length on a sample ``x`` of
    ``n`` symbols. The decoder is told ``n`` and sees where the stream ends,
    so the code only has to be one-to-one on length-``n`` inputs, not
    prefix-free. Prefixing each codeword with a prefix-free description of
    its length — the Elias delta codeword of ``ℓ + 1``, ``δ(ℓ)`` bits, about
    ``log₂(ℓ + 1) + 2·log₂log₂(ℓ + 1)`` — gives a prefix code of length
    ``ℓ + δ(ℓ)``, which satisfies the Kraft inequality (Kraft 1949; McMillan
    1956 for uniquely decodable codes, from memory). For any prefix code and
    any ``c``, ``P(ℓ'(X) ≤ −log₂P(X) − c) ≤ 2⁻ᶜ`` (Markov's inequality on
    ``2^−ℓ'(X)/P(X)``, whose mean is the Kraft sum ≤ 1; Barron 1985, from
    memory). Hence a correct codec falls below
    ``sample information − c − δ(ℓ)`` with probability at most ``2⁻ᶜ``; with
    ``c = 32`` a report is a false alarm less than once in four billion runs.
    This is the one-to-one-code bound ``c + log₂(max bits + 1)`` with the
    unknown maximum replaced by a universal length code (slightly more
    lenient, and valid without knowing the codec's longest output).
    """
    return float(c + elias_delta_length(int(bits) + 1))


def tolerance(rel: float | None, abs: float | None) -> tuple[float, float]:
    """Resolve ``rel``/``abs`` as documented in the module docstring."""
    if rel is None and abs is None:
        return DEFAULT_REL, DEFAULT_ABS
    out = []
    for name, value in (("rel", rel), ("abs", abs)):
        if value is None:
            out.append(0.0)
            continue
        if isinstance(value, bool) or not isinstance(value, (int, float, np.floating, np.integer)):
            raise ValueError(f"tolerance {name} must be a number, got {value!r}")
        v = float(value)
        if not math.isfinite(v) or v < 0:
            raise ValueError(f"tolerance {name} must be finite and >= 0, got {value!r}")
        out.append(v)
    return out[0], out[1]


def _check_int(value: object, name: str, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise ValueError(f"{name} must be an int, got {value!r}")
    if int(value) < minimum:
        raise ValueError(f"{name} must be >= {minimum}, got {value!r}")
    return int(value)


def _check_source(source: object) -> None:
    for attr in ("spec", "sample", "information", "entropy"):
        if not hasattr(source, attr):
            raise TypeError(
                f"source must be a pytest_ratefloor.sources source, got {type(source).__name__} "
                f"(no {attr!r})"
            )


def _show(values: np.ndarray) -> str:
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
        f"  expected[{lo}:{hi}] = {_show(expected[lo:hi])}\n"
        f"  decoded [{lo}:{hi}] = {_show(decoded[lo:hi])}\n"
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


# ---------------------------------------------------------------- edge cases

def _spread(symbols: np.ndarray, count: int) -> np.ndarray:
    if len(symbols) <= count:
        return symbols
    return symbols[np.unique(np.linspace(0, len(symbols) - 1, count).round().astype(np.intp))]


def _support(source: Source, codec_symbols: list[int] | None) -> np.ndarray:
    """Sorted symbols used for the symbol edge cases (see :func:`edge_case_inputs`)."""
    size = source.alphabet_size
    if size is not None and size <= MAX_ALPHABET_CASE:
        symbols, probs = source.pmf_table()
        symbols = np.asarray(symbols, dtype=np.int64)[np.asarray(probs) > 0]
    elif size is not None and source.min_symbol is not None and source.max_symbol is not None:
        symbols = np.unique(
            np.linspace(source.min_symbol, source.max_symbol, SPREAD_SYMBOLS).round()
        ).astype(np.int64)
    else:
        symbols, probs = source.pmf_table(tail=LIKELY_TAIL)
        symbols = np.asarray(symbols, dtype=np.int64)[np.asarray(probs) > 0]
    symbols = np.unique(symbols)
    if codec_symbols is not None:
        symbols = np.intersect1d(symbols, np.asarray(codec_symbols, dtype=np.int64))
    return symbols


def _valid(source: Source, symbols: np.ndarray) -> bool:
    try:
        return math.isfinite(float(source.information(symbols)))
    except (ValueError, IndexError, KeyError, OverflowError):
        return False


def edge_case_inputs(
    source: Source,
    sample: np.ndarray,
    seed: int = 0,
    codec_symbols: list[int] | None = None,
) -> list[tuple[str, np.ndarray]]:
    """The edge-case inputs for ``source``: a list of (name, int64 array).

    * empty input;
    * length 1 with the smallest and with the largest symbol;
    * constant runs (70 000, past 2¹⁶) of the smallest and the largest symbol;
    * 1 000 symbols alternating smallest/largest;
    * prefixes of length 1…17 and 65 535, 65 536, 65 537 of a source sample
      (``sample`` if long enough, else ``source.sample(65537, seed)``);
    * every symbol of a finite alphabet once, ascending (alphabets over
      65 536 symbols, and unbounded ones: an even spread of 4 096 symbols).

    "Smallest/largest symbol" and "every symbol" are taken from the support
    (positive probability) — for an unbounded alphabet from its likely range
    (all but 2⁻³⁰ of the mass) — and, for a codebook, from its table too.
    Cases that the source cannot produce (zero probability, e.g. a constant
    run through a forbidden Markov transition) are left out, so every input
    is valid for the source.
    """
    support = _support(source, codec_symbols)
    cases: list[tuple[str, np.ndarray]] = [("edge case 'empty input'", np.zeros(0, np.int64))]
    candidates: list[tuple[str, np.ndarray]] = []
    if len(support):
        low, high = int(support[0]), int(support[-1])
        ends = [low] if low == high else [low, high]
        for s in ends:
            which = "smallest" if s == low else "largest"
            candidates.append((f"edge case 'single {which} symbol {s}'", np.array([s], np.int64)))
        for s in ends:
            candidates.append(
                (f"edge case 'constant run of {s}'", np.full(CONSTANT_RUN, s, np.int64))
            )
        if low != high:
            alt = np.where(np.arange(ALTERNATING_RUN) % 2 == 0, low, high).astype(np.int64)
            candidates.append((f"edge case 'alternating {low}/{high}'", alt))
        everything = _spread(support, MAX_ALPHABET_CASE if len(support) <= MAX_ALPHABET_CASE
                             else SPREAD_SYMBOLS)
        label = "every symbol once" if len(everything) == len(support) else "a spread of symbols"
        if source.alphabet_size is None:
            label = "a spread of symbols of the likely range"
        candidates.append((f"edge case '{label}' ({len(everything)} symbols)", everything))
    cases.extend((name, arr) for name, arr in candidates if _valid(source, arr))
    longest = max(WORD_BOUNDARY_LENGTHS)
    long = sample if len(sample) >= longest else np.asarray(source.sample(longest, seed))
    for length in (*SHORT_LENGTHS, *WORD_BOUNDARY_LENGTHS):
        cases.append((f"edge case 'sample prefix of length {length}'", long[:length]))
    return cases


# ---------------------------------------------------------------- the checks

@dataclass
class _Outcome:
    codec: Codec
    sample: np.ndarray
    encoded: Encoded
    encode_seconds: float
    decode_seconds: float


def _run_roundtrip(
    codec: Any, source: Source, n: int, seed: int, edge_cases: bool
) -> tuple[_Run, _Outcome]:
    """Encode and decode the sample once, check the contract and the edge cases."""
    __tracebackhide__ = True
    _check_source(source)
    n = _check_int(n, "n", 1)
    seed = _check_int(seed, "seed", 0)
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
    if edge_cases:
        for name, symbols in edge_case_inputs(
            source, sample, seed, getattr(bound, "symbols", None)
        ):
            _roundtrip_one(bound, symbols, run, name)
    return run, _Outcome(bound, sample, encoded, encode_seconds, decode_seconds)


#: Declared alphabets up to this size get their sample information from a histogram.
_HISTOGRAM_LIMIT = 1 << 16


def sample_information(source: Source, sample: np.ndarray) -> float:
    """``source.information(sample)``, from the histogram where that is cheaper.

    For a memoryless source with a declared alphabet ``0..max ≤ 2¹⁶`` the sum
    ``Σᵢ −log₂ P(xᵢ)`` equals ``Σₐ nₐ·(−log₂ P(a))`` over the distinct symbols
    (``source.self_information`` of those, which also rejects symbols outside
    the support); one counting pass replaces a float array of ``n`` entries.
    """
    lo, hi = source.min_symbol, source.max_symbol
    if (
        not getattr(source, "memoryless", False)
        or lo is None
        or hi is None
        or lo != 0
        or hi >= _HISTOGRAM_LIMIT
        or len(sample) < 4 * _HISTOGRAM_LIMIT
    ):
        return float(source.information(sample))
    try:
        counts = np.bincount(sample)
    except ValueError:  # a negative symbol: let the source name it
        return float(source.information(sample))
    present = np.flatnonzero(counts)
    per_symbol = np.asarray(source.self_information(present), dtype=np.float64)
    return float(np.dot(counts[present].astype(np.float64), per_symbol))


def _measurement(run: _Run, outcome: _Outcome, floor: str) -> Measurement:
    source = run.source
    sample = outcome.sample
    information = sample_information(source, sample)
    bits = floor_bits(floor, source, sample, sample_information=information)
    params: dict[str, float] = {str(k): (int(v) if isinstance(v, (int, np.integer)) else float(v))
              for k, v in dict(getattr(source, "params", {}) or {}).items()}
    return Measurement(
        codec=outcome.codec.name,
        source=source.spec,
        n=run.n,
        seed=run.seed,
        bits=int(outcome.encoded.bits),
        entropy=float(source.entropy),
        floor=floor,
        floor_bits=float(bits),
        sample_information=information,
        spread=math.sqrt(max(0.0, float(source.varentropy)) / run.n),
        fingerprint=sample_fingerprint(sample, bounds=_declared_range(source)),
        codec_version=outcome.codec.version,
        encode_seconds=outcome.encode_seconds,
        decode_seconds=outcome.decode_seconds,
        source_family=str(getattr(source, "family", "")),
        source_params=params,
        alphabet_size=None if source.alphabet_size is None else int(source.alphabet_size),
    )


def _declared_range(source: Source) -> tuple[int, int] | None:
    lo, hi = source.min_symbol, source.max_symbol
    return None if lo is None or hi is None else (int(lo), int(hi))


def _worst_codewords(codec: Codec, source: Source, count: int = 3) -> str:
    """Lines naming the codewords that waste the most (codebooks only; best effort)."""
    codebook = getattr(codec, "codebook", None)
    if codebook is None:
        return ""
    try:
        from pytest_ratefloor import codes

        symbols, probs = source.pmf_table()
        rows = [r for r in codes.excess_by_symbol(codebook, symbols, probs) if r[3] > 0][:count]
    except Exception as exc:  # the message must not fail because of its garnish
        return f"\n  (worst codewords unavailable: {type(exc).__name__}: {exc})"
    if not rows:
        return ""
    lines = [
        f"\n    symbol {int(s)}: p={float(p):.6g}, codeword length {int(ell)}, "
        f"waste {float(w):+.6f} bits/symbol"
        for s, p, ell, w in rows
    ]
    return "\n  codewords wasting the most (p·(ℓ + log2 p)):" + "".join(lines)


def rate_verdict(
    m: Measurement,
    rel: float | None = None,
    abs: float | None = None,
    codec: Codec | None = None,
    source: Source | None = None,
) -> RateFloorFailure | None:
    """The failure ``m`` deserves (``ImpossibleRate`` or ``RateFailure``), or ``None``.

    Built, not raised, so that the harness can record the measurement first.
    ``codec``/``source`` (optional) let a codebook's worst codewords be named.
    """
    rel_, abs_ = tolerance(rel, abs)
    margin = impossible_margin(m.bits)
    where = f"{m.source} (n={m.n}, seed={m.seed})"
    if m.bits < m.sample_information - margin:
        return ImpossibleRate(
            f"codec {m.codec!r} reports an impossible length on {where}: {m.bits} bits, "
            f"but the sample's self-information is {m.sample_information:.1f} bits\n"
            f"  no decodable code falls {margin:.0f} bits below it except with probability "
            f"2^-{IMPOSSIBLE_CONFIDENCE_BITS} (Kraft–McMillan; the decoder is told only n)\n"
            "  the decoder must be getting information from outside the stream (shared "
            "state, a side channel, the sample itself), or the bit count is wrong"
        )
    allowed_bits = m.floor_bits + max(rel_ * m.floor_bits, abs_ * m.n)
    allowed_bits += _FLOAT_SLACK * max(1.0, math.fabs(m.floor_bits))
    if m.bits <= allowed_bits:
        return None
    excess = m.rate - m.floor_rate
    percent = f"{100.0 * excess / m.floor_rate:+.2f} %" if m.floor_rate > 0 else "n/a (floor 0)"
    worst = _worst_codewords(codec, source) if codec is not None and source is not None else ""
    return RateFailure(
        f"codec {m.codec!r} misses the {m.floor} floor on {where}\n"
        f"  measured rate  {m.rate:.6f} bits/symbol ({m.bits} bits)\n"
        f"  floor          {m.floor_rate:.6f} bits/symbol ({m.floor}: {FLOORS[m.floor]})\n"
        f"  entropy        {m.entropy:.6f} bits/symbol\n"
        f"  allowed        {allowed_bits / m.n:.6f} bits/symbol (rel={rel_:g}, abs={abs_:g})\n"
        f"  excess         {excess:+.6f} bits/symbol ({percent} over the floor)\n"
        f"  sample spread  ±{m.spread:.6f} bits/symbol (√(V/n): the sampling noise of one "
        "sample's information)" + worst
    )


def measure(
    codec: Any, source: Source, n: int = 100_000, seed: int = 0, floor: str = "entropy"
) -> Measurement:
    """Encode ``n`` symbols of ``source`` once and measure the length against ``floor``.

    The sample is also decoded and compared (a measurement of a codec that
    does not round-trip is meaningless) and the codec contract is checked on
    a short slice; no tolerance is applied and no edge cases are run.
    """
    __tracebackhide__ = True
    check_floor(floor)
    run, outcome = _run_roundtrip(codec, source, n, seed, edge_cases=False)
    return _measurement(run, outcome, floor)


def assert_roundtrip(
    codec: Any, source: Source, n: int = 10_000, seed: int = 0, edge_cases: bool = True
) -> None:
    """Every input decodes back exactly: the sample and (by default) the edge cases.

    Also checks the codec contract (raises, wrong type or length, input
    mutation, determinism); see :func:`edge_case_inputs` for the cases.
    """
    __tracebackhide__ = True
    _run_roundtrip(codec, source, n, seed, edge_cases=edge_cases)


def assert_rate(
    codec: Any,
    source: Source,
    n: int = 100_000,
    seed: int = 0,
    floor: str = "entropy",
    rel: float | None = None,
    abs: float | None = None,
) -> Measurement:
    """The measured rate is within the tolerance of ``floor`` and is not impossibly low.

    Returns the :class:`Measurement`. See the module docstring for the
    tolerance and :func:`impossible_margin` for the impossible-rate rule.
    """
    __tracebackhide__ = True
    return check(codec, source, n=n, seed=seed, floor=floor, rel=rel, abs=abs, edge_cases=False)


def check(
    codec: Any,
    source: Source,
    n: int = 100_000,
    seed: int = 0,
    floor: str = "entropy",
    rel: float | None = None,
    abs: float | None = None,
    edge_cases: bool = True,
    on_measurement: Callable[[Measurement], None] | None = None,
) -> Measurement:
    """Round trip (with edge cases) and rate in one pass over one encoding of the sample.

    ``on_measurement(m)`` is called once the measurement exists, before a
    rate failure is raised. If it raises a failure itself (e.g. a ledger
    regression) and the rate also fails, the rate failure is raised with the
    other message appended.
    """
    __tracebackhide__ = True
    check_floor(floor)
    tolerance(rel, abs)
    run, outcome = _run_roundtrip(codec, source, n, seed, edge_cases=edge_cases)
    m = _measurement(run, outcome, floor)
    failure = rate_verdict(m, rel, abs, codec=outcome.codec, source=source)
    if on_measurement is not None:
        try:
            on_measurement(m)
        except RateFloorFailure as other:
            if failure is None:
                raise
            raise type(failure)(f"{failure}\n  also: {other}") from other
    if failure is not None:
        raise failure
    return m
