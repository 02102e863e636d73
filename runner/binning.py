"""Cutting a continuous column into bins, so that a discrete score can use it.

``bins: k`` asks for k bins; the edges e_0 <= ... <= e_k are

* ``quantile`` (the default): ``numpy.quantile(x, [0, 1/k, ..., 1])`` (linear
  interpolation between order statistics), so the bins hold about equal numbers of rows;
* ``equal-width``: ``numpy.linspace(min x, max x, k + 1)``.

The inner edges e_1 .. e_{k-1} are the cut points. A value x goes into bin j when
c_j <= x < c_{j+1} over the distinct cut points c (``numpy.searchsorted(cuts, x,
side="right")``): the first bin is everything below the first cut and the last bin
everything at or above the last cut, so a value outside the range [e_0, e_k] seen when
the edges were made falls into an end bin. Cut points that coincide (ties in the data)
or that do not lie above the minimum are dropped, so such a column gets fewer bins than
asked for (with a warning from the caller). Bin labels are the intervals, e.g. ``< 1.5``,
``[1.5, 2.25)``, ``>= 2.25``; they are the column's states in the record.
"""

from __future__ import annotations

import itertools
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

BINNING_METHODS: tuple[str, ...] = ("quantile", "equal-width")
DEFAULT_BINNING = "quantile"


def bin_edges(values: np.ndarray, bins: int, method: str = DEFAULT_BINNING) -> np.ndarray:
    """The k + 1 edges of ``bins`` bins of ``values`` (finite floats, at least one)."""
    if bins < 2:
        raise ValueError(f"bins must be at least 2, not {bins}")
    x = np.asarray(values, dtype=np.float64)
    if x.size == 0:
        raise ValueError("no values to bin")
    if method == "quantile":
        return np.quantile(x, np.linspace(0.0, 1.0, bins + 1))
    if method == "equal-width":
        return np.linspace(float(x.min()), float(x.max()), bins + 1)
    raise ValueError(f"binning must be one of {', '.join(BINNING_METHODS)}, not {method!r}")


def cut_points(edges: Sequence[float] | np.ndarray) -> np.ndarray:
    """The distinct inner edges that lie above the lowest edge, ascending."""
    e = np.asarray(edges, dtype=np.float64)
    inner = np.unique(e[1:-1])
    return inner[inner > e[0]]


def cut(values: np.ndarray, cuts: Sequence[float] | np.ndarray) -> np.ndarray:
    """Bin index of each value (0 .. len(cuts)), by the rule of the module."""
    return np.searchsorted(np.asarray(cuts, dtype=np.float64), values, side="right")


def _text(value: float, digits: int) -> str:
    return repr(float(value)) if digits == 0 else f"{value:.{digits}g}"


def bin_labels(cuts: Sequence[float] | np.ndarray) -> tuple[str, ...]:
    """Interval labels of the bins cut at ``cuts``, short (6 significant digits) unless
    that would make two labels equal, then exact (shortest round-trip repr)."""
    c = [float(v) for v in cuts]
    if not c:
        return ("all",)
    for digits in (6, 12, 0):
        shown = [_text(v, digits) for v in c]
        if len(set(shown)) == len(shown):
            break
    return (f"< {shown[0]}",
            *(f"[{a}, {b})" for a, b in itertools.pairwise(shown)),
            f">= {shown[-1]}")


@dataclass(frozen=True)
class Binned:
    """A column cut into bins: codes, labels and the edges used."""

    codes: np.ndarray
    labels: tuple[str, ...]
    edges: tuple[float, ...]
    cuts: tuple[float, ...]
    below: int  # values below the lowest edge
    above: int  # values above the highest edge


def discretise(values: np.ndarray, bins: int, method: str,
               edges: Sequence[float] | None = None) -> Binned:
    """Cut ``values`` into bins; ``edges`` (stored ones, from an earlier run) are used as
    they are, else they are computed from ``values``."""
    x = np.asarray(values, dtype=np.float64)
    e = bin_edges(x, bins, method) if edges is None else np.asarray(edges, dtype=np.float64)
    cuts = cut_points(e)
    codes = cut(x, cuts)
    return Binned(codes, bin_labels(cuts), tuple(float(v) for v in e),
                  tuple(float(v) for v in cuts), int((x < e[0]).sum()), int((x > e[-1]).sum()))
