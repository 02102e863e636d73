"""CSV or Parquet -> :class:`Dataset`: state labels, small-integer codes and the file's
sha256.

Reading rules (the same for every command):

* The file must be UTF-8 text (a leading byte-order mark is allowed and ignored), comma
  separated, with a header line naming the columns. Quoting follows the usual CSV rules
  (``"a, b"`` is one field, ``""`` inside quotes is one quote character).
* Every value is read as text, never as a number, and surrounding whitespace is removed
  from values and from column names.
* A value is *missing* when, after stripping, it is one of :data:`MISSING_SPELLINGS`:
  the empty string, ``NA``, ``N/A``, ``NaN``, ``nan``, ``null``, ``NULL`` or ``None``
  (case as written), or of the caller's ``missing_values`` (``dataset.missing_values``).
  A spelling that is one of a column's declared states is a state of that column, not a
  missing value.
* ``use`` / ``drop`` (``dataset.use`` / ``dataset.drop``) select columns right after the
  header; the others are never encoded. The sha256 is always the whole file's.
* A path ending in ``.parquet`` or ``.pq`` is read with pyarrow (the ``parquet`` extra):
  each column's values become the text CSV would show (``3``, ``0.25``, ``True``; nulls
  and float NaN missing) and go through the same encoding; an Arrow dictionary column
  keeps its category order as its state order (reason ``categorical``) unless the caller
  declares states. Its messages name rows from 1, and its sha256 is of the file's bytes.
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

import codecs
import csv
import difflib
import errno
import glob
import hashlib
import importlib
import io
import math
import mmap
import os
import warnings
from collections.abc import Callable, Iterator, Mapping, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, BinaryIO

import numpy as np
import pandas

from runner.errors import InputError, Problem
from runner.files import special_file_kind

#: Data file names read as Parquet (:func:`is_parquet`); every other file is CSV.
PARQUET_SUFFIXES: tuple[str, ...] = (".parquet", ".pq")

#: Values (after stripping whitespace) read as "missing".
MISSING_SPELLINGS: tuple[str, ...] = ("", "NA", "N/A", "NaN", "nan", "null", "NULL", "None")

#: ``missing`` policies: stop with an error, drop every row with a missing value, or keep
#: every row and mark each missing cell (``available-case``: a discrete column's code equal
#: to its number of states; a continuous column's value NaN), so each family is scored on
#: the rows where its variables are present (:mod:`runner.scores.available`); under
#: ``structural-em`` the cells are marked the same way and every completion of a row is
#: weighted by EM (:mod:`runner.scores.expected`).
MISSING_POLICIES: tuple[str, ...] = ("error", "drop-rows", "available-case", "structural-em")
#: The policies that keep rows with gaps.
KEEPS_GAPS: tuple[str, ...] = ("available-case", "structural-em")

#: Most states one column can have (codes are at most 16-bit).
MAX_ENCODABLE_STATES = 1 << 16

CHUNK_BYTES = 1 << 20
#: Bytes read and parsed at a time: memory for reading stays near a few blocks.
READ_BLOCK = 8 << 20
#: Smallest piece of a block that pyarrow parses on its own (its threads share a block).
ARROW_CHUNK = 1 << 20
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

    ``incomplete`` is True when the data was read under ``missing: available-case``: then
    a code equal to the column's number of states (``arities[i]``) marks a missing cell
    of a discrete column, and NaN one of a continuous column (:meth:`present`).
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
    incomplete: bool = False

    def kind(self, i: int) -> str:
        """Kind of column ``i``: "discrete" or "continuous"."""
        return self.kinds[i] if self.kinds else "discrete"

    def kind_reason(self, i: int) -> str:
        return self.kind_reasons[i] if self.kind_reasons else "inferred-text"

    @property
    def rows(self) -> int:
        """Number of data rows (after any dropped for missing values)."""
        return int(self.codes.shape[1])

    def present(self, i: int) -> np.ndarray:
        """Mask of the rows where column ``i`` has a value (all True unless
        ``incomplete``)."""
        if not self.incomplete:
            return np.ones(self.rows, dtype=bool)
        if self.kind(i) == "continuous" and self.values is not None:
            return ~np.isnan(self.values[i])
        return self.codes[i] != len(self.states[i])

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
                       self.dropped_rows, self.warnings, self.kinds, self.kind_reasons, values,
                       self.incomplete)


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
        "missing_values": dataset.get("missing_values"),
        "use": dataset.get("use"),
        "drop": dataset.get("drop"),
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
    missing_values: Sequence[str] | None = None,
    use: Sequence[str] | None = None,
    drop: Sequence[str] | None = None,
) -> Dataset:
    """Read, check and encode a CSV file; raise :class:`InputError` with every problem.

    ``display_path`` is how the file is named in messages (default: ``path`` as given);
    ``key_prefix`` is the spec section the options come from, used in message keys
    (``dataset.sha256``, ``dataset.max_states``, ...). ``missing_values`` are the
    spellings that mean missing (None: :data:`MISSING_SPELLINGS`). ``use`` (only these
    columns) or ``drop`` (all but these) select columns right after the header: the
    others are not encoded; the selected ones keep the file's order. The sha256 is the
    whole file's.
    """
    _check_policy(missing)
    file = display_path if display_path is not None else str(path)
    problems: list[Problem] = []
    selection = _Selection(use, drop, key_prefix)
    parts = parquet_parts(Path(path), file, key_prefix)
    parquet = parts is not None or is_parquet(path)
    if parts is not None:
        sha, table = _read_parquet_parts(parts, file, key_prefix, problems, expected_sha256,
                                         selection)
        names, position_problems = _column_names(table.header, file, "in the schema",
                                                 line=None)
    elif parquet:
        sha, table = _read_parquet(Path(path), file, key_prefix, problems, expected_sha256,
                                   selection)
        names, position_problems = _column_names(table.header, file, "in the schema",
                                                 line=None)
    else:
        sha, table = _read_table(Path(path), file, key_prefix, problems, expected_sha256,
                                 selection)
        names, position_problems = _column_names(table.header, file, "in the header", line=1)
    problems.extend(position_problems)
    names = [names[j] for j in table.selected]
    if table.data_rows == 0:
        problems.append(Problem(file, "has no data rows", line=None) if parquet else
                        Problem(file, "has a header (line 1) but no data rows", line=1))
        raise InputError(problems)
    if not parquet and len(names) == 1 and any(sep in names[0] for sep in ";\t|"):
        problems.append(Problem(
            file, f"the header has a single column {names[0]!r}; dagmill reads comma-separated "
            "files only", line=1, key=names[0], severity="warning"))

    columns, table.columns = table.columns, []
    encoded = _encode_columns(
        names, columns, file=file, locate=table.locate, unit="row" if parquet else "line",
        declared=declared_states, max_states=max_states, missing=missing,
        key_prefix=key_prefix, kinds=declared_kinds, missing_values=missing_values)
    problems.extend(encoded.problems)
    if any(p.severity == "error" for p in problems):
        raise InputError(problems)
    warnings = tuple(p for p in problems if p.severity != "error") + encoded.warnings
    return Dataset(str(path), sha, tuple(names), encoded.states, encoded.codes,
                   encoded.dropped_rows, warnings, encoded.kinds, encoded.kind_reasons,
                   encoded.values, missing in KEEPS_GAPS)


def encode_frame(
    frame: pandas.DataFrame,
    *,
    path: str = "<frame>",
    sha256: str = "",
    declared_states: Mapping[str, Sequence[str]] | None = None,
    max_states: int = 64,
    missing: str = "error",
    declared_kinds: Mapping[str, str] | None = None,
    missing_values: Sequence[str] | None = None,
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
    columns = [_factorise(frame.iloc[:, j].to_numpy(dtype=object))
               for j in range(frame.shape[1])]
    encoded = _encode_columns(
        names, columns, file=path, locate=lambda rows: rows + 1, unit="row",
        declared=declared_states, max_states=max_states, missing=missing,
        key_prefix="dataset", kinds=declared_kinds, missing_values=missing_values)
    problems.extend(encoded.problems)
    if any(p.severity == "error" for p in problems):
        raise InputError(problems)
    return Dataset(path, sha256, tuple(names), encoded.states, encoded.codes,
                   encoded.dropped_rows, encoded.warnings, encoded.kinds, encoded.kind_reasons,
                   encoded.values, missing in KEEPS_GAPS)


# --------------------------------------------------------------------------- reading the file


def _check_policy(missing: str) -> None:
    if missing not in MISSING_POLICIES:
        raise ValueError(f"missing must be one of {', '.join(MISSING_POLICIES)}, not {missing!r}")


def _read_table(target: Path, file: str, key_prefix: str, problems: list[Problem],
                expected_sha256: str | None, selection: _Selection) -> tuple[str, _Table]:
    """The file's sha256 and its table, read in two streaming passes over one open file:
    the bytes (hash, UTF-8, NUL bytes, emptiness, where the text ends), then the CSV."""
    key = f"{key_prefix}.path"
    handle = _open_regular(target, file, key)
    try:
        with handle:
            before = os.fstat(handle.fileno())
            scan = _scan(handle)
            problems.extend(_pin_problems(scan.sha256, expected_sha256, file, key_prefix))
            _check_text(scan, file, problems)
            table = _parse_body(handle, scan, file, problems, selection)
            after = os.fstat(handle.fileno())
    except PermissionError:
        raise InputError(Problem(file, "cannot be read: permission denied", key=key)) from None
    except OSError as exc:
        reason = exc.strerror or str(exc)
        raise InputError(Problem(file, f"cannot be read: {reason}", key=key)) from None
    if (before.st_size, before.st_mtime_ns) != (after.st_size, after.st_mtime_ns):
        raise InputError(Problem(file, "changed while it was being read; read it again once "
                                 "it is complete", key=key))
    return scan.sha256, table


def _pin_problems(sha256: str, expected: str | None, file: str,
                  key_prefix: str) -> list[Problem]:
    """A problem when the file's sha256 is not the pinned one."""
    if expected is None or expected.strip().lower() == sha256:
        return []
    return [Problem(file, f"the file's sha256 is {sha256}, but {expected} is pinned; the data "
                    f"has changed (update {key_prefix}.sha256 if the new file is intended)",
                    key=f"{key_prefix}.sha256")]


