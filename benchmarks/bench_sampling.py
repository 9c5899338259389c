"""Sampling speed of the reference sources against numpy's own bounded integers.

For each memoryless source this times ``source.sample(10**7, seed=0)`` and
the reference ``numpy.random.Generator(numpy.random.PCG64(0)).integers(0,
256, 10**7)`` in the same run, alternating the two so that a busy machine
slows both alike, keeps the best of a few repeats of each (CPU time of this
process) and prints the ratio. The sources of ``standard_suite()`` and
further parameters that sample from a short table are gated: the script
exits with status 1 if any of their ratios exceeds 3. Long tables (drawn
through an alias table), parameters that need the logarithm path
(geometric p < 2**-10, two-sided theta > 1 - 2**-10) and the Markov loop
are printed for information only.

Run: ``python benchmarks/bench_sampling.py [--n N] [--repeats R]``.
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Callable
from functools import partial

import numpy as np

from pytest_ratefloor import sources

LIMIT = 3.0


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


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Sampling speed against numpy integers.")
    parser.add_argument("--n", type=int, default=10**7, help="symbols per draw (default 10**7)")
    parser.add_argument("--repeats", type=int, default=7, help="repeats, best kept (default 7)")
    args = parser.parse_args(argv)
    n, repeats = args.n, args.repeats

    def reference() -> object:
        return np.random.Generator(np.random.PCG64(0)).integers(0, 256, n)

    tide = bytes(range(256)) * 40 + b"tide gauge 07 level 1.42 m " * 400
    gated = [
        *sources.standard_suite(),
        sources.uniform(2),
        sources.uniform(1000),
        sources.uniform(65536),
        sources.uniform(1_000_003),
        sources.bernoulli(0.5),
        sources.two_sided_geometric(0.99),
        sources.poisson(1000.0),
        sources.categorical(np.full(1000, 1e-3)),
        sources.empirical(np.frombuffer(tide, dtype=np.uint8)),
    ]
    informational = [
        sources.zipf(65536, 1.07),  # long table: alias path
        sources.geometric(0.001),  # long table: alias path
        sources.geometric(1e-4),
        sources.geometric(1e-9),
        sources.two_sided_geometric(0.9999),
    ]
    print(f"n = {n}; reference: Generator(PCG64(0)).integers(0, 256, n); best of {repeats}")
    print(f"{'source':52s} {'ms':>8s} {'ref ms':>8s} {'ratio':>6s}")
    worst = 0.0
    for source in gated + informational:
        source.sample(16)  # build tables outside the timing
        took, ref = paired_ratio(partial(source.sample, n, seed=0), reference, repeats)
        ratio = took / ref
        if source in gated:
            worst = max(worst, ratio)
            note = "  OVER LIMIT" if ratio > LIMIT else ""
        else:
            note = "  (not gated)"
        print(f"{source.spec:52s} {took * 1e3:8.1f} {ref * 1e3:8.1f} {ratio:6.2f}{note}")
    chain = sources.markov([[0.9, 0.1], [0.4, 0.6]])
    m = max(n // 10, 1)
    took, ref = paired_ratio(lambda: chain.sample(m, seed=0), reference, 1)
    label = f"{chain.spec} n={m}"
    per_symbol = took / ref * n / m
    print(
        f"{label:52s} {took * 1e3:8.1f} {ref * 1e3:8.1f} {per_symbol:6.2f}  (per symbol; not gated)"
    )
    print(f"worst gated ratio {worst:.2f} (limit {LIMIT})")
    return 1 if worst > LIMIT else 0


if __name__ == "__main__":
    sys.exit(main())
