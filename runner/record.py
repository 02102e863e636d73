"""Typed records: the layouts of ``run.json`` (:class:`RunRecord`) and ``baseline.json``
(:class:`Baseline`) as pydantic models, checked where the store writes and reads them.

Versions. A record or baseline carries ``format_version``; this module describes version
2 (sealed, chained and optionally signed: see :class:`RunRecord` and :class:`Baseline`).
Version 1 (a sealed record without the chain; an unsealed baseline) is still read, with
:class:`RunRecordV1` / :class:`BaselineV1`, and shown as legacy. Files written before
the key existed are version 0: they are read with the looser
:class:`LegacyRunRecord` / :class:`LegacyBaseline`, which check only what every reader has
always needed (the edges, their graph hash, the score's value; a baseline's identity),
and let everything else through as it is. A ``format_version`` this module does not know
(a newer dagmill wrote the file) is refused.

Strictness. Every model validates in strict mode: a string is not a number, ``1`` is not
``true`` and a number is never converted to a string, so what passes is what was written.
(A float field accepts an integer, which JSON cannot tell apart from an integral float;
the records we write hold floats there.) Extra keys are refused (``extra="forbid"``)
wherever the layout is ours and fixed, so a misspelt or stray key is an error instead of
a check silently switched off; they are allowed only in the blocks that are free-form by
design, each saying why: ``spec`` (the normalised spec, validated by ``runner.spec``),
``search.parameters`` (the settings of the chosen method, which differ per method),
``environment`` (one entry per installed library of interest) and
``environment.numeric`` (whatever the machine reports about its CPU and BLAS).

Round trip. ``model.model_dump(mode="json", by_alias=True, exclude_unset=True)`` of a
validated record gives back the dict it was validated from (the tests hold every demo
record to that, byte for byte through ``store.dump_json``). The store still hands dicts
to its callers; moving readers to attribute access is a later step.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from runner.errors import InputError, Problem

FORMAT_VERSION = 2
SCHEMA_DIALECT = "https://json-schema.org/draft/2020-12/schema"

Edge = Annotated[list[str], Field(min_length=2, max_length=2,
                                  description="[from, to]: a directed edge")]
Sha256 = Annotated[str, Field(description="sha256, 64 lowercase hex digits")]


class Fixed(BaseModel):
    """A block whose layout is ours and fixed: unknown keys are refused."""

    model_config = ConfigDict(strict=True, extra="forbid", populate_by_name=True)


class Open(BaseModel):
    """A block that is free-form by design: unknown keys are kept as written."""

    model_config = ConfigDict(strict=True, extra="allow", populate_by_name=True)


# --------------------------------------------------------------------------- data


class Binning(Fixed):
    """How a continuous column was cut into bins for a discrete score."""

    method: str
    bins: int
    edges: list[float]
    cuts: list[float]
    source: str
    below_range: int
    above_range: int


class Column(Fixed):
    """One column of the data: its kind, why, and its states (binned labels for a binned
    column, none for a continuous one under a Gaussian score, which has its ``range``)."""

    kind: Literal["discrete", "continuous"]
    kind_reason: str
    states: list[str]
    binning: Binning | None = None
    range: Annotated[list[float], Field(min_length=2, max_length=2)] | None = None


class Data(Fixed):
    """The data file: path as given, sha256, rows, and each column."""

    path: str
    sha256: Sha256
    rows: int
    dropped_rows: int
    columns: dict[str, Column]
    rows_learned: int | None = None
    rows_held_out: int | None = None


# --------------------------------------------------------------------------- score


class BgePrior(Fixed):
    alpha_mu: float
    alpha_w: float
    prior_scale: float


class Score(Fixed):
    """The score of the learned graph: total, per row and per family."""

    name: str
    value: float
    per_row: float
    families: dict[str, float]
    score_equivalent: bool
    ess: float | None = None
    bge_prior: BgePrior | None = None
    #: Under ``dataset.missing: available-case``: per child, the rows its family (the
    #: child and its parents) was counted on (every one of them present).
    available_rows: dict[str, int] | None = None


# --------------------------------------------------------------------------- search


class SearchBudget(Fixed):
    max_steps: int | None
    max_evaluations: int | None
    max_seconds: float | None


class RestartRun(Fixed):
    """One run of a (restarted) local search."""

    run: int
    kicks: int
    start_score: float
    end_score: float
    steps: int
    stop_reason: str


class Phase(Fixed):
    """One phase of greedy equivalence search."""

    phase: str
    steps: int
    end_score: float


class EMRound(Fixed):
    """One round of structural EM: the proposed DAG's expected score under the weights
    of the round, the EM iterations those weights took, its edge count, whether kept."""

    round: int
    expected_score: float
    em_iterations: int
    edges: int
    kept: bool


class StructuralEMBlock(Fixed):
    """Structural EM's rounds (``dataset.missing: structural-em``)."""

    converged: bool
    completed_rows: int
    rounds: list[EMRound]


