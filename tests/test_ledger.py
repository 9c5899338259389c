"""Unit tests of the rate ledger (ledger.py) with hand-made measurements."""

from __future__ import annotations

import json
import os
import platform
import stat
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest

from pytest_ratefloor import __version__
from pytest_ratefloor.errors import (
    LedgerError,
    NewerLedgerError,
    RegressionFailure,
    SampleMismatchError,
    UnreadableLedgerError,
)
from pytest_ratefloor.ledger import (
    LEDGER_KIND,
    SCHEMA_VERSION,
    Environment,
    Ledger,
    entry_json,
)
from pytest_ratefloor.measurement import CaseKey, Measurement
from pytest_ratefloor.recording import keep_copy, write_atomic
from pytest_ratefloor.verdicts import LedgerRun, compare

# h(0.1) = 0.4689955935892812 bits (binary entropy; cross-checked with scipy below)
H_01 = 0.4689955935892812


def meas(codec: str = "rice", source: str = "bernoulli(p=0.1)", bits: int = 50_000,
         n: int = 100_000, seed: int = 0, fingerprint: str = "f00d", **kw: object) -> Measurement:
    fields: dict[str, object] = dict(
        codec=codec, source=source, n=n, seed=seed, bits=bits, entropy=H_01, floor="entropy",
        floor_bits=H_01 * n, sample_information=H_01 * n, spread=0.001, fingerprint=fingerprint,
    )
    fields.update(kw)
    return Measurement(**fields)  # type: ignore[arg-type]


def test_binary_entropy_constant_matches_scipy() -> None:
    from scipy.stats import entropy

    assert entropy([0.9, 0.1], base=2) == pytest.approx(H_01, rel=1e-15)


def test_layout_is_sorted_indented_and_ends_with_newline(tmp_path: Path) -> None:
    ledger = Ledger(tmp_path / "l.json").merged(
        [meas(codec="zeta", bits=7), meas(codec="alpha", bits=5, codec_version="2.1")]
    )
    text = ledger.dumps()
    assert text.endswith("}\n")
    assert not text.endswith("\n\n")
    doc = json.loads(text)  # stdlib json is the reference parser
    # sorted keys: re-dumping with the stdlib's sort_keys gives the same text
    assert json.dumps(doc, indent=2, sort_keys=True, ensure_ascii=False) + "\n" == text
    assert doc["kind"] == LEDGER_KIND
    assert doc["schema"] == SCHEMA_VERSION
    assert set(doc["recorded_with"]) == {"plugin", "numpy", "python", "platform"}
    labels = list(doc["cases"])
    assert labels == sorted(labels)
    alpha = doc["cases"]["alpha | bernoulli(p=0.1) | n=100000 | seed=0"]
    assert alpha["bits"] == 5
    assert alpha["codec_version"] == "2.1"
    assert alpha["fingerprint"] == "f00d"
    assert alpha["rate"] == 5 / 100_000
    assert alpha["floor"] == "entropy"
    assert alpha["entropy"] == pytest.approx(H_01, rel=1e-11)
    assert "codec_version" not in doc["cases"]["zeta | bernoulli(p=0.1) | n=100000 | seed=0"]
    # one case is one block of lines: every field on its own line
    assert text.count('"bits":') == 2


def test_dump_is_independent_of_insertion_order(tmp_path: Path) -> None:
    ms = [meas(codec=c, bits=b, seed=s) for c, b, s in [("b", 1, 0), ("a", 2, 3), ("a", 3, 1)]]
    one = Ledger(tmp_path / "l.json").merged(ms).dumps()
    two = Ledger(tmp_path / "l.json").merged(reversed(ms)).dumps()
    assert one == two


def test_figures_are_rounded_to_12_significant_digits(tmp_path: Path) -> None:
    entry = entry_json(meas(bits=1, n=3))
    assert entry["rate"] == float("0.333333333333")  # 1/3 to 12 significant digits
    # the recorded form is what loading gives back: rounding it again changes nothing
    recorded = meas(bits=1, n=3).recorded()
    assert entry_json(recorded) == entry
    assert recorded.recorded() == recorded


