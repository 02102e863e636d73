"""Arithmetic whose results depend on the inputs only: not on the CPU, the BLAS kernel, the
thread count or the order of the rows.

A floating-point sum depends on the order of its additions; BLAS and LAPACK choose that
order by CPU kernel, blocking and thread count, and numpy's SIMD ``log``/``exp`` loops
differ by instruction set. The values that reach a stored record or decide a tie are
computed here by one of two routes instead:

* **Exact, then rounded once.** :func:`exact_moments` computes the row sums and the sums
  of products of the columns of a data matrix *exactly* (as Python integers times powers
  of two), so the means and the scatter matrix are the correctly rounded values of the
  exact rationals: one float each, whatever the machine or the order of the rows.
* **Fixed order, scalar operations.** Small dense linear algebra (:func:`ldl`,
  :func:`solve_spd`, :func:`logdet_spd`) is written out in plain Python floats with one
  fixed order of operations and no pivoting choices; every inner product is
  ``math.fsum`` of the individually rounded products (one correctly rounded result,
  independent of the order of its terms); logarithms are our own ``ln``
  (:mod:`runner.scores.elementary`), never the C library's or numpy's, which pick an
  implementation by CPU feature.

IEEE 754 double arithmetic rounds each elementary operation (+, -, *, /, sqrt) correctly,
so a fixed sequence of them gives the same bits on every conforming machine; numpy's
element-wise ufuncs (one operation per element, no reduction) are such sequences too.

References: Shewchuk (1997), "Adaptive precision floating-point arithmetic and fast robust
geometric predicates", Discrete & Computational Geometry 18 (the algorithm behind
``math.fsum``); Ozaki, Ogita, Oishi & Rump (2012), "Error-free transformations of matrix
multiplication by using fast routines of matrix multiplication and its applications",
Numerical Algorithms 59 (splitting the operands so that a floating-point matrix product
makes no rounding error); Golub & Van Loan, "Matrix Computations" (4th ed., 2013), ch. 4
(the LDL^T factorization of a symmetric positive definite matrix); Higham, "Accuracy and
Stability of Numerical Algorithms" (2nd ed., 2002), ch. 10 (Cholesky without pivoting is
backward stable for positive definite matrices).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from runner.scores.elementary import ln

#: Largest number of rows whose limb products are summed in one product of limb matrices
#: (it sets the limb width: CHUNK_ROWS * 2**(2 bits) <= 2**53, so 21 bits for 2**11).
CHUNK_ROWS = 1 << 11

#: The widest spread of binary exponents allowed within one column (scaling a column
#: by a power of two must not reach the subnormal range).
MAX_EXPONENT_SPREAD = 1000

Matrix = Sequence[Sequence[float]]


class NotPositiveDefinite(np.linalg.LinAlgError):
    """A pivot of the LDL^T factorization was not above zero."""


# --------------------------------------------------------------------------- exact sums


def exact_ratio(numerator: int, denominator: int, exponent: int = 0) -> float:
    """The float nearest to ``numerator / denominator * 2**exponent`` (ties to even).

    Python's ``int / int`` is correctly rounded for integers of any size, so the one
    rounding is that of the final result; +-inf when it is beyond the float range."""
    if exponent >= 0:
        numerator <<= exponent
    else:
        denominator <<= -exponent
    try:
        return numerator / denominator
    except OverflowError:
        return math.copysign(math.inf, numerator)


@dataclass(frozen=True)
class ExactMoments:
    """Exact first and second moments of the columns of a data matrix (variables x rows).

    ``sum_r x_ir = sums[i] * 2**shifts[i]`` and ``sum_r x_ir x_jr = products[i][j] *
    2**(shifts[i] + shifts[j])``, with Python integers: no rounding anywhere.
    """

    n_rows: int
    sums: tuple[int, ...]
    products: tuple[tuple[int, ...], ...]
    shifts: tuple[int, ...]

    def column_mean(self, i: int) -> float:
        """Column i's mean, correctly rounded."""
        return exact_ratio(self.sums[i], self.n_rows, self.shifts[i])

    def scatter(self, i: int, j: int) -> float:
        """sum_r (x_ir - mean_i)(x_jr - mean_j) about the exact means, correctly rounded:
        (N sum x_i x_j - sum x_i sum x_j) / N evaluated in integers, then one rounding."""
        numerator = self.n_rows * self.products[i][j] - self.sums[i] * self.sums[j]
        return exact_ratio(numerator, self.n_rows, self.shifts[i] + self.shifts[j])


def _limb_bits(rows: int) -> int:
    """Bits per limb so that ``rows`` products of two limbs sum exactly in a double:
    rows * 2**(2 b) <= 2**53."""
    return (53 - max(rows - 1, 1).bit_length()) // 2


