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

import hashlib
from collections.abc import Collection, Sequence
from dataclasses import dataclass, replace
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from runner.bootstrap import edge_frequencies
from runner.engines import Engine, InProcess
from runner.errors import InputError, Problem
from runner.pipeline import (
    Prepared,
    RunResult,
    learn,
    prepare,
    prepare_loaded,
    prepared_input_sha256,
    search_refusal,
    store_learned,
)
from runner.progress import SILENT, Reporter
from runner.project import duplicate_names, freshness
from runner.record import VARIATION_FORMAT_VERSION
from runner.spec import spec_sha256
from runner.store import (
    current_variation,
    ensure_writable,
    list_variations,
    read_run,
    write_variation,
)

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
class Member:
    """A planned unit's place in a spec's ``vary`` section: the spec (its file and its
    normalised spec's hash, with the vary section), the combination's index, how many
    there are, and its values."""

    spec: str
    spec_sha256: str
    index: int
    count: int
    values: dict[str, Any]


@dataclass(frozen=True)
class Planned:
    """A prepared spec and what will happen to it: learned, or (``current`` set) not,
    because its latest stored run is up to date. ``member``: the combination of a
    ``vary`` section it is (None for a plain spec)."""

    spec: str
    prepared: Prepared
    input_sha256: str
    current: RunResult | None = None
    member: Member | None = None


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
    member: Member | None = None
    summary: Path | None = None  # the variation summary a combination belongs to

    def as_dict(self) -> dict[str, Any]:
        """The entry of ``--json``'s ``specs`` list (a combination of a ``vary`` section
        adds ``variation``: its values and its summary's id)."""
        out: dict[str, Any] = {"spec": self.spec, "name": self.name, "status": self.status,
               "input_sha256": self.input_sha256,
               "run_id": None if self.result is None else self.result.run_id,
               "folder": None if self.result is None else str(self.result.folder),
               "problems": [p.format() for p in self.problems]}
        if self.member is not None:
            out["variation"] = {"values": self.member.values, "index": self.member.index,
                                "summary_id": None if self.summary is None
                                else self.summary.stem}
        return out


def plan_specs(specs: Sequence[str | Path], results: Path,
               data_path: str | Path | None = None, seed: int | None = None,
               reuse_bins: bool | None = None,
               project: Collection[str] = (), force: bool = False,
               vary: bool = True) -> list[Planned]:
    """Prepare every spec (all problems of all of them raised together, exit 2) and decide
    which to learn: a spec in ``project`` (found in a project's spec folder) whose latest
    run in ``results`` is up to date is not learned again (unless ``force``); two project
    specs of one name are refused.

    A spec with a ``vary`` section (with ``vary``; without, the spec's own settings are
    learned) becomes one planned unit per combination (:func:`_prepare_members`); a
    project spec's combinations are up to date together, when its latest variation
    summary lists the input hashes they would get now.

    ``reuse_bins`` (default: when ``data_path`` names a new data drop) cuts continuous
    columns at the bin edges of each spec's baseline in ``results``."""
    reuse = data_path is not None if reuse_bins is None else reuse_bins
    problems: list[Problem] = []
    prepared: list[tuple[str, Prepared]] = []
    members: dict[str, list[tuple[Member, Prepared]]] = {}
    for spec in specs:
        try:
            item = prepare(spec, data_path, bins_from=results if reuse else None)
        except InputError as exc:
            problems.extend(exc.problems)
            continue
        if vary and item.spec.combinations:
            found, trouble = _prepare_members(str(spec), item, data_path,
                                              results if reuse else None, seed)
            problems += trouble
            members[str(spec)] = found
        else:
            refused = search_refusal(item)
            if refused is not None:
                problems.append(refused)
        prepared.append((str(spec), item))
    problems += duplicate_names([(spec, item.spec.name) for spec, item in prepared
                                 if spec in project])
    if problems:
        raise InputError(problems)
    planned: list[Planned] = []
    for spec, item in prepared:
        if spec in members:
            planned += _plan_members(spec, item.spec.name, members[spec], results, seed,
                                     spec in project and not force)
            continue
        if spec not in project or force or item.spec.combinations:
            # (a spec with vary learned by its own settings, by check, is always learned)
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


def _prepare_members(spec: str, item: Prepared, data_path: str | Path | None,
                     bins_from: Path | None, seed: int | None
                     ) -> tuple[list[tuple[Member, Prepared]], list[Problem]]:
    """Every combination of a spec's ``vary`` section prepared like a spec of its own
    (its data read once per distinct ``dataset`` block)."""
    combos = item.spec.combinations
    problems: list[Problem] = []
    if seed is not None and any("search.seed" == k for k in item.spec.vary or {}):
        line = item.spec.line_of("vary.search.seed")
        return [], [Problem(spec, "--seed overrides search.seed, which this spec varies; "
                            "drop one of them", line=line, key="vary.search.seed")]
    whole = spec_sha256(item.spec)
    found: list[tuple[Member, Prepared]] = []
    for index, combo in enumerate(combos):
        try:
            ready = prepare_loaded(combo.spec, spec, [], data_path, bins_from)
        except InputError as exc:
            problems += [replace(p, message=f"with {combo.label}: {p.message}")
                         for p in exc.problems]
            continue
        refused = search_refusal(ready)
        if refused is not None:
            problems.append(replace(refused, message=f"with {combo.label}: {refused.message}"))
        found.append((Member(spec, whole, index, len(combos), dict(combo.values)), ready))
    seen: set[tuple[str, int | None, str]] = set()
    unique = []
    for p in problems:
        if (p.file, p.line, p.message) not in seen:
            seen.add((p.file, p.line, p.message))
            unique.append(p)
    return found, unique


