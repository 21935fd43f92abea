"""`loopwise diff`: stability changes between two files, two folders or two git revisions.

Thin: reads the options, gets both sides' results from `loopwise.sides` (files,
folders, or git revisions through `loopwise.revisions`), compares them with
`loopwise.compare` (no I/O), and writes one of the `report.diff_*` formats
through `loopwise.output`.
"""
from __future__ import annotations

import argparse
import dataclasses
import sys

from ..report import formats
from .options import add_config, add_jobs, add_output

__all__ = ["add_parser", "run"]


def _non_negative(unit: str, key: str):
    def convert(text: str) -> float:
        from ..settings import regression_problem

        try:
            value = float(text[:-1]) / 100.0 if unit == "fraction" and text.endswith("%") else float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a number ({unit}), got {text!r}") from None
        problem = regression_problem(key, value)  # the same rule as the settings file's
        if problem:
            raise argparse.ArgumentTypeError(f"{problem} (got {text!r})")
        return value
    return convert


def add_parser(subparsers, help_text: str) -> argparse.ArgumentParser:
    """Add `loopwise diff` and its options to the subcommands."""
    p = subparsers.add_parser(
        "diff", help=help_text, description=help_text + " OLD and NEW are two model files or two "
        "folders (models matched by relative path, breaks by name); with --rev the models come "
        "from git (default: REV against the working tree; two --rev: REV against REV2).",
        epilog="Settings: with --rev, those of the base revision (the first REV) judge both "
               "sides and set the regression thresholds, so a change cannot loosen its own "
               "gate; --config names a file to use instead. Exit codes: 0 no regression; "
               "1 a regression; 2 input that could not be read (including a model that cannot "
               "be read on the new side, or a revision with unsafe paths) or a usage mistake; "
               "130 interrupted; 143 terminated.")
    p.add_argument("paths", nargs="*", metavar="PATH",
                   help="OLD NEW (files or folders); with --rev: files or folders to limit the diff to")
    p.add_argument("--rev", action="append", default=[], metavar="REV",
                   help="a git revision (branch, tag, commit, HEAD~1); give twice for REV vs REV2")
    p.add_argument("-f", "--format", choices=formats("diff"), default="text",
                   help="output format (default: text)")
    add_output(p, "write the report to FILE instead of stdout")
    add_config(p, "; with --rev, default: the base revision's own settings")
    add_jobs(p)
    p.add_argument("--max-phase-loss", type=_non_negative("deg", "phase_margin_loss_deg"), metavar="DEG",
                   help="phase margin loss that counts as a regression (default 5, common practice)")
    p.add_argument("--max-gain-loss", type=_non_negative("dB", "gain_margin_loss_db"), metavar="DB",
                   help="gain margin loss, up or down, that counts as a regression (default 2)")
    p.add_argument("--max-delay-loss", type=_non_negative("fraction", "delay_margin_loss_fraction"), metavar="FRACTION",
                   help="delay margin loss as a fraction (0.2 or 20%%) that counts as a regression "
                        "(default 0.2)")
    return p


def _policy(args, settings):
    """The settings file's thresholds, with the command-line options winning."""
    overrides = {k: v for k, v in (("phase_margin_loss_deg", args.max_phase_loss),
                                   ("gain_margin_loss_db", args.max_gain_loss),
                                   ("delay_margin_loss_fraction", args.max_delay_loss))
                 if v is not None}
    return dataclasses.replace(settings.regression, **overrides)


def run(args) -> int:
    """Compare the two sides (files, folders or git revisions) and write the diff; the
    exit code (`DiffResult.exit_code`: 2 a model unreadable on the new side, 1 a
    regression, else 0)."""
    from ..compare import compare
    from ..output import emit, guard_output
    from ..report import render
    from ..sides import from_paths, from_revisions
    from .options import load_settings_for

    protected = []

    def guard(inputs) -> None:  # called with the inputs before any model is checked
        guard_output(args.output, inputs)
        protected.append(inputs)

    guard = guard if args.output else None
    if args.rev:
        settings = load_settings_for(args) if args.config else None
        sides = from_revisions(args.rev, args.paths, settings, args.jobs, guard)
    else:
        sides = from_paths(args.paths, load_settings_for(args), args.jobs, guard,
                           from_config=bool(args.config))
    result = compare(sides.old, sides.new, _policy(args, sides.settings), sides.old_label,
                     sides.new_label, sides.settings_note)
    emit(render(result, args.format, kind="diff"), args.output, protected[0] if protected else None)
    if result.unreadable:
        files = ", ".join(m.file for m in result.unreadable)
        print(f"loopwise: cannot read on the new side: {files}", file=sys.stderr)
    return result.exit_code
