"""How often the rate verdict is right: false alarms and power over many seeds.

What it measures
----------------
For each case (a source and a sample size ``n``) and each seed ``0..seeds-1``
it runs the plugin's real verdict path,
``pytest_ratefloor.checks.check(codec, source, n=n, seed=seed, edge_cases=False,
isolate=False)``, with two model coders:

* the **ideal coder**, an arithmetic/range coder built for the true law: its
  length on a sample ``x`` is ``⌈−log2 P(x)⌉ + 32`` bits (the sample's
  self-information, rounded up, plus 32 bits of flush and header overhead);
* the **3 %-worse coder**, the same coder built for a mismatched law ``q``
  whose cross-entropy ``Σ p·(−log2 q)`` is ``1.03·H``: length
  ``⌈Σ −log2 q(xᵢ)⌉ + 32``. ``q ∝ p^β`` over ``source.pmf_table()`` with
  ``β < 1`` found by bisection (symbols beyond the table, which misses at most
  2⁻⁶⁰ of the mass, get ``β·I(x) + log2 Z``, the same formula); for a Markov
  chain each row of the transition matrix (and the initial law) is tempered
  with one common ``β``. Tempering cannot change a flat law (``uniform(k)``):
  there ``q ∝ p·2^(−λ·i/(k−1))`` over the table index ``i`` instead, with
  ``λ`` found by bisection for the same cross-entropy. The ``q`` column names
  the construction.

Both are length-only model coders: the encoder returns ``(bytes, nbits)`` with
the length above (and zero bytes), the decoder hands back the sample the
encoder was given through a side channel. They are honest about length, so
the impossible-rate rule must never fire; anything but a pass or a
``RateFailure`` is counted as an error and printed.

Per case the table gives, out of ``seeds`` samples:

``FA sample``     ideal coder fails the default check (floor ``"sample"``,
                  ``rel=0.01``): a false alarm.
``FA entropy``    ideal coder fails ``floor="entropy", rel=0.01``.
``pred``          the normal-approximation (central limit theorem; for chains
                  the Markov-chain CLT) prediction of ``FA entropy``:
                  ``Φ̄((rel·n·H − overhead)/√(n·V))``, ``V`` the source's
                  ``varentropy_rate``, overhead 32.5 bits (32 plus the mean
                  0.5 bit of rounding up). A source with ``V = 0`` gives 0 or 1.
``power sample``  the 3 %-worse coder fails the default check.
``pred``          its normal approximation: the coder fails when
                  ``Σ g(xᵢ) + overhead > 0`` with ``g = −log2 q − (1+rel)·I``,
                  so ``Φ((n·E[g] + overhead)/√(n·Var g))`` (memoryless sources
                  only; ``-`` for a chain).
``power entropy`` the 3 %-worse coder fails ``floor="entropy", rel=0.01``.

The first table is ``sources.standard_suite()`` at ``--n`` (all defaults of
a check: floor ``"sample"``, ``rel=0.01``, ``n=100_000``). The second is the
audit's cases — Bernoulli(0.01), Bernoulli(0.1) and Zipf(256, 1.1) at
n = 10³, 10⁴, 10⁵ and a sticky two-state Markov chain at 10⁵ — with the same
columns, so the entropy floor's noise is seen next to the sample floor.

The claim checked at the end: with every default, the ideal coder passes at
least 99.9 % of seeds on every suite source and the 3 %-worse coder fails at
least 99.9 %. 1000 seeds cannot show a rate of 0.1 % directly (0 failures
out of 1000 bounds the rate below 0.69 % at 99.9 % confidence); the
predictions say how far inside the bound each case sits.

What the figures do not mean: the sources are synthetic (i.i.d. or a
two-state chain with exactly known law) and the coders are models of a
coder's length, not real coders. A real coder adds its own overhead (model
description, adaptation cost, finite-precision arithmetic), which moves its
length by more than 32 bits; how a given real codec fares is for its own
checks to tell. ``NoisyToleranceWarning`` is suppressed while measuring
(it fires at the small n of the second table, as it should).

Run: ``python benchmarks/stat_verdicts.py [--seeds 1000] [--n 100000]
[--sources bernoulli zipf] [--jobs 2]`` (a few minutes on two cores at the
defaults). ``--sources`` keeps the cases whose spec contains any of the
given strings.
"""

