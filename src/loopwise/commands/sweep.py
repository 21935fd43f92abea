"""`loopwise sweep PATH...`: is every loop stable, with its margins, for every plant in
the box of ranged params (`param x = v in [lo, hi]`), and where is it worst?

Thin: the shared options, settings and output writer (`commands/options.py`,
`loopwise.output`), the sweep (`loopwise.sweep`), a reporter. Nothing heavy is
imported at module level (this module loads for `loopwise sweep --help`).
"""
from __future__ import annotations

import argparse

from ..errors import UsageError
from ..report import formats
from .options import (add_config, add_design, add_fail_on_warnings, add_jobs, add_no_progress, add_output,
                      add_set, load_settings_for, progress_wanted, write_report)

__all__ = ["add_parser", "run"]


def add_parser(subparsers, help_text: str) -> argparse.ArgumentParser:
    """Add `loopwise sweep` and its options to the subcommands."""
    p = subparsers.add_parser(
        "sweep", help=help_text,
        description=help_text + " Every corner of the box (all of them up to 8 ranged params), a "
        "space-filling set, a local search from the worst plants, and bisection where stability is "
        "lost: sampled evidence, not a proof (see docs/sweep.md).",
        epilog="Exit codes: 0 every sampled plant stable and every requirement met at the worst "
               "plant found; 1 otherwise; 2 a model, an option or a sampled plant could not be read; "
               "130 interrupted (Ctrl-C); 143 terminated (SIGTERM).")
    p.add_argument("paths", nargs="+", metavar="PATH", help="model files or folders of models")
    add_design(p)
    add_jobs(p, "evaluate plants", default=0)
    p.add_argument("--cluster", metavar="ADDRESS",
                   help="send the plants to the Dask scheduler at ADDRESS (e.g. tcp://10.0.0.5:8786) "
                        "instead; needs pip install \"loopwise[cluster]\"; same results as a local run")
    add_set(p)
    p.add_argument("-f", "--format", choices=formats("sweep"), default="text", help="report format (default: text)")
    add_output(p, "write the report to FILE; a text summary still goes to stdout unless --quiet")
    p.add_argument("-q", "--quiet", action="store_true", help="with --output, print nothing to stdout")
    add_config(p)
    add_fail_on_warnings(p, "a plant gives warnings")
    add_no_progress(p)
    return p


def run(args) -> int:
    """Sweep the models named on the command line and write the report; the exit code
    (`SweepRun.exit_status`: 2 a model or a plant could not be read, 1 a plant
    unstable somewhere, a requirement not met at the worst plant found or a counted
    warning, else 0)."""
    from ..language.source import common_root
    from ..output import guard_inputs
    from ..run import discover
    from ..sweep import SweepOptions, sweep_files

    if args.cluster and args.jobs:
        raise UsageError("--jobs and --cluster do not go together: the cluster's workers do the work")
    settings = load_settings_for(args)  # with --fail-on-warnings and --set
    files = discover(args.paths, settings)
    protected = guard_inputs(args.output, files, settings)  # fail before a long sweep, not after it
    result = sweep_files(files, settings, SweepOptions(args.samples, args.seed), jobs=args.jobs,
                         cluster=args.cluster, progress=progress_wanted(args), root=common_root(args.paths))
    fail = settings.fail_on_warnings
    write_report(args, result, "sweep", protected, fail_on_warnings=fail)
    return result.exit_status(fail)
