"""The options every command shares, defined once: `--config` (and the settings it
loads), `--jobs`, `--output`, `--no-progress`.

Imported for `--help`, so only the standard library and light modules here.
"""
from __future__ import annotations

import argparse
from pathlib import Path

from ..pool import JOBS_HELP

__all__ = ["jobs_count", "add_config", "add_jobs", "add_output", "add_no_progress",
           "load_settings_for"]


def jobs_count(text: str) -> int:
    """`--jobs N`: a whole number of processes, 0 meaning one per CPU."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number of processes, got {text!r}")
    if value < 0:
        raise argparse.ArgumentTypeError("must be 0 (one per CPU) or more")
    return value


def add_config(p: argparse.ArgumentParser, extra: str = "") -> None:
    p.add_argument("--config", metavar="FILE",
                   help="settings file (loopwise.toml or pyproject.toml); default: the nearest "
                        "one from the working directory up to the repository root" + extra)


def add_jobs(p: argparse.ArgumentParser, what: str = "check models") -> None:
    p.add_argument("-j", "--jobs", type=jobs_count, default=1, metavar="N",
                   help=f"{what} {JOBS_HELP}")


def add_output(p: argparse.ArgumentParser, help_text: str, default: str | None = None,
               metavar: str = "FILE") -> None:
    p.add_argument("-o", "--output", metavar=metavar, default=default,
                   help=help_text + "; written atomically, never over a model, an included "
                                    "file or the settings file")


def add_no_progress(p: argparse.ArgumentParser) -> None:
    p.add_argument("--no-progress", action="store_true",
                   help="never draw a progress bar (it is drawn only on a terminal anyway)")


def load_settings_for(args, start: Path | None = None):
    """The settings a command runs with: the file named by `--config`, or the
    nearest one from `start` (default: the working directory)."""
    from ..settings import load_settings, load_settings_file

    config = getattr(args, "config", None)
    return load_settings_file(config) if config else load_settings(start)
