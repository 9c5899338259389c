"""Untrusted text (codec names, source specs, versions, paths) is shown, never obeyed.

Codec names and source specs come from users' code or from a ledger file. A
terminal must not run their escape sequences (ANSI clear-screen, OSC 8
hyperlinks) or bidi overrides, and Markdown must not turn them into HTML,
links, emphasis or extra table cells; yet the reader still sees the text.
"""

from __future__ import annotations

import json
import re
import unicodedata
from pathlib import Path
from typing import Any

import pytest

from pytest_ratefloor import report, summary
from pytest_ratefloor.cli import main
from pytest_ratefloor.escaping import markdown_text, md_name, plot_text, terminal_text
from pytest_ratefloor.ledger import LEDGER_KIND, Ledger
from pytest_ratefloor.measurement import Measurement
from pytest_ratefloor.report import RunOutcome
from pytest_ratefloor.verdicts import LedgerRun

ESC = "\x1b"
#: Each hostile name and what must remain visible of it in terminal and in Markdown output.
HOSTILE = {
    "clear": f"{ESC}[2Jclear",
    # OSC 8 terminal hyperlink: ESC ] 8 ; ; URL BEL text ESC ] 8 ; ; BEL
    "hyperlink": f"{ESC}]8;;https://evil.example/\x07click{ESC}]8;;\x07",
    "bidi": "abc\u202eexe.txt",
    "script": "<script>alert(1)</script>",
    "link": "[x](javascript:alert(1))",
    "pipe": "left|right",
}
TERMINAL_VISIBLE = {
    "clear": "\\x1b[2Jclear",
    "hyperlink": "\\x1b]8;;https://evil.example/\\x07click\\x1b]8;;\\x07",
    "bidi": "abc\\u202eexe.txt",
    "script": "<script>alert(1)</script>",
    "link": "[x](javascript:alert(1))",
    "pipe": "left|right",
}
MARKDOWN_VISIBLE = {
    "clear": "\\\\x1b\\[2Jclear",
    "hyperlink": "\\\\x1b\\]8;;https\\://evil.example/\\\\x07click\\\\x1b\\]8;;\\\\x07",
    "bidi": "abc\\\\u202eexe.txt",
    "script": "&lt;script&gt;alert\\(1\\)&lt;/script&gt;",
    "link": "\\[x\\]\\(javascript\\:alert\\(1\\)\\)",
    "pipe": "left\\|right",
}


def raw_controls(text: str) -> list[str]:
    """Characters a terminal or a renderer could act on: controls (newline aside), format
    characters such as bidi overrides, lone surrogates, line/paragraph separators."""
    return [c for c in text if c != "\n"
            and unicodedata.category(c) in {"Cc", "Cf", "Cs", "Zl", "Zp"}]


def assert_safe_markdown(text: str) -> None:
    assert raw_controls(text) == []
    assert "<script" not in text.lower()
    # a link needs "](" unescaped: "\]\(" renders as the literal characters (CommonMark,
    # "Backslash escapes")
    assert re.search(r"(?<!\\)\]\(", text) is None
    assert "](javascript:" not in text


def md_cells(line: str) -> list[str]:
    # GFM "Tables" extension: a cell ends at a pipe not preceded by a backslash
    return re.split(r"(?<!\\)\|", line.strip()[1:-1])


def tables_well_formed(text: str) -> None:
    widths = {len(md_cells(line)) for line in text.splitlines() if line.startswith("|")}
    assert len(widths) <= 1, widths


# -- the two functions --------------------------------------------------------------------


