"""The analysis spec: one YAML file, read safely, checked completely.

:func:`load_spec` reads a spec file and returns a frozen :class:`Spec`, or raises
:class:`~runner.errors.InputError` carrying every problem it found, each with the file, the
line, the dotted key path and the offending value. The file is composed with a YAML loader
derived from ``yaml.SafeLoader`` (no object construction); only ``true``/``false`` are
booleans (so a key ``on`` stays the text ``on``) and dates stay text.

Checking runs in three passes, all of whose problems are reported together:

1. the YAML node tree: syntax, duplicate keys, tags that have no place in a spec;
2. the models below: unknown keys (with a "did you mean"), types, ranges, allowed values;
3. rules across keys: capabilities this version lacks, parameters the chosen method ignores
   (warnings), repeated tier members, required edges that other rules or each other rule out.

A pass-3 rule runs only when none of the key paths it reads failed pass 2, so one broken
key never hides the problems of unrelated ones.
"""

from __future__ import annotations

import copy
import difflib
import hashlib
import json
import re
import types
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Annotated, Any, Literal, Union, get_args, get_origin

import yaml
from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Field,
    PlainValidator,
    PrivateAttr,
    Strict,
    StrictBool,
    StrictInt,
    StrictStr,
    ValidationError,
    WithJsonSchema,
    model_validator,
)

from runner.catalog import default_method
from runner.errors import InputError, Problem

IMPLEMENTED_SCORES = ("loglik", "aic", "bic", "bdeu", "k2", "gaussian-loglik", "gaussian-bic",
                      "bge")
IMPLEMENTED_METHODS = ("hill-climb", "first-ascent", "stochastic", "tabu", "ges", "order",
                       "exact")
IMPLEMENTED_KINDS = ("discrete", "continuous")
OPTIONAL_SECTIONS = ("bootstrap", "fit", "evaluation")  # a broken one is dropped whole

NAME_PATTERN = r"^[a-z0-9]+(-[a-z0-9]+)*$"
SHA256_PATTERN = r"^[0-9a-f]{64}$"
SCHEMA_DIALECT = "https://json-schema.org/draft/2020-12/schema"

_PATTERN_HINTS = {
    NAME_PATTERN: "must be lowercase letters and digits, in words joined by single '-'",
    SHA256_PATTERN: "must be 64 lowercase hexadecimal digits",
}
_MAX_NODES = 200_000


# --------------------------------------------------------------------------- field types


def _distinct_ends(pair: list[str]) -> list[str]:
    if len(pair) == 2 and pair[0] == pair[1]:
        raise ValueError(f"an edge needs two different variables, not '{pair[0]}' twice")
    return pair


def _check_sample(value: object) -> float | int:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ValueError("must be a share in (0, 1] or a whole count of at least 1")
    if isinstance(value, int):
        if value < 1:
            raise ValueError("a count of neighbours must be at least 1")
        return value
    if not 0 < value <= 1:
        raise ValueError("a share of neighbours must be in (0, 1]; write a whole number "
                         "for a count")
    return value


Variable = Annotated[StrictStr, Field(min_length=1)]
Pair = Annotated[
    list[Variable],
    Field(min_length=2, max_length=2),
    AfterValidator(_distinct_ends),
    WithJsonSchema({"type": "array", "items": {"type": "string", "minLength": 1},
                    "minItems": 2, "maxItems": 2}),
]
Count = Annotated[StrictInt, Field(ge=0)]
PositiveCount = Annotated[StrictInt, Field(ge=1)]
Real = Annotated[float, Strict(), Field(allow_inf_nan=False)]
Sample = Annotated[
    float | int,
    PlainValidator(_check_sample),
    WithJsonSchema({"anyOf": [
        {"type": "number", "exclusiveMinimum": 0, "maximum": 1},
        {"type": "integer", "minimum": 1},
    ]}),
]


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
    missing: Literal["error", "drop-rows"] = Field(
        "error", description="What an empty cell does: stop with an error, or drop its row.")
    max_states: Annotated[StrictInt, Field(ge=2)] = Field(
        64, description="Most distinct values a discrete column may have; an undeclared "
        "numeric column with more is continuous.")
    columns: dict[str, ColumnSpec] = Field(
        default_factory=dict, description="Optional per-column kind and state order.")


class ScoreSpec(_Section):
    """The score a structure is judged by."""

    name: Literal["loglik", "aic", "bic", "bdeu", "k2", "gaussian-loglik", "gaussian-bic",
                  "bge"] = Field("bic", description="Score function.")
    ess: Annotated[Real, Field(gt=0)] = Field(
        1.0, description="Equivalent sample size (bdeu only).")
    alpha_mu: Annotated[Real, Field(gt=0)] | None = Field(
        None, description="bge only: weight of the prior mean, in rows (null: 1).")
    alpha_w: Annotated[Real, Field(gt=0)] | None = Field(
        None, description="bge only: Wishart degrees of freedom, above n - 1 for n variables "
        "(null: n + 2).")
    prior_scale: Annotated[Real, Field(gt=0)] | None = Field(
        None, description="bge only: t of the Wishart scale matrix T = t I (null: alpha_mu "
        "(alpha_w - n - 1) / (alpha_mu + 1)).")


