"""Cost of a ratefloor check relative to a bare round-trip harness.

Workload: zlib level 6 (through ``ByteCodec``, packing ``u8``) on
4·10⁶ symbols of ``uniform(256)``.

* **check** — ``pytest_ratefloor.checks.check(...)``: sample, encode once,
  decode once, compare, contract checks on a 4 096-symbol slice, floor,
  self-information, fingerprint, rate verdict. Timed with edge cases off
  (the ratio the target is about) and on (reported for information).
* **bare** — what a hand-written test does: sample, pack to bytes,
  ``zlib.compress``, ``zlib.decompress``, unpack, ``numpy.array_equal``.

Sampling the source is part of **both** sides (the same ``source.sample``
call). Each side is run ``--repeat`` times, alternating, and the minimum
is taken. Target: check / bare ≤ 1.15.

Run: ``python benchmarks/bench_check.py [--n 4000000] [--repeat 5]``.
"""

from __future__ import annotations

import argparse
import time
import zlib
from collections.abc import Callable

import numpy as np

from pytest_ratefloor import checks, sources
from pytest_ratefloor.codecs import ByteCodec


def _compress(data: bytes) -> bytes:
    return zlib.compress(data, 6)


def bare(source: sources.Source, n: int) -> int:
    """The hand-written harness: sample, pack, compress, decompress, unpack, compare."""
    sample = source.sample(n, 0)
    packed = sample.astype(np.uint8).tobytes()
    compressed = _compress(packed)
    decoded = np.frombuffer(zlib.decompress(compressed), dtype=np.uint8).astype(np.int64)
    if not np.array_equal(sample, decoded):
        raise AssertionError("zlib did not round-trip")
    return 8 * len(compressed)


def _best(fn: Callable[[], object], repeat: int) -> list[float]:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return times


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=4_000_000)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    source = sources.uniform(256)
    codec = ByteCodec(_compress, zlib.decompress, name="zlib-6", packing="u8")

    def run_check(edge: bool) -> Callable[[], object]:
        return lambda: checks.check(codec, source, n=args.n, rel=0.01, edge_cases=edge)

    # warm-up (imports, caches) outside the timing
    bare(source, 1000)
    checks.check(codec, source, n=70_000, rel=0.01)
    t_bare: list[float] = []
    t_off: list[float] = []
    t_on: list[float] = []
    for _ in range(args.repeat):
        t_bare += _best(lambda: bare(source, args.n), 1)
        t_off += _best(run_check(False), 1)
        t_on += _best(run_check(True), 1)
    b, off, on = min(t_bare), min(t_off), min(t_on)
    m = checks.check(codec, source, n=args.n, rel=0.01, edge_cases=False)
    print(f"workload: zlib-6 via ByteCodec(u8) on {args.n} symbols of {source.spec}; "
          f"{m.rate:.4f} bits/symbol; sampling included on both sides; min of {args.repeat}")
    print(f"bare harness (sample+pack+compress+decompress+unpack+array_equal): {b * 1e3:8.1f} ms")
    print(f"checks.check, edge cases off:                                   {off * 1e3:8.1f} ms")
    print(f"checks.check, edge cases on:                                    {on * 1e3:8.1f} ms")
    print(f"ratio check/bare, edge cases off: {off / b:.3f}   (target <= 1.15)")
    print(f"ratio check/bare, edge cases on:  {on / b:.3f}")


if __name__ == "__main__":
    main()
