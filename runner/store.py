"""The result store: run records as plain, stable, atomically written files.

Layout (see the README)::

    <results>/<spec name>/baseline.json
    <results>/<spec name>/runs/<run id>/run.json
    <results>/<spec name>/runs/<run id>/trace.csv
    <results>/<spec name>/runs/<run id>/model.json   # fitted tables; sha256 in run.json

JSON is written with sorted keys, two-space indents and a final newline, so records
diff cleanly under version control. A run folder is assembled under a temporary name
in the same ``runs/`` folder and renamed into place in one step: a killed run leaves
no half-written record, and an existing run is never overwritten.

Both files have a typed layout (``runner.record``): the writers validate a record or
baseline through its model before writing (a record that does not fit is a bug, raised
as ``ValueError``), and the readers validate what they read (a file that does not fit is
an ``InputError`` naming the file and the key path). Readers still return plain dicts.

Seals. A record carries ``record_sha256`` (every other key but ``signature``), the
sha256 of its trace and model files, and ``previous_record_sha256``: the seal of the
spec's latest run stored before it in this results folder (null for the first), so the
runs of a spec form a chain in the order they were stored (the store takes a lock on the
spec's ``runs/`` folder while it links and lands a run). A baseline carries its own
``baseline_sha256`` and the pinned run's ``record_sha256``; reading it checks both, and
that the run is still there and gives exactly this baseline. With ``$DAGMILL_SIGNING_KEY``
set, both are signed (``runner.signing``).
"""

from __future__ import annotations

import contextlib
import csv
import errno
import hashlib
import io
import json
import os
import re
import tempfile
from collections.abc import Callable, Iterable, Iterator, Sequence
from pathlib import Path
from typing import Any

from runner.errors import InputError, Problem
from runner.graph import graph_sha256
from runner.signing import Signer, signer_from_environment

# runner.record (the pydantic models of the documents) is imported by the functions that
# check a document: `dagmill validate` reaches this module through the pipeline and never
# reads or writes one.

try:
    import fcntl
except ImportError:  # pragma: no cover - not on POSIX: runs are still atomic, not locked
    fcntl = None  # type: ignore[assignment]  # the lock is skipped where fcntl is missing

RESULTS_ENV = "DAGMILL_RESULTS"
RUN_ID = re.compile(r"^\d{8}T\d{6}Z-[0-9a-f]{10}(-\d+)?$")
TRACE_HEADER = ("step", "move", "from", "to", "delta", "score")


def dump_json(value: Any) -> str:
    """Stable JSON text: sorted keys, two-space indents, a final newline."""
    return json.dumps(value, sort_keys=True, indent=2, ensure_ascii=False) + "\n"


