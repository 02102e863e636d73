"""Rows counted where they live: a Parquet folder (or glob) read and encoded on Dask workers.

With a Dask engine (``--engine dask://HOST:PORT`` or ``dask-local``), a data path that is
a folder of Parquet partitions (or a glob of them, :func:`runner.data.parquet_parts`) is
not read into this process. Each partition is one task on the workers, in three passes:

1. *read*: the partition's selected columns as distinct values (the text the one-process
   reader gives them, :func:`runner.data._arrow_column`) and each row's position among
   them, its row count and the sha256 of its bytes; only the distinct values travel back.
2. *tally*: with the global missing values known, each partition's rows without a missing
   cell (``dataset.missing: drop-rows``) and which values occur on them.
3. *encode*: each partition's rows as state codes of the global states, kept on the worker
   (this process holds the futures only; the codes are never gathered).

This process merges the distinct values of the partitions (in the order of their sorted
file names, as :func:`runner.data._joined_columns` joins them) and decides states, column
kinds, warnings and the rows count with the one-process reader's own functions, so the
data set equals the one :func:`runner.data.load_dataset` reads from the folder: same
names, states, kinds, dropped rows, warnings and sha256 (:func:`runner.data.
partitions_sha256`: of the partitions' sha256 digests, sorted, so it depends on the bytes
of the partitions, not on their names or order). When a partition has a problem (a
missing value under ``missing: error``, a value outside the declared states, too many
states...), the folder is read once more by the one-process reader, so that the message
is exactly its message.

The family counts of a batch of families (:class:`RemoteCountScorer`, ``batches``: the
move engine's first fill in slices, then each move's columns) are one task per partition,
submitted together: each returns the occurring family codes and their counts, and this
process sums them (counts add over rows) into the table :func:`runner.scores.counts.
family_counts` gives on the concatenated codes, then scores it with the same function:
the same bits, one round trip per batch. The fitted tables (``model.json``) come from the
same counts (:func:`fit_remote`).

Only discrete data is learned this way; :func:`refusals` names the spec keys that are
not (evaluation, bootstrap, keep-the-row missing policies, candidate screens, Gaussian and
mixed scores, continuous columns).
"""

from __future__ import annotations

import contextlib
import contextvars
import math
import threading
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from types import ModuleType
from typing import TYPE_CHECKING, Any

import numpy as np

from runner import data as reader
from runner import registry
from runner.data import KEEPS_GAPS, MISSING_SPELLINGS, Dataset, partitions_sha256
from runner.errors import EngineFailure, InputError, Problem
from runner.scores.cache import CachedScorer, ColumnRequest, by_request, mask_members
from runner.scores.counts import (
    COMPACT_ABOVE,
    code_dtype,
    configuration_codes,
    counting_kernel,
    dense_limit,
    kernel_choice,
    score_tables,
)
from runner.scores.likelihood import column_form

if TYPE_CHECKING:  # Dask is an optional extra, imported where it is used
    from distributed import Client

    from runner.engines import DaskEngine, EngineChoice
    from runner.fit import DiscreteFamily
    from runner.spec import Spec

#: The words every refusal of this mode ends with.
REFUSED = "not with rows counted on Dask workers"

# --------------------------------------------------------------------------- where rows live


@dataclass
class _Source:
    """The Dask client the partitions are read on: given, or opened at first use from an
    engine choice (and closed with the context)."""

    client: Client | None = None
    choice: EngineChoice | None = None
    engine: DaskEngine | None = None  # the engine opened here (closed with the context)
    once: bool = False  # one data set per command (the engine's specs run elsewhere)
    loaded: int = 0

    def open(self) -> Client:
        if self.client is not None:
            return self.client
        assert self.choice is not None
        from runner.engines import DaskEngine

        self.engine = DaskEngine(self.choice)  # checks the scheduler and its workers
        self.client = self.engine.connected()
        return self.client

    def close(self) -> None:
        if self.engine is not None:
            self.engine.close()
        self.client = self.engine = None


