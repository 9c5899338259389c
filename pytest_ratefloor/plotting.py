"""Release-note plots: a run's excess over the floor, and the ledger across releases.

:func:`plot_run` draws, for every case of a run, the excess over the floor the
case actually used (rate − floor rate, bits/symbol), with the ledger's value
beside it where the ledger has the case; regressions have a colour of their own.
A second panel shows the Bernoulli cases against p on a log axis; lossy cases
add a row of rate–distortion panels (:mod:`pytest_ratefloor.rd_plot`).
:func:`plot_history` draws each case's efficiency release by release (the data
of ``ratefloor history``).

:func:`build_run_figure` and :func:`build_history_figure` return the figure
without saving it, and :func:`run_points` / :func:`history_series` the figures
drawn, so what a plot shows can be checked.

matplotlib is imported inside the functions only (the module imports without
it), and only through ``matplotlib.figure.Figure`` with the Agg canvas: no
pyplot state, no GUI backend. Every name from users' code or a ledger reaches a
label through :func:`~pytest_ratefloor.escaping.plot_text`. Legends are bounded:
at most :data:`LEGEND_LIMIT` codec (or case) entries, then one ``+N more``.
"""

from __future__ import annotations

import datetime
import itertools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

from pytest_ratefloor.escaping import plot_text
from pytest_ratefloor.rd_plot import RD_PANEL_LIMIT, draw_rd_panels, rd_series
from pytest_ratefloor.verdicts import Comparison, compare

if TYPE_CHECKING:
    from matplotlib.artist import Artist
    from matplotlib.axes import Axes
    from matplotlib.collections import Collection
    from matplotlib.figure import Figure

    from pytest_ratefloor.history import History

__all__ = [
    "LEDGER_COLOUR",
    "LEGEND_LIMIT",
    "REGRESSION_COLOUR",
    "HistoryPoint",
    "RunPoint",
    "build_history_figure",
    "build_run_figure",
    "codec_colour",
    "history_series",
    "plot_history",
    "plot_run",
    "run_points",
]

#: Most codec (or case) entries a legend lists before a single ``+N more``.
LEGEND_LIMIT = 10
#: The colour of a regression (a verdict that fails the gate), used for nothing else.
REGRESSION_COLOUR = "#e3001b"
#: Edge colour of the ledger's (baseline) points.
LEDGER_COLOUR = "#555555"
#: Codec colours: the tab10 cycle without its red, which could pass for a regression.
_PALETTE = ("#1f77b4", "#ff7f0e", "#2ca02c", "#9467bd", "#8c564b",
            "#e377c2", "#7f7f7f", "#bcbd22", "#17becf")
#: Marker per floor kind (the floor a case's excess is measured from).
_FLOOR_MARKERS = {"entropy": "o", "huffman": "s", "sample": "^", "empirical": "D",
                  "adaptive": "v"}
_OTHER_MARKERS = "P*Xh<>"
#: Most rows that get a tick label of their own; beyond it the rows are unlabelled.
_MAX_ROW_LABELS = 80
#: Longest tick label, characters.
_LABEL_CHARS = 60


def codec_colour(index: int) -> str:
    """The colour of the ``index``-th codec (sorted by name); never the regression colour."""
    return _PALETTE[index % len(_PALETTE)]


def _floor_marker(floor: str, others: list[str]) -> str:
    """The marker of a floor kind; unknown kinds get the spare markers in order seen."""
    if floor in _FLOOR_MARKERS:
        return _FLOOR_MARKERS[floor]
    if floor not in others:
        others.append(floor)
    return _OTHER_MARKERS[others.index(floor) % len(_OTHER_MARKERS)]


def _short(text: str, limit: int = _LABEL_CHARS) -> str:
    return text if len(text) <= limit else text[: limit - 1] + "…"


def _version() -> str:
    try:
        from pytest_ratefloor import __version__
    except ImportError:  # pragma: no cover - the package always defines it
        return "?"
    return str(__version__)


