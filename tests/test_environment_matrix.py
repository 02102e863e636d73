"""The environment matrix: the same specs learned under other BLAS kernels, BLAS thread
counts, numpy SIMD dispatch and worker counts store the same bytes.

Each variant runs ``python -m runner run SPEC...`` once, in its own process and results
folder, over one spec per (data, score, search method); its ``run.json`` (without the
creation time, the timings, the record's own hash that covers them, the run id that
carries the time, and the numeric-environment block), ``model.json`` and ``trace.csv``
must equal the baseline variant's byte for byte.

The variables varied, and where they are documented:

* ``OPENBLAS_CORETYPE`` forces the kernel of an OpenBLAS built with ``DYNAMIC_ARCH``
  (numpy's wheels are), and ``OPENBLAS_NUM_THREADS`` its thread count: OpenBLAS's
  README, "Usage" (setting the number of threads with environment variables) and
  "Support for multiple targets in a single library" (``OPENBLAS_CORETYPE``).
  Only the kernels this CPU can execute are tried; when the machine already sets
  ``OPENBLAS_CORETYPE`` or ``OPENBLAS_L2_SIZE`` (as some do to keep OpenBLAS from a
  kernel that crashes on them), the kernel variants are skipped, not overridden.
* ``NPY_DISABLE_CPU_FEATURES`` switches off numpy's run-time dispatched SIMD features:
  numpy's documentation, "CPU build options", section "Runtime dispatch"
  (here: every dispatched feature numpy reports as found on this CPU).
* ``workers=2`` (``--workers 2``) learns the specs as units on a local process pool
  instead of one after another in the command's process (``--workers 1``, the baseline).

The whole matrix is printed by running this file: ``PYTHONPATH=. python
tests/test_environment_matrix.py [FOLDER]``. In pytest, each variant is a test whose
failure lists every differing (variant, spec, file) with the first differing line.
The unit tests of the numeric-environment block and of its diff message are at the end
(not slow).
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
import tempfile
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import yaml

import runner
from runner import environment as numeric
from runner.environment import environment, numeric_environment
from runner.pipeline import RunResult, learn, prepare
from runner.store import VOLATILE_KEYS, dump_json

PACKAGE_PARENT = Path(runner.__file__).resolve().parent.parent
SPECS = PACKAGE_PARENT / "specs"

# --------------------------------------------------------------------------- the specs

DISCRETE_SCORES = ("loglik", "aic", "bic", "bdeu", "k2")
GAUSSIAN_SCORES = ("gaussian-loglik", "gaussian-bic", "bge")
LOCAL_METHODS = ("hill-climb", "first-ascent", "stochastic", "tabu", "order")
#: Six columns of each data set, for exact search (2^n parent sets per variable).
KILN_SUBSET = ("supplier", "clay_lot", "moisture", "kiln_peak", "crack", "grade")
ALARM_SUBSET = ("CVP", "HISTORY", "HYPOVOLEMIA", "LVEDVOLUME", "LVFAILURE", "PCWP")
ALARM_ROWS = 5_000
#: Enough for every search to stop by itself; no time limit (a slower kernel must not
#: stop a search earlier).
MAX_STEPS = 200


@dataclass(frozen=True)
class Data:
    """One data set of the matrix: a spec to start from and the searches run on it (exact
    search only on six columns: it needs 2^n parent sets per variable)."""

    key: str
    base: dict[str, Any]
    gaussian: bool = False
    local: bool = True  # the local searches, GES and order
    exact: bool = False


def _subset(base: dict[str, Any], columns: Sequence[str], csv: Path, out: Path) -> dict:
    """``base`` on only ``columns`` of its data (a CSV written to ``out``), its
    constraints cut down to them."""
    import pandas as pd

    pd.read_csv(csv, dtype=str, keep_default_na=False)[list(columns)].to_csv(
        out, index=False, lineterminator="\n")
    keep = set(columns)
    spec = {**base, "dataset": {**base["dataset"], "path": str(out), "columns": {
        n: c for n, c in (base["dataset"].get("columns") or {}).items() if n in keep}}}
    spec["tiers"] = [t for t in ([v for v in tier if v in keep] for tier in base.get("tiers", []))
                     if t]
    for key in ("forbidden", "required"):
        spec[key] = [p for p in base.get(key, []) if set(p) <= keep]
    return spec


def _demo(name: str) -> dict[str, Any]:
    """A shipped spec as a plain dict with an absolute data path."""
    spec = yaml.safe_load((SPECS / name).read_text())
    path = (SPECS / spec["dataset"]["path"]).resolve()  # outside the matrix folder
    return {**spec, "dataset": {**spec["dataset"], "path": str(path), "allow_outside": True}}


def _alarm(folder: Path) -> dict[str, Any]:
    """ALARM (Beinlich et al. 1989) sampled with pgmpy's forward sampler (the model
    bundled with pgmpy 1.1.2, seed 11), columns sorted; the order search follows the
    network's topological order and parents are capped at 2."""
    import networkx
    from conftest import sampled_network

    net = sampled_network("alarm", ALARM_ROWS, 11)
    path = folder / "alarm.csv"
    net.frame.to_csv(path, index=False, lineterminator="\n")
    graph = networkx.DiGraph(net.model.edges())
    graph.add_nodes_from(net.names)
    order = list(networkx.lexicographical_topological_sort(graph))
    return {"name": "alarm", "dataset": {"path": str(path)}, "parent_cap": 2,
            "search": {"order": order}}


