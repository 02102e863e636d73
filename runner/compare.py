"""Comparing run records, holding a new run against a baseline, and JUnit reports.

Everything here is a pure function of records (plain dicts as stored in ``run.json``)
and baseline documents, except :func:`rescore`, which reads a record's data file. The
command line only formats what these functions return.

Distances: structural Hamming distance on DAGs and on CPDAGs (Tsamardinos, Brown &
Aliferis 2006); equivalence by skeleton and v-structures (Verma & Pearl 1990); CPDAGs
by Chickering's (1995) edge labelling (see :mod:`runner.graph`).
"""

from __future__ import annotations

import xml.etree.ElementTree as ET
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

from runner.bootstrap import consensus_view
from runner.data import load_dataset, loader_settings
from runner.environment import environment_changes, environment_sentence
from runner.errors import InputError, Problem
from runner.evaluation import held_out_comparison, held_out_comparison_lines, split_rows
from runner.graph import (
    Cpdag,
    cpdag,
    cpdag_shd,
    graph_sha256,
    parents_from_edges,
    same_equivalence_class,
    structural_hamming_distance,
)
from runner.kinds import make_scorer, resolve_columns

#: The inputs shown side by side by ``compare``, as (label, path into the record).
INPUT_FIELDS: tuple[tuple[str, tuple[str, ...]], ...] = (
    ("spec", ("spec_name",)),
    ("spec_sha256", ("spec_sha256",)),
    ("data_sha256", ("data", "sha256")),
    ("data_rows", ("data", "rows")),
    ("code_version", ("code_version",)),
    ("seed", ("search", "seed")),
    ("method", ("search", "method")),
    ("score", ("score", "name")),
    ("input_sha256", ("input_sha256",)),
)


def _get(record: Mapping[str, Any], path: Sequence[str]) -> Any:
    value: Any = record
    for key in path:
        if not isinstance(value, Mapping):
            return None
        value = value.get(key)
    return value


def record_inputs(record: Mapping[str, Any]) -> dict[str, Any]:
    """The inputs of a record that ``compare`` shows side by side."""
    return {label: _get(record, path) for label, path in INPUT_FIELDS}


def _pairs(edges: Iterable[Sequence[str]]) -> set[tuple[str, str]]:
    return {(str(a), str(b)) for a, b in edges}


def edge_changes(old: Iterable[Sequence[str]], new: Iterable[Sequence[str]]) -> dict[str, list]:
    """DAG-level edge changes from ``old`` to ``new``: added, removed and reversed (each
    sorted; a reversed edge is listed once, as it is in ``new``)."""
    a, b = _pairs(old), _pairs(new)
    reversed_ = sorted(e for e in b - a if (e[1], e[0]) in a)
    added = sorted(e for e in b - a if (e[1], e[0]) not in a)
    removed = sorted(e for e in a - b if (e[1], e[0]) not in b)
    return {"added": [list(e) for e in added], "removed": [list(e) for e in removed],
            "reversed": [list(e) for e in reversed_]}


def _mark_text(pair: frozenset[str], mark: tuple[str, str] | None) -> str:
    if mark is None:
        x, y = sorted(pair)
        return f"{x} - {y}"
    return f"{mark[0]} -> {mark[1]}"


def cpdag_changes(old: Cpdag, new: Cpdag) -> list[dict[str, str]]:
    """Every node pair whose CPDAG edge differs, sorted: ``{change, old, new}`` where
    change is ``added``, ``removed`` or ``reoriented`` (directed differently or
    undirected on one side). Their number is the CPDAG SHD."""
    mo, mn = old.marks(), new.marks()
    out = []
    for pair in sorted(set(mo) | set(mn), key=lambda p: sorted(p)):
        if pair in mo and pair in mn:
            if mo[pair] == mn[pair]:
                continue
            out.append({"change": "reoriented", "old": _mark_text(pair, mo[pair]),
                        "new": _mark_text(pair, mn[pair])})
        elif pair in mn:
            out.append({"change": "added", "old": "", "new": _mark_text(pair, mn[pair])})
        else:
            out.append({"change": "removed", "old": _mark_text(pair, mo[pair]), "new": ""})
    return out


