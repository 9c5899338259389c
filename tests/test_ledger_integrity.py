"""The ledger file under stress: strict and bounded reading, safe concurrent recording.

Each reading test reproduces one bad file and expects one ``UnreadableLedgerError``
whose message is one line naming the file (and the case and field). The writing
tests run real processes against one ledger, kill a writer mid-write, and write
through symlinks.
"""

from __future__ import annotations

import contextlib
import json
import os
import random
import subprocess
import sys
import threading
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

from pytest_ratefloor import ledger as ledger_module
from pytest_ratefloor import recording as recording_module
from pytest_ratefloor.errors import LedgerError, NewerLedgerError, UnreadableLedgerError
from pytest_ratefloor.ledger import LEDGER_KIND, Environment, Ledger
from pytest_ratefloor.measurement import Measurement
from pytest_ratefloor.recording import (
    clean_stale_temporaries,
    ledger_lock,
    lock_path,
    record,
    stale_temporaries,
    write_atomic,
)
from pytest_ratefloor.verdicts import compare, listed

ROOT = Path(__file__).resolve().parents[1]
ENV = Environment(plugin="0.test", numpy="0.test", python="3.test", platform="Test-x")
LABEL = "rice | bernoulli(p=0.1) | n=1000 | seed=0"
# the largest count a ledger holds: a signed 64-bit integer (two's complement, common practice)
COUNT_MAX = 2**63 - 1


def case(codec: str = "rice", bits: int = 480, n: int = 1000, seed: int = 0) -> Measurement:
    return Measurement(codec=codec, source="bernoulli(p=0.1)", n=n, seed=seed, bits=bits,
                       entropy=0.4689955935892812, floor="entropy",
                       floor_bits=0.4689955935892812 * n, fingerprint="f00d")


def good_doc() -> dict[str, Any]:
    doc: dict[str, Any] = json.loads(Ledger(Path("x")).merged([case()], ENV).dumps())
    return doc


def refused(path: Path, data: bytes | str, *fragments: str) -> str:
    """Write ``data``, load it, and return the one-line message that must name the file."""
    if isinstance(data, str):
        data = data.encode("utf-8")
    path.write_bytes(data)
    with pytest.raises(UnreadableLedgerError) as info:
        Ledger.load(path)
    text = str(info.value)
    assert str(path) in text
    assert "\n" not in text
    assert len(text) < 600  # one readable line, whatever the file holds
    for fragment in fragments:
        assert fragment in text, text
    assert path.read_bytes() == data  # never repaired behind the user's back
    return text


def with_case_field(name: str, value: Any) -> dict[str, Any]:
    doc = good_doc()
    doc["cases"][LABEL][name] = value
    return doc


def with_literal(name: str, literal: str) -> str:
    """A good ledger's text with the case field ``name`` spelled ``literal`` (raw JSON)."""
    text = json.dumps(with_case_field(name, "@placeholder@"))
    return text.replace('"@placeholder@"', literal)


def showable(ledger: Ledger) -> None:
    """Everything that shows or compares a loaded ledger runs without an exception."""
    from pytest_ratefloor.cli import show

    for entry in ledger.entries.values():
        for figure in (float(entry.bits), entry.rate, entry.floor_rate, entry.excess,
                       entry.efficiency, entry.entropy):
            format(figure, ",.4f")
        comparison = compare(entry, entry, 0.01)
        assert comparison.status == "unchanged"
        assert listed(entry).case is entry
    show(ledger, "md")
    show(ledger, "json")
    again = Ledger.parse(ledger.dumps(), ledger.path)
    assert again.entries.keys() == ledger.entries.keys()


def finishes(action: Callable[[], object], seconds: float = 10.0) -> BaseException | None:
    """Run ``action`` in a thread; fail if it is still running after ``seconds``."""
    outcome: list[BaseException | None] = []

    def run() -> None:
        try:
            action()
        except BaseException as exc:
            outcome.append(exc)
        else:
            outcome.append(None)

    worker = threading.Thread(target=run, daemon=True)
    worker.start()
    worker.join(seconds)
    assert not worker.is_alive(), f"still blocked after {seconds} s"
    return outcome[0]