class BudgetSpec(_Section):
    """When a search stops at the latest; the best graph so far is kept."""

    max_steps: PositiveCount | None = Field(10000, description="Most moves applied; null: no "
                                            "limit.")
    max_evaluations: PositiveCount | None = Field(
        None, description="Most family scores computed; null: no limit.")
    max_seconds: Annotated[Real, Field(gt=0)] | None = Field(
        600.0, description="Wall-clock limit in seconds; null: no limit.")


class SearchSpec(_Section):
    """How the space of graphs is searched."""

    method: Literal["hill-climb", "first-ascent", "stochastic", "tabu", "ges", "order",
                    "exact"] = Field("hill-climb", description=(
                        "Search method; 'ges' (equivalence classes) needs a score-equivalent "
                        "score. When absent: 'ges' for score-equivalent scores, 'hill-climb' "
                        "for k2."))
    start: Literal["empty", "required"] = Field(
        "empty", description="Start graph: no edges, or the required edges.")
    seed: Count = Field(0, description="Random seed (ties, restarts, sampling).")
    restarts: Count = Field(0, description="Extra runs from perturbed starts; the best is kept.")
    tabu_tenure: PositiveCount = Field(
        10, description="tabu only: steps a reversed move stays forbidden.")
    patience: PositiveCount | None = Field(
        None, description="tabu only: steps without a new best before stopping.")
    kick: PositiveCount | None = Field(
        None, description="With restarts: random legal moves applied to perturb the start.")
    sample: Sample | None = Field(
        None, description="first-ascent only: share (0, 1] or whole count of neighbours tried "
        "per step.")
    order: list[Variable] | None = Field(
        None, description="order only: a total order of all variables.")
    max_variables: PositiveCount = Field(
        20, description="exact only: most variables exact search takes on (it needs 2^n "
        "memory).")
    max_candidate_sets: PositiveCount = Field(
        1_000_000, description="order and exact: most candidate parent sets scored per "
        "variable.")
    budget: BudgetSpec = Field(default_factory=BudgetSpec, description="Stopping limits.")


class GateSpec(_Section):
    """What a re-check holds a new result to, against the pinned baseline."""

    score_tolerance: Annotated[Real, Field(ge=0)] = Field(
        1e-9, description="Relative drop in per-row score allowed before failing.")
    max_edge_changes: Count = Field(
        0, description="Edges added + removed + reversed allowed (equivalence-class level).")
    allow_new_states: StrictBool = Field(
        False, description="Whether new or vanished states in the data are accepted.")
    on: Literal["run", "consensus"] = Field(
        "run", description="Compare the learned graph, or the bootstrap consensus graph.")


class BootstrapSpec(_Section):
    """Resampled re-learning for edge confidence (Friedman, Goldszmidt & Wyner 1999)."""

    replicates: PositiveCount = Field(description="Number of resampled data sets.")
    seed: Count = Field(0, description="Seed of the resampling.")
    threshold: Annotated[Real, Field(gt=0, le=1)] = Field(
        0.5, description="Share of replicates an edge needs to enter the consensus graph.")


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

    name: Annotated[StrictStr, Field(pattern=NAME_PATTERN)] = Field(
        description="Names the results folder: lowercase letters, digits and '-'.")
    dataset: DatasetSpec = Field(description="Where the data is and how to read it.")
    tiers: list[Annotated[list[Variable], Field(min_length=1)]] = Field(
        default_factory=list, description="Ordered groups of variables: edges may go from an "
        "earlier tier to a later one, never back. A variable in no tier is unconstrained.")
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
        return {**data, "search": {**(search or {}), "method": default_method(str(name))}}

    _source_path: Path | None = PrivateAttr(default=None)
    _file: str | None = PrivateAttr(default=None)
    _lines: dict[str, int] = PrivateAttr(default_factory=dict)
    _warnings: list[Problem] = PrivateAttr(default_factory=list)

    @property
    def source_path(self) -> Path:
        """The spec file, absolute. Only specs read by :func:`load_spec` have one."""
        if self._source_path is None:
            raise AttributeError("this Spec was not read from a file")
        return self._source_path

    @property
    def warnings(self) -> list[Problem]:
        """Warnings found while loading (the spec is usable despite them)."""
        return list(self._warnings)

    def line_of(self, key_path: str) -> int | None:
        """1-based line of a dotted key path, else of its nearest parent that has one."""
        return _nearest_line(self._lines, _dotted(key_path))

    def dataset_path(self) -> Path:
        """``dataset.path`` resolved against the spec file's folder (or the current folder)."""
        base = self._source_path.parent if self._source_path is not None else Path.cwd()
        return (base / self.dataset.path).resolve()


# --------------------------------------------------------------------------- public API


