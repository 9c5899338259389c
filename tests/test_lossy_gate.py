"""The pytest side of lossy codecs: the fixture and gate() take a LossyCodec, the ledger keeps
bits and distortion, a worse distortion at the same bits fails, JUnit carries the figures,
and the run plot draws the cases against R(D)."""

from __future__ import annotations

import json
import math
import xml.etree.ElementTree as ET
from pathlib import Path

import jsonschema
import numpy as np
import pytest
from referencing import Registry, Resource

from pytest_ratefloor import LossyCodec, schemas, sources
from pytest_ratefloor.lossy.gating import LossyPlan, case_record, lossy_fingerprint
from pytest_ratefloor.measurement import LOSSY_FLOOR
from pytest_ratefloor.rd_plot import rd_bound, rd_series, source_of
from pytest_ratefloor.verdicts import compare

INNER = ("-p", "no:cacheprovider", "-p", "no:hypothesispytest")

CODER = '''
import pathlib
import numpy as np
from pytest_ratefloor import LossyCodec

def step():
    # the quantizer step comes from a file, so a test can make the coder coarser
    path = pathlib.Path(__file__).with_name("step.txt")
    return float(path.read_text()) if path.exists() else 0.1

def encode(x):
    q = np.floor(np.asarray(x) / step() + 0.5).astype(np.int16)
    return q.tobytes()

def decode(data, n):
    return np.frombuffer(data, dtype=np.int16)[:n].astype(np.float64) * step()

QUANT = LossyCodec(encode, decode, name="quant16", version="1")
'''

TESTS = '''
from pytest_ratefloor import gate, sources
from rfquant import QUANT

test_quant = gate(QUANT, sources=[sources.gaussian(1.0)], n=4000, max_gap=14.0)

def test_quant_fixture(ratefloor):
    m = ratefloor.check(QUANT, sources.laplacian(1.0), n=3000, distortion="abs", max_abs=0.05)
    assert m.distortion is not None
'''


def test_gate_records_bits_and_distortion_and_fails_worse_distortion(
        pytester: pytest.Pytester) -> None:
    pytester.makepyfile(rfquant=CODER, test_rf_lossy=TESTS)
    result = pytester.runpytest(*INNER, "--ratefloor-record")
    result.assert_outcomes(passed=2)
    ledger = json.loads((pytester.path / "ratefloor-ledger.json").read_text())
    cases = {c["source"]: c for c in ledger["cases"].values()}
    gauss = cases["gaussian(sigma=1.0)"]
    assert gauss["floor"] == LOSSY_FLOOR
    assert gauss["bits"] == 16 * 4000  # int16 per sample
    assert gauss["distortion_measure"] == "mse"
    # uniform quantization noise at step 0.1: D ≈ step²/12 (common practice)
    assert gauss["distortion"] == pytest.approx(0.01 / 12, rel=0.05)
    assert cases["laplacian(scale=1.0)"]["distortion_measure"] == "abs"
    # a rerun: both cases as recorded; the JSON report carries the lossy figures and
    # matches the published schema (checked with jsonschema), as does the ledger
    result = pytester.runpytest(*INNER, "--ratefloor-report", "r.json")
    result.assert_outcomes(passed=2)
    doc = json.loads((pytester.path / "r.json").read_text())
    registry = Registry().with_resource("ledger.schema.json",
                                        Resource.from_contents(schemas.load("ledger")))
    jsonschema.validate(doc, schemas.load("report"), registry=registry)
    jsonschema.validate(ledger, schemas.load("ledger"))
    by_source = {c["source"]: c for c in doc["cases"]}
    assert by_source["gaussian(sigma=1.0)"]["distortion_measure"] == "mse"
    assert by_source["gaussian(sigma=1.0)"]["snr_db"] == pytest.approx(
        10 * math.log10(1.0 / by_source["gaussian(sigma=1.0)"]["distortion"]))
    result.stdout.fnmatch_lines(["*0 regressed, 0 improved, 0 new, 2*"])
    # a finer step: the same bits at less distortion is an improvement
    (pytester.path / "step.txt").write_text("0.09")
    result = pytester.runpytest(*INNER)
    result.assert_outcomes(passed=2)
    result.stdout.fnmatch_lines(["*0 regressed, 2 improved, 0 new, 0*"])
    # a coarser step: the same bits at a worse distortion fails both tests on the ledger
    (pytester.path / "step.txt").write_text("0.11")
    result = pytester.runpytest(*INNER, "--junitxml=j.xml")
    result.assert_outcomes(failed=2)
    result.stdout.fnmatch_lines(["*RegressionFailure: +0.000% bits, +*% distortion vs ledger*"])
    root = ET.parse(pytester.path / "j.xml").getroot()
    props = {p.get("name"): p.get("value") for p in root.iter("property")}
    assert props["ratefloor.distortion_measure"] in ("mse", "abs")
    assert float(props["ratefloor.gap"]) > 0
    assert "ratefloor.entropy" not in props  # real-valued sources have none
    assert props["ratefloor.tally"].startswith("2 regressed")


