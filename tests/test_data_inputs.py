"""Data inputs from the spec's ``dataset`` block: the spellings that mean missing
(``missing_values``), column selection (``use`` / ``drop``), default bins for continuous
columns (``bins`` / ``binning``) and Parquet files; their bad inputs exit 2 naming the
file, key and column."""

from __future__ import annotations

import hashlib
import re
import sys
import tempfile
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from conftest import CliCall
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.data import MISSING_SPELLINGS, load_dataset
from runner.errors import InputError
from runner.pipeline import prepare


def _case(folder: Path, dataset: str, data: str, *, extra: str = "",
          name: str = "inputs", data_file: str = "data.csv") -> Path:
    """A spec ``spec.yaml`` whose dataset block is ``path: data.csv`` plus ``dataset``
    (indented lines), and the data file."""
    (folder / data_file).write_text(data, encoding="utf-8")
    lines = "".join(f"  {line}\n" for line in dataset.splitlines() if line)
    spec = folder / "spec.yaml"
    spec.write_text(f"name: {name}\ndataset:\n  path: {data_file}\n{lines}"
                    f"score: {{name: bic}}\nsearch: {{method: hill-climb, seed: 1}}\n{extra}",
                    encoding="utf-8")
    return spec


# --------------------------------------------------------------------------- missing_values


# Benchmark tables can name a category "None" (a condition absent, not an unknown value).
NONE_CATEGORY = "treatment,outcome\nNone,good\ndrug,bad\nNone,bad\ndrug,good\nNone,good\n"


def test_a_category_named_none_is_a_state_when_the_list_omits_it(tmp_path: Path) -> None:
    spec = _case(tmp_path, 'missing_values: ["", NA]', NONE_CATEGORY)
    prepared = prepare(spec)
    data = prepared.dataset
    assert data.states[data.index("treatment")] == ("None", "drug")
    assert data.rows == 5
    # by default (the spellings as before) "None" is missing, and the rows are refused
    assert "None" in MISSING_SPELLINGS
    with pytest.raises(InputError, match="missing value"):
        prepare(_case(tmp_path, "", NONE_CATEGORY))


def test_a_custom_list_of_spellings(tmp_path: Path) -> None:
    text = "a,b\nx,p\n?,q\ny, -- \nNA,p\n"
    (tmp_path / "d.csv").write_text(text, encoding="utf-8")
    data = load_dataset(tmp_path / "d.csv", missing="drop-rows", missing_values=["?", "--"])
    assert data.rows == 2  # the rows with "?" and " -- " are dropped
    assert data.states[0] == ("NA", "x")  # "NA" is an ordinary value under this list
    spec = _case(tmp_path, 'missing: drop-rows\nmissing_values: ["?", "--"]', text)
    assert prepare(spec).dataset.rows == 2


@pytest.mark.parametrize("value", ["NA", "[1, 2]", "[NA, [x]]", "{a: b}"])
def test_missing_values_not_a_list_of_strings(tmp_path: Path, cli: CliCall,
                                              value: str) -> None:
    spec = _case(tmp_path, f"missing_values: {value}", NONE_CATEGORY)
    result = cli("validate", spec)
    assert result.returncode == 2
    said = result.stdout + result.stderr
    assert f"{spec}:4: dataset.missing_values" in said
    assert "Traceback" not in said


# --------------------------------------------------------------------------- use / drop


WIDE = ("id,a,b,c\n" + "".join(f"{i},{'xy'[i % 2]},{'pq'[i % 3 == 0]},{'uv'[i % 5 == 0]}\n"
                               for i in range(40)))


@pytest.mark.parametrize("quoted", [False, True])
@pytest.mark.parametrize("selection", ["use: [c, a]", "drop: [id, b]"])
def test_use_and_drop_select_columns(tmp_path: Path, selection: str, quoted: bool) -> None:
    text = WIDE.replace(",p,", ',"p",') if quoted else WIDE  # quoted: the csv module's path
    prepared = prepare(_case(tmp_path, selection, text))
    assert prepared.dataset.names == ("a", "c")  # the file's order
    whole = load_dataset(tmp_path / "data.csv")
    assert prepared.dataset.sha256 == whole.sha256  # the whole file's bytes
    for name in ("a", "c"):
        assert np.array_equal(prepared.dataset.codes[prepared.dataset.index(name)],
                              whole.codes[whole.index(name)])