from __future__ import annotations

import argparse
import math
import multiprocessing
import os
import sys
import time
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.special import logsumexp
from scipy.stats import norm

from pytest_ratefloor import sources
from pytest_ratefloor.checks import DEFAULT_N, check
from pytest_ratefloor.codecs import StreamCodec
from pytest_ratefloor.errors import NoisyToleranceWarning, RateFailure
from pytest_ratefloor.floors import Floor
from pytest_ratefloor.sources import Source

#: Bits a model coder adds to its ideal length (flush, header).
OVERHEAD_BITS = 32
#: Mean overhead over the ideal length: 32 bits plus the mean 0.5 bit of ⌈·⌉.
MEAN_OVERHEAD = OVERHEAD_BITS + 0.5
#: The worse coder's cross-entropy, as a multiple of H.
WORSE = 1.03
#: The tolerance of both floors measured here (the check's default).
REL = 0.01
#: The share of seeds the claim asks for.
CLAIM = 0.999
_LN2 = math.log(2.0)
_DENSE_SPAN = 1 << 20


# --------------------------------------------------------------------------
# the cases


@dataclass(frozen=True)
class Case:
    """One source at one sample size."""

    source: Source
    n: int


def suite_cases(n: int) -> list[Case]:
    """The first table: every source of the standard suite at ``n``."""
    return [Case(s, n) for s in sources.standard_suite()]


def audit_cases() -> list[Case]:
    """The second table: the audit's cases."""
    cases = [
        Case(make(), n)
        for make in (lambda: sources.bernoulli(0.01), lambda: sources.bernoulli(0.1),
                     lambda: sources.zipf(256, 1.1))
        for n in (1_000, 10_000, 100_000)
    ]
    cases.append(Case(sources.markov([[0.99, 0.01], [0.02, 0.98]]), 100_000))
    return cases


def select(cases: list[Case], filters: Sequence[str] | None) -> list[Case]:
    """The cases whose spec contains one of ``filters`` (all of them without filters)."""
    if not filters:
        return cases
    return [c for c in cases if any(f in c.source.spec for f in filters)]


# --------------------------------------------------------------------------
# code lengths: the true law and a mismatched one


def _bisect(f: Callable[[float], float], lo: float, hi: float, steps: int = 80) -> float:
    """The root of an increasing ``f`` on ``[lo, hi]`` (f(lo) <= 0 <= f(hi))."""
    for _ in range(steps):
        mid = 0.5 * (lo + hi)
        if f(mid) > 0:
            hi = mid
        else:
            lo = mid
    return 0.5 * (lo + hi)


def _log2_sum_pow2(exponents: np.ndarray, axis: int | None = None) -> Any:
    """log2 Σ 2^e, stably."""
    return logsumexp(exponents * _LN2, axis=axis) / _LN2


class TrueModel:
    """The true law: −log2 P(x) is the sample's self-information."""

    description = "p"

    def __init__(self, source: Source) -> None:
        self.source = source

    def bits(self, sample: np.ndarray) -> float:
        return float(self.source.information(sample))


