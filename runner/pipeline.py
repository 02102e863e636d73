"""spec -> data -> constraints -> score -> search -> record, in one direction.

The command line calls these functions and only formats what they return.
"""

from __future__ import annotations

import hashlib
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np

from runner import partitioned, registry
from runner.bootstrap import ReplicateJob, bootstrap_block, replicate_seeds, run_replicate
from runner.caution import CAUTION
from runner.codeversion import code_sha256, code_version
from runner.constraints import Constraints, build_constraints
from runner.data import Dataset, load_dataset, loader_settings
from runner.engines import Engine, InProcess
from runner.environment import environment
from runner.errors import InputError, Problem
from runner.evaluation import SPLIT_RULE, gaussian_held_out_fit, held_out_fit, split_rows
from runner.fit import DEFAULT_PSEUDO_COUNT, fit_model
from runner.graph import edges_from_parents, graph_sha256
from runner.kinds import (
    Resolved,
    is_gaussian,
    is_mixed,
    make_scorer,
    resolve_columns,
    score_record,
)
from runner.progress import SILENT, Progress, Reporter
from runner.registry import RestartParams
from runner.scores import FamilyScorer
from runner.scores.available import AvailableCaseScorer
from runner.scores.expected import ExpectedCountScorer, SelfWeightedScorer
from runner.scores.gaussian import GaussianScorer, GaussianStatistics
from runner.scoring_pool import pooled_scoring
from runner.search import Budget, MoveEngine, RunSummary, SearchOutcome, local_search, with_restarts
from runner.search.budget import BUDGET_REASONS
from runner.search.candidates import (
    DEFAULT_ALPHA,
    DEFAULT_ROUNDS,
    MMPC,
    Screen,
    screen_refusal,
    screened_search,
)
from runner.search.parent_sets import SearchRefused
from runner.search.whole import PlanContext, SearchTask
from runner.spec import (
    Spec,
    check_required_kinds,
    check_spec_against_columns,
    load_spec,
    normalised_spec,
    spec_sha256,
)
from runner.spec.loader import DICT_ORIGIN, load_spec_dict
from runner.store import find_twin, model_reference, read_baseline, trace_csv, write_run
from runner.structural_em import structural_em

#: How the Python API names inputs that are not files: a dict spec and a DataFrame.
FRAME_ORIGIN = "<DataFrame>"
IN_MEMORY = (DICT_ORIGIN, FRAME_ORIGIN)


@dataclass
class Prepared:
    """A spec with its data loaded and its constraints built, ready to learn."""

    spec: Spec
    dataset: Dataset
    constraints: Constraints
    data_display: str
    spec_display: str
    warnings: list[Problem] = field(default_factory=list)
    columns: dict[str, dict[str, Any]] | None = None  # the record's data.columns
    bins_fingerprint: str | None = None  # the bin cut points used, for the input hash


def baseline_bins(results: Path, spec_name: str) -> tuple[dict[str, dict[str, Any]], str]:
    """The bins stored in a spec's baseline (column -> binning block) and its run id."""
    baseline = read_baseline(results, spec_name)
    if baseline is None:
        return {}, ""
    columns = (baseline.get("data") or {}).get("columns") or {}
    bins = {n: c["binning"] for n, c in columns.items() if isinstance(c.get("binning"), dict)}
    return bins, f"baseline run {baseline['run_id']}"


def prepare(spec_path: str | Path | Mapping[str, Any], data_path: str | Path | None = None,
            bins_from: Path | None = None, *, data_display: str | None = None) -> Prepared:
    """Load and check a spec and its data; raise InputError with every problem found.

    When the spec itself has problems but its ``dataset`` block is sound, the data and
    the variable names are still checked, so one call reports everything. With
    ``bins_from`` (a results folder) continuous columns are cut at the bin edges stored
    in the spec's baseline there, when it has them for the same settings.

    ``spec_path`` may be a mapping (the Python API's dict spec, checked by
    :func:`runner.spec.loader.load_spec_dict` and named ``<dict>``); ``data_display``
    names ``data_path`` in messages and the record (the API's ``<DataFrame>``).
    """
    problems: list[Problem] = []
    spec_display = DICT_ORIGIN if isinstance(spec_path, Mapping) else str(spec_path)
    try:
        spec = (load_spec_dict(spec_path) if isinstance(spec_path, Mapping)
                else load_spec(spec_path))
    except InputError as exc:
        problems.extend(exc.problems)
        if not isinstance(exc.partial_spec, Spec):
            raise
        spec = exc.partial_spec
    return prepare_loaded(spec, spec_display, problems, data_path, bins_from,
                          data_display=data_display)


