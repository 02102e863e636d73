"""Reading CSV files into a Dataset: every error and warning with its file, column and
line; the encoding (round trip, dtype, layout, determinism); the file hash."""

from __future__ import annotations

import hashlib
import os
from pathlib import Path
from typing import Any

import numpy as np
import pandas
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.data import (
    MISSING_SPELLINGS,
    Dataset,
    encode_frame,
    file_sha256,
    load_dataset,
)
from runner.errors import InputError, Problem

REPO = Path(__file__).resolve().parents[1]

GOOD = "colour,size,shape\nred,small,round\nblue,large,square\nred,large,round\ngreen,small,flat\n"


def write(tmp_path: Path, text: str | bytes, name: str = "data.csv") -> Path:
    path = tmp_path / name
    if isinstance(text, bytes):
        path.write_bytes(text)
    else:
        path.write_bytes(text.encode("utf-8"))
    return path


def problems_of(path: Path | str, **options: object) -> list[Problem]:
    with pytest.raises(InputError) as caught:
        load_dataset(path, **options)  # type: ignore[arg-type]
    return caught.value.problems


def only(problems: list[Problem]) -> Problem:
    assert len(problems) == 1, [p.format() for p in problems]
    return problems[0]


def decode(ds: Dataset) -> dict[str, list[str]]:
    return {name: [ds.states[i][c] for c in ds.codes[i]] for i, name in enumerate(ds.names)}


# --------------------------------------------------------------------------- file errors


def test_missing_file_names_the_file_and_path_key(tmp_path: Path) -> None:
    p = only(problems_of(tmp_path / "nowhere.csv", display_path="../data/nowhere.csv"))
    assert p.file == "../data/nowhere.csv"
    assert p.key == "dataset.path"
    assert "not found" in p.message and str(tmp_path / "nowhere.csv") in p.message


def test_key_prefix_is_used_for_path_problems(tmp_path: Path) -> None:
    p = only(problems_of(tmp_path / "nowhere.csv", key_prefix="--data"))
    assert p.key == "--data.path"
    assert p.file == str(tmp_path / "nowhere.csv")


def test_folder_is_not_a_file(tmp_path: Path) -> None:
    p = only(problems_of(tmp_path))
    assert p.file == str(tmp_path) and p.key == "dataset.path"
    assert "folder" in p.message