def skeleton_precision_recall(reference: Iterable[Sequence[str]],
                              other: Iterable[Sequence[str]]) -> dict[str, float]:
    """Precision and recall of ``other``'s skeleton against ``reference``'s (1.0 when the
    relevant set is empty)."""
    ref = {frozenset(e) for e in _pairs(reference)}
    got = {frozenset(e) for e in _pairs(other)}
    hit = len(ref & got)
    return {"precision": hit / len(got) if got else 1.0,
            "recall": hit / len(ref) if ref else 1.0}


def _names(*records: Mapping[str, Any]) -> list[str]:
    names: set[str] = set()
    for r in records:
        names.update(_get(r, ("data", "columns")) or {})
        for a, b in r["edges"]:
            names.update((a, b))
    return sorted(names)


def verdict(old_edges: Iterable[Sequence[str]], new_edges: Iterable[Sequence[str]]) -> str:
    """``identical`` (same DAG), ``equivalent`` (same Markov class) or ``different``."""
    a, b = sorted(_pairs(old_edges)), sorted(_pairs(new_edges))
    if graph_sha256(a) == graph_sha256(b):
        return "identical"
    return "equivalent" if same_equivalence_class(a, b) else "different"


def graph_diff(old: Mapping[str, Any], new: Mapping[str, Any]) -> dict[str, Any]:
    """Structural comparison of two records (or baselines) holding ``edges``."""
    names = _names(old, new)
    co, cn = cpdag(names, old["edges"]), cpdag(names, new["edges"])
    return {
        "verdict": verdict(old["edges"], new["edges"]),
        "edges": edge_changes(old["edges"], new["edges"]),
        "shd_dag": structural_hamming_distance(old["edges"], new["edges"]),
        "shd_cpdag": cpdag_shd(co, cn),
        "cpdag_changes": cpdag_changes(co, cn),
        "skeleton": skeleton_precision_recall(old["edges"], new["edges"]),
    }


def _score_of(record: Mapping[str, Any]) -> dict[str, Any]:
    score = record["score"]
    return {"name": score.get("name"), "ess": score.get("ess"), "value": score["value"],
            "per_row": score["per_row"]}


def score_delta(old: Mapping[str, Any], new: Mapping[str, Any]) -> dict[str, Any]:
    """Scores of both records and the delta, in total and per data row; the per-row
    relative change is ``(new - old) / |old|`` (negative is a drop)."""
    a, b = _score_of(old), _score_of(new)
    per_row = b["per_row"] - a["per_row"]
    return {"a": a, "b": b, "comparable": (a["name"], a["ess"]) == (b["name"], b["ess"]),
            "delta": b["value"] - a["value"], "delta_per_row": per_row,
            "relative_per_row": per_row / abs(a["per_row"]) if a["per_row"] else 0.0}


def column_changes(old: Mapping[str, Any], new: Mapping[str, Any]) -> dict[str, Any]:
    """Columns, kinds and state sets of ``new`` against ``old`` (``{name: {kind, states}}``
    maps): new and missing columns, kind changes, and per column new and vanished states."""
    added = sorted(set(new) - set(old))
    missing = sorted(set(old) - set(new))
    kinds, states = {}, {}
    for name in sorted(set(old) & set(new)):
        if old[name].get("kind") != new[name].get("kind"):
            kinds[name] = {"old": old[name].get("kind"), "new": new[name].get("kind")}
        so, sn = set(old[name].get("states", [])), set(new[name].get("states", []))
        if so != sn:
            states[name] = {"new": sorted(sn - so), "vanished": sorted(so - sn)}
    return {"new_columns": added, "missing_columns": missing, "kinds": kinds, "states": states,
            "changed": bool(added or missing or kinds or states)}


def describe_columns(changes: Mapping[str, Any]) -> list[str]:
    """One line per column change, for reports."""
    lines = [f"new column {c!r}" for c in changes["new_columns"]]
    lines += [f"missing column {c!r}" for c in changes["missing_columns"]]
    lines += [f"column {c!r}: kind {k['old']} -> {k['new']}" for c, k in changes["kinds"].items()]
    for c, s in changes["states"].items():
        parts = []
        if s["new"]:
            parts.append("new states " + ", ".join(map(repr, s["new"])))
        if s["vanished"]:
            parts.append("vanished states " + ", ".join(map(repr, s["vanished"])))
        lines.append(f"column {c!r}: " + "; ".join(parts))
    return lines


