"""The regression gate: a new run held against its spec's pinned baseline.

The gate is a list of named rules (:data:`RULES`). Each rule looks at one
:class:`GateContext` (both sides, their diffs, the spec's ``gate`` settings) and returns a
:class:`RuleResult`: the rule's name, whether it passed, failed or did not apply, the
numbers it compared (baseline, new, the measure) and the threshold, with the failure and
note sentences of the report. A new rule is one function and one entry in ``RULES``.

Same input hash: graph hash and score must be identical (else non-determinism).
Otherwise both graphs are held against each other on the same rows, the new run's
learning rows (:mod:`runner.compare.drift`, computed by the caller and passed in as
``drift``):

* ``search-regression``: the new graph may score below the baseline graph there by at
  most ``score_tolerance``, relative to the baseline graph's score;
* ``structural-drift``: the new graph may beat the baseline graph there by at most
  ``evidence`` log-units (a log Bayes factor; Kass & Raftery 1995 for the scale);
* ``fit-drift``: the bootstrap interval of the baseline model's log-likelihood per row
  on those rows must not lie entirely below its own held-out figure;

the CPDAG may change in at most ``max_edge_changes`` node pairs (with bootstrap blocks on
both sides, only changes whose confidence crosses the threshold count), and columns,
kinds and state sets must match unless ``allow_new_states``. The per-row scores of the
two runs (different data) are shown as information only. Every change is listed either
way.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, replace
from typing import Any

from runner.bootstrap import consensus_view, edge_confidence
from runner.compare.diff import (
    column_changes,
    describe_columns,
    describe_edges,
    graph_diff,
    score_delta,
    spec_changes,
)
from runner.compare.drift import Drift, DriftMeasures, DriftSkipped
from runner.environment import environment_changes, environment_sentence
from runner.spec.models import GateSpec

PASS, FAIL, SKIPPED, INFO = "pass", "fail", "skipped", "info"

#: The default of ``gate.evidence`` (its one place is ``GateSpec`` in
#: runner/spec/models.py), in natural-log units of the Bayes factor of the new graph over
#: the baseline graph on the same rows. Kass & Raftery (1995), "Bayes factors", JASA
#: 90(430): 773-795, grade 2 ln B: 0-2 not worth more than a bare mention, 2-6 positive,
#: 6-10 strong, above 10 very strong. 10 log-units is 2 ln B = 20, twice their "very
#: strong" bound: on drops of the same network the re-learned graph's margin stays well
#: below it, while a changed dependency scores far above it (the measurements are in the
#: README's gating section).
DEFAULT_EVIDENCE: float = float(GateSpec.model_fields["evidence"].default)


def evidence_grade(log_bayes_factor: float) -> str:
    """The Kass & Raftery (1995) grade of a log Bayes factor ln B (their table is in
    2 ln B): below 0 it favours the other graph."""
    twice = 2.0 * log_bayes_factor
    if twice < 0:
        return "favours the baseline graph"
    if twice <= 2:
        return "not worth more than a bare mention"
    if twice <= 6:
        return "positive"
    if twice <= 10:
        return "strong"
    return "very strong"


@dataclass(frozen=True)
class GateSettings:
    """A spec's ``gate`` block with its defaults."""

    score_tolerance: float = 1e-9
    max_edge_changes: int = 0
    allow_new_states: bool = False
    graph: str = "run"
    evidence: float = DEFAULT_EVIDENCE

    @classmethod
    def from_block(cls, gate: Mapping[str, Any]) -> GateSettings:
        return cls(float(gate.get("score_tolerance", 1e-9)),
                   int(gate.get("max_edge_changes", 0)),
                   bool(gate.get("allow_new_states", False)), str(gate.get("graph", "run")),
                   float(gate.get("evidence", DEFAULT_EVIDENCE)))

    def as_dict(self) -> dict[str, Any]:
        return {"score_tolerance": self.score_tolerance,
                "max_edge_changes": self.max_edge_changes,
                "allow_new_states": self.allow_new_states, "graph": self.graph,
                "evidence": self.evidence}


@dataclass(frozen=True)
class GateContext:
    """What every rule sees. ``baseline`` and ``record`` are the graphs held against each
    other: the bootstrap consensus networks under ``graph: consensus`` (when both sides
    have one), else the runs themselves (``run_hashes`` are always the runs' graph
    hashes). ``baseline_record`` is the pinned run's record when its folder is there;
    ``drift`` the same-rows measures (:func:`runner.compare.drift.measure`): None when
    the inputs are the same or the caller did not measure them."""

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
    drift: Drift | None = None