class CandidateScreen(Fixed):
    """The candidate parents the search was narrowed to (``search.candidates``): the
    screen with its settings as used, the re-estimation rounds run, and each variable's
    candidate parents in the last search (required parents included)."""

    method: str
    k: int
    rounds: int
    parents: dict[str, list[str]]
    alpha: float | None = None


class Search(Fixed):
    """The search as run. ``parameters`` is free-form: each method has its own settings
    (restarts and kick, tabu tenure and patience, the order, candidate-set limits)."""

    method: str
    start: str
    seed: int
    stop_reason: str
    steps: int
    evaluations: int
    cache_hits: int
    converged: bool
    parameters: dict[str, Any]
    runs: list[RestartRun]
    budget: SearchBudget
    proven_optimal: bool
    optimal_for_order: bool | None = None
    candidate_sets: dict[str, int] | None = None
    phases: list[Phase] | None = None
    structural_em: StructuralEMBlock | None = None
    #: With ``search.candidates`` (absent in records from before it).
    candidates: CandidateScreen | None = None


class Seconds(Fixed):
    search: float
    total: float
    bootstrap: float | None = None


class Environment(Open):
    """Library versions and the platform. Open: one entry per library of interest (the
    list grows with the package), and ``numeric`` is whatever the machine reports about
    its CPU, numpy's SIMD features and the BLAS (absent in records from before it)."""

    python: str
    numpy: str
    pandas: str
    platform: str
    numeric: dict[str, Any] | None = None


class ModelReference(Fixed):
    """The fitted model file beside ``run.json``."""

    file: str
    sha256: Sha256
    estimator: str
    pseudo_count: float | None


# --------------------------------------------------------------------------- bootstrap


class Frequency(Fixed):
    """An edge's share of bootstrap replicates: as directed, in the class, as adjacent."""

    edge: Edge
    directed: float
    class_: float = Field(alias="class")
    adjacent: float


class Skipped(Fixed):
    pair: Edge
    adjacent: float
    reason: str


class Consensus(Fixed):
    edges: list[Edge]
    graph_sha256: Sha256
    skipped: list[Skipped]
    rule: str


class Bootstrap(Fixed):
    replicates: int
    seed: int
    threshold: float
    seeding: str
    not_converged: int
    frequencies: list[Frequency]
    consensus: Consensus


# --------------------------------------------------------------------------- evaluation


class LogLikelihood(Fixed):
    learned: float
    empty: float
    learned_per_row: float
    empty_per_row: float
    difference_per_row: float


class UnseenCounts(Fixed):
    configurations: int
    states: int


class Unseen(Fixed):
    configurations: int
    states: int
    empty_graph_states: int
    by_variable: dict[str, UnseenCounts]


class Evaluation(Fixed):
    """The hold-out split and the held-out fit of the learned and the empty graph."""

    holdout: float
    seed: int
    rows_learned: int
    rows_held_out: int
    rule: str
    measure: str | None = None
    log_likelihood: LogLikelihood
    unseen: Unseen


