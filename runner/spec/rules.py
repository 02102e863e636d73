"""The rules across keys of a spec (pass 3 of :mod:`runner.spec.loader`), and the spec
against the data's columns.

Each rule is a small function ``rule(spec, where) -> [Problem]``; :data:`RULES` pairs it
with the key paths it reads, and a rule runs only when none of them failed pass 2. The
rules: parameters the chosen score or method ignores (warnings; which keys belong to which
entry is the registry's), column settings, tier names, repeated tier members, required
edges that tiers, ``within_tier``, ``forbidden``, each other (cycles, found with networkx)
or ``parent_cap`` rule out, and repeated pairs. Tiers are numbered from 1 in messages,
with their names when the spec gives ``tier_names``.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from graphlib import CycleError, TopologicalSorter
from typing import Any, get_args, get_origin

from pydantic import BaseModel

from runner import registry
from runner.errors import Problem
from runner.spec.models import (
    IMPLEMENTED_KINDS,
    NOT_VARIED,
    Spec,
    bare_type,
    locate,
    nearest_line,
    tier_label,
)


@dataclass(frozen=True)
class Where:
    """Where rule problems point: the file, its key lines and the raw data."""

    file: str
    lines: dict[str, int]
    raw: dict[str, Any]
    origins: dict[str, str] = field(default_factory=dict)  # keys from a base spec

    def problem(self, key: str, message: str, value: Any = None,
                severity: str = "error") -> Problem:
        file, line = locate(self.lines, self.origins, self.file, key)
        return Problem(file, message, line=line, key=key, value=value, severity=severity)

    def line(self, key: str) -> int | None:
        return nearest_line(self.lines, key)


Rule = Callable[[Spec, Where], list[Problem]]


def _quoted(names: Sequence[str]) -> str:
    """'a', 'a' and 'b', 'a', 'b' and 'c'."""
    items = [f"'{n}'" for n in names]
    return items[0] if len(items) == 1 else ", ".join(items[:-1]) + " and " + items[-1]


# --------------------------------------------------------------------------- sections


def _consensus_needs_bootstrap(spec: Spec, where: Where) -> list[Problem]:
    return ([where.problem("gate.graph", "gating on 'consensus' needs a bootstrap section "
                        "(bootstrap: {replicates: N, seed: S, threshold: T}); add one or use "
                        "'run'", value="consensus")]
         if spec.gate.graph == "consensus" and where.raw.get("bootstrap") is None else [])


def _holdout_needs_pseudo_count(spec: Spec, where: Where) -> list[Problem]:
    """Held-out rows may show a parent configuration or state that the learning rows lack;
    with pseudo-count 0 its probability is 0 (or undefined) and the log-likelihood -inf."""
    if spec.evaluation is None or spec.fit is None or spec.fit.pseudo_count > 0:
        return []
    return [where.problem("fit.pseudo_count", "held-out evaluation needs a pseudo-count "
                          "above 0: a state or parent configuration the learning rows lack "
                          "would get probability 0 and a log-likelihood of -inf; set "
                          "fit.pseudo_count (e.g. 1.0) or drop 'evaluation'", value=0.0)]


def _holdout_not_under_mixed(spec: Spec, where: Where) -> list[Problem]:
    """The held-out fit is written for tables and for linear-Gaussian families; a mixed
    (conditional Gaussian) model has no held-out fit yet."""
    if spec.evaluation is None or registry.score(spec.score.name).data_kind != "mixed":
        return []
    return [where.problem("evaluation", f"held-out evaluation is not available under score "
                          f"'{spec.score.name}' (mixed data) yet; drop 'evaluation', or use "
                          "a discrete score (bin the continuous columns) or a Gaussian one")]


def _available_case_scores(spec: Spec, where: Where) -> list[Problem]:
    """``missing: available-case`` scores each family by its node-average likelihood
    (runner.scores.available) and ``structural-em`` by expected counts
    (runner.scores.expected), both defined for the penalised log-likelihood scores only
    and with no score-equivalent form; the held-out fit needs complete rows."""
    policy = spec.dataset.missing
    if policy not in ("available-case", "structural-em"):
        return []
    problems = []
    if spec.score.name not in registry.AVAILABLE_CASE_SCORES:
        problems.append(where.problem(
            "score.name", f"dataset.missing: {policy} works with the scores "
            f"{', '.join(registry.AVAILABLE_CASE_SCORES)} only, not score.name "
            f"'{spec.score.name}'; use one of those, or set dataset.missing: drop-rows",
            value=spec.score.name))
    method = (registry.method(spec.search.method)
              if spec.search.method in registry.METHOD_NAMES else None)
    why = ("a family is counted on the rows where its own columns are present"
           if policy == "available-case" else
           "each graph's counts are weighted by its own EM fit")
    if method is not None and method.needs_score_equivalent:
        problems.append(where.problem(
            "search.method", f"search method '{spec.search.method}' needs a score-equivalent "
            f"score, and under dataset.missing: {policy} no score is one ({why}, so "
            "equivalent graphs can score differently); use a DAG search such as 'hill-climb' "
            "or 'tabu'", value=spec.search.method))
    if spec.evaluation is not None:
        problems.append(where.problem(
            "evaluation", "held-out evaluation needs complete rows and is not available "
            f"under dataset.missing: {policy}; drop 'evaluation', or set "
            "dataset.missing: drop-rows"))
    return problems


def _column_rules(spec: Spec, where: Where) -> list[Problem]:
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


def _default_binning_needs_bins(spec: Spec, where: Where) -> list[Problem]:
    if spec.dataset.binning is None or spec.dataset.bins is not None:
        return []
    return [where.problem("dataset.binning", "'binning' needs 'bins' (the number of bins)",
                          value=spec.dataset.binning)]


def _default_bins_ignored(spec: Spec, where: Where) -> list[Problem]:
    """``dataset.bins`` is a default for discrete scores only: a Gaussian or mixed score
    keeps continuous columns continuous (a warning)."""
    kind = registry.score(spec.score.name).data_kind
    if spec.dataset.bins is None or kind == "discrete":
        return []
    return [where.problem("dataset.bins", f"'bins' under dataset is a default for discrete "
                          f"scores only; score '{spec.score.name}' ignores it (give a column "
                          "its own bins under dataset.columns to bin it)",
                          severity="warning")]


def _use_or_drop(spec: Spec, where: Where) -> list[Problem]:
    """``dataset.use`` and ``dataset.drop`` select columns in opposite ways: one of them."""
    if spec.dataset.use is None or spec.dataset.drop is None:
        return []
    return [where.problem("dataset.drop", "'use' and 'drop' are both given; list the columns "
                          "to read in 'use', or those to leave out in 'drop', not both")]


def _repeated_states(base: str, states: list[str], where: Where) -> list[Problem]:
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


# --------------------------------------------------------------------------- ignored keys


def _ignored_score_keys(spec: Spec, where: Where) -> list[Problem]:
    """A score key given for a score that does not take it (the registry says which do)."""
    given = where.raw.get("score") or {}
    if not isinstance(given, dict):
        return []
    name = spec.score.name
    own = registry.score(name).params.model_fields
    return [
        where.problem(f"score.{key}", f"'{key}' only applies to score"
                      f"{'s' if len(owners) > 1 else ''} {_quoted(owners)} (score is "
                      f"'{name}'); it is ignored", severity="warning")
        for key in given
        if key in registry.score_keys() and key not in own and given[key] is not None
        and key not in registry.QUIET_SCORE_KEYS
        for owners in [registry.score_owners(key)]
    ]


def _search_key_ignored(key: str, spec: Spec) -> str | None:
    """Why the chosen method ignores a given ``search:`` key, or None when it takes it."""
    entry, restarts = registry.method(spec.search.method), spec.search.restarts
    if key == "restarts":
        local = [m.name for m in registry.METHODS if m.restartable]
        return (f"only applies to the local searches ({', '.join(local)})"
                if restarts > 0 and not entry.restartable else None)
    if key == "kick":
        return ("only applies when restarts is above 0"
                if restarts == 0 or not entry.restartable else None)
    if key in entry.keys():
        return None
    owners = registry.method_owners(key)
    return f"only applies to search method{'s' if len(owners) > 1 else ''} {_quoted(owners)}"


def _ignored_search_keys(spec: Spec, where: Where) -> list[Problem]:
    given = where.raw.get("search") or {}
    if not isinstance(given, dict):
        return []
    search = spec.search
    return [
        where.problem(f"search.{key}", f"'{key}' {why} (method is '{search.method}', restarts "
                      f"{search.restarts}); it is ignored", severity="warning")
        for key in given
        if key in registry.search_keys() and given[key] is not None
        for why in [_search_key_ignored(key, spec)] if why is not None
    ]


# --------------------------------------------------------------------------- tiers


def _tier_positions(tiers: list[list[str]]) -> dict[str, tuple[int, int]]:
    """Each variable's first (tier, position)."""
    seen: dict[str, tuple[int, int]] = {}
    for t, tier in enumerate(tiers):
        for j, name in enumerate(tier):
            seen.setdefault(name, (t, j))
    return seen