def data_sets(folder: Path) -> list[Data]:
    """The matrix's data: the kiln-line demo, an ALARM sample, the Gaussian demo."""
    kiln = _demo("kiln-line.yaml")
    kiln_csv = Path(kiln["dataset"]["path"])
    alarm = _alarm(folder)
    alarm_csv = Path(alarm["dataset"]["path"])
    alarm_small = _subset({k: v for k, v in alarm.items() if k != "search"}, ALARM_SUBSET,
                          alarm_csv, folder / "alarm-6.csv")
    return [
        Data("kiln", kiln),
        Data("kiln6", _subset(kiln, KILN_SUBSET, kiln_csv, folder / "kiln-6.csv"),
             local=False, exact=True),
        Data("alarm", alarm),
        Data("alarm6", alarm_small, local=False, exact=True),
        Data("gauss", _demo("kiln-gauss.yaml"), gaussian=True, exact=True),
    ]


def methods(data: Data, score: str) -> list[str]:
    """The search methods run on ``data`` under ``score``: GES needs a score-equivalent
    score (not k2)."""
    local = [*LOCAL_METHODS, *([] if score == "k2" else ["ges"])] if data.local else []
    return local + (["exact"] if data.exact else [])


def write_specs(folder: Path) -> list[Path]:
    """One plain spec (no ``extends``) per (data, score, method), in ``folder``."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for data in data_sets(folder):
        for score in GAUSSIAN_SCORES if data.gaussian else DISCRETE_SCORES:
            for method in methods(data, score):
                spec = {k: v for k, v in data.base.items() if k not in ("gate", "search")}
                search: dict[str, Any] = {
                    "method": method, "seed": 5,
                    "budget": {"max_steps": MAX_STEPS, "max_evaluations": None,
                               "max_seconds": None}}
                if method == "order" and "order" in data.base.get("search", {}):
                    search["order"] = data.base["search"]["order"]
                if method == "tabu":
                    search["patience"] = 5
                if method == "first-ascent":
                    search["sample"] = 0.5
                name = f"{data.key}-{score}-{method}"
                spec.update(name=name, score={"name": score}, search=search)
                path = folder / f"{name}.yaml"
                path.write_text(yaml.safe_dump(spec, sort_keys=False))
                paths.append(path)
    return paths


# --------------------------------------------------------------------------- the variants


def _features() -> tuple[dict[str, bool], list[str]]:
    """numpy's CPU features (name -> found) and its dispatch list."""
    try:
        from numpy._core import _multiarray_umath as umath
    except ImportError:  # numpy < 2
        from numpy.core import _multiarray_umath as umath  # type: ignore[no-redef]
    return dict(umath.__cpu_features__), list(umath.__cpu_dispatch__)


