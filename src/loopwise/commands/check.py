"""`loopwise check PATH...`: the verdict and margins of every break, in a format
for people (text, markdown) or machines (json, junit).

This module is imported for `loopwise check --help`, so it imports nothing
heavy at module level: the runner and the reporters load inside `run`.
"""
from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from ..errors import UsageError

__all__ = ["add_parser", "run"]

_FORMATS = ("text", "json", "junit", "markdown")


def _jobs(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number of processes, got {text!r}")
    if value < 0:
        raise argparse.ArgumentTypeError("must be 0 (one per CPU) or more")
    return value


def _set_value(text: str) -> tuple[str, float]:
    """`NAME=VALUE` of --set: a param name and a number, with a unit if wanted (200us, 3dB)."""
    name, sep, value = text.partition("=")
    name, value = name.strip(), value.strip()
    if not sep or not name.isidentifier() or not value:
        raise argparse.ArgumentTypeError(f"expected NAME=VALUE (e.g. J=2.4e-4 or Td=200us), got {text!r}")
    from ..errors import LoopwiseError
    from ..language import ast
    from ..language.parse import parse_text

    try:  # the model language's own number literals (units convert to SI)
        (stmt,) = parse_text(f"param x = {value}\n", "<--set>").statements
        number, sign = (stmt.value.operand, -1.0) if isinstance(stmt.value, ast.Neg) else (stmt.value, 1.0)
        if isinstance(number, ast.Number):
            return name, sign * number.value
    except (LoopwiseError, ValueError):
        pass
    raise argparse.ArgumentTypeError(f"{text!r}: the value must be a number, with a unit if wanted "
                                     "(e.g. 2.4e-4, 200us, -3dB)")


def add_set_option(p: argparse.ArgumentParser) -> None:
    p.add_argument("--set", dest="set", type=_set_value, action="append", default=[], metavar="NAME=VALUE",
                   help="fix a param at a value for this run (repeatable; a unit may follow the number, "
                        "e.g. --set Td=200us); an unknown name is an error, a value outside the "
                        "param's range a note")


def add_parser(subparsers, help_text: str) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "check", help=help_text, description=help_text + " Folders are searched for *.loop files.",
        epilog="Exit codes: 0 every model stable with all requirements met; 1 an instability, "
               "an unmet requirement, or a warning with --fail-on-warnings; 2 a model or path "
               "could not be read (the other models are still checked and reported).",
    )
    p.add_argument("paths", nargs="+", metavar="PATH", help="model files or folders of models")
    p.add_argument("-f", "--format", choices=_FORMATS, default="text",
                   help="report format (default: text)")
    p.add_argument("-o", "--output", metavar="FILE",
                   help="write the report to FILE; a text summary still goes to stdout "
                        "unless --quiet")
    p.add_argument("-q", "--quiet", action="store_true",
                   help="with --output, print nothing to stdout")
    p.add_argument("--config", metavar="FILE",
                   help="settings file (loopwise.toml or pyproject.toml); default: the nearest "
                        "one from the working directory up to the repository root")
    p.add_argument("-j", "--jobs", type=_jobs, default=1, metavar="N",
                   help="check models in N processes (0: one per CPU; default 1)")
    p.add_argument("--fail-on-warnings", action=argparse.BooleanOptionalAction, default=None,
                   help="exit 1 when a model has warnings (overrides the settings file)")
    p.add_argument("--color", "--colour", dest="color", choices=("auto", "always", "never"),
                   default="auto",
                   help="colour the text report: auto (a terminal without NO_COLOR), always, never")
    p.add_argument("--no-progress", action="store_true",
                   help="never draw a progress bar (it is drawn only on a terminal anyway)")
    add_set_option(p)
    return p


def _settings(args):
    from dataclasses import replace

    from ..settings import load_settings, load_settings_file

    settings = load_settings_file(args.config) if args.config else load_settings()
    if args.fail_on_warnings is not None:
        settings = replace(settings, fail_on_warnings=args.fail_on_warnings)
    if getattr(args, "set", None):
        settings = replace(settings, overrides=tuple(dict(args.set).items()))  # the last of a name wins
    return settings


def _colour(choice: str, stream) -> bool:
    if choice != "auto":
        return choice == "always"
    if os.environ.get("NO_COLOR") or os.environ.get("TERM") == "dumb":
        return False
    try:
        return stream.isatty()
    except (AttributeError, ValueError):
        return False


def _write(path: str, text: str) -> None:
    try:
        Path(path).write_text(text, encoding="utf-8")
    except OSError as exc:
        raise UsageError(f"cannot write {path}: {exc.strerror or exc}") from None


def run(args) -> int:
    from ..report import render
    from ..run import check_paths, exit_status, wants_progress

    # a model's own text (names, an echoed source line) may hold characters the
    # console's encoding lacks: replace them rather than fail after the whole run
    if hasattr(sys.stdout, "reconfigure"):
        sys.stdout.reconfigure(errors="replace")
    settings = _settings(args)
    if args.output and not Path(args.output).resolve().parent.is_dir():
        # fail before a long run rather than after it
        raise UsageError(f"cannot write {args.output}: its folder does not exist")
    progress = not args.no_progress and wants_progress(sys.stderr)
    result = check_paths(args.paths, settings, jobs=args.jobs, progress=progress)
    fail = settings.fail_on_warnings
    if args.output:
        _write(args.output, render(result, args.format, fail_on_warnings=fail))
        if not args.quiet:
            sys.stdout.write(render(result, "text", colour=_colour(args.color, sys.stdout),
                                    fail_on_warnings=fail))
            sys.stdout.write(f"{args.format} report written to {args.output}\n")
    else:
        sys.stdout.write(render(result, args.format, colour=_colour(args.color, sys.stdout),
                                fail_on_warnings=fail))
    sys.stdout.flush()
    return exit_status(result, fail)