# --------------------------------------------------------------------------- Parquet


def is_parquet(path: str | Path) -> bool:
    """Whether a data path is read as Parquet: its name ends in ``.parquet`` or ``.pq``
    (any case); every other file is read as CSV."""
    return Path(path).suffix.lower() in PARQUET_SUFFIXES


#: Characters that make a data path that names no file a glob of Parquet partitions.
GLOB_CHARACTERS = frozenset("*?[")


def is_glob(path: str | Path) -> bool:
    """Whether a data path is a glob of Parquet partitions: it names no existing file or
    folder and has ``*``, ``?`` or ``[`` in it."""
    return bool(GLOB_CHARACTERS & set(str(path))) and not Path(path).exists()


def is_partitioned(path: str | Path) -> bool:
    """Whether a data path names Parquet partitions: a folder, or a glob."""
    return Path(path).is_dir() or is_glob(path)


def parquet_parts(path: Path, file: str, key_prefix: str = "dataset") -> list[Path] | None:
    """The partitions of a data path that is a folder: its ``.parquet``/``.pq`` files
    (not those of subfolders), sorted by name; or a glob (:func:`is_glob`): the
    ``.parquet``/``.pq`` files it matches, sorted by name (then by path); None when
    ``path`` is neither. A folder or glob without one is bad input."""
    if is_glob(path):
        matches = sorted((Path(m) for m in glob.glob(str(path))
                          if is_parquet(m) and Path(m).is_file()),
                         key=lambda p: (p.name, str(p)))
        if not matches:
            raise InputError(Problem(file, "is a glob that matches no .parquet or .pq file",
                                     key=f"{key_prefix}.path"))
        return matches
    if not path.is_dir():
        return None
    parts = sorted((p for p in path.iterdir() if is_parquet(p) and not p.name.startswith(".")),
                   key=lambda p: p.name)
    if not parts:
        raise InputError(Problem(file, "is a folder, not a CSV file, and holds no .parquet or "
                                 ".pq file (a data folder holds the Parquet partitions of "
                                 "one table)",
                                 key=f"{key_prefix}.path"))
    return parts


def partitions_sha256(hashes: Sequence[str]) -> str:
    """The sha256 of a partitioned table: of its partitions' sha256 hex digests, sorted,
    each followed by a line end (so it depends on the partitions' bytes, not on their
    names or order)."""
    return hashlib.sha256("".join(f"{h}\n" for h in sorted(hashes)).encode()).hexdigest()


def _read_parquet_parts(parts: Sequence[Path], file: str, key_prefix: str,
                        problems: list[Problem], expected_sha256: str | None,
                        selection: _Selection) -> tuple[str, _Table]:
    """The partitions of a folder read one after another (:func:`_read_parquet`) as one
    table, rows in the order of the sorted file names; its sha256 is
    :func:`partitions_sha256`. Every partition must have the first one's columns."""
    hashes: list[str] = []
    header: list[str] | None = None
    selected: list[int] = []
    pieces: list[list[_Factorised]] = []
    rows = 0
    for part in parts:
        sha, table = _read_parquet(part, f"{file}/{part.name}", key_prefix, problems, None,
                                   selection)
        if header is None:
            header, selected = table.header, table.selected
        elif table.header != header:
            problems.append(Problem(f"{file}/{part.name}", "has other columns than "
                                    f"{parts[0].name} ({', '.join(table.header)} against "
                                    f"{', '.join(header)}); every partition must have the same "
                                    "columns in the same order", key=f"{key_prefix}.path"))
            raise InputError(problems)
        hashes.append(sha)
        pieces.append(table.columns)
        rows += table.data_rows
    assert header is not None
    sha = partitions_sha256(hashes)
    problems.extend(_pin_problems(sha, expected_sha256, file, key_prefix))
    columns = [_joined_columns([piece[j] for piece in pieces]) for j in range(len(selected))]
    return sha, _Table(header, columns, rows, lambda positions: positions + 1, selected)


