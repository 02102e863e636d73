"""The project as a whole: its specs, which of them are up to date, and the board of their
state (``dagmill run``/``check`` without SPEC, ``dagmill overview``).

A project keeps its specs in one folder (``specs/``, or ``$DAGMILL_SPECS``): every
``*.yaml``/``*.yml`` file in it or below it, sorted by path, except hidden files and
folders and files whose name starts with ``_`` (shared pieces, such as a base spec that
others extend). A spec is *up to date* when the latest run of its name stored in the
results folder has the input hash a learn would record now (spec hash, data hash, code
version and bins: :func:`runner.pipeline.prepared_input_sha256`); otherwise it is stale,
and :func:`staleness` says why.

Everything here returns values (data classes); :mod:`runner.present` renders them.
"""

from __future__ import annotations

import hashlib
import os
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from runner.codeversion import code_version
from runner.errors import InputError, Problem

# The pipeline, the spec models and the store are imported where they are used: the
# command's parser reads SPECS_ENV and DEFAULT_SPECS from here without loading them.
if TYPE_CHECKING:
    from runner.pipeline import Prepared
    from runner.spec import Spec

#: The variable naming the project's spec folder (default ``specs``).
SPECS_ENV = "DAGMILL_SPECS"
DEFAULT_SPECS = "specs"
SPEC_SUFFIXES = (".yaml", ".yml")
#: The length of the time at the start of a run id (``YYYYMMDDTHHMMSSZ``).
RUN_TIME = 16
#: How many hex digits of a data hash the reasons show.
HASH_PREFIX = 12

UP_TO_DATE = "up_to_date"
STALE = "stale"
NEVER_RUN = "never_run"
INVALID = "invalid"


# --------------------------------------------------------------------------- discovery


def specs_folder(option: str | None = None) -> Path:
    """The project's spec folder: ``option``, else ``$DAGMILL_SPECS``, else ``specs``."""
    return Path(option or os.environ.get(SPECS_ENV) or DEFAULT_SPECS)


def _listed(path: Path, folder: Path) -> bool:
    parts = path.relative_to(folder).parts
    return (path.suffix in SPEC_SUFFIXES and not any(p.startswith(".") for p in parts)
            and not parts[-1].startswith("_"))


def discover_specs(folder: Path) -> list[Path]:
    """Every spec file in ``folder`` and its subfolders, sorted by path (see the module
    docstring for what counts); InputError when the folder is missing or holds none."""
    if not folder.is_dir():
        raise InputError(Problem(str(folder), "no such spec folder; name specs or a folder "
                                 f"of specs, or set ${SPECS_ENV}", key="SPEC"))
    found = sorted((p for p in folder.rglob("*") if p.is_file() and _listed(p, folder)),
                   key=lambda p: p.relative_to(folder).as_posix())
    if not found:
        raise InputError(Problem(str(folder), "the spec folder holds no spec (*.yaml, *.yml)",
                                 key="SPEC"))
    return found


@dataclass(frozen=True)
class SpecRef:
    """A spec file to work on, and whether it was found in a folder (a project spec,
    skipped when up to date) rather than named on the command line."""

    path: str
    discovered: bool


def spec_arguments(args: Sequence[str]) -> list[SpecRef]:
    """The command line's SPEC arguments as spec files: none means the project's spec
    folder (:func:`specs_folder`), a folder means the specs in it, a file is itself."""
    if not args:
        return [SpecRef(str(p), True) for p in discover_specs(specs_folder())]
    refs: list[SpecRef] = []
    for arg in args:
        path = Path(arg)
        if path.is_dir():
            refs += [SpecRef(str(p), True) for p in discover_specs(path)]
        else:
            refs.append(SpecRef(arg, False))
    return refs


def duplicate_names(named: Sequence[tuple[str, str]]) -> list[Problem]:
    """A problem for each spec file (``(file, name)`` pairs) whose name an earlier one
    already has: two specs of one name would share a results folder and a latest run."""
    first: dict[str, str] = {}
    problems = []
    for file, name in named:
        if name in first:
            problems.append(Problem(file, f"spec name {name!r} is also the name of "
                                    f"{first[name]}; each spec of a project needs its own "
                                    "name", key="name"))
        else:
            first[name] = file
    return problems