def _libraries(blas: Any) -> list[dict[str, Any]]:
    """The library list of a numeric block's ``blas`` (a reason string lists none)."""
    return blas if isinstance(blas, list) else []


#: What an OpenBLAS kernel needs of the CPU, in numpy's feature names.
CORETYPE_NEEDS = {
    "Prescott": ("SSE3",),
    "Nehalem": ("SSSE3", "SSE41", "SSE42", "POPCNT"),
    "Sandybridge": ("AVX",),
    "Haswell": ("AVX2", "FMA3"),
}


@dataclass(frozen=True)
class Variant:
    name: str
    env: dict[str, str] = field(default_factory=dict)
    workers: int = 1
    skip: str | None = None  # why this machine cannot run it


def _coretype_skip(coretype: str) -> str | None:
    found, _ = _features()
    if any(os.environ.get(v) for v in ("OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE")):
        return "this machine sets OPENBLAS_CORETYPE or OPENBLAS_L2_SIZE itself"
    blas = numeric_environment()["blas"]
    if not any(lib.get("internal_api") == "openblas" for lib in _libraries(blas)):
        return "numpy's BLAS is not OpenBLAS"
    missing = [f for f in CORETYPE_NEEDS[coretype] if not found.get(f)]
    return f"this CPU lacks {', '.join(missing)}" if missing else None


def variants() -> list[Variant]:
    """The baseline first, then every variant (each with a reason when it is skipped)."""
    out = [Variant("baseline")]
    out += [Variant(f"OPENBLAS_CORETYPE={c}", {"OPENBLAS_CORETYPE": c}, skip=_coretype_skip(c))
            for c in CORETYPE_NEEDS]
    out += [Variant(f"OPENBLAS_NUM_THREADS={n}", {"OPENBLAS_NUM_THREADS": str(n)})
            for n in (1, 2, 4)]
    found, dispatch = _features()
    off = [f for f in dispatch if found.get(f)]
    out.append(Variant("NPY_DISABLE_CPU_FEATURES=" + ",".join(off),
                       {"NPY_DISABLE_CPU_FEATURES": " ".join(off)},
                       skip=None if off else "numpy dispatches no feature on this CPU"))
    out.append(Variant("workers=2", workers=2))
    return out


# --------------------------------------------------------------------------- running


VOLATILE = VOLATILE_KEYS


def comparable_record(text: str) -> str:
    """run.json's text without the volatile keys and the numeric-environment block."""
    record = json.loads(text)
    record = {k: v for k, v in record.items() if k not in VOLATILE}
    env = dict(record.get("environment") or {})
    env.pop("numeric", None)
    record["environment"] = env
    return dump_json(record)


@dataclass
class Outcome:
    """What one variant stored: per spec name, per file, the compared text; and the
    BLAS kernel its records say was used."""

    variant: Variant
    files: dict[str, dict[str, str]]
    kernels: set[str]
    seconds: float


def run_variant(variant: Variant, specs: Sequence[Path], folder: Path) -> Outcome:
    """Learn every spec under the variant in a fresh results folder; read what it stored."""
    results = folder / "results" / re.sub(r"[^A-Za-z0-9_]+", "-", variant.name)
    env = {k: v for k, v in os.environ.items() if k not in ("DAGMILL_RESULTS", "DAGMILL_ENGINE")}
    env["PYTHONPATH"] = os.pathsep.join(
        [str(PACKAGE_PARENT)] + ([env["PYTHONPATH"]] if env.get("PYTHONPATH") else []))
    env.update(variant.env)
    started = time.perf_counter()
    # The timeout is a guard against a hang, not a speed measurement.
    done = subprocess.run(
        [sys.executable, "-m", "runner", "run", *map(str, specs), "--results", str(results),
         "--workers", str(variant.workers), "--quiet", "--json"],
        env=env, capture_output=True, text=True, timeout=900, cwd=folder)
    seconds = time.perf_counter() - started
    assert done.returncode == 0, f"{variant.name}: exit {done.returncode}\n{done.stderr}"
    files: dict[str, dict[str, str]] = {}
    kernels: set[str] = set()
    for run in json.loads(done.stdout)["runs"]:
        run_folder = Path(run["folder"])
        text = (run_folder / "run.json").read_text(encoding="utf-8")
        blas = json.loads(text)["environment"]["numeric"]["blas"]
        kernels |= {str(lib.get("architecture")) for lib in _libraries(blas)
                    if lib.get("user_api") == "blas"}
        files[run_folder.parent.parent.name] = {
            "run.json": comparable_record(text),
            "model.json": (run_folder / "model.json").read_text(encoding="utf-8"),
            "trace.csv": (run_folder / "trace.csv").read_text(encoding="utf-8"),
        }
    return Outcome(variant, files, kernels, seconds)


