"""dagmill from Python: learn, save, load, compare and check, as the command does.

The public names (also importable from :mod:`runner` and as ``import dagmill``):

* :func:`learn`: a spec (a YAML file, or a dict checked by the same schema with the same
  messages) and data (the spec's ``dataset.path``, another file, or a
  :class:`pandas.DataFrame`) -> a :class:`LearnedNetwork`;
* :class:`LearnedNetwork`: the graph as a :class:`networkx.DiGraph`, its CPDAG, the score
  and the family scores, the fitted tables as :class:`pandas.DataFrame` objects, the
  linear-Gaussian families, the bootstrap edge table, the record, and
  :meth:`LearnedNetwork.save`, which stores exactly the record ``dagmill run`` stores;
* :func:`load_run`: a stored run as a :class:`LearnedNetwork`;
* :func:`compare_runs`: what ``dagmill compare --json`` prints for two runs;
* :func:`check`: learn, store and hold against the baseline, as ``dagmill check``;
  :func:`hold_against_baseline` holds an already stored run;
* :func:`canonical_csv`: the bytes a DataFrame is read (and hashed) as.

A DataFrame is read through the CSV reader itself, as the bytes of its canonical CSV
serialisation (:func:`canonical_csv`), so the same rules apply to it as to a file (states,
kinds, missing values) and its ``data.sha256`` is the sha256 of those bytes: the same as a
file's when the file holds exactly those bytes.

Example (the shipped kiln-line scenario, in a temporary folder):

>>> import tempfile
>>> from pathlib import Path
>>> import pandas
>>> import runner
>>> from runner.demo import write_demo
>>> folder = Path(tempfile.mkdtemp())
>>> spec = write_demo(folder)      # specs/kiln-line.yaml and datasets/kiln-line.csv
>>> net = runner.learn(spec)
>>> net.graph.has_edge("kiln_peak", "crack")    # required by the spec
True
>>> net.graph.nodes["crack"]["tier"], net.graph.nodes["crack"]["states"]
(3, ['no', 'yes'])
>>> abs(sum(net.family_scores.values()) - net.score) < 1e-6
True
>>> table = net.tables["crack"]           # rows: parent states; columns: crack's states
>>> "kiln_peak" in table.index.names, list(table.columns)
(True, ['no', 'yes'])
>>> bool((table.sum(axis=1) - 1).abs().max() < 1e-12)
True
>>> folder_of_run = net.save(folder / "results")
>>> runner.load_run(folder_of_run.name, results=folder / "results").score == net.score
True

The same data as a DataFrame (read as text, so every value keeps its spelling) gives the
same data hash, and so the same run:

>>> frame = pandas.read_csv(folder / "datasets" / "kiln-line.csv", dtype=str,
...                         keep_default_na=False)
>>> again = runner.learn(spec, data=frame)
>>> again.record["data"]["sha256"] == net.record["data"]["sha256"]
True
>>> again.record["graph_sha256"] == net.record["graph_sha256"]
True
>>> import shutil; shutil.rmtree(folder)
"""

from __future__ import annotations

import copy
import os
import tempfile
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import networkx as nx
    import pandas as pd

    from runner.engines import Engine
    from runner.graph import Cpdag
    from runner.pipeline import Prepared, RunResult

__all__ = [
    "GaussianFamily",
    "LearnedNetwork",
    "canonical_csv",
    "check",
    "compare_runs",
    "hold_against_baseline",
    "learn",
    "load_run",
]

#: A spec: the path of a YAML file, or the spec as a dict (what the file would parse to).
SpecSource = str | os.PathLike[str] | Mapping[str, Any]

#: Tables with more parent configurations than this list only the configurations that
#: occur in the data (a full table would not fit in memory).
MAX_TABLE_ROWS = 1_000_000


