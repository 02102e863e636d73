"""The one registry of scores and search methods: every stage reads its facts from here.

A score is a :class:`ScoreEntry`, a search method a :class:`MethodEntry`. Each names its
function, its parameters (a small pydantic model whose field defaults are the only place
a default is written), what it works on, and its line in the docs table. The spec's
allowed names and its ignored-key warnings, the default method of a score, the
pipeline's dispatch, ``runner.search.local_search``, the scorer builders and the README's
table all come from :data:`SCORES` and :data:`METHODS`.

Layering. The registry sits at the top of the pipeline (spec -> data -> constraints ->
score -> search -> record) and imports nothing of it but :mod:`runner.fields`: pydantic
only, no numpy, so that reading a spec (and ``dagmill --version``) stays cheap. An
entry's functions are therefore :class:`Target` values, ``"module:attribute"`` strings
with a typed :meth:`Target.load` that imports the module on first use;
``tests/test_registry.py`` loads every target and checks its signature.

Adding a score or a method is one module plus one entry below:

* a discrete score is a family function ``f(table, q, n_rows, **arguments)`` (see
  ``runner/scores/__init__.py``); a Gaussian one is served by ``runner.scores.gaussian``;
  its ``builder`` binds it to a data set (``runner.kinds.discrete_scorer`` or
  ``gaussian_scorer``);
* a *local* method is ``method(engine, budget, *, rng, **arguments) -> SearchOutcome`` on
  the move engine, restarted by ``runner.search.restarts``; a *whole-graph* method is
  ``run(params, task) -> Found`` (``runner.search.whole``), optionally with a ``plan``
  hook that refuses a problem before any score is computed.

The parameter model's keys are spec keys (``score.KEY`` or ``search.KEY``); a key belongs
to the entries whose model has it, and the spec warns when a key is given that the chosen
entry does not take. ``Params.arguments`` maps them onto the function's keywords.
"""

from __future__ import annotations

import importlib
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, ClassVar, Generic, Literal, TypeVar, cast

from pydantic import BaseModel, ConfigDict, Field

from runner.fields import Count, PositiveCount, PositiveReal, Sample, Variable

if TYPE_CHECKING:
    from runner.data import Dataset
    from runner.scores.cache import FamilyScorer
    from runner.search.result import SearchOutcome
    from runner.search.whole import Found, PlanContext, SearchTask

F = TypeVar("F")


@dataclass(frozen=True)
class Target(Generic[F]):
    """A function named as ``"package.module:attribute"``, imported only when loaded."""

    path: str

    @property
    def module(self) -> str:
        return self.path.partition(":")[0]

    @property
    def attribute(self) -> str:
        return self.path.partition(":")[2]

    def load(self) -> F:
        """Import the module and return the attribute (AttributeError if it is missing)."""
        return cast(F, getattr(importlib.import_module(self.module), self.attribute))


@dataclass(frozen=True)
class Refusal:
    """Why a method will not run a problem: the spec key to change and the message."""

    key: str
    message: str


# --------------------------------------------------------------------------- parameters


class Params(BaseModel):
    """A score's or a method's own spec keys, each with its one default.

    ``EFFECTIVE`` gives the value a key takes when the spec leaves it null (a default the
    spec records as null, so that old records keep their spec hash); ``ARGUMENT`` the
    function keyword a key is passed as, when it differs from the key; ``NULL_MEANS``
    says in words what null means, for the docs table.
    """

    model_config = ConfigDict(extra="forbid", frozen=True)

    EFFECTIVE: ClassVar[Mapping[str, Any]] = {}
    ARGUMENT: ClassVar[Mapping[str, str]] = {}
    NULL_MEANS: ClassVar[Mapping[str, str]] = {}

    @classmethod
    def keys(cls) -> tuple[str, ...]:
        return tuple(cls.model_fields)

    @classmethod
    def pick(cls, values: Mapping[str, Any]) -> Params:
        """The parameters out of a larger mapping (a spec section): its own keys only."""
        return cls.model_validate({k: values[k] for k in cls.model_fields if k in values})

    def effective(self) -> dict[str, Any]:
        """Every key with the value used: nulls replaced by ``EFFECTIVE`` defaults."""
        return {key: self.EFFECTIVE.get(key) if value is None else value
                for key, value in self.model_dump().items()}

    def arguments(self) -> dict[str, Any]:
        """The effective values under the function's keyword names."""
        return {self.ARGUMENT.get(key, key): value for key, value in self.effective().items()}

    @classmethod
    def shown_default(cls, key: str) -> str:
        """A key's default for the docs table."""
        default = cls.model_fields[key].default
        if default is None:
            default = cls.EFFECTIVE.get(key)
        if default is None:
            return cls.NULL_MEANS.get(key, "null")
        return f"{default:_}".replace("_", ",") if isinstance(default, int) else str(default)