def prepare_loaded(spec: Spec, spec_display: str, problems: list[Problem] | None = None,
                   data_path: str | Path | None = None, bins_from: Path | None = None,
                   *, data_display: str | None = None) -> Prepared:
    """:func:`prepare` of a spec already read (``problems``: those found reading it);
    problems about keys a base spec gave point at the base file (``extends``)."""
    try:
        return _prepare_loaded(spec, spec_display, list(problems or []), data_path, bins_from,
                               data_display)
    except InputError as exc:
        error = InputError(spec.relocate(exc.problems))
        error.partial_spec = exc.partial_spec
        raise error from None


def _prepare_loaded(spec: Spec, spec_display: str, problems: list[Problem],
                    data_path: str | Path | None, bins_from: Path | None,
                    data_display: str | None = None) -> Prepared:
    warnings = list(spec.warnings)
    ds = spec.dataset
    if data_path is not None:
        path, pin = Path(data_path), None
        display = str(data_path) if data_display is None else data_display
    else:
        path, display, pin = spec.dataset_path(), ds.path, ds.sha256
        outside = spec.dataset_outside_problem()  # --data is the user's own choice
        if outside is not None:
            raise InputError([*problems, outside])
    try:
        dataset = read_rows(spec, spec_display, path, display, pin)
    except InputError as exc:
        raise InputError(problems + exc.problems) from None
    warnings.extend(dataset.warnings)
    problems += check_spec_against_columns(spec, dataset.names, data_file=display)
    # Kinds against the score, unless the score or the column settings are broken (their
    # defaults would give misleading problems).
    if any((p.key or "").startswith(("score", "dataset.columns")) and p.severity == "error"
           for p in problems):
        raise InputError(problems)
    normal = normalised_spec(spec)
    binned = bool(normal["dataset"].get("bins")) or any(
        c.get("bins") for c in normal["dataset"]["columns"].values())
    stored, stored_from = (baseline_bins(bins_from, spec.name) if bins_from and binned
                           else ({}, ""))
    try:
        resolved = resolve_data(normal, dataset, spec_file=spec_display, data_file=display,
                                line_of=spec.line_of, stored_bins=stored,
                                stored_from=stored_from)
    except InputError as exc:
        raise InputError(problems + exc.problems) from None
    mixed = is_mixed(spec.score.name)
    kinds = [resolved.dataset.kind(i) for i in range(len(resolved.dataset.names))]
    if mixed:
        problems += check_required_kinds(spec, dict(zip(resolved.dataset.names, kinds,
                                                        strict=True)))
    if problems:
        raise InputError(problems)
    dataset = resolved.dataset
    warnings.extend(resolved.warnings)
    constraints = build_constraints(
        dataset.names, spec.tiers, spec.within_tier, spec.forbidden, spec.required,
        spec.parent_cap, kinds=kinds if mixed else None,
    )
    return Prepared(spec, dataset, constraints, display, spec_display, warnings,
                    resolved.columns, resolved.bins_fingerprint)


# --------------------------------------------------------------------------- preparation
# One path from a normalised spec (the spec as plain data, as a record stores it) to a
# scorer: read the data, resolve the column kinds (bins), take the learning rows, bind the
# score. ``prepare``/``learn`` and :func:`prepare_stored` (rescoring a stored graph) both
# go through it, so a rescore and a run build identical scorers for identical inputs.


def read_data(normal: Mapping[str, Any], path: Path, display: str,
              expected_sha256: str | None = None) -> Dataset:
    """The data file read as the normalised spec's ``dataset`` block says (missing-value
    rule, declared states, state limit); raises InputError naming the file."""
    return load_dataset(path, expected_sha256=expected_sha256, display_path=display,
                        **loader_settings(normal["dataset"]))


def read_rows(spec: Spec, spec_display: str, path: Path, display: str,
              expected_sha256: str | None = None) -> Dataset:
    """The spec's data: read in this process (:func:`read_data`), or, for a Parquet folder
    or glob under a Dask engine (:func:`runner.partitioned.rows_on_engine`), read,
    encoded and later counted on the workers (the keys that mode refuses, exit 2)."""
    normal = normalised_spec(spec)
    if not partitioned.active_for(path):
        return read_data(normal, path, display, expected_sha256=expected_sha256)
    refused = partitioned.refusals(spec, spec_display)
    if refused:
        raise InputError(refused)
    return partitioned.load_partitioned(path, display, loader_settings(normal["dataset"]),
                                        expected_sha256)


