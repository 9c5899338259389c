"""The screens a reviewer reads: the terminal summary fitted to the terminal, the short
failure line, the Markdown and JSON reports with the run's provenance, the published
JSON Schemas, and the JUnit suite tally."""

from __future__ import annotations

import datetime
import json
import os
import re
import subprocess
import xml.etree.ElementTree as ET
from pathlib import Path

import jsonschema
import pytest
from test_plugin import INNER, make_project, set_pad

from pytest_ratefloor import report, schemas, summary
from pytest_ratefloor.errors import LedgerError
from pytest_ratefloor.ledger import Ledger
from pytest_ratefloor.measurement import Measurement
from pytest_ratefloor.provenance import git_commit, run_started
from pytest_ratefloor.report import RunOutcome
from pytest_ratefloor.verdicts import compare

LONG_SPEC = "categorical(probs=[0.31,0.27,0.18,0.11,0.065,0.035,0.02,0.01,0.005,0.0025])"


def meas(codec: str, source: str, bits: int, n: int = 10_000, floor: str = "sample",
         entropy: float = 1.0) -> Measurement:
    return Measurement(codec=codec, source=source, n=n, seed=0, bits=bits, entropy=entropy,
                       floor=floor, floor_bits=entropy * n, fingerprint="ab",
                       tolerance_bits=0.01 * entropy * n)


def _rows() -> list:
    ok = meas("alpha-coder", "uniform(k=2)", 10_100)
    worse = meas("alpha-coder", LONG_SPEC, 10_400)
    better = meas("beta-coder", "bernoulli(p=0.2)", 10_050, floor="huffman")
    return [
        compare(ok, ok.recorded()),
        compare(worse, Measurement(**{**worse.recorded().__dict__, "bits": 10_100})),
        compare(better, Measurement(**{**better.recorded().__dict__, "bits": 10_090})),
    ]


# -- the terminal summary -------------------------------------------------------------------


@pytest.mark.parametrize("width", [80, 100, 132])
def test_compact_summary_fits_the_terminal(width: int) -> None:
    rows = _rows()
    outcome = RunOutcome(ledger_path=Path("/a/long/path/to/the/project") / "ratefloor-ledger.json",
                         counts={"regressed": 1, "improved": 1, "unchanged": 1},
                         written=(("report", "/a/long/path/to/reports/ratefloor-report.md"),))
    lines = summary.summary_lines(rows, outcome, width=width)
    assert all(len(line.text) <= width for line in lines), [line.text for line in lines]
    table = [line.text for line in lines]
    # regressions first, in red; the improvement green; the unchanged case last, uncoloured
    rows_shown = [line for line in lines if line.text.startswith("  ")]
    assert "regressed" in rows_shown[0].text
    assert rows_shown[0].colour == "red"
    assert "improved" in rows_shown[1].text
    assert rows_shown[1].colour == "green"
    assert rows_shown[2].colour == ""
    # a separate floor-kind column, one number format for changes
    assert re.search(r"\bsample\b", rows_shown[0].text)
    assert re.search(r"\bhuffman\b", rows_shown[1].text)
    assert "+2.970% regressed" in rows_shown[0].text  # (10400 - 10100) / 10100
    # the long spec is shortened, never in -v
    assert LONG_SPEC not in "\n".join(table)
    verbose = "\n".join(line.text for line in summary.summary_lines(rows, outcome, verbose=True))
    assert LONG_SPEC in verbose
    assert "+300 bits (+2.970%) regressed" in verbose


def test_shorten_keeps_the_parameters_that_tell_cases_apart() -> None:
    assert summary.shorten("two_sided_geometric(theta=0.9)", 24) == "two_sided_ge…(theta=0.9)"
    assert summary.shorten("abc", 2) == "a…"
    text = summary.shorten(LONG_SPEC, 30)
    assert len(text) == 30
    assert text.startswith("categorical(")
    assert text.endswith(")")


def test_n_is_shown_only_where_it_tells_cases_apart() -> None:
    a, b = meas("c", "uniform(k=2)", 1_000, n=1_000), meas("c", "uniform(k=2)", 2_000, n=2_000)
    outcome = RunOutcome()
    header = summary.summary_lines([compare(a, None), compare(b, None)], outcome)[0].text
    assert header.split()[:2] == ["source", "n"]
    alone = summary.summary_lines([compare(a, None)], outcome)[0].text
    assert " n " not in alone


def test_over_full_efficiency_is_explained() -> None:
    beat = meas("c", "uniform(k=5)", 9_900, floor="huffman")
    lines = [line.text for line in summary.summary_lines([compare(beat, None)], RunOutcome())]
    assert summary.OVER_FULL_NOTE in lines


