"""Sources with memory over a finite set of states: Markov chains and the chain sampler.

:class:`Markov` is a stationary finite-state Markov chain whose entropy is
the entropy *rate*; its stationary distribution comes from
Grassmann–Taksar–Heyman state reduction. :class:`_ChainSampler` draws any
chain over states one raw word per symbol (exact integer thresholds per
row); the order-k empirical sources of
:mod:`pytest_ratefloor.sources.empirical` use it too. The checks of a
stochastic matrix (square, rows are pmfs, irreducible) live here, since only
chains have one.
"""

from __future__ import annotations

import math
from bisect import bisect_right
from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike

from pytest_ratefloor import validation
from pytest_ratefloor.sources.base import (
    Source,
    _as_symbols,
    _digest,
    _fmt_list,
    _log2_ratio,
    _positive_support,
)
from pytest_ratefloor.sources.sampling import (
    _CHUNK,
    _WORD,
    _exact_weights,
    _thresholds_from_weights,
)


class _ChainSampler:
    """Sequential sampler over states: the first word picks a start state (emitting
    its ``prefix`` symbols), each further word picks a row of the current state
    by exact integer thresholds; the row gives the emitted symbol and next state.
    """

    def __init__(
        self,
        start_weights: Sequence[int],
        prefixes: Sequence[Sequence[int]],
        row_weights: Sequence[Sequence[int]],
        row_symbols: Sequence[Sequence[int]],
        row_next: Sequence[Sequence[int]],
    ) -> None:
        self.start_thresholds = _thresholds_from_weights(start_weights)
        self.prefixes = [list(p) for p in prefixes]
        self.thresholds: list[int] = []
        self.symbols: list[int] = []
        self.next: list[int] = []
        self.begin: list[int] = []
        self.last: list[int] = []
        for weights, syms, nxt in zip(row_weights, row_symbols, row_next):
            self.begin.append(len(self.thresholds))
            self.thresholds.extend(_thresholds_from_weights(weights))
            self.thresholds.append(_WORD)  # last row of a state: never passed
            self.symbols.extend(syms)
            self.next.extend(nxt)
            self.last.append(len(self.thresholds) - 1)

    def sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        if n == 0:
            return np.zeros(0, dtype=np.int64)
        first = int(bitgen.random_raw(1)[0])
        state = bisect_right(self.start_thresholds, first)
        out = list(self.prefixes[state][:n])
        steps = n - len(out)
        thresholds, symbols, nxt = self.thresholds, self.symbols, self.next
        begin, last = self.begin, self.last
        append = out.append
        while steps > 0:  # chunks keep the list of words small
            chunk = min(steps, _CHUNK)
            steps -= chunk
            for word in bitgen.random_raw(chunk).tolist():
                row = bisect_right(thresholds, word, begin[state], last[state])
                append(symbols[row])
                state = nxt[row]
        return np.array(out, dtype=np.int64)


def _stationary_gth(P: np.ndarray) -> np.ndarray:
    """Stationary distribution of an irreducible stochastic matrix.

    Grassmann–Taksar–Heyman state reduction (from memory: Grassmann, Taksar &
    Heyman 1985): no subtractions, so it stays accurate for nearly
    decomposable chains; reductions use math.fsum so the result does not
    depend on the platform's summation order.
    """
    A = np.array(P, dtype=np.float64)
    size = A.shape[0]
    for k in range(size - 1, 0, -1):
        s = math.fsum(A[k, :k].tolist())
        A[:k, k] /= s
        A[:k, :k] += np.outer(A[:k, k], A[k, :k])
    pi = [1.0] + [0.0] * (size - 1)
    for k in range(1, size):
        pi[k] = math.fsum(pi[i] * float(A[i, k]) for i in range(k))
    total = math.fsum(pi)
    return np.array([v / total for v in pi])