def describe_edges(diff: Mapping[str, Any]) -> list[str]:
    """One line per DAG edge change and per CPDAG change, for reports."""
    e = diff["edges"]
    lines = [f"edge added {a} -> {b}" for a, b in e["added"]]
    lines += [f"edge removed {a} -> {b}" for a, b in e["removed"]]
    lines += [f"edge reversed, now {a} -> {b}" for a, b in e["reversed"]]
    for c in diff["cpdag_changes"]:
        if c["change"] == "added":
            lines.append(f"class edge added {c['new']}")
        elif c["change"] == "removed":
            lines.append(f"class edge removed {c['old']}")
        else:
            lines.append(f"class edge {c['old']} now {c['new']}")
    return lines


# --------------------------------------------------------------------------- rescoring


def record_data_file(record: Mapping[str, Any]) -> Path:
    """Where a record's data file is: ``data.path`` is relative to the spec file when it
    is the spec's own ``dataset.path``, else (``--data``) to the folder the run was
    started in."""
    path = Path(record["data"]["path"])
    if path.is_absolute():
        return path
    spec_path = record.get("spec_path")
    spec_data = _get(record, ("spec", "dataset", "path"))
    if spec_path and spec_data == record["data"]["path"]:
        return Path(spec_path).parent / path
    return path


