"""Drift measured on the same rows: the baseline's graph and model held against a new run
on the new run's own learning rows.

When a re-check's inputs differ from the baseline's (a new data drop, an edited spec, new
code), per-row scores of the two runs are scores of different data and say nothing about
the graphs. :func:`measure` puts both graphs on the same rows instead:

* the new run's data is prepared again exactly as its run prepared it
  (:func:`runner.pipeline.prepare_stored`: the same bins, which ``check`` takes from the
  baseline, the same learning rows of a held-out split, the new run's score and prior);
* both graphs are scored there by the same scorer: the new graph's total is the new
  run's stored score (checked; a mismatch is a bug and raises), the baseline graph's is
  what the baseline structure scores on the new rows. Their difference
  ``new - baseline`` is a log Bayes factor of the two structures for the marginal
  likelihood scores (BDeu, K2, BGe: Heckerman, Geiger & Chickering 1995; Geiger &
  Heckerman 1994) and approximately one for BIC, which approximates the log marginal
  likelihood up to O(1) (Schwarz 1978);
* the baseline's fitted model (its ``model.json``) is evaluated on the same rows: the
  mean log-likelihood per row (log density for a linear-Gaussian model) with a
  percentile bootstrap interval over the rows (:func:`bootstrap_interval`), held against
  the baseline's own held-out figure (``evaluation.log_likelihood.learned_per_row``).
  Rows holding a state the baseline model does not know are set aside (and counted):
  new states are the ``allow_new_states`` rule's to judge.

The caller (``check``) computes the measures once per spec (:func:`measure`) and hands
them to :func:`runner.compare.gate.evaluate_gate`, whose rules judge them.

Everything here is a pure function of the records, the stored model and the prepared
rows, and deterministic: the scores are the scorers' exactly rounded totals, the
per-row log-likelihoods use our own ``ln``, the bootstrap means are exact fixed-point
integer sums of resamples drawn by a seeded generator.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

from runner import registry
from runner.errors import InputError
from runner.evaluation import gaussian_log_density_rows
from runner.fit import DiscreteFamily, log_likelihood_rows
from runner.graph import parents_from_edges
from runner.scores.fixed_order import sum_floats
from runner.scores.gaussian import LinearGaussianFamily

#: The fit-drift interval: its level, the number of bootstrap resamples and their seed.
INTERVAL_LEVEL = 0.95
INTERVAL_RESAMPLES = 1000
INTERVAL_SEED = 20261204


@dataclass(frozen=True)
class FitDrift:
    """The baseline model's fit on the new run's learning rows.

    ``per_row`` is the mean log-likelihood (log density for a linear-Gaussian model) per
    row, ``low``/``high`` its bootstrap interval at ``level``; ``held_out_per_row`` the
    baseline's own held-out figure (None when the baseline has no evaluation block);
    ``unseen`` counts the cells whose parent configuration or state the baseline's
    learning rows lacked (probability from the pseudo-count alone) and, as
    ``new_states``, the rows set aside because they hold a state the baseline model does
    not know (new states are the ``allow_new_states`` rule's to judge); ``rows`` is the
    number of rows evaluated."""

    per_row: float
    low: float
    high: float
    rows: int
    level: float
    resamples: int
    seed: int
    held_out_per_row: float | None
    unseen: dict[str, int]

    @property
    def below(self) -> bool:
        """The whole interval lies below the held-out figure."""
        return self.held_out_per_row is not None and self.high < self.held_out_per_row


@dataclass(frozen=True)
class DriftMeasures:
    """Both graphs scored on the same rows (the new run's learning rows) by the new run's
    score, and the baseline model's fit there (None, with ``fit_note`` saying why, when
    it cannot be computed)."""

    score: str
    scale: str | None  # the score's registry bayes_factor: None when not on that scale
    rows: int
    baseline_graph: float
    new_graph: float
    fit: FitDrift | None
    fit_note: str | None = None

    @property
    def difference(self) -> float:
        """``new_graph - baseline_graph``: positive when the new graph fits the rows better."""
        return self.new_graph - self.baseline_graph

    def as_dict(self) -> dict[str, Any]:
        out = asdict(self)
        out["difference"] = self.difference
        return out


@dataclass(frozen=True)
class DriftSkipped:
    """Why the same-rows comparison could not be made."""

    reason: str

    def as_dict(self) -> dict[str, Any]:
        return {"skipped": self.reason}


Drift = DriftMeasures | DriftSkipped


# --------------------------------------------------------------------------- bootstrap


def bootstrap_interval(values: np.ndarray, level: float = INTERVAL_LEVEL,
                       resamples: int = INTERVAL_RESAMPLES,
                       seed: int = INTERVAL_SEED) -> tuple[float, float]:
    """Percentile bootstrap interval of the mean of ``values`` (Efron & Tibshirani 1993,
    "An Introduction to the Bootstrap", ch. 13).

    ``resamples`` resamples of ``len(values)`` rows are drawn with replacement by
    ``numpy.random.default_rng(SeedSequence(seed))``; their means, sorted, give the
    interval as order statistics (no interpolation): with k = floor(resamples (1 -
    level) / 2), the (k+1)-th smallest and the (k+1)-th largest mean (the 26th and the
    975th of 1000 at 95%).

    The values are taken as fixed-point integers (scaled by a power of two, at most
    2**40, chosen so that no sum can overflow), so every resample's sum is an exact
    integer sum: the interval is the same on every machine and for any row order of a
    resample."""
    n = int(values.shape[0])
    if n == 0:
        raise ValueError("no rows to resample")
    largest = float(np.max(np.abs(values))) * n
    exponent = math.frexp(largest)[1] if largest > 0 else 0
    shift = min(40, 61 - exponent)
    scaled = np.rint(np.ldexp(values.astype(np.float64), shift)).astype(np.int64)
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    sums = sorted(int(scaled[rng.integers(0, n, size=n)].sum()) for _ in range(resamples))
    k = math.floor(resamples * (1.0 - level) / 2.0)
    scale = n * 2 ** shift if shift >= 0 else n
    if shift >= 0:
        return sums[k] / scale, sums[resamples - 1 - k] / scale
    return (math.ldexp(sums[k], -shift) / scale,
            math.ldexp(sums[resamples - 1 - k], -shift) / scale)


# --------------------------------------------------------------------------- the model


def _discrete_families(model: Mapping[str, Any], names: Sequence[str],
                       states: Sequence[Sequence[str]],
                       codes: np.ndarray) -> tuple[list[DiscreteFamily], np.ndarray, int]:
    """The baseline's tables as families over the new rows' columns, the new rows' codes
    in the tables' state order, and how many rows were set aside.

    A row holding a state the baseline's model does not know (a new state of the drop,
    judged by the ``allow_new_states`` rule) is set aside. On the other rows the tables
    are used as :func:`runner.evaluation.held_out_fit` uses them: a state the baseline's
    learning rows never had gets its probability from the pseudo-count alone
    (a / (N_j + r a)), an unseen parent configuration 1/r."""
    variables = model["variables"]
    index = {n: i for i, n in enumerate(names)}
    own = [[str(s) for s in variables[name]["states"]] for name in names]
    recoded = np.empty(codes.shape, dtype=np.int64)
    for i in range(len(names)):
        position = {s: k for k, s in enumerate(own[i])}
        lookup = np.array([position.get(s, -1) for s in states[i]], dtype=np.int64)
        recoded[i] = lookup[codes[i].astype(np.int64)] if len(lookup) else -1
    known = np.all(recoded >= 0, axis=0) if len(names) else np.ones(codes.shape[1], bool)
    families = []
    for i, name in enumerate(names):
        var = variables[name]
        parents = tuple(index[p] for p in var["parents"])
        where = [{s: k for k, s in enumerate(own[p])} for p in parents]
        configs = var["configurations"]
        parent_states = np.array([[where[m][str(s)] for m, s in enumerate(c["parents"])]
                                  for c in configs], dtype=np.int64).reshape(
                                      len(configs), len(parents))
        counts = np.array([c["counts"] for c in configs], dtype=np.int64).reshape(
            len(configs), len(own[i]))
        possible = math.prod(len(own[p]) for p in parents)
        families.append(DiscreteFamily(i, parents, len(own[i]), possible,
                                       np.arange(len(configs), dtype=np.uint64),
                                       parent_states, counts))
    return families, recoded[:, known], int(codes.shape[1] - int(known.sum()))


def _gaussian_rows(model: Mapping[str, Any], names: Sequence[str],
                   values: np.ndarray) -> np.ndarray:
    """Per-row log density of the baseline's linear-Gaussian model on ``values``."""
    variables = model["variables"]
    index = {n: i for i, n in enumerate(names)}
    families, parent_sets = [], []
    for name in names:
        var = variables[name]
        parents = [str(p) for p in var["parents"]]
        families.append(LinearGaussianFamily(
            float(var["intercept"]), tuple(float(var["coefficients"][p]) for p in parents),
            float(var["residual_variance"])))
        parent_sets.append([index[p] for p in parents])
    return gaussian_log_density_rows(families, parent_sets, values)


