"""The terminal summary: what a reviewer reads at the end of a run.

One table of the run's cases, fitted to the terminal, then the line that names
the ledger and its tally, the files the run wrote, and the caution.

Layout
    Cases are ordered worst first — by the verdict table's order
    (:data:`~pytest_ratefloor.verdicts.VERDICTS`: regressed, resampled,
    within-slack, improved, new, unchanged), then by codec and case — and grouped
    under a line naming their codec, so the codec's name does not take a
    column. The compact table has the source, the entropy ``H``, the floor's
    value and kind, the rate, the efficiency (floor ÷ rate) and the change
    against the ledger; ``n`` (and the seed) appear only when they tell two
    cases of one codec and source apart. When the table is wider than the
    terminal, ``H`` goes first (it is in ``-v`` and in every report), then long
    source specs are shortened in the middle with ``…``; ``-v`` prints every
    spec in full with n, seed, layout, bits, ledger bits, excess, the smallest
    detectable excess and timings, whatever the width.
Colour
    Each row takes its verdict's colour (failing verdicts red, improved green,
    within-slack yellow); the tally takes the colour of its worst entry.
    Colour never comes from searching the text.
Quiet
    ``-q`` leaves out the cases whose bits equal the ledger's and shortens the
    lists; ``-qq`` prints only what fails (its rows, the tally and the run's
    problems) and nothing at all when nothing does.
Numbers
    One format everywhere: counts with thousands separators (``100,000``),
    rates with four decimals, efficiency as ``98.82%`` and changes as signed
    percentages with three decimals (``+2.960%``).

Every string that comes from users' code or a ledger file (codec names, source
specs, paths) passes through :func:`~pytest_ratefloor.escaping.terminal_text`.
"""

from __future__ import annotations

import math
import os
import textwrap
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

from pytest_ratefloor.escaping import terminal_text
from pytest_ratefloor.measurement import Measurement
from pytest_ratefloor.report import (
    CAUTION,
    RunOutcome,
    align,
    counts_text,
    delta_text,
    figure_text,
    first_line,
    percent_text,
)
from pytest_ratefloor.verdicts import (
    SUSPICIOUS_SPREADS,
    VERDICTS,
    Colour,
    Comparison,
    counts_of,
    worst_first,
)

__all__ = [
    "NOT_RECORDED_HEADING",
    "NOT_RECORDED_SHOWN",
    "Line",
    "fitted",
    "recorded_text",
    "shorten",
    "summary_lines",
]

#: How many not-recorded cases the summary lists (``-v`` lists all, ``-q`` fewer).
NOT_RECORDED_SHOWN = 20
NOT_RECORDED_HEADING = "not recorded (their tests failed):"
#: The narrowest a shortened source spec gets, whatever the terminal width.
MIN_SOURCE_WIDTH = 20
#: The entropy column stays while the source column keeps at least this many characters.
KEEP_H_SOURCE_WIDTH = 36
#: Explains an efficiency above 100 %, printed when a row has one.
OVER_FULL_NOTE = "eff. = floor ÷ rate; over 100%: beat an expected-length floor on this sample"
_INDENT = "  "


@dataclass(frozen=True)
class Line:
    """One line of the terminal summary and the colour its status gives it."""

    text: str
    colour: Colour = ""


# -- ordering and shortening ----------------------------------------------------------

