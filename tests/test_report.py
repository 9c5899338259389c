"""Unit tests of the reports (report.py): terminal lines, Markdown, JSON, job summary, plot."""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import pytest

from pytest_ratefloor import report, sources, summary
from pytest_ratefloor.ledger import Ledger
from pytest_ratefloor.measurement import Measurement
from pytest_ratefloor.report import CAUTION, RunOutcome
from pytest_ratefloor.verdicts import Comparison, LedgerRun, compare, listed


def _h(p: float) -> float:
    # binary entropy, reference: scipy.stats.entropy([p, 1-p], base=2) (checked below)
    return -p * math.log2(p) - (1 - p) * math.log2(1 - p)


def meas(codec: str, source: str, bits: int, entropy: float, n: int = 10_000,
         family: str = "", params: dict[str, float] | None = None,
         version: str | None = None) -> Measurement:
    return Measurement(
        codec=codec, source=source, n=n, seed=0, bits=bits, entropy=entropy, floor="entropy",
        floor_bits=entropy * n, sample_information=entropy * n, spread=0.0, fingerprint="ab",
        codec_version=version, source_family=family, source_params=params or {},
    )


def texts(lines: list[summary.Line]) -> list[str]:
    return [line.text for line in lines]


def sample_rows(tmp_path: Path) -> tuple[list[Comparison], RunOutcome]:
    ms = [
        meas("pair|coder", "bernoulli(p=0.1)", 5_000, _h(0.1), family="bernoulli",
             params={"p": 0.1}, version="1.2"),
        meas("pair|coder", "bernoulli(p=0.3)", 9_000, _h(0.3), family="bernoulli",
             params={"p": 0.3}, version="1.2"),
        meas("bytes", "uniform(k=256)", 80_000, 8.0),
        meas("bytes", "uniform(k=16)", 80_000, 4.0),
    ]
    base = Ledger(tmp_path / "ratefloor-ledger.json").merged([
        Measurement(**{**ms[2].__dict__, "bits": 80_100}),
        Measurement(**{**ms[0].__dict__, "bits": 4_990}),
        meas("gone", "uniform(k=2)", 10_000, 1.0),
    ])
    run = LedgerRun(baseline=base, slack=0.01)
    for m in ms:
        run.observe(m)
    rows = run.sorted_comparisons()
    outcome = RunOutcome(ledger_path=base.path, slack=0.01, counts=run.counts(),
                         stale=run.stale())
    return rows, outcome


def test_binary_entropy_helper_matches_scipy() -> None:
    from scipy.stats import entropy

    for p in (0.1, 0.3):
        assert _h(p) == pytest.approx(entropy([p, 1 - p], base=2), rel=1e-14)
        assert sources.binary_entropy(p) == pytest.approx(entropy([p, 1 - p], base=2), rel=1e-14)


def test_efficiency_and_deltas(tmp_path: Path) -> None:
    rows, outcome = sample_rows(tmp_path)
    by = {(r.case.codec, r.case.source): r for r in rows}
    u256 = by[("bytes", "uniform(k=256)")]
    assert u256.case.efficiency == pytest.approx(1.0)  # 8 bits/symbol on an 8-bit uniform source
    assert u256.status == "improved"
    assert u256.delta_bits == -100
    b1 = by[("pair|coder", "bernoulli(p=0.1)")]
    assert b1.case.efficiency == pytest.approx(_h(0.1) / 0.5)
    assert b1.status == "within-slack"  # +10 bits on 4 990 is 0.2 % < 1 %
    assert report.delta_text(b1) == "+10 bits (+0.200%) within-slack"
    assert outcome.counts["new"] == 2
    assert [e.codec for e in outcome.stale] == ["gone"]


def _md_cells(line: str) -> list[str]:
    """Split a GFM table row on unescaped pipes (GFM spec, 'Tables' extension)."""
    assert line.startswith("|")
    assert line.endswith("|")
    return re.split(r"(?<!\\)\|", line[1:-1])