# -- the run --------------------------------------------------------------------------


@dataclass(frozen=True)
class RunPoint:
    """One case as :func:`build_run_figure` draws it (row ``row`` of the main panel)."""

    row: int
    codec: str
    source: str
    floor: str
    #: rate − floor rate now, bits/symbol
    excess: float
    #: the ledger's bits/n − the case's floor rate (same floor); ``None`` without an entry
    ledger_excess: float | None
    #: the verdict fails the gate (``regressed`` or ``resampled``)
    regressed: bool
    #: Bernoulli parameter p when the case is a Bernoulli source, else ``None``
    p: float | None
    label: str


def run_points(rows: Sequence[Comparison]) -> list[RunPoint]:
    """The cases measured in this run, grouped by codec (then source, n, seed).

    A case only the ledger holds (``dropped``) and an empty sample are left out:
    there is no rate to show.
    """
    cases = [r for r in rows if r.current is not None and r.current.n > 0]
    cases.sort(key=lambda r: (r.key.codec, r.key.source, r.key.n, r.key.seed))
    points = []
    for row, r in enumerate(cases):
        m = r.current
        assert m is not None
        ledger = None if r.baseline is None else r.baseline.bits / m.n - m.floor_rate
        p: float | None = None
        if m.source_family == "bernoulli" and "p" in m.source_params:
            p = float(m.source_params["p"])
        points.append(RunPoint(
            row=row, codec=m.codec, source=m.source, floor=m.floor, excess=m.excess,
            ledger_excess=ledger, regressed=r.fails, p=p,
            label=f"{m.codec} · {m.source} · n={m.n} · seed={m.seed}",
        ))
    return points


def _codec_legend_handles(codecs: Sequence[str], colour_of: Mapping[str, str],
                          marker: str) -> tuple[list[Artist], list[str]]:
    """At most :data:`LEGEND_LIMIT` codec entries, then one ``+N more``."""
    from matplotlib.lines import Line2D

    shown = codecs[:LEGEND_LIMIT]
    handles: list[Artist] = [Line2D([], [], ls="", marker=marker, color=colour_of[c])
                             for c in shown]
    labels = [_short(plot_text(c), 40) for c in shown]
    if len(codecs) > len(shown):
        handles.append(Line2D([], [], ls="", marker=""))
        labels.append(f"+{len(codecs) - len(shown)} more")
    return handles, labels


