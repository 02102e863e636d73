"""The project as a whole: ``run``/``check`` without SPEC skip the up-to-date specs,
``--force`` learns them anyway, and ``overview`` shows every spec's state.

Each spec is the demo spec (specs/kiln-line.yaml) under its own name, on its own copy of
the first 3,000 rows of the demo data, so that each learn is quick and a change to one
data file touches one spec only."""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import pytest
from conftest import ROOT, CliCall, CliResult

from runner.codeversion import code_version
from runner.pipeline import prepare, prepared_input_sha256
from runner.project import discover_specs, ordered_runs, staleness
from runner.store import CHECK_FILE

ROWS = 3000
NAMES = ("kiln-a", "kiln-b", "kiln-c")


def _demo_rows() -> list[str]:
    lines = (ROOT / "datasets" / "kiln-line.csv").read_text(encoding="utf-8").splitlines()
    return lines[: ROWS + 1]


def add_spec(project: Path, name: str, extra: str = "") -> Path:
    """The demo spec as ``specs/<name>.yaml`` on its own data ``datasets/<name>.csv``."""
    (project / "specs").mkdir(exist_ok=True)
    (project / "datasets").mkdir(exist_ok=True)
    (project / "datasets" / f"{name}.csv").write_text("\n".join(_demo_rows()) + "\n")
    text = (ROOT / "specs" / "kiln-line.yaml").read_text(encoding="utf-8")
    text = text.replace("name: kiln-line", f"name: {name}").replace(
        "../datasets/kiln-line.csv", f"../datasets/{name}.csv")
    spec = project / "specs" / f"{name}.yaml"
    spec.write_text(text + extra, encoding="utf-8")
    return spec


def drop_rows(project: Path, name: str, rows: int = 40) -> None:
    """A new data drop for one spec: its file without its last ``rows`` rows."""
    path = project / "datasets" / f"{name}.csv"
    lines = path.read_text(encoding="utf-8").splitlines()
    path.write_text("\n".join(lines[:-rows]) + "\n", encoding="utf-8")


def new_state(project: Path, name: str) -> None:
    """A data drop with a state never seen before in column ``shade`` (the strict gate's
    ``allow_new_states: false`` fails it)."""
    path = project / "datasets" / f"{name}.csv"
    lines = path.read_text(encoding="utf-8").splitlines()
    cells = lines[1].split(",")
    cells[10] = "speckled"  # shade
    lines[1] = ",".join(cells)
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def _json(done: CliResult) -> dict[str, Any]:
    assert "Traceback" not in done.stderr
    return json.loads(done.stdout)  # type: ignore[no-any-return]


def _runs(project: Path, name: str) -> list[Path]:
    return sorted((project / "results" / name / "runs").iterdir())


def _status(doc: dict[str, Any]) -> dict[str, str]:
    return {s["name"]: s["status"] for s in doc["specs"]}


@pytest.fixture
def project(tmp_path: Path) -> Path:
    for name in NAMES:
        add_spec(tmp_path, name)
    return tmp_path


FAST = ("--quiet", "--workers", "1")


# --------------------------------------------------------------------------- run


