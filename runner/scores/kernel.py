"""The compiled counting kernel: count tables of families in one pass over the rows.

:func:`runner.scores.counts.family_counts` builds each row's parent configuration code
with one numpy operation per parent and counts the family codes with ``numpy.bincount``:
several passes over the rows and a temporary array per parent. The kernel here does the
same in compiled loops (numba, ``@njit(cache=True)``: compiled on the first count and kept
on disk), then compacts the dense table of every (configuration, child state) cell to the
occurring configurations in ascending configuration order. The tables are equal, entry by
entry and in dtype (``int64``), to those of the numpy path, so every score computed from
them is the same bits (counts are integers: how they are summed does not matter).

What the time goes to, and what is done about it (ALARM 10k, ``benchmarks/kernel.py``):

* each row's cell, ``((configuration * r) + child state) * lanes + lane``, is computed in
  one vectorised pass for up to four parents (:func:`_row_code`), in 32-bit arithmetic
  (numba widens integers to 64 bits, which halves the vector lanes: :func:`_madd`);
* the increments: consecutive rows of real data often fall in the same cell, and an
  increment then waits on the previous one (or the processor mispredicts the memory
  dependence); so consecutive rows count into up to :data:`LANES` interleaved copies of
  each cell, summed in the compaction (:func:`_lanes`), and without numba's negative-index
  check (the cell indices are unsigned);
* the scratch buffers the caller owns (``int64``) are counted as 32-bit cells and codes
  (twice the cells in the same bytes, half the traffic) while the rows and the buffer
  allow it (:data:`NARROW_LIMIT`);
* tables large against the rows are counted in one lane and compacted a cache line at a
  time (:func:`_compact_lines`: most configurations do not occur).

A column of candidate families (a child with a parent set and each candidate parent
added in turn, the move engine's delta column) shares the parent set's cells:
:func:`column_tables` computes them once and counts four candidates per pass over the
rows, each candidate's state selecting one plane of its table (``x_p * plane + cell``);
the candidate's place among the sorted parents is restored while the table is compacted
(the configuration ``(high, low)`` of the parent set becomes ``(high, x_p, low)``), so
each table comes out in the same order as :func:`~runner.scores.counts.family_counts`
gives it.

Only families whose dense table fits the scratch buffer are counted here (``cells``
at most the counting module's dense limit); the others stay on the numpy path, which
compacts sparse codes with ``numpy.unique``. This module imports numba: it is imported
only when the first family is counted (:func:`runner.scores.counts.counting_kernel`).
"""

from __future__ import annotations

from collections.abc import Callable
from itertools import accumulate, pairwise
from typing import Any

import numba
import numpy as np
from numba import types
from numba.extending import intrinsic


def _compiled(function: Callable[..., Any]) -> Any:
    """``function`` compiled by numba, its machine code cached on disk when a cache
    folder is writable (``NUMBA_CACHE_DIR``, beside the module, or the user's cache);
    compiled in each process otherwise, never failing for want of a cache folder."""
    try:
        return numba.njit(cache=True, nogil=True)(function)
    except RuntimeError:  # "cannot cache function ...: no locator available"
        return numba.njit(nogil=True)(function)


#: Most lanes of a single family's dense count (a power of two): see :func:`_lanes`.
LANES = 8
#: Most lanes of a column's dense count: four candidates per pass interleave already.
COLUMN_LANES = 2
#: The scratch buffers are counted as 32-bit cells (twice as many in the same bytes) and
#: 32-bit row cells when the rows and the buffer's length are below this (each lane's
#: count is at most the rows, each cell index below twice the buffer's length); in 64
#: bits otherwise, by a variant compiled when first needed.
NARROW_LIMIT = 1 << 31
#: Cells tested at once by :func:`_compact_lines` (a 64-byte line of 32-bit cells).
LINE = 16

_U = np.uint64