def _names(spec: Spec) -> list[str] | None:
    """The tier names, when there is one per tier."""
    names = spec.tier_names
    return names if names is not None and len(names) == len(spec.tiers) else None


def _tier_names(spec: Spec, where: Where) -> list[Problem]:
    names = spec.tier_names
    if names is None:
        return []
    problems = []
    if len(names) != len(spec.tiers):
        problems.append(where.problem(
            "tier_names", f"tier_names gives {len(names)} name{'s' if len(names) != 1 else ''} "
            f"for {len(spec.tiers)} tier{'s' if len(spec.tiers) != 1 else ''} (tiers, line "
            f"{where.line('tiers')}); give one name per tier, in order", value=names))
    first: dict[str, int] = {}
    for i, name in enumerate(names):
        if name in first:
            problems.append(where.problem(
                f"tier_names.{i}", f"'{name}' already names tier {first[name] + 1} "
                f"(tier_names.{first[name]}); each tier needs its own name", value=name))
        else:
            first[name] = i
    return problems


def _tier_repeats(spec: Spec, where: Where) -> list[Problem]:
    first = _tier_positions(spec.tiers)
    names = _names(spec)
    problems = []
    for t, tier in enumerate(spec.tiers):
        for j, name in enumerate(tier):
            if first[name] != (t, j):
                ft, fj = first[name]
                problems.append(where.problem(
                    f"tiers.{t}.{j}", f"'{name}' is already in {tier_label(ft, names)} "
                    f"(tiers.{ft}.{fj}, line {where.line(f'tiers.{ft}.{fj}')}); a variable "
                    "belongs to one tier only", value=name))
    return problems


