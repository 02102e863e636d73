"""One self-contained HTML report of a stored run (optionally against a second run).

The page holds its CSS and pictures inline (hand-written SVG from
:mod:`runner.present.svg`), loads nothing and links nowhere, so it opens offline and can
be archived with the run. Sections: the caution, inputs and hashes, with a second run the
two networks overlaid, the network in tier bands, the held-out fit, the score over search
steps (one line per restart), the family scores and the fitted tables. Same inputs give
the same bytes.

The page is rendered by jinja2 from the templates in ``runner/present/templates/`` with
autoescaping on: every value from a record is escaped by the template engine; the SVG
pictures arrive as :class:`markupsafe.Markup`, their text already escaped by
:mod:`runner.present.svg`. This module only gathers the values each section shows.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Mapping, Sequence
from functools import cache
from pathlib import Path
from typing import Any

from jinja2 import Environment, PackageLoader, StrictUndefined
from markupsafe import Markup

from runner import __version__
from runner.bootstrap import edge_confidence, replicates
from runner.caution import CAUTION
from runner.compare import compare_records
from runner.evaluation import measure_name
from runner.present.layout import Band, layered
from runner.present.svg import INK, MUTED, PAPER, DrawnEdge, Series, line_chart_svg, network_svg

TOP_FAMILIES = 12
TABLE_ROWS_SHOWN = 24


@cache
def environment() -> Environment:
    """The template environment: the package's templates, autoescaping on, undefined
    names an error (a template asking for a value the report did not gather fails loudly
    instead of printing nothing)."""
    env = Environment(loader=PackageLoader("runner.present", "templates"), autoescape=True,
                      undefined=StrictUndefined, trim_blocks=True, lstrip_blocks=True,
                      keep_trailing_newline=True)
    env.filters["num"] = format  # {{ value | num("+.6f") }}
    return env


def _index(names: Sequence[str]) -> dict[str, int]:
    return {n: i for i, n in enumerate(names)}


def _names(*records: Mapping[str, Any]) -> list[str]:
    out: list[str] = []
    for record in records:
        out += [n for n in record["data"]["columns"] if n not in out]
    return out


def _tier_names(record: Mapping[str, Any]) -> list[str] | None:
    names = record.get("spec", {}).get("tier_names")
    return [str(n) for n in names] if isinstance(names, list) else None


def band_legend(bands: Sequence[Band], whose: str = "") -> str:
    """The legend's text for the bands, naming only the kinds of band drawn."""
    tiers = any(b.label.startswith("tier ") for b in bands)
    depth = any(b.label.startswith("no tier") for b in bands)
    tier = f"tier{whose}"
    if tiers and depth:
        return f"{tier} (earliest on top), then depth for variables in no tier"
    if tiers:
        return f"{tier} (earliest on top)"
    return "depth in the graph (no tiers in the spec)"


# --------------------------------------------------------------------------- sections


def inputs_rows(record: Mapping[str, Any]) -> list[tuple[str, Any, bool]]:
    """(label, value, is a hash) rows of the inputs table."""
    data, score, search = record["data"], record["score"], record["search"]
    model = record.get("model") or {}
    rows = f"{data['rows']}"
    if "rows_learned" in data:
        rows += f" ({data['rows_learned']} learned, {data['rows_held_out']} held out)"
    fitted = "not stored (record from before fitted models)"
    if model:
        fitted = f"{model.get('estimator')}" + (
            "" if model.get("pseudo_count") is None
            else f", pseudo-count {model.get('pseudo_count')}")
    pairs: list[tuple[str, Any]] = [
        ("run", record["run_id"]), ("spec", f"{record['spec_name']} ({record.get('spec_path')})"),
        ("spec sha256", record["spec_sha256"]), ("data", data["path"]),
        ("data sha256", data["sha256"]), ("rows", rows), ("columns", len(data["columns"])),
        ("input sha256", record["input_sha256"]), ("code version", record["code_version"]),
        ("graph sha256", record["graph_sha256"]), ("model sha256", model.get("sha256")),
        ("fitted model", fitted),
        ("score", f"{score['name']} {score['value']:.6f} ({score['per_row']:.6f} per row)"),
        ("search", f"{search['method']}, seed {search['seed']}, stop {search['stop_reason']}, "
         f"{search['steps']} steps, {search['evaluations']} evaluations"),
        ("created", record.get("created_utc")),
    ]
    hashes = ("spec sha256", "data sha256", "input sha256", "graph sha256", "model sha256")
    return [(label, "-" if value is None else value, label in hashes) for label, value in pairs]


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


