"""The CSV reader that ``runner/data.py`` replaced (commit d2dc1aa), frozen here unchanged
below this paragraph: ``benchmarks/loading.py`` times it against the streaming one and
``tests/test_loading.py`` holds the streaming one to its exact results. Not used by the
package.

CSV -> :class:`Dataset`: state labels, small-integer codes and the file's sha256.

Reading rules (the same for every command):

* The file must be UTF-8 text (a leading byte-order mark is allowed and ignored), comma
  separated, with a header line naming the columns. Quoting follows the usual CSV rules
  (``"a, b"`` is one field, ``""`` inside quotes is one quote character).
* Every value is read as text, never as a number, and surrounding whitespace is removed
  from values and from column names.
* A value is *missing* when, after stripping, it is one of :data:`MISSING_SPELLINGS`:
  the empty string, ``NA``, ``N/A``, ``NaN``, ``nan``, ``null``, ``NULL`` or ``None``
  (case as written). A spelling that is one of a column's declared states is a state of
  that column, not a missing value.
* States are sorted (Python string order, so ``"10" < "9"``) unless the caller declares
  them for a column, in which case they are exactly the declared ones, in that order.
* Line numbers in messages are file lines, the header being line 1. Data frames that do
  not come from a file (:func:`encode_frame`) name 1-based rows instead.
* Declared states for a name that is not a column are ignored here: the spec check
  reports those, with the spec's line.
* Column kinds: a column is *continuous* when declared so (``kind: continuous``), or when
  it is not declared and all its values are numbers with more distinct values than
  ``max_states`` (reason ``inferred-numeric-many-values``); every other column is
  discrete (reasons ``declared``, ``inferred-text``, ``inferred-numeric-few-values``).
  A continuous column's values must be decimal numbers (``1.5``, ``-2e3``; no ``inf``);
  they are kept as float64 in :attr:`Dataset.values` and its codes are zeros with no
  states, until a score decides how to use it (binning: :mod:`runner.binning`).

Every problem found is collected and raised together as an :class:`InputError`.
"""

from __future__ import annotations

import csv
import hashlib
import io
import math
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas

from runner.errors import InputError, Problem

#: Values (after stripping whitespace) read as "missing".
MISSING_SPELLINGS: tuple[str, ...] = ("", "NA", "N/A", "NaN", "nan", "null", "NULL", "None")

#: ``missing`` policies: stop with an error, or drop every row with a missing value.
MISSING_POLICIES: tuple[str, ...] = ("error", "drop-rows")

#: Most states one column can have (codes are at most 16-bit).
MAX_ENCODABLE_STATES = 1 << 16

CHUNK_BYTES = 1 << 20
BOM = b"\xef\xbb\xbf"
_SHOWN_LINES = 5  # row locations listed in one message
_SHOWN_VALUES = 5  # undeclared values listed in one message
_SHOWN_BAD_LINES = 5  # lines with a wrong field count reported one by one


# --------------------------------------------------------------------------- the dataset


