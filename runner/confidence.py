"""Bootstrap edge confidence read from a run record, where the record has one.

A run learned with bootstrap resampling carries a ``bootstrap`` block with the share of
replicates in which each directed edge appeared. This module is the one place that reads
it, so exports and reports need not know its layout. Accepted layouts of the per-edge
frequencies (under ``bootstrap.edges`` or ``bootstrap.frequencies``):

* a list of ``{"from": a, "to": b, "frequency": f}`` items;
* a list of ``[a, b, f]`` triples;
* a mapping ``{"a -> b": f}``.

A record without a ``bootstrap`` block (every run of this version) has no confidence.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

Edge = tuple[str, str]


def edge_confidence(record: Mapping[str, Any]) -> dict[Edge, float]:
    """Directed edge -> share of bootstrap replicates holding it; empty without bootstrap."""
    block = record.get("bootstrap")
    if not isinstance(block, Mapping):
        return {}
    items = block.get("edges", block.get("frequencies"))
    out: dict[Edge, float] = {}
    if isinstance(items, Mapping):
        for key, value in items.items():
            a, _, b = str(key).partition("->")
            if b and isinstance(value, int | float):
                out[(a.strip(), b.strip())] = float(value)
    elif isinstance(items, list):
        for item in items:
            if isinstance(item, Mapping) and {"from", "to"} <= item.keys():
                f = item.get("frequency", item.get("confidence"))
                if isinstance(f, int | float):
                    out[(str(item["from"]), str(item["to"]))] = float(f)
            elif isinstance(item, list | tuple) and len(item) == 3:
                out[(str(item[0]), str(item[1]))] = float(item[2])
    return dict(sorted(out.items()))


def replicates(record: Mapping[str, Any]) -> int | None:
    block = record.get("bootstrap")
    if isinstance(block, Mapping) and isinstance(block.get("replicates"), int):
        return int(block["replicates"])
    return None
