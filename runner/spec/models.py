"""The spec's models: pydantic, frozen, unknown keys refused; names and patterns.

The ``score:`` and ``search:`` sections take their keys from the registry's parameter
models (:mod:`runner.registry`): the allowed score and method names, and every default of
a score's or method's own key, are written there once. Reading a file and turning errors
into problems with lines is :mod:`runner.spec.loader`; the rules across keys are
:mod:`runner.spec.rules`.
"""

from __future__ import annotations

import hashlib
import json
import re
import types
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any, Literal, Union, get_args, get_origin

from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Field,
    PrivateAttr,
    StrictBool,
    StrictInt,
    StrictStr,
    WithJsonSchema,
    field_validator,
    model_validator,
)

from runner.errors import Problem
from runner.fields import Count, PositiveCount, Real, Variable
from runner.registry import (
    METHOD_NAMES,
    SCORE_NAMES,
    BDeuParams,
    BGeParams,
    ExactParams,
    FirstAscentParams,
    OrderParams,
    RestartParams,
    TabuParams,
    default_method,
)

IMPLEMENTED_KINDS = ("discrete", "continuous")
OPTIONAL_SECTIONS = ("bootstrap", "fit", "evaluation")  # a broken one is dropped whole

NAME_PATTERN = r"^[a-z0-9]+(-[a-z0-9]+)*$"
NAME_MAX = 100  # the spec name is a folder name; 255 bytes is the common file-system limit
SHA256_PATTERN = r"^[0-9a-f]{64}$"
SCHEMA_DIALECT = "https://json-schema.org/draft/2020-12/schema"
TIER_NAME_LENGTH = 40
#: The default most combinations a spec's ``vary`` section may give, and how many bases
#: deep an ``extends`` chain may go (runner.spec.loader reads it).
VARY_LIMIT = 100
MAX_EXTENDS_DEPTH = 5
#: Top-level keys that are not settings of one run: a ``vary`` key may not name them.
NOT_VARIED = ("name", "vary", "vary_limit", "extends")

PATTERN_HINTS = {
    NAME_PATTERN: "must be lowercase letters and digits, in words joined by single '-'",
    SHA256_PATTERN: "must be 64 lowercase hexadecimal digits",
}

if TYPE_CHECKING:
    ScoreName = str
    MethodName = str
else:  # the allowed names, from the registry (a Literal gives "must be one of ...")
    ScoreName = Literal[SCORE_NAMES]
    MethodName = Literal[METHOD_NAMES]


# --------------------------------------------------------------------------- field types


def _distinct_ends(pair: list[str]) -> list[str]:
    if len(pair) == 2 and pair[0] == pair[1]:
        raise ValueError(f"an edge needs two different variables, not '{pair[0]}' twice")
    return pair


Pair = Annotated[
    list[Variable],
    Field(min_length=2, max_length=2),
    AfterValidator(_distinct_ends),
    WithJsonSchema({"type": "array", "items": {"type": "string", "minLength": 1},
                    "minItems": 2, "maxItems": 2}),
]
TierName = Annotated[StrictStr, Field(min_length=1, max_length=TIER_NAME_LENGTH)]


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


# --------------------------------------------------------------------------- the models


class ColumnSpec(_Section):
    """How one column of the data is read."""

    kind: Literal["discrete", "continuous"] = Field(
        "discrete", description="discrete: values are states; continuous: numbers (binned "
        "for a discrete score, as they are for a Gaussian one). Undeclared numeric columns "
        "with more distinct values than max_states are continuous.")
    states: Annotated[list[Variable], Field(min_length=1, json_schema_extra={
        "uniqueItems": True})] | None = Field(
        None, description="discrete only: the states, in this order; a value not listed is "
        "an error.")
    bins: Annotated[StrictInt, Field(ge=2)] | None = Field(
        None, description="continuous only: number of bins (at least 2); makes the column "
        "discrete for a discrete score.")
    binning: Literal["quantile", "equal-width"] | None = Field(
        None, description="continuous only: how bin edges are chosen (default quantile).")