def test_markdown_tables_are_well_formed(tmp_path: Path) -> None:
    rows, outcome = sample_rows(tmp_path)
    text = report.markdown_report(rows, outcome)
    assert CAUTION in text
    tables: list[list[str]] = []
    previous_is_row = False
    for line in text.splitlines():
        is_row = line.startswith("|")
        if is_row and not previous_is_row:
            tables.append([])
        if is_row:
            tables[-1].append(line)
        previous_is_row = is_row
    assert len(tables) == 2  # one table per codec
    for table in tables:
        width = len(_md_cells(table[0]))
        # source n seed entropy floor floor-rate rate bits efficiency vs.-ledger
        assert width == 10
        assert all(len(_md_cells(row)) == width for row in table), table
        assert all(re.fullmatch(r"-{3,}:?", c.strip()) for c in _md_cells(table[1]))
    # a pipe keeps a name out of a code span (GFM splits cells even there): escaped text
    assert "### Codec pair\\|coder (version 1.2)" in text
    assert "### Codec `bytes`" in text  # a plainly safe name keeps its code span
    assert ("| `uniform(k=256)` | 10,000 | 0 | 8.0000 | `entropy` | 8.0000 | 8.0000 | 80,000 "
            "| 100.00% |") in text
    assert "- **`entropy`**: n·H, the entropy of the source" in text  # the floors' legend
    assert "Stale ledger entries" in text
    assert "`gone`" in text


def test_json_report_is_versioned_plain_json(tmp_path: Path) -> None:
    rows, outcome = sample_rows(tmp_path)
    path = tmp_path / "out" / "report.json"
    report.write_report(path, rows, outcome)
    doc = json.loads(path.read_text())
    assert doc["kind"] == report.REPORT_KIND
    assert doc["schema"] == report.REPORT_SCHEMA_VERSION
    assert doc["caution"] == CAUTION
    assert len(doc["cases"]) == 4
    case = next(c for c in doc["cases"] if c["source"] == "uniform(k=256)")
    # uniform(256) has no sampling spread (every sample carries 8n bits): a 100-bit drop on
    # the same sample exceeds 3 spreads (of at least one bit), so it is shown for review
    assert case["ledger"] == {"status": "improved", "bits": 80_100, "delta_bits": -100,
                              "delta_pct": pytest.approx(-100 / 80_100 * 100),
                              "suspicious_drop": True}
    assert case["efficiency"] == pytest.approx(1.0)
    assert doc["ledger"]["counts"]["stale"] == 1
    assert doc["ledger"]["full_run"] is True


def test_markdown_report_file(tmp_path: Path) -> None:
    rows, outcome = sample_rows(tmp_path)
    path = tmp_path / "r.md"
    report.write_report(path, rows, outcome)
    assert path.read_text() == report.markdown_report(rows, outcome)


@pytest.mark.parametrize("name", ["r.txt", "r", "r.html"])
def test_report_suffix_is_checked(name: str) -> None:
    with pytest.raises(ValueError, match=r"--ratefloor-report .*use \.md"):
        report.report_format(Path(name))


def test_step_summary_appends(tmp_path: Path) -> None:
    target = tmp_path / "summary.md"
    target.write_text("earlier step\n")
    assert report.append_step_summary("table one", {"GITHUB_STEP_SUMMARY": str(target)}) == target
    report.append_step_summary("table two\n", {"GITHUB_STEP_SUMMARY": str(target)})
    assert target.read_text() == "earlier step\ntable one\ntable two\n"
    assert report.append_step_summary("x", {}) is None


def test_summary_lines_compact_and_verbose(tmp_path: Path) -> None:
    rows, outcome = sample_rows(tmp_path)
    compact = texts(summary.summary_lines(rows, outcome))
    verbose = texts(summary.summary_lines(rows, outcome, verbose=True))
    assert compact[0].split() == ["source", "H", "floor", "kind", "rate", "eff.", "vs.", "ledger"]
    # compact: one heading line per codec instead of a codec column (a codec whose cases
    # sit apart in the worst-first order is named again)
    assert len(compact) >= len(verbose) + 2
    assert "ledger bits" in verbose[0]
    assert "ledger bits" not in compact[0]
    assert any("80,100" in line for line in verbose)
    assert compact[-1] == CAUTION
    tally = next(line for line in compact if line.startswith("ledger compared with"))
    assert "slack 1%" in tally
    assert "1 improved" in tally
    assert "2 new" in tally
    assert "1 stale" in tally
    assert any(line.strip() == "gone | uniform(k=2) | n=10000 | seed=0" for line in compact)


