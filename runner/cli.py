"""The ``dagmill`` command: parses arguments, calls the pipeline, formats the answer.

Exit codes: 0 success; 1 a check failed (a rerun that does not reproduce its twin, a
gate failure against the baseline, no baseline to check against, or `verify` found a
problem); 2 bad input (spec, data, arguments, unknown run); 3 an environment fault
(permissions, a full disk, memory, a lost worker or scheduler): one line, no traceback
unless --debug. Human output goes to stdout,
warnings to stderr; ``--json`` prints one JSON document and nothing else on stdout.
"""

from __future__ import annotations

import argparse
import errno
import json
import sys
import traceback
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

# Only what the parser needs is imported here: each command imports its modules when it
# runs, so `dagmill --version` and argument errors never load the pipeline (numpy, pandas,
# networkx, the record models); tests/test_startup.py holds this.
from runner import __version__
from runner.engines import ENGINE_ENV, InProcess, choose_engine, open_engine
from runner.errors import EnvironmentFault, InputError, Problem
from runner.export import FORMATS
from runner.project import DEFAULT_SPECS, SPECS_ENV

if TYPE_CHECKING:
    from runner.batch import SpecOutcome
    from runner.pipeline import RunResult

EXIT_CODES = """exit codes:
  0  success
  1  a check failed: a gate, a rerun that differs from its twin, no baseline, verify
  2  bad input: spec, data, arguments, an unknown run (one line per problem)
  3  an environment fault: permissions, a full disk, memory, a lost worker or scheduler
     (one line; --debug shows the traceback)"""


class _Parser(argparse.ArgumentParser):
    """argparse that reports bad arguments as input errors (exit 2, no traceback)."""

    def error(self, message: str) -> None:  # type: ignore[override]
        raise InputError(Problem("command line", message))