# --------------------------------------------------------------------------- records


class Signature(Fixed):
    """An Ed25519 signature (Bernstein et al. 2012, RFC 8032) over the 32 bytes of the
    document's own hash (``record_sha256`` of a run, ``baseline_sha256`` of a baseline)."""

    algorithm: Literal["ed25519"]
    public_key_sha256: Sha256 = Field(description="sha256 of the raw 32-byte public key")
    value: str = Field(description="the 64-byte signature, base64")


class _RunBody(Fixed):
    """The keys every sealed run record has (versions 1 and 2)."""

    run_id: str = Field(
        description="`<UTC time>-<first 10 hex of input_sha256>`, the run folder's name")
    spec_name: str = Field(description="the spec's `name`: the results subfolder")
    spec_path: str = Field(
        description="the spec file, relative to the results folder's parent (or as given)")
    spec: dict[str, Any] = Field(
        description="the normalised spec (defaults filled in, seed override applied)")
    spec_sha256: Sha256 = Field(description="sha256 of the normalised spec")
    input_sha256: Sha256 = Field(
        description="sha256 of the spec hash, the data hash and the code version: twins share it")
    code_version: str = Field(
        description="package version plus a hash of the package's source files")
    code_sha256: Sha256 = Field(description="sha256 of the package's source files")
    created_utc: str = Field(description="when the run was stored")
    data: Data = Field(
        description="the data file: path, sha256, rows, dropped rows and each column's kind and "
                    "states")
    seed: int = Field(description="the search seed used")
    score: Score = Field(
        description="name, total value, value per row, each family's score, score-equivalence")
    search: Search = Field(
        description="method, start, seed, stop reason, steps, evaluations, cache hits, parameters, "
                    "phases, candidate parents")
    edges: list[Edge] = Field(description="the learned DAG's edges, sorted `[from, to]` pairs")
    graph_sha256: Sha256 = Field(description="sha256 of the canonical edge list")
    seconds: Seconds = Field(description="timings: search, total (and bootstrap)")
    environment: Environment = Field(
        description="Python and library versions, platform, the numeric environment")
    warnings: list[str] = Field(description="warnings the run printed")
    caution: str = Field(description="what the learned structure is and is not evidence of")
    model: ModelReference = Field(
        description="the fitted model file beside run.json: name, sha256, estimator")
    trace_sha256: Sha256 = Field(description="sha256 of trace.csv")
    record_sha256: Sha256 = Field(
        description="sha256 of this record without this key and `signature`")
    bootstrap: Bootstrap | None = Field(
        default=None,
        description="edge frequencies and the consensus network (with a bootstrap section)")
    evaluation: Evaluation | None = Field(
        default=None,
        description="the hold-out split and held-out log-likelihoods (with an evaluation "
                    "section)")


class RunRecordV1(_RunBody):
    """``run.json``, format version 1: sealed by ``record_sha256`` but not chained."""

    model_config = ConfigDict(title="dagmill run record, format version 1")

    format_version: Literal[1]


class RunRecord(_RunBody):
    """``run.json``, format version 2. The top level is fixed (a new key is a new field
    here); ``spec`` is free-form: the normalised spec, whose layout ``runner.spec`` owns.
    ``bootstrap`` and ``evaluation`` are present when the spec has those sections.

    ``record_sha256`` seals every other key except ``signature``;
    ``previous_record_sha256`` chains the record to the spec's previous stored run in the
    same results folder (null for the first), so a deleted or inserted run shows;
    ``signature`` is present when the run was stored with a signing key."""

    model_config = ConfigDict(title="dagmill run record")

    format_version: Literal[2] = Field(description="the record layout's version")
    previous_record_sha256: Sha256 | None = Field(
        description="`record_sha256` of the spec's run stored before this one, or null")
    signature: Signature | None = Field(
        default=None, description="Ed25519 signature of `record_sha256` (with a signing key)")