# --------------------------------------------------------------------------- up to date


@dataclass(frozen=True)
class LatestRun:
    """The latest stored run of a spec name: its id and folder, and its record (None when
    it could not be read, with the reason in ``problem``)."""

    run_id: str
    folder: Path
    record: dict[str, Any] | None
    problem: str | None = None


def _raw_link(folder: Path) -> tuple[str | None, str | None]:
    """A run's ``(record_sha256, previous_record_sha256)`` as stored (not checked)."""
    from runner.store import PREVIOUS_KEY, RECORD_HASH_KEY, raw_document

    doc = raw_document(folder / "run.json")
    if doc is None:
        return None, None
    own, previous = doc.get(RECORD_HASH_KEY), doc.get(PREVIOUS_KEY)
    return (own if isinstance(own, str) else None,
            previous if isinstance(previous, str) else None)


def ordered_runs(results: Path, name: str) -> list[Path]:
    """A spec's run folders, oldest first: by the time in their run id, and runs stored
    within the same second by their place in the chain (each record names the record
    hash of the run stored before it), as the run ids' hash suffixes do not sort by
    time."""
    from runner.store import list_runs

    folders = list_runs(results, name)
    links = {folder: _raw_link(folder) for folder in folders}
    by_hash = {own: folder for folder, (own, _) in links.items() if own is not None}
    depth: dict[Path, int] = {}  # how many runs before it in its chain
    for folder in folders:
        chain: list[Path] = []
        node: Path | None = folder
        while node is not None and node not in depth and node not in chain:
            chain.append(node)
            node = by_hash.get(links[node][1] or "")
        base = depth[node] + 1 if node is not None and node in depth else 0
        for k, item in enumerate(reversed(chain)):
            depth[item] = base + k
    return sorted(folders, key=lambda f: (f.name[:RUN_TIME], depth[f], f.name))


def latest_run(results: Path, name: str) -> LatestRun | None:
    """The spec's latest stored run (:func:`ordered_runs`), or None without runs."""
    from runner.store import read_run

    folders = ordered_runs(results, name)
    if not folders:
        return None
    folder = folders[-1]
    try:
        return LatestRun(folder.name, folder, read_run(folder))
    except InputError as exc:
        return LatestRun(folder.name, folder, None, "; ".join(p.format() for p in exc.problems))


def staleness(record: dict[str, Any], spec: Spec, data_sha256: str, version: str,
              inputs: str) -> list[str]:
    """Why a stored run does not match the inputs a learn would have now (empty when its
    input hash is ``inputs``): spec, data (hash prefixes old -> new), code, bin edges."""
    from runner.spec import spec_sha256

    if record.get("input_sha256") == inputs:
        return []
    reasons = []
    if record.get("spec_sha256") != spec_sha256(spec):
        reasons.append("spec changed")
    old = str((record.get("data") or {}).get("sha256"))
    if old != data_sha256:
        reasons.append(f"data changed: {old[:HASH_PREFIX]} -> {data_sha256[:HASH_PREFIX]}")
    if record.get("code_version") != version:
        reasons.append(f"code changed: {record.get('code_version')} -> {version}")
    if not reasons:
        reasons.append("bin edges changed")
    return reasons


@dataclass(frozen=True)
class Freshness:
    """Whether a prepared spec is up to date against its latest stored run, and why not."""

    input_sha256: str
    latest: LatestRun | None
    reasons: tuple[str, ...]

    @property
    def up_to_date(self) -> bool:
        return self.latest is not None and self.latest.record is not None and not self.reasons


