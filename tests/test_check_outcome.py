"""What a check leaves behind for CI and for auditors: the JUnit file even on bad input,
the sealed ``check.json`` of each check, the checks in ``history``, and warnings on stderr
under ``--json``.

The JUnit files are read back with junitparser (a general-purpose JUnit XML reader from
PyPI, 5.0.3 pinned in constraints.txt), independently of how we write them."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
from conftest import CliCall
from junitparser import Error, Failure, JUnitXml

from runner.store import CHECK_FILE, check_sha256, dump_json

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def project(tmp_path_factory: pytest.TempPathFactory, cli_session: CliCall) -> Path:
    """The demo spec and data with one pinned run and one check of the same inputs."""
    root = tmp_path_factory.mktemp("checked")
    shutil.copytree(REPO / "specs", root / "specs")
    shutil.copytree(REPO / "datasets", root / "datasets")
    done = cli_session("run", "specs/kiln-line.yaml", "--json", "--quiet", cwd=root)
    assert done.returncode == 0, done.stderr
    assert cli_session("pin", json.loads(done.stdout)["runs"][0]["run_id"],
                       cwd=root).returncode == 0
    checked = cli_session("check", "specs/kiln-line.yaml", "--quiet", "--junit", "ok.xml",
                          cwd=root)
    assert checked.returncode == 0, checked.stdout + checked.stderr
    return root


def _runs(root: Path) -> list[Path]:
    return sorted((root / "results" / "kiln-line" / "runs").iterdir())


def test_a_check_stores_its_sealed_outcome_beside_its_run(project: Path) -> None:
    (checked,) = [f for f in _runs(project) if (f / CHECK_FILE).exists()]
    doc = json.loads((checked / CHECK_FILE).read_text())
    run = json.loads((checked / "run.json").read_text())
    assert doc["ok"] is True and doc["verdict"] == "identical"
    assert doc["run_record_sha256"] == run["record_sha256"]
    assert doc["baseline_run_id"] != checked.name and doc["failures"] == []
    assert check_sha256(doc) == doc["check_sha256"]


def test_history_shows_which_runs_were_checks(project: Path, cli: CliCall) -> None:
    done = cli("history", "specs/kiln-line.yaml", cwd=project)
    assert done.returncode == 0
    lines = done.stdout.splitlines()
    assert "by" in lines[0] and "data file" in lines[0]
    assert sum("check PASS" in line for line in lines) == 1
    assert sum(" run " in f" {line} " and "kiln-line.csv" in line for line in lines) == 1
    rows = json.loads(cli("history", "kiln-line", "--json", cwd=project).stdout)["runs"]
    assert [r["by"] for r in rows].count("check") == 1
    assert {r["data_file"] for r in rows} == {"kiln-line.csv"}


def test_an_edited_check_outcome_is_refused(project: Path, tmp_path: Path,
                                            cli: CliCall) -> None:
    copy = tmp_path / "p"
    shutil.copytree(project, copy)
    (checked,) = [f for f in _runs(copy) if (f / CHECK_FILE).exists()]
    doc = json.loads((checked / CHECK_FILE).read_text())
    doc["ok"] = False
    (checked / CHECK_FILE).write_text(dump_json(doc))
    done = cli("verify", "--json", cwd=copy)
    assert done.returncode == 1
    problems = [p for s in json.loads(done.stdout)["specs"] for p in s["problems"]]
    assert [p["file"].endswith(CHECK_FILE) for p in problems] == [True]
    assert "check_sha256" in problems[0]["problem"]
    shown = cli("history", "kiln-line", cwd=copy)
    assert shown.returncode == 0 and "check.json" in shown.stderr


def test_junit_of_a_passing_check_reads_back(project: Path) -> None:
    xml = JUnitXml.fromfile(str(project / "ok.xml"))
    (suite,) = list(xml)
    (case,) = list(suite)
    assert case.name == "kiln-line" and not case.result


def test_bad_input_still_writes_junit_with_an_error_case(project: Path, tmp_path: Path,
                                                         cli: CliCall) -> None:
    """A drop that lacks a column is bad input (exit 2); CI still gets a JUnit file whose
    case carries an ``error`` (not a ``failure``: the gate never ran) naming the problem."""
    drop = tmp_path / "drop.csv"
    lines = (project / "datasets" / "kiln-line.csv").read_text().splitlines()
    drop.write_text("\n".join(",".join(line.split(",")[1:]) for line in lines) + "\n")
    report = tmp_path / "reports" / "junit.xml"
    done = cli("check", "specs/kiln-line.yaml", "--data", str(drop), "--junit", str(report),
               "--quiet", cwd=project)
    assert done.returncode == 2 and "Traceback" not in done.stderr
    (suite,) = list(JUnitXml.fromfile(str(report)))
    assert suite.errors == 1 and suite.failures == 0
    (case,) = list(suite)
    (result,) = case.result
    assert isinstance(result, Error) and not isinstance(result, Failure)
    assert case.name == "kiln-line" and result.type == "bad-input"
    assert "drop.csv" in (result.text or "") and "drop.csv" in (result.message or "")


def test_warnings_reach_stderr_under_json(tmp_path: Path, cli: CliCall) -> None:
    shutil.copytree(REPO / "specs", tmp_path / "specs")
    shutil.copytree(REPO / "datasets", tmp_path / "datasets")
    spec = tmp_path / "specs" / "kiln-line.yaml"
    spec.write_text(spec.read_text().replace("search:", "search:\n  tabu_tenure: 5", 1))
    done = cli("run", str(spec), "--json", "--quiet", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    json.loads(done.stdout)  # stdout is one JSON document
    assert "warning" in done.stderr and "tabu_tenure" in done.stderr


def test_no_absolute_path_reaches_a_record(tmp_path: Path, cli: CliCall) -> None:
    """Paths in a record are relative to the project folder (the results folder's
    parent), whatever folder the command ran from and however the spec was named; a data
    file outside the project is stored by its name alone."""
    project = tmp_path / "project"
    shutil.copytree(REPO / "specs", project / "specs")
    shutil.copytree(REPO / "datasets", project / "datasets")
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    outside = tmp_path / "drop.csv"
    shutil.copy(REPO / "datasets" / "kiln-line.csv", outside)
    records = []
    for cwd, spec, extra in ((project, "specs/kiln-line.yaml", ()),
                             (elsewhere, str(project / "specs" / "kiln-line.yaml"), ()),
                             (elsewhere, str(project / "specs" / "kiln-line.yaml"),
                              ("--data", str(outside)))):
        done = cli("run", spec, "--results", str(project / "results"), "--json", "--quiet",
                   *extra, cwd=cwd)
        assert done.returncode == 0, done.stderr
        folder = Path(json.loads(done.stdout)["runs"][0]["folder"])
        records.append(json.loads((folder / "run.json").read_text()))
    assert [r["spec_path"] for r in records] == ["specs/kiln-line.yaml"] * 3
    assert [r["data"]["path"] for r in records] == ["datasets/kiln-line.csv"] * 2 + ["drop.csv"]
    for record in records:
        assert str(tmp_path) not in json.dumps(record)
