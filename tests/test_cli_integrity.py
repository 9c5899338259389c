"""``ratefloor show`` / ``ratefloor diff`` tell a release job the truth.

- ``diff`` exits 0 only when no case regressed, none was resampled and none was
  dropped (``--allow-dropped`` accepts dropped cases); otherwise 1, with the
  reason on the last line of its output.
- Any ledger that cannot be used gives exit 2 and exactly one line on stderr
  naming the file.
- A ledger that loads, however extreme its figures, gives valid output and
  never a traceback; the JSON holds no NaN or Infinity.
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path
from typing import Any

import pytest

from pytest_ratefloor import cli
from pytest_ratefloor.cli import main
from pytest_ratefloor.errors import LedgerError, NewerLedgerError, UnreadableLedgerError
from pytest_ratefloor.ledger import LEDGER_KIND, Ledger

BIG = 2**63 - 1  # the largest bit count a ledger can hold (a signed 64-bit integer)


def case(codec: str = "c", source: str = "uniform(k=2)", n: int = 1000, bits: int = 1000,
         seed: int = 0, fingerprint: str = "cafe", entropy: float = 1.0,
         floor_rate: float = 1.0) -> dict[str, Any]:
    return {"codec": codec, "source": source, "n": n, "seed": seed, "bits": bits,
            "rate": 1.0, "floor": "entropy", "floor_rate": floor_rate,
            "entropy": entropy, "fingerprint": fingerprint}


def ledger_file(path: Path, *cases: dict[str, Any]) -> Path:
    """A ledger written by hand, as a user or another tool might (no rounding, no checks)."""
    doc = {
        "kind": LEDGER_KIND, "schema": 1,
        "cases": {f"{c['codec']} | {c['source']} | n={c['n']} | seed={c['seed']}": c
                  for c in cases},
    }
    path.write_text(json.dumps(doc, indent=2), encoding="utf-8")
    return path


def strict_json(text: str) -> Any:
    """``json.loads`` that refuses NaN and Infinity (RFC 8259 has neither)."""
    def refuse(name: str) -> None:
        raise AssertionError(f"non-standard JSON constant {name}")

    return json.loads(text, parse_constant=refuse)


def one_error_line(err: str, path: str) -> str:
    assert err.count("\n") == 1, err
    assert err.startswith("ratefloor: error: "), err
    assert path in err, err
    assert "Traceback" not in err
    return err


def md_rows(text: str) -> list[list[str]]:
    # GFM "Tables" extension: cells are split on pipes not preceded by a backslash
    return [re.split(r"(?<!\\)\|", line[1:-1]) for line in text.splitlines()
            if line.startswith("|")]


# -- diff: the exit status and its reason --------------------------------------------------


SCENARIOS: dict[str, tuple[list[dict[str, Any]], list[dict[str, Any]], list[str], int, str]] = {
    # name: (old cases, new cases, extra arguments, exit status, start of the last line)
    "regressed": ([case(bits=1000)], [case(bits=1001)], [], 1, "FAILED: 1 regressed"),
    "resampled": ([case(fingerprint="aaaa")], [case(fingerprint="bbbb")], [], 1,
                  "FAILED: 1 resampled"),
    "dropped": ([case(), case(codec="gone")], [case()], [], 1,
                "FAILED: 1 dropped (--allow-dropped accepts dropped cases)"),
    "dropped-allowed": ([case(), case(codec="gone")], [case()], ["--allow-dropped"], 0,
                        "OK: no case regressed or was resampled; 1 dropped, accepted"),
    "regressed-and-dropped-allowed": ([case(bits=10), case(codec="gone")], [case(bits=11)],
                                      ["--allow-dropped"], 1, "FAILED: 1 regressed"),
    "new": ([case()], [case(), case(codec="fresh")], [], 0,
            "OK: no case regressed, was resampled or dropped"),
    "improved": ([case(bits=1000)], [case(bits=900)], [], 0, "OK: no case regressed"),
    "within-slack": ([case(bits=1000)], [case(bits=1005)], ["--slack", "0.01"], 0, "OK:"),
    "everything-bad": ([case(bits=1), case(codec="r", fingerprint="aa"), case(codec="gone")],
                       [case(bits=2), case(codec="r", fingerprint="bb")], [], 1,
                       "FAILED: 1 regressed, 1 resampled, 1 dropped"),
    "both-empty": ([], [], [], 0, "OK:"),
}


@pytest.mark.parametrize("fmt", ["text", "md"])
@pytest.mark.parametrize("name", sorted(SCENARIOS))
def test_diff_exit_status_and_reason(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                     name: str, fmt: str) -> None:
    old_cases, new_cases, extra, status, reason = SCENARIOS[name]
    old = ledger_file(tmp_path / "old.json", *old_cases)
    new = ledger_file(tmp_path / "new.json", *new_cases)
    assert main(["diff", str(old), str(new), "--format", fmt, *extra]) == status
    captured = capsys.readouterr()
    assert captured.err == ""
    last = captured.out.rstrip("\n").splitlines()[-1]
    if fmt == "md":
        assert last.startswith("**")
        assert last.endswith("**")
        last = last.strip("*")
    assert last.startswith(reason), last
    # dropped cases are listed whether or not they are accepted
    if any(c["codec"] == "gone" for c in old_cases):
        assert any("gone" in line and "dropped" in line for line in captured.out.splitlines())


# -- unreadable input: exit 2, one line naming the file ------------------------------------


def _fifo(path: Path) -> None:
    if not hasattr(os, "mkfifo"):
        pytest.skip("no FIFOs on this platform")
    os.mkfifo(path)


def _bad(kind: str, path: Path) -> None:
    """Make ``path`` an unusable ledger of the given kind."""
    good = json.loads(json.dumps({"kind": LEDGER_KIND, "schema": 1, "cases": {}}))
    if kind == "missing":
        return
    if kind == "directory":
        path.mkdir()
    elif kind == "fifo":
        _fifo(path)
    elif kind == "empty":
        path.write_text("")
    elif kind == "truncated":
        path.write_text(json.dumps(good)[:-3])
    elif kind == "not-utf8":
        path.write_bytes(b"\xff\xfe\x00\x81 junk")
    elif kind == "not-a-ledger":
        path.write_text("[1, 2, 3]")
    elif kind == "newer-schema":
        path.write_text(json.dumps({**good, "schema": 999}))
    elif kind == "bad-case":
        path.write_text(json.dumps({**good, "cases": {"x": {"bits": "many"}}}))
    elif kind == "deep":
        path.write_text("[" * 100_000)
    elif kind == "long-integer":  # past Python's int-to-text digit limit (PEP 651-era CVE fix)
        path.write_text('{"kind": "' + LEDGER_KIND + '", "schema": 1' + "0" * 6000 + "}")
    elif kind == "bits-beyond-float":
        ledger_file(path, case(bits=2**1100, n=1))
    else:  # pragma: no cover
        raise AssertionError(kind)


BAD_KINDS = ["missing", "directory", "fifo", "empty", "truncated", "not-utf8", "not-a-ledger",
             "newer-schema", "bad-case", "deep", "long-integer", "bits-beyond-float"]


@pytest.mark.parametrize("kind", BAD_KINDS)
@pytest.mark.parametrize("argv", [
    ["show", "{bad}"], ["show", "{bad}", "--format", "json"],
    ["diff", "{bad}", "{good}"], ["diff", "{good}", "{bad}", "--format", "md"],
])
def test_unusable_ledger_is_one_line_naming_the_file(
        tmp_path: Path, capsys: pytest.CaptureFixture[str], kind: str, argv: list[str]) -> None:
    bad = tmp_path / f"bad-{kind}.json"
    _bad(kind, bad)
    good = ledger_file(tmp_path / "good.json", case())
    assert main([a.format(bad=bad, good=good) for a in argv]) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    one_error_line(captured.err, str(bad))


@pytest.mark.parametrize("exc_type", [UnreadableLedgerError, NewerLedgerError, LedgerError])
@pytest.mark.parametrize("names_file", [True, False])
def test_whatever_the_loader_rejects_is_exit_2(
        tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch,
        exc_type: type[LedgerError], names_file: bool) -> None:
    """The loader may grow new refusals (duplicate keys, NaN, oversize files, ...): each
    one is a LedgerError with a one-line message, and the command needs nothing more."""
    path = ledger_file(tmp_path / "l.json", case())

    def refuse(p: Path) -> Ledger:
        where = f"{p}: " if names_file else ""
        raise exc_type(f"{where}duplicate key 'c | s | n=1 | seed=0'")

    monkeypatch.setattr(cli.Ledger, "load", staticmethod(refuse))
    for argv in (["show", str(path)], ["diff", str(path), str(path)]):
        assert main(argv) == 2
        err = one_error_line(capsys.readouterr().err, str(path))
        assert "duplicate key" in err
        assert err.count(str(path)) == 1


def test_error_line_stays_one_line_for_a_hostile_file_name(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "evil\x1b[2J\nname\u202e.json"
    path.write_text("{corrupt")
    assert main(["show", str(path)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1
    assert "\x1b" not in err
    assert "\u202e" not in err
    assert "evil\\x1b[2J\\x0aname\\u202e.json" in err


# -- extreme but valid: output, never a traceback -------------------------------------------


@pytest.fixture
def extreme(tmp_path: Path) -> tuple[Path, Path]:
    """Two ledgers that load: the same cases at 0 and at 2**63-1 bits, n=1."""
    cases_big = [case(source="uniform(k=2)", n=1, bits=BIG),
                 case(source="zero(floor)", n=1, bits=BIG, entropy=0.0, floor_rate=0.0),
                 case(source="huge(floor)", n=1, bits=BIG, floor_rate=1e308, entropy=1e308)]
    cases_zero = [{**c, "bits": 0, "rate": 0.0} for c in cases_big]
    return (ledger_file(tmp_path / "zero.json", *cases_zero),
            ledger_file(tmp_path / "big.json", *cases_big))


def test_extreme_ledgers_load(extreme: tuple[Path, Path]) -> None:
    zero, big = extreme
    assert {e.bits for e in Ledger.load(big).entries.values()} == {BIG}
    assert {e.bits for e in Ledger.load(zero).entries.values()} == {0}


@pytest.mark.parametrize("which", [0, 1])
def test_show_extreme_values(extreme: tuple[Path, Path], capsys: pytest.CaptureFixture[str],
                             which: int) -> None:
    path = extreme[which]
    assert main(["show", str(path)]) == 0
    out = capsys.readouterr().out
    rows = md_rows(out)
    assert len(rows) == 2 + 3
    assert all(len(r) == 9 for r in rows)

    assert main(["show", str(path), "--format", "json"]) == 0
    doc = strict_json(capsys.readouterr().out)
    bits = {c["source"]: c["bits"] for c in doc["cases"]}
    assert set(bits.values()) == {BIG if which else 0}
    for c in doc["cases"]:  # every figure is a finite number or null
        for key in ("efficiency", "rate", "floor_rate", "entropy"):
            assert c[key] is None or isinstance(c[key], (int, float))


@pytest.mark.parametrize("fmt", ["text", "md"])
def test_diff_extreme_values(extreme: tuple[Path, Path], capsys: pytest.CaptureFixture[str],
                             fmt: str) -> None:
    zero, big = extreme
    # 0 -> 2**63-1 bits: a regression of +inf % (nothing to divide by), exit 1
    assert main(["diff", str(zero), str(big), "--format", fmt]) == 1
    out = capsys.readouterr().out
    assert f"+{BIG:,}" in out
    assert "+inf%" in out
    assert out.rstrip("\n").splitlines()[-1].strip("*") == "FAILED: 3 regressed"
    if fmt == "md":
        rows = md_rows(out)
        assert len(rows) == 2 + 3
        assert all(len(r) == 9 for r in rows)
    # and back: an improvement of -100 %, exit 0
    assert main(["diff", str(big), str(zero), "--format", fmt]) == 0
    out = capsys.readouterr().out
    assert f"-{BIG:,}" in out
    assert "-100.000%" in out
    # the same ledger against itself
    assert main(["diff", str(big), str(big), "--format", fmt]) == 0
    assert "3 unchanged" in capsys.readouterr().out


def test_no_traceback_from_the_console_script(extreme: tuple[Path, Path]) -> None:
    zero, big = extreme
    for argv in (["show", str(big), "--format", "json"], ["diff", str(zero), str(big)]):
        done = subprocess.run([sys.executable, "-m", "pytest_ratefloor.cli", *argv],
                              capture_output=True, text=True, check=False)
        assert done.returncode in (0, 1)
        assert done.stderr == ""


def test_version_prints_the_package_version(capsys: pytest.CaptureFixture[str]) -> None:
    from pytest_ratefloor import __version__
    from pytest_ratefloor.cli import main

    assert main(["--version"]) == 0
    assert capsys.readouterr().out.strip() == f"ratefloor {__version__}"