class BaselineScore(Fixed):
    name: str
    ess: float | None
    value: float
    per_row: float


class BaselineColumn(Fixed):
    kind: Literal["discrete", "continuous"]
    states: list[str]
    binning: Binning | None = None


class BaselineData(Fixed):
    sha256: Sha256
    rows: int
    columns: dict[str, BaselineColumn]


class BaselineConsensus(Fixed):
    edges: list[Edge]
    graph_sha256: Sha256
    replicates: int
    threshold: float


class _BaselineBody(Fixed):
    run_id: str = Field(description="the pinned run")
    spec_name: str = Field(description="its spec's `name`")
    spec_sha256: Sha256 = Field(description="the pinned run's spec hash")
    input_sha256: Sha256 = Field(description="the pinned run's input hash")
    code_version: str = Field(description="the pinned run's code version")
    graph_sha256: Sha256 = Field(description="the pinned run's graph hash")
    score: BaselineScore = Field(description="name, ess, value and value per row")
    edges: list[Edge] = Field(description="the pinned run's edges")
    data: BaselineData = Field(description="data sha256, rows, and each column's kind, "
                                           "states and bins")
    pinned_utc: str = Field(description="when it was pinned")
    consensus: BaselineConsensus | None = Field(
        default=None, description="the pinned run's bootstrap consensus network, if any")


class BaselineV1(_BaselineBody):
    """``baseline.json``, format version 1: not sealed (read, marked legacy)."""

    model_config = ConfigDict(title="dagmill baseline, format version 1")

    format_version: Literal[1]


class Baseline(_BaselineBody):
    """``baseline.json``, format version 2: the pinned run's identity, hashes, score,
    edges and data columns (and its bootstrap consensus, if it has one). Fixed layout.

    Sealed: ``baseline_sha256`` covers every other key except ``signature``, and
    ``record_sha256`` is the pinned run's own seal; readers check both, and that the run
    still exists, matches that seal and gives exactly this baseline."""

    model_config = ConfigDict(title="dagmill baseline")

    format_version: Literal[2] = Field(description="the baseline layout's version")
    record_sha256: Sha256 = Field(description="the pinned run's `record_sha256`")
    baseline_sha256: Sha256 = Field(
        description="sha256 of this baseline without this key and `signature`")
    signature: Signature | None = Field(
        default=None, description="Ed25519 signature of `baseline_sha256` (with a signing key)")


class CheckOutcome(Fixed):
    """``check.json`` in the run folder of a run that ``dagmill check`` learned: the
    baseline it was held against and the verdict, sealed like a record."""

    model_config = ConfigDict(title="dagmill check outcome")

    format_version: Literal[2]
    run_id: str = Field(description="the run this check learned (its folder)")
    run_record_sha256: Sha256 = Field(description="that run's `record_sha256`")
    checked_utc: str = Field(description="when the check was made")
    baseline_run_id: str | None = Field(description="the pinned run, or null when none was")
    baseline_sha256: Sha256 | None = Field(description="the baseline's seal, or null")
    ok: bool = Field(description="whether the gate passed")
    verdict: str = Field(description="the gate's verdict")
    failures: list[str] = Field(description="the rules that failed, one line each")
    check_sha256: Sha256 = Field(
        description="sha256 of this file without this key and `signature`")
    signature: Signature | None = None


class LegacyScore(Open):
    """A version-0 score block: only the value is checked."""

    value: float


class LegacyRunRecord(Open):
    """``run.json`` from before ``format_version``: open, with the keys readers have
    always needed checked (the rest was never guaranteed)."""

    edges: list[Edge]
    graph_sha256: str
    score: LegacyScore


class LegacyBaseline(Open):
    """``baseline.json`` from before ``format_version``: the keys ``check`` needs."""

    run_id: str
    input_sha256: str
    graph_sha256: str
    score: LegacyScore
    edges: list[Edge]
    data: dict[str, Any]


# --------------------------------------------------------------------------- checking


