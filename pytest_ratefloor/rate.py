"""The rate verdict: a measured length against its floor and the tolerance.

Tolerance (``rel``/``abs``, as in ``pytest.approx``): the measured rate may
exceed the floor rate by ``rel·floor_rate`` or by ``abs`` bits/symbol,
whichever is larger. When both are ``None`` the default is ``rel=0.01,
abs=0`` (1 % over the floor); when only one is given the other is 0. A
relative slack of 10⁻⁹ (floating-point noise in the floor) is always added.

Below the floor there is a hard limit: a length that falls further below
the sample's self-information than any decodable code can (see
:func:`impossible_margin`) is reported as :class:`ImpossibleRate`.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, cast

import numpy as np

from pytest_ratefloor import validation
from pytest_ratefloor.errors import ImpossibleRate, RateFailure, RateFloorFailure
from pytest_ratefloor.floors import FLOORS, Floor, floor_bits
from pytest_ratefloor.measurement import NOISY_FLOORS, Measurement, sample_fingerprint

if TYPE_CHECKING:
    from pytest_ratefloor.codecs import Codec, Encoded
    from pytest_ratefloor.sources import Source

__all__ = [
    "CODER_OVERHEAD_BITS",
    "DEFAULT_ABS",
    "DEFAULT_REL",
    "IMPOSSIBLE_CONFIDENCE_BITS",
    "NOISE_SPREADS",
    "allowed_excess_bits",
    "elias_delta_length",
    "impossible_margin",
    "measurement_of",
    "noise_warning",
    "rate_verdict",
    "sample_information",
    "tolerance",
]

DEFAULT_REL = 0.01
DEFAULT_ABS = 0.0
#: ``c`` of the impossible-rate rule: a false alarm has probability ≤ 2⁻ᶜ.
IMPOSSIBLE_CONFIDENCE_BITS = 32
_FLOAT_SLACK = 1e-9


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


#: A tolerance is meaningful when it exceeds this many sampling spreads of the floor:
#: an ideal coder exceeds a noisy floor by 3 spreads on 0.13 % of samples (one-sided
#: normal tail, Φ(−3) = 0.00135; the normal approximation of the sample's
#: information is the central limit theorem, for chains the Markov-chain CLT).
NOISE_SPREADS = 3.0
#: ... and at least the fixed cost of a real coder: lengths are whole bits, and an
#: arithmetic or range coder spends a few bytes on termination and framing (2 bits
#: at the very least, Witten–Neal–Cleary 1987, from memory; 32 is common practice
#: for a flushed range coder). A smaller allowance fails correct coders on every
#: sample, whatever the floor's noise.
CODER_OVERHEAD_BITS = 32.0


def tolerance(rel: float | None, abs: float | None) -> tuple[float, float]:
    """Resolve ``rel``/``abs`` as documented in the module docstring (each >= 0, finite)."""
    if rel is None and abs is None:
        return DEFAULT_REL, DEFAULT_ABS
    return (
        0.0 if rel is None else validation.real(rel, "rel", minimum=0.0),
        0.0 if abs is None else validation.real(abs, "abs", minimum=0.0),
    )


#: Declared alphabets up to this size get their sample information from a histogram.
_HISTOGRAM_LIMIT = 1 << 16
#: Symbols counted at a time (bounds the int64 copy ``np.bincount`` makes of a narrow sample).
_COUNT_CHUNK = 1 << 20
#: Shortest byte sample counted two bytes at a time (below it the 2¹⁶-bin table costs more).
_PAIRS_FROM = 1 << 18


def _histogram(sample: np.ndarray, size: int) -> np.ndarray:
    """Counts of the symbols ``0..size-1`` of ``sample``, a chunk at a time.

    A long byte sample is counted as 16-bit pairs of bytes (half the
    increments; each byte is then counted once in one of the pair table's two
    marginals, whatever the byte order).
    """
    if sample.dtype == np.uint8 and len(sample) >= _PAIRS_FROM:
        even = len(sample) & ~1
        pairs = np.ascontiguousarray(sample[:even]).view(np.uint16)
        table = np.zeros(1 << 16, dtype=np.int64)
        for start in range(0, len(pairs), _COUNT_CHUNK):
            table += np.bincount(pairs[start:start + _COUNT_CHUNK], minlength=1 << 16)
        square = table.reshape(256, 256)
        bytes_counts = square.sum(axis=0) + square.sum(axis=1)
        if even < len(sample):
            bytes_counts[sample[-1]] += 1
        return bytes_counts[:size] if size <= 256 else np.pad(bytes_counts, (0, size - 256))
    counts = np.zeros(size, dtype=np.int64)
    for start in range(0, len(sample), _COUNT_CHUNK):
        counts += np.bincount(sample[start:start + _COUNT_CHUNK], minlength=size)[:size]
    return counts


def sample_information(source: Source, sample: np.ndarray) -> float:
    """``source.information(sample)``, from the histogram where that is cheaper.

    For a memoryless source with a declared alphabet ``0..max`` of at most
    2¹⁶ symbols, and a sample at least four times longer than the alphabet, the
    sum ``Σᵢ −log₂ P(xᵢ)`` equals ``Σₐ nₐ·(−log₂ P(a))`` over the distinct
    symbols (``source.self_information`` of those, which also rejects symbols
    outside the support); one counting pass replaces a float array of ``n``
    entries. The two sums add the same terms in another order: they agree to
    the last few bits of a double. Other sources get ``source.information`` of
    the sample as int64.
    """
    lo, hi = source.min_symbol, source.max_symbol
    if (
        not source.memoryless
        or lo is None
        or hi is None
        or lo != 0
        or hi >= _HISTOGRAM_LIMIT
        or len(sample) < 4 * (int(hi) + 1)
        or sample.dtype.kind not in "iu"
    ):
        return float(source.information(np.asarray(sample, dtype=np.int64)))
    if sample.dtype.kind == "i" and len(sample) and int(sample.min()) < 0:
        return float(source.information(np.asarray(sample, dtype=np.int64)))  # let it name it
    counts = _histogram(sample, int(hi) + 1)
    if int(counts.sum()) != len(sample):  # a symbol above the declared range: let it name it
        return float(source.information(np.asarray(sample, dtype=np.int64)))
    present = np.flatnonzero(counts)
    per_symbol = np.asarray(source.self_information(present), dtype=np.float64)
    return float(np.dot(counts[present].astype(np.float64), per_symbol))


def allowed_excess_bits(floor_bits: float, n: int, rel: float | None,
                        abs: float | None) -> float:
    """Bits a length may exceed ``floor_bits`` by: ``max(rel·floor, abs·n)`` (see the
    module docstring for the defaults)."""
    rel_, abs_ = tolerance(rel, abs)
    return max(rel_ * floor_bits, abs_ * n)


def noise_warning(m: Measurement) -> str | None:
    """Why the verdict of ``m`` depends on the luck of its sample, or ``None``.

    The allowed excess (``m.tolerance_bits``) should exceed
    :data:`NOISE_SPREADS` sampling spreads of the floor (floors taken from the
    source's law move with the sample by √(n·V) bits, V the varentropy rate;
    floors computed on the sample do not) and :data:`CODER_OVERHEAD_BITS`.
    The message names the case, the spread and the ``n`` from which the same
    tolerance would be meaningful (its relative part grows like n, the spread
    like √n).
    """
    spread = m.floor_spread_bits
    allowed = m.tolerance_bits
    if allowed is None or spread is None or not m.n:
        return None
    if allowed == 0 and spread == 0:
        return None  # an exact floor asked to be met exactly (a dyadic code): deliberate
    need_bits = max(NOISE_SPREADS * spread, CODER_OVERHEAD_BITS)
    if allowed >= need_bits:
        return None
    per_symbol = allowed / m.n  # the tolerance as bits per symbol: it scales with n
    variance_rate = (spread * spread) / m.n
    if per_symbol > 0:
        n_noise = (NOISE_SPREADS ** 2) * variance_rate / (per_symbol ** 2)
        n_needed = max(n_noise, CODER_OVERHEAD_BITS / per_symbol, float(m.n))
        advice = f"n >= {math.ceil(n_needed):,} would make this tolerance meaningful"
    else:
        advice = "a zero tolerance on a floor with sampling noise is a coin toss; give rel or abs"
    if spread > 0:
        why = (f"{NOISE_SPREADS:g} sampling spreads of the {m.floor} floor "
               f"(spread ±{spread:,.1f} bits = √(n·V), V the varentropy rate)")
    else:
        why = (f"the {CODER_OVERHEAD_BITS:g} bits a correct coder spends on termination and "
               "framing")
    return (
        f"ratefloor: the tolerance of {m.key.phrase} ({allowed:,.1f} bits over the "
        f"{m.floor} floor) is smaller than {why}: its verdict depends on the luck of this "
        f"one sample. {advice}" + (
            "; or measure from floor='sample', which has no sampling noise"
            if m.floor in NOISY_FLOORS else "")
    )


def measurement_of(codec: Codec, source: Source, sample: np.ndarray, seed: int,
                   encoded: Encoded, floor: Floor, encode_seconds: float = 0.0,
                   decode_seconds: float = 0.0) -> Measurement:
    """The case record of one encoded sample: bits, floor, information, fingerprint.

    ``codec`` is the codec as bound to the source (``for_source``), so its
    ``layout`` — the byte packing or command it used, when it has one — is the
    one this encoding went through.
    """
    information = sample_information(source, sample)
    bits = floor_bits(floor, source, sample, sample_information=information)
    # a fixed sample (a corpus file) is data, not a draw from the model its information is
    # computed under: a compressor that uses context goes legitimately below it, so it is
    # no hard limit and the impossible-rate rule does not apply
    hard_limit = None if getattr(source, "fixed_sample", False) else information
    params: dict[str, float] = {
        str(k): (int(v) if isinstance(v, (int, np.integer)) else float(v))
        for k, v in dict(source.params).items()
    }
    n = len(sample)
    return Measurement(
        codec=codec.name,
        source=source.spec,
        n=n,
        seed=seed,
        bits=int(encoded.bits),
        entropy=float(source.entropy),
        floor=floor,
        floor_bits=float(bits),
        fingerprint=sample_fingerprint(sample, bounds=_declared_range(source)),
        sample_information=hard_limit,
        spread=math.sqrt(max(0.0, _varentropy_rate(source)) / n) if n else 0.0,
        codec_version=codec.version,
        encode_seconds=encode_seconds,
        decode_seconds=decode_seconds,
        source_family=str(source.family),
        source_params=params,
        alphabet_size=None if source.alphabet_size is None else int(source.alphabet_size),
        layout=_layout_of(codec),
    )


def _layout_of(codec: Codec) -> str | None:
    """The bound codec's ``layout`` when it is non-empty UTF-8 text; ``None`` otherwise.

    Adapters without the attribute, and a value that is not text (a
    user-written codec may hold anything there), give ``None``: the ledger
    then records no layout rather than an unreadable one.
    """
    layout = getattr(codec, "layout", None)
    if not isinstance(layout, str) or not layout:
        return None
    try:
        layout.encode("utf-8")
    except UnicodeEncodeError:  # a lone surrogate cannot be written to the ledger
        return None
    return str(layout)


def _varentropy_rate(source: Source) -> float:
    """The sample information's variance per symbol (the varentropy rate for chains)."""
    return float(source.varentropy_rate)


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
    if m.sample_information is not None and m.bits < m.sample_information - margin:
        below = m.sample_information - m.bits
        return ImpossibleRate(
            f"{below:,.0f} bits below the sample's information: codec {m.codec!r} reports an "
            f"impossible length on {where}: {m.bits:,} bits, but the sample's "
            f"self-information is {m.sample_information:,.1f} bits\n"
            f"  no decodable code falls {margin:.0f} bits below it except with probability "
            f"2^-{IMPOSSIBLE_CONFIDENCE_BITS} (Kraft–McMillan; the decoder is told only n)\n"
            "  the decoder must be getting information from outside the stream (shared "
            "state, a side channel, the sample itself), or the bit count is wrong"
        )
    allowed_bits = m.floor_bits + allowed_excess_bits(m.floor_bits, m.n, rel_, abs_)
    allowed_bits += _FLOAT_SLACK * max(1.0, math.fabs(m.floor_bits))
    if m.bits <= allowed_bits:
        return None
    excess = m.rate - m.floor_rate
    percent = f"{100.0 * excess / m.floor_rate:+.3f}%" if m.floor_rate > 0 else "n/a (floor 0)"
    allowed_pct = (f"{100.0 * (allowed_bits - m.floor_bits) / m.floor_bits:+.3f}%"
                   if m.floor_bits > 0 else f"+{allowed_bits - m.floor_bits:,.1f} bits")
    headline = (f"{percent} over the {m.floor} floor (allowed {allowed_pct})"
                if m.floor_rate > 0 else f"{excess:+.6f} bits/symbol over a zero floor")
    worst = _worst_codewords(codec, source) if codec is not None and source is not None else ""
    meaning = FLOORS.get(cast(Floor, m.floor), "")
    return RateFailure(
        f"{headline}: codec {m.codec!r} misses the {m.floor} floor on {where}\n"
        f"  measured rate  {m.rate:.6f} bits/symbol ({m.bits:,} bits)\n"
        f"  floor          {m.floor_rate:.6f} bits/symbol ({m.floor}: {meaning})\n"
        f"  entropy        {m.entropy:.6f} bits/symbol\n"
        f"  allowed        {allowed_bits / m.n:.6f} bits/symbol (rel={rel_:g}, abs={abs_:g})\n"
        f"  excess         {excess:+.6f} bits/symbol ({percent} over the floor)\n"
        f"  sample spread  ±{m.spread or 0.0:.6f} bits/symbol (√(V/n): the sampling noise of one "
        "sample's information)" + worst
    )
