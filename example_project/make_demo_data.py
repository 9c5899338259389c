"""Write synthetic report streams of the invented Kelpwick Sound tide-gauge network.

    python make_demo_data.py            # writes data/*.u8 next to this script
    python make_demo_data.py --force    # overwrite files already there
    ratefloor entropy data/level_changes.u8 data/fault_flags.u8 data/sea_state.u8

Three invented gauges in a sheltered, small-tide sound (Gannet Ledge, Skerrow
Pier, Marrowby Quay) report every
3 minutes for ``--days`` days. One byte per report in each file:

- ``level_changes.u8``  change in water level since the last report (mm), zig-zag
  folded (0, -1, 1, -2, ... -> 0, 1, 2, 3, ...): a small semidiurnal tide (periods of
  the M2 and S2 constituents, 12.42 h and 12.00 h), a slow surge and sensor noise;
- ``fault_flags.u8``    1 when the sensor reported a fault (faults stick for a few
  reports and are likelier in rough seas), else 0;
- ``sea_state.u8``      sea-state class 0..7 (``kelpwick.seastate.SEA_STATES``), a
  slowly drifting chain whose long-run frequencies are ``SEA_STATE_FREQUENCIES``.

Everything here is simulated; nothing is measured from a real gauge, and the
entropy of these files says nothing about any real coastline.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from kelpwick.levels import zigzag  # noqa: E402
from kelpwick.seastate import SEA_STATE_FREQUENCIES  # noqa: E402

REPORT_MINUTES = 3
# Invented gauges: (name, M2 amplitude mm, S2 amplitude mm, noise scale mm)
STATIONS = (
    ("Gannet Ledge", 260.0, 90.0, 3.0),
    ("Skerrow Pier", 180.0, 60.0, 4.5),
    ("Marrowby Quay", 220.0, 75.0, 3.5),
)
M2_HOURS = 12.42  # principal lunar semidiurnal constituent (a fact of the trade)
S2_HOURS = 12.00  # principal solar semidiurnal constituent
FILES = ("level_changes.u8", "fault_flags.u8", "sea_state.u8")


def sea_state_chain(n: int, rng: np.random.Generator, move: float = 0.03) -> np.ndarray:
    """Birth–death chain over the classes with stationary pmf SEA_STATE_FREQUENCIES.

    Metropolis steps to a neighbouring class: P(i -> j) = move/2 · min(1, π_j/π_i),
    so detailed balance holds for π (Metropolis et al. 1953, from memory).
    """
    pi = np.asarray(SEA_STATE_FREQUENCIES)
    k = pi.size
    state = int(rng.choice(k, p=pi))
    out = np.empty(n, dtype=np.int64)
    uniforms = rng.random((n, 2))
    for t in range(n):
        out[t] = state
        target = state + (1 if uniforms[t, 0] < 0.5 else -1)
        if 0 <= target < k and uniforms[t, 1] < move * min(1.0, pi[target] / pi[state]):
            state = target
    return out


def fault_flags(sea: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Faults start more often in rough seas and stick with probability 0.6 per report."""
    start = 0.0004 * (1.0 + sea.astype(np.float64) ** 2)
    u = rng.random(sea.size)
    out = np.zeros(sea.size, dtype=np.int64)
    for t in range(sea.size):
        stuck = t > 0 and out[t - 1] == 1
        out[t] = u[t] < (0.6 if stuck else start[t])
    return out


def level_changes(days: float, amplitudes: tuple[float, float, float],
                  rng: np.random.Generator) -> np.ndarray:
    """Level changes (mm) between consecutive reports of one gauge."""
    m2, s2, noise = amplitudes
    n = int(days * 24 * 60 / REPORT_MINUTES) + 1
    hours = np.arange(n) * REPORT_MINUTES / 60.0
    phase = rng.uniform(0, 2 * np.pi, size=2)
    tide = m2 * np.sin(2 * np.pi * hours / M2_HOURS + phase[0])
    tide += s2 * np.sin(2 * np.pi * hours / S2_HOURS + phase[1])
    surge = np.cumsum(rng.normal(0.0, 1.5, size=n))
    surge -= np.linspace(surge[0], surge[-1], n)  # keep the surge from drifting away
    level = np.round(tide + surge + rng.laplace(0.0, noise, size=n)).astype(np.int64)
    return np.diff(level)


def make(out_dir: Path, days: float, seed: int, force: bool) -> list[Path]:
    """Simulate all gauges and write the three files; return their paths."""
    paths = [out_dir / name for name in FILES]
    existing = [p for p in paths if p.exists()]
    if existing and not force:
        names = ", ".join(str(p) for p in existing)
        raise SystemExit(f"make_demo_data: {names} already exist; pass --force to overwrite")
    rng = np.random.default_rng(seed)
    levels, faults, seas = [], [], []
    for _name, m2, s2, noise in STATIONS:
        changes = level_changes(days, (m2, s2, noise), rng)
        sea = sea_state_chain(changes.size, rng)
        levels.append(changes)
        seas.append(sea)
        faults.append(fault_flags(sea, rng))
    folded = zigzag(np.concatenate(levels))
    if int(folded.max()) > 255:
        raise SystemExit(f"make_demo_data: a level change folds to {int(folded.max())} > 255")
    out_dir.mkdir(parents=True, exist_ok=True)
    for path, stream in zip(paths, (folded, np.concatenate(faults), np.concatenate(seas))):
        path.write_bytes(np.asarray(stream, dtype=np.uint8).tobytes())
    return paths


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--out", type=Path, default=HERE / "data", help="output directory")
    parser.add_argument("--days", type=float, default=30.0, help="days of reports per gauge")
    parser.add_argument("--seed", type=int, default=2026, help="random seed")
    parser.add_argument("--force", action="store_true", help="overwrite existing files")
    args = parser.parse_args(argv)
    if not args.days > 0:
        parser.error(f"--days must be > 0, got {args.days}")
    for path in make(args.out, args.days, args.seed, args.force):
        print(f"wrote {path} ({path.stat().st_size} reports)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
