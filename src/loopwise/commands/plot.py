"""`loopwise plot FILE`: Nyquist, Bode and sensitivity views of a model's breaks.

Imports nothing heavy at module level (`loopwise plot --help` stays fast);
matplotlib loads inside `loopwise.report.plots` when the first figure is drawn.
"""
from __future__ import annotations

import sys
from pathlib import Path

from ..errors import UsageError
from .options import add_config, add_no_progress, load_settings_for, progress_wanted

__all__ = ["add_parser", "run", "output_paths"]

KINDS = ("nyquist", "bode", "sensitivity")
SUFFIXES = (".svg", ".png", ".pdf")


def add_parser(subparsers, help_text: str):
    """Add `loopwise plot` and its options to the subcommands."""
    p = subparsers.add_parser(
        "plot", help=help_text,
        description=help_text + " Figures are drawn from the same samples the check used.",
        epilog="Without --output the files are named <model>-<break>-<kind>.svg in the current "
               "folder. With --output the suffix picks the format (.svg, .png, .pdf); when several "
               "figures are drawn, -<break> (without --break and with more than one break) and "
               "-<kind> (with --kind all) are added before the suffix. Each file is written "
               "atomically and never over the model or a file it uses. Exit codes: 0 figures "
               "written; 2 the model could not be read or a usage mistake.")
    p.add_argument("file", metavar="FILE", help="a model file (.loop)")
    p.add_argument("--break", dest="break_name", metavar="NAME",
                   help="the break to draw (default: every break of the model)")
    p.add_argument("--kind", choices=KINDS + ("all",), default="nyquist",
                   help="which view (default: nyquist)")
    p.add_argument("-o", "--output", metavar="PATH",
                   help="output file; its suffix picks the format: .svg, .png or .pdf")
    p.add_argument("--hz", action="store_true", help="frequency axes in Hz instead of rad/s")
    add_config(p)
    add_no_progress(p)
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
    from ..report.summary import finding_text
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
    """Check one model and draw the chosen views of its breaks, each to its own file;
    0 when every figure is written, 2 when the model cannot be read."""
    from ..output import guard_output, protected_inputs
    from ..progress import progress_bar

    _check_suffix(args.output)
    settings = load_settings_for(args)
    model = _model(args.file, settings)
    if model is None:
        return 2
    breaks = _select(model, args.break_name, args.file)
    kinds = list(KINDS) if args.kind == "all" else [args.kind]
    jobs = output_paths(model.model, [b.name for b in breaks], kinds, args.output,
                        many_breaks=args.break_name is None and len(breaks) > 1)
    protected = protected_inputs([args.file], settings)
    for _, _, path in jobs:  # every name refused before the first figure is drawn
        guard_output(path, protected)
    by_name = {b.name: b for b in breaks}
    with progress_bar("drawing", len(jobs), enabled=progress_wanted(args)) as tick:
        for name, kind, path in jobs:
            _draw(by_name[name], kind, path, model.model, args.hz, protected)
            print(f"wrote {path}")
            tick()
    return 0


def _draw(result, kind: str, path: Path, model: str, hz: bool, protected) -> None:
    from ..output import atomic_file
    from ..report.plots import make_figure, save_figure

    fig = make_figure(result, kind, model=model, hz=hz)
    with atomic_file(path, protected) as tmp:
        save_figure(fig, tmp, salt=f"{model}-{result.name}-{kind}")
