"""Lossy cases in the ledger: written and read back with their distortion, compared on two
figures (bits and distortion), shown with D and R(D), and allowed by the published schema."""

from __future__ import annotations

import json
import math
from pathlib import Path

import jsonschema
import pytest

from pytest_ratefloor import report, schemas, summary
from pytest_ratefloor.errors import LedgerError
from pytest_ratefloor.ledger import Environment, Ledger
from pytest_ratefloor.measurement import LOSSY_FLOOR, Measurement
from pytest_ratefloor.verdicts import compare, regression_message

ENV = Environment("0.1.0", "2.0", "3.11.0", "Linux-x86_64")


def lossy(bits: int, distortion: float, n: int = 10_000, rd: float = 2.0,
          source: str = "gaussian(sigma=1.0)", entropy: float = math.nan) -> Measurement:
    # R(D) = 1/2 log2(1/D) for the unit Gaussian under MSE (Cover & Thomas ch. 10, from
    # memory): the figures here only need to be consistent, the ledger stores what it is given
    return Measurement(codec="quant", source=source, n=n, seed=0, bits=bits, entropy=entropy,
                       floor=LOSSY_FLOOR, floor_bits=rd * n, fingerprint="f0",
                       distortion=distortion, distortion_measure="mse", variance=1.0)


BASE = lossy(25_000, 0.0625)


@pytest.mark.parametrize(("bits", "distortion", "slack", "status"), [
    (25_000, 0.0625, 0.0, "unchanged"),
    (24_000, 0.0625, 0.0, "improved"),
    (25_000, 0.0600, 0.0, "improved"),
    (24_000, 0.0600, 0.0, "improved"),
    (25_001, 0.0625, 0.0, "regressed"),        # more bits at the same distortion
    (25_001, 0.0700, 0.0, "regressed"),        # more bits at worse distortion
    (25_000, 0.0626, 0.0, "regressed"),        # worse distortion at the same bits
    (26_000, 0.0630, 0.0, "regressed"),
    (25_100, 0.0625, 0.01, "within-slack"),    # +0.4 % bits inside a 1 % slack
    (25_000, 0.0630, 0.01, "within-slack"),    # +0.8 % distortion inside a 1 % slack
    (25_000, 0.0640, 0.01, "regressed"),       # +2.4 % distortion beyond it
    (24_000, 0.0700, 0.0, "traded"),           # fewer bits at more distortion
    (26_000, 0.0500, 0.0, "traded"),           # more bits at less distortion
])
def test_lossy_verdicts(bits: int, distortion: float, slack: float, status: str) -> None:
    row = compare(lossy(bits, distortion), BASE.recorded(), slack)
    assert row.status == status


def test_regression_message_names_both_figures(tmp_path: Path) -> None:
    row = compare(lossy(25_000, 0.07), BASE.recorded())
    text = regression_message(row, tmp_path / "l.json", "pytest --ratefloor-record")
    first = text.splitlines()[0]
    assert first.startswith("+0.000% bits, +12.000% distortion vs ledger")
    assert "distortion mse: 0.07 now, 0.0625 in the ledger" in text
    assert report.delta_text(row) == "+0 bits (+0.000%), D +12.000% regressed"


def test_lossy_entries_round_trip_through_the_ledger(tmp_path: Path) -> None:
    path = tmp_path / "l.json"
    discrete = lossy(9_000, 0.05, source="bernoulli(p=0.3)", entropy=0.881290899230693)
    Ledger(path).merged([BASE, discrete], ENV).write()
    doc = json.loads(path.read_text())
    entries = {c["source"]: c for c in doc["cases"].values()}
    assert "entropy" not in entries["gaussian(sigma=1.0)"]  # no entropy in bits
    assert entries["bernoulli(p=0.3)"]["entropy"] == pytest.approx(0.881290899231)
    assert entries["gaussian(sigma=1.0)"]["distortion"] == 0.0625
    assert entries["gaussian(sigma=1.0)"]["distortion_measure"] == "mse"
    jsonschema.validate(doc, schemas.load("ledger"))
    back = Ledger.load(path).entries
    read = back[BASE.key]
    assert read.distortion == 0.0625
    assert read.distortion_measure == "mse"
    assert math.isnan(read.entropy)
    assert read.floor == LOSSY_FLOOR
    assert compare(BASE, read).status == "unchanged"


@pytest.mark.parametrize(("what", "change"), [
    ("distortion without a measure", lambda c: c.pop("distortion_measure")),
    ("negative distortion", lambda c: c.__setitem__("distortion", -0.5)),
    ("lossy case with a lossless floor", lambda c: c.__setitem__("floor", "entropy")),
    ("lossless case with the lossy floor", lambda c: (c.pop("distortion"),
                                                      c.pop("distortion_measure"))),
])
def test_bad_lossy_entries_are_refused_by_reader_and_schema(tmp_path: Path, what: str,
                                                            change) -> None:  # type: ignore[no-untyped-def]
    path = tmp_path / "l.json"
    Ledger(path).merged([BASE], ENV).write()
    doc = json.loads(path.read_text())
    change(next(iter(doc["cases"].values())))
    path.write_text(json.dumps(doc))
    with pytest.raises(LedgerError):
        Ledger.load(path)
    assert not jsonschema.Draft202012Validator(schemas.load("ledger")).is_valid(doc), what


def test_summary_and_report_show_distortion_and_snr(tmp_path: Path) -> None:
    row = compare(lossy(25_000, 0.0625), BASE.recorded())
    lines = [line.text for line in summary.summary_lines([row], report.RunOutcome())]
    assert lines[0].split() == ["source", "H", "floor", "kind", "rate", "D", "eff.", "vs.",
                                "ledger"]
    case = lines[2]
    assert "R(D)" in case
    assert " 0.0625 " in case
    assert " – " in case  # no entropy for a real-valued source
    verbose = "\n".join(line.text for line in summary.summary_lines(
        [row], report.RunOutcome(), verbose=True))
    # SNR = 10 log10(1 / 0.0625) = 12.04 dB (closed form)
    assert "12.04" in verbose
    assert "0.0625 mse" in verbose
    md = report.markdown_report([row], report.RunOutcome(ledger_path=tmp_path / "l.json"))
    assert "| distortion | SNR (dB) |" in md
    assert "0.0625 (`mse`) | 12.04 |" in md
    assert "- **`rate-distortion`**:" in md
    doc = report.json_report([row], report.RunOutcome())
    assert doc["cases"][0]["distortion"] == 0.0625
    assert doc["cases"][0]["snr_db"] == pytest.approx(10 * math.log10(16))
