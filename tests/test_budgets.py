"""Budgets that hold: the long fills of the engines stop in bounded slices, a run that
learned nothing says so, ``bootstrap.budget`` bounds all replicates together, and the
exact search refuses, before allocating, tables larger than the memory available.

Elapsed times are not asserted here (they are measured by ``python -m benchmarks
--budget``); the tests hold the stop reasons and the work done, and drive the budget's
clock by hand where time decides.
"""

from __future__ import annotations

import json
import time
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest

from runner.constraints import build_constraints
from runner.pipeline import learn_bootstrap, prepare, spec_budget
from runner.scores import build_scorer
from runner.search import budget as budget_module
from runner.search.budget import FILL_SLICE, Budget
from runner.search.engine import MoveEngine
from runner.search.exact import exact_plan, exact_search, memory_estimate
from runner.search.ges import greedy_equivalence_search
from runner.search.hill_climb import hill_climb
from runner.search.order import order_search
from runner.search.parent_sets import SearchRefused
from runner.search.restarts import with_restarts
from runner.store import VOLATILE_KEYS, list_runs
from tests.conftest import BOOT, CliCall, Network, write_case


def wide_codes(columns: int, rows: int, seed: int = 7) -> tuple[np.ndarray, np.ndarray]:
    """Independent fair binary columns (vars x rows) and their arities."""
    codes = np.random.default_rng(seed).integers(0, 2, size=(columns, rows)).astype(np.uint8)
    return codes, np.full(columns, 2, dtype=np.int64)


def wide_csv(folder: Path, columns: int, rows: int, seed: int = 7) -> Path:
    codes, _ = wide_codes(columns, rows, seed)
    letters = np.array(["x", "y"])[codes.T]
    header = ",".join(f"v{i:02d}" for i in range(columns))
    path = folder / "wide.csv"
    path.write_text(header + "\n" + "\n".join(",".join(r) for r in letters.tolist()) + "\n",
                    encoding="utf-8")
    return path


class StepClock:
    """A clock that moves ``step`` seconds each time it is read: time is then counted in
    reads, so a ``max_seconds`` stop falls at the same place on every machine."""

    def __init__(self, step: float) -> None:
        self.now = 0.0
        self.step = step
        self.reads = 0

    def perf_counter(self) -> float:
        self.now += self.step
        self.reads += 1
        return self.now


@pytest.fixture
def step_clock(monkeypatch: pytest.MonkeyPatch) -> Iterator[StepClock]:
    clock = StepClock(0.01)
    monkeypatch.setattr(budget_module, "time", clock)
    yield clock


# --------------------------------------------------------------------------- fills


@pytest.mark.slow
def test_a_wide_fill_stops_at_max_seconds_far_below_every_pair() -> None:
    """300 binary columns x 200,000 rows: filling every pair family takes several seconds;
    with max_seconds 1 hill climbing and GES stop in their first fill, on the start graph."""
    codes, arities = wide_codes(300, 200_000)
    n = codes.shape[0]
    constraints = build_constraints([f"v{i}" for i in range(n)])
    for search in ("hill-climb", "ges"):
        scorer = build_scorer("bic", codes, arities)
        budget = Budget(max_seconds=1.0)
        if search == "ges":
            out = greedy_equivalence_search(scorer, constraints, budget)
        else:
            out = hill_climb(MoveEngine(scorer, constraints, budget=budget), budget)
        assert out.stop_reason == "max_seconds" and not out.converged
        assert out.steps == 0 and all(ps == () for ps in out.parent_sets)
        assert out.evaluations < n * (n - 1) // 2, search


def test_the_fill_reads_the_clock_every_slice(step_clock: StepClock) -> None:
    """With a clock moving 0.01 s a read and max_seconds 0.1, the fill stops within about
    ten slices of family scores: far below n (n - 1), the start graph kept whole."""
    codes, arities = wide_codes(40, 200)
    n = codes.shape[0]
    scorer = build_scorer("bic", codes, arities)
    budget = Budget(max_seconds=0.1, started=0.0)
    engine = MoveEngine(scorer, build_constraints([f"v{i}" for i in range(n)]),
                        budget=budget)
    assert engine.stopped == "max_seconds"
    assert scorer.evaluations <= n + (10 + 1) * FILL_SLICE  # the base families, 11 slices
    assert np.isfinite(engine.family).all()
    assert engine.score == scorer.total([() for _ in range(n)])
    out = hill_climb(engine, budget)
    assert out.stop_reason == "max_seconds" and out.steps == 0 and out.trace == []


