"""Comparing stored runs: run-to-run diffs and verdicts (:mod:`.diff`), the regression gate
(:mod:`.gate`), JUnit XML (:mod:`.junit`), rescoring a stored graph (:mod:`.rescore`) and
a spec's history (:mod:`.history`). Text for people is rendered by
:mod:`runner.present.text`.

:mod:`.rescore` is not imported here: it prepares data through the pipeline, which the
pictures and the text (readers of this package) need not load; import it from its
module."""

from runner.compare.diff import (
    INPUT_FIELDS,
    column_changes,
    compare_records,
    cpdag_changes,
    describe_columns,
    describe_edges,
    edge_changes,
    field_at,
    graph_diff,
    needs_rescore,
    record_inputs,
    score_delta,
    skeleton_precision_recall,
    verdict,
)
from runner.compare.gate import (
    RULES,
    GateContext,
    GateSettings,
    Rule,
    RuleResult,
    evaluate_gate,
    missing_baseline_report,
)
from runner.compare.history import history_rows
from runner.compare.junit import junit_error_xml, junit_xml, report_text

__all__ = [
    "INPUT_FIELDS", "RULES", "GateContext", "GateSettings", "Rule", "RuleResult",
    "column_changes", "compare_records", "cpdag_changes", "describe_columns",
    "describe_edges", "edge_changes", "evaluate_gate", "field_at", "graph_diff",
    "history_rows", "junit_error_xml", "junit_xml", "missing_baseline_report", "needs_rescore",
    "record_inputs", "report_text", "score_delta", "skeleton_precision_recall",
    "verdict",
]
