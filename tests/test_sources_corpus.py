"""Corpus sources: a file's exact symbols as the sample, its order-0 plug-in entropy estimate.

Every figure is checked against something the project did not write: scipy.stats.entropy
for the entropy, collections.Counter and math.log2 for the self-information, hashlib for
the content hash, struct for the layouts; end to end through the real check with zlib.
"""

from __future__ import annotations

import collections
import hashlib
import math
import os
import struct
import zlib

import numpy as np
import pytest
import scipy.stats

from pytest_ratefloor import checks, sources
from pytest_ratefloor.codecs import ByteCodec
from pytest_ratefloor.errors import LayoutError
from pytest_ratefloor.sources.corpora import MAX_CORPUS_BYTES, Corpus

# invented demo data: a harbour's tide log
TIDES = b"harbour tide log, gauge 07: 1.42 m 1.37 m 1.29 m 1.18 m; gauge 08: 1.40 m 1.33 m\n"


@pytest.fixture
def tides(tmp_path):
    path = tmp_path / "tides.u8"
    path.write_bytes(TIDES)
    return path


def plug_in_information(content: bytes, sample: bytes) -> float:
    """-Σ log2(c_x / N) with the counts of the whole ``content`` (Counter, math.log2)."""
    counts = collections.Counter(content)
    return -sum(math.log2(counts[b] / len(content)) for b in sample)


# --------------------------------------------------------------------------
# the golden case: spec, entropy, information of a small file


def test_golden_spec_and_entropy(tides):
    src = sources.corpus(tides)
    sha = hashlib.sha256(TIDES).hexdigest()[:12]  # what `sha256sum tides.u8 | cut -c1-12` prints
    assert sha == "30cef436c3ac"  # pinned: the spec of this file must not drift
    assert src.spec == f"corpus(name=tides.u8,sha={sha},symbol=u8)"
    assert repr(src) == src.spec
    assert isinstance(src, Corpus)
    assert src.family == "corpus"
    assert src.name == "tides.u8"
    assert src.sha == sha
    assert src.symbol == "u8"
    assert src.path == os.fspath(tides)
    assert src.length == len(TIDES)
    assert src.params == {"n": len(TIDES)}
    # scipy.stats.entropy normalises the counts of the whole file
    counts = list(collections.Counter(TIDES).values())
    assert src.entropy == pytest.approx(scipy.stats.entropy(counts, base=2), rel=1e-13)
    assert src.entropy == pytest.approx(4.1779517007, rel=1e-9)  # pinned from scipy at writing
    # clearly an estimate
    assert src.is_estimate is True
    assert src.fixed_sample is True
    assert src.describe().startswith(f"{src.spec}: plug-in entropy estimate ")
    assert src.memoryless


def test_information_is_the_plug_in_self_information(tides):
    src = sources.corpus(tides)
    whole = src.sample()
    # brute force with Counter and math.log2, symbol by symbol
    assert src.information(whole) == pytest.approx(plug_in_information(TIDES, TIDES), rel=1e-12)
    assert src.information(whole) == pytest.approx(src.length * src.entropy, rel=1e-12)
    head = TIDES[:17]
    assert src.information(src.sample(17)) == pytest.approx(
        plug_in_information(TIDES, head), rel=1e-12
    )
    per_symbol = src.self_information(np.frombuffer(b"ea", dtype=np.uint8))
    counts = collections.Counter(TIDES)
    assert per_symbol.tolist() == pytest.approx(
        [-math.log2(counts[ord(c)] / len(TIDES)) for c in "ea"], rel=1e-13
    )
    assert src.information([]) == 0.0


def test_varentropy_and_pmf_table_against_the_counts(tides):
    src = sources.corpus(tides)
    counts = collections.Counter(TIDES)
    n = len(TIDES)
    h = -sum(c / n * math.log2(c / n) for c in counts.values())
    v = sum(c / n * (-math.log2(c / n) - h) ** 2 for c in counts.values())
    assert src.varentropy == pytest.approx(v, rel=1e-12)
    assert src.varentropy_rate == src.varentropy  # memoryless model
    symbols, probs = src.pmf_table()
    assert symbols.tolist() == sorted(counts)
    assert probs.tolist() == pytest.approx([counts[s] / n for s in sorted(counts)], rel=1e-15)
    assert src.alphabet_size == len(counts)
    assert (src.min_symbol, src.max_symbol) == (min(TIDES), max(TIDES))