def test_a_restart_whose_fill_is_cut_short_applies_no_kick(step_clock: StepClock) -> None:
    codes, arities = wide_codes(12, 300)
    names = [f"v{i}" for i in range(12)]
    scorer = build_scorer("bic", codes, arities)
    constraints = build_constraints(names)
    budget = Budget(max_seconds=1e6, started=0.0)
    engines: list[MoveEngine] = []

    def make(ps: object) -> MoveEngine:
        if engines:  # the second engine's fill runs out of time
            budget.max_seconds = step_clock.now
        engines.append(MoveEngine(scorer, constraints, ps, budget))  # type: ignore[arg-type]
        return engines[-1]

    out, runs = with_restarts(hill_climb, make, [() for _ in names], budget,
                              np.random.default_rng(0), restarts=3)
    assert len(engines) == 2 and engines[1].stopped == "max_seconds"
    assert out.stop_reason == "max_seconds" and len(runs) == 1
    assert not any(r.move.startswith("kick") for r in out.trace)


def test_max_evaluations_stops_every_fill_at_the_same_place() -> None:
    codes, arities = wide_codes(30, 400)
    n = codes.shape[0]
    constraints = build_constraints([f"v{i}" for i in range(n)])
    seen = []
    for search in ("hill-climb", "hill-climb", "ges", "ges"):
        scorer = build_scorer("bic", codes, arities)
        budget = Budget(max_evaluations=200)
        if search == "ges":
            out = greedy_equivalence_search(scorer, constraints, budget)
        else:
            out = hill_climb(MoveEngine(scorer, constraints, budget=budget), budget)
        assert out.stop_reason == "max_evaluations" and out.steps == 0
        # the slice's overshoot, then the start graph's remaining family scores
        assert 200 <= out.evaluations < 200 + FILL_SLICE + n < n * (n - 1)
        seen.append((search, out.evaluations, out.score))
    assert seen[0] == seen[1] and seen[2] == seen[3]


def test_order_stops_inside_a_variable_and_keeps_the_best_so_far() -> None:
    codes, arities = wide_codes(10, 300)
    names = [f"v{i}" for i in range(10)]
    scorer = build_scorer("bic", codes, arities)
    out, counts = order_search(scorer, build_constraints(names), list(range(10)),
                               Budget(max_evaluations=40), names)
    assert out.stop_reason == "max_evaluations" and not out.converged
    assert sum(counts.values()) < 40 + FILL_SLICE  # the old check came per variable only
    assert out.score == scorer.total(out.parent_sets)


def test_exact_search_checks_the_clock_in_its_dynamic_programme(
        step_clock: StepClock) -> None:
    """The last clock reads of an exact search are those of its sink passes (step 3), which
    scores nothing: a limit that falls there stops the search, not optimal."""
    codes, arities = wide_codes(8, 300)
    names = [f"v{i}" for i in range(8)]
    constraints = build_constraints(names, parent_cap=1)
    full, _ = exact_search(build_scorer("bic", codes, arities), constraints,
                           Budget(max_seconds=1e6, started=0.0), names)
    assert full.stop_reason == "proven_optimal"
    # one read per candidate set (8 variables x 8 sets under cap 1), per pass of step 2
    # (8 variables x 8 bits) and per variable of each layer in step 3 (8 x 8), and the
    # outcome's seconds
    reads = step_clock.reads
    assert reads == 64 + 64 + 64 + 1
    for last in (reads - 2, reads - 9):  # inside the last layers of subsets
        step_clock.now = 0.0
        budget = Budget(max_seconds=last * 0.01 - 0.005, started=0.0)
        out, _ = exact_search(build_scorer("bic", codes, arities), constraints, budget, names)
        assert out.stop_reason == "max_seconds" and not out.converged
        assert all(ps == () for ps in out.parent_sets)


