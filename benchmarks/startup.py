"""Start-up time of the command and the package: a tree before a change against after it.

Usage::

    python -m benchmarks --startup [--startup-before REF] [--startup-spec PATH]
                                   [--repeats 10] [--out benchmarks]

Each case is a fresh ``python`` process started with the tree first on ``PYTHONPATH`` and
the tree as its working folder: ``dagmill --version`` (``python -m runner --version``),
``dagmill validate SPEC`` (default ``specs/kiln-line.yaml``: the spec is read, its data
loaded and checked), ``import dagmill``, and ``python -c pass`` (the interpreter alone,
the floor under every other row). *After* is this working tree as it is (uncommitted
changes included); *before* is ``--startup-before`` (a commit, default ``HEAD``) exported
with ``git archive`` into a temporary folder. Every process is started once unmeasured
(it compiles the bytecode and warms the file cache), then ``--repeats`` times per tree,
the two trees alternating (before first in even rounds, after first in odd ones) so a
change of the machine's load falls on both. The table gives the median wall seconds of
each, its CPU seconds (user + system, from ``getrusage``: less sensitive to other load)
and the ratios before / after; ``RESULTS-startup.json`` (every time measured) and
``RESULTS-startup.md`` are written into ``--out``. Wall time is that of a whole process,
so a busy machine shows in it: compare ratios rather than seconds across machines.
"""

from __future__ import annotations

import argparse
import io
import json
import os
import platform
import resource
import statistics
import subprocess
import sys
import tarfile
import tempfile
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
DEFAULT_SPEC = "specs/kiln-line.yaml"


def cases(spec: str) -> dict[str, list[str]]:
    """The measured commands (arguments after ``python``), by the name the table shows."""
    return {
        "dagmill --version": ["-m", "runner", "--version"],
        f"dagmill validate {spec}": ["-m", "runner", "validate", spec],
        "import dagmill": ["-c", "import dagmill"],
        "python -c pass": ["-c", "pass"],
    }


def export_tree(ref: str, into: Path) -> Path:
    """The files of commit ``ref`` of this repository, written under ``into``."""
    archive = subprocess.run(["git", "-C", str(ROOT), "archive", "--format=tar", ref],
                             capture_output=True, check=True).stdout
    tree = into / "before"
    tree.mkdir()
    with tarfile.open(fileobj=io.BytesIO(archive)) as tar:
        tar.extractall(tree, filter="data")
    return tree


def _environment(tree: Path) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items()
           if k not in ("PYTHONDONTWRITEBYTECODE", "PYTHONSTARTUP", "PYTHONPROFILEIMPORTTIME")}
    env["PYTHONPATH"] = str(tree)
    return env


def check_tree(tree: Path) -> None:
    """Refuse a tree whose ``runner`` is not the one Python imports from it."""
    found = subprocess.run([sys.executable, "-c", "import runner; print(runner.__file__)"],
                           cwd=tree, env=_environment(tree), capture_output=True, text=True,
                           check=True).stdout.strip()
    if Path(found).resolve() != (tree / "runner" / "__init__.py").resolve():
        raise SystemExit(f"{tree}: python imports runner from {found}, not from the tree")


def seconds(tree: Path, arguments: Sequence[str]) -> tuple[float, float]:
    """Wall and CPU seconds (user + system) of one ``python ARGUMENTS`` process in
    ``tree``; it must exit 0."""
    used = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    done = subprocess.run([sys.executable, *arguments], cwd=tree, env=_environment(tree),
                          capture_output=True, text=True)
    elapsed = time.perf_counter() - start
    now = resource.getrusage(resource.RUSAGE_CHILDREN)
    if done.returncode != 0:
        raise SystemExit(f"{tree}: python {' '.join(arguments)} exited {done.returncode}:\n"
                         f"{done.stderr.strip()}")
    return elapsed, (now.ru_utime - used.ru_utime) + (now.ru_stime - used.ru_stime)