_ACTIVE: contextvars.ContextVar[_Source | None] = contextvars.ContextVar(
    "dagmill_partitioned_rows", default=None)


@contextlib.contextmanager
def rows_on(client: Client) -> Iterator[None]:
    """Within the block, a Parquet folder or glob is read and counted on ``client``'s
    workers (the client is its owner's to close)."""
    token = _ACTIVE.set(_Source(client=client))
    try:
        yield
    finally:
        _ACTIVE.reset(token)


@contextlib.contextmanager
def rows_on_engine(choice: EngineChoice) -> Iterator[None]:
    """Within the block, with a Dask ``choice`` (``dask://`` or ``dask-local``), a Parquet
    folder or glob is read and counted on that cluster's workers; the connection (or the
    local cluster) is opened at the first such data set and closed at the end. With the
    local engine, nothing changes."""
    if choice.kind == "local":
        yield
        return
    source = _Source(choice=choice, once=True)
    token = _ACTIVE.set(source)
    try:
        yield
    finally:
        _ACTIVE.reset(token)
        source.close()


def active_for(path: Path) -> bool:
    """Whether ``path`` is read on Dask workers here: a Dask source is active and the path
    is a folder or glob of Parquet partitions."""
    return _ACTIVE.get() is not None and reader.is_partitioned(path)


# --------------------------------------------------------------------------- refusals


def refusals(spec: Spec, spec_file: str) -> list[Problem]:
    """The spec keys this mode does not learn with, each a problem naming its key (exit 2)."""
    found: list[tuple[str, str]] = []
    kind = registry.score(spec.score.name).data_kind
    if kind != "discrete":
        found.append(("score.name", f"score '{spec.score.name}' works on {kind} columns"))
    if spec.dataset.missing in KEEPS_GAPS:
        found.append(("dataset.missing", f"dataset.missing: {spec.dataset.missing} keeps rows "
                      "with gaps (use error or drop-rows)"))
    if spec.evaluation is not None:
        found.append(("evaluation", "a held-out share splits the rows"))
    if spec.bootstrap is not None:
        found.append(("bootstrap", "bootstrap replicates resample the rows"))
    if spec.search.candidates is not None:
        found.append(("search.candidates", "candidate screens read every pair of columns"))
    if spec.dataset.bins is not None:
        found.append(("dataset.bins", "continuous columns are cut into bins in one process"))
    for name, column in sorted(spec.dataset.columns.items()):
        if column.kind == "continuous" or column.bins is not None:
            found.append((f"dataset.columns.{name}",
                          f"column {name!r} is continuous"))
    return [Problem(spec_file, f"{why}: {REFUSED}; learn it with --engine local",
                    line=spec.line_of(key), key=key) for key, why in found]


# --------------------------------------------------------------------------- the data set


@contextlib.contextmanager
def _lost_work(what: str) -> Iterator[None]:
    """A lost worker, connection or result of the cluster as an :class:`EngineFailure`
    (one line, exit 3, nothing stored)."""
    try:
        yield
    except Exception as exc:
        module = type(exc).__module__ or ""
        if isinstance(exc, OSError | TimeoutError) or module.startswith(
                ("distributed", "concurrent.futures", "asyncio")):
            raise EngineFailure(f"the Dask cluster lost {what} ({type(exc).__name__}: {exc}); "
                                "nothing was stored. Check the workers' logs and memory"
                                ) from None
        raise


