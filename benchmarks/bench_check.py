"""Cost of a ratefloor check relative to a bare round-trip harness.

Workload: zlib level 6 (through ``ByteCodec``, packing ``u8``) on
4·10⁶ symbols of ``uniform(256)``.

* **check** — ``pytest_ratefloor.checks.check(...)``: sample, encode once,
  decode once, compare, contract checks on a 4 096-symbol slice, floor,
  self-information, fingerprint, rate verdict. Timed with edge cases off
  (the ratio the target is about) and on (reported for information).
* **same, in process** — the check with edge cases on and ``isolate=False``:
  the cost of running the codec in a forked child is the ratio of the two
  (target ≤ 1.05).
* **bare** — what a hand-written test does: sample, pack to bytes,
  ``zlib.compress``, ``zlib.decompress``, unpack, ``numpy.array_equal``.

Sampling the source is part of **both** sides (the same ``source.sample``
call). Each side is run ``--repeat`` times, interleaved, and the minimum is
taken, both of wall time and of CPU time of this process and its children
(the latter is less disturbed by other work on a shared machine). Target: check / bare ≤ 1.15.

Run: ``python benchmarks/bench_check.py [--n 4000000] [--repeat 5]``.
"""

from __future__ import annotations

import argparse
import resource
import time
import zlib
from collections.abc import Callable

import numpy as np

from pytest_ratefloor import checks, isolation, sources
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


def _cpu() -> float:
    """CPU seconds of this process and of its waited-for children (a check runs the
    codec in a forked child by default, whose time ``process_time`` would miss)."""
    own, children = (resource.getrusage(who) for who in
                     (resource.RUSAGE_SELF, resource.RUSAGE_CHILDREN))
    return own.ru_utime + own.ru_stime + children.ru_utime + children.ru_stime


def _timed(fn: Callable[[], object]) -> tuple[float, float]:
    """(wall seconds, CPU seconds of this process and its children) of one call."""
    wall, cpu = time.perf_counter(), _cpu()
    fn()
    wall = time.perf_counter() - wall
    isolation.reap_children()  # the child's exit overlaps the next test, but its CPU counts
    return wall, _cpu() - cpu


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=4_000_000)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    source = sources.uniform(256)
    codec = ByteCodec(_compress, zlib.decompress, name="zlib-6", packing="u8")

    def run_check(edge: bool, isolate: bool = True) -> Callable[[], object]:
        return lambda: checks.check(codec, source, n=args.n, rel=0.01, edge_cases=edge,
                                    isolate=isolate)

    # warm-up (imports, caches) outside the timing
    bare(source, 1000)
    checks.check(codec, source, n=70_000, rel=0.01)
    sides: dict[str, Callable[[], object]] = {
        "bare": lambda: bare(source, args.n),
        "check, edge cases off": run_check(False),
        "check, edge cases on": run_check(True),
        "same, in process": run_check(True, isolate=False),
    }
    times: dict[str, list[tuple[float, float]]] = {k: [] for k in sides}
    for _ in range(args.repeat):  # interleaved, so load changes hit every side alike
        for name, fn in sides.items():
            times[name].append(_timed(fn))
    best = {k: (min(w for w, _ in v), min(c for _, c in v)) for k, v in times.items()}
    m = checks.check(codec, source, n=args.n, rel=0.01, edge_cases=False)
    print(f"workload: zlib-6 via ByteCodec(u8) on {args.n} symbols of {source.spec}; "
          f"{m.rate:.4f} bits/symbol; sampling included on both sides; min of {args.repeat}")
    print(f"{'side':<24}{'wall ms':>10}{'cpu ms':>10}{'wall ratio':>12}{'cpu ratio':>11}")
    bw, bc = best["bare"]
    for name, (w, c) in best.items():
        print(f"{name:<24}{w * 1e3:10.1f}{c * 1e3:10.1f}{w / bw:12.3f}{c / bc:11.3f}")
    print("bare = sample + pack + zlib.compress + zlib.decompress + unpack + numpy.array_equal")
    print("target: check (edge cases off) / bare <= 1.15")
    iso, inproc = best["check, edge cases on"], best["same, in process"]
    print(f"isolation (codec in a forked child) / in process: wall {iso[0] / inproc[0]:.3f}, "
          f"cpu {iso[1] / inproc[1]:.3f}; target <= 1.05")


if __name__ == "__main__":
    main()
