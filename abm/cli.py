"""Undertow: simulate a freight crossing, estimate the flow no record shows, and compare inspection policies.

The ``undertow`` command.
Every sub-command reports bad input as one line on stderr and exit code 2
(never a traceback); an internal fault prints one line and exits 1 unless
``UNDERTOW_DEBUG=1`` asks for the traceback.
"""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .errors import InputError, refuse_unwritable
from .cli_options import (
    ALLOW_LARGE_HELP, SHARED_OUTPUT_HELP, non_negative_float, non_negative_int, positive_int, scheduler_address, seed_value,
    version_text, warmup_days,
)
from .reference import FILE_KINDS as _KINDS

if TYPE_CHECKING:
    from .experiment.executors import Placement
    from .report.document import Document
    from .world.words import Words

EXIT_OK, EXIT_FAULT, EXIT_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors in one line with exit code 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.exit(EXIT_INPUT, f"{self.prog}: {message}\n")


FILE_KINDS = tuple(_KINDS)  # world, experiment, calibration, optimisation


def _file_kind(path: str) -> str:
    """A file's kind: its ``kind:``, else experiment when it names a ``world:``, else world."""
    from .world import WorldFileError, read_yaml_mapping

    try:
        data = read_yaml_mapping(path)
    except WorldFileError:
        return "world"  # unreadable: the world check gives the one-line message
    kind = data.get("kind", "experiment" if "world" in data else "world")
    if kind not in FILE_KINDS:
        raise InputError(f"{path}: kind: expected one of {', '.join(FILE_KINDS)}, got {kind!r}")
    return str(kind)


def cmd_check(args: argparse.Namespace) -> int:
    """Validate files of every kind the tool reads, by their ``kind:``; print a world's load report."""
    from .analysis.policy_search.optimisation_file import describe_optimisation
    from .calibration.config import describe_calibration
    from .experiment.batch import load_warnings
    from .experiment.design import describe_experiment, load_plan
    from .port.load import load_report
    from .world import load_world

    for path in args.files:
        kind = _file_kind(path)
        if kind == "experiment":
            print(describe_experiment(path, args.allow_large))
            print("\n".join(load_warnings(load_plan(path, allow_large=args.allow_large)))
                  or "  no design point's world is overloaded")
        elif kind == "calibration":
            print(describe_calibration(path, args.allow_large))
        elif kind == "optimisation":
            print(describe_optimisation(path, args.allow_large))
        else:
            world = load_world(path)
            print(f"{path}: ok ({world.name}; {len(world.stations)} stations, "
                  f"{len(world.boarding_points)} boarding points)")
            print("\n".join(load_report(world).lines()))
    return EXIT_OK


def cmd_schema(args: argparse.Namespace) -> int:
    """Print the JSON Schema of a file kind, for editors that complete and validate YAML."""
    from .reference import schema_text

    print(schema_text(args.kind))
    return EXIT_OK


def print_summary(summary: dict, title: str, words: Words | None = None) -> None:
    """A short readable table of a run's headline figures, in display labels, each with its record set."""
    from .experiment.compare import readable
    from .experiment.single import METHOD_LABELS, SUMMARY_LABELS
    from .world.words import GENERIC

    words = words or GENERIC

    def label(key: str) -> str:
        if key in SUMMARY_LABELS:
            return words.fill(SUMMARY_LABELS[key])
        for figure, shown in sorted(METHOD_LABELS.items(), key=lambda kv: -len(kv[0])):  # longest suffix first
            if key.startswith("method_") and key.endswith("_" + figure):
                return f"{key[len('method_'):-len(figure) - 1]}: {shown}"
        return key

    print(title)
    sources = summary.get("sources", {})
    # a land border has no departures to miss: no row rather than an n/a
    skipped = {"sources"} | (set() if words.departs else {"missed_departure_share"})
    rows = {label(key): (value, sources.get(key, "")) for key, value in summary.items() if key not in skipped}
    width = max(map(len, rows), default=0) + 2
    shares = {label(key) for key in summary if key.endswith("_share")}  # shown as percentages
    for name, (value, source) in rows.items():
        if isinstance(value, float):  # 4,704 not 4,704.000; a share as a percentage to 2 significant digits
            shown = readable(value, share=name in shares, figures=2 if name in shares else 3)
        else:
            shown = "n/a" if value is None else (f"{value:,}" if isinstance(value, int) else str(value))
        print(f"  {name:<{width}}{shown:>14}  {source}")
    print("  (truth = simulated ground truth; observed = what an agency would hold. Model estimates, not counts.)")


