"""The ``ratefloor`` command: help texts, ``--format`` everywhere, ``--changed-only``, and
the chunked entropy count (checked against a direct count)."""

from __future__ import annotations

import argparse
import json
import lzma
import math
import random
import zlib
from collections import Counter
from pathlib import Path

import pytest

from pytest_ratefloor import sources
from pytest_ratefloor.cli import build_parser, main
from pytest_ratefloor.file_entropy import entropy_figures
from pytest_ratefloor.ledger import Ledger
from pytest_ratefloor.measurement import Measurement


def meas(codec: str, source: str, bits: int, n: int = 1000) -> Measurement:
    return Measurement(codec=codec, source=source, n=n, seed=0, bits=bits, entropy=1.0,
                       floor="entropy", floor_bits=float(n), sample_information=float(n),
                       spread=0.0, fingerprint="cafe")


@pytest.fixture
def ledgers(tmp_path: Path) -> tuple[Path, Path]:
    old, new = tmp_path / "old.json", tmp_path / "new.json"
    Ledger(old).merged([meas("rice", "geo\x1b[31m", 2000), meas("rice", "b", 1000)]).write()
    Ledger(new).merged([meas("rice", "geo\x1b[31m", 2100), meas("rice", "b", 1000)]).write()
    return old, new


def test_every_option_has_help() -> None:
    parser = build_parser()
    subs = [a for a in parser._actions if isinstance(a, argparse._SubParsersAction)]
    assert subs
    for name, sub in subs[0].choices.items():
        for action in sub._actions:
            if isinstance(action, argparse._HelpAction):
                continue
            assert action.help, (name, action.dest)
            assert action.help.strip(), (name, action.dest)


def test_show_text_is_escaped_and_aligned(ledgers: tuple[Path, Path],
                                          capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["show", str(ledgers[0]), "--format", "text"]) == 0
    out = capsys.readouterr().out
    assert "\x1b" not in out
    rows = [line for line in out.splitlines() if line.startswith("rice")]
    assert len(rows) == 2
    assert "geo" in rows[1]
    assert out.splitlines()[0].startswith("ratefloor show: ")


def test_diff_json_and_changed_only(ledgers: tuple[Path, Path],
                                    capsys: pytest.CaptureFixture[str]) -> None:
    old, new = ledgers
    assert main(["diff", str(old), str(new), "--format", "json"]) == 1
    doc = json.loads(capsys.readouterr().out)
    assert doc["exit_status"] == 1
    assert doc["counts"]["regressed"] == 1
    assert doc["counts"]["unchanged"] == 1
    assert len(doc["cases"]) == 2
    assert doc["result"].startswith("FAILED")
    assert main(["diff", str(old), str(new), "--format", "json", "--changed-only"]) == 1
    doc = json.loads(capsys.readouterr().out)
    assert [c["verdict"] for c in doc["cases"]] == ["regressed"]
    assert doc["counts"]["unchanged"] == 1
    assert main(["diff", str(old), str(new), "--changed-only"]) == 1
    out = capsys.readouterr().out
    assert "unchanged" in out.splitlines()[-2]  # the tally
    assert not any(line.startswith("rice  b ") for line in out.splitlines())


def _reference(symbols: list[int], k: int) -> float:
    """Conditional plug-in entropy of the ring, counted directly."""
    n = len(symbols)
    ring = symbols + symbols[:k]
    grams = Counter(tuple(ring[i: i + k + 1]) for i in range(n))
    ctx = Counter(tuple(ring[i: i + k]) for i in range(n))
    return -sum(c / n * math.log2(c / ctx[g[:k]]) for g, c in grams.items())


@pytest.mark.parametrize(("symbol", "k"), [("u8", 0), ("u8", 1), ("u8", 3), ("u16le", 2),
                                           ("u32le", 2), ("bits", 5), ("zigzag-u8", 2)])
def test_chunked_entropy_matches_whole_file(tmp_path: Path, symbol: str, k: int) -> None:
    rng = random.Random(f"{symbol}{k}")
    path = tmp_path / "data.bin"
    path.write_bytes(bytes(rng.choice(b"aabbbcdz\x00\xff") for _ in range(4000)))
    whole = entropy_figures(path, symbol, k)  # one chunk
    chunked = entropy_figures(path, symbol, k, chunk_bytes=24)
    assert chunked == whole
    data = path.read_bytes()
    assert whole.zlib_bytes == len(zlib.compress(data, 9))
    assert whole.lzma_bytes == len(lzma.compress(data, preset=9))
    old = sources.from_file(path, symbol=symbol, order=k)
    assert chunked.hk == (float(old.entropy) if k else None)
    if k == 0:
        assert chunked.h0 == float(old.entropy)
    else:
        assert chunked.hk == pytest.approx(_reference([int(s) for s in old.data], k), abs=1e-12)
        linear = len({tuple(old.data[i: i + k].tolist()) for i in range(old.n - k + 1)})
        assert chunked.contexts == linear


def test_entropy_on_a_folder_and_formats(tmp_path: Path,
                                         capsys: pytest.CaptureFixture[str]) -> None:
    (tmp_path / "b.bin").write_bytes(b"abab" * 50)
    (tmp_path / "a.bin").write_bytes(b"aaab" * 50)
    assert main(["entropy", str(tmp_path), "--format", "json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert [Path(f["path"]).name for f in doc["files"]] == ["a.bin", "b.bin"]
    assert doc["files"][1]["h0"] == 1.0
    assert main(["entropy", str(tmp_path), "--format", "md"]) == 0
    out = capsys.readouterr().out
    assert out.count("| ") > 2
    assert "a.bin" in out
    assert "b.bin" in out
    assert main(["entropy", str(tmp_path)]) == 0
    assert "no such file" not in capsys.readouterr().out
