"""Contingency counts of a family, by mixed-radix codes and ``numpy.bincount``.

A family is a child and its parent set. Each row of the data gets a parent
configuration code ``j = sum_p x_p * prod_{p' after p} r_p'`` (mixed radix over the
parents' arities) and a family code ``j * r_child + x_child``. One ``bincount`` over
the family codes gives every count N_ijk at once. Only the parent configurations
that occur in the data are kept: the others contribute nothing to any score here.

Complexity: O(N * |parents|) for the codes plus O(N + q * r) for the count, where q is
the number of parent configurations; when q * r is much larger than N the codes are
compacted with ``numpy.unique`` first (O(N log N)) so memory stays O(N).

:class:`CountScorer` binds a count-table score ``f(table, q, n_rows)`` to encoded data:
the :class:`~runner.scores.protocol.Scorer` of the discrete scores. It counts with the
compiled kernel of :mod:`runner.scores.kernel` (numba: one pass over the rows, the same
tables) when numba is installed and the family's dense table fits
(:func:`dense_limit`), and with :func:`family_counts` otherwise. The environment
variable ``DAGMILL_KERNEL`` chooses: ``numpy`` the numpy path always, ``numba`` the
kernel or an error when numba is missing; unset, the numpy path until a scorer has
counted :data:`AUTO_AFTER_ROWS` rows x families (or until the kernel is loaded in the
process), then the kernel if numba imports (a small search never pays for importing
numba). Either way the tables, and so every
score, are the same bits.

A child's column of candidate families (its parent set with each candidate added in
turn, the move engine's delta column) is counted together on the numpy path too
(:func:`column_counts`): when the occurring (parent configuration, child state) cells
are few, by ``popcount`` of ANDs of per-state row bitmaps (:class:`StateBitmaps`, 64 rows
a word, so the work is cells x candidate states x rows / 64 instead of candidates x
rows); else by one ``numpy.bincount`` over the candidates' stacked row codes, the parent
set's code built once. Both give :func:`family_counts`' tables, entry by entry.
"""

from __future__ import annotations

import importlib
import os
import sys
from collections.abc import Callable, Sequence
from functools import cache
from types import ModuleType

import numpy as np

from runner.errors import EnvironmentFault
from runner.scores.cache import CachedScorer, mask_members
from runner.scores.likelihood import CountColumnScore, column_form

#: A score of one family from its count table: ``f(table, q, n_rows) -> float``.
CountFamilyScore = Callable[[np.ndarray, int, int], float]

# Above this many cells (relative to the rows) a dense bincount wastes memory, and the
# occurring family codes are compacted with numpy.unique instead.
DENSE_CELLS_PER_ROW = 4
DENSE_CELLS_FLOOR = 1 << 16

#: The environment variable that chooses the counting path (:data:`KERNELS`).
KERNEL_VARIABLE = "DAGMILL_KERNEL"
#: Its values: the compiled kernel, or the numpy path.
KERNELS = ("numba", "numpy")
#: The module of the compiled kernel, imported at a count (it imports numba).
KERNEL_MODULE = "runner.scores.kernel"


def dense_limit(n_rows: int) -> int:
    """Most (configuration x child state) cells a family of ``n_rows`` rows is counted
    in densely; above it the occurring codes are compacted with ``numpy.unique``."""
    return max(DENSE_CELLS_PER_ROW * n_rows, DENSE_CELLS_FLOOR)


#: Unset, the kernel is loaded once the numpy path has counted this many rows x
#: families (about half a second of counting): importing numba and loading the compiled
#: code takes about a second, more than a small search spends counting.
AUTO_AFTER_ROWS = 100_000_000


