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
(it takes tens of seconds at 2^20 here).

Then, for code tables given as dicts (2^20 codewords, the canonical Huffman code
above; ``--dict-size``), CPU time, ours and each reference alternated, best of
``--repeat`` (the spread of our repeats is printed as the noise seen):

* **dict build** — ``Codebook(dict)`` from ``{symbol: (value, length)}`` (target
  <= 0.25 s) and from ``{symbol: "0101..."}`` (target <= 0.4 s), against building
  the same table from arrays (``canonical_codebook((symbols, lengths))``), against
  the entry-by-entry reading the bulk path replaced, and (strings) against bitarray
  parsing each string into a ``bitarray``;
* **asserts on dicts** — ``assert_prefix_free`` and ``assert_kraft`` on each dict,
  table parsing included: within 0.3 s on the pairs dict and 0.45 s on the strings
  dict (the build target plus 50 ms);

and for unique decodability (``--sp-size``, 2^16 codewords): a suffix code (the
canonical Huffman code of random weights, every word reversed: uniquely decodable,
not prefix-free) and the same code plus one word (ambiguous), ``codes.ambiguity``
(target <= 1 s) against the text search it replaced (``_ambiguity_text``, kept for
codewords over 62 bits); both must give the same answer.

All figures come from this one run. The script exits with status 1 when a target
is missed.

Run: ``python benchmarks/bench_codes.py [--repeat 3] [--sizes 16 20]
[--dict-size 20] [--sp-size 16] [--only huffman dicts sp]``.
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Callable
from functools import partial
from typing import Any, TypeVar

import numpy as np
from bitarray import bitarray
from bitarray.util import huffman_code

from pytest_ratefloor import codes
from pytest_ratefloor.codes import codebook, decodability

MISSED: list[str] = []

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


def cpu(fn: Callable[[], object]) -> float:
    """CPU seconds of one call (other jobs on the machine do not count)."""
    start = time.process_time()
    fn()
    return time.process_time() - start


def alternated(
    ours: Callable[[], object], references: list[Callable[[], object]], repeat: int
) -> tuple[float, float, list[float]]:
    """(best of ours, spread of ours as max/min - 1, best of each reference), each
    repeat running ours and then every reference, so a busy spell slows all alike."""
    mine: list[float] = []
    best = [float("inf")] * len(references)
    for _ in range(repeat):
        mine.append(cpu(ours))
        for i, ref in enumerate(references):
            best[i] = min(best[i], cpu(ref))
    return min(mine), max(mine) / min(mine) - 1, best


def report(label: str, seconds: float, spread: float, target: float | None) -> None:
    mark = ""
    if target is not None:
        ok = seconds <= target
        mark = f"  target <= {target:g} s  {'ok' if ok else 'MISSED'}"
        if not ok:
            MISSED.append(label)
    print(f"  {label:34s} {seconds:7.3f} s  (spread {spread * 100:4.1f}%){mark}")


def ratio(label: str, ours: float, reference: float) -> None:
    print(f"    vs {label:40s} {reference:7.3f} s  ratio {ours / reference:6.3f}")


def entry_by_entry(mapping: dict[Any, Any]) -> codes.Codebook[Any]:
    """The table read entry by entry (the reading before the bulk path)."""
    saved = codebook.bulk_table
    codebook.bulk_table = lambda m: None  # type: ignore[assignment]
    try:
        return codes.Codebook(mapping)
    finally:
        codebook.bulk_table = saved


def checked_entry_by_entry(check: Callable[[Any], None], mapping: dict[Any, Any]) -> None:
    check(entry_by_entry(mapping))


