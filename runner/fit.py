"""Fitted conditional probability tables of a learned graph (the run's ``model.json``).

Discrete variables: for each child and each parent configuration j that occurs in the
learning rows, the counts N_jk of the child's states k and the probabilities

    theta_jk = (N_jk + a) / (N_j + r a),

the posterior mean under a symmetric Dirichlet(a, ..., a) prior on each row of the table
(Heckerman, Geiger & Chickering 1995, "Learning Bayesian networks: the combination of
knowledge and statistical data", eq. 9 with alpha_ijk = a). ``a = 0`` gives the
maximum-likelihood estimate N_jk / N_j. A configuration absent from the learning rows
has N_j = 0 and gets the prior mean 1/r (defined only for a > 0).

The functions are pure: they take the integer codes (variables x rows), the arities and
the parent sets, and return plain data. Counting uses the mixed-radix configuration
codes of :mod:`runner.scores.counts`.

Continuous variables under a Gaussian score (linear-Gaussian networks): each child's
least-squares intercept and coefficients on its parents and its maximum-likelihood
residual variance RSS / N, from the learning rows' means and scatter matrix
(:func:`runner.scores.gaussian.linear_gaussian_parameters`); the child given its parents
is then N(intercept + sum_p beta_p x_p, variance).

Mixed tables under cg-bic (conditional linear Gaussian networks, see
:mod:`runner.scores.conditional_gaussian`): a discrete child's table as above (its parents
are discrete); a continuous child's regression on its continuous parents, one per
configuration of its discrete parents that occurs in the learning rows (intercept,
coefficients, ML variance, rows), computed exactly as the score computes it; a
configuration with too few rows, or one the learning rows lack, gets the child's fit
without parents (``unseen_configuration``). A continuous child without discrete parents is
stored as under a Gaussian score.

Every float that reaches ``model.json`` or ``run.json`` is the same on every machine:
probabilities are (N_jk + a) / (N_j + r a) with an exact integer N_j; the
linear-Gaussian parameters come from exact sufficient statistics and a fixed-order
factorization (:mod:`runner.scores.fixed_order`); logarithms are
:func:`runner.scores.elementary.ln` (not the C library's ``log``), and totals over rows
are correctly rounded (``math.fsum``), so they do not depend on the order of the rows
either.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from runner.scores.available import present_rows
from runner.scores.conditional_gaussian import ConfigurationFit, MixedData, continuous_fits
from runner.scores.counts import (
    COMPACT_ABOVE,
    DENSE_CELLS_FLOOR,
    DENSE_CELLS_PER_ROW,
    configuration_codes,
)
from runner.scores.elementary import ln, ln_scalar
from runner.scores.fixed_order import sum_floats
from runner.scores.gaussian import (
    GaussianStatistics,
    LinearGaussianFamily,
    linear_gaussian_parameters,
    statistics_of,
)

if TYPE_CHECKING:  # the reader (and pandas) is not loaded by reading a stored run
    from runner.data import Dataset

MODEL_FORMAT = "dagmill-model"
MODEL_VERSION = 1
DEFAULT_PSEUDO_COUNT = 1.0


@dataclass(frozen=True)
class DiscreteFamily:
    """One child's table: occurring parent configurations (as codes) and their counts.

    ``configs[j]`` is the mixed-radix code of configuration j (sorted ascending),
    ``parent_states[j]`` the parents' state codes in that configuration and
    ``counts[j, k]`` the learning rows with that configuration and child state k.
    """

    child: int
    parents: tuple[int, ...]
    arity: int
    possible: int
    configs: np.ndarray
    parent_states: np.ndarray
    counts: np.ndarray

    def probabilities(self, pseudo_count: float) -> np.ndarray:
        """theta_jk = (N_jk + a) / (N_j + r a) for every occurring configuration.

        N_j is an integer sum (exact), so each probability is a fixed sequence of scalar
        roundings, N_jk + a, r a, N_j + r a and the quotient: the same bits on every
        machine (no floating-point reduction)."""
        numerator = self.counts + pseudo_count
        totals = self.counts.sum(axis=1, keepdims=True) + self.arity * pseudo_count
        return numerator / totals

    def log_probabilities(self, pseudo_count: float) -> np.ndarray:
        """ln theta_jk by :func:`runner.scores.elementary.ln` (the same bits on every
        machine, unlike numpy's vectorised log or the C library's); -inf where
        theta_jk = 0."""
        probabilities = self.probabilities(pseudo_count)
        positive = probabilities > 0
        out = np.full(probabilities.shape, -math.inf)
        out[positive] = ln(probabilities[positive])
        return out


def _codes_of(codes: np.ndarray, arities: np.ndarray, parents: Sequence[int]) -> np.ndarray:
    """Mixed-radix configuration codes (first parent most significant). Above 2**62
    possible configurations the codes are ranks of the distinct parent-state rows in
    lexicographic order (the same order), valid only within one call."""
    possible = 1
    for p in parents:
        possible *= int(arities[p])
    if possible < COMPACT_ABOVE:
        code, _, _ = configuration_codes(codes, arities, list(parents))
        return np.asarray(code, dtype=np.uint64)
    _, inverse = np.unique(codes[list(parents)].T, axis=0, return_inverse=True)
    return inverse.reshape(-1).astype(np.uint64)


def discrete_family(codes: np.ndarray, arities: np.ndarray, child: int,
                    parents: Sequence[int], weights: np.ndarray | None = None) -> DiscreteFamily:
    """The counts of one family over the rows of ``codes`` where the child and every
    parent are present (all of them unless the data keeps missing cells, coded as the
    column's arity, under ``dataset.missing: available-case``). With ``weights`` (one per
    row: structural EM's completed rows, :mod:`runner.scores.expected`) the counts are
    the rows' weights summed, floats: the family's expected counts."""
    present = present_rows(codes, arities, [child, *parents])
    if not present.all():
        codes = codes[:, present]
        weights = None if weights is None else weights[present]
    r = int(arities[child])
    possible = int(np.prod([int(arities[p]) for p in parents], dtype=object)) if parents else 1
    if codes.shape[1] == 0:
        return DiscreteFamily(child, tuple(parents), r, possible, np.zeros(0, np.uint64),
                              np.zeros((0, len(parents)), np.int64), np.zeros((0, r), np.int64))
    config = _codes_of(codes, arities, parents)

    def counted(table: np.ndarray) -> np.ndarray:
        return table if weights is not None else table.astype(np.int64)

    if possible * r <= max(DENSE_CELLS_PER_ROW * codes.shape[1], DENSE_CELLS_FLOOR):
        # few possible cells: one bincount over them, the occurring configurations read
        # off the table (ascending, as np.unique gives them) and decoded by mixed radix
        dense = np.bincount(config.astype(np.int64) * r + codes[child].astype(np.int64),
                            weights=weights, minlength=possible * r).reshape(possible, r)
        seen = (dense.any(axis=1) if weights is None
                else np.bincount(config.astype(np.int64), minlength=possible) > 0)
        occurring = np.flatnonzero(seen)
        parent_states = (np.stack(np.unravel_index(occurring, [int(arities[p]) for p in parents]),
                                  axis=1).astype(np.int64) if parents
                         else np.zeros((occurring.size, 0), np.int64))
        return DiscreteFamily(child, tuple(parents), r, possible,
                              occurring.astype(np.uint64), parent_states,
                              counted(dense[occurring]))
    configs, first, inverse = np.unique(config, return_index=True, return_inverse=True)
    flat = np.bincount(inverse.astype(np.int64) * r + codes[child].astype(np.int64),
                       weights=weights, minlength=configs.size * r)
    parent_states = (codes[list(parents)][:, first].T.astype(np.int64) if parents
                     else np.zeros((configs.size, 0), np.int64))
    return DiscreteFamily(child, tuple(parents), r, possible, configs, parent_states,
                          counted(flat.reshape(configs.size, r)))


def fit_discrete(codes: np.ndarray, arities: np.ndarray,
                 parent_sets: Sequence[Sequence[int]]) -> list[DiscreteFamily]:
    """Every family's counts, in column order."""
    return [discrete_family(codes, arities, c, tuple(ps)) for c, ps in enumerate(parent_sets)]


def fit_gaussian(values: np.ndarray | GaussianStatistics,
                 parent_sets: Sequence[Sequence[int]]) -> list[LinearGaussianFamily]:
    """Linear-Gaussian parameters of every family on ``values`` (variables x rows), or on
    their statistics (:func:`runner.scores.gaussian.sufficient_statistics`) when already
    computed (the scorer's)."""
    stats = statistics_of(values)
    return [linear_gaussian_parameters(stats, c, tuple(ps)) for c, ps in enumerate(parent_sets)]


def gaussian_model_document(families: Sequence[LinearGaussianFamily],
                            parent_sets: Sequence[Sequence[int]], names: Sequence[str],
                            rows: int, data_sha256: str, graph_hash: str) -> dict[str, Any]:
    """The ``model.json`` document of a linear-Gaussian network."""
    variables = {
        names[c]: {"kind": "continuous", "parents": [names[p] for p in ps],
                   "intercept": fam.intercept,
                   "coefficients": {names[p]: b for p, b in zip(ps, fam.coefficients,
                                                                 strict=True)},
                   "residual_variance": fam.variance}
        for c, (fam, ps) in enumerate(zip(families, parent_sets, strict=True))
    }
    return {"format": MODEL_FORMAT, "version": MODEL_VERSION,
            "estimator": "least-squares", "pseudo_count": None, "rows": rows,
            "data_sha256": data_sha256, "graph_sha256": graph_hash, "variables": variables}


@dataclass(frozen=True)
class ConditionalGaussianFamily:
    """A continuous child's regressions, one per occurring configuration of its discrete
    parents (``fits``), and the fit without parents for a configuration without one."""

    child: int
    discrete: tuple[int, ...]
    continuous: tuple[int, ...]
    possible: int
    fits: tuple[ConfigurationFit, ...]
    unseen: LinearGaussianFamily


MixedFamily = DiscreteFamily | ConditionalGaussianFamily


def mixed_data(dataset: Dataset) -> MixedData:
    """The codes, values and kinds of a resolved mixed data set, for the CG fits."""
    return MixedData(dataset.codes, dataset.arities, dataset.values,
                     [dataset.kind(i) == "continuous" for i in range(len(dataset.names))])


def fit_mixed(data: MixedData, parent_sets: Sequence[Sequence[int]]) -> list[MixedFamily]:
    """Every family of a conditional Gaussian network, in column order: tables for
    discrete children, per-configuration regressions for continuous ones."""
    out: list[MixedFamily] = []
    for child, ps in enumerate(parent_sets):
        discrete, continuous = data.split(ps)
        if not data.is_continuous(child):
            if continuous:
                raise ValueError("a discrete variable may not have continuous parents")
            out.append(discrete_family(data.codes, data.arities, child, discrete))
            continue
        fits = continuous_fits(data, child, ps)
        overall = data.overall
        assert overall is not None
        y = data.positions[child]
        unseen = LinearGaussianFamily(overall.mean_values[y], (0.0,) * len(continuous),
                                      overall.scatter_rows[y][y] / overall.n_rows)
        out.append(ConditionalGaussianFamily(child, discrete, continuous,
                                             data.possible(discrete), tuple(fits), unseen))
    return out


def _regression_entry(fam: LinearGaussianFamily, parents: Sequence[int],
                      names: Sequence[str]) -> dict[str, Any]:
    return {"intercept": fam.intercept,
            "coefficients": {names[p]: b for p, b in zip(parents, fam.coefficients,
                                                         strict=True)},
            "residual_variance": fam.variance}


def mixed_model_document(families: Sequence[MixedFamily], names: Sequence[str],
                         states: Sequence[Sequence[str]], pseudo_count: float, rows: int,
                         data_sha256: str, graph_hash: str) -> dict[str, Any]:
    """The ``model.json`` document of a conditional Gaussian network (cg-bic)."""
    tables = [f for f in families if isinstance(f, DiscreteFamily)]
    document = model_document(tables, names, states, pseudo_count, rows, data_sha256,
                              graph_hash)
    variables = dict(document["variables"])
    for fam in families:
        if not isinstance(fam, ConditionalGaussianFamily):
            continue
        parents = [names[p] for p in sorted((*fam.discrete, *fam.continuous))]
        if not fam.discrete:
            variables[names[fam.child]] = {
                "kind": "continuous", "parents": parents,
                **_regression_entry(fam.fits[0].family, fam.continuous, names)}
            continue
        variables[names[fam.child]] = {
            "kind": "continuous", "parents": parents,
            "discrete_parents": [names[p] for p in fam.discrete],
            "continuous_parents": [names[p] for p in fam.continuous],
            "possible_configurations": fam.possible,
            "configurations": [
                {"parents": [states[p][s] for p, s in zip(fam.discrete, fit.states,
                                                          strict=True)],
                 "rows": fit.rows,
                 "fit": "without parents (too few rows)" if fit.thin else "least-squares",
                 **_regression_entry(fit.family, fam.continuous, names)}
                for fit in fam.fits],
            "unseen_configuration": _regression_entry(fam.unseen, fam.continuous, names),
        }
    document["variables"] = {name: variables[name] for name in names}
    document["estimator"] = ("conditional-gaussian: least-squares per configuration, tables "
                             + ("dirichlet-posterior-mean" if pseudo_count > 0
                                else "maximum-likelihood"))
    return document


def fit_model(dataset: Dataset, gaussian: bool, parent_sets: Sequence[Sequence[int]],
              pseudo_count: float, graph_hash: str,
              statistics: GaussianStatistics | None = None, mixed: bool = False,
              expected: tuple[np.ndarray, np.ndarray] | None = None,
              ) -> tuple[dict[str, Any], list[DiscreteFamily] | list[LinearGaussianFamily]
                         | list[MixedFamily]]:
    """The ``model.json`` document of a learned graph on ``dataset`` (the learning rows)
    and the fitted families: linear-Gaussian under a Gaussian score, conditional Gaussian
    under the mixed score (``mixed``), else tables.

    ``statistics`` are the learning rows' (the scorer's), computed from
    ``dataset.values`` when not given. ``expected`` (structural EM) is the completed codes
    and their weights: the tables then hold expected counts (:func:`discrete_family`)."""
    if mixed:
        families = fit_mixed(mixed_data(dataset), parent_sets)
        return mixed_model_document(families, dataset.names, dataset.states, pseudo_count,
                                    dataset.rows, dataset.sha256, graph_hash), families
    if gaussian:
        source = dataset.values if statistics is None else statistics
        if source is None:
            raise ValueError("a Gaussian model needs continuous columns")
        gauss = fit_gaussian(source, parent_sets)
        return gaussian_model_document(gauss, parent_sets, dataset.names, dataset.rows,
                                       dataset.sha256, graph_hash), gauss
    if expected is not None:
        completed, weights = expected
        tables = [discrete_family(completed, dataset.arities, c, tuple(ps), weights)
                  for c, ps in enumerate(parent_sets)]
    else:
        tables = fit_discrete(dataset.codes, dataset.arities, parent_sets)
    return model_document(tables, dataset.names, dataset.states, pseudo_count, dataset.rows,
                          dataset.sha256, graph_hash), tables


def configuration_index(fam: DiscreteFamily, codes: np.ndarray) -> np.ndarray:
    """For each row of ``codes``, the index of its parent configuration among the
    family's occurring ones, or -1 when the learning rows never had it."""
    n_rows = codes.shape[1]
    m = fam.configs.size
    if m == 0:
        return np.full(n_rows, -1, dtype=np.int64)
    if not fam.parents:
        return np.zeros(n_rows, dtype=np.int64)
    both = np.vstack([fam.parent_states, codes[list(fam.parents)].T.astype(np.int64)])
    _, inverse = np.unique(both, axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    lookup = np.full(int(inverse.max()) + 1, -1, dtype=np.int64)
    lookup[inverse[:m]] = np.arange(m)
    return lookup[inverse[m:]]


def log_likelihood_rows(families: Sequence[DiscreteFamily], codes: np.ndarray,
                        pseudo_count: float) -> tuple[np.ndarray, dict[str, Any]]:
    """Log-likelihood (natural log) of each row of ``codes`` under the fitted tables, and
    what the learning rows had not seen: cells (variable x row) whose parent configuration
    never occurred in learning (probability 1/r), and cells whose child state had count 0
    in its configuration. Both get their probability from the pseudo-count alone, so
    ``pseudo_count`` must be above 0 when they occur (else the result is -inf).

    Each cell's logarithm is our ``ln`` of its table entry (computed once per entry,
    :meth:`DiscreteFamily.log_probabilities`), and a row's total adds the variables'
    terms in column order, element-wise: the same bits on every machine.
    """
    n_rows = codes.shape[1]
    total = np.zeros(n_rows)
    unseen_configs = unseen_states = 0
    per_variable: dict[int, dict[str, int]] = {}
    for fam in families:
        child = codes[fam.child].astype(np.int64)
        index = configuration_index(fam, codes)
        seen = index >= 0
        log_p = np.full(n_rows, ln_scalar(1.0 / fam.arity))
        zero_state = np.zeros(n_rows, dtype=bool)
        if fam.configs.size:
            log_p[seen] = fam.log_probabilities(pseudo_count)[index[seen], child[seen]]
            zero_state[seen] = fam.counts[index[seen], child[seen]] == 0
        n_configs, n_states = int((~seen).sum()), int(zero_state.sum())
        unseen_configs += n_configs
        unseen_states += n_states
        if n_configs or n_states:
            per_variable[fam.child] = {"configurations": n_configs, "states": n_states}
        total += log_p
    return total, {"configurations": unseen_configs, "states": unseen_states,
                   "by_variable": per_variable}


def log_likelihood_total(rows: np.ndarray) -> float:
    """The sum of per-row log-likelihoods, correctly rounded (``math.fsum``): the same for
    any order of the rows; -inf when a row is."""
    return sum_floats(rows)


def model_document(families: Sequence[DiscreteFamily], names: Sequence[str],
                   states: Sequence[Sequence[str]], pseudo_count: float, rows: int,
                   data_sha256: str, graph_hash: str) -> dict[str, Any]:
    """The ``model.json`` document: per variable its parents, each occurring parent
    configuration with counts and probabilities, and the table row for an unseen one."""
    variables: dict[str, Any] = {}
    for fam in families:
        probs = fam.probabilities(pseudo_count) if fam.configs.size else fam.counts * 1.0
        rows_out = []
        for j in range(fam.configs.size):
            rows_out.append({
                "parents": [states[p][int(s)] for p, s in zip(fam.parents,
                                                              fam.parent_states[j], strict=True)],
                "counts": ([int(c) for c in fam.counts[j]] if fam.counts.dtype.kind in "iu"
                           else [float(c) for c in fam.counts[j]]),
                "probabilities": [float(x) for x in probs[j]],
            })
        variables[names[fam.child]] = {
            "kind": "discrete",
            "states": list(states[fam.child]),
            "parents": [names[p] for p in fam.parents],
            "possible_configurations": fam.possible,
            "configurations": rows_out,
            "unseen_configuration": ([1.0 / fam.arity] * fam.arity if pseudo_count > 0
                                     else None),
        }
    return {
        "format": MODEL_FORMAT,
        "version": MODEL_VERSION,
        "estimator": "dirichlet-posterior-mean" if pseudo_count > 0 else "maximum-likelihood",
        "pseudo_count": pseudo_count,
        "rows": rows,
        "data_sha256": data_sha256,
        "graph_sha256": graph_hash,
        "variables": variables,
    }