def kernel_choice() -> str:
    """``DAGMILL_KERNEL``'s value: one of :data:`KERNELS`, or ``""`` when unset (the
    kernel once a scorer has counted :data:`AUTO_AFTER_ROWS` rows, if numba imports).

    Raises
    ------
    EnvironmentFault
        It names no kernel.
    """
    choice = os.environ.get(KERNEL_VARIABLE, "").strip().lower()
    if choice not in ("", *KERNELS):
        raise EnvironmentFault(
            f"{KERNEL_VARIABLE}={choice!r} names no counting kernel: use one of "
            f"{', '.join(KERNELS)}, or leave it unset")
    return choice


def kernel_loaded() -> bool:
    """Whether the compiled kernel is imported in this process already."""
    return KERNEL_MODULE in sys.modules


def counting_kernel(choice: str) -> ModuleType | None:
    """The compiled counting kernel (:mod:`runner.scores.kernel`) for ``choice`` (a
    value of :func:`kernel_choice`), or None for the numpy path; numba is imported here,
    at a count, never when ``runner`` is imported.

    Raises
    ------
    EnvironmentFault
        ``choice`` is ``numba`` and numba does not import.
    """
    if choice == "numpy":
        return None
    return _kernel(choice)


@cache
def _kernel(choice: str) -> ModuleType | None:
    try:
        return importlib.import_module(KERNEL_MODULE)
    except ImportError as exc:
        if choice == "numba":
            raise EnvironmentFault(
                f"{KERNEL_VARIABLE}=numba but numba does not import ({exc}): install it "
                f"(pip install 'numba>=0.60') or set {KERNEL_VARIABLE}=numpy") from exc
        return None


def code_dtype(cells: int) -> type[np.unsignedinteger]:
    """Smallest unsigned integer type that holds codes below ``cells``."""
    if cells <= 1 << 8:
        return np.uint8
    if cells <= 1 << 16:
        return np.uint16
    if cells <= 1 << 32:
        return np.uint32
    return np.uint64


# Codes are compacted (renumbered to the occurring configurations) before they could
# overflow 64 bits; the number of possible configurations is still reported exactly.
COMPACT_ABOVE = 1 << 62


def configuration_codes(
    codes: np.ndarray, arities: np.ndarray, variables: Sequence[int]
) -> tuple[np.ndarray, int, int]:
    """Mixed-radix code of each row's joint state of ``variables``.

    ``codes`` has shape (n_vars, n_rows). Returns ``(code, bound, possible)``: an integer
    array of length n_rows with every value below ``bound``, and the number of possible
    joint states (the product of the arities; 1 for no variables). ``bound`` equals
    ``possible`` unless the codes had to be renumbered to stay within 64 bits.
    """
    n_rows = codes.shape[1]
    if not variables:
        return np.zeros(n_rows, dtype=np.uint8), 1, 1
    possible = 1
    for v in variables:
        possible *= int(arities[v])
    bound = int(arities[variables[0]])
    out = codes[variables[0]].astype(code_dtype(possible if possible < COMPACT_ABOVE else 1 << 64))
    for v in variables[1:]:
        r = int(arities[v])
        if bound * r >= COMPACT_ABOVE:
            occurring, inverse = np.unique(out, return_inverse=True)
            out, bound = inverse.astype(np.uint64), int(occurring.size)
        out *= out.dtype.type(r)  # in place: ``out`` is always a fresh array here
        out += codes[v]
        bound *= r
    return out, bound, possible


