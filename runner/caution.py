"""The caution every run record stores and every report shows. It lives here, apart from
both, so that the pipeline writes it into the record and the report shows it (from the
record, or from here for a record that lacks it) without either importing the other."""

CAUTION = (
    "A learned structure is statistical association under assumptions (no hidden common "
    "causes, no selection bias, enough data, a correct model class), not proof of cause. "
    "Decisions that affect people or safety need review by domain experts."
)