def _stochastic_matrix(transition: ArrayLike, *, where: str) -> np.ndarray:
    """``transition`` as an irreducible stochastic matrix (float64, ``-0.0`` made ``0.0``).

    :raises TypeError: not a matrix of numbers.
    :raises ValueError: not square (or empty), a row that is not a pmf (entries
        finite and >= 0, summing to 1 within 1e-9), or a state that cannot be
        reached from another one (reducible).
    """
    rule = "a non-empty square matrix of probabilities"
    if isinstance(transition, (str, bytes)):
        raise TypeError(f"{where}: transition must be {rule}, got {validation.show(transition)}")
    try:
        P = np.asarray(transition, dtype=np.float64)
    except (TypeError, ValueError):
        raise TypeError(
            f"{where}: transition must be {rule}, got {validation.show(transition)}"
        ) from None
    if P.ndim != 2 or P.shape[0] != P.shape[1] or P.shape[0] == 0:
        raise ValueError(f"{where}: transition must be {rule}, got shape {P.shape}")
    for i, row in enumerate(P):
        validation.probability_vector(row, f"transition[{i}]", where=where)
    P = P + 0.0
    rule = "irreducible (every state reachable from every other)"
    lost = _unreachable(P > 0)
    if lost is not None:
        raise ValueError(
            f"{where}: transition must be {rule}, got state {lost} unreachable from state 0"
        )
    lost = _unreachable((P > 0).T)
    if lost is not None:
        raise ValueError(
            f"{where}: transition must be {rule}, got state 0 unreachable from state {lost}"
        )
    return P


def _unreachable(adjacent: np.ndarray) -> int | None:
    """A state not reachable from state 0 along ``adjacent`` edges, or None."""
    seen = np.zeros(adjacent.shape[0], dtype=bool)
    seen[0] = True
    frontier = [0]
    while frontier:
        nxt = np.flatnonzero(adjacent[frontier].any(axis=0) & ~seen)
        seen[nxt] = True
        frontier = nxt.tolist()
    missing = np.flatnonzero(~seen)
    return int(missing[0]) if missing.size else None