def _run_world(
    world_path: Path, days: int, seed: int, out: Path, argv: list[str], allow_large: bool = False, warmup: int = 0
) -> int:
    """Simulate ``warmup`` + ``days`` days into ``out``; the summary covers the ``days`` after the warm-up."""
    from .experiment.batch import print_warning
    from .experiment.budget import SHOWN_VEHICLE_DAYS, Keys, PlanSize, busiest_day, refuse
    from .experiment.single import refuse_existing, run_to_directory
    from .port.load import load_report
    from .progress import progress
    from .world import file_hash, load_world
    from .world.words import words_for

    world = load_world(world_path)
    refuse_existing(out)  # before the warnings, so a refused --out stays a one-line error
    refuse_unwritable(out)
    size = PlanSize(1, warmup + days, busiest_day(world.model_dump(mode="json")))
    days_key = "--days" if not warmup else "--days and --warmup"
    refuse(size, Keys("traffic.vehicles_per_day", days_key, days_key), out, allow_large,
           lambda key, message: InputError(f"{key if key.startswith('--') else f'{world_path}: {key}'}: {message}"))
    if size.vehicle_days > SHOWN_VEHICLE_DAYS:
        print_warning(size.describe())
    for warning in load_report(world).warnings:
        print_warning(warning)
    with progress(warmup + days, "days", "simulating") as bar:
        summary = run_to_directory(world, file_hash(world_path), days, seed, out, command=argv, progress=bar.update,
                                   warmup=warmup)
    after = f" after a {warmup}-day warm-up (days {warmup}-{warmup + days - 1})" if warmup else ""
    print_summary(summary, f"{world.name}: {days} days{after}, seed {seed} -> {out}", words_for(world))
    # the comparison's before window starts after the warm-up, as the summary does
    if any(warmup < iv.day < warmup + days for iv in world.interventions):
        from .analysis.displacement.comparison import write_displacement

        result = write_displacement(out)
        print(f"\nBefore and after the intervention on day {world.interventions[0].day} ({world.interventions[0].name}):")
        print(result.summary())
    return EXIT_OK


def cmd_run(args: argparse.Namespace) -> int:
    """Simulate a world for some days and write a run directory."""
    world = Path(args.world)
    kind = _file_kind(args.world)
    if kind != "world":
        command = {"experiment": "batch", "calibration": "calibrate", "optimisation": "optimise"}[kind]
        article = "an" if kind[0] in "aeio" else "a"
        raise InputError(f"{world}: is {article} {kind} file; run it with undertow {command} {world} --out DIR")
    out = Path(args.out) if args.out else Path("outputs") / f"{world.parent.name or world.stem}-seed{args.seed}"
    return _run_world(world, args.days, args.seed, out, ["undertow", *args.argv], args.allow_large, args.warmup)


# Where the summary extension of batches and the demo (cached_estimates) lives, for the pool's server to preload.
BATCH_EXTENSION_MODULES = ("abm.analysis.estimator_check.cache",)


def _interrupted(command: str, out: str | Path) -> int:
    """Ctrl-C during a resumable command: say what is kept and how to go on."""
    print(f"undertow {command}: interrupted; complete runs are kept in {out}; add --resume to finish", file=sys.stderr)
    return EXIT_INTERRUPTED


def cmd_demo(args: argparse.Namespace) -> int:
    """The whole job on the demo world: calibrate to the agency extract, compare policies under it, brief."""
    _start_pool_server("processes", None, BATCH_EXTENSION_MODULES)
    from .demo import run_demo

    try:
        failed = run_demo(Path(args.out), args.resume, args.workers, ["undertow", *args.argv], _brief_stage)
    except KeyboardInterrupt:
        return _interrupted("demo", args.out)
    return EXIT_FAULT if failed else EXIT_OK


BATCH_ONLY_OPTIONS = (("baseline", "--baseline"), ("max_delay_increase", "--max-delay-increase"),
                      ("max_missed_increase", "--max-missed-increase"))