def test_environment_names_versions_and_platform() -> None:
    env = Environment.current()
    assert env.plugin == __version__
    assert env.numpy == np.__version__
    assert env.python == platform.python_version()
    assert env.platform == f"{platform.system()}-{platform.machine()}"


def test_round_trip_through_file(tmp_path: Path) -> None:
    path = tmp_path / "ledger.json"
    ledger = Ledger(path).merged([meas(bits=11, codec_version="1"), meas(codec="x", n=7)])
    ledger.write()
    again = Ledger.load(path)
    assert again.exists
    assert again.entries == ledger.entries
    assert again.dumps() == path.read_text(encoding="utf-8")


def test_missing_file_is_an_empty_ledger(tmp_path: Path) -> None:
    ledger = Ledger.load(tmp_path / "absent.json")
    assert ledger.entries == {}
    assert not ledger.exists


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("{not json", "not valid JSON"),
        ("", "truncated"),
        ("[1, 2]", "not a pytest-ratefloor ledger"),
        ('{"kind": "something else", "schema": 1, "cases": {}}', "not a pytest-ratefloor ledger"),
        (f'{{"kind": "{LEDGER_KIND}", "schema": "1", "cases": {{}}}}', "bad schema version"),
        (f'{{"kind": "{LEDGER_KIND}", "schema": 1}}', "'cases' is missing"),
        (f'{{"kind": "{LEDGER_KIND}", "schema": 1, "cases": {{"x": 3}}}}', "case 'x'"),
    ],
)
def test_unreadable_ledgers_name_the_file(tmp_path: Path, text: str, fragment: str) -> None:
    path = tmp_path / "bad.json"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(UnreadableLedgerError, match=r"bad\.json") as info:
        Ledger.load(path)
    assert fragment in str(info.value)
    assert path.read_text(encoding="utf-8") == text  # never repaired behind the user's back


