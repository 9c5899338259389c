"""The ``ratefloor`` command: show, diff, entropy, and its error handling."""

from __future__ import annotations

import json
import lzma
import math
import re
import subprocess
import sys
import zlib
from collections import Counter
from pathlib import Path

import pytest

from pytest_ratefloor.cli import main
from pytest_ratefloor.ledger import Ledger
from pytest_ratefloor.measurement import Measurement
from pytest_ratefloor.report import CAUTION


def meas(codec: str, source: str, bits: int, n: int = 1000, entropy: float = 1.0,
         seed: int = 0) -> Measurement:
    return Measurement(codec=codec, source=source, n=n, seed=seed, bits=bits, entropy=entropy,
                       floor="entropy", floor_bits=entropy * n, sample_information=entropy * n,
                       spread=0.0, fingerprint="cafe")


def write_ledger(path: Path, *ms: Measurement) -> Path:
    Ledger(path).merged(ms).write()
    return path


@pytest.fixture
def two_ledgers(tmp_path: Path) -> tuple[Path, Path]:
    old = write_ledger(
        tmp_path / "old.json",
        meas("rice", "geometric(p=0.2)", 3700), meas("rice", "geometric(p=0.5)", 2000),
        meas("huff", "uniform(k=4)", 2000, entropy=2.0), meas("huff", "zipf(k=8, s=1.1)", 2600),
    )
    new = write_ledger(
        tmp_path / "new.json",
        meas("rice", "geometric(p=0.2)", 3650),       # improved
        meas("rice", "geometric(p=0.5)", 2010),       # regressed, +0.5 %
        meas("huff", "uniform(k=4)", 2000, entropy=2.0),  # unchanged
        meas("huff", "bernoulli(p=0.1)", 500),        # new
    )                                                 # zipf dropped
    return old, new


def md_rows(text: str) -> list[list[str]]:
    return [re.split(r"(?<!\\)\|", line[1:-1]) for line in text.splitlines()
            if line.startswith("|")]


def test_show_markdown(two_ledgers: tuple[Path, Path], capsys: pytest.CaptureFixture[str]) -> None:
    old, _ = two_ledgers
    assert main(["show", str(old)]) == 0
    out = capsys.readouterr().out
    assert CAUTION in out
    assert "Recorded with pytest-ratefloor" in out
    rows = md_rows(out)
    assert rows
    # source, n, seed, entropy, floor kind, floor, rate, bits, efficiency
    assert all(len(r) == 9 for r in rows)
    assert ("| `uniform(k=4)` | 1,000 | 0 | 2.0000 | `entropy` | 2.0000 | 2.0000 | 2,000 "
            "| 100.00% |") in out


def test_show_json(two_ledgers: tuple[Path, Path], capsys: pytest.CaptureFixture[str]) -> None:
    old, _ = two_ledgers
    assert main(["show", str(old), "--format", "json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["schema"] == 1
    assert doc["caution"] == CAUTION
    effs = {c["source"]: c["efficiency"] for c in doc["cases"]}
    assert effs["geometric(p=0.2)"] == pytest.approx(1000 / 3700)  # floor 1000 bits / 3700 bits


def test_diff_counts_every_kind_and_exits_1_on_regression(
        two_ledgers: tuple[Path, Path], capsys: pytest.CaptureFixture[str]) -> None:
    old, new = two_ledgers
    assert main(["diff", str(old), str(new)]) == 1
    out = capsys.readouterr().out
    assert out.splitlines()[-2] == (
        "cases: 1 regressed, 0 resampled, 0 within-slack, 1 improved, 1 new, 1 unchanged, "
        "1 dropped"
    )
    assert out.splitlines()[-1] == (
        "FAILED: 1 regressed, 1 dropped (--allow-dropped accepts dropped cases)"
    )
    line = next(x for x in out.splitlines() if "geometric(p=0.5)" in x)
    assert line.split()[-5:] == ["2,000", "2,010", "+10", "+0.500%", "regressed"]
    line = next(x for x in out.splitlines() if "zipf" in x)
    assert line.split()[-5:] == ["2,600", "–", "–", "–", "dropped"]

    # within the slack it is not a regression, but a dropped case still fails the diff
    assert main(["diff", str(old), str(new), "--slack", "0.01"]) == 1
    out = capsys.readouterr().out
    assert "1 within-slack" in out
    assert out.splitlines()[-1] == "FAILED: 1 dropped (--allow-dropped accepts dropped cases)"
    # ... unless dropped cases are accepted; they are still listed
    assert main(["diff", str(old), str(new), "--slack", "0.01", "--allow-dropped"]) == 0
    out = capsys.readouterr().out
    assert any("zipf" in line and line.endswith("dropped") for line in out.splitlines())
    assert out.splitlines()[-1] == (
        "OK: no case regressed or was resampled; 1 dropped, accepted by --allow-dropped"
    )


def test_diff_markdown_is_a_table(two_ledgers: tuple[Path, Path],
                                  capsys: pytest.CaptureFixture[str]) -> None:
    old, new = two_ledgers
    main(["diff", str(old), str(new), "--format", "md"])
    rows = md_rows(capsys.readouterr().out)
    assert len(rows) == 2 + 5
    assert all(len(r) == 9 for r in rows)


def test_diff_of_identical_ledgers(two_ledgers: tuple[Path, Path],
                                   capsys: pytest.CaptureFixture[str]) -> None:
    old, _ = two_ledgers
    assert main(["diff", str(old), str(old)]) == 0
    out = capsys.readouterr().out
    assert "0 regressed" in out
    assert out.splitlines()[-1] == "OK: no case regressed, was resampled or dropped"


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["show", "missing.json"], "missing.json: no such file"),
        (["diff", "{corrupt}", "{corrupt}"], "not valid JSON"),
        (["diff", "{good}", "{good}", "--slack", "x"], "--slack must be a finite number >= 0"),
        (["diff", "{good}", "{good}", "--slack", "-1"], "--slack must be a finite number"),
        (["entropy", "missing.bin"], "missing.bin: no such file"),
        (["entropy", "{odd}", "--symbol", "u16le"], "3 bytes is not a whole number of u16le"),
        (["entropy", "{odd}", "--order", "-1"], "--order: must be >= 0"),
    ],
)
def test_errors_are_one_line_and_exit_2(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                        monkeypatch: pytest.MonkeyPatch, argv: list[str],
                                        message: str) -> None:
    monkeypatch.chdir(tmp_path)
    (tmp_path / "corrupt.json").write_text('{"kind": ')
    write_ledger(tmp_path / "good.json", meas("a", "b", 1))
    (tmp_path / "odd.bin").write_bytes(b"abc")
    argv = [a.format(corrupt="corrupt.json", good="good.json", odd="odd.bin") for a in argv]
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1
    assert err.startswith("ratefloor: error: ")
    assert message in err