@dataclass(frozen=True)
class RuleResult:
    """One rule's verdict: ``status`` is pass, fail or skipped (the rule does not apply);
    ``baseline``/``new`` the values of both sides, ``measure`` the number held against
    ``threshold``; ``detail`` more numbers of the rule (reported when given). Status
    ``info`` is shown, never gated."""

    rule: str
    status: str
    baseline: Any = None
    new: Any = None
    measure: Any = None
    threshold: Any = None
    failures: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    detail: Mapping[str, Any] | None = None

    @property
    def ok(self) -> bool:
        return self.status != FAIL

    def as_dict(self) -> dict[str, Any]:
        out = {"rule": self.rule, "status": self.status, "baseline": self.baseline,
               "new": self.new, "measure": self.measure, "threshold": self.threshold}
        if self.detail is not None:
            out["detail"] = dict(self.detail)
        return out


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
    """Different inputs: the two runs' per-row scores, each on its own data, shown as
    information and never gated (per-row scores move with the data itself; the
    same-rows rules below judge the graphs)."""
    if ctx.same_inputs:
        return RuleResult("", SKIPPED)
    s = ctx.score
    notes = [] if s["comparable"] else [
        f"score changed from {s['a']['name']} to {s['b']['name']}"]
    return RuleResult("", INFO, s["a"]["per_row"], s["b"]["per_row"],
                      s["relative_per_row"], None, (), tuple(notes))


def _measures(ctx: GateContext,
              say_why: bool = False) -> tuple[DriftMeasures | None, RuleResult | None]:
    """The same-rows measures, or the result of a drift rule that cannot apply (with the
    reason as a note when ``say_why``: the first drift rule says it for all three)."""
    if ctx.same_inputs:
        return None, RuleResult("", SKIPPED)
    if isinstance(ctx.drift, DriftMeasures):
        return ctx.drift, None
    why = (ctx.drift.reason if isinstance(ctx.drift, DriftSkipped)
           else "drift measures were not computed")
    return None, RuleResult("", SKIPPED, notes=(why,) if say_why else ())


def _on_rows(m: DriftMeasures) -> str:
    return f"on the new run's {m.rows} learning rows ({m.score})"


def search_regression_rule(ctx: GateContext) -> RuleResult:
    """Different inputs: on the same rows the new graph may score below the baseline
    graph by at most ``score_tolerance``, relative: (baseline - new) / |baseline|."""
    m, skipped = _measures(ctx, say_why=True)
    if m is None:
        return skipped or RuleResult("", SKIPPED)
    tolerance = ctx.settings.score_tolerance
    shortfall = ((m.baseline_graph - m.new_graph) / abs(m.baseline_graph)
                 if m.baseline_graph else -m.difference)
    failures = [] if shortfall <= tolerance else [
        f"the new graph scores {m.new_graph:.6f} {_on_rows(m)}, below "
        f"the baseline graph's {m.baseline_graph:.6f} by {-m.difference:.6f} (relative "
        f"{shortfall:.3e}), more than gate.score_tolerance {tolerance:g}: the learner "
        "found a worse graph than the baseline's on the same rows"]
    return RuleResult("", _status(failures), m.baseline_graph, m.new_graph, shortfall,
                      tolerance, tuple(failures),
                      detail={"difference": m.difference, "rows": m.rows})


def _class_lines(ctx: GateContext) -> str:
    lines = [line for line in describe_edges(ctx.diff) if line.startswith("class edge")]
    return "; ".join(lines) if lines else "no class edge changes"


def structural_drift_rule(ctx: GateContext) -> RuleResult:
    """Different inputs: on the same rows the new graph may beat the baseline graph by at
    most ``evidence`` log-units (new - baseline, a log Bayes factor for BDeu/K2/BGe and
    approximately one for BIC; Kass & Raftery 1995 for the scale)."""
    m, skipped = _measures(ctx)
    if m is None:
        return skipped or RuleResult("", SKIPPED)
    evidence, margin = ctx.settings.evidence, m.difference
    detail = {"twice_log_bayes_factor": 2.0 * margin, "grade": evidence_grade(margin),
              "rows": m.rows, "scale": m.scale}
    if m.scale is None:
        return RuleResult("", SKIPPED, m.baseline_graph, m.new_graph, margin, evidence,
                          notes=(f"structural drift not judged: differences of {m.score} "
                                 "scores are not log Bayes factors",), detail=detail)
    failures = [] if margin <= evidence else [
        f"the new graph beats the baseline graph {_on_rows(m)} by "
        f"{margin:.3f} log-units ({m.new_graph:.6f} against {m.baseline_graph:.6f}; "
        f"2 ln B = {2.0 * margin:.1f}, {evidence_grade(margin)} on the Kass & Raftery 1995 "
        f"scale), more than gate.evidence {evidence:g}: {_class_lines(ctx)}"]
    return RuleResult("", _status(failures), m.baseline_graph, m.new_graph, margin,
                      evidence, tuple(failures), detail=detail)


