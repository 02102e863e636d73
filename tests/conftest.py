"""Shared fixtures and helpers: scores, move engine, reference searches, and the command
line (``cli`` runs ``runner.cli.main`` in this process; ``cli_process`` runs
``python -m runner`` as a separate process, kept for the few tests that need one).

pgmpy is a test-only reference library here: it is imported lazily, inside the fixtures
and helpers that need it, so tests that do not use it do not pay for its import.
"""

from __future__ import annotations

import io
import os
import subprocess
import sys
import warnings
from collections.abc import Callable, Iterable, Iterator, Sequence
from contextlib import contextmanager, redirect_stderr, redirect_stdout
from dataclasses import dataclass
from functools import cache
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from hypothesis import strategies as st

from runner.constraints import Constraints, build_constraints
from runner.graph import is_acyclic
from runner.search.engine import KINDS, Move

ParentSets = list[tuple[int, ...]]

ALL_SCORES = ("loglik", "aic", "bic", "bdeu", "k2")

ROOT = Path(__file__).resolve().parents[1]


# --------------------------------------------------------------------------- encoding


def encode(df: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """``(codes, arities, names)`` of a categorical frame, as the runner encodes data.

    Uses ``runner.data.encode_frame`` when it can be imported; otherwise encodes each
    column with a pandas Categorical over its sorted string states (the same rule:
    states are the distinct stripped strings, in sorted order).
    """
    try:
        from runner.data import encode_frame
    except ImportError:
        encode_frame = None
    if encode_frame is not None:
        dataset = encode_frame(df)
        return dataset.codes, np.asarray(dataset.arities, dtype=np.int64), list(dataset.names)
    names = [str(c) for c in df.columns]
    columns = []
    arities = []
    for name in df.columns:
        values = df[name].astype(str).str.strip()
        states = sorted(set(values))
        columns.append(pd.Categorical(values, categories=states).codes.astype(np.uint8))
        arities.append(len(states))
    codes = np.ascontiguousarray(np.vstack(columns))
    return codes, np.asarray(arities, dtype=np.int64), names


# --------------------------------------------------------------------------- graphs


def random_dag(n: int, rng: np.random.Generator, density: float | None = None) -> ParentSets:
    """A random DAG on ``n`` nodes: a random order, then each forward pair kept with
    probability ``density`` (itself drawn from [0.1, 0.6] when not given)."""
    p = rng.uniform(0.1, 0.6) if density is None else density
    order = rng.permutation(n)
    parents: list[list[int]] = [[] for _ in range(n)]
    for a in range(n):
        for b in range(a + 1, n):
            if rng.random() < p:
                parents[int(order[b])].append(int(order[a]))
    return [tuple(sorted(ps)) for ps in parents]


def parents_of_model(model: Any, names: Sequence[str]) -> ParentSets:
    """Parent index sets of a pgmpy model (or DAG) in the column order ``names``."""
    index = {n: i for i, n in enumerate(names)}
    return [tuple(sorted(index[p] for p in model.get_parents(n))) for n in names]


def pgmpy_dag(names: Sequence[str], parent_sets: Sequence[Iterable[int]]) -> Any:
    """A pgmpy ``DAG`` holding every node (isolated ones too) and the given edges."""
    from pgmpy.base import DAG

    dag = DAG()
    dag.add_nodes_from(names)
    dag.add_edges_from((names[p], names[c]) for c, ps in enumerate(parent_sets) for p in ps)
    return dag


def covered_edges(parent_sets: Sequence[Sequence[int]]) -> list[tuple[int, int]]:
    """Edges i -> j with pa(j) = pa(i) + {i}: exactly the edges whose reversal keeps the
    DAG in its Markov equivalence class (Chickering 1995)."""
    out = []
    for j, ps in enumerate(parent_sets):
        for i in ps:
            if set(ps) == set(parent_sets[i]) | {i}:
                out.append((i, j))
    return out


def apply_to_parent_sets(parent_sets: Sequence[Sequence[int]], move: Move) -> ParentSets | None:
    """The parent sets after ``move``, or None when the move does not apply (adding an
    edge that is there, deleting or reversing one that is not, or a self-loop)."""
    s, t = move.source, move.target
    if s == t:
        return None
    sets = [set(ps) for ps in parent_sets]
    if move.kind == "add":
        if s in sets[t]:
            return None
        sets[t].add(s)
    elif move.kind in ("delete", "reverse"):
        if s not in sets[t]:
            return None
        sets[t].discard(s)
        if move.kind == "reverse":
            sets[s].add(t)
    else:
        raise ValueError(move.kind)
    return [tuple(sorted(ps)) for ps in sets]


def reference_legal(
    parent_sets: Sequence[Sequence[int]], constraints: Constraints, move: Move
) -> bool:
    """Legality from first principles: the move applies, and the graph it gives is acyclic
    and honours every constraint."""
    after = apply_to_parent_sets(parent_sets, move)
    return after is not None and is_acyclic(after) and constraints.admits(after)


def every_move(n: int) -> list[Move]:
    """Every (kind, source, target) combination on ``n`` nodes, self-loops included."""
    return [Move(k, s, t) for k in KINDS for s in range(n) for t in range(n)]


def relative_gap(a: float, b: float, scale: float | None = None) -> float:
    """``|a - b|`` relative to ``scale`` (default: the larger magnitude), floored at 1."""
    reference = max(abs(a), abs(b)) if scale is None else abs(scale)
    return abs(a - b) / max(1.0, reference)


# --------------------------------------------------------------------------- random data


def dependent_codes(
    arities: Sequence[int], n_rows: int, rng: np.random.Generator
) -> np.ndarray:
    """Random categorical data (shape n_vars x n_rows, uint8, C-contiguous) with some
    dependence: each variable copies a random earlier one (mod its arity) in most rows,
    or is uniform noise, so searches find edges and scores differ between graphs."""
    n = len(arities)
    codes = np.empty((n, n_rows), dtype=np.uint8)
    order = [int(v) for v in rng.permutation(n)]  # the generating order, not column order
    for k, v in enumerate(order):
        noise = rng.integers(0, arities[v], size=n_rows)
        if k > 0 and rng.random() < 0.7:
            source = order[int(rng.integers(0, k))]
            keep = rng.random(n_rows) < rng.uniform(0.5, 0.95)
            codes[v] = np.where(keep, codes[source] % arities[v], noise)
        else:
            codes[v] = noise
    return codes


@dataclass(frozen=True)
class DataCase:
    codes: np.ndarray
    arities: np.ndarray

    @property
    def n_vars(self) -> int:
        return int(self.codes.shape[0])

    @property
    def names(self) -> list[str]:
        return [f"v{i}" for i in range(self.n_vars)]

    def __repr__(self) -> str:  # hypothesis prints this on failure
        return (f"DataCase(n_vars={self.n_vars}, rows={self.codes.shape[1]}, "
                f"arities={self.arities.tolist()}, codes={self.codes.tolist()!r})")


@st.composite
def data_cases(
    draw: st.DrawFn,
    n_vars: tuple[int, int] = (4, 7),
    states: tuple[int, int] = (2, 4),
    rows: tuple[int, int] = (50, 300),
) -> DataCase:
    """Random dependent categorical data; arities as declared (a state may be unseen)."""
    n = draw(st.integers(*n_vars))
    arities = draw(st.lists(st.integers(*states), min_size=n, max_size=n))
    n_rows = draw(st.integers(*rows))
    seed = draw(st.integers(0, 2**32 - 1))
    codes = dependent_codes(arities, n_rows, np.random.default_rng(seed))
    return DataCase(codes, np.asarray(arities, dtype=np.int64))


# --------------------------------------------------------------------------- constraints


@dataclass(frozen=True)
class ConstraintCase:
    names: list[str]
    constraints: Constraints
    description: dict[str, Any]

    def start(self) -> ParentSets:
        """The graph of the required edges alone (where the pipeline starts a search)."""
        sets: list[list[int]] = [[] for _ in self.names]
        for i, j in sorted(self.constraints.required):
            sets[j].append(i)
        return [tuple(sorted(ps)) for ps in sets]


@st.composite
def constraint_cases(draw: st.DrawFn, n: int, trivial_allowed: bool = True) -> ConstraintCase:
    """Random consistent constraints on ``n`` variables: tiers (some variables untiered),
    within-tier rule, forbidden pairs, a parent cap, and required edges drawn from the
    allowed edges so that they form a DAG within the cap."""
    names = [f"v{i}" for i in range(n)]
    if trivial_allowed and draw(st.booleans()):
        return ConstraintCase(names, build_constraints(names), {"trivial": True})
    n_tiers = draw(st.integers(0, 3))
    tier_of = draw(st.lists(st.integers(-1, n_tiers - 1), min_size=n, max_size=n))
    tiers = [[names[v] for v in range(n) if tier_of[v] == t] for t in range(n_tiers)]
    tiers = [t for t in tiers if t]
    within = draw(st.sampled_from(["allowed", "forbidden"]))
    pairs = [(a, b) for a in range(n) for b in range(n) if a != b]
    forbidden = draw(st.lists(st.sampled_from(pairs), unique=True, max_size=n))
    # Small caps are drawn often, so that searches and walks run into them.
    cap = draw(st.one_of(st.none(), st.integers(1, 2), st.integers(1, max(1, n - 1))))
    base = build_constraints(names, tiers, within, [(names[a], names[b]) for a, b in forbidden],
                             (), cap)
    allowed_pairs = [(a, b) for a, b in pairs if base.allowed[a, b]]
    wanted = draw(st.lists(st.sampled_from(allowed_pairs), unique=True, max_size=n)
                  if allowed_pairs else st.just([]))
    required: list[tuple[int, int]] = []
    sets: list[set[int]] = [set() for _ in range(n)]
    for a, b in wanted:  # keep a required edge only while the set stays a capped DAG
        if len(sets[b]) >= base.cap():
            continue
        sets[b].add(a)
        if is_acyclic(sets):
            required.append((a, b))
        else:
            sets[b].discard(a)
    constraints = build_constraints(
        names, tiers, within, [(names[a], names[b]) for a, b in forbidden],
        [(names[a], names[b]) for a, b in required], cap)
    description = {"tiers": tiers, "within_tier": within, "forbidden": forbidden,
                   "required": required, "parent_cap": cap}
    return ConstraintCase(names, constraints, description)


# --------------------------------------------------------------------------- reference networks


@dataclass(frozen=True)
class Network:
    """Data sampled from a pgmpy example network, with its encoding and true graph."""

    name: str
    frame: pd.DataFrame
    codes: np.ndarray
    arities: np.ndarray
    names: list[str]
    model: Any
    true_parents: ParentSets

    def true_edges(self) -> list[tuple[str, str]]:
        return sorted((self.names[p], self.names[c])
                      for c, ps in enumerate(self.true_parents) for p in ps)


@cache
def sampled_network(name: str, rows: int, seed: int) -> Network:
    """``rows`` rows sampled with pgmpy's own forward sampler from the example network
    ``name`` bundled with pgmpy 1.1.2, cast to strings, and encoded."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FutureWarning)
        warnings.simplefilter("ignore", DeprecationWarning)
        from pgmpy.utils import get_example_model

        model = get_example_model(name)
        frame = model.simulate(rows, seed=seed, show_progress=False).astype(str)
    # pgmpy's column order follows string hashing (it changes with PYTHONHASHSEED) while
    # the rows do not; sorted columns make the searches' tie-breaking reproducible.
    frame = frame[sorted(frame.columns)]
    codes, arities, names = encode(frame)
    frame = frame[names]
    return Network(name, frame, codes, arities, names, model, parents_of_model(model, names))


@pytest.fixture(scope="session")
def asia() -> Network:
    """5,000 rows from ASIA (Lauritzen & Spiegelhalter 1988), pgmpy's sampler, seed 7."""
    return sampled_network("asia", 5_000, 7)


@pytest.fixture(scope="session")
def alarm() -> Network:
    """10,000 rows from ALARM (Beinlich et al. 1989), pgmpy's sampler, seed 11."""
    return sampled_network("alarm", 10_000, 11)


# --------------------------------------------------------------------------- command line

#: Variables a developer's shell may set that would change what a command does.
CLI_ENV = ("DAGMILL_RESULTS", "DAGMILL_ENGINE", "DAGMILL_SIGNING_KEY", "DAGMILL_SPECS")


@dataclass(frozen=True)
class CliResult:
    """What a ``dagmill`` command returned: its exit code and its output streams (the
    attribute names of ``subprocess.CompletedProcess``)."""

    returncode: int
    stdout: str
    stderr: str


@contextmanager
def _command_environment(cwd: Path | str | None,
                         env: dict[str, str] | None) -> Iterator[None]:
    with pytest.MonkeyPatch.context() as patch:
        for name in CLI_ENV:
            patch.delenv(name, raising=False)
        for name, value in (env or {}).items():
            patch.setenv(name, value)
        if cwd is not None:
            patch.chdir(cwd)
        yield


def _main(args: Sequence[str | Path]) -> int:
    from runner.cli import main

    try:
        return main([str(a) for a in args])
    except SystemExit as exc:  # argparse's --help and --version
        return int(exc.code or 0)


CliCall = Callable[..., CliResult]
ProcessCall = Callable[..., subprocess.CompletedProcess[str]]


@pytest.fixture
def cli(capsys: pytest.CaptureFixture[str]) -> CliCall:
    """``cli(*args, cwd=None, env=None)``: ``runner.cli.main(args)`` in this process, with
    ``DAGMILL_RESULTS``/``DAGMILL_ENGINE`` unset (then ``env`` set) and ``cwd`` as the
    working directory for the call; stdout and stderr from capsys. An exception that
    escapes ``main`` (what a user would see as a traceback) fails the test."""

    def call(*args: str | Path, cwd: Path | str | None = None,
             env: dict[str, str] | None = None) -> CliResult:
        capsys.readouterr()
        with _command_environment(cwd, env):
            code = _main(args)
        out = capsys.readouterr()
        return CliResult(code, out.out, out.err)

    return call


def run_cli(*args: str | Path, cwd: Path | str | None = None,
            env: dict[str, str] | None = None) -> CliResult:
    """``cli`` for fixtures wider than a test (capsys is per test): the streams are
    redirected to strings around the call instead."""
    out, err = io.StringIO(), io.StringIO()
    with _command_environment(cwd, env), redirect_stdout(out), redirect_stderr(err):
        code = _main(args)
    return CliResult(code, out.getvalue(), err.getvalue())


@pytest.fixture(scope="session")
def cli_session() -> CliCall:
    """``run_cli`` as a fixture, for module- and session-scoped fixtures."""
    return run_cli


@pytest.fixture(scope="session")
def cli_process() -> ProcessCall:
    """``cli_process(*args, cwd=None, env=None)``: ``python -m runner *args`` in a separate
    process importing this checkout, with ``DAGMILL_RESULTS``/``DAGMILL_ENGINE`` unset
    (then ``env`` set). For the tests that need a real process: exit codes and output of
    the interpreter itself, a second process's hash seed, nothing on stderr."""

    def call(*args: str | Path, cwd: Path | str | None = None,
             env: dict[str, str] | None = None) -> subprocess.CompletedProcess[str]:
        base = {k: v for k, v in os.environ.items() if k not in CLI_ENV}
        path = os.pathsep.join(p for p in (str(ROOT), base.get("PYTHONPATH")) if p)
        # The timeout is a guard against a hang, not a speed measurement.
        return subprocess.run([sys.executable, "-m", "runner", *map(str, args)], cwd=cwd,
                              env={**base, "PYTHONPATH": path, **(env or {})},
                              capture_output=True, text=True, timeout=600)

    return call


# --------------------------------------------------------------------------- spec cases


#: A bootstrap block for the small case of ``write_case``.
BOOT = "bootstrap: {replicates: 6, seed: 4, threshold: 0.6}\n"

SMALL_SPEC = """\
name: small-line
dataset:
  path: data.csv
tiers:
  - [a, b]
  - [c]
  - [d]
required:
  - [a, c]
parent_cap: 2
score:
  name: bic
search:
  method: hill-climb
  seed: 3
"""


def write_case(folder: Path, rows: int = 2000, seed: int = 1) -> Path:
    """A small four-variable chain a -> c -> d, b -> c, sampled with numpy: ``data.csv``
    and the spec ``small.yaml`` in ``folder``; returns the spec's path."""
    rng = np.random.default_rng(seed)
    a = rng.integers(0, 2, rows)
    b = rng.integers(0, 3, rows)
    c = (a + b + (rng.random(rows) < 0.15)) % 3
    d = np.where(rng.random(rows) < 0.85, c % 2, 1 - c % 2)
    pd.DataFrame({"a": a, "b": b, "c": c, "d": d}).astype(str).map(
        lambda v: f"s{v}").to_csv(folder / "data.csv", index=False, lineterminator="\n")
    spec = folder / "small.yaml"
    spec.write_text(SMALL_SPEC)
    return spec


def demo_spec_with_holdout(folder: Path, extra: str = "", holdout: float = 0.2,
                           seed: int = 5) -> Path:
    """specs/kiln-line.yaml with its data path made absolute, a fit block and an
    evaluation block (``holdout``, ``seed``), written to ``folder/kiln-line.yaml``."""
    text = (ROOT / "specs" / "kiln-line.yaml").read_text(encoding="utf-8")
    text = text.replace("  path: ../datasets/",  # outside the tmp folder: allowed explicitly
                        f"  allow_outside: true\n  path: {ROOT / 'datasets'}/")
    text += f"fit: {{pseudo_count: 1.0}}\nevaluation: {{holdout: {holdout}, seed: {seed}}}\n"
    path = folder / "kiln-line.yaml"
    path.write_text(text + extra, encoding="utf-8")
    return path


# --------------------------------------------------------------------------- results and gates

#: The strictest gate: no score drop, no class edge change, no new or vanished state.
GATE = {"score_tolerance": 1e-9, "max_edge_changes": 0, "allow_new_states": False}


@pytest.fixture
def dagmill(cli: CliCall) -> CliCall:
    """``dagmill(*args, cwd=folder)``: ``cli`` with ``--results results``; a traceback on
    stderr fails the test."""

    def call(*args: str, cwd: Path) -> CliResult:
        done = cli(*args, "--results", "results", cwd=cwd)
        assert "Traceback" not in done.stderr
        return done

    return call


def write_numeric_case(folder: Path, rows: int = 600, seed: int = 9,
                       names: Sequence[str] = ("a", "b", "c", "d")) -> Path:
    """Four continuous columns from a linear-Gaussian chain a -> b -> c, a -> d (numpy,
    seeded), written to ``folder/data.csv`` with six decimals; returns the file."""
    rng = np.random.default_rng(seed)
    a = rng.normal(0, 1, rows)
    b = 0.9 * a + rng.normal(0, 1, rows)
    c = -0.7 * b + rng.normal(0, 0.8, rows)
    d = 1.1 * a + rng.normal(0, 1, rows)
    lines = [",".join(names)] + [",".join(f"{v:.6f}" for v in row)
                                 for row in np.vstack([a, b, c, d]).T]
    path = folder / "data.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


# --------------------------------------------------------------------------- small kiln projects


def kiln_spec_text(name: str, extra: str = "") -> str:
    """A spec of the kiln-line tiers under BDeu (search seed 2) reading
    ``../datasets/kiln.csv``, with ``extra`` YAML lines at the end."""
    return (f"name: {name}\ndataset:\n  path: ../datasets/kiln.csv\ntiers:\n"
            "  - [supplier, clay_lot, moisture, glaze_batch]\n"
            "  - [press_force, kiln_peak, dwell, cooling]\n"
            "  - [crack, warp, shade]\n  - [grade]\n"
            f"{extra}score: {{name: bdeu}}\nsearch:\n  seed: 2\n")


def write_kiln_data(folder: Path, rows: int) -> Path:
    """``folder/datasets/kiln.csv``: the first ``rows`` rows of the shipped kiln-line data
    (and an empty ``folder/specs``)."""
    (folder / "specs").mkdir(parents=True, exist_ok=True)
    (folder / "datasets").mkdir(exist_ok=True)
    lines = (ROOT / "datasets" / "kiln-line.csv").read_text(encoding="utf-8").splitlines()
    path = folder / "datasets" / "kiln.csv"
    path.write_text("\n".join(lines[: rows + 1]) + "\n")
    return path