class MemorylessModel:
    """A mismatched law q on the symbols of a memoryless source, looked up by symbol.

    ``neg_log2_q`` is given over ``symbols`` (ascending); a symbol outside them
    costs ``outside(x)`` (the tempered formula, or ``inf`` where q has a finite
    support that is the source's whole support).
    """

    def __init__(self, symbols: np.ndarray, neg_log2_q: np.ndarray,
                 outside: Callable[[np.ndarray], np.ndarray], description: str) -> None:
        self.symbols = symbols
        self.neg_log2_q = neg_log2_q
        self.outside = outside
        self.description = description
        lo, hi = int(symbols[0]), int(symbols[-1])
        self._lo = lo
        self._dense: np.ndarray | None = None
        if hi - lo < _DENSE_SPAN:
            dense = np.full(hi - lo + 1, np.nan)
            dense[symbols - lo] = neg_log2_q
            self._dense = dense

    def per_symbol(self, sample: np.ndarray) -> np.ndarray:
        x = np.asarray(sample, dtype=np.int64)
        if self._dense is not None:
            idx = x - self._lo
            inside = (idx >= 0) & (idx < self._dense.size)
            out = np.empty(x.size)
            out[inside] = self._dense[idx[inside]]
            found = inside & ~np.isnan(out)
        else:
            pos = np.clip(np.searchsorted(self.symbols, x), 0, self.symbols.size - 1)
            found = self.symbols[pos] == x
            out = self.neg_log2_q[pos]
        if not found.all():
            out[~found] = self.outside(x[~found])
        return out

    def bits(self, sample: np.ndarray) -> float:
        return float(np.sum(self.per_symbol(sample)))


class ChainModel:
    """A mismatched chain: −log2 q(xₜ | xₜ₋₁) looked up by the pair, q₀ for the first."""

    def __init__(self, neg_log2_q: np.ndarray, neg_log2_q0: np.ndarray,
                 description: str) -> None:
        self.neg_log2_q = neg_log2_q
        self.neg_log2_q0 = neg_log2_q0
        self.description = description

    def bits(self, sample: np.ndarray) -> float:
        x = np.asarray(sample, dtype=np.int64)
        if x.size == 0:
            return 0.0
        return float(self.neg_log2_q0[x[0]] + np.sum(self.neg_log2_q[x[:-1], x[1:]]))


def _tempered_memoryless(source: Source, target: float) -> MemorylessModel | None:
    """q ∝ p^β with cross-entropy ``target``, or None when tempering cannot reach it."""
    symbols, probs = source.pmf_table()
    keep = probs > 0
    symbols, probs = symbols[keep], probs[keep]
    info = np.asarray(source.self_information(symbols), dtype=np.float64)
    weights = probs / probs.sum()

    def log2_z(beta: float) -> float:
        return float(_log2_sum_pow2(-beta * info))

    def cross_entropy(beta: float) -> float:  # Σ p·(β·I + log2 Z(β)), decreasing in β
        return beta * float(np.dot(weights, info)) + log2_z(beta)

    if cross_entropy(0.0) <= target:
        return None
    beta = _bisect(lambda b: target - cross_entropy(b), 0.0, 1.0)
    z = log2_z(beta)

    def outside(x: np.ndarray) -> np.ndarray:
        return beta * np.asarray(source.self_information(x)) + z

    return MemorylessModel(symbols, beta * info + z, outside, f"p^{beta:.4f}")


def _tilted_memoryless(source: Source, target: float) -> MemorylessModel:
    """q ∝ p·2^(−λ·i/(k−1)) over the table index i, cross-entropy ``target``.

    For laws tempering cannot change (flat ones); needs a finite support.
    """
    if source.alphabet_size is None:
        raise ValueError(f"{source.spec}: no mismatched law of cross-entropy {target}")
    symbols, probs = source.pmf_table(tail=0.0)
    keep = probs > 0
    symbols, probs = symbols[keep], probs[keep]
    info = np.asarray(source.self_information(symbols), dtype=np.float64)
    weights = probs / probs.sum()
    ramp = np.arange(symbols.size) / max(1, symbols.size - 1)

    def neg_log2_q(lam: float) -> np.ndarray:
        exponents = -info - lam * ramp
        return -(exponents - _log2_sum_pow2(exponents))

    def cross_entropy(lam: float) -> float:  # increasing in λ >= 0
        return float(np.dot(weights, neg_log2_q(lam)))

    hi = 1.0
    while cross_entropy(hi) < target:
        hi *= 2.0
    lam = _bisect(lambda v: cross_entropy(v) - target, 0.0, hi)

    def outside(x: np.ndarray) -> np.ndarray:
        return np.full(x.shape, np.inf)

    return MemorylessModel(symbols, neg_log2_q(lam), outside, f"tilt λ={lam:.4f}")


