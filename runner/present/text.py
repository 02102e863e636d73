"""Text for the terminal: every table and line the command prints.

Renders records and the results computed elsewhere (:mod:`runner.compare`,
:mod:`runner.bootstrap`, :mod:`runner.evaluation`); nothing here computes a result.
Columns are as wide as their content, so long variable names never run into the next
column.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from runner.bootstrap import SHARES, edge_confidence
from runner.compare import (
    column_changes,
    describe_columns,
    describe_edges,
    field_at,
    graph_diff,
    score_delta,
)
from runner.environment import environment_sentence
from runner.evaluation import held_out_summary, measure_name

#: Space between two columns of a table or a list.
GAP = "  "


def render_table(header: Sequence[str], rows: Sequence[Sequence[str]]) -> str:
    """A compact left-aligned text table with a rule under the header."""
    widths = [len(h) for h in header]
    for row in rows:
        widths = [max(w, len(str(c))) for w, c in zip(widths, row, strict=True)]
    lines = [GAP.join(str(c).ljust(w) for c, w in zip(header, widths, strict=True)).rstrip(),
             GAP.join("-" * w for w in widths)]
    lines += [GAP.join(str(c).ljust(w) for c, w in zip(row, widths, strict=True)).rstrip()
              for row in rows]
    return "\n".join(lines)


def aligned(rows: Sequence[Sequence[str]], indent: str = "  ") -> list[str]:
    """Rows of cells as lines, each column as wide as its widest cell (no header)."""
    if not rows:
        return []
    widths = [max(len(str(row[k])) for row in rows) for k in range(len(rows[0]))]
    return [(indent + GAP.join(str(c).ljust(w) for c, w in zip(row, widths, strict=True)))
            .rstrip() for row in rows]


# --------------------------------------------------------------------------- show


def continuous_lines(columns: Mapping[str, Any]) -> list[str]:
    """The continuous columns of a record: how each was used (bins and their source)."""
    rows = []
    for name in sorted(n for n, c in columns.items() if c.get("kind") == "continuous"):
        binning = columns[name].get("binning")
        if binning is None:
            rows.append([name, f"continuous ({columns[name].get('kind_reason', '?')})"])
            continue
        outside = binning.get("below_range", 0) + binning.get("above_range", 0)
        rows.append([name, f"{len(columns[name]['states'])} {binning['method']} bins, "
                     f"edges {binning['source']}"
                     + (f", {outside} value(s) outside their range" if outside else "")])
    return ["continuous columns", *aligned(rows)] if rows else []


def held_out_lines(record: Mapping[str, Any]) -> list[str]:
    """The ``show`` lines of a run's held-out fit (none without one)."""
    ev = held_out_summary(record)
    if ev is None:
        return []
    ll, unseen = ev["log_likelihood"], ev["unseen"]
    lines = [
        f"held out   {ev['rows_held_out']} rows (holdout {ev['holdout']:g}, seed {ev['seed']}); "
        f"learned on {ev['rows_learned']}",
        f"  {measure_name(ev)} per held-out row: learned {ll['learned_per_row']:.6f}  "
        f"empty graph {ll['empty_per_row']:.6f}  difference "
        f"{ll['difference_per_row']:+.6f}",
    ]
    if "measure" in ev:  # a density: no unseen cells
        return lines
    return [*lines,
            f"  unseen in learning: {unseen['configurations']} parent configurations, "
            f"{unseen['states']} states (cells of held-out rows; from the pseudo-count)"]


def confidence_lines(record: Mapping[str, Any]) -> list[str]:
    """``show``: the run's edges and the consensus edges with their bootstrap shares, the
    edge column as wide as the longest edge of both lists."""
    block = record.get("bootstrap")
    if not block:
        return []
    shares = {s: edge_confidence(record, s) for s in SHARES}
    cons = block["consensus"]
    run_edges = [(str(a), str(b)) for a, b in record["edges"]]
    cons_edges = [(str(a), str(b)) for a, b in cons["edges"]]
    width = max((len(f"{a} -> {b}") for a, b in run_edges + cons_edges), default=0)

    def line(a: str, b: str) -> str:
        return f"  {f'{a} -> {b}':<{width}}{GAP}" + GAP.join(
            f"{s} {shares[s].get((a, b), 0.0):.3f}" for s in SHARES)

    out = [f"bootstrap  {block['replicates']} replicates  seed {block['seed']}  threshold "
           f"{block['threshold']:g}  not converged {block['not_converged']}",
           "run edges with their confidence"]
    out += [line(a, b) for a, b in run_edges]
    out.append(f"consensus  {len(cons['edges'])} edges  graph hash {cons['graph_sha256']}")
    out += [line(a, b) for a, b in cons_edges]
    out += [f"  skipped {s['pair'][0]} - {s['pair'][1]} (adjacent {s['adjacent']:.3f}): "
            f"{s['reason']}" for s in cons["skipped"]]
    return out


