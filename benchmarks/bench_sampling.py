"""Sampling speed of the reference sources against numpy's own bounded integers.

For each source this times ``source.sample(10**7, seed=0)`` and the
reference ``numpy.random.Generator(numpy.random.PCG64(0)).integers(0, 256,
10**7)`` in the same run, alternating the two so that a busy machine slows
both alike, keeps the best of a few repeats of each (CPU time of this
process) and prints the ratio with its target. Gated (exit status 1 on a
miss):

- the sources of ``standard_suite()`` and further parameters that sample
  from a short table (including powers of two, a shift of the word): 3;
- Markov chains of 3 and 64 states: 5; an order-2 empirical model of a
  1 MB tide-gauge log (invented data, 183 contexts) and of the first 1 MB of
  this Python's standard-library ``.py`` files in name order (real text,
  about 4,000 contexts; its bytes differ between Python versions, so compare
  that row only on one Python): 8;
- building that model: 0.1 CPU seconds per MB (an absolute figure).

Printed for information only: long tables (alias layout; over 65536
symbols the inverse CDF is kept, because that is what those sources have
always drawn), parameters that need the logarithm path (geometric
p < 2**-10, two-sided theta > 1 - 2**-10), and models of 1 MB of random
bytes: order 1 (256 states, 65,536 rows: the per-state guide) and order 2
(65,536 contexts: the per-state guide; two paths fed the same words meet
only after thousands of words, so the sampler moves to long chunks after
its first block, and the best of 3 repeats shows that steady state). For
the order-2 model the loop it replaced is timed once too, and the ratio of
the two printed.

Run: ``python benchmarks/bench_sampling.py [--n N] [--repeats R]``.
"""

from __future__ import annotations

import argparse
import sys
import sysconfig
import time
from collections.abc import Callable
from functools import partial
from pathlib import Path

import numpy as np

from pytest_ratefloor import sources

LIMIT = 3.0  # memoryless sources of a short table
CHAIN_LIMIT = 5.0  # Markov chains of 3 and 64 states
MODEL_LIMIT = 8.0  # an order-2 empirical model of a 1 MB file
BUILD_LIMIT = 0.1  # CPU seconds per MB to build that model


def python_source(size: int) -> bytes:
    """The first ``size`` bytes of this Python's standard-library ``.py`` files, in name order."""
    folder = Path(sysconfig.get_paths()["stdlib"])
    data = bytearray()
    for path in sorted(folder.glob("*.py")):
        data += path.read_bytes()
        if len(data) >= size:
            break
    return bytes(data[:size])


def tide_log(size: int, seed: int = 7) -> bytes:
    """``size`` bytes of an invented Kelpwick Sound tide-gauge log (CSV, random-walk levels)."""
    rng = np.random.default_rng(seed)
    level = np.array([1.2, 0.8, 1.5, 2.1, 0.4])
    lines: list[str] = []
    total = minute = 0
    while total < size:
        gauge = int(rng.integers(0, 5))
        level[gauge] += rng.normal(0.0, 0.02)
        day, hour, mins = 1 + minute // 1440, minute // 60 % 24, minute % 60
        line = (
            f"2026-03-{day:02d}T{hour:02d}:{mins:02d},KS{gauge + 1:02d},"
            f"{level[gauge]:.3f},{rng.uniform(8, 14):.1f}\n"
        )
        minute += 1
        lines.append(line)
        total += len(line)
    return "".join(lines).encode()[:size]


def seconds(action: Callable[[], object]) -> float:
    """CPU seconds of one call (process time: other jobs on the machine do not count)."""
    start = time.process_time()
    action()
    return time.process_time() - start


def paired_ratio(
    action: Callable[[], object], reference: Callable[[], object], repeats: int
) -> tuple[float, float]:
    """(best time of ``action``, best time of ``reference``), the two alternated."""
    best_action = best_reference = float("inf")
    for _ in range(repeats):
        best_reference = min(best_reference, seconds(reference))
        best_action = min(best_action, seconds(action))
    return best_action, best_reference