def _tempered_chain(source: Any, target: float) -> ChainModel:
    """Each row of the transition matrix (and the initial law) tempered with one β."""
    transition = np.asarray(source.transition, dtype=np.float64)
    stationary = np.asarray(source.stationary, dtype=np.float64)
    initial = np.asarray(source.initial, dtype=np.float64)
    with np.errstate(divide="ignore"):
        info = np.where(transition > 0, -np.log2(transition), np.inf)
        info0 = np.where(initial > 0, -np.log2(initial), np.inf)
    finite = np.where(np.isfinite(info), info, 0.0)

    def row_log2_z(beta: float) -> np.ndarray:
        return np.asarray(_log2_sum_pow2(-beta * info, axis=1))

    def cross_entropy(beta: float) -> float:  # Σ π_i Σ_j P_ij (β·I_ij + log2 Z_i(β))
        per_row = beta * np.sum(transition * finite, axis=1) + row_log2_z(beta)
        return float(np.dot(stationary, per_row))

    if cross_entropy(0.0) <= target:
        raise ValueError(f"{source.spec}: tempering cannot reach cross-entropy {target}")
    beta = _bisect(lambda b: target - cross_entropy(b), 0.0, 1.0)
    rows = beta * info + row_log2_z(beta)[:, None]
    first = beta * info0 + float(_log2_sum_pow2(-beta * info0))
    return ChainModel(rows, first, f"rows^{beta:.4f}")


def worse_model(source: Source, factor: float = WORSE) -> TrueModel | MemorylessModel | ChainModel:
    """The mismatched law whose cross-entropy is ``factor``·H (see the module doc)."""
    target = factor * float(source.entropy)
    if not source.memoryless:
        return _tempered_chain(source, target)
    return _tempered_memoryless(source, target) or _tilted_memoryless(source, target)


