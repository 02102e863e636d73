"""Candidate parents for wide data: each variable's possible parents narrowed before the
search (``search.candidates``), so that the engines score O(n k) families instead of
O(n^2) at their first fill, and every step after it considers k parents per child.

Two screens, both on the discrete codes (shape vars x rows):

* ``mutual-information``: the Sparse Candidate algorithm of Friedman, Nachman & Pe'er
  (1999), "Learning Bayesian network structure from massive datasets: the Sparse
  Candidate algorithm", UAI 15: 206-215. The candidates of X are the k variables of
  highest empirical mutual information with X (their "Restrict" step, first iteration).
  Then, for up to ``rounds`` re-estimation rounds, after a search on the candidate sets
  each X's candidates become its current parents plus the best others by the paper's
  *shielding* measure, the conditional mutual information I(X; Y | Pa(X)) (section 3.2:
  a Y whose dependence on X the current parents explain is ranked low), and the search
  runs again from the current graph; the rounds stop when no candidate set changes.
  Keeping the current parents makes each round's start graph a member of the next
  round's space, so the score never falls from one round to the next.
* ``mmpc``: the restrict phase of Max-Min Hill-Climbing (Tsamardinos, Brown & Aliferis
  2006, "The max-min hill-climbing Bayesian network structure learning algorithm",
  Machine Learning 65: 31-78), Max-Min Parents and Children with the G-test of
  conditional independence (see :func:`mmpc_neighbours`), the symmetry correction (Y
  stays in CPC(X) only if X is in CPC(Y)), and a variable's candidates its corrected
  CPC set. No re-estimation rounds (MMHC has none).

Rules common to both: the ranking of X's candidates only looks at the pairs the
constraints allow (forbidden and tier-excluded pairs are never candidates), a required
parent is always one, and at most ``k`` others are kept (MMPC: the first k members to
enter the CPC set, which the forward phase adds by decreasing max-min association).

Exactness. Every statistic that is ranked or compared is an exact integer: counts are
exact (one-hot products of 0/1 entries in float32 on row blocks short enough that every
partial sum is an integer below 2**24, so any summation order of any BLAS gives the
same integer; or ``numpy.bincount``), and N times a (conditional) mutual information is
a sum of fixed-point ``k ln k`` entries (our own logarithm,
:mod:`runner.scores.elementary`, scale from :func:`runner.scores.tables.fraction_bits`),
so it is the same integer on every machine and ties are true ties, broken by the lowest
variable index. The G-test's p-value (MMPC) is our own regularized incomplete gamma
function from IEEE-754 basic operations and the same logarithm; no library function that
picks an implementation by CPU reaches a decision.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from functools import lru_cache
from itertools import combinations
from typing import Generic, TypeVar

import numpy as np
from numpy.typing import NDArray

from runner.constraints import Constraints
from runner.scores.cache import parent_mask
from runner.scores.counts import CountScorer, configuration_codes
from runner.scores.elementary import ln, ln_scalar, log_gamma
from runner.scores.likelihood import loglik_family
from runner.scores.tables import fraction_bits
from runner.search.budget import BUDGET_REASONS, Budget
from runner.search.result import SearchOutcome, TraceRow

MUTUAL_INFORMATION = "mutual-information"
MMPC = "mmpc"
SCREENS = (MUTUAL_INFORMATION, MMPC)
DEFAULT_K = 10
DEFAULT_ROUNDS = 2
DEFAULT_ALPHA = 0.05
#: MMPC makes a test only when the rows are at least this many per degree of freedom of
#: the unadjusted table (smaller tables are unreliable; a subset that fails it is skipped).
MIN_ROWS_PER_DF = 5
#: MMPC's largest conditioning set (the subsets of the CPC set it tries).
MAX_CONDITIONING = 3
#: Counts up to this many rows are looked up in a dense table of k ln k entries.
DENSE_TOP = 1 << 22
#: Entries of one batched ``bincount`` (bounds the temporaries of a stratified count).
BATCH_ENTRIES = 1 << 22

ParentSets = Sequence[Sequence[int]]
R = TypeVar("R")


# --------------------------------------------------------------------------- fixed point


def _bits(rows: int) -> int:
    """Fraction bits of the fixed-point ``k ln k`` entries for ``rows`` rows (sums of
    entries over counts adding up to at most ``rows`` stay below 2**61)."""
    return fraction_bits(rows * ln_scalar(rows) if rows > 1 else 0.0, rows)


def _xlogx_entries(k: NDArray[np.float64], bits: int) -> NDArray[np.int64]:
    values = k * ln(np.maximum(k, 1.0)) if k.size else k
    return np.rint(values * 2.0**bits).astype(np.int64)


@lru_cache(maxsize=4)
def _xlogx_dense(top: int, bits: int) -> NDArray[np.int64]:
    """The entries of the counts 0..top (a lookup table; read-only)."""
    table = _xlogx_entries(np.arange(top + 1, dtype=np.float64), bits)
    table.flags.writeable = False
    return table


def xlogx_fixed(counts: NDArray[np.integer], bits: int, top: int | None = None
                ) -> NDArray[np.int64]:
    """``round(k ln k * 2**bits)`` of every count k (0 ln 0 = 0), element-wise, by our
    own logarithm: the same integers on every machine. With ``top`` (a bound of the
    counts, at most ``DENSE_TOP``) the entries come from one cached lookup table."""
    counts = np.asarray(counts)
    if top is not None and top <= DENSE_TOP:
        return _xlogx_dense(top, bits)[counts]
    unique, inverse = np.unique(counts, return_inverse=True)
    return _xlogx_entries(unique.astype(np.float64), bits)[inverse].reshape(counts.shape)


# --------------------------------------------------------------------------- pair statistics


@dataclass(frozen=True)
class PairStatistics:
    """N times the empirical mutual information of every pair of variables, as exact
    fixed-point integers (``fixed[i, j]``, scale ``2**bits``; the diagonal is 0)."""

    fixed: NDArray[np.int64]
    bits: int
    rows: int

    def mutual_information(self) -> NDArray[np.float64]:
        """The mutual information in nats (floats, for reading only)."""
        return self.fixed / 2.0**self.bits / max(self.rows, 1)


def offsets_of(arities: NDArray[np.integer]) -> NDArray[np.int64]:
    """Where each variable's states start in a stacked one-hot layout (length n + 1)."""
    return np.concatenate([[0], np.cumsum(np.asarray(arities, dtype=np.int64))])