class DatasetSpec(_Section):
    """The data file and how to read it."""

    path: Annotated[StrictStr, Field(min_length=1)] = Field(
        description="CSV file, relative to the spec file's folder.")
    sha256: Annotated[StrictStr, Field(pattern=SHA256_PATTERN)] | None = Field(
        None, description="Optional pin: sha256 of the data file; a different file stops the "
        "run.")
    missing: Literal["error", "drop-rows", "available-case", "structural-em"] = Field(
        "error", description="What an empty cell does: stop with an error, drop its row, "
        "keep the row and score each family on the rows where its columns are present "
        "(available-case; assumes values missing completely at random), or keep the row and "
        "fill its gaps with every state weighted by EM (structural-em; assumes values "
        "missing at random). Both keep-the-row policies take the scores loglik, aic and bic "
        "and a DAG search.")
    max_states: Annotated[StrictInt, Field(ge=2)] = Field(
        64, description="Most distinct values a discrete column may have; an undeclared "
        "numeric column with more is continuous.")
    columns: dict[str, ColumnSpec] = Field(
        default_factory=dict, description="Optional per-column kind and state order.")
    missing_values: list[StrictStr] | None = Field(
        None, description="The spellings (after stripping whitespace) that mean a missing "
        "value; null: '', NA, N/A, NaN, nan, null, NULL and None. A spelling that is a "
        "declared state of a column is a state there.")
    use: Annotated[list[Variable], Field(min_length=1)] | None = Field(
        None, description="Only these columns of the data file are read (in the file's "
        "order); not with 'drop'.")
    drop: Annotated[list[Variable], Field(min_length=1)] | None = Field(
        None, description="These columns of the data file are not read; not with 'use'.")
    bins: Annotated[StrictInt, Field(ge=2)] | None = Field(
        None, description="Under a discrete score: the number of bins of every continuous "
        "column that has no entry under 'columns' (at least 2).")
    binning: Literal["quantile", "equal-width"] | None = Field(
        None, description="How the bin edges of those columns are chosen (default quantile); "
        "needs 'bins'.")
    allow_outside: StrictBool = Field(
        False, description="Whether the data file may lie outside the project folder (the "
        "spec's folder, or its parent when that folder is named 'specs'); symlinks are "
        "followed.")


class ScoreSpec(BGeParams, BDeuParams, _Section):
    """The score a structure is judged by; its keys are the registry's score parameters
    (:mod:`runner.registry`), each with its one default."""

    name: ScoreName = Field("bic", description="Score function.")


class BudgetSpec(_Section):
    """When a search stops at the latest; the best graph so far is kept."""

    max_steps: PositiveCount | None = Field(10000, description="Most moves applied; null: no "
                                            "limit.")
    max_evaluations: PositiveCount | None = Field(
        None, description="Most family scores computed; null: no limit.")
    max_seconds: Annotated[Real, Field(gt=0)] | None = Field(
        600.0, description="Wall-clock limit in seconds; null: no limit.")


class CandidatesSpec(_Section):
    """Candidate parents screened before the search (wide data): each variable's
    possible parents narrowed to a few (:mod:`runner.search.candidates`)."""

    method: Literal["mutual-information", "mmpc"] = Field(description=(
        "mutual-information: the k variables of highest mutual information, re-estimated "
        "after each search (Sparse Candidate, Friedman, Nachman & Pe'er 1999); mmpc: the "
        "Max-Min Parents and Children set by G-tests (Tsamardinos, Brown & Aliferis 2006)."))
    k: PositiveCount = Field(10, description="Most candidate parents per variable (its "
                             "required parents come in addition).")
    rounds: Count | None = Field(None, description=(
        "mutual-information only: re-estimation rounds after the first search (null: 2; "
        "0: none)."))
    alpha: Annotated[Real, Field(gt=0, lt=1)] | None = Field(
        None, description="mmpc only: the level of the independence tests (null: 0.05).")

    @model_validator(mode="after")
    def _keys_of_the_method(self) -> CandidatesSpec:
        if self.method == "mmpc" and self.rounds is not None:
            raise ValueError("'rounds' only applies to method mutual-information (mmpc "
                             "runs no re-estimation rounds): remove search.candidates.rounds")
        if self.method == "mutual-information" and self.alpha is not None:
            raise ValueError("'alpha' only applies to method mmpc (its test level): remove "
                             "search.candidates.alpha")
        return self