def resolve_data(normal: Mapping[str, Any], dataset: Dataset, *, spec_file: str,
                 data_file: str, line_of: Callable[[str], int | None] = lambda key: None,
                 stored_bins: Mapping[str, Mapping[str, Any]] | None = None,
                 stored_from: str = "") -> Resolved:
    """The columns' kinds checked against the normalised spec's score, continuous columns
    cut into bins (at ``stored_bins`` when they fit the spec's settings)."""
    return resolve_columns(dataset, normal["dataset"].get("columns") or {}, normal["score"],
                           spec_file=spec_file, data_file=data_file, line_of=line_of,
                           stored_bins=stored_bins, stored_from=stored_from,
                           default_bins=normal["dataset"].get("bins"),
                           default_binning=normal["dataset"].get("binning"))


def learning_rows(normal: Mapping[str, Any], dataset: Dataset) -> tuple[Dataset, Dataset | None]:
    """The rows the score is computed on and the held-out rows: the normalised spec's
    ``evaluation`` split (:func:`runner.evaluation.split_rows`), or all rows and None."""
    evaluation = normal.get("evaluation")
    if not evaluation:
        return dataset, None
    learn_rows, held_rows = split_rows(dataset.rows, evaluation["holdout"], evaluation["seed"])
    return dataset.take_rows(learn_rows), dataset.take_rows(held_rows)


def spec_scorer(normal: Mapping[str, Any],
                dataset: Dataset) -> FamilyScorer | SelfWeightedScorer:
    """The normalised spec's score bound to a resolved data set (its learning rows); under
    ``dataset.missing: structural-em`` the scorer that weighs each DAG by its own EM
    weights (:mod:`runner.scores.expected`); on rows kept on Dask workers, the scorer of
    their counts (:mod:`runner.partitioned`)."""
    if isinstance(dataset, partitioned.PartitionedDataset):
        return partitioned.partitioned_scorer(normal["score"], dataset)
    return make_scorer(normal["score"], dataset, (normal.get("dataset") or {}).get("missing"))


@dataclass(frozen=True)
class StoredInputs:
    """A stored run's data prepared again the way its run prepared it."""

    normal: dict[str, Any]  # the record's normalised spec (score block as asked)
    dataset: Dataset  # resolved, all rows
    learning: Dataset  # the rows the run's score was computed on
    path: Path
    data_sha256: str

    def scorer(self) -> FamilyScorer | SelfWeightedScorer:
        """The scorer a run of ``normal`` builds on these rows."""
        return spec_scorer(self.normal, self.learning)


def stored_path(path: str | Path, results: Path) -> str:
    """How a record stores a file's path: relative to the project folder (the results
    folder's parent) when the file lies inside it, else the file name alone, so no
    absolute path (a user name, a CI workspace) reaches a record and the same project
    gives the same record wherever it is checked out. Always with ``/``. An input that
    was never a file (the API's ``<dict>`` spec, ``<DataFrame>`` data) keeps its name."""
    if str(path) in IN_MEMORY:
        return str(path)
    project = results.resolve().parent
    resolved = Path(path).resolve()
    try:
        return resolved.relative_to(project).as_posix()
    except ValueError:
        return resolved.name


def record_data_file(record: Mapping[str, Any], results: Path | None = None) -> Path:
    """Where a record's data file is. From format 2 on, ``data.path`` is relative to the
    project folder (the parent of ``results``, default ``./results``; a file that lay
    outside it is stored by name only, so it must be named with ``--data``). Older records:
    relative to the spec file when it is the spec's own ``dataset.path``, else (``--data``)
    to the folder the run was started in."""
    path = Path(record["data"]["path"])
    if record.get("format_version", 0) >= 2 and not path.is_absolute():
        return (results or Path("results")).resolve().parent / path
    if path.is_absolute():
        return path
    spec_path = record.get("spec_path")
    spec_data = ((record.get("spec") or {}).get("dataset") or {}).get("path")
    if spec_path and spec_data == record["data"]["path"]:
        return Path(spec_path).parent / path
    return path


