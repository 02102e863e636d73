"""Learning one or several specs on an engine, then storing them, for ``run`` and ``check``.

Every spec is prepared (spec, data, constraints) before anything is learned, so bad input
in any of them stops the command with exit 2 before a run is stored. With one spec, the
engine runs its bootstrap replicates; with several, each whole spec is a unit (its
replicates then run one after another inside that unit). Results are stored in the order
the specs were given, after all of them were learned.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from runner.engines import Engine, InProcess
from runner.errors import InputError, Problem
from runner.pipeline import Prepared, RunResult, learn, prepare, store_learned
from runner.progress import SILENT, Reporter
from runner.store import ensure_writable


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


def run_specs(specs: Sequence[str | Path], results: Path, engine: Engine,
              data_path: str | Path | None = None, seed: int | None = None,
              reporter: Reporter = SILENT, reuse_bins: bool | None = None) -> list[RunResult]:
    """Prepare every spec, learn them on ``engine``, store them in the given order.

    ``reuse_bins`` (default: when ``data_path`` names a new data drop) cuts continuous
    columns at the bin edges of each spec's baseline in ``results``."""
    reuse = data_path is not None if reuse_bins is None else reuse_bins
    problems: list[Problem] = []
    prepared: list[Prepared] = []
    for spec in specs:
        try:
            prepared.append(prepare(spec, data_path, bins_from=results if reuse else None))
        except InputError as exc:
            problems.extend(exc.problems)
    if problems:
        raise InputError(problems)
    for item in prepared:  # a results folder that cannot be written fails before learning
        ensure_writable(results, item.spec.name)
    if len(prepared) == 1:
        record, trace = learn(prepared[0], seed, engine, reporter)
        learned = [_Learned(record, trace)]
    else:
        with reporter.bar("specs", len(prepared)) as bar:
            learned = engine.map(learn_unit, seed, prepared, bar)
    failed = [p for item in learned for p in item.problems]
    if failed:
        raise InputError(failed)
    return [store_learned(p, item.record, item.trace, results)
            for p, item in zip(prepared, learned, strict=True) if item.record is not None]