def family_counts(
    codes: np.ndarray, arities: np.ndarray, child: int, parents: Sequence[int]
) -> tuple[np.ndarray, int]:
    """Counts N_jk of the child's states k per occurring parent configuration j.

    Returns ``(table, q)``: ``table`` has shape (q_occurring, r_child) with every row
    summing to at least 1, and ``q`` is the number of possible parent configurations
    (the product of the parents' arities), which penalties and priors need.
    """
    r = int(arities[child])
    n_rows = codes.shape[1]
    if not parents:
        table = np.bincount(codes[child], minlength=r).reshape(1, r)
        return table, 1
    parent_code, bound, q = configuration_codes(codes, arities, list(parents))
    if bound * r >= COMPACT_ABOVE:
        occurring, inverse = np.unique(parent_code, return_inverse=True)
        parent_code, bound = inverse.astype(np.uint64), int(occurring.size)
    cells = bound * r
    dtype = code_dtype(cells)
    family_code = parent_code.astype(dtype, copy=False) * dtype(r) + codes[child]
    if cells <= dense_limit(n_rows):
        dense = np.bincount(family_code, minlength=cells).reshape(bound, r)
        return dense[dense.any(axis=1)], q
    occurring, counts = np.unique(family_code, return_counts=True)
    configs, row_of = np.unique(occurring // r, return_inverse=True)
    table = np.zeros((configs.size, r), dtype=np.int64)
    table[row_of, (occurring % r).astype(np.intp)] = counts
    return table, q


# --------------------------------------------------------------------------- columns

#: Temporaries of a column count (stacked row codes, counted cells, bitmap words) are
#: made in chunks of at most this many elements (at least one candidate a chunk).
COLUMN_CHUNK = 1 << 20
#: Lanes of the stacked count: consecutive rows go to different copies of a cell, so
#: that rows in the same cell (common in real data) do not wait on each other's
#: increments in ``numpy.bincount``; the copies are summed afterwards.
COLUMN_LANES = 4
#: State bitmaps are kept for the column count while they take at most this many bytes.
BITMAP_BYTES = 64 << 20
#: The bitmap count is used when (occurring parent cells) x (candidate states) is at most
#: this many times the number of candidates: its word operations per row are then fewer
#: than the stacked count's (a word holds 64 rows; measured on ALARM, 10,000 rows).
BITMAP_CELLS = 128


class StateBitmaps:
    """Each (variable, state)'s rows as a bitmap: ``words[offsets[v] + s]`` has bit ``i``
    set when row ``i`` of variable ``v`` is in state ``s`` (``uint64`` words, the bits
    past the last row clear). Counts of conjunctions are then ``popcount`` of ANDs."""

    def __init__(self, codes: np.ndarray, arities: np.ndarray) -> None:
        n_vars, n_rows = codes.shape
        self.offsets = np.zeros(n_vars + 1, dtype=np.intp)
        np.cumsum(np.asarray(arities, dtype=np.intp), out=self.offsets[1:])
        self.n_words = -(-n_rows // 64)
        packed = np.zeros((int(self.offsets[-1]), self.n_words * 8), dtype=np.uint8)
        for v in range(n_vars):  # one variable's states at a time: a small temporary
            states = np.arange(int(arities[v]))[:, None]
            packed[self.offsets[v]:self.offsets[v + 1], :-(-n_rows // 8)] = np.packbits(
                codes[v][None, :] == states, axis=1, bitorder="little")
        self.words = packed.view(np.uint64)

    @staticmethod
    def size(codes: np.ndarray, arities: np.ndarray) -> int:
        """Bytes the bitmaps of ``codes`` take."""
        return int(np.asarray(arities, dtype=np.int64).sum()) * -(-codes.shape[1] // 64) * 8

    def states(self, variable: int) -> np.ndarray:
        """The bitmaps of ``variable``'s states, one row each."""
        return self.words[self.offsets[variable]:self.offsets[variable + 1]]


def _bitmap_configurations(bitmaps: StateBitmaps, arities: np.ndarray,
                           parents: Sequence[int]) -> tuple[np.ndarray, np.ndarray]:
    """The occurring configurations of ``parents`` (sorted): their mixed-radix codes,
    ascending, and their rows as bitmaps (one row each)."""
    words = bitmaps.words
    found = np.full((1, bitmaps.n_words), ~np.uint64(0))
    codes = np.zeros(1, dtype=np.int64)
    for v in parents:
        radix = int(arities[v])
        found = (found[:, None, :] & bitmaps.states(v)[None, :, :]).reshape(-1, words.shape[1])
        codes = (codes[:, None] * radix + np.arange(radix)).ravel()
        occurs = found.any(axis=1)
        found, codes = found[occurs], codes[occurs]
    return codes, found


def _bitmap_cells(bitmaps: StateBitmaps, child: int, found: np.ndarray,
                  added: Sequence[int]) -> np.ndarray:
    """Counts (candidate states, configurations, child states) by ``popcount``: the
    configurations' bitmaps ``found`` AND each child state AND each candidate state but
    the last; a candidate's last state gets what its other states leave of the cell."""
    cells = (found[:, None, :] & bitmaps.states(child)[None, :, :]).reshape(
        -1, bitmaps.n_words)
    rows = 64 * bitmaps.n_words
    total_type = np.uint16 if rows < 1 << 16 else np.uint32 if rows < 1 << 32 else np.uint64
    radix = np.asarray([bitmaps.offsets[p + 1] - bitmaps.offsets[p] for p in added],
                       dtype=np.intp)
    first = np.asarray([bitmaps.offsets[p] for p in added], dtype=np.intp)
    counted_states = radix - 1  # every state but the last is counted
    ends = np.cumsum(counted_states)
    states = np.arange(int(ends[-1]), dtype=np.intp) + np.repeat(first - (ends - counted_states),
                                                                 counted_states)
    some = np.empty((states.size, cells.shape[0]), dtype=np.int64)
    step = max(1, COLUMN_CHUNK // max(1, cells.size))
    for start in range(0, states.size, step):
        anded = bitmaps.words[states[start:start + step], None, :] & cells[None, :, :]
        some[start:start + step] = np.bitwise_count(anded).sum(axis=2, dtype=total_type)
    totals = np.bitwise_count(cells).sum(axis=1, dtype=np.int64)
    # each candidate's counted states, summed: differences of a running sum
    running = np.zeros((states.size + 1, cells.shape[0]), dtype=np.int64)
    np.cumsum(some, axis=0, out=running[1:])
    last = totals - (running[ends] - running[ends - counted_states])
    out = np.empty((int(radix.sum()), cells.shape[0]), dtype=np.int64)
    is_last = np.zeros(out.shape[0], dtype=bool)
    is_last[np.cumsum(radix) - 1] = True
    out[is_last] = last
    out[~is_last] = some
    return out.reshape(out.shape[0], found.shape[0], -1)


def _stacked_cells(codes: np.ndarray, arities: np.ndarray, child: int,
                   parents: Sequence[int], added: Sequence[int]) -> np.ndarray:
    """Counts (candidate states, configurations, child states) by ``numpy.bincount``
    over every configuration of ``parents``: each row's cell code ``j r + x`` built
    once, a candidate's rows counted at ``(c + x_p) q r + j r + x`` (``c`` the states of
    the candidates before it in its chunk), a chunk of candidates in one count."""
    n_rows = codes.shape[1]
    r = int(arities[child])
    q = configurations(arities, parents)
    lanes = COLUMN_LANES
    base = np.zeros(n_rows, dtype=np.intp)
    for v in parents:
        base *= int(arities[v])
        base += codes[v]
    base *= r
    base += codes[child]
    base *= lanes
    base += np.arange(n_rows, dtype=np.intp) & (lanes - 1)
    cells = q * r * lanes
    radix = [int(arities[p]) for p in added]
    out = np.empty((sum(radix), q * r), dtype=np.int64)
    first, row = 0, 0
    while first < len(added):
        last, width = first + 1, radix[first]
        while (last < len(added) and (last + 1 - first) * n_rows <= COLUMN_CHUNK
               and (width + radix[last]) * cells <= COLUMN_CHUNK):
            width += radix[last]
            last += 1
        shift = np.zeros(last - first, dtype=np.intp)
        np.cumsum(radix[first:last - 1], out=shift[1:])
        stacked = codes[list(added[first:last])].astype(np.intp)
        stacked += shift[:, None]
        stacked *= cells
        stacked += base
        counted = np.bincount(stacked.ravel(), minlength=width * cells)
        out[row:row + width] = counted.reshape(width, q * r, lanes).sum(axis=2)
        first, row = last, row + width
    return out.reshape(-1, q, r)


def _cell_groups(added: Sequence[int], cells: int, arities: np.ndarray) -> list[list[int]]:
    """``added`` in consecutive groups of at most :data:`COLUMN_CHUNK` dense cells
    (``cells`` x each candidate's arity; at least one candidate a group), so that a
    column count's dense tables stay within a few MiB whatever the width."""
    groups: list[list[int]] = []
    room = 0
    for p in added:
        size = cells * int(arities[p])
        if not groups or size > room:
            groups.append([])
            room = max(COLUMN_CHUNK, size)
        groups[-1].append(p)
        room -= size
    return groups


def column_counts(codes: np.ndarray, arities: np.ndarray, child: int,
                  parents: Sequence[int], added: Sequence[int],
                  bitmaps: StateBitmaps | None = None) -> list[np.ndarray]:
    """Count tables of ``child`` given the sorted ``parents`` plus each of ``added`` in
    turn (distinct variables, none a parent or the child), equal to :func:`family_counts`'
    tables (occurring parent configurations in ascending code order, one column per child
    state, ``int64``), counted together.

    Every code must be below its variable's arity, and each table small enough to count
    densely (the caller's check). The counts (candidate state, configuration of
    ``parents``, child state) come from one of two counts, the same integers: with
    ``bitmaps`` and few occurring cells of the parents and child (at most
    :data:`BITMAP_CELLS` x candidates, over the candidates' states), ``popcount`` of the
    ANDs of row bitmaps (:class:`StateBitmaps`, a word per 64 rows); else one
    ``numpy.bincount`` over stacked row codes (:func:`_stacked_cells`). Each count is then
    put at its row of the candidate's dense table: the configuration of the sorted
    enlarged parent set, ``(high * r_p + x_p) * L + low``, where ``high`` and ``low`` are
    the configurations of the parents before and after the candidate and ``L`` the number
    of the latter's; all candidates in one scatter. The configurations that do not occur
    are then dropped in one pass. The dense tables take (configurations of ``parents``) x
    r x (the candidates' states) cells: the caller bounds them (:func:`_cell_groups`).
    """
    r = int(arities[child])
    if not added:
        return []
    if codes.shape[1] == 0:
        return [np.zeros((0, r), dtype=np.int64) for _ in added]
    members = list(parents)
    q = configurations(arities, members)
    radix = np.asarray([int(arities[p]) for p in added], dtype=np.int64)
    width = int(radix.sum())
    counted = None
    if bitmaps is not None and q * r <= BITMAP_CELLS * len(added):
        # the occurring cells decide (at most q r of them): few, and popcounts pay
        configs, found = _bitmap_configurations(bitmaps, arities, members)
        if configs.size * r * width <= BITMAP_CELLS * len(added):
            counted = _bitmap_cells(bitmaps, child, found, added)
    if counted is None:
        counted = _stacked_cells(codes, arities, child, members, added)
        configs = np.arange(q, dtype=np.int64)
    after = [1] * (len(members) + 1)  # the product of the arities after each place
    for k in range(len(members) - 1, -1, -1):
        after[k] = after[k + 1] * int(arities[members[k]])
    places = np.searchsorted(np.asarray(members, dtype=np.intp),
                             np.asarray(added, dtype=np.intp))
    low = np.asarray(after, dtype=np.int64)[places]
    blocks = q * radix  # each candidate's dense rows
    block_start = np.zeros(len(added), dtype=np.int64)
    np.cumsum(blocks[:-1], out=block_start[1:])
    owner = np.repeat(np.arange(len(added)), radix)  # of each candidate state
    state = np.arange(width, dtype=np.int64) - np.repeat(np.cumsum(radix) - radix, radix)
    low_s, radix_s = low[owner][:, None], radix[owner][:, None]
    row = (block_start[owner][:, None]
           + ((configs // low_s) * radix_s + state[:, None]) * low_s + configs % low_s)
    dense = np.zeros((int(blocks.sum()), r), dtype=np.int64)
    dense[row.ravel()] = counted.reshape(-1, r)
    occurs = dense.any(axis=1)
    kept = np.add.reduceat(occurs, block_start, dtype=np.intp)
    table = dense[occurs]
    bounds = np.zeros(len(added) + 1, dtype=np.intp)
    np.cumsum(kept, out=bounds[1:])
    return [table[bounds[i]:bounds[i + 1]] for i in range(len(added))]


def configurations(arities: np.ndarray, variables: Sequence[int]) -> int:
    """Number of joint states of ``variables``: the product of their arities (1 for none)."""
    possible = 1
    for v in variables:
        possible *= int(arities[v])
    return possible


class CountScorer(CachedScorer):
    """Family scores of discrete data from their count tables, cached (see
    :class:`~runner.scores.cache.CachedScorer`).

    ``codes`` has shape (n_vars, n_rows) and ``arities`` one entry per variable;
    ``function`` scores one family's count table (:func:`family_counts`). The compiled
    kernel trusts every code to be below its variable's arity: it is checked once, when
    the kernel is chosen, and data where it fails are counted by the numpy path.
    """

    def __init__(self, function: CountFamilyScore, codes: np.ndarray, arities: np.ndarray,
                 cache_limit: int | None = None) -> None:
        n_vars, n_rows = codes.shape
        super().__init__(int(n_vars), int(n_rows), cache_limit)
        self.function = function
        self.column_function = column_form(function)
        self.codes = codes
        self.arities = arities
        self._limit = dense_limit(int(n_rows))
        self._arities = np.asarray(arities, dtype=np.int64)  # as the kernel takes them
        self._dense: np.ndarray | None = None  # the kernel's scratch table, all zero
        self._code = np.zeros(0, dtype=np.int64)
        self._choice: str | None = None  # DAGMILL_KERNEL, read at the first count
        self._settled = codes.dtype not in (np.uint8, np.uint16)
        self._kernel_module: ModuleType | None = None
        self._counted = 0  # rows x families counted by the numpy path
        self._in_range: bool | None = None  # every code below its arity (checked once)
        self._bitmaps: StateBitmaps | None = None  # the numpy path's column bitmaps

    def _kernel(self) -> ModuleType | None:
        """The counting kernel once chosen (None: the numpy path, for now or for good)."""
        if self._settled:
            return self._kernel_module
        if self._choice is None:
            self._choice = kernel_choice()
        if self._choice == "numpy":
            self._settled = True
        elif (self._choice == "numba" or self._counted >= AUTO_AFTER_ROWS
              or kernel_loaded()):  # loaded already: no cost left to avoid
            if self._codes_in_range():
                self._kernel_module = counting_kernel(self._choice)
                self._bitmaps = None  # the kernel counts the columns from now on
            self._settled = True
        return self._kernel_module

    def __getstate__(self) -> dict[str, object]:
        """A copy for another process (a pool or cluster worker) chooses its counting
        path again there: a module and the scratch buffers do not travel."""
        state = dict(self.__dict__)
        if state["_kernel_module"] is not None:
            state.update(_kernel_module=None, _settled=False, _choice=None)
        state.update(_dense=None, _code=np.zeros(0, dtype=np.int64), _bitmaps=None)
        return state

    def _codes_in_range(self) -> bool:
        """Whether every code is below its variable's arity (the kernel and the column
        count trust it); computed once."""
        if self._in_range is None:
            codes = self.codes
            self._in_range = codes.size == 0 or not bool(
                (codes.max(axis=1) >= self._arities).any())
        return self._in_range

    def _column_bitmaps(self) -> StateBitmaps | None:
        """The state bitmaps of the numpy path's column count, made at its first column
        (None when they would take more than :data:`BITMAP_BYTES`)."""
        if self._bitmaps is None and StateBitmaps.size(self.codes, self.arities) <= BITMAP_BYTES:
            self._bitmaps = StateBitmaps(self.codes, self.arities)
        return self._bitmaps

    def _scratch(self) -> tuple[np.ndarray, np.ndarray]:
        """The kernel's reused buffers: the dense table (all zero between counts) and a
        configuration code per row."""
        if self._dense is None:
            self._dense = np.zeros(self._limit, dtype=np.int64)
            self._code = np.zeros(self.n_rows, dtype=np.int64)
        return self._dense, self._code

    def counts(self, child: int, parents: Sequence[int]) -> tuple[np.ndarray, int]:
        """The count table and ``q`` of ``child`` given the sorted ``parents``, as
        :func:`family_counts` gives them (by the kernel when it applies)."""
        kernel = self._kernel()
        q = configurations(self.arities, parents)
        if kernel is None or q * int(self.arities[child]) > self._limit:
            self._counted += self.n_rows
            return family_counts(self.codes, self.arities, child, parents)
        return kernel.family_table(self.codes, self._arities, child, list(parents),
                                   *self._scratch()), q

    def _compute(self, child: int, mask: int) -> float:
        table, q = self.counts(child, mask_members(mask))
        return self.function(table, q, self.n_rows)

    def column_tables(self, child: int, mask: int,
                      candidates: Sequence[int]) -> list[tuple[np.ndarray, int]]:
        """The count tables and ``q`` of ``child`` given ``mask`` with each candidate's bit
        flipped, as :meth:`counts` gives them; every added parent counted from one
        configuration code of ``mask`` (by the kernel, else by :func:`column_counts` when
        the codes are in range), removals and tables too large for the dense count one by
        one. The cache and counters are not touched."""
        kernel = self._kernel()
        parents = list(mask_members(mask))
        found: dict[int, tuple[np.ndarray, int]] = {}
        q = configurations(self.arities, parents)
        base = q * int(self.arities[child])
        added = [p for p in candidates
                 if not mask >> p & 1 and base * int(self.arities[p]) <= self._limit]
        if added and kernel is not None:
            tables = kernel.column_tables(self.codes, self._arities, child, parents,
                                          added, *self._scratch())
        elif len(added) > 1 and self._codes_in_range():
            self._counted += self.n_rows * len(added)
            tables = []
            for group in _cell_groups(added, base, self.arities):
                tables += column_counts(self.codes, self.arities, child, parents, group,
                                        self._column_bitmaps())
        else:
            added, tables = [], []
        for p, table in zip(added, tables, strict=True):
            found[p] = (table, q * int(self.arities[p]))
        for p in candidates:
            if p not in found:
                found[p] = self.counts(child, mask_members(mask ^ (1 << p)))
        return [found[p] for p in candidates]

    def _compute_column(self, child: int, mask: int, candidates: Sequence[int]) -> list[float]:
        """The column's tables (:meth:`column_tables`) scored together when the score has
        a several-tables form (:func:`runner.scores.likelihood.column_form`: the same bits
        as one by one)."""
        return score_tables(self.function, self.column_function,
                            self.column_tables(child, mask, candidates), self.n_rows)


def score_tables(function: CountFamilyScore,
                 column_function: CountColumnScore | None,
                 pairs: Sequence[tuple[np.ndarray, int]], n_rows: int) -> list[float]:
    """The scores of one child's count tables (with their ``q``), by the score's
    several-tables form when it has one (:func:`runner.scores.likelihood.column_form`:
    the same bits as one by one), else one by one."""
    if column_function is not None:
        return column_function([t for t, _ in pairs], [q for _, q in pairs], n_rows)
    return [function(table, q, n_rows) for table, q in pairs]