def _joined_columns(pieces: Sequence[_Factorised]) -> _Factorised:
    """One column of several partitions: the distinct values in order of first
    appearance and every row's position among them; a category order kept when every
    partition has the same one."""
    index: dict[Any, int] = {}
    uniques: list[Any] = []
    codes = []
    for piece in pieces:
        lookup = np.empty(len(piece.uniques), dtype=np.intp)
        for i, value in enumerate(piece.uniques):
            at = index.get(value)
            if at is None:
                at = index[value] = len(uniques)
                uniques.append(value)
            lookup[i] = at
        codes.append(lookup[np.asarray(piece.raw_codes, dtype=np.intp)])
    raw = np.concatenate(codes) if codes else np.zeros(0, dtype=np.intp)
    orders = {piece.order for piece in pieces}
    return _Factorised(raw.astype(np.uint16 if len(uniques) <= 1 << 16 else np.intp),
                       uniques, orders.pop() if len(orders) == 1 else None)


def _pyarrow(file: str, key: str) -> tuple[Any, Any]:
    """``pyarrow`` and ``pyarrow.parquet`` (the optional extra), or bad input saying how
    to install them."""
    try:
        arrow = importlib.import_module("pyarrow")
        parquet = importlib.import_module("pyarrow.parquet")
    except ImportError:
        raise InputError(Problem(
            file, "is a Parquet file, and reading Parquet needs pyarrow, which is not "
            "installed: pip install 'dagmill[parquet]'", key=key)) from None
    return arrow, parquet


def _read_parquet(target: Path, file: str, key_prefix: str, problems: list[Problem],
                  expected_sha256: str | None, selection: _Selection) -> tuple[str, _Table]:
    """The file's sha256 (of its bytes) and its selected columns, read with pyarrow one
    column at a time (memory: one Arrow column besides the codes)."""
    key = f"{key_prefix}.path"
    arrow, parquet = _pyarrow(file, key)
    handle = _open_regular(target, file, key)
    with handle:
        try:
            digest = hashlib.sha256()
            while chunk := _read_full(handle, READ_BLOCK):
                digest.update(chunk)
            sha = digest.hexdigest()
            problems.extend(_pin_problems(sha, expected_sha256, file, key_prefix))
            handle.seek(0)
            reader = parquet.ParquetFile(handle)
            header = [str(n) for n in reader.schema_arrow.names]
            rows = int(reader.metadata.num_rows)
        except (arrow.ArrowException, OSError, ValueError) as exc:
            problems.append(Problem(file, f"is not a Parquet file that can be read ("
                                    f"{str(exc).strip() or type(exc).__name__})", key=key))
            raise InputError(problems) from None
        selected, unknown = selection.positions(header, file, line=None)
        if unknown:
            problems.extend(unknown)
            raise InputError(problems)
        columns: list[_Factorised] = []
        for j in selected:
            try:
                chunked = reader.read(columns=[header[j]]).column(0)
            except (arrow.ArrowException, OSError, ValueError) as exc:
                problems.append(Problem(file, f"column {header[j]!r} could not be read ("
                                        f"{str(exc).strip()})", key=header[j]))
                continue
            column = _arrow_column(arrow, chunked, header[j], file, problems)
            if column is not None:
                columns.append(column)
    if any(p.severity == "error" for p in problems):
        raise InputError(problems)
    return sha, _Table(header, columns, rows, lambda positions: positions + 1, selected)


def _arrow_column(arrow: Any, chunked: Any, name: str, file: str,
                  problems: list[Problem]) -> _Factorised | None:
    """One Arrow column as its distinct values (as text, the way CSV spells them) and
    each row's position among them; nulls (and a float NaN) are missing. A dictionary
    (categorical) column keeps its category order. Nested and binary types are refused."""
    types = arrow.types
    kind = chunked.type
    if types.is_dictionary(kind):
        categorical = chunked.to_pandas().array
        order = [_arrow_text(c) for c in categorical.categories]
        raw = np.asarray(categorical.codes, dtype=np.intp)
        uniques: list[Any] = list(order)
        if (raw < 0).any():
            raw = np.where(raw < 0, len(uniques), raw)
            uniques.append(None)
        stripped = tuple(str(c).strip() for c in order)
        unique_order = len(set(stripped)) == len(stripped) and None not in order
        return _Factorised(raw, uniques, stripped if unique_order else None)
    if (types.is_nested(kind) or types.is_binary(kind) or types.is_large_binary(kind)
            or types.is_fixed_size_binary(kind)):
        problems.append(Problem(file, f"column {name!r} has Arrow type {kind}, which dagmill "
                                "cannot read as states or numbers", key=name))
        return None
    compute = importlib.import_module("pyarrow.compute")
    distinct = compute.unique(chunked).drop_null()
    positions = compute.index_in(chunked, value_set=distinct)
    raw = np.asarray(positions.fill_null(len(distinct)).to_numpy(), dtype=np.intp)
    uniques = [_arrow_text(v) for v in distinct.to_pylist()] + [None]
    return _Factorised(raw, uniques)


