"""Column kinds, bins for discrete scores, stored edges reused on a new data drop, and the
bad inputs of continuous data (exit 2, a clear message, nothing stored)."""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.binning import bin_edges, bin_labels, cut, cut_points, discretise
from runner.cli import main
from runner.data import load_dataset
from runner.store import VOLATILE_KEYS

# --------------------------------------------------------------------------- edges


def test_quantile_edges_are_numpy_quantiles() -> None:
    """numpy.quantile (reference library, linear interpolation): the quartiles of 1..100
    are 25.75, 50.5 and 75.25; of 0..8 they are 2, 4 and 6 (hand-checkable)."""
    sample = np.arange(1, 101, dtype=float)
    assert bin_edges(sample, 4, "quantile").tolist() == [1.0, 25.75, 50.5, 75.25, 100.0]
    assert bin_edges(np.arange(9.0), 4, "quantile").tolist() == [0, 2, 4, 6, 8]
    rng = np.random.default_rng(0)
    x = rng.lognormal(size=1001)
    for bins in (2, 3, 5, 10):
        expected = np.quantile(x, np.linspace(0, 1, bins + 1))
        assert np.array_equal(bin_edges(x, bins, "quantile"), expected)
        counts = np.bincount(cut(x, cut_points(expected)), minlength=bins)
        assert counts.max() - counts.min() <= 2  # about equal shares


def test_equal_width_edges() -> None:
    x = np.array([3.0, 0.0, 10.0, 7.5])
    assert bin_edges(x, 5, "equal-width").tolist() == [0.0, 2.0, 4.0, 6.0, 8.0, 10.0]
    assert cut(x, cut_points(bin_edges(x, 5, "equal-width"))).tolist() == [1, 0, 4, 3]


def test_cut_rule_and_values_outside_the_range() -> None:
    cuts = [1.0, 2.0]
    # left-closed bins; below the first cut and at/above the last cut: the end bins
    assert cut(np.array([-50.0, 0.99, 1.0, 1.5, 2.0, 99.0]), cuts).tolist() == [0, 0, 1, 1, 2, 2]
    assert bin_labels(cuts) == ("< 1", "[1, 2)", ">= 2")
    binned = discretise(np.array([5.0, -1.0, 0.5]), 3, "quantile", edges=[0.0, 1.0, 2.0, 3.0])
    assert binned.codes.tolist() == [2, 0, 0] and (binned.below, binned.above) == (1, 1)


def test_tied_edges_give_fewer_bins() -> None:
    x = np.array([0.0] * 70 + list(np.linspace(1, 2, 30)))
    binned = discretise(x, 4, "quantile")
    assert len(binned.labels) == 2 and binned.cuts[0] > 0  # the tied 0 quantiles collapse
    # the 0.75 quantile lies between the 75th and 76th values (numpy's linear rule)
    assert binned.cuts[0] == np.quantile(x, 0.75)
    assert np.bincount(binned.codes).tolist() == [75, 25]
    with pytest.raises(ValueError):
        bin_edges(x, 1)


@settings(max_examples=60, deadline=None)
@given(values=st.lists(st.floats(-1e6, 1e6, allow_nan=False), min_size=1, max_size=200),
       bins=st.integers(2, 12), method=st.sampled_from(["quantile", "equal-width"]))
def test_bins_are_ordered_and_cover_every_value(values: list[float], bins: int,
                                                method: str) -> None:
    x = np.array(values)
    binned = discretise(x, bins, method)
    assert len(binned.edges) == bins + 1 and list(binned.edges) == sorted(binned.edges)
    assert 1 <= len(binned.labels) <= bins and len(set(binned.labels)) == len(binned.labels)
    assert binned.codes.min() >= 0 and binned.codes.max() < len(binned.labels)
    order = np.argsort(x, kind="stable")
    assert (np.diff(binned.codes[order]) >= 0).all()  # larger values, later bins
    assert binned.below == binned.above == 0  # the edges span their own data
    # cut again at the stored edges: the same codes
    assert np.array_equal(discretise(x, bins, method, edges=binned.edges).codes, binned.codes)


# --------------------------------------------------------------------------- kinds


