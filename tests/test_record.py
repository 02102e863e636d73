"""Typed records (runner/record.py): the demo specs' run.json and baseline.json files fit
their models and round-trip through them byte for byte; the JSON Schema of `dagmill schema
--record` / `--baseline` accepts them and refuses broken ones (checked with the reference
library jsonschema); hand-broken files are refused with exit 2 naming the file and the key
path, and nothing stored changes; records from before `format_version` are still read."""

from __future__ import annotations

import json
import shutil
from pathlib import Path
from typing import Any

import pytest

from runner.cli import main
from runner.errors import InputError
from runner.record import (
    FORMAT_VERSION,
    Baseline,
    RunRecord,
    baseline_json_schema,
    dump,
    key_table,
    record_json_schema,
)
from runner.store import (
    dump_json,
    read_baseline,
    read_run,
    record_sha256,
    write_baseline,
    write_run,
)

jsonschema = pytest.importorskip("jsonschema")

ROOT = Path(__file__).resolve().parents[1]

#: name -> (spec file, text appended): the two demo specs, and each with the optional
#: blocks (bootstrap and evaluation: a discrete and a Gaussian evaluation differ).
CASES = {
    "kiln-line": ("kiln-line.yaml", ""),
    "kiln-gauss": ("kiln-gauss.yaml", ""),
    "line-boot-eval": ("kiln-line.yaml", "bootstrap: {replicates: 4, seed: 5, threshold: 0.5}\n"
                       "fit: {pseudo_count: 1.0}\nevaluation: {holdout: 0.2, seed: 3}\n"),
    "gauss-boot-eval": ("kiln-gauss.yaml", "bootstrap: {replicates: 3, seed: 1}\n"
                        "evaluation: {holdout: 0.25, seed: 1}\n"),
}


