"""The layout of each case (recorded, shown) and ``ratefloor prune`` (stale entries removed).

The layout is read from the bound codec with ``getattr(codec, "layout", None)``;
the end-to-end project below gives a ``ByteCodec`` a ``layout`` property of its
own when the adapters do not have one yet, so the test holds either way.
``prune`` is tested with reports the plugin wrote itself (a full run, a ``-k``
run) and with hand-made ones for the refusals.
"""

from __future__ import annotations

import contextlib
import importlib
import json
import os
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest

from pytest_ratefloor import pruning, rate, report, sources, summary
from pytest_ratefloor.cli import main
from pytest_ratefloor.errors import UnreadableLedgerError
from pytest_ratefloor.ledger import Environment, Ledger, entry_json
from pytest_ratefloor.measurement import Measurement
from pytest_ratefloor.recording import lock_path
from pytest_ratefloor.report import RunOutcome
from pytest_ratefloor.verdicts import LedgerRun, compare, listed

# Import what the inner runs import now: pytester drops modules first imported during
# an in-process run, and numpy cannot be loaded twice in one process.
for _name in ("numpy", "pytest_ratefloor.harness", "pytest_ratefloor.sources"):
    importlib.import_module(_name)

ENV = Environment(plugin="0.9.0", numpy="2.1.0", python="3.12.3", platform="Linux-x86_64")

#: A ledger as the plugin wrote it before layouts were recorded (generated with the
#: previous release's ``Ledger.dumps``): it must load, and be written back byte for byte.
OLD_LEDGER = """{
  "cases": {
    "rice | geometric(p=0.2) | n=1000 | seed=3": {
      "bits": 3700,
      "codec": "rice",
      "codec_version": "2.1",
      "entropy": 3.60964047444,
      "fingerprint": "fedcba9876543210",
      "floor": "entropy",
      "floor_rate": 3.60964047444,
      "n": 1000,
      "rate": 3.7,
      "seed": 3,
      "source": "geometric(p=0.2)"
    },
    "zlib-9 | uniform(k=16) | n=2000 | seed=0": {
      "bits": 8376,
      "codec": "zlib-9",
      "entropy": 4.0,
      "fingerprint": "0123456789abcdef",
      "floor": "sample",
      "floor_rate": 3.946605,
      "n": 2000,
      "rate": 4.188,
      "seed": 0,
      "source": "uniform(k=16)"
    }
  },
  "kind": "pytest-ratefloor rate ledger",
  "note": "Committed rate ledger of pytest-ratefloor. Only 'bits' is compared; \
re-record with: pytest --ratefloor-record",
  "recorded_with": {
    "numpy": "2.1.0",
    "platform": "Linux-x86_64",
    "plugin": "0.9.0",
    "python": "3.12.3"
  },
  "schema": 1
}
"""


def meas(codec: str, source: str = "uniform(k=16)", bits: int = 8000, n: int = 2000,
         seed: int = 0, layout: str | None = None, fingerprint: str = "beef") -> Measurement:
    return Measurement(codec=codec, source=source, n=n, seed=seed, bits=bits, entropy=4.0,
                       floor="entropy", floor_bits=4.0 * n, fingerprint=fingerprint,
                       sample_information=4.0 * n, spread=0.0, layout=layout)


# -- the layout in the case record and the ledger ------------------------------------------


def test_layout_is_a_ledger_field_of_the_case_record() -> None:
    m = meas("zlib", layout="zigzag-u16le")
    assert m.recorded().layout == "zigzag-u16le"
    assert Measurement.from_record(m.to_record()) == m
    assert m.to_record()["layout"] == "zigzag-u16le"
    old_record = {k: v for k, v in m.to_record().items() if k != "layout"}
    assert Measurement.from_record(old_record).layout is None  # an older worker's record
    assert meas("zlib", layout="").recorded().layout is None  # empty means none