def prepare_stored(record: Mapping[str, Any], data_path: str | Path | None = None,
                   score: Mapping[str, Any] | None = None,
                   results: Path | None = None) -> StoredInputs:
    """A stored run's data and learning rows, prepared by the pipeline's own steps from
    the record's normalised spec (``score`` replaces its score block).

    The data is the record's file, which must still hash to the record's data sha256,
    unless ``data_path`` names a file explicitly; continuous columns are cut at the
    record's own bin edges; a run with a held-out share keeps its learning rows (the
    same seeded split, taken from the record's ``evaluation`` block). Raises InputError
    when the file changed or lacks the graph's variables.
    """
    explicit = data_path is not None
    path = Path(data_path) if data_path is not None else record_data_file(record, results)
    spec = dict(record.get("spec") or {})
    normal: dict[str, Any] = {**spec, "dataset": dict(spec.get("dataset") or {}),
                              "score": dict(score if score is not None
                                            else spec.get("score") or {})}
    held = record.get("evaluation")
    if isinstance(held, Mapping) and "holdout" in held:
        normal["evaluation"] = {"holdout": held["holdout"], "seed": held["seed"]}
    dataset = read_data(normal, path, str(path))
    if not explicit and dataset.sha256 != record["data"]["sha256"]:
        raise InputError(Problem(str(path), (
            f"the data file's sha256 is {dataset.sha256}, but run {record['run_id']} was "
            f"learned on {record['data']['sha256']}; name the file with --data to rescore on "
            "it anyway"), key="data.sha256"))
    unknown = sorted({v for e in record["edges"] for v in e} - set(dataset.names))
    if unknown:
        raise InputError(Problem(str(path), "the data lacks the graph's variables "
                                 + ", ".join(map(repr, unknown)), key="columns"))
    stored = {n: c["binning"] for n, c in record["data"]["columns"].items()
              if isinstance(c.get("binning"), dict)}
    resolved = resolve_data(normal, dataset, spec_file=str(record.get("spec_path") or "<record>"),
                            data_file=str(path), stored_bins=stored,
                            stored_from=f"run {record['run_id']}")
    learning, _ = learning_rows(normal, resolved.dataset)
    return StoredInputs(normal, resolved.dataset, learning, path, dataset.sha256)


def validate(spec_path: str | Path) -> tuple[list[Problem], list[Problem]]:
    """Every error and warning of one spec and its data: ``(errors, warnings)``."""
    try:
        prepared = prepare(spec_path)
    except InputError as exc:
        errors = [p for p in exc.problems if p.severity == "error"]
        return errors, [p for p in exc.problems if p.severity != "error"]
    refused = search_refusal(prepared)
    return ([] if refused is None else [refused]), prepared.warnings


def search_refusal(prepared: Prepared) -> Problem | None:
    """Why the spec's search would be refused, before any score is computed (a method
    that needs another kind of score, or the ``plan`` hook of an exhaustive one); None
    when it would run."""
    refused = _refusal(prepared)
    if refused is None:
        return None
    return prepared.spec.relocate([Problem(prepared.spec_display, refused.message,
                                           line=prepared.spec.line_of(refused.key),
                                           key=refused.key)])[0]


def _refusal(prepared: Prepared) -> registry.Refusal | None:
    spec = prepared.spec
    entry = registry.method(spec.search.method)
    refused = registry.compatibility(entry, registry.score(spec.score.name))
    if refused is None and entry.plan is not None:
        refused = entry.plan.load()(_params(entry, spec), _context(prepared))
    return refused or _candidates_refusal(prepared)


def _candidates_refusal(prepared: Prepared) -> registry.Refusal | None:
    spec = prepared.spec
    if spec.search.candidates is None:
        return None
    why = screen_refusal(spec.search.method, registry.score(spec.score.name).data_kind,
                         prepared.dataset.incomplete)
    return None if why is None else registry.Refusal("search.candidates", why)


def _params(entry: registry.MethodEntry, spec: Spec) -> registry.Params:
    return entry.params.pick(spec.search.model_dump())


def _context(prepared: Prepared) -> PlanContext:
    return PlanContext(prepared.dataset.names, tuple(tuple(t) for t in prepared.spec.tiers),
                       prepared.constraints)


def input_sha256(spec_hash: str, data_hash: str, version: str, bins: str | None = None) -> str:
    """The hash that names a run's inputs: spec hash, data hash and code version, and the
    bin cut points of continuous columns when there are any (stored edges reused on a
    new data drop are an input of their own)."""
    text = f"{spec_hash}\n{data_hash}\n{version}" + (f"\n{bins}" if bins else "")
    return hashlib.sha256(text.encode()).hexdigest()


def prepared_input_sha256(prepared: Prepared, seed: int | None = None) -> str:
    """The input hash a learn of ``prepared`` (with the ``seed`` override) would record,
    known before learning: :func:`input_sha256` of its spec hash, data hash, the code
    version and its bins."""
    return input_sha256(spec_sha256(prepared.spec, seed=seed), prepared.dataset.sha256,
                        code_version(), prepared.bins_fingerprint)


@dataclass
class RunResult:
    run_id: str
    folder: Path
    record: dict[str, Any]
    twin: dict[str, Any] | None
    warnings: list[Problem]

    @property
    def twin_identical(self) -> bool | None:
        if self.twin is None:
            return None
        return not self.twin_differences

    @property
    def twin_differences(self) -> list[str]:
        """What differs from the earlier run with the same inputs: ``graph``, ``score``,
        ``bootstrap consensus`` (empty without a twin or when it is reproduced)."""
        if self.twin is None:
            return []
        a, b = self.twin, self.record
        return [what for what, same in (
            ("graph", a["graph_sha256"] == b["graph_sha256"]),
            ("score", a["score"]["value"] == b["score"]["value"]),
            ("bootstrap consensus", _consensus_hash(a) == _consensus_hash(b))) if not same]


