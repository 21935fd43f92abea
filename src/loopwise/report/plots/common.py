"""What the three views share: the look, fixed page layouts, frequency labels,
label placement without overlaps, and the thinning of drawn lines.

matplotlib is imported inside functions only (the CLI starts without it).
Figures use fixed axes rectangles instead of a layout engine: the pages are
the same every time, and a layout pass cost about 40 % of the drawing.
"""
from __future__ import annotations

import math
import os
from contextlib import contextmanager
from dataclasses import dataclass, field

import numpy as np

from ...results import BreakResult
from ..geometry import simplify_mask

#: colours by role; lightness steps keep them apart in grey print
INK = {
    "curve": "#17406d",      # deep ink blue (dark)
    "mirror": "#8aa9c8",     # the same hue, light
    "gain": "#b35a00",       # orange-brown (mid)
    "phase": "#6a3d9a",      # violet (mid-dark)
    "critical": "#000000",
    "guide": "#9a9a9a",      # unit circle, 0 dB, -180 deg lines
    "ring": "#ededed",       # the compressed outer ring
    "text": "#222222",
    "note": "#333333",
    "t": "#c0661a",          # |T| curve (orange, lighter than the gain marks)
}

#: the drawn line may leave the engine's samples by at most this much (points;
#: a fifth of a pixel on a screen, a third at 150 dpi)
THIN_TOL_PT = 0.15
#: lines whose turns around -1 must survive thinning (the sweep's band is Nyquist curves too)
NYQUIST_LINES = ("nyquist-positive", "nyquist-negative", "zoom-positive", "zoom-negative",
                 "band-nominal", "band-plant")
#: the mirror half of a Nyquist curve -> its positive half (thinned once, mirrored;
#: reflection in the real axis keeps -1 and, with equal axis scales, all distances)
MIRRORS = {"nyquist-negative": "nyquist-positive", "zoom-negative": "zoom-positive"}
KEY_SIZE = 7.5