# -- duplicate names (RFC 8259 §4: names within an object should be unique) ---------------


def test_duplicated_schema_key_is_refused(tmp_path: Path) -> None:
    text = json.dumps(good_doc())
    text = text.replace('"schema": 1', '"schema": 1, "schema": 2')
    refused(tmp_path / "l.json", text, "'schema' appears more than once at the top level",
            "RFC 8259")


def test_duplicated_case_label_is_refused(tmp_path: Path) -> None:
    doc = good_doc()
    body = json.dumps(doc["cases"][LABEL])
    doc["cases"] = {}
    text = json.dumps(doc).replace('"cases": {}',
                                   f'"cases": {{"{LABEL}": {body}, "{LABEL}": {body}}}')
    refused(tmp_path / "l.json", text, f"the case '{LABEL}' appears more than once")


def test_duplicated_field_is_refused(tmp_path: Path) -> None:
    text = json.dumps(good_doc()).replace('"bits": 480', '"bits": 480, "bits": 479')
    refused(tmp_path / "l.json", text, f"case '{LABEL}' has the field 'bits' more than once")


def test_duplicated_key_in_the_environment_block_is_refused(tmp_path: Path) -> None:
    text = json.dumps(good_doc()).replace('"numpy": "0.test"',
                                          '"numpy": "0.test", "numpy": "0.test"')
    refused(tmp_path / "l.json", text, "'numpy' appears more than once in 'recorded_with'")


# -- numbers ----------------------------------------------------------------------------


@pytest.mark.parametrize("constant", ["NaN", "Infinity", "-Infinity"])
def test_nan_and_infinity_are_refused(tmp_path: Path, constant: str) -> None:
    # RFC 8259 §6: "Numeric values that cannot be represented ... (such as Infinity and NaN)
    # are not permitted"; Python's json accepts them unless told otherwise
    refused(tmp_path / "l.json", with_literal("entropy", constant),
            f"{constant} is not a JSON number")


def test_a_literal_that_overflows_a_double_is_refused(tmp_path: Path) -> None:
    # 1e999 exceeds the largest IEEE 754 double (about 1.8e308): Python parses it as inf
    refused(tmp_path / "l.json", with_literal("entropy", "1e999"), "bad 'entropy'",
            "finite number")


@pytest.mark.parametrize(
    ("literal", "why"),
    [
        (str(10**400), "an integer of 1329 bits"),  # 10**400 needs ⌈400·log2 10⌉ = 1329 bits
        (str(2**63), str(2**63)),  # one past the signed 64-bit range (common practice)
        ("-1", "-1"),
        ("1.0", "1.0"),  # a float is not a count, even an integral one
        ("true", "True"),  # bool is an int in Python; in a ledger it is corruption
    ],
)
def test_bad_bit_counts_are_refused(tmp_path: Path, literal: str, why: str) -> None:
    refused(tmp_path / "l.json", with_literal("bits", literal),
            f"case '{LABEL}' has a bad 'bits': {why}", "0 <= bits < 2**63")


def test_the_largest_counts_load_and_show(tmp_path: Path) -> None:
    path = tmp_path / "l.json"
    label = f"rice | bernoulli(p=0.1) | n={COUNT_MAX} | seed={COUNT_MAX}"
    doc = good_doc()
    entry = doc["cases"].pop(LABEL)
    entry.update(bits=COUNT_MAX, n=COUNT_MAX, seed=COUNT_MAX)
    doc["cases"][label] = entry
    path.write_text(json.dumps(doc))
    ledger = Ledger.load(path)
    assert next(iter(ledger.entries.values())).bits == COUNT_MAX
    showable(ledger)


