"""``ratefloor entropy``: the empirical entropy of data files, counted in one bounded pass.

Each file is read once in chunks; order-0 and conditional order-K plug-in
entropies (estimates from the file itself) are computed from symbol and k-gram
counts carried across chunks, beside what the standard library's zlib (level 9)
and lzma reach on the same bytes. numpy is imported only when a file is counted.
"""

from __future__ import annotations

import json
import lzma
import math
import zlib
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from pytest_ratefloor.errors import CommandLineError
from pytest_ratefloor.escaping import json_safe, markdown_text, md_name, terminal_text
from pytest_ratefloor.layouts import LAYOUTS
from pytest_ratefloor.report import finite


@dataclass(frozen=True)
class EntropyFigures:
    """Order-0 and order-K empirical entropy of one file, with stdlib compressors for comparison."""

    path: Path
    size: int
    symbol: str
    symbols: int
    distinct: int
    order: int
    h0: float
    hk: float | None
    contexts: int | None
    zlib_bytes: int
    lzma_bytes: int

    @staticmethod
    def floor_bytes(h: float, n: int) -> int:
        return math.ceil(h * n / 8.0 - 1e-9)


#: Bytes read at a time by ``ratefloor entropy`` (a multiple of every word size).
CHUNK_BYTES = 8 << 20


def _merge_counts(acc: tuple[Any, Any] | None, keys: Any, counts: Any) -> tuple[Any, Any]:
    """Sorted distinct ``keys`` with summed ``counts``: ``acc`` merged with one chunk's."""
    import numpy as np

    if acc is not None:
        keys, counts = np.concatenate([acc[0], keys]), np.concatenate([acc[1], counts])
    merged, inverse = np.unique(keys, return_inverse=True)
    total = np.zeros(merged.size, dtype=np.int64)
    np.add.at(total, inverse.ravel(), counts)
    return merged, total


def _neg_log2_terms(c: Any, t: Any) -> Any:
    """``-log2(c/t)`` per gram, computed as the empirical sources compute it."""
    import numpy as np

    from pytest_ratefloor.sources.base import _LN2

    c, t = c.astype(np.float64), t.astype(np.float64)
    near_one = 2 * c > t
    return np.where(near_one, -np.log1p(np.where(near_one, (c - t) / t, 0.0)) / _LN2,
                    np.log2(t) - np.log2(c))


def _plug_in(gram_counts: Any, ctx_of_gram: Any, n: int) -> float:
    """Conditional plug-in entropy from (k+1)-gram counts and each gram's context label."""
    import numpy as np

    _, ctx = np.unique(ctx_of_gram, return_inverse=True)
    ctx = ctx.ravel()
    ctx_counts = np.bincount(ctx, weights=gram_counts).astype(np.int64)
    terms = gram_counts * _neg_log2_terms(gram_counts, ctx_counts[ctx])
    return math.fsum(terms.tolist()) / n


