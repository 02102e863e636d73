"""Learning one or several specs on an engine, then storing them, for ``run`` and ``check``.

Every spec is prepared (spec, data, constraints, and whether its search would be refused)
before anything is learned, so bad input in any of them stops the command with exit 2
before a run is stored (:func:`plan_specs`). A spec found in a project folder whose latest
stored run has the input hash a learn would record now is up to date and is not learned
again, unless forced (:mod:`runner.project`). With one spec to learn, the engine runs its
bootstrap replicates; with several, each whole spec is a unit (its replicates then run one
after another inside that unit). Results are stored in the order the specs were given,
after all of them were learned (:func:`learn_planned`).
"""

from __future__ import annotations

from collections.abc import Collection, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from runner.engines import Engine, InProcess
from runner.errors import InputError, Problem
from runner.pipeline import (
    Prepared,
    RunResult,
    learn,
    prepare,
    prepared_input_sha256,
    search_refusal,
    store_learned,
)
from runner.progress import SILENT, Reporter
from runner.project import duplicate_names, freshness
from runner.store import ensure_writable

LEARNED = "learned"
UP_TO_DATE = "up_to_date"
FAILED = "failed"


@dataclass(frozen=True)
class _Learned:
    record: dict[str, Any] | None
    trace: str
    problems: tuple[Problem, ...] = ()


def learn_unit(seed: int | None, prepared: Prepared) -> _Learned:
    """One whole spec as a unit of work (bad input comes back as a value, not raised, so
    its problems survive the trip from a worker)."""
    try:
        record, trace = learn(prepared, seed, InProcess())
    except InputError as exc:
        return _Learned(None, "", tuple(exc.problems))
    return _Learned(record, trace)


@dataclass(frozen=True)
class Planned:
    """A prepared spec and what will happen to it: learned, or (``current`` set) not,
    because its latest stored run is up to date."""

    spec: str
    prepared: Prepared
    input_sha256: str
    current: RunResult | None = None


@dataclass(frozen=True)
class SpecOutcome:
    """What ``run``/``check`` did with one spec: ``status`` learned (``result`` is the new
    run), up_to_date (``result`` is the latest stored run, not learned again) or failed
    (``problems``; nothing stored)."""

    spec: str
    name: str
    status: str
    input_sha256: str
    result: RunResult | None
    problems: tuple[Problem, ...] = ()

    def as_dict(self) -> dict[str, Any]:
        """The entry of ``--json``'s ``specs`` list."""
        return {"spec": self.spec, "name": self.name, "status": self.status,
                "input_sha256": self.input_sha256,
                "run_id": None if self.result is None else self.result.run_id,
                "folder": None if self.result is None else str(self.result.folder),
                "problems": [p.format() for p in self.problems]}


def plan_specs(specs: Sequence[str | Path], results: Path,
               data_path: str | Path | None = None, seed: int | None = None,
               reuse_bins: bool | None = None,
               project: Collection[str] = (), force: bool = False) -> list[Planned]:
    """Prepare every spec (all problems of all of them raised together, exit 2) and decide
    which to learn: a spec in ``project`` (found in a project's spec folder) whose latest
    run in ``results`` is up to date is not learned again (unless ``force``); two project
    specs of one name are refused.

    ``reuse_bins`` (default: when ``data_path`` names a new data drop) cuts continuous
    columns at the bin edges of each spec's baseline in ``results``."""
    reuse = data_path is not None if reuse_bins is None else reuse_bins
    problems: list[Problem] = []
    prepared: list[tuple[str, Prepared]] = []
    for spec in specs:
        try:
            item = prepare(spec, data_path, bins_from=results if reuse else None)
        except InputError as exc:
            problems.extend(exc.problems)
            continue
        refused = search_refusal(item)
        if refused is not None:
            problems.append(refused)
        prepared.append((str(spec), item))
    problems += duplicate_names([(spec, item.spec.name) for spec, item in prepared
                                 if spec in project])
    if problems:
        raise InputError(problems)
    planned = []
    for spec, item in prepared:
        if spec not in project or force:
            planned.append(Planned(spec, item, prepared_input_sha256(item, seed)))
            continue
        fresh = freshness(item, results, seed)
        current = None
        if fresh.up_to_date:
            latest = fresh.latest
            assert latest is not None and latest.record is not None
            current = RunResult(latest.run_id, latest.folder, latest.record, None,
                                item.warnings)
        planned.append(Planned(spec, item, fresh.input_sha256, current))
    return planned


def learn_planned(planned: Sequence[Planned], results: Path, engine: Engine,
                  seed: int | None = None, reporter: Reporter = SILENT) -> list[SpecOutcome]:
    """Learn the planned specs that are not up to date on ``engine``, store them in the
    given order; one outcome per planned spec, in order."""
    todo = [p for p in planned if p.current is None]
    for item in todo:  # a results folder that cannot be written fails before learning
        ensure_writable(results, item.prepared.spec.name)
    if len(todo) == 1:
        try:
            learned = [_Learned(*learn(todo[0].prepared, seed, engine, reporter))]
        except InputError as exc:
            learned = [_Learned(None, "", tuple(exc.problems))]
    elif todo:
        with reporter.bar("specs", len(todo)) as bar:
            learned = engine.map(learn_unit, seed, [p.prepared for p in todo], bar)
    else:
        learned = []
    units = iter(learned)
    out = []
    for item in planned:
        name = item.prepared.spec.name
        if item.current is not None:
            out.append(SpecOutcome(item.spec, name, UP_TO_DATE, item.input_sha256,
                                   item.current))
            continue
        unit = next(units)
        if unit.record is None:
            out.append(SpecOutcome(item.spec, name, FAILED, item.input_sha256, None,
                                   unit.problems))
            continue
        result = store_learned(item.prepared, unit.record, unit.trace, results)
        out.append(SpecOutcome(item.spec, name, LEARNED, item.input_sha256, result))
    return out


def run_specs(specs: Sequence[str | Path], results: Path, engine: Engine,
              data_path: str | Path | None = None, seed: int | None = None,
              reporter: Reporter = SILENT, reuse_bins: bool | None = None) -> list[RunResult]:
    """Prepare every spec, learn them all on ``engine``, store them in the given order;
    bad input in any spec (before or while learning) raises InputError and stores none."""
    planned = plan_specs(specs, results, data_path, seed, reuse_bins)
    todo = [p.prepared for p in planned]
    for item in todo:
        ensure_writable(results, item.spec.name)
    if len(todo) == 1:
        learned = [_Learned(*learn(todo[0], seed, engine, reporter))]
    else:
        with reporter.bar("specs", len(todo)) as bar:
            learned = engine.map(learn_unit, seed, todo, bar)
    failed = [p for item in learned for p in item.problems]
    if failed:
        raise InputError(failed)
    return [store_learned(p, item.record, item.trace, results)
            for p, item in zip(todo, learned, strict=True) if item.record is not None]
