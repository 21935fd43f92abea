"""`loopwise plot FILE`: Nyquist, Bode and sensitivity views of a model's breaks.

Imports nothing heavy at module level (`loopwise plot --help` stays fast);
matplotlib loads inside `loopwise.report.plots` when the first figure is drawn.
"""
from __future__ import annotations

import sys
from pathlib import Path

from ..errors import UsageError

__all__ = ["add_parser", "run", "output_paths"]

KINDS = ("nyquist", "bode", "sensitivity")
SUFFIXES = (".svg", ".png", ".pdf")
#: below this many figures a progress bar is more flicker than help
PROGRESS_MIN_FIGURES = 6


def add_parser(subparsers, help_text: str):
    p = subparsers.add_parser(
        "plot", help=help_text,
        description=help_text + " Figures are drawn from the same samples the check used.",
        epilog="Without --output the files are named <model>-<break>-<kind>.svg in the current "
               "folder. With --output the suffix picks the format (.svg, .png, .pdf); when several "
               "figures are drawn, -<break> (without --break and with more than one break) and "
               "-<kind> (with --kind all) are added before the suffix. Exit codes: 0 figures "
               "written; 2 the model could not be read or a usage mistake.")
    p.add_argument("file", metavar="FILE", help="a model file (.loop)")
    p.add_argument("--break", dest="break_name", metavar="NAME",
                   help="the break to draw (default: every break of the model)")
    p.add_argument("--kind", choices=KINDS + ("all",), default="nyquist",
                   help="which view (default: nyquist)")
    p.add_argument("-o", "--output", metavar="PATH",
                   help="output file; its suffix picks the format: .svg, .png or .pdf")
    p.add_argument("--hz", action="store_true", help="frequency axes in Hz instead of rad/s")
    p.add_argument("--config", metavar="FILE", help="settings file (default: the nearest one)")
    p.add_argument("--no-progress", action="store_true", help="never draw a progress bar")
    return p


def _check_suffix(output: str | None) -> None:
    if output is not None and Path(output).suffix.lower() not in SUFFIXES:
        suffix = Path(output).suffix or "(none)"
        raise UsageError(f"{output}: unknown suffix {suffix}; use .svg, .png or .pdf")


def output_paths(model: str, breaks: list[str], kinds: list[str], output: str | None,
                 many_breaks: bool) -> list[tuple[str, str, Path]]:
    """(break, kind, path) for every figure to draw, in break then kind order."""
    out = []
    for b in breaks:
        for k in kinds:
            if output is None:
                path = Path(f"{model}-{b}-{k}.svg")
            else:
                base = Path(output)
                extra = (f"-{b}" if many_breaks else "") + (f"-{k}" if len(kinds) > 1 else "")
                path = base.with_name(base.stem + extra + base.suffix)
            out.append((b, k, path))
    return out


def _model(path: str, settings):
    from ..report import finding_text
    from ..run import check_one

    if not Path(path).is_file():
        raise UsageError(f"{path}: no such model file")
    model, errors = check_one(path, settings)
    if model is None:
        for e in errors:
            print(finding_text(e), file=sys.stderr)
        return None
    return model


def _select(model, name: str | None, file: str):
    if not model.breaks:
        raise UsageError(f"{file}: the model has no breaks to draw "
                         "(add `break <name> at <signal>`)")
    if name is None:
        return list(model.breaks)
    chosen = [b for b in model.breaks if b.name == name]
    if not chosen:
        names = ", ".join(b.name for b in model.breaks)
        raise UsageError(f"{file}: no break named {name!r}; the breaks are: {names}")
    return chosen


def run(args) -> int:
    from ..settings import load_settings, load_settings_file

    _check_suffix(args.output)
    settings = load_settings_file(args.config) if args.config else load_settings()
    model = _model(args.file, settings)
    if model is None:
        return 2
    breaks = _select(model, args.break_name, args.file)
    kinds = list(KINDS) if args.kind == "all" else [args.kind]
    jobs = output_paths(model.model, [b.name for b in breaks], kinds, args.output,
                        many_breaks=args.break_name is None and len(breaks) > 1)
    by_name = {b.name: b for b in breaks}
    from ..run import wants_progress

    bar = None
    if not args.no_progress and len(jobs) >= PROGRESS_MIN_FIGURES and wants_progress(sys.stderr):
        bar = _progress(len(jobs))
    try:
        for name, kind, path in jobs:
            _draw(by_name[name], kind, path, model.model, args.hz)
            print(f"wrote {path}")
            if bar is not None:
                bar[1]()
    finally:
        if bar is not None:
            bar[0].stop()
    return 0


def _draw(result, kind: str, path: Path, model: str, hz: bool) -> None:
    from ..report.plots import make_figure, save_figure

    fig = make_figure(result, kind, model=model, hz=hz)
    try:
        save_figure(fig, path, salt=f"{model}-{result.name}-{kind}")
    except OSError as exc:
        raise UsageError(f"cannot write {path}: {exc.strerror or exc}") from None


def _progress(total: int):
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

    bar = Progress(TextColumn("drawing"), BarColumn(), MofNCompleteColumn(),
                   console=Console(stderr=True), transient=True)
    task = bar.add_task("figures", total=total)
    bar.start()
    return bar, (lambda: bar.advance(task))
