"""The fitted model of a linear-Gaussian run (model.json) and its held-out fit, checked
against statsmodels OLS and scipy's normal density as references."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest
from conftest import CliCall

ROOT = Path(__file__).resolve().parents[1]
HOLDOUT, SEED = 0.25, 3


def gauss_spec(folder: Path, extra: str = "") -> Path:
    """specs/kiln-gauss.yaml with an absolute data path and optional extra sections."""
    text = (ROOT / "specs" / "kiln-gauss.yaml").read_text(encoding="utf-8")
    text = text.replace("  path: ../datasets/",  # outside the tmp folder: allowed explicitly
                        f"  allow_outside: true\n  path: {ROOT / 'datasets'}/")
    path = folder / "kiln-gauss.yaml"
    path.write_text(text + extra, encoding="utf-8")
    return path


def run_json(cli: CliCall, spec: Path, results: Path, *extra: str) -> tuple[Path, dict, dict]:
    out = cli("run", str(spec), "--results", str(results), "--json", *extra)
    assert out.returncode == 0, out.stderr
    folder = Path(json.loads(out.stdout)["runs"][0]["folder"])
    return (folder, json.loads((folder / "run.json").read_text()),
            json.loads((folder / "model.json").read_text()))


def columns() -> dict[str, np.ndarray]:
    with open(ROOT / "datasets" / "kiln-gauss.csv", newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    return {name: np.array([float(r[name]) for r in rows]) for name in rows[0]}


@pytest.fixture(scope="module")
def held_out_run(tmp_path_factory: pytest.TempPathFactory,
                 cli_session: CliCall) -> tuple[Path, dict, dict]:
    folder = tmp_path_factory.mktemp("gauss-model")
    spec = gauss_spec(folder, f"evaluation: {{holdout: {HOLDOUT}, seed: {SEED}}}\n")
    return run_json(cli_session, spec, folder / "results")


def learning_and_held(n: int) -> tuple[np.ndarray, np.ndarray]:
    # the documented split rule, written out: a permutation from SeedSequence(seed), the
    # first round(holdout * n) rows held out
    order = np.random.default_rng(np.random.SeedSequence(SEED)).permutation(n)
    size = round(HOLDOUT * n)
    return np.sort(order[size:]), np.sort(order[:size])


def test_model_parameters_equal_statsmodels_ols(held_out_run: tuple[Path, dict, dict]) -> None:
    # reference: statsmodels OLS on the learning rows; its ssr / nobs is the ML variance
    import statsmodels.api as sm

    _, record, model = held_out_run
    data = columns()
    learn, _ = learning_and_held(len(next(iter(data.values()))))
    assert model["estimator"] == "least-squares"
    assert record["model"]["sha256"]
    for child, entry in model["variables"].items():
        assert entry["kind"] == "continuous"
        parents = entry["parents"]
        design = np.column_stack([np.ones(learn.size)] + [data[p][learn] for p in parents])
        fit = sm.OLS(data[child][learn], design).fit()
        assert entry["intercept"] == pytest.approx(fit.params[0], rel=1e-9, abs=1e-9)
        for k, p in enumerate(parents):
            assert entry["coefficients"][p] == pytest.approx(fit.params[k + 1], rel=1e-9,
                                                             abs=1e-12)
        assert entry["residual_variance"] == pytest.approx(fit.ssr / fit.nobs, rel=1e-9)


def test_held_out_log_density_recomputed_with_scipy(
        held_out_run: tuple[Path, dict, dict]) -> None:
    # reference: scipy.stats.norm.logpdf row by row from model.json's parameters; the
    # empty graph from each column's learning-row mean and ML variance (numpy)
    from scipy.stats import norm

    _, record, model = held_out_run
    data = columns()
    learn, held = learning_and_held(len(next(iter(data.values()))))
    learned = 0.0
    empty = 0.0
    for child, entry in model["variables"].items():
        mean = entry["intercept"] + sum(b * data[p][held]
                                        for p, b in entry["coefficients"].items())
        learned += norm.logpdf(data[child][held], mean,
                               np.sqrt(entry["residual_variance"])).sum()
        empty += norm.logpdf(data[child][held], data[child][learn].mean(),
                             data[child][learn].std()).sum()
    ll = record["evaluation"]["log_likelihood"]
    assert record["evaluation"]["rows_held_out"] == held.size
    assert ll["learned"] == pytest.approx(learned, rel=1e-9)
    assert ll["empty"] == pytest.approx(empty, rel=1e-9)
    assert ll["learned_per_row"] > ll["empty_per_row"]  # the structure helps on new rows


def test_show_and_report_of_a_gaussian_run(held_out_run: tuple[Path, dict, dict],
                                           tmp_path: Path, cli: CliCall) -> None:
    folder, record, _ = held_out_run
    results = folder.parents[2]
    show = cli("show", record["run_id"], "--results", str(results))
    assert show.returncode == 0, show.stderr
    assert "log density per held-out row" in show.stdout
    out = tmp_path / "report.html"
    report = cli("report", record["run_id"], "--results", str(results), "--out", str(out))
    assert report.returncode == 0, report.stderr
    assert "residual" in out.read_text(encoding="utf-8").lower()


def test_bootstrap_of_a_gaussian_spec(tmp_path: Path, cli: CliCall) -> None:
    spec = gauss_spec(tmp_path, "bootstrap: {replicates: 4, seed: 2}\n")
    _, record, _ = run_json(cli, spec, tmp_path / "results", "--workers", "1")
    shares = record["bootstrap"]["frequencies"]
    assert shares and all(0.0 <= r["directed"] <= r["class"] <= r["adjacent"] <= 1.0
                          for r in shares)