def test_project_run_learns_only_the_stale_spec(project: Path, cli: CliCall) -> None:
    first = cli("run", "--json", *FAST, cwd=project)
    assert first.returncode == 0, first.stderr
    doc = _json(first)
    assert [s["spec"] for s in doc["specs"]] == [f"specs/{n}.yaml" for n in NAMES]
    assert _status(doc) == dict.fromkeys(NAMES, "learned")
    assert [r["twin"] for r in doc["runs"]] == [None] * 3
    learned = {s["name"]: s["run_id"] for s in doc["specs"]}

    drop_rows(project, "kiln-b")
    second = cli("run", "--json", *FAST, cwd=project)
    assert second.returncode == 0, second.stderr
    doc = _json(second)
    assert _status(doc) == {"kiln-a": "up_to_date", "kiln-b": "learned",
                            "kiln-c": "up_to_date"}
    assert len(doc["runs"]) == 1 and doc["runs"][0]["twin"] is None
    ids = {s["name"]: s["run_id"] for s in doc["specs"]}
    assert ids["kiln-a"] == learned["kiln-a"] and ids["kiln-c"] == learned["kiln-c"]
    assert [len(_runs(project, n)) for n in NAMES] == [1, 2, 1]

    text = cli("run", *FAST, cwd=project)  # nothing stale: one line each, exit 0
    assert text.returncode == 0, text.stderr
    lines = text.stdout.splitlines()
    for name in NAMES:
        assert f"{name}: up to date: run {ids[name]}" in lines
    assert [len(_runs(project, n)) for n in NAMES] == [1, 2, 1]

    forced = cli("run", "--force", "--json", *FAST, cwd=project)
    assert forced.returncode == 0, forced.stderr
    doc = _json(forced)
    assert _status(doc) == dict.fromkeys(NAMES, "learned")
    assert [r["twin"] for r in doc["runs"]] == [{"run_id": ids[n], "identical": True}
                                                for n in NAMES]
    assert [len(_runs(project, n)) for n in NAMES] == [2, 3, 2]


def test_a_changed_spec_is_stale_and_named_files_are_always_learned(
        project: Path, cli: CliCall) -> None:
    assert cli("run", *FAST, cwd=project).returncode == 0
    spec = project / "specs" / "kiln-c.yaml"
    spec.write_text(spec.read_text().replace("parent_cap: 3", "parent_cap: 2"))
    doc = _json(cli("run", "specs", "--json", *FAST, cwd=project))  # a folder as SPEC
    assert _status(doc) == {"kiln-a": "up_to_date", "kiln-b": "up_to_date",
                            "kiln-c": "learned"}
    # a spec named as a file is learned as before: the rerun finds its twin
    named = _json(cli("run", "specs/kiln-a.yaml", "--json", *FAST, cwd=project))
    assert _status(named) == {"kiln-a": "learned"}
    assert named["runs"][0]["twin"]["identical"] is True


def test_the_spec_folder_comes_from_the_environment(tmp_path: Path, cli: CliCall) -> None:
    add_spec(tmp_path, "kiln-a")
    (tmp_path / "specs").rename(tmp_path / "analyses")
    (tmp_path / "specs").mkdir()
    (tmp_path / "specs" / "other.yaml").write_text("not: a spec\n")
    (tmp_path / "analyses" / "_base.yaml").write_text("not: a spec either\n")
    env = {"DAGMILL_SPECS": "analyses"}
    first = _json(cli("run", "--json", *FAST, cwd=tmp_path, env=env))
    assert [s["spec"] for s in first["specs"]] == ["analyses/kiln-a.yaml"]
    again = _json(cli("run", "--json", *FAST, cwd=tmp_path, env=env))
    assert _status(again) == {"kiln-a": "up_to_date"} and again["runs"] == []
    missing = cli("run", *FAST, cwd=tmp_path, env={"DAGMILL_SPECS": "nowhere"})
    assert missing.returncode == 2 and "nowhere: SPEC: no such spec folder" in missing.stderr
    assert "Traceback" not in missing.stderr


def test_every_project_spec_is_validated_before_any_is_learned(
        project: Path, cli: CliCall) -> None:
    add_spec(project, "kiln-d", extra="colour: red\n")
    done = cli("run", *FAST, cwd=project)
    assert done.returncode == 2 and "colour" in done.stderr
    assert not (project / "results").exists()
    (project / "specs" / "kiln-d.yaml").unlink()
    clash = project / "specs" / "zz.yaml"  # a second spec under the name kiln-a
    clash.write_text((project / "specs" / "kiln-a.yaml").read_text())
    done = cli("run", *FAST, cwd=project)
    assert done.returncode == 2 and "kiln-a" in done.stderr and "zz.yaml" in done.stderr
    assert not (project / "results").exists()