def model_rows(model: Mapping[str, Any], learning: Any) -> tuple[np.ndarray, dict[str, int]]:
    """The baseline model's log-likelihood (or log density) of each row of ``learning``
    (a resolved :class:`runner.data.Dataset`) it knows every state of, and the counts of
    unseen cells (``configurations``, ``states``) and of rows set aside (``new_states``:
    rows holding a state the model does not know)."""
    names = list(learning.names)
    if all(v.get("kind") == "continuous" for v in model["variables"].values()):
        if learning.values is None:
            raise ValueError("a linear-Gaussian model needs continuous columns")
        return _gaussian_rows(model, names, learning.values), {
            "configurations": 0, "states": 0, "new_states": 0}
    families, codes, aside = _discrete_families(model, names, learning.states,
                                                learning.codes)
    pseudo = float(model.get("pseudo_count") or 0.0)
    rows, unseen = log_likelihood_rows(families, codes, pseudo)
    return rows, {"configurations": int(unseen["configurations"]),
                  "states": int(unseen["states"]), "new_states": aside}


def fit_drift(model: Mapping[str, Any], learning: Any,
              held_out_per_row: float | None) -> tuple[FitDrift | None, str | None]:
    """The baseline model's fit on ``learning`` with its bootstrap interval, or None and
    why it cannot be computed."""
    rows, unseen = model_rows(model, learning)
    if rows.shape[0] == 0:
        return None, (f"every one of the new rows holds a state the baseline model does not "
                      f"know ({unseen['new_states']} rows)")
    if not np.all(np.isfinite(rows)):
        bad = int(np.sum(~np.isfinite(rows)))
        return None, (f"the baseline model gives {bad} of the new rows probability 0 "
                      "(pseudo_count 0 and states or configurations it never saw)")
    n = int(rows.shape[0])
    low, high = bootstrap_interval(rows)
    return FitDrift(sum_floats(rows) / n, low, high, n, INTERVAL_LEVEL, INTERVAL_RESAMPLES,
                    INTERVAL_SEED, held_out_per_row, unseen), None