class NoParams(Params):
    """A score or method without keys of its own."""


class BDeuParams(Params):
    ess: PositiveReal = Field(1.0, description="Equivalent sample size (bdeu only).")


class BGeParams(Params):
    alpha_mu: PositiveReal | None = Field(
        None, description="bge only: weight of the prior mean, in rows (null: 1).")
    alpha_w: PositiveReal | None = Field(
        None, description="bge only: Wishart degrees of freedom, above n - 1 for n variables "
        "(null: n + 2).")
    prior_scale: PositiveReal | None = Field(
        None, description="bge only: t of the Wishart scale matrix T = t I (null: alpha_mu "
        "(alpha_w - n - 1) / (alpha_mu + 1)).")

    NULL_MEANS: ClassVar[Mapping[str, str]] = {
        "alpha_mu": "1", "alpha_w": "n + 2",
        "prior_scale": "alpha_mu (alpha_w - n - 1) / (alpha_mu + 1)"}


class RestartParams(Params):
    """The keys of every local method: restarts from perturbed starts."""

    restarts: Count = Field(0, description="Extra runs from perturbed starts; the best is kept.")
    kick: PositiveCount | None = Field(
        None, description="With restarts: random legal moves applied to perturb the start.")

    EFFECTIVE: ClassVar[Mapping[str, Any]] = {"kick": 5}


class FirstAscentParams(Params):
    sample: Sample | None = Field(
        None, description="first-ascent only: share (0, 1] or whole count of neighbours tried "
        "per step.")

    NULL_MEANS: ClassVar[Mapping[str, str]] = {"sample": "all"}


class TabuParams(Params):
    tabu_tenure: PositiveCount = Field(
        10, description="tabu only: steps a reversed move stays forbidden.")
    patience: PositiveCount | None = Field(
        None, description="tabu only: steps without a new best before stopping.")

    EFFECTIVE: ClassVar[Mapping[str, Any]] = {"patience": 50}
    ARGUMENT: ClassVar[Mapping[str, str]] = {"tabu_tenure": "tenure"}


class CandidateParams(Params):
    max_candidate_sets: PositiveCount = Field(
        1_000_000, description="order and exact: most candidate parent sets scored per "
        "variable.")


class OrderParams(CandidateParams):
    order: list[Variable] | None = Field(
        None, description="order only: a total order of all variables.")

    NULL_MEANS: ClassVar[Mapping[str, str]] = {
        "order": "the tiers in sequence, each tier's variables as listed"}


class ExactParams(CandidateParams):
    max_variables: PositiveCount = Field(
        20, description="exact only: most variables exact search takes on (it needs 2^n "
        "memory).")


# --------------------------------------------------------------------------- entries

DataKind = Literal["discrete", "continuous", "mixed"]
ScorerBuilder = Callable[[str, Params, "Dataset"], "FamilyScorer"]
ScoreRecorder = Callable[[Params, int], dict[str, Any]]
LocalMethod = Callable[..., "SearchOutcome"]
WholeRun = Callable[[Params, "SearchTask"], "Found"]
WholePlan = Callable[[Params, "PlanContext"], Refusal | None]


