"""The ``dagmill`` command: parses arguments, calls the pipeline, formats the answer.

Exit codes: 0 success; 1 a check failed (a rerun that does not reproduce its twin, a
gate failure against the baseline, or no baseline to check against);
2 bad input (spec, data, arguments, unknown run). Human output goes to stdout,
warnings to stderr; ``--json`` prints one JSON document and nothing else on stdout.
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from runner import __version__, compare
from runner.batch import run_specs
from runner.engines import ENGINE_ENV, choose_engine, open_engine
from runner.environment import environment_changes, environment_sentence
from runner.errors import EngineFailure, InputError, Problem
from runner.export import FORMATS, export
from runner.format import render_table, summary_lines
from runner.pipeline import RunResult, run_spec, validate
from runner.progress import Reporter
from runner.record import baseline_json_schema, record_json_schema
from runner.spec import load_spec, spec_json_schema
from runner.store import (
    atomic_write_text,
    list_runs,
    read_baseline,
    read_model,
    read_run,
    resolve_run,
    results_root,
    write_baseline,
)


class _Parser(argparse.ArgumentParser):
    """argparse that reports bad arguments as input errors (exit 2, no traceback)."""

    def error(self, message: str) -> None:  # type: ignore[override]
        raise InputError(Problem("command line", message))


def _engine_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--workers", type=int, metavar="N",
                   help="worker processes (default: the number of cores; 1: in this process)")
    p.add_argument("--engine", metavar="ENGINE",
                   help=f"local | dask-local | dask://HOST:PORT (default ${ENGINE_ENV} or local)")
    p.add_argument("--quiet", action="store_true", help="no progress bar on stderr")


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
    _engine_options(p)

    p = sub.add_parser("show", help="a stored run's summary")
    p.add_argument("run", metavar="RUN")
    p.add_argument("--results")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("compare", help="two runs side by side: scores, edges, distances")
    p.add_argument("run_a", metavar="RUN_A")
    p.add_argument("run_b", metavar="RUN_B")
    p.add_argument("--data", help="rescore on this CSV even if its hash differs from the runs'")
    p.add_argument("--results")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("pin", help="make RUN the baseline of its spec")
    p.add_argument("run", metavar="RUN")
    p.add_argument("--results")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("check", help="re-learn specs and hold them against their baselines")
    p.add_argument("specs", nargs="+", metavar="SPEC")
    p.add_argument("--data", help="a new data drop (same columns) to learn on")
    p.add_argument("--junit", metavar="FILE", help="write a JUnit XML report here")
    p.add_argument("--results")
    p.add_argument("--json", action="store_true")
    _engine_options(p)

    p = sub.add_parser("history", help="the runs of a spec, oldest first")
    p.add_argument("spec", metavar="SPEC", help="a spec file or a spec name")
    p.add_argument("--results")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("schema", help="print the JSON Schema of a spec (default), a run "
                       "record or a baseline")
    which = p.add_mutually_exclusive_group()
    which.add_argument("--record", action="store_true",
                       help="the schema of run.json (format version 1)")
    which.add_argument("--baseline", action="store_true",
                       help="the schema of baseline.json (format version 1)")

    p = sub.add_parser("export", help="a run's learned graph as GraphML, DOT or JSON")
    p.add_argument("run", metavar="RUN")
    p.add_argument("--format", required=True, choices=FORMATS)
    p.add_argument("--out", metavar="FILE", help="write here instead of stdout")
    p.add_argument("--results")

    p = sub.add_parser("report", help="a self-contained HTML report of a run, with pictures")
    p.add_argument("run", metavar="RUN")
    p.add_argument("--vs", metavar="OTHER_RUN", help="overlay a second run's network")
    p.add_argument("--out", metavar="FILE", help="the HTML file (default "
                   "report-<run id>[-vs-<other id>].html in the current folder)")
    p.add_argument("--show-forbidden", action="store_true",
                   help="also draw the spec's forbidden pairs")
    p.add_argument("--results")

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
    rows, out, mismatch = [], [], []
    choice = choose_engine(args.engine, args.workers)
    with open_engine(choice) as engine:
        results = run_specs(args.specs, root, engine, data_path=args.data, seed=args.seed,
                            reporter=Reporter(args.quiet))
    for result in results:
        if not args.json:
            _warn(result.warnings)
        twin = None
        if result.twin is not None:
            twin = {"run_id": result.twin["run_id"], "identical": result.twin_identical}
            if not result.twin_identical:
                mismatch.append(result)
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
            print(f"report: dagmill report {item['run_id']} --results {root}")
    for result in mismatch:
        print(_not_reproduced(result, root), file=sys.stderr)
    return 1 if mismatch else 0


def _not_reproduced(result: RunResult, root: Path) -> str:
    """The message of a rerun that differs from its twin: what differs, whether the
    numeric environment does (and how), and the compare command."""
    assert result.twin is not None
    twin, new = result.twin["run_id"], result.run_id
    env = environment_changes(result.twin, result.record)
    return (f"NOT REPRODUCED: {result.record['spec_name']}: run {new} has the same inputs as "
            f"run {twin} but a different {' and '.join(result.twin_differences)} (the new "
            f"record is stored)\n  "
            f"{environment_sentence(env, results_differ=True, names=(twin, new))}"
            f"\n  see: dagmill compare {twin} {new} --results {root}")


def _cmd_show(args: argparse.Namespace) -> int:
    folder = resolve_run(results_root(args.results), args.run)
    record = read_run(folder)
    if args.json:
        print(json.dumps(record, indent=2, sort_keys=True))
    else:
        print("\n".join(summary_lines(record, folder)))
    return 0


def _cmd_compare(args: argparse.Namespace) -> int:
    root = results_root(args.results)
    a, b = (read_run(resolve_run(root, ref)) for ref in (args.run_a, args.run_b))
    if a["spec_name"] != b["spec_name"]:
        print(f"warning: comparing runs of two different specs ({a['spec_name']!r} and "
              f"{b['spec_name']!r}); inputs and scores may not be comparable", file=sys.stderr)
    rescored: dict[str, Any] | None = None
    if compare.needs_rescore(a, b) or (args.data is not None
                                       and not compare.score_delta(a, b)["comparable"]):
        try:
            rescored = {
                "a_under_b": compare.rescore(a, b["score"]["name"], b["score"].get("ess") or 1.0,
                                             args.data, (b.get("spec") or {}).get("score")),
                "b_under_a": compare.rescore(b, a["score"]["name"], a["score"].get("ess") or 1.0,
                                             args.data, (a.get("spec") or {}).get("score")),
            }
        except InputError as exc:
            reason = "; ".join(p.format() for p in exc.problems)
            print(f"warning: not rescored: {reason}", file=sys.stderr)
            rescored = {"skipped": reason}
    result = compare.compare_records(a, b, rescored)
    if args.json:
        print(json.dumps(result, indent=2, sort_keys=True))
    else:
        print("\n".join(compare.compare_lines(result)))
    return 0


def _cmd_pin(args: argparse.Namespace) -> int:
    root = results_root(args.results)
    folder = resolve_run(root, args.run)
    record = read_run(folder)
    stamp = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    new, old, path = write_baseline(root, record, stamp)
    changes = compare.baseline_changes(old, new)
    if args.json:
        print(json.dumps({"baseline": str(path), "run_id": new["run_id"],
                          "replaced": None if old is None else old["run_id"],
                          "changes": changes}, indent=2, sort_keys=True))
    else:
        print(f"pinned {new['run_id']} as the baseline of {new['spec_name']} ({path})")
        print("\n".join(f"  {line}" for line in changes))
    return 0


def _cmd_check(args: argparse.Namespace) -> int:
    root = results_root(args.results)
    if args.data is not None and len(args.specs) > 1:
        raise InputError(Problem("command line", "--data goes with a single spec", key="--data"))
    reports, seconds, texts = [], {}, []
    choice = choose_engine(args.engine, args.workers)
    with open_engine(choice) as engine:
        results = run_specs(args.specs, root, engine, data_path=args.data,
                            reuse_bins=True,
                            reporter=Reporter(args.quiet))
    for result in results:
        if not args.json:
            _warn(result.warnings)
        record = result.record
        baseline = read_baseline(root, record["spec_name"])
        if baseline is None:
            pin = f"dagmill pin {result.run_id} --results {root}"
            report = compare.missing_baseline_report(record, pin)
        else:
            pinned = root / record["spec_name"] / "runs" / baseline["run_id"]
            # refuses a hand-edited baseline run (exit 2)
            pinned_record = read_run(pinned) if pinned.is_dir() else None
            report = compare.evaluate_gate(baseline, record, record["spec"]["gate"],
                                           pinned_record)
        report["folder"] = str(result.folder)
        seconds[record["spec_name"]] = record["seconds"]["total"]
        reports.append(report)
        texts.append(compare.check_table(report))
    ok = all(r["ok"] for r in reports)
    if args.junit:
        atomic_write_text(Path(args.junit), compare.junit_xml(reports, seconds))
    if args.json:
        print(json.dumps({"ok": ok, "checks": reports}, indent=2, sort_keys=True))
    else:
        print("\n\n".join(texts))
        print(f"\n{sum(r['ok'] for r in reports)} of {len(reports)} check(s) passed")
    return 0 if ok else 1


def _spec_name(ref: str) -> str:
    path = Path(ref)
    if path.is_file():
        return load_spec(path).name
    return ref


def _cmd_history(args: argparse.Namespace) -> int:
    root = results_root(args.results)
    name = _spec_name(args.spec)
    folders = list_runs(root, name)
    if not folders:
        raise InputError(Problem(str(root), f"no stored runs of spec {name!r}", key="SPEC"))
    baseline = read_baseline(root, name)
    records: list[dict[str, Any] | None] = []
    for folder in folders:
        try:
            records.append(read_run(folder))
        except InputError as exc:
            _warn([Problem(p.file, p.message, p.line, p.key, severity="warning")
                   for p in exc.problems])
            records.append(None)
    rows = compare.history_rows(records, [f.name for f in folders],
                                None if baseline is None else baseline["run_id"])
    if args.json:
        print(json.dumps({"spec": name, "runs": rows}, indent=2, sort_keys=True))
        return 0
    table = [["*" if r["baseline"] else "", r.get("time") or "-", r["run_id"],
              "REFUSED" if r["refused"] else r["data_sha256"],
              "" if r["refused"] else str(r["rows"]), r.get("code_version", ""),
              "" if r["refused"] else f"{r['score']} {r['per_row']:.6f}",
              "" if r["refused"] else str(r["edges"]),
              "-" if r.get("shd_previous") is None else str(r["shd_previous"])] for r in rows]
    print(render_table(["base", "time", "run", "data", "rows", "code", "score/row", "edges",
                        "shd prev"], table))
    if baseline is None:
        print(f"no baseline; pin one with: dagmill pin RUN --results {root}")
    return 0


def _out_path(option: str) -> Path:
    out = Path(option)
    if not out.parent.is_dir():
        raise InputError(Problem(str(out), f"folder {str(out.parent)!r} does not exist",
                                 key="--out"))
    return out


def _cmd_export(args: argparse.Namespace) -> int:
    folder = resolve_run(results_root(args.results), args.run)
    record = read_run(folder)
    text = export(record, args.format, read_model(folder, record))
    if args.out is None:
        sys.stdout.write(text)
        return 0
    out = _out_path(args.out)
    atomic_write_text(out, text)
    print(f"wrote {out}")
    return 0


def _write_report(root: Path, ref: str, other_ref: str | None, out: str | None,
                  show_forbidden: bool = False) -> Path:
    from runner.present.report import default_report_path, render_report

    folder = resolve_run(root, ref)
    record = read_run(folder)
    model = read_model(folder, record)
    other = None if other_ref is None else read_run(resolve_run(root, other_ref))
    path = _out_path(out) if out is not None else default_report_path(record, other)
    atomic_write_text(path, render_report(record, folder, model, other, show_forbidden))
    return path


def _cmd_report(args: argparse.Namespace) -> int:
    path = _write_report(results_root(args.results), args.run, args.vs, args.out,
                         args.show_forbidden)
    print(f"wrote {path}")
    return 0


def _cmd_schema(args: argparse.Namespace) -> int:
    schema = (record_json_schema() if args.record else
              baseline_json_schema() if args.baseline else spec_json_schema())
    print(json.dumps(schema, indent=2, sort_keys=True))
    return 0


def _cmd_demo(args: argparse.Namespace) -> int:
    from runner.demo import write_demo

    target = Path(args.dir)
    spec_path = write_demo(target)
    result = run_spec(spec_path, target / "results")
    rec = result.record
    report = _write_report(target / "results", str(result.folder), None,
                           str(target / f"report-{result.run_id}.html"))
    if args.json:
        print(json.dumps({"spec": str(spec_path), "run_id": result.run_id,
                          "folder": str(result.folder), "score": rec["score"]["value"],
                          "edges": len(rec["edges"]), "report": str(report)},
                         indent=2, sort_keys=True))
        return 0
    print(f"demo scenario written to {target}/ (spec {spec_path})")
    print("\n".join(summary_lines(rec, result.folder)))
    print(f"report: {report}")
    return 0


COMMANDS = {"export": _cmd_export, "validate": _cmd_validate, "run": _cmd_run, "show": _cmd_show,
            "compare": _cmd_compare, "pin": _cmd_pin, "check": _cmd_check,
            "history": _cmd_history, "schema": _cmd_schema, "demo": _cmd_demo,
            "report": _cmd_report}


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the console script; returns the exit code."""
    try:
        args = _parser().parse_args(argv)
        return COMMANDS[args.command](args)
    except InputError as exc:
        for problem in exc.problems:
            print(f"error: {problem.format()}", file=sys.stderr)
        return 2
    except EngineFailure as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("interrupted; nothing half-written was kept", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
