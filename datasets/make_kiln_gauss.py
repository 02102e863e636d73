"""Write datasets/kiln-gauss.csv: invented continuous measurements of the kiln line.

Everything here is invented for the demo. Six measurements per tile, drawn from the
linear-Gaussian network below (ancestral sampling, one vectorised draw per variable with
``numpy.random.default_rng(seed)``), rounded to 3 decimals. Run from the repository root::

    python datasets/make_kiln_gauss.py --rows 2000 --seed 20261202 --out datasets/kiln-gauss.csv

The network (noise terms e ~ N(0, sd^2), independent):

    moisture    = 6.0 + e                                             sd 0.8   (% water)
    kiln_peak   = 1180 + e                                            sd 15    (deg C)
    press_force = 300 + 12 moisture + e                               sd 10    (kN)
    dwell       = 45 + 0.2 (kiln_peak - 1180) + e                     sd 4     (min)
    shrinkage   = 6.5 + 0.03 (kiln_peak - 1180) + 0.05 (dwell - 45)
                  - 0.4 (moisture - 6) + e                            sd 0.3   (%)
    strength    = 40 + 0.05 (press_force - 372) + 2 (shrinkage - 6.5) + e  sd 1.5  (MPa)
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np

COLUMNS = ("moisture", "kiln_peak", "press_force", "dwell", "shrinkage", "strength")
TRUE_EDGES = (("moisture", "press_force"), ("kiln_peak", "dwell"), ("kiln_peak", "shrinkage"),
              ("dwell", "shrinkage"), ("moisture", "shrinkage"), ("press_force", "strength"),
              ("shrinkage", "strength"))


def sample(rows: int, seed: int) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    moisture = 6.0 + rng.normal(0, 0.8, rows)
    kiln_peak = 1180 + rng.normal(0, 15, rows)
    press_force = 300 + 12 * moisture + rng.normal(0, 10, rows)
    dwell = 45 + 0.2 * (kiln_peak - 1180) + rng.normal(0, 4, rows)
    shrinkage = (6.5 + 0.03 * (kiln_peak - 1180) + 0.05 * (dwell - 45)
                 - 0.4 * (moisture - 6) + rng.normal(0, 0.3, rows))
    strength = (40 + 0.05 * (press_force - 372) + 2 * (shrinkage - 6.5)
                + rng.normal(0, 1.5, rows))
    return dict(zip(COLUMNS, (moisture, kiln_peak, press_force, dwell, shrinkage, strength),
                    strict=True))


def csv_text(rows: int, seed: int) -> str:
    data = sample(rows, seed)
    lines = [",".join(COLUMNS)]
    for r in range(rows):
        lines.append(",".join(f"{data[c][r]:.3f}" for c in COLUMNS))
    return "\n".join(lines) + "\n"


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=2000)
    parser.add_argument("--seed", type=int, default=20261202)
    parser.add_argument("--out", default="datasets/kiln-gauss.csv")
    args = parser.parse_args()
    Path(args.out).write_text(csv_text(args.rows, args.seed), encoding="utf-8")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
