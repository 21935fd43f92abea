"""The options every command shares, defined once: `--config` (and the settings it
loads, with `--set` and `--fail-on-warnings` applied), `--jobs`, `--output`,
`--no-progress`, and the sweep design's `--samples` and `--seed`; and what the
commands do with them alike: whether to draw a progress bar (`progress_wanted`)
and writing a report in `--format` to `--output` or stdout (`write_report`).

Imported for `--help`, so only the standard library and light modules here.
"""
from __future__ import annotations

import argparse
from pathlib import Path

from ..pool import JOBS_HELP

__all__ = ["jobs_count", "count", "set_value", "add_config", "add_jobs", "add_output", "add_no_progress",
           "add_set", "add_fail_on_warnings", "add_design", "load_settings_for", "progress_wanted",
           "write_report"]


def jobs_count(text: str) -> int:
    """`--jobs N`: a whole number of processes, 0 meaning one per CPU."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number of processes, got {text!r}")
    if value < 0:
        raise argparse.ArgumentTypeError("must be 0 (one per CPU) or more")
    return value


def count(text: str) -> int:
    """A whole number, 0 or more (`--samples N`, `--seed N`)."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if value < 0:
        raise argparse.ArgumentTypeError("must be 0 or more")
    return value


def set_value(text: str) -> tuple[str, float]:
    """`--set NAME=VALUE`: a param name and a number, with a unit if wanted (200us, 3dB)."""
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


def add_config(p: argparse.ArgumentParser, extra: str = "") -> None:
    """`--config FILE`: the settings file to use instead of the nearest one; `extra` ends its help."""
    p.add_argument("--config", metavar="FILE",
                   help="settings file (loopwise.toml or pyproject.toml); default: the nearest "
                        "one from the working directory up to the repository root" + extra)


def add_jobs(p: argparse.ArgumentParser, what: str = "check models", default: int = 1) -> None:
    """`-j N` / `--jobs N`: how many processes do `what` (0: one per CPU), `default` without it."""
    p.add_argument("-j", "--jobs", type=jobs_count, default=default, metavar="N",
                   help=f"{what} {JOBS_HELP.format(default=default)}")


def add_output(p: argparse.ArgumentParser, help_text: str, default: str | None = None,
               metavar: str = "FILE") -> None:
    """`-o FILE` / `--output FILE`: where to write, written atomically and never over an input."""
    p.add_argument("-o", "--output", metavar=metavar, default=default,
                   help=help_text + "; written atomically, never over a model, an included "
                                    "file or the settings file")


def add_no_progress(p: argparse.ArgumentParser) -> None:
    """`--no-progress`: never draw a progress bar."""
    p.add_argument("--no-progress", action="store_true",
                   help="never draw a progress bar (it is drawn only on a terminal anyway)")


def progress_wanted(args) -> bool:
    """Whether to draw a progress bar: not with `--no-progress`, and only on a terminal
    (`loopwise.progress.wants_progress`)."""
    import sys

    from ..progress import wants_progress

    return not args.no_progress and wants_progress(sys.stderr)


def add_set(p: argparse.ArgumentParser) -> None:
    """`--set NAME=VALUE` (repeatable): fix a param at a value for this run (`set_value`)."""
    p.add_argument("--set", dest="set", type=set_value, action="append", default=[], metavar="NAME=VALUE",
                   help="fix a param at a value for this run (repeatable; a unit may follow the number, "
                        "e.g. --set Td=200us); an unknown name is an error, a value outside the "
                        "param's range a note")


def add_fail_on_warnings(p: argparse.ArgumentParser, what: str = "a model has warnings") -> None:
    """`--fail-on-warnings` / `--no-fail-on-warnings`: exit 1 when `what`; None when not given
    (then the settings file decides)."""
    p.add_argument("--fail-on-warnings", action=argparse.BooleanOptionalAction, default=None,
                   help=f"exit 1 when {what} (overrides the settings file)")


def add_design(p: argparse.ArgumentParser, within: str = "") -> None:
    """`--samples N` and `--seed N` of a sweep's design (`loopwise sweep`, `report --sweep`)."""
    from ..sweep import DEFAULT_SAMPLES

    p.add_argument("--samples", type=count, default=DEFAULT_SAMPLES, metavar="N",
                   help=f"{within}size of the space-filling set (default {DEFAULT_SAMPLES}); corners, "
                        "local search and boundaries come on top")
    p.add_argument("--seed", type=count, default=0, metavar="N",
                   help=f"{within}seed of the design (default 0): the same seed gives the same plants "
                        "and results")


def load_settings_for(args, start: Path | None = None):
    """The settings a command runs with: the file named by `--config`, or the
    nearest one from `start` (default: the working directory), with what the command
    line adds: `--set` (the last of a name wins) and `--fail-on-warnings` when given."""
    from dataclasses import replace

    from ..settings import load_settings, load_settings_file

    config = getattr(args, "config", None)
    settings = load_settings_file(config) if config else load_settings(start)
    if getattr(args, "fail_on_warnings", None) is not None:
        settings = replace(settings, fail_on_warnings=args.fail_on_warnings)
    if getattr(args, "set", None):
        settings = replace(settings, overrides=tuple(dict(args.set).items()))
    return settings


def write_report(args, result, kind: str, protected=None, colour: bool = False, **options) -> None:
    """Write a result in `--format` (`report.render`, the registry of `kind`): to
    `--output` (atomically, never over the `protected` inputs), then a text summary
    on stdout unless `--quiet`; without `--output`, to stdout. `colour` applies to
    stdout only; `options` go to the reporter (those it does not take are dropped)."""
    from ..output import emit
    from ..report import render

    if args.output:
        emit(render(result, args.format, kind=kind, colour=False, **options), args.output, protected)
        if not args.quiet:
            emit(render(result, "text", kind=kind, colour=colour, **options))
            emit(f"{args.format} report written to {args.output}\n")
    else:
        emit(render(result, args.format, kind=kind, colour=colour, **options))
