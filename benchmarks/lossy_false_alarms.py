"""False alarms of the lossy impossible-point rule: correct codecs over many seeds.

What it measures
----------------
For each case (a correct lossy codec, a source, ``n``) and each seed
``0..seeds-1`` it runs ``measure_lossy(codec, source, n=n, seed=seed,
isolate=False)`` — the real path, with the impossible-point rule of
:mod:`pytest_ratefloor.lossy.converse` — and counts:

``impossible``  how often the rule fired (an ``ImpossibleRate``): a false
                alarm, since every codec here is an honest, deterministic
                codec whose decoder sees only the stream and ``n``. The
                derivation bounds this by 2⁻³² per run; it must print 0.
``naive``       how often ``rate < R(D̂)``, the rule without a margin: how
                often a margin is needed at all (codecs near R(D) fall below
                it on lucky samples: "send nothing" on about half of them).
``min slack``   the least ``bits − converse_bits`` over the seeds (bits of
                room left before the rule would fire; > 0 always).
``seconds``     CPU seconds for the case (the machine is shared: noisy).

A second table gives the rule's power: a decoder that reads the sample from a
closure and adds Gaussian noise of the distortion ``D(2 + excess)`` to it,
behind an honest 2-bit/sample stream, claims ``excess`` bits/sample it never
sent; the count is how often that is caught.

The codecs (``tests/lossy_coders.py``): ``send-nothing`` (0 bits, all zeros),
``sign`` (1 bit/sample), ``fixed-rate(2 bits)``, ``uq-rans`` (a uniform
quantizer with a static rANS coder), and for a finite alphabet "send nothing"
(all zeros) and "keep every other symbol".

Run: ``.venv/bin/python benchmarks/lossy_false_alarms.py [--seeds 300] [--n 256 4096]``.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
from bitarray import bitarray

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))

import lossy_coders as coders

from pytest_ratefloor import sources
from pytest_ratefloor.errors import ImpossibleRate
from pytest_ratefloor.lossy import LossyCodec, measure_lossy


def zeros_codec() -> LossyCodec:
    return LossyCodec(lambda x: b"", lambda d, n: np.zeros(n, dtype=np.int64), name="zeros")


def keep_half() -> LossyCodec:
    def encode(x: np.ndarray) -> bitarray:
        out = bitarray()
        out.pack(np.asarray(x[::2] & 1, dtype=np.uint8).tobytes())
        return out

    def decode(data: bitarray, n: int) -> np.ndarray:
        out = np.zeros(n, dtype=np.int64)
        out[::2] = np.frombuffer(data.unpack(), dtype=np.uint8)
        return out

    return LossyCodec(encode, decode, name="keep-half")


def partial_cheat(excess: float) -> LossyCodec:
    """Sends 2 bits/sample (a fixed-rate quantizer's stream), but its decoder adds to the
    true sample (read from a closure) Gaussian noise of the distortion R(D) gives at
    ``2 + excess`` bits: it claims ``excess`` bits/sample it never sent."""
    honest = coders.fixed_rate_quantizer(2)
    distortion = 2.0 ** (-2 * (2.0 + excess))  # D(R) = σ²·2^(−2R), σ = 1
    seen: dict[str, np.ndarray] = {}

    def encode(x: np.ndarray) -> object:
        seen["x"] = np.array(x)
        return honest._encode(x)

    def decode(data: object, n: int) -> np.ndarray:
        noise = np.random.default_rng(n).standard_normal(n)
        return seen["x"][:n] + np.sqrt(distortion) * noise

    return LossyCodec(encode, decode, name=f"cheat(+{excess:g} bit)")


def cases() -> list[tuple[LossyCodec, object]]:
    gauss = sources.gaussian(1.0)
    return [
        (coders.send_nothing(), gauss),
        (coders.sign_quantizer(), gauss),
        (coders.fixed_rate_quantizer(2), gauss),
        (coders.entropy_coded_quantizer(0.25), gauss),
        (coders.send_nothing(), sources.laplacian(1.0)),
        (coders.send_nothing(), sources.gauss_markov(0.9)),
        (coders.entropy_coded_quantizer(0.25), sources.gauss_markov(0.9)),
        (zeros_codec(), sources.bernoulli(0.2)),
        (keep_half(), sources.bernoulli(0.5)),
    ]


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--seeds", type=int, default=300)
    parser.add_argument("--n", type=int, nargs="+", default=[256, 4096])
    args = parser.parse_args()
    print(f"{'codec':<22} {'source':<28} {'n':>6} {'impossible':>10} {'naive':>6} "
          f"{'min slack':>10} {'seconds':>8}")
    total = 0
    for n in args.n:
        for codec, source in cases():
            fired = naive = 0
            slack = float("inf")
            start = time.process_time()
            for seed in range(args.seeds):
                try:
                    m = measure_lossy(codec, source, n=n, seed=seed, isolate=False)
                except ImpossibleRate:
                    fired += 1
                    continue
                naive += m.gap is not None and m.gap < 0
                if m.converse_bits is not None:
                    slack = min(slack, m.bits - m.converse_bits)
            total += fired
            print(f"{codec.name:<22} {source.spec:<28} {n:>6} {fired:>10} {naive:>6} "  # type: ignore[attr-defined]
                  f"{slack:>10.1f} {time.process_time() - start:>8.2f}")
    print(f"false alarms in total: {total}")
    print("\npower: codecs that claim bits they never sent (gaussian(sigma=1.0))")
    print(f"{'codec':<22} {'n':>6} {'impossible':>10} {'of':>6}")
    gauss = sources.gaussian(1.0)
    for n in args.n:
        for excess in (0.02, 0.05, 0.1, 0.2):
            codec = partial_cheat(excess)
            fired = 0
            for seed in range(args.seeds):
                try:
                    measure_lossy(codec, gauss, n=n, seed=seed, isolate=False)
                except ImpossibleRate:
                    fired += 1
            print(f"{codec.name:<22} {n:>6} {fired:>10} {args.seeds:>6}")
    return 1 if total else 0


if __name__ == "__main__":
    raise SystemExit(main())