def canonical_csv(frame: pd.DataFrame) -> bytes:
    """The canonical CSV serialisation of a DataFrame: the bytes it is read and hashed as.

    The rule: ``frame.to_csv(index=False, lineterminator="\\n").encode("utf-8")``, that is
    a header line of the column names, then one line per row; comma separators; ``\\n``
    line ends, one after the last line too; a field with a comma, a double quote or a
    line break in double quotes (quotes doubled); missing values (None, NaN, NaT,
    ``pd.NA``) as empty fields; every other value as pandas' CSV writer writes it (text as
    is, floats in their shortest round-trip form such as ``0.1``, ``1.0`` or ``1e-05``,
    integers as digits, booleans ``True``/``False``, categoricals by their labels). The
    index is not written (``reset_index()`` first to keep it); column names are written
    with ``str``.

    A CSV file in this form (the one ``to_csv`` writes; a file read with
    ``pandas.read_csv(path, dtype=str, keep_default_na=False)`` serialises back to its
    own bytes when it has ``\\n`` line ends, a final newline and no superfluous quotes)
    gives the same ``data.sha256``.

    Parameters
    ----------
    frame
        The table; column names must be unique, with one header row.

    Returns
    -------
    bytes
        UTF-8 text of the serialisation.

    Raises
    ------
    InputError
        When the columns have several header levels (a ``MultiIndex``).
    """
    import pandas as pd

    from runner.errors import InputError, Problem
    from runner.pipeline import FRAME_ORIGIN

    if isinstance(frame.columns, pd.MultiIndex):
        raise InputError(Problem(FRAME_ORIGIN, "the columns have several header levels; "
                                 "give each column one name (join the levels)",
                                 key="columns"))
    text = frame.to_csv(index=False, lineterminator="\n")
    assert text is not None
    return text.encode("utf-8")


@dataclass(frozen=True)
class GaussianFamily:
    """One child of a linear-Gaussian network:
    ``child = intercept + sum(coefficients[p] * p) + noise``, noise with mean 0 and
    variance ``variance`` (least squares on the learning rows)."""

    child: str
    parents: tuple[str, ...]
    intercept: float
    coefficients: dict[str, float]
    variance: float