# --------------------------------------------------------------------------- measure


def _columns_differ(baseline: Mapping[str, Any], record: Mapping[str, Any]) -> str | None:
    old = (baseline.get("data") or {}).get("columns") or {}
    new = (record.get("data") or {}).get("columns") or {}
    added, missing = sorted(set(new) - set(old)), sorted(set(old) - set(new))
    kinds = sorted(n for n in set(old) & set(new) if old[n].get("kind") != new[n].get("kind"))
    parts = ([f"new column(s) {', '.join(map(repr, added))}"] if added else []) + (
        [f"missing column(s) {', '.join(map(repr, missing))}"] if missing else []) + (
        [f"kind changed in {', '.join(map(repr, kinds))}"] if kinds else [])
    if not parts:
        return None
    return ("drift measures skipped: the columns differ (" + "; ".join(parts)
            + "), so the graphs are not on the same variables; see the columns rule")


def held_out_figure(record: Mapping[str, Any] | None) -> float | None:
    """A run's held-out log-likelihood per row (``evaluation.log_likelihood.
    learned_per_row``), or None without one."""
    ev = (record or {}).get("evaluation")
    if not isinstance(ev, Mapping):
        return None
    value = (ev.get("log_likelihood") or {}).get("learned_per_row")
    return float(value) if isinstance(value, int | float) else None


