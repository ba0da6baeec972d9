"""The ``mottle`` command: run studies, report on their stores, convert old stores, run the demo and the
validation checks."""

from __future__ import annotations

import argparse
import os
import sys
import traceback
import warnings
from pathlib import Path

SUFFIX = ".mottle"
"""The suffix of a results store's file name (as :data:`mottle.studies.store.SUFFIX`)."""

EXIT_FAILED, EXIT_USAGE, EXIT_INTERRUPTED = 1, 2, 130

MAIN_HELP = """\
Many-run split-step Fourier propagation for wave transport in disorder.

examples:
  mottle demo --out demo/                 run the built-in study and draw its figures
  mottle run study.toml --store r.mottle  run (or resume) a study in this process
  mottle run study.toml --workers 4       the same on a local Dask cluster of 4 processes
  mottle report r.mottle --out figures/   figures (PNG) and a summary table of a store
  mottle convert old.h5 new.mottle        copy a format-1 (HDF5) store into a format-2 store
  mottle check                            compare the propagators with published results
"""

RUN_HELP = """\
Run every point of a study file and save each one to the store as it finishes.
A second call with the same store resumes: only the missing points run, and the
numbers equal those of an uninterrupted run bit for bit. Ctrl-C keeps the points
already finished.

examples:
  mottle run study.toml                          store next to the study, study.mottle
  mottle run study.toml --store results.mottle --threads 2
  mottle run study.toml --workers 4 --threads 1  4 local worker processes, 1 thread each
  mottle run study.toml --scheduler tcp://10.0.0.5:8786
  mottle run study.toml --dry-run                validate and list the points only
"""

REPORT_HELP = """\
Draw a store's figures (PNG) and write a plain-text summary: transmission against
each swept parameter, <ln T> against the sample length with the fitted
localization length when the study sweeps a disorder region, the mean density
(log scale) and the mean momentum distribution at the snapshots.

examples:
  mottle report results.mottle             figures in results-report/
  mottle report results.mottle --out figures/ --csv table.csv
"""

CONVERT_HELP = """\
Copy every point of a format-1 results store (one HDF5 file, written by older
versions of mottle) into a new store of the current format, exactly. Needs h5py.

examples:
  mottle convert results.h5 results.mottle
"""

DEMO_HELP = """\
Run the built-in study: a slow matter-wave packet sent down a guide through a
repulsive speckle potential, sweeping the speckle strength and the length of
the speckled region. Writes the study file, its store and the figures to --out
and prints where they are (about a minute on two cores).

examples:
  mottle demo
  mottle demo --out /tmp/mottle-demo --workers 2
"""

CHECK_HELP = """\
Run the validation cases: mottle's propagators against published closed-form
results. Prints value, reference, tolerance and source for each, and exits
with status 1 if any case fails.

examples:
  mottle check
  mottle check --list
  mottle check free-gaussian-width barrier-transmission
"""


class _Parser(argparse.ArgumentParser):
    def error(self, message):
        self.exit(EXIT_USAGE, f"mottle: error: {message} (see {self.prog} --help)\n")


