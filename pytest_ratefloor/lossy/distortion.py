"""Distortion measures of the lossy checks: which one a case uses, and its per-sample values.

A distortion is named by a string or given as a matrix:

``"mse"``
    squared error ``(x − x̂)²`` (real-valued sources; the mean is the MSE);
``"abs"``
    absolute error ``|x − x̂|``;
``"hamming"``
    ``0`` when ``x̂ = x``, else ``1`` (finite-alphabet sources; the mean is the
    symbol error rate);
a matrix ``d``
    ``d[i, j]`` is the cost of reconstructing the ``i``-th symbol of the
    source's alphabet (its ``pmf_table`` symbols, ascending) as the value
    ``j`` (``0 ≤ j <`` number of columns). Entries finite and ``≥ 0``.

When no distortion is given, a source's own ``default_distortion`` is used
(``"hamming"`` for a finite-alphabet source that names none).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Union

import numpy as np

from pytest_ratefloor import validation
from pytest_ratefloor.sources.base import Source

if TYPE_CHECKING:
    from pytest_ratefloor.sources.continuous import ContinuousSource

__all__ = ["DISTORTION_NAMES", "Distortion", "LossySource", "resolve_distortion"]

#: What the lossy checks measure on: a finite-alphabet :class:`Source` or a
#: real-valued source (Gaussian, Laplacian, Gauss–Markov).
LossySource = Union[Source, "ContinuousSource"]

#: The named distortion measures.
DISTORTION_NAMES = ("mse", "abs", "hamming")


@dataclass(frozen=True, eq=False)
class Distortion:
    """One distortion measure: its ``kind`` (a name, or ``"matrix"``) and the matrix if any.

    ``symbols`` (matrix only) are the source's alphabet symbols that index its rows.
    """

    kind: str
    matrix: np.ndarray | None = None
    symbols: np.ndarray | None = None

    @property
    def argument(self) -> Any:
        """What to pass as ``distortion=`` to the source's ``rate_distortion``."""
        return self.kind if self.matrix is None else self.matrix

    @property
    def label(self) -> str:
        """Short text for messages and records (``"mse"``, ``"matrix 3x4"``)."""
        if self.matrix is None:
            return self.kind
        rows, cols = self.matrix.shape
        return f"matrix {rows}x{cols}"

    def matrix_record(self) -> list[list[float]] | None:
        """The matrix as nested lists of floats (for a JSON record), or ``None``."""
        return None if self.matrix is None else self.matrix.tolist()

    def per_sample(self, sample: np.ndarray, recon: np.ndarray) -> np.ndarray:
        """The distortion of each sample position (float64).

        A matrix distortion needs every reconstruction to be a column index and
        every source symbol to be in the alphabet: the caller checks the
        reconstruction first with :meth:`bad_reconstruction`.
        """
        if self.kind == "mse":
            diff = sample.astype(np.float64) - recon.astype(np.float64)
            return diff * diff
        if self.kind == "abs":
            return np.abs(sample.astype(np.float64) - recon.astype(np.float64))
        if self.kind == "hamming":
            return (sample != recon).astype(np.float64)
        assert self.matrix is not None
        assert self.symbols is not None
        rows = np.searchsorted(self.symbols, sample)
        return np.asarray(self.matrix[rows, recon.astype(np.int64)], dtype=np.float64)

    def bad_reconstruction(self, recon: np.ndarray) -> int | None:
        """The first index whose reconstruction has no column in the matrix (else ``None``)."""
        if self.matrix is None:
            return None
        cols = self.matrix.shape[1]
        bad = np.flatnonzero((recon < 0) | (recon >= cols))
        return int(bad[0]) if bad.size else None


def _matrix(value: object, source: LossySource) -> Distortion:
    where = f"{source.spec}: distortion"
    try:
        raw = np.asarray(value)
    except (TypeError, ValueError):
        raise TypeError(validation.message("distortion", "'mse', 'abs', 'hamming' or a matrix",
                                           value, source.spec)) from None
    if raw.dtype.kind not in "iuf" or raw.ndim != 2 or 0 in raw.shape:
        raise TypeError(validation.message(
            "distortion", "'mse', 'abs', 'hamming' or a non-empty 2-D matrix of numbers",
            value, source.spec))
    matrix = raw.astype(np.float64)
    if not bool(np.all(np.isfinite(matrix) & (matrix >= 0))):
        raise ValueError(validation.message("distortion matrix", "finite and >= 0 everywhere",
                                            value, where))
    if not isinstance(source, Source) or source.alphabet_size is None:
        raise ValueError(validation.message(
            "distortion", "a named measure for a source without a finite alphabet",
            validation.Described(f"a {matrix.shape[0]}x{matrix.shape[1]} matrix"), source.spec))
    symbols, _ = source.pmf_table(tail=0.0)
    if matrix.shape[0] != len(symbols):
        raise ValueError(validation.message(
            "distortion matrix", f"one row per alphabet symbol ({len(symbols)} rows)",
            validation.Described(f"{matrix.shape[0]} rows"), source.spec))
    matrix.flags.writeable = False
    return Distortion("matrix", matrix, np.asarray(symbols, dtype=np.int64))


def resolve_distortion(value: object, source: LossySource) -> Distortion:
    """The distortion measure of a case: ``value``, or the source's default when ``None``.

    :raises TypeError: not a name or a matrix of numbers.
    :raises ValueError: an unknown name, or a matrix whose rows do not match the alphabet.
    """
    if value is None:
        value = getattr(source, "default_distortion", None) or "hamming"
    if isinstance(value, str):
        return Distortion(validation.choice(value, "distortion", DISTORTION_NAMES))
    return _matrix(value, source)