def _arrow_text(value: Any) -> str | None:
    """A Parquet value as CSV text: ``str`` (``3``, ``0.1``, ``True``), None for a float
    NaN."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return None
    return value if isinstance(value, str) else str(value)


def _open_regular(target: Path, file: str, key: str) -> BinaryIO:
    """The file opened for reading, once ``os.stat`` shows a regular file: a folder, a
    device or a FIFO is refused before it is opened (opening a FIFO would wait for a
    writer; a device can be endless). The open itself does not block either, and the
    open file is checked again."""
    try:
        kind = special_file_kind(os.stat(target).st_mode)
        if kind is None:
            nonblocking = getattr(os, "O_NONBLOCK", 0)
            fd = os.open(target, os.O_RDONLY | nonblocking)
            kind = special_file_kind(os.fstat(fd).st_mode)
            if kind is None:
                if nonblocking:
                    os.set_blocking(fd, True)
                return os.fdopen(fd, "rb", buffering=0)
            os.close(fd)
    except FileNotFoundError:
        raise InputError(Problem(file, f"file not found (looked for {target.absolute()})",
                                 key=key)) from None
    except PermissionError:
        raise InputError(Problem(file, "cannot be read: permission denied", key=key)) from None
    except OSError as exc:
        reason = exc.strerror or str(exc)
        raise InputError(Problem(file, f"cannot be read: {reason}", key=key)) from None
    if kind == "a folder":
        raise InputError(Problem(file, "is a folder, not a CSV file", key=key))
    raise InputError(Problem(file, f"is {kind}, not a CSV file; the data must be a regular "
                             "file", key=key))


def _read_full(handle: BinaryIO, size: int) -> bytes:
    """Up to ``size`` bytes (fewer only at the end of the file)."""
    parts, wanted = [], size
    while wanted > 0:
        part = handle.read(wanted)
        if not part:
            break
        parts.append(part)
        wanted -= len(part)
    return parts[0] if len(parts) == 1 else b"".join(parts)


@dataclass
class _Scan:
    """What the first pass over the bytes found."""

    sha256: str
    start: int  # where the text starts (after a byte-order mark)
    end: int  # after its last byte that is not CR, LF, space or tab
    has_text: bool  # a byte after the mark that is not ASCII whitespace
    simple: bool  # no quote and no CR without LF in the text: lines are records
    head: bytes  # the first two bytes
    bad_utf8: tuple[int, int] | None = None  # (line, byte) of the first undecodable byte
    nul_line: int | None = None


def _scan(handle: BinaryIO) -> _Scan:
    """One pass over the bytes in blocks: sha256, UTF-8 validity, the first NUL byte,
    the first quote and the first CR not followed by LF, where the text ends. The hash
    of a block is taken in a second thread (hashlib lets go of the GIL) while the block
    is searched, one block at a time and in order."""
    with ThreadPoolExecutor(max_workers=1) as hasher:
        return _scan_blocks(handle, hasher)


def _scan_blocks(handle: BinaryIO, hasher: ThreadPoolExecutor) -> _Scan:
    digest = hashlib.sha256()
    hashing: Future[None] | None = None
    decoder = codecs.getincrementaldecoder("utf-8")()
    offset = start = 0
    head = b""
    bad_utf8: tuple[int, int] | None = None  # (offset, byte) until the end, then (line, byte)
    nul_at = -1
    first_quote = first_bare_cr = -1
    last_text = -1
    has_text = pending_cr = False
    while block := _read_full(handle, READ_BLOCK):
        if hashing is not None:
            hashing.result()
        hashing = hasher.submit(digest.update, block)
        text = block
        if offset == 0:
            head = block[:2]
            start = len(BOM) if block.startswith(BOM) else 0
            text = block[start:]
        if bad_utf8 is None:
            pending = decoder.getstate()[0]
            if pending or not block.isascii():
                try:
                    decoder.decode(block)
                except UnicodeDecodeError as exc:
                    bad_utf8 = (offset - len(pending) + exc.start, exc.object[exc.start])
        if nul_at < 0 and (i := block.find(b"\x00")) >= 0:
            nul_at = offset + i
        if first_quote < 0 and (i := block.find(b'"')) >= 0:
            first_quote = offset + i
        if first_bare_cr < 0:
            if pending_cr and not block.startswith(b"\n"):
                first_bare_cr = offset - 1
            elif b"\r" in block and (block.count(b"\r") - block.count(b"\r\n")
                                     - block.endswith(b"\r")) > 0:
                i = block.find(b"\r")
                while block[i + 1] == 0x0A:
                    i = block.find(b"\r", i + 1)
                first_bare_cr = offset + i
        pending_cr = block.endswith(b"\r")
        if not has_text and text.strip():
            has_text = True
        kept = len(block.rstrip(b"\r\n \t")) if block[-1] in b"\r\n \t" else len(block)
        if kept > 0:
            last_text = offset + kept - 1
        offset += len(block)
    if hashing is not None:
        hashing.result()
    if bad_utf8 is None:
        pending = decoder.getstate()[0]
        try:
            decoder.decode(b"", final=True)
        except UnicodeDecodeError as exc:
            bad_utf8 = (offset - len(pending) + exc.start, exc.object[exc.start])
    if bad_utf8 is not None:
        bad_utf8 = (_line_at(handle, bad_utf8[0]), bad_utf8[1])
    nul_line = _line_at(handle, nul_at) if nul_at >= 0 and bad_utf8 is None else None
    end = last_text + 1
    simple = not (0 <= first_quote < end) and not (0 <= first_bare_cr < end)
    return _Scan(digest.hexdigest(), start, max(end, start), has_text, simple, head,
                 bad_utf8, nul_line)


def _line_at(handle: BinaryIO, offset: int) -> int:
    """The line (from 1) of the byte at ``offset``: line ends counted from the start."""
    handle.seek(0)
    lines = 1
    while offset > 0 and (block := _read_full(handle, min(READ_BLOCK, offset))):
        lines += block.count(b"\n")
        offset -= len(block)
    return lines


def _check_text(scan: _Scan, file: str, problems: list[Problem]) -> None:
    """Stop unless the bytes are UTF-8 text without NUL bytes that is not empty."""
    if scan.bad_utf8 is not None:
        line, byte = scan.bad_utf8
        hint = "; it looks like UTF-16" if scan.head in (b"\xff\xfe", b"\xfe\xff") else ""
        problems.append(Problem(
            file, f"is not UTF-8 text: byte 0x{byte:02X} on line {line} cannot be "
            f"decoded{hint}; save the file as UTF-8", line=line))
        raise InputError(problems)
    if scan.nul_line is not None:
        problems.append(Problem(file, "contains NUL bytes: it looks like a binary file, not "
                                "CSV text", line=scan.nul_line))
        raise InputError(problems)
    if not scan.has_text:
        problems.append(Problem(file, "is empty: there is no header and no data"))
        raise InputError(problems)


@dataclass
class _Table:
    header: list[str]  # every column of the file
    columns: list[_Factorised]  # the selected ones
    data_rows: int
    locate: Callable[[np.ndarray], np.ndarray]
    selected: list[int]  # positions in ``header`` of the selected columns


@dataclass(frozen=True)
class _Selection:
    """``dataset.use`` or ``dataset.drop`` (at most one is given; both None: every
    column)."""

    use: Sequence[str] | None = None
    drop: Sequence[str] | None = None
    key_prefix: str = "dataset"

    def positions(self, header: Sequence[str], file: str,
                  line: int | None = 1) -> tuple[list[int], list[Problem]]:
        """The positions of the selected columns in ``header`` (file order), and a problem
        for each listed name that is not a column."""
        names = [h.strip() for h in header]
        listed, key = ((self.use, "use") if self.use is not None
                       else (self.drop, "drop") if self.drop is not None else (None, ""))
        if listed is None:
            return list(range(len(names))), []
        problems = []
        for i, name in enumerate(listed):
            if name not in names:
                close = difflib.get_close_matches(name, [n for n in names if n], n=1)
                hint = (f"; did you mean {close[0]!r}?" if close
                        else f"; its columns are {', '.join(names[:12])}"
                        + (", ..." if len(names) > 12 else ""))
                problems.append(Problem(
                    file, f"{self.key_prefix}.{key} names {name!r}, which is not a column "
                    f"of {file}{hint}", line=line, key=f"{self.key_prefix}.{key}.{i}",
                    value=name))
        chosen = set(listed)
        keep = [j for j, n in enumerate(names) if (n in chosen) == (key == "use")]
        if not keep and not problems:
            problems.append(Problem(file, f"{self.key_prefix}.drop leaves no column of {file}",
                                    line=line, key=f"{self.key_prefix}.drop"))
        return keep, problems


def _body_blocks(handle: BinaryIO, scan: _Scan) -> Iterator[bytes]:
    """The text (``start`` to ``end``) in blocks, then the final line end."""
    handle.seek(scan.start)
    remaining = scan.end - scan.start
    while remaining > 0:
        block = _read_full(handle, min(READ_BLOCK, remaining))
        if not block:
            raise OSError(errno.EIO, "the file became shorter while it was being read")
        remaining -= len(block)
        yield block
    yield b"\n"


class _Lines:
    """The text's lines as strings (line ends kept) for the csv module, read block by
    block; the bytes of the lines handed out are kept until :meth:`take`."""

    def __init__(self, blocks: Iterator[bytes]) -> None:
        self._blocks = blocks
        self._buffer = b""
        self._pos = 0
        self.kept: list[bytes] = []
        self.kept_size = 0

    def __iter__(self) -> _Lines:
        return self

    def __next__(self) -> str:
        end = self._buffer.find(b"\n", self._pos)
        while end < 0:
            block = next(self._blocks, None)
            if block is None:
                raise StopIteration
            self._buffer = self._buffer[self._pos:] + block
            self._pos = 0
            end = self._buffer.find(b"\n")
        line = self._buffer[self._pos:end + 1]
        self._pos = end + 1
        self.kept.append(line)
        self.kept_size += len(line)
        return line.decode("utf-8")

    def rest(self) -> bytes:
        """The bytes read but not yet handed out as lines."""
        rest = self._buffer[self._pos:]
        self._buffer, self._pos = b"", 0
        return rest

    def take(self) -> bytes:
        data = b"".join(self.kept)
        self.kept, self.kept_size = [], 0
        return data


class _FieldCounts:
    """Records whose field count differs from the header's: the first few, and how many."""

    def __init__(self, width: int) -> None:
        self.width = width
        self.total = 0
        self.first: list[tuple[int, int]] = []  # (line, fields)

    def add(self, lines: np.ndarray, counts: np.ndarray) -> None:
        self.total += len(lines)
        room = _SHOWN_BAD_LINES + 1 - len(self.first)
        self.first.extend((int(a), int(b)) for a, b in zip(lines[:room], counts[:room],
                                                           strict=True))

    def problems(self, file: str) -> list[Problem]:
        width = self.width
        out = []
        for line, count in self.first[:_SHOWN_BAD_LINES]:
            what = "is blank" if count == 0 else f"has {_plural(count, 'field')}"
            out.append(Problem(
                file, f"line {line} {what}, but the header has {_plural(width, 'field')}",
                line=line))
        if self.total > _SHOWN_BAD_LINES:
            more = self.total - _SHOWN_BAD_LINES
            out.append(Problem(
                file, f"and {more:,} more {'line' if more == 1 else 'lines'} with a different "
                f"number of fields than the header ({width})", line=self.first[-1][0]))
        return out