def _cut_middle(text: str, width: int) -> str:
    keep = width - 1
    head = min(keep, (keep + 1) // 2 + keep // 6)
    tail = keep - head
    return text[:head] + "…" + (text[-tail:] if tail else "")


def shorten(text: str, width: int) -> str:
    """``text`` in at most ``width`` characters, cut with ``…``.

    A spec ``family(params)`` whose parameters fit keeps them whole and shortens
    the family's name (``two_sided_…(theta=0.9)``): the parameters tell cases of
    one family apart. Any other text keeps both ends, the head slightly longer.
    """
    if len(text) <= width:
        return text
    if width <= 1:
        return "…"[:width]
    family, paren, params = text.partition("(")
    if paren and text.endswith(")") and width - len(params) - 2 >= min(len(family), 6):
        return family[:width - len(params) - 2] + "…(" + params
    return _cut_middle(text, width)


def _tally_colour(outcome: RunOutcome) -> Colour:
    """The colour of the worst entry: red when the run fails on the ledger, yellow for
    what deserves a look, green when everything is as recorded or better."""
    if outcome.problems or any(
        outcome.counts.get(name, 0) for name, kind in VERDICTS.items() if kind.fails
    ):
        return "red"
    if outcome.stale or outcome.not_recorded or any(
        outcome.counts.get(name, 0) for name, kind in VERDICTS.items() if kind.colour == "yellow"
    ):
        return "yellow"
    return "green"


#: How a recording describes what it wrote, by the verdict the case had against the old entry.
_WRITTEN_AS: dict[str, str] = {
    "regressed": "re-recorded with more bits", "resampled": "re-recorded on a new sample",
    "within-slack": "re-recorded within the slack", "improved": "re-recorded with fewer bits",
    "traded": "re-recorded at another rate–distortion point",
    "new": "new", "unchanged": "unchanged",
}


def recorded_text(rows: Sequence[Comparison], outcome: RunOutcome) -> str:
    """What a recording wrote: ``wrote 13 cases (1 re-recorded with more bits, 2 new, ...)``
    and how many cases it left out because their tests failed."""
    skipped = {label for label, _ in outcome.not_recorded}
    written = [r for r in rows if r.current is not None and r.key.label not in skipped]
    by_verdict = counts_of(written)
    parts = [f"{by_verdict[v]} {text}" for v, text in _WRITTEN_AS.items() if by_verdict.get(v)]
    text = f"wrote {len(written)} case{'s' if len(written) != 1 else ''}"
    if parts:
        text += f" ({', '.join(parts)})"
    if skipped:
        text += f"; {len(skipped)} not recorded (their tests failed)"
    return text


def shown_path(path: Path | str, base: Path | None) -> str:
    """``path`` relative to ``base`` when it lies below it (what a reader can click), else
    as given; escaped for the terminal."""
    text = str(path)
    if base is not None:
        try:
            text = os.path.relpath(os.path.abspath(text), os.path.abspath(base))
            if text.startswith(".."):
                text = str(path)
        except ValueError:  # another drive (Windows)
            text = str(path)
    return terminal_text(text)


def _ledger_line(outcome: RunOutcome, rows: Sequence[Comparison], base: Path | None
                 ) -> Line | None:
    """The one line that names the ledger file and, once there is one, its tally (after a
    recording: what was written)."""
    if outcome.ledger_path is None:
        return None
    path = shown_path(outcome.ledger_path, base)
    strict = ", strict mode" if outcome.strict else ""
    if not outcome.ledger_exists and not outcome.recorded:
        what = "every case is new" if rows else "nothing was measured"
        return Line(f"no ledger at {path} yet{strict}: {what}; "
                    "create it with: pytest --ratefloor-record", "yellow")
    slack = f", slack {100.0 * outcome.slack:g}%" if outcome.slack else ""
    if outcome.recorded:
        return Line(f"ledger recorded into {path}{strict}: {recorded_text(rows, outcome)}",
                    _tally_colour(outcome))
    return Line(f"ledger compared with {path}{slack}{strict}: {counts_text(outcome.counts)}",
                _tally_colour(outcome))


def _capped(items: Sequence[str], limit: int | None, more_hint: str) -> list[Line]:
    """``items`` as indented lines, at most ``limit`` of them (``None``: all)."""
    shown = items if limit is None else items[:limit]
    lines = [Line(f"  {text}") for text in shown]
    if len(shown) < len(items):
        lines.append(Line(f"  ... and {len(items) - len(shown)} more{more_hint}"))
    return lines


def suspicious_lines(rows: Sequence[Comparison], escape: Callable[[str], str]) -> list[Line]:
    """A note naming cases whose bits dropped on the same sample by more than the sampling
    spread (see :attr:`~pytest_ratefloor.verdicts.Comparison.suspicious_drop`)."""
    flagged = [r for r in rows if r.suspicious_drop]
    if not flagged:
        return []
    out = [Line(f"worth a look: {len(flagged)} case(s) fell by more than "
                f"{SUSPICIOUS_SPREADS:g} sampling spreads on the same sample", "yellow"),
           Line("  (a genuine gain, or a decoder fed from outside the stream):", "yellow")]
    for r in flagged[:NOT_RECORDED_SHOWN]:
        out.append(Line(f"  {escape(r.key.label)}: {r.delta_bits:+,} bits", "yellow"))
    return out


# -- the case table --------------------------------------------------------------------


def floor_kind(m: Measurement) -> str:
    """The floor's kind as the summary shows it: its name, ``R(D)`` for a lossy case."""
    return "R(D)" if m.lossy else terminal_text(m.floor or "entropy")


def distortion_text(m: Measurement, with_measure: bool = False) -> str:
    """A lossy case's mean distortion (``0.0123``; ``with_measure``: ``0.0123 mse``), ``–``
    for a lossless one."""
    if m.distortion is None:
        return "–"
    if not with_measure:
        return f"{m.distortion:.3g}"
    return f"{m.distortion:.4g} {terminal_text(m.distortion_measure or '')}".rstrip()


def _codec_title(row: Comparison) -> str:
    m = row.case
    version = f" {m.codec_version}" if m.codec_version else ""
    return terminal_text(f"{m.codec}{version}")


def _telling_columns(rows: Sequence[Comparison]) -> tuple[bool, bool]:
    """Whether ``n`` and ``seed`` tell two cases of one codec and source apart."""
    by_source: dict[tuple[str, str], set[tuple[int, int]]] = {}
    for r in rows:
        by_source.setdefault((r.key.codec, r.key.source), set()).add((r.key.n, r.key.seed))
    need_n = any(len({n for n, _ in pairs}) > 1 for pairs in by_source.values())
    need_seed = any(len({s for _, s in pairs}) > 1 for pairs in by_source.values())
    return need_n, need_seed


def _compact_table(rows: Sequence[Comparison], width: int | None) -> list[Line]:
    need_n, need_seed = _telling_columns(rows)
    lossy = any(r.case.lossy for r in rows)
    header = ["source", *(["n"] if need_n else []), *(["seed"] if need_seed else []),
              "H", "floor", "kind", "rate", *(["D"] if lossy else []), "eff.", "vs. ledger"]
    numeric = {"n", "seed", "H", "floor", "rate", "D", "eff."}

    def cells(r: Comparison, source_width: int | None) -> list[str]:
        m = r.case
        source = terminal_text(m.source)
        if source_width is not None:
            source = shorten(source, source_width - len(_INDENT))
        return [_INDENT + source, *([f"{m.n:,}"] if need_n else []),
                *([str(m.seed)] if need_seed else []), figure_text(m.entropy),
                figure_text(m.floor_rate), floor_kind(m), figure_text(m.rate),
                *([distortion_text(m)] if lossy else []), percent_text(m.efficiency),
                delta_text(r, short=True)]

    def build(drop_entropy: bool, source_width: int | None) -> list[list[str]]:
        table = [header] + [cells(r, source_width) for r in rows]
        if drop_entropy:
            at = header.index("H")
            table = [row[:at] + row[at + 1:] for row in table]
        return table

    def widest(table: list[list[str]]) -> int:
        return len(max(align(table, set()), key=len))

    table = build(False, None)
    if width is not None and widest(table) > width:
        # shorten the specs first while they keep KEEP_H_SOURCE_WIDTH characters, then
        # give up the entropy column (it is in -v and every report)
        others = widest([row[1:] for row in table]) + 2
        if width - others >= KEEP_H_SOURCE_WIDTH:
            table = build(False, width - others)
        else:
            table = build(True, None)
            if widest(table) > width:
                others = widest([row[1:] for row in table]) + 2
                table = build(True, max(MIN_SOURCE_WIDTH, width - others))
    names = table[0]
    texts = align(table, {i for i, name in enumerate(names) if name in numeric})
    lines = [Line(texts[0])]
    codec: tuple[str, str | None] | None = None
    for text, r in zip(texts[1:], rows):
        if (r.case.codec, r.case.codec_version) != codec:
            codec = (r.case.codec, r.case.codec_version)
            lines.append(Line(_codec_title(r)))
        lines.append(Line(text, "" if r.status is None else VERDICTS[r.status].colour))
    return lines


def _verbose_table(rows: Sequence[Comparison]) -> list[Line]:
    lossy = any(r.case.lossy for r in rows)
    header = ["codec", "source", "n", "seed", "layout", "H b/sym", "floor b/sym", "kind",
              "rate b/sym", *(["D", "SNR dB"] if lossy else []), "eff.", "bits", "ledger bits",
              "excess b/sym", "detects b/sym", "enc s", "dec s", "vs. ledger"]
    table = [header]
    for r in rows:
        m = r.case
        table.append([
            _codec_title(r), terminal_text(m.source), f"{m.n:,}", str(m.seed),
            terminal_text(m.layout) if m.layout else "–", figure_text(m.entropy),
            figure_text(m.floor_rate), floor_kind(m), figure_text(m.rate),
            *([distortion_text(m, with_measure=True), figure_text(m.snr_db, 2)] if lossy
              else []),
            percent_text(m.efficiency), f"{m.bits:,}",
            "–" if r.ledger_bits is None else f"{r.ledger_bits:,}", figure_text(m.excess),
            figure_text(m.detectable_excess), figure_text(m.encode_seconds, 3),
            figure_text(m.decode_seconds, 3), delta_text(r),
        ])
    right = {i for i, name in enumerate(header)
             if name not in ("codec", "source", "layout", "kind", "D", "vs. ledger")}
    texts = align(table, right)
    return [Line(texts[0])] + [Line(t, "" if r.status is None else VERDICTS[r.status].colour)
                               for t, r in zip(texts[1:], rows)]


# -- the whole summary -----------------------------------------------------------------


def summary_lines(rows: Sequence[Comparison], outcome: RunOutcome, verbose: bool = False,
                  quiet: bool = False, *, very_quiet: bool = False, width: int | None = None,
                  base: Path | None = None) -> list[Line]:
    """The terminal summary (see the module docstring).

    ``verbose`` is ``-v``, ``quiet`` ``-q`` and ``very_quiet`` ``-qq``; ``width``
    the terminal's (``None``: do not fit); paths are shown relative to ``base``
    (the directory pytest was started in) when they lie below it.
    """
    quiet = quiet or very_quiet
    all_rows = worst_first(rows)
    if very_quiet:
        shown = [r for r in all_rows if r.fails]
    elif quiet:
        shown = [r for r in all_rows if r.status != "unchanged"]
    else:
        shown = all_rows
    tally = _ledger_line(outcome, all_rows, base)
    if very_quiet and not shown and not outcome.problems and (
        tally is None or tally.colour != "red"
    ):
        return []
    lines: list[Line] = []
    if shown:
        lines += _verbose_table(shown) if verbose else _compact_table(shown, width)
        if any(math.isfinite(r.case.efficiency) and r.case.efficiency > 1.0 for r in shown):
            lines.append(Line(OVER_FULL_NOTE))
    if not very_quiet:
        lines += suspicious_lines(all_rows, terminal_text)
    if tally is not None:
        lines.append(tally)
    if outcome.not_recorded and not very_quiet:
        lines.append(Line(NOT_RECORDED_HEADING, "yellow"))
        limit = None if verbose else (5 if quiet else NOT_RECORDED_SHOWN)
        lines += _capped([f"{terminal_text(label)}: {terminal_text(first_line(why))}"
                          for label, why in outcome.not_recorded], limit, " (-v lists all)")
    if outcome.stale and not very_quiet:
        count = len(outcome.stale)
        lines.append(Line(
            f"stale: {count} ledger entr{'y' if count == 1 else 'ies'} not measured by this "
            "full run (kept in the ledger; if the case is gone, 'ratefloor prune LEDGER "
            "--report REPORT.json' with this run's JSON report removes it):", "yellow"))
        lines += _capped([terminal_text(e.key.label) for e in outcome.stale],
                         None if verbose else 5, " (-v lists all)")
    elif outcome.partial_reasons and not quiet:
        why = "; ".join(terminal_text(str(r)) for r in outcome.partial_reasons)
        lines.append(Line(f"stale entries not listed: partial run ({why})"))
    if not very_quiet:
        lines += [Line(f"written: {terminal_text(what)} {shown_path(path, base)}")
                  for what, path in outcome.written]
    lines += [Line(f"ERROR: {terminal_text(str(p))}", "red") for p in outcome.problems]
    if shown and not very_quiet:
        lines.append(Line(CAUTION))
    # -v prints every line whole, whatever the width (a log to search); compact fits
    return lines if width is None or verbose else fitted(lines, width)


def fitted(lines: Sequence[Line], width: int) -> list[Line]:
    """Every line in at most ``width`` characters. A longer ``what: figures`` line is broken
    after its last ``": "`` when both parts then fit (the tally keeps its counts on one
    line); any other is wrapped at spaces (a word longer than the width, such as a path,
    is cut). Continuations are indented by two more spaces; each piece keeps the line's
    colour."""
    out: list[Line] = []
    for line in lines:
        if len(line.text) <= width:
            out.append(line)
            continue
        indent = " " * (len(line.text) - len(line.text.lstrip(" ")) + 2)
        head, _, rest = line.text.rpartition(": ")
        if head and len(head) + 1 <= width and len(indent) + len(rest) <= width:
            # "what: figures": the figures whole on a line of their own
            out += [Line(head + ":", line.colour), Line(indent + rest, line.colour)]
            continue
        pieces = textwrap.wrap(line.text, width=max(width, len(indent) + 10),
                               subsequent_indent=indent, break_on_hyphens=False)
        out += [Line(piece, line.colour) for piece in pieces]
    return out
