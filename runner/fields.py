"""Typed spec values the spec models and the registry's parameter models share.

Each is an ``Annotated`` pydantic type: the constraint and, where pydantic cannot say it
itself, the JSON Schema the editors see. Kept apart so that :mod:`runner.registry` (the
parameters of scores and searches) and :mod:`runner.spec` (the rest of the spec) declare
their keys with the same types without importing each other.
"""

from __future__ import annotations

from typing import Annotated

from pydantic import Field, PlainValidator, Strict, StrictInt, StrictStr, WithJsonSchema


def _check_sample(value: object) -> float | int:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ValueError("must be a share in (0, 1] or a whole count of at least 1")
    if isinstance(value, int):
        if value < 1:
            raise ValueError("a count of neighbours must be at least 1")
        return value
    if not 0 < value <= 1:
        raise ValueError("a share of neighbours must be in (0, 1]; write a whole number "
                         "for a count")
    return value


#: A variable (column) name.
Variable = Annotated[StrictStr, Field(min_length=1)]
#: A whole number of at least 0.
Count = Annotated[StrictInt, Field(ge=0)]
#: A whole number of at least 1.
PositiveCount = Annotated[StrictInt, Field(ge=1)]
#: A finite float (an int is accepted by pydantic's strict float, a bool is not).
Real = Annotated[float, Strict(), Field(allow_inf_nan=False)]
#: A finite float above 0.
PositiveReal = Annotated[Real, Field(gt=0)]
#: first-ascent's neighbour sample: a share in (0, 1] or a whole count of at least 1.
Sample = Annotated[
    float | int,
    PlainValidator(_check_sample),
    WithJsonSchema({"anyOf": [
        {"type": "number", "exclusiveMinimum": 0, "maximum": 1},
        {"type": "integer", "minimum": 1},
    ]}),
]
