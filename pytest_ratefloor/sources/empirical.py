"""Sources fitted to the user's own data, whose entropy is a plug-in *estimate*.

:class:`Empirical` is an order-k context model counted over the data read
as a ring (order 0: the histogram); :func:`from_file` reads a file's bytes as
symbols through the project's one layout table
(:mod:`pytest_ratefloor.layouts`). An entropy measured on one stretch of
data says nothing certain about other data from the same origin, so these
sources set ``is_estimate``. Also here: the context counts of a model and
of a sample, on which the per-context floors of an order-k model are built.
"""

from __future__ import annotations

import math
import os
import re

import numpy as np
from numpy.typing import ArrayLike

from pytest_ratefloor import layouts, validation
from pytest_ratefloor.errors import LayoutError
from pytest_ratefloor.sources.base import (
    _INT64_MAX,
    _LN2,
    Source,
    _as_symbols,
    _digest,
    _log2_ratio,
)
from pytest_ratefloor.sources.chain_sampler import _ChainSampler
from pytest_ratefloor.sources.chains import _chain_varentropy_rate
from pytest_ratefloor.sources.sampling import (
    _draw_in_chunks,
    _InverseCdf,
    _thresholds_from_weights,
)


def _lookup_rows(model: np.ndarray, query: np.ndarray) -> np.ndarray:
    """Index of each query row among the distinct ``model`` rows, -1 if absent."""
    if query.shape[0] == 0:
        return np.zeros(0, dtype=np.int64)
    _, inverse = np.unique(np.vstack([model, query]), axis=0, return_inverse=True)
    inverse = inverse.ravel()
    where = np.full(int(inverse.max()) + 1, -1, dtype=np.int64)
    where[inverse[: model.shape[0]]] = np.arange(model.shape[0])
    return where[inverse[model.shape[0] :]]


#: Most bins a direct count (``numpy.bincount``) may use; wider keys are sorted instead.
_COUNT_BINS = 1 << 22