def test_truncated_ledger_is_called_truncated(tmp_path: Path) -> None:
    path = tmp_path / "ledger.json"
    Ledger(path).merged([meas(), meas(codec="b")]).write()
    full = path.read_bytes()
    path.write_bytes(full[: len(full) // 2])
    with pytest.raises(UnreadableLedgerError, match=r"ledger\.json.*truncated"):
        Ledger.load(path)


def test_bad_entry_fields_are_named(tmp_path: Path) -> None:
    path = tmp_path / "ledger.json"
    Ledger(path).merged([meas()]).write()
    doc = json.loads(path.read_text())
    label = next(iter(doc["cases"]))
    doc["cases"][label]["bits"] = True  # a bool is not a bit count
    path.write_text(json.dumps(doc))
    with pytest.raises(UnreadableLedgerError, match="bad 'bits'"):
        Ledger.load(path)
    doc["cases"][label]["bits"] = 5
    doc["cases"]["renamed"] = doc["cases"].pop(label)
    path.write_text(json.dumps(doc))
    with pytest.raises(UnreadableLedgerError, match="does not match its fields"):
        Ledger.load(path)


def test_newer_schema_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "ledger.json"
    path.write_text(json.dumps({"kind": LEDGER_KIND, "schema": SCHEMA_VERSION + 1, "cases": {}}))
    with pytest.raises(NewerLedgerError, match=r"schema 2 is newer.*upgrade"):
        Ledger.load(path)
    assert issubclass(NewerLedgerError, LedgerError)


def test_merge_keeps_unmeasured_entries(tmp_path: Path) -> None:
    old = Ledger(tmp_path / "l.json").merged([meas(codec="a", bits=10), meas(codec="b", bits=20)])
    new = old.merged([meas(codec="a", bits=9), meas(codec="c", bits=30)])
    assert {k[0]: e.bits for k, e in new.entries.items()} == {"a": 9, "b": 20, "c": 30}


# -- comparison ---------------------------------------------------------------------


def entry(bits: int, fingerprint: str = "f00d") -> Measurement:
    return meas(bits=bits, fingerprint=fingerprint).recorded()


@pytest.mark.parametrize(
    ("bits", "ledger_bits", "slack", "status"),
    [
        (1000, 1000, 0.0, "unchanged"),
        (999, 1000, 0.0, "improved"),
        (1001, 1000, 0.0, "regressed"),
        (1010, 1000, 0.01, "within-slack"),  # exactly ledger·(1+slack) is allowed
        (1011, 1000, 0.01, "regressed"),
        (0, 0, 0.0, "unchanged"),
        (1, 0, 0.5, "regressed"),
    ],
)
def test_compare(bits: int, ledger_bits: int, slack: float, status: str) -> None:
    verdict = compare(meas(bits=bits), entry(ledger_bits), slack)
    assert verdict.status == status
    assert verdict.delta_bits == bits - ledger_bits


def test_delta_percent_matches_exact_fraction() -> None:
    verdict = compare(meas(bits=1011), entry(1000), 0.0)
    # exact rational reference: (1011 − 1000) / 1000 = 11/10 %
    assert verdict.delta_pct == pytest.approx(float(Fraction(11, 1000) * 100), rel=1e-15)


def test_new_and_resampled() -> None:
    assert compare(meas(), None, 0.0).status == "new"
    assert compare(meas(fingerprint="aaaa"), entry(50_000, "bbbb"), 0.0).status == "resampled"
    # an entry without a fingerprint (hand-written) is compared on bits alone
    assert compare(meas(fingerprint="aaaa"), entry(50_000, ""), 0.0).status == "unchanged"


def test_regression_message_carries_everything(tmp_path: Path) -> None:
    base = Ledger(tmp_path / "ratefloor-ledger.json").merged([meas(bits=1000)])
    run = LedgerRun(baseline=base, slack=0.0)
    with pytest.raises(RegressionFailure) as info:
        run.admit(meas(bits=1011), nodeid="tests/test_x.py::test_y[bernoulli(p=0.1)]")
    text = str(info.value)
    assert "1,011 bits" in text
    assert "1,000 bits" in text
    assert "+11 bits" in text
    assert "+1.100%" in text
    assert str(tmp_path / "ratefloor-ledger.json") in text
    assert "pytest --ratefloor-record 'tests/test_x.py::test_y[bernoulli(p=0.1)]'" in text
    assert isinstance(info.value, AssertionError)


def test_resampled_case_is_an_error_not_a_silent_comparison(tmp_path: Path) -> None:
    base = Ledger(tmp_path / "l.json").merged([meas(bits=1000, fingerprint="aaaa")])
    run = LedgerRun(baseline=base)
    with pytest.raises(SampleMismatchError, match=r"different sample.*aaaa.*bbbb(.|\n)*re-record"):
        run.admit(meas(bits=900, fingerprint="bbbb"))


def test_recording_does_not_enforce(tmp_path: Path) -> None:
    base = Ledger(tmp_path / "l.json").merged([meas(bits=1000, fingerprint="aaaa")])
    run = LedgerRun(baseline=base, record=True)
    assert run.admit(meas(bits=2000)).status == "resampled"
    assert run.admit(meas(codec="q", bits=2000)).status == "new"


def test_per_case_slack_overrides_the_run_slack(tmp_path: Path) -> None:
    base = Ledger(tmp_path / "l.json").merged([meas(bits=1000)])
    run = LedgerRun(baseline=base, slack=0.0)
    assert run.admit(meas(bits=1050), slack=0.05).status == "within-slack"
    assert run.sorted_comparisons()[0].status == "within-slack"


def test_conflicting_duplicates_are_an_error(tmp_path: Path) -> None:
    run = LedgerRun(baseline=Ledger(tmp_path / "l.json"))
    run.observe(meas(bits=10))
    run.observe(meas(bits=10))  # the same figure twice is fine
    with pytest.raises(LedgerError, match="disagree"):
        run.observe(meas(bits=11))
    assert len(run.conflicts) == 1


def test_stale_only_in_a_full_run(tmp_path: Path) -> None:
    base = Ledger(tmp_path / "l.json").merged([meas(codec="a"), meas(codec="b")])
    run = LedgerRun(baseline=base)
    run.observe(meas(codec="a"))
    assert [e.codec for e in run.stale()] == ["b"]
    assert run.counts()["stale"] == 1
    assert run.counts()["unchanged"] == 1
    run.partial_reasons.append("-k")
    assert run.stale() == []


def test_payload_is_plain_data_for_execnet_and_absorbs_to_the_same_run(tmp_path: Path) -> None:
    base = Ledger(tmp_path / "l.json").merged([meas(codec="a", bits=100)])
    worker = LedgerRun(baseline=base)
    worker.observe(meas(codec="a", bits=np.int64(99), entropy=np.float64(H_01)), slack=0.1)
    worker.observe(meas(codec="b", bits=7))
    worker.partial_reasons.append("-k")
    payload = worker.payload()
    execnet = pytest.importorskip("execnet")  # installed with pytest-xdist
    # execnet's own serializer is the reference: it rejects numpy scalars (notes §8)
    shipped = execnet.loads(execnet.dumps(payload))
    controller = LedgerRun(baseline=base)
    controller.absorb(shipped)
    assert controller.recorded().dumps() == worker.recorded().dumps()
    assert [c.status for c in controller.sorted_comparisons()] == ["improved", "new"]
    assert controller.slack_for(meas(codec="a").key) == 0.1
    assert controller.partial_reasons == ["-k"]


def test_absorb_collects_conflicts_between_workers(tmp_path: Path) -> None:
    base = Ledger(tmp_path / "l.json")
    one, two = LedgerRun(baseline=base), LedgerRun(baseline=base)
    one.observe(meas(bits=10))
    two.observe(meas(bits=12))
    controller = LedgerRun(baseline=base)
    controller.absorb(one.payload())
    controller.absorb(two.payload())
    assert len(controller.conflicts) == 1


# -- atomic writing ---------------------------------------------------------------------


def test_write_atomic_keeps_mode_and_leaves_no_temporary(tmp_path: Path) -> None:
    path = tmp_path / "ledger.json"
    path.write_text("old\n")
    os.chmod(path, 0o644)
    write_atomic(path, "new\n")
    assert path.read_text() == "new\n"
    assert stat.S_IMODE(path.stat().st_mode) == 0o644
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ledger.json"]


def test_write_atomic_new_file_gets_umask_mode(tmp_path: Path) -> None:
    path = tmp_path / "sub" / "ledger.json"
    write_atomic(path, "x\n")
    umask = os.umask(0)
    os.umask(umask)
    assert stat.S_IMODE(path.stat().st_mode) == 0o666 & ~umask  # not mkstemp's 0600


@pytest.mark.parametrize("where", ["os.replace", "os.fsync"])
def test_failing_write_leaves_old_ledger_intact(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                where: str) -> None:
    path = tmp_path / "ledger.json"
    old = Ledger(path).merged([meas(bits=1)])
    old.write()
    before = path.read_bytes()

    def killed(*args: object, **kwargs: object) -> None:
        raise KeyboardInterrupt  # as if the run were killed mid-write

    monkeypatch.setattr(os, where.split(".")[1], killed)
    with pytest.raises(KeyboardInterrupt):
        old.merged([meas(bits=2), meas(codec="z")]).write()
    monkeypatch.undo()
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ledger.json"]


def test_keep_copy_numbers_existing_copies(tmp_path: Path) -> None:
    path = tmp_path / "ledger.json"
    path.write_text("garbage")
    first = keep_copy(path)
    second = keep_copy(path)
    assert first.name == "ledger.json.unreadable"
    assert second.name == "ledger.json.unreadable.1"
    assert path.read_text() == first.read_text() == second.read_text() == "garbage"


def test_case_label() -> None:
    key = CaseKey("c", "uniform(k=4)", 10, 2)
    assert key.label == "c | uniform(k=4) | n=10 | seed=2"
    assert key.phrase == "codec 'c' on uniform(k=4), n=10, seed=2"
    assert meas(codec="c", source="uniform(k=4)", n=10, seed=2).key == key
