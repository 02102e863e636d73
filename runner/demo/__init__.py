"""The embedded demo: the invented kiln-line scenario, written out and ready to run."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from runner.demo.kiln_line import DEFAULT_ROWS, DEFAULT_SEED, csv_bytes
from runner.errors import InputError, Problem

SPEC_NAME = "kiln-line.yaml"
DATA_NAME = "kiln-line.csv"
DEMO_ROWS = DEFAULT_ROWS
DEMO_SEED = DEFAULT_SEED


def demo_files() -> dict[str, bytes]:
    """Relative path -> bytes of the scenario: the spec and the generated data."""
    spec = resources.files("runner.demo").joinpath(SPEC_NAME).read_bytes()
    return {f"specs/{SPEC_NAME}": spec,
            f"datasets/{DATA_NAME}": csv_bytes(DEMO_ROWS, DEMO_SEED)}


def write_demo(target: Path) -> Path:
    """Write the scenario under ``target`` and return the spec's path.

    Files already there with the same bytes are left alone; a file with other content
    is never overwritten (exit 2 instead), so nothing of the user's is lost.
    """
    files = demo_files()
    clashes = [rel for rel, data in files.items()
               if (target / rel).exists() and (target / rel).read_bytes() != data]
    if clashes:
        raise InputError([Problem(str(target / rel), "exists with other content; choose an "
                                  "empty folder for the demo") for rel in clashes])
    for rel, data in files.items():
        path = target / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        if not path.exists():
            path.write_bytes(data)
    return target / "specs" / SPEC_NAME
