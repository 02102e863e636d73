"""Two variation summaries of one spec side by side: how each edge's share of
combinations and the stable core changed (``dagmill compare SUMMARY_A SUMMARY_B``).

A summary is what :func:`runner.store.read_variation` returns; text for people is
rendered by :func:`runner.present.text.variation_compare_lines`.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

#: the shares a summary stores per edge, in the order they are reported
SHARE_KINDS = ("directed", "class", "adjacent")


def _shares(summary: Mapping[str, Any]) -> dict[tuple[str, str], dict[str, float]]:
    return {(s["edge"][0], s["edge"][1]): {k: float(s[k]) for k in SHARE_KINDS}
            for s in summary["shares"]}


def _core(summary: Mapping[str, Any], kind: str) -> set[tuple[str, str]]:
    return {(a, b) for a, b in summary["stable_core"][kind]}


def compare_variations(a: Mapping[str, Any], b: Mapping[str, Any]) -> dict[str, Any]:
    """How the edge shares and the stable core changed from summary ``a`` to ``b``.

    Parameters
    ----------
    a, b : mapping
        Two variation summaries (``variations/<id>.json``), usually of the same spec.

    Returns
    -------
    dict
        ``a``/``b`` (summary id, spec name, combinations), ``same_spec``, ``edges``: one
        entry per directed edge seen in either summary, sorted by edge, with its shares in
        ``a`` and ``b`` (0 where the summary does not list it) and ``delta`` (b - a) per
        share kind; ``changed``: the edges whose shares differ; ``stable_core``: per kind
        (``directed``, ``class``) the core edges ``kept``, ``gained`` and ``lost``.
    """
    sa, sb = _shares(a), _shares(b)
    zero = dict.fromkeys(SHARE_KINDS, 0.0)
    edges: list[dict[str, Any]] = []
    for edge in sorted(set(sa) | set(sb)):
        x, y = sa.get(edge, zero), sb.get(edge, zero)
        edges.append({"edge": list(edge), "a": x, "b": y,
                      "delta": {k: y[k] - x[k] for k in SHARE_KINDS}})
    core: dict[str, dict[str, list[list[str]]]] = {}
    for kind in ("directed", "class"):
        ca, cb = _core(a, kind), _core(b, kind)
        core[kind] = {"kept": [list(e) for e in sorted(ca & cb)],
                      "gained": [list(e) for e in sorted(cb - ca)],
                      "lost": [list(e) for e in sorted(ca - cb)]}
    return {
        "a": _head(a), "b": _head(b), "same_spec": a["spec_name"] == b["spec_name"],
        "edges": edges,
        "changed": [e["edge"] for e in edges if any(e["delta"][k] != 0 for k in SHARE_KINDS)],
        "stable_core": core,
    }


def _head(summary: Mapping[str, Any]) -> dict[str, Any]:
    return {"summary_id": summary["summary_id"], "spec_name": summary["spec_name"],
            "keys": list(summary["keys"]), "combinations": len(summary["combinations"])}
