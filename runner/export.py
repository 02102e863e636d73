"""A stored run's learned graph in open formats: GraphML, Graphviz DOT and JSON.

Pure functions of a run record (and its fitted model); nodes carry their tier (numbered
from 1 as everywhere else: 1 for the spec's first tier; 0 when in no tier), the tier's
name when the spec names its tiers (``tier_names``), kind and states; edges whether the
spec required them and, for a run with bootstrap resampling, their confidence (share of
replicates holding the edge).
Our JSON also carries the fitted tables of ``model.json``.
"""

from __future__ import annotations

import io
import json
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # networkx and numpy are imported when a graph is built: the command's
    import networkx as nx  # parser reads FORMATS from here without loading them

FORMATS = ("graphml", "dot", "json")


def learned_graph(record: dict[str, Any]) -> nx.DiGraph:
    """The run's DAG as a networkx graph with node and edge attributes, nodes in data order.

    Node attributes: ``tier`` (1 for the first tier, 0 for a variable in no tier),
    ``tier_name`` (only when the spec names its tiers), ``kind`` and ``states`` (joined by
    ``|``). Edge attributes: ``required`` and, with a bootstrap block, ``confidence``.
    """
    import networkx as nx

    from runner.bootstrap import edge_confidence

    spec = record.get("spec", {})
    tier_of: dict[str, int] = {}
    for number, tier in enumerate(spec.get("tiers", []), start=1):
        for name in tier:
            tier_of.setdefault(name, number)
    names = spec.get("tier_names")
    tier_names = [str(n) for n in names] if isinstance(names, list) else []
    required = {tuple(e) for e in spec.get("required", [])}
    graph: nx.DiGraph[str] = nx.DiGraph(
        name=record["spec_name"], run_id=record["run_id"], score=record["score"]["name"],
        graph_sha256=record["graph_sha256"])
    for name, column in record["data"]["columns"].items():
        tier = tier_of.get(name, 0)
        graph.add_node(name, tier=tier, kind=column["kind"], states="|".join(column["states"]))
        if 0 < tier <= len(tier_names):
            graph.nodes[name]["tier_name"] = tier_names[tier - 1]
    confidence = edge_confidence(record)
    for a, b in record["edges"]:
        graph.add_edge(a, b, required=(a, b) in required)
        if (a, b) in confidence:
            graph.edges[a, b]["confidence"] = confidence[(a, b)]
    return graph


def to_graphml(record: dict[str, Any], model: dict[str, Any] | None = None) -> str:
    """GraphML text (the XML graph standard), written by networkx."""
    import networkx as nx

    buffer = io.BytesIO()
    nx.write_graphml(learned_graph(record), buffer, encoding="utf-8", prettyprint=True)
    return buffer.getvalue().decode("utf-8")


def _dot_id(text: str) -> str:
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


def to_dot(record: dict[str, Any], model: dict[str, Any] | None = None) -> str:
    """Graphviz DOT text: one subgraph rank per tier (in tier order, a comment naming
    it ``tier 1`` or ``tier 1 · name``), variables in no tier listed after them, required
    edges drawn bold, edges
    with bootstrap confidence wider (penwidth 1 + 3 x confidence) and labelled with it."""
    graph = learned_graph(record)
    lines = [f"digraph {_dot_id(record['spec_name'])} {{", "  rankdir=TB;",
             f"  label={_dot_id(record['run_id'] + ' (' + record['score']['name'] + ')')};"]
    tiers = sorted({data["tier"] for _, data in graph.nodes(data=True)}, key=lambda t: (t == 0, t))
    for tier in tiers:
        members = [(n, data) for n, data in graph.nodes(data=True) if data["tier"] == tier]
        body = " ".join(_dot_id(n) + ";" for n, _ in members)
        if tier == 0:
            lines += ["  // in no tier", f"  {body}"]
            continue
        name = members[0][1].get("tier_name")
        lines += [f"  // tier {tier}" + (f" · {name}" if name else "").replace("\n", " "),
                  f"  {{ rank=same; {body} }}"]
    for a, b, data in graph.edges(data=True):
        attrs = ["style=bold"] if data["required"] else []
        if "confidence" in data:
            attrs += [f"penwidth={1 + 3 * data['confidence']:.3f}",
                      f'label="{data["confidence"]:.2f}"']
        style = f" [{', '.join(attrs)}]" if attrs else ""
        lines.append(f"  {_dot_id(a)} -> {_dot_id(b)}{style};")
    lines.append("}")
    return "\n".join(lines) + "\n"


def to_json(record: dict[str, Any], model: dict[str, Any] | None = None) -> str:
    """Our JSON: nodes with attributes, edges, the run's identity and score, and the
    fitted parameters (``parameters``: per variable as in ``model.json``; null for a
    record from before fitted models)."""
    graph = learned_graph(record)
    document = {
        "run_id": record["run_id"], "spec_name": record["spec_name"],
        "graph_sha256": record["graph_sha256"], "score": record["score"]["name"],
        "score_value": record["score"]["value"],
        "nodes": [{"name": n, **data} for n, data in graph.nodes(data=True)],
        "edges": [{"from": a, "to": b, **data} for a, b, data in graph.edges(data=True)],
        "fit": None if model is None else {k: model.get(k) for k in
                                           ("estimator", "pseudo_count", "rows")},
        "parameters": None if model is None else model["variables"],
    }
    return json.dumps(document, indent=2, sort_keys=True, ensure_ascii=False) + "\n"


def export(record: dict[str, Any], fmt: str, model: dict[str, Any] | None = None) -> str:
    return {"graphml": to_graphml, "dot": to_dot, "json": to_json}[fmt](record, model)