def cmd_brief(args: argparse.Namespace) -> int:
    """Write a briefing: a batch folder's (OUT/briefing.html and .md) or one run directory's report
    (RUN_DIR/run_report.html and .md), each with its figures."""
    from .experiment.store import EXPERIMENT_FILE
    from .report.briefing import parse_formats
    from .report.run_view import is_run_directory

    out = Path(args.out)
    formats = parse_formats(args.format)
    if not out.is_dir():
        raise InputError(f"{out}: no such folder; give a run directory or a batch folder")
    if (out / EXPERIMENT_FILE).is_file():
        document, paths = _brief_batch(args, formats)
    elif is_run_directory(out):
        given = [option for name, option in BATCH_ONLY_OPTIONS if getattr(args, name) is not None]
        if given:
            raise InputError(f"{given[0]}: compares policies in a batch folder; {out} is one run directory")
        from .report.run_report import brief_run

        built, paths = brief_run(out, formats, ["undertow", *args.argv], _brief_stage)
        document = built.document
    else:
        raise InputError(f"{out}: neither a run directory (no manifest.json with files.json, as undertow run writes) "
                         f"nor a batch folder (no {EXPERIMENT_FILE}, as undertow batch and demo write)")
    print(f"Bottom line (model estimates, not counts). {document.bottom_line}\n")
    for path in paths.values():
        print(path)
    return EXIT_OK


def _brief_batch(args: argparse.Namespace, formats: tuple[str, ...]) -> tuple[Document, dict[str, Path]]:
    """A batch folder's briefing, with the delay limits' defaults where none was given."""
    from .analysis.policy_table import DelayLimits
    from .report.briefing import brief

    delay = 10.0 if args.max_delay_increase is None else args.max_delay_increase
    missed = 1.0 if args.max_missed_increase is None else args.max_missed_increase
    briefing, paths = brief(args.out, args.baseline, formats, DelayLimits(delay / 100, missed),
                            ["undertow", *args.argv], _brief_stage)
    return briefing.document, paths


def _brief_stage(stage: str) -> None:
    print(f"briefing: {stage}", file=sys.stderr, flush=True)


def cmd_compare(args: argparse.Namespace) -> int:
    """Compare a baseline run with a policy run: where attempts moved and whether the effect is real."""
    from .analysis.displacement.comparison import displacement_between_runs

    print(displacement_between_runs(args.run_a, args.run_b, warmup=args.warmup).summary())
    return EXIT_OK


def cmd_estimate(args: argparse.Namespace) -> int:
    """Estimate the unobserved flow from a run directory's observed records or a folder of observed tables."""
    from .estimate.report import estimate_command

    estimate_command(args.records, args.window, args.level, args.sensitivity, args.seed, out_dir=args.out)
    return EXIT_OK


def cmd_export(args: argparse.Namespace) -> int:
    """Write a run's or a batch's tables as CSV files or one xlsx workbook."""
    from .experiment.batch import print_warning
    from .experiment.export import export_command

    export_command(args.folder, args.format, args.out, ["undertow", *args.argv], print_warning)
    return EXIT_OK


def _start_pool_server(
    executor: str | None, scheduler: str | None = None, extension_modules: tuple[str, ...] = ()
) -> None:
    """For the processes executor or a local Dask cluster, start the fork server their workers come from.

    It starts before this process imports the engine, so both imports (about 1.5 s each) run at once
    on two cores instead of one after the other.
    """
    from .experiment.fork_server import start_server_for

    start_server_for(executor, scheduler, extension_modules)


def _placement(args: argparse.Namespace) -> Placement:
    """Where the command's runs execute."""
    from .experiment.executors import Placement

    return Placement(args.executor, args.workers, args.scheduler, args.shared_output)


def cmd_batch(args: argparse.Namespace) -> int:
    """Run every run of an experiment into a batch folder; print the per-design-point comparison."""
    _start_pool_server(args.executor, args.scheduler, BATCH_EXTENSION_MODULES)
    from .analysis.estimator_check.cache import cached_estimates
    from .experiment.batch import batch_command

    command = ["undertow", *args.argv]
    try:
        # every estimator's result becomes summary columns, so briefings can weigh them against truth
        ok = batch_command(
            args.experiment, args.out, _placement(args), args.resume, command, extensions=(cached_estimates,),
            allow_large=args.allow_large,
        )
    except KeyboardInterrupt:
        return _interrupted("batch", args.out)
    return EXIT_OK if ok else EXIT_FAULT


