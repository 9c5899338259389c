"""The Source contract: what every reference source answers, and what they share.

:class:`Source` is the abstract base of every family. A source has a canonical
``spec`` (stable, short, safe in a test id; equal specs mean equal
distributions), its ``entropy``, ``varentropy`` (the variance of one symbol's
information) and ``varentropy_rate`` (the variance per symbol of a long
sample's information: what sets the sampling spread of a check), its
alphabet bounds, a ``pmf_table``, the self-information of any symbol
sequence, reproducible samples, and the two code lengths the floors ask it for:
:meth:`Source.optimal_code_rate` (the best symbol-by-symbol prefix code) and
:meth:`Source.adaptive_code_length` (the Krichevsky–Trofimov ideal code length
of a sample). The base class answers both for a memoryless source; sources
with memory or a better code override them.

Also here: the memoryless base :class:`_Memoryless` (one raw word per symbol,
see :mod:`pytest_ratefloor.sources.sampling`), spec text helpers, and the
conversion of user symbol sequences to int64 arrays. ``0 * log 0 = 0``
throughout.
"""

from __future__ import annotations

import abc
import hashlib
import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike

from pytest_ratefloor import validation
from pytest_ratefloor.sources.sampling import _draw_in_chunks

_LN2 = math.log(2.0)
_HASH_CHARS = 12
_TABLE_LIMIT = 1 << 24  # most symbols a pmf_table / sampling table may hold
_INT64_MAX = (1 << 63) - 1


# --------------------------------------------------------------------------
# spec text and small exact helpers


def _fmt(x: float) -> str:
    """Shortest round-tripping text of a float (``repr``), e.g. ``0.1``, ``1e-09``."""
    return repr(float(x) + 0.0)


def _fmt_list(values: Sequence[float]) -> str:
    return "[" + ",".join(_fmt(v) for v in values) + "]"


def _digest(*parts: bytes) -> str:
    h = hashlib.sha256()
    for part in parts:
        h.update(len(part).to_bytes(8, "little"))
        h.update(part)
    return h.hexdigest()[:_HASH_CHARS]


def _log2_ratio(num: int, den: int) -> float:
    """log2(num / den) for integers 0 < num <= den, accurate also when the ratio is near 1."""
    if 2 * num > den:
        return math.log1p((num - den) / den) / _LN2
    ratio = num / den
    if ratio > 0.0:
        return math.log2(ratio)
    return math.log2(num) - math.log2(den)  # ratio underflows: use the integers


def _as_symbols(symbols: ArrayLike) -> np.ndarray:
    """Symbols as a 1-D int64 array, or ValueError."""
    arr = np.asarray(symbols)
    if arr.ndim != 1:
        raise ValueError(f"symbols must be a 1-D sequence of integers, got shape {arr.shape}")
    kind = arr.dtype.kind
    if kind == "b":
        return arr.astype(np.int64)
    if kind == "u":
        if arr.size and int(arr.max()) > _INT64_MAX:
            i = int(np.argmax(arr > _INT64_MAX))
            raise ValueError(f"symbol {int(arr[i])} at index {i} is outside the support")
        return arr.astype(np.int64)
    if kind == "i":
        return arr.astype(np.int64, copy=False)
    if arr.size == 0:
        return np.zeros(0, dtype=np.int64)
    raise ValueError(f"symbols must be integers, got dtype {arr.dtype}")