def _consensus_hash(record: dict[str, Any]) -> str | None:
    return ((record.get("bootstrap") or {}).get("consensus") or {}).get("graph_sha256")


Searched = tuple[SearchOutcome, list[RunSummary], dict[str, Any], dict[str, Any]]


def start_graph(constraints: Constraints) -> list[list[int]]:
    """The spec's start graph as parent sets: its required edges, nothing else."""
    start: list[list[int]] = [[] for _ in range(constraints.n_vars)]
    for i, j in sorted(constraints.required):
        start[j].append(i)
    return start


def run_search(prepared: Prepared, scorer: FamilyScorer, budget: Budget,
               rng: np.random.Generator, bar: Progress | None = None,
               data: Dataset | None = None) -> Searched:
    """Run the spec's search method (its registry entry); return its outcome, the runs of
    a restarted local search, the method's parameters and any extra record fields.
    ``bar`` is advanced by exact search (per variable and layer) and restarts (per run).
    With ``search.candidates`` the candidate parents are screened on ``data`` (the rows
    the scorer counts; default the prepared data set) and the search runs on them."""
    spec, names, constraints = prepared.spec, prepared.dataset.names, prepared.constraints
    start = start_graph(constraints)
    refused = _candidates_refusal(prepared)
    if refused is not None:
        raise SearchRefused(refused.key, refused.message)
    screen = spec.search.candidates
    if screen is None:
        return _run_method(prepared, constraints, scorer, budget, rng, bar, start)
    data = prepared.dataset if data is None else data
    settings = Screen(screen.method, screen.k,
                      DEFAULT_ROUNDS if screen.rounds is None else screen.rounds,
                      DEFAULT_ALPHA if screen.alpha is None else screen.alpha)
    # The bar counts the first round's runs (the later rounds get budgets of their own).
    found = screened_search(
        settings, data.codes, data.arities, constraints, budget, start,
        lambda narrow, left, begin: _split(_run_method(
            prepared, narrow, scorer, left, rng, bar if left is budget else None, begin)))
    runs, parameters, extra = found.extra
    extra = {**extra, "candidates": {
        "method": settings.method, "k": settings.k, "rounds": found.rounds,
        "parents": {names[c]: [names[p] for p in ps] for c, ps in enumerate(found.sets)},
        **({"alpha": settings.alpha} if settings.method == MMPC else {})}}
    return found.outcome, runs, parameters, extra


def _split(found: Searched) -> tuple[SearchOutcome, tuple[list[RunSummary], dict[str, Any],
                                                       dict[str, Any]]]:
    return found[0], found[1:]


def _run_method(prepared: Prepared, constraints: Constraints, scorer: FamilyScorer,
                budget: Budget, rng: np.random.Generator, bar: Progress | None,
                start: Sequence[Sequence[int]]) -> Searched:
    spec = prepared.spec
    entry = registry.method(spec.search.method)
    tick = None if bar is None else bar.advance
    refused = registry.compatibility(entry, registry.score(spec.score.name))
    if refused is not None:
        raise SearchRefused(refused.key, refused.message)
    params = _params(entry, spec)
    if entry.kind == "whole":
        context = replace(_context(prepared), constraints=constraints)
        task = SearchTask(context, scorer, budget, rng, start, tick)
        found = entry.whole()(params, task)
        return found.outcome, [], found.parameters, found.extra
    method = local_search(entry.name, rng, **params.effective())
    again = RestartParams.pick(spec.search.model_dump()).effective()
    outcome, runs = with_restarts(method, lambda ps: MoveEngine(scorer, constraints, ps, budget),
                                  start, budget, rng, again["restarts"], again["kick"], tick=tick)
    parameters: dict[str, Any] = {"restarts": again["restarts"]}
    if again["restarts"]:
        parameters["kick"] = again["kick"]
    parameters.update(params.effective())
    return outcome, runs, parameters, {"proven_optimal": False}