@dataclass(frozen=True)
class Partitions:
    """The encoded partitions on the workers: one future per partition (a codes matrix of
    shape variables x rows) and the client that holds them."""

    client: Any
    codes: tuple[Any, ...]
    names: tuple[str, ...]

    def counts(self, arities: np.ndarray,
               families: Sequence[tuple[int, tuple[int, ...]]]) -> list[_Counted]:
        """The summed counts of ``families`` (child, sorted parents) over every partition,
        as one batch of one-family columns (:meth:`column_counts`, one round trip)."""
        return self.column_counts(arities, [(child, parents, [child])
                                            for child, parents in families])

    def column_counts(self, arities: np.ndarray,
                      requests: Sequence[tuple[int, tuple[int, ...], Sequence[int]]]
                      ) -> list[_Counted]:
        """The summed counts of a batch of columns (:func:`count_columns`), one family per
        candidate of each request in order: one task per partition, one round trip."""
        client = self.client
        with _lost_work("the partitions' counts"):
            futures = [client.submit(count_columns, f, arities, list(requests), pure=False)
                       for f in self.codes]
            parts = [p.unpacked() for p in client.gather(futures)]
        families = [(child, base if p == child else tuple(sorted(set(base) ^ {p})))
                    for child, base, candidates in requests for p in candidates]
        return [_merge(arities, child, parents, [p[k] for p in parts])
                for k, (child, parents) in enumerate(families)]


@dataclass(frozen=True, eq=False)
class PartitionedDataset(Dataset):
    """A :class:`~runner.data.Dataset` whose codes stay on Dask workers: ``codes`` is an
    empty (variables x 0) placeholder, ``n_rows`` the rows on the workers, ``partitions``
    their futures. Everything else (names, states, kinds, sha256, warnings, dropped rows)
    is what the one-process reader gives for the same folder."""

    n_rows: int = 0
    partitions: Partitions | None = None

    @property
    def rows(self) -> int:
        return self.n_rows

    def take_rows(self, rows: np.ndarray) -> Dataset:
        raise InputError(Problem(self.path, f"rows cannot be selected: {REFUSED}"))


@dataclass
class _Part:
    """One partition read on a worker (pass 1): its columns factorised (narrow codes)."""

    sha256: str = ""
    header: list[str] = field(default_factory=list)
    selected: list[int] = field(default_factory=list)
    rows: int = 0
    uniques: list[list[Any]] = field(default_factory=list)
    orders: list[tuple[str, ...] | None] = field(default_factory=list)
    raw: list[np.ndarray] = field(default_factory=list)
    problems: list[Problem] = field(default_factory=list)


def read_part(path: str, file: str, key_prefix: str, use: Sequence[str] | None,
              drop: Sequence[str] | None) -> _Part:
    """Pass 1 on a worker: a partition read by the one-process reader's own function
    (:func:`runner.data._read_parquet`); its problems are returned, not raised."""
    problems: list[Problem] = []
    try:
        sha, table = reader._read_parquet(Path(path), file, key_prefix, problems, None,
                                          reader._Selection(use, drop, key_prefix))
    except InputError as exc:
        return _Part(problems=list(exc.problems) or problems)
    raw = [np.asarray(c.raw_codes).astype(reader._narrowest(len(c.uniques)))
           for c in table.columns]
    return _Part(sha, table.header, table.selected, table.data_rows,
                 [list(c.uniques) for c in table.columns], [c.order for c in table.columns],
                 raw, problems)


def survey(part: _Part) -> _Part:
    """What pass 1 sends back: the partition without its rows."""
    return _Part(part.sha256, part.header, part.selected, part.rows, part.uniques,
                 part.orders, [], part.problems)


def _keep(part: _Part, missing: Sequence[np.ndarray], drop_rows: bool) -> np.ndarray | None:
    """The rows kept (None: all): those without a missing cell under drop-rows."""
    if not drop_rows:
        return None
    keep = np.ones(part.rows, dtype=bool)
    for raw, gap in zip(part.raw, missing, strict=True):
        if gap.any():
            keep &= ~gap[raw]
    return None if keep.all() else keep


def tally(part: _Part, missing: Sequence[np.ndarray], drop_rows: bool
          ) -> tuple[int, list[np.ndarray]]:
    """Pass 2 on a worker: the rows kept and, per column, how many kept rows hold each
    distinct value (``missing``: per column, which of the partition's values are missing)."""
    keep = _keep(part, missing, drop_rows)
    kept = part.rows if keep is None else int(keep.sum())
    seen = [np.bincount(raw if keep is None else raw[keep], minlength=len(u))
            for raw, u in zip(part.raw, part.uniques, strict=True)]
    return kept, seen