class SearchSpec(TabuParams, FirstAscentParams, OrderParams, ExactParams, RestartParams,
                 _Section):
    """How the space of graphs is searched; the method's own keys (and the restart keys of
    the local methods) are the registry's method parameters (:mod:`runner.registry`),
    inherited with their types, defaults and descriptions. (The parameter models' helpers,
    such as ``effective``, are for those models: the pipeline picks the chosen method's
    model out of this section.)"""

    method: MethodName = Field("hill-climb", description=(
        "Search method; 'ges' (equivalence classes) needs a score-equivalent score. When "
        "absent: 'ges' for score-equivalent scores, 'hill-climb' for k2."))
    start: Literal["empty", "required"] = Field(
        "empty", description="Start graph: no edges, or the required edges.")
    seed: Count = Field(0, description="Random seed (ties, restarts, sampling).")
    budget: BudgetSpec = Field(default_factory=BudgetSpec, description="Stopping limits.")
    candidates: CandidatesSpec | None = Field(
        None, description="Optional candidate parents screened before the search, for "
        "wide data: {method: mutual-information | mmpc, k: 10}; local methods and ges only; "
        "discrete scores only.")


class GateSpec(_Section):
    """What a re-check holds a new result to, against the pinned baseline."""

    score_tolerance: Annotated[Real, Field(ge=0)] = Field(
        1e-9, description="Search regression: how far (relative) the new graph may score "
        "below the baseline graph on the same rows (the new run's learning rows).")
    max_edge_changes: Count = Field(
        0, description="Edges added + removed + reversed allowed (equivalence-class level).")
    allow_new_states: StrictBool = Field(
        False, description="Whether new or vanished states in the data are accepted.")
    graph: Literal["run", "consensus"] = Field(
        "run", description="Hold the learned graph against the baseline's, or the bootstrap "
        "consensus networks (run | consensus; the key was `on` before).")
    # Default 10 log-units: 2 ln B = 20, beyond the "very strong" grade (2 ln B > 10) of
    # Kass & Raftery (1995), "Bayes factors", JASA 90(430): 773-795; measured margins of
    # same-network drops stay far below it (runner/compare/gate.py DEFAULT_EVIDENCE).
    evidence: Annotated[Real, Field(gt=0)] = Field(
        10.0, description="Structural drift: log-units (natural log of the Bayes factor) "
        "by which a re-learned graph must beat the baseline graph on the same rows to count "
        "as drift. Scale (Kass & Raftery 1995, Bayes factors, JASA 90: 773-795), in 2 ln B: "
        "0-2 not worth more than a bare mention, 2-6 positive, 6-10 strong, above 10 very "
        "strong; the default 10 is 2 ln B = 20.")


class BootstrapBudgetSpec(_Section):
    """A limit on all replicates together (each replicate's search also keeps
    ``search.budget``)."""

    max_seconds: Annotated[Real, Field(gt=0)] | None = Field(
        None, description="Wall-clock seconds for all replicates together, counted from "
        "the start of the first; a replicate's search gets at most the time left, and one "
        "stopped by it counts as not converged. null: no total limit.")


class BootstrapSpec(_Section):
    """Resampled re-learning for edge confidence (Friedman, Goldszmidt & Wyner 1999)."""

    replicates: PositiveCount = Field(description="Number of resampled data sets.")
    seed: Count = Field(0, description="Seed of the resampling.")
    threshold: Annotated[Real, Field(gt=0, le=1)] = Field(
        0.5, description="Share of replicates an edge needs to enter the consensus graph.")
    budget: BootstrapBudgetSpec | None = Field(
        None, description="A limit on all replicates together: {max_seconds: N}.")


class FitSpec(_Section):
    """Fitting the conditional probability tables of the learned graph."""

    pseudo_count: Annotated[Real, Field(ge=0)] = Field(
        1.0, description="Dirichlet pseudo-count added to every table cell (default 1.0; "
        "0 gives maximum-likelihood tables).")


class EvaluationSpec(_Section):
    """Held-out evaluation: a seeded share of rows is kept out of learning and scored."""

    holdout: Annotated[Real, Field(gt=0, lt=1)] = Field(
        description="Share of rows held out from learning.")
    seed: Count = Field(0, description="Seed of the hold-out split.")