class _GramCounter:
    """Counts of the (k+1)-grams of a symbol stream fed in chunks, read as a ring.

    The last k symbols of each chunk are carried into the next; the first k
    symbols are kept for the wrap-around grams. Grams are packed into one
    int64 (symbol minus the layout's lowest value, base the layout's span) when
    they fit, else counted as rows.
    """

    def __init__(self, k: int, lo: int, hi: int) -> None:
        import numpy as np

        self.k, self.lo, self.base = k, lo, hi - lo + 1
        self.packed = self.base ** (k + 1) < 1 << 62
        self.dense = self.packed and self.base ** (k + 1) <= 1 << 24
        self.tail = np.zeros(0, dtype=np.int64)
        self.head = np.zeros(0, dtype=np.int64)
        self.table: Any = np.zeros(self.base ** (k + 1) if self.dense else 0, dtype=np.int64)
        self.acc: tuple[Any, Any] | None = None

    def _count(self, stream: Any) -> None:
        import numpy as np

        width = self.k + 1
        if stream.size < width:
            return
        if self.packed:
            m = stream.size - self.k
            code = np.zeros(m, dtype=np.int64)
            for j in range(width):
                code *= self.base
                code += stream[j: j + m] - self.lo
            if self.dense:
                self.table += np.bincount(code, minlength=self.table.size)
                return
            keys, counts = np.unique(code, return_counts=True)
        else:
            rows = np.ascontiguousarray(np.lib.stride_tricks.sliding_window_view(stream, width))
            keys, counts = np.unique(rows.view(np.dtype((np.void, 8 * width))).ravel(),
                                     return_counts=True)
        self.acc = _merge_counts(self.acc, keys, counts.astype(np.int64))

    def feed(self, symbols: Any) -> None:
        import numpy as np

        if self.head.size < self.k:
            self.head = np.concatenate([self.head, symbols[: self.k - self.head.size]])
        stream = np.concatenate([self.tail, symbols])
        self._count(stream)
        self.tail = stream[stream.size - self.k:] if self.k else stream[:0]

    def finish(self) -> tuple[Any, Any, int]:
        """(gram counts, context label per gram, distinct linear k-grams)."""
        import numpy as np

        k = self.k
        self._count(np.concatenate([self.tail, self.head]))  # the k grams across the wrap
        if self.dense:
            keys = np.flatnonzero(self.table)
            counts = self.table[keys]
        else:
            assert self.acc is not None
            keys, counts = self.acc
        ctx: Any
        if self.packed:
            ctx = keys // self.base
        else:
            rows = keys.view(np.int64).reshape(-1, k + 1)
            ctx = np.ascontiguousarray(rows[:, :k]).view(np.dtype((np.void, 8 * k))).ravel()
        # k-grams of the linear data: those of the ring less the k-1 that cross the wrap
        labels, inverse = np.unique(ctx, return_inverse=True)
        ring = np.bincount(inverse.ravel(), weights=counts, minlength=labels.size)
        wrap = np.concatenate([self.tail[1:], self.head[: k - 1]])
        if k > 1:
            win = np.ascontiguousarray(np.lib.stride_tricks.sliding_window_view(wrap, k))
            if self.packed:
                code: Any = np.zeros(win.shape[0], dtype=np.int64)
                for j in range(k):
                    code = code * self.base + (win[:, j] - self.lo)
                wrap_labels: Any = code
            else:
                wrap_labels = win.view(np.dtype((np.void, 8 * k))).ravel()
            for label in wrap_labels:
                ring[np.searchsorted(labels, label)] -= 1
        return counts, ctx, int(np.count_nonzero(ring))


def entropy_files(path: Path) -> list[Path]:
    """``path`` itself, or the regular files of a folder, sorted."""
    if path.is_dir():
        files = sorted(p for p in path.iterdir() if p.is_file())
        if not files:
            raise CommandLineError(f"{path}: folder holds no file")
        return files
    if not path.is_file():
        raise CommandLineError(f"{path}: no such file")
    return [path]


def entropy_figures(path: Path, symbol: str, order: int,
                    chunk_bytes: int = CHUNK_BYTES) -> EntropyFigures:
    """Read ``path`` once in chunks of ``chunk_bytes`` and compute its figures.

    The estimates equal those of ``sources.from_file`` (plug-in entropies of the
    data read as a ring); memory stays bounded by the chunk size and the number
    of distinct grams.
    """
    if not path.is_file():
        raise CommandLineError(f"{path}: no such file")
    layout = LAYOUTS[symbol]
    width = layout.bytes_per_symbol
    size = path.stat().st_size
    if width > 1 and size % int(width):
        raise CommandLineError(f"{path}: {size} bytes is not a whole number of {symbol} symbols")
    if chunk_bytes <= 0 or chunk_bytes % 8:
        raise ValueError(f"chunk_bytes must be a positive multiple of 8, got {chunk_bytes}")

    import numpy as np

    from pytest_ratefloor import layouts

    zero = _GramCounter(0, layout.lo, layout.hi)
    higher = _GramCounter(order, layout.lo, layout.hi) if order > 0 else None
    deflate, xz = zlib.compressobj(9), lzma.LZMACompressor(preset=9)
    zlib_bytes = lzma_bytes = n = 0
    with open(path, "rb") as handle:
        while chunk := handle.read(chunk_bytes):
            symbols = layouts.unpack(chunk, None, symbol)
            n += int(symbols.size)
            zero.feed(symbols)
            if higher is not None:
                higher.feed(symbols)
            zlib_bytes += len(deflate.compress(chunk))
            lzma_bytes += len(xz.compress(chunk))
    zlib_bytes += len(deflate.flush())
    lzma_bytes += len(xz.flush())
    if n == 0:
        raise CommandLineError(
            f"from_file: {path} is empty; an entropy estimate needs at least one symbol")
    if order >= n:
        raise CommandLineError(
            f"from_file: order must be less than the data length {n}, got {order}")
    counts0, _, _ = zero.finish()
    h0 = _plug_in(counts0, np.zeros(counts0.size, dtype=np.int64), n)
    hk = contexts = None
    if higher is not None:
        counts, ctx, contexts = higher.finish()
        hk = _plug_in(counts, ctx, n)
    return EntropyFigures(
        path=path, size=size, symbol=symbol, symbols=n, distinct=int(counts0.size),
        order=order, h0=h0, hk=hk, contexts=contexts, zlib_bytes=zlib_bytes,
        lzma_bytes=lzma_bytes,
    )