@dataclass(eq=False)
class LearnedNetwork:
    """A learned (or stored) run: its record, its fitted model and its search trace.

    Attributes
    ----------
    record
        The run record: the dict ``run.json`` holds. Before :meth:`save` it is the record
        as learned (``run_id`` None, the paths as given, no ``record_sha256`` and chain
        keys yet); after :meth:`save`, and for a run read by :func:`load_run`, it is the
        stored ``run.json``.
    model
        The fitted model (the ``model.json`` document), None for a record from before
        fitted models.
    trace
        The search trace (``trace.csv``'s text).
    folder
        The run folder once stored, else None.
    twin
        After :meth:`save`: None, or ``{"run_id", "identical"}`` for an earlier stored run
        with the same inputs (as ``dagmill run --json`` reports it).
    """

    record: dict[str, Any]
    model: dict[str, Any] | None
    trace: str
    folder: Path | None = None
    twin: dict[str, Any] | None = None
    _prepared: Prepared | None = field(default=None, repr=False)
    _learned: dict[str, Any] | None = field(default=None, repr=False)

    def __repr__(self) -> str:
        return (f"LearnedNetwork(spec={self.record['spec_name']!r}, "
                f"score={self.score!r}, edges={len(self.record['edges'])}, "
                f"run_id={self.record.get('run_id')!r})")

    # ------------------------------------------------------------------ reading the record

    @property
    def names(self) -> list[str]:
        """The variables, in the data's column order."""
        return list(self.record["data"]["columns"])

    @property
    def edges(self) -> list[tuple[str, str]]:
        """The learned edges ``(from, to)``, sorted."""
        return [(str(a), str(b)) for a, b in self.record["edges"]]

    @property
    def score(self) -> float:
        """The total score of the learned graph (the record's ``score.value``)."""
        return float(self.record["score"]["value"])

    @property
    def family_scores(self) -> dict[str, float]:
        """Each variable's family score given its learned parents (they sum to
        :attr:`score`)."""
        return {str(k): float(v) for k, v in self.record["score"]["families"].items()}

    @property
    def graph(self) -> nx.DiGraph[str]:
        """The learned DAG, nodes in the data's column order.

        Node attributes: ``kind`` (``discrete`` or ``continuous``), ``tier`` (1 for the
        spec's first tier, 0 for a variable in no tier; as the exports number them),
        ``tier_name`` (when the spec names its tiers) and ``states`` (a list; the bin
        labels of a binned column, empty for a continuous one). Edge attributes:
        ``required`` and, with a bootstrap section, ``confidence`` (the share of
        replicates holding the edge). Graph attributes: ``name``, ``run_id``, ``score``
        and ``graph_sha256``.
        """
        from runner.export import learned_graph

        graph = learned_graph(self.record)
        for name, column in self.record["data"]["columns"].items():
            graph.nodes[name]["states"] = [str(s) for s in column.get("states") or []]
        return graph

    @property
    def cpdag(self) -> Cpdag:
        """The learned graph's equivalence class (Chickering 1995): ``directed`` holds the
        compelled edges, ``undirected`` the reversible ones (each a sorted name pair).

        References
        ----------
        D. M. Chickering (1995). A transformational characterization of equivalent
        Bayesian network structures. UAI.
        """
        from runner.graph import cpdag

        return cpdag(self.names, self.edges)

    @property
    def tables(self) -> dict[str, pd.DataFrame]:
        """The fitted conditional probability table of each discrete variable.

        Rows are the parent configurations, every combination of the parents' states in
        their state order (the first parent varies slowest): a ``MultiIndex`` named by the
        parents for two or more parents, an ``Index`` named by the parent for one, and a
        single row (``RangeIndex``) for a variable without parents. Columns are the
        child's states. A configuration that does not occur in the learning rows has the
        model's row for an unseen configuration (uniform with a positive pseudo-count;
        NaN under maximum likelihood). Tables of more than ``MAX_TABLE_ROWS``
        configurations list only the occurring ones. Empty for a Gaussian run.

        The probabilities are the model's (``model.json``): the posterior mean under a
        symmetric Dirichlet prior with the spec's ``fit.pseudo_count`` per cell
        (Heckerman 1995), or relative frequencies with pseudo-count 0.

        References
        ----------
        D. Heckerman (1995). A tutorial on learning with Bayesian networks. Technical
        report MSR-TR-95-06, Microsoft Research.
        """
        if self.model is None:
            return {}
        variables = self.model.get("variables") or {}
        return {name: _table(name, doc, variables, self.record["data"]["columns"])
                for name, doc in variables.items()
                if isinstance(doc, Mapping) and doc.get("kind") == "discrete"}

    @property
    def gaussian_families(self) -> dict[str, GaussianFamily]:
        """The fitted linear-Gaussian family of each continuous variable (Gaussian
        scores); empty for a discrete run."""
        if self.model is None:
            return {}
        out: dict[str, GaussianFamily] = {}
        for name, doc in (self.model.get("variables") or {}).items():
            if not (isinstance(doc, Mapping) and doc.get("kind") == "continuous"
                    and "intercept" in doc):
                continue
            out[name] = GaussianFamily(
                name, tuple(doc["parents"]), float(doc["intercept"]),
                {str(p): float(b) for p, b in doc["coefficients"].items()},
                float(doc["residual_variance"]))
        return out

    @property
    def bootstrap(self) -> pd.DataFrame | None:
        """The bootstrap edge table (None without a bootstrap section): one row per
        directed edge seen in a replicate, sorted by edge; columns ``from``, ``to``, the
        shares ``directed`` (of replicate DAGs holding it), ``class`` (of replicate CPDAGs
        holding it directed or undirected) and ``adjacent`` (joined either way), and
        ``consensus`` (whether the consensus network holds it).

        References
        ----------
        N. Friedman, M. Goldszmidt and A. Wyner (1999). Data analysis with Bayesian
        networks: a bootstrap approach. UAI.
        """
        import pandas as pd

        block = self.record.get("bootstrap")
        if not isinstance(block, Mapping):
            return None
        consensus = {tuple(e) for e in (block.get("consensus") or {}).get("edges", [])}
        rows = [{"from": item["edge"][0], "to": item["edge"][1],
                 "directed": float(item["directed"]), "class": float(item["class"]),
                 "adjacent": float(item["adjacent"]),
                 "consensus": tuple(item["edge"]) in consensus}
                for item in block.get("frequencies") or []]
        return pd.DataFrame(rows, columns=["from", "to", "directed", "class", "adjacent",
                                           "consensus"])

    # ------------------------------------------------------------------ storing

    def save(self, results: str | os.PathLike[str] | None = None) -> Path:
        """Store the run as ``dagmill run`` stores it; return the run folder.

        Writes ``run.json``, ``trace.csv`` and ``model.json`` under
        ``results/<spec name>/runs/<run id>/`` through the same store path as the command
        (the same record, the same hashes, chained to the spec's previous run and signed
        when ``$DAGMILL_SIGNING_KEY`` names a key). Afterwards :attr:`record` is the stored
        ``run.json`` and :attr:`folder` the run folder. Each call stores a new run.

        Parameters
        ----------
        results
            The results folder (default: ``$DAGMILL_RESULTS``, else ``results`` in the
            current folder). Paths in the record are relative to its parent (the project
            folder).

        Returns
        -------
        pathlib.Path
            The run folder.

        Raises
        ------
        ValueError
            For a run read by :func:`load_run` (it is stored already).
        OSError
            When the results folder cannot be written.
        """
        return self._store(_results(results)).folder

    def _store(self, root: Path) -> RunResult:
        from runner.pipeline import store_learned
        from runner.store import ensure_writable, read_run

        if self._prepared is None or self._learned is None:
            raise ValueError(f"this run was read from {self.folder}; it is stored already")
        ensure_writable(root, self.record["spec_name"])
        learned = copy.deepcopy(self._learned)
        learned["_model"] = copy.deepcopy(self.model)
        result = store_learned(self._prepared, learned, self.trace, root)
        self.folder = result.folder
        self.record = read_run(result.folder)
        self.twin = None if result.twin is None else {
            "run_id": result.twin["run_id"], "identical": result.twin_identical}
        if result.twin is not None and not result.twin_identical:
            warnings.warn(f"NOT REPRODUCED: run {result.run_id} has the same inputs as run "
                          f"{result.twin['run_id']} but a different "
                          f"{' and '.join(result.twin_differences)}", RuntimeWarning,
                          stacklevel=3)
        return result


