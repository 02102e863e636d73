"""Run-to-run differences: inputs, scores, columns, edges, CPDAGs, the verdict, and
everything ``compare`` reports about two records (:func:`compare_records`).

Pure functions of records (plain dicts as stored in ``run.json``) and baseline documents.
The one-line descriptions of changes (:func:`describe_edges`, :func:`describe_columns`)
are part of the results: the gate's and ``pin``'s reports list them.

Distances: structural Hamming distance on DAGs and on CPDAGs (Tsamardinos, Brown &
Aliferis 2006); equivalence by skeleton and v-structures (Verma & Pearl 1990); CPDAGs
by Chickering's (1995) edge labelling (see :mod:`runner.graph`).
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from runner.bootstrap import consensus_view
from runner.environment import environment_changes
from runner.evaluation import held_out_comparison
from runner.graph import (
    Cpdag,
    cpdag,
    cpdag_shd,
    graph_sha256,
    same_equivalence_class,
    structural_hamming_distance,
)

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


def field_at(record: Mapping[str, Any], path: Sequence[str]) -> Any:
    """The value at ``path`` in a nested record, or None where a step is missing."""
    value: Any = record
    for key in path:
        if not isinstance(value, Mapping):
            return None
        value = value.get(key)
    return value


def record_inputs(record: Mapping[str, Any]) -> dict[str, Any]:
    """The inputs of a record that ``compare`` shows side by side."""
    return {label: field_at(record, path) for label, path in INPUT_FIELDS}


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
        names.update(field_at(r, ("data", "columns")) or {})
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


def _flatten(value: Any, prefix: str = "") -> dict[str, Any]:
    """A nested mapping as ``{dotted key: value}``; lists and scalars are leaves."""
    if isinstance(value, Mapping) and (value or not prefix):
        out: dict[str, Any] = {}
        for key in sorted(value, key=str):
            out.update(_flatten(value[key], f"{prefix}.{key}" if prefix else str(key)))
        return out
    return {prefix: value}


def _shown(value: Any, present: bool) -> str:
    return json.dumps(value, sort_keys=True, separators=(", ", ": ")) if present else "(absent)"


def spec_changes(old: Mapping[str, Any], new: Mapping[str, Any]) -> list[str]:
    """The keys that differ between two normalised specs, sorted: ``dotted.key: old ->
    new`` with the values as JSON (``(absent)`` for a key one side lacks); a list is one
    value (``tiers``, ``forbidden``)."""
    a, b = _flatten(old), _flatten(new)
    return [f"{key}: {_shown(a.get(key), key in a)} -> {_shown(b.get(key), key in b)}"
            for key in sorted(set(a) | set(b))
            if key not in a or key not in b or a[key] != b[key]]


def needs_rescore(a: Mapping[str, Any], b: Mapping[str, Any]) -> bool:
    """Both runs learned on the same data but scored differently."""
    return (a["data"]["sha256"] == b["data"]["sha256"]
            and not score_delta(a, b)["comparable"])


def compare_records(a: Mapping[str, Any], b: Mapping[str, Any],
                    rescored: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """Everything ``compare`` reports about two records, as one JSON-ready dict.

    ``rescored`` is ``{"a_under_b": ..., "b_under_a": ...}`` from
    :func:`runner.compare.rescore.rescore` when the runs share data but not the score (or
    a ``{"skipped": reason}``), else None.
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