@dataclass(frozen=True)
class ScoreEntry:
    """A decomposable score.

    ``family`` is the family function of a discrete score (``f(table, q, n_rows,
    **arguments)``; None for Gaussian scores, whose family functions live in
    ``runner.scores.gaussian``); ``builder`` binds the score to a resolved data set;
    ``record`` adds settings as used to the record's ``score`` block.
    """

    name: str
    params: type[Params]
    score_equivalent: bool
    data_kind: DataKind
    builder: Target[ScorerBuilder]
    description: str
    reference: str
    family: Target[Callable[..., float]] | None = None
    record: Target[ScoreRecorder] | None = None
    #: whether the score difference of two graphs is a log Bayes factor ("exact"), about
    #: one ("approximate": BIC, Schwarz 1978), or neither (None: the maximised
    #: log-likelihood, AIC); the drift gate judges structural drift only on that scale
    bayes_factor: Literal["exact", "approximate"] | None = None


@dataclass(frozen=True)
class MethodEntry:
    """A search method.

    A ``local`` method runs on the move engine (``run``: ``method(engine, budget, *, rng,
    **arguments)``) and is restarted with :class:`RestartParams`; a ``whole`` one searches
    the graph in its own way (``run``: ``run(params, task) -> Found``), with ``plan``
    refusing a problem it will not attempt before any score is computed.
    """

    name: str
    kind: Literal["local", "whole"]
    params: type[Params]
    run: Target[Any]
    description: str
    reference: str
    needs_score_equivalent: bool = False
    improving_only: bool = False  # every applied move raises the score
    plan: Target[WholePlan] | None = None

    @property
    def restartable(self) -> bool:
        return self.kind == "local"

    def keys(self) -> tuple[str, ...]:
        """Every ``search:`` key this method takes (its own, and the restart keys)."""
        return self.params.keys() + (RestartParams.keys() if self.restartable else ())

    def local(self) -> LocalMethod:
        assert self.kind == "local"
        return cast(LocalMethod, self.run.load())

    def whole(self) -> WholeRun:
        assert self.kind == "whole"
        return cast(WholeRun, self.run.load())


_DISCRETE = Target[ScorerBuilder]("runner.kinds:discrete_scorer")
_GAUSSIAN = Target[ScorerBuilder]("runner.kinds:gaussian_scorer")
_MIXED = Target[ScorerBuilder]("runner.kinds:mixed_scorer")

SCORES: tuple[ScoreEntry, ...] = (
    ScoreEntry(
        "loglik", NoParams, True, "discrete", _DISCRETE,
        "maximised log-likelihood, sum N_ijk ln(N_ijk / N_ij); always prefers more edges",
        "-", family=Target("runner.scores.likelihood:loglik_family")),
    ScoreEntry(
        "aic", NoParams, True, "discrete", _DISCRETE,
        "loglik minus the number of free parameters", "Akaike 1974",
        family=Target("runner.scores.likelihood:aic_family")),
    ScoreEntry(
        "bic", NoParams, True, "discrete", _DISCRETE,
        "loglik minus (ln N / 2) per free parameter", "Schwarz 1978",
        family=Target("runner.scores.likelihood:bic_family"),
        bayes_factor="approximate"),
    ScoreEntry(
        "bdeu", BDeuParams, True, "discrete", _DISCRETE,
        "Bayesian Dirichlet marginal likelihood, hyperparameters ess/(q r)",
        "Buntine 1991; Heckerman, Geiger & Chickering 1995",
        family=Target("runner.scores.dirichlet:bdeu_family"),
        record=Target("runner.kinds:params_record"),
        bayes_factor="exact"),
    ScoreEntry(
        "k2", NoParams, False, "discrete", _DISCRETE,
        "Dirichlet marginal likelihood with every hyperparameter 1; equivalent DAGs can "
        "score differently", "Cooper & Herskovits 1992",
        family=Target("runner.scores.dirichlet:k2_family"),
        bayes_factor="exact"),
    ScoreEntry(
        "gaussian-loglik", NoParams, True, "continuous", _GAUSSIAN,
        "maximised log-likelihood of the least-squares fit of each child on its parents, "
        "residual variance RSS/N", "-"),
    ScoreEntry(
        "gaussian-bic", NoParams, True, "continuous", _GAUSSIAN,
        "gaussian-loglik minus (ln N / 2) per parameter (intercept, coefficients, variance)",
        "Schwarz 1978",
        bayes_factor="approximate"),
    ScoreEntry(
        "bge", BGeParams, True, "continuous", _GAUSSIAN,
        "marginal likelihood under a normal-Wishart prior (prior mean: the column means)",
        "Geiger & Heckerman 1994; Kuipers, Moffa & Heckerman 2014",
        record=Target("runner.kinds:bge_record"),
        bayes_factor="exact"),
    ScoreEntry(
        "cg-bic", NoParams, False, "mixed", _MIXED,
        "conditional linear Gaussian BIC for tables mixing discrete and continuous columns: "
        "a continuous child regressed on its continuous parents per configuration of its "
        "discrete parents, a discrete child the discrete BIC; discrete children never get "
        "continuous parents; bic without continuous columns, gaussian-bic without discrete "
        "ones", "Lauritzen & Wermuth 1989; Bottcher 2001; Schwarz 1978",
        bayes_factor="approximate"),
)