# --------------------------------------------------------------------------
# the sample is the file


def test_sample_is_the_file_prefix_whatever_the_seed(tides):
    src = sources.corpus(tides)
    assert src.sample().tolist() == list(TIDES)
    assert src.sample(None).dtype == np.int64
    assert src.sample(10).tolist() == list(TIDES[:10])
    assert src.sample(0).tolist() == []
    for seed in (0, 1, 2**40):
        assert src.sample(25, seed=seed).tolist() == list(TIDES[:25])
        assert src.sample(seed=seed).tolist() == list(TIDES)
    first = src.sample(5)
    first[:] = 0  # the caller's copy: the source is unchanged
    assert src.sample(5).tolist() == list(TIDES[:5])
    assert not src.data.flags.writeable


def test_sample_longer_than_the_file_is_refused(tides):
    src = sources.corpus(tides)
    n = len(TIDES)
    with pytest.raises(
        ValueError,
        match=rf"corpus\(name=tides\.u8,.*\): n={n + 1} is more than the {n} u8 symbols of "
        rf"tides\.u8; .* n must be <= {n}$",
    ):
        src.sample(n + 1)
    with pytest.raises(ValueError, match=r"^n must be an integer >= 0, got -1$"):
        src.sample(-1)
    with pytest.raises(TypeError, match=r"^n must be an integer, got 2\.0$"):
        src.sample(2.0)
    with pytest.raises(ValueError, match=r"^seed must be an integer >= 0, got -3$"):
        src.sample(3, seed=-3)


def test_symbol_that_never_occurs_is_named(tides):
    src = sources.corpus(tides)
    with pytest.raises(
        ValueError,
        match=r"symbol 90 at index 1 never occurs in tides\.u8 \(probability 0 under the "
        r"plug-in estimate\)",
    ):
        src.information([ord("h"), ord("Z")])


# struct as the outside reference of each layout (little-endian words, zig-zag, MSB-first bits)
def _zigzag(v: int) -> int:
    return (v >> 1) ^ -(v & 1)


LAYOUTS = {
    "u8": lambda b: list(b),
    "u16le": lambda b: list(struct.unpack(f"<{len(b) // 2}H", b)),
    "i32le": lambda b: list(struct.unpack(f"<{len(b) // 4}i", b)),
    "zigzag-u16le": lambda b: [_zigzag(v) for v in struct.unpack(f"<{len(b) // 2}H", b)],
    "bits": lambda b: [(byte >> (7 - i)) & 1 for byte in b for i in range(8)],
}


@pytest.mark.parametrize("symbol", sorted(LAYOUTS))
def test_layouts_read_the_exact_symbols(tmp_path, symbol):
    content = bytes([0x80, 0x01, 0xFF, 0x00, 0x12, 0x34, 0x56, 0xF8] * 3)
    path = tmp_path / "words.bin"
    path.write_bytes(content)
    src = sources.corpus(path, symbol=symbol)
    expected = LAYOUTS[symbol](content)
    assert src.sample().tolist() == expected
    assert src.spec.endswith(f",symbol={symbol})")
    counts = list(collections.Counter(expected).values())
    assert src.entropy == pytest.approx(scipy.stats.entropy(counts, base=2), rel=1e-13)


def test_edited_file_changes_the_spec(tides):
    before = sources.corpus(tides).spec
    tides.write_bytes(TIDES.replace(b"1.42", b"1.43"))
    after = sources.corpus(tides).spec
    assert after != before
    assert after.startswith("corpus(name=tides.u8,sha=")
    assert sources.corpus(tides, symbol="bits").spec != after  # the layout is part of it


