"""Cost of a ratefloor check relative to a bare round-trip harness, at two sizes.

Workload: zlib level 6 (through ``ByteCodec``, packing ``u8``) on ``uniform(256)``,
at the default n = 10⁵ and at n = 4·10⁶.

The script first does what the plugin does when a pytest run starts
(``supervisor.watch_run("session")``): it forks the supervisor and goes on in
the child, so the checks below run exactly as a check that does not say
``isolate=`` runs in a pytest run.

* **check, default** — ``pytest_ratefloor.checks.check(...)`` as in a pytest
  run: in process, noting its case and steps for the supervisor. Sample,
  encode once, decode once, compare, contract checks on a 4 096-symbol
  slice, floor, self-information, fingerprint, rate verdict; with edge cases
  on (the default: the probe cases run in every check, the others once per
  codec and input in the session, see ``edge_cases.PassedEdgeCases``) and off.
* **check, isolate=True** — the same in a forked child per check, for
  comparison (what ``ratefloor_isolate = check`` or ``isolate=True`` asks for).
* **bare** — what a hand-written test does: sample, pack to bytes,
  ``zlib.compress``, ``zlib.decompress``, unpack, ``numpy.array_equal``.
* **fork, no work** (forked group only) — ``isolation.guarded`` of a function
  that does nothing in a forked child: the fixed cost of a fork per check.

Sampling the source is part of **both** sides (the same ``source.sample``
call). Each side is run ``--repeat`` times, interleaved, and the minimum is
taken, both of wall time and of CPU time of this process and its children
(the latter is less disturbed by other work on a shared machine; the
supervisor only waits, so it costs none). The first check of the codec
(which runs every edge case) is outside the timing and reported on its own
line. Targets: default check with edge cases on / bare ≤ 1.3 at n = 10⁵ and
≤ 1.05 at n = 4·10⁶.

Run: ``python benchmarks/bench_check.py [--n 100000 4000000] [--repeat 7]``.
"""

from __future__ import annotations

import argparse
import resource
import time
import zlib
from collections.abc import Callable

import numpy as np

from pytest_ratefloor import checks, isolation, sources, supervisor
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


def _nothing() -> None:
    """The work of the "fork, no work" side."""


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


TARGETS = {100_000: 1.3, 4_000_000: 1.05}


def _interleaved(sides: dict[str, Callable[[], object]],
                 repeat: int) -> dict[str, list[tuple[float, float]]]:
    """``repeat`` timings of each side, interleaved (load changes hit every side alike)
    and rotated (no side always runs right after another)."""
    times: dict[str, list[tuple[float, float]]] = {k: [] for k in sides}
    names = list(sides)
    for r in range(repeat):
        for name in names[r % len(names):] + names[:r % len(names)]:
            times[name].append(_timed(sides[name]))
    return times


def _one_size(codec: ByteCodec, source: sources.Source, n: int, repeat: int) -> None:
    def run_check(edge: bool, isolate: bool | None) -> Callable[[], object]:
        return lambda: checks.check(codec, source, n=n, rel=0.01, edge_cases=edge,
                                    isolate=isolate)

    first = _timed(run_check(True, None))  # the codec's first check at this n: every case
    m = checks.check(codec, source, n=n, rel=0.01, edge_cases=False)
    print(f"\nn = {n}: zlib-6 via ByteCodec(u8) on {source.spec}; {m.rate:.4f} bits/symbol; "
          f"sampling included on both sides; min of {repeat}")
    print(f"{'side':<30}{'wall ms':>10}{'cpu ms':>10}{'wall ratio':>12}{'cpu ratio':>11}")
    # Two groups, each with its own bare runs: a fork trims the parent's heap first
    # (isolation._release_free_heap), which would tax an in-process check run after it
    # in a way no run of only in-process checks sees.
    target = TARGETS.get(n)
    for where, isolate in (("default", None), ("isolate=True", True)):
        sides: dict[str, Callable[[], object]] = {
            "bare": lambda: bare(source, n),
            f"edge cases on, {where}": run_check(True, isolate),
            f"edge cases off, {where}": run_check(False, isolate),
        }
        if isolate:
            sides["fork, no work"] = lambda: isolation.guarded(_nothing, case="no work",
                                                               isolate=True)
        times = _interleaved(sides, repeat)
        best = {k: (min(w for w, _ in v), min(c for _, c in v)) for k, v in times.items()}
        bw, bc = best["bare"]
        for name, (w, c) in best.items():
            print(f"{name:<30}{w * 1e3:10.1f}{c * 1e3:10.1f}{w / bw:12.3f}{c / bc:11.3f}")
        spread = {k: max(c for _, c in v) / min(c for _, c in v) for k, v in times.items()}
        print("  noise (slowest / fastest repeat, cpu): "
              + ", ".join(f"{k} {v:.2f}" for k, v in spread.items()))
        if target is not None and isolate is None:
            on = best[f"edge cases on, {where}"]
            print(f"  target: check (edge cases on) / bare <= {target}: "
                  f"cpu {on[1] / bc:.3f}, wall {on[0] / bw:.3f}")
        if isolate is None:
            print(f"{'first check (all cases)':<30}{first[0] * 1e3:10.1f}"
                  f"{first[1] * 1e3:10.1f}{first[0] / bw:12.3f}{first[1] / bc:11.3f}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, nargs="+", default=[100_000, 4_000_000])
    parser.add_argument("--repeat", type=int, default=7)
    args = parser.parse_args()
    watcher, watch = supervisor.watch_run("session")  # as a pytest run starts: forks here
    isolation.push_watch(watch)
    source = sources.uniform(256)
    codec = ByteCodec(_compress, zlib.decompress, name="zlib-6", packing="u8")
    # warm-up (imports, caches) outside the timing, on another codec object
    bare(source, 1000)
    warm = ByteCodec(lambda data: zlib.compress(data, 6), zlib.decompress, name="warm-up")
    checks.check(warm, source, n=70_000, rel=0.01)
    isolation.reap_children()  # its child must not end inside the first timing
    print("bare = sample + pack + zlib.compress + zlib.decompress + unpack + numpy.array_equal")
    for n in args.n:
        _one_size(codec, source, n, args.repeat if n <= 1_000_000 else max(3, args.repeat // 2))
    isolation.reap_children()
    print("\ndefault checks ran " + ("in process, under the supervisor" if watcher is not None
                                     else "in a forked child each (no supervisor here)"))
    if watcher is not None:
        watcher.finished()


if __name__ == "__main__":
    main()