def test_quiet_summary_leaves_out_unchanged_cases(tmp_path: Path) -> None:
    rows, outcome = sample_rows(tmp_path)
    first = rows[0].case
    same = compare(first, first.recorded())
    assert same.status == "unchanged"
    quiet = texts(summary.summary_lines([same, rows[1]], outcome, quiet=True))
    assert not any(line.startswith(first.codec + " ") and first.source in line for line in quiet)
    assert any(rows[1].case.source in line for line in quiet)
    assert quiet[-1] == CAUTION


def test_partial_run_says_why_stale_is_not_listed() -> None:
    outcome = RunOutcome(partial_reasons=("-k",))
    assert texts(summary.summary_lines([], outcome)) == [
        "stale entries not listed: partial run (-k)"
    ]


def test_colour_comes_from_the_verdict_not_the_text(tmp_path: Path) -> None:
    rows, outcome = sample_rows(tmp_path)
    lines = summary.summary_lines(rows, outcome)
    tally = next(line for line in lines if line.text.startswith("ledger compared with"))
    assert "0 regressed" in tally.text
    assert tally.colour == "yellow"  # a within-slack case and a stale entry deserve a look
    clean = RunOutcome(ledger_path=outcome.ledger_path, counts={"regressed": 0, "unchanged": 3})
    (clean_tally,) = summary.summary_lines([], clean)
    assert clean_tally.colour == "green"
    regressed = compare(rows[0].case, Measurement(**{**rows[0].case.__dict__, "bits": 1}))
    assert regressed.status == "regressed"
    failing = RunOutcome(ledger_path=outcome.ledger_path, counts={"regressed": 1})
    lines = summary.summary_lines([regressed], failing)
    colours = {line.text.split()[0]: line.colour for line in lines}
    assert colours["ledger"] == "red"
    row = next(line for line in lines if rows[0].case.source in line.text)
    assert row.colour == "red"
    assert "regressed" in row.text


def test_show_rows_from_entries() -> None:
    e = Measurement(codec="c", source="s", n=4, seed=0, bits=6, floor="entropy",
                    floor_bits=4.0, entropy=1.0, fingerprint="")
    row = listed(e)
    assert row.case.efficiency == pytest.approx(1.0 / 1.5)
    assert "vs. ledger" not in report.markdown_tables([row], with_ledger=False)


PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG spec (RFC 2083 §3.1)


def test_plot_png_opens_as_an_image(tmp_path: Path) -> None:
    pytest.importorskip("matplotlib")
    from matplotlib.image import imread

    rows, _ = sample_rows(tmp_path)
    path = tmp_path / "plot.png"
    report.write_plot(path, rows)
    assert path.read_bytes()[:8] == PNG_SIGNATURE
    image = imread(path)
    height, width = image.shape[:2]
    assert width > 800  # two panels: the Bernoulli sweep is drawn
    assert height > 300


def test_plot_svg_without_bernoulli(tmp_path: Path) -> None:
    pytest.importorskip("matplotlib")
    import xml.etree.ElementTree as ET

    rows, _ = sample_rows(tmp_path)
    path = tmp_path / "plot.svg"
    report.write_plot(path, [r for r in rows if r.case.source_family != "bernoulli"])
    root = ET.parse(path).getroot()  # stdlib XML parser is the reference
    assert root.tag.endswith("svg")
    assert "Excess over the floor" in path.read_text()  # plotting.plot_run's panel title
    assert "Bernoulli cases" not in path.read_text()