class Spec(_Section):
    """A dagmill analysis spec: data, constraints, score, search and gate."""

    name: Annotated[StrictStr, Field(pattern=NAME_PATTERN, max_length=NAME_MAX)] = Field(
        description="Names the results folder: lowercase letters, digits and '-', at most "
        "100 characters (a folder name; file systems allow 255 bytes).")
    dataset: DatasetSpec = Field(description="Where the data is and how to read it.")
    tiers: list[Annotated[list[Variable], Field(min_length=1)]] = Field(
        default_factory=list, description="Ordered groups of variables: edges may go from an "
        "earlier tier to a later one, never back. A variable in no tier is unconstrained.")
    tier_names: list[TierName] | None = Field(
        None, description="Optional short labels of the tiers, one per tier, in order; "
        "messages and reports show them beside the tier's number.")
    within_tier: Literal["allowed", "forbidden"] = Field(
        "allowed", description="Whether edges between two variables of the same tier are "
        "allowed.")
    forbidden: list[Pair] = Field(
        default_factory=list, description="Directed pairs [from, to] that may never be edges.")
    required: list[Pair] = Field(
        default_factory=list, description="Directed pairs [from, to] every learned graph "
        "contains.")
    parent_cap: Count | None = Field(
        None, description="Most parents any node may have; null: no cap.")
    score: ScoreSpec = Field(default_factory=ScoreSpec, description="The score.")
    search: SearchSpec = Field(default_factory=SearchSpec, description="The search.")
    gate: GateSpec = Field(default_factory=GateSpec, description="What a re-check enforces.")
    bootstrap: BootstrapSpec | None = Field(
        None, description="Bootstrap edge confidence and a consensus graph.")
    fit: FitSpec | None = Field(None, description="Fitting the conditional probability "
                                "tables (pseudo_count 1.0 when absent).")
    evaluation: EvaluationSpec | None = Field(
        None, description="Held-out evaluation: rows kept out of learning, then scored.")
    extends: Annotated[StrictStr, Field(min_length=1)] | None = Field(
        None, description="A base spec (a path relative to this file, conventionally "
        "starting with '_'): merged under this one, mappings key by key, lists and values "
        f"replaced; a base may extend another, at most {MAX_EXTENDS_DEPTH} deep, no cycles. "
        "Paths in a base are relative to the base file.")
    vary: dict[Annotated[StrictStr, Field(min_length=1)],
               Annotated[list[Any], Field(min_length=1)]] | None = Field(
        None, description="One run per combination of values: dotted keys of this spec "
        "(score.ess, search.seed, parent_cap, ...) to lists of values; the cartesian "
        "product, keys sorted, values in the given order; plus a summary of edge shares.")
    vary_limit: PositiveCount = Field(
        VARY_LIMIT, description="Most combinations 'vary' may give.")

    @field_validator("extends")
    @classmethod
    def _extends_is_read_from_files(cls, value: str | None) -> str | None:
        """``extends`` is resolved (and removed) when a spec file is read; a spec built
        from data that still names a base would silently miss the base's settings."""
        if value is not None:
            raise ValueError("a base spec is merged when a spec file is read "
                             "(runner.spec.load_spec); give the merged settings instead")
        return value

    @model_validator(mode="before")
    @classmethod
    def _default_method(cls, data: Any) -> Any:
        """A spec that names no search method gets the score's default one."""
        if not isinstance(data, dict):
            return data
        search, score = data.get("search"), data.get("score")
        if search is not None and (not isinstance(search, dict) or "method" in search):
            return data
        name = score.get("name", "bic") if isinstance(score, dict) else "bic"
        dataset = data.get("dataset")
        if isinstance(dataset, dict) and dataset.get("missing") in ("available-case",
                                                                    "structural-em"):
            # families counted on different rows: no score is score-equivalent then
            return {**data, "search": {**(search or {}), "method": "hill-climb"}}
        return {**data, "search": {**(search or {}), "method": default_method(str(name))}}

    _source_path: Path | None = PrivateAttr(default=None)
    _file: str | None = PrivateAttr(default=None)
    _lines: dict[str, int] = PrivateAttr(default_factory=dict)
    _origins: dict[str, str] = PrivateAttr(default_factory=dict)
    _warnings: list[Problem] = PrivateAttr(default_factory=list)
    _combinations: tuple[Combination, ...] = PrivateAttr(default=())

    @property
    def source_path(self) -> Path:
        """The spec file, absolute. Only specs read by :func:`load_spec` have one."""
        if self._source_path is None:
            raise AttributeError("this Spec was not read from a file")
        return self._source_path

    @property
    def file(self) -> str:
        """The spec file as it was named when read (``<spec>`` for one built in memory)."""
        return self._file or str(self._source_path or "<spec>")

    def attach_source(self, path: Path, file: str, lines: dict[str, int],
                      warnings: list[Problem], origins: dict[str, str] | None = None) -> None:
        """Record where the spec was read from (by :func:`runner.spec.loader.load_spec`);
        ``origins`` maps the key paths that came from a base spec (``extends``) to it."""
        self._source_path = path
        self._file = file
        self._lines = dict(lines)
        self._origins = dict(origins or {})
        self._warnings = list(warnings)

    def locate(self, key_path: str) -> tuple[str, int | None]:
        """(file, line) of a dotted key path (or of its nearest parent that has a line):
        the base spec's file for a value that came from one."""
        return locate(self._lines, self._origins, self.file, dotted(key_path))

    def relocate(self, problems: list[Problem]) -> list[Problem]:
        """Problems about this spec's keys, pointed at the file each key came from (a
        base spec's, with its line) instead of this spec's."""
        out = []
        for p in problems:
            if p.file == self.file and p.key and p.line == self.line_of(p.key):
                file, line = self.locate(p.key)
                if file != p.file:
                    p = replace(p, file=file, line=line)
            out.append(p)
        return out

    @property
    def combinations(self) -> tuple[Combination, ...]:
        """The specs of the ``vary`` section, one per combination (empty without one)."""
        return self._combinations

    def attach_combinations(self, combinations: tuple[Combination, ...]) -> None:
        """Set by :func:`runner.spec.loader.load_spec` for a spec with ``vary``."""
        self._combinations = combinations

    @property
    def warnings(self) -> list[Problem]:
        """Warnings found while loading (the spec is usable despite them)."""
        return list(self._warnings)

    def line_of(self, key_path: str) -> int | None:
        """1-based line of a dotted key path, else of its nearest parent that has one."""
        return nearest_line(self._lines, dotted(key_path))

    def dataset_path(self) -> Path:
        """``dataset.path`` resolved against the spec file's folder (or the current folder)."""
        base = self._source_path.parent if self._source_path is not None else Path.cwd()
        return (base / self.dataset.path).resolve()

    def project_folder(self) -> Path:
        """The folder a data file must lie in unless ``dataset.allow_outside`` is true: the
        parent of the spec's folder (a project keeps its specs in a folder of their own,
        ``specs/`` or any other name, beside ``datasets/`` and ``results/``). Resolved,
        symlinks followed."""
        base = self._source_path.parent if self._source_path is not None else Path.cwd()
        return base.resolve().parent

    def dataset_outside_problem(self) -> Problem | None:
        """A problem naming ``dataset.path`` when the data file resolves (symlinks
        followed) outside :meth:`project_folder` and ``dataset.allow_outside`` is not true;
        else None."""
        if self.dataset.allow_outside:
            return None
        path, folder = self.dataset_path(), self.project_folder()
        if path.is_relative_to(folder):
            return None
        return Problem(
            self.file, f"the data file {path} lies outside the project folder {folder}; a "
            "spec may read only files inside it, so that a spec from elsewhere cannot copy "
            "any readable file into records and logs (set dataset.allow_outside: true if "
            "this file is meant, or pass it with --data)",
            line=self.line_of("dataset.path"), key="dataset.path", value=self.dataset.path)