def encode(part: _Part, missing: Sequence[np.ndarray], drop_rows: bool,
           luts: Sequence[np.ndarray], dtype: str) -> np.ndarray:
    """Pass 3 on a worker: the kept rows as state codes (variables x rows, C-contiguous,
    read-only); ``luts`` maps each of the partition's values to its global state code."""
    keep = _keep(part, missing, drop_rows)
    rows = part.rows if keep is None else int(keep.sum())
    out = np.empty((len(part.raw), rows), dtype=np.dtype(dtype))
    for i, (raw, lut) in enumerate(zip(part.raw, luts, strict=True)):
        taken = raw if keep is None else raw[keep]
        np.take(lut.astype(out.dtype), taken, out=out[i], mode="clip")
    out.flags.writeable = False
    return out


def _merged(pieces: Sequence[tuple[list[Any], tuple[str, ...] | None]]
            ) -> tuple[list[Any], tuple[str, ...] | None, list[np.ndarray]]:
    """One column's distinct values over the partitions, in order of first appearance
    (:func:`runner.data._joined_columns` without the rows), its category order when every
    partition has the same one, and each partition's map into the merged values."""
    index: dict[Any, int] = {}
    uniques: list[Any] = []
    lookups = []
    for values, _ in pieces:
        lookup = np.empty(len(values), dtype=np.intp)
        for i, value in enumerate(values):
            at = index.get(value)
            if at is None:
                at = index[value] = len(uniques)
                uniques.append(value)
            lookup[i] = at
        lookups.append(lookup)
    orders = {order for _, order in pieces}
    return uniques, (orders.pop() if len(orders) == 1 else None), lookups


class _Fallback(Exception):
    """A problem in the data: the one-process reader reports it in its own words."""


def load_partitioned(path: Path, display: str, settings: Mapping[str, Any],
                     expected_sha256: str | None = None,
                     key_prefix: str = "dataset") -> PartitionedDataset:
    """A Parquet folder or glob read and encoded on the active Dask source's workers (see
    the module's description); the data set the one-process reader gives, codes aside.
    ``settings`` are :func:`runner.data.loader_settings`. Raises InputError as the
    one-process reader does."""
    source = _ACTIVE.get()
    assert source is not None, "load_partitioned needs rows_on or rows_on_engine"
    parts = reader.parquet_parts(path, display, key_prefix)
    assert parts is not None
    if source.once and source.loaded:
        raise InputError(Problem(display, "is a second data set on the Dask workers in one "
                                 "command (several specs, or a vary section): "
                                 f"{REFUSED}; run one spec at a time",
                                 key=f"{key_prefix}.path"))
    source.loaded += 1
    client = source.open()
    try:
        with _lost_work("a partition being read"):
            return _load(client, parts, path, display, settings, expected_sha256, key_prefix)
    except _Fallback:
        reader.load_dataset(path, expected_sha256=expected_sha256, display_path=display,
                            key_prefix=key_prefix, **settings)
        raise InputError(Problem(display, "was read differently on the Dask workers and in "
                                 f"one process: {REFUSED}", key=f"{key_prefix}.path")) from None