def sha256_text(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def results_root(option: str | None) -> Path:
    """The results folder: the option, else ``$DAGMILL_RESULTS``, else ``./results``."""
    return Path(option or os.environ.get(RESULTS_ENV) or "results")


STALE_SECONDS = 3600  # staging folders and temporary files older than this are leftovers
GITIGNORE = """# written by dagmill: staging folders and temporary files of interrupted writes
.incoming-*
.*.tmp
"""


def _folder_mode() -> int:
    """The mode a new folder gets under the process umask (mkdtemp would give 0700)."""
    umask = os.umask(0o022)
    os.umask(umask)
    return 0o777 & ~umask


def _stale(path: Path, now: float) -> bool:
    try:
        return now - path.lstat().st_mtime > STALE_SECONDS
    except OSError:
        return False


def clean_leftovers(root: Path, spec_name: str, now: float | None = None) -> list[Path]:
    """Remove what interrupted writes left in a spec's folder more than an hour ago:
    ``.incoming-*`` staging folders under ``runs/`` and ``.*.tmp`` files of atomic writes.
    Recent ones are left alone (another command may be writing them). Returns what was
    removed."""
    import shutil
    import time

    now = time.time() if now is None else now
    spec = root / spec_name
    found = [*sorted((spec / "runs").glob(".incoming-*")), *sorted(spec.glob(".*.tmp")),
             *sorted(root.glob(".*.tmp"))]
    removed = []
    for path in found:
        if not _stale(path, now):
            continue
        if path.is_dir() and not path.is_symlink():
            shutil.rmtree(path, ignore_errors=True)
        else:
            path.unlink(missing_ok=True)
        removed.append(path)
    return removed


def _nearest_existing(path: Path) -> Path:
    while not path.exists() and path.parent != path:
        path = path.parent
    return path


def ensure_writable(root: Path, spec_name: str) -> None:
    """Before any learning: the spec's ``runs/`` folder could be written, without creating
    anything (a spec refused later leaves no trace). Where the folder exists, a probe file
    is created and removed in it and stale leftovers are cleaned; where it does not yet,
    the nearest existing folder must be a writable folder and every name to create within
    the file system's length limit. Raises the OSError the write would have met (the
    command reports it as an environment fault, exit 3), so no learn is wasted."""
    runs = root / spec_name / "runs"
    if runs.is_dir():
        fd, probe = tempfile.mkstemp(prefix=".incoming-probe-", suffix=".tmp", dir=runs)
        os.close(fd)
        os.unlink(probe)
        clean_leftovers(root, spec_name)
        return
    base = _nearest_existing(runs)
    if not base.is_dir():
        raise NotADirectoryError(errno.ENOTDIR, os.strerror(errno.ENOTDIR), str(base))
    limit = os.pathconf(base, "PC_NAME_MAX") if hasattr(os, "pathconf") else 255
    for part in runs.relative_to(base).parts:
        if len(os.fsencode(part)) > limit:
            raise OSError(errno.ENAMETOOLONG, os.strerror(errno.ENAMETOOLONG),
                          str(base / part))
    if not os.access(base, os.W_OK | os.X_OK):
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES), str(base))
    if hasattr(os, "statvfs") and os.statvfs(base).f_flag & os.ST_RDONLY:
        raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(base))


def _file_mode() -> int:
    """The mode a plain new file gets under the process umask (mkstemp would give 0600)."""
    umask = os.umask(0o022)
    os.umask(umask)
    return 0o666 & ~umask