def test_unreadable_file(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    path = write(tmp_path, GOOD)
    original = os.open

    def refuse(target: Any, flags: int, *args: Any, **kwargs: Any) -> int:
        if Path(target) == path:
            raise PermissionError(13, "Permission denied", str(target))
        return original(target, flags, *args, **kwargs)

    # chmod would not stop root, so the refusal is simulated.
    monkeypatch.setattr(os, "open", refuse)
    p = only(problems_of(path, display_path="data.csv"))
    assert p.file == "data.csv" and p.key == "dataset.path"
    assert "permission denied" in p.message


def test_not_utf8_names_the_line(tmp_path: Path) -> None:
    path = write(tmp_path, b"a,b\nx,y\nx,caf\xe9\n")
    p = only(problems_of(path, display_path="data.csv"))
    assert p.file == "data.csv" and p.line == 3
    assert "not UTF-8" in p.message and "0xE9" in p.message


def test_utf16_is_recognised(tmp_path: Path) -> None:
    path = write(tmp_path, "a,b\nx,y\n".encode("utf-16"))
    assert "UTF-16" in only(problems_of(path)).message


@pytest.mark.parametrize("text", ["", "\n\n", "  \r\n"])
def test_empty_file(tmp_path: Path, text: str) -> None:
    p = only(problems_of(write(tmp_path, text)))
    assert p.file == str(tmp_path / "data.csv")
    assert "empty" in p.message


def test_header_only(tmp_path: Path) -> None:
    p = only(problems_of(write(tmp_path, "a,b,c\n")))
    assert p.line == 1 and "no data rows" in p.message


def test_rows_with_another_field_count_name_each_line(tmp_path: Path) -> None:
    text = "a,b,c\nx,y,z\nx,y\nx,y,z,w\n\nx,y,z\n"
    problems = problems_of(write(tmp_path, text), display_path="data.csv")
    assert [p.line for p in problems] == [3, 4, 5]
    assert all(p.file == "data.csv" for p in problems)
    assert "line 3 has 2 fields, but the header has 3 fields" in problems[0].message
    assert "line 4 has 4 fields" in problems[1].message
    assert "line 5 is blank" in problems[2].message


def test_many_ragged_lines_are_summarised(tmp_path: Path) -> None:
    text = "a,b\n" + "x\n" * 40
    problems = problems_of(write(tmp_path, text))
    assert len(problems) == 6
    assert "35 more lines" in problems[-1].message


def test_line_numbers_follow_quoted_fields_over_several_lines(tmp_path: Path) -> None:
    text = 'a,b\n"two\nlines",x\ny,x\nz,x,extra\n'
    p = only(problems_of(write(tmp_path, text)))
    assert p.line == 5 and "line 5 has 3 fields" in p.message


def test_missing_values_lines_follow_quoted_fields(tmp_path: Path) -> None:
    text = 'a,b\n"two\nlines",x\ny,\n'
    p = only(problems_of(write(tmp_path, text)))
    assert p.key == "b" and p.line == 4


def test_duplicate_column_names_give_both_positions(tmp_path: Path) -> None:
    p = only(problems_of(write(tmp_path, "a,b, a\nx,y,z\n"), display_path="data.csv"))
    assert p.file == "data.csv" and p.key == "a" and p.line == 1
    assert "'a'" in p.message and "positions 1 and 3" in p.message


def test_empty_column_name(tmp_path: Path) -> None:
    p = only(problems_of(write(tmp_path, "a,,c\nx,y,z\n")))
    assert p.line == 1 and "column 2 in the header has no name" in p.message


def test_too_many_states(tmp_path: Path) -> None:
    text = "lot_id,b\n" + "".join(f"L{i:05d},{'xy'[i % 2]}\n" for i in range(9812))
    p = only(problems_of(write(tmp_path, text), display_path="data.csv"))
    assert p.file == "data.csv" and p.key == "lot_id"
    assert p.message == (
        "column 'lot_id' has 9,812 distinct values, more than the limit of 64 "
        "(dataset.max_states); it looks like an identifier or a continuous measurement")


def test_max_states_is_configurable(tmp_path: Path) -> None:
    text = "a\n" + "".join(f"v{i}\n" for i in range(10))
    path = write(tmp_path, text)
    assert "limit of 9" in only(problems_of(path, max_states=9)).message
    assert load_dataset(path, max_states=10).arities.tolist() == [10]


def test_sha256_pin_mismatch_shows_both_hashes(tmp_path: Path) -> None:
    path = write(tmp_path, GOOD)
    actual = hashlib.sha256(GOOD.encode()).hexdigest()
    pinned = "ab" * 32
    p = only(problems_of(path, expected_sha256=pinned, display_path="data.csv"))
    assert p.file == "data.csv" and p.key == "dataset.sha256"
    assert actual in p.message and pinned in p.message
    q = only(problems_of(path, expected_sha256=pinned, key_prefix="--data"))
    assert q.key == "--data.sha256"


def test_sha256_pin_match_passes_in_any_case(tmp_path: Path) -> None:
    path = write(tmp_path, GOOD)
    actual = hashlib.sha256(GOOD.encode()).hexdigest()
    assert load_dataset(path, expected_sha256=actual.upper()).sha256 == actual


def test_missing_values_error_per_column_with_count_and_first_five_lines(
        tmp_path: Path) -> None:
    rows = [("x", "p") for _ in range(12)]
    for i in (0, 2, 3, 5, 7, 9, 11):
        rows[i] = ("x", "NA" if i % 2 else "")
    rows[4] = (" ", "q")
    text = "a,b\n" + "".join(f"{a},{b}\n" for a, b in rows)
    problems = problems_of(write(tmp_path, text), display_path="data.csv")
    assert [p.key for p in problems] == ["a", "b"]
    a, b = problems
    assert a.file == "data.csv" and a.line == 6
    assert "column 'a' has 1 missing value" in a.message and "at line 6;" in a.message
    assert "column 'b' has 7 missing values" in b.message
    assert "first at lines 2, 4, 5, 7 and 9;" in b.message and b.line == 2
    assert "drop-rows" in b.message


@pytest.mark.parametrize("spelling", MISSING_SPELLINGS)
def test_each_na_spelling_is_missing(tmp_path: Path, spelling: str) -> None:
    path = write(tmp_path, f"a,b\nx,y\n{spelling},y\nz,y\n")
    p = only(problems_of(path))
    assert p.key == "a" and p.line == 3


def test_na_spellings_are_documented() -> None:
    import runner.data

    assert set(MISSING_SPELLINGS) == {"", "NA", "N/A", "NaN", "nan", "null", "NULL", "None"}
    doc = runner.data.__doc__ or ""
    for spelling in MISSING_SPELLINGS[1:]:
        assert f"``{spelling}``" in doc


def test_declared_na_spelling_is_a_state(tmp_path: Path) -> None:
    path = write(tmp_path, "a,b\nNA,y\nyes,y\nno,y\n")
    ds = load_dataset(path, declared_states={"a": ["yes", "no", "NA"]})
    assert decode(ds)["a"] == ["NA", "yes", "no"]


def test_drop_rows_drops_and_warns(tmp_path: Path) -> None:
    text = "a,b\nx,p\n,q\ny,NULL\nx,q\ny,p\n"
    ds = load_dataset(write(tmp_path, text), missing="drop-rows", display_path="data.csv")
    assert ds.rows == 3 and ds.dropped_rows == 2
    assert decode(ds) == {"a": ["x", "x", "y"], "b": ["p", "q", "p"]}
    (w,) = [w for w in ds.warnings if w.key == "dataset.missing"]
    assert w.severity == "warning" and w.file == "data.csv"
    assert "dropped 2 of 5 data rows" in w.message


def test_drop_rows_states_come_from_kept_rows_only(tmp_path: Path) -> None:
    ds = load_dataset(write(tmp_path, "a,b\nx,p\nonly-here,\ny,q\n"), missing="drop-rows")
    assert ds.states[0] == ("x", "y")


def test_drop_rows_leaving_nothing_is_an_error(tmp_path: Path) -> None:
    p = only(problems_of(write(tmp_path, "a,b\nx,\n,y\n"), missing="drop-rows"))
    assert "every one of the 2 data rows" in p.message


def test_value_outside_declared_states(tmp_path: Path) -> None:
    text = "supplier,b\neast,x\nwest,x\nnorth,x\nwest,y\nWest,y\nwest,y\nwest,y\n"
    p = only(problems_of(write(tmp_path, text), display_path="data.csv",
                         declared_states={"supplier": ["east", "north", "south"]}))
    assert p.file == "data.csv" and p.key == "supplier" and p.line == 3
    assert "'west' at lines 3, 5 and 7" in p.message
    assert "'West' at line 6" in p.message
    assert "dataset.columns.supplier.states" in p.message


def test_every_problem_is_reported_together(tmp_path: Path) -> None:
    # c: text with too many values (numbers would be read as a continuous column)
    text = "a,b,c\n,x,id1\ny,x,id2\n" + "".join(f"y,x,id{i}\n" for i in range(3, 80))
    problems = problems_of(write(tmp_path, text), expected_sha256="0" * 64,
                           declared_states={"b": ["p"]})
    assert sorted(str(p.key) for p in problems) == ["a", "b", "c", "dataset.sha256"]


# --------------------------------------------------------------------------- warnings


def test_single_state_column_is_kept_with_a_warning(tmp_path: Path) -> None:
    ds = load_dataset(write(tmp_path, "a,b\nx,same\ny,same\n"), display_path="data.csv")
    assert ds.states[1] == ("same",)
    (w,) = ds.warnings
    assert w.severity == "warning" and w.key == "b" and w.file == "data.csv"
    assert "same value 'same' in every row" in w.message


def test_declared_state_never_seen_is_kept_with_a_warning(tmp_path: Path) -> None:
    ds = load_dataset(write(tmp_path, "supplier,b\nnorth,x\neast,y\n"),
                      declared_states={"supplier": ["east", "north", "south"]})
    assert ds.states[0] == ("east", "north", "south")
    assert ds.codes[0].tolist() == [1, 0]
    (w,) = ds.warnings
    assert w.severity == "warning" and w.key == "supplier"
    assert "'south' never occurs" in w.message


def test_declared_states_for_unknown_columns_are_left_to_the_spec_check(
        tmp_path: Path) -> None:
    ds = load_dataset(write(tmp_path, GOOD), declared_states={"nope": ["a"]})
    assert ds.names == ("colour", "size", "shape")


# --------------------------------------------------------------------------- encoding


def test_round_trip_and_sorted_states(tmp_path: Path) -> None:
    ds = load_dataset(write(tmp_path, GOOD))
    frame = pandas.read_csv(tmp_path / "data.csv", dtype=str)
    assert ds.names == ("colour", "size", "shape")
    assert ds.states == (("blue", "green", "red"), ("large", "small"),
                         ("flat", "round", "square"))
    assert decode(ds) == {c: frame[c].tolist() for c in frame.columns}
    assert ds.rows == 4 and ds.arities.dtype == np.int64
    assert ds.arities.tolist() == [3, 2, 3]
    assert ds.index("size") == 1
    with pytest.raises(KeyError, match="colour"):
        ds.index("weight")


def test_states_sort_as_strings(tmp_path: Path) -> None:
    ds = load_dataset(write(tmp_path, "n\n9\n10\n2\n10\n"))
    assert ds.states[0] == ("10", "2", "9")


def test_whitespace_is_stripped_from_values_and_names(tmp_path: Path) -> None:
    ds = load_dataset(write(tmp_path, " a , b\n x ,y \nx,  y\n"))
    assert ds.names == ("a", "b")
    assert decode(ds) == {"a": ["x", "x"], "b": ["y", "y"]}


def test_bom_and_crlf_and_trailing_blank_lines(tmp_path: Path) -> None:
    ds = load_dataset(write(tmp_path, "\ufeffa,b\r\nx,y\r\nz,y\r\n\r\n\r\n"))
    assert ds.names == ("a", "b") and ds.rows == 2
    assert decode(ds) == {"a": ["x", "z"], "b": ["y", "y"]}


def test_values_are_never_numbers(tmp_path: Path) -> None:
    ds = load_dataset(write(tmp_path, "a\n01\n1\n1.0\n"))
    assert ds.states[0] == ("01", "1", "1.0")


def test_codes_layout(tmp_path: Path) -> None:
    ds = load_dataset(write(tmp_path, GOOD))
    assert ds.codes.shape == (3, 4)
    assert ds.codes.flags["C_CONTIGUOUS"]
    assert not ds.codes.flags["WRITEABLE"]


@pytest.mark.parametrize(("distinct", "dtype"), [(2, np.uint8), (256, np.uint8),
                                                 (257, np.uint16)])
def test_dtype_choice(tmp_path: Path, distinct: int, dtype: type) -> None:
    text = "wide,narrow\n" + "".join(f"s{i:04d},{'ab'[i % 2]}\n" for i in range(distinct))
    ds = load_dataset(write(tmp_path, text), max_states=1000)
    assert ds.codes.dtype == dtype
    assert ds.arities.tolist() == [distinct, 2]
    assert decode(ds)["wide"] == [f"s{i:04d}" for i in range(distinct)]


def test_same_file_gives_same_codes_and_states(tmp_path: Path) -> None:
    rng = np.random.default_rng(3)
    text = "a,b\n" + "".join(f"{a},{b}\n" for a, b in rng.choice(list("pqrs"), (500, 2)))
    first = load_dataset(write(tmp_path, text, "one.csv"))
    second = load_dataset(write(tmp_path, text, "two.csv"))
    assert first.states == second.states and first.sha256 == second.sha256
    assert np.array_equal(first.codes, second.codes)
    assert first.codes.dtype == second.codes.dtype


def test_states_do_not_depend_on_row_order(tmp_path: Path) -> None:
    a = load_dataset(write(tmp_path, "a\nz\nm\na\n", "one.csv"))
    b = load_dataset(write(tmp_path, "a\na\nz\nm\n", "two.csv"))
    assert a.states == b.states == (("a", "m", "z"),)


def test_file_and_frame_agree(tmp_path: Path) -> None:
    ds = load_dataset(write(tmp_path, GOOD))
    frame = pandas.read_csv(tmp_path / "data.csv", dtype=str)
    other = encode_frame(frame, path="x", sha256="s")
    assert other.states == ds.states and np.array_equal(other.codes, ds.codes)
    assert (other.path, other.sha256) == ("x", "s")


def test_take_rows(tmp_path: Path) -> None:
    ds = load_dataset(write(tmp_path, GOOD))
    sub = ds.take_rows(np.array([3, 0, 0]))
    assert sub.states == ds.states and sub.names == ds.names and sub.sha256 == ds.sha256
    assert decode(sub)["colour"] == ["green", "red", "red"]
    assert sub.codes.flags["C_CONTIGUOUS"] and sub.codes.dtype == ds.codes.dtype
    masked = ds.take_rows(np.array([True, False, True, False]))
    assert decode(masked)["shape"] == ["round", "round"]
    with pytest.raises(ValueError):
        ds.take_rows(np.array([4]))


def test_frame_missing_values_name_rows() -> None:
    frame = pandas.DataFrame({"a": ["x", None, "y"], "b": ["p", "q", float("nan")]})
    with pytest.raises(InputError) as caught:
        encode_frame(frame)
    messages = [p.message for p in caught.value.problems]
    assert "at row 2;" in messages[0] and "at row 3;" in messages[1]
    ds = encode_frame(frame, missing="drop-rows")
    assert ds.rows == 1 and ds.dropped_rows == 2


def test_frame_duplicate_and_empty_columns() -> None:
    frame = pandas.DataFrame([["x", "y", "z"]], columns=["a", " a", ""])
    with pytest.raises(InputError) as caught:
        encode_frame(frame, path="frame")
    messages = sorted(p.message for p in caught.value.problems)
    assert any("positions 1 and 2" in m for m in messages)
    assert any("column 3 in the frame has no name" in m for m in messages)


LABEL = st.text(alphabet="abcxyz01 -_é", min_size=1, max_size=4).filter(
    lambda s: s == s.strip() and s not in MISSING_SPELLINGS)


@settings(max_examples=60, deadline=None)
@given(st.integers(1, 4).flatmap(lambda k: st.lists(
    st.lists(LABEL, min_size=k, max_size=k), min_size=1, max_size=30)))
def test_encode_frame_round_trip(table: list[list[str]]) -> None:
    columns = [f"c{j}" for j in range(len(table[0]))]
    frame = pandas.DataFrame(table, columns=columns, dtype=object)
    ds = encode_frame(frame, max_states=1000)
    assert ds.names == tuple(columns)
    assert decode(ds) == {c: frame[c].tolist() for c in columns}
    for j, states in enumerate(ds.states):
        assert list(states) == sorted(set(frame[columns[j]]))
    assert ds.codes.dtype == np.uint8 and ds.codes.flags["C_CONTIGUOUS"]


# --------------------------------------------------------------------------- hashing


def test_hash_is_sha256_of_the_bytes_and_changes_with_one_byte(tmp_path: Path) -> None:
    path = write(tmp_path, GOOD)
    expected = hashlib.sha256(path.read_bytes()).hexdigest()
    assert file_sha256(path) == expected == load_dataset(path).sha256
    changed = write(tmp_path, GOOD.replace("flat", "flaT"), "changed.csv")
    assert file_sha256(changed) != expected
    assert load_dataset(changed).sha256 != expected


def test_file_sha256_streams_large_files(tmp_path: Path) -> None:
    data = bytes(range(256)) * 9000  # a little over 2 MiB
    path = write(tmp_path, data, "big.bin")
    assert file_sha256(path) == hashlib.sha256(data).hexdigest()


def test_frame_hash_is_empty_by_default() -> None:
    assert encode_frame(pandas.DataFrame({"a": ["x", "y"]})).sha256 == ""


# --------------------------------------------------------------------------- the demo data


def test_kiln_line_data_loads() -> None:
    path = REPO / "datasets" / "kiln-line.csv"
    if not path.exists():
        pytest.skip("datasets/kiln-line.csv is not in this checkout")
    ds = load_dataset(path)
    assert ds.rows == 20_000 and len(ds.names) == 12
    assert ds.warnings == () and ds.dropped_rows == 0
    assert ds.codes.dtype == np.uint8