def _load(client: Client, parts: Sequence[Path], path: Path, display: str,
          settings: Mapping[str, Any], expected_sha256: str | None,
          key_prefix: str) -> PartitionedDataset:
    missing_policy = settings.get("missing", "error")
    if missing_policy in KEEPS_GAPS:
        raise _Fallback
    drop_rows = missing_policy == "drop-rows"
    files = [f"{display}/{p.name}" for p in parts]
    read = [client.submit(read_part, str(p.resolve()), f, key_prefix, settings.get("use"),
                          settings.get("drop"), pure=False) for p, f in zip(parts, files,
                                                                             strict=True)]
    surveys: list[_Part] = client.gather([client.submit(survey, f, pure=False)
                                          for f in read])
    problems = [p for s in surveys for p in s.problems]
    if any(p.severity == "error" for p in problems):
        bad = next(k for k, s in enumerate(surveys) if s.problems)
        raise InputError(surveys[bad].problems)
    first = surveys[0]
    if any(s.header != first.header for s in surveys):
        raise _Fallback
    sha = partitions_sha256([s.sha256 for s in surveys])
    problems.extend(reader._pin_problems(sha, expected_sha256, display, key_prefix))
    names, position = reader._column_names(first.header, display, "in the schema",
                                           line=None)
    problems.extend(position)
    names = [names[j] for j in first.selected]
    n_rows = sum(s.rows for s in surveys)
    if n_rows == 0 or any(p.severity == "error" for p in problems):
        raise _Fallback
    merged = [_merged([(s.uniques[j], s.orders[j]) for s in surveys])
              for j in range(len(names))]
    report = reader._Report(display, lambda rows: rows + 1, "row", key_prefix)
    spellings = (MISSING_SPELLINGS if settings.get("missing_values") is None
                 else tuple(settings["missing_values"]))
    columns = reader._parse_columns(
        names, [reader._Factorised(np.zeros(0, np.intp), u, o) for u, o, _ in merged],
        settings.get("declared_states") or {}, spellings, report)
    gaps = [reader._missing(c) for c in columns]
    local_gaps = [[gap[m[2][k]] for gap, m in zip(gaps, merged, strict=True)]
                  for k in range(len(surveys))]
    tallies = client.gather([client.submit(tally, f, g, drop_rows, pure=False)
                             for f, g in zip(read, local_gaps, strict=True)])
    kept = sum(t[0] for t in tallies)
    seen = [np.zeros(len(m[0]), dtype=np.int64) for m in merged]
    for k, (_, counts) in enumerate(tallies):
        for j, column in enumerate(counts):
            np.add.at(seen[j], merged[j][2][k], column)
    if not drop_rows and any(int(s[g].sum()) for s, g in zip(seen, gaps, strict=True)):
        raise _Fallback  # missing values under missing: error
    dropped = n_rows - kept
    if dropped and not reader._report_dropped(n_rows, dropped, report):
        raise _Fallback
    encoded = []
    declared_kinds = settings.get("declared_kinds") or {}
    for name, column, present in zip(names, columns, seen, strict=True):
        column.raw_codes = np.flatnonzero(present)
        one = reader._encode_column(name, column, declared_kinds.get(name),
                                    int(settings.get("max_states", 64)), None, report)
        if one is None:
            raise _Fallback
        if one.kind != "discrete" or one.lut is None:
            raise InputError(Problem(display, f"column {name!r} is continuous: {REFUSED};"
                                     " learn it with --engine local", key=name))
        encoded.append(one)
    if report.failed():
        raise _Fallback
    widest = max(len(c.states) for c in encoded)
    dtype = "uint8" if widest <= 256 else "uint16"
    codes = []
    for k, future in enumerate(read):
        luts = [np.asarray(c.lut)[m[2][k]] for c, m in zip(encoded, merged, strict=True)]
        codes.append(client.submit(encode, future, local_gaps[k], drop_rows, luts, dtype,
                                   pure=False))
    shapes = client.gather([client.submit(_shape, c, pure=False) for c in codes])
    assert sum(s[1] for s in shapes) == kept
    del read, tallies  # released on the workers once their encodings are made
    warnings = (tuple(p for p in problems + report.problems if p.severity != "error")
                + tuple(report.warnings))
    states = tuple(c.states for c in encoded)
    placeholder = np.zeros((len(names), 0), dtype=np.dtype(dtype))
    placeholder.flags.writeable = False
    return PartitionedDataset(
        str(path), sha, tuple(names), states, placeholder, dropped, warnings,
        tuple(c.kind for c in encoded), tuple(c.reason for c in encoded), None, False,
        n_rows=kept, partitions=Partitions(client, tuple(codes), tuple(files)))