class Markov(Source):
    """A stationary finite-state Markov chain on states/symbols 0..S-1.

    ``transition[i][j] = P(X_t = j | X_{t-1} = i)``: rows finite, >= 0,
    summing to 1 within 1e-9 (then normalised exactly), irreducible. The
    first symbol follows ``initial`` (default: the stationary distribution
    ``stationary``, so the chain is stationary from the start).

    ``entropy`` is the entropy rate H = -Σ_i π_i Σ_j P_ij log2 P_ij.
    ``varentropy`` is the per-symbol variance of -log2 P(X_t | X_{t-1}) under
    stationarity; ``varentropy_rate`` is the asymptotic variance per symbol of
    the sample's total information (it adds the autocorrelation terms, via
    the fundamental matrix Z = (I - P + 1π)^-1), i.e. Var(information of n
    symbols) ≈ n * varentropy_rate for large n.
    Sampling is a loop over time steps (one word per symbol, bisection on
    exact integer thresholds of the current row).
    """

    def __init__(self, transition: ArrayLike, initial: ArrayLike | None = None) -> None:
        P = _stochastic_matrix(transition, where="markov")
        size = P.shape[0]
        self._row_weights = [_exact_weights(row) for row in P.tolist()]
        self._row_totals = [sum(w) for w in self._row_weights]
        self.transition = np.array(
            [[w / t for w in ws] for ws, t in zip(self._row_weights, self._row_totals)]
        )
        self._neg_log2 = np.array(
            [
                [-_log2_ratio(w, t) if w else np.inf for w in ws]
                for ws, t in zip(self._row_weights, self._row_totals)
            ]
        )
        self.stationary = _stationary_gth(self.transition)
        if initial is None:
            self.initial = self.stationary.copy()
            self._initial_given = False
        else:
            init = validation.probability_vector(initial, "initial", where="markov")
            if init.size != size:
                raise ValueError(
                    f"markov: initial must have {size} entries (one per state), got {init.size}"
                )
            self.initial = init
            self._initial_given = True
        self._initial_weights = _exact_weights(self.initial.tolist())
        init_total = sum(self._initial_weights)
        self._initial_neg_log2 = np.array(
            [-_log2_ratio(w, init_total) if w else np.inf for w in self._initial_weights]
        )
        if size <= 3:
            spec = "markov(transition=[" + ",".join(_fmt_list(r) for r in P.tolist()) + "]"
            if self._initial_given:
                spec += f",initial={_fmt_list(self.initial.tolist())}"
            spec += ")"
        else:
            init_bytes = (
                self.initial.astype("<f8").tobytes() if self._initial_given else b"stationary"
            )
            sha = _digest(b"markov", P.astype("<f8").tobytes(), init_bytes)
            spec = f"markov(states={size},sha={sha})"
        super().__init__(
            family="markov",
            spec=spec,
            params={"states": size},
            alphabet_size=size,
            min_symbol=0,
            max_symbol=size - 1,
            memoryless=False,
        )
        self._chain: _ChainSampler | None = None

    def _cond_terms(self) -> tuple[np.ndarray, np.ndarray]:
        """(joint stationary weights π_i P_ij, -log2 P_ij with 0 where P_ij = 0)."""
        joint = self.stationary[:, None] * self.transition
        info = np.where(self.transition > 0, self._neg_log2, 0.0)
        return joint, info

    def _compute_entropy(self) -> float:
        joint, info = self._cond_terms()
        return math.fsum((joint * info).ravel().tolist())

    def _compute_varentropy(self) -> float:
        joint, info = self._cond_terms()
        dev = info - self.entropy
        return math.fsum((joint * dev * dev).ravel().tolist())

    @property
    def varentropy_rate(self) -> float:
        """lim Var(information of n symbols) / n, in bits^2 per symbol."""
        joint, info = self._cond_terms()
        size = self.transition.shape[0]
        row_entropy = (self.transition * info).sum(axis=1)  # g_i = E[f | X_{t-1} = i]
        pi_row = np.tile(self.stationary, (size, 1))
        fundamental = np.linalg.inv(np.eye(size) - self.transition + pi_row)
        centred = (fundamental - pi_row) @ row_entropy  # Σ_{m>=0} (P^m - Π) g
        cross = math.fsum((joint * info * centred[None, :]).ravel().tolist())
        return self.varentropy + 2.0 * cross

    def _sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        if self._chain is None:
            size = self.transition.shape[0]
            states = list(range(size))
            self._chain = _ChainSampler(
                self._initial_weights,
                [[s] for s in states],
                self._row_weights,
                [states] * size,
                [states] * size,
            )
        return self._chain.sample(n, bitgen)

    def _self_information(self, x: np.ndarray) -> np.ndarray:
        size = self.transition.shape[0]
        info = np.full(x.shape, np.inf)
        if x.size == 0:
            return info
        inside = (x >= 0) & (x < size)
        if not inside.all():
            return np.where(inside, 0.0, np.inf)  # caller reports the first outside symbol
        info[0] = self._initial_neg_log2[x[0]]
        info[1:] = self._neg_log2[x[:-1], x[1:]]
        return info

    def _why_impossible(self, x: np.ndarray, i: int) -> str:
        size = self.transition.shape[0]
        if not 0 <= x[i] < size:
            return f"symbol {int(x[i])} at index {i} is not a state (states are 0..{size - 1})"
        if i == 0:
            return f"symbol {int(x[0])} at index 0 has initial probability 0"
        return f"transition {int(x[i - 1])}->{int(x[i])} at index {i} has probability 0"

    def _pmf_table(self, tail: float) -> tuple[np.ndarray, np.ndarray]:
        return _positive_support(np.arange(self.stationary.size), self.stationary)

    def optimal_code_rate(self) -> float:
        """One Huffman code per state for its row, weighted by the stationary distribution.

        ``Σ_s π_s L_s`` with ``L_s`` the expected Huffman length of row ``s``
        (0 for a row with a single possible successor).
        """
        from pytest_ratefloor import floors

        pi = self.stationary
        return float(
            sum(pi[s] * floors.huffman_expected_length(self.transition[s]) for s in range(pi.size))
        )

    def adaptive_code_length(self, sample: ArrayLike) -> float:
        """KT code length with one estimator per context (the previous symbol).

        The first symbol costs ``log2 S``; each later one is coded by the KT
        estimator of the state before it, over the ``S`` states.
        """
        from pytest_ratefloor import floors

        x = _as_symbols(sample)
        if x.size == 0:
            return 0.0
        states = self.transition.shape[0]
        outside = np.flatnonzero((x < 0) | (x >= states))
        if outside.size:
            i = int(outside[0])
            raise ValueError(f"{self.spec}: {self._why_impossible(x, i)}")
        table = np.bincount(x[:-1] * states + x[1:], minlength=states * states)
        contexts = np.repeat(np.arange(states), states)
        return math.log2(states) + floors.context_kt_bits(table, contexts, states)