def test_names_are_readable_and_safe(tmp_path):
    path = tmp_path / "gauge 07 (night)|x.u8"
    path.write_bytes(TIDES)
    spec = sources.corpus(path).spec
    assert spec.startswith("corpus(name=gauge_07__night__x.u8,sha=")
    assert " " not in spec
    assert "|" not in spec
    # the same bytes built directly, under a name of the caller's choosing
    (tmp_path / "tides.u8").write_bytes(TIDES)
    assert Corpus(TIDES, name="tides.u8").spec == sources.corpus(tmp_path / "tides.u8").spec


# --------------------------------------------------------------------------
# reading is bounded and refuses what is not a regular file


def test_errors_are_named(tmp_path, tides):
    with pytest.raises(FileNotFoundError):
        sources.corpus(tmp_path / "missing.u8")
    # the one-file reader names a folder; sources.corpus(folder) gives one source per file
    from pytest_ratefloor.sources.corpora import corpus as one_file

    with pytest.raises(ValueError, match=r"is a folder; corpus_files\(.*\) gives one source"):
        one_file(tmp_path)
    empty = tmp_path / "empty.u8"
    empty.write_bytes(b"")
    with pytest.raises(ValueError, match=r"^corpus: .*empty\.u8 is empty; a corpus needs"):
        sources.corpus(empty)
    with pytest.raises(
        ValueError,
        match=rf"^corpus: .*tides\.u8 is {len(TIDES)} bytes, over the limit of 10 bytes; "
        r"pass a larger max_bytes= or a shorter file$",
    ):
        sources.corpus(tides, max_bytes=10)
    assert sources.corpus(tides, max_bytes=len(TIDES)).length == len(TIDES)
    assert MAX_CORPUS_BYTES == 1 << 24
    odd = tmp_path / "odd.u16"
    odd.write_bytes(b"abc")
    with pytest.raises(
        LayoutError,
        match=r"^corpus: odd\.u16: 3 bytes are not a whole number of 'u16le' symbols",
    ):
        sources.corpus(odd, symbol="u16le")
    with pytest.raises(ValueError, match=r"^corpus: symbol must be one of 'bits', .*got 'auto'$"):
        sources.corpus(tides, symbol="auto")
    with pytest.raises(TypeError, match=r"^corpus: symbol must be one of .*got 8$"):
        sources.corpus(tides, symbol=8)
    with pytest.raises(TypeError, match=r"^corpus: path must be a path .*got 7$"):
        sources.corpus(7)
    with pytest.raises(ValueError, match=r"^corpus: max_bytes must be an integer >= 1, got 0$"):
        sources.corpus(tides, max_bytes=0)
    with pytest.raises(TypeError, match=r"^corpus: content must be bytes, got 'abc'$"):
        Corpus("abc", name="x")


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no FIFOs here")
def test_fifo_is_refused_without_blocking(tmp_path):
    fifo = tmp_path / "pipe.u8"
    os.mkfifo(fifo)  # opening it for reading would wait for a writer forever
    with pytest.raises(ValueError, match=r"^corpus: .*pipe\.u8 is a FIFO; a corpus is read from"):
        sources.corpus(fifo)


@pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="no /dev/zero here")
def test_device_is_refused():
    with pytest.raises(ValueError, match=r"^corpus: /dev/zero is a device; a corpus is read"):
        sources.corpus("/dev/zero")  # endless: reading it unbounded would never finish


# --------------------------------------------------------------------------
# folders and globs


@pytest.fixture
def harbour(tmp_path):
    root = tmp_path / "harbour"
    (root / "night").mkdir(parents=True)
    (root / "b.u8").write_bytes(b"gauge 08: 1.40 m")
    (root / "a.u8").write_bytes(b"gauge 07: 1.42 m")
    (root / ".hidden").write_bytes(b"not a corpus file")
    (root / "night" / "c.u8").write_bytes(b"gauge 09: 0.98 m")
    (root / "notes.txt").write_bytes(b"calibrated in May")
    return root


def test_folder_gives_one_source_per_file_sorted(harbour):
    found = sources.corpus_files(harbour)
    assert [s.name for s in found] == ["a.u8", "b.u8", "notes.txt"]  # no sub-folders, no dot files
    assert found[0].sample().tolist() == list(b"gauge 07: 1.42 m")
    assert found[0].spec == sources.corpus(harbour / "a.u8").spec


