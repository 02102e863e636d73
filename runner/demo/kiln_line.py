"""The kiln-line scenario: an invented ceramic tile line as a discrete Bayesian network.

Everything here is made up for the demo: the variables, their states and every
probability. The network is written out as plain data (tiers, states, parents and full
conditional probability tables) so that a reader can check what dagmill should recover.

Regenerate the committed data set from the repository root with::

    python datasets/kiln_line.py --rows 20000 --seed 20261201 --out datasets/kiln-line.csv
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pandas

DEFAULT_ROWS = 20_000
DEFAULT_SEED = 20261201
DEFAULT_OUT = "datasets/kiln-line.csv"

#: Time-ordered tiers: raw materials, press and kiln settings, defects, final grade.
#: Within a tier the variables are listed parents first (a topological order).
TIERS: list[list[str]] = [
    ["supplier", "clay_lot", "moisture", "glaze_batch"],
    ["press_force", "kiln_peak", "dwell", "cooling"],
    ["crack", "warp", "shade"],
    ["grade"],
]

#: Each variable's states, in the order the tables below use.
STATES: dict[str, tuple[str, ...]] = {
    "supplier": ("east", "north", "south"),
    "clay_lot": ("fine", "medium", "coarse"),
    "moisture": ("dry", "normal", "wet"),
    "glaze_batch": ("matte", "gloss"),
    "press_force": ("low", "medium", "high"),
    "kiln_peak": ("cool", "nominal", "hot"),
    "dwell": ("short", "long"),
    "cooling": ("slow", "fast"),
    "crack": ("no", "yes"),
    "warp": ("no", "yes"),
    "shade": ("match", "off"),
    "grade": ("first", "second", "reject"),
}

#: Each variable's parents, in the order of the keys of its table.
PARENTS: dict[str, tuple[str, ...]] = {
    "supplier": (),
    "clay_lot": (),
    "moisture": ("supplier", "clay_lot"),
    "glaze_batch": (),
    "press_force": ("clay_lot", "moisture"),
    "kiln_peak": ("glaze_batch",),
    "dwell": ("kiln_peak",),
    "cooling": (),
    "crack": ("moisture", "kiln_peak", "cooling"),
    "warp": ("press_force", "kiln_peak"),
    "shade": ("glaze_batch", "kiln_peak"),
    "grade": ("crack", "warp", "shade"),
}

#: P(variable | parents): parent states (in PARENTS order) -> probabilities (STATES order).
CPTS: dict[str, dict[tuple[str, ...], tuple[float, ...]]] = {
    # Clay arrives from three quarries; the east one ships most.
    "supplier": {(): (0.40, 0.35, 0.25)},
    # Grain class of the clay lot, as graded at intake.
    "clay_lot": {(): (0.30, 0.45, 0.25)},
    # Coarse clay holds water; the south quarry ships in open wagons, the north one dries.
    "moisture": {
        ("east", "fine"): (0.30, 0.55, 0.15),
        ("east", "medium"): (0.20, 0.60, 0.20),
        ("east", "coarse"): (0.10, 0.45, 0.45),
        ("north", "fine"): (0.45, 0.45, 0.10),
        ("north", "medium"): (0.35, 0.50, 0.15),
        ("north", "coarse"): (0.20, 0.50, 0.30),
        ("south", "fine"): (0.15, 0.50, 0.35),
        ("south", "medium"): (0.10, 0.45, 0.45),
        ("south", "coarse"): (0.05, 0.30, 0.65),
    },
    # The glaze of the day's batch.
    "glaze_batch": {(): (0.55, 0.45)},
    # Operators press coarse clay harder and wet clay softer.
    "press_force": {
        ("fine", "dry"): (0.15, 0.60, 0.25),
        ("fine", "normal"): (0.20, 0.65, 0.15),
        ("fine", "wet"): (0.50, 0.40, 0.10),
        ("medium", "dry"): (0.10, 0.50, 0.40),
        ("medium", "normal"): (0.15, 0.65, 0.20),
        ("medium", "wet"): (0.40, 0.45, 0.15),
        ("coarse", "dry"): (0.05, 0.35, 0.60),
        ("coarse", "normal"): (0.10, 0.45, 0.45),
        ("coarse", "wet"): (0.25, 0.50, 0.25),
    },
    # Gloss glazes are fired hotter.
    "kiln_peak": {
        ("matte",): (0.30, 0.55, 0.15),
        ("gloss",): (0.10, 0.50, 0.40),
    },
    # A cool peak is held longer, a hot one cut short.
    "dwell": {
        ("cool",): (0.25, 0.75),
        ("nominal",): (0.55, 0.45),
        ("hot",): (0.80, 0.20),
    },
    # Fast cooling on busy shifts.
    "cooling": {(): (0.60, 0.40)},
    # Cracks: wet clay, a hot peak and fast cooling each raise the risk.
    "crack": {
        ("dry", "cool", "slow"): (0.98, 0.02),
        ("dry", "cool", "fast"): (0.94, 0.06),
        ("dry", "nominal", "slow"): (0.97, 0.03),
        ("dry", "nominal", "fast"): (0.92, 0.08),
        ("dry", "hot", "slow"): (0.92, 0.08),
        ("dry", "hot", "fast"): (0.80, 0.20),
        ("normal", "cool", "slow"): (0.97, 0.03),
        ("normal", "cool", "fast"): (0.93, 0.07),
        ("normal", "nominal", "slow"): (0.96, 0.04),
        ("normal", "nominal", "fast"): (0.90, 0.10),
        ("normal", "hot", "slow"): (0.90, 0.10),
        ("normal", "hot", "fast"): (0.76, 0.24),
        ("wet", "cool", "slow"): (0.90, 0.10),
        ("wet", "cool", "fast"): (0.78, 0.22),
        ("wet", "nominal", "slow"): (0.86, 0.14),
        ("wet", "nominal", "fast"): (0.70, 0.30),
        ("wet", "hot", "slow"): (0.75, 0.25),
        ("wet", "hot", "fast"): (0.55, 0.45),
    },
    # Warp: loosely pressed tiles sag, most of all in a hot kiln.
    "warp": {
        ("low", "cool"): (0.91, 0.09),
        ("low", "nominal"): (0.88, 0.12),
        ("low", "hot"): (0.72, 0.28),
        ("medium", "cool"): (0.95, 0.05),
        ("medium", "nominal"): (0.93, 0.07),
        ("medium", "hot"): (0.83, 0.17),
        ("high", "cool"): (0.96, 0.04),
        ("high", "nominal"): (0.94, 0.06),
        ("high", "hot"): (0.86, 0.14),
    },
    # Shade: gloss goes off-shade when under-fired, matte when over-fired.
    "shade": {
        ("matte", "cool"): (0.94, 0.06),
        ("matte", "nominal"): (0.96, 0.04),
        ("matte", "hot"): (0.85, 0.15),
        ("gloss", "cool"): (0.84, 0.16),
        ("gloss", "nominal"): (0.94, 0.06),
        ("gloss", "hot"): (0.88, 0.12),
    },
    # Final grade from the defects found at inspection.
    "grade": {
        ("no", "no", "match"): (0.92, 0.07, 0.01),
        ("no", "no", "off"): (0.25, 0.70, 0.05),
        ("no", "yes", "match"): (0.15, 0.65, 0.20),
        ("no", "yes", "off"): (0.05, 0.55, 0.40),
        ("yes", "no", "match"): (0.03, 0.12, 0.85),
        ("yes", "no", "off"): (0.02, 0.10, 0.88),
        ("yes", "yes", "match"): (0.01, 0.07, 0.92),
        ("yes", "yes", "off"): (0.01, 0.04, 0.95),
    },
}

#: The ground truth: every (parent, child) pair, sorted.
TRUE_EDGES: list[tuple[str, str]] = sorted(
    (parent, child) for child, parents in PARENTS.items() for parent in parents
)

#: Column order of the generated file (tier by tier).
COLUMNS: list[str] = [name for tier in TIERS for name in tier]


def check_network() -> None:
    """Raise ``ValueError`` unless the tables are complete, normalised and tier-respecting."""
    tier_of = {name: t for t, tier in enumerate(TIERS) for name in tier}
    position = {name: i for i, name in enumerate(COLUMNS)}
    if set(tier_of) != set(STATES) or set(STATES) != set(PARENTS) or set(PARENTS) != set(CPTS):
        raise ValueError("TIERS, STATES, PARENTS and CPTS must name the same variables")
    for child, parents in PARENTS.items():
        for parent in parents:
            if tier_of[parent] > tier_of[child] or position[parent] >= position[child]:
                raise ValueError(f"edge {parent} -> {child} goes against the tier order")
        expected = _configurations(parents)
        table = CPTS[child]
        if sorted(table) != sorted(expected):
            raise ValueError(f"the table of {child} must have one row per parent configuration")
        for config, probs in table.items():
            if len(probs) != len(STATES[child]) or abs(sum(probs) - 1.0) > 1e-9:
                raise ValueError(f"P({child} | {config}) must have {len(STATES[child])} "
                                 "probabilities summing to 1")
            if min(probs) <= 0.0:
                raise ValueError(f"P({child} | {config}) has a zero probability")


def _configurations(parents: Sequence[str]) -> list[tuple[str, ...]]:
    """Every joint state of ``parents``, the last parent varying fastest."""
    configs: list[tuple[str, ...]] = [()]
    for parent in parents:
        configs = [(*c, s) for c in configs for s in STATES[parent]]
    return configs


def sample(rows: int, seed: int) -> pandas.DataFrame:
    """Draw ``rows`` tiles by ancestral sampling (one vectorised draw per variable)."""
    if rows < 1:
        raise ValueError("rows must be at least 1")
    check_network()
    rng = np.random.default_rng(seed)
    codes: dict[str, np.ndarray] = {}
    for name in COLUMNS:
        parents = PARENTS[name]
        matrix = np.array([CPTS[name][c] for c in _configurations(parents)], dtype=np.float64)
        config = np.zeros(rows, dtype=np.int64)
        for parent in parents:  # mixed radix, last parent fastest, as in _configurations
            config = config * len(STATES[parent]) + codes[parent]
        cumulative = np.cumsum(matrix, axis=1)
        cumulative[:, -1] = 1.0
        draw = rng.random(rows)
        codes[name] = (draw[:, None] >= cumulative[config]).sum(axis=1)
    return pandas.DataFrame(
        {name: np.asarray(STATES[name], dtype=object)[codes[name]] for name in COLUMNS}
    )


def csv_bytes(rows: int = DEFAULT_ROWS, seed: int = DEFAULT_SEED) -> bytes:
    """The generated table as CSV bytes (header, ``\\n`` line ends, UTF-8)."""
    return sample(rows, seed).to_csv(index=False, lineterminator="\n").encode("utf-8")


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        description="Write the invented kiln-line data set (a ceramic tile line) as CSV.")
    parser.add_argument("--rows", type=int, default=DEFAULT_ROWS, help="tiles to draw")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="random seed")
    parser.add_argument("--out", default=DEFAULT_OUT, help="CSV file to write")
    args = parser.parse_args(argv)
    if args.rows < 1:
        parser.error("--rows must be at least 1")
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_bytes(csv_bytes(args.rows, args.seed))
    print(f"wrote {args.rows:,} rows to {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
