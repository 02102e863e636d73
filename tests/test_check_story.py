"""The whole CI story of pinning and gating, through the command line's ``main``.

Everything happens in a temporary folder holding a copy of the demo scenario (the spec
and the committed kiln-line data); no git is involved.
"""

from __future__ import annotations

import json
import shutil
import xml.etree.ElementTree as ET
from pathlib import Path

import pandas as pd
import pytest
from conftest import CliCall, CliResult

from runner.demo.kiln_line import sample

REPO = Path(__file__).resolve().parents[1]
#: A drop sampled from the same generator with another seed; on it hill climbing adds the
#: edge dwell -> cooling and the per-row BIC rises (found by trying seeds 1-8).
DROP_SEED = 7


def no_traceback(done: CliResult) -> None:
    assert "Traceback" not in done.stderr and "Traceback" not in done.stdout


@pytest.fixture(scope="module")
def scenario(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A copy of specs/ and datasets/, a new data drop, and a drop with a renamed state."""
    root = tmp_path_factory.mktemp("story")
    shutil.copytree(REPO / "specs", root / "specs")
    (root / "datasets").mkdir()
    shutil.copy(REPO / "datasets" / "kiln-line.csv", root / "datasets" / "kiln-line.csv")
    sample(20_000, DROP_SEED).to_csv(root / "drop.csv", index=False, lineterminator="\n")
    frame = pd.read_csv(root / "datasets" / "kiln-line.csv", dtype=str)
    frame["warp"] = frame["warp"].replace("yes", "bent")
    frame.to_csv(root / "renamed.csv", index=False, lineterminator="\n")
    spec = (root / "specs" / "kiln-line.yaml").read_text()
    (root / "specs" / "loose.yaml").write_text(spec.replace(
        "max_edge_changes: 0 ", "max_edge_changes: 1 "))
    (root / "specs" / "cap1.yaml").write_text(spec.replace("parent_cap: 3", "parent_cap: 1"))
    return root


def test_ci_story(scenario: Path, dagmill: CliCall) -> None:
    cwd = scenario
    spec = "specs/kiln-line.yaml"

    # No baseline yet: the check fails (exit 1) and prints the pin command.
    first = dagmill("check", spec, cwd=cwd)
    assert first.returncode == 1, first.stderr
    assert "no baseline" in first.stdout and "dagmill pin " in first.stdout

    done = dagmill("run", spec, "--json", cwd=cwd)
    assert done.returncode == 0, done.stderr
    run_id = json.loads(done.stdout)["runs"][0]["run_id"]
    pinned = dagmill("pin", run_id, cwd=cwd)
    assert pinned.returncode == 0, pinned.stderr
    assert "first baseline" in pinned.stdout
    baseline = json.loads((cwd / "results" / "kiln-line" / "baseline.json").read_text())
    assert baseline["run_id"] == run_id
    assert {"input_sha256", "graph_sha256", "score", "edges"} <= set(baseline)

    # Same inputs: passes and says identical; each check is stored as a run.
    before = len(list((cwd / "results" / "kiln-line" / "runs").iterdir()))
    for _ in range(2):
        again = dagmill("check", spec, "--json", cwd=cwd)
        assert again.returncode == 0, again.stdout + again.stderr
        report = json.loads(again.stdout)["checks"][0]
        assert report["same_inputs"] and report["verdict"] == "identical" and report["ok"]
    assert len(list((cwd / "results" / "kiln-line" / "runs").iterdir())) == before + 2

    # A new data drop: one class edge change. The strict gate (max 0) fails naming it;
    # a gate allowing one change passes and still lists it.
    strict = dagmill("check", spec, "--data", "drop.csv", cwd=cwd)
    assert strict.returncode == 1, strict.stderr
    assert "dwell -> cooling" in strict.stdout and "max_edge_changes 0" in strict.stdout
    loose = dagmill("check", "specs/loose.yaml", "--data", "drop.csv", "--json", cwd=cwd)
    assert loose.returncode == 0, loose.stdout
    report = json.loads(loose.stdout)["checks"][0]
    assert report["ok"] and report["edges"]["added"] == [["dwell", "cooling"]]
    # Sampling noise: the re-learned graph beats the baseline graph on the drop's rows,
    # but by far less than gate.evidence (10 log-units).
    drift = {r["rule"]: r for r in report["rules"]}["structural-drift"]
    assert drift["status"] == "pass" and 0 <= drift["measure"] < 2
    assert any("dwell -> cooling" in c for c in report["changes"])

    # A drop whose state set changed fails, naming the column and the states.
    renamed = dagmill("check", spec, "--data", "renamed.csv", cwd=cwd)
    assert renamed.returncode == 1
    assert "column 'warp'" in renamed.stdout
    assert "new states 'bent'" in renamed.stdout and "vanished states 'yes'" in renamed.stdout

    # A spec change that makes the learned graph worse on the same rows fails with exit 1
    # as a search regression, and the note names the changed key.
    capped = dagmill("check", "specs/cap1.yaml", "--json", cwd=cwd)
    assert capped.returncode == 1
    report = json.loads(capped.stdout)["checks"][0]
    assert any(f.startswith("search-regression: ") for f in report["failures"])
    assert "spec changed: parent_cap: 3 -> 1" in report["notes"]

    history = dagmill("history", spec, cwd=cwd)
    assert history.returncode == 0, history.stderr
    lines = history.stdout.splitlines()
    assert len(lines) == 2 + before + 6  # header, rule, one row per stored run
    marked = [line for line in lines[2:] if line.startswith("*")]
    assert len(marked) == 1 and run_id in marked[0]

    # A hand-edited run.json is refused (exit 2) by show, compare and check, naming it.
    record_path = cwd / "results" / "kiln-line" / "runs" / run_id / "run.json"
    original = record_path.read_text()
    record = json.loads(original)
    record["edges"] = record["edges"][1:]
    record_path.write_text(json.dumps(record))
    try:
        for args in (("show", run_id), ("compare", run_id, run_id), ("check", spec)):
            refused = dagmill(*args, cwd=cwd)
            assert refused.returncode == 2, (args, refused.stdout, refused.stderr)
            assert str(Path("runs") / run_id / "run.json") in refused.stderr
            assert "graph_sha256" in refused.stderr
            no_traceback(refused)
    finally:
        record_path.write_text(original)


def test_junit_report(scenario: Path, tmp_path: Path, dagmill: CliCall) -> None:
    cwd = tmp_path
    shutil.copytree(scenario / "specs", cwd / "specs")
    shutil.copytree(scenario / "datasets", cwd / "datasets")
    done = dagmill("run", "specs/kiln-line.yaml", "--json", cwd=cwd)
    run_id = json.loads(done.stdout)["runs"][0]["run_id"]
    assert dagmill("pin", run_id, cwd=cwd).returncode == 0
    junit = cwd / "report.xml"
    # The same spec name twice in one file is fine for CI, but distinct names read better:
    # kiln-line passes, cap1 (same spec name, lower score) fails.
    text = (cwd / "specs" / "cap1.yaml").read_text().replace("name: kiln-line", "name: capped")
    (cwd / "specs" / "capped.yaml").write_text(text)
    out = dagmill("check", "specs/kiln-line.yaml", "specs/capped.yaml", "--junit", str(junit),
                  cwd=cwd)
    assert out.returncode == 1
    root = ET.parse(junit).getroot()
    cases = {c.get("name"): c for c in root.iter("testcase")}
    assert sorted(cases) == ["capped", "kiln-line"]
    assert cases["kiln-line"].find("failure") is None
    failure = cases["capped"].find("failure")
    assert failure is not None and "no baseline" in failure.get("message", "")
    assert root.find("testsuite").get("failures") == "1"

    # Pin the capped spec too; then its check passes and kiln-line's still does.
    capped_run = json.loads(dagmill("run", "specs/capped.yaml", "--json", cwd=cwd).stdout)
    assert dagmill("pin", capped_run["runs"][0]["run_id"], cwd=cwd).returncode == 0
    out = dagmill("check", "specs/kiln-line.yaml", "specs/capped.yaml", "--junit", str(junit),
                  cwd=cwd)
    assert out.returncode == 0, out.stdout
    root = ET.parse(junit).getroot()
    assert [c.get("name") for c in root.iter("testcase")] == ["kiln-line", "capped"]
    assert not list(root.iter("failure"))
