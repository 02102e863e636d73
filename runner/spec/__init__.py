"""The analysis spec: one YAML file, read safely, checked completely.

* :mod:`runner.spec.models`: the pydantic models (:class:`Spec` and its sections), the
  normalised spec, its hash and JSON Schema; the score and search keys come from
  :mod:`runner.registry`;
* :mod:`runner.spec.loader`: :func:`load_spec`, the line-tracking YAML loader, pydantic's
  errors as problems with lines;
* :mod:`runner.spec.rules`: the rules across keys and :func:`check_spec_against_columns`.
"""

from __future__ import annotations

from runner.spec.loader import load_spec
from runner.spec.models import (
    IMPLEMENTED_KINDS,
    Spec,
    normalised_spec,
    spec_json_schema,
    spec_sha256,
    tier_label,
)
from runner.spec.rules import check_required_kinds, check_spec_against_columns

__all__ = [
    "IMPLEMENTED_KINDS",
    "Spec",
    "check_required_kinds",
    "check_spec_against_columns",
    "load_spec",
    "normalised_spec",
    "spec_json_schema",
    "spec_sha256",
    "tier_label",
]