def _seed(text: str) -> int:
    """``--seed``: an integer from 0 to 2**63 - 1 (what a seeded generator takes)."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not an integer: {text!r}") from None
    if not 0 <= value < 2**63:
        raise argparse.ArgumentTypeError(f"must be from 0 to 2**63-1, got {value}")
    return value


def _engine_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--workers", type=int, metavar="N",
                   help="worker processes (default: the number of cores; 1: in this process)")
    p.add_argument("--engine", metavar="ENGINE",
                   help=f"local | dask-local | dask://HOST:PORT (default ${ENGINE_ENV} or local)")
    p.add_argument("--quiet", action="store_true", help="no progress bar on stderr")


def _spec_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("specs", nargs="*", metavar="SPEC",
                   help=f"spec files or folders of specs (default: ${SPECS_ENV} or "
                   f"{DEFAULT_SPECS}/); a spec found in a folder is skipped when up to date")
    p.add_argument("--force", action="store_true",
                   help="learn the specs found in a folder even when they are up to date")


def _parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="dagmill", description=__doc__.splitlines()[0], epilog=EXIT_CODES,
                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--version", action="version", version=f"dagmill {__version__}")
    parser.add_argument("--debug", action="store_true",
                        help="show the traceback of an environment fault (exit 3)")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)

    p = sub.add_parser("validate", help="check specs and their data; report every problem")
    p.add_argument("specs", nargs="+", metavar="SPEC")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("run", help="learn and store a run for each spec (default: the "
                       "project's specs that are not up to date)")
    _spec_options(p)
    p.add_argument("--data", help="learn on this CSV instead of the spec's dataset")
    p.add_argument("--seed", type=_seed, help="override search.seed (0 to 2**63-1)")
    p.add_argument("--results", help="results folder (default $DAGMILL_RESULTS or ./results)")
    p.add_argument("--json", action="store_true")
    _engine_options(p)

    p = sub.add_parser("show", help="a stored run's summary, or a variation summary's "
                       "edge shares")
    p.add_argument("run", metavar="RUN", help="a run id (or unique prefix, or run folder), "
                   "or the id of a variation summary (results/<spec>/variations/<id>.json)")
    p.add_argument("--results")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("compare", help="two runs side by side: scores, edges, distances; "
                       "or two variation summaries: the change of each edge's share")
    p.add_argument("run_a", metavar="RUN_A", help="a run, or a variation summary's id")
    p.add_argument("run_b", metavar="RUN_B", help="a run, or a variation summary's id")
    p.add_argument("--data", help="rescore on this CSV even if its hash differs from the runs'")
    p.add_argument("--results")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("pin", help="make RUN the baseline of its spec")
    p.add_argument("run", metavar="RUN")
    p.add_argument("--results")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("check", help="re-learn specs and hold them against their baselines")
    _spec_options(p)
    p.add_argument("--data", help="a new data drop (same columns) to learn on")
    p.add_argument("--junit", metavar="FILE", help="write a JUnit XML report here")
    p.add_argument("--results")
    p.add_argument("--json", action="store_true")
    _engine_options(p)

    p = sub.add_parser("overview", help="the project board: each spec's last run, whether "
                       "it is up to date (and why not), baseline and last check")
    p.add_argument("folder", nargs="?", metavar="FOLDER",
                   help=f"the spec folder (default: ${SPECS_ENV} or {DEFAULT_SPECS}/)")
    p.add_argument("--html", metavar="FILE", help="also write the board as an HTML page")
    p.add_argument("--results")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("history", help="the runs of a spec, oldest first")
    p.add_argument("spec", metavar="SPEC", help="a spec file or a spec name")
    p.add_argument("--results")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("schema", help="print the JSON Schema of a spec (default), a run "
                       "record or a baseline")
    which = p.add_mutually_exclusive_group()
    which.add_argument("--record", action="store_true",
                       help="the schema of run.json (format version 2)")
    which.add_argument("--baseline", action="store_true",
                       help="the schema of baseline.json (format version 2)")

    p = sub.add_parser("export", help="a run's learned graph as GraphML, DOT or JSON")
    p.add_argument("run", metavar="RUN")
    p.add_argument("--format", required=True, choices=FORMATS)
    p.add_argument("--out", metavar="FILE", help="write here instead of stdout")
    p.add_argument("--results")

    p = sub.add_parser("report", help="a self-contained HTML report of a run (or of a "
                       "variation summary), with pictures")
    p.add_argument("run", metavar="RUN", help="a run id (or unique prefix, or run folder), "
                   "or the id of a variation summary: its combinations and edge shares")
    p.add_argument("--vs", metavar="OTHER_RUN", help="overlay a second run's network")
    p.add_argument("--out", metavar="FILE", help="the HTML file (default "
                   "report-<run id>[-vs-<other id>].html in the current folder)")
    p.add_argument("--show-forbidden", action="store_true",
                   help="also draw the spec's forbidden pairs")
    p.add_argument("--results")

    p = sub.add_parser("verify", help="check every stored record, model, trace, baseline, "
                       "the chain of runs and (with --public-key) their signatures")
    p.add_argument("specs", nargs="*", metavar="SPEC",
                   help="spec files or spec names (default: every spec in the results folder)")
    p.add_argument("--public-key", metavar="FILE",
                   help="an Ed25519 public key (PEM): every record and baseline must be "
                   "signed by its private key")
    p.add_argument("--results")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("keygen", help="write an Ed25519 key pair for signing records into DIR")
    p.add_argument("dir", metavar="DIR")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("demo", help="copy the kiln-line scenario into DIR and run it")
    p.add_argument("dir", nargs="?", default="dagmill-demo", metavar="DIR")
    p.add_argument("--json", action="store_true")
    for command in sub.choices.values():
        command.add_argument("--debug", action="store_true", dest="debug_here",
                             help="show the traceback of an environment fault (exit 3)")
    return parser


def _warn(problems: Sequence[Problem]) -> None:
    for p in problems:
        print(p.format(), file=sys.stderr)


def _cmd_validate(args: argparse.Namespace) -> int:
    from runner.pipeline import validate

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


def _learn_specs(args: argparse.Namespace, root: Path,
                 reuse_bins: bool | None = None, vary: bool = True) -> list[SpecOutcome]:
    """``run``/``check``: the SPEC arguments as spec files (none: the project's specs),
    all prepared before any is learned, the up-to-date project specs skipped unless
    ``--force``; the engine is opened only when there is something to learn."""
    from runner.batch import learn_planned, plan_specs
    from runner.partitioned import rows_on_engine
    from runner.progress import Reporter
    from runner.project import spec_arguments

    refs = spec_arguments(args.specs)
    if args.data is not None and len(refs) > 1:
        raise InputError(Problem("command line", "--data goes with a single spec", key="--data"))
    choice = choose_engine(args.engine, args.workers)
    if choice.capped:
        print(choice.capped, file=sys.stderr)
    seed = getattr(args, "seed", None)
    with rows_on_engine(choice):  # a Parquet folder under Dask: rows read on the workers
        planned = plan_specs([r.path for r in refs], root, data_path=args.data, seed=seed,
                             reuse_bins=reuse_bins,
                             project={r.path for r in refs if r.discovered},
                             force=args.force, vary=vary)
        if all(p.current is not None for p in planned):
            return learn_planned(planned, root, InProcess())  # nothing to learn
        with open_engine(choice) as engine:
            return learn_planned(planned, root, engine, seed=seed,
                                 reporter=Reporter(args.quiet))


def _outcome_lines(outcomes: Sequence[SpecOutcome], up_to_date: bool = True) -> list[str]:
    """The lines of the specs that were not learned (up to date, unless ``up_to_date`` is
    false; failed) and, for several specs, the count of each."""
    from runner.batch import FAILED, LEARNED, UP_TO_DATE

    lines = []
    for o in outcomes:
        if o.status == UP_TO_DATE and up_to_date:
            assert o.result is not None
            lines.append(f"{o.name}: up to date: run {o.result.run_id}")
        elif o.status == FAILED:
            lines.append(f"{o.name}: FAILED: {len(o.problems)} problem(s) (on stderr)")
    if len(outcomes) > 1:
        counts = {s: sum(o.status == s for o in outcomes) for s in (LEARNED, UP_TO_DATE, FAILED)}
        lines.append(f"{len(outcomes)} spec(s): {counts[LEARNED]} learned, "
                     f"{counts[UP_TO_DATE]} up to date"
                     + (f", {counts[FAILED]} failed" if counts[FAILED] else ""))
    return lines


def _failed(outcomes: Sequence[SpecOutcome]) -> bool:
    """Print the problems of the specs that failed while learning; whether any did."""
    from runner.batch import FAILED

    problems = [p for o in outcomes if o.status == FAILED for p in o.problems]
    for problem in problems:
        print(f"error: {problem.format()}", file=sys.stderr)
    return any(o.status == FAILED for o in outcomes)


def _cmd_run(args: argparse.Namespace) -> int:
    from runner.batch import LEARNED
    from runner.present.text import run_table, variation_run_lines
    from runner.store import read_variation, results_root

    root = results_root(args.results)
    outcomes = _learn_specs(args, root)
    out, mismatch, shown = [], [], []
    for outcome in outcomes:
        result = outcome.result
        if result is None:
            continue
        _warn(result.warnings)  # stderr, so also under --json
        if outcome.status != LEARNED:
            continue
        twin = None
        if result.twin is not None:
            twin = {"run_id": result.twin["run_id"], "identical": result.twin_identical}
            if not result.twin_identical:
                mismatch.append(result)
        rec = result.record
        out.append({"run_id": result.run_id, "folder": str(result.folder),
                    "score": rec["score"]["value"], "edges": len(rec["edges"]),
                    "graph_sha256": rec["graph_sha256"], "twin": twin})
        shown.append({"run_id": result.run_id, "record": rec, "twin": twin})
    if args.json:
        print(json.dumps({"runs": out, "specs": [o.as_dict() for o in outcomes]},
                         indent=2, sort_keys=True))
    else:
        if shown:
            print(run_table(shown))
        for item in out:
            print(f"stored: {item['folder']}")
            print(f"report: dagmill report {item['run_id']} --results {root}")
        for path in dict.fromkeys(o.summary for o in outcomes if o.summary is not None):
            print("\n".join(variation_run_lines(read_variation(path), root)))
        for line in _outcome_lines(outcomes):
            print(line)
    for result in mismatch:
        print(_not_reproduced(result, root), file=sys.stderr)
    if _failed(outcomes):
        return 2
    return 1 if mismatch else 0


def _not_reproduced(result: RunResult, root: Path) -> str:
    """The message of a rerun that differs from its twin: what differs, whether the
    numeric environment does (and how), and the compare command."""
    from runner.environment import environment_changes, environment_sentence

    assert result.twin is not None
    twin, new = result.twin["run_id"], result.run_id
    env = environment_changes(result.twin, result.record)
    return (f"NOT REPRODUCED: {result.record['spec_name']}: run {new} has the same inputs as "
            f"run {twin} but a different {' and '.join(result.twin_differences)} (the new "
            f"record is stored)\n  "
            f"{environment_sentence(env, results_differ=True, names=(twin, new))}"
            f"\n  see: dagmill compare {twin} {new} --results {root}")


def _variation_ref(root: Path, ref: str) -> Path | None:
    """The variation summary ``ref`` names (its id or a unique prefix that names no
    run), or None: then ``ref`` is a run."""
    from runner.store import all_runs, find_variation

    summary = find_variation(root, ref) if not Path(ref).is_dir() else None
    if summary is not None and (summary.stem == ref or not any(
            p.name.startswith(ref) for p in all_runs(root))):
        return summary
    return None


def _cmd_show(args: argparse.Namespace) -> int:
    """``show RUN``; RUN may also be a variation summary's id (or a unique prefix)."""
    from runner.present.text import summary_lines, variation_lines, variation_table
    from runner.store import read_run, read_variation, resolve_run, results_root, variations_of_run

    root = results_root(args.results)
    summary = _variation_ref(root, args.run)
    if summary is not None:
        doc = read_variation(summary)
        print(json.dumps(doc, indent=2, sort_keys=True) if args.json else variation_table(doc))
        return 0
    folder = resolve_run(root, args.run)
    record = read_run(folder)
    if args.json:
        print(json.dumps(record, indent=2, sort_keys=True))
    else:
        lines = summary_lines(record, folder) + variation_lines(
            variations_of_run(root, record["spec_name"], record["run_id"]), record["run_id"])
        print("\n".join(lines))
    return 0


def _cmd_compare(args: argparse.Namespace) -> int:
    from runner import compare
    from runner.present.text import compare_lines
    from runner.store import read_run, resolve_run, results_root

    root = results_root(args.results)
    summaries = [_variation_ref(root, ref) for ref in (args.run_a, args.run_b)]
    if any(s is not None for s in summaries):
        return _compare_variations(args, summaries)
    a, b = (read_run(resolve_run(root, ref)) for ref in (args.run_a, args.run_b))
    if a["spec_name"] != b["spec_name"]:
        print(f"warning: comparing runs of two different specs ({a['spec_name']!r} and "
              f"{b['spec_name']!r}); inputs and scores may not be comparable", file=sys.stderr)
    rescored: dict[str, Any] | None = None
    if compare.needs_rescore(a, b) or (args.data is not None
                                       and not compare.score_delta(a, b)["comparable"]):
        from runner.compare.rescore import rescore  # the pipeline: only to rescore

        try:
            rescored = {
                "a_under_b": rescore(a, b["score"]["name"], b["score"].get("ess"), args.data,
                                     (b.get("spec") or {}).get("score"), root),
                "b_under_a": rescore(b, a["score"]["name"], a["score"].get("ess"), args.data,
                                     (a.get("spec") or {}).get("score"), root),
            }
        except InputError as exc:
            reason = "; ".join(p.format() for p in exc.problems)
            print(f"warning: not rescored: {reason}", file=sys.stderr)
            rescored = {"skipped": reason}
    result = compare.compare_records(a, b, rescored)
    if args.json:
        print(json.dumps(result, indent=2, sort_keys=True))
    else:
        print("\n".join(compare_lines(result)))
    return 0


def _compare_variations(args: argparse.Namespace, paths: Sequence[Path | None]) -> int:
    """``compare`` of two variation summaries: the change of each edge's share and of
    the stable core."""
    from runner.compare.variations import compare_variations
    from runner.present.text import variation_compare_lines
    from runner.store import read_variation

    if any(p is None for p in paths):
        raise InputError(Problem("command line", "compare takes two runs or two variation "
                                 "summaries, not one of each", key="RUN_B"))
    if args.data is not None:
        raise InputError(Problem("command line", "--data rescores runs; two variation "
                                 "summaries are compared by their stored shares", key="--data"))
    a, b = (read_variation(p) for p in paths if p is not None)
    if a["spec_name"] != b["spec_name"]:
        print(f"warning: comparing variations of two different specs ({a['spec_name']!r} "
              f"and {b['spec_name']!r})", file=sys.stderr)
    result = compare_variations(a, b)
    if args.json:
        print(json.dumps(result, indent=2, sort_keys=True))
    else:
        print("\n".join(variation_compare_lines(result)))
    return 0


def _cmd_pin(args: argparse.Namespace) -> int:
    from datetime import UTC, datetime

    from runner.present.text import baseline_changes
    from runner.store import read_run, resolve_run, results_root, write_baseline

    root = results_root(args.results)
    folder = resolve_run(root, args.run)
    record = read_run(folder)
    stamp = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    new, old, path = write_baseline(root, record, stamp)
    changes = baseline_changes(old, new)
    if args.json:
        print(json.dumps({"baseline": str(path), "run_id": new["run_id"],
                          "replaced": None if old is None else old["run_id"],
                          "changes": changes}, indent=2, sort_keys=True))
    else:
        print(f"pinned {new['run_id']} as the baseline of {new['spec_name']} ({path})")
        print("\n".join(f"  {line}" for line in changes))
    return 0


def _cmd_check(args: argparse.Namespace) -> int:
    """``check``; bad input (exit 2) still writes ``--junit FILE``, with an error case."""
    from runner import compare
    from runner.store import atomic_write_text

    try:
        return _check(args)
    except InputError as exc:
        if args.junit:
            names = _junit_names(args.specs)
            atomic_write_text(Path(args.junit), compare.junit_error_xml(
                names, [p.format() for p in exc.problems]))
        raise


def _junit_names(specs: Sequence[str]) -> list[str]:
    """The names of the JUnit error case: the spec files' stems (none when the SPEC
    arguments cannot even be listed)."""
    from runner.project import spec_arguments

    try:
        return [Path(ref.path).stem for ref in spec_arguments(specs)]
    except InputError:
        return [Path(s).stem for s in specs]


def _check(args: argparse.Namespace) -> int:
    """``check``: an up-to-date project spec is not learned again: its latest stored run
    is held against the baseline instead, and no new ``check.json`` is written."""
    from runner import compare
    from runner.api import hold_against_baseline
    from runner.batch import UP_TO_DATE
    from runner.present.text import check_table
    from runner.store import atomic_write_text, results_root

    root = results_root(args.results)
    reports, seconds, texts = [], {}, []
    outcomes = _learn_specs(args, root, reuse_bins=True, vary=False)  # the spec's own settings
    results = [o.result for o in outcomes if o.result is not None]
    reused = {o.result.run_id for o in outcomes
              if o.status == UP_TO_DATE and o.result is not None}
    for result in results:
        _warn(result.warnings)  # stderr, so also under --json
        record = result.record
        # a re-used up-to-date run keeps what it has: no new check.json
        report = hold_against_baseline(root, record, result.folder,
                                       write_outcome=result.run_id not in reused)
        seconds[record["spec_name"]] = record["seconds"]["total"]
        reports.append(report)
        texts.append(check_table(report))
    for report in reports:
        report["up_to_date"] = report["run_id"] in reused
    ok = all(r["ok"] for r in reports)
    if args.junit:
        atomic_write_text(Path(args.junit), compare.junit_xml(reports, seconds))
    if args.json:
        print(json.dumps({"ok": ok, "checks": reports,
                          "specs": [o.as_dict() | {"ok": _spec_ok(o, reports)}
                                    for o in outcomes]}, indent=2, sort_keys=True))
    else:
        print("\n\n".join(f"{r['spec']}: up to date: run {r['run_id']} (not learned "
                           f"again; held against the baseline)\n{text}" if r["up_to_date"]
                           else text for r, text in zip(reports, texts, strict=True)))
        print(f"\n{sum(r['ok'] for r in reports)} of {len(reports)} check(s) passed")
        for line in _outcome_lines(outcomes, up_to_date=False):
            print(line)
    if _failed(outcomes):
        return 2
    return 0 if ok else 1


def _spec_ok(outcome: SpecOutcome, reports: Sequence[dict[str, Any]]) -> bool | None:
    """Whether the check of one spec passed (None when it failed before a check)."""
    if outcome.result is None:
        return None
    return next(r["ok"] for r in reports if r["run_id"] == outcome.result.run_id)


def _cmd_overview(args: argparse.Namespace) -> int:
    """``overview``: one row per spec of the project; exit 0 whatever the rows say (a spec
    that does not validate is a row, not an error)."""
    from runner.present.text import overview_table
    from runner.project import project_board, specs_folder
    from runner.store import atomic_write_text, results_root

    root = results_root(args.results)
    board = project_board(specs_folder(args.folder), root).as_dict()
    if args.html is not None:
        from runner.present.overview import render_overview

        out = _out_path(args.html)
        atomic_write_text(out, render_overview(board))
        print(f"wrote {out}", file=sys.stderr if args.json else sys.stdout)
    if args.json:
        print(json.dumps(board, indent=2, sort_keys=True))
    else:
        print(overview_table(board))
    return 0


def _spec_name(ref: str) -> str:
    from runner.spec import load_spec

    path = Path(ref)
    if path.is_file():
        return load_spec(path).name
    return ref


def _cmd_history(args: argparse.Namespace) -> int:
    from runner import compare
    from runner.present.text import history_table
    from runner.store import list_runs, read_baseline, read_check_outcome, read_run, results_root

    root = results_root(args.results)
    name = _spec_name(args.spec)
    folders = list_runs(root, name)
    if not folders:
        raise InputError(Problem(str(root), f"no stored runs of spec {name!r}", key="SPEC"))
    baseline = read_baseline(root, name)
    records: list[dict[str, Any] | None] = []
    checks: list[dict[str, Any] | None] = []
    for folder in folders:
        record = check = None
        try:
            record = read_run(folder)
            check = read_check_outcome(folder)
        except InputError as exc:  # listed as refused (a record) or as a plain run
            _warn([Problem(p.file, p.message, p.line, p.key, severity="warning")
                   for p in exc.problems])
        records.append(record)
        checks.append(check)
    rows = compare.history_rows(records, [f.name for f in folders],
                                None if baseline is None else baseline["run_id"], checks)
    if args.json:
        print(json.dumps({"spec": name, "runs": rows}, indent=2, sort_keys=True))
        return 0
    print(history_table(rows))
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
    from runner.export import export
    from runner.store import atomic_write_text, read_model, read_run, resolve_run, results_root

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
    from runner.store import atomic_write_text, read_model, read_run, resolve_run

    folder = resolve_run(root, ref)
    record = read_run(folder)
    model = read_model(folder, record)
    other = None if other_ref is None else read_run(resolve_run(root, other_ref))
    path = _out_path(out) if out is not None else default_report_path(record, other)
    atomic_write_text(path, render_report(record, folder, model, other, show_forbidden))
    return path


def _write_variation_report(root: Path, summary_path: Path, out: str | None) -> Path:
    from runner.present.report import default_variation_report_path, render_variation_report
    from runner.store import atomic_write_text, read_run, read_variation, resolve_run

    summary = read_variation(summary_path)
    first = summary["combinations"][0]["run_id"]
    record = read_run(resolve_run(root, str(root / summary["spec_name"] / "runs" / first)))
    path = _out_path(out) if out is not None else default_variation_report_path(summary)
    atomic_write_text(path, render_variation_report(summary, record))
    return path


def _cmd_report(args: argparse.Namespace) -> int:
    from runner.store import results_root

    root = results_root(args.results)
    summary = _variation_ref(root, args.run)
    if summary is not None:
        if args.vs is not None:
            raise InputError(Problem("command line", "--vs takes runs; compare two variation "
                                     "summaries with `dagmill compare A B`", key="--vs"))
        print(f"wrote {_write_variation_report(root, summary, args.out)}")
        return 0
    path = _write_report(results_root(args.results), args.run, args.vs, args.out,
                         args.show_forbidden)
    print(f"wrote {path}")
    return 0


def _cmd_schema(args: argparse.Namespace) -> int:
    from runner.record import baseline_json_schema, record_json_schema
    from runner.spec import spec_json_schema

    schema = (record_json_schema() if args.record else
              baseline_json_schema() if args.baseline else spec_json_schema())
    print(json.dumps(schema, indent=2, sort_keys=True))
    return 0


def _cmd_demo(args: argparse.Namespace) -> int:
    from runner.demo import write_demo
    from runner.pipeline import run_spec
    from runner.present.text import summary_lines

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


def _cmd_verify(args: argparse.Namespace) -> int:
    from runner.audit import stored_specs, verify_spec
    from runner.signing import load_public_key
    from runner.store import results_root

    root = results_root(args.results)
    key = None if args.public_key is None else load_public_key(args.public_key)
    names = [_spec_name(ref) for ref in args.specs] or stored_specs(root)
    missing = [n for n in names if not (root / n).is_dir()]
    if missing or not names:
        raise InputError(Problem(str(root), "nothing stored to verify" if not names else
                                 f"no stored runs of spec {missing[0]!r}", key="SPEC"))
    audits = [verify_spec(root, name, key) for name in names]
    ok = all(a.ok for a in audits)
    if args.json:
        print(json.dumps({"ok": ok, "results": str(root), "signatures_checked": key is not None,
                          "specs": [a.as_dict() for a in audits]}, indent=2, sort_keys=True))
        return 0 if ok else 1
    for audit in audits:
        signed = (f", {audit.signed} signed" if key is None else
                  ", signatures checked") if audit.signed or key is not None else ""
        print(f"{audit.spec_name}: {audit.runs} run(s), {audit.sealed} chained{signed}; "
              f"baseline: {audit.baseline}: {'ok' if audit.ok else 'PROBLEMS'}")
        for finding in audit.problems:
            print(f"  {finding.file}: {finding.problem}")
        for note in audit.notes:
            print(f"  note: {note}")
    print(f"{sum(a.ok for a in audits)} of {len(audits)} spec(s) verified"
          + ("" if key is not None else "; signatures not checked (no --public-key)"))
    return 0 if ok else 1


def _cmd_keygen(args: argparse.Namespace) -> int:
    from runner.signing import KEY_ENV, generate_key_pair

    private, public = generate_key_pair(Path(args.dir))
    if args.json:
        print(json.dumps({"private_key": str(private), "public_key": str(public)},
                         indent=2, sort_keys=True))
        return 0
    print(f"private key: {private} (keep it out of the repository; set {KEY_ENV} to its "
          "path to sign)")
    print(f"public key:  {public} (commit it; `dagmill verify --public-key` checks with it)")
    return 0


def _check_signing_key() -> None:
    """A signing key named by the environment is loaded before any work (bad: exit 2)."""
    from runner.signing import signer_from_environment

    signer_from_environment()


COMMANDS = {"export": _cmd_export, "validate": _cmd_validate, "run": _cmd_run, "show": _cmd_show,
            "compare": _cmd_compare, "pin": _cmd_pin, "check": _cmd_check,
            "history": _cmd_history, "schema": _cmd_schema, "demo": _cmd_demo,
            "report": _cmd_report, "verify": _cmd_verify, "keygen": _cmd_keygen,
            "overview": _cmd_overview}


#: errno values that are the machine's fault, not the input's: exit 3 with advice.
_FAULT_ADVICE = {
    errno.EACCES: "no permission: check the folder's owner and mode",
    errno.EPERM: "not permitted: check the folder's owner and mode",
    errno.EROFS: "the file system is read-only: choose another --results folder",
    errno.ENOSPC: "the disk is full: free space or choose another --results folder",
    errno.EDQUOT: "the disk quota is exhausted: free space or choose another folder",
    errno.ENAMETOOLONG: "a name is longer than the file system allows: shorten it",
    errno.EMFILE: "too many open files: raise the limit (ulimit -n) or use fewer --workers",
    errno.ENFILE: "the system's open-file table is full: retry later",
    errno.EIO: "an input/output error from the device: check the disk",
}


def _fault_line(exc: BaseException) -> str | None:
    """The one line for an environment fault, or None when ``exc`` is not one."""
    if isinstance(exc, EnvironmentFault):
        return f"error: {exc}"
    if isinstance(exc, MemoryError):
        return ("error: out of memory: use a smaller parent_cap or budget, fewer --workers, "
                "or a machine with more memory")
    if isinstance(exc, OSError) and exc.errno in _FAULT_ADVICE:
        where = exc.filename if exc.filename is not None else "the file system"
        return f"error: {where}: {exc.strerror}: {_FAULT_ADVICE[exc.errno]}"
    return None


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the console script; returns the exit code: 0 success, 1 a check
    failed, 2 bad input, 3 an environment fault (see the module docstring)."""
    debug = "--debug" in (sys.argv[1:] if argv is None else argv)
    try:
        args = _parser().parse_args(argv)
        if args.command in ("run", "check", "pin"):
            _check_signing_key()
        return COMMANDS[args.command](args)
    except InputError as exc:
        for problem in exc.problems:
            print(f"error: {problem.format()}", file=sys.stderr)
        return 2
    except (EnvironmentFault, OSError, MemoryError) as exc:
        line = _fault_line(exc)
        if line is None:
            raise
        if debug:
            traceback.print_exc(file=sys.stderr)
        print(line, file=sys.stderr)
        return 3
    except KeyboardInterrupt:
        print("interrupted; nothing half-written was kept", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
