"""Elementary functions that give the same bits on every IEEE-754 machine: the natural
logarithm and the log-gamma function, built from additions, multiplications and
divisions only (each correctly rounded, one numpy ufunc call per operation so nothing is
fused) and the exact ``frexp``.

The C library's ``log``/``lgamma`` and numpy's ``log`` are not used for any value that
is stored or compared: both pick an implementation by CPU feature (glibc has FMA
variants of ``log``, ``exp`` and ``lgamma``; numpy has SIMD loops), and the variants
differ in the last bit for some arguments.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
from numpy.typing import ArrayLike, NDArray

# --------------------------------------------------------------------------- ln

# fdlibm's e_log.c (Sun Microsystems 1993): ln 2 split in a high part with trailing zero
# bits and a low part, and the minimax coefficients of R(z) ~ ln((1 + s) / (1 - s)) - 2 s.
_LN2_HI = float.fromhex("0x1.62e42fee00000p-1")
_LN2_LO = float.fromhex("0x1.a39ef35793c76p-33")
_LG1 = float.fromhex("0x1.5555555555593p-1")
_LG2 = float.fromhex("0x1.999999997fa04p-2")
_LG3 = float.fromhex("0x1.2492494229359p-2")
_LG4 = float.fromhex("0x1.c71c51d8e78afp-3")
_LG5 = float.fromhex("0x1.7466496cb03dep-3")
_LG6 = float.fromhex("0x1.39a09d078c69fp-3")
_LG7 = float.fromhex("0x1.2f112df3e5244p-3")
_SQRT_HALF = float.fromhex("0x1.6a09e667f3bcdp-1")


def ln(x: ArrayLike) -> NDArray[np.float64]:
    """Natural logarithm of positive finite floats, element-wise, the same bits on every
    IEEE-754 machine.

    The algorithm of fdlibm's ``__ieee754_log`` (error below 1 ulp): x = 2**e m with
    m in [sqrt(1/2), sqrt(2)) by the exact ``frexp``, f = m - 1, s = f / (2 + f), and
    ln x = e ln 2 + f - (f^2/2 - s (f^2/2 + R(s^2))). Only +, -, * and / are used, one
    numpy ufunc call per operation, so nothing is fused or reordered. The caller
    guarantees x > 0 (zero, negatives, inf and nan give meaningless values).
    """
    x = np.asarray(x, dtype=np.float64)
    f, e = np.frexp(np.atleast_1d(x))
    low = f < _SQRT_HALF
    np.multiply(f, 2.0, out=f, where=low)  # exact
    k = np.subtract(e, low, dtype=np.float64)  # exact: small integers
    f -= 1.0
    s = f + 2.0
    np.divide(f, s, out=s)
    z = s * s
    w = z * z
    # t1 = w (Lg2 + w (Lg4 + w Lg6)), t2 = z (Lg1 + w (Lg3 + w (Lg5 + w Lg7))), in place
    t1 = w * _LG6
    t1 += _LG4
    t1 *= w
    t1 += _LG2
    t1 *= w
    t2 = w * _LG7
    t2 += _LG5
    t2 *= w
    t2 += _LG3
    t2 *= w
    t2 += _LG1
    t2 *= z
    t2 += t1  # R
    hfsq = f * f
    hfsq *= 0.5  # exact
    t2 += hfsq  # hfsq + R
    t2 *= s  # s (hfsq + R)
    t1 = k * _LN2_LO
    t2 += t1  # s (hfsq + R) + k ln2_lo
    np.subtract(hfsq, t2, out=t2)
    t2 -= f
    k *= _LN2_HI
    k -= t2
    return k.reshape(x.shape)


@lru_cache(maxsize=256)
def ln_scalar(x: float) -> float:
    """:func:`ln` of one positive number, as a Python float (cached: BIC asks for ln N
    at every family); ValueError for x <= 0."""
    if not x > 0 or math.isinf(x):
        raise ValueError(f"ln needs a positive finite number, got {x!r}")
    return float(ln(x))


# --------------------------------------------------------------------------- log-gamma

# Stirling's series ln G(x) = (x - 1/2) ln x - x + ln(2 pi)/2 + sum_n B_2n / (2n (2n - 1)
# x^(2n - 1)), to the x^-13 term; for x >= 10 the first omitted term is below 3e-17.
_STIRLING_FROM = 10.0
_HALF_LN_2PI = 0.9189385332046727
_S1, _S3, _S5, _S7 = 1 / 12, -1 / 360, 1 / 1260, -1 / 1680
_S9, _S11, _S13 = 1 / 1188, -691 / 360360, 1 / 156


def _stirling(x: NDArray[np.float64]) -> NDArray[np.float64]:
    z = 1.0 / x
    y = z * z
    series = z * (_S1 + y * (_S3 + y * (_S5 + y * (_S7 + y * (_S9 + y * (_S11 + y * _S13))))))
    return (((x - 0.5) * ln(x) - x) + _HALF_LN_2PI) + series


def log_gamma(x: ArrayLike) -> NDArray[np.float64]:
    """ln G(x) for positive finite x, element-wise, the same bits on every IEEE-754
    machine (absolute error a few units in the last place of max(1, |ln G(x)|)).

    Stirling's series for x >= 10; below, the recurrence
    ln G(x) = ln G(x + n) - ln(x (x + 1) ... (x + n - 1)) with n = ceil(10 - x).
    """
    x = np.asarray(x, dtype=np.float64)
    small = x < _STIRLING_FROM
    if not small.any():
        return _stirling(x)
    out = np.empty_like(x)
    out[~small] = _stirling(x[~small])
    y = x[small]
    n = np.ceil(_STIRLING_FROM - y)
    product = y.copy()
    for i in range(1, int(_STIRLING_FROM)):
        product *= np.where(n > i, y + float(i), 1.0)
    out[small] = _stirling(y + n) - ln(product)
    return out