def record_format(record: Mapping[str, Any]) -> str:
    """How a record is sealed: format 2 chained (and signed), or legacy."""
    version = record.get("format_version", 0)
    if version == 0:
        return "format 0 (legacy: written before records had a format; not sealed)"
    if version == 1:
        return "format 1 (legacy: sealed, not chained)"
    signed = "signed" if record.get("signature") else "not signed"
    first = record.get("previous_record_sha256") is None
    return (f"format {version}, sealed {str(record.get('record_sha256', ''))[:16]}, "
            f"{'first of its chain' if first else 'chained'}, {signed}")


def summary_lines(record: Mapping[str, Any], folder: Path | None = None) -> list[str]:
    """A run's summary (``show``): inputs and hashes, score, search, edges, timings, the
    caution."""
    data, score, search = record["data"], record["score"], record["search"]
    lines = [
        f"run        {record['run_id']}",
        f"spec       {record['spec_name']}  ({record.get('spec_path', '?')})",
        f"spec hash  {record['spec_sha256']}",
        f"data       {data['path']}  rows {data['rows']}  columns {len(data['columns'])}"
        + (f"  dropped {data['dropped_rows']}" if data.get("dropped_rows") else ""),
        f"data hash  {data['sha256']}",
        f"input hash {record['input_sha256']}",
        f"code       {record['code_version']}",
        f"score      {score['name']} = {score['value']:.6f}  ({score['per_row']:.6f} per row)",
        f"search     {search['method']}  seed {search['seed']}  stop {search['stop_reason']}"
        f"  steps {search['steps']}  evaluations {search['evaluations']}"
        f"  cache hits {search.get('cache_hits', 0)}",
        f"seconds    search {record['seconds']['search']:.3f}  "
        f"total {record['seconds']['total']:.3f}",
        f"graph hash {record['graph_sha256']}",
        f"record     {record_format(record)}",
    ]
    if search.get("phases"):
        lines.append("phases     " + ", ".join(f"{p['phase']} {p['steps']}"
                                               for p in search["phases"]))
    if folder is not None:
        lines.append(f"folder     {folder}")
    lines += continuous_lines(data.get("columns", {}))
    edges = record["edges"]
    lines.append(f"edges      {len(edges)}")
    families = score.get("families", {})
    lines += [f"  {a} -> {b}" for a, b in edges]
    if families:
        lines.append("families (lowest first)")
        worst = sorted(families.items(), key=lambda kv: (kv[1], kv[0]))
        lines += aligned([[name, f"{value:.4f}"] for name, value in worst])
    lines += held_out_lines(record)
    model = record.get("model")
    if model:
        prior = ("" if model.get("pseudo_count") is None
                 else f", pseudo-count {model['pseudo_count']:g}")
        lines.append(f"model      {model['file']}  {model['estimator']}{prior}  "
                     f"sha256 {model['sha256']}")
    lines += confidence_lines(record)
    lines.append("")
    lines.append("caution: " + record.get("caution", ""))
    return lines


# --------------------------------------------------------------------------- run, history


def run_table(rows: Sequence[Mapping[str, Any]]) -> str:
    """``run``'s table: one row per stored run (``rows`` as ``run --json`` prints them,
    each with its ``record``)."""
    table = []
    for item in rows:
        rec, twin = item["record"], item["twin"]
        twin_text = "-" if twin is None else (
            f"{twin['run_id']} identical" if twin["identical"] else f"{twin['run_id']} DIFFERS")
        table.append([rec["spec_name"], item["run_id"], rec["score"]["name"],
                      f"{rec['score']['value']:.4f}", str(len(rec["edges"])),
                      rec["search"]["stop_reason"], twin_text])
    return render_table(["spec", "run", "score", "value", "edges", "stop", "twin"], table)


def history_table(rows: Sequence[Mapping[str, Any]]) -> str:
    """``history``'s table from :func:`runner.compare.history_rows`."""
    table = [["*" if r["baseline"] else "", r.get("time") or "-", r["run_id"],
              _learned_by(r), "" if r["refused"] else r["data_file"],
              "REFUSED" if r["refused"] else r["data_sha256"],
              "" if r["refused"] else str(r["rows"]), r.get("code_version", ""),
              "" if r["refused"] else f"{r['score']} {r['per_row']:.6f}",
              "" if r["refused"] else str(r["edges"]),
              "-" if r.get("shd_previous") is None else str(r["shd_previous"])] for r in rows]
    return render_table(["base", "time", "run", "by", "data file", "data", "rows", "code",
                         "score/row", "edges", "shd prev"], table)