def load_spec(path: str | Path) -> Spec:
    """Read and check a spec file; raise InputError with every problem found in it."""
    file = str(path)
    text, problems = _read_text(Path(path), file)
    if text is None:
        raise InputError(problems)
    root, problems = _compose(text, file)
    if problems:
        raise InputError(problems)
    if root is None or (isinstance(root, yaml.ScalarNode) and root.tag == NULL_TAG):
        raise InputError(Problem(file, "the spec is empty; it needs at least 'name' and "
                                       "'dataset'"))
    tree = _build_tree(root, file)
    if not isinstance(tree.data, dict):
        if tree.problems:
            raise InputError(tree.problems)
        raise InputError(Problem(file, "the top level of a spec must be a mapping of keys",
                                 line=root.start_mark.line + 1, value=_shown(tree.data)))
    spec, problems = _validate(tree.data, tree.lines, file)
    problems = [p for p in problems if not _inside_any(p.key or "", tree.refused)]
    all_problems = _sorted_problems(tree.problems + problems)
    partial = spec if spec is not None else _partial_spec(
        tree.data, frozenset(p.key or "" for p in all_problems))
    if partial is not None:
        partial._source_path = Path(path).resolve()
        partial._file = file
        partial._lines = dict(tree.lines)
        partial._warnings = all_problems
    if spec is None or any(p.severity == "error" for p in all_problems):
        error = InputError(all_problems)
        # The parts that passed, so callers can still check the data and the names in it.
        dataset_ok = not any(_overlaps("dataset", p.key or "") or not p.key
                             for p in all_problems if p.severity == "error")
        error.partial_spec = partial if dataset_ok else None
        raise error
    return spec


def check_spec_against_columns(spec: Spec, columns: Sequence[str],
                               data_file: str | None = None) -> list[Problem]:
    """A problem for every variable the spec names that is not one of ``columns``."""
    known = set(columns)
    shown = data_file if data_file is not None else spec.dataset.path
    file = spec._file or str(spec._source_path or "<spec>")
    return [
        Problem(file, _not_a_column(name, shown, columns), line=spec.line_of(key), key=key,
                value=name)
        for key, name in _named_variables(spec) if name not in known
    ]


def normalised_spec(spec: Spec, seed: int | None = None) -> dict[str, Any]:
    """The spec as plain JSON data, defaults filled in; ``seed`` overrides ``search.seed``."""
    data = spec.model_dump(mode="json")
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


# --------------------------------------------------------------------------- reading YAML


BOOL_TAG = "tag:yaml.org,2002:bool"
TIMESTAMP_TAG = "tag:yaml.org,2002:timestamp"
FLOAT_TAG = "tag:yaml.org,2002:float"
NULL_TAG = "tag:yaml.org,2002:null"
_PLAIN_TAGS = frozenset(f"tag:yaml.org,2002:{t}" for t in
                        ("str", "int", "float", "bool", "null", "map", "seq"))


class _SpecLoader(yaml.SafeLoader):
    """SafeLoader, YAML 1.2 style: only true/false are booleans, dates stay text, and 1e-9
    is a number."""


_SpecLoader.yaml_implicit_resolvers = {
    first: [(tag, rx) for tag, rx in resolvers if tag not in (BOOL_TAG, TIMESTAMP_TAG)]
    for first, resolvers in yaml.SafeLoader.yaml_implicit_resolvers.items()
}
_SpecLoader.add_implicit_resolver(
    BOOL_TAG, re.compile(r"^(?:true|True|TRUE|false|False|FALSE)$"), list("tTfF"))
_SpecLoader.add_implicit_resolver(  # 1e-9 is a number too, not only 1.0e-9
    FLOAT_TAG, re.compile(r"^[-+]?[0-9][0-9_]*(?:\.[0-9_]*)?[eE][-+]?[0-9]+$"),
    list("-+0123456789"))


def _read_text(path: Path, file: str) -> tuple[str | None, list[Problem]]:
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        return None, [Problem(file, "no such spec file")]
    except IsADirectoryError:
        return None, [Problem(file, "is a folder, not a spec file")]
    except PermissionError:
        return None, [Problem(file, "the spec file cannot be read: permission denied")]
    except OSError as exc:
        return None, [Problem(file, f"the spec file cannot be read: {exc.strerror or exc}")]
    try:
        return raw.decode("utf-8-sig"), []
    except UnicodeDecodeError as exc:
        return None, [Problem(file, f"the spec file is not UTF-8 text (byte {exc.start})")]


def _compose(text: str, file: str) -> tuple[yaml.Node | None, list[Problem]]:
    try:
        return yaml.compose(text, Loader=_SpecLoader), []
    except yaml.MarkedYAMLError as exc:
        return None, [_yaml_problem(exc, file)]
    except yaml.reader.ReaderError as exc:
        return None, [_reader_problem(exc, text, file)]
    except yaml.YAMLError as exc:
        return None, [Problem(file, f"not valid YAML: {exc}")]
    except RecursionError:
        return None, [Problem(file, "not a usable spec: the YAML is nested too deeply")]


def _yaml_problem(exc: yaml.MarkedYAMLError, file: str) -> Problem:
    mark = exc.problem_mark or exc.context_mark
    problem = exc.problem or "cannot be parsed"
    context = exc.context or ""
    if exc.context_mark is not None and exc.context_mark is not mark and context:
        context += f" at line {exc.context_mark.line + 1}"
    if not context:
        message = problem
    elif context.startswith("while"):
        message = f"{problem} ({context})"
    else:
        message = f"{context}, {problem}"
    if mark is not None:
        message += f", column {mark.column + 1}"
    return Problem(file, "YAML syntax error: " + message,
                   line=None if mark is None else mark.line + 1)


def _reader_problem(exc: yaml.reader.ReaderError, text: str, file: str) -> Problem:
    line = text[: exc.position].count("\n") + 1 if isinstance(exc.position, int) else None
    code = exc.character if isinstance(exc.character, int) else ord(str(exc.character)[:1] or "?")
    return Problem(file, f"the file holds a character YAML does not allow (U+{code:04X})",
                   line=line)