# --------------------------------------------------------------------------- required edges


def _required_vs_tiers(spec: Spec, where: Where) -> list[Problem]:
    tier_of = {name: pos[0] for name, pos in _tier_positions(spec.tiers).items()}
    names = _names(spec)
    return [
        where.problem(f"required.{i}", f"required edge {a} -> {b} goes back across the tiers: "
                      f"'{a}' is in {tier_label(tier_of[a], names)} and '{b}' in the earlier "
                      f"{tier_label(tier_of[b], names)}", value=[a, b])
        for i, (a, b) in enumerate(spec.required)
        if a in tier_of and b in tier_of and tier_of[b] < tier_of[a]
    ]


def _required_within_tier(spec: Spec, where: Where) -> list[Problem]:
    if spec.within_tier != "forbidden":
        return []
    tier_of = {name: pos[0] for name, pos in _tier_positions(spec.tiers).items()}
    names = _names(spec)
    return [
        where.problem(f"required.{i}", f"required edge {a} -> {b} joins two variables of "
                      f"{tier_label(tier_of[a], names)}, which within_tier: forbidden rules "
                      f"out (line {where.line('within_tier')})", value=[a, b])
        for i, (a, b) in enumerate(spec.required)
        if a in tier_of and b in tier_of and tier_of[a] == tier_of[b]
    ]