@dataclass(frozen=True, eq=False)
class Dataset:
    """A table of categorical columns, encoded once for counting.

    ``codes[i, r]`` is the state code of column ``i`` in row ``r``: an index into
    ``states[i]``. The array is C-contiguous (so ``codes[i]`` is one contiguous column)
    and read-only; its dtype is ``uint8`` when every column has at most 256 states and
    ``uint16`` otherwise. Datasets compare by identity (they hold an array).

    ``kinds[i]`` is ``"discrete"`` or ``"continuous"`` and ``kind_reasons[i]`` why (empty
    tuples: every column discrete). ``values`` is None unless a column is continuous;
    then it is a read-only float64 array of shape (n_vars, n_rows) holding the numbers of
    the continuous columns (rows of discrete columns are NaN).
    """

    path: str
    sha256: str
    names: tuple[str, ...]
    states: tuple[tuple[str, ...], ...]
    codes: np.ndarray
    dropped_rows: int = 0
    warnings: tuple[Problem, ...] = ()
    kinds: tuple[str, ...] = ()
    kind_reasons: tuple[str, ...] = ()
    values: np.ndarray | None = None

    def kind(self, i: int) -> str:
        """Kind of column ``i``: "discrete" or "continuous"."""
        return self.kinds[i] if self.kinds else "discrete"

    def kind_reason(self, i: int) -> str:
        return self.kind_reasons[i] if self.kind_reasons else "inferred-text"

    @property
    def rows(self) -> int:
        """Number of data rows (after any dropped for missing values)."""
        return int(self.codes.shape[1])

    @property
    def arities(self) -> np.ndarray:
        """Number of states of each column (int64), in column order."""
        return np.array([len(s) for s in self.states], dtype=np.int64)

    def index(self, name: str) -> int:
        """Position of column ``name``; ``KeyError`` naming the columns if there is none."""
        try:
            return self.names.index(name)
        except ValueError:
            raise KeyError(f"no column named {name!r}; the columns are "
                           f"{', '.join(self.names)}") from None

    def take_rows(self, rows: np.ndarray) -> Dataset:
        """The same columns and states on the selected rows (integer positions or a mask).

        Rows may repeat (a bootstrap resample). ``path``, ``sha256``, ``dropped_rows`` and
        ``warnings`` are those of this dataset: they describe the source file.
        """
        selected = np.asarray(rows)
        if selected.dtype == np.bool_:
            if selected.shape != (self.rows,):
                raise ValueError(f"a row mask must have {self.rows} entries, "
                                 f"not shape {selected.shape}")
            selected = np.flatnonzero(selected)
        elif selected.ndim != 1 or (selected.size and selected.dtype.kind not in "iu"):
            raise ValueError("rows must be a 1-D array of integer positions or a boolean mask")
        if selected.size and (selected.min() < 0 or selected.max() >= self.rows):
            raise ValueError(f"row positions must lie in [0, {self.rows})")
        positions = selected.astype(np.intp, copy=False)
        codes = np.ascontiguousarray(self.codes[:, positions])
        codes.flags.writeable = False
        values = None
        if self.values is not None:
            values = np.ascontiguousarray(self.values[:, positions])
            values.flags.writeable = False
        return Dataset(self.path, self.sha256, self.names, self.states, codes,
                       self.dropped_rows, self.warnings, self.kinds, self.kind_reasons, values)


# --------------------------------------------------------------------------- public functions


def file_sha256(path: Path) -> str:
    """sha256 (hex) of a file's bytes, read in 1 MiB chunks."""
    digest = hashlib.sha256()
    with Path(path).open("rb") as handle:
        while chunk := handle.read(CHUNK_BYTES):
            digest.update(chunk)
    return digest.hexdigest()


def loader_settings(dataset: Mapping[str, Any]) -> dict[str, Any]:
    """``load_dataset`` keywords from a spec's ``dataset`` block as plain data (a
    normalised spec, or the copy inside a run record): missing rule, state limit,
    the declared state orders and the declared kinds."""
    columns = dataset.get("columns") or {}
    return {
        "missing": dataset.get("missing", "error"),
        "max_states": dataset.get("max_states", 64),
        "declared_states": {n: list(c["states"]) for n, c in columns.items()
                            if c.get("states")},
        "declared_kinds": {n: c.get("kind") or "discrete" for n, c in columns.items()},
    }


def load_dataset(
    path: str | Path,
    *,
    missing: str = "error",
    declared_states: Mapping[str, Sequence[str]] | None = None,
    max_states: int = 64,
    declared_kinds: Mapping[str, str] | None = None,
    expected_sha256: str | None = None,
    display_path: str | None = None,
    key_prefix: str = "dataset",
) -> Dataset:
    """Read, check and encode a CSV file; raise :class:`InputError` with every problem.

    ``display_path`` is how the file is named in messages (default: ``path`` as given);
    ``key_prefix`` is the spec section the options come from, used in message keys
    (``dataset.sha256``, ``dataset.max_states``, ...).
    """
    _check_policy(missing)
    file = display_path if display_path is not None else str(path)
    target = Path(path)
    raw = _read_file(target, file, key_prefix)
    sha = hashlib.sha256(raw).hexdigest()
    problems: list[Problem] = []
    if expected_sha256 is not None and expected_sha256.strip().lower() != sha:
        problems.append(Problem(
            file, f"the file's sha256 is {sha}, but {expected_sha256} is pinned; the data has "
            f"changed (update {key_prefix}.sha256 if the new file is intended)",
            key=f"{key_prefix}.sha256"))

    body = _checked_text(raw, file, problems)
    table = _parse_csv(body, file, problems)
    names, position_problems = _column_names(table.header, file, "in the header", line=1)
    problems.extend(position_problems)
    if table.data_rows == 0:
        problems.append(Problem(file, "has a header (line 1) but no data rows", line=1))
        raise InputError(problems)
    if len(names) == 1 and any(sep in names[0] for sep in ";\t|"):
        problems.append(Problem(
            file, f"the header has a single column {names[0]!r}; dagmill reads comma-separated "
            "files only", line=1, key=names[0], severity="warning"))

    encoded = _encode_columns(
        names, table.columns, file=file, locate=table.locate, unit="line",
        declared=declared_states, max_states=max_states, missing=missing,
        key_prefix=key_prefix, kinds=declared_kinds)
    problems.extend(encoded.problems)
    if any(p.severity == "error" for p in problems):
        raise InputError(problems)
    warnings = tuple(p for p in problems if p.severity != "error") + encoded.warnings
    return Dataset(str(path), sha, tuple(names), encoded.states, encoded.codes,
                   encoded.dropped_rows, warnings, encoded.kinds, encoded.kind_reasons,
                   encoded.values)