def _learned_by(row: Mapping[str, Any]) -> str:
    """``run``, or ``check`` with its verdict (``check PASS``, ``check FAIL``)."""
    check = row.get("check")
    if not check:
        return "" if row["refused"] else "run"
    return f"check {'PASS' if check['ok'] else 'FAIL'}"


# --------------------------------------------------------------------------- compare


def _fmt(value: Any) -> str:
    if value is None:
        return "-"
    if isinstance(value, float):
        return f"{value:.6f}"
    text = str(value)
    return text[:16] if len(text) == 64 else text  # hashes: a prefix is enough to read


def held_out_comparison_lines(result: Mapping[str, Any]) -> list[str]:
    """``compare``'s line on both runs' held-out fit (none unless both have one)."""
    held = result.get("held_out")
    if not held:
        return []
    note = "" if held["same_rows"] else "  (different held-out rows: not comparable)"
    return [f"held out   log-likelihood per row A {held['a_per_row']:.6f}  B "
            f"{held['b_per_row']:.6f}  delta {held['delta_per_row']:+.6f}{note}"]


def compare_lines(result: Mapping[str, Any]) -> list[str]:
    """The human report of :func:`runner.compare.compare_records`: inputs, scores, edges,
    distances."""
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


# --------------------------------------------------------------------------- pin, check


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
        a, b = field_at(old, path), field_at(new, path)
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


def _verdict(rule: Mapping[str, Any] | None) -> str:
    if rule is None:
        return ""
    return {"fail": "FAIL", "pass": "ok", "info": "info (not gated)"}.get(rule["status"],
                                                                       "skipped")


def _drift_rows(rules: Mapping[str, Mapping[str, Any]]) -> list[list[str]]:
    """The same-rows rules: search regression, structural drift, fit drift."""
    rows = []
    search, drift, fit = (rules.get(k) for k in ("search-regression", "structural-drift",
                                                   "fit-drift"))
    if search is not None:
        numbers = search["baseline"] is not None
        rows.append(["search regression (same rows)",
                     f"{search['baseline']:.3f}" if numbers else "-",
                     f"{search['new']:.3f}" if numbers else "-",
                     f"{search['measure']:+.3e} rel. shortfall" if numbers else "",
                     f"tol {search['threshold']:g}" if numbers else "", _verdict(search)])
    if drift is not None:
        numbers = drift["baseline"] is not None
        grade = (drift.get("detail") or {}).get("grade", "")
        rows.append(["structural drift (same rows)",
                     f"{drift['baseline']:.3f}" if numbers else "-",
                     f"{drift['new']:.3f}" if numbers else "-",
                     f"{drift['measure']:+.3f} log-units ({grade})" if numbers else "",
                     f"evidence {drift['threshold']:g}" if numbers else "", _verdict(drift)])
    if fit is not None:
        detail = fit.get("detail") or {}
        interval = detail.get("interval")
        new = ("-" if fit["new"] is None else f"{fit['new']:.4f}"
               + (f" [{interval[0]:.4f}, {interval[1]:.4f}]" if interval else ""))
        rows.append(["fit drift (per row)",
                     "-" if fit["baseline"] is None else f"{fit['baseline']:.4f} held out",
                     new, "" if fit["measure"] is None else f"{fit['measure']:+.4f}",
                     f"{detail.get('level', 0.95):.0%} interval below baseline fails"
                     if fit["status"] in ("pass", "fail") else "", _verdict(fit)])
    return rows