def test_an_unselected_column_is_not_encoded(tmp_path: Path) -> None:
    """The left-out column would be refused (an identifier with 400 distinct values, above
    max_states): dropped, it is never encoded."""
    rows = "".join(f"{i},{'xy'[i % 2]}\n" for i in range(400))
    (tmp_path / "d.csv").write_text("id,a\n" + rows, encoding="utf-8")
    with pytest.raises(InputError, match="'id'"):
        load_dataset(tmp_path / "d.csv", declared_kinds={"id": "discrete"})
    data = load_dataset(tmp_path / "d.csv", declared_kinds={"id": "discrete"}, drop=["id"])
    assert data.names == ("a",) and data.rows == 400


@pytest.mark.parametrize("key", ["use", "drop"])
def test_an_unknown_column_in_use_or_drop(tmp_path: Path, cli: CliCall, key: str) -> None:
    spec = _case(tmp_path, f"{key}: [a, bb]", WIDE)
    result = cli("validate", spec)
    said = result.stdout + result.stderr
    assert result.returncode == 2 and "Traceback" not in said
    assert f"dataset.{key} names 'bb', which is not a column of data.csv; did you mean 'b'?" \
        in said


def test_use_and_drop_together(tmp_path: Path, cli: CliCall) -> None:
    spec = _case(tmp_path, "use: [a, b]\ndrop: [id]", WIDE)
    result = cli("validate", spec)
    said = result.stdout + result.stderr
    assert result.returncode == 2
    assert f"{spec}:5: dataset.drop" in said and "not both" in said


# --------------------------------------------------------------------------- default bins


