"""Held-out evaluation of a stored run: the record's log-likelihood recomputed row by row
from model.json and the CSV, the learned graph against the empty one, and the hashes
that cover model.json."""

from __future__ import annotations

import csv
import json
import math
from collections import Counter
from pathlib import Path

import numpy as np
import pytest
from conftest import CliCall
from conftest import demo_spec_with_holdout as holdout_spec

ROOT = Path(__file__).resolve().parents[1]
HOLDOUT, SEED = 0.2, 5


def demo_spec_with_holdout(folder: Path, extra: str = "") -> Path:
    """specs/kiln-line.yaml with its data path made absolute and an evaluation block."""
    return holdout_spec(folder, extra, HOLDOUT, SEED)


@pytest.fixture(scope="module")
def stored(tmp_path_factory: pytest.TempPathFactory,
           cli_session: CliCall) -> tuple[Path, dict, dict]:
    folder = tmp_path_factory.mktemp("evaluation")
    result = cli_session("run", str(demo_spec_with_holdout(folder)), "--results",
                         str(folder / "results"), "--json")
    assert result.returncode == 0, result.stderr
    run_folder = Path(json.loads(result.stdout)["runs"][0]["folder"])
    record = json.loads((run_folder / "run.json").read_text())
    model = json.loads((run_folder / "model.json").read_text())
    return run_folder, record, model


def test_held_out_log_likelihood_recomputed_row_by_row(stored: tuple[Path, dict, dict]) -> None:
    # Direct computation, independent of runner/fit.py: the documented split rule
    # (numpy permutation from SeedSequence(seed), the first round(holdout * n) held out),
    # then for each held-out row the sum over variables of ln P(value | parents' values)
    # looked up by state names in model.json.
    _, record, model = stored
    with open(ROOT / "datasets" / "kiln-line.csv", newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    order = np.random.default_rng(np.random.SeedSequence(SEED)).permutation(len(rows))
    size = round(HOLDOUT * len(rows))
    held = [rows[i] for i in sorted(order[:size].tolist())]
    learn = [rows[i] for i in sorted(order[size:].tolist())]
    assert record["data"]["rows_held_out"] == len(held) == 4000
    assert record["data"]["rows_learned"] == len(learn) == model["rows"] == 16000
    a = model["pseudo_count"]

    total = 0.0
    for row in held:
        for name, var in model["variables"].items():
            key = [row[p] for p in var["parents"]]
            probs = next((c["probabilities"] for c in var["configurations"]
                          if c["parents"] == key), var["unseen_configuration"])
            total += math.log(probs[var["states"].index(row[name])])
    ll = record["evaluation"]["log_likelihood"]
    assert ll["learned_per_row"] == pytest.approx(total / len(held), rel=1e-12)

    empty = 0.0
    for name, var in model["variables"].items():
        counts = Counter(r[name] for r in learn)
        r = len(var["states"])
        for row in held:
            empty += math.log((counts[row[name]] + a) / (len(learn) + r * a))
    assert ll["empty_per_row"] == pytest.approx(empty / len(held), rel=1e-12)
    assert ll["difference_per_row"] == pytest.approx(ll["learned_per_row"] - ll["empty_per_row"])


def test_learned_graph_beats_the_empty_graph_on_held_out_rows(
        stored: tuple[Path, dict, dict]) -> None:
    _, record, _ = stored
    ll = record["evaluation"]["log_likelihood"]
    print(f"kiln-line held out: learned {ll['learned_per_row']:.6f}, empty "
          f"{ll['empty_per_row']:.6f} per row")
    assert ll["learned_per_row"] > ll["empty_per_row"]
    # the learning score is per learned row
    assert record["score"]["per_row"] == pytest.approx(record["score"]["value"] / 16000)


def test_model_file_is_covered_by_the_record(stored: tuple[Path, dict, dict],
                                             tmp_path: Path, cli: CliCall) -> None:
    import hashlib
    import shutil

    folder, record, _ = stored
    text = (folder / "model.json").read_bytes()
    assert record["model"]["sha256"] == hashlib.sha256(text).hexdigest()
    assert record["model"]["pseudo_count"] == 1.0
    results = tmp_path / "results"
    copy = results / "kiln-line" / "runs" / folder.name
    shutil.copytree(folder, copy)
    shown = cli("show", folder.name, "--results", str(results))
    assert shown.returncode == 0 and "log-likelihood per held-out row" in shown.stdout
    edited = json.loads(text)
    edited["pseudo_count"] = 2.0
    (copy / "model.json").write_text(json.dumps(edited))
    refused = cli("show", folder.name, "--results", str(results))
    assert refused.returncode == 2 and "model.json" in refused.stderr
    assert "edited" in refused.stderr and "Traceback" not in refused.stderr
    (copy / "model.json").unlink()
    missing = cli("show", folder.name, "--results", str(results))
    assert missing.returncode == 2 and "missing" in missing.stderr


def test_compare_shows_the_held_out_difference(stored: tuple[Path, dict, dict],
                                               tmp_path: Path, cli: CliCall) -> None:
    folder, record, _ = stored
    spec = demo_spec_with_holdout(tmp_path).read_text().replace("name: bic", "name: aic")
    (tmp_path / "kiln-line.yaml").write_text(spec)
    results = folder.parents[2]
    other = cli("run", str(tmp_path / "kiln-line.yaml"), "--results", str(results), "--json")
    assert other.returncode == 0, other.stderr
    other_id = json.loads(other.stdout)["runs"][0]["run_id"]
    out = cli("compare", record["run_id"], other_id, "--results", str(results), "--json")
    held = json.loads(out.stdout)["held_out"]
    assert held["same_rows"] is True
    assert held["delta_per_row"] == pytest.approx(held["b_per_row"] - held["a_per_row"])
    text = cli("compare", record["run_id"], other_id, "--results", str(results)).stdout
    assert "held out   log-likelihood per row A" in text


def test_bootstrap_replicates_resample_the_learning_rows_only(tmp_path: Path) -> None:
    # With both sections, held-out rows stay out of every replicate as well as of the
    # main search: the replicates resample the learning rows.
    from runner.pipeline import learning_part, prepare

    spec = demo_spec_with_holdout(tmp_path)
    prepared = prepare(spec)
    part = learning_part(prepared)
    learned = prepared.dataset.rows - round(HOLDOUT * prepared.dataset.rows)
    assert part.dataset.rows == learned
    order = np.random.default_rng(np.random.SeedSequence(SEED)).permutation(
        prepared.dataset.rows)
    kept = np.sort(order[round(HOLDOUT * prepared.dataset.rows):])
    assert np.array_equal(part.dataset.codes, prepared.dataset.codes[:, kept])


def test_rescoring_a_held_out_run_uses_its_learning_rows(
        stored: tuple[Path, dict, dict]) -> None:
    # Rescored under its own score, a held-out run must give back its own stored score:
    # both are computed on the learning rows of the same seeded split.
    from runner.compare.rescore import rescore

    # The data lay outside the project folder, so the record holds its name only: the
    # rescore names the file (as `compare --data` would).
    _, record, _ = stored
    assert record["data"]["path"] == "kiln-line.csv"
    again = rescore(record, record["score"]["name"],
                    data_path=Path(__file__).resolve().parents[1] / "datasets" / "kiln-line.csv")
    assert again["rows"] == record["data"]["rows_learned"]
    assert again["value"] == pytest.approx(record["score"]["value"], rel=1e-12)