def test_very_quiet_prints_only_what_fails(tmp_path: Path) -> None:
    rows = _rows()
    path = tmp_path / "ratefloor-ledger.json"
    failing = RunOutcome(ledger_path=path, counts={"regressed": 1, "improved": 1,
                                                   "unchanged": 1})
    lines = [line.text for line in summary.summary_lines(rows, failing, very_quiet=True,
                                                         base=tmp_path)]
    assert sum(line.startswith("  ") for line in lines) == 1  # only the regressed case
    assert report.CAUTION not in lines
    assert lines[-1] == "ledger compared with ratefloor-ledger.json: 1 regressed, 1 improved, " \
                        "0 new, 1 unchanged"
    clean = RunOutcome(ledger_path=path, counts={"unchanged": 1})
    assert summary.summary_lines([rows[0]], clean, very_quiet=True) == []


def test_written_files_get_one_line_each(tmp_path: Path) -> None:
    outcome = RunOutcome(written=(("report", str(tmp_path / "r.md")),
                                  ("plot", str(tmp_path / "p.png"))))
    lines = [line.text for line in summary.summary_lines(_rows(), outcome, base=tmp_path)]
    assert "written: report r.md" in lines
    assert "written: plot p.png" in lines


# -- pytest: the short failure line, -qq, the written lines, JUnit ------------------------


def test_failure_line_leads_with_figures_and_qq_is_quiet(pytester: pytest.Pytester) -> None:
    make_project(pytester)
    pytester.runpytest(*INNER, "--ratefloor-record").assert_outcomes(passed=2)
    clean = pytester.runpytest(*INNER, "-qq")
    assert "ratefloor" not in clean.stdout.str()
    set_pad(pytester, "alpha", 1)
    result = pytester.runpytest(*INNER, "-rf", "--ratefloor-report", "r.json",
                                "--junitxml=junit.xml")
    result.assert_outcomes(passed=1, failed=1)
    result.stdout.fnmatch_lines([
        "written: report r.json",
        "FAILED test_rf_gated.py::test_alpha - +0.025% bits vs ledger*",
    ])
    quiet = pytester.runpytest(*INNER, "-qq")
    out = quiet.stdout.str()
    assert "regressed" in out
    assert "unchanged" in out  # the tally, which fails
    assert "Caution" not in out
    assert "written:" not in out
    # the suite-level tally in JUnit XML
    root = ET.parse(pytester.path / "junit.xml").getroot()
    suite = root if root.tag == "testsuite" else root.find("testsuite")
    assert suite is not None
    props = {p.get("name"): p.get("value") for p in suite.findall("properties/property")}
    assert props["ratefloor.tally"] == "1 regressed, 0 improved, 0 new, 1 unchanged"
    assert props["ratefloor.failing"] == "1"
    # the JSON report names the test, the verdicts and the run; it matches the schema
    doc = json.loads((pytester.path / "r.json").read_text())
    jsonschema.validate(doc, schemas.load("report"), registry=_registry())
    first = doc["cases"][0]
    assert first["test_ids"] == ["test_rf_gated.py::test_alpha"]
    assert first["test"] == "failed"
    assert first["ledger"]["status"] == "regressed"
    assert first["allowed_rate"] == pytest.approx(first["floor_rate"] * 1.5)  # rel=0.5
    assert doc["cases"][1]["test"] == "passed"
    stamp = datetime.datetime.strptime(doc["timestamp"], "%Y-%m-%dT%H:%M:%SZ")
    assert abs((datetime.datetime.utcnow() - stamp).total_seconds()) < 600


# -- the Markdown report and the job summary ------------------------------------------------


def test_markdown_report_names_the_run_and_folds_unchanged(tmp_path: Path) -> None:
    rows = _rows()
    outcome = RunOutcome(ledger_path=tmp_path / "l.json", counts={"regressed": 1},
                         started="2026-12-03T02:50:11Z", commit="0123456789ab")
    text = report.markdown_report(rows, outcome)
    assert "Run `2026-12-03T02:50:11Z` · commit `0123456789ab` · pytest-ratefloor `" in text
    assert "Python `" in text
    assert "numpy `" in text
    assert "**Failing the gate:**" in text
    assert "| bits |" in text.replace("| bits | allowed", "| bits |")
    assert "allowed (bit/sym)" in text
    assert "- **`huffman`**:" in text
    assert "- **`sample`**:" in text
    # worst first within a codec's table
    alpha = text.split("### Codec `alpha-coder`")[1]
    assert alpha.index("regressed") < alpha.index("= ledger")
    folded = report.markdown_report(rows, outcome, fold_unchanged=True)
    assert "<details>" in folded
    assert "<summary>1 unchanged case (the same bits as the ledger)</summary>" in folded
    before, _, inside = folded.partition("<details>")
    assert "= ledger" not in before
    assert "= ledger" in inside


