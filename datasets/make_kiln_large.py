"""Write a large invented kiln-line table as a folder of Parquet partitions, for learning
with rows counted on Dask workers (README, "Rows on Dask workers").

The tiles are drawn from the same invented network as ``datasets/kiln-line.csv``
(``runner/demo/kiln_line.py``: tiers, states, every probability), by the same ancestral
sampler (:func:`runner.demo.kiln_line.sample`). Partition ``k`` holds its share of the
rows (``rows // parts``, the first ``rows % parts`` partitions one more) drawn with its
own seed, the ``k``-th child of ``numpy.random.SeedSequence(seed)``: the same arguments
give the same rows on any machine, and a partition can be written without the others.
Each column is a Parquet string column (the states as text, as in the CSV). Run from the
repository root::

    python datasets/make_kiln_large.py --rows 10000000 --parts 8 --seed 20261210 \\
        --out datasets/kiln-large

then learn it on a Dask cluster (a spec whose ``dataset.path`` is the folder)::

    dagmill run specs/kiln-large.yaml --engine dask-local --workers 2

The folder is not committed (10 million rows are about 23 MB of Parquet); the files'
bytes are the same for the same arguments and the same pyarrow version (the writer's
version is in each file's metadata), and the data set's sha256 (over the sorted partition
digests) with them.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:  # run as a script from the repository root
    sys.path.insert(0, str(ROOT))

DEFAULT_ROWS = 10_000_000
DEFAULT_PARTS = 8
DEFAULT_SEED = 20261210
DEFAULT_OUT = "datasets/kiln-large"


def partition_rows(rows: int, parts: int) -> list[int]:
    """Rows of each partition: ``rows // parts``, the first ``rows % parts`` one more."""
    return [rows // parts + (1 if k < rows % parts else 0) for k in range(parts)]


def partition_seeds(seed: int, parts: int) -> list[int]:
    """Each partition's seed: the first word of the k-th child of ``SeedSequence(seed)``."""
    return [int(child.generate_state(1)[0])
            for child in np.random.SeedSequence(seed).spawn(parts)]


def write(rows: int, parts: int, seed: int, out: Path) -> list[Path]:
    """Write the partitions ``part-000.parquet``... into ``out``; return their paths."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    from runner.demo.kiln_line import sample

    if rows < parts or parts < 1:
        raise ValueError("need at least one row per partition and at least one partition")
    out.mkdir(parents=True, exist_ok=True)
    written = []
    for k, (count, child) in enumerate(zip(partition_rows(rows, parts),
                                           partition_seeds(seed, parts), strict=True)):
        frame = sample(count, child)
        path = out / f"part-{k:03d}.parquet"
        partial = path.with_suffix(".partial")
        pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), partial)
        partial.replace(path)
        written.append(path)
    return written


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        description="Write the invented kiln-line table as Parquet partitions.")
    parser.add_argument("--rows", type=int, default=DEFAULT_ROWS, help="tiles in all")
    parser.add_argument("--parts", type=int, default=DEFAULT_PARTS, help="partitions")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="random seed")
    parser.add_argument("--out", default=DEFAULT_OUT, help="folder to write")
    args = parser.parse_args(argv)
    if args.parts < 1 or args.rows < args.parts:
        parser.error("--parts must be at least 1 and --rows at least --parts")
    paths = write(args.rows, args.parts, args.seed, Path(args.out))
    print(f"wrote {args.rows:,} rows in {len(paths)} partitions to {args.out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
