"""`loopwise report PATH... --output report.html`: one self-contained HTML file.

The models are checked exactly as `loopwise check` does (`loopwise.run.check_files`);
the page shows the same figures, the requirements, warnings, three views per
break and the caution. Heavy imports happen inside `run`.
"""
from __future__ import annotations

import sys
from pathlib import Path

from ..errors import UsageError
from .options import (add_config, add_design, add_jobs, add_no_progress, add_output, load_settings_for,
                      progress_wanted)

__all__ = ["add_parser", "run"]


def add_parser(subparsers, help_text: str):
    """Add `loopwise report` and its options to the subcommands."""
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
    p.add_argument("--fail-on-warnings", action="store_true", default=None,
                   help="count a model with warnings as failed (also in the exit code)")
    add_no_progress(p)
    p.add_argument("--sweep", action="store_true",
                   help="also sweep every model with ranged params (as `loopwise sweep`) and add a sweep "
                        "section: the Nyquist band of sampled plants, each worst margin against each param")
    add_design(p, "with --sweep: ")
    return p


def _sweep_sections(args, files, settings, result) -> tuple[dict, object | None]:
    """HTML lines of each swept model's section, keyed by file, and the sweep's run."""
    if not args.sweep:
        return {}, None
    from ..language.source import common_root
    from ..report.sweep_html import sweep_section
    from ..sweep import SweepOptions, sweep_files
    from ..sweep.band import BAND_PLANTS, band_results

    root = common_root(args.paths)  # the include root `check_files` uses: the paths named
    swept = sweep_files(files, settings, SweepOptions(args.samples, args.seed), jobs=args.jobs, root=root)
    checked = {m.file: (n, m) for n, m in enumerate(result.models)}
    extra = {}
    for s in swept.models:
        if s.file in checked and s.params:
            n, m = checked[s.file]
            band = band_results(s, BAND_PLANTS)
            extra[s.file] = sweep_section(m, s, band, n, settings.fail_on_warnings)
    return extra, swept


def run(args) -> int:
    """Check the models (and, with `--sweep`, sweep them) and write the HTML report; the
    exit code is check's (`run.exit_status`), or the sweep's when that is worse."""
    from ..language.source import common_root
    from ..output import emit, guard_inputs
    from ..progress import progress_bar
    from ..report.summary import finding_text
    from ..report.html import figure_count, render_html
    from ..run import check_files, discover, exit_status

    out = Path(args.output)
    if out.suffix.lower() not in (".html", ".htm"):
        raise UsageError(f"{args.output}: the report is HTML; name it with .html")
    settings = load_settings_for(args)
    fail = settings.fail_on_warnings  # --fail-on-warnings applied by load_settings_for
    files = discover(args.paths, settings)
    protected = guard_inputs(args.output, files, settings)  # before the long run, not after it
    progress = progress_wanted(args)
    result = check_files(files, settings, jobs=args.jobs, progress=progress, root=common_root(args.paths))
    extra, swept = _sweep_sections(args, files, settings, result)
    with progress_bar("drawing", figure_count(result), enabled=progress) as tick:
        page = render_html(result, hz=args.hz, fail_on_warnings=fail, jobs=args.jobs, tick=tick, extra=extra)
    emit(page, args.output, protected)
    for e in result.errors:
        print(finding_text(e), file=sys.stderr)
    emit(f"report written to {args.output} ({len(result.models)} model(s), "
         f"{figure_count(result)} figure(s), {len(result.errors)} error(s))\n")
    if swept is not None:
        for e in swept.errors:
            if e not in result.errors:
                print(finding_text(e), file=sys.stderr)
        return max(exit_status(result, fail), swept.exit_status(fail))
    return exit_status(result, fail)