def fit_drift_rule(ctx: GateContext) -> RuleResult:
    """Different inputs: the baseline model's log-likelihood per row on the new rows; it
    fails when its whole bootstrap interval lies below the baseline's own held-out figure
    (information only when the baseline has no held-out figure)."""
    m, skipped = _measures(ctx)
    if m is None:
        return skipped or RuleResult("", SKIPPED)
    fit = m.fit
    if fit is None:
        return RuleResult("", SKIPPED, notes=(f"fit drift skipped: {m.fit_note}",))
    detail = {"interval": [fit.low, fit.high], "level": fit.level,
              "resamples": fit.resamples, "seed": fit.seed, "rows": fit.rows,
              "unseen": dict(fit.unseen)}
    interval = f"[{fit.low:.6f}, {fit.high:.6f}]"
    aside = int(fit.unseen.get("new_states", 0))
    notes = [f"fit drift: {aside} new row(s) holding a state the baseline model does not "
             "know were set aside (new states are the columns rule's)"] if aside else []
    if fit.held_out_per_row is None:
        return RuleResult("", INFO, None, fit.per_row, None, None, notes=(*notes,
            f"fit drift (information): the baseline model scores {fit.per_row:.6f} per row "
            f"on the new rows ({fit.level:.0%} interval {interval}); the baseline has no "
            "held-out figure to hold it against (add an evaluation block to the spec)",),
            detail=detail)
    failures = [] if not fit.below else [
        f"the baseline model's log-likelihood per row on the new run's "
        f"{fit.rows} learning rows is {fit.per_row:.6f}, its {fit.level:.0%} bootstrap "
        f"interval {interval} lies entirely below its own held-out figure "
        f"{fit.held_out_per_row:.6f}"]
    return RuleResult("", _status(failures), fit.held_out_per_row, fit.per_row,
                      fit.per_row - fit.held_out_per_row, fit.held_out_per_row,
                      tuple(failures), tuple(notes), detail=detail)


def _mark_share(mark: str, confidence: Mapping[tuple[str, str], float]) -> float:
    """A CPDAG mark's (``a -> b`` or ``a - b``) bootstrap class share; an undirected
    mark's is the smaller of both directions' class shares."""
    if " -> " in mark:
        a, b = mark.split(" -> ")
        return confidence.get((a, b), 0.0)
    a, b = mark.split(" - ")
    return min(confidence.get((a, b), 0.0), confidence.get((b, a), 0.0))


def _adjacent_share(mark: str, adjacency: Mapping[tuple[str, str], float]) -> float:
    a, b = mark.replace(" -> ", " - ").split(" - ")
    return max(adjacency.get((a, b), 0.0), adjacency.get((b, a), 0.0))


def confident_changes(changes: list[dict[str, str]], old: Mapping[str, Any],
                      new: Mapping[str, Any], threshold: float) -> list[dict[str, str]]:
    """The CPDAG changes whose bootstrap confidence crosses ``threshold``: an added pair
    counts when its adjacency share is at least ``threshold`` in ``new`` and below it in
    ``old``, a removed pair the other way round, a reoriented pair when the new mark's
    class share is at least ``threshold`` in ``new`` and below it in ``old``."""
    adj_old, adj_new = edge_confidence(old, "adjacent"), edge_confidence(new, "adjacent")
    cls_old, cls_new = edge_confidence(old, "class"), edge_confidence(new, "class")
    out = []
    for c in changes:
        if c["change"] == "added":
            keep = (_adjacent_share(c["new"], adj_new) >= threshold
                    > _adjacent_share(c["new"], adj_old))
        elif c["change"] == "removed":
            keep = (_adjacent_share(c["old"], adj_old) >= threshold
                    > _adjacent_share(c["old"], adj_new))
        else:
            keep = _mark_share(c["new"], cls_new) >= threshold > _mark_share(c["new"], cls_old)
        if keep:
            out.append(c)
    return out


def _bootstrap_threshold(record: Mapping[str, Any]) -> float | None:
    block = record.get("bootstrap")
    if isinstance(block, Mapping) and isinstance(block.get("frequencies"), list):
        return float(block.get("threshold", 0.5))
    return None