def _table(name: str, doc: Mapping[str, Any], variables: Mapping[str, Any],
           columns: Mapping[str, Any]) -> pd.DataFrame:
    """One variable's conditional probability table from its ``model.json`` entry."""
    import numpy as np
    import pandas as pd

    states = [str(s) for s in doc["states"]]
    parents = [str(p) for p in doc["parents"]]
    parent_states = [[str(s) for s in (variables.get(p) or columns[p]).get("states") or []]
                     for p in parents]
    unseen = doc.get("unseen_configuration")
    fill = np.full(len(states), np.nan) if unseen is None else np.asarray(unseen, float)
    occurring = doc.get("configurations") or []
    header = pd.Index(states, name=name)
    if not parents:
        row = occurring[0]["probabilities"] if occurring else fill
        return pd.DataFrame([row], columns=header, dtype=float)
    possible = 1
    for s in parent_states:
        possible *= len(s)
    if possible > MAX_TABLE_ROWS:
        labels = [tuple(str(v) for v in c["parents"]) for c in occurring]
        index = (pd.MultiIndex.from_tuples(labels, names=parents) if len(parents) > 1
                 else pd.Index([k[0] for k in labels], name=parents[0]))
        return pd.DataFrame([c["probabilities"] for c in occurring], index=index,
                            columns=header, dtype=float)
    values = np.tile(fill, (possible, 1))
    position = [{s: k for k, s in enumerate(ss)} for ss in parent_states]
    for config in occurring:
        row = 0
        for lookup, state in zip(position, config["parents"], strict=True):
            row = row * len(lookup) + lookup[str(state)]
        values[row] = config["probabilities"]
    index = (pd.MultiIndex.from_product(parent_states, names=parents) if len(parents) > 1
             else pd.Index(parent_states[0], name=parents[0]))
    return pd.DataFrame(values, index=index, columns=header)