@dataclass
class _Tree:
    """Plain data built from a composed YAML node tree, with key lines and problems."""

    file: str
    data: Any = None
    lines: dict[str, int] = field(default_factory=dict)
    problems: list[Problem] = field(default_factory=list)
    nodes: int = 0
    refused: set[str] = field(default_factory=set)

    def refuse(self, message: str, line: int, key: str | None) -> None:
        """Record a problem with a node; its value becomes null and is not reported again."""
        self.problems.append(Problem(self.file, message, line=line, key=key))
        self.refused.add(key or "")


def _build_tree(root: yaml.Node, file: str) -> _Tree:
    tree = _Tree(file)
    constructor = yaml.constructor.SafeConstructor()
    try:
        tree.data = _node_data(root, (), tree, constructor, frozenset())
    except RecursionError:
        tree.problems.append(Problem(file, "not a usable spec: the YAML is nested too deeply"))
    return tree


def _node_data(node: yaml.Node, path: tuple[str, ...], tree: _Tree,
               constructor: yaml.constructor.SafeConstructor,
               active: frozenset[int]) -> Any:
    tree.nodes += 1
    line = node.start_mark.line + 1
    key = ".".join(path) or None
    if tree.nodes > _MAX_NODES:
        if tree.nodes == _MAX_NODES + 1:
            tree.refuse("the spec is too large once its aliases are expanded", line, key)
        return None
    if id(node) in active:
        tree.refuse("an alias refers to itself", line, key)
        return None
    if node.tag not in _PLAIN_TAGS:
        tree.refuse(f"the YAML tag '{node.tag}' has no place in a spec; write plain values",
                    line, key)
        return None
    inner = active | {id(node)}
    if isinstance(node, yaml.MappingNode):
        return _mapping_data(node, path, tree, constructor, inner)
    if isinstance(node, yaml.SequenceNode):
        items = []
        for index, item in enumerate(node.value):
            tree.lines[".".join((*path, str(index)))] = item.start_mark.line + 1
            items.append(_node_data(item, (*path, str(index)), tree, constructor, inner))
        return items
    try:
        return constructor.construct_object(node, deep=True)
    except (yaml.YAMLError, ValueError) as exc:
        tree.refuse(f"unreadable value {node.value!r}: {exc}", line, key)
        return None


def _mapping_data(node: yaml.MappingNode, path: tuple[str, ...], tree: _Tree,
                  constructor: yaml.constructor.SafeConstructor,
                  active: frozenset[int]) -> dict[str, Any]:
    result: dict[str, Any] = {}
    first_line: dict[str, int] = {}
    for key_node, value_node in node.value:
        line = key_node.start_mark.line + 1
        if not isinstance(key_node, yaml.ScalarNode):
            tree.problems.append(Problem(tree.file, "a key must be plain text, not a list or "
                                         "mapping", line=line, key=".".join(path) or None))
            continue
        name = str(key_node.value)
        dotted = ".".join((*path, name))
        if name in first_line:
            tree.problems.append(Problem(
                tree.file, f"duplicate key '{name}'; it is first given at line "
                f"{first_line[name]}", line=line, key=dotted))
            continue
        first_line[name] = line
        tree.lines[dotted] = line
        result[name] = _node_data(value_node, (*path, name), tree, constructor, active)
    return result


# --------------------------------------------------------------------------- pass 2: models


def _validate(data: dict[str, Any], lines: dict[str, int],
              file: str) -> tuple[Spec | None, list[Problem]]:
    try:
        spec = Spec.model_validate(data)
    except ValidationError as exc:
        problems = _dedupe(_model_problem(err, data, lines, file) for err in exc.errors())
    else:
        return spec, _rule_problems_for(spec, data, lines, file, frozenset())
    broken = frozenset(p.key or "" for p in problems)
    partial = _partial_spec(data, broken)
    if partial is not None:
        problems += _rule_problems_for(partial, data, lines, file, broken)
    return None, problems


def _partial_spec(data: dict[str, Any], broken: frozenset[str]) -> Spec | None:
    """A spec from the parts that passed: broken keys dropped (defaults apply), stand-ins for
    broken required keys. Rules only read it where none of their keys are broken."""
    good = copy.deepcopy(data)
    for key in broken:
        _drop(good, key.split(".") if key else [])
    for section in OPTIONAL_SECTIONS:  # a broken section goes whole
        if any(_overlaps(section, key) for key in broken):
            good.pop(section, None)
    good.setdefault("name", "stand-in")
    if not isinstance(good.get("dataset"), dict):
        good["dataset"] = {}
    good["dataset"].setdefault("path", ".")
    try:
        return Spec.model_validate(good)
    except ValidationError:
        return None


def _drop(data: Any, parts: list[str]) -> None:
    """Delete the innermost mapping key on an existing path (a list item drops its list)."""
    current, last = data, None
    for part in parts:
        if isinstance(current, dict) and part in current:
            last = (current, part)
            current = current[part]
        elif isinstance(current, list) and part.isdigit() and int(part) < len(current):
            current = current[int(part)]
        else:
            return
    if last is not None:
        del last[0][last[1]]


def _inside_any(key: str, roots: set[str]) -> bool:
    """Whether a key path is one of ``roots`` or below one of them."""
    return any(not root or key == root or key.startswith(root + ".") for root in roots)


def _overlaps(need: str, key: str) -> bool:
    """Whether a broken key path and a rule's key path touch (equal, or one inside the other)."""
    return key == need or key.startswith(need + ".") or need.startswith(key + ".") or not key


