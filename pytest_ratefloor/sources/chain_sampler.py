"""Drawing a chain over states one raw word per symbol, at array speed.

The sampling contract (:mod:`pytest_ratefloor.sources.sampling`): the first
raw word picks a start state by exact integer thresholds (its ``prefix``
symbols are emitted), then each further word ``u`` picks a row of the current
state ``s``: row ``#{i : T_s[i] <= u}`` of the state's cumulative thresholds
``T_s``; the row names the next state, and the emitted symbol is a function
of the next state (Markov: the state itself; an order-k context model: the
last symbol of the next context).

:meth:`_ChainSampler.sample` computes those very symbols without a Python
step per symbol:

1. *Classes.* Merge every state's thresholds into one sorted list ``U``;
   each word falls into one interval (class) ``m`` of ``U``, and inside a
   class every state picks the same row. So the step is a table lookup,
   ``next = G[m(u), s]``, and ``m(u)`` is an ordinary inverse CDF over the
   merged list, computed for a whole block of words at once
   (:class:`~pytest_ratefloor.sources.sampling._InverseCdf`).
2. *Chunks in lockstep.* A block is cut into ``C`` chunks of ``L`` words;
   chunk 0 starts from the true state, every other chunk from a guess, and
   one Python step advances all chunks at once (two array operations).
3. *Repair.* A chunk whose guessed start differs from where its predecessor
   really ended is run again from the true start, all such chunks in
   lockstep, until its path meets the stored one (two chains fed the same
   words agree from the first state they share on); a chunk that never meets
   it hands its changed end to the next chunk, in another round. When few
   chunks remain, or the chain does not forget its start (a periodic or
   deterministic chain), the rest is done one step at a time in Python,
   exactly as before.

Every step is the same integer lookup as the loop's ``bisect_right``, so the
symbols are the same, word for word (``tests/test_sampling_speed_paths.py``
compares the two).

Chains whose table ``G`` would be too large (many states times many distinct
thresholds: an order-2 model of a file has up to 65,536 contexts) step
through a *per-state guide* instead (:meth:`_ChainSampler._build_guide`): a
word's top ``h`` bits name one of ``2**h`` cells, and where cell ``c`` of
state ``s`` holds none of the state's thresholds, every word in it picks the
same row, so ``guide[s * 2**h + c]`` is the next state itself: one lookup
for most words. A cell that holds thresholds points to ``2**b`` sub-cells
named by the word's next ``b`` bits, which work the same way; the few words
whose sub-cell holds a threshold too compare the word with the sub-cell's
thresholds (all states' thresholds lie in one flat array, state after
state, and each state's run ends with ``2**64 - 1``, so a comparison never
passes the end of the state), or are bisected when only a few are left. A
lockstep step is thus about a dozen array operations, most of them on the
few words that need more than the first lookup, whatever the number of
states; so that their fixed cost is shared, 16,001 chunks step together,
on blocks of up to ``2**24`` words. The chunks, warm-up and repair are the
same. A chain that forgets its start slowly (random bytes of order 2: two
paths fed the same words typically meet only after thousands of words)
leaves many chunks to the step-by-step repair; the repair notices and the
next blocks use chunks (and warm-ups) eight times longer, up to
``_LONGEST`` words. A chain that still leaves many (one that never forgets:
periodic, deterministic) is drawn by the loop from then on, on either path.
Chains too large even for the guide use the loop.

The blocks' arrays are transposed (chunk order to step order and back) a
few hundred rows at a time, so that each piece stays in cache, and a draw's
blocks share their keys and path arrays: here, touching fresh memory for
the first time costs more than the copies.
"""

from __future__ import annotations

import heapq
from bisect import bisect_right
from collections.abc import Sequence

import numpy as np

from pytest_ratefloor.sources.sampling import (
    _CHUNK,
    _WORD,
    _InverseCdf,
    _thresholds_from_weights,
    _top16,
)