# --------------------------------------------------------------------------- the command


SPEC = """\
name: wide
dataset: {{path: wide.csv}}
score: {{name: bic}}
search:
  method: {method}
  seed: 1
  budget: {{max_evaluations: 60}}
"""


@pytest.mark.parametrize("method", ["hill-climb", "ges"])
def test_a_run_stopped_in_its_fill_is_stored_twice_the_same_and_says_it_learned_nothing(
        tmp_path: Path, dagmill: CliCall, method: str) -> None:
    wide_csv(tmp_path, 30, 300)
    (tmp_path / "wide.yaml").write_text(SPEC.format(method=method), encoding="utf-8")
    texts = []
    for _ in range(2):
        done = dagmill("run", "wide.yaml", cwd=tmp_path)
        assert done.returncode == 0, done.stderr
        assert ("search.budget.max_evaluations: warning: wide: the budget ran out before the "
                "first move (max_evaluations 60): the stored graph is the start graph; "
                "raise search.budget.max_evaluations") in done.stderr
    for folder in list_runs(tmp_path / "results", "wide"):
        record = json.loads((folder / "run.json").read_text())
        assert record["search"]["stop_reason"] == "max_evaluations"
        assert record["search"]["evaluations"] < 30 * 29  # stopped inside the fill
        assert record["edges"] == []
        assert any("budget ran out before the first move" in w for w in record["warnings"])
        texts.append(json.dumps({k: v for k, v in record.items() if k not in VOLATILE_KEYS},
                                sort_keys=True) + (folder / "trace.csv").read_text())
    assert len(texts) == 2 and texts[0] == texts[1]


def test_a_run_within_its_budget_gives_no_warning(tmp_path: Path, dagmill: CliCall) -> None:
    write_case(tmp_path)
    done = dagmill("run", "small.yaml", cwd=tmp_path)
    assert done.returncode == 0 and "budget ran out" not in done.stderr


# --------------------------------------------------------------------------- bootstrap


def test_bootstrap_budget_is_a_key_and_older_specs_keep_their_hash(tmp_path: Path) -> None:
    spec = write_case(tmp_path)
    spec.write_text(spec.read_text() + BOOT, encoding="utf-8")
    plain = prepare(spec)
    from runner.spec import normalised_spec, spec_sha256

    assert "budget" not in normalised_spec(plain.spec)["bootstrap"]
    text = spec.read_text().replace("threshold: 0.6}", "threshold: 0.6, budget: "
                                    "{max_seconds: 30}}")
    spec.write_text(text, encoding="utf-8")
    timed = prepare(spec)
    assert normalised_spec(timed.spec)["bootstrap"]["budget"] == {"max_seconds": 30.0}
    assert spec_sha256(timed.spec) != spec_sha256(plain.spec)


def test_a_replicate_gets_at_most_the_time_left(tmp_path: Path) -> None:
    spec = prepare(write_case(tmp_path)).spec
    assert spec_budget(spec).max_seconds == spec.search.budget.max_seconds
    assert spec_budget(spec, time.time() - 5).max_seconds == 0.0
    left = spec_budget(spec, time.time() + 3).max_seconds
    assert left is not None and 2 < left <= 3
    assert spec_budget(spec, time.time() + 10**6).max_seconds == spec.search.budget.max_seconds


def test_replicates_after_the_total_deadline_stop_and_count_as_not_converged(
        tmp_path: Path) -> None:
    spec = write_case(tmp_path)
    spec.write_text(spec.read_text() + BOOT, encoding="utf-8")
    free = learn_bootstrap(prepare(spec))
    assert free is not None and free["not_converged"] == 0
    spec.write_text(spec.read_text().replace("threshold: 0.6}", "threshold: 0.6, budget: "
                                             "{max_seconds: 0.000001}}"), encoding="utf-8")
    capped = learn_bootstrap(prepare(spec))
    assert capped is not None and capped["replicates"] == 6
    assert capped["not_converged"] == 6


# --------------------------------------------------------------------------- exact memory