# --------------------------------------------------------------------------- functions


def _results(results: str | os.PathLike[str] | None) -> Path:
    from runner.store import results_root

    return results_root(None if results is None else os.fspath(results))


def _prepare(spec: SpecSource, data: Any, bins_from: Path | None) -> Prepared:
    """The pipeline's preparation of a spec (path or dict) and data (None, a path or a
    DataFrame, read through the CSV reader as its canonical CSV)."""
    import pandas as pd

    from runner.pipeline import FRAME_ORIGIN, prepare

    source: str | Mapping[str, Any] = spec if isinstance(spec, Mapping) else os.fspath(spec)
    if data is None or isinstance(data, str | os.PathLike):
        return prepare(source, None if data is None else os.fspath(data), bins_from)
    if not isinstance(data, pd.DataFrame):
        raise TypeError(f"data must be a path or a pandas.DataFrame, not {type(data).__name__}")
    raw = canonical_csv(data)
    with tempfile.TemporaryDirectory(prefix="dagmill-frame-") as folder:
        file = Path(folder) / "frame.csv"
        file.write_bytes(raw)
        return prepare(source, file, bins_from, data_display=FRAME_ORIGIN)


def learn(spec: SpecSource, data: str | os.PathLike[str] | pd.DataFrame | None = None, *,
          seed: int | None = None,
          bins_from: str | os.PathLike[str] | None = None,
          engine: str | None = None, workers: int | None = None) -> LearnedNetwork:
    """Learn a network from a spec and data, as ``dagmill run`` does (nothing is stored
    until :meth:`LearnedNetwork.save`).

    The spec's score (e.g. BIC, Schwarz 1978; BDeu, Heckerman, Geiger & Chickering
    1995), search method, constraints, bootstrap (Friedman, Goldszmidt & Wyner 1999) and
    held-out evaluation all apply; the bootstrap replicates run in this process unless
    ``engine`` or ``workers`` ask for more (as ``--engine`` and ``--workers`` do).

    Parameters
    ----------
    spec
        The path of a spec file, or the spec as a dict (what the YAML would parse to),
        checked by the same schema and rules with the same messages; a dict's problems
        name ``<dict>`` and its relative paths resolve against the current folder.
    data
        None for the spec's ``dataset.path``; a path to read instead (as ``--data``); or
        a :class:`pandas.DataFrame`, read through the CSV reader as the bytes of
        :func:`canonical_csv` (so the same rules apply, and ``data.sha256`` is the sha256
        of those bytes); the record names it ``<DataFrame>``, and messages name lines of
        its canonical CSV (line 2 is the first row).
    seed
        Overrides ``search.seed`` (as ``--seed``).
    bins_from
        A results folder: continuous columns are cut at the bin edges of the spec's
        baseline there (what ``dagmill run --data`` and ``dagmill check`` do).
    engine
        Where the bootstrap replicates run: ``"local"`` (a pool of processes on this
        machine), ``"dask-local"`` (a Dask cluster started for the call) or
        ``"dask://HOST:PORT"`` (a running scheduler); None (and no ``workers``): in this
        process. The record is the same whatever the engine.
    workers
        The processes of a local engine (at most the usable cores; more are capped).

    Returns
    -------
    LearnedNetwork
        The learned run, not yet stored.

    Raises
    ------
    InputError
        With every problem of the spec and the data (the command's exit 2).
    TypeError
        When ``data`` is neither a path nor a DataFrame.

    References
    ----------
    G. Schwarz (1978). Estimating the dimension of a model. Annals of Statistics 6(2).
    D. Heckerman, D. Geiger and D. M. Chickering (1995). Learning Bayesian networks: the
    combination of knowledge and statistical data. Machine Learning 20.
    N. Friedman, M. Goldszmidt and A. Wyner (1999). Data analysis with Bayesian networks:
    a bootstrap approach. UAI.
    """
    prepared = _prepare(spec, data, None if bins_from is None else Path(bins_from))
    if engine is None and workers is None:
        return _learn(prepared, seed)
    from runner.engines import choose_engine, open_engine

    with open_engine(choose_engine(engine, workers)) as opened:
        return _learn(prepared, seed, opened)


