"""The fast sampling paths give exactly the samples of the plain definitions.

Chains: the lockstep sampler (pytest_ratefloor/sources/chain_sampler.py) against a copy
of the one-word-one-bisection loop it replaced, kept here as the reference. Long tables:
the positional layout and the cell-bounded search against numpy.searchsorted. Uniform
powers of two against Python's integer arithmetic. Empirical model counts against
numpy.unique, which the counting used before.
"""

from __future__ import annotations

from bisect import bisect_right
from fractions import Fraction

import numpy as np
import pytest

from pytest_ratefloor import sources
from pytest_ratefloor.sources import chain_sampler
from pytest_ratefloor.sources.empirical import _context_model
from pytest_ratefloor.sources.sampling import _InverseCdf, _mulhi, _thresholds_from_weights

WORD = 1 << 64


class ReferenceChain:
    """The chain sampler as it was: a Python loop, one raw word and one bisection per symbol."""

    def __init__(self, start_weights, prefixes, row_weights, row_symbols, row_next):
        self.start_thresholds = _thresholds_from_weights(start_weights)
        self.prefixes = [list(p) for p in prefixes]
        self.thresholds, self.symbols, self.next, self.begin, self.last = [], [], [], [], []
        for weights, syms, nxt in zip(row_weights, row_symbols, row_next):
            self.begin.append(len(self.thresholds))
            self.thresholds.extend(_thresholds_from_weights(weights))
            self.thresholds.append(WORD)
            self.symbols.extend(syms)
            self.next.extend(nxt)
            self.last.append(len(self.thresholds) - 1)

    def sample(self, n, seed):
        bitgen = np.random.PCG64(seed)
        if n == 0:
            return np.zeros(0, dtype=np.int64)
        first = int(bitgen.random_raw(1)[0])
        state = bisect_right(self.start_thresholds, first)
        out = list(self.prefixes[state][:n])
        steps = n - len(out)
        while steps > 0:
            chunk = min(steps, 1 << 16)
            steps -= chunk
            for word in bitgen.random_raw(chunk).tolist():
                row = bisect_right(self.thresholds, word, self.begin[state], self.last[state])
                out.append(self.symbols[row])
                state = self.next[row]
        return np.array(out, dtype=np.int64)


def reference_of(src):
    """The reference loop over the same rows as the source's own sampler."""
    if isinstance(src, sources.Markov):
        size = src.transition.shape[0]
        states = list(range(size))
        return ReferenceChain(
            src._initial_weights,
            [[s] for s in states],
            src._row_weights,
            [states] * size,
            [states] * size,
        )
    bounds = np.flatnonzero(np.diff(src._row_ctx)) + 1
    groups = np.split(np.arange(src._rows.shape[0]), bounds)
    return ReferenceChain(
        src._ctx_counts.tolist(),
        src._contexts.tolist(),
        [src._counts[g].tolist() for g in groups],
        [src._rows[g, -1].tolist() for g in groups],
        [src._row_next[g].tolist() for g in groups],
    )


TIDE = b"".join(
    f"KS{g:02d},{1.2 + 0.01 * ((g * 37 + i * 11) % 97):.3f},{8 + (i * 7) % 60 / 10:.1f}\n".encode()
    for i in range(3000)
    for g in (1, 3, 4)
)


def chains():
    rng = np.random.default_rng(11)
    sticky = np.full((5, 5), 1e-9)
    np.fill_diagonal(sticky, 1 - 4e-9)
    return {
        "two-state": sources.markov([[0.9, 0.1], [0.4, 0.6]]),
        "three-state-initial": sources.markov(
            [[0.2, 0.5, 0.3], [0.1, 0.1, 0.8], [0.6, 0.3, 0.1]], initial=[1.0, 0.0, 0.0]
        ),
        "dirichlet-64": sources.markov(rng.dirichlet(np.ones(64), 64)),
        "sparse-20": sources.markov(
            (lambda m: m / m.sum(1, keepdims=True))(
                rng.random((20, 20)) * (rng.random((20, 20)) < 0.2)
                + np.eye(20, k=1)
                + np.eye(20, k=-19)
            )
        ),
        # a periodic chain never forgets its start: every repair is done step by step
        "periodic": sources.markov([[0.0, 1.0, 0.0], [0.0, 0.0, 1.0], [1.0, 0.0, 0.0]]),
        # a nearly decomposable chain forgets it very slowly
        "sticky": sources.markov(sticky / sticky.sum(1, keepdims=True)),
        "tide-order-1": sources.empirical(np.frombuffer(TIDE, dtype=np.uint8), order=1),
        "tide-order-2": sources.empirical(np.frombuffer(TIDE, dtype=np.uint8), order=2),
        "tide-order-3": sources.empirical(np.frombuffer(TIDE, dtype=np.uint8), order=3),
        "negative-symbols": sources.empirical(
            np.array([-5, 3, 3, -5, 7, 3, -5, -5, 7, 7, 3] * 40), order=2
        ),
    }