def test_discovery_is_sorted_by_path_and_skips_shared_pieces(tmp_path: Path) -> None:
    for rel in ("b.yaml", "a/z.yml", "a-b.yaml", "_base.yaml", ".hidden/x.yaml",
                "notes.md", "c/_part.yaml"):
        path = tmp_path / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text("name: x\n")
    found = [p.relative_to(tmp_path).as_posix() for p in discover_specs(tmp_path)]
    assert found == ["a-b.yaml", "a/z.yml", "b.yaml"]


def test_staleness_names_what_changed(project: Path) -> None:
    prepared = prepare(project / "specs" / "kiln-a.yaml")
    inputs = prepared_input_sha256(prepared)
    data, version = prepared.dataset.sha256, code_version()
    record = {"input_sha256": inputs, "spec_sha256": "old", "code_version": version,
              "data": {"sha256": data}}
    assert staleness(record, prepared.spec, data, version, inputs) == []
    stale = {**record, "input_sha256": "x", "code_version": "0.0+old",
             "data": {"sha256": "ab" * 32}}
    assert staleness(stale, prepared.spec, data, version, inputs) == [
        "spec changed", f"data changed: {'ab' * 6} -> {data[:12]}",
        f"code changed: 0.0+old -> {version}"]


# --------------------------------------------------------------------------- check


def test_project_check_reuses_up_to_date_runs(project: Path, cli: CliCall) -> None:
    doc = _json(cli("run", "--json", *FAST, cwd=project))
    for run in doc["runs"]:
        assert cli("pin", run["run_id"], cwd=project).returncode == 0
    pinned = {s["name"]: s["run_id"] for s in doc["specs"]}

    checked = cli("check", "--json", *FAST, cwd=project)
    assert checked.returncode == 0, checked.stdout + checked.stderr
    doc = _json(checked)
    assert _status(doc) == dict.fromkeys(NAMES, "up_to_date")
    assert [(c["run_id"], c["verdict"], c["ok"], c["up_to_date"]) for c in doc["checks"]] == [
        (pinned[n], "identical", True, True) for n in NAMES]
    assert [len(_runs(project, n)) for n in NAMES] == [1, 1, 1]
    assert not any((f / CHECK_FILE).exists() for n in NAMES for f in _runs(project, n))

    drop_rows(project, "kiln-c")
    doc = _json(cli("check", "--json", *FAST, cwd=project))
    assert _status(doc) == {"kiln-a": "up_to_date", "kiln-b": "up_to_date",
                            "kiln-c": "learned"}
    assert [len(_runs(project, n)) for n in NAMES] == [1, 1, 2]
    (new_c,) = [f for f in _runs(project, "kiln-c") if f.name != pinned["kiln-c"]]
    assert (new_c / CHECK_FILE).exists()
    assert [c["up_to_date"] for c in doc["checks"]] == [True, True, False]

    forced = cli("check", "--force", "--json", *FAST, cwd=project)
    doc = _json(forced)
    assert _status(doc) == dict.fromkeys(NAMES, "learned")
    assert [len(_runs(project, n)) for n in NAMES] == [2, 2, 3]
    checks = {c["spec"]: c for c in doc["checks"]}
    for name in ("kiln-a", "kiln-b"):  # same inputs as the baseline: identical
        assert checks[name]["same_inputs"] and checks[name]["verdict"] == "identical"
        assert checks[name]["ok"]
    # kiln-c's forced run is the twin of its earlier check run
    twin = json.loads((new_c / "run.json").read_text())
    (forced_c,) = [f for f in _runs(project, "kiln-c") if f.name not in (pinned["kiln-c"],
                                                                          new_c.name)]
    last = json.loads((forced_c / "run.json").read_text())
    assert (last["input_sha256"], last["graph_sha256"], last["score"]["value"]) == (
        twin["input_sha256"], twin["graph_sha256"], twin["score"]["value"])
    assert forced.returncode == (0 if doc["ok"] else 1)
    text = cli("check", *FAST, cwd=project)
    assert "kiln-a: up to date: run" in text.stdout