def _learn(prepared: Prepared, seed: int | None, engine: Engine | None = None) -> LearnedNetwork:
    from runner.pipeline import learn as learn_prepared

    record, trace = learn_prepared(prepared, seed, engine)
    model = record.pop("_model")
    return LearnedNetwork(copy.deepcopy(record), model, trace, _prepared=prepared,
                          _learned=record)


def load_run(ref: str | os.PathLike[str],
             results: str | os.PathLike[str] | None = None) -> LearnedNetwork:
    """A stored run, checked against its hashes (as every command reads one).

    Parameters
    ----------
    ref
        A run id, a unique prefix of one, or a run folder (the command's RUN).
    results
        The results folder (default: ``$DAGMILL_RESULTS``, else ``results``).

    Returns
    -------
    LearnedNetwork
        The run; its :attr:`~LearnedNetwork.record` is the stored ``run.json``.

    Raises
    ------
    InputError
        For an unknown or ambiguous run, or a record, model or trace edited by hand.
    """
    from runner.store import read_model, read_run, resolve_run

    folder = resolve_run(_results(results), os.fspath(ref))
    record = read_run(folder)
    model = read_model(folder, record)
    trace_file = folder / "trace.csv"
    trace = trace_file.read_text(encoding="utf-8") if trace_file.exists() else ""
    return LearnedNetwork(record, model, trace, folder)


def compare_runs(a: str | os.PathLike[str] | LearnedNetwork,
                 b: str | os.PathLike[str] | LearnedNetwork, *,
                 results: str | os.PathLike[str] | None = None,
                 data: str | os.PathLike[str] | None = None) -> dict[str, Any]:
    """Compare two runs: what ``dagmill compare A B --json`` prints.

    Score delta, edges added, removed and reversed, structural distances (Tsamardinos,
    Brown & Aliferis 2006), the CPDAG comparison and the same-class verdict (Verma & Pearl
    1990). Runs on the same data under different scores are rescored on it, each graph
    under the other's score (a rescore that cannot be made is reported under
    ``rescored.skipped`` with a :class:`UserWarning`).

    Parameters
    ----------
    a, b
        Run ids, prefixes or folders, or :class:`LearnedNetwork` objects (stored ones,
        when a rescore is needed).
    results
        The results folder the refs are looked up in.
    data
        The data file to rescore on (as ``--data``).

    Returns
    -------
    dict
        The comparison, JSON-ready.

    Raises
    ------
    InputError
        For an unknown run or a record edited by hand.

    References
    ----------
    I. Tsamardinos, L. E. Brown and C. F. Aliferis (2006). The max-min hill-climbing
    Bayesian network structure learning algorithm. Machine Learning 65.
    T. Verma and J. Pearl (1990). Equivalence and synthesis of causal models. UAI.
    """
    from runner import compare
    from runner.compare.rescore import rescore
    from runner.errors import InputError
    from runner.store import read_run, resolve_run

    root = _results(results)
    data_path = None if data is None else os.fspath(data)
    ra, rb = (x.record if isinstance(x, LearnedNetwork)
              else read_run(resolve_run(root, os.fspath(x))) for x in (a, b))
    rescored: dict[str, Any] | None = None
    # as ``dagmill compare`` (runner/cli.py _cmd_compare) decides it
    if compare.needs_rescore(ra, rb) or (data is not None
                                         and not compare.score_delta(ra, rb)["comparable"]):
        try:
            rescored = {
                "a_under_b": rescore(ra, rb["score"]["name"], rb["score"].get("ess"), data_path,
                                     (rb.get("spec") or {}).get("score"), root),
                "b_under_a": rescore(rb, ra["score"]["name"], ra["score"].get("ess"), data_path,
                                     (ra.get("spec") or {}).get("score"), root),
            }
        except InputError as exc:
            reason = "; ".join(p.format() for p in exc.problems)
            warnings.warn(f"not rescored: {reason}", UserWarning, stacklevel=2)
            rescored = {"skipped": reason}
    return compare.compare_records(ra, rb, rescored)