def freshness(prepared: Prepared, results: Path, seed: int | None = None) -> Freshness:
    """The prepared spec (with the ``seed`` override) against its latest run in
    ``results``: up to date when that run's input hash is the one a learn would record."""
    from runner.pipeline import prepared_input_sha256

    if prepared.spec.combinations:
        return _variation_freshness(prepared, results, seed)
    inputs = prepared_input_sha256(prepared, seed)
    latest = latest_run(results, prepared.spec.name)
    if latest is None:
        return Freshness(inputs, None, ("never run",))
    if latest.record is None:
        return Freshness(inputs, latest, (f"latest run unreadable: {latest.problem}",))
    reasons = staleness(latest.record, prepared.spec, prepared.dataset.sha256, code_version(),
                        inputs)
    return Freshness(inputs, latest, tuple(reasons))


def _variation_freshness(prepared: Prepared, results: Path, seed: int | None) -> Freshness:
    """A spec with ``vary`` is up to date when its latest variation summary lists the
    input hashes its combinations would get now (``input_sha256``: the hash of those)."""
    from runner.pipeline import prepare_loaded, prepared_input_sha256
    from runner.store import current_variation

    hashes = [prepared_input_sha256(prepare_loaded(c.spec, prepared.spec_display), seed)
              for c in prepared.spec.combinations]
    inputs = hashlib.sha256("\n".join(hashes).encode()).hexdigest()
    latest = latest_run(results, prepared.spec.name)
    if latest is None:
        return Freshness(inputs, None, ("never run",))
    if current_variation(results, prepared.spec.name, hashes) is None:
        return Freshness(inputs, latest, ("a combination of vary changed (spec, data or "
                                          "code)",))
    return Freshness(inputs, latest, ())


# --------------------------------------------------------------------------- the board


@dataclass(frozen=True)
class RunInfo:
    """The board's view of a stored run."""

    run_id: str
    created_utc: str | None
    by: str  # run | check
    edges: int
    score: str
    value: float
    per_row: float


@dataclass(frozen=True)
class BaselineInfo:
    """A spec's pinned baseline (``run_id`` None: none pinned; ``problem``: refused)."""

    run_id: str | None
    pinned_utc: str | None = None
    problem: str | None = None

    @property
    def pinned(self) -> bool:
        return self.run_id is not None


@dataclass(frozen=True)
class CheckInfo:
    """The last check stored for a spec (the newest run with a ``check.json``)."""

    run_id: str
    checked_utc: str
    ok: bool
    verdict: str
    failures: tuple[str, ...]
    baseline_run_id: str | None


@dataclass(frozen=True)
class BoardRow:
    """One spec of the project: its state (up_to_date, stale, never_run, invalid) and why,
    its latest run, baseline and last check."""

    file: str
    name: str | None
    state: str
    reasons: tuple[str, ...] = ()
    problem: str | None = None  # the first problem of a spec that does not validate
    run: RunInfo | None = None
    baseline: BaselineInfo | None = None
    check: CheckInfo | None = None
    notes: tuple[str, ...] = field(default=())

    def as_dict(self) -> dict[str, Any]:
        out = asdict(self)
        out["reasons"], out["notes"] = list(self.reasons), list(self.notes)
        if self.baseline is not None:
            out["baseline"]["pinned"] = self.baseline.pinned
        if self.check is not None:
            out["check"]["failures"] = list(self.check.failures)
        return out


@dataclass(frozen=True)
class Board:
    """The project board: one row per spec, in discovery order."""

    specs: str
    results: str
    rows: tuple[BoardRow, ...]

    def as_dict(self) -> dict[str, Any]:
        return {"specs": self.specs, "results": self.results,
                "rows": [row.as_dict() for row in self.rows]}


def _run_info(record: dict[str, Any], by: str) -> RunInfo:
    score = record["score"]
    return RunInfo(record["run_id"], record.get("created_utc"), by, len(record["edges"]),
                   score["name"], score["value"], score["per_row"])


def _baseline_info(results: Path, name: str) -> BaselineInfo:
    from runner.store import read_baseline

    try:
        doc = read_baseline(results, name)
    except InputError as exc:
        return BaselineInfo(None, problem=exc.problems[0].format())
    if doc is None:
        return BaselineInfo(None)
    return BaselineInfo(doc["run_id"], doc.get("pinned_utc"))


