"""`loopwise report PATH... --output report.html`: one self-contained HTML file.

The models are checked exactly as `loopwise check` does (`loopwise.run.check_files`);
the page shows the same figures, the requirements, warnings, three views per
break and the caution. Heavy imports happen inside `run`.
"""
from __future__ import annotations

import sys
from pathlib import Path

from ..errors import UsageError
from .options import add_config, add_jobs, add_no_progress, add_output, load_settings_for

__all__ = ["add_parser", "run"]


def add_parser(subparsers, help_text: str):
    p = subparsers.add_parser(
        "report", help=help_text,
        description=help_text + " Folders are searched for *.loop files. The page has no "
                                "scripts and fetches nothing; it prints well.",
        epilog="Exit codes: 0 every model stable with all requirements met; 1 an instability "
               "or an unmet requirement; 2 a model could not be read (it is listed in the "
               "report with its error) or a usage mistake; 130 interrupted (Ctrl-C); "
               "143 terminated (SIGTERM).")
    p.add_argument("paths", nargs="+", metavar="PATH", help="model files or folders of models")
    add_output(p, "the HTML file to write (default: report.html)", default="report.html")
    p.add_argument("--hz", action="store_true", help="plot frequency axes in Hz instead of rad/s")
    add_config(p)
    add_jobs(p, "check models and draw figures")
    p.add_argument("--fail-on-warnings", action="store_true",
                   help="count a model with warnings as failed (also in the exit code)")
    add_no_progress(p)
    return p


def run(args) -> int:
    from ..output import emit, guard_output, protected_inputs
    from ..report import finding_text
    from ..progress import progress_bar, wants_progress
    from ..report.html import figure_count, render_html
    from ..run import check_files, discover, exit_status

    out = Path(args.output)
    if out.suffix.lower() not in (".html", ".htm"):
        raise UsageError(f"{args.output}: the report is HTML; name it with .html")
    settings = load_settings_for(args)
    fail = settings.fail_on_warnings or args.fail_on_warnings
    files = discover(args.paths, settings)
    protected = protected_inputs(files, settings)
    guard_output(args.output, protected)  # before the long run, not after it
    progress = not args.no_progress and wants_progress(sys.stderr)
    result = check_files(files, settings, jobs=args.jobs, progress=progress)
    with progress_bar("drawing", figure_count(result), enabled=progress) as tick:
        page = render_html(result, hz=args.hz, fail_on_warnings=fail, jobs=args.jobs, tick=tick)
    emit(page, args.output, protected)
    for e in result.errors:
        print(finding_text(e), file=sys.stderr)
    emit(f"report written to {args.output} ({len(result.models)} model(s), "
         f"{figure_count(result)} figure(s), {len(result.errors)} error(s))\n")
    return exit_status(result, fail)
