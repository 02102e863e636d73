"""``extends``: a spec merged over a base spec (mappings key by key, lists and values
replaced), problems at the file and line each value came from, cycles and deep chains
refused, and the merged spec hashed, so editing the base makes every child stale."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
from conftest import ROOT, CliCall

from runner.errors import InputError
from runner.spec import load_spec, normalised_spec
from runner.spec.models import MAX_EXTENDS_DEPTH

ROWS = 2000
FAST = ("--quiet", "--workers", "1")

BASE = """\
# shared defaults of the kiln specs
dataset:
  path: ../datasets/kiln.csv
  columns:
    supplier: {kind: discrete, states: [east, north, south]}
tiers:
  - [supplier, clay_lot, moisture, glaze_batch]
  - [press_force, kiln_peak, dwell, cooling]
  - [crack, warp, shade]
  - [grade]
parent_cap: 2
score:
  name: bdeu
  ess: 10
search:
  seed: 2
  budget: {max_steps: 40}
"""

CHILD = """\
name: kiln-child
extends: _base.yaml
parent_cap: 3
score: {ess: 5}
"""


def _project(folder: Path, base: str = BASE, child: str = CHILD) -> Path:
    (folder / "specs").mkdir()
    (folder / "datasets").mkdir()
    lines = (ROOT / "datasets" / "kiln-line.csv").read_text(encoding="utf-8").splitlines()
    (folder / "datasets" / "kiln.csv").write_text("\n".join(lines[: ROWS + 1]) + "\n")
    (folder / "specs" / "_base.yaml").write_text(base, encoding="utf-8")
    (folder / "specs" / "child.yaml").write_text(child, encoding="utf-8")
    return folder


def _problems(path: Path) -> list[str]:
    with pytest.raises(InputError) as caught:
        load_spec(path)
    return [p.format() for p in caught.value.problems]


def _json(text: str) -> dict[str, Any]:
    return json.loads(text)  # type: ignore[no-any-return]


def test_the_child_is_merged_over_its_base(tmp_path: Path) -> None:
    project = _project(tmp_path)
    spec = load_spec(project / "specs" / "child.yaml")
    normal = normalised_spec(spec)
    assert normal["parent_cap"] == 3  # the child's value
    assert normal["score"] == {**normal["score"], "name": "bdeu", "ess": 5.0}  # key by key
    assert normal["search"]["seed"] == 2 and normal["search"]["budget"]["max_steps"] == 40
    assert "extends" not in normal and "vary" not in normal
    assert spec.dataset_path() == (project / "datasets" / "kiln.csv").resolve()
    assert spec.locate("score.ess") == (str(project / "specs" / "child.yaml"), 4)
    assert spec.locate("score.name") == (str(project / "specs" / "_base.yaml"), 13)


def test_lists_are_replaced_not_joined(tmp_path: Path) -> None:
    project = _project(tmp_path, child=CHILD + "tiers:\n  - [supplier, grade]\n")
    assert load_spec(project / "specs" / "child.yaml").tiers == [["supplier", "grade"]]


def test_an_error_in_the_base_is_reported_at_the_base_files_line(
        tmp_path: Path, cli: CliCall) -> None:
    project = _project(tmp_path, base=BASE.replace("parent_cap: 2", "parent_cap: many"),
                       child=CHILD.replace("parent_cap: 3\n", ""))
    base = project / "specs" / "_base.yaml"
    assert _problems(project / "specs" / "child.yaml") == [
        f"{base}:11: parent_cap: must be a whole number (got 'many')"]
    # a rule across keys and a name the data lacks point at the base's lines too
    (base).write_text(BASE.replace("[grade]", "[grades]"))
    done = cli("validate", "specs/child.yaml", cwd=project)
    assert done.returncode == 2
    assert done.stdout.splitlines()[0].startswith(
        "specs/_base.yaml:10: tiers.3.0: 'grades' is not a column of ../datasets/kiln.csv")


def test_the_child_keeps_its_own_lines(tmp_path: Path) -> None:
    project = _project(tmp_path, child=CHILD.replace("ess: 5", "ess: 0"))
    child = project / "specs" / "child.yaml"
    assert _problems(child) == [f"{child}:4: score.ess: must be greater than 0.0 (got 0)"]


def test_a_cycle_of_two_files_is_refused_naming_both(tmp_path: Path, cli: CliCall) -> None:
    project = _project(tmp_path, base="extends: child.yaml\n" + BASE)
    done = cli("validate", "specs/child.yaml", cwd=project)
    assert done.returncode == 2, done.stdout
    assert done.stdout.splitlines()[0] == (
        "specs/_base.yaml:1: extends: 'child.yaml' leads back to specs/child.yaml: a cycle "
        "of bases (specs/child.yaml -> specs/_base.yaml -> specs/child.yaml) is refused "
        "(got 'child.yaml')")


def test_a_chain_deeper_than_the_limit_is_refused(tmp_path: Path) -> None:
    project = _project(tmp_path)
    specs = project / "specs"
    depth = MAX_EXTENDS_DEPTH  # child -> level0 -> ... -> base: one base too many
    for k in range(depth):
        nxt = f"_level{k + 1}.yaml" if k + 1 < depth else "_base.yaml"
        (specs / f"_level{k}.yaml").write_text(f"extends: {nxt}\n")
    (specs / "child.yaml").write_text(CHILD.replace("_base.yaml", "_level0.yaml"))
    messages = _problems(specs / "child.yaml")
    assert len(messages) == 1 and "too many bases" in messages[0]
    # exactly MAX_EXTENDS_DEPTH bases is fine
    (specs / "child.yaml").write_text(CHILD.replace("_base.yaml", "_level1.yaml"))
    assert load_spec(specs / "child.yaml").parent_cap == 3


def test_a_missing_base_is_reported_at_the_extends_line(tmp_path: Path) -> None:
    project = _project(tmp_path, child=CHILD.replace("_base.yaml", "_nothere.yaml"))
    child = project / "specs" / "child.yaml"
    assert _problems(child) == [f"{child}:2: extends: extends '_nothere.yaml': no such spec "
                                "file (got '_nothere.yaml')"]


def test_paths_in_a_base_are_relative_to_the_base_file(tmp_path: Path) -> None:
    project = _project(tmp_path)
    (project / "specs" / "deep").mkdir()
    (project / "specs" / "deep" / "grandchild.yaml").write_text(
        "name: kiln-deep\nextends: ../child.yaml\n")
    spec = load_spec(project / "specs" / "deep" / "grandchild.yaml")
    assert spec.dataset.path == "../../datasets/kiln.csv"
    assert spec.dataset_path() == (project / "datasets" / "kiln.csv").resolve()


def test_editing_the_base_makes_the_child_stale(tmp_path: Path, cli: CliCall) -> None:
    project = _project(tmp_path)
    first = cli("run", "--json", *FAST, cwd=project)
    assert first.returncode == 0, first.stderr
    assert [s["status"] for s in _json(first.stdout)["specs"]] == ["learned"]
    again = cli("run", "--json", *FAST, cwd=project)
    assert [s["status"] for s in _json(again.stdout)["specs"]] == ["up_to_date"]

    base = project / "specs" / "_base.yaml"
    base.write_text(BASE.replace("seed: 2", "seed: 3"), encoding="utf-8")
    board = cli("overview", "--json", cwd=project)
    assert board.returncode == 0
    (row,) = _json(board.stdout)["rows"]
    assert row["state"] == "stale" and row["reasons"] == ["spec changed"]
    learned = cli("run", "--json", *FAST, cwd=project)
    doc = _json(learned.stdout)
    assert [s["status"] for s in doc["specs"]] == ["learned"]
    assert len(list((project / "results" / "kiln-child" / "runs").iterdir())) == 2
