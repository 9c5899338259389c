"""``ratefloor history``: the ledger as committed at each release, read through git."""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from pytest_ratefloor.cli import main
from pytest_ratefloor.ledger import Ledger
from pytest_ratefloor.measurement import Measurement

pytestmark = pytest.mark.skipif(shutil.which("git") is None, reason="git is not installed")

N = 1000
#: a codec name that tries terminal escapes, table pipes, code spans, HTML and a link
HOSTILE = "evil\x1b[31m|`x`<b>[l](http://e)"
RICE = "rice"


def meas(codec: str, source: str, bits: int, entropy: float = 1.0) -> Measurement:
    return Measurement(codec=codec, source=source, n=N, seed=0, bits=bits, entropy=entropy,
                       floor="entropy", floor_bits=entropy * N, sample_information=entropy * N,
                       spread=0.0, fingerprint="cafe")


#: (codec, source) → bits at v1.0, v1.1, v1.2 (None: not in that release)
BITS: dict[tuple[str, str], tuple[int | None, ...]] = {
    (RICE, "geometric(p=0.2)"): (3700, 3650, 3650),   # improves, then stays
    (RICE, "geometric(p=0.5)"): (2000, 2010, 2100),   # regresses twice
    (RICE, "zipf(k=8, s=1.1)"): (None, None, 2600),   # new in v1.2
    (HOSTILE, "uniform(k=4)"): (2100, 2100, 2050),    # unchanged, then improves
}
TAGS = ("v1.0", "v1.1", "v1.2")


def git(repo: Path, *args: str, date: str | None = None) -> str:
    env = None
    if date is not None:
        import os

        env = {**os.environ, "GIT_AUTHOR_DATE": date, "GIT_COMMITTER_DATE": date}
    done = subprocess.run(
        ["git", "-c", "user.name=Test", "-c", "user.email=test@example.invalid",
         "-c", "commit.gpgsign=false", "-c", "tag.gpgsign=false", *args],
        cwd=repo, env=env, check=True, capture_output=True, text=True,
    )
    return done.stdout.strip()