def search_scored(
    prepared: Prepared, scorer: FamilyScorer | SelfWeightedScorer, budget: Budget,
    rng: np.random.Generator, bar: Progress | None = None, data: Dataset | None = None,
) -> tuple[Searched, FamilyScorer]:
    """:func:`run_search` with the spec's scorer, and the scorer of the learned graph's
    score. Under ``dataset.missing: structural-em`` the search runs in rounds of
    structural EM (:func:`runner.structural_em.structural_em`, from the spec's start
    graph each round, the budget's steps and seconds shared by all rounds) and the
    scorer is the learned DAG's own expected-count scorer; the record's search gains a
    ``structural_em`` block."""
    if not isinstance(scorer, SelfWeightedScorer):
        return run_search(prepared, scorer, budget, rng, bar, data), scorer
    start = start_graph(prepared.constraints)

    state = rng.bit_generator.state

    def one_round(round_scorer: FamilyScorer) -> Searched:
        rng.bit_generator.state = state  # every round breaks ties as the first did
        found = run_search(prepared, round_scorer, budget, rng, bar, data)
        budget.spent_steps += found[0].steps
        return found

    em = structural_em(scorer, one_round, lambda found: found[0].parent_sets, start)
    outcome, runs, parameters, extra = em.result
    block = {"converged": em.converged, "completed_rows": scorer.completions.size,
             "rounds": em.rounds}
    return (outcome, runs, parameters, {**extra, "structural_em": block}), em.scorer


def spec_budget(spec: Spec, deadline: float | None = None) -> Budget:
    """A fresh budget from the spec's ``search.budget``; with ``deadline`` (a wall-clock
    ``time.time()``), at most the seconds left until it."""
    b = spec.search.budget
    seconds = b.max_seconds
    if deadline is not None:
        left = max(0.0, deadline - time.time())
        seconds = left if seconds is None else min(seconds, left)
    return Budget(b.max_steps, b.max_evaluations, seconds)


def search_on(prepared: Prepared, dataset: Dataset, rng: np.random.Generator,
              deadline: float | None = None) -> tuple[list[tuple[int, ...]], bool]:
    """The spec's score and search on ``dataset`` (the prepared columns, other rows: a
    bootstrap replicate) before ``deadline``; the learned parent sets and whether the
    search converged."""
    spec = prepared.spec
    scorer = spec_scorer(normalised_spec(spec), dataset)
    (outcome, *_), _ = search_scored(prepared, scorer, spec_budget(spec, deadline), rng,
                                     data=dataset)
    return [tuple(ps) for ps in outcome.parent_sets], outcome.converged


def _search_bar(prepared: Prepared, reporter: Reporter) -> Progress | None:
    search, n = prepared.spec.search, len(prepared.dataset.names)
    if search.method == "exact":
        return reporter.bar(f"exact {prepared.spec.name}", 2 * n)
    if registry.method(search.method).restartable and search.restarts:
        return reporter.bar(f"restarts {prepared.spec.name}", search.restarts + 1)
    return None


def learn_bootstrap(prepared: Prepared, engine: Engine | None = None,
                    reporter: Reporter = SILENT) -> dict[str, Any] | None:
    """The record's ``bootstrap`` section (None without one in the spec): the replicates
    run as units on ``engine`` (default: in this process), gathered in index order, all
    by the deadline ``bootstrap.budget.max_seconds`` from now when it is set."""
    boot = prepared.spec.bootstrap
    if boot is None:
        return None
    items = list(enumerate(replicate_seeds(boot.seed, boot.replicates)))
    total = boot.budget.max_seconds if boot.budget is not None else None
    deadline = None if total is None else time.time() + total
    with reporter.bar(f"bootstrap {prepared.spec.name}", len(items)) as bar:
        results = (engine or InProcess()).map(
            run_replicate, ReplicateJob(prepared, search_on, deadline), items, bar)
    return bootstrap_block(prepared.dataset.names, results, boot.seed, boot.threshold,
                           prepared.constraints)


def split_learning_rows(prepared: Prepared) -> tuple[Prepared, Dataset | None]:
    """The prepared spec on its learning rows and the held-out rows: all rows and None
    without an ``evaluation`` section."""
    learning, held = learning_rows(normalised_spec(prepared.spec), prepared.dataset)
    if held is None:
        return prepared, None
    return replace(prepared, dataset=learning), held


def learning_part(prepared: Prepared) -> Prepared:
    """The prepared spec on its learning rows (see :func:`split_learning_rows`)."""
    return split_learning_rows(prepared)[0]


def evaluation_block(prepared: Prepared, part: Prepared, held: Dataset, parent_sets: Any,
                     fitted: Any, gaussian: bool, pseudo_count: float,
                     statistics: GaussianStatistics | None = None) -> dict[str, Any]:
    """The record's ``evaluation``: the split and the held-out fit of the learned graph
    and of the empty graph, both fitted on the learning rows ``part``."""
    ev, dataset = prepared.spec.evaluation, prepared.dataset
    assert ev is not None
    split = {"holdout": ev.holdout, "seed": ev.seed, "rows_learned": part.dataset.rows,
             "rows_held_out": held.rows, "rule": SPLIT_RULE}
    if gaussian:
        assert part.dataset.values is not None and held.values is not None
        learned_on = part.dataset.values if statistics is None else statistics
        return {**split, **gaussian_held_out_fit(learned_on, held.values, fitted, parent_sets)}
    return {**split, **held_out_fit(part.dataset.codes, held.codes, dataset.arities, fitted,
                                    pseudo_count, dataset.names)}


