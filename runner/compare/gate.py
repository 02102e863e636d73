"""The regression gate: a new run held against its spec's pinned baseline.

The gate is a list of named rules (:data:`RULES`). Each rule looks at one
:class:`GateContext` (both sides, their diffs, the spec's ``gate`` settings) and returns a
:class:`RuleResult`: the rule's name, whether it passed, failed or did not apply, the
numbers it compared (baseline, new, the measure) and the threshold, with the failure and
note sentences of the report. A new rule is one function and one entry in ``RULES``.

Same input hash: graph hash and score must be identical (else non-determinism).
Otherwise the per-row score may drop by at most ``score_tolerance`` (relative), the
CPDAG may change in at most ``max_edge_changes`` node pairs, and columns, kinds and state
sets must match unless ``allow_new_states``. Every change is listed either way.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, replace
from typing import Any

from runner.bootstrap import consensus_view
from runner.compare.diff import (
    column_changes,
    describe_columns,
    describe_edges,
    graph_diff,
    score_delta,
)
from runner.environment import environment_changes, environment_sentence

PASS, FAIL, SKIPPED = "pass", "fail", "skipped"


@dataclass(frozen=True)
class GateSettings:
    """A spec's ``gate`` block with its defaults."""

    score_tolerance: float = 1e-9
    max_edge_changes: int = 0
    allow_new_states: bool = False
    graph: str = "run"

    @classmethod
    def from_block(cls, gate: Mapping[str, Any]) -> GateSettings:
        return cls(float(gate.get("score_tolerance", 1e-9)),
                   int(gate.get("max_edge_changes", 0)),
                   bool(gate.get("allow_new_states", False)), str(gate.get("graph", "run")))

    def as_dict(self) -> dict[str, Any]:
        return {"score_tolerance": self.score_tolerance,
                "max_edge_changes": self.max_edge_changes,
                "allow_new_states": self.allow_new_states, "graph": self.graph}


@dataclass(frozen=True)
class GateContext:
    """What every rule sees. ``baseline`` and ``record`` are the graphs held against each
    other: the bootstrap consensus networks under ``graph: consensus`` (when both sides
    have one), else the runs themselves (``run_hashes`` are always the runs' graph
    hashes). ``baseline_record`` is the pinned run's record when its folder is there."""

    baseline: Mapping[str, Any]
    record: Mapping[str, Any]
    settings: GateSettings
    same_inputs: bool
    run_hashes: tuple[str, str]
    views: tuple[Mapping[str, Any] | None, Mapping[str, Any] | None]
    diff: dict[str, Any]
    score: dict[str, Any]
    columns: dict[str, Any]
    baseline_record: Mapping[str, Any] | None = None


@dataclass(frozen=True)
class RuleResult:
    """One rule's verdict: ``status`` is pass, fail or skipped (the rule does not apply);
    ``baseline``/``new`` the values of both sides, ``measure`` the number held against
    ``threshold``."""

    rule: str
    status: str
    baseline: Any = None
    new: Any = None
    measure: Any = None
    threshold: Any = None
    failures: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()

    @property
    def ok(self) -> bool:
        return self.status != FAIL

    def as_dict(self) -> dict[str, Any]:
        return {"rule": self.rule, "status": self.status, "baseline": self.baseline,
                "new": self.new, "measure": self.measure, "threshold": self.threshold}


@dataclass(frozen=True)
class Rule:
    """A named gate rule."""

    name: str
    check: Callable[[GateContext], RuleResult]


def _status(failures: list[str]) -> str:
    return FAIL if failures else PASS


def consensus_rule(ctx: GateContext) -> RuleResult:
    """Under ``on: consensus`` both sides need a bootstrap consensus network."""
    if ctx.settings.graph != "consensus":
        return RuleResult("", SKIPPED)
    base, new = ctx.views
    failures = []
    if base is None:
        failures.append(f"gate.graph is consensus but baseline {ctx.baseline['run_id']} has no "
                        "bootstrap consensus network; pin a run learned with bootstrap")
    if new is None:
        failures.append("gate.graph is consensus but the new run has no bootstrap consensus "
                        "network")
    return RuleResult("", _status(failures), None if base is None else base["graph_sha256"],
                      None if new is None else new["graph_sha256"], failures=tuple(failures))