def _spec(folder: Path, name: str) -> Path:
    source, extra = CASES[name]
    text = (ROOT / "specs" / source).read_text(encoding="utf-8")
    text = text.replace("  path: ../datasets/",  # outside the tmp folder: allowed explicitly
                        f"  allow_outside: true\n  path: {ROOT / 'datasets'}/")
    text = "\n".join(f"name: {name}" if line.startswith("name:") else line
                     for line in text.splitlines()) + "\n" + extra
    path = folder / f"{name}.yaml"
    path.write_text(text, encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def stored(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    """Each case run and pinned once: results root, and per case its run folder."""
    folder = tmp_path_factory.mktemp("records")
    root = folder / "results"
    runs: dict[str, Path] = {}
    for name in CASES:
        assert main(["run", str(_spec(folder, name)), "--results", str(root), "--quiet"]) == 0
        (run,) = (root / name / "runs").iterdir()
        assert main(["pin", run.name, "--results", str(root)]) == 0
        runs[name] = run
    return {"root": root, "runs": runs}


def _snapshot(root: Path) -> dict[str, bytes]:
    return {str(p.relative_to(root)): p.read_bytes() for p in sorted(root.rglob("*"))
            if p.is_file()}


# --------------------------------------------------------------------------- round trip


@pytest.mark.parametrize("name", list(CASES))
def test_stored_record_and_baseline_round_trip_byte_for_byte(stored: dict[str, Any],
                                                             name: str) -> None:
    text = (stored["runs"][name] / "run.json").read_text(encoding="utf-8")
    record = json.loads(text)
    assert record["format_version"] == FORMAT_VERSION
    assert dump_json(dump(RunRecord.model_validate(record))) == text
    baseline = (stored["root"] / name / "baseline.json").read_text(encoding="utf-8")
    assert json.loads(baseline)["format_version"] == FORMAT_VERSION
    assert dump_json(dump(Baseline.model_validate(json.loads(baseline)))) == baseline


def test_the_cases_cover_the_optional_blocks(stored: dict[str, Any]) -> None:
    records = {n: json.loads((f / "run.json").read_text()) for n, f in stored["runs"].items()}
    for name in ("line-boot-eval", "gauss-boot-eval"):
        assert {"bootstrap", "evaluation"} <= set(records[name])
        assert "bootstrap" in records[name]["seconds"]
    assert "measure" in records["gauss-boot-eval"]["evaluation"]
    assert all(c["kind"] == "continuous" for c in records["kiln-gauss"]["data"]["columns"]
               .values())


# --------------------------------------------------------------------------- JSON Schema


def _validator(schema: dict[str, Any]) -> Any:
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema)


def test_cli_prints_the_schemas(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["schema", "--record"]) == 0
    assert json.loads(capsys.readouterr().out) == json.loads(json.dumps(record_json_schema()))
    assert main(["schema", "--baseline"]) == 0
    assert json.loads(capsys.readouterr().out)["title"] == "dagmill baseline"
    assert main(["schema"]) == 0
    assert json.loads(capsys.readouterr().out)["title"] == "dagmill spec"


def test_json_schema_accepts_the_records_and_refuses_broken_ones(stored: dict[str, Any]) -> None:
    records, baselines = _validator(record_json_schema()), _validator(baseline_json_schema())
    for name, folder in stored["runs"].items():
        record = json.loads((folder / "run.json").read_text())
        assert not list(records.iter_errors(record)), name
        baseline = json.loads((stored["root"] / name / "baseline.json").read_text())
        assert not list(baselines.iter_errors(baseline)), name
        missing = {k: v for k, v in record.items() if k != "graph_sha256"}
        assert not records.is_valid(missing)
        assert not records.is_valid({**record, "score": {**record["score"], "value": "-1.5"}})
        assert not records.is_valid({**record, "colour": "blue"})
        assert not baselines.is_valid({k: v for k, v in baseline.items() if k != "edges"})


# --------------------------------------------------------------------------- readers


def _break(path: Path, edit: Any) -> None:
    doc = json.loads(path.read_text())
    edit(doc)
    path.write_text(dump_json(doc))


BROKEN = {
    "score.value": ("field required", lambda d: d["score"].pop("value")),
    "graph_sha256": ("field required", lambda d: d.pop("graph_sha256")),
    "search.steps": ("valid integer", lambda d: d["search"].update(steps="16")),
    "data.columns.moisture.states.1": ("valid string",
                                       lambda d: d["data"]["columns"]["moisture"]["states"]
                                       .__setitem__(1, 2)),
    "seconds.wall": ("unknown key", lambda d: d["seconds"].update(wall=1.0)),
}


def _copy_run(stored: dict[str, Any], name: str, root: Path) -> Path:
    """A copy of the stored run of spec ``name`` under the results folder ``root``."""
    source = stored["runs"][name]
    run = root / name / "runs" / source.name
    run.mkdir(parents=True)
    for f in source.iterdir():
        (run / f.name).write_bytes(f.read_bytes())
    return run


@pytest.mark.parametrize("key", list(BROKEN))
def test_a_hand_broken_record_is_exit_2_naming_file_and_key(
        stored: dict[str, Any], key: str, tmp_path: Path,
        capsys: pytest.CaptureFixture[str]) -> None:
    root = tmp_path / "results"
    run = _copy_run(stored, "kiln-line", root)
    what, edit = BROKEN[key]
    _break(run / "run.json", edit)
    before = _snapshot(root)
    for args in (["show", run.name], ["pin", run.name], ["compare", run.name, run.name],
                 ["export", run.name, "--format", "json"]):
        assert main([*args, "--results", str(root)]) == 2, args
        err = capsys.readouterr().err
        assert f"{run / 'run.json'}: {key}: " in err and what in err, (args, err)
        assert "Traceback" not in err
    assert _snapshot(root) == before


def test_a_hand_broken_baseline_is_refused_naming_the_key(stored: dict[str, Any],
                                                        tmp_path: Path) -> None:
    root = tmp_path / "results"
    shutil.copytree(stored["root"], root)
    path = root / "kiln-line" / "baseline.json"
    assert read_baseline(root, "kiln-line") is not None
    _break(path, lambda d: d["score"].update(per_row="high"))
    with pytest.raises(InputError, match=r"baseline\.json: score\.per_row: input should be"):
        read_baseline(root, "kiln-line")


def _as_version_0(path: Path) -> dict[str, Any]:
    """The record as written before ``format_version`` existed (its hash re-sealed)."""
    doc = json.loads(path.read_text())
    del doc["format_version"]
    if "record_sha256" in doc:
        doc["record_sha256"] = record_sha256(doc)
    path.write_text(dump_json(doc))
    return doc


def test_a_version_0_record_and_baseline_are_still_read(stored: dict[str, Any], tmp_path: Path,
                                                       capsys: pytest.CaptureFixture[str]
                                                       ) -> None:
    root = tmp_path / "results"
    run = _copy_run(stored, "line-boot-eval", root)
    doc = _as_version_0(run / "run.json")
    assert read_run(run) == doc
    baseline = root / "line-boot-eval" / "baseline.json"
    baseline.write_bytes((stored["root"] / "line-boot-eval" / "baseline.json").read_bytes())
    old = _as_version_0(baseline)
    assert read_baseline(root, "line-boot-eval") == old
    assert main(["show", run.name, "--results", str(root)]) == 0
    out = capsys.readouterr().out
    assert run.name in out and "record     format 0 (legacy" in out
    # Version 0 still needs what readers always needed.
    _break(run / "run.json", lambda d: d["score"].update(value="-1.5"))
    with pytest.raises(InputError, match=r"score\.value: input should be a valid number"):
        read_run(run)


def test_a_version_1_record_is_read_and_shown_as_legacy(stored: dict[str, Any],
                                                        tmp_path: Path,
                                                        capsys: pytest.CaptureFixture[str]
                                                        ) -> None:
    """Format 1 (sealed, before the chain): read with its seal checked, shown as legacy."""
    root = tmp_path / "results"
    run = _copy_run(stored, "kiln-line", root)
    doc = json.loads((run / "run.json").read_text())
    doc.pop("previous_record_sha256")
    doc.pop("signature", None)
    doc["format_version"] = 1
    doc["record_sha256"] = record_sha256(doc)
    (run / "run.json").write_text(dump_json(doc))
    assert read_run(run) == doc
    assert main(["show", run.name, "--results", str(root)]) == 0
    assert "record     format 1 (legacy: sealed, not chained)" in capsys.readouterr().out
    _break(run / "run.json", lambda d: d["score"].update(value=d["score"]["value"] + 1))
    with pytest.raises(InputError, match="record_sha256"):
        read_run(run)


def test_a_newer_format_version_is_refused(stored: dict[str, Any], tmp_path: Path) -> None:
    run = tmp_path / "run"
    run.mkdir()
    for f in stored["runs"]["kiln-line"].iterdir():
        (run / f.name).write_bytes(f.read_bytes())
    _break(run / "run.json", lambda d: d.update(format_version=FORMAT_VERSION + 1))
    with pytest.raises(InputError, match=r"format_version: .*upgrade dagmill"):
        read_run(run)


# --------------------------------------------------------------------------- writers


def test_the_writers_refuse_a_record_that_does_not_fit(stored: dict[str, Any],
                                                       tmp_path: Path) -> None:
    record = json.loads((stored["runs"]["kiln-line"] / "run.json").read_text())
    trace = (stored["runs"]["kiln-line"] / "trace.csv").read_text()
    model = json.loads((stored["runs"]["kiln-line"] / "model.json").read_text())
    broken = {**record, "search": {**record["search"], "converged": "yes"}}
    with pytest.raises(ValueError, match=r"search\.converged"):
        write_run(tmp_path, broken, trace, model)
    assert not [p for p in tmp_path.rglob("*") if p.is_file()]
    with pytest.raises(ValueError, match=r"score\.value"):
        write_baseline(tmp_path, {**record, "score": {**record["score"], "value": None}},
                       "2026-12-02T00:00:00Z")
    assert not (tmp_path / "kiln-line" / "baseline.json").exists()
    _, folder = write_run(tmp_path, record, trace, model)
    assert (folder / "run.json").read_text() == dump_json(record)


@pytest.mark.parametrize(("marker", "model"), [("record-keys", RunRecord),
                                               ("baseline-keys", Baseline)])
def test_the_readme_key_tables_are_the_models(marker: str, model: type) -> None:
    """The README's tables of run.json's and baseline.json's top-level keys are rendered
    from the record models (``record.key_table``): a field added, removed or described
    differently in the model must be carried into the README."""
    text = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    start, end = f"<!-- {marker}:start -->\n", f"<!-- {marker}:end -->"
    assert text[text.index(start) + len(start):text.index(end)] == key_table(model)