def encode_frame(
    frame: pandas.DataFrame,
    *,
    path: str = "<frame>",
    sha256: str = "",
    declared_states: Mapping[str, Sequence[str]] | None = None,
    max_states: int = 64,
    missing: str = "error",
    declared_kinds: Mapping[str, str] | None = None,
) -> Dataset:
    """Check and encode an in-memory table by the same rules as :func:`load_dataset`.

    Values are turned into text with ``str`` (so ``1`` becomes ``"1"``) and stripped;
    ``None`` and NaN are missing. Messages name 1-based rows and use ``path`` as the file.
    """
    _check_policy(missing)
    problems: list[Problem] = []
    labels = [str(c) for c in frame.columns]
    names, position_problems = _column_names(labels, path, "in the frame", line=None)
    problems.extend(position_problems)
    if not names:
        problems.append(Problem(path, "has no columns"))
        raise InputError(problems)
    if len(frame) == 0:
        problems.append(Problem(path, "has no data rows"))
        raise InputError(problems)
    columns = [frame.iloc[:, j].to_numpy(dtype=object) for j in range(frame.shape[1])]
    encoded = _encode_columns(
        names, columns, file=path, locate=lambda rows: rows + 1, unit="row",
        declared=declared_states, max_states=max_states, missing=missing,
        key_prefix="dataset", kinds=declared_kinds)
    problems.extend(encoded.problems)
    if any(p.severity == "error" for p in problems):
        raise InputError(problems)
    return Dataset(path, sha256, tuple(names), encoded.states, encoded.codes,
                   encoded.dropped_rows, encoded.warnings, encoded.kinds, encoded.kind_reasons,
                   encoded.values)


# --------------------------------------------------------------------------- reading the file


def _check_policy(missing: str) -> None:
    if missing not in MISSING_POLICIES:
        raise ValueError(f"missing must be one of {', '.join(MISSING_POLICIES)}, not {missing!r}")


def _read_file(target: Path, file: str, key_prefix: str) -> bytes:
    key = f"{key_prefix}.path"
    try:
        if not target.exists():
            raise InputError(Problem(file, f"file not found (looked for {target.absolute()})",
                                     key=key))
        if target.is_dir():
            raise InputError(Problem(file, "is a folder, not a CSV file", key=key))
        if not target.is_file():
            raise InputError(Problem(file, "is not a regular file", key=key))
        return target.read_bytes()
    except PermissionError:
        raise InputError(Problem(file, "cannot be read: permission denied", key=key)) from None
    except OSError as exc:
        reason = exc.strerror or str(exc)
        raise InputError(Problem(file, f"cannot be read: {reason}", key=key)) from None


def _checked_text(raw: bytes, file: str, problems: list[Problem]) -> bytes:
    """The file's bytes without a byte-order mark or trailing blank lines, ending in "\\n",
    once they are known to be UTF-8 text that is not empty."""
    try:
        raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        hint = ""
        if raw[:2] in (b"\xff\xfe", b"\xfe\xff"):
            hint = "; it looks like UTF-16"
        problems.append(Problem(
            file, f"is not UTF-8 text: byte 0x{raw[exc.start]:02X} on line {line} cannot be "
            f"decoded{hint}; save the file as UTF-8", line=line))
        raise InputError(problems) from None
    if b"\x00" in raw:
        line = raw[: raw.index(b"\x00")].count(b"\n") + 1
        problems.append(Problem(file, "contains NUL bytes: it looks like a binary file, not "
                                "CSV text", line=line))
        raise InputError(problems)
    data = raw[len(BOM):] if raw.startswith(BOM) else raw
    if not data.strip():
        problems.append(Problem(file, "is empty: there is no header and no data"))
        raise InputError(problems)
    return data.rstrip(b"\r\n \t") + b"\n"


@dataclass
class _Table:
    header: list[str]
    columns: list[np.ndarray]
    data_rows: int
    locate: Callable[[np.ndarray], np.ndarray]


