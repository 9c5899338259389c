"""Speed of the code-analysis floors and checks against a reference library.

Prints, for 2^16 and 2^20 symbols with random weights (numpy PCG64, seed 2024):

* **huffman** — ``codes.huffman_lengths(weights)`` against
  ``bitarray.util.huffman_code`` on the same weights (a heap-based Huffman in
  the reference library), as a time ratio. The expected lengths of both codes
  are compared too (they must agree; individual lengths may differ on ties).
  Targets: 2^20 in ≤ 2 s and ≤ 1/10 of the reference.
* **prefix check** — ``codes.prefix_witness`` on the 2^20-codeword canonical
  code of those lengths (target ≤ 2 s), plus the Kraft sum and the canonical
  check on the same table, the cost of building the table
  (``canonical_codebook``), of using it as a codec on 10^6 symbols, and of
  materialising its public ``codewords`` as frozen bitarrays.

Our side is the best of ``--repeat`` runs; the reference runs once per size
(it takes tens of seconds at 2^20 here). All figures come from this one run.

Run: ``python benchmarks/bench_codes.py [--repeat 3] [--sizes 16 20]``.
"""

from __future__ import annotations

import argparse
import time
from collections.abc import Callable
from typing import TypeVar

import numpy as np
from bitarray.util import huffman_code

from pytest_ratefloor import codes

T = TypeVar("T")


def timed(fn: Callable[[], T], repeat: int = 1) -> tuple[float, T]:
    """Best wall time over ``repeat`` calls, and the last result."""
    best = float("inf")
    result: T
    for _ in range(repeat):
        start = time.perf_counter()
        result = fn()
        best = min(best, time.perf_counter() - start)
    return best, result


def bench_size(log2n: int, repeat: int) -> None:
    n = 1 << log2n
    rng = np.random.Generator(np.random.PCG64(2024))
    weights = rng.random(n) + 1e-9  # strictly positive, all symbols coded
    total = float(weights.sum())

    ours_s, lengths = timed(lambda: codes.huffman_lengths(weights), repeat)
    table = dict(enumerate(weights.tolist()))
    ref_s, ref_code = timed(lambda: huffman_code(table))
    ours_mean = float(np.dot(lengths, weights)) / total
    ref_mean = sum(table[s] * len(w) for s, w in ref_code.items()) / total
    print(f"2^{log2n} symbols ({n})")
    print(f"  huffman_lengths            {ours_s:8.3f} s  (best of {repeat})")
    print(f"  bitarray.util.huffman_code {ref_s:8.3f} s  (one run)")
    print(f"  ratio ours/reference       {ours_s / ref_s:8.4f}  (target <= 0.1)")
    print(
        f"  mean length ours {ours_mean:.12f}  reference {ref_mean:.12f}  "
        f"(max length {int(lengths.max())})"
    )
    if abs(ours_mean - ref_mean) > 1e-9 * ref_mean:
        raise SystemExit("expected lengths disagree with the reference")

    build_s, book = timed(
        lambda: codes.canonical_codebook((np.arange(n), lengths), name=f"bench-{log2n}"),
        repeat,
    )
    prefix_s, witness = timed(lambda: codes.prefix_witness(book), repeat)
    kraft_s, kraft = timed(lambda: codes.kraft_sum(book), repeat)
    canon_s, canonical = timed(lambda: codes.is_canonical(book), repeat)
    data = rng.integers(0, n, size=1_000_000)
    encode_s, bits = timed(lambda: book.encode(data))  # first call builds the codec table
    encode2_s, _ = timed(lambda: book.encode(data), repeat)
    decode_s, back = timed(lambda: book.decode(bits, data.size))
    if not np.array_equal(back, data):
        raise SystemExit("the canonical table did not round-trip")
    words_s, _ = timed(lambda: book.codewords)  # cached after the first call
    if witness is not None or kraft != 1 or not canonical:
        raise SystemExit("the canonical Huffman table failed its own checks")
    print(f"  canonical_codebook build   {build_s:8.3f} s")
    print(f"  prefix_witness             {prefix_s:8.3f} s  (target <= 2 s at 2^20)")
    print(f"  kraft_sum                  {kraft_s:8.3f} s")
    print(f"  is_canonical               {canon_s:8.3f} s")
    print(
        f"  encode 10^6 symbols        {encode_s:8.3f} s  first call (builds the table), "
        f"then {encode2_s:.3f} s"
    )
    print(f"  decode 10^6 symbols        {decode_s:8.3f} s  (first call, builds the tree)")
    print(f"  codewords as bitarrays     {words_s:8.3f} s  (frozen copies; first access)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--sizes", type=int, nargs="+", default=[16, 20], metavar="LOG2N")
    args = parser.parse_args()
    for log2n in args.sizes:
        bench_size(log2n, args.repeat)


if __name__ == "__main__":
    main()