def cmd_calibrate(args: argparse.Namespace) -> int:
    """Fit unknown inflow and behaviour to observed records by ABC over the model; print the posterior."""
    _start_pool_server(args.executor, args.scheduler)
    from .calibration.run import calibrate_command

    try:
        calibrate_command(
            args.calibration, args.out, _placement(args), args.resume, args.check, ["undertow", *args.argv],
            args.allow_large, keep_runs=args.keep_runs,
        )
    except KeyboardInterrupt:
        return _interrupted("calibrate", args.out)
    return EXIT_OK


def cmd_new(args: argparse.Namespace) -> int:
    """Write a starting world of a kind of crossing, or an experiment for a world; never over a file."""
    from .starter import copy_example, experiment_text, world_text, write_new

    out = Path(args.out)
    if args.what == "example":
        files = copy_example(args.name, out)
        print(f"Copied the example world {args.name} to {out} ({len(files)} files; fictional, numbers invented and "
              f"illustrative). Next: `undertow check {out / 'world.yaml'}`.")
    elif args.what == "world":
        write_new(out, world_text(args.kind), f"{args.kind} world")
        print(f"Wrote {out}: a {args.kind} world to start from; every number in it is invented and illustrative. "
              f"Next: replace the numbers with your own, then `undertow check {out}`.")
    else:
        write_new(out, experiment_text(Path(args.world), out), "experiment")
        print(f"Wrote {out}: an experiment comparing today's roster with two example changes. "
              f"Next: edit the policies, then `undertow check {out}` and `undertow batch {out} --out FOLDER`.")
    return EXIT_OK


def cmd_optimise(args: argparse.Namespace) -> int:
    """Search policies under constraints with common random numbers; print the best and the runner-ups."""
    _start_pool_server(args.executor, args.scheduler)
    from .analysis.policy_search.run import optimise_command

    try:
        optimise_command(
            args.optimisation, args.out, _placement(args), args.resume, args.check, ["undertow", *args.argv],
            args.allow_large, keep_runs=args.keep_runs,
        )
    except KeyboardInterrupt:
        return _interrupted("optimise", args.out)
    return EXIT_OK

class _Version(argparse.Action):
    """``--version``: one unwrapped line, computed only when asked."""

    def __call__(self, parser: argparse.ArgumentParser, *_: object) -> None:
        print(version_text())
        parser.exit(EXIT_OK)


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every sub-command."""
    parser = _Parser(prog="undertow", description=__doc__.splitlines()[0])
    parser.add_argument("--version", action=_Version, nargs=0, help="print the versions and exit")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)
    _add_file_commands(sub)
    _add_run_commands(sub)
    _add_reading_commands(sub)
    _add_search_commands(sub)
    return parser


def _add_placement(command: argparse.ArgumentParser) -> None:
    """The options saying where a command's runs execute (:class:`abm.experiment.executors.Placement`)."""
    command.add_argument(
        "--executor", choices=["serial", "processes", "dask"], help="where runs execute (default serial; dask with --scheduler)"
    )
    command.add_argument("--workers", type=positive_int, help="worker processes (default: one per CPU)")
    command.add_argument("--scheduler", type=scheduler_address, metavar="ADDRESS", help="an existing Dask scheduler, e.g. tcp://10.0.0.5:8786")
    command.add_argument("--shared-output", action="store_true", help=SHARED_OUTPUT_HELP)