def learn(prepared: Prepared, seed: int | None = None, engine: Engine | None = None,
          reporter: Reporter = SILENT) -> tuple[dict[str, Any], str]:
    """Learn the structure of a prepared spec; return the record (without run id) and trace.

    With a ``bootstrap`` section the replicates run on ``engine`` after the main search;
    the single run on all rows stays the record's result (with an ``evaluation`` section,
    both use the learning rows only).

    The fitted tables (``model.json``) are returned in the record under the private key
    ``_model``, which :func:`store_learned` takes out and stores beside ``run.json``."""
    started = time.perf_counter()
    spec, dataset = prepared.spec, prepared.dataset
    names = dataset.names
    effective_seed = spec.search.seed if seed is None else seed
    spec_hash = spec_sha256(spec, seed=seed)
    version = code_version()
    inputs = prepared_input_sha256(prepared, seed)

    score_spec = normalised_spec(spec)["score"]
    part, held = split_learning_rows(prepared)
    asked = spec_scorer(normalised_spec(spec), part.dataset)
    statistics = asked.statistics if isinstance(asked, GaussianScorer) else None
    b = spec.search.budget
    budget = spec_budget(spec)
    rng = np.random.default_rng(np.random.SeedSequence(effective_seed))
    try:
        bar = _search_bar(prepared, reporter)
        try:  # the main search's batches on the local engine's workers (not bootstrap's)
            with pooled_scoring(engine, asked) as searching:
                (outcome, runs, parameters, extra), scorer = search_scored(
                    prepared, searching, budget, rng, bar, part.dataset)
        finally:
            if bar is not None:
                bar.close()
        boot_started = time.perf_counter()
        bootstrap = learn_bootstrap(part, engine, reporter)
        boot_seconds = time.perf_counter() - boot_started
    except SearchRefused as refused:
        raise InputError(Problem(prepared.spec_display, refused.message,
                                 line=spec.line_of(refused.key), key=refused.key)) from None

    edges = edges_from_parents(names, outcome.parent_sets)
    families = {names[c]: scorer.family(c, ps) for c, ps in enumerate(outcome.parent_sets)}
    # The stored total is exactly rounded, the same whichever method found the graph.
    total = scorer.total(outcome.parent_sets)
    score_block: dict[str, Any] = {
        "name": spec.score.name,
        "value": total,
        "per_row": total / part.dataset.rows,
        "families": families,
        "score_equivalent": (registry.score(spec.score.name).score_equivalent
                             and not isinstance(scorer, AvailableCaseScorer | ExpectedCountScorer)),
    }
    score_block.update(score_record(score_spec, len(names)))
    if isinstance(scorer, AvailableCaseScorer):
        score_block["available_rows"] = {
            names[c]: scorer.available_rows(c, ps) for c, ps in enumerate(outcome.parent_sets)}
    pseudo_count = spec.fit.pseudo_count if spec.fit is not None else DEFAULT_PSEUDO_COUNT
    gaussian = is_gaussian(score_spec["name"])
    fitted: Any
    if isinstance(part.dataset, partitioned.PartitionedDataset):  # counted on the workers
        model, fitted = partitioned.fit_remote(part.dataset, outcome.parent_sets,
                                               pseudo_count, graph_sha256(edges))
    else:
        model, fitted = fit_model(part.dataset, gaussian, outcome.parent_sets, pseudo_count,
                                  graph_sha256(edges), statistics,
                                  mixed=is_mixed(score_spec["name"]),
                                  expected=(scorer.completions.codes, scorer.weights)
                                  if isinstance(scorer, ExpectedCountScorer) else None)
    record: dict[str, Any] = {
        "format_version": 2,  # runner.record.FORMAT_VERSION
        "run_id": None,
        "spec_name": spec.name,
        "spec_path": prepared.spec_display,
        "spec": normalised_spec(spec, seed=seed),
        "spec_sha256": spec_hash,
        "input_sha256": inputs,
        "code_version": version,
        "code_sha256": code_sha256(),
        "created_utc": datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "data": {
            "path": prepared.data_display,
            "sha256": dataset.sha256,
            "rows": dataset.rows,
            "dropped_rows": dataset.dropped_rows,
            "columns": prepared.columns if prepared.columns is not None else {
                n: {"kind": "discrete", "states": list(s), "kind_reason": "inferred-text"}
                for n, s in zip(names, dataset.states, strict=True)
            },
        },
        "seed": effective_seed,
        "score": score_block,
        "search": {
            "method": spec.search.method,
            "start": spec.search.start,
            "seed": effective_seed,
            "stop_reason": outcome.stop_reason,
            "steps": outcome.steps,
            "evaluations": outcome.evaluations,
            "cache_hits": outcome.cache_hits,
            "converged": outcome.converged,
            "parameters": parameters,
            **extra,
            "runs": [
                {"run": r.run, "kicks": r.kicks, "start_score": r.start_score,
                 "end_score": r.end_score, "steps": r.steps, "stop_reason": r.stop_reason}
                for r in runs
            ],
            "budget": {"max_steps": b.max_steps, "max_evaluations": b.max_evaluations,
                       "max_seconds": b.max_seconds},
        },
        "edges": [list(e) for e in edges],
        "graph_sha256": graph_sha256(edges),
        "seconds": {"search": round(outcome.seconds, 6),
                    "total": round(time.perf_counter() - started, 6)},
        "environment": environment(),
        "warnings": [p.format() for p in prepared.warnings],
        "caution": CAUTION,
        "model": model_reference(model),
        "_model": model,
    }
    if held is not None:
        record["data"].update(rows_learned=part.dataset.rows, rows_held_out=held.rows)
        record["evaluation"] = evaluation_block(prepared, part, held, outcome.parent_sets,
                                                fitted, gaussian, pseudo_count, statistics)
    if bootstrap is not None:
        record["bootstrap"] = bootstrap
        record["seconds"]["bootstrap"] = round(boot_seconds, 6)
    empty = nothing_learned(prepared, record)
    if empty is not None:
        record["warnings"].append(empty.format())
    trace = trace_csv(
        (r.step, r.move, names[r.source], names[r.target], r.delta, r.score)
        for r in outcome.trace
    )
    return record, trace