def _required_vs_forbidden(spec: Spec, where: Where) -> list[Problem]:
    banned: dict[tuple[str, str], int] = {}
    for j, (a, b) in enumerate(spec.forbidden):
        banned.setdefault((a, b), j)
    return [
        where.problem(f"required.{i}", f"required edge {a} -> {b} is also forbidden "
                      f"(forbidden.{banned[(a, b)]}, line "
                      f"{where.line(f'forbidden.{banned[(a, b)]}')})", value=[a, b])
        for i, (a, b) in enumerate(spec.required) if (a, b) in banned
    ]


def _acyclic(edges: Sequence[Sequence[str]]) -> bool:
    """Whether the edges form no cycle (a self-loop counts as one): the standard
    library's topological sorter, so a spec without a cycle never loads networkx."""
    predecessors: dict[str, set[str]] = {}
    for a, b in edges:
        predecessors.setdefault(b, set()).add(a)
    try:
        TopologicalSorter(predecessors).prepare()
    except CycleError:
        return False
    return True


def _required_cycles(spec: Spec, where: Where) -> list[Problem]:
    """One problem per strongly connected component of the required edges (Tarjan 1972,
    by networkx): a shortest cycle through the component's first listed source."""
    if _acyclic(spec.required):
        return []  # the usual case, decided without loading networkx
    import networkx as nx  # here, not at import: reading a spec stays light

    graph: nx.DiGraph[str] = nx.DiGraph()
    graph.add_edges_from((a, b) for a, b in spec.required)
    index_of: dict[tuple[str, str], int] = {}
    for i, (a, b) in enumerate(spec.required):
        index_of.setdefault((a, b), i)
    first_source = {a: i for i, (a, _) in reversed(list(enumerate(spec.required)))}
    problems = []
    components = [c for c in nx.strongly_connected_components(graph) if len(c) > 1]
    for component in sorted(components, key=lambda c: min(first_source.get(v, len(first_source))
                                                           for v in c)):
        start = min((v for v in component if v in first_source), key=first_source.__getitem__)
        inside = graph.subgraph(component)
        paths = [nx.shortest_path(inside, nxt, start) for nxt in graph.successors(start)
                 if nxt in component]
        cycle = [start, *min(paths, key=len)]
        key = f"required.{index_of[(cycle[0], cycle[1])]}"
        problems.append(where.problem(key, "required edges form a cycle: "
                                      + " -> ".join(cycle)))
    return problems


def _required_over_cap(spec: Spec, where: Where) -> list[Problem]:
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
    def rule(spec: Spec, where: Where) -> list[Problem]:
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


# (key paths a rule reads, rule): a rule runs only if none of its key paths is broken
RULES: tuple[tuple[frozenset[str], Rule], ...] = (
    (frozenset(), _consensus_needs_bootstrap),
    (frozenset({"fit", "evaluation"}), _holdout_needs_pseudo_count),
    (frozenset({"score", "evaluation"}), _holdout_not_under_mixed),
    (frozenset({"dataset.missing", "score", "evaluation", "search.method"}),
     _available_case_scores),
    (frozenset({"dataset.columns"}), _column_rules),
    (frozenset({"dataset.use", "dataset.drop"}), _use_or_drop),
    (frozenset({"dataset.bins", "dataset.binning"}), _default_binning_needs_bins),
    (frozenset({"dataset.bins", "score"}), _default_bins_ignored),
    (frozenset({"score"}), _ignored_score_keys),
    (frozenset({"search.method", "search.restarts"}), _ignored_search_keys),
    (frozenset({"tiers", "tier_names"}), _tier_names),
    (frozenset({"tiers"}), _tier_repeats),
    (frozenset({"tiers", "required"}), _required_vs_tiers),
    (frozenset({"tiers", "within_tier", "required"}), _required_within_tier),
    (frozenset({"forbidden", "required"}), _required_vs_forbidden),
    (frozenset({"required"}), _required_cycles),
    (frozenset({"required", "parent_cap"}), _required_over_cap),
    (frozenset({"forbidden"}), _repeated_pairs("forbidden")),
    (frozenset({"required"}), _repeated_pairs("required")),
)


