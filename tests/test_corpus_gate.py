"""Corpus files through the real check and the ledger gate.

A corpus file is data, not a draw from a model: a compressor that uses context goes
far below its order-0 information, which is therefore no hard limit (no impossible
rate), and a short file has no 65,537-symbol prefix for the edge cases to take.
The ledger gate must treat corpus cases exactly as synthetic ones, and an edited
file must be noticed (its spec carries a content hash).
"""

from __future__ import annotations

import zlib
from pathlib import Path

import pytest
from test_plugin import INNER, _clean_environment, ledger_bits  # noqa: F401 (autouse fixture)

from pytest_ratefloor import ByteCodec, sources
from pytest_ratefloor.checks import check

#: invented tide-gauge log lines: structured text that zlib compresses far below its
#: order-0 information
LOG = "".join(f"gauge K{i % 7} level {1200 + (i * 37) % 90} mm ok\n" for i in range(400))


def _zlib() -> ByteCodec:
    return ByteCodec(lambda b: zlib.compress(b, 9), zlib.decompress, name="zlib-9")


def test_a_context_compressor_below_the_order0_information_is_not_impossible(
    tmp_path: Path,
) -> None:
    path = tmp_path / "gauge.log"
    path.write_text(LOG)
    corpus = sources.corpus(path)
    order0_bits = corpus.information(corpus.sample())
    m = check(_zlib(), corpus, n=corpus.length, rel=0.0)  # short file, edge cases on
    assert m.bits < 0.5 * order0_bits  # far below: context, not a side channel
    assert m.sample_information is None  # no hard limit for a fixed sample


GATED = '''
import pathlib, zlib
from pytest_ratefloor import ByteCodec, sources, gate

HERE = pathlib.Path(__file__).parent
PAD = HERE / "pad.txt"

def compress(data):
    return zlib.compress(data, 9) + bytes(int(PAD.read_text()) if PAD.exists() else 0)

def decompress(data):
    return zlib.decompressobj().decompress(data)

CODEC = ByteCodec(compress, decompress, name="zlib-logs")
test_corpus = gate(CODEC, sources=sources.corpus_files(HERE / "corpus"), rel=10.0)
'''


def test_the_ledger_gates_corpus_cases_like_synthetic_ones(pytester: pytest.Pytester) -> None:
    folder = pytester.mkdir("corpus")
    (folder / "monday.log").write_text(LOG)
    (folder / "tuesday.log").write_text(LOG.replace("ok", "hi"))
    pytester.makepyfile(test_rf_corpus=GATED)
    ledger = pytester.path / "ratefloor-ledger.json"
    pytester.runpytest(*INNER, "--ratefloor-record").assert_outcomes(passed=2)
    assert set(ledger_bits(ledger)) == {"zlib-logs"}
    (pytester.path / "pad.txt").write_text("3")  # a 24-bit regression on every file
    result = pytester.runpytest(*INNER)
    result.assert_outcomes(failed=2)
    result.stdout.fnmatch_lines(["*RegressionFailure*corpus(name=monday.log,sha=*"])
    (pytester.path / "pad.txt").write_text("0")
    (folder / "monday.log").write_text(LOG + "gauge K9 level 0 mm fault\n")  # edited file
    result = pytester.runpytest(*INNER)
    result.assert_outcomes(passed=2)
    # a new case, not a false comparison (-v: the full spec, whatever the terminal width)
    result = pytester.runpytest(*INNER, "-v")
    result.stdout.fnmatch_lines(["*monday.log*new",
                                 "*0 regressed, 0 improved, 1 new, 1 unchanged*"])


def test_corpus_of_a_folder_or_glob_is_one_case_per_file_and_gate_takes_either(
    tmp_path: Path,
) -> None:
    from pytest_ratefloor import gate

    (tmp_path / "a.u8").write_bytes(b"tide" * 50)
    (tmp_path / "b.u8").write_bytes(b"ebb" * 60)
    many = sources.corpus(tmp_path)
    assert isinstance(many, list)
    assert [c.spec.split(",")[0] for c in many] == ["corpus(name=a.u8", "corpus(name=b.u8"]
    assert [c.spec for c in sources.corpus(str(tmp_path / "*.u8"))] == [c.spec for c in many]
    one = sources.corpus(tmp_path / "a.u8")
    assert not isinstance(one, list)
    for suite in (one, many):
        test = gate(_zlib(), sources=suite)
        marks = [m for m in test.pytestmark if m.name == "parametrize"]  # type: ignore[attr-defined]
        assert len(marks[0].args[1]) == (1 if suite is one else 2)