def test_usage_errors_exit_2(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["shout"]) == 2
    assert main([]) == 2
    assert "usage: ratefloor" in capsys.readouterr().err


# -- entropy ---------------------------------------------------------------------------


def _plugin_h0(counts: Counter[object]) -> float:
    # reference: scipy.stats.entropy of the symbol counts, base 2
    from scipy.stats import entropy

    return float(entropy(list(counts.values()), base=2))


def _conditional_entropy(symbols: list[int], k: int) -> float:
    """H(X_t | previous k symbols), plug-in, with the data read as a ring (the definition
    sources.empirical documents), in stdlib Python only."""
    ring = symbols + symbols[:k]
    n = len(symbols)
    joint = Counter(tuple(ring[i:i + k + 1]) for i in range(n))
    context = Counter(tuple(ring[i:i + k]) for i in range(n))
    total = sum(joint.values())
    return -sum(c / total * math.log2(c / context[key[:-1]]) for key, c in joint.items())


def test_entropy_of_a_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    pytest.importorskip("pytest_ratefloor.sources")
    # 'a' half the time, 'b' and 'c' a quarter each: H = 1.5 bits exactly (Cover & Thomas
    # ex. 2.1-style dyadic pmf, from memory); arranged in a fixed pattern so order 1 is lower
    data = b"abac" * 256
    path = tmp_path / "gauge.bin"
    path.write_bytes(data)
    assert main(["entropy", str(path), "--order", "1"]) == 0
    out = capsys.readouterr().out
    assert _plugin_h0(Counter(data)) == pytest.approx(1.5)
    assert "order-0 entropy (estimate):  1.5000 bits/symbol -> floor 192 bytes" in out
    h1 = _conditional_entropy(list(data), 1)
    assert f"order-1 conditional entropy (estimate):  {h1:.4f} bits/symbol" in out
    assert f"zlib level 9:  {len(zlib.compress(data, 9)):,} bytes" in out
    assert f"lzma preset 9: {len(lzma.compress(data, preset=9)):,} bytes" in out
    assert "1,024 bytes = 1,024 symbols (layout u8), 3 distinct" in out
    assert "estimate" in out.splitlines()[-1].lower()


def test_entropy_of_bits_and_words(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    pytest.importorskip("pytest_ratefloor.sources")
    import numpy as np

    rng = np.random.Generator(np.random.PCG64(7))
    words = rng.integers(0, 5, 3000).astype("<u2")
    path = tmp_path / "words.bin"
    path.write_bytes(words.tobytes())
    assert main(["entropy", str(path), "--symbol", "u16le", "--order", "2"]) == 0
    out = capsys.readouterr().out
    symbols = [int(w) for w in words]
    assert f"{_plugin_h0(Counter(symbols)):.4f} bits/symbol" in out
    assert f"{_conditional_entropy(symbols, 2):.4f} bits/symbol" in out
    assert "3,000 symbols (layout u16le)" in out

    bits_path = tmp_path / "flags.bin"
    bits_path.write_bytes(bytes([0b00000001]) * 100)  # one 1 in every 8 bits
    assert main(["entropy", str(bits_path), "--symbol", "bits", "--order", "0"]) == 0
    out = capsys.readouterr().out
    # h(1/8) from the closed form of the binary entropy
    h = -(1 / 8) * math.log2(1 / 8) - (7 / 8) * math.log2(7 / 8)
    assert f"order-0 entropy (estimate):  {h:.4f} bits/symbol" in out
    assert "800 symbols (layout bits)" in out
    assert "conditional" not in out


def test_console_script_runs(tmp_path: Path) -> None:
    path = write_ledger(tmp_path / "l.json", meas("a", "uniform(k=2)", 1000))
    done = subprocess.run([sys.executable, "-m", "pytest_ratefloor.cli", "show", str(path)],
                          capture_output=True, text=True, check=False)
    assert done.returncode == 0, done.stderr
    assert "| `uniform(k=2)` |" in done.stdout