def matplotlib_headless():
    """Import matplotlib on first use; headless (Agg) when there is no display."""
    import matplotlib

    if not (os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY")):
        matplotlib.use("Agg", force=False)
    return matplotlib


@contextmanager
def style(salt: str = "loopwise"):
    """A context in which figures are drawn alike: the house style (fonts, greys, grid),
    real text in SVG, ids salted with `salt`, no path simplification (the lines are
    thinned by `thin_lines`) and no math-text parsing of names. Yields matplotlib."""
    mpl = matplotlib_headless()
    rc = {
        "font.family": "DejaVu Sans", "font.size": 8.5, "axes.titlesize": 10,
        "axes.labelsize": 9, "axes.edgecolor": "#555555", "axes.linewidth": 0.8,
        "axes.spines.top": False, "axes.spines.right": False,
        "axes.grid": True, "grid.color": "#dddddd", "grid.linewidth": 0.6,
        "grid.linestyle": "-", "xtick.color": "#444444", "ytick.color": "#444444",
        "legend.frameon": False, "legend.fontsize": 8,
        "svg.fonttype": "none", "svg.hashsalt": salt,  # real text; ids unique per figure
        "path.simplify": False,  # lines are thinned by `thin_lines`, which keeps the winding
        # every label is plain text (ours use Unicode, never TeX): a model or file name with
        # `$` must print as written, not be parsed as math (`$\q{$` would stop the drawing)
        "text.parse_math": False,
    }
    with mpl.rc_context(rc):
        yield mpl


def new_figure(size, rects: dict[str, tuple[float, float, float, float]]):
    """A figure with axes at fixed rectangles (figure fractions), by name."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=size)
    return fig, {name: fig.add_axes(rect) for name, rect in rects.items()}


class Panel:
    """A rectangle of the figure for text and a legend (no axes: an axes costs
    ticks and a clear even when hidden). Coordinates inside run 0..1."""

    def __init__(self, fig, rect: tuple[float, float, float, float]):
        from matplotlib.transforms import Bbox, BboxTransformTo, TransformedBbox

        self.fig = fig
        self.rect = rect
        self.bbox = TransformedBbox(Bbox.from_bounds(*rect), fig.transFigure)
        self.transform = BboxTransformTo(self.bbox)

    def text(self, x: float, y: float, text: str, **kw):
        """Text at (x, y) in the panel's own coordinates (0..1 across its rectangle)."""
        return self.fig.text(x, y, text, transform=self.transform, **kw)

    def legend(self, handles, labels, **kw):
        """A key for `handles` with `labels`, anchored at the panel's lower left."""
        return self.fig.legend(handles, labels, loc="lower left", bbox_to_anchor=self.rect,
                               bbox_transform=self.fig.transFigure, borderaxespad=0,
                               fontsize=KEY_SIZE, handlelength=2.6, **kw)


def renderer_of(fig):
    """A renderer to measure text with (Agg; the same font metrics as every format)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    if not isinstance(fig.canvas, FigureCanvasAgg):
        FigureCanvasAgg(fig)
    return fig.canvas.get_renderer()


def title(fig, result: BreakResult, what: str, model: str | None) -> None:
    """The title across the top of the page, shrunk until it fits the width."""
    head = f"{model} \u00b7 " if model else ""
    text = fig.text(0.012, 0.988, f"{head}break {result.name} (at {result.at}): {what}",
                    va="top", ha="left", fontsize=10, color=INK["text"], gid="title")
    renderer = renderer_of(fig)
    size = 10.0
    while size > 6.0 and text.get_window_extent(renderer).x1 > fig.bbox.x1 - 4:
        size -= 0.5
        text.set_fontsize(size)


def freq_label(w: float, hz: bool) -> str:
    """A frequency in the unit the view uses (w in rad/s)."""
    return f"{w / (2 * math.pi):.3g} Hz" if hz else f"{w:.3g} rad/s"


def freq_symbol(kind: str, hz: bool) -> str:
    """Crossover frequency symbol: \u03c9 (angular, rad/s) or f (Hz); c gain, p phase."""
    return ("f" if hz else "\u03c9") + ("c" if kind == "gain" else "p")


def unmarked_lines(groups, hz: bool) -> list[str]:
    """The key's summary of crossovers that are not marked (see geometry.select_crossings)."""
    out = []
    for g in groups:
        many = "s" if g.count > 1 else ""
        if g.kind == "gain":
            out += [f"{g.count} further gain crossover{many},",
                    f"  phase margin \u2265 {g.closest:.1f}\u00b0 (not marked)"]
            continue
        where = {"above": f"above {freq_label(g.freq, hz)}", "below": f"below {freq_label(g.freq, hz)}",
                 "among": "among the marked"}[g.side]
        level = {1: f"|L| \u2264 \u2212{g.closest:.1f} dB", -1: f"|L| \u2265 +{g.closest:.1f} dB",
                 0: f"\u2265 {g.closest:.1f} dB from 0 dB"}[g.sign]
        out += [f"{g.count} further phase crossover{many}", f"  {where},", f"  all at {level} (not marked)"]
    return out


def need_response(result: BreakResult):
    """The frequency response a break's check recorded; a usage error when there is none."""
    if result.response is None or len(result.response.L) == 0:
        from ...errors import UsageError

        raise UsageError(f"break {result.name!r} has no frequency response to draw")
    return result.response


# ------------------------------------------------------------- labels

@dataclass
class Label:
    """A label to place: `text` at one of `spots` ((anchor xy in data, offset in
    points), in order of preference); a leader line to the anchor when the
    offset is longer than `leader_beyond` points."""

    text: str
    spots: list
    style: dict = field(default_factory=dict)
    leader_beyond: float = math.inf
    gid: str | None = None


def _overlap(a, b) -> float:
    w = min(a[2], b[2]) - max(a[0], b[0])
    h = min(a[3], b[3]) - max(a[1], b[1])
    return w * h if w > 0 and h > 0 else 0.0


def _ink_inside(box, ink: np.ndarray) -> int:
    if ink.size == 0:
        return 0
    x, y = ink[:, 0], ink[:, 1]
    return int(np.count_nonzero((x > box[0]) & (x < box[2]) & (y > box[1]) & (y < box[3])))


def _half_size(ax, renderer, text: str, style: dict) -> tuple[float, float]:
    """Half the width and height (display units) of a label's box, padding included."""
    probe = ax.annotate(text, (0, 0), xycoords="figure pixels", **style)
    ext = probe.get_window_extent(renderer)
    probe.remove()
    pad = 1.5 * ax.figure.dpi / 72.0
    return ext.width / 2 + pad, ext.height / 2 + pad


def _box(ax, xy, off, half) -> tuple:
    cx, cy = ax.transData.transform(xy) + np.asarray(off) * ax.figure.dpi / 72.0
    return (cx - half[0], cy - half[1], cx + half[0], cy + half[1])


def _clash(box, taken, frame) -> float:
    outside = box[0] < frame.x0 or box[2] > frame.x1 or box[1] < frame.y0 or box[3] > frame.y1
    return sum(_overlap(box, t) for t in taken) + (1e9 if outside else 0.0)


def _annotate(ax, label: Label, xy, off) -> None:
    arrow = None
    if math.hypot(*off) > label.leader_beyond:
        arrow = dict(arrowstyle="-", color=label.style.get("color", "#555555"), lw=0.6,
                     shrinkA=0, shrinkB=3)
    ax.annotate(label.text, xy, xytext=off, textcoords="offset points", arrowprops=arrow,
                annotation_clip=False, gid=label.gid, **label.style).set_in_layout(False)


def place_labels(ax, labels: list[Label], obstacles: list, ink: np.ndarray) -> list:
    """Put each label at its first spot that overlaps no obstacle and no label
    placed before it and stays inside the axes; among those, fewer curve points
    (`ink`, display coordinates) under the box win. Returns the boxes taken
    (display coordinates, x0 y0 x1 y1), so later labels can avoid them too."""
    renderer = renderer_of(ax.figure)
    frame = ax.get_window_extent(renderer)
    taken = [tuple(b) for b in obstacles]
    for label in labels:
        half = _half_size(ax, renderer, label.text, label.style)
        best = None
        reach = sorted({round(math.hypot(*off), 1) for _, off in label.spots})
        for rank, (xy, off) in enumerate(label.spots):
            box = _box(ax, xy, off, half)
            clash = _clash(box, taken, frame)
            # a few curve points under a near tag cost less than a long leader
            far = reach.index(round(math.hypot(*off), 1))
            score = (clash, min(_ink_inside(box, ink), 4) + 2 * far, rank)
            if best is None or score < best[0]:
                best = (score, xy, off, box)
            if clash == 0 and score[1] == 0:
                break
        _, xy, off, box = best
        _annotate(ax, label, xy, off)
        taken.append(box)
    return taken


def place_together(ax, labels: list[Label], obstacles: list, ink: np.ndarray) -> list:
    """Put labels that belong together at the k-th spot of each (the same k for
    all): the first k where none overlaps another, an obstacle or the frame, and
    fewest curve points lie under them. Returns the boxes taken with the obstacles."""
    renderer = renderer_of(ax.figure)
    frame = ax.get_window_extent(renderer)
    taken = [tuple(b) for b in obstacles]
    halves = [_half_size(ax, renderer, label.text, label.style) for label in labels]
    best = None
    for k in range(min(len(label.spots) for label in labels)):
        boxes = [_box(ax, *label.spots[k], half) for label, half in zip(labels, halves)]
        clash = sum(_clash(b, taken + boxes[:i], frame) for i, b in enumerate(boxes))
        score = (clash, sum(_ink_inside(b, ink) for b in boxes), k)
        if best is None or score < best[0]:
            best = (score, k, boxes)
        if score[:2] == (0, 0):
            break
    _, k, boxes = best
    for label in labels:
        _annotate(ax, label, *label.spots[k])
    return taken + boxes


def ring_of_offsets(radii=(10, 15, 22, 32), start_deg: float = 90.0, count: int = 8):
    """Offsets (points) around an anchor, nearest first, starting at `start_deg`."""
    out = []
    for r in radii:
        for k in range(count):
            a = math.radians(start_deg + 360.0 * k / count)
            out.append((r * math.cos(a), r * math.sin(a)))
    return out


def marker_box(ax, xy, size_pt: float) -> tuple:
    """The display box of a marker of `size_pt` points at data point xy."""
    px = ax.figure.dpi / 72.0
    x, y = ax.transData.transform(xy)
    h = size_pt * px / 2 + 1.0
    return (x - h, y - h, x + h, y + h)


def display_points(ax, x, y) -> np.ndarray:
    """The finite points (x, y) of data coordinates in `ax`, in display coordinates (pixels)."""
    pts = ax.transData.transform(np.column_stack([np.asarray(x, float), np.asarray(y, float)]))
    return pts[np.all(np.isfinite(pts), axis=1)]


# ------------------------------------------------------------- thinning

def thin_lines(fig, tol_pt: float = THIN_TOL_PT, min_points: int = 60) -> None:
    """Drop the points of every drawn line that a page cannot show.

    Each line is simplified in display coordinates (geometry.simplify_mask): a
    dropped point is within `tol_pt` of the drawn segment replacing it. Nyquist
    lines keep every segment that would pass within `tol_pt` of -1, so the
    thinned curve turns around -1 as often as the engine's samples do. Runs
    after the axes limits and rectangles are final (the display scale is known).
    """
    tol = tol_pt * fig.dpi / 72.0
    for ax in fig.axes:
        ax.apply_aspect()
        lines = {line.get_gid(): line for line in ax.get_lines()}
        for line in ax.get_lines():
            if line.get_gid() in MIRRORS and MIRRORS[line.get_gid()] in lines:
                continue  # drawn from its positive half below, so the two stay mirror images
            x = np.asarray(line.get_xdata(orig=False), float)
            y = np.asarray(line.get_ydata(orig=False), float)
            if x.size < min_points:
                continue
            transform = line.get_transform()
            with np.errstate(all="ignore"):
                d = transform.transform(np.column_stack([x, y]))
            guard = transform.transform([[-1.0, 0.0]])[0] if line.get_gid() in NYQUIST_LINES else None
            keep = simplify_mask(d, tol, guard)
            line.set_data(x[keep], y[keep])
        for mirror, source in MIRRORS.items():
            if mirror in lines and source in lines:
                x, y = lines[source].get_data()
                lines[mirror].set_data(np.asarray(x)[::-1], -np.asarray(y)[::-1])