def check_table(report: Mapping[str, Any]) -> str:
    """The table ``check`` prints per spec: each gate rule with the baseline's and the new
    side's numbers, their difference, the threshold and the verdict. With different
    inputs the drift rows hold the baseline graph and the new graph scored on the same
    rows (the new run's learning rows) and the baseline model's fit there."""
    head = (f"{report['spec']}: {report['status'].upper()}  run {report['run_id']}  "
            f"baseline {report['baseline_run_id'] or '-'}")
    if report["status"] == "no-baseline":
        return "\n".join([head, *(f"  FAIL {f}" for f in report["failures"])])
    s, g = report["score"], report["gate"]
    rules = {r["rule"]: r for r in report["rules"]}
    rows = []
    if "consensus" in rules and rules["consensus"]["status"] == "fail":
        rows.append(["consensus networks", "-" if rules["consensus"]["baseline"] is None
                     else "present", "-" if rules["consensus"]["new"] is None else "present",
                     "", "", "FAIL"])
    if report["same_inputs"]:
        rows.append(["inputs", "same input hash", "", "", "identical",
                     "identical" if rules["reproduce"]["status"] != "fail"
                     else "NOT REPRODUCED"])
        rows.append([f"score per row ({s['b']['name']})", f"{s['a']['per_row']:.6f}",
                     f"{s['b']['per_row']:.6f}", f"{s['delta_per_row']:+.3e}", "", ""])
    else:
        rows.append(["inputs", "differ", "", "", "", "compared by gate"])
        rows.append([f"score per row, own data ({s['b']['name']})",
                     f"{s['a']['per_row']:.6f}", f"{s['b']['per_row']:.6f}",
                     f"{s['relative_per_row']:+.3e} rel.", "not gated",
                     _verdict(rules.get("score"))])
        rows += _drift_rows(rules)
    edges = rules["class-edges"]
    counted = ("" if edges["status"] == "skipped" or edges["measure"] == edges["new"]
               else f"{edges['measure']} counted (bootstrap)")
    rows += [
        ["class edge changes" + (" (consensus)" if g.get("graph") == "consensus" else ""), "",
         str(report["shd_cpdag"]), counted, f"max {g['max_edge_changes']}",
         "FAIL" if edges["status"] == "fail" else "ok"],
        ["columns and states", "", str(rules["columns"]["new"]), "",
         f"allow_new_states {str(g['allow_new_states']).lower()}",
         "FAIL" if rules["columns"]["status"] == "fail" else "ok"],
        ["verdict", "", str(report["verdict"]), "", "", ""],
    ]
    body = render_table(["gate", "baseline", "new", "difference", "threshold", "result"],
                        rows)
    extra = [f"  FAIL {f}" for f in report["failures"]]
    extra += [f"  note {n}" for n in report["notes"]]
    extra += [f"  change {c}" for c in report["changes"]]
    return "\n".join([head, body, *extra])


# --------------------------------------------------------------------------- overview

#: How the board's states read in text.
STATE_TEXT = {"up_to_date": "up to date", "stale": "STALE", "never_run": "never run",
              "invalid": "INVALID"}


def _board_baseline(row: Mapping[str, Any]) -> str:
    base = row.get("baseline")
    if base is None:
        return "-"
    if base.get("problem"):
        return "REFUSED"
    if not base["pinned"]:
        return "none"
    latest = (row.get("run") or {}).get("run_id")
    return base["run_id"] + (" (= last run)" if base["run_id"] == latest else "")


def _board_check(check: Mapping[str, Any] | None) -> str:
    if check is None:
        return "-"
    return f"{'PASS' if check['ok'] else 'FAIL'} {check['verdict']}"


def overview_table(board: Mapping[str, Any]) -> str:
    """``overview``'s board (:meth:`runner.project.Board.as_dict`): one row per spec, then
    each spec's reasons, problem, failing check rules and notes, one line each."""
    table, details = [], []
    for row in board["rows"]:
        run, check = row.get("run"), row.get("check")
        name = row["name"] or "?"
        label = row["name"] or row["file"]
        table.append([row["file"], name, STATE_TEXT.get(row["state"], row["state"]),
                      "-" if run is None else run["run_id"],
                      "-" if run is None else run["by"],
                      "-" if run is None else run["created_utc"] or "-",
                      "-" if run is None else str(run["edges"]),
                      "-" if run is None else f"{run['score']} {run['per_row']:.6f}",
                      _board_baseline(row), _board_check(check)])
        if row["state"] == "stale":
            details.append(f"{label}: stale: {'; '.join(row['reasons'])}")
        if row.get("problem"):
            details.append(f"{label}: invalid: {row['problem']}")
        if check is not None and not check["ok"]:
            details.append(f"{label}: last check (run {check['run_id']}, baseline "
                           f"{check['baseline_run_id'] or '-'}) failed:")
            details += [f"  FAIL {f}" for f in check["failures"]]
        base = row.get("baseline") or {}
        if base.get("problem"):
            details.append(f"{label}: baseline refused: {base['problem']}")
        details += [f"{label}: note: {n}" for n in row["notes"]]
    body = render_table(["spec", "name", "state", "last run", "by", "when", "edges",
                         "score/row", "baseline", "last check"], table)
    return "\n".join([body, *(["", *details] if details else [])])


# --------------------------------------------------------------------------- variations


def _values_text(values: Mapping[str, Any]) -> str:
    return ", ".join(f"{k}={_value(v)}" for k, v in values.items())


