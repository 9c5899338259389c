"""Rate–distortion plots: lossy codecs' measured points against the source's R(D).

Under mean-squared error a panel shows the SNR in dB (10·log10(σ²/D)) against
bits/sample — the form engineers read: the bound is D(R) of the model source,
and for a memoryless Gaussian it is the 6.02 dB-per-bit line. Under another
measure it shows the mean distortion (log scale) against bits/sample, with
D(R). The bound is the *model* source's: it says nothing certain about real
signals.

Two entry points share the drawing: :func:`draw_rd_panels` (the run plot's
bottom row, from the run's lossy cases) and :func:`plot_lossy_curve` (one codec
at several qualities, from :func:`pytest_ratefloor.lossy.lossy_curve`).
:func:`rd_series` returns what a panel draws, so it can be checked without an
image. matplotlib is imported inside the functions only.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from pytest_ratefloor.escaping import plot_text

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

    from pytest_ratefloor.lossy.curves import LossyCurve
    from pytest_ratefloor.verdicts import Comparison

__all__ = ["RD_PANEL_LIMIT", "RdPoint", "RdSeries", "draw_rd_panels", "plot_lossy_curve",
           "rd_bound", "rd_series", "source_of"]

#: Most sources the run plot gives an R(D) panel (the rest are named in the last one).
RD_PANEL_LIMIT = 3
_BOUND_POINTS = 96


@dataclass(frozen=True)
class RdPoint:
    """One measured lossy case: rate (bits/sample), mean distortion, SNR (MSE only)."""

    codec: str
    rate: float
    distortion: float
    snr_db: float | None
    regressed: bool = False


@dataclass(frozen=True)
class RdSeries:
    """A panel: one source under one measure, its measured points and its bound
    (``bound``: ``(rate, y)`` pairs, y the SNR in dB under MSE, else the distortion)."""

    source: str
    measure: str
    points: tuple[RdPoint, ...]
    bound: tuple[tuple[float, float], ...]
    #: y is the SNR in dB (MSE with a known variance), else the mean distortion
    snr: bool


def source_of(family: str, params: dict[str, Any]) -> Any:
    """The reference source a case record names (``sources.<family>(**params)``), or
    ``None`` when the family has no factory taking those parameters."""
    from pytest_ratefloor import sources

    factory = getattr(sources, family, None) if family else None
    if not callable(factory) or family.startswith("_"):
        return None
    try:
        return factory(**params)
    except (TypeError, ValueError):
        return None


def rd_bound(source: Any, measure: str, top_rate: float, variance: float | None
             ) -> list[tuple[float, float]]:
    """The source's D(R) on ``[0, top_rate]`` as ``(rate, y)``: y the SNR in dB
    (10·log10(σ²/D(R))) under MSE with a variance, else D(R); empty when the source
    has no D(R) for the measure."""
    method = getattr(source, "distortion_rate", None)
    if method is None or top_rate <= 0.0:
        return []
    out = []
    for i in range(_BOUND_POINTS + 1):
        rate = top_rate * i / _BOUND_POINTS
        try:
            d = float(method(rate, distortion=measure))
        except (TypeError, ValueError, NotImplementedError):
            return []
        if d <= 0.0 or not math.isfinite(d):
            continue
        out.append((rate, 10.0 * math.log10(variance / d) if measure == "mse" and variance
                    else d))
    return out


def rd_series(rows: Sequence[Comparison]) -> list[RdSeries]:
    """The run's lossy cases as panels, one per (source, measure), in source order."""
    groups: dict[tuple[str, str], list[Comparison]] = {}
    for r in rows:
        m = r.current
        if m is None or m.distortion is None or not m.n:
            continue
        groups.setdefault((m.source, m.distortion_measure or ""), []).append(r)
    out = []
    for (spec, measure), group in sorted(groups.items()):
        first = group[0].case
        points = tuple(RdPoint(r.case.codec, r.case.rate, float(r.case.distortion or 0.0),
                               r.case.snr_db, r.fails) for r in group)
        source = source_of(first.source_family, dict(first.source_params))
        top = max(max(p.rate for p in points) * 1.25, 0.5)
        bound = rd_bound(source, measure, top, first.variance) if source is not None else []
        snr = measure == "mse" and first.variance is not None
        out.append(RdSeries(spec, measure, points, tuple(bound), snr))
    return out