@pytest.mark.parametrize(("raw", "shown"), [
    ("\x1b[31mred", "\\x1b[31mred"),
    ("a\x00b\x7fc\x9bd", "a\\x00b\\x7fc\\x9bd"),  # C0, DEL, C1 (CSI)
    ("line\nbreak\r\ttab", "line\\x0abreak\\x0d\\x09tab"),
    ("\u202eRLO \u2066LRI\u2067RLI\u2068FSI\u2069PDI", "\\u202eRLO \\u2066LRI\\u2067RLI"
     "\\u2068FSI\\u2069PDI"),
    ("\u200eLRM\u200fRLM\u061cALM", "\\u200eLRM\\u200fRLM\\u061cALM"),
    ("zero\u200bwidth\ufeff", "zero\\u200bwidth\\ufeff"),
    ("tag\U000e0041", "tag\\U000e0041"),  # Unicode tag characters hide text
    ("sep\u2028\u2029", "sep\\u2028\\u2029"),
    ("lone\ud800", "lone\\ud800"),  # a JSON ledger can hold one; UTF-8 cannot print it
])
def test_terminal_text_escapes_what_a_terminal_would_obey(raw: str, shown: str) -> None:
    assert terminal_text(raw) == shown
    assert raw_controls(terminal_text(raw)) == []
    assert "\n" not in terminal_text(raw)


@pytest.mark.parametrize("plain", [
    "bernoulli(p=0.1)", "zig-zag + rice | k=3", "café 漢字 ÅΩ", "back\\slash", "",
    "non\u00a0breaking", "$x$ [a](b) <b>",
])
def test_terminal_text_leaves_printable_text_alone(plain: str) -> None:
    assert terminal_text(plain) == plain


@pytest.mark.parametrize(("raw", "shown"), [
    ("[x](javascript:alert(1))", "\\[x\\]\\(javascript\\:alert\\(1\\)\\)"),
    ("<script>&</script>", "&lt;script&gt;&amp;&lt;/script&gt;"),
    ("`tick` *em* _u_ ~s~ #h +p !i {b} $m$ a|b \\",
     "\\`tick\\` \\*em\\* \\_u\\_ \\~s\\~ \\#h \\+p \\!i \\{b\\} \\$m\\$ a\\|b \\\\"),
    ("\x1b[2J", "\\\\x1b\\[2J"),
    ("- item", "\\- item"),  # would open a list at a line start
    ("1. item", "1\\. item"),
    ("1.5", "1.5"),
    ("  padded ", "&#32;&#32;padded&#32;"),
    ("uniform(k=4)", "uniform\\(k=4\\)"),
])
def test_markdown_text(raw: str, shown: str) -> None:
    assert markdown_text(raw) == shown


def test_markdown_text_renders_as_the_literal_text() -> None:
    """With a CommonMark renderer at hand, the rendered text equals the input (shown through
    terminal_text) in a table cell, a list item, a paragraph and a heading."""
    markdown_it = pytest.importorskip("markdown_it")
    from markdown_it.common.utils import escapeHtml

    md = markdown_it.MarkdownIt("commonmark").enable("table").enable("strikethrough")
    samples = [*HOSTILE.values(), "*em* _em_ **b** ~~s~~", "![i](http://x/y.png)", "&amp;",
               "# h", "<https://evil>", "a\\|b", "x\\", "1. a", "1) a", "- a", "+ a", "===",
               "    code", "> q", "---", "[x]: /url", "<!-- c -->", "```", "a\nb", "  pad  "]
    for raw in samples:
        for template in ("| c |\n| --- |\n| {} |\n", "- {} on x\n", "{}\n", "para\n{}\n",
                         "### Codec {}\n"):
            got = md.render(template.format(markdown_text(raw)))
            want = md.render(template.format("PLACEHOLDER")).replace(
                "PLACEHOLDER", escapeHtml(terminal_text(raw)))
            assert got == want, (raw, template)


def test_md_name_keeps_a_code_span_only_for_plainly_safe_text() -> None:
    assert md_name("uniform(k=4)") == "`uniform(k=4)`"
    assert md_name("*not emphasis*") == "`*not emphasis*`"  # literal in a code span
    for raw in HOSTILE.values():
        assert not md_name(raw).startswith("`")
        assert md_name(raw) == markdown_text(raw)
    assert md_name("a`b") == "a\\`b"


def test_plot_text_escapes_mathtext() -> None:
    assert plot_text("$x^2$") == "\\$x^2\\$"
    assert plot_text(f"{ESC}[2J") == "\\x1b[2J"
    assert plot_text("_hidden") == " _hidden"  # matplotlib drops legend labels starting "_"