def _positive_support(symbols: np.ndarray, probs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    keep = probs > 0
    return symbols[keep].astype(np.int64), probs[keep].astype(np.float64)


# --------------------------------------------------------------------------
# the source base classes


class Source(abc.ABC):
    """A reference source of symbols with known entropy.

    Attributes: ``spec`` (canonical text, stable, used in test ids and ledger
    keys; equal specs mean equal distributions), ``family``, ``params``
    (builtin numbers only), ``alphabet_size``/``min_symbol``/``max_symbol``
    (``None`` when unbounded), ``is_estimate`` (True when the entropy is a
    plug-in estimate from data), ``memoryless``.

    A subclass implements ``_compute_entropy``, ``_compute_varentropy``,
    ``_sample``, ``_self_information`` and ``_pmf_table``; the public methods
    check their arguments (with :mod:`pytest_ratefloor.validation`) and call
    them. Sources with memory also implement ``_compute_varentropy_rate`` and
    override :meth:`optimal_code_rate` and :meth:`adaptive_code_length`.
    """

    def __init__(
        self,
        *,
        family: str,
        spec: str,
        params: dict[str, float | int],
        alphabet_size: int | None,
        min_symbol: int | None,
        max_symbol: int | None,
        is_estimate: bool = False,
        memoryless: bool = True,
    ) -> None:
        self.family = family
        self.spec = spec
        self.params = params
        self.alphabet_size = alphabet_size
        self.min_symbol = min_symbol
        self.max_symbol = max_symbol
        self.is_estimate = is_estimate
        self.memoryless = memoryless
        self._entropy: float | None = None
        self._varentropy: float | None = None
        self._varentropy_rate: float | None = None

    def __repr__(self) -> str:
        return self.spec

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Source) and other.spec == self.spec

    def __hash__(self) -> int:
        return hash(self.spec)

    @property
    def entropy(self) -> float:
        """Entropy in bits/symbol (entropy rate for chains; an estimate for data)."""
        if self._entropy is None:
            self._entropy = float(self._compute_entropy())
        return self._entropy

    @property
    def varentropy(self) -> float:
        """Variance of -log2 P(X) in bits^2 (chains: of -log2 P(X_t | past), see subclass).

        One symbol's variance (for a source with memory: one step from
        stationarity); the spread of a long sample is :attr:`varentropy_rate`.
        """
        if self._varentropy is None:
            self._varentropy = float(self._compute_varentropy())
        return self._varentropy

    @property
    def varentropy_rate(self) -> float:
        """lim Var(information of the first n symbols) / n, in bits^2 per symbol.

        The information of a sample of ``n`` symbols (:meth:`information`)
        spreads around ``n * entropy`` by about ``sqrt(n * varentropy_rate)``
        bits (its central limit), so this, not :attr:`varentropy`, sets the
        sampling spread of a check. A memoryless source gives its
        ``varentropy``: the symbols are independent, so the variances of their
        information add. A source with memory adds the covariances between
        the information of different symbols (``varentropy + 2 Σ_{k≥1}
        Cov(f_0, f_k)`` for the per-symbol information f_t of the stationary
        source), computed by its ``_compute_varentropy_rate``; it does not
        depend on how the first symbols are drawn. Computed once, then cached.
        """
        if self._varentropy_rate is None:
            if self.memoryless:
                self._varentropy_rate = self.varentropy
            else:
                self._varentropy_rate = float(self._compute_varentropy_rate())
        return self._varentropy_rate

    def sample(self, n: int, seed: int = 0) -> np.ndarray:
        """``n`` symbols (int64), the same for the same ``seed`` on every platform."""
        count = validation.sample_size(n, minimum=0)
        bitgen = np.random.PCG64(validation.seed(seed))
        return self._sample(count, bitgen)

    def information(self, symbols: ArrayLike) -> float:
        """Total self-information -sum log2 P(x_i) of ``symbols`` in bits."""
        return float(np.sum(self.self_information(symbols)))

    def self_information(self, symbols: ArrayLike) -> np.ndarray:
        """Per-symbol -log2 P (float64); ValueError naming a symbol of probability 0."""
        x = _as_symbols(symbols)
        info = self._self_information(x)
        bad = np.flatnonzero(~np.isfinite(info))
        if bad.size:
            i = int(bad[0])
            raise ValueError(f"{self.spec}: {self._why_impossible(x, i)}")
        return info

    def pmf_table(self, tail: float = 2.0**-60) -> tuple[np.ndarray, np.ndarray]:
        """(symbols ascending int64, probabilities float64) missing at most ``tail`` mass.

        Finite sources give their exact support (symbols of probability > 0)
        and accept ``tail`` in [0, 1); unbounded ones need ``tail`` in (0, 1).
        Chains give their stationary marginal.
        """
        value = validation.real(
            tail, "tail", minimum=0.0, maximum=1.0, high_open=True,
            low_open=self.alphabet_size is None, where=f"{self.spec}.pmf_table",
        )
        return self._pmf_table(value)

    def optimal_code_rate(self) -> float:
        """Expected bits/symbol of the best symbol-by-symbol prefix code for this source.

        Memoryless default: the Huffman code of the pmf (Huffman 1952), on
        ``pmf_table(tail=floors.HUFFMAN_TAIL)`` for an unbounded alphabet (the
        missing mass changes the expected length by less than 2⁻⁵⁰
        bits/symbol). 0 when a single symbol is possible: nothing needs
        sending when ``n`` is known. The ``"huffman"`` floor is ``n`` times this.
        """
        from pytest_ratefloor import floors

        _, probs = self.pmf_table(tail=floors.HUFFMAN_TAIL)
        return floors.huffman_expected_length(probs)

    def adaptive_code_length(self, sample: ArrayLike) -> float:
        """Krichevsky–Trofimov ideal code length of ``sample`` in bits (the ``"adaptive"`` floor).

        Memoryless default: one KT estimator (½-counts) over the alphabet of
        ``alphabet_size`` symbols; for an unbounded alphabet over the sample's
        range ``max − min + 1`` (the coder is assumed to know that range).
        See :func:`pytest_ratefloor.floors.kt_bits`.
        """
        from pytest_ratefloor import floors

        x = _as_symbols(sample)
        if x.size == 0:
            return 0.0
        k = self.alphabet_size
        if k is None:
            k = int(x.max()) - int(x.min()) + 1
        return floors.kt_bits(floors.symbol_counts(x), int(k))

    def rate_distortion(self, D: float, distortion: object = "hamming") -> float:
        """R(D) in bits/symbol: the least rate of any code with mean distortion <= ``D``.

        ``distortion`` is ``"hamming"`` (D = the symbol error rate, 0 <= D;
        R(0) is the entropy) or a matrix ``d[x, y] >= 0`` whose rows follow
        ``pmf_table()[0]`` and whose columns are the reproduction symbols.
        Computed by Blahut–Arimoto to within 1e-9 bits (bounds and
        truncation: :func:`pytest_ratefloor.ratedistortion.discrete_rate_distortion`);
        ``RuntimeError`` if the bounds did not meet within the step budget.
        A source with memory raises ``ValueError`` (its R(D) is not the
        memoryless one; :func:`pytest_ratefloor.ratedistortion.hamming_lower_bound`
        gives a lower bound).
        """
        from pytest_ratefloor import ratedistortion

        res = ratedistortion.discrete_rate_distortion(self, D, distortion)
        if not res.converged:
            raise RuntimeError(
                f"{self.spec}.rate_distortion: Blahut–Arimoto stopped after {res.iterations} "
                f"steps with R({res.distortion!r}) only known to lie in "
                f"[{res.rate_lower!r}, {res.rate_upper!r}] bits/symbol "
                "(ratedistortion.discrete_rate_distortion returns such bounds)")
        return res.rate

    def distortion_rate(self, R: float, distortion: object = "hamming") -> float:
        """D(R): the least mean distortion any code of ``R`` bits/symbol can reach (R >= 0)."""
        from pytest_ratefloor import ratedistortion

        return ratedistortion.discrete_distortion_rate(self, R, distortion)

    def describe(self) -> str:
        """One line for people: the spec and what its entropy figure is."""
        kind = "plug-in entropy estimate" if self.is_estimate else "entropy"
        if not self.memoryless:
            kind += " rate"
        return f"{self.spec}: {kind} {self.entropy:.6g} bits/symbol"

    def _why_impossible(self, x: np.ndarray, i: int) -> str:
        return f"symbol {int(x[i])} at index {i} has probability 0 (outside the support)"

    @abc.abstractmethod
    def _compute_entropy(self) -> float: ...

    @abc.abstractmethod
    def _compute_varentropy(self) -> float: ...

    def _compute_varentropy_rate(self) -> float:
        """:attr:`varentropy_rate` of a source with memory (``memoryless`` False).

        Memoryless sources never reach this hook; every source with memory
        must override it. The one-step ``varentropy`` is no answer for them (it
        misses the covariances between symbols), so the default refuses.
        """
        raise NotImplementedError(
            f"{self.spec}: a source with memory must implement _compute_varentropy_rate"
        )

    @abc.abstractmethod
    def _sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray: ...

    @abc.abstractmethod
    def _self_information(self, x: np.ndarray) -> np.ndarray:
        """-log2 P per position, inf where the probability is 0."""

    @abc.abstractmethod
    def _pmf_table(self, tail: float) -> tuple[np.ndarray, np.ndarray]:
        """:meth:`pmf_table` for a ``tail`` already checked."""


class _Memoryless(Source):
    """A source of independent, identically distributed symbols."""

    def _sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        return _draw_in_chunks(self._draw, n, bitgen)

    @abc.abstractmethod
    def _draw(self, words: np.ndarray) -> np.ndarray:
        """Symbols (int64) for raw words, one word each."""