def _plan_members(spec: str, name: str, members: list[tuple[Member, Prepared]],
                  results: Path, seed: int | None, skip_current: bool) -> list[Planned]:
    """The combinations as planned units; all up to date (``skip_current``) when the
    spec's latest variation summary lists exactly the input hashes they would get now
    and its runs are still there."""
    hashes = [prepared_input_sha256(p, seed) for _, p in members]
    current: list[RunResult | None] = [None] * len(members)
    if skip_current:
        stored = current_variation(results, name, hashes)
        if stored is not None:
            runs = []
            for c, (_, p) in zip(stored["combinations"], members, strict=True):
                folder = results / name / "runs" / c["run_id"]
                try:
                    runs.append(RunResult(c["run_id"], folder, read_run(folder), None,
                                          p.warnings))
                except InputError:
                    break
            else:
                current = list(runs)
    return [Planned(spec, p, h, run, m)
            for (m, p), h, run in zip(members, hashes, current, strict=True)]


def learn_planned(planned: Sequence[Planned], results: Path, engine: Engine,
                  seed: int | None = None, reporter: Reporter = SILENT) -> list[SpecOutcome]:
    """Learn the planned specs that are not up to date on ``engine``, store them in the
    given order; one outcome per planned spec, in order. The combinations of a ``vary``
    section learned here get a variation summary once all of them are stored
    (:func:`write_summary`)."""
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
                                   unit.problems, item.member))
            continue
        result = store_learned(item.prepared, unit.record, unit.trace, results)
        out.append(SpecOutcome(item.spec, name, LEARNED, item.input_sha256, result,
                               member=item.member))
    return _with_summaries(out, results)


def _with_summaries(outcomes: list[SpecOutcome], results: Path) -> list[SpecOutcome]:
    """Write the summary of each spec whose combinations were learned now (all of them
    stored: none failed) and name it in their outcomes; a spec whose combinations were
    all up to date names its latest summary."""
    groups: dict[str, list[int]] = {}
    for k, o in enumerate(outcomes):
        if o.member is not None:
            groups.setdefault(o.member.spec, []).append(k)
    out = list(outcomes)
    for indices in groups.values():
        items = [outcomes[k] for k in indices]
        if any(o.result is None for o in items):
            continue
        if all(o.status == UP_TO_DATE for o in items):
            paths = list_variations(results, items[0].name)
            path: Path | None = paths[-1] if paths else None
        else:
            path = write_summary(items, results)
        for k in indices:
            out[k] = replace(outcomes[k], summary=path)
    return out


def write_summary(outcomes: Sequence[SpecOutcome], results: Path) -> Path:
    """Store the variation summary of one spec's combinations (their outcomes, in order):
    per combination its values, run, score and edge count; per directed edge the share
    of combinations holding it in the DAG, in the equivalence class and as an adjacency
    (:func:`runner.bootstrap.edge_frequencies`); the stable core (share 1)."""
    first = outcomes[0]
    assert first.member is not None and first.result is not None
    records = [o.result.record for o in outcomes if o.result is not None]
    names = sorted({n for r in records for n in r["data"]["columns"]})
    shares = edge_frequencies(names, [[tuple(e) for e in r["edges"]] for r in records])
    hashes = [o.input_sha256 for o in outcomes]
    inputs = hashlib.sha256("\n".join(hashes).encode()).hexdigest()
    stamp = datetime.now(UTC)
    doc: dict[str, Any] = {
        "format_version": VARIATION_FORMAT_VERSION,
        "summary_id": f"{stamp.strftime('%Y%m%dT%H%M%SZ')}-{inputs[:10]}",
        "spec_name": first.name,
        "spec_path": records[0]["spec_path"],
        "spec_sha256": first.member.spec_sha256,
        "inputs_sha256": inputs,
        "created_utc": stamp.strftime("%Y-%m-%dT%H:%M:%SZ"),
        "keys": sorted(first.member.values),
        "combinations": [{
            "values": o.member.values, "run_id": o.result.run_id,
            "input_sha256": o.input_sha256,
            "record_sha256": o.result.record.get("record_sha256"),
            "graph_sha256": o.result.record["graph_sha256"],
            "score": {k: o.result.record["score"][k] for k in ("name", "value", "per_row")},
            "edges": len(o.result.record["edges"]),
        } for o in outcomes if o.member is not None and o.result is not None],
        "shares": shares,
        "stable_core": {"directed": [s["edge"] for s in shares if s["directed"] == 1.0],
                        "class": [s["edge"] for s in shares if s["class"] == 1.0]},
    }
    return write_variation(results, doc)