def _parse_csv(body: bytes, file: str, problems: list[Problem]) -> _Table:
    """Header, field-count check and the columns as object arrays of raw strings.

    ``body`` is UTF-8 and ends with its last non-blank line. Every line must have as many
    fields as the header; a blank line in a one-column file is one empty (missing) value.
    """
    try:
        header = next(csv.reader(_text_lines(body), strict=True))
    except csv.Error as exc:
        problems.append(Problem(file, f"the header (line 1) could not be read as CSV: {exc}",
                                line=1))
        raise InputError(problems) from None
    width = len(header)
    if width == 0 or (width == 1 and not header[0].strip()):
        problems.append(Problem(file, "the header (line 1) is blank; the first line must name "
                                "the columns", line=1))
        raise InputError(problems)
    simple = b'"' not in body and body.count(b"\r") == body.count(b"\r\n")
    if simple:
        fields, starts = _field_counts_simple(body)
    else:
        fields, starts = _field_counts_quoted(body, file, problems)
    data_fields = fields[1:]
    if width == 1:
        data_fields = np.where(data_fields == 0, 1, data_fields)
    bad = np.flatnonzero(data_fields != width)
    if bad.size:
        for row in bad[:_SHOWN_BAD_LINES]:
            line = int(starts[row + 1])
            count = int(data_fields[row])
            what = "is blank" if count == 0 else f"has {_plural(count, 'field')}"
            problems.append(Problem(
                file, f"line {line} {what}, but the header has {_plural(width, 'field')}",
                line=line))
        if bad.size > _SHOWN_BAD_LINES:
            more = bad.size - _SHOWN_BAD_LINES
            problems.append(Problem(
                file, f"and {more:,} more {'line' if more == 1 else 'lines'} with a different "
                f"number of fields than the header ({width})",
                line=int(starts[bad[_SHOWN_BAD_LINES] + 1])))
        raise InputError(problems)
    data_rows = len(data_fields)
    if data_rows == 0:
        return _Table(header, [], 0, lambda rows: rows + 2)
    try:
        frame = pandas.read_csv(
            io.BytesIO(body), encoding="utf-8", header=0, names=list(range(width)), dtype=object,
            keep_default_na=False, na_filter=False, skip_blank_lines=False, index_col=False,
            engine="c")
    except (pandas.errors.ParserError, ValueError) as exc:
        reason = str(exc).split("C error: ")[-1].strip()
        problems.append(Problem(file, f"could not be read as CSV: {reason}"))
        raise InputError(problems) from None
    if len(frame) != data_rows:
        problems.append(Problem(file, f"could not be read as CSV consistently: found {data_rows:,}"
                                f" records, but the CSV reader read {len(frame):,} rows"))
        raise InputError(problems)
    columns = [frame[j].to_numpy(dtype=object) for j in range(width)]
    data_starts = starts[1:]
    return _Table(header, columns, data_rows, lambda rows: data_starts[rows])


def _field_counts_simple(body: bytes) -> tuple[np.ndarray, np.ndarray]:
    """Fields per line and each line's number, when no field is quoted (vectorised)."""
    buf = np.frombuffer(body, dtype=np.uint8)
    ends = np.flatnonzero(buf == 0x0A)  # body ends with "\n": one end per line
    begins = np.concatenate(([0], ends[:-1] + 1))
    commas = np.flatnonzero(buf == 0x2C)
    fields = np.bincount(np.searchsorted(ends, commas), minlength=len(ends)) + 1
    length = ends - begins
    has_cr = np.zeros(len(ends), dtype=bool)
    nonempty = length > 0
    has_cr[nonempty] = buf[ends[nonempty] - 1] == 0x0D
    fields[(length - has_cr) == 0] = 0
    return fields.astype(np.int64), np.arange(1, len(ends) + 1, dtype=np.int64)


def _field_counts_quoted(body: bytes, file: str,
                         problems: list[Problem]) -> tuple[np.ndarray, np.ndarray]:
    """Fields per record and the line each starts on, when quoted fields may span lines.

    A Python loop over the records: only files with quotes take this path.
    """
    reader = csv.reader(_text_lines(body), strict=True)
    fields: list[int] = []
    starts: list[int] = []
    previous = 0
    try:
        for record in reader:
            starts.append(previous + 1)
            fields.append(len(record))
            previous = reader.line_num
    except csv.Error as exc:
        line = previous + 1
        problems.append(Problem(file, f"could not be read as CSV from line {line} on: {exc}",
                                line=line))
        raise InputError(problems) from None
    return np.array(fields, dtype=np.int64), np.array(starts, dtype=np.int64)