def _shape(codes: np.ndarray) -> tuple[int, int]:
    return (int(codes.shape[0]), int(codes.shape[1]))


# --------------------------------------------------------------------------- counts


def _cells(codes: np.ndarray, arities: np.ndarray, child: int,
           parents: Sequence[int]) -> tuple[np.ndarray, np.ndarray]:
    """One family's occurring cells on one partition and their counts: the family codes
    (configuration code x r + child state, uint64, ascending) when they fit below
    :data:`~runner.scores.counts.COMPACT_ABOVE`, else the distinct rows (parents..., child)
    in lexicographic order (the same order)."""
    r = int(arities[child])
    possible = math.prod(int(arities[p]) for p in parents)
    n_rows = int(codes.shape[1])
    if possible * r < COMPACT_ABOVE:
        cells = possible * r
        if cells <= dense_limit(n_rows):
            kernel = counting_kernel(kernel_choice())
            if kernel is not None:
                return _kernel_cells(kernel, codes, arities, child, parents, cells)
        parent_code, _, _ = configuration_codes(codes, arities, list(parents))
        dtype = code_dtype(cells)
        family = parent_code.astype(dtype) * dtype(r) + codes[child]
        if cells <= dense_limit(n_rows):
            dense = np.bincount(family, minlength=cells)
            keys = np.flatnonzero(dense)
            return keys.astype(np.uint64), dense[keys].astype(np.int64)
        keys, counts = np.unique(family, return_counts=True)
        return keys.astype(np.uint64), counts.astype(np.int64)
    rows = np.ascontiguousarray(codes[[*parents, child]].T.astype(np.int64))
    keys, counts = np.unique(rows, axis=0, return_counts=True)
    return keys.reshape(-1, len(parents) + 1), counts.astype(np.int64)


#: Per worker thread, its scratch buffers for the compiled kernel (a zeroed dense table
#: and a code per row) and the partition size they fit, reused across tasks.
_SCRATCH: dict[int, tuple[int, np.ndarray, np.ndarray]] = {}


def _scratch(n_rows: int) -> tuple[int, np.ndarray, np.ndarray]:
    """This worker thread's scratch buffers for partitions of ``n_rows`` rows."""
    thread = threading.get_ident()
    held = _SCRATCH.get(thread)
    if held is None or held[0] != n_rows:
        held = _SCRATCH[thread] = (n_rows, np.zeros(dense_limit(n_rows), dtype=np.int64),
                                   np.zeros(n_rows, dtype=np.int64))
    return held


def _kernel_cells(kernel: ModuleType, codes: np.ndarray, arities: np.ndarray, child: int,
                  parents: Sequence[int], cells: int) -> tuple[np.ndarray, np.ndarray]:
    """:func:`_cells` by the compiled counting kernel (:func:`runner.scores.kernel.family_cells`:
    one pass over the rows into a dense table with lanes, the same integers)."""
    _, dense, code = _scratch(int(codes.shape[1]))
    keys, counts = kernel.family_cells(codes, np.asarray(arities, dtype=np.int64), child,
                                       list(parents), dense, code)
    return keys, counts


def count_columns(codes: np.ndarray, arities: np.ndarray,
                  requests: Sequence[tuple[int, tuple[int, ...], Sequence[int]]]
                  ) -> _PartCounts:
    """One task on a worker: the cells of a batch of columns on its partition, each
    request ``(child, sorted parents, candidates)`` giving the families of
    :meth:`~runner.scores.cache.CachedScorer._compute_batch` (a candidate equal to the
    child: the parents themselves; else that candidate's bit flipped), in order."""
    return _packed([_cells(codes, arities, child,
                           base if p == child else tuple(sorted(set(base) ^ {p})))
                    for child, base, candidates in requests for p in candidates])