def run_spec(spec_path: str | Path, results: Path, data_path: str | Path | None = None,
             seed: int | None = None, engine: Engine | None = None,
             reporter: Reporter = SILENT, reuse_bins: bool | None = None) -> RunResult:
    """Prepare, learn and store one spec; report an earlier run with the same inputs.

    ``reuse_bins`` (default: when ``data_path`` names a new data drop) cuts continuous
    columns at the bin edges of the spec's baseline in ``results``.
    """
    reuse = data_path is not None if reuse_bins is None else reuse_bins
    prepared = prepare(spec_path, data_path, bins_from=results if reuse else None)
    record, trace = learn(prepared, seed, engine, reporter)
    return store_learned(prepared, record, trace, results)


def nothing_learned(prepared: Prepared, record: Mapping[str, Any]) -> Problem | None:
    """The warning of a run whose budget ran out before its search changed the start graph
    (the required edges): the run is stored, but it learned nothing; else None."""
    search = record["search"]
    reason = search["stop_reason"]
    if reason not in BUDGET_REASONS:
        return None
    names = prepared.dataset.names
    start = sorted([names[i], names[j]] for i, j in prepared.constraints.required)
    if sorted(list(e) for e in record["edges"]) != start:
        return None
    limit = search["budget"][reason]
    key = f"search.budget.{reason}"
    before = "the first move" if search["steps"] == 0 and search["method"] not in (
        "order", "exact") else "the search finished"
    spec = prepared.spec
    return Problem(prepared.spec_display, (
        f"{spec.name}: the budget ran out before {before} ({reason} {limit:g}): the stored "
        f"graph is the start graph; raise {key}"), line=spec.line_of(key), key=key,
        severity="warning")


def store_learned(prepared: Prepared, record: dict[str, Any], trace: str,
                  results: Path) -> RunResult:
    """Store a learned record under a fresh run id (its fitted model beside it); report an
    earlier twin. A run that learned nothing (:func:`nothing_learned`) adds its warning."""
    model = record.pop("_model")
    spec = prepared.spec
    data_file = (spec.dataset_path() if prepared.data_display == spec.dataset.path
                 else Path(prepared.data_display))
    record["spec_path"] = stored_path(prepared.spec_display, results)
    record["data"] = {**record["data"], "path": stored_path(data_file, results)}
    stamp = datetime.now(UTC).strftime("%Y%m%dT%H%M%SZ")
    record["run_id"] = f"{stamp}-{record['input_sha256'][:10]}"
    twin = find_twin(results, record["spec_name"], record["input_sha256"], exclude="")
    run_id, folder = write_run(results, record, trace, model)
    record["run_id"] = run_id
    empty = nothing_learned(prepared, record)
    return RunResult(run_id, folder, record, twin,
                     [*prepared.warnings, *([] if empty is None else [empty])])