def _text_lines(body: bytes) -> Iterator[str]:
    """The lines of ``body`` as text, line ends kept, without copying the whole file."""
    start, size = 0, len(body)
    while start < size:
        end = body.find(b"\n", start)
        end = size if end < 0 else end + 1
        yield body[start:end].decode("utf-8")
        start = end


def _column_names(labels: Sequence[str], file: str, where: str,
                  line: int | None) -> tuple[list[str], list[Problem]]:
    """Stripped column names, and a problem for each empty or repeated one."""
    names = [label.strip() for label in labels]
    problems: list[Problem] = []
    seen: dict[str, list[int]] = {}
    for position, name in enumerate(names, start=1):
        if not name:
            problems.append(Problem(file, f"column {position} {where} has no name", line=line))
        else:
            seen.setdefault(name, []).append(position)
    for name, positions in seen.items():
        if len(positions) > 1:
            problems.append(Problem(
                file, f"column name {name!r} appears {len(positions)} times {where}, at "
                f"positions {_and_list([str(p) for p in positions])} (counting from 1); "
                "column names must be unique", line=line, key=name))
    return names, problems


# --------------------------------------------------------------------------- encoding


@dataclass
class _Encoded:
    states: tuple[tuple[str, ...], ...]
    codes: np.ndarray
    dropped_rows: int
    warnings: tuple[Problem, ...]
    problems: list[Problem]
    kinds: tuple[str, ...] = ()
    kind_reasons: tuple[str, ...] = ()
    values: np.ndarray | None = None


@dataclass
class _Column:
    """One column factorised on its raw values: ``labels[raw_codes[r]]`` is row r's label."""

    raw_codes: np.ndarray  # intp, one per row
    labels: list[str | None]  # stripped label per raw unique; None = missing
    declared: tuple[str, ...] | None


def _factorise(values: np.ndarray, declared: tuple[str, ...] | None) -> _Column:
    """Factorise raw values, strip the (few) distinct ones, and mark the missing ones."""
    raw_codes, uniques = pandas.factorize(values, use_na_sentinel=True)
    spellings = set(MISSING_SPELLINGS) - set(declared or ())
    labels: list[str | None] = []
    for unique in uniques:
        label = str(unique).strip()
        labels.append(None if label in spellings else label)
    raw_codes = np.asarray(raw_codes, dtype=np.intp)
    if (raw_codes < 0).any():  # None or NaN in an in-memory frame
        raw_codes = np.where(raw_codes < 0, len(labels), raw_codes)
        labels.append(None)
    return _Column(raw_codes, labels, declared)


@dataclass
class _Report:
    """Where the messages of one table point (file, row locator and unit, spec key
    prefix) and the problems and warnings found so far, in the order found."""

    file: str
    locate: Callable[[np.ndarray], np.ndarray]
    unit: str
    key_prefix: str
    problems: list[Problem] = field(default_factory=list)
    warnings: list[Problem] = field(default_factory=list)

    def line(self, where: np.ndarray) -> int | None:
        """The first location as a file line (None when locations are frame rows)."""
        return int(where[0]) if self.unit == "line" else None

    def failed(self) -> bool:
        return any(p.severity == "error" for p in self.problems)


@dataclass
class _EncodedColumn:
    """One column ready for the data set: kind, why, states and codes (and numbers)."""

    kind: str
    reason: str
    states: tuple[str, ...]
    codes: np.ndarray
    numbers: np.ndarray | None = None


# A label's code before it is checked: missing, or not among the declared states.
_MISSING_CODE, _UNDECLARED_CODE = -1, -2


def _encode_columns(
    names: Sequence[str],
    columns: Sequence[np.ndarray],
    *,
    file: str,
    locate: Callable[[np.ndarray], np.ndarray],
    unit: str,
    declared: Mapping[str, Sequence[str]] | None,
    max_states: int,
    missing: str,
    key_prefix: str,
    kinds: Mapping[str, str] | None = None,
) -> _Encoded:
    """Check and encode the columns: missing values, then each column's kind, states and
    codes; every problem is collected in ``_Encoded.problems``."""
    report = _Report(file, locate, unit, key_prefix)
    parsed = _parse_columns(names, columns, declared or {}, report)
    n_rows = len(columns[0]) if columns else 0
    keep = _rows_to_keep(names, parsed, n_rows, missing, report)
    dropped = int(n_rows - keep.sum())
    if dropped and not _report_dropped(n_rows, dropped, report):
        return _Encoded((), np.zeros((len(names), 0), np.uint8), dropped, (), report.problems)
    kept_rows = np.flatnonzero(keep) if dropped else None
    encoded = []
    for name, col in zip(names, parsed, strict=True):
        column = _encode_column(name, col, (kinds or {}).get(name), max_states, kept_rows,
                                report)
        if column is not None:
            encoded.append(column)
    if report.failed():
        return _Encoded((), np.zeros((len(names), 0), np.uint8), dropped,
                        tuple(report.warnings), report.problems)
    return _assemble(encoded, dropped, report)


