"""The rate gate of the kelpwick codecs: decodability, code tables, rate vs. floor, ledger.

Each codec is checked on reference sources shaped like its radio stream. The
rates are measured on synthetic sources: they say how close each coder gets to
the floor of that source, not what it will achieve on real gauge data.
"""

from __future__ import annotations

from pytest_ratefloor import StreamCodec, assert_kraft, assert_prefix_free, gate, sources

from kelpwick import faults, levels, seastate

SEASTATE = StreamCodec(seastate.encode, seastate.decode, name=seastate.NAME,
                       version=seastate.VERSION)
LEVELS = StreamCodec(levels.encode, levels.decode, name=levels.NAME, version=levels.VERSION)
FAULTS = StreamCodec(faults.encode, faults.decode, name=faults.NAME, version=faults.VERSION)

SEA_STATE_SOURCE = sources.categorical(seastate.SEA_STATE_FREQUENCIES)

# Sea state: the per-batch code is optimal for the batch's own counts, so it sits on the
# "huffman" floor (the optimal prefix code of the true pmf) but for its header of about
# 60 bits. The 7-bit length cap costs ~0.5 % on zipf(16, 2.0), whose unrestricted
# Huffman code needs 8 bits.
test_seastate = gate(
    SEASTATE,
    sources=[SEA_STATE_SOURCE, sources.zipf(16, 1.2), sources.zipf(16, 2.0), sources.uniform(5)],
    n=50_000,
    floor="huffman",
    rel=0.01,
)

# Level changes: a Rice code of the zig-zagged values is a Golomb code of a folded pmf,
# not the Huffman code of the two-sided geometric pmf; its redundancy over the entropy
# is 0.6-3.5 % for theta in 0.5..0.97 (largest near theta = 0.6), hence 4 %.
test_levels = gate(
    LEVELS,
    sources=[sources.two_sided_geometric(t) for t in (0.5, 0.7, 0.9, 0.93, 0.95)],
    n=100_000,
    rel=0.04,
)


def test_level_changes_on_a_calm_day(ratefloor):
    ratefloor.check(LEVELS, sources.two_sided_geometric(0.8), n=50_000, rel=0.03)


# Fault flags: the adaptive range coder should land within a few bits of the
# Krichevsky–Trofimov ideal length; the message head (3 bytes of symbol count at these
# n) and the termination (< 2 bytes) are a fixed cost, so the tolerance is absolute:
# 64 bits over the batch.
N_FLAGS = 50_000
test_faults = gate(
    FAULTS,
    sources=[sources.bernoulli(p) for p in (0.002, 0.01, 0.05)],
    n=N_FLAGS,
    floor="adaptive",
    abs=64 / N_FLAGS,
)


def test_fault_flags_in_a_storm(ratefloor):
    # corruption=True: damaged messages must fail cleanly or decode to n flags, never hang.
    ratefloor.check(FAULTS, sources.bernoulli(0.2), n=20_000, floor="adaptive",
                    abs=64 / 20_000, corruption=True)


def test_seastate_table_on_air_is_a_complete_prefix_code() -> None:
    message = seastate.encode(SEA_STATE_SOURCE.sample(20_000, seed=1))
    table = seastate.shipped_table(message)
    assert_prefix_free(table, max_length=seastate.MAX_LENGTH, canonical=True)
    assert_kraft(table, complete=True, max_length=seastate.MAX_LENGTH)