def _last_check(results: Path, name: str) -> tuple[CheckInfo | None, list[str]]:
    from runner.store import read_check_outcome

    notes: list[str] = []
    for folder in reversed(ordered_runs(results, name)):
        try:
            doc = read_check_outcome(folder)
        except InputError as exc:
            notes.append(f"check outcome refused: {exc.problems[0].format()}")
            continue
        if doc is not None:
            return CheckInfo(doc["run_id"], doc["checked_utc"], doc["ok"], doc["verdict"],
                             tuple(doc["failures"]), doc["baseline_run_id"]), notes
    return None, notes


def _name_of(path: Path, exc: InputError) -> str | None:
    """A spec's name even when it does not validate: the partial spec's, else the raw
    YAML's ``name`` when it is text."""
    import yaml

    from runner.spec import Spec

    if isinstance(exc.partial_spec, Spec) and isinstance(exc.partial_spec.name, str):
        return exc.partial_spec.name
    try:
        raw = yaml.safe_load(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, yaml.YAMLError):
        return None
    name = raw.get("name") if isinstance(raw, dict) else None
    return name if isinstance(name, str) and name else None


def _spec_state(path: Path, results: Path) -> tuple[str | None, Freshness | None, str | None]:
    """(name, freshness, first problem): freshness None when the spec does not validate."""
    from runner.pipeline import prepare, search_refusal

    try:
        prepared = prepare(path)
    except InputError as exc:
        errors = [p for p in exc.problems if p.severity == "error"] or exc.problems
        return _name_of(path, exc), None, errors[0].format()
    refused = search_refusal(prepared)
    if refused is not None:
        return prepared.spec.name, None, refused.format()
    try:
        fresh = freshness(prepared, results)
    except InputError as exc:  # a combination of its vary section
        return prepared.spec.name, None, exc.problems[0].format()
    return prepared.spec.name, fresh, None


def board_row(path: Path, results: Path) -> BoardRow:
    """The board's row of one spec file."""
    name, fresh, problem = _spec_state(path, results)
    if name is None:
        return BoardRow(str(path), None, INVALID, problem=problem)
    notes: list[str] = []
    latest = latest_run(results, name) if fresh is None else fresh.latest
    run = None
    if latest is not None and latest.record is not None:
        by = "check" if (latest.folder / "check.json").is_file() else "run"
        run = _run_info(latest.record, by)
    elif latest is not None:
        notes.append(f"latest run {latest.run_id} unreadable: {latest.problem}")
    baseline = _baseline_info(results, name)
    check, check_notes = _last_check(results, name)
    notes += check_notes
    if check is not None and baseline.pinned and check.baseline_run_id != baseline.run_id:
        notes.append(f"the last check was held against baseline {check.baseline_run_id}, "
                     f"not the current one ({baseline.run_id})")
    reasons: tuple[str, ...] = ()
    if fresh is None:
        state = INVALID
    elif latest is None:
        state = NEVER_RUN
    else:
        state, reasons = (UP_TO_DATE if fresh.up_to_date else STALE), fresh.reasons
    return BoardRow(str(path), name, state, tuple(reasons), problem, run, baseline, check,
                    tuple(notes))


def project_board(folder: Path, results: Path) -> Board:
    """One row per spec in ``folder`` (:func:`discover_specs`), against ``results``. A
    spec that does not validate is a row (``invalid``, with its first problem), as is a
    second spec of an already used name."""
    paths = discover_specs(folder)
    rows = [board_row(path, results) for path in paths]
    named = [(row.file, row.name) for row in rows if row.name is not None]
    clashes = {p.file: p.format() for p in duplicate_names(named)}
    rows = [row if row.file not in clashes else BoardRow(
        row.file, row.name, INVALID, problem=clashes[row.file], run=row.run,
        baseline=row.baseline, check=row.check, notes=row.notes) for row in rows]
    return Board(str(folder), str(results), tuple(rows))