def _parser() -> argparse.ArgumentParser:
    formatter = argparse.RawDescriptionHelpFormatter
    debug = _Parser(add_help=False)
    # SUPPRESS: a subcommand's own default must not undo a --debug given before it.
    debug.add_argument(
        "--debug", action="store_true", default=argparse.SUPPRESS, help="show the full traceback of an error"
    )
    parser = _Parser(prog="mottle", description=MAIN_HELP, formatter_class=formatter, parents=[debug])
    from .. import __version__

    parser.add_argument("--version", action="version", version=f"mottle {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    run = commands.add_parser(
        "run", help="run or resume a study", description=RUN_HELP, formatter_class=formatter, parents=[debug]
    )
    run.add_argument("study", metavar="STUDY.toml", help="the study file")
    run.add_argument(
        "--store", metavar="RESULTS.mottle", help="results store (default: the study's name, .mottle)"
    )
    where = run.add_mutually_exclusive_group()
    where.add_argument(
        "--workers", type=_positive_int, metavar="N", help="start a local Dask cluster of N processes"
    )
    where.add_argument(
        "--scheduler", metavar="ADDRESS", help="use the Dask cluster at ADDRESS (tcp://host:port)"
    )
    run.add_argument(
        "--threads",
        type=_positive_int,
        metavar="T",
        help="Rust threads in this process, or per Dask task (default: all cores, shared by local workers)",
    )
    run.add_argument("--quiet", action="store_true", help="no progress display or per-point lines")
    run.add_argument(
        "--dry-run", action="store_true", help="validate the study and list its points; run nothing"
    )

    report = commands.add_parser(
        "report",
        help="figures and a summary of a store",
        description=REPORT_HELP,
        formatter_class=formatter,
        parents=[debug],
    )
    report.add_argument("store", metavar="RESULTS.mottle", help="a results store written by mottle run")
    report.add_argument("--out", metavar="DIR", help="directory for the figures (default: STORE-report/)")
    report.add_argument("--csv", metavar="FILE", help="also write the tidy table (one row per point) as CSV")

    convert = commands.add_parser(
        "convert",
        help="convert a format-1 (HDF5) store to the current format",
        description=CONVERT_HELP,
        formatter_class=formatter,
        parents=[debug],
    )
    convert.add_argument("old", metavar="OLD.h5", help="a format-1 store (HDF5, written by earlier mottle)")
    convert.add_argument("new", metavar="NEW.mottle", help="the format-2 store to write (must not exist)")

    demo = commands.add_parser(
        "demo",
        help="run the built-in demonstration study",
        description=DEMO_HELP,
        formatter_class=formatter,
        parents=[debug],
    )
    demo.add_argument(
        "--out", metavar="DIR", default="mottle-demo", help="output directory (default: mottle-demo)"
    )
    demo.add_argument(
        "--workers", type=_positive_int, metavar="N", help="run on a local Dask cluster of N processes"
    )
    demo.add_argument("--threads", type=_positive_int, metavar="T", help="threads per process")
    demo.add_argument("--quiet", action="store_true", help="no progress display")

    check = commands.add_parser(
        "check",
        help="validate against published results",
        description=CHECK_HELP,
        formatter_class=formatter,
        parents=[debug],
    )
    check.add_argument("cases", nargs="*", metavar="CASE", help="cases to run (default: all)")
    check.add_argument("--list", action="store_true", help="list the cases and their sources; run nothing")
    return parser


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 1, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 1, got {value}")
    return value


def _show_warning(message, category, filename, lineno, file=None, line=None):
    print(f"mottle: warning: {message}", file=sys.stderr, flush=True)


def _command_run(args) -> int:
    from ..studies.runner import run_study
    from ..studies.study import load_study

    store = Path(args.store) if args.store else Path(args.study).with_suffix(SUFFIX)
    study = load_study(args.study, store)
    if args.dry_run:
        print(f"{args.study}: valid, {len(study.points)} points, {study.realizations} realizations in all")
        for point in study.points:
            print(
                f"  point {point.index + 1}: {point.label()} (seed {point.seed}, {point.realizations} runs)"
            )
        return 0
    where = (
        f"{args.workers} local workers"
        if args.workers
        else f"the cluster at {args.scheduler}"
        if args.scheduler
        else "this process"
    )
    if not args.quiet:
        print(f"running {args.study}: {len(study.points)} points in {where}; store {store}", flush=True)
    try:
        result = run_study(
            study,
            store,
            workers=args.workers,
            scheduler=args.scheduler,
            progress=not args.quiet,
            threads=args.threads,
        )
    except KeyboardInterrupt as interrupted:
        done = getattr(interrupted, "done", None)
        total = getattr(interrupted, "total", len(study.points))
        saved = f"{done} of {total} points are saved in {store}" if done is not None else f"store {store}"
        print(f"mottle: interrupted: {saved}; resume with: {_resume_command(args, store)}", file=sys.stderr)
        return EXIT_INTERRUPTED
    print(f"done: {len(result.points)} of {result.total} points in {store}; figures: mottle report {store}")
    return 0