def test_a_case_of_zero_symbols_is_refused(tmp_path: Path) -> None:
    # n = 0 made 'ratefloor show' divide by zero; a ledger case always encodes n >= 1 symbols
    doc = good_doc()
    entry = doc["cases"].pop(LABEL)
    entry["n"] = 0
    doc["cases"]["rice | bernoulli(p=0.1) | n=0 | seed=0"] = entry
    refused(tmp_path / "l.json", json.dumps(doc), "bad 'n': 0", "1 <= n < 2**63")


@pytest.mark.parametrize(
    ("name", "value", "fragment"),
    [
        ("codec", 5, "bad 'codec': 5 (must be a non-empty string"),
        ("source", "", "bad 'source': ''"),
        ("floor", "magic", "unknown 'floor': 'magic'; known: entropy, sample"),
        ("fingerprint", None, "bad 'fingerprint': None"),
        ("codec_version", 2, "bad 'codec_version': 2"),
        ("entropy", "0.5", "bad 'entropy': '0.5' (must be a finite number >= 0)"),
        ("floor_rate", -0.5, "bad 'floor_rate': -0.5"),
        ("rate", True, "bad 'rate': True"),
        ("seed", -3, "bad 'seed': -3"),
    ],
)
def test_wrong_typed_fields_are_refused(tmp_path: Path, name: str, value: Any,
                                        fragment: str) -> None:
    refused(tmp_path / "l.json", json.dumps(with_case_field(name, value)), fragment)


def test_text_that_cannot_be_written_back_is_refused(tmp_path: Path) -> None:
    # a lone surrogate escape is valid JSON syntax but not UTF-8 text (RFC 8259 §8.2)
    doc = good_doc()
    entry = doc["cases"].pop(LABEL)
    entry["codec"] = "\ud800"
    doc["cases"]["\ud800 | bernoulli(p=0.1) | n=1000 | seed=0"] = entry
    refused(tmp_path / "l.json", json.dumps(doc), "bad 'codec'")


def test_a_floor_rate_that_overflows_with_n_is_refused(tmp_path: Path) -> None:
    # 1e300 · 1e18 exceeds the largest double (about 1.8e308, IEEE 754)
    doc = good_doc()
    entry = doc["cases"].pop(LABEL)
    entry.update(n=10**18, floor_rate=1e300)
    doc["cases"][f"rice | bernoulli(p=0.1) | n={10**18} | seed=0"] = entry
    refused(tmp_path / "l.json", json.dumps(doc), "floor_rate * n overflows")


def test_a_long_case_label_is_named_in_full(tmp_path: Path) -> None:
    source = "categorical(probs=[0.31,0.27,0.18,0.11,0.065,0.035,0.02,0.01])"
    label = f"kelpwick-seastate-huffman | {source} | n=100000 | seed=0"
    doc = good_doc()
    entry = doc["cases"].pop(LABEL)
    entry.update(codec="kelpwick-seastate-huffman", source=source, n=100_000, bits=-1)
    doc["cases"][label] = entry
    refused(tmp_path / "l.json", json.dumps(doc), f"case '{label}' has a bad 'bits': -1")