def measure(trees: dict[str, Path], arguments: Sequence[str], repeats: int
            ) -> dict[str, dict[str, list[float]]]:
    """Every tree's wall and CPU seconds of ``arguments``, the trees alternating round
    by round."""
    names = list(trees)
    for name in names:
        seconds(trees[name], arguments)  # unmeasured: bytecode and file cache
    times: dict[str, dict[str, list[float]]] = {name: {"wall": [], "cpu": []} for name in names}
    for round_ in range(repeats):
        for name in names if round_ % 2 == 0 else reversed(names):
            wall, cpu = seconds(trees[name], arguments)
            times[name]["wall"].append(wall)
            times[name]["cpu"].append(cpu)
    return times


def machine_line() -> str:
    return (f"{platform.machine()} {os.cpu_count()} cores, {platform.platform()}, "
            f"Python {platform.python_version()}, load average "
            f"{' '.join(f'{x:.2f}' for x in os.getloadavg())} at the end")


def table(rows: Sequence[dict[str, Any]], before: str, repeats: int, machine: str) -> str:
    lines = ["# Start-up time", "",
             f"Median seconds of {repeats} fresh processes per tree (the trees alternating): "
             "wall time, and CPU time (user + system, less sensitive to other load on the "
             f"machine); before = `{before}`, after = the working tree; ratio = before / "
             "after. `python -m benchmarks --startup` (`benchmarks/startup.py`).", "",
             "| command | before (s) | after (s) | ratio | before CPU (s) | after CPU (s) "
             "| CPU ratio |",
             "| --- | --- | --- | --- | --- | --- | --- |"]
    for r in rows:
        lines.append(f"| `{r['case']}` | {r['before_s']:.3f} | {r['after_s']:.3f} | "
                     f"{r['ratio']:.2f} | {r['before_cpu_s']:.3f} | {r['after_cpu_s']:.3f} | "
                     f"{r['cpu_ratio']:.2f} |")
    return "\n".join([*lines, "", f"Machine: {machine}.", ""])


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """The start-up case's options (``python -m benchmarks --startup ...``)."""
    group = parser.add_argument_group("start-up time (--startup)")
    group.add_argument("--startup-before", default="HEAD", metavar="REF",
                       help="the commit measured as before (default HEAD)")
    group.add_argument("--startup-spec", default=DEFAULT_SPEC, metavar="PATH",
                       help=f"the spec validated, relative to each tree (default {DEFAULT_SPEC})")


def run(args: argparse.Namespace) -> int:
    """Measure both trees; print each row as it is done; write the two result files."""
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(prefix="dagmill-startup-") as folder:
        trees = {"before": export_tree(args.startup_before, Path(folder)), "after": ROOT}
        for tree in trees.values():
            check_tree(tree)
        rows = []
        for case, arguments in cases(args.startup_spec).items():
            times = measure(trees, arguments, args.repeats)
            wall = {n: statistics.median(times[n]["wall"]) for n in trees}
            cpu = {n: statistics.median(times[n]["cpu"]) for n in trees}
            row = {"case": case, "before_s": wall["before"], "after_s": wall["after"],
                   "ratio": wall["before"] / wall["after"], "before_cpu_s": cpu["before"],
                   "after_cpu_s": cpu["after"], "cpu_ratio": cpu["before"] / cpu["after"],
                   "seconds": times}
            print(json.dumps({k: v for k, v in row.items() if k != "seconds"}), flush=True)
            rows.append(row)
    machine = machine_line()
    (out / "RESULTS-startup.json").write_text(json.dumps(
        {"before": args.startup_before, "repeats": args.repeats, "machine": machine,
         "cases": rows}, indent=2, sort_keys=True) + "\n")
    text = table(rows, args.startup_before, args.repeats, machine)
    (out / "RESULTS-startup.md").write_text(text)
    print(text)
    return 0


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks --startup",
                                     description=__doc__.splitlines()[0])
    parser.add_argument("--startup", action="store_true", help="this suite (the default here)")
    parser.add_argument("--repeats", type=int, default=10)
    parser.add_argument("--out", default=str(Path(__file__).parent))
    add_arguments(parser)
    return run(parser.parse_args(argv))


if __name__ == "__main__":
    raise SystemExit(main())