def test_ledger_keeps_the_layout_and_reads_it_back(tmp_path: Path) -> None:
    path = tmp_path / "ledger.json"
    ledger = Ledger(path).merged([meas("zlib", layout="u8"), meas("plain")], ENV)
    text = ledger.dumps()
    doc = json.loads(text)
    assert doc["schema"] == 1
    assert doc["cases"]["zlib | uniform(k=16) | n=2000 | seed=0"]["layout"] == "u8"
    assert "layout" not in doc["cases"]["plain | uniform(k=16) | n=2000 | seed=0"]
    back = Ledger.parse(text, path)
    assert {k.codec: e.layout for k, e in back.entries.items()} == {"zlib": "u8", "plain": None}
    assert back.entries == ledger.entries  # loading gives back the recorded form
    assert back.dumps() == text


def test_an_old_ledger_without_layouts_loads_and_is_written_back_byte_for_byte() -> None:
    ledger = Ledger.parse(OLD_LEDGER, Path("old.json"))
    assert [e.layout for e in ledger.entries.values()] == [None, None]
    assert ledger.environment == ENV
    assert ledger.dumps() == OLD_LEDGER
    # merging a case with a layout leaves the others' blocks as they were
    merged = ledger.merged([meas("zlib", layout="u8")], ENV).dumps()
    for label, block in json.loads(OLD_LEDGER)["cases"].items():
        assert json.loads(merged)["cases"][label] == block


@pytest.mark.parametrize("value", ["", 8, None, ["u8"], "\ud800"])
def test_a_bad_layout_in_the_ledger_is_one_line_naming_the_case(value: object) -> None:
    doc = json.loads(OLD_LEDGER)
    doc["cases"]["rice | geometric(p=0.2) | n=1000 | seed=3"]["layout"] = value
    with pytest.raises(UnreadableLedgerError, match=r"case 'rice \| geometric.*'layout'") as info:
        Ledger.parse(json.dumps(doc), Path("bad.json"))
    assert "\n" not in str(info.value)


class _Encoded:
    bits = 64


class _Bound:
    name, version = "bound", None

    def __init__(self, layout: object) -> None:
        self.layout = layout


def test_measurement_of_reads_the_bound_codecs_layout_with_getattr() -> None:
    source = sources.uniform(16)
    sample = np.arange(16, dtype=np.int64)

    def layout_of(codec: object) -> str | None:
        m = rate.measurement_of(codec, source, sample, 0, _Encoded(),  # type: ignore[arg-type]
                                "sample")
        return m.layout

    assert layout_of(_Bound("zigzag-u16le")) == "zigzag-u16le"
    assert layout_of(_Bound("xz -9 (stdin to stdout)")) == "xz -9 (stdin to stdout)"
    for nothing in (None, "", 3, b"u8", "\udc80"):
        assert layout_of(_Bound(nothing)) is None
    plain = _Bound(None)
    del plain.layout
    assert layout_of(plain) is None  # an adapter without the attribute


# -- the layout in the summary, the reports and ``ratefloor show`` -------------------------