def _add_file_commands(sub: Any) -> None:
    """check, schema and new: the commands about the files a user writes."""
    check = sub.add_parser("check", help="validate world, experiment, calibration and optimisation files")
    check.add_argument("files", nargs="+", help="YAML files of any kind the tool reads (by their kind:)")
    check.add_argument("--allow-large", action="store_true", help=ALLOW_LARGE_HELP)
    check.set_defaults(func=cmd_check)

    schema = sub.add_parser("schema", help="print the JSON Schema of a file kind (keys, units, ranges; for editors)")
    schema.add_argument("kind", metavar="KIND", choices=FILE_KINDS, help=f"one of {', '.join(FILE_KINDS)}")
    schema.set_defaults(func=cmd_schema)

    new = sub.add_parser("new", help="write a starting file: a world of a kind, an experiment, or a shipped example")
    new_files = new.add_subparsers(dest="what", required=True, parser_class=_Parser)
    new_world = new_files.add_parser("world", help="a fictional starting world that check accepts")
    new_world.add_argument("--kind", choices=["ferry", "rail", "land"], required=True,
                           help="ferry port (sailings), rail freight terminal (trains) or land border (none)")
    new_world.add_argument("out", metavar="OUT.yaml", help="file to create (never overwritten)")
    new_experiment = new_files.add_parser("experiment", help="an experiment for a world: its roster against two changes")
    new_experiment.add_argument("world", metavar="WORLD.yaml", help="the world file the experiment runs")
    new_experiment.add_argument("out", metavar="OUT.yaml", help="file to create (never overwritten)")
    new_example = new_files.add_parser("example", help="a copy of a shipped example world's folder to edit")
    new_example.add_argument("name", choices=["kestrel_quay", "stonechat_rail", "corran_ridge"],
                             help="kestrel_quay (ferry, the demo, with its agency extract), stonechat_rail (rail), "
                                  "corran_ridge (land border)")
    new_example.add_argument("out", metavar="FOLDER", help="folder to create (never overwritten)")
    new.set_defaults(func=cmd_new)


def _add_run_commands(sub: Any) -> None:
    """batch, run and demo: the commands that simulate."""
    batch = sub.add_parser("batch", help="run an experiment's batch of runs and compare its design points")
    batch.add_argument("experiment", help="experiment YAML file")
    batch.add_argument("--out", required=True, help="batch folder to create (or to finish, with --resume)")
    _add_placement(batch)
    batch.add_argument("--resume", action="store_true", help="finish a batch in --out: skip complete runs, redo the rest")
    batch.add_argument("--allow-large", action="store_true", help=ALLOW_LARGE_HELP)
    batch.set_defaults(func=cmd_batch)

    run = sub.add_parser("run", help="simulate a world and write a run directory")
    run.add_argument("world", help="world YAML file")
    run.add_argument("--days", type=positive_int, default=365, help="operating days (default 365)")
    run.add_argument("--seed", type=seed_value, default=0, help="root seed (default 0)")
    run.add_argument(
        "--warmup", type=warmup_days, default=0, metavar="DAYS",
        help="days simulated first and left out of the summary, as a batch's warmup_days (the records keep them; "
             "default 0)",
    )
    run.add_argument("--out", help="run directory to create (default outputs/WORLD-seedS)")
    run.add_argument("--allow-large", action="store_true", help=ALLOW_LARGE_HELP)
    run.set_defaults(func=cmd_run)

    demo = sub.add_parser("demo", help="run the demo experiment on local processes and brief it")
    demo.add_argument("--out", default="outputs/demo", help="demo folder (default outputs/demo; only an earlier "
                      "demo's folder is ever replaced)")
    demo.add_argument(
        "--resume", action="store_true", help="keep an earlier demo's complete runs of the same experiment"
    )
    demo.add_argument("--workers", type=positive_int, help="worker processes (default: one per CPU)")
    demo.set_defaults(func=cmd_demo)