def _parse_columns(names: Sequence[str], columns: Sequence[np.ndarray],
                   declared: Mapping[str, Sequence[str]], report: _Report) -> list[_Column]:
    """Each column factorised, its declared states (if any) checked."""
    parsed = []
    for name, values in zip(names, columns, strict=True):
        states = declared.get(name)
        if states is not None:
            states = tuple(states)
            report.problems.extend(_declared_problems(name, states, report.file,
                                                      report.key_prefix))
        parsed.append(_factorise(values, states))
    return parsed


def _rows_to_keep(names: Sequence[str], parsed: Sequence[_Column], n_rows: int,
                  missing: str, report: _Report) -> np.ndarray:
    """The rows to encode (a mask): under ``missing: error`` all of them, with a problem
    per column that has missing values; under ``drop-rows`` the rows without any."""
    keep = np.ones(n_rows, dtype=bool)
    for name, col in zip(names, parsed, strict=True):
        mask = _missing(col)[col.raw_codes]
        if missing == "error":
            _report_missing(name, mask, report)
        else:
            keep &= ~mask
    return keep


def _report_missing(name: str, mask: np.ndarray, report: _Report) -> None:
    """The problem of a column with missing values under ``missing: error``."""
    if not mask.any():
        return
    rows = np.flatnonzero(mask)
    where = report.locate(rows[:_SHOWN_LINES])
    first = "at" if rows.size <= _SHOWN_LINES else "first at"
    report.problems.append(Problem(
        report.file, f"column {name!r} has {_plural(rows.size, 'missing value')} (empty or "
        f"an NA spelling), {first} {_locations(report.unit, where)}; fill "
        f"{'it' if rows.size == 1 else 'them'} in, or set {report.key_prefix}.missing: "
        "drop-rows to drop such rows",
        line=report.line(where), key=name))


def _report_dropped(n_rows: int, dropped: int, report: _Report) -> bool:
    """Say how many rows ``drop-rows`` dropped; False (with a problem) when none is left."""
    key = f"{report.key_prefix}.missing"
    if dropped == n_rows:
        report.problems.append(Problem(
            report.file, f"every one of the {n_rows:,} data rows has a missing value; "
            f"nothing is left after {key}: drop-rows", key=key))
        return False
    report.warnings.append(Problem(
        report.file, f"dropped {dropped:,} of {n_rows:,} data rows with a missing value "
        f"({key}: drop-rows)", key=key, severity="warning"))
    return True


def _encode_column(name: str, col: _Column, declared_kind: str | None, max_states: int,
                   kept_rows: np.ndarray | None, report: _Report) -> _EncodedColumn | None:
    """One column on the kept rows, continuous or discrete (None: it has a problem).

    Continuous when declared so, or when undeclared with more than ``max_states``
    distinct values that are all numbers; discrete otherwise."""
    raw = col.raw_codes if kept_rows is None else col.raw_codes[kept_rows]
    seen = _seen_labels(col, raw)
    many = col.declared is None and len(seen) > max_states
    if declared_kind == "continuous" or (declared_kind is None and many):
        numbers = _numbers(col.labels)
        if declared_kind == "continuous" or not np.isnan(numbers[~_missing(col)]).any():
            return _continuous_column(name, col, raw, numbers, declared_kind, seen, kept_rows,
                                      report)
    return _discrete_column(name, col, raw, declared_kind, seen, max_states, kept_rows, report)


def _seen_labels(col: _Column, raw: np.ndarray) -> list[str]:
    """The distinct labels present in the rows ``raw`` (missing ones aside), sorted."""
    present = np.bincount(raw, minlength=len(col.labels)) > 0
    return sorted({label for label, p in zip(col.labels, present, strict=True)
                   if p and label is not None})


def _continuous_column(name: str, col: _Column, raw: np.ndarray, numbers: np.ndarray,
                       declared_kind: str | None, seen: list[str],
                       kept_rows: np.ndarray | None, report: _Report) -> _EncodedColumn | None:
    """A continuous column: its numbers per row, zero codes and no states (None, with a
    problem, when a value is not a number)."""
    bad_problem = _not_numbers(name, col, raw, numbers, report.file, report.locate,
                               kept_rows, report.unit)
    if bad_problem is not None:
        report.problems.append(bad_problem)
        return None
    reason = "declared" if declared_kind else "inferred-numeric-many-values"
    _warn_if_constant(name, seen, report)
    return _EncodedColumn("continuous", reason, (), np.zeros(len(raw), dtype=np.uint8),
                          numbers[raw])


