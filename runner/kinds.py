"""Column kinds meet the score: what a loaded data set becomes before it is scored.

* Under a discrete score (loglik, aic, bic, bdeu, k2) every continuous column must be
  cut into bins by the spec (``dataset.columns.NAME: {kind: continuous, bins: 4,
  binning: quantile | equal-width}``), or by ``dataset.bins`` (and ``dataset.binning``)
  for every continuous column with no ``columns`` entry of its own; the bin edges are
  computed from the data, or taken as stored (a baseline's, so that a new data drop is
  cut at the same edges).
* Under a Gaussian score (gaussian-loglik, gaussian-bic, bge) every column must be
  continuous and unbinned; a discrete column among continuous ones is refused, naming
  the columns and the ways out. A constant column, or columns that are linear
  combinations of each other, make the covariance matrix singular and are refused too.
* Under the mixed score (cg-bic) discrete columns stay discrete, continuous columns with
  ``bins`` in the spec are cut into bins (they become discrete), and the other continuous
  columns stay continuous, with the Gaussian scores' checks (constant, dependent columns)
  applied to them. A table with no continuous column is then scored as ``bic``, one with
  no discrete column as ``gaussian-bic``.

:func:`resolve_columns` returns the data set ready for the score and the ``data.columns``
block of the record (each column's kind, why, its states or bins); :func:`make_scorer`
binds the spec's score to it.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from runner import registry
from runner.binning import DEFAULT_BINNING, discretise
from runner.data import Dataset
from runner.errors import InputError, Problem
from runner.registry import BGeParams, Params
from runner.scores import FamilyScorer, build_cg_scorer, build_gaussian_scorer, build_scorer
from runner.scores.available import AvailableCaseScorer
from runner.scores.expected import SelfWeightedScorer, TooManyCompletions, complete_rows
from runner.scores.gaussian import bge_prior

#: Smallest eigenvalue of the correlation matrix below which it counts as singular.
SINGULAR_EIGENVALUE = 1e-10
_SHOWN = 8

REASON_TEXT = {
    "declared": "declared in the spec",
    "inferred-text": "its values are text",
    "inferred-numeric-few-values": "numeric, with at most dataset.max_states distinct values",
    "inferred-numeric-many-values": "numeric, with more distinct values than "
                                    "dataset.max_states",
    "binned": "continuous, but cut into bins by the spec",
    "categorical": "a categorical (Arrow dictionary) column of the Parquet file",
}


@dataclass
class Resolved:
    """A data set ready for its score, and what the record says about its columns."""

    dataset: Dataset
    columns: dict[str, dict[str, Any]]
    bins_fingerprint: str | None = None
    warnings: list[Problem] = field(default_factory=list)


GAUSSIAN_SCORES = registry.scores_of_kind("continuous")
MIXED_SCORES = registry.scores_of_kind("mixed")


def is_gaussian(score_name: str) -> bool:
    """Whether a score models continuous columns only (the registry's ``data_kind``)."""
    return score_name in GAUSSIAN_SCORES


def is_mixed(score_name: str) -> bool:
    """Whether a score takes discrete and continuous columns together (``data_kind``
    mixed: cg-bic)."""
    return score_name in MIXED_SCORES


def resolve_columns(
    dataset: Dataset,
    columns_spec: Mapping[str, Mapping[str, Any]],
    score: Mapping[str, Any],
    *,
    spec_file: str,
    data_file: str,
    line_of: Callable[[str], int | None] = lambda key: None,
    stored_bins: Mapping[str, Mapping[str, Any]] | None = None,
    stored_from: str = "",
    default_bins: int | None = None,
    default_binning: str | None = None,
) -> Resolved:
    """Check the columns' kinds against ``score`` (the spec's ``score`` block) and bin
    what must be binned; raise InputError with every problem.

    ``stored_bins`` maps a column to the ``binning`` block of an earlier record; its
    edges are reused when that block's ``method`` and ``bins`` match the spec's.

    ``default_bins`` and ``default_binning`` (``dataset.bins`` and ``dataset.binning``)
    bin, under a discrete score, every continuous column that has no entry of its own in
    ``columns_spec``, exactly as if each had ``{kind: continuous, bins, binning}`` there.
    """
    name = str(score.get("name", "bic"))
    if default_bins is not None and not is_gaussian(name) and not is_mixed(name):
        columns_spec = {**{n: {"kind": "continuous", "bins": default_bins,
                               "binning": default_binning}
                           for i, n in enumerate(dataset.names)
                           if dataset.kind(i) == "continuous"}, **columns_spec}
    if is_gaussian(name):
        return _for_gaussian(dataset, columns_spec, score, spec_file, data_file, line_of)
    resolved = _for_discrete(dataset, columns_spec, name, spec_file, data_file, line_of,
                             stored_bins or {}, stored_from, keep_continuous=is_mixed(name))
    if is_mixed(name):
        _check_continuous(resolved, data_file)
    return resolved


def make_scorer(score: Mapping[str, Any], dataset: Dataset,
                missing: str | None = None) -> FamilyScorer | SelfWeightedScorer:
    """The cached family scorer of the spec's ``score`` block on a resolved data set: the
    registry entry's builder, with the entry's own keys. With gaps kept in the data
    (``incomplete``), the scorer of the ``dataset.missing`` policy (``missing``):
    structural EM's :class:`~runner.scores.expected.SelfWeightedScorer` or the
    available-case scorer."""
    entry = registry.score(str(score.get("name", "bic")))
    if getattr(dataset, "incomplete", False):
        if missing == "structural-em":
            return structural_em_scorer(entry.name, dataset)
        return available_case_scorer(entry.name, dataset)
    return entry.builder.load()(entry.name, entry.params.pick(score), dataset)


def _keeps_gaps_score(name: str, dataset: Dataset, policy: str) -> None:
    """InputError unless score ``name`` has a form under the keep-the-row ``policy`` (the
    penalised log-likelihood scores: a rescore under another score is refused)."""
    if name not in registry.AVAILABLE_CASE_SCORES:
        raise InputError(Problem(
            dataset.path, f"the data was read with dataset.missing: {policy}, which works "
            f"with the scores {', '.join(registry.AVAILABLE_CASE_SCORES)} only, not "
            f"score.name '{name}'", key="score.name", value=name))


def structural_em_scorer(name: str, dataset: Dataset) -> SelfWeightedScorer:
    """The scorer of ``dataset.missing: structural-em`` (:mod:`runner.scores.expected`):
    every completion of every row, weighted per DAG by EM; InputError for a score without
    that form or a table with too many gaps per row."""
    _keeps_gaps_score(name, dataset, "structural-em")
    try:
        completions = complete_rows(dataset.codes, dataset.arities)
    except TooManyCompletions as error:
        raise InputError(Problem(
            dataset.path, f"dataset.missing: structural-em fills every missing cell with "
            f"each of its column's states, and these rows have too many gaps for that: "
            f"{error}; use dataset.missing: available-case or drop-rows, or leave out the "
            f"columns with the most gaps (dataset.drop)", key="dataset.missing",
            value="structural-em")) from None
    return SelfWeightedScorer(name, completions, dataset.arities)


def available_case_scorer(name: str, dataset: Dataset) -> FamilyScorer:
    """The available-case scorer (``dataset.missing: available-case``): each family on the
    rows where its columns are present, by the penalised node-average likelihood
    (:mod:`runner.scores.available`); InputError for a score without that form (a
    rescore under another score)."""
    _keeps_gaps_score(name, dataset, "available-case")
    return AvailableCaseScorer(name, dataset.codes, dataset.arities)


def discrete_scorer(name: str, params: Params, dataset: Dataset) -> FamilyScorer:
    """A count-based scorer (``registry.ScoreEntry.builder`` of the discrete scores)."""
    return build_scorer(name, dataset.codes, dataset.arities, **params.arguments())


def gaussian_scorer(name: str, params: Params, dataset: Dataset) -> FamilyScorer:
    """A scorer on sufficient statistics (the builder of the Gaussian scores)."""
    if dataset.values is None:
        raise ValueError("a Gaussian score needs continuous columns")
    return build_gaussian_scorer(name, dataset.values, **params.arguments())


def mixed_scorer(name: str, params: Params, dataset: Dataset) -> FamilyScorer:
    """A conditional Gaussian scorer (the builder of cg-bic): discrete columns by their
    codes, continuous ones by their values (the resolved data set's kinds; without kinds,
    a column is continuous when it has finite values in every row)."""
    n = int(dataset.codes.shape[0])
    if hasattr(dataset, "kind"):
        continuous = [dataset.kind(i) == "continuous" for i in range(n)]
    else:
        values = dataset.values
        continuous = [values is not None and bool(np.isfinite(values[i]).all())
                      for i in range(n)]
    return build_cg_scorer(dataset.codes, dataset.arities, dataset.values, continuous,
                           **params.arguments())


def score_record(score: Mapping[str, Any], n_vars: int) -> dict[str, Any]:
    """Extra score settings for the record (the entry's ``record`` hook): BDeu's ``ess``,
    BGe's prior as used (defaults filled in)."""
    entry = registry.score(str(score.get("name", "bic")))
    if entry.record is None:
        return {}
    return entry.record.load()(entry.params.pick(score), n_vars)


def params_record(params: Params, n_vars: int) -> dict[str, Any]:
    """A score's own keys as used."""
    return params.effective()


def bge_record(params: Params, n_vars: int) -> dict[str, Any]:
    """BGe's prior with its defaults for ``n_vars`` filled in."""
    assert isinstance(params, BGeParams)
    prior = bge_prior(n_vars, params.alpha_mu, params.alpha_w, params.prior_scale)
    return {"bge_prior": prior.as_record()}


# --------------------------------------------------------------------------- discrete scores


def _column_key(name: str) -> str:
    return f"dataset.columns.{name}"


def _for_discrete(dataset: Dataset, columns_spec: Mapping[str, Mapping[str, Any]],
                  score_name: str, spec_file: str, data_file: str,
                  line_of: Callable[[str], int | None],
                  stored: Mapping[str, Mapping[str, Any]], stored_from: str,
                  keep_continuous: bool = False) -> Resolved:
    """Bin the continuous columns that have ``bins``; the others are problems, or, with
    ``keep_continuous`` (the mixed score), stay continuous."""
    problems: list[Problem] = []
    warnings: list[Problem] = []
    record: dict[str, dict[str, Any]] = {}
    states = list(dataset.states)
    codes = np.array(dataset.codes, copy=True) if dataset.values is not None else dataset.codes
    fingerprint: dict[str, list[float]] = {}
    unbinned: list[str] = []
    kept: list[int] = []
    for i, name in enumerate(dataset.names):
        reason = dataset.kind_reason(i)
        if dataset.kind(i) == "discrete":
            record[name] = {"kind": "discrete", "kind_reason": reason,
                            "states": list(dataset.states[i])}
            continue
        spec = columns_spec.get(name) or {}
        bins = spec.get("bins")
        key = _column_key(name)
        if bins is None and keep_continuous and dataset.values is not None:
            kept.append(i)
            x = dataset.values[i]
            record[name] = {"kind": "continuous", "kind_reason": reason, "states": [],
                            "range": [float(x.min()), float(x.max())]}
            continue
        if bins is None:
            ways = ("declare bins for it ({key}: {{kind: continuous, bins: 4, binning: "
                    "quantile}}; or dataset.bins: 4 for every continuous column), or drop "
                    "the column (dataset.drop: [...]), or use a Gaussian "
                    "score (" + ", ".join(GAUSSIAN_SCORES) + ") if every column is continuous, "
                    "or " + ", ".join(MIXED_SCORES) + " to model it as continuous beside "
                    "discrete columns")
            if unbinned:
                ways = f"declare bins for it, or drop it (as for {unbinned[0]!r})"
            unbinned.append(name)
            problems.append(Problem(
                spec_file, f"column {name!r} of {data_file} is continuous "
                f"({REASON_TEXT[reason]}), but score '{score_name}' needs discrete columns; "
                + ways.format(key=key), line=line_of(key), key=key, value=name))
            continue
        method = spec.get("binning") or DEFAULT_BINNING
        x = dataset.values[i] if dataset.values is not None else np.zeros(0)
        earlier = stored.get(name)
        reuse = (earlier is not None and earlier.get("method") == method
                 and earlier.get("bins") == bins and earlier.get("edges"))
        if earlier is not None and not reuse:
            warnings.append(Problem(
                spec_file, f"the stored bins of column {name!r} ({stored_from}) were made "
                f"with other settings; its edges are computed from this data", key=key,
                severity="warning"))
        present = ~np.isnan(x) if dataset.incomplete else np.ones(x.shape, dtype=bool)
        binned = discretise(x[present], int(bins), method,
                            earlier["edges"] if reuse and earlier is not None else None)
        if len(binned.labels) < bins:
            warnings.append(Problem(
                spec_file, f"column {name!r}: {len(binned.labels)} of the {bins} bins asked "
                "for are left, because bin edges coincide (tied values)", key=key,
                severity="warning"))
        codes[i] = len(binned.labels)  # the missing cells' code (available-case)
        codes[i, present] = binned.codes
        states[i] = binned.labels
        fingerprint[name] = list(binned.cuts)
        record[name] = {
            "kind": "continuous", "kind_reason": reason, "states": list(binned.labels),
            "binning": {"method": method, "bins": int(bins), "edges": list(binned.edges),
                        "cuts": list(binned.cuts),
                        "source": stored_from if reuse else "computed from this data",
                        "below_range": binned.below, "above_range": binned.above},
        }
    if problems:
        raise InputError(problems)
    if dataset.values is None:
        return Resolved(dataset, record, None, warnings)
    widest = max((len(s) for s in states), default=1) + (1 if dataset.incomplete else 0)
    matrix = np.ascontiguousarray(codes, dtype=np.uint8 if widest <= 256 else np.uint16)
    matrix.flags.writeable = False
    kinds = tuple("continuous" if i in kept else "discrete" for i in range(len(dataset.names)))
    reasons = tuple(dataset.kind_reason(i) if dataset.kind(i) == "discrete" or i in kept
                    else "binned" for i in range(len(dataset.names)))
    values = None
    if kept:
        values = np.full(dataset.values.shape, np.nan)
        values[kept] = dataset.values[kept]
        values.flags.writeable = False
    ready = Dataset(dataset.path, dataset.sha256, dataset.names, tuple(states), matrix,
                    dataset.dropped_rows, dataset.warnings, kinds, reasons, values,
                    dataset.incomplete)
    text = json.dumps(fingerprint, sort_keys=True, separators=(",", ":")) if fingerprint else None
    return Resolved(ready, record, text, warnings)


def _check_continuous(resolved: Resolved, data_file: str) -> None:
    """The Gaussian scores' checks on the continuous columns a mixed score keeps:
    constant columns, too few rows, linearly dependent columns (InputError)."""
    data = resolved.dataset
    kept = [i for i in range(len(data.names)) if data.kind(i) == "continuous"]
    if not kept or data.values is None:
        return
    problems = _singular([data.names[i] for i in kept], data.values[kept], data.rows,
                         data_file)
    if problems:
        raise InputError(problems)


# --------------------------------------------------------------------------- Gaussian scores


def _listed(names: Sequence[str]) -> str:
    shown = [repr(n) for n in names[:_SHOWN]]
    more = f" and {len(names) - _SHOWN} more" if len(names) > _SHOWN else ""
    return ", ".join(shown) + more


def _for_gaussian(dataset: Dataset, columns_spec: Mapping[str, Mapping[str, Any]],
                  score: Mapping[str, Any], spec_file: str, data_file: str,
                  line_of: Callable[[str], int | None]) -> Resolved:
    name = str(score.get("name"))
    problems: list[Problem] = []
    discrete: list[str] = []
    reasons: list[str] = []
    for i, column in enumerate(dataset.names):
        if dataset.kind(i) == "discrete":
            discrete.append(column)
            reasons.append(dataset.kind_reason(i))
        elif (columns_spec.get(column) or {}).get("bins") is not None:
            discrete.append(column)
            reasons.append("binned")
    continuous = [c for c in dataset.names if c not in set(discrete)]
    if discrete:
        why = sorted({REASON_TEXT[r] for r in reasons})
        hint = ""
        if "inferred-numeric-few-values" in reasons:
            hint = ("; a numeric column with few distinct values can be declared continuous "
                    "(dataset.columns.NAME: {kind: continuous})")
        if "binned" in reasons:
            hint += "; remove 'bins' from a continuous column to score it as continuous"
        key = "score.name"
        if continuous:
            message = (f"score '{name}' models continuous columns, but the data mixes "
                       f"{len(continuous)} continuous and {len(discrete)} discrete column(s): "
                       f"{_listed(discrete)} {'is' if len(discrete) == 1 else 'are'} discrete "
                       f"({'; '.join(why)}). Either declare bins for the continuous columns "
                       "(dataset.columns.NAME: {kind: continuous, bins: 4}) and use a discrete "
                       "score, or drop the discrete column(s) from the data file" + hint)
        else:
            message = (f"score '{name}' models continuous columns, but every column of "
                       f"{data_file} is discrete ({'; '.join(why)}): {_listed(discrete)}; use "
                       "a discrete score (bic, bdeu, ...), or declare numeric measurements "
                       "kind: continuous" + hint)
        problems.append(Problem(spec_file, message, line=line_of(key), key=key, value=name))
        raise InputError(problems)
    params = registry.score(name).params.pick(score)
    if isinstance(params, BGeParams):
        try:
            bge_prior(len(dataset.names), params.alpha_mu, params.alpha_w, params.prior_scale)
        except ValueError as exc:
            key = "score." + str(exc).split(" ", 1)[0]
            problems.append(Problem(spec_file, str(exc), line=line_of(key), key=key))
    values = dataset.values
    assert values is not None
    problems += _singular(dataset.names, values, dataset.rows, data_file)
    if problems:
        raise InputError(problems)
    record = {
        column: {"kind": "continuous", "kind_reason": dataset.kind_reason(i), "states": [],
                 "range": [float(values[i].min()), float(values[i].max())]}
        for i, column in enumerate(dataset.names)
    }
    return Resolved(dataset, record)


def _singular(names: Sequence[str], values: np.ndarray, rows: int,
              data_file: str) -> list[Problem]:
    """Problems that make the covariance matrix singular: constant columns, too few rows,
    linearly dependent columns (named by the eigenvector of the smallest eigenvalue)."""
    problems = []
    for i, column in enumerate(names):
        x = values[i]
        if float(x.max()) == float(x.min()):
            problems.append(Problem(
                data_file, f"column {column!r} has the same value {float(x[0])!r} in every "
                "row: its variance is zero, so the covariance matrix is singular and a "
                "Gaussian score is undefined; drop the column", key=column))
    if problems:
        return problems
    if rows <= len(names):
        return [Problem(data_file, f"{rows} rows are too few for {len(names)} continuous "
                        "columns: the covariance matrix is singular; a Gaussian score needs "
                        "more rows than columns")]
    centred = values - values.mean(axis=1, keepdims=True)
    scale = np.sqrt(np.einsum("ir,ir->i", centred, centred))
    standard = centred / scale[:, None]
    correlation = standard @ standard.T
    eigenvalues, vectors = np.linalg.eigh(correlation)
    if eigenvalues[0] >= SINGULAR_EIGENVALUE:
        return []
    weight = np.abs(vectors[:, 0])
    involved = [names[int(i)] for i in np.flatnonzero(weight > 1e-3 * weight.max())]
    return [Problem(data_file, f"columns {_listed(involved)} are linearly dependent (one is a "
                    "linear combination of the others, to within rounding): the covariance "
                    "matrix is singular and a Gaussian score is undefined; drop one of them",
                    key=involved[0])]
