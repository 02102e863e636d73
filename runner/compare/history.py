"""The runs of one spec over time, one row each (``dagmill history``)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from runner.graph import structural_hamming_distance


def history_rows(records: Sequence[Mapping[str, Any] | None], ids: Sequence[str],
                 baseline_id: str | None,
                 checks: Sequence[Mapping[str, Any] | None] | None = None,
                 ) -> list[dict[str, Any]]:
    """One row per run (oldest first): time, id, whether ``run`` or ``check`` learned it
    (and the check's verdict, from its ``check.json``), the data file's name, hash prefix
    and rows, code version, score per row, edges, DAG SHD to the previous readable run,
    baseline mark. A record that could not be read (None) gets a row with ``refused``."""
    rows: list[dict[str, Any]] = []
    previous: Mapping[str, Any] | None = None
    outcomes = list(checks) if checks is not None else [None] * len(ids)
    for run_id, record, check in zip(ids, records, outcomes, strict=True):
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
            "by": "run" if check is None else "check",
            "check": None if check is None else {
                "ok": check["ok"], "verdict": check["verdict"],
                "baseline_run_id": check["baseline_run_id"], "failures": check["failures"]},
            "data_file": Path(str(record["data"]["path"])).name,
        })
        previous = record
    return rows
