"""The release-note plots: what they draw, not only that a file appears."""

from __future__ import annotations

import datetime
import math
from pathlib import Path

import pytest

from pytest_ratefloor import plotting
from pytest_ratefloor.history import History, Release
from pytest_ratefloor.ledger import Ledger
from pytest_ratefloor.measurement import Measurement
from pytest_ratefloor.verdicts import Comparison, compare

pytest.importorskip("matplotlib")

from matplotlib.colors import to_rgba


def _h(p: float) -> float:
    return -p * math.log2(p) - (1 - p) * math.log2(1 - p)


def meas(codec: str, source: str, bits: int, entropy: float, n: int = 10_000,
         floor: str = "entropy", p: float | None = None) -> Measurement:
    return Measurement(
        codec=codec, source=source, n=n, seed=0, bits=bits, entropy=entropy, floor=floor,
        floor_bits=entropy * n, fingerprint="ab",
        source_family="bernoulli" if p is not None else "",
        source_params={"p": p} if p is not None else {},
    )


def with_bits(m: Measurement, bits: int) -> Measurement:
    return Measurement(**{**m.__dict__, "bits": bits})


def sample_rows() -> list[Comparison]:
    """A run: one planted 3 % regression, an unchanged case, a new one, Bernoulli cases."""
    regressed_now = meas("arith", "uniform(k=16)", 41_200, 4.0)  # ledger 40_000: +3 %
    same = meas("arith", "uniform(k=4)", 20_100, 2.0, floor="sample")
    new = meas("huff", "uniform(k=8)", 30_500, 3.0, floor="huffman")
    b1 = meas("huff", "bernoulli(p=0.01)", 1_000, _h(0.01), p=0.01)
    b2 = meas("huff", "bernoulli(p=0.3)", 9_000, _h(0.3), p=0.3)
    return [
        compare(regressed_now, with_bits(regressed_now, 40_000), slack=0.01),
        compare(same, same),
        compare(new, None),
        compare(b1, with_bits(b1, 1_000)),
        compare(b2, None),
    ]


def _collection(ax: object, gid: str) -> object:
    found = [c for c in ax.collections if c.get_gid() == gid]  # type: ignore[attr-defined]
    assert len(found) == 1, gid
    return found[0]


def test_run_points_and_drawn_regression() -> None:
    rows = sample_rows()
    assert rows[0].status == "regressed"
    points = plotting.run_points(rows)
    assert [pt.codec for pt in points] == ["arith", "arith", "huff", "huff", "huff"]
    (bad,) = [pt for pt in points if pt.regressed]
    assert bad.excess == pytest.approx(41_200 / 10_000 - 4.0)
    assert bad.ledger_excess == pytest.approx(0.0)
    assert bad.excess - bad.ledger_excess == pytest.approx(0.03 * 4.0)  # 3 % of 4 bits/symbol

    fig = plotting.build_run_figure(rows, "Release 2", version="9.9",
                                    date=datetime.date(2024, 5, 1))
    main, bern = fig.axes[:2]
    measured = _collection(main, "measured:entropy")
    offsets = [tuple(o) for o in measured.get_offsets()]
    colours = measured.get_facecolors()
    at = offsets.index((pytest.approx(bad.excess), bad.row))
    assert tuple(colours[at]) == pytest.approx(to_rgba(plotting.REGRESSION_COLOUR))
    others = [tuple(c) for i, c in enumerate(colours) if i != at]
    assert all(c != pytest.approx(to_rgba(plotting.REGRESSION_COLOUR)) for c in others)
    ledger = [tuple(o) for o in _collection(main, "ledger:entropy").get_offsets()]
    assert (pytest.approx(bad.ledger_excess), bad.row) in ledger
    (ledger_x, _), = [o for o in ledger if o[1] == bad.row]
    assert offsets[at][0] - ledger_x == pytest.approx(0.12)
    # the floor kinds each get their own collection (marker)
    gids = {c.get_gid() for c in main.collections}
    assert {"measured:sample", "measured:huffman", "ledger:sample"} <= gids
    assert "pytest-ratefloor 9.9" in fig._suptitle.get_text()
    assert "2024-05-01" in fig._suptitle.get_text()
    assert "Release 2" in fig._suptitle.get_text()
    # Bernoulli panel: log p axis, one line for the codec with Bernoulli cases
    assert bern.get_xscale() == "log"
    (line,) = [ln for ln in bern.get_lines() if ln.get_gid() == "bernoulli:huff"]
    assert list(line.get_xdata()) == [0.01, 0.3]