@pytest.fixture(autouse=True)
def quiet_git(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    """No user or system git configuration, and no repository found above tmp_path."""
    monkeypatch.setenv("GIT_CONFIG_GLOBAL", "/dev/null")
    monkeypatch.setenv("GIT_CONFIG_NOSYSTEM", "1")
    monkeypatch.setenv("GIT_CEILING_DIRECTORIES", str(tmp_path))
    for name in ("GIT_DIR", "GIT_WORK_TREE", "GIT_INDEX_FILE"):
        monkeypatch.delenv(name, raising=False)


def commit_ledger(repo: Path, release: int, date: str) -> None:
    cases = [meas(codec, source, now, entropy=2.0 if "uniform" in source else 1.0)
             for (codec, source), bits in BITS.items() if (now := bits[release]) is not None]
    path = repo / "ratefloor-ledger.json"
    path.write_text(Ledger(path).merged(cases).dumps(), encoding="utf-8")
    git(repo, "add", "ratefloor-ledger.json")
    git(repo, "commit", "-q", "-m", f"release {release}", date=date)


@pytest.fixture
def repo(tmp_path: Path) -> tuple[Path, str]:
    """Four commits: one without a ledger (its hash returned), then v1.0, v1.1, v1.2."""
    root = tmp_path / "repo"
    root.mkdir()
    git(root, "init", "-q")
    (root / "README").write_text("a codec\n")
    git(root, "add", "README")
    git(root, "commit", "-q", "-m", "start", date="2024-01-01T00:00:00Z")
    first = git(root, "rev-parse", "HEAD")
    for release, tag in enumerate(TAGS):
        commit_ledger(root, release, f"2024-0{release + 2}-01T00:00:00Z")
        git(root, "tag", tag)
    return root, first


def efficiency(codec: str, source: str, bits: int) -> str:
    """floor / bits, with the floor entropy·n (2 bits per symbol for uniform(k=4))."""
    floor = (2 if "uniform" in source else 1) * N
    return f"{floor / bits:.4f}"


def pct(old: int, new: int) -> str:
    return f"{100 * (new - old) / old:+.3f}%"


def expected_cell(codec: str, source: str, release: int) -> str:
    """The text cell, built here from BITS (not from the program's own figures)."""
    bits = BITS[(codec, source)]
    now = bits[release]
    if now is None:
        return "–"
    text = f"{efficiency(codec, source, now)}  {now:,}"
    if release == 0:
        return text
    before = bits[release - 1]
    if before is None:
        return text + "  new"
    if now == before:
        return text + "  ="
    return text + "  " + pct(before, now) + (" !" if now > before else "")


def run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    status = main(["history", *argv])
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def test_text_tags_in_creation_order_with_bits_and_changes(
        repo: tuple[Path, str], capsys: pytest.CaptureFixture[str]) -> None:
    root, _ = repo
    status, out, err = run(capsys, "--repo", str(root))
    assert (status, err) == (0, "")
    lines = out.splitlines()
    assert lines[0] == ("ratefloor history: ratefloor-ledger.json at 3 tags, "
                        "oldest first by creation date")
    headers = [line for line in lines if line.startswith("source")]
    assert len(headers) == 2  # one table per codec
    for header in headers:
        assert re.split(r"\s{2,}", header)[3:] == list(TAGS)
    # the hostile codec's table comes first (sorted) and its name is shown escaped
    assert "codec evil\\x1b[31m|`x`<b>[l](http://e)" in lines
    assert "\x1b" not in out
    for (codec, source), _bits in BITS.items():
        row = next(line for line in lines if line.startswith(source))
        cells = re.split(r"\s{2,}(?=\S)", row)
        # source, n, seed, then per release: efficiency, bits and the change (may be split)
        rest = "  ".join(cells[3:])
        expected = "  ".join(expected_cell(codec, source, r) for r in range(3))
        assert rest == expected, (source, row)
    # independently: geometric(p=0.5) went 2000 → 2010 → 2100 bits
    row = next(line for line in lines if line.startswith("geometric(p=0.5)"))
    assert "+0.500% !" in row
    assert "+4.478% !" in row
    row = next(line for line in lines if line.startswith("geometric(p=0.2)"))
    assert "-1.351%" in row
    assert "!" not in row
    assert lines[-1].startswith("Each cell: efficiency")


def test_markdown_escapes_a_hostile_codec_name(
        repo: tuple[Path, str], capsys: pytest.CaptureFixture[str]) -> None:
    root, _ = repo
    status, out, _ = run(capsys, "--repo", str(root), "--format", "md")
    assert status == 0
    assert "\x1b" not in out
    heading = next(line for line in out.splitlines() if line.startswith("### Codec evil"))
    # no raw markup survives: every Markdown character of the name is escaped
    assert heading == r"### Codec evil\\x1b\[31m\|\`x\`&lt;b&gt;\[l\]\(http\://e\)"
    assert "<b>" not in out
    assert "](http" not in out
    rows = [line for line in out.splitlines() if line.startswith("| ")]
    # every table row has the same number of cells: no pipe of the name split one
    for row in rows:
        assert len(re.split(r"(?<!\\)\|", row)) == 3 + 3 + 2
    header = next(r for r in rows if r.startswith("| source"))
    assert header == "| source | n | seed | `v1.0` | `v1.1` | `v1.2` |"
    p05 = next(r for r in rows if "geometric(p=0.5)" in r)
    assert f"{efficiency(RICE, 'x', 2100)} · 2,100 · **{pct(2010, 2100)} !**" in p05


def test_json_parses_with_the_figures(
        repo: tuple[Path, str], capsys: pytest.CaptureFixture[str]) -> None:
    root, _ = repo
    status, out, _ = run(capsys, "--repo", str(root), "--format", "json")
    assert status == 0
    doc = json.loads(out, parse_constant=lambda c: pytest.fail(f"{c} in JSON"))
    assert doc["kind"] == "pytest-ratefloor ledger history"
    assert [r["name"] for r in doc["releases"]] == list(TAGS)
    assert all(r["has_ledger"] for r in doc["releases"])
    assert doc["releases_from"] == "tags"
    tables = {t["codec"]: t["cases"] for t in doc["codecs"]}
    assert set(tables) == {RICE, HOSTILE}  # names kept raw in JSON
    for (codec, source), bits in BITS.items():
        case = next(c for c in tables[codec] if c["source"] == source)
        assert (case["n"], case["seed"]) == (N, 0)
        for release, cell in enumerate(case["cells"]):
            now = bits[release]
            if now is None:
                assert cell is None
                continue
            assert cell["bits"] == now
            assert cell["efficiency"] == pytest.approx(
                float(efficiency(codec, source, now)), abs=5e-5)
            before = bits[release - 1] if release else None
            if release == 0:
                assert cell["change"] is None
            elif before is None:
                assert cell["change"] == "new"
            else:
                assert cell["delta_bits"] == now - before
                assert cell["delta_pct"] == pytest.approx(100 * (now - before) / before)
                assert cell["change"] == ("regressed" if now > before else
                                          "improved" if now < before else "unchanged")


def test_revisions_in_the_given_order_and_one_without_the_ledger(
        repo: tuple[Path, str], capsys: pytest.CaptureFixture[str]) -> None:
    root, first = repo
    status, out, err = run(capsys, "--repo", str(root), first, "v1.2", "v1.0")
    assert (status, err) == (0, "")
    lines = out.splitlines()
    assert lines[0].endswith("at 3 revisions in the order given")
    assert lines[1] == f"note: {first}: no ratefloor-ledger.json at that revision"
    header = next(line for line in lines if line.startswith("source"))
    assert re.split(r"\s{2,}", header)[3:] == [first, "v1.2", "v1.0"]
    # v1.0 compared with v1.2, the previous release that has the ledger
    row = next(line for line in lines if line.startswith("geometric(p=0.5)"))
    assert row.split()[3] == "–"
    assert f"{pct(2100, 2000)}" in row
    assert row.rstrip().endswith(pct(2100, 2000))


def test_only_revisions_without_the_ledger(
        repo: tuple[Path, str], capsys: pytest.CaptureFixture[str]) -> None:
    root, _first = repo
    status, out, _ = run(capsys, "--repo", str(root), "--ledger", "sub/other.json", "v1.1")
    assert status == 0
    assert out.splitlines()[1:] == ["note: v1.1: no sub/other.json at that revision",
                                    "no release holds a case"]


def test_creation_date_beats_name_order(tmp_path: Path,
                                        capsys: pytest.CaptureFixture[str]) -> None:
    root = tmp_path / "r"
    root.mkdir()
    git(root, "init", "-q")
    for release, (tag, date) in enumerate((("zeta", "2023-01-01T00:00:00Z"),
                                           ("alpha", "2023-06-01T00:00:00Z"))):
        commit_ledger(root, release, date)
        git(root, "tag", tag)
    status, out, _ = run(capsys, "--repo", str(root))
    assert status == 0
    header = next(line for line in out.splitlines() if line.startswith("source"))
    assert re.split(r"\s{2,}", header)[3:] == ["zeta", "alpha"]


@pytest.mark.parametrize(("argv", "message"), [
    (["v9.9"], "v9.9: not a revision of the repository in"),
    (["--", "-v1.0"], "-v1.0: not a revision of the repository in"),
    (["--ledger", "/etc/passwd"], "--ledger: /etc/passwd: must be relative to the repository"),
    (["--ledger", "../x.json"], "--ledger: ../x.json: must name a file inside the repository"),
])
def test_bad_arguments_exit_2_with_one_line(
        repo: tuple[Path, str], capsys: pytest.CaptureFixture[str],
        argv: list[str], message: str) -> None:
    root, _ = repo
    status, out, err = run(capsys, "--repo", str(root), *argv)
    assert status == 2
    assert out == ""
    assert err.count("\n") == 1
    assert message in err


def test_outside_a_repository_exits_2_with_one_line(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    plain = tmp_path / "plain"
    plain.mkdir()
    status, out, err = run(capsys, "--repo", str(plain))
    assert (status, out) == (2, "")
    assert err.count("\n") == 1
    assert err.startswith(f"ratefloor: error: {plain}: not inside a git repository")
    status, _, err = run(capsys, "--repo", str(tmp_path / "missing"))
    assert status == 2
    assert err.count("\n") == 1
    assert "no such directory" in err


def test_no_tags_and_no_revisions(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    root = tmp_path / "r"
    root.mkdir()
    git(root, "init", "-q")
    commit_ledger(root, 0, "2024-01-01T00:00:00Z")
    status, out, err = run(capsys, "--repo", str(root))
    assert (status, out) == (2, "")
    assert err.count("\n") == 1
    assert "has no tags" in err


def test_a_corrupt_ledger_at_a_release_names_it(
        repo: tuple[Path, str], capsys: pytest.CaptureFixture[str]) -> None:
    root, _ = repo
    (root / "ratefloor-ledger.json").write_text('{"kind": "pytest-ratefloor rate ledger",')
    git(root, "commit", "-q", "-am", "broken", date="2024-09-01T00:00:00Z")
    git(root, "tag", "v2.0")
    status, out, err = run(capsys, "--repo", str(root))
    assert (status, out) == (2, "")
    assert err.count("\n") == 1
    assert "v2.0:ratefloor-ledger.json: not valid JSON" in err


def test_history_module_imports_neither_pytest_nor_numpy() -> None:
    import sys

    code = ("import sys, pytest_ratefloor.history; "
            "print(sorted(m for m in ('numpy', 'pytest') if m in sys.modules))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True)
    assert done.stdout.strip() == "[]"


def test_a_case_measured_on_another_sample_is_marked_not_compared(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    root = tmp_path / "r"
    root.mkdir()
    git(root, "init", "-q")
    path = root / "ratefloor-ledger.json"
    for tag, fingerprint, bits in (("a", "cafe", 2000), ("b", "beef", 2500)):
        case = Measurement(codec=RICE, source="geometric(p=0.5)", n=N, seed=0, bits=bits,
                           entropy=1.0, floor="entropy", floor_bits=1.0 * N,
                           fingerprint=fingerprint)
        path.write_text(Ledger(path).merged([case]).dumps(), encoding="utf-8")
        git(root, "add", path.name)
        git(root, "commit", "-q", "-m", tag)
        git(root, "tag", tag)
    status, out, _ = run(capsys, "--repo", str(root), "a", "b")
    assert status == 0
    row = next(line for line in out.splitlines() if line.startswith("geometric(p=0.5)"))
    assert row.endswith("0.4000  2,500  ~")  # 1000 / 2500; no percentage, no '!'
    status, out, _ = run(capsys, "--repo", str(root), "--format", "json", "a", "b")
    cell = json.loads(out)["codecs"][0]["cases"][0]["cells"][1]
    assert cell["change"] == "resampled"


def test_the_plot_option_draws_one_line_per_case(
    repo: tuple[Path, str], capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    pytest.importorskip("matplotlib")
    root, _ = repo
    path = tmp_path / "history.png"
    status, _, err = run(capsys, "--repo", str(root), "--plot", str(path))
    assert status == 0
    assert path.stat().st_size > 0
    assert "written:" in err
    status, _, err = run(capsys, "--repo", str(root), "--plot", str(tmp_path / "h.gif"))
    assert status == 2
    assert "--plot: " in err
    assert len(err.strip().splitlines()) == 1