def _model_problem(err: Any, data: Any, lines: dict[str, int], file: str) -> Problem:
    path = _clean_loc(err["loc"], data, err["type"] == "missing")
    key = ".".join(path) or None
    kind = err["type"]
    value = None if kind in ("missing", "extra_forbidden") else _shown(err.get("input"))
    return Problem(file, _model_message(err, path), line=_nearest_line(lines, key or ""),
                   key=key, value=value)


def _clean_loc(loc: tuple[Any, ...], data: Any, missing: bool) -> tuple[str, ...]:
    """Keep the parts of a pydantic location that name keys or list items of the data."""
    out: list[str] = []
    current = data
    for index, part in enumerate(loc):
        if isinstance(current, dict) and isinstance(part, str) and part in current:
            current = current[part]
        elif isinstance(current, list) and isinstance(part, int) and 0 <= part < len(current):
            current = current[part]
        elif not (missing and index == len(loc) - 1):
            continue
        out.append(str(part))
    return tuple(out)


def _model_message(err: Any, path: tuple[str, ...]) -> str:
    kind, ctx = err["type"], err.get("ctx") or {}
    if kind == "missing":
        return "is required"
    if kind == "extra_forbidden":
        return _unknown_key_message(path)
    if kind == "literal_error":
        return _choice_message(path, err.get("input"))
    fixed = {
        "int_type": "must be a whole number", "float_type": "must be a number",
        "string_type": "must be text (quote it if it looks like a number or null)",
        "bool_type": "must be true or false", "list_type": "must be a list",
        "dict_type": "must be a mapping of keys", "model_type": "must be a mapping of keys",
        "finite_number": "must be a finite number",
    }
    if kind in fixed:
        return fixed[kind]
    bounds = {"greater_than_equal": ("ge", "must be at least"),
              "greater_than": ("gt", "must be greater than"),
              "less_than_equal": ("le", "must be at most"),
              "less_than": ("lt", "must be less than")}
    if kind in bounds:
        name, text = bounds[kind]
        return f"{text} {ctx.get(name)}"
    if kind == "string_pattern_mismatch":
        pattern = str(ctx.get("pattern", ""))
        return _PATTERN_HINTS.get(pattern, f"must match the pattern {pattern}")
    if kind in ("too_short", "string_too_short"):
        return _length_message("at least", ctx.get("min_length"), kind)
    if kind in ("too_long", "string_too_long"):
        return _length_message("at most", ctx.get("max_length"), kind)
    message = str(err.get("msg", "is not valid"))
    return message.removeprefix("Value error, ")


def _length_message(bound: str, count: Any, kind: str) -> str:
    if kind.startswith("string"):
        return "must not be empty" if count == 1 and bound == "at least" else (
            f"must have {bound} {count} characters")
    noun = "item" if count == 1 else "items"
    return f"must have {bound} {count} {noun}"


def _unknown_key_message(path: tuple[str, ...]) -> str:
    name = path[-1] if path else "?"
    valid = _keys_at(path[:-1])
    message = f"unknown key '{name}'"
    close = difflib.get_close_matches(name, valid, n=1)
    if close:
        return message + f"; did you mean '{close[0]}'?"
    if valid:
        message += "; valid keys here: " + ", ".join(valid)
    return message


def _choice_message(path: tuple[str, ...], given: Any) -> str:
    allowed = [str(a) for a in _literal_values(_type_at(path))]
    message = "must be one of " + ", ".join(f"'{a}'" for a in allowed)
    if isinstance(given, str):
        close = difflib.get_close_matches(given, allowed, n=1)
        if close:
            message += f"; did you mean '{close[0]}'?"
    return message


def _strip(tp: Any) -> Any:
    """Drop Annotated and Optional wrappers from a type."""
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


def _child_type(tp: Any, part: str) -> Any:
    tp = _strip(tp)
    if isinstance(tp, type) and issubclass(tp, BaseModel):
        found = tp.model_fields.get(part)
        return None if found is None else found.annotation
    origin = get_origin(tp)
    if origin is list:
        return get_args(tp)[0]
    if origin is dict:
        return get_args(tp)[1]
    return None


def _type_at(path: Sequence[str]) -> Any:
    tp: Any = Spec
    for part in path:
        tp = _child_type(tp, part)
        if tp is None:
            return None
    return tp


def _keys_at(path: Sequence[str]) -> list[str]:
    tp = _strip(_type_at(path))
    if isinstance(tp, type) and issubclass(tp, BaseModel):
        return list(tp.model_fields)
    return []


def _literal_values(tp: Any) -> tuple[Any, ...]:
    tp = _strip(tp)
    return get_args(tp) if get_origin(tp) is Literal else ()


# --------------------------------------------------------------------------- pass 3: rules


@dataclass(frozen=True)
class _Where:
    """Where rule problems point: the file, its key lines and the raw data."""

    file: str
    lines: dict[str, int]
    raw: dict[str, Any]

    def problem(self, key: str, message: str, value: Any = None,
                severity: str = "error") -> Problem:
        return Problem(self.file, message, line=_nearest_line(self.lines, key), key=key,
                       value=value, severity=severity)

    def line(self, key: str) -> int | None:
        return _nearest_line(self.lines, key)


Rule = Callable[[Spec, _Where], list[Problem]]