def _column_layout(column: np.ndarray, bits: int) -> tuple[int, int]:
    """(top, limbs) of one column: every value is below 2**top in magnitude and is an
    integer multiple of 2**(top - bits * limbs)."""
    nonzero = column[column != 0]
    if nonzero.size == 0:
        return 0, 0
    _, exponents = np.frexp(nonzero)  # x = m 2**e, 1/2 <= |m| < 1, m a 53-bit fraction
    top, bottom = int(exponents.max()), int(exponents.min())
    if top - bottom > MAX_EXPONENT_SPREAD:
        raise ValueError(f"a column's values span more than 2**{MAX_EXPONENT_SPREAD} in "
                         "magnitude; they cannot be summed exactly")
    # the finest grid of the column is 2**(bottom - 53)
    return top, -(-(top - (bottom - 53)) // bits)


def _limbs(block: np.ndarray, tops: Sequence[int], counts: Sequence[int],
           bits: int) -> np.ndarray:
    """Each column of ``block`` (variables x rows) as ``counts[i]`` rows of signed integer
    limbs, most significant first: x = 2**tops[i] sum_k limb_k 2**(-bits k) exactly.

    Every step is exact: scaling by a power of two (no overflow, and no underflow: the
    spread of a column's exponents is bounded), truncation, and the difference u - trunc(u),
    the fractional part of u, which is representable."""
    out = np.empty((sum(counts), block.shape[1]))
    row = 0
    scale = float(1 << bits)
    for i, (top, count) in enumerate(zip(tops, counts, strict=True)):
        rest = np.ldexp(block[i], -top)  # |rest| < 1
        for _ in range(count):
            scaled = rest * scale
            whole = np.trunc(scaled, out=out[row])
            rest = scaled - whole
            row += 1
        if count and rest.any():  # the layout leaves an integer grid after ``count`` limbs
            raise AssertionError("limb extraction left a remainder")
    return out


def exact_moments(values: np.ndarray) -> ExactMoments:
    """Exact row sums and sums of products of the columns of ``values`` (n x N floats).

    The error-free splitting of Ozaki et al. (2012): each column is written as a few
    signed integer limbs of ``b`` bits (``b = floor((53 - log2 rows) / 2)``, 21 for the
    chunk of 2**11 rows), scaled by a power of two. A product of two limbs is an integer
    below 2**(2b), and the sum of up to 2**(53 - 2b) of them is an integer below 2**53;
    every partial sum of such integers is exactly representable, so the product of the
    limb matrix with its transpose makes no rounding error *whatever the order of its
    additions, its SIMD width or FMA use*: the result is the same exact integer on every
    machine. It is computed by ``numpy.einsum`` (numpy's own loops, single-threaded;
    BLAS would be exact too, but its threads compete badly with a process pool or a busy
    machine). Chunks are added in int64 (exact) and the limbs combined in Python integers.

    Cost: a column whose values span e binary orders of magnitude takes
    ceil((53 + e) / 21) limbs (3 or 4 for typical data); with L limbs in all, the work is
    an L x L x N sum of products (against the n x n x N of a plain scatter matrix, so
    about 10 to 16 times as much arithmetic), plus a few element-wise passes to cut the
    limbs; memory L x 2**11 doubles. Non-finite values raise ``ValueError``.
    """
    data = np.asarray(values, dtype=np.float64)
    if data.ndim != 2:
        raise ValueError("values must be a 2-D array (variables x rows)")
    if not np.isfinite(data).all():
        raise ValueError("values must be finite")
    n, rows = data.shape
    bits = _limb_bits(min(rows, CHUNK_ROWS))
    layout = [_column_layout(data[i], bits) for i in range(n)]
    tops = [top for top, _ in layout]
    counts = [count for _, count in layout]
    starts = np.concatenate([[0], np.cumsum(counts)]).astype(int).tolist()
    total = starts[-1]
    # Each chunk's sums are integers below 2**53 in magnitude; they are added in int64
    # (exact) and moved into Python integers every 512 chunks, before int64 could overflow.
    gram = np.zeros((total, total), dtype=object)
    limb_sums = np.zeros(total, dtype=object)
    gram64 = np.zeros((total, total), dtype=np.int64)
    sums64 = np.zeros(total, dtype=np.int64)
    for number, first in enumerate(range(0, rows, CHUNK_ROWS)):
        limbs = _limbs(data[:, first:first + CHUNK_ROWS], tops, counts, bits)
        by_row = np.ascontiguousarray(limbs.T)
        # integers below 2**53 in magnitude: exact in any order of summation (see above)
        gram64 += np.einsum("ri,rj->ij", by_row, by_row, optimize=False).astype(np.int64)
        sums64 += limbs.sum(axis=1).astype(np.int64)
        if number % 512 == 511:  # 512 chunks: below 2**62
            gram, limb_sums = gram + gram64.astype(object), limb_sums + sums64.astype(object)
            gram64[:] = 0
            sums64[:] = 0
    gram = (gram + gram64.astype(object)).tolist()
    limb_sums = (limb_sums + sums64.astype(object)).tolist()

    def combined(i: int) -> list[tuple[int, int]]:
        # (limb index, its weight as a shift) of column i, least significant weight 0
        return [(starts[i] + k, bits * (counts[i] - 1 - k)) for k in range(counts[i])]

    parts = [combined(i) for i in range(n)]
    sums_exact = tuple(sum(limb_sums[a] << w for a, w in parts[i]) for i in range(n))
    products = [[0] * n for _ in range(n)]
    for i in range(n):
        for j in range(i, n):
            value = 0
            for a, wa in parts[i]:
                for b, wb in parts[j]:
                    value += gram[a][b] << (wa + wb)
            products[i][j] = products[j][i] = value
    shifts = tuple(top - bits * count for top, count in layout)
    return ExactMoments(rows, sums_exact, tuple(tuple(r) for r in products), shifts)


# --------------------------------------------------------------------------- fixed order


def ldl(matrix: Matrix, *, last_pivot_free: bool = False
        ) -> tuple[list[list[float]], list[float]]:
    """The square-root-free Cholesky factorization A = L D L^T of a symmetric positive
    definite matrix (Golub & Van Loan 2013, ch. 4): L unit lower triangular (returned as
    rows, the strictly lower part), D the pivots.

    Fixed order, no pivoting (none is needed for a positive definite matrix: Higham 2002,
    ch. 10): column j's pivot is D_j = A_jj - sum_{p<j} L_jp^2 D_p, then L_ij = (A_ij -
    sum_{p<j} L_ip L_jp D_p) / D_j for i > j; each sum is one ``math.fsum`` of A_ij and
    the rounded products (L_jp D_p is rounded once and reused). Only the lower triangle
    of ``matrix`` is read.

    A pivot at or below zero raises :class:`NotPositiveDefinite`; with
    ``last_pivot_free`` the last pivot is returned as computed (for a family matrix
    [parents, child] it is the residual sum of squares, which rounding may take to zero
    or a hair below for an exact fit).
    """
    k = len(matrix)
    lower: list[list[float]] = [[] for _ in range(k)]
    pivots: list[float] = []
    for j in range(k):
        row_j = lower[j]
        weighted = [row_j[p] * pivots[p] for p in range(j)]  # L_jp D_p
        pivot = math.fsum([matrix[j][j], *(-x * y for x, y in zip(row_j, weighted,
                                                                  strict=True))])
        if not pivot > 0 and not (last_pivot_free and j == k - 1):
            raise NotPositiveDefinite(f"matrix is not positive definite (pivot {j}: "
                                      f"{pivot!r})")
        pivots.append(pivot)
        for i in range(j + 1, k):
            row_i = lower[i]
            row_i.append(math.fsum([matrix[i][j], *(-x * y for x, y in zip(row_i, weighted,
                                                                           strict=True))])
                         / pivot)
    return lower, pivots


def forward_substitute(lower: Sequence[Sequence[float]], rhs: Sequence[float]) -> list[float]:
    """y with L y = rhs, L unit lower triangular given by its strictly lower rows."""
    y: list[float] = []
    for i, b in enumerate(rhs):
        y.append(math.fsum([b, *(-x * v for x, v in zip(lower[i], y, strict=True))]))
    return y


def back_substitute(lower: Sequence[Sequence[float]], rhs: Sequence[float]) -> list[float]:
    """x with L^T x = rhs, L unit lower triangular given by its strictly lower rows."""
    k = len(rhs)
    x = [0.0] * k
    for i in range(k - 1, -1, -1):
        x[i] = math.fsum([rhs[i], *(-lower[m][i] * x[m] for m in range(i + 1, k))])
    return x


def solve_spd(matrix: Matrix, rhs: Sequence[float]) -> list[float]:
    """x with A x = rhs for a symmetric positive definite A: LDL^T, then L y = rhs,
    z = D^{-1} y, L^T x = z, every step in fixed order (see :func:`ldl`)."""
    lower, pivots = ldl(matrix)
    y = forward_substitute(lower, rhs)
    return back_substitute(lower, [v / d for v, d in zip(y, pivots, strict=True)])


def log_pivots(pivots: Sequence[float]) -> float:
    """sum_j ln D_j: our ``ln`` per pivot (the same bits everywhere), the sum by
    ``math.fsum``."""
    return math.fsum(ln(np.asarray(pivots, dtype=np.float64)).tolist())


def logdet_spd(matrix: Matrix) -> float:
    """ln det A of a symmetric positive definite A: the sum of the logarithms of its LDL^T
    pivots (det A = prod_j D_j); 0 for the empty matrix."""
    return log_pivots(ldl(matrix)[1]) if len(matrix) else 0.0


def sum_floats(values: np.ndarray | Sequence[float]) -> float:
    """The correctly rounded sum of the floats ``values`` (``math.fsum``): the same for
    any order of its terms; -inf if one is -inf (and none is +inf)."""
    if isinstance(values, np.ndarray):
        return math.fsum(values.ravel().tolist())
    return math.fsum(values)