def same_rows(record: Mapping[str, Any], baseline_edges: Sequence[Sequence[str]],
              model: Mapping[str, Any] | None, held_out: float | None,
              data_path: str | Path | None = None,
              results: Path | None = None) -> DriftMeasures:
    """Both graphs and the baseline model on the new run's learning rows.

    ``record`` is the new run, ``baseline_edges`` the baseline's graph, ``model`` the
    baseline's ``model.json`` (None: no fit drift) and ``held_out`` its held-out figure
    per row; ``results`` is the results folder the record is stored in (its data path is
    relative to that folder's parent). Raises InputError when the new run's data cannot
    be prepared again, and
    AssertionError when the new graph does not score the new run's stored score there
    (the two preparations differ: a bug)."""
    from runner.pipeline import prepare_stored

    inputs = prepare_stored(record, data_path, results=results)
    names = list(inputs.dataset.names)
    scorer = inputs.scorer()
    new_total = scorer.total(parents_from_edges(names, record["edges"]))
    stored = record["score"]["value"]
    if new_total != stored:
        raise AssertionError(f"the new graph scores {new_total!r} on its own rows, not its "
                             f"stored {stored!r}")
    base_total = scorer.total(parents_from_edges(names, baseline_edges))
    score = str(record["score"]["name"])
    fit, note = None, None
    if model is None:
        note = "the baseline run has no fitted model (model.json)"
    elif str(model.get("estimator", "")).startswith("conditional-gaussian"):
        note = "the fit of a conditional Gaussian model (cg-bic) on new rows is not measured yet"
    else:
        fit, note = fit_drift(model, inputs.learning, held_out)
    return DriftMeasures(score, registry.score(score).bayes_factor, inputs.learning.rows,
                         base_total, new_total, fit, note)


def measure(root: Path, record: Mapping[str, Any], baseline: Mapping[str, Any],
            pinned_record: Mapping[str, Any] | None) -> Drift | None:
    """The drift measures of a check (``record``, the new run) against ``baseline``
    (the baseline document; ``pinned_record`` the pinned run's record, None when its
    folder is gone) in the results folder ``root``.

    None when the inputs are the same (the identity rule judges then); a
    :class:`DriftSkipped` naming why when the comparison cannot be made (columns differ,
    the new run's data file cannot be read again)."""
    if baseline["input_sha256"] == record["input_sha256"]:
        return None
    differ = _columns_differ(baseline, record)
    if differ is not None:
        return DriftSkipped(differ)
    model = None
    if pinned_record is not None:
        from runner.store import read_model

        folder = root / str(baseline["spec_name"]) / "runs" / str(baseline["run_id"])
        model = read_model(folder, dict(pinned_record))
    try:
        found = same_rows(record, baseline["edges"], model, held_out_figure(pinned_record),
                          results=root)
    except InputError as exc:
        reason = "; ".join(p.format() for p in exc.problems)
        return DriftSkipped(f"drift measures skipped: the new run's data could not be "
                            f"prepared again ({reason})")
    if pinned_record is None:
        return replace(found, fit_note=f"the pinned run {baseline['run_id']} is not in the "
                       "results folder, so its fitted model is not either")
    return found
