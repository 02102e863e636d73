"""``dagmill verify``: check a results folder as an auditor would.

For every stored run of a spec: the record fits its format and its own seal
(``record_sha256``), its graph, consensus, model file and trace match their hashes, and
its folder is named by its run id. Across the runs: the chain of
``previous_record_sha256`` links is whole (no run missing before another, no two runs
following the same one, a single first run), and no unsealed record follows sealed ones
(a seal that was stripped). A run learned by ``check``: its ``check.json`` (the verdict)
sealed and tied to that run. The baseline: its own seal, the pinned run present and
matching. With a public key: every sealed record and the baseline carry a valid
signature by that key.

The chain is the order in which runs were stored (the store links each run to the one
stored before it, under a lock). That is the order of the run ids' times, except that
runs stored within one second sort by their input hash, and that two runs of one spec
that overlapped in time land in the order they finished; verify notes an overlap but does
not fail on it.

What the chain cannot show alone: the latest run has no follower, so an edit of it with
a recomputed seal is caught only by a signature (``--public-key``) or, if it is pinned,
by the baseline. Deleting the latest runs is caught only if a baseline or a copy of
their hashes elsewhere (version control) still names them.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from runner.errors import InputError, Problem
from runner.record import format_version
from runner.signing import signature_problem
from runner.store import (
    BASELINE_HASH_KEY,
    CHECK_FILE,
    CHECK_HASH_KEY,
    PREVIOUS_KEY,
    RECORD_HASH_KEY,
    RUN_ID,
    SIGNATURE_KEY,
    baseline_path,
    raw_document,
    read_baseline,
    read_check_outcome,
    read_run,
)

if TYPE_CHECKING:
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PublicKey


@dataclass(frozen=True)
class Finding:
    """One thing that does not hold, and the file it is about."""

    file: str
    problem: str

    def as_dict(self) -> dict[str, str]:
        return {"file": self.file, "problem": self.problem}


@dataclass
class SpecAudit:
    """What verify found for one spec's folder."""

    spec_name: str
    runs: int = 0
    sealed: int = 0
    signed: int = 0
    checks: int = 0
    baseline: str = "none pinned"
    problems: list[Finding] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.problems

    def as_dict(self) -> dict[str, Any]:
        return {"spec_name": self.spec_name, "ok": self.ok, "runs": self.runs,
                "sealed": self.sealed, "signed": self.signed, "checks": self.checks,
                "baseline": self.baseline,
                "problems": [f.as_dict() for f in self.problems], "notes": self.notes}


def _finding(problem: Problem) -> Finding:
    text = f"{problem.key}: {problem.message}" if problem.key else problem.message
    return Finding(problem.file, text)


def _stamp(doc: dict[str, Any]) -> str:
    """The time part of a record's run id (runs of the same second sort by input hash)."""
    return str(doc.get("run_id", "")).split("-", 1)[0]


def _run_folders(spec_folder: Path) -> list[Path]:
    runs = spec_folder / "runs"
    if not runs.is_dir():
        return []
    return sorted(p for p in runs.iterdir() if p.is_dir() and not p.name.startswith("."))


def _check_runs(audit: SpecAudit, folders: list[Path],
                key: Ed25519PublicKey | None) -> list[tuple[Path, dict[str, Any]]]:
    """Each run on its own; returns the readable records (parsed, by folder order)."""
    readable: list[tuple[Path, dict[str, Any]]] = []
    for folder in folders:
        path = folder / "run.json"
        if not RUN_ID.match(folder.name):
            audit.problems.append(Finding(str(folder), "not a run folder name (a run id): "
                                          "renamed or added by hand"))
        doc = raw_document(path)
        if doc is None:
            audit.problems.append(Finding(str(path), "missing or not a JSON object"))
            continue
        audit.runs += 1
        try:
            read_run(folder)
        except InputError as exc:
            audit.problems.extend(_finding(p) for p in exc.problems)
        if doc.get("run_id") != folder.name:
            audit.problems.append(Finding(str(path), f"holds run {doc.get('run_id')!r} but "
                                          f"lies in folder {folder.name}: runs were renamed "
                                          "or swapped"))
        version = format_version(doc)
        if version >= 2:
            audit.sealed += 1
        if SIGNATURE_KEY in doc:
            audit.signed += 1
        if key is not None and version >= 2:
            why = signature_problem(doc.get(SIGNATURE_KEY), str(doc.get(RECORD_HASH_KEY)), key)
            if why is not None:
                audit.problems.append(Finding(str(path), f"signature: {why}"))
        _check_outcome_file(audit, folder, key)
        readable.append((folder, doc))
    _check_unchained(audit, readable)
    return readable