def _discrete_column(name: str, col: _Column, raw: np.ndarray, declared_kind: str | None,
                     seen: list[str], max_states: int, kept_rows: np.ndarray | None,
                     report: _Report) -> _EncodedColumn | None:
    """A discrete column: its states in order and each row's code (None: a problem)."""
    reason = _discrete_reason(col, declared_kind, seen)
    states = _state_order(name, col, seen, max_states, report)
    if states is None:
        return None
    if len(states) > MAX_ENCODABLE_STATES:
        report.problems.append(Problem(
            report.file, f"column {name!r} has {len(states):,} states, more than the "
            f"{MAX_ENCODABLE_STATES:,} that can be encoded", key=name))
        return None
    _warn_if_constant(name, seen, report)
    codes = _state_codes(col, raw, states)
    bad = codes == _UNDECLARED_CODE
    if bad.any():
        report.problems.append(_undeclared_problem(
            name, states, col, raw, bad, report.file, report.locate, kept_rows, report.unit,
            report.key_prefix))
        return None
    return _EncodedColumn("discrete", reason, states, codes)


def _discrete_reason(col: _Column, declared_kind: str | None, seen: list[str]) -> str:
    """Why a column is discrete: declared, numbers with few values, or text."""
    if col.declared is not None or declared_kind is not None:
        return "declared"
    if seen and not np.isnan(_numbers(seen)).any():
        return "inferred-numeric-few-values"
    return "inferred-text"


def _state_order(name: str, col: _Column, seen: list[str], max_states: int,
                 report: _Report) -> tuple[str, ...] | None:
    """The column's states: the declared ones in their order (a warning names those the
    data lacks), else the seen ones sorted (None, with a problem, above ``max_states``)."""
    if col.declared is None:
        if len(seen) > max_states:
            report.problems.append(Problem(
                report.file, f"column {name!r} has {len(seen):,} distinct values, more than "
                f"the limit of {max_states:,} ({report.key_prefix}.max_states); it looks like "
                "an identifier or a continuous measurement", key=name))
            return None
        return tuple(seen)
    states = col.declared
    unseen = [s for s in states if s not in set(seen)]
    if unseen:
        report.warnings.append(Problem(
            report.file, f"declared {_plural(len(unseen), 'state', bare=True)} "
            f"{_and_list([repr(s) for s in unseen])} never "
            f"{'occurs' if len(unseen) == 1 else 'occur'} in the data; kept, with zero "
            "counts", key=name, severity="warning"))
    return states


def _warn_if_constant(name: str, seen: list[str], report: _Report) -> None:
    if len(seen) == 1:
        report.warnings.append(Problem(
            report.file, f"column {name!r} has the same value {seen[0]!r} in every row; it "
            "is kept, but it can neither depend on nor explain another column", key=name,
            severity="warning"))


def _state_codes(col: _Column, raw: np.ndarray, states: tuple[str, ...]) -> np.ndarray:
    """Each row's index into ``states`` (int64); :data:`_MISSING_CODE` for a missing value,
    :data:`_UNDECLARED_CODE` for a label that is not a state."""
    index = {s: i for i, s in enumerate(states)}
    lut = np.array([_MISSING_CODE if label is None else index.get(label, _UNDECLARED_CODE)
                    for label in col.labels], dtype=np.int64)
    return lut[raw]


def _assemble(encoded: Sequence[_EncodedColumn], dropped: int, report: _Report) -> _Encoded:
    """The code matrix (``uint8``, or ``uint16`` above 256 states; read-only) and, when a
    column is continuous, the values matrix (NaN rows for discrete columns)."""
    widest = max(len(c.states) for c in encoded)
    dtype = np.uint8 if widest <= 256 else np.uint16
    matrix = np.empty((len(encoded), len(encoded[0].codes)), dtype=dtype)
    for i, column in enumerate(encoded):
        matrix[i] = column.codes
    matrix.flags.writeable = False
    kinds = tuple(c.kind for c in encoded)
    reasons = tuple(c.reason for c in encoded)
    if all(c.numbers is None for c in encoded):
        return _Encoded(tuple(c.states for c in encoded), matrix, dropped,
                        tuple(report.warnings), report.problems, kinds, reasons)
    values = np.full(matrix.shape, np.nan, dtype=np.float64)
    for i, column in enumerate(encoded):
        if column.numbers is not None:
            values[i] = column.numbers
    values.flags.writeable = False
    return _Encoded(tuple(c.states for c in encoded), matrix, dropped, tuple(report.warnings),
                    report.problems, kinds, reasons, values)