def dump(model: BaseModel) -> dict[str, Any]:
    """The dict a model was validated from (as written: aliases, only the keys given)."""
    return model.model_dump(mode="json", by_alias=True, exclude_unset=True)


def _key(loc: tuple[int | str, ...]) -> str:
    return ".".join(str(part) for part in loc)


def _problems(exc: ValidationError, file: str) -> list[Problem]:
    problems = []
    for err in exc.errors():
        value = err.get("input")
        shown = value if isinstance(value, str | int | float | bool) and \
            err["type"] != "missing" else None
        message = err["msg"][0].lower() + err["msg"][1:]
        if err["type"] == "extra_forbidden":
            message = "unknown key (not part of this format version)"
        problems.append(Problem(file, message, key=_key(err["loc"]) or None, value=shown))
    return problems


def _version(doc: dict[str, Any], file: str, what: str) -> int:
    version = doc.get("format_version", 0)
    if isinstance(version, int) and not isinstance(version, bool) \
            and version > FORMAT_VERSION:
        raise InputError(Problem(file, f"this {what} has format version {version}; this "
                                 f"dagmill reads versions 0 to {FORMAT_VERSION}: upgrade "
                                 "dagmill", key="format_version"))
    return version if version in (0, 1) else FORMAT_VERSION


def _check(doc: Any, file: str, what: str,
           models: tuple[type[BaseModel], type[BaseModel], type[BaseModel]]) -> BaseModel:
    if not isinstance(doc, dict):
        raise InputError(Problem(file, f"not a dagmill {what}: a JSON object was expected"))
    model = models[_version(doc, file, what)]
    try:
        return model.model_validate(doc)
    except ValidationError as exc:
        raise InputError(_problems(exc, file)) from None


AnyRunRecord = RunRecord | RunRecordV1 | LegacyRunRecord
AnyBaseline = Baseline | BaselineV1 | LegacyBaseline


def check_record(doc: Any, file: str) -> AnyRunRecord:
    """``doc`` (a parsed ``run.json``) as its model; InputError naming ``file``, the key
    path and what is wrong when it does not fit its format version."""
    found = _check(doc, file, "run record", (LegacyRunRecord, RunRecordV1, RunRecord))
    assert isinstance(found, AnyRunRecord)
    return found


def check_outcome(doc: Any, file: str) -> CheckOutcome:
    """``doc`` (a parsed ``check.json``) as its model (see :func:`check_record`)."""
    if not isinstance(doc, dict):
        raise InputError(Problem(file, "not a dagmill check outcome: a JSON object was "
                                 "expected"))
    _version(doc, file, "check outcome")
    try:
        return CheckOutcome.model_validate(doc)
    except ValidationError as exc:
        raise InputError(_problems(exc, file)) from None


def check_baseline(doc: Any, file: str) -> AnyBaseline:
    """``doc`` (a parsed ``baseline.json``) as its model (see :func:`check_record`)."""
    found = _check(doc, file, "baseline", (LegacyBaseline, BaselineV1, Baseline))
    assert isinstance(found, AnyBaseline)
    return found


def format_version(doc: Any) -> int:
    """The format version a parsed record or baseline declares (0 when it has none)."""
    version = doc.get("format_version", 0) if isinstance(doc, dict) else 0
    return version if isinstance(version, int) and not isinstance(version, bool) else 0


def _schema(model: type[BaseModel], description: str) -> dict[str, Any]:
    return {"$schema": SCHEMA_DIALECT, **model.model_json_schema(by_alias=True),
            "description": description}


def record_json_schema() -> dict[str, Any]:
    """The JSON Schema (draft 2020-12) of ``run.json``, format version 2."""
    return _schema(RunRecord, "A dagmill run record (run.json), format version 2: the "
                   "inputs and their hashes, the score, the search, the learned edges and "
                   "their graph hash, timings and the environment.")


