"""The ``dagmill`` command: parses arguments, calls the pipeline, formats the answer.

Exit codes: 0 success; 1 a check failed (a rerun that does not reproduce its twin);
2 bad input (spec, data, arguments, unknown run). Human output goes to stdout,
warnings to stderr; ``--json`` prints one JSON document and nothing else on stdout.
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from runner import __version__
from runner.errors import InputError, Problem
from runner.format import render_table, summary_lines
from runner.pipeline import run_spec, validate
from runner.spec import spec_json_schema
from runner.store import read_run, resolve_run, results_root


class _Parser(argparse.ArgumentParser):
    """argparse that reports bad arguments as input errors (exit 2, no traceback)."""

    def error(self, message: str) -> None:  # type: ignore[override]
        raise InputError(Problem("command line", message))


def _parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="dagmill", description=__doc__.splitlines()[0])
    parser.add_argument("--version", action="version", version=f"dagmill {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)

    p = sub.add_parser("validate", help="check specs and their data; report every problem")
    p.add_argument("specs", nargs="+", metavar="SPEC")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("run", help="learn and store a run for each spec")
    p.add_argument("specs", nargs="+", metavar="SPEC")
    p.add_argument("--data", help="learn on this CSV instead of the spec's dataset")
    p.add_argument("--seed", type=int, help="override search.seed")
    p.add_argument("--results", help="results folder (default $DAGMILL_RESULTS or ./results)")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("show", help="a stored run's summary")
    p.add_argument("run", metavar="RUN")
    p.add_argument("--results")
    p.add_argument("--json", action="store_true")

    sub.add_parser("schema", help="print the spec's JSON Schema")

    p = sub.add_parser("demo", help="copy the kiln-line scenario into DIR and run it")
    p.add_argument("dir", nargs="?", default="dagmill-demo", metavar="DIR")
    p.add_argument("--json", action="store_true")
    return parser


def _warn(problems: Sequence[Problem]) -> None:
    for p in problems:
        print(p.format(), file=sys.stderr)


def _cmd_validate(args: argparse.Namespace) -> int:
    report: list[dict[str, Any]] = []
    failed = False
    for spec in args.specs:
        errors, warnings = validate(spec)
        failed |= bool(errors)
        report.append({"spec": spec, "ok": not errors,
                       "errors": [p.format() for p in errors],
                       "warnings": [p.format() for p in warnings]})
        if not args.json:
            _warn(warnings)
            for p in errors:
                print(p.format())
            print(f"{spec}: {'ok' if not errors else f'{len(errors)} problem(s)'}")
    if args.json:
        print(json.dumps({"specs": report}, indent=2, sort_keys=True))
    return 2 if failed else 0


def _cmd_run(args: argparse.Namespace) -> int:
    root = results_root(args.results)
    if args.data is not None and len(args.specs) > 1:
        raise InputError(Problem("command line", "--data goes with a single spec", key="--data"))
    rows, out, mismatch = [], [], False
    for spec in args.specs:
        result = run_spec(spec, root, data_path=args.data, seed=args.seed)
        if not args.json:
            _warn(result.warnings)
        twin = None
        if result.twin is not None:
            twin = {"run_id": result.twin["run_id"], "identical": result.twin_identical}
            mismatch |= not result.twin_identical
        rec = result.record
        out.append({"run_id": result.run_id, "folder": str(result.folder),
                    "score": rec["score"]["value"], "edges": len(rec["edges"]),
                    "graph_sha256": rec["graph_sha256"], "twin": twin})
        twin_text = "-" if twin is None else (
            f"{twin['run_id']} identical" if twin["identical"] else f"{twin['run_id']} DIFFERS")
        rows.append([rec["spec_name"], result.run_id, rec["score"]["name"],
                     f"{rec['score']['value']:.4f}", str(len(rec["edges"])),
                     rec["search"]["stop_reason"], twin_text])
    if args.json:
        print(json.dumps({"runs": out}, indent=2, sort_keys=True))
    else:
        print(render_table(["spec", "run", "score", "value", "edges", "stop", "twin"], rows))
        for item in out:
            print(f"stored: {item['folder']}")
    if mismatch:
        print("NOT REPRODUCED: a run with the same inputs as an earlier one gave a different "
              "graph or score (the new record is stored); see `dagmill show` of both runs",
              file=sys.stderr)
        return 1
    return 0


def _cmd_show(args: argparse.Namespace) -> int:
    folder = resolve_run(results_root(args.results), args.run)
    record = read_run(folder)
    if args.json:
        print(json.dumps(record, indent=2, sort_keys=True))
    else:
        print("\n".join(summary_lines(record, folder)))
    return 0


def _cmd_schema(args: argparse.Namespace) -> int:
    print(json.dumps(spec_json_schema(), indent=2, sort_keys=True))
    return 0


def _cmd_demo(args: argparse.Namespace) -> int:
    from runner.demo import write_demo

    target = Path(args.dir)
    spec_path = write_demo(target)
    result = run_spec(spec_path, target / "results")
    rec = result.record
    if args.json:
        print(json.dumps({"spec": str(spec_path), "run_id": result.run_id,
                          "folder": str(result.folder), "score": rec["score"]["value"],
                          "edges": len(rec["edges"])}, indent=2, sort_keys=True))
        return 0
    print(f"demo scenario written to {target}/ (spec {spec_path})")
    print("\n".join(summary_lines(rec, result.folder)))
    return 0


COMMANDS = {"validate": _cmd_validate, "run": _cmd_run, "show": _cmd_show,
            "schema": _cmd_schema, "demo": _cmd_demo}


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the console script; returns the exit code."""
    try:
        args = _parser().parse_args(argv)
        return COMMANDS[args.command](args)
    except InputError as exc:
        for problem in exc.problems:
            print(f"error: {problem.format()}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("interrupted; nothing half-written was kept", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
