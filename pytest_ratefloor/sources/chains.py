"""Sources with memory over a finite set of states: Markov chains, and what chains share.

:class:`Markov` is a stationary finite-state Markov chain whose entropy is
the entropy *rate*; its stationary distribution comes from
Grassmann–Taksar–Heyman state reduction. It samples through
:class:`~pytest_ratefloor.sources.chain_sampler._ChainSampler` (one raw word
per symbol, exact integer thresholds per row), as the order-k empirical
sources of :mod:`pytest_ratefloor.sources.empirical` do. They share
:func:`_chain_varentropy_rate` too, the asymptotic variance of a chain's
information (a Poisson equation solved densely for small chains, on the
sparse transition graph for large ones). The checks of a stochastic matrix
(square, rows are pmfs, irreducible) live here, since only chains have one.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

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
from pytest_ratefloor.sources.chain_sampler import _ChainSampler
from pytest_ratefloor.sources.sampling import _exact_weights

if TYPE_CHECKING:
    from scipy.sparse import csr_matrix


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


# --------------------------------------------------------------------------
# the varentropy rate of a chain: a Poisson equation on its transition graph

#: Chains of at most this many states (larger ones: after the exact
#: reductions of :func:`_solve_reduced`) solve the Poisson equation densely
#: with the fundamental matrix: one LU of ``states²`` floats (512 states:
#: 2 MiB, about 10⁸ flops).
_DENSE_STATES = 512
#: Most products with the reduced transition matrix GMRES may take before the
#: sparse direct solve takes over.
_KRYLOV_PRODUCTS = 2000
#: Floats the Krylov basis may hold (restart length × states; 32 MiB).
_KRYLOV_FLOATS = 1 << 22
#: Residual of the Poisson equation, relative to its right-hand side, that
#: GMRES aims at, and the largest accepted from it (:func:`_solve_krylov`).
_KRYLOV_RTOL = 1e-12
_KRYLOV_ACCEPT = 1e-10


def _chain_varentropy_rate(
    stationary: np.ndarray,
    origin: np.ndarray,
    target: np.ndarray,
    prob: np.ndarray,
    weight: np.ndarray,
    info: np.ndarray,
    entropy: float,
) -> float:
    """lim Var(f(e_1) + … + f(e_n)) / n for the edges e_t a stationary chain walks.

    The chain is irreducible over ``stationary.size`` states with stationary
    distribution ``stationary`` (π). Edge ``e`` leads from state
    ``origin[e]`` to ``target[e]`` with probability ``prob[e]``, has
    stationary weight ``weight[e] = π(origin) prob`` and carries
    ``f(e) = info[e]`` bits (finite); ``entropy`` is H = Σ weight·info.

    Martingale decomposition (from memory: the Poisson equation of a Markov
    chain with Kemeny & Snell's fundamental matrix Z = (I − P + 1π)⁻¹, as in
    Meyn & Tweedie's central limit theorem for Markov chains): with
    g(s) = Σ_{e from s} prob·info − H and u solving (I − P) u = g,

        f(e_t) − H = D_t + u(X_{t−1}) − u(X_t),
        D_t = f(e_t) + u(X_t) − E[f(e_t) + u(X_t) | X_{t−1}],

    where the D_t are martingale differences and the rest telescopes, so the
    rate is E[D_t²] = Σ_s π(s) Var_{e from s}[f(e) + u(target e)]: a sum of
    non-negative terms, never negative by rounding. It equals
    ``varentropy + 2 Σ_{k≥1} Cov(f_0, f_k)`` (for a periodic chain the sum
    taken in Cesàro's sense) and does not depend on the first state's law.
    """
    states = stationary.size
    g = np.bincount(origin, weights=prob * info, minlength=states) - entropy
    u = _poisson_solution(stationary, origin, target, prob, g)
    value = info + u[target]
    mean = np.bincount(origin, weights=prob * value, minlength=states)
    dev = value - mean[origin]
    return math.fsum((weight * dev * dev).tolist())


def _poisson_solution(
    stationary: np.ndarray,
    origin: np.ndarray,
    target: np.ndarray,
    prob: np.ndarray,
    g: np.ndarray,
) -> np.ndarray:
    """u with (I − P) u = g and π·u = 0, for a ``g`` with π·g = 0 (up to rounding).

    At most :data:`_DENSE_STATES` states: u = Z g by one dense solve with
    I − P + 1π. Larger chains never build a matrix of all their states:
    :func:`_solve_reduced` works on the edges.
    """
    states = stationary.size
    if not np.any(g):
        return np.zeros(states)
    if states <= _DENSE_STATES:
        u = _solve_dense(stationary, origin, target, prob, g)
    else:
        u = _solve_reduced(stationary, origin, target, prob, g)
    return u - float(stationary @ u)


def _solve_dense(
    weight: np.ndarray, origin: np.ndarray, target: np.ndarray, prob: np.ndarray, rhs: np.ndarray
) -> np.ndarray:
    """(I − P + 1w)⁻¹ rhs for ``w`` the stationary law ∝ ``weight``: Z rhs, a Poisson solution."""
    size = weight.size
    matrix = np.eye(size) + (weight / weight.sum())[None, :]
    np.subtract.at(matrix, (origin, target), prob)
    return np.asarray(np.linalg.solve(matrix, rhs), dtype=np.float64)


def _solve_reduced(
    stationary: np.ndarray,
    origin: np.ndarray,
    target: np.ndarray,
    prob: np.ndarray,
    g: np.ndarray,
) -> np.ndarray:
    """A Poisson solution of a large chain: two exact reductions, then a sparse solve.

    1. Self-loops (:func:`_without_loops`): the row of a state divided by
       its probability of leaving is the row of the jump chain (the chain
       watched only when it moves), so a long run of one state costs nothing.
    2. Forced paths: a state with a single successor t has u(s) = g̃(s) + u(t),
       so each path of such states is summed (pointer doubling, O(states ×
       log states)) into the first state with a choice. What is left is the
       chain watched on its branching states: no fill-in, as many edges as
       their rows had, solved again without its self-loops.

    The reduced chain of m states is solved densely if m ≤
    :data:`_DENSE_STATES`; else by restarted GMRES on x ↦ x − Q x + (w·x) 1
    (w its stationary law; the operator is nonsingular, its inverse Q's
    fundamental matrix): at most :data:`_KRYLOV_PRODUCTS` products with Q,
    each O(edges), plus O(restart × m) orthogonalisation each, with a
    restart length of at most 64 and a basis of at most
    :data:`_KRYLOV_FLOATS` floats. If that does not reach the accepted
    residual (a nearly decomposable chain), a sparse LU factorisation
    (SuperLU) of I − Q with its most probable state pinned solves it exactly;
    its cost is set by the fill-in, not the edge count, which is why it
    comes last.
    """
    size = stationary.size
    weight, origin, target, prob, rhs = _without_loops(stationary, origin, target, prob, g)
    degree = np.bincount(origin, minlength=size)  # distinct successors: edges are coalesced
    branching = degree >= 2
    if not branching.any():
        branching[int(np.argmax(weight))] = True  # one forced cycle through every state: cut it
    forced = ~branching
    first = np.concatenate([[0], np.cumsum(degree)[:-1]])  # origins are sorted
    jump = np.arange(size)
    jump[forced] = target[first[forced]]
    through = np.where(forced, rhs, 0.0)  # Σ rhs from a state to its first branching state
    for _ in range(2 * size.bit_length() + 2):  # pointer doubling; branching states are fixed
        if not forced[jump].any():
            break
        through = through + through[jump]
        jump = jump[jump]
    index = np.cumsum(branching) - 1
    rows = branching[origin]
    q_origin = index[origin[rows]]
    q_target = index[jump[target[rows]]]
    q_prob = prob[rows]
    m = int(branching.sum())
    passed = np.bincount(q_origin, weights=q_prob * through[target[rows]], minlength=m)
    q_rhs = rhs[branching] + passed
    if m == 1:
        solution = np.zeros(1)
    else:
        q_weight, q_origin, q_target, q_prob, q_rhs = _without_loops(
            weight[branching], q_origin, q_target, q_prob, q_rhs
        )
        solution = _solve_sparse(q_weight, q_origin, q_target, q_prob, q_rhs)
    u = np.zeros(size)
    u[branching] = solution
    return through + u[jump]


def _without_loops(
    weight: np.ndarray, origin: np.ndarray, target: np.ndarray, prob: np.ndarray, rhs: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The jump chain's equation: same solution u, no self-loops, parallel edges merged.

    Row s of (I − P) u = rhs, divided by the probability λ(s) of leaving s
    (summed from the edges that leave, so exact), is row s of the same
    equation for the chain with P(s, t)/λ(s) off the diagonal and
    right-hand side rhs(s)/λ(s); its stationary law is ∝ weight·λ. Edges
    come back sorted by origin. Every state must be able to leave (an
    irreducible chain of two states or more).
    """
    size = weight.size
    keys, where = np.unique(origin * size + target, return_inverse=True)
    prob = np.bincount(where.ravel(), weights=prob, minlength=keys.size)
    origin, target = keys // size, keys % size
    moves = origin != target
    origin, target, prob = origin[moves], target[moves], prob[moves]
    leave = np.bincount(origin, weights=prob, minlength=size)
    return weight * leave, origin, target, prob / leave[origin], rhs / leave


def _solve_sparse(
    weight: np.ndarray, origin: np.ndarray, target: np.ndarray, prob: np.ndarray, rhs: np.ndarray
) -> np.ndarray:
    """A Poisson solution of an edge-listed chain: dense when small, else GMRES, else SuperLU."""
    size = weight.size
    if size <= _DENSE_STATES:
        return _solve_dense(weight, origin, target, prob, rhs)
    from scipy import sparse

    P = sparse.csr_matrix((prob, (origin, target)), shape=(size, size))
    w = weight / weight.sum()
    u = _solve_krylov(P, w, rhs)
    if u is None:
        u = _solve_direct(P, w, rhs)
    return u


def _solve_krylov(P: csr_matrix, w: np.ndarray, rhs: np.ndarray) -> np.ndarray | None:
    """Z rhs by restarted GMRES on x ↦ x − P x + (w·x) 1, or None if not within budget.

    GMRES (from memory: Saad & Schultz 1986) restarted every ``restart``
    products, the basis orthogonalised by classical Gram–Schmidt run twice
    (matrix–vector products with the basis, so each step costs
    O(edges + restart × states)); at most :data:`_KRYLOV_PRODUCTS` products
    in all, each cycle ending with the true residual. It stops at a residual
    of :data:`_KRYLOV_RTOL` × ‖rhs‖, or once an accepted residual
    (:data:`_KRYLOV_ACCEPT` × ‖rhs‖) stops halving from one cycle to the next.
    """
    size = w.size

    def apply(x: np.ndarray) -> np.ndarray:
        return np.asarray(x - P @ x + float(w @ x), dtype=np.float64)

    restart = min(64, max(8, _KRYLOV_FLOATS // size - 1), size)
    scale = float(np.linalg.norm(rhs))
    aim, accept = _KRYLOV_RTOL * scale, _KRYLOV_ACCEPT * scale
    basis = np.empty((restart + 1, size))
    x = np.zeros(size)
    residual = rhs.copy()
    beta = scale
    used = 0
    while beta > aim and used + 2 <= _KRYLOV_PRODUCTS:
        steps = min(restart, _KRYLOV_PRODUCTS - used - 1)
        triangle = np.zeros((steps + 1, steps))  # the Hessenberg matrix, rotated to R
        rotations: list[tuple[float, float]] = []
        g = np.zeros(steps + 1)  # the rotated right-hand side β e₁
        g[0] = beta
        basis[0] = residual / beta
        done = 0
        for k in range(steps):
            v = apply(basis[k])
            used += 1
            h = basis[: k + 1] @ v
            v -= h @ basis[: k + 1]
            again = basis[: k + 1] @ v
            v -= again @ basis[: k + 1]
            column = np.append(h + again, np.linalg.norm(v))
            length = float(column[-1])
            for i, (c, s) in enumerate(rotations):  # Givens rotations of the earlier steps
                column[i], column[i + 1] = c * column[i] + s * column[i + 1], (
                    -s * column[i] + c * column[i + 1]
                )
            r = math.hypot(column[k], column[k + 1])
            c, s = (column[k] / r, column[k + 1] / r) if r > 0.0 else (1.0, 0.0)
            rotations.append((c, s))
            column[k], column[k + 1] = r, 0.0
            triangle[: k + 2, k] = column
            g[k + 1], g[k] = -s * g[k], c * g[k]
            done = k + 1
            if abs(g[k + 1]) <= aim or length == 0.0:
                break
            basis[k + 1] = v / length
        y = np.linalg.solve(np.triu(triangle[:done, :done]), g[:done])
        x = x + y @ basis[:done]
        residual = rhs - apply(x)
        used += 1
        previous, beta = beta, float(np.linalg.norm(residual))
        if beta <= accept and beta > 0.5 * previous:
            break  # at the rounding floor
    return x if beta <= accept else None


def _solve_direct(P: csr_matrix, w: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """(I − P) u = rhs by sparse LU, the most probable state pinned to u = 0.

    Removing one state's row and column leaves a nonsingular matrix for an
    irreducible chain (the rest is substochastic, with an exit reachable
    from every state); the removed equation holds because w·rhs = 0.
    """
    from scipy import sparse
    from scipy.sparse.linalg import splu

    size = w.size
    keep = np.ones(size, dtype=bool)
    keep[int(np.argmax(w))] = False
    system = sparse.identity(size, format="csr") - P
    reduced = sparse.csc_matrix(system[keep][:, keep])
    u = np.zeros(size)
    u[keep] = splu(reduced).solve(rhs[keep])
    return u


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
    the Poisson equation with the fundamental matrix Z = (I - P + 1π)^-1, see
    :func:`_chain_varentropy_rate`), i.e. Var(information of n symbols) ≈
    n * varentropy_rate for large n, whatever ``initial`` is.
    Sampling draws one word per symbol and picks the row of the current state
    by exact integer thresholds (:mod:`pytest_ratefloor.sources.chain_sampler`
    does it for whole blocks of words at once).
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

    def _compute_varentropy_rate(self) -> float:
        """The chain's own transitions as the edges of :func:`_chain_varentropy_rate`."""
        origin, target = np.nonzero(self.transition > 0)
        prob = self.transition[origin, target]
        return _chain_varentropy_rate(
            self.stationary,
            origin,
            target,
            prob,
            self.stationary[origin] * prob,
            self._neg_log2[origin, target],
            self.entropy,
        )

    def _sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        if self._chain is None:
            size = self.transition.shape[0]
            states = list(range(size))
            self._chain = _ChainSampler(
                self._initial_weights,
                [[s] for s in states],
                self._row_weights,
                [states] * size,
                states,
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