def test_glob_names_are_relative_to_its_fixed_folders(harbour):
    found = sources.corpus_files(os.path.join(harbour, "**", "*.u8"))
    assert [s.name for s in found] == ["a.u8", "b.u8", "night/c.u8"]
    assert found[2].spec.startswith("corpus(name=night/c.u8,sha=")
    assert found[2].sample().tolist() == list(b"gauge 09: 0.98 m")
    # specs do not depend on where the folder lives or on the working directory
    flat = sources.corpus_files(str(harbour) + "/?.u8", symbol="bits")
    assert [s.spec.split(",")[0] for s in flat] == ["corpus(name=a.u8", "corpus(name=b.u8"]
    assert all(s.symbol == "bits" for s in flat)


def test_corpus_files_of_one_file_and_of_nothing(harbour, tmp_path):
    one = sources.corpus_files(harbour / "a.u8")
    assert len(one) == 1
    assert one[0].spec == sources.corpus(harbour / "a.u8").spec
    with pytest.raises(FileNotFoundError, match=r"^corpus_files: no files match '.*\*\.zz'$"):
        sources.corpus_files(os.path.join(harbour, "*.zz"))
    (tmp_path / "bare").mkdir()
    with pytest.raises(FileNotFoundError, match=r"^corpus_files: the folder .*bare holds no files"):
        sources.corpus_files(tmp_path / "bare")
    with pytest.raises(FileNotFoundError, match=r"^corpus_files: no such file, folder or pattern"):
        sources.corpus_files(tmp_path / "absent.u8")
    with pytest.raises(ValueError, match=r"over the limit of 4 bytes"):
        sources.corpus_files(harbour, max_bytes=4)


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no FIFOs here")
def test_fifo_in_a_folder_is_refused_not_skipped(harbour):
    os.mkfifo(harbour / "live.u8")
    with pytest.raises(ValueError, match=r"^corpus_files: .*live\.u8 is a FIFO"):
        sources.corpus_files(harbour)


# --------------------------------------------------------------------------
# end to end through the real check


def _iid_file(tmp_path, n: int) -> os.PathLike[str]:
    """A file of i.i.d. bytes (an order-0 model is right for it: no structure to exploit)."""
    drawn = sources.categorical([0.4, 0.3, 0.15, 0.1, 0.05], [48, 49, 50, 51, 52]).sample(n, 3)
    path = tmp_path / "readings.u8"
    path.write_bytes(drawn.astype(np.uint8).tobytes())
    return path


def test_check_passes_on_a_corpus_file(tmp_path):
    src = sources.corpus(_iid_file(tmp_path, 20_000))
    codec = ByteCodec(zlib.compress, zlib.decompress, name="z", symbol="u8")
    m = checks.check(codec, src, n=src.length, rel=0.5, edge_cases=False)
    assert m.source == src.spec
    assert m.n == src.length
    assert m.floor == "sample"
    assert m.sample_information is None  # a fixed sample is no hard limit (rate.py)
    assert m.floor_bits == pytest.approx(src.length * src.entropy, rel=1e-9)
    assert m.floor_bits == pytest.approx(src.length * src.entropy, rel=1e-9)
    assert m.entropy == src.entropy
    # a prefix is measured against the same histogram
    head = checks.check(codec, src, n=5000, rel=0.5, edge_cases=False, seed=7)
    content = src.data.astype(np.uint8).tobytes()
    assert head.floor_bits == pytest.approx(
        plug_in_information(content, content[:5000]), rel=1e-9
    )


def test_check_with_edge_cases_on_a_long_corpus_file(tmp_path):
    # the edge cases take prefixes of up to 65 537 symbols of the sample
    src = sources.corpus(_iid_file(tmp_path, 70_000))
    codec = ByteCodec(zlib.compress, zlib.decompress, name="z")  # "auto": u8 for 48..52
    m = checks.check(codec, src, n=70_000, rel=0.5, floor="empirical")
    assert m.floor_bits == pytest.approx(src.information(src.sample()), rel=1e-9)