def _add_reading_commands(sub: Any) -> None:
    """brief, compare, estimate and export: the commands that read what runs wrote."""
    brief = sub.add_parser("brief", help="write a briefing (HTML and Markdown) from a batch folder or one run")
    brief.add_argument("out", metavar="OUT", help="batch folder written by undertow batch or undertow demo, or a "
                       "run directory written by undertow run (a short report on that run)")
    brief.add_argument("--baseline", metavar="LEVEL", help="policy level to compare with (default: the experiment's)")
    brief.add_argument("--format", default="html,md", help="html, md or html,md (default)")
    brief.add_argument(
        "--max-delay-increase", type=non_negative_float, metavar="PERCENT",
        help="delay limit: p95 time at the crossing at most this much above the baseline's (default 10)",
    )
    brief.add_argument(
        "--max-missed-increase", type=non_negative_float, metavar="POINTS",
        help="delay limit: missed departures at most this many percentage points above the baseline's (default 1)",
    )
    brief.set_defaults(func=cmd_brief)

    compare = sub.add_parser("compare", help="compare a baseline run and a policy run: displacement and net effect")
    compare.add_argument("run_a", metavar="RUN_A", help="baseline run directory")
    compare.add_argument("run_b", metavar="RUN_B", help="policy run directory (same seed: common random numbers)")
    compare.add_argument(
        "--warmup", type=non_negative_int, metavar="DAYS",
        help="days to drop from the start of both runs (default: the runs' own warm-up)",
    )
    compare.set_defaults(func=cmd_compare)

    estimate = sub.add_parser("estimate", help="estimate the unobserved flow from observed records (a run or an extract)")
    estimate.add_argument(
        "records", metavar="RECORDS",
        help="run directory holding observed/, or a folder of observed tables as CSV or Parquet (docs/observed_records.md)",
    )
    estimate.add_argument("--out", help="folder for estimates.csv and estimates.json (default: RECORDS)")
    estimate.add_argument("--window", metavar="START:END", help="days to use, both inclusive (default: all)")
    estimate.add_argument("--level", type=float, default=0.9, help="confidence level of the intervals (default 0.9)")
    estimate.add_argument(
        "--sensitivity",
        action="append",
        default=[],
        metavar="NAME=A,B",
        help="Beta(a, b) sensitivity of a station or check method, for the expansions (repeatable)",
    )
    estimate.add_argument("--seed", type=seed_value, help="seed for the expansions' bootstrap intervals (default: none)")
    estimate.set_defaults(func=cmd_estimate)

    export = sub.add_parser(
        "export", help="write a run's or a batch's tables as CSV files or an xlsx workbook",
        description="Write every table of a run directory or batch folder as CSV files or one xlsx workbook. "
        "A batch's per-run tables are stacked over its runs, led by run_id, design_point and replication.",
    )
    export.add_argument("folder", metavar="DIR", help="run directory (undertow run) or batch folder (undertow batch)")
    export.add_argument(
        "--format", choices=["csv", "xlsx"], default="csv",
        help="csv: a file per table (default); xlsx: one workbook, a sheet per table (needs undertow[xlsx])",
    )
    export.add_argument(
        "--out", metavar="FOLDER",
        help="folder for the files (default DIR/export); only files an earlier export wrote there are ever replaced",
    )
    export.set_defaults(func=cmd_export)


def _add_search_commands(sub: Any) -> None:
    """calibrate and optimise: the commands that search over many candidate runs."""
    for name, key, func, what in (
        ("calibrate", "calibration", cmd_calibrate, "fit inflow and behaviour to observed records (ABC over the model)"),
        ("optimise", "optimisation", cmd_optimise, "search policies under delay and staff constraints"),
    ):
        search = sub.add_parser(name, help=what)
        search.add_argument(key, help=f"{key} YAML file")
        search.add_argument("--out", help="output folder to create (or to finish, with --resume)")
        _add_placement(search)
        search.add_argument("--resume", action="store_true", help="take up an interrupted run in --out: finished runs are kept")
        search.add_argument("--keep-runs", action="store_true", help="keep every candidate's run directory (by default "
                            "only its figures are kept, a few hundred bytes each)")
        search.add_argument("--check", action="store_true", help="only validate the file and say what it would run")
        search.add_argument("--allow-large", action="store_true", help=ALLOW_LARGE_HELP)
        search.set_defaults(func=func)


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the console script."""
    argv = list(sys.argv[1:] if argv is None else argv)
    args = build_parser().parse_args(argv)
    args.argv = argv  # the exact command, for run manifests
    func: Callable[[argparse.Namespace], int] = args.func
    try:
        return func(args)
    except InputError as exc:
        print(f"undertow {args.command}: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print(f"undertow {args.command}: interrupted; completed output is kept", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:  # the reader stopped early (`| head`): not a fault; silence the flush at exit too
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except Exception as exc:  # a fault of ours: one line unless debugging
        if os.environ.get("UNDERTOW_DEBUG") == "1":
            raise
        print(f"undertow {args.command}: internal error: {exc.__class__.__name__}: {exc}", file=sys.stderr)
        return EXIT_FAULT


if __name__ == "__main__":
    sys.exit(main())
