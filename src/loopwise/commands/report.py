"""`loopwise report PATH... --output report.html`: one self-contained HTML file.

The models are checked exactly as `loopwise check` does (`loopwise.run.check_paths`);
the page shows the same figures, the requirements, warnings, three views per
break and the caution. Heavy imports happen inside `run`.
"""
from __future__ import annotations

import os
import sys
from pathlib import Path

from ..errors import UsageError

from .check import _jobs  # one parser of --jobs for both commands

__all__ = ["add_parser", "run"]

#: below this many figures a progress bar is more flicker than help
PROGRESS_MIN_FIGURES = 6


def add_parser(subparsers, help_text: str):
    p = subparsers.add_parser(
        "report", help=help_text,
        description=help_text + " Folders are searched for *.loop files. The page has no "
                                "scripts and fetches nothing; it prints well.",
        epilog="Exit codes: 0 every model stable with all requirements met; 1 an instability "
               "or an unmet requirement; 2 a model could not be read (it is listed in the "
               "report with its error) or a usage mistake.")
    p.add_argument("paths", nargs="+", metavar="PATH", help="model files or folders of models")
    p.add_argument("-o", "--output", metavar="FILE", default="report.html",
                   help="the HTML file to write (default: report.html)")
    p.add_argument("--hz", action="store_true", help="plot frequency axes in Hz instead of rad/s")
    p.add_argument("--config", metavar="FILE", help="settings file (default: the nearest one)")
    p.add_argument("-j", "--jobs", type=_jobs, default=1, metavar="N",
                   help="check models and draw figures in N processes (0: one per CPU; "
                        "default 1); the page is the same for any N")
    p.add_argument("--fail-on-warnings", action="store_true",
                   help="count a model with warnings as failed (also in the exit code)")
    p.add_argument("--no-progress", action="store_true", help="never draw a progress bar")
    p.add_argument("--sweep", action="store_true",
                   help="also sweep every model with ranged params (as `loopwise sweep`) and add a sweep "
                        "section: the Nyquist band of sampled plants, each worst margin against each param")
    p.add_argument("--samples", type=int, default=None, metavar="N",
                   help="with --sweep: size of the space-filling set (default as `loopwise sweep`)")
    p.add_argument("--seed", type=int, default=0, metavar="N", help="with --sweep: the design's seed")
    return p


def _sweep_sections(args, settings, result, jobs: int) -> tuple[dict, object | None]:
    """HTML lines of each swept model's section, keyed by file, and the sweep's run."""
    if not args.sweep:
        return {}, None
    from ..report.sweep_html import sweep_section
    from ..sweep import DEFAULT_SAMPLES, SweepOptions, sweep_paths
    from ..sweep.band import band_results

    options = SweepOptions(DEFAULT_SAMPLES if args.samples is None else args.samples, args.seed)
    swept = sweep_paths(args.paths, settings, options, jobs=jobs)
    checked = {m.file: (n, m) for n, m in enumerate(result.models)}
    extra = {}
    for s in swept.models:
        if s.file in checked and s.params:
            n, m = checked[s.file]
            extra[s.file] = sweep_section(m, s, band_results(s.file, settings, s), n)
    return extra, swept


def _progress(total: int):
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, \
        TimeElapsedColumn

    bar = Progress(TextColumn("drawing"), BarColumn(), MofNCompleteColumn(), TimeElapsedColumn(),
                   console=Console(stderr=True), transient=True)
    task = bar.add_task("figures", total=total)
    return bar, (lambda: bar.advance(task))


def run(args) -> int:
    from ..report.html import figure_count, render_html
    from ..run import check_paths, exit_status, wants_progress
    from ..settings import load_settings, load_settings_file

    out = Path(args.output)
    if out.suffix.lower() not in (".html", ".htm"):
        raise UsageError(f"{args.output}: the report is HTML; name it with .html")
    if out.parent != Path("") and not out.parent.is_dir():
        raise UsageError(f"cannot write {out}: the folder {out.parent} does not exist")
    settings = load_settings_file(args.config) if args.config else load_settings()
    fail = settings.fail_on_warnings or args.fail_on_warnings
    progress = not args.no_progress and wants_progress(sys.stderr)
    result = check_paths(args.paths, settings, jobs=args.jobs, progress=progress)
    jobs = args.jobs or (os.cpu_count() or 1)
    bar, tick = None, (lambda: None)
    if progress and figure_count(result) >= PROGRESS_MIN_FIGURES:
        bar, tick = _progress(figure_count(result))
        bar.start()
    extra, swept = _sweep_sections(args, settings, result, jobs)
    try:
        page = render_html(result, hz=args.hz, fail_on_warnings=fail, jobs=jobs, tick=tick, extra=extra)
    finally:
        if bar is not None:
            bar.stop()
    try:
        out.write_text(page, encoding="utf-8")
    except OSError as exc:
        raise UsageError(f"cannot write {out}: {exc.strerror or exc}") from None
    from ..report import finding_text

    for e in result.errors:
        print(finding_text(e), file=sys.stderr)
    print(f"report written to {out} ({len(result.models)} model(s), "
          f"{figure_count(result)} figure(s), {len(result.errors)} error(s))")
    if swept is not None:
        from ..report.sweep_text import sweep_passes

        for e in swept.errors:
            if e not in result.errors:
                print(finding_text(e), file=sys.stderr)
        sweep_code = 2 if swept.errors else (0 if all(sweep_passes(m, fail) for m in swept.models) else 1)
        return max(exit_status(result, fail), sweep_code)
    return exit_status(result, fail)