def rule_problems(spec: Spec, raw: dict[str, Any], lines: dict[str, int], file: str,
                  broken: frozenset[str],
                  origins: dict[str, str] | None = None) -> list[Problem]:
    """The problems of every rule none of whose key paths is in ``broken``."""
    where = Where(file, lines, raw, dict(origins or {}))
    problems: list[Problem] = []
    for needs, rule in RULES:
        if not any(overlaps(need, key) for need in needs for key in broken):
            problems += rule(spec, where)
    return problems


def overlaps(need: str, key: str) -> bool:
    """Whether a broken key path and a rule's key path touch (equal, or one inside the other)."""
    return key == need or key.startswith(need + ".") or need.startswith(key + ".") or not key


# --------------------------------------------------------------------------- vary


def _bare(tp: Any) -> Any:
    """A type without its Annotated and Optional wrappers."""
    return bare_type(tp)


def _vary_key_problem(key: str) -> str | None:
    """Why a ``vary`` key names no setting of a spec, or None when it does: a dotted path
    of the spec's keys (a mapping of names, such as ``dataset.columns``, takes any name);
    a whole list is varied as one value, not item by item."""
    parts = key.split(".")
    if parts[0] in NOT_VARIED:
        return "it is not a setting of one run"
    tp: Any = Spec
    for depth, part in enumerate(parts):
        tp = _bare(tp)
        if isinstance(tp, type) and issubclass(tp, BaseModel):
            if part not in tp.model_fields:
                where = ".".join(parts[:depth]) or "the top level"
                message = f"unknown key '{part}' in {where}"
                close = difflib.get_close_matches(part, list(tp.model_fields), n=1)
                return message + (f"; did you mean '{close[0]}'?" if close else "")
            tp = tp.model_fields[part].annotation
        elif get_origin(tp) is dict:
            tp = get_args(tp)[1]
        else:
            return (f"'{'.'.join(parts[:depth])}' has no keys below it; vary it as a "
                    "whole value")
    return None


def vary_key_problems(spec: Spec, where: Where) -> list[Problem]:
    """The ``vary`` section's keys against the spec's schema, and its number of
    combinations against ``vary_limit``."""
    vary = spec.vary or {}
    problems = []
    for key in sorted(vary):
        why = _vary_key_problem(key)
        if why is not None:
            problems.append(where.problem(f"vary.{key}", f"'{key}' cannot be varied: {why}"))
    total = math.prod(len(values) for values in vary.values())
    if total > spec.vary_limit:
        problems.append(where.problem(
            "vary", f"{total} combinations ({' x '.join(str(len(vary[k])) for k in sorted(vary))}"
            f") are more than vary_limit ({spec.vary_limit}); raise vary_limit or vary "
            "fewer values"))
    return problems


# --------------------------------------------------------------------------- the data's columns


def check_spec_against_columns(spec: Spec, columns: Sequence[str],
                               data_file: str | None = None) -> list[Problem]:
    """A problem for every variable the spec names that is not one of ``columns``."""
    known = set(columns)
    shown = data_file if data_file is not None else spec.dataset.path
    file = spec.file
    return spec.relocate([
        Problem(file, _not_a_column(name, shown, columns), line=spec.line_of(key), key=key,
                value=name)
        for key, name in _named_variables(spec) if name not in known
    ])


def check_required_kinds(spec: Spec, kinds: Mapping[str, str]) -> list[Problem]:
    """Under the mixed score (cg-bic), a problem for every required edge from a
    continuous column into a discrete one: a discrete variable may not have continuous
    parents in a conditional Gaussian network (``kinds``: column -> kind as resolved)."""
    score = spec.score.name
    return [
        Problem(spec.file, (
            f"required edge {a} -> {b} goes from a continuous column into a discrete one; "
            f"under score '{score}' a discrete variable may not have continuous parents "
            f"(conditional Gaussian network); require {b} -> {a}, bin {a!r} "
            f"(dataset.columns.{a}: {{kind: continuous, bins: 4}}), or drop the edge"),
            line=spec.line_of(f"required.{i}"), key=f"required.{i}", value=[a, b])
        for i, (a, b) in enumerate(spec.required)
        if kinds.get(a) == "continuous" and kinds.get(b) == "discrete"
    ]


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
