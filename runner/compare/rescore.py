"""Rescoring a stored graph: a run's edges scored under another (or its own) score on
the run's data, prepared by the pipeline's own steps (:func:`runner.pipeline.
prepare_stored`), so a rescore builds the scorer a run of the same inputs builds."""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

from runner.graph import parents_from_edges
from runner.pipeline import prepare_stored


def rescore(record: Mapping[str, Any], score_name: str, ess: float | None = None,
            data_path: str | Path | None = None,
            settings: Mapping[str, Any] | None = None,
            results: Path | None = None) -> dict[str, Any]:
    """The score of ``record``'s graph under ``score_name`` on the record's data.

    The data is read the way the run read it (the spec's declared states, missing-value
    rule and state limit, the record's bin edges) and must still hash to the record's
    data sha256, unless ``data_path`` names a file explicitly (``results``, the results
    folder the record lies in, locates it: its path is relative to that folder's parent);
    raises InputError
    otherwise. A run with a held-out share is rescored on its learning rows (the same
    seeded split), as its own score was. The score's other settings (BGe's prior, the
    ess) come from ``settings`` (the other run's score block), else the record's own when
    it was learned under the same score, else the defaults; ``ess`` overrides them.
    """
    own = (record.get("spec") or {}).get("score") or {}
    chosen = settings if settings is not None else (own if own.get("name") == score_name else {})
    score = {**chosen, "name": score_name}
    if ess is not None:
        score["ess"] = ess
    inputs = prepare_stored(record, data_path, score, results)
    names = list(inputs.dataset.names)
    total = inputs.scorer().total(parents_from_edges(names, record["edges"]))
    rows = inputs.learning.rows
    return {"score": score_name,
            "ess": float(score.get("ess", 1.0)) if score_name == "bdeu" else None,
            "value": total, "per_row": total / rows, "rows": rows,
            "data_sha256": inputs.data_sha256, "data_path": str(inputs.path)}
