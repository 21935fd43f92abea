"""How long the HTML report takes, as a ratio to the check it is built on.

Run: python bench/report.py [PATH...]   (default: models/)

Times, in one process and the same run: the check of the models
(`loopwise.run.check_paths`, the reference), then the drawing and writing of the
report (`loopwise.report.html.render_html`), and one figure of each kind. The
ratios say what the pictures add on top of the check; absolute times depend on
the machine and are printed only for context.
"""
from __future__ import annotations

import sys
import time
from pathlib import Path


def main(argv: list[str]) -> int:
    root = Path(__file__).resolve().parent.parent
    paths = argv or [str(root / "models")]
    from loopwise.report import plots
    from loopwise.report.html import figure_count, render_html
    from loopwise.run import check_paths

    t0 = time.perf_counter()
    run = check_paths(paths)
    t_check = time.perf_counter() - t0
    render_html(run)  # warm-up: imports, font cache
    t0 = time.perf_counter()
    page = render_html(run)
    t_report = time.perf_counter() - t0
    figures = figure_count(run)
    print(f"models {len(run.models)}, breaks {sum(len(m.breaks) for m in run.models)}, "
          f"figures {figures}, page {len(page) / 1e6:.2f} MB")
    print(f"check (reference)      {t_check:7.2f} s   1.00")
    print(f"report (draw + write)  {t_report:7.2f} s   {t_report / t_check:5.2f} x check")
    first = next(b for m in run.models for b in m.breaks if b.response is not None)
    for kind in plots.KINDS:
        t0 = time.perf_counter()
        plots.svg_text(plots.make_figure(first, kind))
        dt = time.perf_counter() - t0
        print(f"one {kind:<12}       {dt:7.3f} s   {dt / (t_check / max(len(run.models), 1)):5.2f} x one model's check")
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
