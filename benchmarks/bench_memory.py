"""Peak memory of a zlib ``check`` per symbol, against a bare round-trip harness.

Workload: zlib level 6 through ``ByteCodec`` (layout ``u8``) on ``uniform(256)``
at ``--n`` symbols (default 2·10⁷), edge cases off, in process (``isolate=False``,
so that the memory is this process's own).

Each side runs in a fresh Python process (``subprocess``): it imports
everything and warms up on a small sample, notes its peak resident set
(``ru_maxrss``), runs once at ``n`` and reports the growth of the peak, and
separately the peak of Python-tracked allocations (``tracemalloc``, which sees
numpy's buffers and the ``bytes`` objects, not zlib's internal window) — both
divided by ``n``. The fixed costs (zlib's window, the contract slice, the
interpreter) are then a fraction of a byte per symbol.

* **check** — ``checks.check(codec, uniform(256), n=n, edge_cases=False, isolate=False)``.
* **bare** — sample, ``astype(uint8).tobytes()``, ``zlib.compress``,
  ``zlib.decompress``, ``frombuffer(...).astype(int64)``, ``numpy.array_equal``.

Target: check ≤ 11 bytes per symbol (``ru_maxrss`` growth).

Run: ``python benchmarks/bench_memory.py [--n 20000000]``.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys

CHILD = r"""
import json, resource, sys, tracemalloc, zlib
import numpy as np
from pytest_ratefloor import checks, sources
from pytest_ratefloor.codecs import ByteCodec

side, n = sys.argv[1], int(sys.argv[2])
source = sources.uniform(256)

def compress(data):
    return zlib.compress(data, 6)

codec = ByteCodec(compress, zlib.decompress, name="zlib-6", packing="u8")

def bare(n):
    sample = source.sample(n, 0)
    packed = sample.astype(np.uint8).tobytes()
    compressed = compress(packed)
    del packed
    decoded = np.frombuffer(zlib.decompress(compressed), dtype=np.uint8).astype(np.int64)
    assert np.array_equal(sample, decoded)

def ours(n):
    checks.check(codec, source, n=n, rel=0.01, edge_cases=False, isolate=False)

run = bare if side == "bare" else ours
run(100_000)  # imports, caches, zlib's window
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
run(n)
after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
tracemalloc.start()
run(n)
traced = tracemalloc.get_traced_memory()[1]
print(json.dumps({"rss": after - before, "traced": traced}))
"""


def _measure(side: str, n: int) -> dict[str, float]:
    out = subprocess.run([sys.executable, "-c", CHILD, side, str(n)], check=True,
                         capture_output=True, text=True).stdout
    return {k: v / n for k, v in json.loads(out.strip().splitlines()[-1]).items()}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=20_000_000)
    args = parser.parse_args()
    print(f"workload: zlib-6 via ByteCodec(u8) on {args.n} symbols of uniform(k=256), "
          "edge cases off, in process; each side in a fresh process")
    print(f"{'side':<8}{'peak RSS growth B/sym':>24}{'tracemalloc peak B/sym':>25}")
    results = {side: _measure(side, args.n) for side in ("bare", "check")}
    for side, r in results.items():
        print(f"{side:<8}{r['rss']:24.2f}{r['traced']:25.2f}")
    print(f"target: check <= 11 bytes/symbol (RSS growth): {results['check']['rss']:.2f}")


if __name__ == "__main__":
    main()