def pair_counts(codes: np.ndarray, arities: NDArray[np.integer]) -> NDArray[np.int64]:
    """Every pair's contingency table at once: ``out[a, b]`` counts the rows in which the
    stacked states a and b (:func:`offsets_of`) both occur; the (i, j) block is the
    table of variables i and j, the (i, i) block the diagonal of i's counts.

    One-hot product over blocks of rows, in float32: the entries are 0 and 1 and every
    partial sum an integer below 2**24 (a block has fewer rows), so the products are
    exact whatever the order of summation. O(N S^2) for S stacked states, memory
    O(S^2 + block S)."""
    rows = codes.shape[1]
    offsets = offsets_of(arities)
    width = int(offsets[-1])
    block = int(max(256, min(8192, (1 << 25) // max(width, 1))))
    out = np.zeros((width, width), dtype=np.int64)
    starts = offsets[:-1, None]
    for lo in range(0, rows, block):
        part = codes[:, lo:lo + block]
        hot = np.zeros((part.shape[1], width), dtype=np.float32)
        hot[np.arange(part.shape[1])[:, None], (part + starts).T] = 1.0
        out += np.rint(hot.T @ hot).astype(np.int64)
    return out


def pair_statistics(codes: np.ndarray, arities: NDArray[np.integer]) -> PairStatistics:
    """N I(X_i; X_j) for every pair, from one pass over the codes (:func:`pair_counts`).

    N I = sum n_xy ln n_xy - sum n_x ln n_x - sum n_y ln n_y + N ln N, each sum of
    fixed-point entries taken exactly in int64. O(N S^2 + S^2) for S stacked states."""
    rows = codes.shape[1]
    bits = _bits(rows)
    counts = pair_counts(codes, arities)
    starts = offsets_of(arities)[:-1]
    cells = xlogx_fixed(counts, bits, rows)
    joint = np.add.reduceat(np.add.reduceat(cells, starts, axis=0), starts, axis=1)
    own = np.diag(joint).copy()  # the (i, i) block: sum n_x ln n_x
    total = int(xlogx_fixed(np.array([rows]), bits, rows)[0])
    fixed = joint - own[:, None] - own[None, :] + total
    np.fill_diagonal(fixed, 0)
    return PairStatistics(fixed, bits, rows)


# --------------------------------------------------------------------------- stratified


@dataclass(frozen=True)
class Stratified:
    """For one variable X, a conditioning set Z and several others Y: N I(X; Y | Z) as
    fixed-point integers (``fixed``, scale ``2**bits``; half the G statistic), and the
    degrees of freedom of the G-test adjusted for empty cells (``df``)."""

    fixed: NDArray[np.int64]
    df: NDArray[np.int64]
    bits: int


def stratified(codes: np.ndarray, arities: NDArray[np.integer], x: int,
               given: Sequence[int], others: Sequence[int], bits: int) -> Stratified:
    """N I(X; Y | Z) and the adjusted degrees of freedom for every Y in ``others``.

    N I = sum n_xyz ln n_xyz - sum n_xz ln n_xz - sum n_yz ln n_yz + sum n_z ln n_z,
    the tables of all the Y counted by batched ``bincount`` calls. The degrees of freedom
    are sum over the occurring strata z of (r_x(z) - 1)(r_y(z) - 1), with r(z) the
    states seen in the stratum (the usual adjustment for structural zeros). O(|others| N)
    time; memory O(BATCH_ENTRIES + m S) for m occurring (z, x) pairs.
    """
    arities = np.asarray(arities, dtype=np.int64)
    rows = codes.shape[1]
    if given:
        zcode = configuration_codes(codes, arities, list(given))[0]
        z = np.unique(zcode, return_inverse=True)[1].astype(np.int64)
    else:
        z = np.zeros(rows, dtype=np.int64)
    rx = int(arities[x])
    occurring, c = np.unique(z * rx + codes[x], return_inverse=True)
    c = c.astype(np.int64)
    m = int(occurring.size)
    z_of = occurring // rx
    group = np.flatnonzero(np.r_[True, np.diff(z_of) != 0])  # first (z, x) of each z
    states_x = np.diff(np.r_[group, m])  # r_x(z)
    xz = int(xlogx_fixed(np.bincount(c, minlength=m), bits, rows).sum())
    zz = int(xlogx_fixed(np.bincount(z), bits, rows).sum())
    ys = np.asarray(others, dtype=np.int64)
    fixed = np.zeros(ys.size, dtype=np.int64)
    df = np.zeros(ys.size, dtype=np.int64)
    per = max(1, BATCH_ENTRIES // max(rows, 1))
    for lo in range(0, ys.size, per):
        chunk = ys[lo:lo + per]
        off = offsets_of(arities[chunk])
        width = int(off[-1])
        index = codes[chunk].astype(np.intp)
        index += off[:-1, None]
        index += (c * width)[None, :]
        xyz = np.bincount(index.ravel(), minlength=m * width).reshape(m, width)
        yz = np.add.reduceat(xyz, group, axis=0)
        a = np.add.reduceat(xlogx_fixed(xyz, bits, rows).sum(axis=0), off[:-1])
        b = np.add.reduceat(xlogx_fixed(yz, bits, rows).sum(axis=0), off[:-1])
        fixed[lo:lo + chunk.size] = a - b - xz + zz
        states_y = np.add.reduceat((yz > 0).astype(np.int64), off[:-1], axis=1)
        df[lo:lo + chunk.size] = ((states_x[:, None] - 1)
                                  * np.maximum(states_y - 1, 0)).sum(axis=0)
    return Stratified(fixed, df, bits)


def shielding(scorer: CountScorer, x: int, given: Sequence[int], others: Sequence[int],
              bits: int) -> NDArray[np.int64]:
    """N I(X; Y | Z) for every Y in ``others`` as fixed-point integers (scale ``2**bits``),
    the same integers as :func:`stratified`'s ``fixed``, from the family tables of X given
    Z + Y and given Z (``given``, sorted): N I = LL(X | Z, Y) - LL(X | Z) = (sum n_xzy
    ln n_xzy - sum n_zy ln n_zy) - (sum n_xz ln n_xz - sum n_z ln n_z), the same counts.
    The tables of all the Y come from the scorer's column counting (one configuration
    code of Z; the compiled kernel when it runs), and their sums from one stacked pass.
    O(|others| N) counting, O(sum of the table sizes) for the sums."""
    top = scorer.n_rows

    def ll(cells: np.ndarray, starts: np.ndarray) -> NDArray[np.int64]:
        inner = xlogx_fixed(cells, bits, top).sum(axis=1)
        margins = xlogx_fixed(cells.sum(axis=1), bits, top)
        return np.asarray(np.add.reduceat(inner, starts) - np.add.reduceat(margins, starts),
                          dtype=np.int64)

    base, _ = scorer.counts(x, list(given))
    tables = [t for t, _ in scorer.column_tables(x, parent_mask(given), others)]
    starts = np.zeros(len(tables), dtype=np.intp)
    np.cumsum([t.shape[0] for t in tables[:-1]], out=starts[1:])
    return ll(np.concatenate(tables, axis=0), starts) - ll(base, np.zeros(1, dtype=np.intp))


# --------------------------------------------------------------------------- the G-test


_LN2_HI = float.fromhex("0x1.62e42fee00000p-1")  # fdlibm's split of ln 2
_LN2_LO = float.fromhex("0x1.a39ef35793c76p-33")
_INV_LN2 = 1.4426950408889634
_TINY = 1e-300


def exp_scalar(t: float) -> float:
    """e**t from IEEE-754 basic operations only (Python floats are never fused), the same
    bits on every machine: t = k ln 2 + r with |r| <= ln 2 / 2, a Taylor polynomial of
    e**r to the r**16 term (relative error below 1e-16), times 2**k exactly."""
    if t < -745.0:
        return 0.0
    if t > 709.0:
        return math.inf
    k = math.floor(t * _INV_LN2 + 0.5)
    r = (t - k * _LN2_HI) - k * _LN2_LO
    p = 1.0
    for i in range(16, 0, -1):
        p = 1.0 + p * r / i
    return math.ldexp(p, k)


def log_chi2_sf(statistic: float, df: int) -> float:
    """ln P(chi2_df >= statistic), the log p-value of a chi-square test: ln Q(df/2, x/2)
    of the regularized upper incomplete gamma function, by its series below a + 1 and
    its continued fraction (modified Lentz) above (Press et al. 2007, Numerical Recipes,
    3rd ed., section 6.2), on our own logarithm and log-gamma. 0 for df <= 0 or a
    statistic <= 0 (no evidence against independence)."""
    if df <= 0 or statistic <= 0.0:
        return 0.0
    a, x = df / 2.0, statistic / 2.0
    front = -x + a * ln_scalar(x) - float(log_gamma(a))
    if x < a + 1.0:
        term = total = 1.0 / a
        ap = a
        for _ in range(10_000):
            ap += 1.0
            term *= x / ap
            total += term
            if abs(term) < abs(total) * 1e-17:
                break
        q = 1.0 - exp_scalar(front + ln_scalar(total))
        return ln_scalar(q) if q > _TINY else ln_scalar(_TINY)
    b = x + 1.0 - a
    c = 1.0 / _TINY
    d = 1.0 / b
    h = d
    for i in range(1, 10_000):
        an = -i * (i - a)
        b += 2.0
        d = an * d + b
        d = _TINY if abs(d) < _TINY else d
        c = b + an / c
        c = _TINY if abs(c) < _TINY else c
        d = 1.0 / d
        step = d * c
        h *= step
        if abs(step - 1.0) < 1e-16:
            break
    return front + ln_scalar(h)


# --------------------------------------------------------------------------- mmpc


def _reliable(arities: NDArray[np.integer], rows: int, x: int, y: int,
              given: Sequence[int]) -> bool:
    cells = (int(arities[x]) - 1) * (int(arities[y]) - 1)
    for v in given:
        cells *= int(arities[v])
    return rows >= MIN_ROWS_PER_DF * max(cells, 1)


def _log_p(found: Stratified, i: int) -> float:
    return log_chi2_sf(2.0 * int(found.fixed[i]) / 2.0**found.bits, int(found.df[i]))


def mmpc_neighbours(codes: np.ndarray, arities: NDArray[np.integer], target: int,
                    alpha: float = DEFAULT_ALPHA,
                    max_conditioning: int = MAX_CONDITIONING) -> list[int]:
    """Max-Min Parents and Children of ``target`` (Tsamardinos, Brown & Aliferis 2006,
    Machine Learning 65, algorithm MMPC-bar, before the symmetry correction), in the
    order the members entered.

    The association of X and T given Z is -ln p of the G-test (G = 2 N I(X; T | Z),
    chi-square with the adjusted degrees of freedom of :func:`stratified`); X and T
    count as independent given Z when p > ``alpha``. Forward: the variable whose minimum
    association over the subsets of the current CPC set (up to ``max_conditioning``
    members) is largest enters, ties to the lowest index; a variable found independent
    given some subset leaves for good; the phase ends when none is left. Backward: a
    member independent of T given a subset of the other members leaves. A test whose
    table has fewer than ``MIN_ROWS_PER_DF`` rows per degree of freedom is not made, and
    one with no degree of freedom left after the adjustment (X or T constant in every
    stratum, as when Z determines one of them: ASIA's ``either`` is a function of ``tub``
    and ``lung``) says nothing; neither subset counts. Cost: each entering member adds at most
    2**min(|CPC|, max_conditioning) batched tests over the remaining variables, O(N)
    each per variable.
    """
    arities = np.asarray(arities, dtype=np.int64)
    n, rows = codes.shape
    bits = _bits(rows)
    limit = ln_scalar(alpha)
    alive = [v for v in range(n) if v != target and _reliable(arities, rows, target, v, ())]
    best: dict[int, float] = {}

    def test(given: tuple[int, ...]) -> None:
        nonlocal alive
        tried = [v for v in alive if _reliable(arities, rows, target, v, given)]
        if not tried:
            return
        found = stratified(codes, arities, target, given, tried, bits)
        for i, v in enumerate(tried):
            if found.df[i] > 0:
                best[v] = min(best.get(v, math.inf), -_log_p(found, i))
        alive = [v for v in alive if not (v in best and -best[v] > limit)]

    test(())
    alive = [v for v in alive if v in best]  # tested: a constant pair has nothing to test
    cpc: list[int] = []
    while alive:
        chosen = max(alive, key=lambda v: (best[v], -v))
        cpc.append(chosen)
        alive.remove(chosen)
        others = cpc[:-1]
        for size in range(0, min(len(others), max_conditioning - 1) + 1):
            for rest in combinations(others, size):
                if alive:
                    test(tuple(sorted((*rest, chosen))))
    for member in list(cpc):
        rest_of = [v for v in cpc if v != member]
        if _separable(codes, arities, target, member, rest_of, limit, bits,
                      max_conditioning):
            cpc.remove(member)
    return cpc


def _separable(codes: np.ndarray, arities: NDArray[np.integer], target: int, member: int,
               others: Sequence[int], limit: float, bits: int, max_conditioning: int) -> bool:
    rows = codes.shape[1]
    for size in range(0, min(len(others), max_conditioning) + 1):
        for given in combinations(sorted(others), size):
            if not _reliable(arities, rows, target, member, given):
                continue
            found = stratified(codes, arities, target, given, [member], bits)
            if found.df[0] > 0 and _log_p(found, 0) > limit:
                return True
    return False


def mmpc_sets(codes: np.ndarray, arities: NDArray[np.integer], alpha: float = DEFAULT_ALPHA,
              max_conditioning: int = MAX_CONDITIONING) -> list[list[int]]:
    """Every variable's CPC set after the symmetry correction (Y stays in CPC(X) only
    if X is in CPC(Y)), each in its order of entry. n runs of :func:`mmpc_neighbours`."""
    n = codes.shape[0]
    raw = [mmpc_neighbours(codes, arities, t, alpha, max_conditioning) for t in range(n)]
    members = [set(found) for found in raw]
    return [[y for y in raw[x] if x in members[y]] for x in range(n)]


# --------------------------------------------------------------------------- candidate sets


def _ranked(strength: NDArray[np.int64], pool: NDArray[np.intp]) -> list[int]:
    """``pool`` by decreasing strength, ties to the lowest index (exact integers)."""
    order = np.lexsort((pool, -strength[pool]))
    return [int(v) for v in pool[order]]


def _with_required(child: int, chosen: Sequence[int], constraints: Constraints) -> tuple[int, ...]:
    required = [i for i, j in constraints.required if j == child]
    return tuple(sorted(set(chosen) | set(required)))


def _pool(constraints: Constraints, child: int, exclude: Sequence[int] = ()) -> NDArray[np.intp]:
    allowed = constraints.allowed[:, child].copy()
    allowed[child] = False
    allowed[list(exclude)] = False
    return np.flatnonzero(allowed)


def mi_candidates(stats: PairStatistics, constraints: Constraints,
                  k: int) -> list[tuple[int, ...]]:
    """The Sparse Candidate screen: each variable's k allowed variables of highest
    mutual information (ties to the lowest index), plus its required parents.
    O(n^2 log n) on the statistics."""
    return [_with_required(x, _ranked(stats.fixed[:, x], _pool(constraints, x))[:k],
                           constraints) for x in range(constraints.n_vars)]


def reestimated(codes: np.ndarray, arities: NDArray[np.integer], stats: PairStatistics,
                constraints: Constraints, k: int, parent_sets: ParentSets,
                previous: Sequence[tuple[int, ...]] | None = None,
                previous_parents: ParentSets | None = None) -> list[tuple[int, ...]]:
    """One re-estimation of the Sparse Candidate algorithm: X's candidates are its
    current parents plus the k - |Pa(X)| allowed others of highest shielding measure
    N I(X; Y | Pa(X)) (Friedman, Nachman & Pe'er 1999, section 3.2), plus its required
    parents. A variable whose parents equal ``previous_parents``' keeps its ``previous``
    set (the measure depends only on the parents). O(n N) per variable re-ranked
    (:func:`shielding`)."""
    out: list[tuple[int, ...]] = []
    scorer = CountScorer(loglik_family, codes, np.asarray(arities, dtype=np.int64))
    for x, parents in enumerate(parent_sets):
        parents = sorted(parents)
        if previous is not None and previous_parents is not None and \
                sorted(previous_parents[x]) == parents:
            out.append(previous[x])
            continue
        pool = _pool(constraints, x, parents)
        room = max(0, k - len(parents))
        if not parents:
            chosen = _ranked(stats.fixed[:, x], pool)[:room]
        elif room == 0 or pool.size == 0:
            chosen = []
        else:
            strength = np.zeros(constraints.n_vars, dtype=np.int64)
            strength[pool] = shielding(scorer, x, parents, pool.tolist(), stats.bits)
            chosen = _ranked(strength, pool)[:room]
        out.append(_with_required(x, [*parents, *chosen], constraints))
    return out


def mmpc_candidates(codes: np.ndarray, arities: NDArray[np.integer], constraints: Constraints,
                    k: int, alpha: float = DEFAULT_ALPHA) -> list[tuple[int, ...]]:
    """The MMPC screen: each variable's symmetric CPC set, its allowed members only, the
    first k to have entered, plus its required parents."""
    sets = mmpc_sets(codes, arities, alpha)
    return [_with_required(x, [y for y in found if constraints.allowed[y, x]][:k],
                           constraints) for x, found in enumerate(sets)]


def narrowed(constraints: Constraints, sets: Sequence[Sequence[int]]) -> Constraints:
    """The constraints with ``allowed[i, j]`` kept only for candidates i of j (a
    required edge stays allowed)."""
    mask = np.zeros_like(constraints.allowed)
    for child, parents in enumerate(sets):
        mask[list(parents), child] = True
    return replace(constraints, allowed=(constraints.allowed & mask)
                   | constraints.required_matrix())


# --------------------------------------------------------------------------- the search


@dataclass(frozen=True)
class Screen:
    """The settings of ``search.candidates`` with their defaults applied."""

    method: str
    k: int = DEFAULT_K
    rounds: int = DEFAULT_ROUNDS
    alpha: float = DEFAULT_ALPHA


@dataclass(frozen=True)
class Screened(Generic[R]):
    """A search on candidate sets: the joined outcome, the last round's extra result,
    the candidate sets of the last search and the re-estimation rounds run."""

    outcome: SearchOutcome
    extra: R
    sets: list[tuple[int, ...]]
    rounds: int


def screen_refusal(method: str, score_kind: str, incomplete: bool) -> str | None:
    """Why ``search.candidates`` cannot be used with this search method, kind of score
    and data, or None."""
    if method in ("order", "exact"):
        return (f"candidate parents narrow the moves of the local methods and ges; "
                f"'{method}' scores every candidate parent set itself (see "
                "search.max_candidate_sets): remove search.candidates")
    if score_kind != "discrete":
        return ("the candidate screens work on discrete codes (mutual information, "
                f"G-tests): not available with a {score_kind} score; remove "
                "search.candidates or use a discrete score")
    if incomplete:
        return ("the candidate screens need complete data: not available with "
                "dataset.missing: available-case or structural-em; use drop-rows, or "
                "remove search.candidates")
    return None


def _joined(outcomes: Sequence[SearchOutcome]) -> SearchOutcome:
    """The rounds' outcomes as one: the last graph and counters, the steps and traces of
    all rounds in sequence."""
    last = outcomes[-1]
    trace: list[TraceRow] = []
    phases = []
    for outcome in outcomes:
        trace += [replace(row, step=row.step + len(trace)) for row in outcome.trace]
        phases += outcome.phases
    return replace(last, steps=sum(o.steps for o in outcomes), trace=trace, phases=phases)


def screened_search(screen: Screen, codes: np.ndarray, arities: NDArray[np.integer],
                    constraints: Constraints, budget: Budget, start: ParentSets,
                    search: Callable[[Constraints, Budget, ParentSets],
                                     tuple[SearchOutcome, R]]) -> Screened[R]:
    """Search on candidate sets: screen, ``search`` on the narrowed constraints from
    ``start``, then (``mutual-information``) up to ``screen.rounds`` re-estimations, each
    searched from the graph before it, until no candidate set changes or the budget
    runs out. Each round gets the budget's remaining steps and the same clock."""
    if screen.method == MMPC:
        sets = mmpc_candidates(codes, arities, constraints, screen.k, screen.alpha)
        outcome, extra = search(narrowed(constraints, sets), budget, start)
        return Screened(outcome, extra, sets, 0)
    stats = pair_statistics(codes, arities)
    sets = mi_candidates(stats, constraints, screen.k)
    outcome, extra = search(narrowed(constraints, sets), budget, start)
    outcomes, parents, rounds = [outcome], None, 0
    while rounds < screen.rounds and outcome.stop_reason not in BUDGET_REASONS:
        fresh = reestimated(codes, arities, stats, constraints, screen.k,
                            outcome.parent_sets, sets if rounds else None, parents)
        if fresh == sets:
            break
        steps = sum(o.steps for o in outcomes)
        left = None if budget.max_steps is None else budget.max_steps - steps
        if left is not None and left <= 0:
            break
        parents, sets, rounds = outcome.parent_sets, fresh, rounds + 1
        outcome, extra = search(narrowed(constraints, sets),
                                replace(budget, max_steps=left, spent_steps=0),
                                outcome.parent_sets)
        outcomes.append(outcome)
    return Screened(_joined(outcomes), extra, sets, rounds)
