"""Faults of the environment end in one line and exit 3, before any learning where they
can be found then, with nothing half-written left; bad arguments are exit 2.

Faults a test cannot cause for real here (the suite runs as root, so file modes do not
stop writes; no tmpfs can be mounted) are injected as the OSError the operating system
raises (errno ENOSPC, EACCES), at the call that meets it."""

from __future__ import annotations

import errno
import os
import shutil
from pathlib import Path
from typing import Any

import pytest
from conftest import CliCall

from runner import store

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture
def project(tmp_path: Path) -> Path:
    shutil.copytree(REPO / "specs", tmp_path / "specs")
    shutil.copytree(REPO / "datasets", tmp_path / "datasets")
    return tmp_path


def _no_learning(monkeypatch: pytest.MonkeyPatch) -> None:
    """Fail the test if a spec gets learned."""
    import runner.batch

    def refuse(*_: Any, **__: Any) -> Any:
        raise AssertionError("learned although the fault could be seen before")

    monkeypatch.setattr(runner.batch, "learn", refuse)


def _stored(project: Path) -> list[Path]:
    return sorted(p for p in (project / "results").rglob("*") if p.is_file()) \
        if (project / "results").exists() else []


def _one_error_line(stderr: str) -> str:
    lines = [line for line in stderr.splitlines() if line.startswith("error:")]
    assert len(lines) == 1 and "Traceback" not in stderr, stderr
    return lines[0]


def test_an_unwritable_results_folder_stops_before_learning(
        project: Path, cli: CliCall, monkeypatch: pytest.MonkeyPatch) -> None:
    (project / "results").mkdir()
    monkeypatch.setattr(os, "access", lambda *_a, **_k: False)  # as a non-owner sees it
    _no_learning(monkeypatch)
    done = cli("run", "specs/kiln-line.yaml", "--quiet", cwd=project)
    assert done.returncode == 3
    line = _one_error_line(done.stderr)
    assert "results: Permission denied: no permission" in line
    assert _stored(project) == []


def test_a_read_only_runs_folder_is_found_by_a_probe_file(
        project: Path, cli: CliCall, monkeypatch: pytest.MonkeyPatch) -> None:
    runs = project / "results" / "kiln-line" / "runs"
    runs.mkdir(parents=True)

    def read_only(*_: Any, **kwargs: Any) -> Any:
        raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(kwargs.get("dir")))

    monkeypatch.setattr(store.tempfile, "mkstemp", read_only)
    _no_learning(monkeypatch)
    done = cli("check", "specs/kiln-line.yaml", "--quiet", cwd=project)
    assert done.returncode == 3
    assert "Read-only file system: the file system is read-only" in _one_error_line(done.stderr)


def test_a_full_disk_at_the_write_leaves_nothing_half_written(
        project: Path, cli: CliCall, monkeypatch: pytest.MonkeyPatch) -> None:
    real = Path.write_text

    def full(self: Path, *args: Any, **kwargs: Any) -> int:
        if self.parent.name.startswith(".incoming-") and self.name == "trace.csv":
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(self))
        return real(self, *args, **kwargs)

    monkeypatch.setattr(Path, "write_text", full)
    done = cli("run", "specs/kiln-line.yaml", "--quiet", cwd=project)
    assert done.returncode == 3
    assert "No space left on device: the disk is full" in _one_error_line(done.stderr)
    runs = project / "results" / "kiln-line" / "runs"
    assert list(runs.iterdir()) == []  # no run, no staging folder


def test_debug_shows_the_traceback_of_a_fault(project: Path, cli: CliCall,
                                              monkeypatch: pytest.MonkeyPatch) -> None:
    import runner.batch

    def no_memory(*_: Any, **__: Any) -> Any:
        raise MemoryError

    monkeypatch.setattr(runner.batch, "learn", no_memory)
    done = cli("run", "specs/kiln-line.yaml", "--quiet", cwd=project)
    assert done.returncode == 3 and "out of memory" in _one_error_line(done.stderr)
    debug = cli("run", "specs/kiln-line.yaml", "--quiet", "--debug", cwd=project)
    assert debug.returncode == 3 and "Traceback" in debug.stderr and "MemoryError" in debug.stderr


def test_a_spec_name_too_long_for_a_folder_is_bad_input_at_validate(project: Path,
                                                                     cli: CliCall) -> None:
    spec = project / "specs" / "long.yaml"
    text = (project / "specs" / "kiln-line.yaml").read_text()
    spec.write_text(text.replace("name: kiln-line", "name: " + "a" * 270))
    for command in ("validate", "run"):
        done = cli(command, str(spec), cwd=project)
        assert done.returncode == 2
        said = done.stdout + done.stderr  # validate reports on stdout, run on stderr
        assert "long.yaml:" in said and "name: must have at most 100 characters" in said
    assert _stored(project) == []