def test_reports_show_the_layout_escaped(tmp_path: Path) -> None:
    hostile = "u8|[x](y)\x1b[31m"
    rows = [compare(meas("zlib", layout="u8"), None),
            compare(meas("zlib", source="uniform(k=4)", layout=hostile), None),
            compare(meas("plain"), None)]
    outcome = RunOutcome(ledger_path=tmp_path / "l.json", ledger_exists=False)
    verbose = [line.text for line in summary.summary_lines(rows, outcome, verbose=True)]
    assert verbose[0].split()[:9] == ["codec", "source", "n", "seed", "layout", "H", "b/sym",
                                      "floor", "b/sym"]
    assert "  seed  layout" in verbose[0]
    by_case = {tuple(line.split()[:2]): line for line in verbose[1:4]}
    assert len(by_case) == 3
    assert " u8 " in by_case["zlib", "uniform(k=16)"]
    assert "\x1b" not in by_case["zlib", "uniform(k=4)"]
    assert "u8|[x](y)\\x1b[31m" in by_case["zlib", "uniform(k=4)"]
    assert " – " in by_case["plain", "uniform(k=16)"]
    compact = summary.summary_lines(rows, outcome)[0].text
    assert "layout" not in compact

    md = report.markdown_report(rows, outcome)
    zlib_table = md.split("### Codec `zlib`")[1].split("###")[0]
    assert "| source | n | seed | layout | entropy (bit/sym) |" in zlib_table
    assert "| `uniform(k=16)` | 2,000 | 0 | `u8` |" in zlib_table
    assert r"| u8\|\[x\]\(y\)\\x1b\[31m |" in zlib_table  # no cell, link or escape forms
    plain_table = md.split("### Codec `plain`")[1].split("###")[0]
    assert "layout" not in plain_table  # no case of this codec knows one

    doc = report.json_report(rows, outcome)
    assert sorted([c["layout"] or "" for c in doc["cases"]]) == sorted(["u8", hostile, ""])
    json.dumps(doc, allow_nan=False)


