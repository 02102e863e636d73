"""Regenerate datasets/kiln-line.csv from the invented kiln-line network, and the demo
data drops that ``dagmill check --data`` holds against a pinned run.

The ground truth (tiers, true edges, probability tables) and the sampler live in
``runner/demo/kiln_line.py`` so that ``dagmill demo`` can write the same file on any
machine. Run from the repository root::

    python datasets/make_kiln_line.py --rows 20000 --seed 20261201

The drops (``--drop NAME``; see datasets/README.md), each 20,000 rows by default::

    python datasets/make_kiln_line.py --drop same --out datasets/kiln-line-drop-same.csv
    python datasets/make_kiln_line.py --drop cooling-warp \\
        --out datasets/kiln-line-drop-cooling-warp.csv
    python datasets/make_kiln_line.py --drop new-supplier \\
        --out datasets/kiln-line-drop-new-supplier.csv

* ``same``: a new sample of the same network (seed 20261204): sampling noise only;
* ``cooling-warp``: one dependency added: a new fast-cooling tunnel warps tiles, so
  ``warp`` gets ``cooling`` as a third parent (seed 20261205);
* ``new-supplier``: a fourth quarry ``west`` ships clay; nothing else changes (its clay's
  moisture behaves like the north quarry's) (seed 20261208).
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
import pandas

from runner.demo import kiln_line
from runner.demo.kiln_line import COLUMNS, CPTS, PARENTS, STATES

Table = dict[tuple[str, ...], tuple[float, ...]]

#: Each drop's default seed.
DROP_SEEDS = {"same": 20261204, "cooling-warp": 20261205, "new-supplier": 20261208}


def configurations(parents: Sequence[str],
                   states: Mapping[str, Sequence[str]]) -> list[tuple[str, ...]]:
    """Every joint state of ``parents``, the last parent varying fastest."""
    configs: list[tuple[str, ...]] = [()]
    for parent in parents:
        configs = [(*c, s) for c in configs for s in states[parent]]
    return configs


def sample_network(states: Mapping[str, Sequence[str]],
                   parents: Mapping[str, Sequence[str]], cpts: Mapping[str, Table],
                   rows: int, seed: int) -> pandas.DataFrame:
    """Ancestral sampling of a network given as plain data, the way
    ``runner.demo.kiln_line.sample`` draws the kiln line (one vectorised draw per
    variable in ``COLUMNS`` order): on the kiln line's own tables it gives the same rows."""
    rng = np.random.default_rng(seed)
    codes: dict[str, np.ndarray] = {}
    for name in COLUMNS:
        own = parents[name]
        matrix = np.array([cpts[name][c] for c in configurations(own, states)],
                          dtype=np.float64)
        config = np.zeros(rows, dtype=np.int64)
        for parent in own:
            config = config * len(states[parent]) + codes[parent]
        cumulative = np.cumsum(matrix, axis=1)
        cumulative[:, -1] = 1.0
        draw = rng.random(rows)
        codes[name] = (draw[:, None] >= cumulative[config]).sum(axis=1)
    return pandas.DataFrame(
        {name: np.asarray(states[name], dtype=object)[codes[name]] for name in COLUMNS})


def cooling_warp() -> tuple[dict[str, tuple[str, ...]], dict[str, Table]]:
    """The kiln line with ``cooling -> warp`` added: fast cooling raises the warp risk
    (the odds of warp about 2.5 times those under slow cooling, which keeps the old
    table)."""
    parents = {**PARENTS, "warp": ("press_force", "kiln_peak", "cooling")}
    warp: Table = {}
    for (force, peak), (no, yes) in CPTS["warp"].items():
        warp[(force, peak, "slow")] = (no, yes)
        fast = min(0.6, yes * 2.5 / (1.0 - yes + yes * 2.5))
        warp[(force, peak, "fast")] = (1.0 - fast, fast)
    return parents, {**CPTS, "warp": warp}


def new_supplier() -> tuple[dict[str, tuple[str, ...]], dict[str, Table]]:
    """The kiln line with a fourth quarry ``west`` (its clay's moisture as the north
    quarry's); the states come from :func:`new_supplier_states`."""
    moisture = dict(CPTS["moisture"])
    for clay in STATES["clay_lot"]:
        moisture[("west", clay)] = CPTS["moisture"][("north", clay)]
    return dict(PARENTS), {**CPTS, "supplier": {(): (0.35, 0.30, 0.20, 0.15)},
                           "moisture": moisture}


def new_supplier_states() -> dict[str, tuple[str, ...]]:
    return {**STATES, "supplier": ("east", "north", "south", "west")}


def drop(name: str, rows: int, seed: int | None = None) -> pandas.DataFrame:
    """One of the demo drops (``same``, ``cooling-warp``, ``new-supplier``)."""
    chosen = DROP_SEEDS[name] if seed is None else seed
    if name == "same":
        return kiln_line.sample(rows, chosen)
    if name == "cooling-warp":
        parents, cpts = cooling_warp()
        return sample_network(STATES, parents, cpts, rows, chosen)
    if name == "new-supplier":
        parents, cpts = new_supplier()
        return sample_network(new_supplier_states(), parents, cpts, rows, chosen)
    raise ValueError(f"unknown drop {name!r}; one of {', '.join(DROP_SEEDS)}")


def main(argv: Sequence[str] | None = None) -> int:
    args = list(sys.argv[1:] if argv is None else argv)
    if "--drop" not in args:
        return kiln_line.main(args)
    parser = argparse.ArgumentParser(description="Write a demo data drop of the kiln line.")
    parser.add_argument("--drop", required=True, choices=sorted(DROP_SEEDS))
    parser.add_argument("--rows", type=int, default=kiln_line.DEFAULT_ROWS)
    parser.add_argument("--seed", type=int, default=None, help="default: the drop's own")
    parser.add_argument("--out", required=True, help="CSV file to write")
    parsed = parser.parse_args(args)
    if parsed.rows < 1:
        parser.error("--rows must be at least 1")
    out = Path(parsed.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    frame = drop(parsed.drop, parsed.rows, parsed.seed)
    out.write_bytes(frame.to_csv(index=False, lineterminator="\n").encode("utf-8"))
    print(f"wrote {parsed.rows:,} rows ({parsed.drop}) to {out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