METHODS: tuple[MethodEntry, ...] = (
    MethodEntry(
        "hill-climb", "local", NoParams, Target("runner.search.hill_climb:hill_climb"),
        "greedy: apply the legal move (add, delete or reverse one edge) that raises the "
        "score most, until none does", "-", improving_only=True),
    MethodEntry(
        "first-ascent", "local", FirstAscentParams,
        Target("runner.search.first_ascent:first_ascent"),
        "apply the first improving move met in a seeded random order; `sample` tries that "
        "share (0-1] or count of moves first, the rest only if none of them improves", "-",
        improving_only=True),
    MethodEntry(
        "stochastic", "local", NoParams,
        Target("runner.search.stochastic:stochastic_hill_climb"),
        "pick an improving move at random, with probability proportional to its gain", "-",
        improving_only=True),
    MethodEntry(
        "tabu", "local", TabuParams, Target("runner.search.tabu:tabu_search"),
        "first the greedy climb of `hill-climb` with the same seed (so it never ends below "
        "it), then, from that optimum, the best move that does not undo one of the last "
        "`tabu_tenure` moves, even downhill (a tabu move is allowed when it beats the best "
        "score so far); keeps the best graph seen; stops after `patience` steps without a "
        "new best", "Glover 1989"),
    MethodEntry(
        "ges", "whole", NoParams, Target("runner.search.whole:run_ges"),
        "Greedy Equivalence Search over CPDAGs: a forward phase of Insert operators, a "
        "backward phase of Delete operators, then a turning phase (reversals of the held "
        "member's edges, after Hauser & Bühlmann 2012), in turn until none changes the "
        "class; score-equivalent scores only (refused with `k2` at `validate`)",
        "Chickering 2002", needs_score_equivalent=True),
    MethodEntry(
        "order", "whole", OrderParams, Target("runner.search.whole:run_order"),
        "for a known total order, each variable's best parent set among its predecessors, "
        "by scoring every candidate set of at most `parent_cap` (K2's setting, done "
        "exactly); optimal for that order", "Cooper & Herskovits 1992",
        plan=Target("runner.search.whole:plan_order")),
    MethodEntry(
        "exact", "whole", ExactParams, Target("runner.search.whole:run_exact"),
        "the globally optimal DAG under the constraints, by dynamic programming over "
        "subsets; refused above `max_variables` or when its tables would not fit in the "
        "memory available",
        "Silander & Myllymäki 2006", plan=Target("runner.search.whole:plan_exact")),
)

#: Score keys not warned about when the chosen score ignores them: the guide's own example
#: writes ``ess: 1.0`` under ``bic``.
QUIET_SCORE_KEYS = frozenset({"ess"})

_SCORES = {entry.name: entry for entry in SCORES}
_METHODS = {entry.name: entry for entry in METHODS}

SCORE_NAMES: tuple[str, ...] = tuple(_SCORES)
METHOD_NAMES: tuple[str, ...] = tuple(_METHODS)
SCORE_EQUIVALENT_SCORES: frozenset[str] = frozenset(
    entry.name for entry in SCORES if entry.score_equivalent)