def rescore(record: Mapping[str, Any], score_name: str, ess: float = 1.0,
            data_path: str | Path | None = None,
            settings: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """The score of ``record``'s graph under ``score_name`` on the record's data.

    The data is read the way the run read it (the spec's declared states, missing-value
    rule and state limit) and must still hash to the record's data sha256, unless
    ``data_path`` names a file explicitly. Raises InputError otherwise. A run with a
    held-out share is rescored on its learning rows (the same seeded split), as its own
    score was.
    """
    explicit = data_path is not None
    path = Path(data_path) if data_path is not None else record_data_file(record)
    spec_dataset = _get(record, ("spec", "dataset")) or {}
    dataset = load_dataset(path, display_path=str(path), **loader_settings(spec_dataset))
    if not explicit and dataset.sha256 != record["data"]["sha256"]:
        raise InputError(Problem(str(path), (
            f"the data file's sha256 is {dataset.sha256}, but run {record['run_id']} was "
            f"learned on {record['data']['sha256']}; name the file with --data to rescore on "
            "it anyway"), key="data.sha256"))
    names = list(dataset.names)
    unknown = sorted({v for e in record["edges"] for v in e} - set(names))
    if unknown:
        raise InputError(Problem(str(path), "the data lacks the graph's variables "
                                 + ", ".join(map(repr, unknown)), key="columns"))
    # Continuous columns are cut at the record's own bin edges; BGe's prior comes from
    # ``settings`` (the other run's score block), else the record's own when it was
    # learned under the same score, else the defaults.
    own = _get(record, ("spec", "score")) or {}
    chosen = settings if settings is not None else (own if own.get("name") == score_name else {})
    score = {**chosen, "name": score_name, "ess": ess}
    stored = {n: c["binning"] for n, c in record["data"]["columns"].items()
              if isinstance(c.get("binning"), dict)}
    resolved = resolve_columns(dataset, spec_dataset.get("columns") or {}, score,
                               spec_file=str(record.get("spec_path") or "<record>"),
                               data_file=str(path), stored_bins=stored,
                               stored_from=f"run {record['run_id']}")
    rows = resolved.dataset
    held = record.get("evaluation")
    if isinstance(held, Mapping) and "holdout" in held:
        # like for like with the run's own score: its learning rows, by the same split
        rows = rows.take_rows(split_rows(rows.rows, held["holdout"], held["seed"])[0])
    scorer = make_scorer(score, rows)
    parents = parents_from_edges(names, record["edges"])
    total = scorer.total(parents)
    return {"score": score_name, "ess": ess if score_name == "bdeu" else None, "value": total,
            "per_row": total / rows.rows, "rows": rows.rows, "data_sha256": dataset.sha256,
            "data_path": str(path)}


def needs_rescore(a: Mapping[str, Any], b: Mapping[str, Any]) -> bool:
    """Both runs learned on the same data but scored differently."""
    return (a["data"]["sha256"] == b["data"]["sha256"]
            and not score_delta(a, b)["comparable"])


# --------------------------------------------------------------------------- compare


def compare_records(a: Mapping[str, Any], b: Mapping[str, Any],
                    rescored: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """Everything ``compare`` reports about two records, as one JSON-ready dict.

    ``rescored`` is ``{"a_under_b": ..., "b_under_a": ...}`` from :func:`rescore` when the
    runs share data but not the score (or a ``{"skipped": reason}``), else None.
    """
    ia, ib = record_inputs(a), record_inputs(b)
    return {
        "a": a["run_id"], "b": b["run_id"],
        "inputs": {"a": ia, "b": ib, "differ": sorted(k for k in ia if ia[k] != ib[k])},
        "same_spec": a["spec_name"] == b["spec_name"],
        "score": score_delta(a, b),
        "rescored": rescored,
        "columns": column_changes(a["data"]["columns"], b["data"]["columns"]),
        "held_out": held_out_comparison(a, b),
        **graph_diff(a, b),
        "consensus": _consensus_diff(a, b),
        "environment": environment_changes(a, b),
    }


def _consensus_diff(a: Mapping[str, Any], b: Mapping[str, Any]) -> dict[str, Any] | None:
    """The structural comparison of two runs' bootstrap consensus networks, if both have one."""
    va, vb = consensus_view(a), consensus_view(b)
    if va is None or vb is None:
        return None
    return {"a_graph_sha256": va["graph_sha256"], "b_graph_sha256": vb["graph_sha256"],
            **graph_diff(va, vb)}


# --------------------------------------------------------------------------- gate


def evaluate_gate(baseline: Mapping[str, Any], record: Mapping[str, Any],
                  gate: Mapping[str, Any],
                  baseline_record: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """Hold a new run ``record`` against ``baseline`` under a spec's ``gate`` settings.

    Same input hash: graph hash and score must be identical (else non-determinism).
    Otherwise: the per-row score may drop by at most ``score_tolerance`` (relative), the
    CPDAG may change in at most ``max_edge_changes`` node pairs, and columns, kinds and
    state sets must match unless ``allow_new_states``. Every change is listed either way.

    With ``on: consensus`` the graphs held against each other (edge changes, the graph
    hash of the determinism check) are the bootstrap consensus networks; the score is
    still the single run's. A side without a consensus network fails the check.

    ``baseline_record`` (the pinned run's record, when its folder is there) lets a
    non-determinism failure note whether the numeric environment differs.
    """
    failures: list[str] = []
    notes: list[str] = []
    same_inputs = baseline["input_sha256"] == record["input_sha256"]
    on = str(gate.get("on", "run"))
    run_hashes = (baseline["graph_sha256"], record["graph_sha256"])
    if on == "consensus":
        views = consensus_view(baseline), consensus_view(record)
        if views[0] is None:
            failures.append(f"gate.on is consensus but baseline {baseline['run_id']} has no "
                            "bootstrap consensus network; pin a run learned with bootstrap")
        if views[1] is None:
            failures.append("gate.on is consensus but the new run has no bootstrap consensus "
                            "network")
        if views[0] is not None and views[1] is not None:
            baseline, record = views[0], views[1]
    diff = graph_diff(baseline, record)
    score = score_delta(baseline, record)
    columns = column_changes(baseline["data"]["columns"], record["data"]["columns"])
    tolerance = float(gate.get("score_tolerance", 1e-9))
    max_changes = int(gate.get("max_edge_changes", 0))
    allow_states = bool(gate.get("allow_new_states", False))
    if same_inputs:
        if (baseline["graph_sha256"] != record["graph_sha256"] or run_hashes[0] != run_hashes[1]
                or baseline["score"]["value"] != record["score"]["value"]):
            failures.append(
                "non-determinism: same inputs as the baseline (input hash "
                f"{record['input_sha256'][:10]}) but a different "
                + ("consensus graph" if baseline["graph_sha256"] != record["graph_sha256"]
                   and on == "consensus" else "graph"
                   if baseline["graph_sha256"] != record["graph_sha256"]
                   or run_hashes[0] != run_hashes[1] else "score"))
            if baseline_record is not None:
                notes.append(environment_sentence(
                    environment_changes(baseline_record, record), results_differ=True,
                    names=(str(baseline["run_id"]), str(record["run_id"]))))
    else:
        drop = -score["relative_per_row"]
        if not score["comparable"]:
            notes.append(f"score changed from {score['a']['name']} to {score['b']['name']}; "
                         "per-row scores are compared as they are")
        if drop > tolerance:
            failures.append(
                f"score per row dropped {drop:.3e} (relative), more than score_tolerance "
                f"{tolerance:g}: {score['a']['per_row']:.6f} -> {score['b']['per_row']:.6f}")
        if diff["shd_cpdag"] > max_changes:
            failures.append(f"{diff['shd_cpdag']} class edge change(s), more than "
                            f"max_edge_changes {max_changes}")
    if columns["changed"]:
        lines = describe_columns(columns)
        if allow_states:
            notes += [line + " (allowed by gate.allow_new_states)" for line in lines]
        else:
            failures += [line + " (gate.allow_new_states is false)" for line in lines]
    changes = describe_edges(diff)
    if baseline["input_sha256"] != record["input_sha256"]:
        if baseline["data"]["sha256"] != record["data"]["sha256"]:
            notes.append(f"data changed: {baseline['data']['sha256'][:12]} "
                         f"({baseline['data']['rows']} rows) -> {record['data']['sha256'][:12]} "
                         f"({record['data']['rows']} rows)")
        if baseline.get("spec_sha256") != record["spec_sha256"]:
            notes.append("spec changed")
        if baseline.get("code_version") != record["code_version"]:
            notes.append(f"code changed: {baseline.get('code_version')} -> "
                         f"{record['code_version']}")
    return {
        "spec": record["spec_name"], "run_id": record["run_id"],
        "baseline_run_id": baseline["run_id"], "ok": not failures,
        "status": "pass" if not failures else "fail", "same_inputs": same_inputs,
        "verdict": diff["verdict"], "failures": failures, "notes": notes,
        "changes": changes, "score": score, "columns": columns,
        "edges": diff["edges"], "shd_dag": diff["shd_dag"], "shd_cpdag": diff["shd_cpdag"],
        "cpdag_changes": diff["cpdag_changes"],
        "gate": {"score_tolerance": tolerance, "max_edge_changes": max_changes,
                 "allow_new_states": allow_states, "on": on},
    }


def missing_baseline_report(record: Mapping[str, Any], pin_command: str) -> dict[str, Any]:
    """The failing report of a check whose spec has no baseline yet."""
    return {"spec": record["spec_name"], "run_id": record["run_id"], "baseline_run_id": None,
            "ok": False, "status": "no-baseline", "same_inputs": False, "verdict": None,
            "failures": [f"no baseline for spec {record['spec_name']!r}; pin one with: "
                         f"{pin_command}"],
            "notes": [], "changes": [], "pin_command": pin_command}


def report_text(report: Mapping[str, Any]) -> str:
    """The plain-text body of one check report (also the JUnit failure text)."""
    lines = [f"{report['spec']}: {report['status'].upper()}  run {report['run_id']}  "
             f"baseline {report['baseline_run_id'] or '-'}"
             + (f"  verdict {report['verdict']}" if report.get("verdict") else "")]
    lines += [f"  FAIL {f}" for f in report["failures"]]
    lines += [f"  note {n}" for n in report["notes"]]
    lines += [f"  change {c}" for c in report["changes"]]
    return "\n".join(lines)


def junit_xml(reports: Sequence[Mapping[str, Any]], seconds: Mapping[str, float]) -> str:
    """A JUnit XML document: one test case per spec, a failure element where it failed."""
    failures = sum(1 for r in reports if not r["ok"])
    suites = ET.Element("testsuites", name="dagmill check", tests=str(len(reports)),
                        failures=str(failures))
    suite = ET.SubElement(suites, "testsuite", name="dagmill check", tests=str(len(reports)),
                          failures=str(failures), errors="0")
    for r in reports:
        case = ET.SubElement(suite, "testcase", classname="dagmill.check", name=r["spec"],
                             time=f"{seconds.get(r['spec'], 0.0):.3f}")
        text = report_text(r)
        if not r["ok"]:
            failure = ET.SubElement(case, "failure", message="; ".join(r["failures"]),
                                    type=r["status"])
            failure.text = text
        out = ET.SubElement(case, "system-out")
        out.text = text
    ET.indent(suites)
    return ET.tostring(suites, encoding="unicode", xml_declaration=True) + "\n"


# --------------------------------------------------------------------------- text


def _fmt(value: Any) -> str:
    if value is None:
        return "-"
    if isinstance(value, float):
        return f"{value:.6f}"
    text = str(value)
    return text[:16] if len(text) == 64 else text  # hashes: a prefix is enough to read


def compare_lines(result: Mapping[str, Any]) -> list[str]:
    """The human report of :func:`compare_records`: inputs, scores, edges, distances."""
    from runner.format import render_table

    ia, ib, differ = result["inputs"]["a"], result["inputs"]["b"], result["inputs"]["differ"]
    rows = [[k, _fmt(ia[k]), _fmt(ib[k]), "differs" if k in differ else ""] for k in ia]
    lines = [render_table(["input", f"A {result['a']}", f"B {result['b']}", ""], rows), ""]
    s = result["score"]
    lines.append(f"score      A {s['a']['name']} {s['a']['value']:.6f} ({s['a']['per_row']:.6f}"
                 f" per row)   B {s['b']['name']} {s['b']['value']:.6f} "
                 f"({s['b']['per_row']:.6f} per row)")
    lines.append(f"delta      {s['delta']:+.6f} total, {s['delta_per_row']:+.6f} per row "
                 f"({s['relative_per_row']:+.3e} relative)"
                 + ("" if s["comparable"] else "  (different scores: not comparable)"))
    rescored = result.get("rescored")
    if rescored and "skipped" in rescored:
        lines.append(f"rescored   skipped: {rescored['skipped']}")
    elif rescored:
        ab, ba = rescored["a_under_b"], rescored["b_under_a"]
        lines.append(f"rescored   A under {ab['score']}: {ab['value']:.6f} ({ab['per_row']:.6f}"
                     f" per row)   B under {ba['score']}: {ba['value']:.6f} "
                     f"({ba['per_row']:.6f} per row)")
    lines += held_out_comparison_lines(result)
    lines += describe_columns(result["columns"])
    e = result["edges"]
    lines.append(f"edges      {len(e['added'])} added, {len(e['removed'])} removed, "
                 f"{len(e['reversed'])} reversed (A -> B)")
    lines += ["  " + line for line in describe_edges(result)]
    sk = result["skeleton"]
    lines.append(f"SHD        DAG {result['shd_dag']}  CPDAG {result['shd_cpdag']}   skeleton "
                 f"precision {sk['precision']:.3f} recall {sk['recall']:.3f} (B against A)")
    lines.append(f"verdict    {result['verdict']}")
    cons = result.get("consensus")
    if cons is not None:
        e = cons["edges"]
        lines.append(f"consensus  {len(e['added'])} added, {len(e['removed'])} removed, "
                     f"{len(e['reversed'])} reversed (A -> B); SHD DAG {cons['shd_dag']} "
                     f"CPDAG {cons['shd_cpdag']}; verdict {cons['verdict']}")
        lines += ["  " + line for line in describe_edges(cons)]
    env = result.get("environment")
    if env is not None:
        same_inputs = "input_sha256" not in result["inputs"]["differ"]
        differ = result["verdict"] != "identical" or s["delta"] != 0 or (
            cons is not None and cons["verdict"] != "identical")
        lines.append(environment_sentence(env, same_inputs and differ))
    return lines


def check_table(report: Mapping[str, Any]) -> str:
    """The table ``check`` prints per spec: each gate rule, baseline, new, result."""
    from runner.format import render_table

    head = (f"{report['spec']}: {report['status'].upper()}  run {report['run_id']}  "
            f"baseline {report['baseline_run_id'] or '-'}")
    if report["status"] == "no-baseline":
        return "\n".join([head, *(f"  FAIL {f}" for f in report["failures"])])
    s, g, cols = report["score"], report["gate"], report["columns"]
    failed = " ".join(report["failures"])
    ok = "ok"
    if report["same_inputs"]:
        reproduce = ["inputs", "same input hash", "", "identical" if report["ok"] or
                     "non-determinism" not in failed else "NOT REPRODUCED"]
    else:
        reproduce = ["inputs", "differ", "", "compared by gate"]
    score_ok = report["same_inputs"] or -s["relative_per_row"] <= g["score_tolerance"]
    edges_ok = report["same_inputs"] or report["shd_cpdag"] <= g["max_edge_changes"]
    rows = [
        reproduce,
        [f"score per row ({s['b']['name']})", f"{s['a']['per_row']:.6f}",
         f"{s['b']['per_row']:.6f}",
         f"{s['relative_per_row']:+.3e} vs tol {g['score_tolerance']:g}: "
         + (ok if score_ok else "FAIL")],
        ["class edge changes" + (" (consensus)" if g.get("on") == "consensus" else ""), "",
         str(report["shd_cpdag"]),
         f"max {g['max_edge_changes']}: " + (ok if edges_ok else "FAIL")],
        ["columns and states", "", "changed" if cols["changed"] else "same",
         (ok if not cols["changed"] or g["allow_new_states"] else "FAIL")],
        ["verdict", "", str(report["verdict"]), ""],
    ]
    body = render_table(["gate", "baseline", "new", "result"], rows)
    extra = [f"  FAIL {f}" for f in report["failures"]]
    extra += [f"  note {n}" for n in report["notes"]]
    extra += [f"  change {c}" for c in report["changes"]]
    return "\n".join([head, body, *extra])


def baseline_changes(old: Mapping[str, Any] | None, new: Mapping[str, Any]) -> list[str]:
    """What re-pinning changed, one line each (``first baseline`` when there was none)."""
    if old is None:
        return ["first baseline of this spec"]
    if old["run_id"] == new["run_id"] and old["graph_sha256"] == new["graph_sha256"]:
        return ["unchanged: the same run was already the baseline"]
    lines = [f"replaces baseline {old['run_id']}"]
    for label, path in (("input hash", ("input_sha256",)), ("spec hash", ("spec_sha256",)),
                        ("data hash", ("data", "sha256")), ("code version", ("code_version",)),
                        ("graph hash", ("graph_sha256",))):
        a, b = _get(old, path), _get(new, path)
        if a != b:
            lines.append(f"{label}: {str(a)[:16]} -> {str(b)[:16]}")
    s = score_delta(old, new)
    lines.append(f"score per row: {s['a']['per_row']:.6f} -> {s['b']['per_row']:.6f} "
                 f"({s['delta_per_row']:+.6f})")
    diff = graph_diff(old, new)
    lines += describe_edges(diff)
    lines += describe_columns(column_changes(old["data"]["columns"], new["data"]["columns"]))
    lines.append(f"verdict: {diff['verdict']}")
    return lines


def history_rows(records: Sequence[Mapping[str, Any] | None], ids: Sequence[str],
                 baseline_id: str | None) -> list[dict[str, Any]]:
    """One row per run (oldest first): time, id, data hash prefix and rows, code version,
    score per row, edges, DAG SHD to the previous readable run, baseline mark. A record
    that could not be read (None) gets a row with ``refused`` set."""
    rows: list[dict[str, Any]] = []
    previous: Mapping[str, Any] | None = None
    for run_id, record in zip(ids, records, strict=True):
        if record is None:
            rows.append({"run_id": run_id, "refused": True, "baseline": run_id == baseline_id})
            continue
        rows.append({
            "time": record.get("created_utc"), "run_id": run_id, "refused": False,
            "data_sha256": record["data"]["sha256"][:12], "rows": record["data"]["rows"],
            "code_version": record["code_version"], "score": record["score"]["name"],
            "per_row": record["score"]["per_row"], "edges": len(record["edges"]),
            "shd_previous": None if previous is None else
            structural_hamming_distance(previous["edges"], record["edges"]),
            "baseline": run_id == baseline_id,
        })
        previous = record
    return rows