# --------------------------------------------------------------------------- overview


def _table(text: str) -> dict[str, dict[str, str]]:
    """The overview's text table as {name: {column: cell}}, cut at the header rule."""
    lines = text.splitlines()
    header, rule = lines[0], lines[1]
    spans = [m.span() for m in re.finditer(r"-+", rule)]
    columns = [header[a:b].strip() for a, b in spans]
    rows = {}
    for line in lines[2:]:
        if not line.strip():
            break
        cells = [line[a:(b if k + 1 < len(spans) else None)].strip()
                 for k, (a, b) in enumerate(spans)]
        row = dict(zip(columns, cells, strict=True))
        rows[row["name"]] = row
    return rows


@pytest.fixture
def board_project(tmp_path: Path, cli: CliCall) -> Path:
    """kiln-a pinned and checked (pass); kiln-b stale (new data since its run);
    kiln-c run, never pinned; kiln-d pinned, then a check that fails (a new state);
    kiln-e does not validate; kiln-f never run."""
    for name in ("kiln-a", "kiln-b", "kiln-c", "kiln-d"):
        add_spec(tmp_path, name)
    doc = _json(cli("run", "--json", *FAST, cwd=tmp_path))
    ids = {s["name"]: s["run_id"] for s in doc["specs"]}
    for name in ("kiln-a", "kiln-d"):
        assert cli("pin", ids[name], cwd=tmp_path).returncode == 0
    assert cli("check", "specs/kiln-a.yaml", *FAST, cwd=tmp_path).returncode == 0
    new_state(tmp_path, "kiln-d")
    assert cli("check", "specs/kiln-d.yaml", *FAST, cwd=tmp_path).returncode == 1
    drop_rows(tmp_path, "kiln-b")
    add_spec(tmp_path, "kiln-e", extra="colour: red\n")
    add_spec(tmp_path, "kiln-f")
    return tmp_path


def test_overview_shows_every_spec_state(board_project: Path, cli: CliCall) -> None:
    done = cli("overview", "--json", cwd=board_project)
    assert done.returncode == 0, done.stderr
    rows = {r["name"]: r for r in _json(done)["rows"]}
    assert list(rows) == ["kiln-a", "kiln-b", "kiln-c", "kiln-d", "kiln-e", "kiln-f"]
    assert {n: r["state"] for n, r in rows.items()} == {
        "kiln-a": "up_to_date", "kiln-b": "stale", "kiln-c": "up_to_date",
        "kiln-d": "up_to_date", "kiln-e": "invalid", "kiln-f": "never_run"}
    a, b, c, d, e, f = (rows[n] for n in sorted(rows))
    # kiln-a: its latest run is the passing check's, against the pinned baseline
    assert a["run"]["by"] == "check" and a["check"]["ok"] and a["check"]["verdict"] == "identical"
    assert a["check"]["run_id"] == a["run"]["run_id"]
    assert a["baseline"]["pinned"] and a["check"]["baseline_run_id"] == a["baseline"]["run_id"]
    # kiln-b: stale because its data changed, with both hash prefixes
    record = json.loads((_runs(board_project, "kiln-b")[-1] / "run.json").read_text())
    old = record["data"]["sha256"][:12]
    new = prepare(board_project / "specs" / "kiln-b.yaml").dataset.sha256[:12]
    assert b["reasons"] == [f"data changed: {old} -> {new}"] and old != new
    assert b["run"]["run_id"] == record["run_id"] and b["run"]["edges"] == len(record["edges"])
    assert b["run"]["per_row"] == record["score"]["per_row"]
    # kiln-c: no baseline, no check
    assert not c["baseline"]["pinned"] and c["check"] is None and c["run"]["by"] == "run"
    # kiln-d: the failing check and its failing rule
    assert d["check"]["ok"] is False and d["run"]["by"] == "check"
    assert any("speckled" in f and "allow_new_states" in f for f in d["check"]["failures"])
    # kiln-e: listed with its first problem; kiln-f: never run
    assert e["problem"] is not None and "colour" in e["problem"] and e["run"] is None
    assert f["run"] is None and f["check"] is None and not f["baseline"]["pinned"]

    text = cli("overview", cwd=board_project)
    assert text.returncode == 0, text.stderr
    table = _table(text.stdout)
    assert list(table) == list(rows)
    states = {"up_to_date": "up to date", "stale": "STALE", "never_run": "never run",
              "invalid": "INVALID"}
    for name, row in rows.items():  # the text says what the JSON says
        cells = table[name]
        assert cells["spec"] == row["file"]
        assert cells["state"] == states[row["state"]]
        assert cells["last run"] == (row["run"]["run_id"] if row["run"] else "-")
        assert cells["edges"] == (str(row["run"]["edges"]) if row["run"] else "-")
        assert cells["score/row"] == (f"bic {row['run']['per_row']:.6f}" if row["run"]
                                      else "-")
        assert cells["baseline"].split(" ")[0] == (
            row["baseline"]["run_id"] if row["baseline"]["pinned"] else "none")
        check = row["check"]
        assert cells["last check"] == ("-" if check is None else
                                       f"{'PASS' if check['ok'] else 'FAIL'} {check['verdict']}")
    lines = text.stdout.splitlines()
    assert f"kiln-b: stale: data changed: {old} -> {new}" in lines
    assert any(line.startswith("kiln-e: invalid: ") and "colour" in line for line in lines)
    assert any("FAIL" in line and "speckled" in line for line in lines)