def _lanes(cells: int, size: int, n_rows: int, most: int) -> int:
    """Lanes of a dense count of ``cells`` cells in a buffer of ``size`` over ``n_rows``
    rows: the most, up to ``most`` (a power of two), whose cells fit the buffer and half
    the rows. Consecutive rows go to different lanes, so that rows in the same cell
    (common in real data) do not wait on each other's increments; a table large for its
    rows gets fewer (its rows rarely meet in a cell, and the compaction reads every lane
    of every cell), down to one."""
    room = min(size, n_rows // 2)
    lanes = most
    while lanes > 1 and cells * lanes > room:
        lanes //= 2
    return lanes


def _cell_typing(typingctx: Any, value: Any, like: Any) -> Any:
    """``value`` (an integer) converted, wrapping, to the element type of the array
    ``like``."""
    if not (isinstance(like, types.Array) and isinstance(value, types.Integer)):
        return None

    def codegen(context: Any, builder: Any, signature: Any, args: Any) -> Any:
        return context.cast(builder, args[0], signature.args[0], signature.return_type)

    return like.dtype(value, like), codegen


def _madd_typing(typingctx: Any, a: Any, b: Any, c: Any) -> Any:
    """``a * b + c`` in the integers' own width (numba would widen them to 64 bits: the
    vectorised cell passes then take half the lanes)."""
    if not (isinstance(a, types.Integer) and a == b == c):
        return None

    def codegen(context: Any, builder: Any, signature: Any, args: Any) -> Any:
        return builder.add(builder.mul(args[0], args[1]), args[2])

    return a(a, b, c), codegen


def _and_typing(typingctx: Any, a: Any, b: Any) -> Any:
    """``a & b`` in the integers' own width."""
    if not (isinstance(a, types.Integer) and a == b):
        return None

    def codegen(context: Any, builder: Any, signature: Any, args: Any) -> Any:
        return builder.and_(args[0], args[1])

    return a(a, b), codegen


_cell: Any = intrinsic(_cell_typing)
_madd: Any = intrinsic(_madd_typing)
_and: Any = intrinsic(_and_typing)


def _row_code(codes: np.ndarray, arities: np.ndarray, parents: np.ndarray, child: int,
              lanes: int, code: np.ndarray) -> None:
    """Each row's dense cell ``((configuration * r) + child state) * lanes + lane`` into
    ``code`` (computed in ``code``'s unsigned width); the lane is the row's number modulo
    ``lanes`` (any lane counts the same: the compaction sums them).

    Up to four parents in one pass over the rows (each parent's state times the cells
    of one of its states); more parents one pass each, the child and the lane in a last
    pass.
    """
    k = parents.shape[0]
    states = codes[child]
    n = codes.shape[1]
    cells = code[:n]
    width = _cell(lanes, cells)
    mask = _cell(lanes - 1, cells)
    if k > 4:
        first = codes[parents[0]]
        for i in range(n):
            cells[i] = first[i]
        for j in range(1, k):
            radix = _cell(arities[parents[j]], cells)
            middle = codes[parents[j]]
            for i in range(n):
                cells[i] = _madd(cells[i], radix, _cell(middle[i], cells))
        r = _cell(arities[child], cells)
        for i in range(n):
            cells[i] = _madd(_madd(cells[i], r, _cell(states[i], cells)), width,
                             _and(_cell(i, cells), mask))
        return
    # the weight of each parent's state: the cells of the parents after it, the child
    # and the lanes
    weights = np.zeros(4, dtype=np.int64)
    weight = arities[child] * lanes
    for j in range(k - 1, -1, -1):
        weights[j] = weight
        weight *= arities[parents[j]]
    w0 = _cell(weights[0], cells)
    w1 = _cell(weights[1], cells)
    w2 = _cell(weights[2], cells)
    w3 = _cell(weights[3], cells)
    if k == 0:
        for i in range(n):
            cells[i] = _madd(_cell(states[i], cells), width, _and(_cell(i, cells), mask))
        return
    a0 = codes[parents[0]]
    if k == 1:
        for i in range(n):
            cells[i] = _madd(_cell(a0[i], cells), w0, _madd(
                _cell(states[i], cells), width, _and(_cell(i, cells), mask)))
        return
    a1 = codes[parents[1]]
    if k == 2:
        for i in range(n):
            cells[i] = _madd(_cell(a0[i], cells), w0, _madd(_cell(a1[i], cells), w1, _madd(
                _cell(states[i], cells), width, _and(_cell(i, cells), mask))))
        return
    a2 = codes[parents[2]]
    if k == 3:
        for i in range(n):
            cells[i] = _madd(_cell(a0[i], cells), w0, _madd(_cell(a1[i], cells), w1, _madd(
                _cell(a2[i], cells), w2, _madd(_cell(states[i], cells), width,
                                               _and(_cell(i, cells), mask)))))
        return
    a3 = codes[parents[3]]
    for i in range(n):
        cells[i] = _madd(_cell(a0[i], cells), w0, _madd(_cell(a1[i], cells), w1, _madd(
            _cell(a2[i], cells), w2, _madd(_cell(a3[i], cells), w3, _madd(
                _cell(states[i], cells), width, _and(_cell(i, cells), mask))))))


def _compact(dense: np.ndarray, high: int, low: int, middle: int, r: int, lanes: int,
             out: np.ndarray, start: int) -> int:
    """Move the occurring configurations of ``dense`` into ``out`` from ``start`` on,
    zeroing ``dense``; return the number of configurations written.

    ``dense`` is laid out as (middle, high, low, r, lanes), a cell's count the sum of its
    lanes; the configurations are written in the order (high, middle, low), each as its
    ``r`` child counts.
    """
    written = 0
    width = r * lanes
    plane = high * low * width
    for h in range(high):
        for m in range(middle):
            for lo in range(low):
                source = m * plane + (h * low + lo) * width
                seen = 0
                for k in range(width):
                    seen |= dense[source + k]
                if seen != 0:
                    target = start + written * r
                    if lanes == 1:
                        for k in range(r):
                            out[target + k] = dense[source + k]
                            dense[source + k] = 0
                    else:
                        for k in range(r):
                            total = 0
                            for lane in range(lanes):
                                total += dense[source + k * lanes + lane]
                                dense[source + k * lanes + lane] = 0
                            out[target + k] = total
                    written += 1
    return written


def _compact_lines(dense: np.ndarray, cells: int, r: int, out: np.ndarray) -> int:
    """Move the occurring configurations of a one-lane ``dense`` table of ``cells`` cells,
    laid out as (configuration, r), into ``out`` in ascending order, zeroing ``dense``;
    return the number of configurations written.

    For tables large against their rows, where most configurations do not occur: each
    run of :data:`LINE` cells is tested at once, and only the runs holding a count are
    looked at cell by cell (a configuration is moved whole when its first counted cell
    is met, so its later cells read zero).
    """
    written = 0
    for start in range(0, cells, LINE):
        seen = 0
        if start + LINE <= cells:
            for k in range(LINE):
                seen |= dense[start + k]
        else:
            for k in range(start, cells):
                seen |= dense[k]
        if seen == 0:
            continue
        for c in range(start, min(start + LINE, cells)):
            if dense[c] != 0:
                source = (c // r) * r
                target = written * r
                for k in range(r):
                    out[target + k] = dense[source + k]
                    dense[source + k] = 0
                written += 1
    return written


def _bound(arities: np.ndarray, parents: np.ndarray) -> int:
    """The number of configurations of ``parents``."""
    bound = 1
    for k in range(parents.shape[0]):
        bound *= arities[parents[k]]
    return bound


def _family_into(codes: np.ndarray, arities: np.ndarray, parents: np.ndarray, child: int,
                 dense: np.ndarray, code: np.ndarray) -> np.ndarray:
    """Count table of one family whose cells fit ``dense``, in the integer widths of
    ``dense`` (counts) and ``code`` (row cells, unsigned)."""
    n_rows = codes.shape[1]
    r = arities[child]
    bound = _bound_jit(arities, parents)
    lanes = _lanes_jit(bound * r, dense.shape[0], n_rows, LANES)
    _row_code_jit(codes, arities, parents, child, lanes, code)
    cells = code[:n_rows]
    for i in range(n_rows):
        dense[cells[i]] += 1
    out = np.empty(min(bound, n_rows) * r, dtype=np.int64)
    if lanes == 1:
        rows = _compact_lines_jit(dense, bound * r, r, out)
    else:
        rows = _compact_jit(dense, bound, 1, 1, r, lanes, out, 0)
    if rows == 0 and parents.shape[0] == 0:  # no rows: the one configuration, as numpy's
        return np.zeros((1, r), dtype=np.int64)
    return out[: rows * r].reshape(rows, r)


def _column_into(codes: np.ndarray, arities: np.ndarray, parents: np.ndarray, child: int,
                 extras: np.ndarray, dense: np.ndarray, code: np.ndarray
                 ) -> tuple[np.ndarray, np.ndarray]:
    """Count tables of ``child`` given ``parents`` (sorted) plus each of ``extras`` in
    turn.

    Each row's cell of the parent set (:func:`_row_code`) is computed
    once; a candidate's state ``a`` then selects one of its table's planes
    (``a * plane + cell``), four candidates counted per pass when their tables fit side
    by side. A candidate's table is laid out as (its state, the parents before it, the
    parents after it, the child, the lanes) and compacted to (parents before, candidate,
    parents after), the sorted order. Returns the tables one after another as the rows
    of one array, and each table's number of rows.
    """
    n_rows = codes.shape[1]
    r = arities[child]
    bound = _bound_jit(arities, parents)
    n_extras = extras.shape[0]
    largest = 1
    capacity = 0
    for i in range(n_extras):
        middle = arities[extras[i]]
        largest = max(largest, middle)
        capacity += min(bound * middle, n_rows) * r
    lanes = _lanes_jit(bound * largest * r, dense.shape[0], n_rows, COLUMN_LANES)
    _row_code_jit(codes, arities, parents, child, lanes, code)
    plane = bound * r * lanes
    step = _U(plane)
    # the product of the arities of the parents after each candidate
    lows = np.ones(n_extras, dtype=np.int64)
    for i in range(n_extras):
        for k in range(parents.shape[0]):
            if parents[k] > extras[i]:
                lows[i] *= arities[parents[k]]
    counts = np.zeros(n_extras, dtype=np.int64)
    out = np.empty(capacity, dtype=np.int64)
    used = 0
    i = 0
    while i < n_extras:
        if i + 4 <= n_extras:
            m0 = arities[extras[i]]
            m1 = arities[extras[i + 1]]
            m2 = arities[extras[i + 2]]
            m3 = arities[extras[i + 3]]
            o1 = plane * m0
            o2 = o1 + plane * m1
            o3 = o2 + plane * m2
            if o3 + plane * m3 <= dense.shape[0]:
                a0 = codes[extras[i]]
                a1 = codes[extras[i + 1]]
                a2 = codes[extras[i + 2]]
                a3 = codes[extras[i + 3]]
                d1 = dense[o1:]
                d2 = dense[o2:]
                d3 = dense[o3:]
                for row in range(n_rows):
                    cell = _U(code[row])
                    dense[_U(a0[row]) * step + cell] += 1
                    d1[_U(a1[row]) * step + cell] += 1
                    d2[_U(a2[row]) * step + cell] += 1
                    d3[_U(a3[row]) * step + cell] += 1
                offsets = (0, o1, o2, o3)
                middles = (m0, m1, m2, m3)
                for k in range(4):
                    low = lows[i + k]
                    rows = _compact_jit(dense[offsets[k]:], bound // low, low, middles[k], r,
                                        lanes, out, used)
                    counts[i + k] = rows
                    used += rows * r
                i += 4
                continue
        middle = arities[extras[i]]
        added = codes[extras[i]]
        for row in range(n_rows):
            dense[_U(added[row]) * step + _U(code[row])] += 1
        low = lows[i]
        rows = _compact_jit(dense, bound // low, low, middle, r, lanes, out, used)
        counts[i] = rows
        used += rows * r
        i += 1
    return out[:used].reshape(used // r, r), counts


def _family_cells(codes: np.ndarray, arities: np.ndarray, parents: np.ndarray, child: int,
                  dense: np.ndarray, code: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The occurring cells ``configuration * r + child state`` of one family, ascending,
    and their counts (``dense``: int64 counts, left zeroed; ``code``: uint64 row cells)."""
    n_rows = codes.shape[1]
    r = arities[child]
    total = _bound_jit(arities, parents) * r
    lanes = _lanes_jit(total, dense.shape[0], n_rows, LANES)
    _row_code_jit(codes, arities, parents, child, lanes, code)
    cells = code[:n_rows]
    for i in range(n_rows):
        dense[cells[i]] += 1
    keys = np.empty(min(total, n_rows), dtype=np.uint64)
    counts = np.empty(min(total, n_rows), dtype=np.int64)
    used = 0
    for c in range(total):
        count = 0
        for lane in range(c * lanes, (c + 1) * lanes):
            count += dense[lane]
            dense[lane] = 0
        if count:
            keys[used] = c
            counts[used] = count
            used += 1
    return keys[:used], counts[:used]


def _family_table(codes: np.ndarray, arities: np.ndarray, parents: np.ndarray, child: int,
                  dense: np.ndarray, code: np.ndarray) -> np.ndarray:
    """:func:`_family_into` on 32-bit views of the scratch buffers."""
    return _family_into_jit(codes, arities, parents, child, dense.view(np.int32),
                            code.view(np.uint32))


def _column_tables(codes: np.ndarray, arities: np.ndarray, parents: np.ndarray, child: int,
                   extras: np.ndarray, dense: np.ndarray, code: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray]:
    """:func:`_column_into` on 32-bit views of the scratch buffers."""
    return _column_into_jit(codes, arities, parents, child, extras, dense.view(np.int32),
                            code.view(np.uint32))


_lanes_jit = _compiled(_lanes)
_bound_jit = _compiled(_bound)
_row_code_jit = _compiled(_row_code)
_compact_jit = _compiled(_compact)
_compact_lines_jit = _compiled(_compact_lines)
_family_into_jit = _compiled(_family_into)
_column_into_jit = _compiled(_column_into)
_family_table_jit = _compiled(_family_table)
_column_tables_jit = _compiled(_column_tables)
_family_cells_jit = _compiled(_family_cells)


def family_cells(codes: np.ndarray, arities: np.ndarray, child: int, parents: list[int],
                 dense: np.ndarray, code: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The occurring cells ``configuration code * r + child state`` of ``child`` given the
    sorted ``parents``, ascending (``uint64``), and their counts (``int64``): a family's
    counts in a form that adds up across partitions of the rows.

    ``arities`` is an ``int64`` array; ``dense`` a zeroed ``int64`` scratch buffer of at
    least (configurations x child states) cells, left zeroed; ``code`` an ``int64``
    scratch buffer of a code per row.
    """
    members = np.asarray(parents, dtype=np.int64)
    keys, counts = _family_cells_jit(codes, arities, members, child, dense,
                                     code.view(np.uint64))
    return keys, counts


def family_table(codes: np.ndarray, arities: np.ndarray, child: int, parents: list[int],
                 dense: np.ndarray, code: np.ndarray) -> np.ndarray:
    """Count table of ``child`` given the sorted ``parents``: occurring configurations
    in ascending order, one column per child state, ``int64``.

    ``arities`` is an ``int64`` array; ``dense`` a zeroed ``int64`` scratch buffer of at
    least (configurations x child states) cells, left zeroed; ``code`` an ``int64``
    scratch buffer of a code per row.
    """
    members = np.asarray(parents, dtype=np.int64)
    if code.shape[0] < NARROW_LIMIT and dense.shape[0] < NARROW_LIMIT:
        table: np.ndarray = _family_table_jit(codes, arities, members, child, dense, code)
    else:
        table = _family_into_jit(codes, arities, members, child, dense, code.view(np.uint64))
    return table


def column_tables(codes: np.ndarray, arities: np.ndarray, child: int, parents: list[int],
                  extras: list[int], dense: np.ndarray, code: np.ndarray) -> list[np.ndarray]:
    """Count tables of ``child`` given the sorted ``parents`` plus each of ``extras``
    (none of them a parent or the child) in turn, as :func:`family_table` would give
    them one by one; the parent set's configuration code is built once.

    Every candidate's (configurations x child states) cells must fit ``dense``.
    """
    members = np.asarray(parents, dtype=np.int64)
    added = np.asarray(extras, dtype=np.int64)
    if code.shape[0] < NARROW_LIMIT and dense.shape[0] < NARROW_LIMIT:
        flat, rows = _column_tables_jit(codes, arities, members, child, added, dense, code)
    else:
        flat, rows = _column_into_jit(codes, arities, members, child, added, dense,
                                      code.view(np.uint64))
    bounds = [0, *accumulate(rows.tolist())]
    return [flat[start:stop] for start, stop in pairwise(bounds)]
