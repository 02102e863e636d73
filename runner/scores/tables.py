"""Deterministic values and order-free sums for the discrete family scores.

A discrete family score is a sum, over the cells and the parent configurations of a
count table, of one function of an integer count: ``k ln k`` for the log-likelihood
family (loglik, AIC, BIC), ``ln G(a + k) - ln G(a)`` for the Dirichlet family (BDeu,
K2). This module makes those sums the same bits on every machine:

* **Values.** Each function is tabulated per count (:class:`CountTable`, cached per
  number of rows N and per hyperparameter ``a``). The logarithm and the log-gamma
  function are our own (:mod:`runner.scores.elementary`), built from IEEE-754 additions,
  multiplications and divisions only (each correctly rounded, so the same everywhere,
  one numpy ufunc call per operation so nothing is fused) and the exact ``frexp``.
  Neither the C library's ``log``/``lgamma`` nor numpy's ``log`` are used: both pick
  an implementation by CPU feature (glibc has FMA variants of ``log``, ``exp`` and
  ``lgamma``; numpy has SIMD loops), and the variants differ in the last bit for some
  arguments.
* **Sums.** A table holds every value as a fixed-point integer ``round(value * 2**F)``
  (rounded when the entry is made). Sums of those integers are exact whatever the order
  or grouping of the additions, so numpy's integer reductions over them give one
  answer; the integer total becomes a float once, by the correctly rounded division
  ``total / 2**F``. An entry depends only on (function, N, a, k), never on which counts
  were looked up before, so a table shared by every scorer of a process is safe.

**The fraction bits F and the overflow bound.** Let B bound the sum of |value(k)| over
any counts k_1, k_2, ... with k_1 + k_2 + ... <= N (the cells of one count table, or
its row sums; zero counts have entry 0, so at most N terms count). F is the largest
integer <= 52 with ``2 B 2**F + 64 N <= 2**62``. An entry is off its exact value by at
most 32 units (module constant ``BLOCK``, below) plus a relative 1e-15, so every partial
sum of a table's entries, in any order, stays within ``B 2**F (1 + 1e-15) + 32 N <
2**62``, half of int64's range.

* ``k ln k`` (:func:`xlogx_table`): the values are >= 0 and k ln k <= k ln N, so
  B = N ln N. F = 44 for N = 10^4, 37 for 10^6, 33 for 10^7, 26 for 10^9.
* ``ln G(a + k) - ln G(a)`` = ln a + ln(a + 1) + ... + ln(a + k - 1)
  (:func:`rising_log_table`): every term after the first is in (0, ln(a + N)], so
  B = N (|ln a| + ln(a + N)).

Cost: a table's entries for the counts 0..m are made in vectorised pieces when a count
above the last m is first looked up, m doubling (so O(log N) extensions per table and
each entry once); counts above ``DENSE_LIMIT`` (at most N / 2**16 of them in one
count table) get their entries one by one, in a dictionary. So neither a large N nor
many values of ``a`` makes entries far beyond the counts that occur.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Callable
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray

from runner.scores.elementary import ln, ln_scalar, log_gamma

# --------------------------------------------------------------------------- fixed point

FRACTION_BITS_MAX = 52
SUM_LIMIT = 1 << 62
DENSE_LIMIT = 1 << 16  # counts up to this live in a dense array; larger ones in a dict
BLOCK = 64  # the rising-log table's entries are exact at multiples of BLOCK (anchors)
FIRST_FILL = 256
FILL_PIECE = 4096  # entries computed per vectorised call (a multiple of BLOCK)


def fraction_bits(bound: float, n_rows: int) -> int:
    """The largest F <= 52 with 2 bound 2**F + 64 n_rows <= 2**62 (see the module doc)."""
    bits = FRACTION_BITS_MAX
    while bits >= 0 and 2.0 * bound * 2.0**bits + BLOCK * n_rows > SUM_LIMIT:
        bits -= 1
    if bits < 0:
        raise ValueError(f"{n_rows} rows are too many for 64-bit fixed-point sums")
    return bits


class CountTable:
    """Fixed-point entries (scale ``2**bits``) of one function of a count k, with entry 0
    equal to 0, for counts up to ``n_rows``.

    ``chunk(lo, hi, scale)`` returns the entries of the counts lo..hi - 1 (lo a multiple
    of ``BLOCK``, the range within 0..min(n_rows, DENSE_LIMIT)); ``far(k, scale)`` the
    entry of one count above ``DENSE_LIMIT``. ``bound`` bounds the sum of |value| over
    counts summing to at most ``n_rows`` (module doc). The dense entries are made in
    chunks, up to the largest count looked up so far (doubling, so a table is extended
    O(log N) times).
    """

    def __init__(self, chunk: Callable[[int, int, float], NDArray[np.int64]],
                 far: Callable[[int, float], int], bound: float, n_rows: int) -> None:
        self.n_rows = n_rows
        self.bits = fraction_bits(bound, n_rows)
        self._scale = 2.0**self.bits
        self._chunk = chunk
        self._far_entry = far
        self._lock = threading.Lock()
        self._entries = np.zeros(1, dtype=np.int64)
        self._filled = 1  # entries of the counts 0..filled - 1 are made
        self._far: dict[int, int] = {}

    def _extend(self, top: int) -> None:
        with self._lock:
            filled = self._filled
            limit = min(self.n_rows, DENSE_LIMIT) + 1
            if filled >= limit or top < filled:
                return
            start = 0 if filled == 1 else filled
            end = max(top + 1, 2 * filled, FIRST_FILL)
            end = min(-(-end // BLOCK) * BLOCK, limit)
            pieces = [self._chunk(lo, min(lo + FILL_PIECE, end), self._scale)
                      for lo in range(start, end, FILL_PIECE)]  # cache-sized temporaries
            entries = np.concatenate([self._entries[:start], *pieces])
            self._entries = entries  # before ``_filled``: a reader never indexes past it
            self._filled = end

    def sum(self, counts: np.ndarray, top: int) -> int:
        """Exact sum of the entries of ``counts`` (non-negative integers, any shape and
        integer dtype, largest ``top`` <= n_rows), as a Python int."""
        if top >= self._filled:
            if top > self.n_rows:
                raise ValueError(f"a count of {top} exceeds the {self.n_rows} rows")
            self._extend(top)
            if top > DENSE_LIMIT:
                return self._sum_far(counts)
        return int(self._entries[counts].sum())

    def segment_sums(self, counts: np.ndarray, starts: np.ndarray,
                     top: int) -> np.ndarray | None:
        """Exact sums of the entries of several tables at once: ``counts`` is their rows
        stacked (a 2-D array, or 1-D for one count per row), ``starts`` the first row of
        each table (ascending, each table at least one row), ``top`` the largest count.
        The same integers :meth:`sum` gives table by table (int64 sums of the same
        entries, each within the bound of one table); None when a count is above
        ``DENSE_LIMIT`` (then :meth:`sum` must go table by table)."""
        if top > DENSE_LIMIT:
            return None
        if top >= self._filled:
            if top > self.n_rows:
                raise ValueError(f"a count of {top} exceeds the {self.n_rows} rows")
            self._extend(top)
        values = self._entries[counts]
        if values.ndim == 2:
            values = values.sum(axis=1)
        return np.add.reduceat(values, starts)

    def _sum_far(self, counts: np.ndarray) -> int:
        far = counts > DENSE_LIMIT
        total = int(self._entries[np.where(far, 0, counts)].sum())
        for k in counts[far].tolist():
            entry = self._far.get(k)
            if entry is None:
                entry = self._far_entry(k, self._scale)
                with self._lock:
                    self._far[k] = entry
            total += entry
        return total


def to_float(total: int, bits: int) -> float:
    """The fixed-point ``total`` (scale 2**bits) as a float, correctly rounded."""
    return total / (1 << bits)


def _fixed(values: NDArray[np.float64], scale: float) -> NDArray[np.int64]:
    """``round(values * scale)`` (half to even) as int64; ``scale`` is a power of two."""
    return np.rint(values * scale).astype(np.int64)


# --------------------------------------------------------------------------- the tables


def _xlogx_chunk(lo: int, hi: int, scale: float) -> NDArray[np.int64]:
    k = np.arange(lo, hi, dtype=np.float64)
    values = k * ln(np.maximum(k, 1.0))  # 0 ln 0 = 0 (and 1 ln 1 = 0)
    return _fixed(values, scale)


def _xlogx_far(k: int, scale: float) -> int:
    return int(_fixed(k * ln(float(k)), scale))


@lru_cache(maxsize=16)
def xlogx_table(n_rows: int) -> CountTable:
    """Entries k ln k (0 ln 0 = 0) for counts up to ``n_rows``; B = N ln N."""
    bound = n_rows * ln_scalar(n_rows) if n_rows > 1 else 0.0
    return CountTable(_xlogx_chunk, _xlogx_far, bound, n_rows)


@lru_cache(maxsize=256)
def rising_log_table(a: float, n_rows: int) -> CountTable:
    """Entries of ln G(a + k) - ln G(a) = ln a + ln(a + 1) + ... + ln(a + k - 1) for
    counts up to ``n_rows``; B = N (|ln a| + ln(a + N)).

    A dense entry is made from the anchor at the multiple of ``BLOCK`` below it,
    round(lnG(a + b) - lnG(a)) by :func:`log_gamma`, plus the fixed-point terms
    round(ln(a + i)) for b <= i < k, added as integers (exactly); its error is below
    BLOCK / 2 units of 2**-F plus the error of the float values. A count above
    ``DENSE_LIMIT`` gets round(lnG(a + k) - lnG(a)) directly.
    """
    if not (a > 0 and math.isfinite(a)):
        raise ValueError(f"a Dirichlet hyperparameter must be positive and finite, got {a!r}")
    base = float(log_gamma(a))

    def chunk(lo: int, hi: int, scale: float) -> NDArray[np.int64]:
        blocks = -(-(hi - lo) // BLOCK)
        starts = np.arange(lo, lo + blocks * BLOCK, BLOCK, dtype=np.float64)
        anchors = _fixed(log_gamma(a + starts) - base, scale)
        anchors[starts == 0] = 0  # lnG(a) - lnG(a), exactly
        k = np.arange(lo, lo + blocks * BLOCK, dtype=np.float64)
        steps = _fixed(ln(a + k), scale).reshape(blocks, BLOCK)
        # entry b + j = anchor b + steps b .. b + j - 1 (an exclusive running sum)
        within = np.cumsum(steps, axis=1) - steps
        return (within + anchors[:, None]).ravel()[: hi - lo]

    def far(k: int, scale: float) -> int:
        return int(_fixed(log_gamma(a + float(k)) - base, scale))

    bound = n_rows * (abs(ln_scalar(a)) + ln_scalar(a + n_rows)) if n_rows else 0.0
    return CountTable(chunk, far, bound, n_rows)