def test_overview_html_is_a_self_contained_page(board_project: Path, cli: CliCall) -> None:
    bad = board_project / "specs" / "kiln-e.yaml"
    bad.write_text(bad.read_text().replace("colour: red", '"<b>bold</b>": red'))
    done = cli("overview", "--html", "board.html", cwd=board_project)
    assert done.returncode == 0, done.stderr
    page = (board_project / "board.html").read_text(encoding="utf-8")
    assert page.startswith("<!DOCTYPE html>") and page.count("<table") == 1
    for name in ("kiln-a", "kiln-b", "kiln-c", "kiln-d", "kiln-e", "kiln-f"):
        assert f"<td>{name}</td>" in page
    assert "data changed:" in page and "speckled" in page
    assert "<b>bold" not in page and "&lt;b&gt;bold" in page  # values are escaped
    assert "http" not in page.replace('lang="en"', "") and "<script" not in page
    again = cli("overview", "--html", "again.html", "--json", cwd=board_project)
    assert (board_project / "again.html").read_text(encoding="utf-8") == page
    assert json.loads(again.stdout)["rows"]  # the JSON is still the only stdout


def test_overview_of_a_missing_folder_is_bad_input(tmp_path: Path, cli: CliCall) -> None:
    done = cli("overview", cwd=tmp_path)
    assert done.returncode == 2 and "specs" in done.stderr and "Traceback" not in done.stderr


def test_runs_of_one_second_are_ordered_by_their_chain(tmp_path: Path) -> None:
    """Run ids of one second sort by their hash suffix, not by time; the chain of record
    hashes puts them in the order they were stored."""
    runs = tmp_path / "results" / "s" / "runs"
    stored = [("20260101T000000Z-ffffffffff", "h1", None),  # stored first
              ("20260101T000001Z-cccccccccc", "h2", "h1"),
              ("20260101T000001Z-aaaaaaaaaa", "h3", "h2"),
              ("20260101T000001Z-bbbbbbbbbb", "h4", "h3")]
    for run_id, own, previous in stored:
        (runs / run_id).mkdir(parents=True)
        (runs / run_id / "run.json").write_text(json.dumps(
            {"record_sha256": own, "previous_record_sha256": previous}))
    assert [f.name for f in ordered_runs(tmp_path / "results", "s")] == [
        run_id for run_id, _, _ in stored]