CHUNK_WORDS = chain_sampler._CHUNKS * chain_sampler._LENGTH  # one lockstep block


@pytest.mark.parametrize("name", list(chains()))
def test_lockstep_chain_samples_equal_the_loop(name):
    src = chains()[name]
    reference = reference_of(src)
    for n, seed in [
        (0, 0),
        (1, 3),
        (511, 1),
        (512, 2),
        (513, 0),
        (4001 * 64 + 5, 7),
        (CHUNK_WORDS + 2, 4),
    ]:
        assert np.array_equal(src.sample(n, seed=seed), reference.sample(n, seed)), (name, n)


def test_lockstep_crosses_blocks_and_short_tails():
    # three blocks and a tail shorter than a chunk; and a tail that needs the loop
    src = chains()["dirichlet-64"]
    reference = reference_of(src)
    for n in (2 * CHUNK_WORDS + 300, CHUNK_WORDS + 1):
        assert np.array_equal(src.sample(n, seed=5), reference.sample(n, 5))


def test_chains_too_large_for_the_table_use_the_loop(monkeypatch):
    monkeypatch.setattr(chain_sampler, "_TABLE_ENTRIES", 10)
    src = sources.markov([[0.5, 0.3, 0.2], [0.1, 0.1, 0.8], [0.6, 0.3, 0.1]])
    x = src.sample(5000, seed=1)
    assert src._chain._classes is None  # no table: the loop drew them
    assert np.array_equal(x, reference_of(src).sample(5000, 1))


@pytest.mark.parametrize("rounds", [0, 1])
def test_repair_by_steps_alone_gives_the_same_samples(monkeypatch, rounds):
    # with no (or one) lockstep repair round, everything left is repaired step by step
    monkeypatch.setattr(chain_sampler, "_ROUNDS", rounds)
    monkeypatch.setattr(chain_sampler, "_FEW", 0)
    for name in ("dirichlet-64", "tide-order-2", "periodic"):
        src = chains()[name]
        assert np.array_equal(src.sample(300_000, seed=9), reference_of(src).sample(300_000, 9))


# --------------------------------------------------------------------------
# long tables: the inverse CDF in the alias layout, and the cell-bounded search