def _value(value: Any) -> str:
    return json.dumps(value, sort_keys=True)


def variation_table(summary: Mapping[str, Any]) -> str:
    """``show`` of a variation summary: its combinations (values, run, score, edges),
    then every edge with its share of combinations (directed, class, adjacent; stable:
    present in every combination's DAG), most shared first, then by edge."""
    combos = summary["combinations"]
    head = [f"variation {summary['summary_id']}  spec {summary['spec_name']}  "
            f"{len(combos)} combinations of {', '.join(summary['keys'])}",
            f"created {summary['created_utc']}  sealed {summary['summary_sha256'][:16]}", ""]
    keys = list(summary["keys"])
    rows = [[*(_value(c["values"][k]) for k in keys), c["run_id"], c["score"]["name"],
             f"{c['score']['value']:.4f}", str(c["edges"])] for c in combos]
    table = render_table([*keys, "run", "score", "value", "edges"], rows)
    shares = sorted(summary["shares"], key=lambda s: (-s["directed"], -s["class"],
                                                       s["edge"][0], s["edge"][1]))
    edge_rows = [[f"{s['edge'][0]} -> {s['edge'][1]}", f"{s['directed']:.3f}",
                  f"{s['class']:.3f}", f"{s['adjacent']:.3f}",
                  "stable" if s["directed"] == 1.0 else ""] for s in shares]
    core = summary["stable_core"]
    tail = ["", f"stable core: {len(core['directed'])} directed edges in every combination "
            f"({len(core['class'])} in every combination's equivalence class)"]
    return "\n".join([*head, table, "", "edge shares over the combinations",
                      render_table(["edge", "directed", "class", "adjacent", ""], edge_rows),
                      *tail])


def variation_lines(summaries: Sequence[Mapping[str, Any]], run_id: str) -> list[str]:
    """``show`` of a run that is a combination of ``vary`` sections: which summaries list
    it, with its values."""
    out = []
    for doc in summaries:
        values = next(c["values"] for c in doc["combinations"] if c["run_id"] == run_id)
        out.append(f"variation  {doc['summary_id']}: combination {_values_text(values)} of "
                   f"{len(doc['combinations'])} (dagmill show {doc['summary_id']})")
    return out


def variation_run_lines(summary: Mapping[str, Any], results: Path) -> list[str]:
    """``run``'s lines for a variation summary it stored: its id, the stable core and how
    to see the shares."""
    core = summary["stable_core"]
    return [f"variation: {summary['spec_name']}: {len(summary['combinations'])} combinations,"
            f" {len(core['directed'])} edges in every one ({len(summary['shares'])} seen "
            f"in any); summary {summary['summary_id']}",
            f"shares: dagmill show {summary['summary_id']} --results {results}"]


def variation_compare_lines(result: Mapping[str, Any]) -> list[str]:
    """``compare`` of two variation summaries (from
    :func:`runner.compare.variations.compare_variations`): the summaries, every edge
    whose share changed (directed, class, adjacent: A, B and the change), then the
    stable core kept, gained and lost."""
    a, b = result["a"], result["b"]
    out = [f"A  variation {a['summary_id']}  spec {a['spec_name']}  {a['combinations']} "
           f"combinations of {', '.join(a['keys'])}",
           f"B  variation {b['summary_id']}  spec {b['spec_name']}  {b['combinations']} "
           f"combinations of {', '.join(b['keys'])}"]
    if not result["same_spec"]:
        out.append("note: the summaries are of two different specs")
    changed = {tuple(e) for e in result["changed"]}
    rows = [[f"{e['edge'][0]} -> {e['edge'][1]}",
             *(f"{e['a'][k]:.3f} -> {e['b'][k]:.3f} ({e['delta'][k]:+.3f})"
               for k in ("directed", "class", "adjacent"))]
            for e in result["edges"] if tuple(e["edge"]) in changed]
    out.append("")
    if rows:
        out += [f"share changes ({len(rows)} of {len(result['edges'])} edges)",
                render_table(["edge", "directed", "class", "adjacent"], rows)]
    else:
        out.append(f"no share changed ({len(result['edges'])} edges)")
    out.append("")
    for kind in ("directed", "class"):
        core = result["stable_core"][kind]
        out.append(f"stable core ({kind}): {len(core['kept'])} kept, "
                   f"gained {_edge_list(core['gained'])}, lost {_edge_list(core['lost'])}")
    return out


def _edge_list(edges: Sequence[Sequence[str]]) -> str:
    return ", ".join(f"{x} -> {y}" for x, y in edges) or "none"
