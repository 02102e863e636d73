"""Plain-text formatting of tables and run summaries for the command line."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

from runner.bootstrap import confidence_lines
from runner.evaluation import held_out_lines


def render_table(header: Sequence[str], rows: Sequence[Sequence[str]]) -> str:
    """A compact left-aligned text table with a rule under the header."""
    widths = [len(h) for h in header]
    for row in rows:
        widths = [max(w, len(str(c))) for w, c in zip(widths, row, strict=True)]
    lines = ["  ".join(str(c).ljust(w) for c, w in zip(header, widths, strict=True)).rstrip(),
             "  ".join("-" * w for w in widths)]
    lines += ["  ".join(str(c).ljust(w) for c, w in zip(row, widths, strict=True)).rstrip()
              for row in rows]
    return "\n".join(lines)


def continuous_lines(columns: dict[str, Any]) -> list[str]:
    """The continuous columns of a record: how each was used (bins and their source)."""
    lines = []
    for name in sorted(n for n, c in columns.items() if c.get("kind") == "continuous"):
        binning = columns[name].get("binning")
        if binning is None:
            lines.append(f"  {name:<20} continuous ({columns[name].get('kind_reason', '?')})")
            continue
        outside = binning.get("below_range", 0) + binning.get("above_range", 0)
        lines.append(f"  {name:<20} {len(columns[name]['states'])} {binning['method']} bins, "
                     f"edges {binning['source']}"
                     + (f", {outside} value(s) outside their range" if outside else ""))
    return ["continuous columns", *lines] if lines else []


def summary_lines(record: dict[str, Any], folder: Path | None = None) -> list[str]:
    """A run's summary: inputs and hashes, score, search, edges, timings, the caution."""
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
        lines += [f"  {name:<20} {value:.4f}" for name, value in worst]
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