def test_the_module_and_an_empty_ledger_import_no_numpy(tmp_path: Path) -> None:
    # pytest loads the ledger at start-up; only a ledger with cases needs the floor names
    (tmp_path / "empty.json").write_text(json.dumps({**good_doc(), "cases": {}}))
    code = ("import sys; from pathlib import Path; from pytest_ratefloor.ledger import Ledger; "
            f"Ledger.load(Path({str(tmp_path / 'empty.json')!r})); "
            f"Ledger.load(Path({str(tmp_path / 'absent.json')!r})); "
            "print('numpy' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, cwd=ROOT).stdout
    assert out.strip() == "False"


# -- layout -----------------------------------------------------------------------------


def test_an_unknown_case_field_is_refused(tmp_path: Path) -> None:
    refused(tmp_path / "l.json", json.dumps(with_case_field("bitz", 3)),
            f"case '{LABEL}' has an unknown field 'bitz'; schema 1 has: bits, codec,")


def test_an_unknown_top_level_key_is_refused(tmp_path: Path) -> None:
    doc = good_doc()
    doc["comment"] = "hello"
    refused(tmp_path / "l.json", json.dumps(doc),
            "unknown field 'comment'; schema 1 has: cases, kind, note, recorded_with, schema")


def test_an_unknown_key_of_the_environment_block_is_refused(tmp_path: Path) -> None:
    doc = good_doc()
    doc["recorded_with"]["kernel"] = "6.1"
    refused(tmp_path / "l.json", json.dumps(doc), "'recorded_with' is not a well-formed block")


def test_a_newer_schema_is_reported_before_its_unknown_keys(tmp_path: Path) -> None:
    doc = good_doc()
    doc.update(schema=2, layout="v2")
    path = tmp_path / "l.json"
    path.write_text(json.dumps(doc))
    with pytest.raises(NewerLedgerError, match="schema 2 is newer"):
        Ledger.load(path)


def test_note_and_missing_environment_keep_their_meaning(tmp_path: Path) -> None:
    doc = good_doc()
    doc["note"] = "anything a person wrote"
    del doc["recorded_with"]
    path = tmp_path / "l.json"
    path.write_text(json.dumps(doc))
    ledger = Ledger.load(path)
    assert ledger.environment is None
    assert len(ledger.entries) == 1
    refused(path, json.dumps({**doc, "note": 3}), "'note' is not a string")


# -- what the file is, and how big ---------------------------------------------------------


def test_a_directory_is_refused(tmp_path: Path) -> None:
    folder = tmp_path / "ledger.json"
    folder.mkdir()
    with pytest.raises(UnreadableLedgerError, match=r"ledger\.json: is a directory, not a"):
        Ledger.load(folder)


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs named pipes")
def test_a_fifo_is_refused_without_blocking(tmp_path: Path) -> None:
    fifo = tmp_path / "ledger.json"
    os.mkfifo(fifo)
    try:
        error = finishes(lambda: Ledger.load(fifo))
    finally:  # unblock a reader stuck in open(), should there be one
        with contextlib.suppress(OSError):
            os.close(os.open(fifo, os.O_WRONLY | os.O_NONBLOCK))
    assert isinstance(error, UnreadableLedgerError)
    assert str(error) == f"{fifo}: is a FIFO, not a ledger file"


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs named pipes")
def test_a_fifo_swapped_in_after_the_first_check_is_caught(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    fifo, regular = tmp_path / "ledger.json", tmp_path / "other.json"
    os.mkfifo(fifo)
    regular.write_text("{}")
    real_stat = os.stat

    def stat_sees_a_file(path: Any, *args: Any, **kwargs: Any) -> os.stat_result:
        return real_stat(regular if Path(path) == fifo else path, *args, **kwargs)

    monkeypatch.setattr(os, "stat", stat_sees_a_file)
    error = finishes(lambda: Ledger.load(fifo))
    monkeypatch.undo()
    assert isinstance(error, UnreadableLedgerError)
    assert "is a FIFO" in str(error)


@pytest.mark.skipif(not Path("/dev/zero").exists(), reason="no /dev/zero")
def test_dev_zero_is_refused_without_reading() -> None:
    error = finishes(lambda: Ledger.load(Path("/dev/zero")))
    assert isinstance(error, UnreadableLedgerError)
    assert str(error) == "/dev/zero: is a character device, not a ledger file"


def test_an_oversized_file_is_refused(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(ledger_module, "MAX_LEDGER_BYTES", 100)
    refused(tmp_path / "l.json", b" " * 200, "is 200 bytes, over the ledger size limit of 100")


def test_a_file_exactly_at_the_limit_is_read(tmp_path: Path,
                                             monkeypatch: pytest.MonkeyPatch) -> None:
    path = tmp_path / "l.json"
    path.write_text(json.dumps(good_doc()))
    monkeypatch.setattr(ledger_module, "MAX_LEDGER_BYTES", path.stat().st_size)
    assert len(Ledger.load(path).entries) == 1


@pytest.mark.skipif(not Path("/proc/self/status").exists(), reason="no procfs")
def test_reading_stops_past_the_limit_when_stat_reports_no_size(
        monkeypatch: pytest.MonkeyPatch) -> None:
    # procfs files report st_size 0 (proc(5)) yet hold hundreds of bytes: only the read bound
    # can refuse them
    status = Path("/proc/self/status")
    assert status.stat().st_size == 0
    monkeypatch.setattr(ledger_module, "MAX_LEDGER_BYTES", 16)
    with pytest.raises(UnreadableLedgerError, match="more than 16 bytes, over the ledger size"):
        Ledger.load(status)


def test_two_hundred_thousand_open_brackets(tmp_path: Path) -> None:
    # 200,000 levels is far beyond CPython's default recursion limit of 1000
    # (sys.getrecursionlimit)
    refused(tmp_path / "l.json", b"[" * 200_000, "nested too deeply")


# -- any bytes at all ----------------------------------------------------------------------

HOSTILE: dict[str, bytes] = {
    "open brackets": b"[" * 200_000,
    "open objects": b'{"a":' * 100_000,
    "closed deep nest": b"[" * 5_000 + b"]" * 5_000,
    # CPython's default limit of integer digits is 4300 (sys.int_info.default_max_str_digits)
    "huge integer": b"9" * 100_000,
    "huge negative integer": b"-" + b"9" * 5_000,
    "huge integer as bits": with_literal("bits", "9" * 5_000).encode(),
    "long float": b"0." + b"1" * 100_000,
    "invalid UTF-8": b'{"kind": "\xc3\x28"}',
    "UTF-16": json.dumps(good_doc()).encode("utf-16"),
    "byte order mark": b"\xef\xbb\xbf" + json.dumps(good_doc()).encode(),
    "empty": b"",
    "whitespace": b" \n\t ",
    "NUL": b"\x00",
    "null": b"null",
    "number": b"0",
    "string": b'"pytest-ratefloor rate ledger"',
    "list": b"[]",
    "object": b"{}",
    "cases as a list": json.dumps({**good_doc(), "cases": []}).encode(),
    "case as a list": json.dumps({**good_doc(), "cases": {LABEL: [1, 2]}}).encode(),
    "schema huge": json.dumps({**good_doc(), "schema": -(10**300)}).encode(),
    "schema float": json.dumps({**good_doc(), "schema": 1.0}).encode(),
    "lone surrogate key": b'{"\\udc00": 1}',
    "environment null fields": json.dumps(
        {**good_doc(), "recorded_with": dict.fromkeys(("plugin", "numpy", "python",
                                                       "platform"))}).encode(),
    "truncated": json.dumps(good_doc()).encode()[:-7],
}


@pytest.mark.parametrize("name", list(HOSTILE))
def test_hostile_bytes_give_one_unreadable_ledger_error(tmp_path: Path, name: str) -> None:
    refused(tmp_path / "l.json", HOSTILE[name])


def test_parse_refuses_hostile_text_the_same_way() -> None:
    for data in HOSTILE.values():
        text = data.decode("utf-8", errors="surrogateescape")
        with pytest.raises(UnreadableLedgerError, match=r"^where\.json: "):
            Ledger.parse(text, Path("where.json"))


def test_mutated_ledgers_either_load_and_show_or_are_refused(tmp_path: Path) -> None:
    """Random damage to a good file: every variant loads (and can be shown) or is refused."""
    path = tmp_path / "l.json"
    base = Ledger(path).merged([case(), case("zeta", bits=0, seed=9)], ENV).dumps().encode()
    alphabet = b'{}[]":,.-+eE0123456789 \\untrfalsNI\x00\xff'
    rng = random.Random(20240917)  # fixed seed: the same variants on every run
    loaded, messages = 0, []
    for _ in range(400):
        data = bytearray(base)
        for _ in range(rng.randint(1, 3)):
            at = rng.randrange(len(data))
            action = rng.randrange(3)
            if action == 0:
                data[at] = rng.choice(alphabet)
            elif action == 1:
                del data[at]
            else:
                data.insert(at, rng.choice(alphabet))
        path.write_bytes(bytes(data))
        try:
            ledger = Ledger.load(path)
        except (UnreadableLedgerError, NewerLedgerError) as exc:
            messages.append(str(exc))
        else:
            showable(ledger)
            loaded += 1
    assert loaded  # both kinds occurred: the test saw each path
    assert messages
    assert all("\n" not in text for text in messages)


@pytest.mark.parametrize(
    ("name", "value"),
    [("bits", 0), ("bits", COUNT_MAX), ("entropy", 1.7e308), ("floor_rate", 5e-324),
     ("floor_rate", 1e300), ("rate", 0.0), ("entropy", -0.0)],  # IEEE 754 extremes
)
def test_extreme_but_valid_figures_load_and_show(tmp_path: Path, name: str,
                                                 value: float) -> None:
    path = tmp_path / "l.json"
    path.write_text(json.dumps(with_case_field(name, value)))
    ledger = Ledger.load(path)
    showable(ledger)
    assert str(next(iter(ledger.entries.values())).entropy) != "-0.0"


# -- recording ----------------------------------------------------------------------------


def listing(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir())


def test_record_merges_with_the_file_as_it_is_now(tmp_path: Path) -> None:
    path = tmp_path / "ratefloor-ledger.json"
    record(path, [case("a", bits=10), case("b", bits=20)], environment=ENV)
    outcome = record(path, [case("a", bits=9), case("c", bits=30)], environment=ENV)
    bits = {k.codec: e.bits for k, e in Ledger.load(path).entries.items()}
    assert bits == {"a": 9, "b": 20, "c": 30}
    assert outcome.target == path.resolve()
    assert outcome.ledger.exists
    assert outcome.unreadable_copy is None
    assert outcome.ledger.dumps() == path.read_text(encoding="utf-8")
    assert listing(tmp_path) == ["ratefloor-ledger.json"]  # no lock, no temporary


def test_record_refuses_an_unreadable_file_and_leaves_it(tmp_path: Path) -> None:
    path = tmp_path / "ratefloor-ledger.json"
    path.write_text('{"kind": ')
    with pytest.raises(UnreadableLedgerError, match="truncated"):
        record(path, [case()], environment=ENV)
    assert path.read_text() == '{"kind": '
    assert listing(tmp_path) == ["ratefloor-ledger.json"]  # the lock was released


def test_record_replaces_an_unreadable_file_keeping_a_copy(tmp_path: Path) -> None:
    path = tmp_path / "ratefloor-ledger.json"
    path.write_text('{"kind": ')
    outcome = record(path, [case()], replace_unreadable=True, environment=ENV)
    assert outcome.unreadable_copy == tmp_path / "ratefloor-ledger.json.unreadable"
    assert outcome.unreadable_copy.read_text() == '{"kind": '
    assert [k.codec for k in Ledger.load(path).entries] == ["rice"]


def test_record_never_replaces_a_directory_or_a_newer_ledger(tmp_path: Path) -> None:
    folder = tmp_path / "a.json"
    folder.mkdir()
    with pytest.raises(UnreadableLedgerError, match="is a directory"):
        record(folder, [case()], replace_unreadable=True, environment=ENV)
    newer = tmp_path / "b.json"
    newer.write_text(json.dumps({"kind": LEDGER_KIND, "schema": 2, "cases": {}}))
    with pytest.raises(NewerLedgerError):
        record(newer, [case()], replace_unreadable=True, environment=ENV)
    assert listing(tmp_path) == ["a.json", "b.json"]


def test_record_writes_through_a_symlink(tmp_path: Path) -> None:
    store = tmp_path / "store"
    store.mkdir()
    target, link = store / "ledger.json", tmp_path / "ratefloor-ledger.json"
    link.symlink_to(target)  # dangling until the first recording
    record(link, [case("a")], environment=ENV)
    outcome = record(link, [case("b")], environment=ENV)
    assert link.is_symlink()
    assert os.readlink(link) == str(target)
    assert outcome.target == target.resolve()
    assert sorted(k.codec for k in Ledger.load(target).entries) == ["a", "b"]
    assert listing(store) == ["ledger.json"]
    assert listing(tmp_path) == ["ratefloor-ledger.json", "store"]


def test_write_and_write_atomic_go_through_a_symlink(tmp_path: Path) -> None:
    target, link = tmp_path / "real.json", tmp_path / "link.json"
    target.write_text("old\n")
    link.symlink_to(target.name)
    write_atomic(link, "new\n")
    assert link.is_symlink()
    assert target.read_text() == "new\n"
    Ledger(link).merged([case()], ENV).write()
    assert link.is_symlink()
    assert len(Ledger.load(target).entries) == 1
    assert listing(tmp_path) == ["link.json", "real.json"]


def test_a_held_lock_times_out_naming_the_lock_file_and_holder(tmp_path: Path) -> None:
    path = tmp_path / "ratefloor-ledger.json"
    # flock locks belong to an open file: the same process waits too
    with ledger_lock(path), pytest.raises(LedgerError) as info:
        record(path, [case()], environment=ENV, lock_timeout=0.1)
    text = str(info.value)
    assert str(lock_path(path)) in text
    assert f"locked by process {os.getpid()}" in text
    assert not path.exists()
    assert listing(tmp_path) == []


def test_a_lock_file_left_by_a_dead_process_does_not_block(tmp_path: Path) -> None:
    path = tmp_path / "ratefloor-ledger.json"
    lock_path(path).write_text("999999\n")  # nobody holds an flock on it
    record(path, [case()], environment=ENV, lock_timeout=5)
    assert listing(tmp_path) == ["ratefloor-ledger.json"]


def test_a_lock_file_removed_under_a_waiter_is_not_trusted(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # the protocol: after flock, the path must still name the locked file, else retry
    path = tmp_path / "ratefloor-ledger.json"
    lock = lock_path(path)
    real_stat, calls = os.stat, list[Any]()

    def vanished_once(p: Any, *args: Any, **kwargs: Any) -> os.stat_result:
        if Path(p) == lock and not calls:
            calls.append(p)
            raise FileNotFoundError(p)
        return real_stat(p, *args, **kwargs)

    monkeypatch.setattr(os, "stat", vanished_once)
    record(path, [case()], environment=ENV, lock_timeout=5)
    monkeypatch.undo()
    assert calls == [lock]
    assert listing(tmp_path) == ["ratefloor-ledger.json"]


def test_lock_files_without_fcntl(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # where fcntl is missing (Windows) the lock is an exclusively created file
    monkeypatch.setattr(recording_module, "_fcntl", None)
    path = tmp_path / "ratefloor-ledger.json"
    record(path, [case("a")], environment=ENV)
    assert listing(tmp_path) == ["ratefloor-ledger.json"]
    lock_path(path).write_text("4242\n")
    with pytest.raises(LedgerError, match=r"\.ratefloor-ledger\.json\.lock.*process 4242"):
        record(path, [case("b")], environment=ENV, lock_timeout=0.05)
    assert clean_stale_temporaries(path) == []
    lock_path(path).unlink()
    record(path, [case("b")], environment=ENV)
    assert sorted(k.codec for k in Ledger.load(path).entries) == ["a", "b"]


def test_stale_temporaries_are_removed_by_record_and_by_cleaning(tmp_path: Path) -> None:
    path = tmp_path / "ratefloor-ledger.json"
    stale = tmp_path / ".ratefloor-ledger.json.abc.tmp"  # the name write_atomic's mkstemp uses
    others = [".other.json.abc.tmp", "ratefloor-ledger.json.abc.tmp",
              ".ratefloor-ledger.json.a.b.tmp", ".ratefloor-ledger.json.abc.tmp.bak"]
    for name in others:
        (tmp_path / name).write_text("not ours")
    stale.write_text('{"cases": {"half')
    assert stale_temporaries(path) == [stale]
    outcome = record(path, [case()], environment=ENV)
    assert outcome.removed_temporaries == (stale,)
    assert listing(tmp_path) == sorted(["ratefloor-ledger.json", *others])

    stale.write_text('{"cases": {"half')
    with ledger_lock(path):  # someone is writing: leave their file alone
        assert clean_stale_temporaries(path) == []
    assert stale.exists()
    assert clean_stale_temporaries(path) == [stale]
    assert listing(tmp_path) == sorted(["ratefloor-ledger.json", *others])


def test_cleaning_a_missing_or_read_only_folder_does_nothing(tmp_path: Path) -> None:
    assert clean_stale_temporaries(tmp_path / "absent" / "l.json") == []
    assert clean_stale_temporaries(tmp_path / "l.json") == []
    assert listing(tmp_path) == []


def run_python(code: str, *args: str) -> subprocess.Popen[str]:
    return subprocess.Popen([sys.executable, "-c", code, *args], cwd=ROOT, text=True,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)


KILLED_WRITER = """
import os, sys
from pathlib import Path
from pytest_ratefloor.ledger import Environment
from pytest_ratefloor.recording import record
from pytest_ratefloor.measurement import Measurement
env = Environment(plugin="0.test", numpy="0.test", python="3.test", platform="Test-x")
m = Measurement(codec="killed", source="bernoulli(p=0.1)", n=1000, seed=0, bits=1,
                entropy=0.5, floor="entropy", floor_bits=500.0, fingerprint="")
os.replace = lambda *args, **kwargs: os._exit(3)  # die between fsync and rename
record(Path(sys.argv[1]), [m], environment=env)
"""


def test_a_writer_killed_mid_write_leaves_the_old_ledger_and_no_obstacle(
        tmp_path: Path) -> None:
    path = tmp_path / "ratefloor-ledger.json"
    record(path, [case("kept")], environment=ENV)
    before = path.read_bytes()
    child = run_python(KILLED_WRITER, str(path))
    _, err = child.communicate(timeout=60)
    assert child.returncode == 3, err
    assert path.read_bytes() == before
    left = listing(tmp_path)
    assert ".ratefloor-ledger.json.lock" in left  # the dead writer's lock file
    assert len(stale_temporaries(path)) == 1  # and its temporary file
    outcome = finishes(lambda: record(path, [case("next")], environment=ENV, lock_timeout=5))
    assert outcome is None
    assert listing(tmp_path) == ["ratefloor-ledger.json"]
    assert sorted(k.codec for k in Ledger.load(path).entries) == ["kept", "next"]


CONCURRENT_WRITER = """
import sys, time
from pathlib import Path
from pytest_ratefloor.ledger import Environment
from pytest_ratefloor.recording import record
from pytest_ratefloor.measurement import Measurement
path, tag, rounds, go = Path(sys.argv[1]), sys.argv[2], int(sys.argv[3]), Path(sys.argv[4])
env = Environment(plugin="0.test", numpy="0.test", python="3.test", platform="Test-x")
while not go.exists():
    time.sleep(0.001)
for i in range(rounds):
    m = Measurement(codec=f"{tag}{i}", source="bernoulli(p=0.1)", n=1000, seed=0, bits=i,
                    entropy=0.5, floor="entropy", floor_bits=500.0, fingerprint="")
    record(path, [m], environment=env, lock_timeout=60)
"""


def test_two_processes_recording_at_once_lose_nothing(tmp_path: Path) -> None:
    folder = tmp_path / "project"
    folder.mkdir()
    path, go, rounds = folder / "ratefloor-ledger.json", tmp_path / "go", 20
    writers = [run_python(CONCURRENT_WRITER, str(path), tag, str(rounds), str(go))
               for tag in ("a", "b")]
    go.touch()  # both start their rounds together
    for writer in writers:
        _, err = writer.communicate(timeout=120)
        assert writer.returncode == 0, err
    codecs = sorted(k.codec for k in Ledger.load(path).entries)
    assert codecs == sorted(f"{tag}{i}" for tag in ("a", "b") for i in range(rounds))
    assert listing(folder) == ["ratefloor-ledger.json"]  # no temporary, no lock file