def _draw(ax: Axes, series: RdSeries, colour_of: dict[str, str], regression: str) -> None:
    def y(p: RdPoint) -> float:
        return p.snr_db if series.snr and p.snr_db is not None else p.distortion

    if series.bound:
        ax.plot([r for r, _ in series.bound], [v for _, v in series.bound], color="black",
                lw=1.2, label="bound: D(R) of the model source", gid=f"bound:{series.source}")
    for codec in sorted({p.codec for p in series.points}):
        mine = sorted((p for p in series.points if p.codec == codec), key=lambda p: p.rate)
        ax.plot([p.rate for p in mine], [y(p) for p in mine], marker="o", ms=4, lw=0.8,
                color=colour_of.get(codec, "#1f77b4"), gid=f"points:{codec}")
    bad = [p for p in series.points if p.regressed]
    if bad:
        ax.scatter([p.rate for p in bad], [y(p) for p in bad], s=46, color=regression, zorder=4,
                   gid="rd-regressed")
    if series.bound:
        ax.legend(fontsize="x-small", loc="lower right")
    ax.set_xlabel("rate (bits/sample)")
    if series.snr:
        ax.set_ylabel("SNR (dB)")
    else:
        ax.set_ylabel(f"mean distortion ({plot_text(series.measure)})")
        ax.set_yscale("log")
    ax.set_title(plot_text(series.source)[:60], fontsize="small")
    ax.grid(True, alpha=0.3)


def draw_rd_panels(axes: Sequence[Axes], series: Sequence[RdSeries], colour_of: dict[str, str],
                   regression: str) -> None:
    """One panel per series (at most ``len(axes)``; the last names how many were left out)."""
    for ax, one in zip(axes, series):
        _draw(ax, one, colour_of, regression)
    if len(series) > len(axes) and axes:
        axes[-1].text(0.02, 0.02, f"+{len(series) - len(axes)} more sources not drawn",
                      transform=axes[-1].transAxes, fontsize="small")


def build_curve_figure(curve: LossyCurve, title: str | None = None) -> Figure:
    """The figure of :func:`plot_lossy_curve`, not saved."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    first = curve.points[0]
    snr = first.measure == "mse" and first.variance is not None
    points = tuple(RdPoint(p.codec, p.rate, p.distortion, p.snr_db) for p in curve.points)
    bound = tuple((c.rate, c.snr_db if snr and c.snr_db is not None else c.distortion)
                  for c in sorted(curve.reference, key=lambda c: c.rate))
    series = RdSeries(first.source, first.measure, points, bound, snr)
    fig = Figure(figsize=(7.0, 5.0))
    FigureCanvasAgg(fig)
    ax = fig.subplots(1, 1)
    colours = {p.codec: f"C{i % 10}" for i, p in enumerate(curve.points)}
    _draw(ax, series, colours, "#e3001b")
    for p, q in zip(curve.points, curve.qualities):
        ax.annotate(plot_text(str(q))[:12], (p.rate, p.snr_db if snr and p.snr_db is not None
                                             else p.distortion), fontsize="x-small",
                    xytext=(3, 3), textcoords="offset points")
    if title:
        fig.suptitle(plot_text(title))
    fig.tight_layout()
    return fig


def plot_lossy_curve(path: Path | str, curve: LossyCurve, title: str | None = None) -> None:
    """Save a codec's rate–distortion curve (the measured qualities, annotated) against the
    source's bound (``curve`` from ``lossy_curve(..., reference=True)``) to ``path``."""
    fig = build_curve_figure(curve, title)
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(target)