def _parse_body(handle: BinaryIO, scan: _Scan, file: str, problems: list[Problem],
                selection: _Selection) -> _Table:
    """The header and the columns, parsed block by block into small-integer codes.

    Every record must have as many fields as the header (a blank line in a one-column
    file is one empty value); lines are records unless a field is quoted, and then the
    csv module finds the records and their first lines. The values of each block of
    whole records are read by pyarrow's CSV reader when the file has no quote and
    pyarrow is installed (the fast path), else by pandas' C parser (the exact path).
    """
    blocks = _body_blocks(handle, scan)
    lines = _Lines(blocks)
    reader = csv.reader(lines, strict=True)
    try:
        header = next(reader)
    except csv.Error as exc:
        problems.append(Problem(file, f"the header (line 1) could not be read as CSV: {exc}",
                                line=1))
        raise InputError(problems) from None
    header_bytes = lines.take()
    width = len(header)
    if width == 0 or (width == 1 and not header[0].strip()):
        problems.append(Problem(file, "the header (line 1) is blank; the first line must name "
                                "the columns", line=1))
        raise InputError(problems)
    selected, unknown = selection.positions(header, file)
    if unknown:
        problems.extend(unknown)
        raise InputError(problems)
    parser = _BlockParser(header_bytes, width, scan.end - scan.start, selected)
    if scan.simple:
        rows, locate = _simple_records(lines, blocks, parser)
    else:
        rows, locate = _quoted_records(lines, reader, header_bytes, parser, file, problems)
    problems.extend(parser.counts.problems(file))
    if parser.counts.total:
        raise InputError(problems)
    if parser.failure is not None:
        problems.append(Problem(file, f"could not be read as CSV: {parser.failure}"))
        raise InputError(problems)
    if parser.rows != rows:
        problems.append(Problem(file, f"could not be read as CSV consistently: found {rows:,}"
                                f" records, but the CSV reader read {parser.rows:,} rows"))
        raise InputError(problems)
    return _Table(header, parser.columns() if rows else [], rows, locate, selected)


def _simple_records(lines: _Lines, blocks: Iterator[bytes],
                    parser: _BlockParser) -> tuple[int, Callable[[np.ndarray], np.ndarray]]:
    """Lines are records: each block of whole lines is parsed and its field counts
    checked (exactly, by the commas on each line, when the quick check fails)."""
    carry = lines.rest()
    line = 2
    with ThreadPoolExecutor(max_workers=1) as helper:
        for block in blocks:
            data = carry + block
            cut = data.rfind(b"\n") + 1
            if cut == 0:
                carry = data
                continue
            part, carry = data[:cut], data[cut:]
            line += parser.simple_block(part, line, helper)
    return line - 2, lambda rows: rows + 2


def _quoted_records(lines: _Lines, reader: Any, header_bytes: bytes, parser: _BlockParser,
                    file: str, problems: list[Problem]
                    ) -> tuple[int, Callable[[np.ndarray], np.ndarray]]:
    """Records found by the csv module (a quoted field may span lines), with their
    first lines; a block of whole records goes to the parser once it is large enough."""
    previous = reader.line_num
    rows = 0
    block_rows = 0
    break_rows: list[int] = [0]
    break_extra: list[int] = [previous - 1]
    extra = previous - 1
    bad_lines: list[int] = []
    bad_counts: list[int] = []
    try:
        for record in reader:
            first = previous + 1
            count = len(record)
            if count != parser.width and not (parser.width == 1 and count == 0):
                bad_lines.append(first)
                bad_counts.append(count)
            previous = reader.line_num
            rows += 1
            block_rows += 1
            if previous > first:
                extra += previous - first
                break_rows.append(rows)
                break_extra.append(extra)
            if lines.kept_size >= READ_BLOCK:
                parser.counts.add(np.array(bad_lines, dtype=np.int64),
                                  np.array(bad_counts, dtype=np.int64))
                bad_lines, bad_counts = [], []
                parser.quoted_block(lines.take(), block_rows)
                block_rows = 0
    except csv.Error as exc:
        line = previous + 1
        problems.append(Problem(file, f"could not be read as CSV from line {line} on: {exc}",
                                line=line))
        raise InputError(problems) from None
    parser.counts.add(np.array(bad_lines, dtype=np.int64), np.array(bad_counts, dtype=np.int64))
    if block_rows:
        parser.quoted_block(lines.take(), block_rows)
    starts = np.array(break_rows, dtype=np.int64)
    extras = np.array(break_extra, dtype=np.int64)

    def locate(positions: np.ndarray) -> np.ndarray:
        where = np.searchsorted(starts, positions, side="right") - 1
        return np.asarray(positions) + 2 + extras[where]

    return rows, locate