def build_run_figure(rows: Sequence[Comparison], title: str | None = None, *,
                     version: str | None = None,
                     date: datetime.date | None = None) -> Figure:
    """The figure of :func:`plot_run`, not saved.

    Main panel: one row per case (grouped by codec, separated by thin lines), the
    excess now as a filled marker in the codec's colour, or
    :data:`REGRESSION_COLOUR` when the verdict fails the gate; the ledger's
    excess as a hollow marker joined to it. The marker shape is the floor kind.
    Bernoulli panel (when such cases exist): excess against p, log p axis.
    Legends: the codecs on the figure (``fig.legends[0]``, bounded), the key
    (floor kinds, ledger, regressed) on the main panel.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    points = run_points(rows)
    codecs = sorted({pt.codec for pt in points})
    colour_of = {c: codec_colour(i) for i, c in enumerate(codecs)}
    bern = [pt for pt in points if pt.p is not None and 0.0 < pt.p < 1.0]
    others: list[str] = []
    marker_of = {pt.floor: _floor_marker(pt.floor, others) for pt in points}

    lossy = rd_series(rows)
    height = max(min(3.0 + 0.22 * len(points), 30.0), 5.0)
    rd_height = 4.2 if lossy else 0.0
    fig = Figure(figsize=(13.0 if bern or len(lossy) > 1 else 8.5, height + rd_height))
    FigureCanvasAgg(fig)
    grid = fig.add_gridspec(2 if lossy else 1, 2 if bern else 1,
                            height_ratios=(height, rd_height) if lossy else None,
                            width_ratios=(3, 2) if bern else None)
    ax = fig.add_subplot(grid[0, 0])
    bax = fig.add_subplot(grid[0, 1]) if bern else None
    if lossy:
        shown = min(len(lossy), RD_PANEL_LIMIT)
        bottom = grid[1, :].subgridspec(1, shown)
        draw_rd_panels([fig.add_subplot(bottom[0, i]) for i in range(shown)], lossy,
                       colour_of, REGRESSION_COLOUR)

    _draw_run_rows(ax, points, colour_of, marker_of)

    key_handles: list[Artist] = [
        Line2D([], [], ls="", marker=marker_of[f], color="black", label=f"floor: {plot_text(f)}")
        for f in sorted(marker_of)
    ]
    if any(pt.ledger_excess is not None for pt in points):
        key_handles.append(Line2D([], [], ls="-", lw=0.8, marker="o", color=LEDGER_COLOUR,
                                  markerfacecolor="none", label="ledger value"))
    if any(pt.regressed for pt in points):
        key_handles.append(Line2D([], [], ls="", marker="o", color=REGRESSION_COLOUR,
                                  label="regressed / resampled"))
    if key_handles:
        ax.legend(handles=key_handles, fontsize="small", loc="best")

    if bax is not None:
        _draw_bernoulli(bax, bern, codecs, colour_of, marker_of)

    if codecs:
        handles, labels = _codec_legend_handles(codecs, colour_of, "o")
        fig.legend(handles, labels, loc="upper right", fontsize="small", title="codec")

    day = (date or datetime.date.today()).isoformat()
    heading = f"pytest-ratefloor {plot_text(version or _version())} · {day}"
    if title:
        heading = f"{plot_text(title)} — {heading}"
    fig.suptitle(heading)
    fig.tight_layout(rect=(0.0, 0.0, 0.86, 0.96))
    return fig


def _draw_run_rows(ax: Axes, points: Sequence[RunPoint], colour_of: Mapping[str, str],
                   marker_of: Mapping[str, str]) -> None:
    """The main panel: one row per case; one collection per floor kind and role.

    Collections carry a gid: ``measured:<floor>`` and ``ledger:<floor>``; joins
    between a ledger point and the measured one are the ``ledger-joins`` collection.
    """
    ledger_of = {pt.row: pt.ledger_excess for pt in points if pt.ledger_excess is not None}
    joins = [[(ledger_of[pt.row], float(pt.row)), (pt.excess, float(pt.row))]
             for pt in points if pt.row in ledger_of]
    if joins:
        ax.add_collection(_line_collection(joins, LEDGER_COLOUR, "ledger-joins"))
    for floor, marker in marker_of.items():
        mine = [pt for pt in points if pt.floor == floor]
        base = [pt.row for pt in mine if pt.row in ledger_of]
        if base:
            ax.scatter([ledger_of[row] for row in base], base, s=34,
                       marker=marker, facecolors="none", edgecolors=LEDGER_COLOUR,
                       linewidths=1.0, zorder=3, gid=f"ledger:{floor}")
        colours = [REGRESSION_COLOUR if pt.regressed else colour_of[pt.codec] for pt in mine]
        ax.scatter([pt.excess for pt in mine], [pt.row for pt in mine], s=30, marker=marker,
                   c=colours, zorder=4, gid=f"measured:{floor}")
    ax.axvline(0.0, color="black", lw=1.0)
    # codec groups: a thin line between consecutive codecs
    cuts = [pt.row - 0.5 for prev, pt in itertools.pairwise(points) if pt.codec != prev.codec]
    if cuts:
        ax.hlines(cuts, 0, 1, transform=ax.get_yaxis_transform(), colors="#cccccc", lw=0.6)
    if len(points) <= _MAX_ROW_LABELS:
        ax.set_yticks([pt.row for pt in points])
        ax.set_yticklabels([_short(plot_text(pt.label)) for pt in points], fontsize="x-small")
        for tick, pt in zip(ax.get_yticklabels(), points):
            if pt.regressed:
                tick.set_color(REGRESSION_COLOUR)
    else:
        ax.set_yticks([])
        ax.set_ylabel(f"{len(points)} cases, grouped by codec")
    ax.set_ylim(len(points) - 0.5 if points else 0.5, -0.5)
    ax.autoscale(axis="x")
    ax.set_xlabel("excess over the floor used: rate − floor rate (bits/symbol)")
    ax.set_title("Excess over the floor, per case (hollow: ledger)")
    ax.grid(True, axis="x", alpha=0.3)


def _line_collection(segments: list[list[tuple[float, float]]], colour: str,
                     gid: str) -> Collection:
    from matplotlib.collections import LineCollection

    lines = LineCollection(segments, colors=colour, linewidths=0.8, zorder=2)
    lines.set_gid(gid)
    return lines


def _draw_bernoulli(ax: Axes, bern: Sequence[RunPoint], codecs: Sequence[str],
                    colour_of: Mapping[str, str], marker_of: Mapping[str, str]) -> None:
    """Excess against p on a log axis: a line per codec (gid ``bernoulli:<codec>``),
    regressions overlaid in :data:`REGRESSION_COLOUR` (gid ``bernoulli-regressed``)."""
    for codec in codecs:
        mine = sorted((pt.p or 0.0, pt.excess) for pt in bern if pt.codec == codec)
        if mine:
            ax.plot([p for p, _ in mine], [e for _, e in mine], color=colour_of[codec],
                    marker="o", ms=4, lw=0.8, gid=f"bernoulli:{codec}")
    bad = [pt for pt in bern if pt.regressed]
    if bad:
        ax.scatter([pt.p or 0.0 for pt in bad], [pt.excess for pt in bad], s=46,
                   color=REGRESSION_COLOUR, zorder=4, gid="bernoulli-regressed")
    ax.axhline(0.0, color="black", lw=1.0)
    ax.set_xscale("log")
    ax.set_xlabel("Bernoulli parameter p = P(1) (log scale)")
    ax.set_ylabel("rate − floor rate (bits/symbol)")
    ax.set_title("Bernoulli cases")
    ax.grid(True, which="both", alpha=0.3)


def plot_run(path: Path | str, rows: Sequence[Comparison], title: str | None = None) -> None:
    """Save the plot of a run (see :func:`build_run_figure`) to ``path``.

    The format follows the suffix (``.png``, ``.svg``, ``.pdf``); the parent
    directory is created. The title carries the plugin version and today's date.
    """
    fig = build_run_figure(rows, title)
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(target)


# -- the history ----------------------------------------------------------------------


@dataclass(frozen=True)
class HistoryPoint:
    """A case at one release: its efficiency (``None``: not in that release) and whether
    the change from the previous release holding the ledger fails the gate."""

    release: str
    efficiency: float | None
    regressed: bool = False


#: A hand-made history: case label → ``(release, efficiency or None[, regressed])`` per
#: release, oldest first.
HistoryTable = Mapping[
    str, Sequence[tuple[str, float | None] | tuple[str, float | None, bool]]
]


def history_series(
    table: History | HistoryTable,
) -> tuple[list[str], dict[str, list[HistoryPoint]]]:
    """The releases (oldest first) and each case's points, one per release.

    ``table`` is a :class:`~pytest_ratefloor.history.History` (as
    :func:`~pytest_ratefloor.history.collect` returns) or a :data:`HistoryTable`.
    From a History, each case is compared with the previous release holding a
    ledger (:func:`~pytest_ratefloor.verdicts.compare`); the case label is its
    ledger key. A non-finite efficiency is shown as missing.
    """
    if isinstance(table, Mapping):
        return _series_of_table(table)
    releases = [r.name for r in table.releases]
    series: dict[str, list[HistoryPoint]] = {}
    previous = None
    for column, release in enumerate(table.releases):
        if release.ledger is None:
            continue
        for key, case in release.ledger.entries.items():
            cells = series.setdefault(
                key.label, [HistoryPoint(name, None) for name in releases])
            before = None if previous is None else previous.entries.get(key)
            fails = previous is not None and compare(case, before).fails
            cells[column] = HistoryPoint(release.name, _finite(case.efficiency), fails)
        previous = release.ledger
    return releases, dict(sorted(series.items()))


def _series_of_table(table: HistoryTable) -> tuple[list[str], dict[str, list[HistoryPoint]]]:
    releases: list[str] = []
    for cells in table.values():
        for cell in cells:
            if cell[0] not in releases:
                releases.append(cell[0])
    series = {}
    for label, cells in table.items():
        given = {cell[0]: cell for cell in cells}
        points = []
        for name in releases:
            found = given.get(name)
            if found is None:
                points.append(HistoryPoint(name, None))
            else:
                regressed = bool(found[2]) if len(found) > 2 else False
                value = None if found[1] is None else _finite(float(found[1]))
                points.append(HistoryPoint(name, value, regressed))
        series[label] = points
    return releases, series


def _finite(value: float) -> float | None:
    return value if math.isfinite(value) else None


def build_history_figure(table: History | HistoryTable, title: str | None = None) -> Figure:
    """The figure of :func:`plot_history`, not saved.

    One line per case (gid ``case:<label>``; a release without the case is a
    gap), the releases across; points whose change fails the gate are overlaid
    in :data:`REGRESSION_COLOUR` (gid ``regressed``). The legend lists at most
    :data:`LEGEND_LIMIT` cases, then ``+N more``.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    releases, series = history_series(table)
    fig = Figure(figsize=(max(6.5, min(2.0 + 0.8 * len(releases), 20.0)), 5.2))
    FigureCanvasAgg(fig)
    ax = fig.subplots(1, 1)
    xs = list(range(len(releases)))
    handles: list[Artist] = []
    labels: list[str] = []
    bad_x: list[int] = []
    bad_y: list[float] = []
    for i, (label, points) in enumerate(series.items()):
        ys = [math.nan if pt.efficiency is None else pt.efficiency for pt in points]
        (line,) = ax.plot(xs, ys, color=codec_colour(i), marker="o", ms=4, lw=1.0,
                          gid=f"case:{label}")
        if i < LEGEND_LIMIT:
            handles.append(line)
            labels.append(_short(plot_text(label), 50))
        for x, pt in zip(xs, points):
            if pt.regressed and pt.efficiency is not None:
                bad_x.append(x)
                bad_y.append(pt.efficiency)
    if len(series) > LEGEND_LIMIT:
        handles.append(Line2D([], [], ls="", marker=""))
        labels.append(f"+{len(series) - LEGEND_LIMIT} more")
    if bad_x:
        handles.append(ax.scatter(bad_x, bad_y, s=60, marker="X", color=REGRESSION_COLOUR,
                                  zorder=4, gid="regressed"))
        labels.append("regressed / resampled")
    ax.set_xticks(xs)
    ax.set_xticklabels([_short(plot_text(r), 24) for r in releases], rotation=30, ha="right")
    ax.set_xlabel("release")
    ax.set_ylabel("efficiency (floor rate / rate)")
    ax.grid(True, alpha=0.3)
    if handles:
        ax.legend(handles, labels, fontsize="small", loc="best")
    heading = f"Efficiency by release — pytest-ratefloor {plot_text(_version())}"
    ax.set_title(f"{plot_text(title)} — {heading}" if title else heading)
    fig.tight_layout()
    return fig


def plot_history(path: Path | str, table: History | HistoryTable,
                 title: str | None = None) -> None:
    """Save the history plot (see :func:`build_history_figure`) to ``path``."""
    fig = build_history_figure(table, title)
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(target)
