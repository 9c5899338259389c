"""Cost of isolating the corruption check's decodes in a worker process.

Prints, for 200 trials of a fast decoder (zlib on 10,000 one-byte symbols):

* the isolated run (one forked worker, one pipe message per trial),
* a bare in-process loop of the same 200 damage-and-decode steps,
* their ratio and the per-trial overhead of the isolation,
* the whole ``assert_survives_corruption`` call (encode, schedule, adapter),
* the cost of one worker restart (after a crash), from a decoder that dies
  on every trial.

Each figure is the best of several repeats, measured in this one run.
Run: ``python benchmarks/bench_corruption.py``.
"""

from __future__ import annotations

import contextlib
import os
import time
import zlib
from collections.abc import Callable

import numpy as np

from pytest_ratefloor.codecs import ByteCodec, encoded_from_stream
from pytest_ratefloor.corruption import (
    assert_survives_corruption,
    corruption_schedule,
    run_corruption_trials,
)

TRIALS = 200
N = 10_000
REPEATS = 7


def decode(data: bytes, n: int) -> np.ndarray:
    return np.frombuffer(zlib.decompress(data), dtype=np.uint8)


def dies(data: bytes, n: int) -> None:
    os._exit(1)


def best(fn: Callable[[], object], repeats: int = REPEATS) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def main() -> None:
    symbols = np.random.Generator(np.random.PCG64(11)).integers(0, 16, N).astype(np.int64)
    payload = zlib.compress(symbols.astype(np.uint8).tobytes())
    schedule = corruption_schedule(len(payload), TRIALS, seed=0)
    encoded = encoded_from_stream(payload)
    stream, shape = encoded.stream, encoded.shape

    def bare() -> None:
        for c in schedule:
            with contextlib.suppress(Exception):
                decode(shape.rebuild(c.apply(stream)).payload, N)

    def isolated() -> None:
        run = run_corruption_trials(decode, payload, N, schedule, timeout=2.0)
        assert len(run.outcomes) == TRIALS
        assert not run.failures

    codec = ByteCodec(zlib.compress, zlib.decompress, name="zlib", packing="u8")

    def whole_check() -> None:
        assert_survives_corruption(codec, symbols, trials=TRIALS, must_detect=True)

    restarts = 40
    short = corruption_schedule(len(payload), restarts, seed=1)

    def crashing() -> None:
        run = run_corruption_trials(dies, payload, N, short, max_failures=restarts)
        assert run.workers_started == restarts

    t_bare = best(bare)
    t_iso = best(isolated)
    t_whole = best(whole_check)
    t_crash = best(crashing, repeats=3)

    def row(label: str, seconds: float, note: str) -> None:
        print(f"  {label:<28}{seconds * 1e3:9.1f} ms  {note}")

    print(f"corruption check, {TRIALS} trials, zlib on n={N} symbols ({len(payload)}-byte stream)")
    row("bare in-process loop", t_bare, f"({t_bare / TRIALS * 1e6:.1f} us/trial)")
    row("isolated worker", t_iso, f"({t_iso / TRIALS * 1e6:.1f} us/trial, one fork included)")
    print(f"  {'ratio isolated / bare':<28}{t_iso / t_bare:9.2f}")
    print(f"  {'isolation overhead':<28}{(t_iso - t_bare) / TRIALS * 1e6:9.1f} us/trial")
    row("assert_survives_corruption", t_whole, "(encode + schedule + adapter, must_detect)")
    row("worker restart", t_crash / restarts, "each (crash, reap, fork)")


if __name__ == "__main__":
    main()