def test_show_lists_the_layout(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "ledger.json"
    Ledger(path).merged([meas("zlib", layout="zigzag-u16le"), meas("plain")], ENV).write()
    assert main(["show", str(path)]) == 0
    md = capsys.readouterr().out
    assert "| source | n | seed | layout |" in md
    assert "| `uniform(k=16)` | 2,000 | 0 | `zigzag-u16le` |" in md
    assert main(["show", str(path), "--format", "json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert {c["codec"]: c["layout"] for c in doc["cases"]} == {"zlib": "zigzag-u16le",
                                                               "plain": None}
    old = tmp_path / "old.json"
    old.write_text(OLD_LEDGER, encoding="utf-8")
    assert main(["show", str(old)]) == 0
    assert "layout" not in capsys.readouterr().out  # an old ledger's tables are as before


# -- end to end: a ByteCodec case through the plugin ------------------------------------

CODECS = '''
"""A ByteCodec that names its packing (the adapters' ``layout``, or a stand-in for it)."""
import zlib

import numpy as np

from pytest_ratefloor import ByteCodec, StreamCodec, sources

if hasattr(ByteCodec, "layout"):
    LaidOut = ByteCodec
else:  # until the adapters have the property: the same behaviour on a small subclass
    class LaidOut(ByteCodec):
        @property
        def layout(self):
            return None if self.symbol == "auto" else self.symbol

        def for_source(self, source):
            bound = super().for_source(source)
            laid = LaidOut(bound._compress, bound._decompress, name=bound.name,
                           version=bound.version, symbol=bound.symbol)
            laid._trusted = bound._trusted
            return laid

ZLIB = LaidOut(zlib.compress, zlib.decompress, name="zlib")
RAW = StreamCodec(lambda s: np.asarray(s, dtype=np.uint8).tobytes(),
                  lambda d, n: np.frombuffer(bytes(d), dtype=np.uint8), name="raw")
'''

CASES = '''
from rfcodecs import RAW, ZLIB
from pytest_ratefloor import sources


def test_zlib_u8(ratefloor):
    ratefloor.check(ZLIB, sources.uniform(16), n=2000, rel=1.0, edge_cases=False)


def test_zlib_zigzag(ratefloor):
    ratefloor.check(ZLIB, sources.two_sided_geometric(0.5), n=2000, rel=2.0, edge_cases=False)


def test_raw(ratefloor):
    ratefloor.check(RAW, sources.uniform(256), n=500, rel=0.5, edge_cases=False)
'''

INNER = ("-p", "no:cacheprovider", "-p", "no:hypothesispytest")


@pytest.fixture(autouse=True)
def _clean_environment(monkeypatch: pytest.MonkeyPatch) -> None:
    for name in list(os.environ):
        if name.startswith("PYTEST_XDIST") or name in ("PYTEST_ADDOPTS", "GITHUB_STEP_SUMMARY"):
            monkeypatch.delenv(name)


def _zigzag_name() -> str:
    """The packing ``ByteCodec(symbol="auto")`` picks for the two-sided source."""
    from pytest_ratefloor.layouts import resolve_layout

    return resolve_layout("auto", sources.two_sided_geometric(0.5))


def test_a_bytecodec_case_records_and_shows_its_packing(pytester: pytest.Pytester,
                                                        capsys: pytest.CaptureFixture[str]
                                                        ) -> None:
    zigzag = _zigzag_name()
    assert zigzag.startswith("zigzag-")
    pytester.makepyfile(rfcodecs=CODECS, test_rf_layouts=CASES)
    ledger = pytester.path / "ratefloor-ledger.json"
    result = pytester.runpytest(*INNER, "--ratefloor-record", "-v",
                                "--ratefloor-report", "report.json")
    result.assert_outcomes(passed=3)
    result.stdout.fnmatch_lines(["codec *source * seed  layout  * bits *",
                                 "raw *uniform(k=256) * 500 * 0  –  *",
                                 "zlib *two_sided_geometric* 2,000 * 0  " + zigzag + " *",
                                 "zlib *uniform(k=16) * 2,000 * 0  u8 *"], consecutive=False)

    cases = json.loads(ledger.read_text(encoding="utf-8"))["cases"]
    layouts = {(c["codec"], c["source"].split("(")[0]): c.get("layout") for c in cases.values()}
    assert layouts == {("zlib", "uniform"): "u8", ("zlib", "two_sided_geometric"): zigzag,
                       ("raw", "uniform"): None}
    assert not any("layout" in c for c in cases.values() if c["codec"] == "raw")

    doc = json.loads((pytester.path / "report.json").read_text(encoding="utf-8"))
    assert sorted((c["codec"], c["layout"]) for c in doc["cases"]) == [
        ("raw", None), ("zlib", "u8"), ("zlib", zigzag)]

    result = pytester.runpytest(*INNER, "--ratefloor-report", "report.md")
    result.assert_outcomes(passed=3)
    md = (pytester.path / "report.md").read_text(encoding="utf-8")
    assert "| source | n | seed | layout |" in md
    assert f"| 2,000 | 0 | `{zigzag}` |" in md
    assert "| 2,000 | 0 | `u8` |" in md

    assert main(["show", str(ledger)]) == 0
    assert "| 2,000 | 0 | `u8` |" in capsys.readouterr().out


# -- prune -----------------------------------------------------------------------------


def _write_report(path: Path, ledger: Path, measured: list[Measurement],
                  partial: tuple[str, ...] = ()) -> Path:
    """A JSON report as the plugin writes it: the run measured ``measured`` against ``ledger``."""
    run = LedgerRun(baseline=Ledger.load(ledger))
    for m in measured:
        run.observe(m)
    run.partial_reasons.extend(partial)
    outcome = RunOutcome(ledger_path=ledger, counts=run.counts(), stale=run.stale(),
                         partial_reasons=tuple(run.partial_reasons))
    report.write_report(path, run.sorted_comparisons(), outcome)
    return path


@pytest.fixture
def pruned_setup(tmp_path: Path) -> tuple[Path, Path, list[Measurement]]:
    """A ledger of four cases and the report of a full run that measured two of them."""
    live = [meas("zlib", layout="u8"), meas("rice", source="geometric(p=0.2)", seed=3)]
    stale = [meas("old\x1b[2J", source="uniform(k=4)", layout="u8"),
             meas("gone", source="bernoulli(p=0.1)", n=100)]
    ledger = tmp_path / "ledger.json"
    Ledger(ledger).merged([*live, *stale], ENV).write()
    report_path = _write_report(tmp_path / "report.json", ledger, live)
    return ledger, report_path, stale


def test_prune_removes_exactly_the_stale_cases_and_keeps_the_rest_byte_for_byte(
        pruned_setup: tuple[Path, Path, list[Measurement]],
        capsys: pytest.CaptureFixture[str]) -> None:
    ledger, report_path, stale = pruned_setup
    before = Ledger.load(ledger)
    assert main(["prune", str(ledger), "--report", str(report_path)]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[1:] == [
        "removed: gone | bernoulli(p=0.1) | n=100 | seed=0",
        "removed: old\\x1b[2J | uniform(k=4) | n=2000 | seed=0",  # escaped, not obeyed
        f"removed 2 stale entries; 2 kept in {ledger}",
    ]
    after = Ledger.load(ledger)
    assert set(after.entries) == set(before.entries) - {m.key for m in stale}
    expected = Ledger(ledger, {k: e for k, e in before.entries.items() if k in after.entries},
                      environment=ENV)
    assert ledger.read_text(encoding="utf-8") == expected.dumps()  # kept: same bytes
    assert after.environment == ENV  # pruning is not a recording
    assert not lock_path(ledger).exists()

    # a second prune finds nothing left to do and does not write
    mtime = ledger.stat().st_mtime_ns
    assert main(["prune", str(ledger), "--report", str(report_path)]) == 0
    again = capsys.readouterr().out
    assert "not in the ledger: gone | bernoulli(p=0.1) | n=100 | seed=0" in again
    assert again.endswith(f"no stale entry to remove; {ledger} not written\n")
    assert ledger.stat().st_mtime_ns == mtime


def test_dry_run_writes_nothing(pruned_setup: tuple[Path, Path, list[Measurement]],
                                capsys: pytest.CaptureFixture[str]) -> None:
    ledger, report_path, _ = pruned_setup
    data, mtime = ledger.read_bytes(), ledger.stat().st_mtime_ns
    assert main(["prune", str(ledger), "--report", str(report_path), "--dry-run"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[1:] == [
        "would remove: gone | bernoulli(p=0.1) | n=100 | seed=0",
        "would remove: old\\x1b[2J | uniform(k=4) | n=2000 | seed=0",
        f"dry run: 2 stale entries would be removed, 2 kept; {ledger} not written",
    ]
    assert ledger.read_bytes() == data
    assert ledger.stat().st_mtime_ns == mtime
    assert sorted(p.name for p in ledger.parent.iterdir()) == ["ledger.json", "report.json"]


def test_prune_refuses_a_partial_runs_report(tmp_path: Path,
                                             capsys: pytest.CaptureFixture[str]) -> None:
    ledger = tmp_path / "ledger.json"
    Ledger(ledger).merged([meas("a"), meas("b")], ENV).write()
    data = ledger.read_bytes()
    partial = _write_report(tmp_path / "r.json", ledger, [meas("a")], partial=("-k",))
    assert json.loads(partial.read_text())["ledger"]["full_run"] is False
    for extra in ((), ("--dry-run",)):
        assert main(["prune", str(ledger), "--report", str(partial), *extra]) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1
        assert "comes from a partial run (-k), which cannot tell which entries are stale" in err
    assert ledger.read_bytes() == data


def test_prune_keeps_an_entry_recorded_again_since_the_report(
        pruned_setup: tuple[Path, Path, list[Measurement]],
        capsys: pytest.CaptureFixture[str]) -> None:
    ledger, report_path, _stale = pruned_setup
    Ledger.load(ledger).merged([meas("gone", source="bernoulli(p=0.1)", n=100, bits=7999)],
                               ENV).write()
    assert main(["prune", str(ledger), "--report", str(report_path)]) == 0
    out = capsys.readouterr().out
    assert "kept (recorded again since the report): gone | bernoulli(p=0.1)" in out
    assert {k.codec for k in Ledger.load(ledger).entries} == {"zlib", "rice", "gone"}


def test_prune_rereads_the_ledger_under_its_lock(
        pruned_setup: tuple[Path, Path, list[Measurement]], monkeypatch: pytest.MonkeyPatch,
        capsys: pytest.CaptureFixture[str]) -> None:
    """A recording that lands between the first read and the lock is not lost."""
    ledger, report_path, _ = pruned_setup
    real_lock = pruning.ledger_lock
    locked: list[Path] = []

    @contextlib.contextmanager
    def late_recording(path: Path) -> Iterator[Path]:
        Ledger.load(ledger).merged([meas("fresh", layout="u16le")], ENV).write()
        with real_lock(path) as target:
            locked.append(target)
            assert lock_path(ledger).exists()
            yield target

    monkeypatch.setattr(pruning, "ledger_lock", late_recording)
    assert main(["prune", str(ledger), "--report", str(report_path)]) == 0
    assert locked == [ledger.resolve()]
    assert {k.codec for k in Ledger.load(ledger).entries} == {"zlib", "rice", "fresh"}
    assert capsys.readouterr().out.endswith(f"removed 2 stale entries; 3 kept in {ledger}\n")


def test_prune_writes_through_a_symlinked_ledger(
        pruned_setup: tuple[Path, Path, list[Measurement]],
        capsys: pytest.CaptureFixture[str]) -> None:
    ledger, report_path, _ = pruned_setup
    link = ledger.with_name("link.json")
    link.symlink_to(ledger.name)
    assert main(["prune", str(link), "--report", str(report_path)]) == 0
    assert link.is_symlink()
    assert len(Ledger.load(ledger).entries) == 2
    capsys.readouterr()


def _report_doc(report_path: Path) -> dict[str, object]:
    doc: dict[str, object] = json.loads(report_path.read_text(encoding="utf-8"))
    return doc


@pytest.mark.parametrize(("change", "message"), [
    (lambda d: "not json {", "not valid JSON at line 1"),
    (lambda d: json.dumps({**d, "kind": "something else"}), "not a pytest-ratefloor JSON report"),
    (lambda d: json.dumps({**d, "schema": 2}), "report schema 2 is newer"),
    (lambda d: json.dumps({**d, "schema": True}), "bad report schema True"),
    (lambda d: json.dumps({k: v for k, v in d.items() if k != "ledger"}), "no 'ledger' block"),
    (lambda d: json.dumps({**d, "ledger": {**d["ledger"], "partial_reasons": None}}),
     "lacks a well-formed 'full_run'"),
    (lambda d: json.dumps({**d, "ledger": {**d["ledger"], "full_run": False}}),
     "comes from a partial run (the report says it was not a full run)"),
    (lambda d: json.dumps({**d, "ledger": {**d["ledger"], "stale": [{"codec": "x"}]}}),
     "stale entry 0 lacks the field"),
    (lambda d: json.dumps({**d, "ledger": {**d["ledger"],
                                          "stale": [{**d["ledger"]["stale"][0], "bits": -1}]}}),
     "stale entry 0 has a bad 'bits'"),
    (lambda d: json.dumps({**d, "ledger": {**d["ledger"],
                                          "stale": d["ledger"]["stale"] * 2}}),
     "twice; not a report this plugin wrote"),
    (lambda d: json.dumps({**d, "cases": [*d["cases"], d["ledger"]["stale"][0]]}),
     "as stale and as measured"),
    (lambda d: json.dumps({**d, "cases": [{"codec": "x", "source": "y", "n": True, "seed": 0}]}),
     "case 0 lacks a well-formed codec, source, n or seed"),
    (lambda d: json.dumps(d)[:-1] + ', "schema": 1}', "appears more than once"),
    (lambda d: json.dumps(d).replace('"slack": 0.0', '"slack": NaN'), "NaN is not a JSON number"),
])
def test_prune_refuses_a_bad_report_with_one_line(
        pruned_setup: tuple[Path, Path, list[Measurement]], change: object, message: str,
        capsys: pytest.CaptureFixture[str]) -> None:
    ledger, report_path, _ = pruned_setup
    data = ledger.read_bytes()
    report_path.write_text(change(_report_doc(report_path)), encoding="utf-8")  # type: ignore[operator]
    assert main(["prune", str(ledger), "--report", str(report_path)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1
    assert str(report_path) in err
    assert message in err
    assert ledger.read_bytes() == data


def test_prune_refuses_unreadable_inputs_with_one_line(
        pruned_setup: tuple[Path, Path, list[Measurement]],
        capsys: pytest.CaptureFixture[str]) -> None:
    ledger, report_path, _ = pruned_setup
    cases = [
        ([str(ledger), "--report", str(ledger.with_name("missing.json"))], "no such file"),
        ([str(ledger), "--report", str(ledger.parent)], "is a directory, not a report file"),
        ([str(ledger.with_name("nothing.json")), "--report", str(report_path)], "no such file"),
    ]
    for args, message in cases:
        assert main(["prune", *args]) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1
        assert message in err
    ledger.write_text("{", encoding="utf-8")
    assert main(["prune", str(ledger), "--report", str(report_path)]) == 2
    assert "the file ends early" in capsys.readouterr().err
    assert main(["prune", str(ledger)]) == 2  # --report is required (argparse's usage error)
    assert "--report" in capsys.readouterr().err


def test_prune_with_reports_the_plugin_wrote(pytester: pytest.Pytester,
                                             capsys: pytest.CaptureFixture[str]) -> None:
    """Record three cases, drop a test, prune with a full run's report; a -k report is refused."""
    pytester.makepyfile(rfcodecs=CODECS, test_rf_layouts=CASES)
    ledger = pytester.path / "ratefloor-ledger.json"
    pytester.runpytest(*INNER, "--ratefloor-record").assert_outcomes(passed=3)
    recorded = json.loads(ledger.read_text(encoding="utf-8"))["cases"]

    pytester.makepyfile(test_rf_layouts=CASES.split("\n\ndef test_raw")[0] + "\n")
    pytester.runpytest(*INNER, "-k", "u8", "--ratefloor-report", "partial.json")
    assert main(["prune", str(ledger), "--report", str(pytester.path / "partial.json")]) == 2
    assert "partial run (-k; 1 deselected)" in capsys.readouterr().err

    result = pytester.runpytest(*INNER, "--ratefloor-report", "full.json")
    result.assert_outcomes(passed=2)
    result.stdout.fnmatch_lines(["stale: 1 ledger entry not measured*", "  raw | uniform*"])
    assert main(["prune", str(ledger), "--report", str(pytester.path / "full.json")]) == 0
    assert "removed: raw | uniform(k=256) | n=500 | seed=0" in capsys.readouterr().out
    now = json.loads(ledger.read_text(encoding="utf-8"))["cases"]
    assert now == {k: v for k, v in recorded.items() if not k.startswith("raw |")}
    result = pytester.runpytest(*INNER, "--ratefloor-strict")
    result.assert_outcomes(passed=2)
    result.stdout.no_fnmatch_line("stale*")


def test_listing_and_reading_agree_on_the_quoted_form(tmp_path: Path) -> None:
    """A stale entry quoted in a report is the ledger's own form (what prune compares)."""
    path = tmp_path / "ledger.json"
    Ledger(path).merged([meas("q", layout="u32le")], ENV).write()
    entry = next(iter(Ledger.load(path).entries.values()))
    report_path = _write_report(tmp_path / "r.json", path, [])
    quoted = pruning.read_stale_report(str(report_path))
    assert [entry_json(m) for m in quoted] == [entry_json(entry)]
    assert listed(entry).case.layout == "u32le"