def _mixed_table(rows: int = 600, seed: int = 4) -> str:
    """x -> y (continuous, 600 distinct values each), y -> z (text)."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=rows)
    y = 0.8 * x + rng.normal(scale=0.6, size=rows)
    z = np.where(y + rng.normal(scale=0.5, size=rows) > 0, "high", "low")
    return "x,y,z\n" + "".join(f"{a:.6f},{b:.6f},{c}\n" for a, b, c in zip(x, y, z, strict=True))


@pytest.mark.parametrize("binning", ["quantile", "equal-width"])
def test_default_bins_equal_explicit_lines(tmp_path: Path, binning: str) -> None:
    import runner

    table = _mixed_table()
    (tmp_path / "one").mkdir()
    (tmp_path / "two").mkdir()
    default = _case(tmp_path / "one", f"bins: 3\nbinning: {binning}", table)
    explicit = _case(tmp_path / "two", "columns:\n"
                     f"  x: {{kind: continuous, bins: 3, binning: {binning}}}\n"
                     f"  y: {{kind: continuous, bins: 3, binning: {binning}}}", table)
    a, b = runner.learn(default).record, runner.learn(explicit).record

    def columns(record: dict[str, Any]) -> dict[str, Any]:  # kind_reason says who declared
        return {n: {k: v for k, v in c.items() if k != "kind_reason"}
                for n, c in record["data"]["columns"].items()}

    assert columns(a) == columns(b)
    assert a["data"]["columns"]["x"]["kind_reason"] == "inferred-numeric-many-values"
    assert a["data"]["columns"]["x"]["binning"]["method"] == binning
    assert len(a["data"]["columns"]["y"]["states"]) == 3
    assert a["edges"] == b["edges"] and a["edges"]
    assert a["score"]["value"] == b["score"]["value"]


def test_a_column_entry_of_its_own_wins_over_the_default(tmp_path: Path) -> None:
    spec = _case(tmp_path, "bins: 3\ncolumns:\n  x: {kind: continuous, bins: 5}",
                 _mixed_table())
    columns = prepare(spec).columns
    assert columns is not None
    assert columns["x"]["binning"]["bins"] == 5 and columns["y"]["binning"]["bins"] == 3


def test_without_default_bins_a_continuous_column_is_refused(tmp_path: Path) -> None:
    with pytest.raises(InputError, match=re.escape("dataset.bins: 4 for every continuous column")):
        prepare(_case(tmp_path, "", _mixed_table()))


# --------------------------------------------------------------------------- Parquet


def _frame(rows: int = 800, seed: int = 11) -> pd.DataFrame:
    """a -> b -> c (text), b -> n (an integer with few values), b -> m (a measurement)."""
    rng = np.random.default_rng(seed)
    a = rng.choice(["east", "north", "south"], size=rows)
    b = np.where((a == "east") ^ (rng.random(rows) < 0.2), "hot", "cold")
    c = np.where((b == "hot") ^ (rng.random(rows) < 0.15), "crack", "sound")
    n = np.where(b == "hot", 2, 1) + (rng.random(rows) < 0.2)
    m = np.where(b == "hot", 3.0, 0.0) + rng.normal(size=rows)
    return pd.DataFrame({"a": a, "b": b, "c": c, "n": n, "m": np.round(m, 6)})


def test_the_same_table_as_csv_and_parquet_learns_the_same_graph(tmp_path: Path) -> None:
    """pyarrow (reference writer) writes the Parquet file; pandas writes the CSV."""
    import runner

    frame = _frame()
    frame.to_parquet(tmp_path / "data.parquet")
    spec = _case(tmp_path, "bins: 3", frame.to_csv(index=False, lineterminator="\n"))
    from_csv = runner.learn(spec).record
    from_parquet = runner.learn(spec, data=tmp_path / "data.parquet").record
    assert from_parquet["edges"] == from_csv["edges"] and len(from_csv["edges"]) >= 3
    assert from_parquet["score"]["value"] == from_csv["score"]["value"]
    assert from_parquet["data"]["columns"] == from_csv["data"]["columns"]
    assert from_parquet["data"]["rows"] == from_csv["data"]["rows"] == len(frame)
    # the data hash is the sha256 of the Parquet file's bytes
    digest = hashlib.sha256((tmp_path / "data.parquet").read_bytes()).hexdigest()
    assert from_parquet["data"]["sha256"] == digest
    # the spec naming the Parquet file reads it the same way
    parquet_spec = _case(tmp_path, "bins: 3", "", data_file="unused.csv")
    parquet_spec.write_text(parquet_spec.read_text().replace("unused.csv", "data.parquet"))
    assert prepare(parquet_spec).dataset.sha256 == digest


def test_dictionary_columns_keep_their_category_order(tmp_path: Path) -> None:
    frame = pd.DataFrame({
        "grade": pd.Categorical(["mid", "low", "high", "mid", "None"],
                                categories=["low", "mid", "high", "None", "unused"]),
        "shift": ["day", "night", "day", None, "night"],
    })
    frame.to_parquet(tmp_path / "t.parquet")
    data = load_dataset(tmp_path / "t.parquet", missing="drop-rows")
    grade = data.index("grade")
    # the file's category order, unused categories kept; "None" is a category here
    assert data.states[grade] == ("low", "mid", "high", "None", "unused")
    assert data.kind_reason(grade) == "categorical"
    assert data.codes[grade].tolist() == [1, 0, 2, 3]  # the null "shift" row dropped
    assert data.states[data.index("shift")] == ("day", "night")  # text: sorted
    # states the spec declares win
    declared = load_dataset(tmp_path / "t.parquet", missing="drop-rows",
                            declared_states={"grade": ["high", "mid", "low", "None"]})
    assert declared.states[declared.index("grade")] == ("high", "mid", "low", "None")
    # the same column in CSV has no category order: its states are sorted
    frame.to_csv(tmp_path / "t.csv", index=False)
    as_text = load_dataset(tmp_path / "t.csv", missing="drop-rows", missing_values=[""])
    assert as_text.states[as_text.index("grade")] == ("None", "high", "low", "mid")


def test_a_file_that_is_not_parquet(tmp_path: Path, cli: CliCall) -> None:
    spec = _case(tmp_path, "", NONE_CATEGORY, data_file="data.parquet")  # CSV text
    result = cli("validate", spec)
    said = result.stdout + result.stderr
    assert result.returncode == 2 and "Traceback" not in said
    assert "data.parquet: dataset.path: is not a Parquet file" in said


def test_parquet_without_pyarrow(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    _frame(20).to_parquet(tmp_path / "t.parquet")
    monkeypatch.setitem(sys.modules, "pyarrow", None)  # import pyarrow raises ImportError
    monkeypatch.setitem(sys.modules, "pyarrow.parquet", None)
    with pytest.raises(InputError, match=re.escape("pip install 'dagmill[parquet]'")):
        load_dataset(tmp_path / "t.parquet")


def test_parquet_use_and_drop(tmp_path: Path) -> None:
    _frame(50).to_parquet(tmp_path / "t.parquet")
    assert load_dataset(tmp_path / "t.parquet", use=["c", "a"]).names == ("a", "c")
    with pytest.raises(InputError, match="did you mean 'c'"):
        load_dataset(tmp_path / "t.parquet", drop=["cc"])


# --------------------------------------------------------------------------- properties


_CELLS = st.one_of(st.sampled_from(["a", "b", "None", "NA", " c "]),
                   st.integers(-3, 3).map(str))


@settings(max_examples=30, deadline=None)
@given(width=st.integers(2, 5), data=st.data())
def test_a_selected_column_reads_as_it_does_in_the_whole_file(width: int,
                                                             data: st.DataObject) -> None:
    """Property: selecting columns changes nothing about the columns kept (codes, states,
    kinds), nor the data hash; ``drop`` is the complement of ``use``."""
    rows = data.draw(st.lists(st.lists(_CELLS, min_size=width, max_size=width),
                              min_size=1, max_size=12))
    names = [f"v{j}" for j in range(width)]
    kept = data.draw(st.lists(st.sampled_from(names), min_size=1, unique=True))
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "d.csv"
        path.write_text(",".join(names) + "\n" + "".join(",".join(r) + "\n" for r in rows),
                        encoding="utf-8")
        whole = load_dataset(path, missing_values=[])
        used = load_dataset(path, missing_values=[], use=kept)
        dropped = load_dataset(path, missing_values=[],
                               drop=[n for n in names if n not in kept] or None)
    order = [n for n in names if n in kept]
    for part in (used, dropped):
        assert list(part.names) == order and part.sha256 == whole.sha256
        for name in order:
            i, j = part.index(name), whole.index(name)
            assert part.states[i] == whole.states[j] and part.kind(i) == whole.kind(j)
            assert np.array_equal(part.codes[i], whole.codes[j])


@settings(max_examples=25, deadline=None)
@given(frame=st.integers(1, 15).flatmap(lambda n: st.fixed_dictionaries({
    "t": st.lists(st.sampled_from(["x", "y", "z"]), min_size=n, max_size=n),
    "i": st.lists(st.integers(-5, 5), min_size=n, max_size=n),
    "f": st.lists(st.sampled_from([0.1, 0.25, -1.5, 2.0, 1e-7]), min_size=n, max_size=n),
    "b": st.lists(st.booleans(), min_size=n, max_size=n),
})))
def test_parquet_reads_as_the_same_table_in_csv(frame: dict[str, list[Any]]) -> None:
    """Property: a table written by pandas as CSV and by pyarrow as Parquet loads with the
    same states, kinds and codes."""
    table = pd.DataFrame(frame)
    with tempfile.TemporaryDirectory() as folder:
        table.to_csv(Path(folder) / "t.csv", index=False)
        table.to_parquet(Path(folder) / "t.parquet")
        csv = load_dataset(Path(folder) / "t.csv")
        parquet = load_dataset(Path(folder) / "t.parquet")
    assert csv.names == parquet.names and csv.states == parquet.states
    assert csv.kinds == parquet.kinds
    assert np.array_equal(csv.codes, parquet.codes)


def test_default_bins_are_ignored_with_a_warning_under_mixed_scores(tmp_path: Path) -> None:
    spec = _case(tmp_path, "bins: 3", _mixed_table())
    spec.write_text(spec.read_text().replace("name: bic", "name: cg-bic"))
    prepared = prepare(spec)
    assert prepared.dataset.kind(prepared.dataset.index("x")) == "continuous"
    assert any(w.key == "dataset.bins" and "ignores it" in w.message
               for w in prepared.warnings)