class _BlockParser:
    """Blocks of whole records -> per-column codes of the distinct raw values.

    Each column keeps a dictionary from raw value to code (in order of first sight) and
    one array of its rows' codes, in the narrowest unsigned type; pyarrow parses a
    quote-free block's values (as dictionary arrays), or else pandas (as categories, or
    as text where pandas would read the categories as numbers or booleans). Once a
    record is found with a wrong field count, or pandas fails, no value is parsed any
    more; the field counts are still checked to the end.
    """

    def __init__(self, header_bytes: bytes, width: int, text_bytes: int,
                 selected: Sequence[int] | None = None) -> None:
        self.header = header_bytes
        self.width = width
        #: the columns parsed and stored (positions in the header, in file order)
        self.selected = list(range(width)) if selected is None else list(selected)
        self.text_bytes = max(1, text_bytes)  # to size the code arrays from the first blocks
        self.parsed_bytes = 0
        self.filled = 0  # rows whose codes are stored
        self.counts = _FieldCounts(width)
        self.failure: str | None = None
        self.rows = 0  # rows pandas read
        self.lookups: list[dict[str, int]] = [{} for _ in range(width)]
        self.stores: list[np.ndarray | None] = [None] * width
        self.as_text = [False] * width  # indexed by header position; used at ``selected``
        self.encoding = True  # False once pandas and the record count disagree
        self.arrow = _arrow_csv()  # the fast parser of quote-free blocks (None: pandas only)

    @property
    def parsing(self) -> bool:
        """Whether blocks are still parsed (no wrong field count, no parser failure)."""
        return self.counts.total == 0 and self.failure is None

    def simple_block(self, part: bytes, first_line: int, helper: ThreadPoolExecutor) -> int:
        """Lines ``first_line`` on (no quotes; returns how many).

        pyarrow (when installed) reads the block first: it refuses a line whose field
        count is not the header's, so a table with one row per line is the block, read
        and checked. Otherwise (or without pyarrow) the exact path: the quick check that
        every line has the header's width (in ``helper``, while pandas parses the block),
        else every line's fields counted, so every message is the one it always was."""
        frame = None
        if self.parsing:
            fast = self._arrow_table(part)
            if fast is not None and fast.num_rows == part.count(b"\n"):
                self.rows += fast.num_rows
                if self.encoding:
                    self._encode_arrow(fast, part)
                return int(fast.num_rows)
            check = helper.submit(_all_lines_have_width, part, self.width)
            frame = self._frame(part)
            count, good = check.result()
            if good and frame is not None and len(frame) == count:
                self.rows += count
                if self.encoding:
                    self._encode(frame, part)
                return count
        fields = _fields_per_line(part)
        if self.width == 1:
            fields = np.where(fields == 0, 1, fields)
        bad = np.flatnonzero(fields != self.width)
        self.counts.add(bad + first_line, fields[bad])
        if frame is not None and not bad.size:  # the counts are right, pandas read otherwise
            self.rows += len(frame)
            self.encoding = False
        return len(fields)

    def quoted_block(self, part: bytes, records: int) -> None:
        """Whole records (their field counts already checked) of a file with quotes."""
        if not self.parsing:
            return
        frame = self._frame(part)
        if frame is None:
            return
        self.rows += len(frame)
        if len(frame) != records:
            self.encoding = False
        if self.encoding:
            self._encode(frame, part)

    def _frame(self, part: bytes, columns: list[int] | None = None) -> pandas.DataFrame | None:
        """The block's values: categories, or text for ``columns`` (None, with
        :attr:`failure` set, when pandas cannot read it)."""
        dtype: Any = object if columns is not None else {
            j: object if self.as_text[j] else "category" for j in self.selected}
        try:
            with warnings.catch_warnings():  # a block may be parsed before its counts fail
                warnings.simplefilter("ignore", pandas.errors.ParserWarning)
                return pandas.read_csv(
                    io.BytesIO(self.header + part), encoding="utf-8", header=0,
                    names=list(range(self.width)),
                    usecols=self.selected if columns is None else columns, dtype=dtype,
                    keep_default_na=False, na_filter=False, skip_blank_lines=False,
                    index_col=False, engine="c")
        except (pandas.errors.ParserError, ValueError) as exc:
            self.failure = str(exc).split("C error: ")[-1].strip()
            return None

    def _arrow_table(self, part: bytes) -> Any | None:
        """A quote-free block's selected columns parsed by pyarrow as dictionary arrays
        (None when pyarrow is missing or cannot read it, e.g. a line with another number
        of fields than the header, or reads a null: the exact path then decides).

        Each line is one record split at every comma, the same values pandas reads: no
        quote character, no value turned into a null or a number. A blank line is
        skipped (pyarrow would otherwise make it a record of empty values, whatever the
        width), so the table then has fewer rows than the block has lines. The header
        line goes first and is skipped, so that a byte-order mark opening a value is
        kept as pandas keeps it (pyarrow drops one only at the very start of its
        input)."""
        if self.arrow is None:
            return None
        arrow, reader = self.arrow
        text = arrow.dictionary(arrow.int32(), arrow.string())
        try:
            table = reader.read_csv(
                arrow.py_buffer(self.header + part),
                read_options=reader.ReadOptions(
                    column_names=[str(j) for j in range(self.width)], skip_rows=1,
                    block_size=max(ARROW_CHUNK, len(part) // 2 + 1)),
                parse_options=reader.ParseOptions(
                    delimiter=",", quote_char=False, escape_char=False,
                    newlines_in_values=False, ignore_empty_lines=True),
                convert_options=reader.ConvertOptions(
                    include_columns=[str(j) for j in self.selected],
                    column_types={str(j): text for j in self.selected},
                    strings_can_be_null=False, quoted_strings_can_be_null=False),
                memory_pool=arrow.system_memory_pool())
        except (arrow.ArrowException, ValueError, OSError):
            return None
        if any(column.null_count for column in table.columns):
            return None
        return table

    def _encode_arrow(self, table: Any, part: bytes) -> None:
        """Add the codes of a block parsed by pyarrow (one dictionary array per column and
        per pyarrow chunk: each chunk's values are mapped through the column's lookup)."""
        self.parsed_bytes += len(part)
        start = self.filled
        for j in self.selected:
            lookup = self.lookups[j]
            chunks = [(chunk.indices.to_numpy(zero_copy_only=False),
                       np.fromiter((lookup.setdefault(label, len(lookup))
                                    for label in chunk.dictionary.to_pylist()),
                                   dtype=np.int64, count=len(chunk.dictionary)))
                      for chunk in table.column(str(j)).chunks]
            narrow = _narrowest(len(lookup))
            at = start
            for indices, lut in chunks:
                self._store(j, lut.astype(narrow)[indices], at)
                at += len(indices)
        self.filled = start + table.num_rows

    def _encode(self, frame: pandas.DataFrame, part: bytes) -> None:
        """Add a block's codes. A column whose categories pandas turned into numbers or
        booleans ("01" and "1" would both be 1) is read again as text, and as text in
        every later block."""
        retry = [j for j in self.selected if not self.as_text[j]
                 and pandas.api.types.infer_dtype(frame[j].cat.categories,
                                                  skipna=False) != "string"]
        again = self._frame(part, retry) if retry else None
        if retry and again is None:
            return
        self.parsed_bytes += len(part)
        start = self.filled
        for j in self.selected:
            codes: np.ndarray
            if j in retry or self.as_text[j]:
                source = again[j] if again is not None and j in retry else frame[j]
                codes, uniques = pandas.factorize(source.to_numpy(dtype=object))
                labels = list(uniques)
            else:
                column = frame[j]
                codes = column.cat.codes.to_numpy()
                labels = column.cat.categories.tolist()
            lookup = self.lookups[j]
            lut = np.fromiter((lookup.setdefault(label, len(lookup)) for label in labels),
                              dtype=np.int64, count=len(labels))
            self._store(j, lut.astype(_narrowest(len(lookup)))[codes], start)
        self.filled = start + len(frame)
        for j in retry:
            self.as_text[j] = True

    def _store(self, j: int, codes: np.ndarray, start: int) -> None:
        """Put a block's codes of column ``j`` at row ``start``. Each column's codes live
        in one array in anonymous memory, sized from the share of the text read so far
        (pages never written cost nothing) and grown, or widened, by copying."""
        store, need = self.stores[j], start + len(codes)
        if store is None or len(store) < need or store.dtype.itemsize < codes.dtype.itemsize:
            estimate = int(need * self.text_bytes / max(1, self.parsed_bytes) * 1.1) + 1024
            size = max(need, estimate, 2 * len(store) if store is not None else 0)
            dtype = codes.dtype if store is None or codes.dtype.itemsize > store.dtype.itemsize \
                else store.dtype
            grown = _anonymous_array(size, dtype)
            if store is not None:
                grown[:start] = store[:start]
            self.stores[j] = store = grown
        store[start:need] = codes

    def columns(self) -> list[_Factorised]:
        """Each selected column's codes (one array) and its distinct raw values."""
        out = []
        for j in self.selected:
            store, self.stores[j] = self.stores[j], None
            raw = store[:self.filled] if store is not None else np.zeros(0, np.uint8)
            out.append(_Factorised(raw, list(self.lookups[j])))
            self.lookups[j] = {}
        return out


def _arrow_csv() -> tuple[Any, Any] | None:
    """``pyarrow`` and ``pyarrow.csv`` when pyarrow is installed (the ``parquet`` extra;
    pandas imports it already), else None: quote-free blocks are then parsed by pandas
    alone. Both parsers give the same values (``tests/test_loading.py`` holds them to it)."""
    try:
        return importlib.import_module("pyarrow"), importlib.import_module("pyarrow.csv")
    except ImportError:
        return None


def _anonymous_array(size: int, dtype: Any) -> np.ndarray:
    """A writable array of ``size`` items in its own anonymous memory map: its pages are
    taken when first written and given back to the system when it is freed."""
    itemsize = np.dtype(dtype).itemsize
    return np.frombuffer(mmap.mmap(-1, max(1, size * itemsize)), dtype=dtype, count=size)


def _narrowest(distinct: int) -> type[np.unsignedinteger[Any]]:
    if distinct <= 1 << 8:
        return np.uint8
    if distinct <= 1 << 16:
        return np.uint16
    return np.uint32


def _all_lines_have_width(part: bytes, width: int) -> tuple[int, bool]:
    """The number of lines in ``part`` (whole lines, no quotes) and whether each has
    ``width`` fields (a blank line counts as one in a one-column file): the commas,
    taken ``width - 1`` at a time, must each fall between their line's ends."""
    buf = np.frombuffer(part, dtype=np.uint8)
    ends = np.flatnonzero(buf == 0x0A)
    count = int(ends.size)
    commas = np.flatnonzero(buf == 0x2C)
    if width == 1 or commas.size != (width - 1) * count:
        return count, commas.size == 0 and width == 1
    groups = commas.reshape(count, width - 1)
    return count, bool((groups[1:, 0] > ends[:-1]).all() and (groups[:, -1] < ends).all())


def _fields_per_line(part: bytes) -> np.ndarray:
    """Fields on each line of ``part`` (whole lines, no quotes): commas + 1, and 0 for a
    blank line (empty, or a lone CR)."""
    buf = np.frombuffer(part, dtype=np.uint8)
    marks = np.flatnonzero((buf == 0x2C) | (buf == 0x0A))
    ends_at = np.flatnonzero(buf[marks] == 0x0A)
    fields = np.diff(ends_at, prepend=-1).astype(np.int64)
    ends = marks[ends_at]
    begins = np.concatenate(([0], ends[:-1] + 1))
    length = ends - begins
    has_cr = np.zeros(len(ends), dtype=bool)
    nonempty = length > 0
    has_cr[nonempty] = buf[ends[nonempty] - 1] == 0x0D
    fields[(length - has_cr) == 0] = 0
    return fields


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
class _Factorised:
    """One column's distinct raw values (None: missing in a frame) and, per row, the
    position of its value among them (an unsigned or intp array)."""

    raw_codes: np.ndarray
    uniques: list[Any]
    order: tuple[str, ...] | None = None  # the file's own state order (Arrow dictionary)


@dataclass
class _Column:
    """One column factorised on its raw values: ``labels[raw_codes[r]]`` is row r's label."""

    raw_codes: np.ndarray  # one per row: intp, or the narrowest unsigned type
    labels: list[str | None]  # stripped label per raw unique; None = missing
    declared: tuple[str, ...] | None
    categorical: bool = False  # ``declared`` is the file's category order


def _factorise(values: np.ndarray) -> _Factorised:
    """Factorise an in-memory column (None and NaN become one missing value)."""
    raw_codes, uniques = pandas.factorize(values, use_na_sentinel=True)
    labels: list[Any] = list(uniques)
    raw_codes = np.asarray(raw_codes, dtype=np.intp)
    if (raw_codes < 0).any():  # None or NaN in an in-memory frame
        raw_codes = np.where(raw_codes < 0, len(labels), raw_codes)
        labels.append(None)
    return _Factorised(raw_codes, labels)


def _labelled(column: _Factorised, declared: tuple[str, ...] | None,
              missing_values: Sequence[str] = MISSING_SPELLINGS,
              categorical: bool = False) -> _Column:
    """Strip the (few) distinct raw values and mark the missing ones (``missing_values``,
    a declared state aside; a missing value of a frame is always missing)."""
    spellings = set(missing_values) - set(declared or ())
    labels: list[str | None] = []
    for unique in column.uniques:
        label = None if unique is None else str(unique).strip()
        labels.append(None if label is None or label in spellings else label)
    return _Column(column.raw_codes, labels, declared, categorical)


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
    rows: int
    raw: np.ndarray | None = None  # per row, an index into ``lut`` (None: all codes 0)
    lut: np.ndarray | None = None  # the state code of each raw label
    numbers: np.ndarray | None = None


# A label's code before it is checked: missing, or not among the declared states.
_MISSING_CODE, _UNDECLARED_CODE = -1, -2


def _encode_columns(
    names: Sequence[str],
    columns: list[_Factorised],
    *,
    file: str,
    locate: Callable[[np.ndarray], np.ndarray],
    unit: str,
    declared: Mapping[str, Sequence[str]] | None,
    max_states: int,
    missing: str,
    key_prefix: str,
    kinds: Mapping[str, str] | None = None,
    missing_values: Sequence[str] | None = None,
) -> _Encoded:
    """Check and encode the columns: missing values, then each column's kind, states and
    codes; every problem is collected in ``_Encoded.problems``. The columns are
    released one by one as they are encoded (``columns`` is emptied): memory holds the
    raw codes and the code matrix, never a second copy of all of them."""
    report = _Report(file, locate, unit, key_prefix)
    n_rows = len(columns[0].raw_codes) if columns else 0
    spellings = MISSING_SPELLINGS if missing_values is None else tuple(missing_values)
    labelled = _parse_columns(names, columns, declared or {}, spellings, report)
    keep = _rows_to_keep(names, labelled, n_rows, missing, report)
    reserve = missing in KEEPS_GAPS
    parsed: list[_Column | None] = list(labelled)
    del labelled
    dropped = int(n_rows - keep.sum())
    if dropped and not _report_dropped(n_rows, dropped, report):
        return _Encoded((), np.zeros((len(names), 0), np.uint8), dropped, (), report.problems)
    kept_rows = np.flatnonzero(keep) if dropped else None
    encoded = []
    for i, name in enumerate(names):
        col, parsed[i] = parsed[i], None
        assert col is not None
        column = _encode_column(name, col, (kinds or {}).get(name), max_states, kept_rows,
                                report)
        del col
        if column is not None and reserve and column.lut is not None:
            column.lut = np.where(column.lut == _MISSING_CODE, len(column.states), column.lut)
        if column is not None:
            encoded.append(column)
    if report.failed():
        return _Encoded((), np.zeros((len(names), 0), np.uint8), dropped,
                        tuple(report.warnings), report.problems)
    return _assemble(encoded, dropped, report, reserve)


def _parse_columns(names: Sequence[str], columns: list[_Factorised],
                   declared: Mapping[str, Sequence[str]], spellings: Sequence[str],
                   report: _Report) -> list[_Column]:
    """Each column labelled, its declared states (if any) checked (``columns`` is
    emptied)."""
    parsed = []
    for name, values in zip(names, columns, strict=True):
        states = declared.get(name)
        if states is not None:
            states = tuple(states)
            report.problems.extend(_declared_problems(name, states, report.file,
                                                      report.key_prefix))
            parsed.append(_labelled(values, states, spellings))
        else:
            parsed.append(_labelled(values, values.order, spellings,
                                    categorical=values.order is not None))
    columns.clear()
    return parsed


def _rows_to_keep(names: Sequence[str], parsed: Sequence[_Column], n_rows: int,
                  missing: str, report: _Report) -> np.ndarray:
    """The rows to encode (a mask): under ``missing: error`` all of them, with a problem
    per column that has missing values; under ``drop-rows`` the rows without any; under
    ``available-case`` all of them (a warning says how many rows have a gap)."""
    keep = np.ones(n_rows, dtype=bool)
    for name, col in zip(names, parsed, strict=True):
        mask = _missing(col)[col.raw_codes]
        if missing == "error":
            _report_missing(name, mask, report)
        else:
            keep &= ~mask
    if missing in KEEPS_GAPS:
        gaps = int(n_rows - keep.sum())
        how = ("each family is scored on the rows where its columns are present, assuming "
               "values are missing completely at random" if missing == "available-case" else
               "each missing cell is filled with every state, weighted by EM, assuming "
               "values are missing at random")
        if gaps:
            report.warnings.append(Problem(
                report.file, f"{gaps:,} of {n_rows:,} data rows have a missing value; kept "
                f"({report.key_prefix}.missing: {missing}: {how})",
                key=f"{report.key_prefix}.missing", severity="warning"))
        keep = np.ones(n_rows, dtype=bool)
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
    return _EncodedColumn("continuous", reason, (), len(raw), numbers=numbers[raw])


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
    lut = _state_lut(col, states)
    bad_label = lut == _UNDECLARED_CODE
    bad = bad_label[raw] if bad_label.any() else None
    if bad is not None and bad.any():
        report.problems.append(_undeclared_problem(
            name, states, col, raw, bad, report.file, report.locate, kept_rows, report.unit,
            report.key_prefix))
        return None
    return _EncodedColumn("discrete", reason, states, len(raw), raw, lut)


def _discrete_reason(col: _Column, declared_kind: str | None, seen: list[str]) -> str:
    """Why a column is discrete: declared, a file's categorical column, numbers with few
    values, or text."""
    if col.categorical and declared_kind is None:
        return "categorical"
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
            report.file, f"{'categorical' if col.categorical else 'declared'} "
            f"{_plural(len(unseen), 'state', bare=True)} "
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


def _state_lut(col: _Column, states: tuple[str, ...]) -> np.ndarray:
    """Each raw label's index into ``states`` (int64); :data:`_MISSING_CODE` for a missing
    value, :data:`_UNDECLARED_CODE` for a label that is not a state."""
    index = {s: i for i, s in enumerate(states)}
    return np.array([_MISSING_CODE if label is None else index.get(label, _UNDECLARED_CODE)
                     for label in col.labels], dtype=np.int64)


def _assemble(encoded: Sequence[_EncodedColumn], dropped: int, report: _Report,
              reserve: bool = False) -> _Encoded:
    """The code matrix (``uint8``, or ``uint16`` above 256 states; read-only) and, when a
    column is continuous, the values matrix (NaN rows for discrete columns). With
    ``reserve`` (available-case) a column's number of states is a code too (missing)."""
    widest = max(len(c.states) for c in encoded) + (1 if reserve else 0)
    dtype = np.uint8 if widest <= 256 else np.uint16
    matrix = np.empty((len(encoded), encoded[0].rows), dtype=dtype)
    for i, column in enumerate(encoded):
        if column.raw is None or column.lut is None:
            matrix[i] = 0
        else:
            np.take(column.lut.astype(dtype), column.raw, out=matrix[i], mode="clip")
        column.raw = None  # released column by column while the matrix fills
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
