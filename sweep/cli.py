"""Command line: ``luxsweep`` (CONTRACT.md §2).

Commands: ``demo``, ``check``, ``plan``, ``run`` and, when their modules are
present, ``rank`` and ``report``. Exit status 0 on success, 2 for bad input
(:class:`sweep.errors.UserInputError`, :class:`kernels.errors.InputError`,
argument errors) with one message on stderr and no traceback unless ``--debug``,
1 for any other failure. Every input is validated before a cluster starts.
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
import json
import logging
import os
import sys
import warnings
from collections.abc import Callable
from typing import Any

from luxsweep.sweep import __version__

__all__ = [
    "COMMANDS",
    "build_parser",
    "cmd_check",
    "cmd_demo",
    "cmd_plan",
    "cmd_rank",
    "cmd_report",
    "cmd_run",
    "main",
    "output_file",
]


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from exc
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {value}")
    return value


def _positive_float(text: str) -> float:
    try:
        value = float(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(f"expected a number of seconds, got {text!r}") from exc
    if not value > 0 or value == float("inf"):
        raise argparse.ArgumentTypeError(f"must be a positive number of seconds, got {text}")
    return value


def _has_module(module: str) -> bool:
    """Whether ``sweep.<module>`` exists (found without importing it, so that building
    the parser does not import the report's plotting stack for every command)."""
    return importlib.util.find_spec(f"luxsweep.sweep.{module}") is not None


def _optional_command(module: str, function: str) -> Callable[..., int] | None:
    """``sweep.<module>.<function>`` when that module exists and defines it."""
    if importlib.util.find_spec(f"luxsweep.sweep.{module}") is None:
        return None
    try:
        mod = importlib.import_module(f"luxsweep.sweep.{module}")
    except ImportError:
        return None
    return getattr(mod, function, None)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="luxsweep",
        description=(
            "Annual climate-based daylight option sweeps: expand a study file into "
            "variants, compute cached daylight coefficients, run on Dask, write Zarr "
            "results, rank and report."
        ),
    )
    parser.add_argument("--version", action="version", version=f"luxsweep {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser("demo", help="run the bundled demo study end to end")
    p.add_argument("--out", default="luxsweep-demo", help="folder for the demo (default "
                   "./luxsweep-demo)")
    p.add_argument("--workers", type=_positive_int, default=None,
                   help="worker processes (default: number of cores)")

    p = sub.add_parser("check", help="validate a study file and every input it names")
    p.add_argument("study", nargs="?", help="study file (YAML)")
    p.add_argument("--schema", action="store_true",
                   help="print the JSON Schema of study files and exit")

    p = sub.add_parser("plan", help="variants, coefficient sets, cache hits, estimated cost")
    p.add_argument("study", help="study file (YAML)")
    p.add_argument("--json", action="store_true", help="print the plan as JSON")
    p.add_argument("--workers", type=_positive_int, default=None,
                   help="workers to estimate the time for (default: number of cores)")
    p.add_argument("--cache", default=None, help="coefficient cache folder or fsspec URL")

    p = sub.add_parser("run", help="compute a study (resumes an interrupted run)")
    p.add_argument("study", help="study file (YAML)")
    p.add_argument("--out", default=None, help="results store (default <study folder>/"
                   "<name>.zarr)")
    p.add_argument("--workers", type=_positive_int, default=None,
                   help="local worker processes (default: number of cores)")
    p.add_argument("--scheduler", default=None,
                   help="join the Dask cluster at this address or scheduler file")
    p.add_argument("--cache", default=None, help="coefficient cache folder or fsspec URL "
                   "(default $LUXSWEEP_CACHE or <study folder>/.luxsweep-cache)")
    p.add_argument("--no-shared-disk", action="store_true",
                   help="workers share no disk with this machine: weather files travel "
                   "through Dask, this machine keeps the cache and writes the results "
                   "(chosen by itself for whatever a worker cannot reach)")
    p.add_argument("--fresh", action="store_true",
                   help="discard the existing results store (e.g. of an edited study) and "
                   "start over")
    p.add_argument("--connect-timeout", type=_positive_float, default=10.0, metavar="SECONDS",
                   help="how long to wait for --scheduler to answer (default 10)")
    p.add_argument("--tls-ca-file", default=None, metavar="FILE",
                   help="CA certificate (PEM) of a tls:// scheduler")
    p.add_argument("--tls-cert", default=None, metavar="FILE",
                   help="this client's certificate (PEM) for a tls:// scheduler")
    p.add_argument("--tls-key", default=None, metavar="FILE",
                   help="the key of --tls-cert (PEM), unless that file holds it")
    p.add_argument("--progress-every", type=_positive_float, default=15.0, metavar="SECONDS",
                   help="interval of the progress lines when stderr is not a terminal "
                   "(default 15)")

    if _has_module("rank"):
        p = sub.add_parser("rank", help="criteria, scores and ranking of a results store")
        p.add_argument("results", help="results store (.zarr folder)")
        p.add_argument("--top", type=_positive_int, default=None, help="show the best N")
        p.add_argument("--csv", default=None, help="also write the table to this CSV file")
        p.add_argument("--wide", action="store_true",
                       help="show every column (variant id, each axis, Pareto set)")
    if _has_module("report"):
        p = sub.add_parser("report", help="self-contained HTML report of a results store")
        p.add_argument("results", help="results store (.zarr folder)")
        p.add_argument("--html", default=None, help="output file (default beside the store)")
        p.add_argument("--pdf", nargs="?", const=True, default=False, metavar="FILE",
                       help="also print the report to PDF with headless Chromium (default "
                       "file: the HTML file's name ending .pdf)")
        p.add_argument("--paper", choices=("a4", "letter"), default=None,
                       help="page size for printing (default A4 with --pdf, else the "
                       "printer's own)")
    return parser


# ---------------------------------------------------------------------------
# commands


def cmd_check(args: argparse.Namespace) -> int:
    from luxsweep.sweep.config import json_schema, load_study
    from luxsweep.sweep.errors import UserInputError
    from luxsweep.sweep.plan import make_plan

    if args.schema:
        print(json.dumps(json_schema(), indent=2))
        return 0
    if not args.study:
        raise UserInputError("luxsweep check: give a study file (or --schema)")
    loaded = load_study(args.study)
    plan = make_plan(loaded, None)
    print(f"{loaded.path}: ok — {len(plan.variants)} variants, {len(plan.jobs)} distinct "
          f"geometries, {len({t.climate for t in plan.tasks})} climates, axes: "
          f"{', '.join(plan.axes) or '(none)'}")
    return 0


def cmd_plan(args: argparse.Namespace) -> int:
    from luxsweep.sweep.cache import default_cache, open_cache
    from luxsweep.sweep.config import load_study
    from luxsweep.sweep.costs import estimated_seconds, format_duration, measure_rates
    from luxsweep.sweep.labels import plural
    from luxsweep.sweep.plan import make_plan

    loaded = load_study(args.study)
    cache = open_cache(args.cache or default_cache(loaded))
    plan = make_plan(loaded, cache)
    est = plan.estimate()
    missing = next((j for j in plan.jobs.values() if not j.cached), None)
    rates = measure_rates(missing.geometry if missing else None,
                          missing.sensors if missing else None)
    seconds = estimated_seconds(est, rates, args.workers)
    if args.json:
        out = plan.to_dict()
        out["estimate"]["seconds"] = seconds
        out["estimate"]["measured_rates"] = {"rays_per_second": rates.rays_per_second,
                                             "flops_per_second": rates.flops_per_second}
        print(json.dumps(out, indent=1, default=str))
        return 0
    print(f"study {loaded.study.name} ({loaded.path})")
    print(f"  variants: {est['variants']} over axes {', '.join(plan.axes) or '(none)'}")
    print(f"  coefficient sets: {est['coefficient_sets']} ({est['cache_hits']} in the cache "
          f"{cache.root}, {est['cache_misses']} to compute)")
    print(f"  series tasks: {est['series_tasks']} (one per coefficient set and climate)")
    for job in plan.jobs.values():
        state = "cached" if job.cached else f"to compute, ~{job.rays / 1e6:.1f} M rays"
        print(f"    {job.key[:16]}  {job.n_sensors} sensors, {len(job.variants)} variants, "
              f"{state}")
    print(f"  estimated work: {est['rays'] / 1e6:.1f} M rays, "
          f"{est['gemm_flops'] / 1e9:.1f} GFLOP of matrix products, "
          f"{est['bytes_written'] / 2**20:.1f} MiB written")
    workers = args.workers or os.cpu_count() or 1
    measured = f"{rates.flops_per_second / 1e9:.0f} GFLOP/s matrix products"
    if missing is not None:
        measured = f"{rates.rays_per_second / 1e6:.0f} M rays/s and " + measured
    print(f"  estimated time: about {format_duration(seconds['wall'])} on "
          f"{plural(workers, 'worker')} (from {measured} measured on this machine; "
          "a guide, not a promise)")
    return 0


def cmd_run(args: argparse.Namespace) -> int:
    from luxsweep.sweep.cluster import TlsFiles
    from luxsweep.sweep.errors import UserInputError
    from luxsweep.sweep.run import format_summary, run_study, terminate_as_interrupt

    tls = None
    if args.tls_ca_file or args.tls_cert or args.tls_key:
        if not args.tls_ca_file:
            raise UserInputError("--tls-cert and --tls-key need --tls-ca-file (the CA that "
                                 "signed the scheduler's certificate)")
        if not args.scheduler:
            raise UserInputError("the --tls-* options are for joining a tls:// scheduler; "
                                 "give --scheduler too")
        tls = TlsFiles(args.tls_ca_file, args.tls_cert, args.tls_key)
    with terminate_as_interrupt():
        summary = run_study(args.study, args.out, workers=args.workers,
                            scheduler=args.scheduler, cache_dir=args.cache,
                            connect_timeout=args.connect_timeout, tls=tls,
                            progress_every=args.progress_every, fresh=args.fresh,
                            no_shared_disk=args.no_shared_disk)
    print(format_summary(summary))
    return 0 if summary.ok else 1


def cmd_demo(args: argparse.Namespace) -> int:
    from luxsweep.sweep.demo import run_demo

    return run_demo(args.out, workers=args.workers)


def output_file(path: str | None, option: str) -> None:
    """Refuse an output file whose folder is missing or not writable (before any work).

    Raises
    ------
    UserInputError
        Naming the option and the folder.
    """
    from pathlib import Path

    from luxsweep.sweep.errors import UserInputError

    if path is None or isinstance(path, bool):
        return
    target = Path(path).expanduser()
    folder = target.parent if str(target.parent) else Path(".")
    if target.is_dir():
        raise UserInputError(f"{option} {path}: is a folder; give a file name")
    if not folder.is_dir():
        raise UserInputError(f"{option} {path}: the folder {folder} does not exist; create "
                             "it or choose another path")
    if not os.access(folder, os.W_OK):
        raise UserInputError(f"{option} {path}: the folder {folder} is not writable; choose "
                             "another path")


def cmd_rank(args: argparse.Namespace) -> int:
    command = _optional_command("rank", "rank_command")
    assert command is not None
    output_file(args.csv, "--csv")
    return int(command(args.results, args.top, args.csv, wide=args.wide))


def cmd_report(args: argparse.Namespace) -> int:
    command = _optional_command("report", "report_command")
    assert command is not None
    output_file(args.html, "--html")
    output_file(args.pdf, "--pdf")
    return int(command(args.results, args.html, pdf=args.pdf, paper=args.paper))


COMMANDS: dict[str, Callable[[argparse.Namespace], int]] = {
    "demo": cmd_demo, "check": cmd_check, "plan": cmd_plan, "run": cmd_run,
    "rank": cmd_rank, "report": cmd_report,
}


def _setup_output(debug: bool) -> None:
    log = logging.getLogger("luxsweep")
    if not log.handlers:
        handler = logging.StreamHandler(sys.stderr)
        handler.setFormatter(logging.Formatter("%(levelname)s: %(message)s"))
        log.addHandler(handler)
    log.setLevel(logging.DEBUG if debug else logging.INFO)
    log.propagate = False
    seen: set[str] = set()

    def show(message: Any, category: type, filename: str, lineno: int, file: Any = None,
             line: str | None = None) -> None:
        text = str(message)
        if text not in seen:
            seen.add(text)
            print(f"warning: {text}", file=sys.stderr)

    if not debug:
        warnings.showwarning = show  # type: ignore[assignment]


def main(argv: list[str] | None = None) -> int:
    from luxsweep.kernels.errors import InputError
    from luxsweep.sweep.errors import UserInputError

    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 0
    _setup_output(args.debug)
    try:
        return COMMANDS[args.command](args)
    except (UserInputError, InputError) as exc:
        if args.debug:
            raise
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        if args.debug:
            raise
        print("interrupted; run the same command again to resume", file=sys.stderr)
        return 130
    except Exception as exc:
        if args.debug:
            raise
        print(f"error: {type(exc).__name__}: {exc} (run with --debug for the traceback)",
              file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
