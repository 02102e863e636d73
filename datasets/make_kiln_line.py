"""Regenerate datasets/kiln-line.csv from the invented kiln-line network.

The ground truth (tiers, true edges, probability tables) and the sampler live in
``runner/demo/kiln_line.py`` so that ``dagmill demo`` can write the same file on any
machine. Run from the repository root::

    python datasets/make_kiln_line.py --rows 20000 --seed 20261201
"""

from runner.demo.kiln_line import main

if __name__ == "__main__":
    raise SystemExit(main())