def _number(label: str) -> float:
    """``label`` as a finite decimal number, else NaN (no ``inf``, no ``1_000``)."""
    try:
        value = float(label)
    except ValueError:
        return math.nan
    return value if math.isfinite(value) and "_" not in label else math.nan


def _numbers(labels: Sequence[str | None]) -> np.ndarray:
    """Each label as a number (NaN: missing or not a number)."""
    return np.array([math.nan if label is None else _number(label) for label in labels],
                    dtype=np.float64)


def _missing(col: _Column) -> np.ndarray:
    return np.array([label is None for label in col.labels], dtype=bool)


def _not_numbers(
    name: str, col: _Column, raw: np.ndarray, numbers: np.ndarray, file: str,
    locate: Callable[[np.ndarray], np.ndarray], kept_rows: np.ndarray | None, unit: str,
) -> Problem | None:
    """A problem naming the first values of a continuous column that are not numbers."""
    bad_label = np.isnan(numbers) & ~_missing(col)
    bad = bad_label[raw]
    if not bad.any():
        return None
    rows = np.flatnonzero(bad)
    original = rows if kept_rows is None else kept_rows[rows]
    where = locate(original[:_SHOWN_LINES])
    example = col.labels[int(raw[rows[0]])]
    distinct = int(np.unique(raw[rows]).size)
    more = f" ({_plural(distinct, 'distinct value')} in {_plural(rows.size, 'row')})" \
        if rows.size > 1 else ""
    return Problem(
        file, f"column {name!r} is continuous but has text that is not a number: {example!r} "
        f"at {_locations(unit, where[:1])}{more}; fix the value, or declare the column "
        f"kind: discrete", line=int(where[0]) if unit == "line" else None, key=name)


def _declared_problems(name: str, states: tuple[str, ...], file: str,
                       key_prefix: str) -> list[Problem]:
    key = f"{key_prefix}.columns.{name}.states"
    problems = []
    if not states:
        problems.append(Problem(file, f"column {name!r} declares no states", key=key))
    repeated = sorted({s for s in states if states.count(s) > 1})
    if repeated:
        problems.append(Problem(
            file, f"column {name!r} declares {_and_list([repr(s) for s in repeated])} more than "
            "once", key=key))
    if any(not isinstance(s, str) for s in states):
        problems.append(Problem(file, f"column {name!r} declares states that are not text",
                                key=key))
    return problems


def _undeclared_problem(
    name: str, states: tuple[str, ...], col: _Column, raw: np.ndarray, bad: np.ndarray,
    file: str, locate: Callable[[np.ndarray], np.ndarray], kept_rows: np.ndarray | None,
    unit: str, key_prefix: str,
) -> Problem:
    """One problem listing the values outside the declared states, with their first rows."""
    bad_rows = np.flatnonzero(bad)
    labels_of_bad = np.array([col.labels[c] for c in raw[bad_rows]], dtype=object)
    distinct, first = np.unique(labels_of_bad.astype(str), return_index=True)
    order = np.argsort(first, kind="stable")
    parts = []
    first_line: int | None = None
    for k in order[:_SHOWN_VALUES]:
        rows = bad_rows[labels_of_bad == distinct[k]][:3]
        original = rows if kept_rows is None else kept_rows[rows]
        where = locate(original)
        if first_line is None:
            first_line = int(where[0])
        parts.append(f"{str(distinct[k])!r} at {_locations(unit, where)}")
    if len(distinct) > _SHOWN_VALUES:
        parts.append(f"and {len(distinct) - _SHOWN_VALUES:,} more")
    shown = ", ".join(states[:12]) + (", ..." if len(states) > 12 else "")
    what = "a value that is not" if len(distinct) == 1 else "values that are not"
    return Problem(
        file, f"column {name!r} has {what} among its declared states {shown} "
        f"({key_prefix}.columns.{name}.states): {'; '.join(parts)}",
        line=first_line if unit == "line" else None, key=name)


# --------------------------------------------------------------------------- wording


def _plural(count: int, noun: str, bare: bool = False) -> str:
    word = noun if count == 1 else noun + "s"
    return word if bare else f"{count:,} {word}"


def _and_list(items: Sequence[str]) -> str:
    if len(items) <= 1:
        return "".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]


def _locations(unit: str, numbers: Any) -> str:
    shown = [f"{int(n):,}" for n in numbers]
    return f"{unit} {shown[0]}" if len(shown) == 1 else f"{unit}s {_and_list(shown)}"