def test_plot_needs_matplotlib(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(report, "plot_available", lambda: False)
    with pytest.raises(RuntimeError, match=r"pip install 'pytest-ratefloor\[plot\]'"):
        report.check_plot_path(Path("p.png"))
    with pytest.raises(ValueError, match=r"unknown suffix '\.gif'"):
        report.check_plot_path(Path("p.gif"))


# -- the ledger line, strict mode, cases a recording left out ---------------------------


def test_the_summary_always_names_the_ledger(tmp_path: Path) -> None:
    rows, outcome = sample_rows(tmp_path)
    path = str(outcome.ledger_path)
    same = [compare(r.case, r.case.recorded()) for r in rows]
    counts = {"unchanged": len(same)}
    plain = RunOutcome(ledger_path=outcome.ledger_path, counts=counts)
    for verbose, quiet in ((False, False), (True, False), (False, True)):
        lines = texts(summary.summary_lines(same, plain, verbose=verbose, quiet=quiet))
        assert sum(path in line for line in lines) == 1, lines
    # quiet and nothing changed: one line, the ledger's, and nothing else
    assert texts(summary.summary_lines(same, plain, quiet=True)) == [
        f"ledger compared with {path}: 0 regressed, 0 improved, 0 new, 4 unchanged"
    ]
    # no ledger yet, quiet or not
    missing = RunOutcome(ledger_path=outcome.ledger_path, ledger_exists=False,
                         counts={"new": len(rows)})
    for quiet in (False, True):
        lines = texts(summary.summary_lines(rows, missing, quiet=quiet))
        assert f"no ledger at {path} yet: every case is new; create it with: " \
               "pytest --ratefloor-record" in lines


def test_strict_mode_is_shown(tmp_path: Path) -> None:
    rows, outcome = sample_rows(tmp_path)
    strict = RunOutcome(**{**outcome.__dict__, "strict": True})
    tally = next(line for line in texts(summary.summary_lines(rows, strict))
                 if line.startswith("ledger compared with"))
    assert "slack 1%, strict mode:" in tally
    assert "strict mode" not in "\n".join(texts(summary.summary_lines(rows, outcome)))
    assert "(strict mode)" in report.markdown_report(rows, strict)
    assert report.json_report(rows, strict)["ledger"]["strict"] is True
    assert report.json_report(rows, outcome)["ledger"]["strict"] is False


def _left_out(count: int) -> tuple[tuple[str, str], ...]:
    return tuple((f"codec{i} | uniform(k=2) | n=10 | seed=0", "RateFailure: too many bits")
                 for i in range(count))


def test_not_recorded_cases_are_listed_and_capped(tmp_path: Path) -> None:
    rows, outcome = sample_rows(tmp_path)
    left = RunOutcome(**{**outcome.__dict__, "recorded": True, "not_recorded": _left_out(25)})
    lines = summary.summary_lines(rows, left)
    text = texts(lines)
    start = text.index(summary.NOT_RECORDED_HEADING)
    assert lines[start].colour == "yellow"
    listed_lines = text[start + 1:start + 1 + summary.NOT_RECORDED_SHOWN]
    assert listed_lines[0] == "  codec0 | uniform(k=2) | n=10 | seed=0: RateFailure: too many bits"
    assert all(line.startswith("  codec") for line in listed_lines)
    assert text[start + 1 + summary.NOT_RECORDED_SHOWN] == "  ... and 5 more (-v lists all)"
    verbose = texts(summary.summary_lines(rows, left, verbose=True))
    assert sum(line.startswith("  codec") for line in verbose) == 25
    quiet = texts(summary.summary_lines(rows, left, quiet=True))
    assert sum(line.startswith("  codec") for line in quiet) == 5
    assert "  ... and 20 more (-v lists all)" in quiet
    # the ledger line says the run was recorded, and the tally deserves a look
    tally = next(line for line in lines if line.text.startswith("ledger recorded into"))
    assert tally.colour == "yellow"

    md = report.markdown_report(rows, left)
    assert "Not recorded (their tests failed):" in md
    assert md.count("- codec") == 25
    doc = report.json_report(rows, left)
    assert doc["not_recorded"][0] == {"case": "codec0 | uniform(k=2) | n=10 | seed=0",
                                      "reason": "RateFailure: too many bits"}
    assert len(doc["not_recorded"]) == 25
    assert report.json_report(rows, outcome)["not_recorded"] == []


def test_runoutcome_keeps_its_positional_fields() -> None:
    outcome = RunOutcome(Path("l.json"), True, 0.01, False, {"new": 1}, (), (), ("p",))
    assert outcome.problems == ("p",)
    assert outcome.strict is False
    assert outcome.not_recorded == ()


def test_json_report_has_no_nan_or_infinity(tmp_path: Path) -> None:
    m = Measurement(codec="c", source="s", n=10, seed=0, bits=0, entropy=float("nan"),
                    floor="entropy", floor_bits=5.0, fingerprint="",
                    source_params={"p": float("inf")})
    row = listed(m)
    assert math.isinf(row.case.efficiency)
    path = tmp_path / "r.json"
    report.write_report(path, [row], RunOutcome(ledger_path=tmp_path / "l.json",
                                                slack=float("inf")))

    def refuse(name: str) -> None:
        raise AssertionError(name)

    doc = json.loads(path.read_text(), parse_constant=refuse)
    assert doc["cases"][0]["efficiency"] is None
    assert doc["cases"][0]["entropy"] is None
    assert doc["cases"][0]["source_params"] == {"p": None}
    assert doc["ledger"]["slack"] is None