# -- provenance -----------------------------------------------------------------------------


def test_git_commit_of_a_repository_and_outside_one(tmp_path: Path) -> None:
    assert git_commit(tmp_path) is None  # not a work tree
    env = {**os.environ, "GIT_AUTHOR_NAME": "t", "GIT_AUTHOR_EMAIL": "t@example.invalid",
           "GIT_COMMITTER_NAME": "t", "GIT_COMMITTER_EMAIL": "t@example.invalid"}

    def git(*args: str) -> str:
        return subprocess.run(["git", *args], cwd=tmp_path, env=env, check=True,
                              capture_output=True, text=True).stdout.strip()

    git("init", "-q")
    (tmp_path / "f.txt").write_text("a")
    git("add", "f.txt")
    git("commit", "-qm", "one")
    head = git("rev-parse", "HEAD")  # git itself is the reference
    assert git_commit(tmp_path) == head[:12]
    (tmp_path / "f.txt").write_text("b")
    assert git_commit(tmp_path) == head[:12] + "+dirty"


def test_run_started_is_iso_utc() -> None:
    moment = datetime.datetime(2026, 12, 3, 4, 5, 6, tzinfo=datetime.timezone(
        datetime.timedelta(hours=2)))
    assert run_started(moment) == "2026-12-03T02:05:06Z"


# -- the published schemas ------------------------------------------------------------------


def _registry():  # type: ignore[no-untyped-def]
    from referencing import Registry, Resource

    resources = [(s["$id"], Resource.from_contents(s)) for s in map(schemas.load, schemas.SCHEMAS)]
    registry = Registry().with_resources(resources)
    # the report refers to the ledger schema by its relative name
    return registry.with_resource("ledger.schema.json",
                                  Resource.from_contents(schemas.load("ledger")))


@pytest.mark.parametrize("name", schemas.SCHEMAS)
def test_schemas_are_valid_draft_2020_12(name: str) -> None:
    jsonschema.Draft202012Validator.check_schema(schemas.load(name))
    assert schemas.path(name).name == f"{name}.schema.json"


def test_unknown_schema_name_is_refused() -> None:
    with pytest.raises(ValueError, match="schema must be one of"):
        schemas.path("nope")  # type: ignore[arg-type]


def _ledger_doc(tmp_path: Path) -> dict:
    path = tmp_path / "l.json"
    ms = [meas("c", "uniform(k=2)", 10_100), meas("d", "bernoulli(p=0.2)", 7_300)]
    from pytest_ratefloor.ledger import Environment

    Ledger(path).merged(ms, Environment("0.1.0", "2.0", "3.11.0", "Linux-x86_64")).write()
    return json.loads(path.read_text())


MUTATIONS = [
    ("bits as text", lambda d, c: c.__setitem__("bits", "12")),
    ("negative bits", lambda d, c: c.__setitem__("bits", -1)),
    ("bits too large", lambda d, c: c.__setitem__("bits", 2**63)),
    ("n zero", lambda d, c: c.__setitem__("n", 0)),
    ("unknown floor", lambda d, c: c.__setitem__("floor", "magic")),
    ("unknown field", lambda d, c: c.__setitem__("colour", "red")),
    ("missing source", lambda d, c: c.pop("source")),
    ("empty codec", lambda d, c: c.__setitem__("codec", "")),
    ("unknown top field", lambda d, c: d.__setitem__("extra", 1)),
    ("newer schema", lambda d, c: d.__setitem__("schema", 2)),
    ("fine", lambda d, c: None),
]


@pytest.mark.parametrize(("what", "mutate"), MUTATIONS, ids=[m[0] for m in MUTATIONS])
def test_ledger_schema_agrees_with_the_reader(tmp_path: Path, what: str, mutate) -> None:  # type: ignore[no-untyped-def]
    doc = _ledger_doc(tmp_path)
    case = next(iter(doc["cases"].values()))
    mutate(doc, case)
    schema_ok = jsonschema.Draft202012Validator(schemas.load("ledger")).is_valid(doc)
    path = tmp_path / "m.json"
    path.write_text(json.dumps(doc))
    try:
        Ledger.load(path)
        reader_ok = True
    except LedgerError:
        reader_ok = False
    assert schema_ok == reader_ok == (what == "fine")