def _method_available(spec: Spec, where: _Where) -> list[Problem]:
    method = spec.search.method
    if method in IMPLEMENTED_METHODS:
        return []
    return [where.problem("search.method", f"search method '{method}' is not available in "
                          "this version of dagmill; available: " + ", ".join(IMPLEMENTED_METHODS),
                          value=method)]


def _score_available(spec: Spec, where: _Where) -> list[Problem]:
    name = spec.score.name
    if name in IMPLEMENTED_SCORES:
        return []
    return [where.problem("score.name", f"score '{name}' is not available in this version of "
                          "dagmill; available: " + ", ".join(IMPLEMENTED_SCORES), value=name)]


def _consensus_needs_bootstrap(spec: Spec, where: _Where) -> list[Problem]:
    return ([where.problem("gate.on", "gating on 'consensus' needs a bootstrap section "
                        "(bootstrap: {replicates: N, seed: S, threshold: T}); add one or use "
                        "'run'", value="consensus")]
         if spec.gate.on == "consensus" and where.raw.get("bootstrap") is None else [])


def _holdout_needs_pseudo_count(spec: Spec, where: _Where) -> list[Problem]:
    """Held-out rows may show a parent configuration or state that the learning rows lack;
    with pseudo-count 0 its probability is 0 (or undefined) and the log-likelihood -inf."""
    if spec.evaluation is None or spec.fit is None or spec.fit.pseudo_count > 0:
        return []
    return [where.problem("fit.pseudo_count", "held-out evaluation needs a pseudo-count "
                          "above 0: a state or parent configuration the learning rows lack "
                          "would get probability 0 and a log-likelihood of -inf; set "
                          "fit.pseudo_count (e.g. 1.0) or drop 'evaluation'", value=0.0)]


def _column_rules(spec: Spec, where: _Where) -> list[Problem]:
    problems: list[Problem] = []
    for name, column in spec.dataset.columns.items():
        base = f"dataset.columns.{name}"
        if column.kind not in IMPLEMENTED_KINDS:
            problems.append(where.problem(
                f"{base}.kind", f"{column.kind} columns are not available in this version of "
                "dagmill; available kinds: " + ", ".join(IMPLEMENTED_KINDS), value=column.kind))
        if column.kind == "discrete":
            for key in ("bins", "binning"):
                if getattr(column, key) is not None:
                    problems.append(where.problem(f"{base}.{key}", f"'{key}' only applies to "
                                                  "continuous columns"))
        elif column.binning is not None and column.bins is None:
            problems.append(where.problem(f"{base}.binning", "'binning' needs 'bins' (the "
                                          "number of bins)", value=column.binning))
        elif column.states is not None:
            problems.append(where.problem(f"{base}.states", "'states' only applies to discrete "
                                          "columns"))
        problems += _repeated_states(base, column.states or [], where)
    return problems


def _ignored_score_keys(spec: Spec, where: _Where) -> list[Problem]:
    given = where.raw.get("score") or {}
    if spec.score.name == "bge" or not isinstance(given, dict):
        return []
    return [where.problem(f"score.{key}", f"'{key}' only applies to score 'bge' (score is "
                          f"'{spec.score.name}'); it is ignored", severity="warning")
            for key in ("alpha_mu", "alpha_w", "prior_scale") if given.get(key) is not None]


def _repeated_states(base: str, states: list[str], where: _Where) -> list[Problem]:
    first: dict[str, int] = {}
    problems = []
    for index, state in enumerate(states):
        key = f"{base}.states.{index}"
        if state in first:
            problems.append(where.problem(key, f"state '{state}' is listed twice (first at "
                                          f"{base}.states.{first[state]})", value=state))
        else:
            first[state] = index
    return problems


_WHOLE_METHODS = ("ges", "order", "exact")  # searches that are not restarted
_IGNORED_UNLESS: tuple[tuple[str, Callable[[SearchSpec], bool], str], ...] = (
    ("tabu_tenure", lambda s: s.method != "tabu", "only applies to search method 'tabu'"),
    ("patience", lambda s: s.method != "tabu", "only applies to search method 'tabu'"),
    ("sample", lambda s: s.method != "first-ascent",
     "only applies to search method 'first-ascent'"),
    ("order", lambda s: s.method != "order", "only applies to search method 'order'"),
    ("kick", lambda s: s.restarts == 0 or s.method in _WHOLE_METHODS,
     "only applies when restarts is above 0"),
    ("restarts", lambda s: s.restarts > 0 and s.method in _WHOLE_METHODS,
     "only applies to the local searches (hill-climb, first-ascent, stochastic, tabu)"),
    ("max_variables", lambda s: s.method != "exact", "only applies to search method 'exact'"),
    ("max_candidate_sets", lambda s: s.method not in ("order", "exact"),
     "only applies to search methods 'order' and 'exact'"),
)


def _ignored_search_keys(spec: Spec, where: _Where) -> list[Problem]:
    given = where.raw.get("search") or {}
    search = spec.search
    return [
        where.problem(f"search.{key}", f"'{key}' {why} (method is '{search.method}', restarts "
                      f"{search.restarts}); it is ignored", severity="warning")
        for key, ignored, why in _IGNORED_UNLESS
        if given.get(key) is not None and ignored(search)
    ]