def hold_against_baseline(results: Path, record: dict[str, Any], folder: Path,
                          write_outcome: bool = True) -> dict[str, Any]:
    """Hold a stored run against its spec's baseline and write its ``check.json``.

    The gate of ``dagmill check`` for one run: with no baseline a failing
    ``no-baseline`` report naming the pin command; else the spec's ``gate`` rules,
    with the drift measures on the same rows when the inputs differ (the structural
    margin in log-units, graded as Kass & Raftery 1995).

    Parameters
    ----------
    results
        The results folder.
    record
        The run's record, as storing it returned it.
    folder
        The run's folder.
    write_outcome
        Write the run's ``check.json`` (False for a run that an earlier command
        learned and this check only re-uses).

    Returns
    -------
    dict
        The gate report (``ok``, ``status``, ``verdict``, ``failures``, ... and
        ``folder``), as ``dagmill check --json`` lists it.

    References
    ----------
    R. E. Kass and A. E. Raftery (1995). Bayes factors. Journal of the American
    Statistical Association 90.
    """
    from datetime import UTC, datetime

    from runner import compare
    from runner.compare import drift
    from runner.store import read_baseline, read_run, write_check_outcome

    baseline = read_baseline(results, record["spec_name"])
    if baseline is None:
        pin = f"dagmill pin {record['run_id']} --results {results}"
        report = compare.missing_baseline_report(record, pin)
    else:
        pinned = results / record["spec_name"] / "runs" / baseline["run_id"]
        # refuses a hand-edited baseline run (exit 2)
        pinned_record = read_run(pinned) if pinned.is_dir() else None
        # drift on the same rows (None for same inputs); see runner/compare/drift.py
        measured = drift.measure(results, record, baseline, pinned_record)
        report = compare.evaluate_gate(baseline, record, record["spec"]["gate"],
                                       pinned_record, drift=measured)
    report["folder"] = str(folder)
    if write_outcome:
        write_check_outcome(folder, record, baseline, report["ok"],
                            report.get("verdict") or report["status"], report["failures"],
                            datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"))
    return report


def check(spec: SpecSource, data: str | os.PathLike[str] | pd.DataFrame | None = None, *,
          results: str | os.PathLike[str] | None = None,
          seed: int | None = None) -> dict[str, Any]:
    """Re-learn a spec, store the run and hold it against the baseline: ``dagmill check``
    for one spec.

    Continuous columns are cut at the baseline's bin edges, as the command does. With a
    DataFrame the drift measures (which read the new run's data again) are skipped, with
    the reason in the report: give the data as a file to have them.

    Parameters
    ----------
    spec, data, seed
        As for :func:`learn`.
    results
        The results folder (default: ``$DAGMILL_RESULTS``, else ``results``).

    Returns
    -------
    dict
        The gate report (see :func:`hold_against_baseline`); ``report["ok"]`` is the
        command's exit 0 (else 1).

    Raises
    ------
    InputError
        With every problem of the spec and the data.
    """
    from runner.store import ensure_writable

    root = _results(results)
    prepared = _prepare(spec, data, root)
    ensure_writable(root, prepared.spec.name)
    stored = _learn(prepared, seed)._store(root)
    report = hold_against_baseline(root, stored.record, stored.folder)
    report["up_to_date"] = False  # learned now, as `dagmill check` marks a learned spec
    return report
