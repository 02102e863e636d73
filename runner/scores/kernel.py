"""The compiled counting kernel: count tables of families in one pass over the rows.

:func:`runner.scores.counts.family_counts` builds each row's parent configuration code
with one numpy operation per parent and counts the family codes with ``numpy.bincount``:
several passes over the rows and a temporary array per parent. The kernel here does the
same in one compiled loop (numba, ``@njit(cache=True)``: compiled on the first count and
kept on disk): each row's family code ``(sum_p x_p * prod_{p' after p} r_p') * r + x``
counted straight into a dense table of every (configuration, child state) cell, which is
then compacted to the occurring configurations in ascending configuration order. The
tables are equal, entry by entry and in dtype (``int64``), to those of the numpy path,
so every score computed from them is the same bits.

A column of candidate families (a child with a parent set and each candidate parent
added in turn, the move engine's delta column) shares the parent set's configuration
code: :func:`column_tables` builds it once and counts every candidate from it,
``(code * r_p + x_p) * r + x``; the candidate's place among the sorted parents is then
restored while the dense table is compacted (the configuration ``(high, low)`` of the
parent set becomes ``(high, x_p, low)``), so each table comes out in the same order as
:func:`~runner.scores.counts.family_counts` gives it.

Only families whose dense table fits the scratch buffer are counted here (``cells``
at most the counting module's dense limit); the others stay on the numpy path, which
compacts sparse codes with ``numpy.unique``. This module imports numba: it is imported
only when the first family is counted (:func:`runner.scores.counts.counting_kernel`).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numba
import numpy as np


def _compiled(function: Callable[..., Any]) -> Any:
    """``function`` compiled by numba, its machine code cached on disk when a cache
    folder is writable (``NUMBA_CACHE_DIR``, beside the module, or the user's cache);
    compiled in each process otherwise, never failing for want of a cache folder."""
    try:
        return numba.njit(cache=True, nogil=True)(function)
    except RuntimeError:  # "cannot cache function ...: no locator available"
        return numba.njit(nogil=True)(function)


#: Lanes of a small dense count (a power of two): see :func:`_lanes`.
LANES = 4


def _configuration(codes: np.ndarray, arities: np.ndarray, parents: np.ndarray,
                   code: np.ndarray) -> int:
    """Each row's configuration code of ``parents`` (sorted) into ``code``, one pass per
    parent over its contiguous row of codes; return the number of configurations."""
    n_rows = codes.shape[1]
    for i in range(n_rows):
        code[i] = 0
    bound = 1
    for k in range(parents.shape[0]):
        p = parents[k]
        radix = arities[p]
        bound *= radix
        states = codes[p]
        for i in range(n_rows):
            code[i] = code[i] * radix + states[i]
    return bound


def _family_dense(codes: np.ndarray, arities: np.ndarray, parents: np.ndarray, child: int,
                  dense: np.ndarray, code: np.ndarray) -> int:
    """Count each row's (configuration, child state) cell of ``child`` given ``parents``
    (sorted) into ``dense`` (zero on entry); return the number of configurations."""
    bound = _configuration_jit(codes, arities, parents, code)
    r = arities[child]
    states = codes[child]
    lanes = _lanes_jit(bound * r, dense.shape[0])
    for i in range(codes.shape[1]):
        dense[(code[i] * r + states[i]) * lanes + (i & (lanes - 1))] += 1
    return bound


def _lanes(cells: int, size: int) -> int:
    """Lanes of a dense count of ``cells`` cells in a buffer of ``size``: consecutive rows
    go to different lanes, so that rows in the same cell (common in real data) do not
    wait on each other's increments; one lane when the lanes do not fit."""
    return LANES if cells * LANES <= size else 1


def _compact(dense: np.ndarray, high: int, low: int, middle: int, r: int, lanes: int,
             out: np.ndarray, start: int) -> int:
    """Move the occurring configurations of ``dense`` into ``out`` from ``start`` on,
    zeroing ``dense``; return the number of configurations written.

    ``dense`` is laid out as (high, low, middle, r, lanes), a cell's count the sum of its
    lanes; the configurations are written in the order (high, middle, low), each as its
    ``r`` child counts.
    """
    written = 0
    width = r * lanes
    for h in range(high):
        for m in range(middle):
            for lo in range(low):
                source = ((h * low + lo) * middle + m) * width
                occurs = False
                for k in range(width):
                    if dense[source + k] != 0:
                        occurs = True
                        break
                if occurs:
                    target = start + written * r
                    for k in range(r):
                        total = 0
                        for lane in range(lanes):
                            total += dense[source + k * lanes + lane]
                            dense[source + k * lanes + lane] = 0
                        out[target + k] = total
                    written += 1
    return written


def _family_table(codes: np.ndarray, arities: np.ndarray, parents: np.ndarray, child: int,
                  dense: np.ndarray, code: np.ndarray) -> np.ndarray:
    """Count table of one family whose cells fit ``dense``."""
    bound = _family_dense_jit(codes, arities, parents, child, dense, code)
    r = arities[child]
    out = np.empty(min(bound, codes.shape[1]) * r, dtype=np.int64)
    rows = _compact_jit(dense, bound, 1, 1, r, _lanes_jit(bound * r, dense.shape[0]), out, 0)
    return out[: rows * r].reshape(rows, r)


def _column_tables(codes: np.ndarray, arities: np.ndarray, parents: np.ndarray, child: int,
                   extras: np.ndarray, lows: np.ndarray, dense: np.ndarray, code: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray]:
    """Count tables of ``child`` given ``parents`` plus each of ``extras`` in turn.

    ``lows[i]`` is the product of the arities of the parents after ``extras[i]`` in
    sorted order. Returns the tables one after another in one flat array and each
    table's number of rows.
    """
    n_rows = codes.shape[1]
    bound = _configuration_jit(codes, arities, parents, code)
    r = arities[child]
    states = codes[child]
    n_extras = extras.shape[0]
    counts = np.zeros(n_extras, dtype=np.int64)
    capacity = 0
    for i in range(n_extras):
        capacity += min(bound * arities[extras[i]], n_rows) * r
    out = np.empty(capacity, dtype=np.int64)
    used = 0
    i = 0
    while i < n_extras:
        if i + 4 <= n_extras:
            # four candidates in one pass over the rows when their tables fit side by side
            m0 = arities[extras[i]]
            m1 = arities[extras[i + 1]]
            m2 = arities[extras[i + 2]]
            m3 = arities[extras[i + 3]]
            w = bound * r * LANES
            o1 = w * m0
            o2 = o1 + w * m1
            o3 = o2 + w * m2
            if o3 + w * m3 <= dense.shape[0]:
                a0 = codes[extras[i]]
                a1 = codes[extras[i + 1]]
                a2 = codes[extras[i + 2]]
                a3 = codes[extras[i + 3]]
                for row in range(n_rows):
                    b = code[row]
                    t = states[row] * LANES + (row & (LANES - 1))
                    dense[(b * m0 + a0[row]) * r * LANES + t] += 1
                    dense[o1 + (b * m1 + a1[row]) * r * LANES + t] += 1
                    dense[o2 + (b * m2 + a2[row]) * r * LANES + t] += 1
                    dense[o3 + (b * m3 + a3[row]) * r * LANES + t] += 1
                offsets = (0, o1, o2, o3)
                middles = (m0, m1, m2, m3)
                for k in range(4):
                    low = lows[i + k]
                    rows = _compact_jit(dense[offsets[k]:], bound // low, low, middles[k], r,
                                        LANES, out, used)
                    counts[i + k] = rows
                    used += rows * r
                i += 4
                continue
        middle = arities[extras[i]]
        added = codes[extras[i]]
        lanes = _lanes_jit(bound * middle * r, dense.shape[0])
        mask = lanes - 1
        for row in range(n_rows):
            dense[((code[row] * middle + added[row]) * r + states[row]) * lanes
                  + (row & mask)] += 1
        low = lows[i]
        rows = _compact_jit(dense, bound // low, low, middle, r, lanes, out, used)
        counts[i] = rows
        used += rows * r
        i += 1
    return out[:used], counts


_lanes_jit = _compiled(_lanes)
_compact_jit = _compiled(_compact)
_configuration_jit = _compiled(_configuration)
_family_dense_jit = _compiled(_family_dense)
_family_table_jit = _compiled(_family_table)
_column_tables_jit = _compiled(_column_tables)


def family_table(codes: np.ndarray, arities: np.ndarray, child: int, parents: list[int],
                 dense: np.ndarray, code: np.ndarray) -> np.ndarray:
    """Count table of ``child`` given the sorted ``parents``: occurring configurations
    in ascending order, one column per child state, ``int64``.

    ``arities`` is an ``int64`` array; ``dense`` a zeroed ``int64`` scratch buffer of at
    least (configurations x child states) cells, left zeroed; ``code`` an ``int64``
    scratch buffer of a code per row.
    """
    table: np.ndarray = _family_table_jit(codes, arities, np.asarray(parents, dtype=np.int64),
                                          child, dense, code)
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
    # the product of the arities of the parents after each candidate
    after = np.ones(members.size + 1, dtype=np.int64)
    for k in range(members.size - 1, -1, -1):
        after[k] = after[k + 1] * arities[members[k]]
    lows = after[np.searchsorted(members, added)]
    flat, rows = _column_tables_jit(codes, arities, members, child, added, lows, dense, code)
    r = int(arities[child])
    tables = []
    start = 0
    for count in rows.tolist():
        end = start + count * r
        tables.append(flat[start:end].reshape(count, r))
        start = end
    return tables