@dataclass(frozen=True)
class Combination:
    """One combination of a spec's ``vary`` section: the values (dotted key -> value, keys
    sorted) and the whole spec with them set (no ``vary`` section of its own)."""

    values: dict[str, Any]
    spec: Spec

    @property
    def label(self) -> str:
        """``score.ess=1, search.seed=2``."""
        return ", ".join(f"{k}={json.dumps(v)}" for k, v in self.values.items())


# --------------------------------------------------------------------------- the spec as data


#: ``dataset`` keys left out of the normalised spec when not given.
_OPTIONAL_DATASET_KEYS = ("missing_values", "use", "drop", "bins", "binning")


def normalised_spec(spec: Spec, seed: int | None = None) -> dict[str, Any]:
    """The spec as plain JSON data, defaults filled in; ``seed`` overrides ``search.seed``.
    ``tier_names``, ``bootstrap.budget`` and ``search.candidates`` appear only when the
    spec gives them (older specs keep their hash)."""
    data = spec.model_dump(mode="json")
    data.pop("extends", None)  # the merged spec is what counts
    if data.get("vary") is None:  # specs without vary keep their hash
        data.pop("vary", None)
        data.pop("vary_limit", None)
    if data.get("tier_names") is None:
        data.pop("tier_names", None)
    if data["search"].get("candidates") is None:  # older specs keep their hash
        data["search"].pop("candidates", None)
    if isinstance(data.get("bootstrap"), dict) and data["bootstrap"].get("budget") is None:
        data["bootstrap"].pop("budget", None)  # older bootstrap specs keep their hash
    for key in _OPTIONAL_DATASET_KEYS:  # absent when not given: older specs keep their hash
        if data["dataset"].get(key) is None:
            data["dataset"].pop(key, None)
    if not data["dataset"].get("allow_outside"):  # absent when false: older specs keep their hash
        data["dataset"].pop("allow_outside", None)
    if seed is not None:
        data["search"]["seed"] = seed
    return _sort_keys(data)


