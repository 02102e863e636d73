"""A data path that is a folder of Parquet partitions: one table, rows in file-name order,
hashed over the partitions' hashes (``runner.data.partitions_sha256``)."""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import pandas as pd
import pytest

import runner
from runner.data import load_dataset
from runner.errors import InputError
from tests.conftest import CliCall, write_case

pa = pytest.importorskip("pyarrow")
pq = pytest.importorskip("pyarrow.parquet")


def _partitioned(frame: pd.DataFrame, folder: Path, rows_per_part: int) -> list[Path]:
    folder.mkdir(parents=True, exist_ok=True)
    parts = []
    for i, start in enumerate(range(0, len(frame), rows_per_part)):
        part = folder / f"part-{i:03d}.parquet"
        pq.write_table(pa.Table.from_pandas(frame.iloc[start:start + rows_per_part],
                                            preserve_index=False), part)
        parts.append(part)
    return parts


@pytest.fixture
def case(tmp_path: Path) -> tuple[Path, pd.DataFrame]:
    spec = write_case(tmp_path, rows=1500)
    return spec, pd.read_csv(tmp_path / "data.csv", dtype=str, keep_default_na=False)


def test_a_folder_reads_as_the_concatenated_table(case: tuple[Path, pd.DataFrame],
                                                   tmp_path: Path) -> None:
    """Codes, states and kinds of the folder equal those of the CSV and of one Parquet
    file of the same rows; the hash is the sha256 of the sorted partition digests, each
    with a line end (the definition in the README, computed here with hashlib)."""
    _, frame = case
    parts = _partitioned(frame, tmp_path / "parts", 400)
    whole = tmp_path / "whole.parquet"
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), whole)
    folder, single, text = (load_dataset(tmp_path / "parts"), load_dataset(whole),
                            load_dataset(tmp_path / "data.csv"))
    assert folder.rows == single.rows == text.rows == 1500
    assert (folder.codes == single.codes).all() and (folder.codes == text.codes).all()
    assert folder.states == single.states == text.states
    digests = sorted(hashlib.sha256(p.read_bytes()).hexdigest() for p in parts)
    assert folder.sha256 == hashlib.sha256("".join(d + "\n" for d in digests).encode()
                                           ).hexdigest()


def test_renamed_partitions_give_the_same_hash_graph_and_score(
        case: tuple[Path, pd.DataFrame], tmp_path: Path) -> None:
    """Reordering the partitions (renaming them) changes the rows' order, not the hash,
    and not the learned graph or its score (counts do not depend on row order)."""
    spec, frame = case
    parts = _partitioned(frame, tmp_path / "parts", 500)
    other = tmp_path / "renamed"
    other.mkdir()
    for i, part in enumerate(reversed(parts)):
        shutil.copy(part, other / f"z-{i}.parquet")
    first = runner.learn(spec, tmp_path / "parts").record
    second = runner.learn(spec, other).record
    assert first["data"]["sha256"] == second["data"]["sha256"]
    assert first["edges"] == second["edges"]
    assert first["score"]["value"] == second["score"]["value"]
    assert first["edges"] == runner.learn(spec).record["edges"]


def test_bad_folders_are_bad_input(case: tuple[Path, pd.DataFrame], tmp_path: Path) -> None:
    spec, frame = case
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError) as caught:
        runner.learn(spec, tmp_path / "empty")
    assert "holds no .parquet" in caught.value.problems[0].message
    parts = _partitioned(frame, tmp_path / "mixed", 1000)
    pq.write_table(pa.Table.from_pandas(frame[["b", "a", "c", "d"]].iloc[:10],
                                        preserve_index=False), parts[0].parent / "part-9.parquet")
    with pytest.raises(InputError) as caught:
        runner.learn(spec, tmp_path / "mixed")
    problem = caught.value.problems[-1]
    assert problem.file.endswith("part-9.parquet") and "same columns" in problem.message


def test_the_command_learns_from_a_folder(case: tuple[Path, pd.DataFrame], tmp_path: Path,
                                          cli: CliCall) -> None:
    """``dagmill run`` on a spec whose ``dataset.path`` is the folder stores the folder's
    hash as ``data.sha256``."""
    import json

    spec, frame = case
    parts = _partitioned(frame, tmp_path / "parts", 700)
    spec.write_text(spec.read_text().replace("path: data.csv", "path: parts"))
    done = cli("run", spec, "--results", tmp_path / "results")
    assert done.returncode == 0, done.stderr
    (stored,) = (tmp_path / "results").rglob("run.json")
    record = json.loads(stored.read_text())
    digests = sorted(hashlib.sha256(p.read_bytes()).hexdigest() for p in parts)
    assert record["data"]["sha256"] == hashlib.sha256(
        "".join(d + "\n" for d in digests).encode()).hexdigest()  # the README's definition