def _tier_positions(tiers: list[list[str]]) -> dict[str, tuple[int, int]]:
    """Each variable's first (tier, position)."""
    seen: dict[str, tuple[int, int]] = {}
    for t, tier in enumerate(tiers):
        for j, name in enumerate(tier):
            seen.setdefault(name, (t, j))
    return seen


def _tier_repeats(spec: Spec, where: _Where) -> list[Problem]:
    first = _tier_positions(spec.tiers)
    problems = []
    for t, tier in enumerate(spec.tiers):
        for j, name in enumerate(tier):
            if first[name] != (t, j):
                ft, fj = first[name]
                problems.append(where.problem(
                    f"tiers.{t}.{j}", f"'{name}' is already in tier {ft} (tiers.{ft}.{fj}, line "
                    f"{where.line(f'tiers.{ft}.{fj}')}); a variable belongs to one tier only",
                    value=name))
    return problems


def _required_vs_tiers(spec: Spec, where: _Where) -> list[Problem]:
    tier_of = {name: pos[0] for name, pos in _tier_positions(spec.tiers).items()}
    return [
        where.problem(f"required.{i}", f"required edge {a} -> {b} goes back across the tiers: "
                      f"'{a}' is in tier {tier_of[a]} and '{b}' in the earlier tier {tier_of[b]}",
                      value=[a, b])
        for i, (a, b) in enumerate(spec.required)
        if a in tier_of and b in tier_of and tier_of[b] < tier_of[a]
    ]


def _required_within_tier(spec: Spec, where: _Where) -> list[Problem]:
    if spec.within_tier != "forbidden":
        return []
    tier_of = {name: pos[0] for name, pos in _tier_positions(spec.tiers).items()}
    return [
        where.problem(f"required.{i}", f"required edge {a} -> {b} joins two variables of tier "
                      f"{tier_of[a]}, which within_tier: forbidden rules out (line "
                      f"{where.line('within_tier')})", value=[a, b])
        for i, (a, b) in enumerate(spec.required)
        if a in tier_of and b in tier_of and tier_of[a] == tier_of[b]
    ]


def _required_vs_forbidden(spec: Spec, where: _Where) -> list[Problem]:
    banned: dict[tuple[str, str], int] = {}
    for j, (a, b) in enumerate(spec.forbidden):
        banned.setdefault((a, b), j)
    return [
        where.problem(f"required.{i}", f"required edge {a} -> {b} is also forbidden "
                      f"(forbidden.{banned[(a, b)]}, line "
                      f"{where.line(f'forbidden.{banned[(a, b)]}')})", value=[a, b])
        for i, (a, b) in enumerate(spec.required) if (a, b) in banned
    ]


def _successors(edges: Sequence[Sequence[str]]) -> dict[str, list[str]]:
    graph: dict[str, list[str]] = {}
    for a, b in edges:
        graph.setdefault(a, [])
        graph.setdefault(b, [])
        if b not in graph[a]:
            graph[a].append(b)
    return graph


def _finish_order(graph: dict[str, list[str]]) -> list[str]:
    """Nodes in depth-first finishing order (iterative, so no recursion limit)."""
    order: list[str] = []
    seen: set[str] = set()
    for start in graph:
        if start in seen:
            continue
        seen.add(start)
        stack: list[tuple[str, Iterator[str]]] = [(start, iter(graph[start]))]
        while stack:
            node, successors = stack[-1]
            nxt = next(successors, None)
            if nxt is None:
                stack.pop()
                order.append(node)
            elif nxt not in seen:
                seen.add(nxt)
                stack.append((nxt, iter(graph[nxt])))
    return order


def _strong_components(graph: dict[str, list[str]]) -> list[set[str]]:
    """Strongly connected components (Kosaraju)."""
    reverse: dict[str, list[str]] = {node: [] for node in graph}
    for node, successors in graph.items():
        for nxt in successors:
            reverse[nxt].append(node)
    components: list[set[str]] = []
    assigned: set[str] = set()
    for root in reversed(_finish_order(graph)):
        if root in assigned:
            continue
        component, todo = set(), [root]
        assigned.add(root)
        while todo:
            node = todo.pop()
            component.add(node)
            for prev in reverse[node]:
                if prev not in assigned:
                    assigned.add(prev)
                    todo.append(prev)
        components.append(component)
    return components


def _cycle_through(start: str, graph: dict[str, list[str]], within: set[str]) -> list[str]:
    """A shortest cycle start -> ... -> start inside ``within`` (breadth first)."""
    came_from: dict[str, str] = {}
    frontier = [start]
    while frontier:
        following = []
        for node in frontier:
            for nxt in graph[node]:
                if nxt == start:
                    path = [node]
                    while path[-1] != start:
                        path.append(came_from[path[-1]])
                    return [*reversed(path), start]
                if nxt in within and nxt not in came_from:
                    came_from[nxt] = node
                    following.append(nxt)
        frontier = following
    return [start]


def _required_cycles(spec: Spec, where: _Where) -> list[Problem]:
    graph = _successors(spec.required)
    index_of: dict[tuple[str, str], int] = {}
    for i, (a, b) in enumerate(spec.required):
        index_of.setdefault((a, b), i)
    problems = []
    for component in _strong_components(graph):
        if len(component) < 2:
            continue
        start = next(a for a, _ in spec.required if a in component)
        cycle = _cycle_through(start, graph, component)
        key = f"required.{index_of[(cycle[0], cycle[1])]}"
        problems.append(where.problem(key, "required edges form a cycle: "
                                      + " -> ".join(cycle)))
    return problems