def _packed(cells: Sequence[tuple[np.ndarray, np.ndarray]]) -> _PartCounts:
    """Families' cells in a few arrays (one message, not one per family)."""
    flat = [k for k, _ in cells if k.ndim == 1]
    return _PartCounts(
        np.concatenate(flat) if flat else np.zeros(0, np.uint64),
        np.concatenate([c for k, c in cells if k.ndim == 1] or [np.zeros(0, np.int64)]),
        np.array([k.size if k.ndim == 1 else -1 for k, _ in cells], dtype=np.int64),
        {i: cell for i, cell in enumerate(cells) if cell[0].ndim != 1})


@dataclass(frozen=True)
class _PartCounts:
    """The cells of a batch of families on one partition: the families keyed by codes
    one after another in ``keys``/``counts`` (``sizes[i]`` cells each, -1 for a family
    keyed by rows), those keyed by rows in ``rows`` by position."""

    keys: np.ndarray
    counts: np.ndarray
    sizes: np.ndarray
    rows: dict[int, tuple[np.ndarray, np.ndarray]]

    def unpacked(self) -> list[tuple[np.ndarray, np.ndarray]]:
        out = []
        at = 0
        for i, size in enumerate(self.sizes.tolist()):
            if size < 0:
                out.append(self.rows[i])
                continue
            out.append((self.keys[at:at + size], self.counts[at:at + size]))
            at += size
        return out


