"""The Blahut–Arimoto algorithm for R(D) of a finite pmf, with Blahut's bounds.

Blahut 1972 and Arimoto 1972 (from memory). At a slope s < 0 (nats per unit
distortion) the iteration alternates the output distribution q and the
channel Q(y|x) ∝ q(y) e^(s d(x,y)); after each step the mutual information
of the channel is an upper bound on R at the channel's distortion and
Blahut's line s·D + b a lower bound on R everywhere, so the answer comes
with a certified interval. :func:`blahut_arimoto` is the public entry;
:mod:`pytest_ratefloor.ratedistortion` re-exports it and applies it to
sources. Hamming distortion is handled in O(k) per step and started from its
closed-form fixed point (:func:`_hamming_start`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from pytest_ratefloor import validation

_LN2 = math.log(2.0)
# Most Blahut–Arimoto steps spent at one slope while searching for a target distortion.
_PER_SLOPE = 3000


@dataclass(frozen=True)
class BlahutArimotoResult:
    """One point of R(D) from :func:`blahut_arimoto`, with its convergence bound.

    ``rate_lower <= R(distortion) <= rate_upper`` holds (bits per sample, up
    to float rounding); ``rate`` is their midpoint. ``slope`` is dR/dD there
    in bits per unit of distortion (<= 0). ``iterations`` counts
    Blahut–Arimoto steps over every slope tried; ``converged`` says whether
    ``rate_upper − rate_lower <= tol`` was reached within the step budget.
    """

    rate: float
    distortion: float
    rate_lower: float
    rate_upper: float
    iterations: int
    slope: float
    converged: bool = True


class _Kernel:
    """exp(s · d'(x, y)) for d' = d − (row minimum), as the products Blahut–Arimoto needs.

    Hamming distortion is kept implicit (O(k) per step instead of O(k²)):
    exp(s d) = e + (1 − e)·I with e = exp(s).
    """

    def __init__(self, shifted: np.ndarray | None, k: int) -> None:
        self.shifted = shifted  # None: Hamming on k symbols
        self.k = k
        self.columns = k if shifted is None else shifted.shape[1]
        self._s = math.nan
        self._a: np.ndarray | None = None
        self._ad: np.ndarray | None = None

    def max_distortion(self, p: np.ndarray) -> float:
        """min over y of Σ_x p(x) d'(x, y): the distortion of sending nothing."""
        if self.shifted is None:
            return float(1.0 - p.max())
        return float((p @ self.shifted).min())

    def step(self, p: np.ndarray, q: np.ndarray, s: float
             ) -> tuple[np.ndarray, np.ndarray, float]:
        """(c(x) = Σ_y q(y) A(x,y), c'(y) = Σ_x p(x) A(x,y)/c(x), distortion of the channel)."""
        if self.shifted is None:
            e = math.exp(s)
            c = e + (1.0 - e) * q
            r = p / c
            cp = e * float(r.sum()) + (1.0 - e) * r
            dist = e * float(r @ (1.0 - q))
            return c, cp, dist
        if s != self._s:
            self._a = np.exp(s * self.shifted)
            self._ad = self._a * self.shifted
            self._s = s
        assert self._a is not None
        assert self._ad is not None
        c = self._a @ q
        r = p / c
        cp = self._a.T @ r
        dist = float(q @ (self._ad.T @ r))
        return c, cp, dist


def _iterate(p: np.ndarray, kernel: _Kernel, s: float, q: np.ndarray, tol: float,
             budget: int) -> tuple[np.ndarray, float, float, float, int]:
    """Blahut–Arimoto at slope s (nats per unit distortion) until the bound gap <= tol (nats).

    Returns (q, D', I, b, steps): the channel Q(y|x) = q(y)A(x,y)/c(x) has
    distortion D' and mutual information I (an upper bound on R(D')), and
    R(D) >= s·D + b for every D (Blahut 1972, from memory), with
    b = −Σ p log c − max_y log c'.
    """
    steps = 0
    while True:
        c, cp, dist = kernel.step(p, q, s)
        steps += 1
        logc = float(p @ np.log(c))
        logcp = np.log(cp)
        q1 = q * cp
        q1 /= q1.sum()
        top = float(logcp.max())
        info = s * dist - logc - float(q1 @ logcp)
        b = -logc - top
        if info - (s * dist + b) <= tol or steps >= budget:
            return q1, dist, max(info, 0.0), b, steps
        q = q1


def _hamming_start(p: np.ndarray, s: float) -> np.ndarray | None:
    """The fixed point of Blahut–Arimoto for Hamming distortion at slope s, in closed form.

    With λ = e^s the stationarity conditions give a water level θ: the
    reproduction set is S = {y : p(y) > θ}, q(y) ∝ p(y) − θ on S, where
    T = (|S| + P(not S)(1−λ)/λ) / (1 − λ + λ|S|) and θ = λ(1 − λT)/(1 − λ)
    (the Hamming solution attributed to Erokhin 1958, from memory). Used
    only as the starting point: Blahut's bounds on the result are computed
    from it as from any other start, so an error here could only slow the
    iteration, never change the answer. None if no consistent set is found.
    """
    lam = math.exp(s)
    if not 0.0 < lam < 1.0:
        return None
    order = np.argsort(-p, kind="stable")
    ps = p[order]
    m = np.arange(1, ps.size + 1, dtype=np.float64)
    outside = np.maximum(1.0 - np.cumsum(ps), 0.0)
    t = (m + outside * (1.0 - lam) / lam) / (1.0 - lam + lam * m)
    theta = lam * (1.0 - lam * t) / (1.0 - lam)
    nxt = np.append(ps[1:], 0.0)
    ok = np.flatnonzero((ps > theta) & (theta >= nxt))
    if ok.size == 0:
        return None
    j = int(ok[0])
    q = np.zeros(p.size)
    q[order[: j + 1]] = ps[: j + 1] - theta[j]
    total = q.sum()
    return q / total if total > 0 else None


def _prepare(pmf: ArrayLike, matrix: ArrayLike | None, where: str | None
             ) -> tuple[np.ndarray, _Kernel, float]:
    """(p over positive-probability rows, the kernel, Σ p(x) min_y d(x, y))."""
    p = validation.probability_vector(pmf, "pmf", where=where)
    if matrix is None:
        keep = p > 0
        return p[keep], _Kernel(None, int(keep.sum())), 0.0
    d = distortion_matrix(matrix, rows=p.size, where=where)
    keep = p > 0
    p, d = p[keep], d[keep]
    row_min = d.min(axis=1)
    return p, _Kernel(d - row_min[:, None], p.size), float(p @ row_min)


def distortion_matrix(matrix: ArrayLike, *, rows: int, where: str | None = None) -> np.ndarray:
    """A distortion matrix as float64 (``rows`` × m, entries finite and >= 0), or an error."""
    if isinstance(matrix, (str, bytes)):
        raise TypeError(validation.message("distortion", "a 2-D array of numbers", matrix, where))
    try:
        raw = np.asarray(matrix)
        if raw.dtype.kind not in "iuf":
            raise TypeError
        d = raw.astype(np.float64)
    except (TypeError, ValueError):
        raise TypeError(validation.message(
            "distortion", "a 2-D array of numbers", matrix, where)) from None
    if d.ndim != 2 or d.shape[0] != rows or d.shape[1] < 1:
        raise ValueError(validation.message(
            "distortion", f"a matrix with {rows} rows (one per source symbol) and >= 1 column",
            validation.Described(f"shape {d.shape}"), where))
    bad = np.argwhere(~np.isfinite(d) | (d < 0))
    if bad.size:
        i, j = (int(v) for v in bad[0])
        raise ValueError(validation.message(
            f"distortion[{i}, {j}]", "finite and >= 0", float(d[i, j]), where))
    return d + 0.0


def _search_target(p: np.ndarray, kernel: _Kernel, target: float, tol: float, budget: int
                   ) -> tuple[float, list[tuple[float, float]], int, float, bool]:
    """Bounds on R at distortion ``target`` (shifted, 0 < target < max), all in nats.

    Bisection on the slope s, keeping a point on each side (D_a <= target <=
    D_b): R(target) <= the chord of their mutual informations (time sharing:
    R is convex) and >= the best supporting line. Returns (upper, lines,
    steps, slope nearest the target, converged).
    """
    q = np.full(kernel.columns, 1.0 / kernel.columns)
    lines: list[tuple[float, float]] = []
    steps = 0
    inner = tol / 4.0

    def run(s: float) -> tuple[float, float]:
        nonlocal q, steps
        if kernel.shifted is None:
            start = _hamming_start(p, s)
            if start is not None:
                q = start
        # each slope gets a bounded share: near a slope where an output symbol enters, the
        # iteration converges only like 1/n, and the bounds hold whether or not it converged
        share = max(1, min(_PER_SLOPE, budget - steps))
        q, dist, info, b, used = _iterate(p, kernel, s, q, inner, share)
        steps += used
        lines.append((s, b))
        return dist, info

    s = -1.0
    low: tuple[float, float, float] | None = None  # (s, D, I) with D <= target
    high: tuple[float, float, float] | None = None  # D >= target
    while low is None or high is None:
        dist, info = run(s)
        if dist <= target:
            low = (s, dist, info)
            s = s / 2.0 if high is None else s
        else:
            high = (s, dist, info)
            s = s * 2.0 if low is None else s
        if steps >= budget or abs(s) > 1e300 or abs(s) < 1e-300:
            break
    upper, converged = math.inf, False
    while low is not None and high is not None:
        (sa, da, ia), (sb, db, ib) = low, high
        upper = ia if db <= da else ia + (ib - ia) * (target - da) / (db - da)
        lower = max(sl * target + bl for sl, bl in lines)
        if upper - lower <= tol:
            converged = True
            break
        if steps >= budget or sa == sb:
            break
        mid = 0.5 * (sa + sb)
        if mid in (sa, sb):
            break
        dist, info = run(mid)
        if dist <= target:
            low = (mid, dist, info)
        else:
            high = (mid, dist, info)
    if low is not None and upper == math.inf:
        upper = low[2]
    nearest = low[0] if low is not None else (high[0] if high is not None else 0.0)
    return upper, lines, steps, nearest, converged


def _lower_at(lines: list[tuple[float, float]], dist: float) -> float:
    return max([0.0] + [s * dist + b for s, b in lines])


def blahut_arimoto(pmf: ArrayLike, distortion_matrix: ArrayLike | None = None, *,
                   slope: float | None = None, target_distortion: float | None = None,
                   tol: float = 1e-9, max_iterations: int = 300_000) -> BlahutArimotoResult:
    """R(D) of a memoryless source with pmf ``pmf`` by the Blahut–Arimoto algorithm.

    ``distortion_matrix[x, y] >= 0`` (rows: the pmf's symbols in order;
    columns: reproduction symbols); ``None`` means Hamming distortion on the
    pmf's own symbols (computed in O(k) per step). Give exactly one of

    * ``slope`` (< 0, dR/dD in bits per unit distortion): the point of the
      curve with that slope (Blahut's parametrisation), or
    * ``target_distortion``: R at that distortion, found by bisection on the
      slope; 0 at or beyond the distortion of sending nothing, ValueError
      at or below the least possible distortion Σ p(x) min_y d(x, y) (where
      the curve is vertical or undefined).

    Iterates until Blahut's upper bound (the mutual information of the
    current channel, or for a target the chord between two channels on
    either side) and lower bound (the best supporting line s·D + b found)
    are within ``tol`` bits, or ``max_iterations`` steps in all
    (``converged`` False; the bounds still hold). Blahut 1972 and Arimoto
    1972 (from memory).

    Cost: Hamming is O(k) per step and starts at its closed-form fixed
    point (tens of steps in all). A dense k×m matrix is O(k·m) per step and
    the plain iteration converges only like 1/n near slopes where an output
    symbol enters or leaves the optimal reproduction set: small matrices
    take well under a second, a 256×256 one seconds to minutes, and may
    end unconverged (measured on a busy 2-core machine).
    """
    where = "blahut_arimoto"
    p, kernel, floor = _prepare(pmf, distortion_matrix, where)
    eps = validation.real(tol, "tol", minimum=0.0, low_open=True, where=where)
    budget = validation.integer(max_iterations, "max_iterations", minimum=1, where=where)
    if (slope is None) == (target_distortion is None):
        raise TypeError(f"{where}: give exactly one of slope and target_distortion")
    dmax = kernel.max_distortion(p)
    if slope is not None:
        s_bits = validation.real(slope, "slope", maximum=0.0, high_open=True, where=where)
        s = s_bits * _LN2
        q = np.full(kernel.columns, 1.0 / kernel.columns)
        if kernel.shifted is None:
            start = _hamming_start(p, s)
            q = q if start is None else start
        _, dist, info, b, used = _iterate(p, kernel, s, q, eps * _LN2, budget)
        upper, lower = info / _LN2, max(0.0, (s * dist + b) / _LN2)
        return BlahutArimotoResult(0.5 * (upper + lower), dist + floor, lower, upper, used,
                                   s_bits, upper - lower <= eps)
    target = validation.real(target_distortion, "target_distortion", minimum=0.0, where=where)
    if target - floor >= dmax:
        return BlahutArimotoResult(0.0, target, 0.0, 0.0, 0, 0.0)
    if target <= floor:
        raise ValueError(validation.message(
            "target_distortion", f"> the least possible distortion {floor!r}", target, where))
    upper_n, lines, used, nearest, ok = _search_target(p, kernel, target - floor, eps * _LN2,
                                                       budget)
    upper = upper_n / _LN2
    lower = _lower_at(lines, target - floor) / _LN2
    return BlahutArimotoResult(0.5 * (upper + lower), target, lower, upper, used,
                               nearest / _LN2, ok)