def network_context(record: Mapping[str, Any], show_forbidden: bool) -> dict[str, Any]:
    names = _names(record)
    tiers = record.get("spec", {}).get("tiers", [])
    bands = layered(names, tiers, record["edges"], _tier_names(record))
    edges = network_edges(record, show_forbidden)
    reps = replicates(record)
    texts = {"band": band_legend(bands),
             "confidence": "width: share of bootstrap replicates"
                           + (f" (of {reps})" if reps else "")}
    caption = f"Learned network of run {record['run_id']}: {len(record['edges'])} edges"
    svg = network_svg("net", bands, _index(names), edges, caption, texts)
    # Markup: the SVG's text is escaped by runner.present.svg.
    return {"caption": caption, "svg": Markup(svg), "confidence": bool(edge_confidence(record))}


def available_case_line(record: Mapping[str, Any]) -> str | None:
    """The caution line of a run under ``dataset.missing: available-case`` or
    ``structural-em`` (None otherwise): what was done with the gaps and the assumption
    behind it."""
    spec = record.get("spec") or {}
    policy = (spec.get("dataset") or {}).get("missing")
    if policy == "structural-em":
        em = (record.get("search") or {}).get("structural_em") or {}
        rounds = len(em.get("rounds") or [])
        return ("This run kept rows with missing values (dataset.missing: structural-em): "
                "each missing cell was filled with every state of its column, weighted by "
                "its probability under the network fitted by EM, and the structure was "
                f"searched on those expected counts in {rounds} round(s) of structural EM "
                "(Friedman 1997); the tables hold expected counts. This assumes the values "
                "are missing at random (whether a value is missing may depend on values "
                "seen, not on the missing ones); otherwise the filled counts are biased "
                "and the graph and the tables can be wrong.")
    if policy != "available-case":
        return None
    rows = (record.get("score") or {}).get("available_rows") or {}
    total = (record.get("data") or {}).get("rows")
    counts = sorted(rows.values())
    kept = (f" Families were counted on {counts[0]:,} to {counts[-1]:,} of the "
            f"{total:,} rows." if counts and total is not None else "")
    return ("This run kept rows with missing values (dataset.missing: available-case): "
            "each family is scored on the rows where its columns are all present, by the "
            "penalised node-average likelihood (Balov 2013)." + kept + " This assumes the "
            "values are missing completely at random; when whether a value is missing "
            "depends on the values themselves, the kept rows are a biased sample and the "
            "graph and the tables can be wrong.")


def held_out_context(record: Mapping[str, Any]) -> dict[str, Any] | None:
    ev = record.get("evaluation")
    if not isinstance(ev, Mapping) or "log_likelihood" not in ev:
        return None
    unseen = ev.get("unseen") or {}
    return {"ev": ev, "ll": ev["log_likelihood"], "measure": measure_name(ev),
            "gaussian": "measure" in ev, "unseen": unseen,
            "by_variable": list((unseen.get("by_variable") or {}).items())}


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


def trace_context(record: Mapping[str, Any], folder: Path | None) -> dict[str, Any] | None:
    rows = read_trace(folder) if folder is not None else None
    if rows is None:
        return None
    score = record["score"]["name"]
    caption = f"{score} score after each step of {record['search']['method']}"
    svg = line_chart_svg("trace", trace_series(record, rows), "step (moves applied)",
                         f"{score} score", caption)
    runs = record["search"].get("runs") or []
    return {"caption": caption, "moves": len(rows),
            "svg": Markup(svg), "runs": runs if len(runs) > 1 else []}


def families_context(record: Mapping[str, Any]) -> dict[str, Any] | None:
    """The lowest :data:`TOP_FAMILIES` family scores with their parents and bar lengths,
    and how many there are in all (the page says when it shows fewer)."""
    families = record["score"].get("families") or {}
    if not families:
        return None
    ranked = sorted(families.items(), key=lambda kv: (kv[1], kv[0]))[:TOP_FAMILIES]
    worst = min(v for _, v in ranked) or -1.0
    parents: dict[str, list[str]] = {}
    for a, b in record["edges"]:
        parents.setdefault(b, []).append(a)
    rows = [{"name": name, "parents": ", ".join(parents.get(name, [])) or "-", "value": value,
             "bar": max(2, round(220 * value / worst))} for name, value in ranked]
    return {"rows": rows, "total": len(families), "score": record["score"]["name"]}