def best_of(action: Callable[[], object], repeats: int) -> float:
    """Best CPU time of ``repeats`` calls."""
    return min(seconds(action) for _ in range(max(1, repeats)))


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Sampling speed against numpy integers.")
    parser.add_argument("--n", type=int, default=10**7, help="symbols per draw (default 10**7)")
    parser.add_argument("--repeats", type=int, default=7, help="repeats, best kept (default 7)")
    args = parser.parse_args(argv)
    n, repeats = args.n, args.repeats

    def reference() -> object:
        return np.random.Generator(np.random.PCG64(0)).integers(0, 256, n)

    tide = bytes(range(256)) * 40 + b"tide gauge 07 level 1.42 m " * 400
    rng = np.random.default_rng(5)
    log = np.frombuffer(tide_log(1 << 20), dtype=np.uint8)
    noise = np.frombuffer(rng.bytes(1 << 20), dtype=np.uint8)
    build_seconds = best_of(lambda: sources.empirical(log, order=2), repeats)
    model = sources.empirical(log, order=2)
    noise_seconds = best_of(lambda: sources.empirical(noise, order=2), repeats)
    noise_model = sources.empirical(noise, order=2)
    noise_order_1 = sources.empirical(noise, order=1)
    text_model = sources.empirical(np.frombuffer(python_source(1 << 20), dtype=np.uint8), order=2)
    limits: list[tuple[sources.Source, float | None]] = [
        *((src, LIMIT) for src in sources.standard_suite()),
        (sources.uniform(2), LIMIT),
        (sources.uniform(1000), LIMIT),
        (sources.uniform(65536), LIMIT),
        (sources.uniform(1_000_003), LIMIT),
        (sources.bernoulli(0.5), LIMIT),
        (sources.two_sided_geometric(0.99), LIMIT),
        (sources.poisson(1000.0), LIMIT),
        (sources.categorical(np.full(1000, 1e-3)), LIMIT),
        (sources.empirical(np.frombuffer(tide, dtype=np.uint8)), LIMIT),
        (sources.markov([[0.2, 0.5, 0.3], [0.1, 0.1, 0.8], [0.6, 0.3, 0.1]]), CHAIN_LIMIT),
        (sources.markov(rng.dirichlet(np.ones(64), 64)), CHAIN_LIMIT),
        (model, MODEL_LIMIT),
        (text_model, MODEL_LIMIT),
        (sources.zipf(65536, 1.07), None),  # long table: alias path
        (sources.geometric(0.001), None),  # long table: alias path
        (sources.two_sided_geometric(0.999), None),  # 88,678 symbols: inverse CDF kept
        (sources.zipf(2**20, 1.0), None),  # 2**20 symbols: inverse CDF kept
        (sources.geometric(1e-4), None),
        (sources.geometric(1e-9), None),
        (sources.two_sided_geometric(0.9999), None),
        (noise_order_1, None),  # 256 states with 256 rows each: the per-state guide
        (noise_model, None),  # 65,536 contexts: the per-state guide, long chunks (3 repeats)
    ]
    print(f"n = {n}; reference: Generator(PCG64(0)).integers(0, 256, n); best of {repeats}")
    print(f"{'source':52s} {'ms':>8s} {'ref ms':>8s} {'ratio':>6s} {'target':>7s}")
    misses = 0
    for source, limit in limits:
        source.sample(1000)  # build tables outside the timing
        times = min(3, repeats) if source is noise_model else repeats
        took, ref = paired_ratio(partial(source.sample, n, seed=0), reference, times)
        ratio = took / ref
        if limit is None:
            target, note = "-", "  (not gated)"
        else:
            target = f"{limit:g}"
            note = "  OVER LIMIT" if ratio > limit else ""
            misses += ratio > limit
        figures = f"{took * 1e3:8.1f} {ref * 1e3:8.1f} {ratio:6.2f} {target:>7s}"
        print(f"{source.spec[:52]:52s} {figures}{note}")
    chain = noise_model._chain
    assert chain is not None
    loop = seconds(lambda: chain.sample_loop(n, np.random.PCG64(0)))
    fast = best_of(partial(noise_model.sample, n, seed=0), 1)
    label = "random bytes order 2: the loop / the guide path"
    print(f"{label:52s} {loop * 1e3:8.1f} {fast * 1e3:8.1f} {loop / fast:6.2f}  (not gated)")
    per_mb = build_seconds / (log.size / 2**20)  # the log is exactly 1 MB (2**20 bytes)
    note = "  OVER LIMIT" if per_mb > BUILD_LIMIT else ""
    misses += per_mb > BUILD_LIMIT
    label = "build: empirical(order=2) of the 1 MB log, s/MB"
    print(f"{label:52s} {per_mb:8.3f} {'':15s} {BUILD_LIMIT:7g}{note}")
    label = "build: empirical(order=2) of 1 MB random bytes, s/MB"
    print(f"{label:52s} {noise_seconds:8.3f}  (not gated)")
    print(f"{misses} gated figure(s) over their targets")
    return 1 if misses else 0


if __name__ == "__main__":
    sys.exit(main())