#: Most entries (states × classes) the lockstep table may hold; above it the per-state guide.
_CLASSES_MAX = 1 << 17  # most merged thresholds the step table is built for
_TABLE_ENTRIES = 1 << 21
#: Longest chunk of the guide path (chains that forget slowly get longer chunks and warm-ups).
_LONGEST = 8192
#: Most words of one block on the guide path.
_GUIDE_BLOCK = 1 << 24
#: Most entries (states × cells, an int32 each) of the per-state guide; above it the loop.
_GUIDE_ENTRIES = 1 << 22
#: Most bits of a word that name its guide cell.
_GUIDE_BITS = 12
#: Most bits of a word that name its sub-cell in a cell holding thresholds.
_SUB_BITS = 6
#: Most entries (cells holding thresholds × sub-cells) of the second level (its build,
#: paid by the first draw, costs about 10 ms per million entries here).
_SUB_ENTRIES = 1 << 21
#: Most words of a step left after the sub-cells that are bisected one by one.
_FEW_LEFT = 8
#: Most comparisons a step makes for the words of a (sub-)cell holding thresholds; words
#: of a crowded one are bisected.
_COMPARE = 6
#: Chunks stepped together, and the longest chunk (a block is at most their product).
_CHUNKS = 4001  # odd, as every chunk count: (chunks × length) transposes stay cache-friendly
_LENGTH = 250
#: Chunks stepped together on the guide path (a step there costs more, so more share it).
_GUIDE_CHUNKS = 16001
#: Chunks whose symbols are written out together (a piece that stays in cache).
_TILE_OUT = 64
#: Chunks transposed together (the same).
_TILE = 256
#: Shortest chunk worth stepping in lockstep; shorter samples use the loop.
_MIN_LENGTH = 64
#: Words before a chunk run from the guess to choose its starting state.
_WARM = 64
#: Repair rounds before the rest is done step by step.
_ROUNDS = 6
#: Fewer chunks than this left to repair: done step by step.
_FEW = 24


