"""One self-contained HTML report of a stored run (optionally against a second run).

The page holds its CSS and pictures inline (hand-written SVG from :mod:`runner.svg`),
loads nothing and links nowhere, so it opens offline and can be archived with the run.
Sections: the caution, inputs and hashes, the network in tier bands, the held-out fit,
the score over search steps (one line per restart), the family scores, the fitted tables
and, with a second run, the two networks overlaid. Same inputs give the same bytes.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from runner import __version__
from runner.bootstrap import edge_confidence, replicates
from runner.compare import compare_records
from runner.evaluation import measure_name
from runner.layout import layered
from runner.pipeline import CAUTION
from runner.svg import INK, MUTED, PAPER, DrawnEdge, Series, esc, line_chart_svg, network_svg

TOP_FAMILIES = 12
TABLE_ROWS_SHOWN = 24

CSS = f"""
:root {{ color-scheme: light; }}
body {{ margin: 0; background: {PAPER}; color: {INK};
  font: 15px/1.5 ui-sans-serif, system-ui, "Segoe UI", "DejaVu Sans", sans-serif; }}
main {{ max-width: 1180px; margin: 0 auto; padding: 24px 28px 48px; }}
h1 {{ font-size: 25px; margin: 0 0 2px; font-weight: 600; letter-spacing: .01em; }}
h2 {{ font-size: 18px; margin: 34px 0 10px; font-weight: 600; border-bottom: 1px solid #d8dbd3;
  padding-bottom: 4px; }}
.sub {{ color: {MUTED}; margin: 0 0 18px; }}
.caution {{ border-left: 5px solid #c29a52; background: #f7f0e0; padding: 10px 14px;
  border-radius: 4px; margin: 14px 0 6px; }}
table {{ border-collapse: collapse; margin: 6px 0; }}
th, td {{ text-align: left; padding: 3px 12px 3px 0; vertical-align: top; }}
th {{ color: {MUTED}; font-weight: 500; }}
td.num {{ text-align: right; font-variant-numeric: tabular-nums; }}
code, .hash {{ font-family: ui-monospace, "DejaVu Sans Mono", monospace; font-size: 13px; }}
.figure-box {{ overflow-x: auto; background: {PAPER}; border: 1px solid #e1e3dc;
  border-radius: 8px; padding: 6px; }}