def key_table(model: type[BaseModel]) -> str:
    """A Markdown table of a document's top-level keys (in the model's order): key,
    whether it is always present, and what it holds; the README's tables are this."""
    rows = ["| key | always | holds |", "| --- | --- | --- |"]
    for name, info in model.model_fields.items():
        key = info.alias or name
        rows.append(f"| `{key}` | {'yes' if info.is_required() else 'no'} | "
                    f"{info.description or ''} |")
    return "\n".join(rows) + "\n"


def baseline_json_schema() -> dict[str, Any]:
    """The JSON Schema (draft 2020-12) of ``baseline.json``, format version 2."""
    return _schema(Baseline, "A dagmill baseline (baseline.json), format version 2: the "
                   "pinned run of a spec that `dagmill check` holds new results to.")


# --------------------------------------------------------------------------- variations


VARIATION_FORMAT_VERSION = 1


class VariationScore(Fixed):
    """A combination's score: name, value and value per row."""

    name: str
    value: float
    per_row: float


class VariationRun(Fixed):
    """One combination of a ``vary`` section and the run that learned it."""

    values: dict[str, Any] = Field(description="dotted key -> the value this run used")
    run_id: str = Field(description="the run (results/<spec name>/runs/<run id>)")
    input_sha256: Sha256 = Field(description="the run's input hash")
    record_sha256: Sha256 | None = Field(description="the run's record seal")
    graph_sha256: Sha256 = Field(description="the run's graph hash")
    score: VariationScore
    edges: int = Field(description="the number of learned edges")


class EdgeShare(Fixed):
    """One directed edge and the share of combinations that hold it."""

    edge: Edge
    directed: float = Field(description="share of combinations whose DAG holds a -> b")
    class_: float = Field(alias="class", description="share whose equivalence class "
                          "(CPDAG) holds a -> b, or a - b undirected")
    adjacent: float = Field(description="share in which a and b are joined either way")


class StableCore(Fixed):
    """The edges present in every combination."""

    directed: list[Edge] = Field(description="directed edges in every combination's DAG")
    class_: list[Edge] = Field(alias="class", description="directed edges in every "
                               "combination's equivalence class")


class VariationSummary(Fixed):
    """``variations/<summary id>.json`` beside a spec's runs: what ``run`` of a spec with
    a ``vary`` section learned, per combination and per edge, sealed like a record."""

    model_config = ConfigDict(title="dagmill variation summary")

    format_version: Literal[1]
    summary_id: str = Field(description="<UTC time>-<first 10 hex of the inputs' hash>")
    spec_name: str
    spec_path: str = Field(description="the spec file, relative to the project folder")
    spec_sha256: Sha256 = Field(description="sha256 of the normalised spec with its vary "
                                "section")
    inputs_sha256: Sha256 = Field(description="sha256 of the combinations' input hashes, "
                                  "in order")
    created_utc: str
    keys: list[str] = Field(description="the varied keys, sorted")
    combinations: list[VariationRun] = Field(
        description="one per combination: keys sorted, values in the given order, the "
        "last key changing fastest")
    shares: list[EdgeShare] = Field(description="per directed edge seen in any "
                                    "combination's DAG or class, sorted by edge")
    stable_core: StableCore
    summary_sha256: Sha256 = Field(description="sha256 of this file without this key and "
                                   "`signature`")
    signature: Signature | None = None


def check_variation(doc: Any, file: str) -> VariationSummary:
    """``doc`` (a parsed variation summary) as its model; InputError naming ``file``."""
    if not isinstance(doc, dict):
        raise InputError(Problem(file, "not a dagmill variation summary: a JSON object was "
                                 "expected"))
    version = doc.get("format_version")
    if isinstance(version, int) and version > VARIATION_FORMAT_VERSION:
        raise InputError(Problem(file, f"this variation summary has format version "
                                 f"{version}; this dagmill reads version "
                                 f"{VARIATION_FORMAT_VERSION}: upgrade dagmill",
                                 key="format_version"))
    try:
        return VariationSummary.model_validate(doc)
    except ValidationError as exc:
        raise InputError(_problems(exc, file)) from None