@dataclass(frozen=True)
class _Counted:
    """One family's counts summed over the partitions: the occurring cells (as
    :func:`_cells` gives them, ascending) and their counts."""

    child: int
    parents: tuple[int, ...]
    arity: int
    possible: int
    keys: np.ndarray
    counts: np.ndarray

    def _filled(self) -> tuple[np.ndarray, np.ndarray]:
        """The occurring configurations (codes, or parent-state rows), ascending, and the
        count table over them (one row each, one column per child state)."""
        r = self.arity
        if self.keys.ndim == 1:
            configs, row_of = np.unique(self.keys // np.uint64(r), return_inverse=True)
            states = (self.keys % np.uint64(r)).astype(np.intp)
        else:
            configs, row_of = np.unique(self.keys[:, :-1], axis=0, return_inverse=True)
            configs = configs.reshape(-1, len(self.parents))
            states = self.keys[:, -1].astype(np.intp)
        table = np.zeros((configs.shape[0], r), dtype=np.int64)
        table[row_of.reshape(-1), states] = self.counts
        return configs, table

    def table(self) -> tuple[np.ndarray, int]:
        """The count table and q, as :func:`runner.scores.counts.family_counts` gives them
        on the concatenated codes: occurring configurations ascending x child states."""
        return self._filled()[1], self.possible

    def family(self, arities: np.ndarray) -> DiscreteFamily:
        """The fitted family (:func:`runner.fit.discrete_family` of the concatenated
        codes)."""
        from runner.fit import DiscreteFamily

        configs, counts = self._filled()
        parents = list(self.parents)
        if self.keys.ndim == 1:
            codes = configs.astype(np.uint64)
            states_of = (np.stack(np.unravel_index(configs.astype(np.intp),
                                                   [int(arities[p]) for p in parents]),
                                  axis=1).astype(np.int64) if parents
                         else np.zeros((configs.size, 0), np.int64))
        else:
            states_of = configs.astype(np.int64)
            if self.possible < COMPACT_ABOVE:  # mixed-radix codes, as the fit makes them
                codes = np.zeros(configs.shape[0], dtype=np.uint64)
                for k, p in enumerate(parents):
                    codes = codes * np.uint64(int(arities[p])) + states_of[:, k].astype(
                        np.uint64)
            else:  # ranks of the distinct parent rows (the fit's own, within one call)
                codes = np.arange(configs.shape[0], dtype=np.uint64)
        return DiscreteFamily(self.child, self.parents, self.arity, self.possible, codes,
                              states_of, counts)


def _merge(arities: np.ndarray, child: int, parents: Sequence[int],
           pieces: Sequence[tuple[np.ndarray, np.ndarray]]) -> _Counted:
    """One family's cells of every partition summed (counts add over rows)."""
    keys = np.concatenate([k for k, _ in pieces])
    counts = np.concatenate([c for _, c in pieces])
    if keys.ndim == 1:
        cells, inverse = np.unique(keys, return_inverse=True)
    else:
        cells, inverse = np.unique(keys.reshape(-1, len(parents) + 1), axis=0,
                                   return_inverse=True)
    sums = np.zeros(cells.shape[0], dtype=np.int64)
    np.add.at(sums, inverse.reshape(-1), counts)
    return _Counted(child, tuple(parents), int(arities[child]),
                    math.prod(int(arities[p]) for p in parents), cells, sums)


class RemoteCountScorer(CachedScorer):
    """Family scores of a :class:`PartitionedDataset` from counts made on the workers
    (see :class:`~runner.scores.cache.CachedScorer`): each computation is one round trip
    (all partitions at once), a batch of columns (``batches``: :meth:`prefetch`) too.
    ``round_trips`` counts them."""

    batches = True

    def __init__(self, function: Any, dataset: PartitionedDataset,
                 cache_limit: int | None = None) -> None:
        super().__init__(len(dataset.names), dataset.rows, cache_limit)
        assert dataset.partitions is not None
        self.function = function
        self.column_function = column_form(function)
        self.arities = dataset.arities
        self.partitions = dataset.partitions
        self.round_trips = 0

    def counted(self, requests: Sequence[ColumnRequest]) -> list[_Counted]:
        """The summed counts of the families of ``requests`` (as
        :meth:`_compute_batch` takes them), in order: one round trip."""
        self.round_trips += 1
        return self.partitions.column_counts(
            self.arities, [(child, mask_members(mask), list(candidates))
                           for child, mask, candidates in requests])

    def _scored(self, counted: Sequence[_Counted]) -> list[float]:
        """The scores of one child's families, in the column form when the score has one
        (the same bits as one at a time)."""
        return score_tables(self.function, self.column_function,
                            [c.table() for c in counted], self.n_rows)

    def _compute(self, child: int, mask: int) -> float:
        return self._scored(self.counted([(child, mask, [child])]))[0]

    def _compute_column(self, child: int, mask: int, candidates: Sequence[int]) -> list[float]:
        if not candidates:
            return []
        return self._scored(self.counted([(child, mask, candidates)]))

    def _compute_batch(self, requests: Sequence[ColumnRequest]) -> list[list[float]]:
        families = sum(len(candidates) for _, _, candidates in requests)
        counted = self.counted(requests) if families else []
        return [self._scored(column) for column in by_request(counted, requests)]


def partitioned_scorer(score: Mapping[str, Any], dataset: PartitionedDataset
                       ) -> RemoteCountScorer:
    """The spec's discrete score (its ``score`` block) on the workers' counts."""
    from runner.scores import family_function

    entry = registry.score(str(score.get("name", "bic")))
    arguments = entry.params.pick(score).arguments()
    cache_limit = arguments.pop("cache_limit", None)
    return RemoteCountScorer(family_function(entry.name, **arguments), dataset, cache_limit)


def fit_remote(dataset: PartitionedDataset, parent_sets: Sequence[Sequence[int]],
               pseudo_count: float, graph_hash: str
               ) -> tuple[dict[str, Any], list[DiscreteFamily]]:
    """The ``model.json`` document and fitted tables of a learned graph from the workers'
    counts (one round trip): :func:`runner.fit.fit_model` of the concatenated codes."""
    from runner.fit import model_document

    assert dataset.partitions is not None
    arities = dataset.arities
    families = [(c, tuple(ps)) for c, ps in enumerate(parent_sets)]
    tables = [c.family(arities) for c in dataset.partitions.counts(arities, families)]
    return model_document(tables, dataset.names, dataset.states, pseudo_count, dataset.rows,
                          dataset.sha256, graph_hash), tables