svg text {{ font: 13px ui-sans-serif, system-ui, "DejaVu Sans", sans-serif; fill: {INK}; }}
svg .band-label, svg .tick {{ fill: {MUTED}; font-size: 12px; }}
svg .legend-title {{ font-weight: 600; }}
svg .edge-label {{ font-size: 11px; fill: {MUTED}; }}
.bar {{ display: inline-block; height: 10px; background: #8aa6a3; border-radius: 3px; }}
details {{ margin: 4px 0; }} summary {{ cursor: pointer; }}
.note {{ color: {MUTED}; font-size: 14px; }}
.diff-added {{ color: #3f8a5f; }} .diff-removed {{ color: #b8603f; }}
.diff-reversed {{ color: #6f5fa8; }}
footer {{ margin-top: 40px; color: {MUTED}; font-size: 13px; }}
"""


def _index(names: Sequence[str]) -> dict[str, int]:
    return {n: i for i, n in enumerate(names)}


def _names(*records: Mapping[str, Any]) -> list[str]:
    out: list[str] = []
    for record in records:
        out += [n for n in record["data"]["columns"] if n not in out]
    return out


def _rows(pairs: Sequence[tuple[str, Any]], hashes: Sequence[str] = ()) -> str:
    body = []
    for label, value in pairs:
        cls = ' class="hash"' if label in hashes else ""
        body.append(f"<tr><th>{esc(label)}</th><td{cls}>{esc('-' if value is None else value)}"
                    "</td></tr>")
    return "<table>" + "".join(body) + "</table>"


# --------------------------------------------------------------------------- sections


def inputs_section(record: Mapping[str, Any]) -> str:
    data, score, search = record["data"], record["score"], record["search"]
    model = record.get("model") or {}
    rows = f"{data['rows']}"
    if "rows_learned" in data:
        rows += f" ({data['rows_learned']} learned, {data['rows_held_out']} held out)"
    pairs = [
        ("run", record["run_id"]), ("spec", f"{record['spec_name']} ({record.get('spec_path')})"),
        ("spec sha256", record["spec_sha256"]), ("data", data["path"]),
        ("data sha256", data["sha256"]), ("rows", rows), ("columns", len(data["columns"])),
        ("input sha256", record["input_sha256"]), ("code version", record["code_version"]),
        ("graph sha256", record["graph_sha256"]),
        ("model sha256", model.get("sha256")),
        ("fitted model", f"{model.get('estimator')}"
         + ("" if model.get("pseudo_count") is None
            else f", pseudo-count {model.get('pseudo_count')}")
         if model else "not stored (record from before fitted models)"),
        ("score", f"{score['name']} {score['value']:.6f} ({score['per_row']:.6f} per row)"),
        ("search", f"{search['method']}, seed {search['seed']}, stop {search['stop_reason']}, "
         f"{search['steps']} steps, {search['evaluations']} evaluations"),
        ("created", record.get("created_utc")),
    ]
    hashes = ("spec sha256", "data sha256", "input sha256", "graph sha256", "model sha256")
    return "<h2>Inputs and hashes</h2>" + _rows(pairs, hashes)


def network_edges(record: Mapping[str, Any], show_forbidden: bool) -> list[DrawnEdge]:
    spec = record.get("spec", {})
    required = {tuple(e) for e in spec.get("required", [])}
    confidence = edge_confidence(record)
    out = []
    for a, b in record["edges"]:
        conf = confidence.get((a, b))
        kind = "required" if (a, b) in required else "learned"
        title = f"{a} -> {b}" + (" (required)" if kind == "required" else "") + (
            f", in {conf:.0%} of bootstrap replicates" if conf is not None else "")
        out.append(DrawnEdge(a, b, kind, title, conf))
    if show_forbidden:
        out += [DrawnEdge(a, b, "forbidden", f"{a} -> {b} forbidden by the spec")
                for a, b in sorted(tuple(e) for e in spec.get("forbidden", []))]
    return out


def network_section(record: Mapping[str, Any], show_forbidden: bool) -> str:
    names = _names(record)
    tiers = record.get("spec", {}).get("tiers", [])
    bands = layered(names, tiers, record["edges"])
    edges = network_edges(record, show_forbidden)
    legend = [("node", "variable"), ("band", "tier (earliest on top)"),
              ("learned", "learned edge"), ("required", "required by the spec")]
    if show_forbidden:
        legend.append(("forbidden", "forbidden by the spec (not an edge)"))
    reps = replicates(record)
    if edge_confidence(record):
        legend.append(("confidence", "width: share of bootstrap replicates"
                       + (f" (of {reps})" if reps else "")))
    caption = f"Learned network of run {record['run_id']}: {len(record['edges'])} edges"
    svg = network_svg("net", bands, _index(names), edges, legend, caption)
    note = ("Edge width shows bootstrap confidence." if edge_confidence(record) else
            "No bootstrap block in this run: edges are drawn without confidence.")
    return (f"<h2>Network</h2><p class=\"note\">{esc(caption)}. Tiers are bands in their order; "
            f"variables in no tier get bands by depth. {esc(note)}</p>"
            f'<div class="figure-box">{svg}</div>')


def held_out_section(record: Mapping[str, Any]) -> str:
    ev = record.get("evaluation")
    if not isinstance(ev, Mapping) or "log_likelihood" not in ev:
        return ("<h2>Held-out fit</h2><p class=\"note\">No held-out evaluation in this run "
                "(add <code>evaluation: {holdout: 0.2, seed: 5}</code> to the spec).</p>")
    ll, unseen = ev["log_likelihood"], ev["unseen"]
    body = (
        f"<table><tr><th></th><th>{measure_name(ev)} per held-out row</th><th>total</th></tr>"
        f"<tr><th>learned graph</th><td class=\"num\">{ll['learned_per_row']:.6f}</td>"
        f"<td class=\"num\">{ll['learned']:.4f}</td></tr>"
        f"<tr><th>empty graph</th><td class=\"num\">{ll['empty_per_row']:.6f}</td>"
        f"<td class=\"num\">{ll['empty']:.4f}</td></tr>"
        f"<tr><th>difference</th><td class=\"num\">{ll['difference_per_row']:+.6f}</td>"
        "<td></td></tr></table>")
    if "measure" in ev:  # linear-Gaussian: a density, no unseen cells
        return (f"<h2>Held-out fit</h2><p class=\"note\">{ev['rows_held_out']} rows held out "
                f"(share {ev['holdout']:g}, seed {ev['seed']}); linear-Gaussian families "
                f"fitted on the other {ev['rows_learned']}. Mean log density per row "
                f"(natural log); higher is better.</p>{body}")
    by_var = "".join(f"<li>{esc(n)}: {c['configurations']} configurations, {c['states']} "
                     "states</li>" for n, c in unseen.get("by_variable", {}).items())
    return (f"<h2>Held-out fit</h2><p class=\"note\">{ev['rows_held_out']} rows held out "
            f"(share {ev['holdout']:g}, seed {ev['seed']}); tables fitted on the other "
            f"{ev['rows_learned']}. Natural log; higher is better.</p>{body}"
            f"<p>Held-out cells the learning rows had not seen (probability from the "
            f"pseudo-count alone): {unseen['configurations']} parent configurations, "
            f"{unseen['states']} states; under the empty graph "
            f"{unseen.get('empty_graph_states', 0)} states.</p>"
            + (f"<ul>{by_var}</ul>" if by_var else ""))


def read_trace(folder: Path) -> list[dict[str, str]] | None:
    path = folder / "trace.csv"
    try:
        text = path.read_text(encoding="utf-8")
    except OSError:
        return None
    return list(csv.DictReader(io.StringIO(text)))


def trace_series(record: Mapping[str, Any], rows: Sequence[Mapping[str, str]]) -> list[Series]:
    """The score after each step: one series per search run (restarts included) and a
    dashed one for each restart's kick (random moves applied to perturb the start).
    A restart's kick rows are told apart by the kick count ``search.runs`` records."""
    runs = record["search"].get("runs") or []
    if not rows:
        return []
    first = rows[0]
    start = runs[0]["start_score"] if runs else float(first["score"]) - float(first["delta"])
    series: list[Series] = []
    current: list[tuple[float, float]] = [(0.0, float(start))]
    kicks: list[tuple[float, float]] = []
    restart = 0

    def label(k: int) -> str:
        return "search" if len(runs) <= 1 else ("first run" if k == 0 else f"restart {k}")

    def close_kicks() -> None:
        nonlocal current, kicks
        series.append(Series("kick: random moves before a restart", tuple(kicks),
                             dashed=True, colour=MUTED))
        current, kicks = [kicks[-1]], []

    for row in rows:
        step, score, delta = float(row["step"]), float(row["score"]), float(row["delta"])
        if row["move"].startswith("kick-"):
            if not kicks:
                series.append(Series(label(restart), tuple(current)))
                restart += 1
                kicks = [(step, score - delta)]
            kicks.append((step, score))
            if restart < len(runs) and len(kicks) - 1 >= runs[restart]["kicks"]:
                close_kicks()
            continue
        if kicks:
            close_kicks()
        current.append((step, score))
    if kicks:
        close_kicks()
    series.append(Series(label(restart), tuple(current)))
    return series


def trace_section(record: Mapping[str, Any], folder: Path | None) -> str:
    rows = read_trace(folder) if folder is not None else None
    if rows is None:
        return "<h2>Score over search steps</h2><p class=\"note\">trace.csv is missing.</p>"
    series = trace_series(record, rows)
    caption = f"{record['score']['name']} score after each step of {record['search']['method']}"
    svg = line_chart_svg("trace", series, "step (moves applied)",
                         f"{record['score']['name']} score", caption)
    runs = record["search"].get("runs") or []
    table = ""
    if len(runs) > 1:
        table = "<table><tr><th>run</th><th>kicks</th><th>start</th><th>end</th>" \
                "<th>steps</th><th>stop</th></tr>" + "".join(
                    f"<tr><td>{r['run']}</td><td class=\"num\">{r['kicks']}</td>"
                    f"<td class=\"num\">{r['start_score']:.4f}</td><td class=\"num\">"
                    f"{r['end_score']:.4f}</td><td class=\"num\">{r['steps']}</td>"
                    f"<td>{esc(r['stop_reason'])}</td></tr>" for r in runs) + "</table>"
    return (f"<h2>Score over search steps</h2><p class=\"note\">{esc(caption)}; "
            f"{len(rows)} moves recorded.</p><div class=\"figure-box\">{svg}</div>{table}")


def families_section(record: Mapping[str, Any]) -> str:
    families = record["score"].get("families") or {}
    if not families:
        return ""
    ranked = sorted(families.items(), key=lambda kv: (kv[1], kv[0]))[:TOP_FAMILIES]
    worst = min(v for _, v in ranked) or -1.0
    parents: dict[str, list[str]] = {}
    for a, b in record["edges"]:
        parents.setdefault(b, []).append(a)
    rows = "".join(
        f"<tr><td>{esc(name)}</td><td>{esc(', '.join(parents.get(name, [])) or '-')}</td>"
        f"<td class=\"num\">{value:.4f}</td><td><span class=\"bar\" style=\"width:"
        f"{max(2, round(220 * value / worst))}px\"></span></td></tr>"
        for name, value in ranked)
    return (f"<h2>Family scores</h2><p class=\"note\">The {len(ranked)} lowest of "
            f"{len(families)} family scores ({esc(record['score']['name'])}; a family is a "
            "variable and its parents). Bar length: the magnitude, relative to the lowest.</p>"
            f"<table><tr><th>variable</th><th>parents</th><th>score</th><th></th></tr>"
            f"{rows}</table>")


def tables_section(model: Mapping[str, Any] | None) -> str:
    if model is None:
        return ("<h2>Fitted tables</h2><p class=\"note\">This record has no fitted model "
                "(model.json).</p>")
    if model.get("estimator") == "least-squares":
        return gaussian_section(model)
    parts = [f"<h2>Fitted tables</h2><p class=\"note\">{esc(model['estimator'])}, "
             f"pseudo-count {model['pseudo_count']:g}, {model['rows']} rows. Each row: a "
             "parent configuration seen in the data, its counts and probabilities.</p>"]
    for name, var in model["variables"].items():
        configs = var["configurations"]
        head = "".join(f"<th>{esc(p)}</th>" for p in var["parents"]) + "".join(
            f"<th>P({esc(s)})</th>" for s in var["states"]) + "<th>rows</th>"
        body = "".join(
            "<tr>" + "".join(f"<td>{esc(v)}</td>" for v in c["parents"]) + "".join(
                f"<td class=\"num\">{p:.3f}</td>" for p in c["probabilities"])
            + f"<td class=\"num\">{sum(c['counts'])}</td></tr>"
            for c in configs[:TABLE_ROWS_SHOWN])
        more = (f"<p class=\"note\">{len(configs) - TABLE_ROWS_SHOWN} more configurations "
                "in model.json.</p>" if len(configs) > TABLE_ROWS_SHOWN else "")
        given = ", ".join(var["parents"]) or "no parents"
        parts.append(f"<details><summary>{esc(name)} | {esc(given)} ({len(configs)} of "
                     f"{var['possible_configurations']} configurations seen)</summary>"
                     f"<table><tr>{head}</tr>{body}</table>{more}</details>")
    return "".join(parts)


def gaussian_section(model: Mapping[str, Any]) -> str:
    """The linear-Gaussian families: intercept, coefficients and residual variance."""
    rows = "".join(
        f"<tr><td>{esc(name)}</td><td class=\"num\">{var['intercept']:.6g}</td><td>"
        + (", ".join(f"{esc(p)} {b:+.6g}" for p, b in var["coefficients"].items())
           or "no parents")
        + f"</td><td class=\"num\">{var['residual_variance']:.6g}</td></tr>"
        for name, var in model["variables"].items())
    return ("<h2>Fitted model</h2><p class=\"note\">Linear-Gaussian families by least "
            f"squares on {model['rows']} rows: each variable is its intercept plus the "
            "coefficients times its parents, plus normal noise of the residual variance "
            "(maximum likelihood).</p><table><tr><th>variable</th><th>intercept</th>"
            f"<th>coefficients</th><th>residual variance</th></tr>{rows}</table>")


def diff_section(a: Mapping[str, Any], b: Mapping[str, Any]) -> str:
    result = compare_records(a, b)
    names = _names(a, b)
    tiers = a.get("spec", {}).get("tiers", [])
    union = sorted({tuple(e) for e in a["edges"]} | {tuple(e) for e in b["edges"]})
    bands = layered(names, tiers, [list(e) for e in union])
    changes = result["edges"]
    added = {tuple(e) for e in changes["added"]}
    removed = {tuple(e) for e in changes["removed"]}
    flipped = {tuple(e) for e in changes["reversed"]}
    common = {tuple(e) for e in a["edges"]} & {tuple(e) for e in b["edges"]}
    drawn = ([DrawnEdge(x, y, "common", f"{x} -> {y} in both") for x, y in sorted(common)]
             + [DrawnEdge(x, y, "added", f"{x} -> {y} added in B") for x, y in sorted(added)]
             + [DrawnEdge(x, y, "removed", f"{x} -> {y} removed in B")
                for x, y in sorted(removed)]
             + [DrawnEdge(x, y, "reversed", f"{x} -> {y} in B; {y} -> {x} in A")
                for x, y in sorted(flipped)])
    legend = [("node", "variable"), ("band", "tier of A"), ("common", "in both runs"),
              ("added", "added in B"), ("removed", "removed in B (was in A)"),
              ("reversed", "reversed in B (drawn as in B)")]
    caption = f"A {a['run_id']} against B {b['run_id']}"
    svg = network_svg("diff", bands, _index(names), drawn, legend, caption)
    s = result["score"]
    held = result.get("held_out")
    pairs = [("A", a["run_id"]), ("B", b["run_id"]),
             ("score A", f"{s['a']['name']} {s['a']['value']:.6f} ({s['a']['per_row']:.6f} "
              "per row)"),
             ("score B", f"{s['b']['name']} {s['b']['value']:.6f} ({s['b']['per_row']:.6f} "
              "per row)"),
             ("delta per row", f"{s['delta_per_row']:+.6f}"
              + ("" if s["comparable"] else " (different scores: not comparable)")),
             ("edges", f"{len(added)} added, {len(removed)} removed, {len(flipped)} reversed"),
             ("SHD", f"DAG {result['shd_dag']}, CPDAG {result['shd_cpdag']}"),
             ("verdict", result["verdict"])]
    if held:
        pairs.insert(5, ("held-out per row", f"A {held['a_per_row']:.6f}, B "
                         f"{held['b_per_row']:.6f}, delta {held['delta_per_row']:+.6f}"
                         + ("" if held["same_rows"] else " (different held-out rows)")))
    lists = "".join(
        f"<p class=\"diff-{kind}\">{kind}: " + (esc(", ".join(f"{x} -> {y}" for x, y in
                                                          sorted(group))) or "none") + "</p>"
        for kind, group in (("added", added), ("removed", removed), ("reversed", flipped)))
    return (f"<h2>Against run {esc(b['run_id'])}</h2>" + _rows(pairs)
            + f'<div class="figure-box">{svg}</div>{lists}')


# --------------------------------------------------------------------------- the page


def render_report(record: Mapping[str, Any], folder: Path | None,
                  model: Mapping[str, Any] | None, other: Mapping[str, Any] | None = None,
                  show_forbidden: bool = False) -> str:
    """The whole HTML page as text."""
    title = f"dagmill report: {record['spec_name']}, run {record['run_id']}"
    caution = record.get("caution") or CAUTION
    sections = [
        inputs_section(record), network_section(record, show_forbidden),
        held_out_section(record), trace_section(record, folder), families_section(record),
        tables_section(model),
    ]
    if other is not None:
        sections.append(diff_section(record, other))
    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
        f"<title>{esc(title)}</title>\n<style>{CSS}</style>\n</head>\n<body>\n<main>\n"
        f"<h1>{esc(record['spec_name'])}</h1>\n<p class=\"sub\">run {esc(record['run_id'])}"
        f" &middot; {esc(record['score']['name'])} &middot; {len(record['edges'])} edges</p>\n"
        f"<div class=\"caution\" role=\"note\"><strong>Caution.</strong> {esc(caution)}</div>\n"
        + "\n".join(sections)
        + f"\n<footer>Written by dagmill {esc(__version__)} from the stored record; the "
        "page loads nothing from elsewhere.</footer>\n</main>\n</body>\n</html>\n")


def default_report_path(record: Mapping[str, Any], other: Mapping[str, Any] | None) -> Path:
    name = f"report-{record['run_id']}"
    if other is not None:
        name += f"-vs-{other['run_id']}"
    return Path(name + ".html")