def test_kinds_are_declared_or_inferred(tmp_path: Path) -> None:
    rows = [f"{i * 0.37:.2f},{i % 3},{'xyz'[i % 3]},{i}" for i in range(100)]
    path = tmp_path / "d.csv"
    path.write_text("m,small,text,declared\n" + "\n".join(rows) + "\n")
    data = load_dataset(path, declared_kinds={"declared": "continuous"})
    assert data.kinds == ("continuous", "discrete", "discrete", "continuous")
    assert data.kind_reasons == ("inferred-numeric-many-values", "inferred-numeric-few-values",
                                 "inferred-text", "declared")
    assert data.values is not None and data.values.dtype == np.float64
    assert data.values[0, 3] == pytest.approx(1.11) and np.isnan(data.values[1]).all()
    assert data.codes.dtype == np.uint8 and data.states[0] == ()
    # a purely discrete file: no float matrix at all
    plain = tmp_path / "p.csv"
    plain.write_text("a,b\nx,1\ny,2\n")
    assert load_dataset(plain).values is None


def test_text_in_a_continuous_column_names_column_value_and_line(tmp_path: Path) -> None:
    path = tmp_path / "d.csv"
    path.write_text("t,u\n1.5,x\n2.5,y\nhot,x\n3.0,y\n")
    with pytest.raises(Exception) as info:
        load_dataset(path, declared_kinds={"t": "continuous"})
    problem = info.value.problems[0]  # type: ignore[attr-defined]
    assert problem.key == "t" and problem.line == 4
    assert "'hot'" in problem.message and "line 4" in problem.message


def test_missing_values_follow_the_missing_rule(tmp_path: Path) -> None:
    path = tmp_path / "d.csv"
    path.write_text("t,u\n1.5,x\nNA,y\n2.5,x\n3.5,y\n")
    with pytest.raises(Exception, match="missing value"):
        load_dataset(path, declared_kinds={"t": "continuous"})
    data = load_dataset(path, declared_kinds={"t": "continuous"}, missing="drop-rows")
    assert data.rows == 3 and data.values is not None
    assert data.values[0].tolist() == [1.5, 2.5, 3.5]


# --------------------------------------------------------------------------- end to end


def drop(rows: int, seed: int, shift: float = 0.0) -> str:
    """A mixed file: a continuous measurement and two discrete columns depending on it."""
    rng = np.random.default_rng(seed)
    temp = rng.normal(1180 + shift, 15, rows)
    crack = np.where(temp + rng.normal(0, 10, rows) > 1190, "yes", "no")
    grade = np.where((crack == "yes") | (rng.random(rows) < 0.1), "second", "first")
    return "temp,crack,grade\n" + "".join(
        f"{t:.2f},{c},{g}\n" for t, c, g in zip(temp, crack, grade, strict=True))


BINNED_SPEC = """\
name: binned
dataset:
  path: data.csv
  columns:
    temp: {kind: continuous, bins: 4, binning: quantile}
score: {name: bic}
gate: {max_edge_changes: 3, score_tolerance: 1.0}
"""