def test_no_bernoulli_panel_without_bernoulli_cases() -> None:
    rows = sample_rows()[:3]
    fig = plotting.build_run_figure(rows)
    assert len(fig.axes) == 1


def test_plot_run_writes_png(tmp_path: Path) -> None:
    target = tmp_path / "out" / "run.png"
    plotting.plot_run(target, sample_rows(), title="$x$ _odd")
    assert target.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_codec_legend_is_bounded() -> None:
    rows = [compare(meas(f"codec-{i:04d}", "uniform(k=2)", 10_100, 1.0), None)
            for i in range(2_000)]
    fig = plotting.build_run_figure(rows)
    (legend,) = fig.legends
    texts = [t.get_text() for t in legend.get_texts()]
    assert len(texts) <= 11
    assert texts[-1] == "+1990 more"
    key = fig.axes[0].get_legend()
    assert len(key.get_texts()) <= 9


def _history() -> History:
    a = meas("arith", "uniform(k=16)", 40_000, 4.0)
    b = meas("huff", "uniform(k=8)", 31_000, 3.0)
    ledgers = [
        Ledger(Path("l.json")).merged([a]),
        Ledger(Path("l.json")).merged([a, b]),
        Ledger(Path("l.json")).merged([with_bits(a, 41_200), with_bits(b, 30_000)]),
    ]
    releases = [Release(f"v{i}", f"{i:040x}", led) for i, led in enumerate(ledgers)]
    releases.insert(1, Release("v0.5", "f" * 40, None, "no ledger"))
    return History(Path("."), "l.json", "tags", tuple(releases))


def test_history_series_from_history() -> None:
    releases, series = plotting.history_series(_history())
    assert releases == ["v0", "v0.5", "v1", "v2"]
    a_label, b_label = sorted(series)
    assert [pt.efficiency for pt in series[a_label]] == \
        pytest.approx([1.0, None, 1.0, 40_000 / 41_200])
    assert [pt.regressed for pt in series[a_label]] == [False, False, False, True]
    assert [pt.efficiency for pt in series[b_label]] == \
        pytest.approx([None, None, 30_000 / 31_000, 1.0])
    assert not any(pt.regressed for pt in series[b_label])


def test_history_plot_lines(tmp_path: Path) -> None:
    fig = plotting.build_history_figure(_history())
    ax = fig.axes[0]
    lines = [ln for ln in ax.get_lines() if str(ln.get_gid()).startswith("case:")]
    assert len(lines) == 2
    ys = {ln.get_gid(): list(ln.get_ydata()) for ln in lines}
    arith = ys["case:arith | uniform(k=16) | n=10000 | seed=0"]
    assert arith[0] == pytest.approx(1.0)
    assert math.isnan(arith[1])
    assert arith[3] == pytest.approx(40_000 / 41_200)
    bad = _collection(ax, "regressed")
    assert [tuple(o) for o in bad.get_offsets()] == [(3.0, pytest.approx(40_000 / 41_200))]
    target = tmp_path / "history.svg"
    plotting.plot_history(target, _history())
    assert b"<svg" in target.read_bytes()[:2000]


def test_history_from_simple_table_and_bounded_legend() -> None:
    table = {f"case {i}": [("r1", 0.9), ("r2", None), ("r3", 0.8, True)] for i in range(25)}
    releases, series = plotting.history_series(table)
    assert releases == ["r1", "r2", "r3"]
    assert [pt.efficiency for pt in series["case 3"]] == [0.9, None, 0.8]
    assert [pt.regressed for pt in series["case 3"]] == [False, False, True]
    fig = plotting.build_history_figure(table)
    ax = fig.axes[0]
    assert len([ln for ln in ax.get_lines() if str(ln.get_gid()).startswith("case:")]) == 25
    texts = [t.get_text() for t in ax.get_legend().get_texts()]
    assert len(texts) == 12  # 10 cases, "+15 more", the regression marker
    assert "+15 more" in texts


def test_module_imports_without_matplotlib() -> None:
    import subprocess
    import sys

    code = ("import sys; sys.modules['matplotlib'] = None; "
            "import pytest_ratefloor.plotting as p; print(p.LEGEND_LIMIT)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    assert out.stdout.strip() == "10"
