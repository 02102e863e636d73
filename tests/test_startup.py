"""The command starts without loading what it does not need (issue 17: start-up time).

What a fresh process has imported is asked in a subprocess: this test session has long
imported pandas, networkx and the rest, so ``sys.modules`` here says nothing. No timing
is asserted (``python -m benchmarks --startup`` measures it); the guard is the set of
modules a start loads, which is what the time is made of.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import networkx as nx
from conftest import ROOT, CliCall, write_case
from hypothesis import given
from hypothesis import strategies as st

from runner.spec.rules import _acyclic

#: Libraries no start of the command loads: the heavy dependencies and the optional
#: extras (each costs from a tenth of a second to a second to import).
HEAVY = ("pandas", "networkx", "scipy", "jinja2", "numba", "pyarrow", "sklearn")
#: What parsing the arguments does not load either: numpy and pydantic (the spec and
#: record models), and the modules that build on them.
NOT_FOR_PARSING = (*HEAVY, "numpy", "pydantic", "runner.pipeline", "runner.store",
                   "runner.api")


def loaded_after(code: str, names: tuple[str, ...], cwd: Path | None = None) -> list[str]:
    """Which of ``names`` a fresh ``python -c CODE`` (this checkout first on the path)
    has imported once CODE has run."""
    probe = (f"{code}\nimport json, sys\n"
             f"print(json.dumps(sorted(set({list(names)!r}) & set(sys.modules))))")
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(
        p for p in (str(ROOT), os.environ.get("PYTHONPATH")) if p)}
    done = subprocess.run([sys.executable, "-c", probe], env=env, cwd=cwd,
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    loaded: list[str] = json.loads(done.stdout.splitlines()[-1])
    return loaded


def call_main(*args: str, exit_code: int = 0) -> str:
    """Code that runs ``dagmill ARGS`` in process, as the console script does, and
    asserts its exit code (argparse's ``--version`` and ``--help`` exit by SystemExit)."""
    return ("from runner.cli import main\n"
            f"try:\n    code = main({list(args)!r})\n"
            "except SystemExit as exc:\n    code = exc.code or 0\n"
            f"assert code == {exit_code}, code")


def test_the_command_module_imports_no_heavy_library() -> None:
    assert loaded_after("import runner.cli", NOT_FOR_PARSING) == []


def test_version_and_help_are_answered_without_the_pipeline() -> None:
    assert loaded_after(call_main("--version"), NOT_FOR_PARSING) == []
    assert loaded_after(call_main("run", "--help"), NOT_FOR_PARSING) == []


def test_a_bad_argument_is_refused_without_the_pipeline() -> None:
    assert loaded_after(call_main("run", "--seed", "minus-one", exit_code=2), NOT_FOR_PARSING) == []


def test_import_dagmill_loads_no_heavy_library() -> None:
    assert loaded_after("import dagmill", NOT_FOR_PARSING) == []


def test_validate_loads_the_reader_but_not_networkx_the_report_or_the_records(
        tmp_path: Path) -> None:
    """``validate`` reads the data (pandas, and the pyarrow pandas brings), but a spec with
    acyclic required edges needs no networkx, and no record is read or written."""
    spec = write_case(tmp_path)  # its spec requires a -> c
    assert "required:" in spec.read_text()
    unwanted = ("networkx", "scipy", "jinja2", "numba", "sklearn", "runner.record",
                "runner.present.report")
    assert loaded_after(call_main("validate", str(spec)), unwanted, cwd=tmp_path) == []


def test_reading_a_stored_run_loads_no_data_reader(tmp_path: Path, cli: CliCall) -> None:
    """``show`` and ``history`` read records: no pandas (the data reader), no networkx."""
    spec = write_case(tmp_path)
    learned = cli("run", str(spec), "--json", "--workers", "1", "--quiet", cwd=tmp_path)
    assert learned.returncode == 0, learned.stderr
    run_id = json.loads(learned.stdout)["runs"][0]["run_id"]
    unwanted = ("pandas", "networkx", "scipy", "jinja2", "runner.data", "runner.pipeline")
    for args in (("show", run_id), ("history", str(spec))):
        code = call_main(*args, "--results", str(tmp_path / "results"))
        assert loaded_after(code, unwanted, cwd=tmp_path) == [], args


NAMES = st.sampled_from(["a", "b", "c", "d", "e"])


@given(st.lists(st.tuples(NAMES, NAMES), max_size=8))
def test_the_cycle_precheck_agrees_with_networkx(edges: list[tuple[str, str]]) -> None:
    """The standard-library check that lets an acyclic spec skip networkx says acyclic
    exactly when networkx does (a self-loop is a cycle to both)."""
    graph: nx.DiGraph[str] = nx.DiGraph(edges)
    assert _acyclic(edges) == nx.is_directed_acyclic_graph(graph)