def tables_context(model: Mapping[str, Any] | None) -> dict[str, Any]:
    """The fitted model: none, linear-Gaussian families, or one table per variable cut
    at :data:`TABLE_ROWS_SHOWN` rows (the page says when it is cut)."""
    if model is None:
        return {"kind": "none"}
    if model.get("estimator") == "least-squares":
        return {"kind": "gaussian", "model": model,
                "variables": [{"name": name, "intercept": var["intercept"],
                               "coefficients": list(var["coefficients"].items()),
                               "residual_variance": var["residual_variance"]}
                              for name, var in model["variables"].items()]}
    variables = [{"name": name, "parents": var["parents"], "states": var["states"],
                  "given": ", ".join(var["parents"]) or "no parents",
                  "rows": var["configurations"][:TABLE_ROWS_SHOWN],
                  "total": len(var["configurations"]),
                  "possible": var["possible_configurations"]}
                 for name, var in model["variables"].items() if var["kind"] == "discrete"]
    regressions = [row for name, var in model["variables"].items()
                   if var["kind"] == "continuous" for row in _regression_rows(name, var)]
    return {"kind": "mixed" if regressions else "discrete", "model": model,
            "variables": variables, "regressions": regressions, "shown": TABLE_ROWS_SHOWN}


def _regression_rows(name: str, var: Mapping[str, Any]) -> list[dict[str, Any]]:
    """A continuous variable of a conditional Gaussian model (cg-bic) as table rows: one
    per configuration of its discrete parents (one row without discrete parents)."""
    def row(given: str, fit: Mapping[str, Any], rows: Any) -> dict[str, Any]:
        return {"name": name, "given": given, "rows": rows, "intercept": fit["intercept"],
                "coefficients": list(fit["coefficients"].items()),
                "residual_variance": fit["residual_variance"]}
    if "configurations" not in var:
        return [row("-", var, "all")]
    discrete = var["discrete_parents"]
    return [row(", ".join(f"{p}={s}" for p, s in zip(discrete, c["parents"], strict=True))
               + ("" if c["fit"] == "least-squares" else " (too few rows: fit without "
                  "parents)"), c, c["rows"]) for c in var["configurations"][:TABLE_ROWS_SHOWN]]


def diff_context(a: Mapping[str, Any], b: Mapping[str, Any]) -> dict[str, Any]:
    result = compare_records(a, b)
    names = _names(a, b)
    tiers = a.get("spec", {}).get("tiers", [])
    union = sorted({tuple(e) for e in a["edges"]} | {tuple(e) for e in b["edges"]})
    bands = layered(names, tiers, [list(e) for e in union], _tier_names(a))
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
    caption = f"A {a['run_id']} against B {b['run_id']}"
    svg = network_svg("diff", bands, _index(names), drawn, caption,
                      {"band": band_legend(bands, " of A")})
    s = result["score"]
    held = result.get("held_out")
    pairs: list[tuple[str, Any, bool]] = [
        ("A", a["run_id"], False), ("B", b["run_id"], False),
        ("score A", f"{s['a']['name']} {s['a']['value']:.6f} ({s['a']['per_row']:.6f} "
         "per row)", False),
        ("score B", f"{s['b']['name']} {s['b']['value']:.6f} ({s['b']['per_row']:.6f} "
         "per row)", False),
        ("delta per row", f"{s['delta_per_row']:+.6f}"
         + ("" if s["comparable"] else " (different scores: not comparable)"), False),
        ("edges", f"{len(added)} added, {len(removed)} removed, {len(flipped)} reversed",
         False),
        ("SHD", f"DAG {result['shd_dag']}, CPDAG {result['shd_cpdag']}", False),
        ("verdict", result["verdict"], False)]
    if held:
        pairs.insert(5, ("held-out per row", f"A {held['a_per_row']:.6f}, B "
                         f"{held['b_per_row']:.6f}, delta {held['delta_per_row']:+.6f}"
                         + ("" if held["same_rows"] else " (different held-out rows)"), False))
    lists = [(kind, ", ".join(f"{x} -> {y}" for x, y in sorted(group)) or "none")
             for kind, group in (("added", added), ("removed", removed),
                                 ("reversed", flipped))]
    return {"other": b["run_id"], "rows": pairs, "lists": lists, "svg": Markup(svg)}


# --------------------------------------------------------------------------- the page