def atomic_write_text(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` through a temporary file in the same folder and a rename."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        os.chmod(tmp, _file_mode())
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as handle:
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def trace_csv(rows: Iterable[Sequence[Any]]) -> str:
    """The trace as CSV text: one row per applied move, floats in shortest round-trip form."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(TRACE_HEADER)
    for row in rows:
        writer.writerow([repr(v) if isinstance(v, float) else v for v in row])
    return buffer.getvalue()


MODEL_FILE = "model.json"


def model_reference(model: dict[str, Any]) -> dict[str, Any]:
    """The record's ``model`` block: the model file's name, sha256 and how it was fitted."""
    return {"file": MODEL_FILE, "sha256": sha256_text(dump_json(model)),
            "pseudo_count": model.get("pseudo_count"), "estimator": model.get("estimator")}


RECORD_HASH_KEY = "record_sha256"
#: run.json keys that legitimately differ between two runs of the same inputs: the time
#: (in the run id too), the timings, the hashes over them, the chain and the signature.
VOLATILE_KEYS = ("run_id", "created_utc", "seconds", "record_sha256",
                 "previous_record_sha256", "signature")
BASELINE_HASH_KEY = "baseline_sha256"
PREVIOUS_KEY = "previous_record_sha256"
SIGNATURE_KEY = "signature"


def record_sha256(record: dict[str, Any]) -> str:
    """The sha256 of a record's stored JSON without its own ``record_sha256`` key and
    without its ``signature`` (which signs this hash)."""
    return sha256_text(dump_json({k: v for k, v in record.items()
                                  if k not in (RECORD_HASH_KEY, SIGNATURE_KEY)}))


def baseline_sha256(doc: dict[str, Any]) -> str:
    """The sha256 of a baseline's stored JSON without ``baseline_sha256`` and
    ``signature``."""
    return sha256_text(dump_json({k: v for k, v in doc.items()
                                  if k not in (BASELINE_HASH_KEY, SIGNATURE_KEY)}))


def sealed(record: dict[str, Any], trace: str, previous: str | None,
           signer: Signer | None = None) -> dict[str, Any]:
    """The record with ``trace_sha256`` (of trace.csv), ``previous_record_sha256`` (the
    chain), ``record_sha256`` (of every other key, so of the model's and the trace's
    hashes too) and, with a signer, the ``signature`` of that hash added."""
    out = {k: v for k, v in record.items() if k not in (RECORD_HASH_KEY, SIGNATURE_KEY)}
    out.update(trace_sha256=sha256_text(trace), previous_record_sha256=previous)
    out[RECORD_HASH_KEY] = record_sha256(out)
    if signer is not None:
        out[SIGNATURE_KEY] = signer.sign(out[RECORD_HASH_KEY])
    return out


@contextlib.contextmanager
def _chain_lock(runs: Path) -> Iterator[None]:
    """Hold an exclusive lock on a spec's ``runs/`` folder (the folder itself, so no lock
    file is left to commit): linking a run to the latest one and landing it is one step."""
    if fcntl is None:  # pragma: no cover
        yield
        return
    fd = os.open(runs, os.O_RDONLY)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX)
        yield
    finally:
        os.close(fd)  # closing the descriptor releases the lock


def raw_document(path: Path) -> dict[str, Any] | None:
    """A JSON object file parsed but not checked (None when it is missing, unreadable or
    not an object): for the chain and the audit, which must see edited files too."""
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError):
        return None
    return doc if isinstance(doc, dict) else None


def _read_document(path: Path, what: str, missing: str | None = None) -> Any:
    """A stored document's parsed JSON, before its model checks it: None when the file
    does not exist and ``missing`` is None, else InputError with ``missing``; an
    unreadable file is InputError naming it."""
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        if missing is None:
            return None
        raise InputError(Problem(str(path), missing)) from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(Problem(str(path), f"{what} is unreadable: {exc}")) from None


def _raw_records(runs: Path) -> list[tuple[Path, dict[str, Any]]]:
    """Every run folder in ``runs/`` with its parsed ``run.json`` (unchecked), by run id;
    folders whose record cannot be parsed are left out."""
    if not runs.is_dir():
        return []
    out = []
    for folder in sorted(p for p in runs.iterdir() if p.is_dir() and RUN_ID.match(p.name)):
        doc = raw_document(folder / "run.json")
        if doc is not None:
            out.append((folder, doc))
    return out


def chain_head(runs: Path) -> str | None:
    """The ``record_sha256`` the next run of this spec chains to: that of the latest run
    stored (the sealed run no other run names as its previous; the latest by run id if
    there are several, which only an edit of the folder makes). None for the first run.
    The records' content is not checked here (``dagmill verify`` does)."""
    sealed_runs = [doc for _, doc in _raw_records(runs)
                   if isinstance(doc.get(RECORD_HASH_KEY), str)]
    named = {doc.get(PREVIOUS_KEY) for doc in sealed_runs}
    heads = [doc[RECORD_HASH_KEY] for doc in sealed_runs if doc[RECORD_HASH_KEY] not in named]
    return heads[-1] if heads else None


def _valid(check: Callable[[Any, str], object], doc: dict[str, Any], what: str) -> None:
    """Validate a document we are about to write; one that does not fit is our bug."""
    try:
        check(doc, f"the {what} being written")
    except InputError as exc:
        raise ValueError(f"dagmill built a {what} that does not fit its model:\n{exc}") from None


def write_run(root: Path, record: dict[str, Any], trace: str,
              model: dict[str, Any] | None = None,
              signer: Signer | None = None) -> tuple[str, Path]:
    """Store a run (and its fitted model, if given), chained to the spec's latest stored
    run and signed by ``signer`` (default: the key ``$DAGMILL_SIGNING_KEY`` names, if any);
    return its final run id (a suffix is added on a same-second clash)."""
    if signer is None:
        signer = signer_from_environment()
    runs = root / record["spec_name"] / "runs"
    runs.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=".incoming-", dir=runs))
    try:
        os.chmod(staging, _folder_mode())  # the run folder a colleague reads
        with _chain_lock(runs):
            landed = _land(runs, staging, record, trace, model, signer)
        ignore = root / ".gitignore"
        if not ignore.exists():  # keeps staging names of interrupted writes out of commits
            atomic_write_text(ignore, GITIGNORE)
        return landed
    finally:
        if staging.exists():
            for child in staging.iterdir():
                child.unlink()
            staging.rmdir()


def _land(runs: Path, staging: Path, record: dict[str, Any], trace: str,
          model: dict[str, Any] | None, signer: Signer | None) -> tuple[str, Path]:
    """Seal the record into ``staging`` and rename it into place under a free run id."""
    from runner.record import check_record

    previous = chain_head(runs)
    base_id = record["run_id"]
    for attempt in range(1, 1000):
        run_id = base_id if attempt == 1 else f"{base_id}-{attempt}"
        final = runs / run_id
        if final.exists():
            continue
        out = sealed({**record, "run_id": run_id}, trace, previous, signer)
        _valid(check_record, out, "run record")
        (staging / "run.json").write_text(dump_json(out), encoding="utf-8")
        (staging / "trace.csv").write_text(trace, encoding="utf-8")
        if model is not None:
            (staging / MODEL_FILE).write_text(dump_json(model), encoding="utf-8")
        try:
            os.rename(staging, final)
        except OSError:
            if final.exists():
                continue
            raise
        return run_id, final
    raise RuntimeError("could not find a free run id")  # pragma: no cover


def list_runs(root: Path, spec_name: str) -> list[Path]:
    """Run folders of one spec, oldest first (run ids sort by time)."""
    runs = root / spec_name / "runs"
    if not runs.is_dir():
        return []
    return sorted(p for p in runs.iterdir() if p.is_dir() and RUN_ID.match(p.name))


def all_runs(root: Path) -> list[Path]:
    if not root.is_dir():
        return []
    return [run for spec in sorted(root.iterdir()) if spec.is_dir()
            for run in list_runs(root, spec.name)]


def read_run(folder: Path) -> dict[str, Any]:
    """Read a run record and check it against its hashes: the graph's, the consensus's, the
    model file's, the whole record's and the trace's (a hand edit is refused). Records
    from before a hash existed are read without that check."""
    from runner.record import check_record

    path = folder / "run.json"
    record = _read_document(path, "run record", missing="run record is missing")
    check_record(record, str(path))
    if graph_sha256(record["edges"]) != record["graph_sha256"]:
        raise InputError(Problem(
            str(path), "record content does not match its graph_sha256: the edges were "
            "edited by hand; restore the file from version control or re-run the spec",
            key="edges"))
    boot = record.get("bootstrap")
    if isinstance(boot, dict) and "consensus" in boot:
        cons = boot["consensus"]
        if graph_sha256(cons.get("edges", [])) != cons.get("graph_sha256"):
            raise InputError(Problem(str(path), "the bootstrap consensus edges do not match "
                                     "their graph_sha256 (edited by hand); restore the file "
                                     "from version control or re-run the spec",
                                     key="bootstrap.consensus.edges"))
    read_model(folder, record)
    if RECORD_HASH_KEY in record and record_sha256(record) != record[RECORD_HASH_KEY]:
        raise InputError(Problem(str(path), "record content does not match its "
                                 "record_sha256: run.json was edited by hand; restore it "
                                 "from version control or re-run the spec",
                                 key=RECORD_HASH_KEY))
    if "trace_sha256" in record:
        trace = folder / "trace.csv"
        try:
            text = trace.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError):
            text = None
        if text is None or sha256_text(text) != record["trace_sha256"]:
            raise InputError(Problem(str(trace), "the search trace is missing or does not "
                                     "match the record's trace_sha256 (edited by hand); "
                                     "restore it from version control or re-run the spec",
                                     key="trace_sha256"))
    return record


def read_model(folder: Path, record: dict[str, Any]) -> dict[str, Any] | None:
    """The run's fitted model, checked against the sha256 its record holds; None for a
    record from before fitted models. A missing or edited model file is refused."""
    reference = record.get("model")
    if reference is None:
        return None
    path = folder / MODEL_FILE
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(Problem(str(path), "the run's model file is missing (run.json "
                                 "records its sha256); restore it from version control or "
                                 "re-run the spec", key="model")) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(Problem(str(path), f"model file is unreadable: {exc}",
                                 key="model")) from None
    if sha256_text(text) != reference.get("sha256"):
        raise InputError(Problem(str(path), "model file does not match the sha256 in "
                                 "run.json: it was edited; restore it from version control "
                                 "or re-run the spec", key="model"))
    return json.loads(text)


def find_twin(root: Path, spec_name: str, input_sha256: str, exclude: str) -> dict | None:
    """The earliest stored run of the spec with the same input hash, if any."""
    suffix = input_sha256[:10]
    for folder in list_runs(root, spec_name):
        if folder.name == exclude or folder.name.split("-")[1] != suffix:
            continue
        try:
            record = read_run(folder)
        except InputError:
            continue
        if record.get("input_sha256") == input_sha256:
            return record
    return None


def resolve_run(root: Path, ref: str) -> Path:
    """A run folder from a run id, a unique prefix of one, or a folder path."""
    as_path = Path(ref)
    if as_path.is_dir() and (as_path / "run.json").exists():
        return as_path
    if ("/" in ref or os.sep in ref) and not as_path.exists():
        raise InputError(Problem(ref, "run folder does not exist (deleted or moved?); "
                                 "`dagmill history SPEC` lists the stored runs", key="RUN"))
    matches = [p for p in all_runs(root) if p.name.startswith(ref)] if ref else []
    exact = [p for p in matches if p.name == ref]
    if exact:
        matches = exact
    if len(matches) == 1:
        return matches[0]
    if not matches:
        raise InputError(Problem(str(root), f"no run matches {ref!r}; `dagmill history SPEC` "
                                 "or the runs/ folders list the stored runs", key="RUN"))
    names = ", ".join(p.name for p in matches[:5])
    raise InputError(Problem(str(root), f"{ref!r} matches {len(matches)} runs ({names}"
                             f"{', ...' if len(matches) > 5 else ''}); give more of the id",
                             key="RUN"))


# --------------------------------------------------------------------------- baselines

BASELINE_FILE = "baseline.json"


def baseline_path(root: Path, spec_name: str) -> Path:
    return root / spec_name / BASELINE_FILE


def baseline_from_record(record: dict[str, Any], pinned_utc: str) -> dict[str, Any]:
    """The baseline document of a run (unsealed): its id and hashes, score, edges and data
    columns (the columns let ``check`` report state changes even when the run folder is
    gone), and the run's own seal."""
    from runner.record import FORMAT_VERSION

    score = record["score"]
    data = record["data"]
    return {
        "format_version": FORMAT_VERSION,
        "run_id": record["run_id"],
        "spec_name": record["spec_name"],
        "spec_sha256": record["spec_sha256"],
        "input_sha256": record["input_sha256"],
        "code_version": record["code_version"],
        "graph_sha256": record["graph_sha256"],
        "record_sha256": record.get(RECORD_HASH_KEY),
        "score": {"name": score["name"], "ess": score.get("ess"), "value": score["value"],
                  "per_row": score["per_row"]},
        "edges": [list(e) for e in record["edges"]],
        "data": {"sha256": data["sha256"], "rows": data["rows"],
                 "columns": {n: {"kind": c["kind"], "states": list(c["states"]),
                                 **({"binning": c["binning"]} if "binning" in c else {})}
                             for n, c in data["columns"].items()}},
        "pinned_utc": pinned_utc,
        **_consensus_of(record),
    }


def seal_baseline(doc: dict[str, Any], signer: Signer | None = None) -> dict[str, Any]:
    """The baseline with its ``baseline_sha256`` (and, with a signer, its signature)."""
    out = {k: v for k, v in doc.items() if k not in (BASELINE_HASH_KEY, SIGNATURE_KEY)}
    out[BASELINE_HASH_KEY] = baseline_sha256(out)
    if signer is not None:
        out[SIGNATURE_KEY] = signer.sign(out[BASELINE_HASH_KEY])
    return out


def _consensus_of(record: dict[str, Any]) -> dict[str, Any]:
    """The bootstrap consensus network of a record, for its baseline (none without one)."""
    boot = record.get("bootstrap")
    if not boot:
        return {}
    cons = boot["consensus"]
    return {"consensus": {"edges": [list(e) for e in cons["edges"]],
                          "graph_sha256": cons["graph_sha256"],
                          "replicates": boot["replicates"], "threshold": boot["threshold"]}}


_REPIN = "restore it from version control or re-pin with `dagmill pin RUN`"


def read_baseline(root: Path, spec_name: str) -> dict[str, Any] | None:
    """The spec's baseline, or None when none is pinned.

    A sealed baseline (format version 2) is checked against its ``baseline_sha256``, and
    its pinned run must still be stored, match the baseline's ``record_sha256`` and give
    exactly this baseline (so an edited baseline is refused even with a recomputed seal).
    Older baselines are checked against their graph hash only. Raises InputError naming
    the file for anything that does not hold."""
    from runner.record import check_baseline, format_version

    path = baseline_path(root, spec_name)
    doc = _read_document(path, "baseline")
    if doc is None:
        return None
    try:
        check_baseline(doc, str(path))
    except InputError as exc:
        raise InputError([*exc.problems, Problem(str(path), "re-pin with `dagmill pin RUN` "
                                                 "to replace it")]) from None
    if graph_sha256(doc["edges"]) != doc["graph_sha256"]:
        raise InputError(Problem(str(path), "baseline content does not match its graph_sha256: "
                                 f"the edges were edited by hand; {_REPIN}", key="edges"))
    cons = doc.get("consensus")
    if cons is not None and (not isinstance(cons, dict)
                             or graph_sha256(cons.get("edges", [])) != cons.get("graph_sha256")):
        raise InputError(Problem(str(path), "the baseline's consensus edges do not match their "
                                 f"graph_sha256; {_REPIN}", key="consensus.edges"))
    if format_version(doc) >= 2:
        _check_sealed_baseline(root, path, doc)
    return doc


def _check_sealed_baseline(root: Path, path: Path, doc: dict[str, Any]) -> None:
    """The seal of a version-2 baseline and its agreement with the pinned run."""
    if baseline_sha256(doc) != doc[BASELINE_HASH_KEY]:
        raise InputError(Problem(str(path), "baseline content does not match its "
                                 f"baseline_sha256: it was edited by hand; {_REPIN}",
                                 key=BASELINE_HASH_KEY))
    folder = root / doc["spec_name"] / "runs" / doc["run_id"]
    if not (folder / "run.json").is_file():
        raise InputError(Problem(str(path), f"the pinned run {doc['run_id']} is no longer "
                                 f"stored ({folder} is missing); restore the run from version "
                                 "control or pin another run", key="run_id"))
    try:
        record = read_run(folder)
    except InputError as exc:
        raise InputError([*exc.problems, Problem(str(path), "the pinned run does not pass "
                                                 "its own checks", key="run_id")]) from None
    if record.get(RECORD_HASH_KEY) != doc[RECORD_HASH_KEY]:
        raise InputError(Problem(str(path), f"the pinned run {doc['run_id']} is not the run "
                                 "that was pinned (its record_sha256 differs); "
                                 f"{_REPIN}", key=RECORD_HASH_KEY))
    expected = baseline_from_record(record, doc["pinned_utc"])
    stored = {k: v for k, v in doc.items() if k not in (BASELINE_HASH_KEY, SIGNATURE_KEY)}
    if dump_json(expected) != dump_json(stored):
        keys = sorted(k for k in expected.keys() | stored.keys()
                      if dump_json(expected.get(k)) != dump_json(stored.get(k)))
        raise InputError(Problem(str(path), "the baseline does not agree with its pinned run "
                                 f"(differs in {', '.join(keys)}): it was edited; {_REPIN}",
                                 key=keys[0]))


def write_baseline(root: Path, record: dict[str, Any], pinned_utc: str,
                   signer: Signer | None = None,
                   ) -> tuple[dict[str, Any], dict[str, Any] | None, Path]:
    """Make ``record`` the baseline of its spec (atomically, sealed, and signed by
    ``signer``, default the key ``$DAGMILL_SIGNING_KEY`` names, if any); return the new
    baseline, the one it replaced (None if none; an unreadable old one is replaced too)
    and the path."""
    from runner.record import check_baseline

    if RECORD_HASH_KEY not in record:
        raise InputError(Problem(record.get("spec_path") or record["spec_name"],
                                 f"run {record.get('run_id')} has no record_sha256 (a legacy "
                                 "record, written before records were sealed): re-run the "
                                 "spec and pin the new run", key="run"))
    if signer is None:
        signer = signer_from_environment()
    try:
        old = read_baseline(root, record["spec_name"])
    except InputError:
        old = None
    new = seal_baseline(baseline_from_record(record, pinned_utc), signer)
    _valid(check_baseline, new, "baseline")
    path = baseline_path(root, record["spec_name"])
    atomic_write_text(path, dump_json(new))
    return new, old, path


# --------------------------------------------------------------------------- check outcomes

CHECK_FILE = "check.json"
CHECK_HASH_KEY = "check_sha256"


def check_sha256(doc: dict[str, Any]) -> str:
    """The sha256 of a check outcome without ``check_sha256`` and ``signature``."""
    return sha256_text(dump_json({k: v for k, v in doc.items()
                                  if k not in (CHECK_HASH_KEY, SIGNATURE_KEY)}))


def write_check_outcome(folder: Path, record: dict[str, Any], baseline: dict[str, Any] | None,
                        ok: bool, verdict: str, failures: Sequence[str], checked_utc: str,
                        signer: Signer | None = None) -> Path:
    """Write ``check.json`` (sealed, and signed with a signer: default the key
    ``$DAGMILL_SIGNING_KEY`` names) into the run folder of a run that ``check`` learned:
    which baseline it was held against and what the gate said. Returns its path."""
    from runner.record import FORMAT_VERSION, check_outcome

    if signer is None:
        signer = signer_from_environment()
    stored = read_run(folder)
    doc: dict[str, Any] = {
        "format_version": FORMAT_VERSION,
        "run_id": stored["run_id"],
        "run_record_sha256": stored[RECORD_HASH_KEY],
        "checked_utc": checked_utc,
        "baseline_run_id": None if baseline is None else baseline["run_id"],
        "baseline_sha256": None if baseline is None else baseline.get(BASELINE_HASH_KEY),
        "ok": ok,
        "verdict": verdict,
        "failures": list(failures),
    }
    doc[CHECK_HASH_KEY] = check_sha256(doc)
    if signer is not None:
        doc[SIGNATURE_KEY] = signer.sign(doc[CHECK_HASH_KEY])
    _valid(check_outcome, doc, "check outcome")
    path = folder / CHECK_FILE
    atomic_write_text(path, dump_json(doc))
    return path


def read_check_outcome(folder: Path) -> dict[str, Any] | None:
    """The run's ``check.json``, or None when the run was not learned by ``check``;
    refused (InputError naming the file) when it does not fit, was edited, or belongs to
    another run."""
    from runner.record import check_outcome

    path = folder / CHECK_FILE
    doc = _read_document(path, "check outcome")
    if doc is None:
        return None
    check_outcome(doc, str(path))
    if check_sha256(doc) != doc[CHECK_HASH_KEY]:
        raise InputError(Problem(str(path), "check outcome does not match its check_sha256: "
                                 "it was edited by hand; restore it from version control",
                                 key=CHECK_HASH_KEY))
    raw = raw_document(folder / "run.json")
    if raw is None or doc["run_record_sha256"] != raw.get(RECORD_HASH_KEY):
        raise InputError(Problem(str(path), "check outcome belongs to another run (its "
                                 "run_record_sha256 differs from run.json's); restore it "
                                 "from version control", key="run_record_sha256"))
    return doc


# --------------------------------------------------------------------------- variation summaries

VARIATIONS_FOLDER = "variations"
VARIATION_HASH_KEY = "summary_sha256"
SUMMARY_ID = re.compile(r"^\d{8}T\d{6}Z-[0-9a-f]{10}(-\d+)?$")


def variation_sha256(doc: dict[str, Any]) -> str:
    """The sha256 of a variation summary without ``summary_sha256`` and ``signature``."""
    return sha256_text(dump_json({k: v for k, v in doc.items()
                                  if k not in (VARIATION_HASH_KEY, SIGNATURE_KEY)}))


def write_variation(root: Path, doc: dict[str, Any], signer: Signer | None = None) -> Path:
    """Write a variation summary (sealed, signed with a signer: default the key
    ``$DAGMILL_SIGNING_KEY`` names) as ``<root>/<spec>/variations/<summary id>.json``;
    an id already taken gets ``-2``, ``-3``, ... (never overwritten). Sets
    ``summary_id`` and the seal in ``doc``; returns the path."""
    from runner.record import check_variation

    if signer is None:
        signer = signer_from_environment()
    folder = root / doc["spec_name"] / VARIATIONS_FOLDER
    folder.mkdir(parents=True, exist_ok=True)
    base, n = doc["summary_id"], 1
    while (folder / f"{doc['summary_id']}.json").exists():
        n += 1
        doc["summary_id"] = f"{base}-{n}"
    doc.pop(SIGNATURE_KEY, None)
    doc[VARIATION_HASH_KEY] = variation_sha256(doc)
    if signer is not None:
        doc[SIGNATURE_KEY] = signer.sign(doc[VARIATION_HASH_KEY])
    _valid(check_variation, doc, "variation summary")
    path = folder / f"{doc['summary_id']}.json"
    atomic_write_text(path, dump_json(doc))
    return path


def read_variation(path: Path) -> dict[str, Any]:
    """A variation summary, checked against its model and its seal (InputError naming
    the file when it does not fit or was edited)."""
    from runner.record import check_variation

    doc = _read_document(path, "variation summary", missing="variation summary is missing")
    check_variation(doc, str(path))
    if variation_sha256(doc) != doc[VARIATION_HASH_KEY]:
        raise InputError(Problem(str(path), "variation summary does not match its "
                                 "summary_sha256: it was edited by hand; restore it from "
                                 "version control", key=VARIATION_HASH_KEY))
    return doc


def list_variations(root: Path, spec_name: str) -> list[Path]:
    """A spec's variation summaries, oldest first: by the time in the id, then (summaries
    of the same second, whose ids otherwise sort by hash) by when the file was written."""
    folder = root / spec_name / VARIATIONS_FOLDER
    if not folder.is_dir():
        return []

    def written(path: Path) -> int:
        try:
            return path.stat().st_mtime_ns
        except OSError:
            return 0

    return sorted((p for p in folder.glob("*.json") if SUMMARY_ID.match(p.stem)),
                  key=lambda p: (p.stem[:16], written(p), p.stem))


def find_variation(root: Path, ref: str) -> Path | None:
    """The summary whose id is ``ref`` or starts with it (None when no summary matches;
    InputError when several do)."""
    if not ref or not root.is_dir():
        return None
    found = [p for spec in sorted(root.iterdir()) if spec.is_dir()
             for p in list_variations(root, spec.name) if p.stem.startswith(ref)]
    exact = [p for p in found if p.stem == ref]
    if exact:
        return exact[0]
    if len(found) > 1:
        raise InputError(Problem(str(root), f"{ref!r} matches {len(found)} variation "
                                 "summaries; give more of the id", key="RUN"))
    return found[0] if found else None


def variations_of_run(root: Path, spec_name: str, run_id: str) -> list[dict[str, Any]]:
    """The readable variation summaries of a spec that list ``run_id``, oldest first."""
    out = []
    for path in list_variations(root, spec_name):
        try:
            doc = read_variation(path)
        except InputError:
            continue
        if any(c["run_id"] == run_id for c in doc["combinations"]):
            out.append(doc)
    return out


def current_variation(root: Path, spec_name: str,
                      input_hashes: Sequence[str]) -> dict[str, Any] | None:
    """The spec's latest readable variation summary when it lists exactly these input
    hashes (the combinations a learn would make now) and all its runs are still stored;
    else None."""
    for path in reversed(list_variations(root, spec_name)):
        try:
            doc = read_variation(path)
        except InputError:
            continue
        if [c["input_sha256"] for c in doc["combinations"]] != list(input_hashes):
            return None
        folders = [root / spec_name / "runs" / c["run_id"] for c in doc["combinations"]]
        return doc if all((f / "run.json").is_file() for f in folders) else None
    return None
