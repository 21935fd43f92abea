"""The command line: find the subcommand, parse its arguments, run it, map
failures to exit codes.

Each subcommand lives in `loopwise.commands.<name>` and exposes
``add_parser(subparsers, help_text)`` and ``run(args) -> int``; only the module
of the command being run is imported (the others are listed by name), so
`loopwise --help` stays fast. Options shared by the commands are defined once
in `loopwise.commands.options`; output goes through `loopwise.output`.

`main(argv) -> int` returns the exit code: 0 all good; 1 an instability, an
unmet requirement or a regression; 2 input that could not be read or a usage
mistake (one line on stderr, never a traceback); 130 interrupted (Ctrl-C);
143 terminated (SIGTERM; worker processes are ended first, and an output
being written is left as it was).
"""
from __future__ import annotations

import argparse
import importlib
import os
import sys

# The engine works on many small matrices: BLAS threads cost more than they save, and
# --jobs runs processes side by side. Set before numpy loads; a user's own setting wins.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

from . import __version__  # noqa: E402
from .errors import LoopwiseError, UsageError  # noqa: E402
from .pool import Terminated, sigterm_raises  # noqa: E402

__all__ = ["main", "entry", "COMMANDS"]

#: subcommand name -> module under loopwise.commands (imported only when used)
COMMANDS = {
    "check": "Check the stability and margins of every break in models.",
    "sweep": "Find the worst verdict and margins over the params' ranges.",
    "graph": "Print a model's structure: signals, loops, breaks, nesting.",
    "diff": "Compare stability between two revisions of models.",
    "plot": "Draw Nyquist, Bode and sensitivity views of a break.",
    "report": "Write a self-contained HTML report of models.",
}


class _Parser(argparse.ArgumentParser):
    """argparse that raises instead of printing a usage block and exiting."""

    def error(self, message: str):  # noqa: D401
        raise UsageError(f"{message} (see `{self.prog} --help`)")


def _build_parser(command: str | None) -> argparse.ArgumentParser:
    parser = _Parser(
        prog="loopwise",
        description="Stability checks for multi-loop feedback-control models.",
        epilog="Exit codes: 0 all stable and all requirements met; 1 an instability, an unmet "
               "requirement or a regression; 2 input that could not be read; 130 interrupted; "
               "143 terminated.",
    )
    parser.add_argument("--version", action="version", version=f"loopwise {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name, help_text in COMMANDS.items():
        if name == command:
            module = importlib.import_module(f"loopwise.commands.{name}")
            module.add_parser(sub, help_text)
        else:
            # the other commands are listed without importing their modules
            sub.add_parser(name, help=help_text, add_help=False)
    return parser


def _tolerant_stdout() -> None:
    # a model's own text (names, an echoed source line) may hold characters the
    # console's encoding lacks: replace them rather than fail after the whole run
    # (stderr already escapes what it cannot show)
    if hasattr(sys.stdout, "reconfigure"):
        try:
            sys.stdout.reconfigure(errors="replace")
        except (ValueError, OSError):
            pass


def main(argv: list[str] | None = None) -> int:
    """Run `loopwise ARGS` (default: the process's arguments) and return the exit code.

    0 all good; 1 an instability, an unmet requirement or a regression; 2 input that
    could not be read or a usage mistake (one line on stderr, never a traceback);
    130 interrupted; 143 terminated."""
    argv = list(sys.argv[1:] if argv is None else argv)
    _tolerant_stdout()
    command = next((a for a in argv if not a.startswith("-")), None)
    if command not in COMMANDS:
        command = None
    try:
        parser = _build_parser(command)
        if not argv:
            parser.print_help()
            return 2
        args = parser.parse_args(argv)
        if args.command is None:
            parser.print_help()
            return 2
        module = importlib.import_module(f"loopwise.commands.{args.command}")
        with sigterm_raises():
            return int(module.run(args))
    except UsageError as exc:
        print(f"loopwise: {exc}", file=sys.stderr)
        return 2
    except LoopwiseError as exc:
        print(f"loopwise: {exc}", file=sys.stderr)
        return 2
    except Terminated:
        _exiting()
        print("loopwise: terminated", file=sys.stderr)
        return 143
    except KeyboardInterrupt:
        _exiting()
        print("loopwise: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 1
    except Exception as exc:  # noqa: BLE001 - a bug must not reach the user as a traceback
        if os.environ.get("LOOPWISE_DEBUG"):
            raise
        print(f"loopwise: internal error ({type(exc).__name__}: {exc}); no verdict was given. "
              "Set LOOPWISE_DEBUG=1 to see the traceback, and please report it.", file=sys.stderr)
        return 2


def _exiting() -> None:
    """The command is stopping: a further Ctrl-C (users press it again) must not
    turn the orderly exit into a traceback."""
    import signal
    import threading

    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGINT, signal.SIG_IGN)


def entry() -> None:
    """The `loopwise` console script: exit with `main()`'s code."""
    raise SystemExit(main())