def probes(thresholds, count=60_000, seed=3):
    t = np.asarray(thresholds, dtype=np.uint64)
    edge = t[:: max(1, t.size // 4000)]
    words = np.random.PCG64(seed).random_raw(count)
    return np.concatenate(
        [
            words,
            edge,
            edge[edge > 0] - np.uint64(1),
            edge[edge < WORD - 1] + np.uint64(1),
            np.array([0, WORD - 1], dtype=np.uint64),
        ]
    )


def crowded_thresholds(count, seed=0):
    """Sorted thresholds, some cells crowded (a geometric-like tail), some repeated."""
    rng = np.random.default_rng(seed)
    spread = rng.integers(0, 2**63, count // 2, dtype=np.uint64) * np.uint64(2)
    tail = WORD - 1 - rng.integers(0, 2**40, count - count // 2 - 20, dtype=np.uint64)
    same = np.full(20, spread[0])
    return np.sort(np.concatenate([spread, tail, same]))


@pytest.mark.parametrize("count", [70_000, 2**20 + 3])
def test_long_tables_keep_the_inverse_cdf(count):
    t = crowded_thresholds(count)
    values = np.arange(t.size + 1, dtype=np.int64) * 5 - 11
    table = _InverseCdf(t.tolist(), values)
    w = probes(t)
    expected = values[np.searchsorted(t, w, side="right")]  # numpy's own search
    assert np.array_equal(table(w), expected)
    assert table._positional  # drawn through the alias layout, holding the inverse CDF
    assert table._refined is not None  # crowded cells were split again
    assert np.array_equal(table.rows(w), np.searchsorted(t, w, side="right"))


def test_ordered_tables_never_use_the_alias_method():
    t = np.sort(np.random.default_rng(1).integers(0, 2**63, 9000, dtype=np.uint64) * np.uint64(2))
    table = _InverseCdf(t.tolist(), np.arange(t.size + 1), ordered=True)
    w = probes(t)
    assert np.array_equal(table(w), np.searchsorted(t, w, side="right"))
    assert table._positional
    short = _InverseCdf(t[:100].tolist(), np.arange(101), ordered=True)
    assert np.array_equal(short(w), np.searchsorted(t[:100], w, side="right"))
    assert short._alias is None


@pytest.mark.parametrize(
    "src",
    [sources.two_sided_geometric(0.999), sources.zipf(2**17, 1.0), sources.poisson(100_000.0)],
    ids=lambda s: s.spec,
)
def test_long_families_sample_their_inverse_cdf(src):
    src.sample(1)
    table = src._sampler if hasattr(src, "_sampler") else src._table
    t = table.thresholds
    w = probes(t, seed=8)
    assert np.array_equal(src._draw(w), table.values[np.searchsorted(t, w, side="right")])


@pytest.mark.parametrize("k", [2, 4, 256, 4096, 65536, 2**20, 2**40])
def test_power_of_two_uniform_is_the_top_bits(k):
    w = probes([(i << 64) // k for i in range(1, min(k, 5000))], seed=k % 97)
    assert sources.uniform(k)._draw(w).tolist() == [(int(u) * k) >> 64 for u in w.tolist()]


def test_power_of_two_uniform_equals_the_guide_table_it_replaced():
    k = 1024
    thresholds = [-((-i << 64) // k) for i in range(1, k)]
    # the table the power-of-two case used before: guide cells, multiply-high in split ones
    table = _InverseCdf(thresholds, np.arange(k), resolve=lambda u: _mulhi(u, k))
    w = probes(thresholds)
    assert np.array_equal(sources.uniform(k)._draw(w), table(w))
    assert np.array_equal(table(w), (w >> np.uint64(54)).astype(np.int64))


def test_bernoulli_sampling_still_uses_exact_rationals():
    # unchanged by this file's paths: kept as a control that the words are the same stream
    raw = np.random.PCG64(4).random_raw(1000)
    assert np.array_equal(
        sources.bernoulli(0.3).sample(1000, seed=4), raw < np.uint64(round(Fraction(0.3) * WORD))
    )


# --------------------------------------------------------------------------
# the empirical model's counts


def unique_model(data, k):
    """The (k+1)-gram counts of ``data`` read as a ring, by numpy.unique on rows."""
    windows = np.lib.stride_tricks.sliding_window_view(np.concatenate([data, data[:k]]), k + 1)
    grams, counts = np.unique(windows, axis=0, return_counts=True)
    return grams, counts


@pytest.mark.parametrize(
    "data",
    [
        np.frombuffer(TIDE[:5000], dtype=np.uint8).astype(np.int64),
        np.frombuffer(np.random.default_rng(2).bytes(3000), dtype=np.uint8).astype(np.int64),
        np.array([-3, 10**12, 5, -3, 5, 5, 10**12, -3] * 30, dtype=np.int64),
        np.array([7] * 50, dtype=np.int64),
        # every symbol 0..3 occurs: the symbols are their own ranks
        np.random.default_rng(8).integers(0, 4, 700),
    ],
    ids=["text", "bytes", "wide-symbols", "constant", "dense-small"],
)
@pytest.mark.parametrize("k", [0, 1, 2, 3])
def test_context_model_counts_equal_numpy_unique(data, k):
    grams, counts, contexts, gram_context, gram_next = _context_model(data, k)
    want_grams, want_counts = unique_model(data, k)
    assert np.array_equal(grams, want_grams)
    assert np.array_equal(counts, want_counts)
    assert np.array_equal(contexts[gram_context], grams[:, :k])
    assert np.array_equal(contexts[gram_next], grams[:, 1:])


# --------------------------------------------------------------------------
# chains with many states: the per-state guide, against the reference loop


NOISE = np.random.default_rng(21).bytes(300_000)  # random bytes: order 2 has 65,536 contexts


def many_context_models():
    text = np.frombuffer(TIDE * 3, dtype=np.uint8)
    noise = np.frombuffer(NOISE, dtype=np.uint8)
    return {
        "noise-order-1": sources.empirical(noise, order=1),  # 256 states, ~256 rows each
        "noise-order-2": sources.empirical(noise, order=2),  # forgets slowly: longer chunks
        "noise-order-3": sources.empirical(noise[:60_000], order=3),  # nearly deterministic
        "text-order-1": sources.empirical(text, order=1),
        "text-order-2": sources.empirical(text, order=2),
        "text-order-3": sources.empirical(text, order=3),
        # zero-probability moves: repeated thresholds, and rows no word ever picks
        "sparse-markov": sources.markov(sparse_transitions(300, 6)),
    }


def sparse_transitions(states, moves, seed=3):
    """A transition matrix whose rows each allow only ``moves`` next states (the rest 0)."""
    rng = np.random.default_rng(seed)
    matrix = np.zeros((states, states))
    for row in matrix:
        row[rng.choice(states, moves, replace=False)] = rng.dirichlet(np.ones(moves))
    return matrix


@pytest.fixture
def guide_for_all(monkeypatch):
    """Every chain takes the guide path (no class table), and slow chains escalate quickly."""
    monkeypatch.setattr(chain_sampler, "_TABLE_ENTRIES", 0)
    monkeypatch.setattr(chain_sampler, "_LONGEST", 2000)
    monkeypatch.setattr(chain_sampler, "_GUIDE_BLOCK", 1 << 18)


@pytest.mark.parametrize("name", list(many_context_models()))
def test_guide_path_samples_equal_the_loop(guide_for_all, name):
    src = many_context_models()[name]
    reference = reference_of(src)
    # lengths across a block, its chunks and tails (a block is 2**18 words here)
    # (a shorter block after a full one reuses the first block's arrays)
    cases = [(513, 2), (4001 * 64 + 5, 7), ((1 << 18) + 17, 4), (3 * (1 << 18) + 999, 1),
             ((1 << 18) + 200_000, 9)]
    for n, seed in cases:
        assert np.array_equal(src.sample(n, seed=seed), reference.sample(n, seed)), (name, n)
    chain = src._chain
    assert chain._classes is None
    assert chain._guide.size > 0


def test_many_contexts_take_the_guide_by_default():
    # ~65,000 contexts: too many for the class table (states x classes > 2**21)
    src = many_context_models()["noise-order-2"]
    n = (1 << 21) + 3
    assert np.array_equal(src.sample(n, seed=8), reference_of(src).sample(n, 8))
    chain = src._chain
    assert chain._classes is None
    assert chain._guide.size == len(chain.begin) << chain._shift
    # two paths fed the same words meet only after thousands of words: chunks grew
    assert chain._length > chain_sampler._LENGTH


def test_guide_step_is_the_bisection():
    # the guide's row against Python's bisect_right on each state's own thresholds
    src = many_context_models()["noise-order-1"]
    src.sample(10)
    chain = src._chain
    chain._build()
    rng = np.random.default_rng(4)
    states = rng.integers(0, len(chain.begin), 30_000)
    inner = np.array([t for t in chain.thresholds if t < WORD], dtype=np.uint64)
    words = np.concatenate(
        [
            np.random.PCG64(6).random_raw(10_000),
            inner[rng.integers(0, inner.size, 10_000)],  # on a threshold
            inner[rng.integers(0, inner.size, 10_000)] - np.uint64(1),  # just below one
        ]
    )
    shift = chain._shift
    cells = (words >> np.uint64(64 - shift)).astype(np.int64)
    out = np.empty(words.size, dtype=np.int32)
    chain._step_guide(cells, words, (states << shift).astype(np.int64), out)
    want = [
        chain.next[bisect_right(chain.thresholds, int(u), chain.begin[s], chain.last[s])]
        for s, u in zip(states.tolist(), words.tolist())
    ]
    assert np.array_equal(out >> shift, want)


@pytest.mark.parametrize("sub_bits", [0, 1, 6])
def test_guide_cells_holding_thresholds_are_counted(guide_for_all, monkeypatch, sub_bits):
    # four cells a state: most words fall in a cell holding thresholds; with no sub-cells
    # (or one bit of them) the comparisons do the work, and no word is left to bisect
    monkeypatch.setattr(chain_sampler, "_GUIDE_BITS", 2)
    monkeypatch.setattr(chain_sampler, "_SUB_BITS", sub_bits)
    monkeypatch.setattr(chain_sampler, "_FEW_LEFT", 0)
    monkeypatch.setattr(chain_sampler, "_COMPARE", 1000)
    for name in ("text-order-1", "noise-order-1"):
        src = many_context_models()[name]
        assert np.array_equal(src.sample(300_000, seed=3), reference_of(src).sample(300_000, 3))
        chain = src._chain
        assert chain._shift == 2
        assert chain._sub == sub_bits
        assert (chain._guide < 0).mean() > 0.5


def test_crowded_guide_cells_are_bisected(guide_for_all, monkeypatch):
    # one comparison a step: words of a sub-cell holding 2+ thresholds are bisected
    monkeypatch.setattr(chain_sampler, "_GUIDE_BITS", 2)
    monkeypatch.setattr(chain_sampler, "_SUB_BITS", 1)
    monkeypatch.setattr(chain_sampler, "_FEW_LEFT", 0)
    monkeypatch.setattr(chain_sampler, "_COMPARE", 1)
    calls, inside = [], []
    real_bisect, real_step = chain_sampler.bisect_right, chain_sampler._ChainSampler._step_guide

    def step(*args):
        inside.append(1)
        try:
            real_step(*args)
        finally:
            inside.pop()

    def bisect(*args):
        calls.extend(inside)  # only the bisections made by a step count
        return real_bisect(*args)

    monkeypatch.setattr(chain_sampler._ChainSampler, "_step_guide", step)
    monkeypatch.setattr(chain_sampler, "bisect_right", bisect)
    src = many_context_models()["noise-order-1"]
    assert np.array_equal(src.sample(300_000, seed=3), reference_of(src).sample(300_000, 3))
    assert calls


def test_the_top_word_never_compares_past_a_states_end(monkeypatch):
    # the flat array marks each state's end with 2**64 - 1, the largest word: a step
    # that compares that word with the mark must not step into the next state's rows
    # (its comparisons never settle, so it is bisected), and 2**64 - 2 stops at the mark
    monkeypatch.setattr(chain_sampler, "_GUIDE_BITS", 2)
    monkeypatch.setattr(chain_sampler, "_SUB_BITS", 0)
    monkeypatch.setattr(chain_sampler, "_FEW_LEFT", 0)
    monkeypatch.setattr(chain_sampler, "_TABLE_ENTRIES", 0)
    src = many_context_models()["noise-order-1"]
    src.sample(10)
    chain = src._chain
    chain._build()
    states = np.arange(len(chain.begin))
    for top in (WORD - 1, WORD - 2):
        words = np.full(states.size, top, dtype=np.uint64)
        shift = chain._shift
        cells = (words >> np.uint64(64 - shift)).astype(np.int64)
        out = np.empty(states.size, dtype=np.int32)
        chain._step_guide(cells, words, (states << shift).astype(np.int64), out)
        want = [chain.next[bisect_right(chain.thresholds, top, chain.begin[s], chain.last[s])]
                for s in states.tolist()]
        assert np.array_equal(out >> shift, want), top


def test_chains_too_large_for_the_guide_use_the_loop(monkeypatch):
    monkeypatch.setattr(chain_sampler, "_TABLE_ENTRIES", 0)
    monkeypatch.setattr(chain_sampler, "_GUIDE_ENTRIES", 10)
    src = many_context_models()["text-order-2"]
    assert np.array_equal(src.sample(50_000, seed=2), reference_of(src).sample(50_000, 2))
    assert src._chain._classes is None
    assert src._chain._guide.size == 0
