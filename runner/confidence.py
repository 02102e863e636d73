"""Bootstrap edge confidence read from a run record, where the record has one.

A run learned with bootstrap resampling carries a ``bootstrap`` block (written by
:mod:`runner.bootstrap`) whose ``frequencies`` list holds, per directed edge
``{"edge": [a, b], "directed": d, "class": c, "adjacent": j}``: the shares of
replicates whose DAG has ``a -> b``, whose equivalence class has it (compelled or
undirected), and that join ``a`` and ``b`` either way. This module is the one place
exports and reports read it; the confidence they draw is the ``directed`` share unless
asked for another.

A record without a ``bootstrap`` block has no confidence.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

Edge = tuple[str, str]


SHARES = ("directed", "class", "adjacent")


def edge_confidence(record: Mapping[str, Any], share: str = "directed") -> dict[Edge, float]:
    """Directed edge -> its ``share`` of bootstrap replicates; empty without bootstrap."""
    if share not in SHARES:
        raise ValueError(f"unknown share {share!r}; one of {', '.join(SHARES)}")
    block = record.get("bootstrap")
    if not isinstance(block, Mapping) or not isinstance(block.get("frequencies"), list):
        return {}
    out: dict[Edge, float] = {}
    for item in block["frequencies"]:
        if isinstance(item, Mapping) and isinstance(item.get(share), int | float):
            a, b = item["edge"]
            out[(str(a), str(b))] = float(item[share])
    return dict(sorted(out.items()))


def replicates(record: Mapping[str, Any]) -> int | None:
    block = record.get("bootstrap")
    if isinstance(block, Mapping) and isinstance(block.get("replicates"), int):
        return int(block["replicates"])
    return None