def spec_sha256(spec: Spec, seed: int | None = None) -> str:
    """sha256 (hex) of the canonical JSON of :func:`normalised_spec`."""
    text = json.dumps(normalised_spec(spec, seed), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def spec_json_schema() -> dict[str, Any]:
    """The JSON Schema (draft 2020-12) of a spec file, for editors and other tools."""
    schema = Spec.model_json_schema()
    return {
        "$schema": SCHEMA_DIALECT,
        **schema,
        "title": "dagmill spec",
        "description": "One analysis for dagmill: the data file, constraints on the graph, "
        "the score, the search and the re-check gate. Paths are relative to the spec file.",
    }


def tier_label(index: int, names: list[str] | None = None) -> str:
    """A tier as messages show it: numbered from 1, with its name when the spec gives
    tier names (``tier 2 ("firing")``); ``index`` counts from 0."""
    label = f"tier {index + 1}"
    if names is not None and 0 <= index < len(names):
        label += f' ("{names[index]}")'
    return label


def dotted(key_path: str) -> str:
    """Accept ``tiers[1][0]`` as well as ``tiers.1.0``."""
    return re.sub(r"\[(\d+)\]", r".\1", key_path).strip(".")


def nearest_key(lines: dict[str, int], key: str) -> str | None:
    """The key path itself, else its nearest parent, that has a line."""
    parts = key.split(".") if key else []
    while parts:
        if ".".join(parts) in lines:
            return ".".join(parts)
        parts.pop()
    return None


def locate(lines: dict[str, int], origins: dict[str, str], file: str,
           key: str) -> tuple[str, int | None]:
    """(file, line) of a key path: ``lines`` holds the lines, ``origins`` the file of the
    keys that came from a base spec (the others are ``file``'s)."""
    found = nearest_key(lines, key)
    if found is None:
        return file, None
    return origins.get(found, file), lines[found]


def nearest_line(lines: dict[str, int], key: str) -> int | None:
    """The line of a dotted key path, else of its nearest parent that has one."""
    parts = key.split(".") if key else []
    while parts:
        line = lines.get(".".join(parts))
        if line is not None:
            return line
        parts.pop()
    return None


def _sort_keys(value: Any) -> Any:
    if isinstance(value, dict):
        return {k: _sort_keys(value[k]) for k in sorted(value)}
    if isinstance(value, list):
        return [_sort_keys(v) for v in value]
    return value


def bare_type(tp: Any) -> Any:
    """A type without its ``Annotated`` and ``Optional`` wrappers (the loader's messages
    and the ``vary`` rules look through them to the model or literal beneath)."""
    while True:
        origin = get_origin(tp)
        if origin is Annotated:
            tp = get_args(tp)[0]
        elif origin in (Union, types.UnionType):
            inner = [a for a in get_args(tp) if a is not type(None)]
            if len(inner) != 1:
                return tp
            tp = inner[0]
        else:
            return tp