@pytest.mark.parametrize(("args", "words"), [
    (["--seed", "-1"], "--seed: must be from 0 to 2**63-1"),
    (["--seed", "x"], "--seed: not an integer"),
    (["--seed", str(2**63)], "--seed: must be from 0 to 2**63-1"),
])
def test_seeds_out_of_range_are_bad_arguments(project: Path, cli: CliCall, args: list[str],
                                              words: str) -> None:
    done = cli("run", "specs/kiln-line.yaml", *args, cwd=project)
    assert done.returncode == 2 and words in done.stderr and "Traceback" not in done.stderr


def test_workers_above_the_cores_are_capped_with_a_warning(project: Path, cli: CliCall) -> None:
    done = cli("run", "specs/kiln-line.yaml", "--workers", "64", "--quiet", cwd=project)
    assert done.returncode == 0
    assert "warning: --workers 64 is more than the" in done.stderr


def test_stale_leftovers_are_cleaned_recent_ones_kept(project: Path, cli: CliCall) -> None:
    runs = project / "results" / "kiln-line" / "runs"
    stale, fresh = runs / ".incoming-old", runs / ".incoming-new"
    for folder in (stale, fresh):
        folder.mkdir(parents=True)
        (folder / "run.json").write_text("{")
    tmp = project / "results" / "kiln-line" / ".baseline.json.x.tmp"
    tmp.write_text("{")
    hours_ago = os.path.getmtime(fresh) - 2 * store.STALE_SECONDS
    for path in (stale, tmp):
        os.utime(path, (hours_ago, hours_ago))
    done = cli("run", "specs/kiln-line.yaml", "--quiet", cwd=project)
    assert done.returncode == 0
    assert not stale.exists() and not tmp.exists() and fresh.exists()
    assert (project / "results" / ".gitignore").read_text() == store.GITIGNORE


def test_run_folders_take_the_umask_mode(project: Path, cli: CliCall) -> None:
    old = os.umask(0o022)
    try:
        assert cli("run", "specs/kiln-line.yaml", "--quiet", cwd=project).returncode == 0
    finally:
        os.umask(old)
    (run,) = (project / "results" / "kiln-line" / "runs").iterdir()
    assert run.stat().st_mode & 0o777 == 0o755
    assert (run / "run.json").stat().st_mode & 0o777 == 0o644


def _children(pid: int) -> list[int]:
    """The live processes whose parent is ``pid`` (from /proc)."""
    out = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
        except OSError:
            continue
        fields = stat[stat.rindex(")") + 2:].split()
        if int(fields[1]) == pid and fields[0] != "Z":
            out.append(int(entry.name))
    return out


def _alive(pid: int) -> bool:
    try:
        state = (Path("/proc") / str(pid) / "stat").read_text()
    except OSError:
        return False
    return state[state.rindex(")") + 2:].split()[0] != "Z"


@pytest.mark.slow
@pytest.mark.skipif(not Path("/proc").is_dir(), reason="reads the process table in /proc")
@pytest.mark.parametrize("engine", ["local", "dask-local"])
def test_killing_a_run_kills_its_workers(project: Path, engine: str) -> None:
    """kill -9 of a bootstrap run on two workers: its worker processes end too (checked in
    the process table), nothing of it is stored, and every stored run still reads."""
    import subprocess
    import sys
    import time

    spec = project / "specs" / "kiln-line.yaml"
    spec.write_text(spec.read_text() + "bootstrap: {replicates: 400, seed: 1}\n")
    env = {k: v for k, v in os.environ.items() if not k.startswith("DAGMILL_")}
    env["PYTHONPATH"] = str(REPO)
    proc = subprocess.Popen([sys.executable, "-m", "runner", "run", str(spec), "--workers",
                             "2", "--engine", engine, "--quiet"], cwd=project, env=env,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    workers: list[int] = []
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and proc.poll() is None:
        workers = _children(proc.pid)
        if len(workers) >= 2:
            break
        time.sleep(0.2)
    assert len(workers) >= 2, "the run did not start its workers"
    time.sleep(1.0)
    workers = sorted(set(workers) | set(_children(proc.pid)))
    proc.kill()
    proc.wait()
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline and any(_alive(w) for w in workers):
        time.sleep(0.2)
    assert not any(_alive(w) for w in workers), "workers outlived the killed run"
    for run in (project / "results").glob("*/runs/*") if (project / "results").exists() else []:
        store.read_run(run)
