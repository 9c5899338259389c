"""Time ``ratefloor entropy`` against zlib level 9 on one 10 MB data file.

The file is invented here, in a temporary folder: a random walk of sensor
readings, written once as u8 (10 MB) and once as u16le (10 MB, 5 M readings).
For each, the chunked count of :func:`pytest_ratefloor.file_entropy.entropy_figures`
(order 0 and order 1, with its own zlib and lzma sizes) is timed against a plain
``zlib.compress(data, 9)`` of the same bytes, and the ratio is printed.

Run: ``python benchmarks/bench_entropy.py``.
"""

from __future__ import annotations

import lzma
import tempfile
import time
import zlib
from pathlib import Path

import numpy as np

from pytest_ratefloor.file_entropy import entropy_figures

SIZE = 10_000_000


def sensor_walk(count: int, hi: int, seed: int = 7) -> np.ndarray:
    """A bounded random walk of readings in 0..hi (steps mostly small, some jumps)."""
    rng = np.random.default_rng(seed)
    steps = rng.choice([-2, -1, 0, 0, 1, 2], size=count) * (1 + (rng.random(count) < 0.01) * 20)
    walk = np.cumsum(steps) % (2 * hi)
    return np.where(walk > hi, 2 * hi - walk, walk)


def bench(path: Path, symbol: str) -> None:
    """Time the entropy figures and zlib -9 on ``path``; print both and their ratio."""
    data = path.read_bytes()
    start = time.perf_counter()
    figures = entropy_figures(path, symbol, 1)
    t_entropy = time.perf_counter() - start
    start = time.perf_counter()
    packed = zlib.compress(data, 9)
    t_zlib = time.perf_counter() - start
    start = time.perf_counter()
    lzma.compress(data, preset=9)
    t_lzma = time.perf_counter() - start
    print(f"{symbol:6s} {len(data):,} bytes: h0 {figures.h0:.4f}, h1 {figures.hk:.4f} "
          f"bits/symbol; zlib -9 {len(packed):,} bytes")
    print(f"       ratefloor entropy (with zlib and lzma inside): {t_entropy:.2f} s; "
          f"zlib -9 alone: {t_zlib:.2f} s; ratio {t_entropy / t_zlib:.2f}")
    counting = t_entropy - t_zlib - t_lzma
    print(f"       of which lzma -9 alone: {t_lzma:.2f} s; counting (rest, about): "
          f"{counting:.2f} s, {counting / t_zlib:.2f} x zlib -9")


def main() -> None:
    """Write the invented files to a temporary folder and time both on each."""
    with tempfile.TemporaryDirectory() as folder:
        u8 = Path(folder) / "walk_u8.bin"
        u8.write_bytes(sensor_walk(SIZE, 255).astype(np.uint8).tobytes())
        u16 = Path(folder) / "walk_u16.bin"
        u16.write_bytes(sensor_walk(SIZE // 2, 4095).astype("<u2").tobytes())
        bench(u8, "u8")
        bench(u16, "u16le")


if __name__ == "__main__":
    main()