ARTIFACTS = ("run.json", "model.json", "trace.csv")


def _first_difference(a: str, b: str) -> str:
    la, lb = a.splitlines(), b.splitlines()
    for i, (x, y) in enumerate(zip(la, lb, strict=False)):
        if x != y:
            return f"line {i + 1}: {x.strip()[:70]!r} != {y.strip()[:70]!r}"
    return f"{len(la)} lines != {len(lb)} lines"


def differences(base: Outcome, other: Outcome) -> list[tuple[str, str, str, str]]:
    """Every (variant, spec, file, first differing line) where ``other`` differs."""
    out = []
    for spec in sorted(set(base.files) | set(other.files)):
        a, b = base.files.get(spec), other.files.get(spec)
        for name in ARTIFACTS:
            if a is None or b is None:
                out.append((other.variant.name, spec, name, "not stored by one of them"))
            elif a[name] != b[name]:
                out.append((other.variant.name, spec, name, _first_difference(a[name],
                                                                             b[name])))
    return out


def difference_lines(found: Sequence[tuple[str, str, str, str]]) -> list[str]:
    return [f"{variant} | {spec} | {name} | {detail}" for variant, spec, name, detail in found]


def matrix_lines(base: Outcome, others: Sequence[Outcome | Variant]) -> list[str]:
    """The matrix: one row per variant, per artifact the number of specs whose file is
    identical to the baseline's, the kernel the records name, and the seconds taken."""
    from runner.present.text import render_table

    total = len(base.files)
    rows = [[base.variant.name, *(f"{total}/{total}" for _ in ARTIFACTS),
             ",".join(sorted(base.kernels)), f"{base.seconds:.1f}"]]
    for item in others:
        if isinstance(item, Variant):
            rows.append([item.name, *("skipped" for _ in ARTIFACTS), item.skip or "", ""])
            continue
        found = differences(base, item)
        rows.append([item.variant.name,
                     *(f"{total - sum(1 for d in found if d[2] == name)}/{total}"
                       for name in ARTIFACTS),
                     ",".join(sorted(item.kernels)), f"{item.seconds:.1f}"])
    return [render_table(["variant", *(f"{a} identical" for a in ARTIFACTS), "BLAS kernel",
                          "seconds"], rows)]


# --------------------------------------------------------------------------- the tests

VARIANTS = variants()


@pytest.fixture(scope="module")
def matrix_specs(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, list[Path]]:
    folder = tmp_path_factory.mktemp("matrix")
    return folder, write_specs(folder / "specs")


@pytest.fixture(scope="module")
def baseline(matrix_specs: tuple[Path, list[Path]]) -> Outcome:
    folder, specs = matrix_specs
    return run_variant(VARIANTS[0], specs, folder)