def reproduce_rule(ctx: GateContext) -> RuleResult:
    """Same inputs: the graph hash (run and, under ``graph: consensus``, consensus) and the
    score must be identical; a difference is non-determinism."""
    if not ctx.same_inputs:
        return RuleResult("", SKIPPED)
    base, new = ctx.baseline, ctx.record
    graph_differs = base["graph_sha256"] != new["graph_sha256"]
    run_differs = ctx.run_hashes[0] != ctx.run_hashes[1]
    score_differs = base["score"]["value"] != new["score"]["value"]
    failures, notes = [], []
    if graph_differs or run_differs or score_differs:
        what = ("consensus graph" if graph_differs and ctx.settings.graph == "consensus"
                else "graph" if graph_differs or run_differs else "score")
        failures.append("non-determinism: same inputs as the baseline (input hash "
                        f"{new['input_sha256'][:10]}) but a different {what}")
        if ctx.baseline_record is not None:
            notes.append(environment_sentence(
                environment_changes(ctx.baseline_record, new), results_differ=True,
                names=(str(base["run_id"]), str(new["run_id"]))))
    return RuleResult("", _status(failures), base["graph_sha256"], new["graph_sha256"],
                      measure=ctx.diff["verdict"], threshold="identical",
                      failures=tuple(failures), notes=tuple(notes))


def score_rule(ctx: GateContext) -> RuleResult:
    """Different inputs: the per-row score may drop by at most ``score_tolerance``
    (relative to the baseline's)."""
    if ctx.same_inputs:
        return RuleResult("", SKIPPED)
    s, tolerance = ctx.score, ctx.settings.score_tolerance
    drop = -s["relative_per_row"]
    notes = [] if s["comparable"] else [
        f"score changed from {s['a']['name']} to {s['b']['name']}; per-row scores are "
        "compared as they are"]
    failures = [] if drop <= tolerance else [
        f"score per row dropped {drop:.3e} (relative), more than score_tolerance "
        f"{tolerance:g}: {s['a']['per_row']:.6f} -> {s['b']['per_row']:.6f}"]
    return RuleResult("", _status(failures), s["a"]["per_row"], s["b"]["per_row"],
                      s["relative_per_row"], tolerance, tuple(failures), tuple(notes))


def class_edges_rule(ctx: GateContext) -> RuleResult:
    """Different inputs: the CPDAG may change in at most ``max_edge_changes`` node pairs."""
    if ctx.same_inputs:
        return RuleResult("", SKIPPED)
    changes, most = ctx.diff["shd_cpdag"], ctx.settings.max_edge_changes
    failures = [] if changes <= most else [
        f"{changes} class edge change(s), more than max_edge_changes {most}"]
    return RuleResult("", _status(failures), None, changes, changes, most, tuple(failures))


def columns_rule(ctx: GateContext) -> RuleResult:
    """Columns, kinds and state sets must match unless ``allow_new_states``."""
    lines = describe_columns(ctx.columns) if ctx.columns["changed"] else []
    allow = ctx.settings.allow_new_states
    if allow:
        failures, notes = [], [line + " (allowed by gate.allow_new_states)" for line in lines]
    else:
        failures, notes = [line + " (gate.allow_new_states is false)" for line in lines], []
    return RuleResult("", _status(failures), None, "changed" if lines else "same",
                      len(lines), allow, tuple(failures), tuple(notes))


#: The gate's rules, in the order their failures and notes are reported.
RULES: tuple[Rule, ...] = (
    Rule("consensus", consensus_rule),
    Rule("reproduce", reproduce_rule),
    Rule("score", score_rule),
    Rule("class-edges", class_edges_rule),
    Rule("columns", columns_rule),
)