def bench_dicts(log2n: int, repeat: int) -> None:
    n = 1 << log2n
    rng = np.random.Generator(np.random.PCG64(2024))
    lengths = codes.huffman_lengths(rng.random(n) + 1e-9)
    symbols = np.arange(n)
    book = codes.canonical_codebook((symbols, lengths))
    pairs = {s: (v, ln) for s, v, ln in zip(book.symbols, book._pyvalues, lengths.tolist())}
    texts = {s: book.word(s) for s in book.symbols}
    print(f"code tables as dicts: 2^{log2n} codewords (canonical Huffman, "
          f"{book.max_length} bits at most), CPU time, best of {repeat}")
    for table in (pairs, texts):  # the same table, however it is spelled
        got = codes.Codebook(table)
        if got.symbols != book.symbols or got._pyvalues != book._pyvalues:
            raise SystemExit("a dict table differs from the same table built from arrays")

    def arrays() -> object:
        return codes.canonical_codebook((symbols, lengths))

    best, spread, (arr_s, old_s) = alternated(
        lambda: codes.Codebook(pairs), [arrays, lambda: entry_by_entry(pairs)], repeat
    )
    report("Codebook({s: (value, length)})", best, spread, 0.25)
    ratio("the same table from arrays", best, arr_s)
    ratio("read entry by entry (before)", best, old_s)
    best, spread, (arr_s, old_s, ba_s) = alternated(
        lambda: codes.Codebook(texts),
        [arrays, lambda: entry_by_entry(texts), lambda: [bitarray(w) for w in texts.values()]],
        repeat,
    )
    report('Codebook({s: "0101..."})', best, spread, 0.4)
    ratio("the same table from arrays", best, arr_s)
    ratio("read entry by entry (before)", best, old_s)
    ratio("bitarray parsing each string", best, ba_s)
    for name, table, target in (("pairs", pairs, 0.3), ("strings", texts, 0.45)):
        for check in (codes.assert_prefix_free, codes.assert_kraft):
            best, spread, (arr_s, old_s) = alternated(
                partial(check, table),
                [partial(check, book), partial(checked_entry_by_entry, check, table)],
                repeat,
            )
            report(f"{check.__name__}({name} dict)", best, spread, target)
            ratio("the Codebook built from arrays (no parsing)", best, arr_s)
            ratio("the dict read entry by entry (before)", best, old_s)


def suffix_code(log2n: int) -> dict[int, str]:
    """A canonical Huffman code of random weights with every word reversed."""
    n = 1 << log2n
    lengths = codes.huffman_lengths(np.random.Generator(np.random.PCG64(2024)).random(n) + 1e-9)
    book = codes.canonical_codebook((np.arange(n), lengths))
    return {s: book.word(s)[::-1] for s in book.symbols}


def bench_sp(log2n: int, repeat: int) -> None:
    words = suffix_code(log2n)
    print(f"unique decodability: 2^{log2n} codewords, CPU time, best of {repeat}")
    ambiguous = dict(words)
    ambiguous[len(words)] = "1" * 25  # found by the search at 55 bits
    limit = codes.SP_SUFFIX_LIMIT
    for label, table in (("suffix code (decodable)", words),
                         ("plus '1'*25 (ambiguous)", ambiguous)):
        cb = codes.Codebook(table)
        ours = decodability._ambiguity(cb, limit)
        before = decodability._ambiguity_text(cb, limit)
        if ours != before:
            raise SystemExit(f"{label}: the layered search and the text search disagree")
        best, spread, (text_s,) = alternated(
            partial(codes.ambiguity, cb), [partial(decodability._ambiguity_text, cb, limit)],
            repeat,
        )
        verdict = "uniquely decodable" if ours is None else f"{len(ours[0])}-bit ambiguity"
        report(f"ambiguity: {label}", best, spread, 1.0)
        ratio(f"the text search (before); {verdict}, same", best, text_s)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--sizes", type=int, nargs="+", default=[16, 20], metavar="LOG2N")
    parser.add_argument("--dict-size", type=int, default=20, metavar="LOG2N")
    parser.add_argument("--sp-size", type=int, default=16, metavar="LOG2N")
    parser.add_argument("--only", nargs="+", choices=["huffman", "dicts", "sp"],
                        default=["huffman", "dicts", "sp"])
    args = parser.parse_args()
    if "huffman" in args.only:
        for log2n in args.sizes:
            bench_size(log2n, args.repeat)
    if "dicts" in args.only:
        bench_dicts(args.dict_size, args.repeat)
    if "sp" in args.only:
        bench_sp(args.sp_size, args.repeat)
    if MISSED:
        print("targets missed: " + ", ".join(MISSED))
        sys.exit(1)


if __name__ == "__main__":
    main()