@pytest.mark.slow
@pytest.mark.parametrize("variant", VARIANTS[1:], ids=[v.name for v in VARIANTS[1:]])
def test_variant_stores_the_baseline_bytes(variant: Variant, baseline: Outcome,
                                           matrix_specs: tuple[Path, list[Path]]) -> None:
    if variant.skip:
        pytest.skip(variant.skip)
    folder, specs = matrix_specs
    outcome = run_variant(variant, specs, folder)
    assert set(outcome.files) == set(baseline.files) and len(baseline.files) == len(specs)
    found = differences(baseline, outcome)
    if found:
        pytest.fail(
            f"{len(found)} of {len(specs) * len(ARTIFACTS)} files differ from the baseline "
            f"under {variant.name} (BLAS kernel {','.join(sorted(outcome.kernels))}); "
            "variant | spec | file | first difference:\n" + "\n".join(difference_lines(found)),
            pytrace=False)


@pytest.mark.slow
def test_matrix_covers_every_score_and_method(matrix_specs: tuple[Path, list[Path]]) -> None:
    _, specs = matrix_specs
    names = {p.stem for p in specs}
    for data, scores in (("kiln", DISCRETE_SCORES), ("alarm", DISCRETE_SCORES),
                         ("gauss", GAUSSIAN_SCORES)):
        for score in scores:
            expected = {*LOCAL_METHODS, "exact"} | ({"ges"} if score != "k2" else set())
            got = {n.removeprefix(f"{data}-{score}-").removeprefix(f"{data}6-{score}-")
                   for n in names if n.startswith((f"{data}-{score}-", f"{data}6-{score}-"))}
            assert got == expected, (data, score)


# --------------------------------------------------------------------------- unit tests


def test_numeric_block_is_in_the_record(tmp_path: Path) -> None:
    from conftest import write_case

    record, _ = learn(prepare(write_case(tmp_path, rows=300)))
    numeric = record["environment"]["numeric"]
    assert set(numeric) == {"cpu", "numpy_simd", "blas", "variables"}
    assert set(numeric["cpu"]) == {"source", "machine", "model", "signature", "flags",
                                   "flags_sha256"}
    assert set(numeric["numpy_simd"]) == {"found", "baseline", "dispatch"}
    assert {"OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
            "OPENBLAS_CORETYPE", "NPY_DISABLE_CPU_FEATURES"} <= set(numeric["variables"])
    if numeric["cpu"]["flags"] is not None:  # sorted words, one line in run.json
        words = numeric["cpu"]["flags"].split()
        assert words == sorted(set(words)) and len(numeric["cpu"]["flags_sha256"]) == 64
    found, dispatch = _features()
    assert numeric["numpy_simd"]["found"].split() == sorted(k for k, v in found.items() if v)
    assert numeric["numpy_simd"]["dispatch"].split() == sorted(dispatch)
    assert isinstance(numeric["blas"], list) and numeric["blas"]  # numpy loads a BLAS
    assert all({"internal_api", "version", "architecture", "num_threads"} <= set(lib)
               for lib in numeric["blas"])
    other = numeric_environment({"OPENBLAS_CORETYPE": "Nehalem", "OMP_NUM_THREADS": "3"})
    assert other["variables"]["OPENBLAS_CORETYPE"] == "Nehalem"
    assert other["variables"]["OMP_NUM_THREADS"] == "3"
    assert other["variables"]["MKL_NUM_THREADS"] is None