def class_edges_rule(ctx: GateContext) -> RuleResult:
    """Different inputs: the CPDAG may change in at most ``max_edge_changes`` node pairs;
    when both runs have bootstrap blocks, only changes whose confidence crosses the new
    run's bootstrap threshold count (:func:`confident_changes`)."""
    if ctx.same_inputs:
        return RuleResult("", SKIPPED)
    changes, most = ctx.diff["cpdag_changes"], ctx.settings.max_edge_changes
    threshold = _bootstrap_threshold(ctx.record)
    notes: list[str] = []
    counted = changes
    if (threshold is not None and ctx.baseline_record is not None
            and _bootstrap_threshold(ctx.baseline_record) is not None):
        counted = confident_changes(changes, ctx.baseline_record, ctx.record, threshold)
        if len(counted) != len(changes):
            notes.append(f"{len(changes) - len(counted)} of {len(changes)} class edge "
                         f"change(s) not counted: their bootstrap confidence does not cross "
                         f"the threshold {threshold:g}")
    failures = [] if len(counted) <= most else [
        f"{len(counted)} class edge change(s), more than max_edge_changes "
        f"{most}"]
    return RuleResult("", _status(failures), None, len(changes), len(counted), most,
                      tuple(failures), tuple(notes))


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
    Rule("search-regression", search_regression_rule),
    Rule("structural-drift", structural_drift_rule),
    Rule("fit-drift", fit_drift_rule),
    Rule("class-edges", class_edges_rule),
    Rule("columns", columns_rule),
)


def gate_context(baseline: Mapping[str, Any], record: Mapping[str, Any],
                 gate: Mapping[str, Any],
                 baseline_record: Mapping[str, Any] | None = None,
                 drift: Drift | None = None) -> GateContext:
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
        baseline_record, drift)


def input_notes(baseline: Mapping[str, Any], record: Mapping[str, Any],
                baseline_record: Mapping[str, Any] | None = None) -> list[str]:
    """What changed in the inputs: data (hash and rows), spec (the changed keys, when the
    pinned run's record is there to diff its spec against), code version."""
    if baseline["input_sha256"] == record["input_sha256"]:
        return []
    notes = []
    if baseline["data"]["sha256"] != record["data"]["sha256"]:
        notes.append(f"data changed: {baseline['data']['sha256'][:12]} "
                     f"({baseline['data']['rows']} rows) -> {record['data']['sha256'][:12]} "
                     f"({record['data']['rows']} rows)")
    if baseline.get("spec_sha256") != record["spec_sha256"]:
        old_spec = (baseline_record or {}).get("spec")
        keys = (spec_changes(old_spec, record.get("spec") or {})
                if isinstance(old_spec, Mapping) else [])
        notes += [f"spec changed: {k}" for k in keys] or ["spec changed"]
    if baseline.get("code_version") != record["code_version"]:
        notes.append(f"code changed: {baseline.get('code_version')} -> "
                     f"{record['code_version']}")
    return notes


def evaluate_gate(baseline: Mapping[str, Any], record: Mapping[str, Any],
                  gate: Mapping[str, Any],
                  baseline_record: Mapping[str, Any] | None = None,
                  rules: tuple[Rule, ...] = RULES, drift: Drift | None = None,
                  ) -> dict[str, Any]:
    """Hold a new run ``record`` against ``baseline`` under a spec's ``gate`` settings.

    Every rule of ``rules`` is applied (see the module docstring); the report lists each
    rule's result (``rules``), every failure (each prefixed with its rule's name) and
    note, and every change either way.

    With ``graph: consensus`` the graphs held against each other (edge changes, the graph
    hash of the determinism check) are the bootstrap consensus networks; the score is
    still the single run's. A side without a consensus network fails the check.

    ``baseline_record`` (the pinned run's record, when its folder is there) lets a
    non-determinism failure note whether the numeric environment differs, and the notes
    name the spec keys that changed. ``drift`` holds the same-rows measures of
    :func:`runner.compare.drift.measure` (the run graphs, also under ``graph:
    consensus``); without them the drift rules are skipped.
    """
    ctx = gate_context(baseline, record, gate, baseline_record, drift)
    results = [replace(rule.check(ctx), rule=rule.name) for rule in rules]
    failures = [f"{r.rule}: {f}" for r in results for f in r.failures]
    notes = [n for r in results for n in r.notes] + input_notes(ctx.baseline, ctx.record,
                                                                baseline_record)
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
        "drift": None if drift is None else drift.as_dict(),
    }


def missing_baseline_report(record: Mapping[str, Any], pin_command: str) -> dict[str, Any]:
    """The failing report of a check whose spec has no baseline yet."""
    return {"spec": record["spec_name"], "run_id": record["run_id"], "baseline_run_id": None,
            "ok": False, "status": "no-baseline", "same_inputs": False, "verdict": None,
            "failures": [f"no baseline for spec {record['spec_name']!r}; pin one with: "
                         f"{pin_command}"],
            "notes": [], "changes": [], "pin_command": pin_command}