# -- through the reports ---------------------------------------------------------------------


def meas(codec: str, source: str, bits: int = 1200, version: str | None = None) -> Measurement:
    return Measurement(codec=codec, source=source, n=1000, seed=0, bits=bits, entropy=1.0,
                       floor="entropy", floor_bits=1000.0, fingerprint="ab",
                       codec_version=version)


def hostile_run(tmp_path: Path) -> tuple[list[Any], RunOutcome]:
    ledger_path = tmp_path / f"led{ESC}[2Jger.json"
    stale = [meas(HOSTILE["link"], HOSTILE["script"])]
    base = Ledger(ledger_path).merged([*stale, meas(HOSTILE["clear"], HOSTILE["bidi"], 1100)])
    run = LedgerRun(baseline=base)
    for name, raw in HOSTILE.items():
        run.observe(meas(raw, f"{name}:{raw}", version=raw))
    outcome = RunOutcome(
        ledger_path=ledger_path, counts=run.counts(), stale=run.stale(),
        problems=(f"problem {HOSTILE['hyperlink']}",),
        not_recorded=tuple((meas(raw, raw).key.label, f"failed: {raw}\nsecond line")
                           for raw in HOSTILE.values()),
        recorded=True,
    )
    return run.sorted_comparisons(), outcome


@pytest.mark.parametrize("verbose", [False, True])
def test_summary_lines_show_hostile_names_escaped(tmp_path: Path, verbose: bool) -> None:
    rows, outcome = hostile_run(tmp_path)
    lines = [line.text for line in summary.summary_lines(rows, outcome, verbose=verbose)]
    text = "\n".join(lines)
    assert all("\n" not in line for line in lines)
    assert raw_controls(text) == []
    for shown in TERMINAL_VISIBLE.values():
        assert shown in text
    assert "led\\x1b[2Jger.json" in text  # the ledger path, escaped
    assert "second line" not in text  # a reason is shown by its first line


def test_markdown_report_shows_hostile_names_escaped(tmp_path: Path) -> None:
    rows, outcome = hostile_run(tmp_path)
    text = report.markdown_report(rows, outcome)
    assert_safe_markdown(text)
    tables_well_formed(text)
    for shown in MARKDOWN_VISIBLE.values():
        assert shown in text
    # the table of each codec has the right number of cells in every row
    widths = {len(md_cells(line)) for line in text.splitlines() if line.startswith("|")}
    assert widths == {10}


def test_json_report_keeps_raw_strings(tmp_path: Path) -> None:
    rows, outcome = hostile_run(tmp_path)
    path = tmp_path / "r.json"
    report.write_report(path, rows, outcome)
    raw_text = path.read_text()
    assert raw_controls(raw_text) == []  # json.dumps escapes them
    doc = json.loads(raw_text)
    assert {c["codec"] for c in doc["cases"]} == set(HOSTILE.values())
    reasons = [r["reason"] for r in doc["not_recorded"]]
    assert reasons == [f"failed: {raw}\nsecond line" for raw in HOSTILE.values()]


def test_plot_with_hostile_names(tmp_path: Path) -> None:
    pytest.importorskip("matplotlib")
    rows, _ = hostile_run(tmp_path)
    # an unbalanced or unknown mathtext command would make matplotlib raise at drawing time
    rows = [*rows, *hostile_run(tmp_path)[0]]
    extra = LedgerRun(baseline=Ledger(tmp_path / "x.json"))
    extra.observe(meas("$\\undefinedmacro{$", "s"))
    extra.observe(meas("_underscore", "s"))
    path = tmp_path / "p.png"
    report.write_plot(path, [*rows, *extra.sorted_comparisons()])
    assert path.read_bytes()[:4] == b"\x89PNG"


# -- through the command line -----------------------------------------------------------------


