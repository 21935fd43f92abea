"""`loopwise check PATH...`: the verdict and margins of every break, in a format
for people (text, markdown) or machines (json, junit, sarif): the choices come
from the reporter registry (`loopwise.report.formats("check")`).

Thin: the shared options and settings (`commands/options.py`), the runner
(`loopwise.run.check_files`), a reporter written by `options.write_report`. This
module is imported for `loopwise check --help`, so it imports nothing heavy at
module level: the runner and the reporters load inside `run`.
"""
from __future__ import annotations

import argparse
import os
import sys

from ..progress import is_terminal
from ..report import formats
from .options import (add_config, add_fail_on_warnings, add_jobs, add_no_progress, add_output, add_set,
                      load_settings_for, progress_wanted, write_report)

__all__ = ["add_parser", "run"]


def add_parser(subparsers, help_text: str) -> argparse.ArgumentParser:
    """Add `loopwise check` and its options to the subcommands."""
    p = subparsers.add_parser(
        "check", help=help_text, description=help_text + " Folders are searched for *.loop files.",
        epilog="Exit codes: 0 every model stable with all requirements met; 1 an instability, "
               "an unmet requirement, or a warning with --fail-on-warnings; 2 a model or path "
               "could not be read (the other models are still checked and reported); "
               "130 interrupted (Ctrl-C); 143 terminated (SIGTERM).",
    )
    p.add_argument("paths", nargs="+", metavar="PATH", help="model files or folders of models")
    p.add_argument("-f", "--format", choices=formats("check"), default="text",
                   help="report format (default: text)")
    add_output(p, "write the report to FILE; a text summary still goes to stdout unless --quiet")
    p.add_argument("-q", "--quiet", action="store_true",
                   help="with --output, print nothing to stdout")
    add_config(p)
    add_jobs(p)
    add_fail_on_warnings(p)
    p.add_argument("--color", "--colour", dest="color", choices=("auto", "always", "never"),
                   default="auto",
                   help="colour the text report: auto (a terminal without NO_COLOR), always, never")
    add_no_progress(p)
    add_set(p)
    return p


def _colour(choice: str, stream) -> bool:
    if choice != "auto":
        return choice == "always"
    if os.environ.get("NO_COLOR") or os.environ.get("TERM") == "dumb":
        return False
    return is_terminal(stream)


def run(args) -> int:
    """Check the models named on the command line and write the report; the exit code
    (`run.exit_status`: 2 a model could not be read, 1 an instability, an unmet
    requirement or a counted warning, else 0)."""
    from ..language.source import common_root
    from ..output import guard_inputs
    from ..run import check_files, discover, exit_status

    settings = load_settings_for(args)  # with --fail-on-warnings and --set
    files = discover(args.paths, settings)
    protected = guard_inputs(args.output, files, settings)  # fail before a long run, not after it
    # includes stay inside the folder tree of the paths named (outside git)
    result = check_files(files, settings, jobs=args.jobs, progress=progress_wanted(args),
                         root=common_root(args.paths))
    fail = settings.fail_on_warnings
    write_report(args, result, "check", protected, colour=_colour(args.color, sys.stdout), fail_on_warnings=fail)
    return exit_status(result, fail)
