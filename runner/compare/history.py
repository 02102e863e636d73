"""The runs of one spec over time, one row each (``dagmill history``)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from runner.graph import structural_hamming_distance


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