def model_codec(model: TrueModel | MemorylessModel | ChainModel, name: str,
                overhead: int = OVERHEAD_BITS) -> StreamCodec:
    """A length-only coder: ⌈−log2 q(x)⌉ + overhead bits; the decoder returns the
    sample the encoder last saw (a side channel: only lengths are modelled)."""
    seen: dict[str, np.ndarray] = {}

    def encode(symbols: np.ndarray) -> tuple[bytes, int]:
        seen["last"] = np.array(symbols, dtype=np.int64)
        nbits = math.ceil(model.bits(symbols)) + overhead
        return bytes((nbits + 7) // 8), nbits

    def decode(data: object, n: int) -> np.ndarray:
        last = seen["last"]
        if last.size != n:
            raise RuntimeError(f"side channel holds {last.size} symbols, asked for {n}")
        return last

    return StreamCodec(encode, decode, name=name)


# --------------------------------------------------------------------------
# predictions (normal approximation)


def predicted_false_alarm(source: Source, n: int, rel: float = REL,
                          overhead: float = MEAN_OVERHEAD) -> float:
    """Φ̄((rel·n·H − overhead)/√(n·V)): the ideal coder over n·H·(1+rel) (CLT)."""
    margin = rel * n * float(source.entropy) - overhead
    spread = math.sqrt(n * float(getattr(source, "varentropy_rate", source.varentropy)))
    if spread == 0:
        return 0.0 if margin >= 0 else 1.0
    return float(norm.sf(margin / spread))


def predicted_power(source: Source, model: Any, n: int, rel: float = REL,
                    overhead: float = MEAN_OVERHEAD) -> float | None:
    """Φ((n·E[g] + overhead)/√(n·Var g)), g = −log2 q − (1+rel)·I (memoryless only)."""
    if not isinstance(model, MemorylessModel):
        return None
    symbols, probs = source.pmf_table()
    keep = probs > 0
    symbols, probs = symbols[keep], probs[keep] / probs[keep].sum()
    g = model.per_symbol(symbols) - (1 + rel) * np.asarray(source.self_information(symbols))
    mean = float(np.dot(probs, g))
    var = float(np.dot(probs, (g - mean) ** 2))
    centre = n * mean + overhead
    if var == 0:
        return 1.0 if centre > 0 else 0.0
    return float(norm.cdf(centre / math.sqrt(n * var)))


# --------------------------------------------------------------------------
# the measurement, in worker processes

#: (ideal or worse, floor) of each check run per seed.
RUNS: tuple[tuple[str, Floor], ...] = (
    ("ideal", "sample"), ("ideal", "entropy"), ("worse", "sample"), ("worse", "entropy"))

_CASES: list[Case] = []
_CODECS: dict[int, dict[str, StreamCodec]] = {}


def _init_worker(cases: list[Case]) -> None:
    global _CASES
    _CASES = cases
    _CODECS.clear()
    warnings.simplefilter("ignore", NoisyToleranceWarning)


def _codecs(index: int) -> dict[str, StreamCodec]:
    if index not in _CODECS:
        source = _CASES[index].source
        _CODECS[index] = {"ideal": model_codec(TrueModel(source), "ideal"),
                          "worse": model_codec(worse_model(source), "worse3pc")}
    return _CODECS[index]


def _measure(task: tuple[int, int, int]) -> tuple[int, list[int], list[str]]:
    """Failures per run (see RUNS) over seeds ``lo..hi-1`` of case ``index``; errors."""
    index, lo, hi = task
    case = _CASES[index]
    codecs = _codecs(index)
    fails = [0] * len(RUNS)
    errors: list[str] = []
    for seed in range(lo, hi):
        for k, (coder, floor) in enumerate(RUNS):
            try:
                check(codecs[coder], case.source, n=case.n, seed=seed, floor=floor, rel=REL,
                      edge_cases=False, isolate=False)
            except RateFailure:
                fails[k] += 1
            except Exception as exc:  # every other outcome is reported, not raised
                errors.append(f"{case.source.spec} n={case.n} seed={seed} {coder}/{floor}: "
                              f"{type(exc).__name__}: {str(exc).splitlines()[0]}")
    return index, fails, errors


@dataclass
class Tally:
    """One case's counts over all seeds."""

    case: Case
    seeds: int = 0
    fails: list[int] = field(default_factory=lambda: [0] * len(RUNS))
    errors: list[str] = field(default_factory=list)


def measure_all(cases: list[Case], seeds: int, jobs: int, chunk: int = 50) -> list[Tally]:
    """Run every case on seeds 0..seeds-1, spread over ``jobs`` processes."""
    tallies = [Tally(c) for c in cases]
    # chains first: they sample symbol by symbol, so they are the longest tasks
    order = sorted(range(len(cases)), key=lambda i: cases[i].source.memoryless)
    tasks = [(i, lo, min(seeds, lo + chunk)) for i in order for lo in range(0, seeds, chunk)]
    method = "fork" if "fork" in multiprocessing.get_all_start_methods() else "spawn"
    ctx = multiprocessing.get_context(method)
    with ctx.Pool(jobs, initializer=_init_worker, initargs=(cases,)) as pool:
        for (index, fails, errors), (_, lo, hi) in zip(pool.imap(_measure, tasks), tasks):
            tally = tallies[index]
            tally.seeds += hi - lo
            tally.fails = [a + b for a, b in zip(tally.fails, fails)]
            tally.errors.extend(errors)
    return tallies


# --------------------------------------------------------------------------
# the tables


def _share(count: int, total: int) -> str:
    return f"{count:>4} {100.0 * count / total:5.1f}%"


def _pct(value: float | None) -> str:
    return "     -" if value is None else f"{100.0 * value:5.1f}%"


def table(title: str, tallies: list[Tally]) -> list[str]:
    """The printed lines of one table."""
    head = (f"{'source':<50} {'n':>7} {'seeds':>5} {'q':>13} | {'FA sample':>11} "
            f"{'FA entropy':>11} {'pred':>6} | {'power sample':>12} {'pred':>6} "
            f"{'power entropy':>13}")
    lines = [title, head, "-" * len(head)]
    for t in tallies:
        source, n = t.case.source, t.case.n
        model = worse_model(source)
        fa_s, fa_e, pw_s, pw_e = t.fails
        lines.append(
            f"{source.spec:<50} {n:>7} {t.seeds:>5} {model.description:>13} | "
            f"{_share(fa_s, t.seeds):>11} {_share(fa_e, t.seeds):>11} "
            f"{_pct(predicted_false_alarm(source, n)):>6} | {_share(pw_s, t.seeds):>12} "
            f"{_pct(predicted_power(source, model, n)):>6} {_share(pw_e, t.seeds):>13}"
        )
    return lines


def claim(tallies: list[Tally]) -> list[str]:
    """Does every suite case meet the claim (≥ 99.9 % right verdicts, default check)?"""
    lines = []
    for t in tallies:
        fa, power = t.fails[0] / t.seeds, t.fails[2] / t.seeds
        if fa > 1 - CLAIM or power < CLAIM:
            lines.append(f"  claim fails: {t.case.source.spec} n={t.case.n}: false alarms "
                         f"{100 * fa:.2f} %, power {100 * power:.2f} %")
    if not lines:
        lines.append(f"  claim holds on every case: ideal coder passed >= {100 * CLAIM:g} % "
                     f"and the {100 * (WORSE - 1):g} %-worse coder failed >= {100 * CLAIM:g} % "
                     "of seeds (default check)")
    return lines


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--seeds", type=int, default=1000, help="seeds per case (0..seeds-1)")
    parser.add_argument("--n", type=int, default=DEFAULT_N, help="sample size of the suite table")
    parser.add_argument("--sources", nargs="*", default=None,
                        help="keep the cases whose spec contains any of these strings")
    parser.add_argument("--jobs", type=int, default=min(2, os.cpu_count() or 1),
                        help="worker processes (default 2)")
    args = parser.parse_args(argv)
    if args.seeds < 1 or args.n < 1 or args.jobs < 1:
        parser.error("--seeds, --n and --jobs must be >= 1")

    start = time.perf_counter()
    suite = select(suite_cases(args.n), args.sources)
    audit = select(audit_cases(), args.sources)
    tallies = measure_all(suite + audit, args.seeds, args.jobs)
    wall = time.perf_counter() - start

    out: list[str] = []
    legend = (f"ideal: ceil(-log2 P(x)) + {OVERHEAD_BITS} bits; worse: ceil(-log2 q(x)) + "
              f"{OVERHEAD_BITS}, cross-entropy {WORSE:g}·H; rel={REL:g} on both floors; "
              "FA = ideal coder fails; power = worse coder fails; pred = normal approximation")
    if suite:
        out += table("standard suite, every default (floor='sample', rel=0.01) and "
                     "floor='entropy'", tallies[:len(suite)])
        out += claim(tallies[:len(suite)])
        out.append("")
    if audit:
        out += table("audit cases", tallies[len(suite):])
        out.append("")
    out.append(legend)
    errors = [e for t in tallies for e in t.errors]
    if errors:
        out.append(f"{len(errors)} errors (neither a pass nor a RateFailure); the first:")
        out += [f"  {e}" for e in errors[:10]]
    out.append(f"wall time {wall:.1f} s on {args.jobs} process(es), {args.seeds} seeds per case")
    print("\n".join(out))
    return 1 if errors else 0


if __name__ == "__main__":
    sys.exit(main())