def _symbol_ranks(data: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(the distinct symbols ascending, each symbol's rank among them), as ``np.unique`` gives.

    Small non-negative symbols (bytes, 16-bit words) are counted in bins
    instead of sorted.
    """
    if data.size and int(data.min()) >= 0 and int(data.max()) < _COUNT_BINS:
        present = np.bincount(data) > 0
        if present.all():  # every symbol 0..max occurs: each is its own rank
            return np.arange(present.size, dtype=np.int64), data.astype(np.int64, copy=False)
        rank = np.cumsum(present) - 1
        return np.flatnonzero(present).astype(np.int64), rank[data]
    alphabet, ranks = np.unique(data, return_inverse=True)
    return alphabet, ranks.ravel().astype(np.int64)


def _distinct_counts(code: np.ndarray, bins: int) -> tuple[np.ndarray, np.ndarray]:
    """(distinct values ascending, their counts) of non-negative ``code`` below ``bins``."""
    if bins <= max(_COUNT_BINS, 4 * code.size):
        counts = np.bincount(code, minlength=bins)
        values = np.flatnonzero(counts)
        return values.astype(np.int64), counts[values]
    values, counts = np.unique(code, return_counts=True)
    return values, counts


def _context_ids(codes: np.ndarray, base: int, span: int) -> tuple[np.ndarray, np.ndarray]:
    """The contexts of packed grams, as ``np.unique(..., return_inverse=True)`` gives them.

    ``codes``: the distinct packed (k+1)-grams of a ring, ascending; a gram's
    first context is ``code // base`` and the context it leads to
    ``code % span``. Returns (the distinct contexts ascending, the index of
    each gram's first context then of each gram's next context). On a ring
    every context that ends a gram also begins one, so the distinct first
    contexts (change points of a sorted array) are all of them.
    """
    first = codes // base
    last = codes - codes // span * span  # codes % span (numpy's integer % is the slower)
    starts = np.empty(first.size, dtype=bool)
    starts[:1] = True
    np.not_equal(first[1:], first[:-1], out=starts[1:])
    contexts = first[starts]
    if span <= max(_COUNT_BINS, 4 * codes.size):
        rank = np.zeros(span, dtype=np.int64)
        rank[contexts] = np.arange(contexts.size)
        first_ids, last_ids = np.take(rank, first), np.take(rank, last)
    else:
        first_ids = np.cumsum(starts, dtype=np.int64) - 1
        last_ids = np.searchsorted(contexts, last)
    return contexts.astype(np.int64), np.concatenate([first_ids, last_ids])


def _context_model(
    data: np.ndarray, k: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Counts of the (k+1)-grams of ``data`` read as a ring.

    Returns (grams, counts, contexts, gram_context, gram_next): the distinct
    grams in lexicographic order with their counts, the distinct k-gram
    contexts (lexicographic), and for each gram the index of its context
    (first k symbols) and of the context it leads to (last k symbols).
    Symbols are replaced by their ranks and each gram packed into one int64
    when the alphabet allows, so long data is counted with 1-D sorts.
    """
    n = data.size
    width = k + 1
    alphabet, ranks = _symbol_ranks(data)
    base = int(alphabet.size)
    if base**width < 1 << 62:
        # narrower integers (and sorts) when the packed grams fit in 31 bits
        dtype = np.int32 if base**width < 1 << 31 else np.int64
        ring = np.concatenate([ranks, ranks[:k]]).astype(dtype)
        code = ring[:n] * base if width > 1 else ring[:n].copy()
        for j in range(1, width):
            code += ring[j : j + n]
            if j < width - 1:
                code *= base
        codes, counts = _distinct_counts(code, base**width)
        ctx_codes, ctx_ids = _context_ids(codes, base, base**k)
        identity = bool(alphabet[-1] == base - 1)  # the symbols are 0..base-1: their own ranks

        def unpack(packed: np.ndarray, size: int) -> np.ndarray:
            out = np.empty((packed.size, size), dtype=np.int64)
            rest = packed
            for j in range(size - 1, -1, -1):
                above = rest // base
                digit = rest - above * base  # rest % base (numpy's integer % is the slower)
                out[:, j] = digit if identity else np.take(alphabet, digit)
                rest = above
            return out

        grams, contexts = unpack(codes, width), unpack(ctx_codes, k)
    else:
        windows = np.lib.stride_tricks.sliding_window_view(np.concatenate([data, data[:k]]), width)
        grams, counts = np.unique(windows, axis=0, return_counts=True)
        contexts, ctx_ids = np.unique(
            np.vstack([grams[:, :k], grams[:, 1:]]), axis=0, return_inverse=True
        )
    ctx_ids = ctx_ids.ravel()
    rows = grams.shape[0]
    return grams, counts.astype(np.int64), contexts, ctx_ids[:rows], ctx_ids[rows:]


def _distinct_counts_of_symbols(data: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(distinct symbols ascending, their counts): binned for small non-negative symbols."""
    if data.size and int(data.min()) >= 0 and int(data.max()) < _COUNT_BINS:
        return _distinct_counts(data, int(data.max()) + 1)
    return np.unique(data, return_counts=True)


def _sample_context_counts(x: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """Counts of the distinct (k+1)-grams ``x[i-k..i]``, ``i >= k``, of a sample read
    linearly (not as a ring), with a label of each gram's context (its first k symbols).

    Packs each gram into one int64 of symbol ranks when the alphabet allows,
    as :func:`_context_model` does.
    """
    width = k + 1
    alphabet, ranks = np.unique(x, return_inverse=True)
    ranks = ranks.ravel().astype(np.int64)
    base = int(alphabet.size)
    m = x.size - k
    if base**width < 1 << 62:
        code = np.zeros(m, dtype=np.int64)
        for j in range(width):
            code *= base
            code += ranks[j : j + m]
        packed, counts = np.unique(code, return_counts=True)
        return counts, packed // base
    windows = np.lib.stride_tricks.sliding_window_view(x, width)
    grams, counts = np.unique(windows, axis=0, return_counts=True)
    _, contexts = np.unique(grams[:, :k], axis=0, return_inverse=True)
    return counts, contexts.ravel()


class Empirical(Source):
    """A source fitted to data; its entropy is a plug-in *estimate*.

    ``order=0``: the histogram of the data; entropy estimate
    Ĥ0 = -Σ (c_x/n) log2(c_x/n); sampling resamples the histogram (i.i.d.).

    ``order=k>0``: an order-k context model fitted to the data read as a ring
    (the last k symbols are followed by the first ones, so every context has
    a successor and the k-gram frequencies are the model's stationary
    distribution). Entropy estimate: the conditional plug-in entropy
    Ĥk = -Σ (c(w,x)/n) log2(c(w,x)/c(w)) over the n cyclic (k+1)-grams w·x,
    which is exactly the entropy rate of the fitted model (it differs from
    the linear count over positions k..n-1 by O(k/n)). Sampling starts with a
    k-gram drawn by its frequency and then draws each symbol from the
    counts that followed its context; ``varentropy`` is the per-symbol
    variance of -log2 P(x | context) under the same frequencies, and
    ``varentropy_rate`` the asymptotic variance per symbol of a sample's
    information: the model is a chain on its k-gram contexts (a (k+1)-gram
    leads from its first k symbols to its last k), solved on that sparse
    graph for many contexts (see :func:`~pytest_ratefloor.sources.chains._chain_varentropy_rate`).
    Order 0 is memoryless: its rate is its ``varentropy``.

    An estimate from one stretch of data is not a property of its origin:
    it is biased low (a plug-in estimate never sees unseen symbols), more so
    for large k and short data.
    """

    def __init__(
        self, data: ArrayLike | bytes, order: int = 0, *, _spec: str | None = None
    ) -> None:
        where = "from_file" if _spec else "empirical"
        self.order = validation.integer(order, "order", minimum=0, where=where)
        if isinstance(data, (bytes, bytearray, memoryview)):
            arr = np.frombuffer(bytes(data), dtype=np.uint8).astype(np.int64)
        else:
            if isinstance(data, str):
                raise TypeError(
                    f"{where}: data must be a 1-D sequence of integer symbols, "
                    f"got {validation.show(data)}"
                )
            raw = np.asarray(data)
            if raw.ndim != 1:
                raise ValueError(
                    f"{where}: data must be a 1-D sequence of integer symbols, "
                    f"got shape {raw.shape}"
                )
            if raw.size == 0:
                arr = np.zeros(0, dtype=np.int64)
            elif raw.dtype.kind in "iub":
                if raw.dtype.kind == "u" and int(raw.max()) > _INT64_MAX:
                    raise ValueError(
                        f"{where}: data symbols must fit in int64, got {int(raw.max())}"
                    )
                arr = raw.astype(np.int64)
            else:
                raise TypeError(f"{where}: data must be integer symbols, got dtype {raw.dtype}")
        n = int(arr.size)
        if n == 0:
            raise ValueError(
                f"{where}: data is empty; an entropy estimate needs at least one symbol"
            )
        if self.order >= n:
            raise ValueError(
                f"{where}: order must be less than the data length {n}, got {self.order}"
            )
        self.data = arr
        self.n = n
        self.path: str | None = None  # set by from_file
        k = self.order
        rows, counts, contexts, row_ctx, row_next = _context_model(arr, k)
        self._rows = rows  # distinct (k+1)-grams, lexicographic, so contexts are contiguous
        self._counts = counts
        self._contexts = contexts
        self._row_ctx = row_ctx
        self._row_next = row_next
        # c(w): rows are sorted by context and every context begins a gram (a ring)
        firsts = np.flatnonzero(np.diff(row_ctx, prepend=-1))
        self._ctx_counts = np.add.reduceat(counts, firsts).astype(np.int64)
        # -log2(c(w x) / c(w)), via log1p where the ratio is near 1
        c = counts.astype(np.float64)
        t = np.take(self._ctx_counts.astype(np.float64), row_ctx)
        neg_log2 = np.log2(t) - np.log2(c)
        near = np.flatnonzero(2 * c > t)
        neg_log2[near] = -np.log1p((c[near] - t[near]) / t[near]) / _LN2
        self._row_neg_log2 = neg_log2
        symbols, sym_counts = _distinct_counts_of_symbols(arr)
        self.symbols = symbols
        self.counts = sym_counts.astype(np.int64)
        if _spec is None:
            sha = _digest(b"empirical", arr.astype("<i8").tobytes())
            _spec = f"empirical(n={n},sha={sha},order={k})"
        super().__init__(
            family="empirical",
            spec=_spec,
            params={"n": n, "order": k},
            alphabet_size=int(symbols.size),
            min_symbol=int(symbols[0]),
            max_symbol=int(symbols[-1]),
            is_estimate=True,
            memoryless=k == 0,
        )
        self._table: _InverseCdf | None = None
        self._chain: _ChainSampler | None = None

    def _compute_entropy(self) -> float:
        return math.fsum((self._counts * self._row_neg_log2).tolist()) / self.n

    def _compute_varentropy(self) -> float:
        dev = self._row_neg_log2 - self.entropy
        return math.fsum((self._counts * dev * dev).tolist()) / self.n

    def _compute_varentropy_rate(self) -> float:
        """Order k > 0: the context chain, its edges the distinct (k+1)-grams.

        Context w has stationary probability c(w)/n (the data is a ring, so
        every context is left as often as it is entered) and gram w·x leads
        to context (w·x)[1:] with probability c(w·x)/c(w) and weight c(w·x)/n.
        """
        counts = self._counts.astype(np.float64)
        ctx_counts = self._ctx_counts.astype(np.float64)
        return _chain_varentropy_rate(
            ctx_counts / self.n,
            self._row_ctx,
            self._row_next,
            counts / ctx_counts[self._row_ctx],
            counts / self.n,
            self._row_neg_log2,
            self.entropy,
        )

    def _sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        if self.order == 0:
            if self._table is None:
                self._table = _InverseCdf(
                    _thresholds_from_weights(self.counts.tolist()), self.symbols
                )
            return _draw_in_chunks(self._table, n, bitgen)
        if self._chain is None:
            bounds = np.flatnonzero(np.diff(self._row_ctx)) + 1
            groups = np.split(np.arange(self._rows.shape[0]), bounds)
            self._chain = _ChainSampler(
                self._ctx_counts.tolist(),
                self._contexts.tolist(),
                [self._counts[g].tolist() for g in groups],
                [self._row_next[g].tolist() for g in groups],
                self._contexts[:, -1].tolist(),  # a gram's symbol ends the context it leads to
            )
        return self._chain.sample(n, bitgen)

    def _self_information(self, x: np.ndarray) -> np.ndarray:
        k = self.order
        info = np.full(x.shape, np.inf)
        if x.size == 0:
            return info
        previous = self.n
        for i in range(min(k, x.size)):  # P(x_i | x_0..x_{i-1}) from the k-gram frequencies
            match = (self._contexts[:, : i + 1] == x[: i + 1]).all(axis=1)
            count = int(self._ctx_counts[match].sum())
            if count == 0:
                break
            info[i] = -_log2_ratio(count, previous)
            previous = count
        if x.size > k:
            grams = np.lib.stride_tricks.sliding_window_view(x, k + 1)
            found = _lookup_rows(self._rows, grams)
            ok = found >= 0
            info[k:][ok] = self._row_neg_log2[found[ok]]
        return info

    def _why_impossible(self, x: np.ndarray, i: int) -> str:
        k = self.order
        if k == 0:
            return (
                f"symbol {int(x[i])} at index {i} never occurs in the data "
                "(probability 0 under the estimate)"
            )
        if i < k:
            start = ",".join(str(int(s)) for s in x[: i + 1])
            return (
                f"the opening symbols ({start}) never occur in the data "
                "(probability 0 under the estimate)"
            )
        ctx = ",".join(str(int(s)) for s in x[i - k : i])
        return f"symbol {int(x[i])} at index {i} never follows context ({ctx}) in the data"

    def _pmf_table(self, tail: float) -> tuple[np.ndarray, np.ndarray]:
        return self.symbols.astype(np.int64), np.array([c / self.n for c in self.counts.tolist()])

    def optimal_code_rate(self) -> float:
        """Best symbol-by-symbol prefix code: order 0 a Huffman code of the histogram;
        order k > 0 one Huffman code per context for the counts that follow it.

        Order k: ``Σ_w (c(w)/n) L_w`` with ``L_w`` the expected Huffman length
        under the successor counts of context ``w`` (0 for a context with a
        single successor), i.e. the bits of coding the data (as a ring) with
        those codes, divided by ``n``.
        """
        if self.order == 0:
            return super().optimal_code_rate()
        from pytest_ratefloor import codes

        bounds = np.flatnonzero(np.diff(self._row_ctx)) + 1  # rows of one context are contiguous
        starts = np.concatenate([[0], bounds])
        sizes = np.diff(np.concatenate([starts, [self._counts.size]]))
        lengths = np.zeros(self._counts.size, dtype=np.int64)
        lengths[np.repeat(sizes == 2, sizes)] = 1  # two successors: one bit each
        for start, size in zip(starts.tolist(), sizes.tolist()):
            if size > 2:
                lengths[start : start + size] = codes.huffman_lengths(
                    self._counts[start : start + size]
                )
        return math.fsum((self._counts * lengths).tolist()) / self.n

    def adaptive_code_length(self, sample: ArrayLike) -> float:
        """KT code length of ``sample``: order 0 one estimator over the data's alphabet;
        order k > 0 one estimator per context (the k symbols before).

        Order k: the first k symbols cost ``log2 K`` each (``K`` the data's
        alphabet size); every later symbol is coded by the KT estimator of its
        context, over ``K`` symbols.
        """
        if self.order == 0:
            return super().adaptive_code_length(sample)
        from pytest_ratefloor import floors

        x = _as_symbols(sample)
        k = int(self.symbols.size)
        opening = min(self.order, x.size) * math.log2(k)
        if x.size <= self.order:
            return opening
        counts, contexts = _sample_context_counts(x, self.order)
        return opening + floors.context_kt_bits(counts, contexts, k)


def from_file(path: str | os.PathLike[str], symbol: str = "u8", order: int = 0) -> Empirical:
    """An empirical source read from a file; entropy is a plug-in estimate.

    ``symbol`` names how the bytes hold symbols: any layout of
    :data:`pytest_ratefloor.layouts.LAYOUTS` (``"u8"``: one symbol per byte;
    ``"bits"``: eight symbols per byte, most significant bit first;
    ``"u16le"``/``"u32le"``/``"i32le"`` and the zig-zag layouts: little-endian
    words, and the file length must be a whole number of them). The spec
    carries the file name and a hash of its content.

    :raises LayoutError: the file is not a whole number of symbols (a ``ValueError``).
    """
    symbol = validation.choice(symbol, "symbol", layouts.LAYOUTS, where="from_file")
    order = validation.integer(order, "order", minimum=0, where="from_file")
    name = os.fspath(path)
    with open(name, "rb") as handle:
        content = handle.read()
    if not content:
        raise ValueError(
            f"from_file: {name} is empty; an entropy estimate needs at least one symbol"
        )
    try:
        data = layouts.unpack(content, None, symbol)
    except LayoutError as exc:
        raise LayoutError(f"from_file: {name}: {exc}") from None
    label = re.sub(r"[^A-Za-z0-9._-]", "_", os.path.basename(name)) or "file"
    spec = f"from_file(name={label},symbol={symbol},order={order},sha={_digest(b'file', content)})"
    source = Empirical(data, order, _spec=spec)
    source.path = name
    return source