def _required_over_cap(spec: Spec, where: _Where) -> list[Problem]:
    cap = spec.parent_cap
    if cap is None:
        return []
    parents: dict[str, list[str]] = {}
    over: dict[str, int] = {}
    for i, (a, b) in enumerate(spec.required):
        if a not in parents.setdefault(b, []):
            parents[b].append(a)
            if len(parents[b]) == cap + 1:
                over[b] = i
    return [
        where.problem(f"required.{i}", f"'{child}' has {len(parents[child])} required parents "
                      f"({', '.join(parents[child])}), more than parent_cap {cap} allows (line "
                      f"{where.line('parent_cap')})", value=parents[child])
        for child, i in over.items()
    ]


def _repeated_pairs(section: str) -> Rule:
    def rule(spec: Spec, where: _Where) -> list[Problem]:
        first: dict[tuple[str, str], int] = {}
        problems = []
        for i, (a, b) in enumerate(getattr(spec, section)):
            if (a, b) in first:
                j = first[(a, b)]
                problems.append(where.problem(
                    f"{section}.{i}", f"[{a}, {b}] is listed twice in {section} (first at "
                    f"{section}.{j}, line {where.line(f'{section}.{j}')})", value=[a, b],
                    severity="warning"))
            else:
                first[(a, b)] = i
        return problems
    return rule


# (key paths a rule reads, rule): a rule runs only if none of its key paths is broken
_RULES: tuple[tuple[frozenset[str], Rule], ...] = (
    (frozenset({"search.method"}), _method_available),
    (frozenset({"score.name"}), _score_available),
    (frozenset(), _consensus_needs_bootstrap),
    (frozenset({"fit", "evaluation"}), _holdout_needs_pseudo_count),
    (frozenset({"dataset.columns"}), _column_rules),
    (frozenset({"score"}), _ignored_score_keys),
    (frozenset({"search.method", "search.restarts"}), _ignored_search_keys),
    (frozenset({"tiers"}), _tier_repeats),
    (frozenset({"tiers", "required"}), _required_vs_tiers),
    (frozenset({"tiers", "within_tier", "required"}), _required_within_tier),
    (frozenset({"forbidden", "required"}), _required_vs_forbidden),
    (frozenset({"required"}), _required_cycles),
    (frozenset({"required", "parent_cap"}), _required_over_cap),
    (frozenset({"forbidden"}), _repeated_pairs("forbidden")),
    (frozenset({"required"}), _repeated_pairs("required")),
)


def _rule_problems_for(spec: Spec, raw: dict[str, Any], lines: dict[str, int], file: str,
                       broken: frozenset[str]) -> list[Problem]:
    where = _Where(file, lines, raw)
    problems: list[Problem] = []
    for needs, rule in _RULES:
        if not any(_overlaps(need, key) for need in needs for key in broken):
            problems += rule(spec, where)
    return problems


# --------------------------------------------------------------------------- helpers


def _named_variables(spec: Spec) -> Iterator[tuple[str, str]]:
    """(key path, variable) for every variable the spec names."""
    for t, tier in enumerate(spec.tiers):
        for j, name in enumerate(tier):
            yield f"tiers.{t}.{j}", name
    for section in ("forbidden", "required"):
        for i, pair in enumerate(getattr(spec, section)):
            for end, name in enumerate(pair):
                yield f"{section}.{i}.{end}", name
    for name in spec.dataset.columns:
        yield f"dataset.columns.{name}", name
    for i, name in enumerate(spec.search.order or []):
        yield f"search.order.{i}", name


def _not_a_column(name: str, data_file: str, columns: Sequence[str]) -> str:
    message = f"'{name}' is not a column of {data_file}"
    close = difflib.get_close_matches(name, list(columns), n=1)
    if close:
        return message + f"; did you mean '{close[0]}'?"
    shown = list(columns)[:12]
    if shown:
        more = ", ..." if len(columns) > len(shown) else ""
        message += "; its columns are " + ", ".join(shown) + more
    return message


def _dotted(key_path: str) -> str:
    """Accept ``tiers[1][0]`` as well as ``tiers.1.0``."""
    return re.sub(r"\[(\d+)\]", r".\1", key_path).strip(".")


def _nearest_line(lines: dict[str, int], key: str) -> int | None:
    parts = key.split(".") if key else []
    while parts:
        line = lines.get(".".join(parts))
        if line is not None:
            return line
        parts.pop()
    return None


def _shown(value: Any) -> Any:
    """A value small enough to show in a message."""
    if isinstance(value, dict):
        return None
    text = repr(value)
    return value if len(text) <= 200 else text[:197] + "..."


def _dedupe(problems: Iterator[Problem] | list[Problem]) -> list[Problem]:
    seen: set[tuple[str | None, str]] = set()
    out = []
    for p in problems:
        if (p.key, p.message) not in seen:
            seen.add((p.key, p.message))
            out.append(p)
    return out


def _sorted_problems(problems: list[Problem]) -> list[Problem]:
    return sorted(problems, key=lambda p: (p.line is not None, p.line or 0))


def _sort_keys(value: Any) -> Any:
    if isinstance(value, dict):
        return {k: _sort_keys(value[k]) for k in sorted(value)}
    if isinstance(value, list):
        return [_sort_keys(v) for v in value]
    return value