def test_error_bound_and_gap_fail_the_test(pytester: pytest.Pytester) -> None:
    pytester.makepyfile(rfquant=CODER, test_rf_lossy=TESTS)
    (pytester.path / "step.txt").write_text("0.5")  # errors up to 0.25 > max_abs 0.05
    result = pytester.runpytest(*INNER)
    result.assert_outcomes(passed=1, failed=1)
    result.stdout.fnmatch_lines(["*ErrorBoundFailure*farther than max_abs=0.05*"])


def test_lossy_plan_validates_each_option() -> None:
    with pytest.raises(ValueError, match="max_gap must be"):
        LossyPlan(max_gap=-1.0)
    with pytest.raises(ValueError, match="rel"):
        LossyPlan.of({"rel": 0.01})
    with pytest.raises(TypeError, match="n must be"):
        LossyPlan(n="many")  # type: ignore[arg-type]
    assert LossyPlan(max_abs=0).max_abs == 0.0


def test_gate_rejects_a_lossless_option_for_a_lossy_codec() -> None:
    from pytest_ratefloor import gate

    codec = LossyCodec(lambda x: b"", lambda d, n: np.zeros(n), name="nothing")
    with pytest.raises(ValueError, match="floor"):
        gate(codec, sources=[sources.gaussian()], floor="entropy")
    with pytest.raises(ValueError, match="gate source gaussian"):
        gate(codec, sources={sources.gaussian(): {"bogus": 1}})


def test_fingerprint_tells_samples_apart() -> None:
    a = sources.gaussian().sample(100, seed=0)
    assert lossy_fingerprint(a) == lossy_fingerprint(a.copy())
    assert lossy_fingerprint(a) != lossy_fingerprint(sources.gaussian().sample(100, seed=1))


def test_rd_panel_of_the_run_plot() -> None:
    from pytest_ratefloor.lossy import measure_lossy

    codec = LossyCodec(lambda x: np.floor(np.asarray(x) / 0.1 + 0.5).astype(np.int16).tobytes(),
                       lambda d, n: np.frombuffer(d, dtype=np.int16)[:n] * 0.1, name="q")
    source = sources.gaussian(1.0)
    m = measure_lossy(codec, source, n=2000, isolate=False)
    case = case_record(m, source, "f")
    series = rd_series([compare(case, None)])
    assert len(series) == 1
    assert series[0].snr
    (point,) = series[0].points
    # SNR = 10 log10(σ²/D) with σ² = 1 (closed form)
    assert point.snr_db == pytest.approx(10 * math.log10(1.0 / m.distortion))
    # the bound is the Gaussian's 6.02 dB per bit: SNR(R) = 20 log10(2) R (Cover & Thomas
    # ch. 10, from memory)
    for rate, snr in series[0].bound:
        assert snr == pytest.approx(20 * math.log10(2) * rate, abs=1e-9)
    assert source_of("gaussian", {"sigma": 1.0}).spec == "gaussian(sigma=1.0)"
    assert source_of("no_such_family", {}) is None
    assert rd_bound(None, "mse", 2.0, 1.0) == []


def test_run_plot_with_lossy_cases(tmp_path: Path) -> None:
    pytest.importorskip("matplotlib")
    from pytest_ratefloor.lossy import measure_lossy
    from pytest_ratefloor.plotting import build_run_figure

    codec = LossyCodec(lambda x: np.floor(np.asarray(x) / 0.2 + 0.5).astype(np.int16).tobytes(),
                       lambda d, n: np.frombuffer(d, dtype=np.int16)[:n] * 0.2, name="q")
    source = sources.gauss_markov(0.9)
    case = case_record(measure_lossy(codec, source, n=2000, isolate=False), source, "f")
    fig = build_run_figure([compare(case, None)])
    gids = {a.get_gid() for ax in fig.axes for a in ax.get_children()}
    assert "bound:gauss_markov(rho=0.9,sigma=1.0)" in gids
    assert "points:q" in gids
    fig.savefig(tmp_path / "p.png")
    assert (tmp_path / "p.png").stat().st_size > 0