def hostile_ledger(path: Path, bits: int) -> Path:
    cases = {}
    for name, raw in HOSTILE.items():
        m = meas(raw, f"{name}:{raw}", bits, version=raw)
        cases[m.key.label] = {
            "codec": m.codec, "source": m.source, "n": m.n, "seed": m.seed, "bits": m.bits,
            "rate": m.rate, "floor": "entropy", "floor_rate": 1.0, "entropy": 1.0,
            "fingerprint": "ab", "codec_version": raw,
        }
    doc = {"kind": LEDGER_KIND, "schema": 1, "cases": cases,
           "recorded_with": {"plugin": "<b>1</b>", "numpy": "[n](javascript:x)",
                             "python": f"{ESC}[2J3", "platform": "\u202eLinux"}}
    path.write_text(json.dumps(doc), encoding="utf-8")
    return path


@pytest.fixture
def hostile_ledgers(tmp_path: Path) -> tuple[Path, Path]:
    return (hostile_ledger(tmp_path / "old.json", 1000),
            hostile_ledger(tmp_path / "new.json", 1001))


def test_cli_show_markdown(hostile_ledgers: tuple[Path, Path],
                           capsys: pytest.CaptureFixture[str]) -> None:
    old, _ = hostile_ledgers
    assert main(["show", str(old)]) == 0
    out = capsys.readouterr().out
    assert_safe_markdown(out)
    tables_well_formed(out)
    for name, shown in MARKDOWN_VISIBLE.items():
        assert f"{name}\\:{shown}" in out  # the source spec column
    assert "&lt;b&gt;1&lt;/b&gt;" in out  # the recorded_with block is untrusted too


def test_cli_show_json_keeps_raw_strings(hostile_ledgers: tuple[Path, Path],
                                         capsys: pytest.CaptureFixture[str]) -> None:
    old, _ = hostile_ledgers
    assert main(["show", str(old), "--format", "json"]) == 0
    out = capsys.readouterr().out
    assert raw_controls(out) == []
    doc = json.loads(out)
    assert {c["codec"] for c in doc["cases"]} == set(HOSTILE.values())


@pytest.mark.parametrize("fmt", ["text", "md"])
def test_cli_diff(hostile_ledgers: tuple[Path, Path], capsys: pytest.CaptureFixture[str],
                  fmt: str) -> None:
    old, new = hostile_ledgers
    assert main(["diff", str(old), str(new), "--format", fmt]) == 1  # +1 bit each: regressed
    out = capsys.readouterr().out
    assert raw_controls(out) == []
    if fmt == "md":
        assert_safe_markdown(out)
        tables_well_formed(out)
        assert all(len(md_cells(line)) == 9 for line in out.splitlines()
                   if line.startswith("|"))
        for shown in MARKDOWN_VISIBLE.values():
            assert shown in out
    else:
        for shown in TERMINAL_VISIBLE.values():
            assert shown in out
    assert out.rstrip().splitlines()[-1].strip("*") == f"FAILED: {len(HOSTILE)} regressed"


def test_cli_lone_surrogate_in_a_ledger(tmp_path: Path,
                                        capsys: pytest.CaptureFixture[str]) -> None:
    """JSON can spell a lone surrogate (\\ud800), which no UTF-8 stream can print."""
    path = tmp_path / "l.json"
    label = "c\\ud800 | s | n=1 | seed=0"
    path.write_text(
        '{"kind": "' + LEDGER_KIND + '", "schema": 1, "cases": {"' + label + '": '
        '{"codec": "c\\ud800", "source": "s", "n": 1, "seed": 0, "bits": 1, "rate": 1.0, '
        '"floor": "entropy", "floor_rate": 1.0, "entropy": 1.0, "fingerprint": "ab"}}}',
        encoding="utf-8")
    argvs = [["show", str(path)], ["show", str(path), "--format", "json"],
             ["diff", str(path), str(path)], ["diff", str(path), str(path), "--format", "md"]]
    for argv in argvs:
        status = main(argv)
        captured = capsys.readouterr()
        if status == 2:  # the loader may refuse it: then one line, as for any unusable ledger
            assert captured.err.count("\n") == 1
            continue
        assert status == 0
        captured.out.encode("utf-8")  # printable: no lone surrogate left
        assert "\\ud800" in captured.out