def test_the_numeric_environment_does_not_enter_the_input_hash(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from conftest import write_case

    prepared = prepare(write_case(tmp_path, rows=300))
    plain, _ = learn(prepared)
    # A change after numpy loaded changes nothing and is not recorded ...
    monkeypatch.setenv("OPENBLAS_CORETYPE", "Nehalem")
    again, _ = learn(prepared)
    assert again["environment"] == plain["environment"]
    # ... the variables the process started with are.
    monkeypatch.setattr(numeric, "VARIABLES_AT_LOAD", {"OPENBLAS_CORETYPE": "Nehalem",
                                                         "OMP_NUM_THREADS": "3"})
    changed, _ = learn(prepared)
    assert changed["environment"]["numeric"] != plain["environment"]["numeric"]
    assert changed["environment"]["numeric"]["variables"]["OPENBLAS_CORETYPE"] == "Nehalem"
    for key in ("input_sha256", "spec_sha256", "code_version", "graph_sha256"):
        assert changed[key] == plain[key], key
    assert changed["score"] == plain["score"]
    result = RunResult("r", tmp_path, changed, plain, [])
    assert result.twin_identical and result.twin_differences == []


def _record(numeric: Mapping[str, Any] | None, value: float = -10.0,
            **versions: str) -> dict[str, Any]:
    env: dict[str, Any] = {"python": "3.11.7", "numpy": "2.4.6", "platform": "Linux-x86_64",
                           **versions}
    if numeric is not None:
        env["numeric"] = numeric
    return {"run_id": "r", "spec_name": "s", "input_sha256": "0" * 64, "edges": [],
            "graph_sha256": "g", "score": {"name": "bic", "value": value}, "environment": env}


def _numeric(kernel: str = "Haswell", threads: int = 2, coretype: str | None = None,
             flags: str = "avx avx2 fma sse sse2", found: str = "AVX AVX2 FMA3 SSE SSE2"
             ) -> dict[str, Any]:
    return {
        "cpu": {"source": "/proc/cpuinfo", "machine": "x86_64", "model": "Xeon",
                "signature": "GenuineIntel family 6 model 85 stepping 4", "flags": flags,
                "flags_sha256": "h"},
        "numpy_simd": {"found": found, "baseline": "SSE SSE2", "dispatch": "AVX2 AVX512F"},
        "blas": [{"user_api": "blas", "internal_api": "openblas", "prefix": "libopenblas",
                  "version": "0.3.31", "architecture": kernel, "threading_layer": "pthreads",
                  "num_threads": threads}],
        "variables": {"OPENBLAS_CORETYPE": coretype, "OMP_NUM_THREADS": None},
    }


def test_diff_message_names_the_entries_that_differ() -> None:
    a, b = _record(_numeric()), _record(_numeric(kernel="Nehalem", coretype="Nehalem"), -10.5)
    env = numeric.environment_changes(a, b)
    assert env["same"] is False and env["recorded"] == {"a": True, "b": True}
    assert [(c["entry"], c["a"], c["b"]) for c in env["changes"]] == [
        ("BLAS kernel", "Haswell", "Nehalem"), ("OPENBLAS_CORETYPE", None, "Nehalem")]
    assert numeric.environment_sentence(env, results_differ=True) == (
        "numeric environment differs: BLAS kernel Haswell -> Nehalem; "
        "OPENBLAS_CORETYPE unset -> Nehalem")
    # Word lists name what was added and removed; versions and threads are entries too.
    c = _record(_numeric(threads=1, flags="avx sse sse2 sse4_2", found="AVX SSE SSE2"),
                numpy="2.3.0")
    texts = [x["text"] for x in numeric.environment_changes(a, c)["changes"]]
    assert texts == ["numpy 2.4.6 -> 2.3.0", "CPU flags +sse4_2 -avx2 -fma",
                     "numpy SIMD features -AVX2 -FMA3", "BLAS threads 2 -> 1"]


def test_diff_message_when_the_environment_is_the_same_or_not_recorded() -> None:
    a, b = _record(_numeric()), _record(_numeric(), -10.5)
    env = numeric.environment_changes(a, b)
    assert env == {"recorded": {"a": True, "b": True}, "same": True, "changes": []}
    assert numeric.environment_sentence(env, results_differ=True) == (
        "numeric environment is the same in both runs: the difference is not explained by "
        "the environment")
    # A record from before the block: read and compared without error, said so.
    old = _record(None)
    env = numeric.environment_changes(old, b)
    assert env["same"] is None and env["recorded"] == {"a": False, "b": True}
    assert numeric.environment_sentence(env) == (
        "numeric environment not recorded in run A (a record from before it was kept)")
    bare = {k: v for k, v in old.items() if k != "environment"}
    assert numeric.environment_changes(bare, bare)["same"] is None


def test_not_reproduced_message_and_compare_name_the_environment(tmp_path: Path) -> None:
    from runner.cli import _not_reproduced

    twin = {**_record(_numeric()), "run_id": "20260101T000000Z-0000000000"}
    new = {**_record(_numeric(kernel="Nehalem", coretype="Nehalem"), -10.5),
           "run_id": "20260101T000001Z-0000000000"}
    text = _not_reproduced(RunResult(new["run_id"], tmp_path, new, twin, []), tmp_path)
    assert text.splitlines() == [
        "NOT REPRODUCED: s: run 20260101T000001Z-0000000000 has the same inputs as run "
        "20260101T000000Z-0000000000 but a different score (the new record is stored)",
        "  numeric environment differs: BLAS kernel Haswell -> Nehalem; OPENBLAS_CORETYPE "
        "unset -> Nehalem",
        f"  see: dagmill compare 20260101T000000Z-0000000000 20260101T000001Z-0000000000 "
        f"--results {tmp_path}"]
    # A twin from before the block: named by its run id.
    old_twin = {**twin, "environment": {"python": "3.11.7"}}
    text = _not_reproduced(RunResult(new["run_id"], tmp_path, new, old_twin, []), tmp_path)
    assert text.splitlines()[1] == (
        "  numeric environment not recorded in run 20260101T000000Z-0000000000 (a record "
        "from before it was kept)")


def test_compare_of_stored_runs_with_and_without_the_block(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    from conftest import write_case

    from runner.cli import main
    from runner.store import read_run, write_run

    record, trace = learn(prepare(write_case(tmp_path, rows=300)))
    model = record.pop("_model")
    root = tmp_path / "r"
    # A record from before the block, then two with it (the last under another kernel).
    old = {**record, "run_id": "20260101T000000Z-0000000000",
           "environment": {k: v for k, v in record["environment"].items() if k != "numeric"}}
    _, folder = write_run(root, old, trace, model)
    assert "numeric" not in read_run(folder)["environment"]
    new = {**record, "run_id": "20260101T000001Z-0000000000"}
    write_run(root, new, trace, model)
    monkeypatch.setattr(numeric, "VARIABLES_AT_LOAD", {"OPENBLAS_CORETYPE": "Nehalem"})
    write_run(root, {**new, "run_id": "20260101T000002Z-0000000000",
                     "environment": environment()}, trace, model)
    for a, b, same in (("20260101T000000Z", "20260101T000001Z", None),
                       ("20260101T000001Z", "20260101T000002Z", False)):
        assert main(["compare", a, b, "--results", str(root), "--json"]) == 0
        env = json.loads(capsys.readouterr().out)["environment"]
        assert env["same"] is same
    assert env["changes"][-1]["text"] == "OPENBLAS_CORETYPE unset -> Nehalem"
    assert main(["compare", "20260101T000000Z", "20260101T000001Z", "--results",
                 str(root)]) == 0
    assert capsys.readouterr().out.splitlines()[-1] == (
        "numeric environment not recorded in run A (a record from before it was kept)")
    assert main(["compare", "20260101T000001Z", "20260101T000001Z", "--results",
                 str(root)]) == 0
    assert capsys.readouterr().out.splitlines()[-1] == (
        "numeric environment is the same in both runs")


# --------------------------------------------------------------------------- the helper


def print_matrix(folder: Path) -> int:
    """Run every variant into ``folder`` and print the matrix and every difference."""
    specs = write_specs(folder / "specs")
    base = run_variant(VARIANTS[0], specs, folder)
    others: list[Outcome | Variant] = []
    found: list[tuple[str, str, str, str]] = []
    for variant in VARIANTS[1:]:
        if variant.skip:
            others.append(variant)
            continue
        outcome = run_variant(variant, specs, folder)
        others.append(outcome)
        found += differences(base, outcome)
    print(f"{len(specs)} specs; numpy {np.__version__}")
    print("\n".join(matrix_lines(base, others)))
    print("\n".join(difference_lines(found)))
    return 1 if found else 0


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).resolve().parent))  # conftest, test_cli
    target = Path(sys.argv[1]) if len(sys.argv) > 1 else Path(tempfile.mkdtemp())
    raise SystemExit(print_matrix(target))