def entropy_json(f: EntropyFigures) -> dict[str, Any]:
    """One file's figures as plain data (``null`` for a figure not computed)."""
    return {
        "path": str(f.path), "bytes": f.size, "symbol": f.symbol, "symbols": f.symbols,
        "distinct": f.distinct, "order": f.order, "h0": finite(f.h0),
        "floor0_bytes": EntropyFigures.floor_bytes(f.h0, f.symbols),
        "hk": finite(f.hk), "contexts": f.contexts,
        "floork_bytes": None if f.hk is None else EntropyFigures.floor_bytes(f.hk, f.symbols),
        "zlib_bytes": f.zlib_bytes, "lzma_bytes": f.lzma_bytes,
    }


def render_entropy_all(figures: Sequence[EntropyFigures], fmt: str) -> str:
    """Every file's figures as text blocks, one Markdown table or JSON, with the note."""
    if fmt == "json":
        doc = {"kind": "pytest-ratefloor entropy", "schema": 1, "note": ENTROPY_NOTE,
               "files": [entropy_json(f) for f in figures]}
        return json.dumps(json_safe(doc), indent=2, sort_keys=True, allow_nan=False) + "\n"
    if fmt == "md":
        out = ["| file | bytes | layout | symbols | distinct | order-0 (bit/sym) | order | "
               "order-k (bit/sym) | zlib -9 bytes | lzma -9 bytes |",
               "| --- | ---: | --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: |"]
        for f in figures:
            hk = "–" if f.hk is None else f"{f.hk:.4f}"
            out.append(f"| {md_name(str(f.path))} | {f.size:,} | {f.symbol} | {f.symbols:,} | "
                       f"{f.distinct:,} | {f.h0:.4f} | {f.order} | {hk} | {f.zlib_bytes:,} | "
                       f"{f.lzma_bytes:,} |")
        return "\n".join([*out, "", f"> {markdown_text(ENTROPY_NOTE)}"]) + "\n"
    return "\n".join(render_entropy(f) for f in figures) + "\n" + ENTROPY_NOTE + "\n"


def render_entropy(f: EntropyFigures) -> str:
    n = f.symbols

    def per_symbol(nbytes: int) -> str:
        return f"{8.0 * nbytes / n:.4f} bits/symbol" if n else "–"

    lines = [
        f"{terminal_text(str(f.path))}: {f.size:,} bytes = {n:,} symbols "
        f"(layout {f.symbol}), {f.distinct:,} distinct",
        f"  order-0 entropy (estimate):  {f.h0:.4f} bits/symbol -> floor "
        f"{EntropyFigures.floor_bytes(f.h0, n):,} bytes",
    ]
    if f.hk is not None:
        note = ""
        # a model with more free counts than a quarter of the data mostly memorises it
        if f.contexts is not None and f.contexts * max(f.distinct - 1, 1) * 4 > n:
            note = (f"  [{f.contexts:,} contexts x {f.distinct:,} symbols for {n:,} symbols "
                    "of data: the model memorises the file, so this estimate is optimistic]")
        lines.append(
            f"  order-{f.order} conditional entropy (estimate):  {f.hk:.4f} bits/symbol -> "
            f"floor {EntropyFigures.floor_bytes(f.hk, n):,} bytes{note}"
        )
    lines += [
        f"  zlib level 9:  {f.zlib_bytes:,} bytes ({per_symbol(f.zlib_bytes)})",
        f"  lzma preset 9: {f.lzma_bytes:,} bytes ({per_symbol(f.lzma_bytes)})",
    ]
    return "\n".join(lines)


ENTROPY_NOTE = (
    "Estimates are plug-in entropies of the file's own symbol counts: they describe this "
    "file, not where it came from. They omit the cost of describing the model, which a "
    "coder must learn or transmit; a coder using longer contexts can beat a lower order."
)