def cli(args: list[str], tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> tuple[int, str]:
    old = Path.cwd()
    os.chdir(tmp_path)
    try:
        code = main(args)
    finally:
        os.chdir(old)
    out = capsys.readouterr()
    return code, out.out + out.err


def only_run(results: Path, spec: str, exclude: set[str] | None = None) -> dict:
    runs = sorted((results / spec / "runs").iterdir())
    picked = [r for r in runs if r.name not in (exclude or set())]
    assert len(picked) == 1
    return json.loads((picked[0] / "run.json").read_text())


def test_a_new_drop_is_cut_at_the_stored_edges(tmp_path: Path,
                                               capsys: pytest.CaptureFixture[str]) -> None:
    (tmp_path / "spec.yaml").write_text(BINNED_SPEC)
    (tmp_path / "data.csv").write_text(drop(3000, seed=1))
    (tmp_path / "new.csv").write_text(drop(3000, seed=2, shift=20.0))  # hotter drop
    code, out = cli(["run", "spec.yaml", "--json"], tmp_path, capsys)
    assert code == 0, out
    first = json.loads(out)["runs"][0]["run_id"]
    baseline = only_run(tmp_path / "results", "binned")
    temp = baseline["data"]["columns"]["temp"]
    x = np.loadtxt(tmp_path / "data.csv", delimiter=",", skiprows=1, usecols=0)
    assert temp["kind"] == "continuous" and temp["kind_reason"] == "declared"
    assert temp["binning"]["edges"] == np.quantile(x, [0, 0.25, 0.5, 0.75, 1]).tolist()
    assert temp["binning"]["source"] == "computed from this data"
    assert len(temp["states"]) == 4
    assert cli(["pin", first], tmp_path, capsys)[0] == 0

    # check on the same file: the stored edges are the computed ones, same inputs
    code, out = cli(["check", "spec.yaml", "--json"], tmp_path, capsys)
    report = json.loads(out)["checks"][0]
    assert code == 0 and report["same_inputs"], out

    # check on a new drop: cut at the baseline's edges, so the states do not change
    code, out = cli(["check", "spec.yaml", "--data", "new.csv", "--json"], tmp_path, capsys)
    report = json.loads(out)["checks"][0]
    assert not report["columns"]["changed"], out
    checked = json.loads((tmp_path / report["folder"] / "run.json").read_text())
    stored = checked["data"]["columns"]["temp"]["binning"]
    assert stored["edges"] == temp["binning"]["edges"]
    assert stored["source"] == f"baseline run {first}"
    code, out = cli(["show", report["run_id"]], tmp_path, capsys)
    assert code == 0 and f"4 quantile bins, edges baseline run {first}" in out
    assert stored["above_range"] > 0  # the hotter drop leaves the stored range: end bin
    new_x = np.loadtxt(tmp_path / "new.csv", delimiter=",", skiprows=1, usecols=0)
    assert stored["above_range"] == int((new_x > temp["binning"]["edges"][-1]).sum())

    # run --data reuses them too; a plain run on the new file computes its own
    code, out = cli(["run", "spec.yaml", "--data", "new.csv", "--json"], tmp_path, capsys)
    again = json.loads(out)["runs"][0]
    assert code == 0 and again["twin"] is not None and again["twin"]["identical"]
    (tmp_path / "data.csv").write_text((tmp_path / "new.csv").read_text())
    code, out = cli(["run", "spec.yaml", "--json"], tmp_path, capsys)
    fresh = json.loads((tmp_path / json.loads(out)["runs"][0]["folder"] / "run.json").read_text())
    assert fresh["data"]["columns"]["temp"]["binning"]["edges"] == np.quantile(
        new_x, [0, 0.25, 0.5, 0.75, 1]).tolist()
    assert fresh["input_sha256"] != checked["input_sha256"]


def test_gaussian_run_is_byte_identical_on_rerun(tmp_path: Path,
                                                 capsys: pytest.CaptureFixture[str]) -> None:
    rng = np.random.default_rng(8)
    x = rng.normal(size=500)
    y = 0.5 * x + rng.normal(size=500)
    z = -y + rng.normal(size=500)
    (tmp_path / "data.csv").write_text("x,y,z\n" + "".join(
        f"{a:.5f},{b:.5f},{c:.5f}\n" for a, b, c in zip(x, y, z, strict=True)))
    (tmp_path / "spec.yaml").write_text(
        "name: g\ndataset: {path: data.csv}\nscore: {name: bge, alpha_mu: 2.0}\n")
    folders = []
    for _ in range(2):
        code, out = cli(["run", "spec.yaml", "--json"], tmp_path, capsys)
        assert code == 0, out
        folders.append(tmp_path / json.loads(out)["runs"][0]["folder"])
    texts = []
    for folder in folders:
        record = json.loads((folder / "run.json").read_text())
        assert record["score"]["bge_prior"] == {"alpha_mu": 2.0, "alpha_w": 5.0,
                                                "prior_scale": 2.0 * 1.0 / 3.0}
        for key in VOLATILE_KEYS:
            record.pop(key, None)
        texts.append(json.dumps(record, sort_keys=True))
        texts.append((folder / "trace.csv").read_text())
    assert texts[0] == texts[2] and texts[1] == texts[3]
    assert len(json.loads(texts[0])["edges"]) == 2


# --------------------------------------------------------------------------- bad input

NUMBERS = "".join(f"{i * 0.1:.1f},{(i * 37) % 89 * 0.5:.1f},{'pq'[i % 2]}\n" for i in range(90))
MIXED = "m,n,label\n" + NUMBERS
CONTINUOUS = "m,n\n" + "".join(line.rsplit(",", 1)[0] + "\n" for line in NUMBERS.splitlines())
CONSTANT = "m,k\n" + "".join(f"{i * 0.1:.1f},3.0\n" for i in range(90))
TEXT = "m,t\n" + "".join(f"{i * 0.1:.1f},{'warm' if i == 40 else i}\n" for i in range(90))

BAD_CASES: dict[str, tuple[str, str, list[str]]] = {
    "one bin": ("name: b\ndataset:\n  path: data.csv\n  columns:\n    m: {kind: continuous, "
                "bins: 1}\n", MIXED, ["spec.yaml:5", "dataset.columns.m.bins", "at least 2"]),
    "gaussian on text": ("name: b\ndataset: {path: data.csv}\nscore: {name: gaussian-bic}\n",
                         "a,b\n" + "x,p\ny,q\n" * 30,
                         ["score.name", "'a'", "'b'", "discrete", "its values are text"]),
    "mixing under gaussian": ("name: b\ndataset: {path: data.csv}\nscore: {name: bge}\n",
                              MIXED, ["spec.yaml:3", "'label'", "declare bins",
                                      "drop the discrete column"]),
    "continuous without bins": ("name: b\ndataset: {path: data.csv}\nscore: {name: bdeu}\n",
                                MIXED, ["dataset.columns.m", "'m'", "'n'", "declare bins",
                                        "drop the column"]),
    "constant column": ("name: b\ndataset:\n  path: data.csv\n  columns:\n    k: "
                        "{kind: continuous}\nscore: {name: gaussian-bic}\n", CONSTANT,
                        ["data.csv", "'k'", "same value 3.0", "singular"]),
    "collinear columns": ("name: b\ndataset: {path: data.csv}\nscore: {name: gaussian-bic}\n",
                          "m,n,s\n" + "".join(
                              f"{i * 0.1:.1f},{(i * 37) % 89 * 0.5:.1f},"
                              f"{i * 0.1 + (i * 37) % 89 * 0.5:.1f}\n" for i in range(90)),
                          ["'m', 'n', 's'", "linearly dependent", "singular"]),
    "text in a continuous column": (
        "name: b\ndataset:\n  path: data.csv\n  columns:\n    t: {kind: continuous}\n"
        "score: {name: gaussian-bic}\n", TEXT, ["data.csv:42", "'t'", "'warm'", "line 42"]),
    "bge alpha_w too small": ("name: b\ndataset: {path: data.csv}\n"
                              "score: {name: bge, alpha_w: 2.5}\n", CONTINUOUS,
                              ["spec.yaml:3", "score.alpha_w", "above n + 1 = 3"]),
    "binning without bins": ("name: b\ndataset:\n  path: data.csv\n  columns:\n    m: "
                             "{kind: continuous, binning: quantile}\n", MIXED,
                             ["dataset.columns.m.binning", "needs 'bins'"]),
}


@pytest.mark.parametrize("case", sorted(BAD_CASES))
def test_bad_continuous_input_exits_2_and_stores_nothing(
        tmp_path: Path, capsys: pytest.CaptureFixture[str], case: str) -> None:
    spec, data, fragments = BAD_CASES[case]
    (tmp_path / "spec.yaml").write_text(spec)
    (tmp_path / "data.csv").write_text(data)
    for command in ("validate", "run"):
        code, out = cli([command, "spec.yaml"], tmp_path, capsys)
        assert code == 2, (command, out)
        assert "Traceback" not in out
        for fragment in fragments:
            assert fragment in out, (command, fragment, out)
    assert not (tmp_path / "results").exists()


def test_bge_keys_with_another_score_are_a_warning(tmp_path: Path,
                                                  capsys: pytest.CaptureFixture[str]) -> None:
    (tmp_path / "spec.yaml").write_text(
        "name: b\ndataset: {path: data.csv}\nscore: {name: gaussian-bic, alpha_mu: 3}\n")
    (tmp_path / "data.csv").write_text(CONTINUOUS)
    code, out = cli(["validate", "spec.yaml"], tmp_path, capsys)
    assert code == 0 and "score.alpha_mu" in out and "only applies to score 'bge'" in out


def test_take_rows_keeps_the_float_matrix(tmp_path: Path) -> None:
    """A resample (bootstrap) of continuous data carries its values along."""
    path = tmp_path / "d.csv"
    path.write_text("m,n\n" + "".join(f"{i * 0.5},{i % 3}\n" for i in range(80)))
    data = load_dataset(path)
    picked = data.take_rows(np.array([3, 3, 79]))
    assert picked.values is not None and picked.values[0].tolist() == [1.5, 1.5, 39.5]
    assert picked.kinds == data.kinds and picked.codes[1].tolist() == [0, 0, 1]