def _resume_command(args, store: Path) -> str:
    words = ["mottle", "run", args.study, "--store", str(store)]
    if args.workers:
        words += ["--workers", str(args.workers)]
    if args.scheduler:
        words += ["--scheduler", args.scheduler]
    if args.threads:
        words += ["--threads", str(args.threads)]
    return " ".join(words)


def _command_report(args) -> int:
    from ..studies.store import open_store
    from .report import report

    store = open_store(args.store)
    out = Path(args.out) if args.out else Path(args.store).with_name(Path(args.store).stem + "-report")
    written = report(store, out)
    if args.csv:
        store.to_csv(args.csv)
        written.files.append(Path(args.csv))
    print(written.summary_text, end="")
    print(f"wrote {len(written.files)} files to {out}:")
    for path in written.files:
        print(f"  {path}")
    return 0


def _command_convert(args) -> int:
    from ..studies.store import convert_store

    store = convert_store(args.old, args.new)
    print(f"converted {args.old}: {len(store.points)} of {store.total} points in {args.new}")
    return 0


def _command_demo(args) -> int:
    from .demo import run_demo

    outcome = run_demo(args.out, workers=args.workers, threads=args.threads, progress=not args.quiet)
    print(outcome.message)
    return 0


def _command_check(args) -> int:
    from .check import format_table, registry, run_cases

    cases = registry()
    if args.list:
        for case in cases.values():
            print(f"{case.name:28s} {case.description} [{case.source}]")
        return 0
    unknown = [name for name in args.cases if name not in cases]
    if unknown:
        import difflib

        hints = [
            f"{name!r}"
            + (f" (did you mean {close[0]!r}?)" if (close := difflib.get_close_matches(name, cases)) else "")
            for name in unknown
        ]
        raise _UsageError(f"unknown check case {', '.join(hints)}; mottle check --list names them")
    outcomes = run_cases([cases[name] for name in args.cases] if args.cases else list(cases.values()))
    print(format_table(outcomes))
    failed = [outcome for outcome in outcomes if outcome.status == "FAIL" or outcome.status == "ERROR"]
    if failed:
        print(f"{len(failed)} of {len(outcomes)} checks failed: {', '.join(o.name for o in failed)}")
        return EXIT_FAILED
    print(f"all {sum(o.status == 'ok' for o in outcomes)} checks passed")
    return 0


class _UsageError(Exception):
    pass


COMMANDS = {
    "run": _command_run,
    "report": _command_report,
    "convert": _command_convert,
    "demo": _command_demo,
    "check": _command_check,
}


def main(argv=None) -> int:
    """Entry point of the ``mottle`` program; returns the exit status."""
    parser = _parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return EXIT_USAGE
    warnings.showwarning = _show_warning
    os.environ.setdefault("MPLBACKEND", "Agg")
    from ..errors import MottleError

    debug = getattr(args, "debug", False)
    try:
        return COMMANDS[args.command](args)
    except KeyboardInterrupt:
        print("mottle: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except (MottleError, OSError, _UsageError) as error:
        if debug:
            traceback.print_exc()
        usage = isinstance(error, (ValueError, TypeError, _UsageError))
        for line in str(error).splitlines() or [type(error).__name__]:
            print(f"mottle: error: {line}", file=sys.stderr)
        return EXIT_USAGE if usage else EXIT_FAILED
    except Exception as error:
        if debug:
            traceback.print_exc()
        else:
            print(
                f"mottle: internal error: {type(error).__name__}: {error} (--debug shows the traceback)",
                file=sys.stderr,
            )
        return EXIT_FAILED
