"""`loopwise sweep PATH...`: is every loop stable, with its margins, for every plant in
the box of ranged params (`param x = v in [lo, hi]`), and where is it worst?

Thin: options, settings, the sweep (`loopwise.sweep`), a reporter. Nothing heavy is
imported at module level (this module loads for `loopwise sweep --help`).
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

from ..errors import UsageError
from .check import _settings, add_set_option
from .options import jobs_count as _jobs

__all__ = ["add_parser", "run"]

_FORMATS = ("text", "json", "junit", "markdown")


def _count(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if value < 0:
        raise argparse.ArgumentTypeError("must be 0 or more")
    return value


def add_parser(subparsers, help_text: str) -> argparse.ArgumentParser:
    from ..sweep import DEFAULT_SAMPLES

    p = subparsers.add_parser(
        "sweep", help=help_text,
        description=help_text + " Every corner of the box (all of them up to 8 ranged params), a "
        "space-filling set, a local search from the worst plants, and bisection where stability is "
        "lost: sampled evidence, not a proof (see docs/sweep.md).",
        epilog="Exit codes: 0 every sampled plant stable and every requirement met at the worst "
               "plant found; 1 otherwise; 2 a model, an option or a sampled plant could not be read.")
    p.add_argument("paths", nargs="+", metavar="PATH", help="model files or folders of models")
    p.add_argument("--samples", type=_count, default=DEFAULT_SAMPLES, metavar="N",
                   help=f"size of the space-filling set (default {DEFAULT_SAMPLES}); corners, local "
                        "search and boundaries come on top")
    p.add_argument("--seed", type=_count, default=0, metavar="N",
                   help="seed of the design (default 0): the same seed gives the same plants and results")
    p.add_argument("-j", "--jobs", type=_jobs, default=0, metavar="N",
                   help="evaluate plants in N local processes (default 0: one per CPU, at most the CPU count)")
    p.add_argument("--cluster", metavar="ADDRESS",
                   help="send the plants to the Dask scheduler at ADDRESS (e.g. tcp://10.0.0.5:8786) "
                        "instead; needs pip install \"loopwise[cluster]\"; same results as a local run")
    add_set_option(p)
    p.add_argument("-f", "--format", choices=_FORMATS, default="text", help="report format (default: text)")
    p.add_argument("-o", "--output", metavar="FILE",
                   help="write the report to FILE; a text summary still goes to stdout unless --quiet")
    p.add_argument("-q", "--quiet", action="store_true", help="with --output, print nothing to stdout")
    p.add_argument("--config", metavar="FILE", help="settings file (default: the nearest one)")
    p.add_argument("--fail-on-warnings", action=argparse.BooleanOptionalAction, default=None,
                   help="exit 1 when a plant gives warnings (overrides the settings file)")
    p.add_argument("--no-progress", action="store_true", help="never draw a progress bar")
    return p


def render(run, fmt: str, fail_on_warnings: bool) -> str:
    if fmt == "json":
        from ..report import json_report
        return json_report.render(run)
    module = {"text": "sweep_text", "junit": "sweep_junit", "markdown": "sweep_markdown"}[fmt]
    import importlib
    return importlib.import_module(f"loopwise.report.{module}").render(run, fail_on_warnings=fail_on_warnings)


def run(args) -> int:
    from ..output import write_output as _write
    from ..progress import wants_progress
    from ..sweep import SweepOptions, sweep_paths

    if hasattr(sys.stdout, "reconfigure"):
        sys.stdout.reconfigure(errors="replace")
    if args.cluster and args.jobs:
        raise UsageError("--jobs and --cluster do not go together: the cluster's workers do the work")
    settings = _settings(args)
    if args.output and not Path(args.output).resolve().parent.is_dir():
        raise UsageError(f"cannot write {args.output}: its folder does not exist")
    progress = not args.no_progress and wants_progress(sys.stderr)
    result = sweep_paths(args.paths, settings, SweepOptions(args.samples, args.seed), jobs=args.jobs,
                         cluster=args.cluster, progress=progress)
    fail = settings.fail_on_warnings
    if args.output:
        _write(args.output, render(result, args.format, fail))
        if not args.quiet:
            sys.stdout.write(render(result, "text", fail))
            sys.stdout.write(f"{args.format} report written to {args.output}\n")
    else:
        sys.stdout.write(render(result, args.format, fail))
    sys.stdout.flush()
    return _exit_status(result, fail)


def _exit_status(run, fail_on_warnings: bool) -> int:
    from ..report.sweep_text import sweep_passes

    if run.errors:
        return 2
    return 0 if all(sweep_passes(m, fail_on_warnings) for m in run.models) else 1