def render_report(record: Mapping[str, Any], folder: Path | None,
                  model: Mapping[str, Any] | None, other: Mapping[str, Any] | None = None,
                  show_forbidden: bool = False) -> str:
    """The whole HTML page as text.

    Parameters
    ----------
    record : mapping
        The run record (``run.json``).
    folder : Path or None
        The run's folder, for ``trace.csv``; None: no trace section.
    model : mapping or None
        The fitted model (``model.json``), or None for a record without one.
    other : mapping, optional
        A second run's record: the two networks overlaid, right after the inputs.
    show_forbidden : bool
        Draw the spec's forbidden pairs in the network.

    Returns
    -------
    str
        The page; the same inputs give the same text.
    """
    page = environment().get_template("report.html.j2")
    return page.render(
        title=f"dagmill report: {record['spec_name']}, run {record['run_id']}",
        record=record, caution=record.get("caution") or CAUTION, version=__version__,
        available_case=available_case_line(record),
        palette={"paper": PAPER, "ink": INK, "muted": MUTED},
        inputs=inputs_rows(record),
        diff=None if other is None else diff_context(record, other),
        network=network_context(record, show_forbidden),
        held_out=held_out_context(record), trace=trace_context(record, folder),
        families=families_context(record), tables=tables_context(model))


def default_report_path(record: Mapping[str, Any], other: Mapping[str, Any] | None) -> Path:
    name = f"report-{record['run_id']}"
    if other is not None:
        name += f"-vs-{other['run_id']}"
    return Path(name + ".html")


# --------------------------------------------------------------------------- variations


def variation_edges(summary: Mapping[str, Any]) -> list[DrawnEdge]:
    """One drawn edge per directed edge of any combination's DAG (share > 0), its width
    by its share of combinations (as bootstrap confidence is drawn), the stable core
    (share 1) as its own kind."""
    out = []
    for s in summary["shares"]:
        a, b = s["edge"]
        share = float(s["directed"])
        if share <= 0:
            continue
        kind = "stable" if share == 1.0 else "varying"
        title = (f"{a} -> {b}, in {share:.0%} of combinations"
                 + (" (stable core)" if kind == "stable" else "")
                 + f"; in the class in {float(s['class']):.0%}")
        out.append(DrawnEdge(a, b, kind, title, share))
    return out


def variation_context(summary: Mapping[str, Any], record: Mapping[str, Any]
                      ) -> dict[str, Any]:
    """The values of a variation summary's page: its combinations (values, run, score,
    edges), the shares table and the network of the union of edges in the tier bands of
    ``record`` (one combination's run: its normalised spec's tiers and columns)."""
    keys = list(summary["keys"])
    combos = [{"cells": [c["values"][k] for k in keys], "run_id": c["run_id"],
               "score": c["score"]["name"], "value": c["score"]["value"],
               "edges": c["edges"]} for c in summary["combinations"]]
    drawn = variation_edges(summary)
    names = _names(record)
    tiers = record.get("spec", {}).get("tiers", [])
    bands = layered(names, tiers, [[e.source, e.target] for e in drawn], _tier_names(record))
    n = len(summary["combinations"])
    caption = (f"Edges of variation {summary['summary_id']}: {len(drawn)} seen in any of "
               f"{n} combinations, {len(summary['stable_core']['directed'])} in every one")
    texts = {"band": band_legend(bands),
             "confidence": f"width: share of combinations (of {n})"}
    svg = network_svg("vary", bands, _index(names), drawn, caption, texts)
    shares = sorted(summary["shares"], key=lambda s: (-s["directed"], -s["class"],
                                                       s["edge"][0], s["edge"][1]))
    return {"varied": keys, "combinations": combos, "shares": shares,
            "core": summary["stable_core"], "caption": caption,
            # Markup: the SVG's text is escaped by runner.present.svg.
            "svg": Markup(svg)}


def render_variation_report(summary: Mapping[str, Any], record: Mapping[str, Any]) -> str:
    """The HTML page of a variation summary.

    Parameters
    ----------
    summary : mapping
        The variation summary (``variations/<id>.json``).
    record : mapping
        The run record of one of its combinations (the first): the tier bands and the
        columns of the picture come from its normalised spec.

    Returns
    -------
    str
        The page; the same inputs give the same text.
    """
    page = environment().get_template("variation.html.j2")
    return page.render(
        title=f"dagmill report: {summary['spec_name']}, variation {summary['summary_id']}",
        summary=summary, caution=record.get("caution") or CAUTION, version=__version__,
        palette={"paper": PAPER, "ink": INK, "muted": MUTED},
        vary=variation_context(summary, record))


def default_variation_report_path(summary: Mapping[str, Any]) -> Path:
    return Path(f"report-{summary['summary_id']}.html")