#: Scores a spec may use under ``dataset.missing: available-case``, each with its penalty
#: per free parameter as in the complete-data form (ln N / 2 for BIC, 1 for AIC, none for
#: loglik): the node-average likelihood form of
#: :mod:`runner.scores.available` exists for the penalised log-likelihood scores only.
AVAILABLE_CASE_SCORES: tuple[str, ...] = ("loglik", "aic", "bic")


def score(name: str) -> ScoreEntry:
    """The score called ``name`` (ValueError naming the known ones)."""
    try:
        return _SCORES[name]
    except KeyError:
        raise ValueError(f"unknown score {name!r}; known: {', '.join(SCORE_NAMES)}") from None


def method(name: str) -> MethodEntry:
    """The search method called ``name`` (ValueError naming the known ones)."""
    try:
        return _METHODS[name]
    except KeyError:
        raise ValueError(f"unknown search method {name!r}; known: "
                       f"{', '.join(METHOD_NAMES)}") from None


def scores_of_kind(kind: DataKind) -> tuple[str, ...]:
    return tuple(entry.name for entry in SCORES if entry.data_kind == kind)


def default_method(score_name: str) -> str:
    """The search a spec gets when it names none: Greedy Equivalence Search under a
    score-equivalent score (it reached the generating network's score on the benchmark
    networks, see the README), greedy hill climbing otherwise."""
    entry = _SCORES.get(score_name)
    return "ges" if entry is None or entry.score_equivalent else "hill-climb"


def score_keys() -> tuple[str, ...]:
    """Every ``score:`` key some score takes, in registry order."""
    return tuple(dict.fromkeys(key for entry in SCORES for key in entry.params.keys()))


def search_keys() -> tuple[str, ...]:
    """Every ``search:`` key some method takes, in registry order."""
    return tuple(dict.fromkeys(key for entry in METHODS for key in entry.keys()))


def score_owners(key: str) -> tuple[str, ...]:
    return tuple(entry.name for entry in SCORES if key in entry.params.model_fields)


def method_owners(key: str) -> tuple[str, ...]:
    return tuple(entry.name for entry in METHODS if key in entry.keys())


def compatibility(method_entry: MethodEntry, score_entry: ScoreEntry) -> Refusal | None:
    """Why a method will not run under a score, whatever the data; None when it will.

    Equivalence-class search scores a class by any one member, which is sound only when
    every member scores the same (Chickering 2002).
    """
    if method_entry.needs_score_equivalent and not score_entry.score_equivalent:
        name, other = method_entry.name, score_entry.name
        return Refusal("search.method", (
            f"search method '{name}' moves between equivalence classes and needs a "
            f"score-equivalent score, which '{other}' is not (equivalent DAGs can score "
            f"differently under it); use one of {', '.join(sorted(SCORE_EQUIVALENT_SCORES))}, "
            f"or a DAG search such as 'hill-climb' or 'tabu' with '{other}'"))
    return None


def default(params: type[Params], key: str) -> Any:
    """The value a key takes when the spec leaves it out (or null): for the functions'
    own keyword defaults, so that each default is written once, in its model."""
    value = params.model_fields[key].default
    return params.EFFECTIVE.get(key) if value is None else value


# --------------------------------------------------------------------------- docs table


def _keys_cell(params: type[Params]) -> str:
    return ", ".join(f"`{key}` ({params.shown_default(key)})" for key in params.keys()) or "-"


def docs_table() -> str:
    """The Markdown tables of scores and search methods (the README's, between its
    ``registry-table`` markers)."""
    lines = ["| score | data | score-equivalent | what it is | its own keys (defaults) | "
             "reference |", "| --- | --- | --- | --- | --- | --- |"]
    for s in SCORES:
        lines.append(f"| `{s.name}` | {s.data_kind} | {'yes' if s.score_equivalent else 'no'} "
                     f"| {s.description} | {_keys_cell(s.params)} | {s.reference} |")
    lines += ["", "| method | kind | what it does | its own keys (defaults) | reference |",
              "| --- | --- | --- | --- | --- |"]
    for m in METHODS:
        kind = "local, restartable" if m.restartable else "whole graph"
        lines.append(f"| `{m.name}` | {kind} | {m.description} | {_keys_cell(m.params)} "
                     f"| {m.reference} |")
    return "\n".join(lines) + "\n"