EXACT = """\
name: exact-mem
dataset: {path: data.csv}
score: {name: bic}
search: {method: exact}
"""


def test_memory_estimate_counts_the_tables() -> None:
    # (16 n + 33) 2^n bytes plus 200 per cached candidate score
    assert memory_estimate(20) == (16 * 20 + 33) * 2**20
    assert memory_estimate(25) / 2**30 == pytest.approx(13.53, abs=0.01)
    assert memory_estimate(10, 100) == (16 * 10 + 33) * 2**10 + 200 * 100


def test_exact_plan_refuses_more_than_the_memory_available(
        monkeypatch: pytest.MonkeyPatch) -> None:
    names = [f"v{i}" for i in range(6)]
    constraints = build_constraints(names)
    monkeypatch.setattr("runner.search.exact.available_memory", lambda: 1000)
    with pytest.raises(SearchRefused) as refused:
        exact_plan(constraints, names)
    assert refused.value.key == "search.method"
    wide = [f"v{i}" for i in range(25)]  # the raised limits of a 13 GiB MemoryError
    monkeypatch.setattr("runner.search.exact.available_memory", lambda: 2 * 2**30)
    with pytest.raises(SearchRefused) as refused:
        exact_plan(build_constraints(wide, parent_cap=3), wide, variable_limit=25)
    assert ("exact search over 25 variables needs about 13.5 GiB of memory for its tables "
            "(2^25 subsets, 58,125 candidate parent sets; search.max_variables 25) but this "
            "machine has about 2.0 GiB available") in refused.value.message
    monkeypatch.setattr("runner.search.exact.available_memory", lambda: None)
    assert len(exact_plan(constraints, names)) == 6  # unknown memory: no refusal


def test_exact_search_refuses_at_validate_and_run_before_allocating(
        tmp_path: Path, cli: CliCall, dagmill: CliCall, monkeypatch: pytest.MonkeyPatch
) -> None:
    write_case(tmp_path)
    (tmp_path / "exact.yaml").write_text(EXACT, encoding="utf-8")
    monkeypatch.setattr("runner.search.exact.available_memory", lambda: 1024)

    class NoTables:
        """numpy as the exact search module sees it: any use is an allocation too many."""

        def __getattr__(self, name: str) -> object:
            raise AssertionError(f"the exact search used numpy.{name} before refusing")

    monkeypatch.setattr("runner.search.exact.np", NoTables())
    expected = ("exact.yaml:4: search.method: exact search over 4 variables needs less than "
                "0.001 GiB of memory for its tables (2^4 subsets, 32 candidate parent sets; "
                "search.max_variables 20) but this machine has less than 0.001 GiB available")
    checked = cli("validate", "exact.yaml", cwd=tmp_path)
    assert checked.returncode == 2 and expected in checked.stdout, checked.stdout
    done = dagmill("run", "exact.yaml", cwd=tmp_path)
    assert done.returncode == 2 and expected in done.stderr + done.stdout
    assert list_runs(tmp_path / "results", "exact-mem") == []


@pytest.mark.parametrize("spent", [0, 3])
def test_max_steps_holds_over_restarts_and_earlier_spending(spent: int, asia: Network) -> None:
    """Restarts share one step budget with what was spent before the call (the earlier
    rounds of structural EM): the runs together apply exactly ``max_steps - spent`` moves
    when there is enough to do, neither more nor fewer (a check that counted the last
    run's steps twice stopped the restarts early), and the earlier spending is left as
    it was for the caller."""
    scorer = build_scorer("bic", asia.codes, asia.arities)
    constraints = build_constraints(asia.names)
    budget = Budget(max_steps=14)
    budget.spent_steps = spent

    def make(ps: object) -> MoveEngine:
        return MoveEngine(scorer, constraints, ps, budget)  # type: ignore[arg-type]

    out, runs = with_restarts(hill_climb, make, [() for _ in asia.names], budget,
                              np.random.default_rng(0), restarts=5, kick_moves=1)
    assert out.steps == sum(r.steps for r in runs) == 14 - spent  # kicks are not steps
    assert out.stop_reason == "max_steps" and len(runs) >= 2
    assert budget.spent_steps == spent