class _ChainSampler:
    """Sequential sampler over states (see the module docstring for the contract).

    ``start_weights``/``prefixes``: the start states' integer weights and the
    symbols each emits; ``row_weights[s]``/``row_next[s]``: state ``s``'s rows
    (integer weights, next state of each); ``state_symbols[t]``: the symbol
    emitted on entering state ``t``.
    """

    def __init__(
        self,
        start_weights: Sequence[int],
        prefixes: Sequence[Sequence[int]],
        row_weights: Sequence[Sequence[int]],
        row_next: Sequence[Sequence[int]],
        state_symbols: Sequence[int],
    ) -> None:
        self.start_thresholds = _thresholds_from_weights(start_weights)
        self.prefixes = [list(p) for p in prefixes]
        self.thresholds: list[int] = []
        self.next: list[int] = []
        self.begin: list[int] = []
        self.last: list[int] = []
        for weights, nxt in zip(row_weights, row_next):
            self.begin.append(len(self.thresholds))
            self.thresholds.extend(_thresholds_from_weights(weights))
            self.thresholds.append(_WORD)  # last row of a state: never passed
            self.next.extend(nxt)
            self.last.append(len(self.thresholds) - 1)
        self.state_symbols = np.asarray(state_symbols, dtype=np.int64)
        self.symbols = self.state_symbols[np.asarray(self.next, dtype=np.intp)].tolist()
        weights = list(start_weights)
        # every chunk but the first starts from the likeliest start state (a guess)
        self._guess = max(range(len(weights)), key=weights.__getitem__) if weights else 0
        self._built = False
        self._warm = _WARM  # words of warm-up (adapts to how fast the chain forgets)
        self._classes: _InverseCdf | None = None
        self._table = np.zeros(0, dtype=np.int32)
        self._keys = np.zeros(0, dtype=np.int32)
        self._table_list: list[int] | None = None  # the table as Python ints, for the steps
        # the per-state guide (many states): states are kept as s << _shift in the paths
        self._shift = 0
        self._guide = np.zeros(0, dtype=np.int32)
        self._flat = np.zeros(0, dtype=np.uint64)  # every state's thresholds, then 2**64 - 1
        self._sub = 0  # bits that name a sub-cell (0: cells holding thresholds are compared)
        self._sub_cells = np.zeros(0, dtype=np.int32)
        self._part_shift, self._part_mask = np.uint64(0), 0
        self._slow = False  # the chain forgets too slowly for the lockstep path: the loop
        self._length = _LENGTH  # the chunk length the guide path aims at (grows for slow chains)

    # ------------------------------------------------------------------
    # the loop: one word, one bisection

    def _start(self, bitgen: np.random.PCG64, n: int) -> tuple[int, list[int]]:
        first = int(bitgen.random_raw(1)[0])
        state = bisect_right(self.start_thresholds, first)
        return state, list(self.prefixes[state][:n])

    def _loop(self, state: int, words: Sequence[int], out: list[int]) -> int:
        """Step ``state`` through ``words``, appending the symbols; returns the last state."""
        thresholds, symbols, nxt = self.thresholds, self.symbols, self.next
        begin, last = self.begin, self.last
        append = out.append
        for word in words:
            row = bisect_right(thresholds, word, begin[state], last[state])
            append(symbols[row])
            state = nxt[row]
        return state

    def sample_loop(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        """The definition: a Python step per symbol (short samples, and the reference)."""
        if n == 0:
            return np.zeros(0, dtype=np.int64)
        state, out = self._start(bitgen, n)
        steps = n - len(out)
        while steps > 0:  # chunks keep the list of words small
            chunk = min(steps, _CHUNK)
            steps -= chunk
            state = self._loop(state, bitgen.random_raw(chunk).tolist(), out)
        return np.array(out, dtype=np.int64)

    # ------------------------------------------------------------------
    # the lockstep path

    def _build(self) -> None:
        """The merged classes and the step table ``G[m * S + s]``, else the per-state guide."""
        self._built = True
        states = len(self.begin)
        widest = max(b - a for a, b in zip(self.begin, self.last))  # a state's rows, minus one
        if states * (widest + 1) > _TABLE_ENTRIES:  # more classes than that: no table
            self._build_guide()
            return
        reachable = np.array([t for t in self.thresholds if t < _WORD], dtype=np.uint64)
        merged = np.unique(reachable)  # every state's thresholds below 2**64, merged
        classes = merged.size + 1
        if states * classes > _TABLE_ENTRIES or merged.size > _CLASSES_MAX:
            self._build_guide()  # too large for the table (or for a 16-bit guide of the classes)
            return
        # class m holds the words in [lower_m, next lower); lower_0 = 0
        lower_array = np.concatenate([np.zeros(1, dtype=np.uint64), merged])
        table = np.empty((classes, states), dtype=np.int32)
        nxt = np.asarray(self.next, dtype=np.int32)
        for s in range(states):
            begin, last = self.begin[s], self.last[s]
            own = np.array([t for t in self.thresholds[begin:last] if t < _WORD], dtype=np.uint64)
            rows = begin + np.searchsorted(own, lower_array, side="right")
            table[:, s] = nxt[rows]
        dtype = np.int8 if states <= 127 else np.int16 if states <= 32767 else np.int32
        self._table = table.ravel().astype(dtype)
        self._classes = _InverseCdf(
            merged.tolist(), np.arange(classes, dtype=np.int64), ordered=True
        )
        # the class of a word from its top 16 bits, times S; -1 where the cell is split
        guide = self._classes._guide_table()
        split = guide == self._classes._sentinel
        self._keys = np.where(split, -1, guide * states).astype(np.int32)

    def _build_guide(self) -> None:
        """The per-state guide (module docstring); none if it would exceed ``_GUIDE_ENTRIES``.

        Level one, ``guide[s << h | c]``: if cell ``c`` of state ``s`` holds
        none of the state's thresholds, the next state of every word in it
        (the row after the state's thresholds below the cell), shifted left
        by ``h``; else ``~(j << b)``, ``j`` the cell's rank among such cells.
        Level two, ``cells[1 + (j << b | q)]``: the same for the ``2**b``
        sub-cells of that cell (the word's next ``b`` bits name ``q``), or
        ``~r`` if the sub-cell holds a threshold too, ``r`` the first row at
        or above its start. (With no level two, ``b = 0``, level one holds
        ``~r`` itself.) ``N[row]``: a row's next state, shifted by ``h``.
        """
        states, rows = len(self.begin), len(self.thresholds)
        bits = _GUIDE_BITS
        while bits > 1 and states << bits > _GUIDE_ENTRIES:
            bits -= 1
        if states << bits > _GUIDE_ENTRIES:
            return  # the loop
        flat = np.fromiter(
            (t if t < _WORD else _WORD - 1 for t in self.thresholds), dtype=np.uint64, count=rows
        )
        sizes = np.asarray(self.last, dtype=np.int64) - np.asarray(self.begin, dtype=np.int64) + 1
        owner = np.repeat(np.arange(states, dtype=np.int64), sizes)
        # the cell of each row: its state's cells, then its threshold's cell (non-decreasing;
        # a state's end mark lies in its last cell)
        cell = (owner << bits) + (flat >> np.uint64(64 - bits)).astype(np.int64)
        nxt = np.asarray(self.next, dtype=np.int64) << bits
        # cell g's first row is the first row whose cell is not below g, so row r is the
        # first row of the cells after the previous row's cell up to its own: one run each
        guide = np.repeat(nxt.astype(np.int32), np.diff(cell, prepend=-1))
        real = np.ones(rows, dtype=bool)
        real[np.asarray(self.last, dtype=np.int64)] = False  # not the end marks
        inner = cell[real]
        starts = np.flatnonzero(np.diff(inner, prepend=-1))  # first threshold of each cell
        held = inner[starts]  # the cells holding thresholds, in order
        first = np.flatnonzero(real)[starts]  # ... and their first rows
        sub = 0
        while sub < _SUB_BITS and held.size << (sub + 1) <= _SUB_ENTRIES:
            sub += 1
        if not sub:
            guide[held] = ~first
        else:
            # the sub-cell of each threshold in a held cell: its rank's sub-cells, then its
            # word's next `sub` bits (non-decreasing), and each sub-cell's first row
            spans = np.diff(starts, append=inner.size)  # thresholds in each held cell
            rank = np.repeat(np.arange(held.size, dtype=np.int64), spans)
            part = (flat[real] >> np.uint64(64 - bits - sub)) & np.uint64((1 << sub) - 1)
            slot = (rank << sub) + part.astype(np.int64)
            before = np.repeat(np.arange(slot.size, dtype=np.int64),
                               np.diff(slot, prepend=-1))  # thresholds in held cells below
            before = np.concatenate([before, np.full((held.size << sub) - before.size, slot.size)])
            first_of_cell = before[:: 1 << sub]
            sub_first = before + np.repeat(first - first_of_cell, 1 << sub)
            counts = np.bincount(slot, minlength=held.size << sub)
            level_two = ~sub_first
            empty = counts == 0
            level_two[empty] = nxt[sub_first[empty]]
            # a held cell's entry ~(j << b) = -(1 + (j << b)): level two starts at 1
            self._sub_cells = np.concatenate([[0], level_two]).astype(np.int32)
            guide[held] = ~(np.arange(held.size, dtype=np.int32) << sub)
            self._part_shift = np.uint64(64 - bits - sub)
            self._part_mask = (1 << sub) - 1
        self._sub = sub
        self._guide = guide
        self._flat = flat
        self._shift = bits
        self._table = nxt.astype(np.int32)

    def _step_guide(
        self, keys: np.ndarray, words: np.ndarray, current: np.ndarray, out: np.ndarray
    ) -> None:
        """One step of the guide path: ``out`` = the next states of ``current`` (both shifted).

        ``keys``: each word's cell; ``out`` may be ``current`` itself. Most
        words fall in a cell of their state that holds no threshold, and the
        guide names their next state at once; most others, in a sub-cell
        that holds none. The rest count the thresholds of their sub-cell
        that are not above them (a few words: a bisection each). (Array
        methods, not numpy's functions: a step handles few words, and the
        functions' own cost would be a large part of it.)
        """
        index = current + keys  # s << h | cell
        self._guide.take(index, out=out, mode="wrap")
        mixed = (out < 0).nonzero()[0]
        if not mixed.size:
            return
        own = words[mixed]
        entries = out[mixed]
        if self._sub:
            part = (own >> self._part_shift).astype(np.int32)
            part &= self._part_mask
            part -= entries  # + 1 + (j << b)
            entries = self._sub_cells.take(part, mode="wrap")
            out[mixed] = entries
            left = (entries < 0).nonzero()[0]
            if not left.size:
                return
            mixed, own, entries = mixed[left], own[left], entries[left]
        if mixed.size > _FEW_LEFT:
            rows = ~entries
            flat = self._flat
            # a state's thresholds end with 2**64 - 1, above every word but 2**64 - 1
            # itself, whose comparisons therefore never settle: it is bisected below
            for _ in range(_COMPARE):
                above = flat.take(rows, mode="wrap") <= own
                if not above.any():
                    out[mixed] = self._table.take(rows, mode="wrap")
                    return
                rows += above
        shift, thresholds, begin, last = self._shift, self.thresholds, self.begin, self.last
        for i, word in zip(mixed.tolist(), own.tolist()):  # a few words: bisect them
            s = int(index[i]) >> shift
            out[i] = self.next[bisect_right(thresholds, word, begin[s], last[s])] << shift

    def sample(self, n: int, bitgen: np.random.PCG64) -> np.ndarray:
        """``n`` symbols, the same as :meth:`sample_loop` gives; lockstep whenever it can."""
        if not self._built:
            self._build()
        if n == 0:
            return np.zeros(0, dtype=np.int64)
        guided = self._classes is None
        if (guided and self._guide.size == 0) or self._slow or n < 8 * _MIN_LENGTH:
            return self.sample_loop(n, bitgen)
        state, prefix = self._start(bitgen, n)
        out = np.empty(n, dtype=np.int64)
        out[: len(prefix)] = prefix
        done = len(prefix)
        identity = bool(np.array_equal(self.state_symbols, np.arange(len(self.begin))))
        spare = _Scratch()  # the blocks' keys and paths: fresh memory once, not per block
        while done < n:
            size = min(n - done, _GUIDE_BLOCK if guided else _CHUNKS * _LENGTH)
            words = np.asarray(bitgen.random_raw(size), dtype=np.uint64)
            most = _GUIDE_CHUNKS if guided else _CHUNKS
            chunks = min(most, size // (self._length if guided else _MIN_LENGTH))
            chunks -= chunks % 2 == 0  # odd: no power-of-two strides in the transposes
            if (
                size < 8 * _MIN_LENGTH
                or self._slow
                or (guided and chunks < _FEW)
            ):
                symbols: list[int] = []  # a short tail, or a block the loop must draw
                state = self._loop(state, words.tolist(), symbols)
                out[done : done + size] = symbols
                done += size
                continue
            length = size // chunks
            whole = spare.size = chunks * length  # the rest (fewer than `chunks`) to the loop
            path = self._block_states(state, words[:whole], chunks, length, spare)
            target = out[done : done + whole].reshape(chunks, length)
            self._emit(path, target, identity)
            state = int(path[-1, -1]) >> self._shift  # (0 on the class path)
            done += whole
            if whole < size:
                symbols = []
                state = self._loop(state, words[whole:].tolist(), symbols)
                out[done : done + size - whole] = symbols
                done += size - whole
        return out

    def _emit(self, path: np.ndarray, target: np.ndarray, identity: bool) -> None:
        """Write the symbols of ``path[t, c]`` to ``target[c, t]`` (the words' own order).

        A few chunks at a time, so that each transposed piece stays in cache.
        """
        shift = self._shift  # 0 on the class path
        chunks = path.shape[1]
        for c in range(0, chunks, _TILE_OUT):
            part = path[:, c : c + _TILE_OUT]
            if shift:
                part = part >> shift
            if identity:
                target[c : c + _TILE_OUT] = part.T
            else:
                target[c : c + _TILE_OUT] = self.state_symbols.take(part).T

    def _block_states(
        self, state: int, words: np.ndarray, chunks: int, length: int, spare: _Scratch
    ) -> np.ndarray:
        """The state after each word (``chunks * length`` of them), from ``state``.

        Returned as ``path[t, c]``: the state after word ``c * length + t``
        (on the guide path shifted left by ``h``).
        """
        if self._classes is not None:
            states = len(self.begin)
            # S * the class of each word, in the words' order
            # (mode="wrap" only skips numpy's bounds check: every index is in range)
            in_order = np.take(self._keys, np.ascontiguousarray(_top16(words)), mode="wrap")
            split = np.flatnonzero(in_order < 0)  # cells holding a class boundary: search
            if split.size:
                in_order[split] = self._classes.rows(words[split]) * states
            guess, state = self._guess, state
            # step t of every chunk side by side: keys[t, c] for word c*length + t
            keys = _transposed(in_order.reshape(chunks, length), spare.get("keys", in_order.dtype))
            by_step = np.empty((length, 0), dtype=np.uint64)  # not needed
        else:
            guess, state = self._guess << self._shift, state << self._shift
            keys = _transposed(
                words.reshape(chunks, length), spare.get("keys", np.int32), 64 - self._shift
            )
            # the guide path compares some of the words themselves: a view, no copy
            by_step = words.reshape(chunks, length).T
        table = self._table
        path = spare.get("path", table.dtype)[: length * chunks].reshape(length, chunks)
        starts = np.full(chunks, guess, dtype=table.dtype)
        # a better guess: run the guess through the last words before each chunk
        # (chains forget their start; the repair below makes the answer exact anyway)
        first = max(0, length - self._warm)
        warm = self._run(keys[first:, :-1], by_step[first:, :-1], starts[1:], None)
        starts[1:] = warm
        starts[0] = state
        self._run(keys, by_step, starts, path)
        self._repair(path, keys, by_step, starts)
        return path

    def _run(
        self, keys: np.ndarray, words: np.ndarray, start: np.ndarray, path: np.ndarray | None
    ) -> np.ndarray:
        """Step chunks side by side from ``start`` through ``keys[t]``/``words[t]``.

        Stores the state after step ``t`` in ``path[t]`` (if given) and
        returns the states after the last step.
        """
        current = start.copy()
        if self._classes is None:  # the guide path
            for t in range(keys.shape[0]):
                target = current if path is None else path[t]
                self._step_guide(keys[t], words[t], current, target)
                current = target
            return current
        table = self._table  # the class table: next = G[key + state]
        index = np.empty(current.size, dtype=np.intp)
        for t in range(keys.shape[0]):
            np.add(keys[t], current, out=index)
            current = current if path is None else path[t]
            np.take(table, index, out=current, mode="wrap")
        return current

    def _repair(
        self,
        path: np.ndarray,
        keys: np.ndarray,
        words: np.ndarray,
        starts: np.ndarray,
    ) -> None:
        """Make every chunk start where its predecessor ends (see the module docstring).

        ``starts[c]`` is the state chunk ``c`` was run from. A round runs every
        chunk whose start is wrong again from its predecessor's end, in
        lockstep; a chunk whose end changed sends its successor to the next
        round. Few chunks left, or too many rounds: step by step. If most
        chunks are left for that, the chain forgets too slowly for this path
        and later draws use the loop.
        """
        length, chunks = path.shape
        check = np.arange(1, chunks)
        wrong = check[starts[check] != path[length - 1, check - 1]]
        # warm up longer next time if many guesses were wrong, shorter if hardly any (the
        # repair reruns a wrong chunk only until it meets its stored path: a few wrong
        # guesses cost less than a longer warm-up for every chunk)
        if wrong.size * 4 > chunks:
            self._warm = min(2 * self._warm, self._length)
        elif wrong.size * 50 < chunks:
            self._warm = max(self._warm // 2, _WARM)
        for _ in range(_ROUNDS):
            wrong = check[starts[check] != path[length - 1, check - 1]]
            if wrong.size < _FEW:
                break
            starts[wrong] = path[length - 1, wrong - 1]
            changed = self._rerun(path, keys, words, wrong, starts[wrong])
            check = changed[changed + 1 < chunks] + 1
        else:
            wrong = check[starts[check] != path[length - 1, check - 1]]
        # many chunks left to step: the chain forgets too slowly for chunks this short
        if chunks > 4 * _FEW and self._classes is None and self._length < _LONGEST:
            if wrong.size * 16 > chunks:
                self._length = self._warm = min(8 * self._length, _LONGEST)
        elif chunks > 4 * _FEW and wrong.size * 4 > chunks:
            self._slow = True
        self._repair_by_steps(path, keys, words, starts, wrong.tolist())

    #: steps a repair round runs before dropping the chunks that met their stored path
    _SEGMENT = 32

    def _rerun(self, path: np.ndarray, keys: np.ndarray, words: np.ndarray,
               lanes: np.ndarray, start: np.ndarray) -> np.ndarray:
        """Run chunks ``lanes`` again from ``start`` in lockstep, over ``path``; the chunks
        whose end changed.

        A segment of :attr:`_SEGMENT` steps at a time; a chunk whose state at
        a segment's end equals the stored one has met its stored path, which
        is right from there on, so it leaves the round.
        """
        length = path.shape[0]
        guided = self._classes is None
        current = start.copy()
        t = 0
        while t < length and lanes.size:
            stop = min(length, t + self._SEGMENT)
            stored_end = path[stop - 1, lanes]  # a copy: fancy indexing
            rerun = np.empty((stop - t, lanes.size), dtype=path.dtype)
            own_words = words[t:stop, lanes] if guided else words
            current = self._run(keys[t:stop, lanes], own_words, current, rerun)
            path[t:stop, lanes] = rerun
            apart = current != stored_end
            lanes, current = lanes[apart], current[apart]
            t = stop
        return lanes

    def _repair_by_steps(
        self,
        path: np.ndarray,
        keys: np.ndarray,
        words: np.ndarray,
        starts: np.ndarray,
        pending: list[int],
    ) -> None:
        """The rest of the repair one step at a time, chunk after chunk.

        ``pending``: the chunks (ascending) whose start may be wrong; a chunk
        that never meets its stored path hands its new end to its successor.
        """
        if not pending:
            return
        length, chunks = path.shape
        if self._classes is not None:
            if self._table_list is None:
                self._table_list = self._table.tolist()
            table = self._table_list
        else:
            shift, thresholds, nxt = self._shift, self.thresholds, self.next
            begin, last = self.begin, self.last
        todo = sorted(pending)
        heapq.heapify(todo)
        while todo:
            c = heapq.heappop(todo)
            while todo and todo[0] == c:
                heapq.heappop(todo)
            true = int(path[length - 1, c - 1])
            if int(starts[c]) == true:
                continue
            starts[c] = true
            state = true
            stored = path[:, c]
            old = stored.tolist()
            if self._classes is not None:
                column = keys[:, c].tolist()
                for t in range(length):
                    state = table[column[t] + state]
                    if state == old[t]:
                        break
                    stored[t] = state
                else:
                    if c + 1 < chunks:
                        heapq.heappush(todo, c + 1)
                continue
            for t, word in enumerate(words[:, c].tolist()):
                s = state >> shift
                state = nxt[bisect_right(thresholds, word, begin[s], last[s])] << shift
                if state == old[t]:
                    break
                stored[t] = state
            else:
                if c + 1 < chunks:
                    heapq.heappush(todo, c + 1)


class _Scratch:
    """Flat arrays reused by the blocks of one draw (each as long as the first block)."""

    def __init__(self) -> None:
        self._arrays: dict[str, np.ndarray] = {}
        self.size = 0  # words of the current block

    def get(self, name: str, dtype: type | np.dtype) -> np.ndarray:
        """``size`` items of the array ``name`` (made on first use; a later block is never
        longer than the first)."""
        array = self._arrays.get(name)
        if array is None or array.size < self.size:
            array = self._arrays[name] = np.empty(self.size, dtype=dtype)
        return array[: self.size]


def _transposed(table: np.ndarray, into: np.ndarray, shift: int = 0) -> np.ndarray:
    """``table.T`` copied into ``into`` (flat, as long as ``table``), a few rows at a time
    (cache-friendly); with ``shift``, ``(table >> shift).T`` (the words' top bits), made
    the same way (no temporary as large as the table: fresh memory costs more than the
    copy). Returns ``into`` shaped as the transpose."""
    rows, columns = table.shape
    out = into.reshape(columns, rows)
    by = np.uint64(shift)
    for r in range(0, rows, _TILE):
        out[:, r : r + _TILE] = (table[r : r + _TILE] >> by).T if shift else table[r : r + _TILE].T
    return out