def _check_unchained(audit: SpecAudit, records: list[tuple[Path, dict[str, Any]]]) -> None:
    """An unchained record (format 0 or 1) from the time chained ones were written, or
    later, had its seal or chain stripped: older formats were written before the chain."""
    chained = [_stamp(doc) for _, doc in records if format_version(doc) >= 2]
    if not chained:
        return
    first = min(chained)
    for folder, doc in records:
        version = format_version(doc)
        if version < 2 and _stamp(doc) >= first:
            audit.problems.append(Finding(str(folder / "run.json"), f"format version "
                                          f"{version} (unchained) stored when runs were "
                                          "already chained: its seal or chain was stripped"))


def _check_outcome_file(audit: SpecAudit, folder: Path, key: Ed25519PublicKey | None) -> None:
    """A run learned by ``check`` has a sealed ``check.json`` (and, with a key, signed)."""
    try:
        outcome = read_check_outcome(folder)
    except InputError as exc:
        audit.problems.extend(_finding(p) for p in exc.problems)
        return
    if outcome is None:
        return
    audit.checks += 1
    if key is not None:
        why = signature_problem(outcome.get(SIGNATURE_KEY), str(outcome[CHECK_HASH_KEY]), key)
        if why is not None:
            audit.problems.append(Finding(str(folder / CHECK_FILE), f"signature: {why}"))


def _check_chain(audit: SpecAudit, records: list[tuple[Path, dict[str, Any]]]) -> None:
    """The ``previous_record_sha256`` links of the chained records."""
    by_hash = {doc.get(RECORD_HASH_KEY): folder for folder, doc in records
               if isinstance(doc.get(RECORD_HASH_KEY), str)}
    records_by_folder = dict(records)
    chained = [(folder, doc) for folder, doc in records if format_version(doc) >= 2]
    followers: dict[str, list[Path]] = {}
    firsts = []
    for folder, doc in chained:
        previous = doc.get(PREVIOUS_KEY)
        if previous is None:
            firsts.append(folder)
            continue
        followers.setdefault(previous, []).append(folder)
        if previous not in by_hash:
            audit.problems.append(Finding(str(folder / "run.json"), "the run stored before "
                                          "it is missing (deleted, or its record edited): "
                                          f"no run has record_sha256 {previous[:12]}..."))
        elif _stamp(records_by_folder[by_hash[previous]]) > _stamp(doc):
            audit.notes.append(f"{doc.get('run_id')} was stored after "
                               f"{records_by_folder[by_hash[previous]].get('run_id')} "
                               "(the two runs overlapped in time)")
    for previous, after in sorted(followers.items()):
        if len(after) > 1 and previous in by_hash:
            names = ", ".join(p.name for p in after)
            audit.problems.append(Finding(str(by_hash[previous] / "run.json"),
                                          f"{len(after)} runs claim to follow it ({names}): "
                                          "the chain was spliced"))
    if len(firsts) > 1:
        names = ", ".join(p.name for p in firsts)
        audit.problems.append(Finding(str(firsts[1] / "run.json"), f"{len(firsts)} runs claim "
                                      f"to be the first of the chain ({names}): runs before "
                                      "one of them were deleted"))


def _check_baseline(audit: SpecAudit, root: Path, key: Ed25519PublicKey | None) -> None:
    path = baseline_path(root, audit.spec_name)
    if not path.exists():
        return
    try:
        doc = read_baseline(root, audit.spec_name)
    except InputError as exc:
        audit.baseline = "refused"
        audit.problems.extend(_finding(p) for p in exc.problems)
        return
    assert doc is not None
    version = format_version(doc)
    audit.baseline = f"run {doc['run_id']}" + ("" if version >= 2 else
                                               f" (format version {version}, not sealed)")
    if key is not None and version >= 2:
        why = signature_problem(doc.get(SIGNATURE_KEY), str(doc.get(BASELINE_HASH_KEY)), key)
        if why is not None:
            audit.problems.append(Finding(str(path), f"signature: {why}"))


def verify_spec(root: Path, spec_name: str,
                public_key: Ed25519PublicKey | None = None) -> SpecAudit:
    """Everything verify checks for one spec's folder under ``root``."""
    audit = SpecAudit(spec_name)
    records = _check_runs(audit, _run_folders(root / spec_name), public_key)
    _check_chain(audit, records)
    _check_baseline(audit, root, public_key)
    return audit


def stored_specs(root: Path) -> list[str]:
    """The spec names that have a folder of runs or a baseline under ``root``."""
    if not root.is_dir():
        return []
    return sorted(p.name for p in root.iterdir() if p.is_dir() and not p.name.startswith(".")
                  and ((p / "runs").is_dir() or (p / "baseline.json").exists()))