def gate_context(baseline: Mapping[str, Any], record: Mapping[str, Any],
                 gate: Mapping[str, Any],
                 baseline_record: Mapping[str, Any] | None = None) -> GateContext:
    """Both sides, their diffs and the settings, as every rule sees them."""
    settings = GateSettings.from_block(gate)
    run_hashes = (str(baseline["graph_sha256"]), str(record["graph_sha256"]))
    views: tuple[Mapping[str, Any] | None, Mapping[str, Any] | None] = (None, None)
    if settings.graph == "consensus":
        views = consensus_view(baseline), consensus_view(record)
        if views[0] is not None and views[1] is not None:
            baseline, record = views[0], views[1]
    return GateContext(
        baseline, record, settings, baseline["input_sha256"] == record["input_sha256"],
        run_hashes, views, graph_diff(baseline, record), score_delta(baseline, record),
        column_changes(baseline["data"]["columns"], record["data"]["columns"]),
        baseline_record)


def input_notes(baseline: Mapping[str, Any], record: Mapping[str, Any]) -> list[str]:
    """What changed in the inputs: data (hash and rows), spec, code version."""
    if baseline["input_sha256"] == record["input_sha256"]:
        return []
    notes = []
    if baseline["data"]["sha256"] != record["data"]["sha256"]:
        notes.append(f"data changed: {baseline['data']['sha256'][:12]} "
                     f"({baseline['data']['rows']} rows) -> {record['data']['sha256'][:12]} "
                     f"({record['data']['rows']} rows)")
    if baseline.get("spec_sha256") != record["spec_sha256"]:
        notes.append("spec changed")
    if baseline.get("code_version") != record["code_version"]:
        notes.append(f"code changed: {baseline.get('code_version')} -> "
                     f"{record['code_version']}")
    return notes


def evaluate_gate(baseline: Mapping[str, Any], record: Mapping[str, Any],
                  gate: Mapping[str, Any],
                  baseline_record: Mapping[str, Any] | None = None,
                  rules: tuple[Rule, ...] = RULES) -> dict[str, Any]:
    """Hold a new run ``record`` against ``baseline`` under a spec's ``gate`` settings.

    Every rule of ``rules`` is applied (see the module docstring); the report lists each
    rule's result (``rules``), every failure and note, and every change either way.

    With ``graph: consensus`` the graphs held against each other (edge changes, the graph
    hash of the determinism check) are the bootstrap consensus networks; the score is
    still the single run's. A side without a consensus network fails the check.

    ``baseline_record`` (the pinned run's record, when its folder is there) lets a
    non-determinism failure note whether the numeric environment differs.
    """
    ctx = gate_context(baseline, record, gate, baseline_record)
    results = [replace(rule.check(ctx), rule=rule.name) for rule in rules]
    failures = [f for r in results for f in r.failures]
    notes = [n for r in results for n in r.notes] + input_notes(ctx.baseline, ctx.record)
    diff = ctx.diff
    return {
        "spec": record["spec_name"], "run_id": record["run_id"],
        "baseline_run_id": baseline["run_id"], "ok": not failures,
        "status": "pass" if not failures else "fail", "same_inputs": ctx.same_inputs,
        "verdict": diff["verdict"], "failures": failures, "notes": notes,
        "changes": describe_edges(diff), "score": ctx.score, "columns": ctx.columns,
        "edges": diff["edges"], "shd_dag": diff["shd_dag"], "shd_cpdag": diff["shd_cpdag"],
        "cpdag_changes": diff["cpdag_changes"], "gate": ctx.settings.as_dict(),
        "rules": [r.as_dict() for r in results],
    }


def missing_baseline_report(record: Mapping[str, Any], pin_command: str) -> dict[str, Any]:
    """The failing report of a check whose spec has no baseline yet."""
    return {"spec": record["spec_name"], "run_id": record["run_id"], "baseline_run_id": None,
            "ok": False, "status": "no-baseline", "same_inputs": False, "verdict": None,
            "failures": [f"no baseline for spec {record['spec_name']!r}; pin one with: "
                         f"{pin_command}"],
            "notes": [], "changes": [], "pin_command": pin_command}
