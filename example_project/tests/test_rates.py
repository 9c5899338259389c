"""The rate gate of the kelpwick codecs: decodability, code tables, rate vs. floor, ledger.

Each codec is checked on reference sources shaped like its radio stream. The
rates are measured on synthetic sources: they say how close each coder gets to
the floor of that source, not what it will achieve on real gauge data.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from pytest_ratefloor import (
    LossyCodec,
    StreamCodec,
    assert_kraft,
    assert_prefix_free,
    gate,
    sources,
)

from kelpwick import faults, levels, seastate, surge

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
    # the huffman floor is the mean over samples: at n = 50,000 the 1 % tolerance sat
    # inside the sampling spread of zipf(16, 2.0) (the plugin warned); 100,000 clears it
    n=100_000,
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


# Absolute water levels: the gauge sends level changes, so a batch of levels is a random
# walk and the same Rice coder runs on its differences. The walk's entropy rate is the
# step's exactly, so the tolerance is the one of the step sources above.
START_LEVEL_MM = 1200
WATER_LEVELS = StreamCodec(
    lambda x: levels.encode(np.diff(np.asarray(x, dtype=np.int64), prepend=START_LEVEL_MM)),
    lambda data, n: START_LEVEL_MM + np.cumsum(levels.decode(data, n)),
    name=f"{levels.NAME}-absolute", version=levels.VERSION,
)
test_water_levels = gate(
    WATER_LEVELS,
    sources=[sources.random_walk(sources.two_sided_geometric(0.9), start=START_LEVEL_MM)],
    n=100_000,
    rel=0.04,
)

# One invented day of reports from the four gauges (make_demo_data.py --days 1), checked
# as the exact bytes: the floor is each file's order-0 information, an estimate from the
# file itself (a statement about this file, not about the gauges). 1,440 symbols are few:
# the coders' headers (about 60 bits for the sea-state table) weigh several percent, and
# a Rice code's redundancy on one day's own histogram is less settled than on a model, so
# the tolerance is wider: the ledger is what guards these files.
CORPUS = Path(__file__).resolve().parent.parent / "corpus"
test_levels_day = gate(
    LEVELS,
    sources=[sources.corpus(CORPUS / "level_changes_one_day.u8", symbol="zigzag-u8")],
    rel=0.10,
)
test_seastate_day = gate(
    SEASTATE, sources=[sources.corpus(CORPUS / "sea_state_one_day.u8")], rel=0.10,
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


# Calm and storm in turn: the flags' statistics change every few hours. The range coder's
# counts never forget, so it pays for every change: about 40 % over the sample's exact
# information, which knows where each segment starts. That cost is the coder's design,
# measured against a true floor; the ledger keeps it from growing.
STORMS = sources.piecewise([(sources.bernoulli(0.002), 10_000), (sources.bernoulli(0.2), 5_000)])
test_faults_calm_and_storm = gate(FAULTS, sources=[STORMS], n=60_000, rel=0.5)


def test_fault_flags_in_a_storm(ratefloor):
    # corruption=True: damaged messages must fail cleanly or decode to n flags, never hang.
    ratefloor.check(FAULTS, sources.bernoulli(0.2), n=20_000, floor="adaptive",
                    abs=64 / 20_000, corruption=True)


def test_seastate_table_on_air_is_a_complete_prefix_code() -> None:
    message = seastate.encode(SEA_STATE_SOURCE.sample(20_000, seed=1))
    table = seastate.shipped_table(message)
    assert_prefix_free(table, max_length=seastate.MAX_LENGTH, canonical=True)
    assert_kraft(table, complete=True, max_length=seastate.MAX_LENGTH)

# Surge residuals (lossy): a closed-loop DPCM quantizer with the Rice coder behind it,
# held to R(D) of a Gauss–Markov model of the residual (rho = 0.95, sigma = 0.3 m) under
# mean-squared error. At fine steps a uniform quantizer with an ideal entropy coder sits
# 0.254 bits/sample above R(D) (Gish & Pierce 1968, from memory); the Rice code of the
# quantizer indices adds about 0.13, so 0.5 bits/sample is allowed. R(D) of a model
# source says nothing certain about the real residuals of the gauges.
SURGE_SOURCE = sources.gauss_markov(0.95, sigma=0.3)
SURGE = LossyCodec(surge.encode, surge.decode, name=surge.NAME, version=surge.VERSION)
test_surge = gate(SURGE, sources=[SURGE_SOURCE, sources.gaussian(0.3)], max_gap=0.5)

# The error-bounded mode: every residual within 1 cm of the truth, whatever the sample.
SURGE_STEP, SURGE_BOUNDED_NAME = surge.for_error_bound(0.01)
SURGE_BOUNDED = LossyCodec(lambda x: surge.encode(x, SURGE_STEP), surge.decode,
                           name=SURGE_BOUNDED_NAME, version=surge.VERSION)
test_surge_bounded = gate(SURGE_BOUNDED, sources=[SURGE_SOURCE], max_gap=0.5, max_abs=0.01)
