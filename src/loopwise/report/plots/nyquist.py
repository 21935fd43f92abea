"""The Nyquist view: the whole closed curve, far stretches on a compressed
ring, crossovers tagged, the count in a box, and an inset near -1 when the
curve passes close to it (docs/plots.md).

`drawn_curve`, `draw_guides` and `set_limits` are public: the sweep's band of
sampled plants (`plots/sweep.py`) draws its curves the same way."""
from __future__ import annotations

import math

import numpy as np

from ...results import BreakResult
from ..geometry import (Ring, choose_ring, closed_curve, densify_ring_arcs, select_crossings,
                        verdict_word, zoom_near_critical)
from .common import (INK, KEY_SIZE, Label, Panel, display_points, freq_label, freq_symbol,
                     marker_box, need_response, new_figure, place_labels, place_together,
                     renderer_of, ring_of_offsets, style, thin_lines, title, unmarked_lines)

#: page width and height (inches); the page is taller when an inset near -1 is
#: drawn, so the inset finds room in the side panel instead of hiding the curve
WIDTH, HEIGHT, HEIGHT_WITH_INSET = 8.6, 6.2, 7.5
#: the axes and the side panel (inches from the left and bottom; the top margin
#: holds the title): left, bottom, width, top margin
MAIN_IN = (0.645, 0.465, 5.16, 0.465)
SIDE_IN = (6.063, 0.186, 2.45, 0.496)
#: the notes start this far (inches) below the top of the side panel, under the count
NOTES_BELOW = 0.77


def _layout(height: float):
    """(figure size, main axes rect, side panel rect) for a page `height` tall."""
    def frac(left, bottom, width, top):
        return (left / WIDTH, bottom / height, width / WIDTH, (height - bottom - top) / height)

    return (WIDTH, height), frac(*MAIN_IN), frac(*SIDE_IN)
#: inset side as a fraction of the main axes, and the corners it may take
INSET = 0.32
#: room (points) between the inset and the axes frame: left, bottom, right, top;
#: the inset's own tick labels and title stay inside the main axes
INSET_ROOM = (30.0, 16.0, 5.0, 14.0)
RING_LABEL_ANGLES = (62, 50, 74, 38, 86, 26, 98, 14, 110, 122, 134, 146, -62, -50, -74, -38)


def nyquist_figure(result: BreakResult, *, model: str | None = None, hz: bool = False):
    """The loop's curve along the whole contour, far stretches on a compressed ring."""
    response = need_response(result)
    with style(f"{model}-{result.name}-nyquist"):
        zoom = zoom_near_critical(response)
        size, main, side_rect = _layout(HEIGHT if zoom is None else HEIGHT_WITH_INSET)
        fig, axes = new_figure(size, {"main": main})
        ax, side = axes["main"], Panel(fig, side_rect)
        ax.set_aspect("equal", anchor="N")
        ring = choose_ring(response)
        upper, mirror = drawn_curve(response, ring)
        draw_guides(ax, ring)
        ax.plot(upper.real, upper.imag, color=INK["curve"], lw=1.9, zorder=3,
                label="L, positive frequencies", gid="nyquist-positive")
        ax.plot(mirror.real, mirror.imag, color=INK["mirror"], lw=1.3, ls=(0, (5, 3)),
                zorder=2, label="negative frequencies", gid="nyquist-negative")
        _arrows(ax, upper, INK["curve"], (0.15, 0.4, 0.65, 0.9))
        _arrows(ax, mirror, INK["mirror"], (0.3, 0.7))
        ax.plot([-1], [0], ls="none", marker="P", ms=9, color=INK["critical"], zorder=8,
                label="critical point \u22121", gid="critical-point")
        marks, unmarked = select_crossings(result)
        points = _mark_crossings(ax, marks, ring)
        set_limits(ax, upper, mirror, ring)
        ax.set_xlabel("Re L")
        ax.set_ylabel("Im L")
        title(fig, result, "Nyquist curve of L", model)
        ax.apply_aspect()
        ink = display_points(ax, np.concatenate([upper.real, mirror.real]),
                             np.concatenate([upper.imag, mirror.imag]))
        obstacles = [marker_box(ax, (-1, 0), 9)] + [marker_box(ax, p, 6.5) for p in points]
        lines = [_key_line(tag, c, hz) for (tag, c) in _tagged(marks)]
        free = _side_panel(side, ax, result, lines + unmarked_lines(unmarked, hz), ring, zoom, hz)
        if zoom is not None:
            obstacles.append(_inset(ax, response, zoom, ink, obstacles, free))
        taken = place_labels(ax, _tags(marks, points), obstacles, ink)
        if ring is not None:
            place_together(ax, _ring_labels(ring), taken, ink)
        thin_lines(fig)
    return fig


def drawn_curve(response, ring: Ring | None) -> tuple[np.ndarray, np.ndarray]:
    """The closed curve as the view draws it: the positive-frequency half (compressed onto
    the ring, its arcs there densified, when there is one) and its mirror image."""
    upper, _ = closed_curve(response)
    if ring is not None:
        upper = densify_ring_arcs(ring.compress(upper), ring)
    return upper, np.conj(upper[::-1])


def draw_guides(ax, ring: Ring | None) -> None:
    """The shaded ring (when there is one) with its x10, x100, x1000 circles, the unit
    circle and the axes through the origin."""
    from matplotlib.patches import Annulus, Circle

    if ring is not None:
        ax.add_patch(Annulus((0, 0), ring.outer, ring.width, facecolor=INK["ring"],
                             edgecolor="none", zorder=0, gid="ring"))
        ax.add_patch(Circle((0, 0), ring.inner, fill=False, ec=INK["guide"], lw=0.7,
                            ls=(0, (1, 2)), zorder=1))
        for k in (10, 100, 1000):
            ax.add_patch(Circle((0, 0), ring.radius_of(k * ring.inner), fill=False,
                                ec="#cfcfcf", lw=0.5, zorder=0))
    ax.add_patch(Circle((0, 0), 1.0, fill=False, ec=INK["guide"], lw=0.8, ls=(0, (2, 2)),
                        zorder=1, label="unit circle |L| = 1"))
    ax.axhline(0, color="#bbbbbb", lw=0.6, zorder=1)
    ax.axvline(0, color="#bbbbbb", lw=0.6, zorder=1)


def _ring_labels(ring: Ring) -> list[Label]:
    """x10, x100, x1000 on their circles, as a staircase (each a step further round,
    the circles lie 6-13 points apart), the whole staircase at the first angle
    where it clashes with nothing placed before."""
    out = []
    for n, k in enumerate((10, 100, 1000)):
        rho = ring.radius_of(k * ring.inner)
        # a staircase: each label a step further round, so the three read in order
        spots = [((rho * math.cos(math.radians(a - 9 * n)), rho * math.sin(math.radians(a - 9 * n))),
                  (0, 0)) for a in RING_LABEL_ANGLES]
        out.append(Label(f"\u00d7{k}", spots, dict(fontsize=6.5, color="#555555", ha="center",
                                                   va="center", zorder=1,
                                                   bbox=dict(fc=INK["ring"], ec="none", pad=0.15)),
                         gid=f"ring-label-{k}"))
    return out


def _arrows(ax, z: np.ndarray, color: str, fractions) -> None:
    """Arrow heads at fractions of the drawn length, pointing along traversal."""
    if z.size < 3:
        return
    step = np.nan_to_num(np.abs(np.diff(z)), nan=0.0, posinf=0.0)
    length = np.concatenate([[0.0], np.cumsum(step)])
    total = length[-1]
    if total <= 0:
        return
    for f in fractions:
        i = int(np.searchsorted(length, f * total))
        i = min(max(i, 1), z.size - 1)
        j = i
        while j < z.size - 1 and abs(z[j] - z[i - 1]) < 0.012 * total:
            j += 1
        if z[j] == z[i - 1]:
            continue
        ax.annotate("", xy=(z[j].real, z[j].imag), xytext=(z[i - 1].real, z[i - 1].imag),
                    arrowprops=dict(arrowstyle="-|>", color=color, lw=0, mutation_scale=13,
                                    shrinkA=0, shrinkB=0), zorder=4)


def _tagged(marks):
    """(tag, crossover) in frequency order: c1, c2 ... gain, p1, p2 ... phase crossovers."""
    count = {"gain": 0, "phase": 0}
    out = []
    for c in marks:
        count[c.kind] += 1
        out.append((f"{'c' if c.kind == 'gain' else 'p'}{count[c.kind]}", c))
    return out


def _mark_crossings(ax, marks, ring: Ring | None) -> list[tuple[float, float]]:
    """Open circles (gain) and diamonds (phase) where L stands at each crossover."""
    seen, points = set(), []
    for c in marks:
        z = complex(ring.compress(np.array([c.point]))[0]) if ring else c.point
        gain = c.kind == "gain"
        marker, color = ("o", INK["gain"]) if gain else ("D", INK["phase"])
        label = "gain crossover |L| = 1" if gain else "phase crossover (L < 0 real)"
        ax.plot([z.real], [z.imag], ls="none", marker=marker, ms=6.5, mfc="white", mew=1.6,
                mec=color, zorder=6, label=None if label in seen else label,
                gid=f"{c.kind}-crossover")
        seen.add(label)
        points.append((z.real, z.imag))
    return points


def _tags(marks, points) -> list[Label]:
    out = []
    for (tag, c), (x, y) in zip(_tagged(marks), points):
        color = INK["gain"] if c.kind == "gain" else INK["phase"]
        outward = math.degrees(math.atan2(y, x)) if (x, y) != (0, 0) else 90.0
        spots = [((x, y), off) for off in ring_of_offsets(start_deg=outward)]
        out.append(Label(tag, spots, dict(fontsize=7.5, color=color, ha="center", va="center",
                                          zorder=7, fontweight="bold",
                                          bbox=dict(fc="white", ec="none", alpha=0.8, pad=0.2)),
                         leader_beyond=14.0, gid=f"tag-{tag}"))
    return out


def _key_line(tag: str, c, hz: bool) -> str:
    approx = "" if c.exact else "\u2248"
    what = f"PM {approx}{c.margin:.1f}\u00b0" if c.kind == "gain" else f"GM {approx}{c.margin:+.1f} dB"
    eq = "\u2248" if approx else "="
    return f"{tag}  {freq_symbol(c.kind, hz)} {eq} {freq_label(c.freq, hz)}, {what}"


def set_limits(ax, upper, mirror, ring) -> None:
    """Axis limits that hold the drawn curve, -1 and the unit circle (the whole ring when there is one)."""
    if ring is not None:
        lim = ring.outer * 1.04
        ax.set_xlim(-lim, lim)
        ax.set_ylim(-lim, lim)
        return
    pts = np.concatenate([upper, mirror, [-1.0 + 0j, 1.0 + 0j, 1j, -1j]])
    pts = pts[np.isfinite(pts)]
    x0, x1 = pts.real.min(), pts.real.max()
    y0, y1 = pts.imag.min(), pts.imag.max()
    pad = 0.08 * max(x1 - x0, y1 - y0)
    ax.set_xlim(x0 - pad, x1 + pad)
    ax.set_ylim(y0 - pad, y1 + pad)


# ------------------------------------------------------------------ zoom

def _inset_box(ax, zoom, ink: np.ndarray, obstacles, free) -> tuple:
    """Where the inset goes (display box): the free stretch of the side panel
    between the notes and the legend when it holds a readable square, else the
    corner of the axes that hides the least of the curve and no mark."""
    renderer = renderer_of(ax.figure)
    frame = ax.get_window_extent(renderer)
    x0, x1, y0, y1 = zoom.limits
    side = INSET * min(frame.width, frame.height)
    left, bottom, right, top = (v * ax.figure.dpi / 72.0 for v in INSET_ROOM)
    if free is not None:
        width, height = free[2] - free[0] - left - right, free[3] - free[1] - bottom - top
        fit = min(side, width, height)
        if fit >= 0.7 * side:
            cx = (free[0] + left + free[2] - right) / 2
            cy = (free[1] + bottom + free[3] - top) / 2
            return (cx - fit / 2, cy - fit / 2, cx + fit / 2, cy + fit / 2)
    xs, ys = (frame.x0 + left, frame.x1 - right - side), (frame.y0 + bottom, frame.y1 - top - side)
    corners = [(xs[1], ys[1]), (xs[0], ys[1]), (xs[0], ys[0]), (xs[1], ys[0])]

    def cost(corner):
        box = (corner[0], corner[1], corner[0] + side, corner[1] + side)
        inside = lambda p: box[0] <= p[0] <= box[2] and box[1] <= p[1] <= box[3]
        hard = sum(inside(((o[0] + o[2]) / 2, (o[1] + o[3]) / 2)) for o in obstacles)
        hard += any(inside(ax.transData.transform(p)) for p in ((x0, y0), (x1, y1), (x0, y1), (x1, y0)))
        n = np.count_nonzero((ink[:, 0] > box[0]) & (ink[:, 0] < box[2])
                             & (ink[:, 1] > box[1]) & (ink[:, 1] < box[3])) if ink.size else 0
        return (hard, n), box

    return min((cost(c), c) for c in corners)[0][1]


def _inset(ax, response, zoom, ink: np.ndarray, obstacles, free) -> tuple:
    """The neighbourhood of -1 at a readable scale (see `_inset_box` for where);
    arrow heads at the closest points give the direction of travel. Returns
    the inset's display box."""
    from matplotlib.patches import Rectangle
    from matplotlib.ticker import MaxNLocator

    x0, x1, y0, y1 = zoom.limits
    box = _inset_box(ax, zoom, ink, obstacles, free)
    # a figure-level axes (not a child of `ax`), so it is among fig.axes for thinning
    page = ax.figure.transFigure.inverted().transform([[box[0], box[1]], [box[2], box[3]]])
    inset = ax.figure.add_axes([page[0, 0], page[0, 1], *(page[1] - page[0])], zorder=9)
    inset.set_gid("zoom")
    inset.set_facecolor("white")
    inset.set_aspect("equal")  # a square box and square limits
    inset.set_xlim(x0, x1)
    inset.set_ylim(y0, y1)
    inset.tick_params(labelsize=6, length=2, pad=1.5)
    inset.xaxis.set_major_locator(MaxNLocator(3))
    inset.yaxis.set_major_locator(MaxNLocator(3))
    for spine in inset.spines.values():
        spine.set_visible(True)
        spine.set_edgecolor("#777777")
    ax.add_patch(Rectangle((x0, y0), x1 - x0, y1 - y0, fill=False, ec="#777777", lw=0.7,
                           zorder=5, gid="zoom-region"))
    upper = _window(np.asarray(response.L, complex), zoom)
    mirror = np.conj(upper[::-1])
    inset.plot(upper.real, upper.imag, color=INK["curve"], lw=1.6, zorder=3, gid="zoom-positive")
    inset.plot(mirror.real, mirror.imag, color=INK["mirror"], lw=1.2, ls=(0, (5, 3)), zorder=2,
               gid="zoom-negative")
    inset.plot([-1], [0], ls="none", marker="P", ms=8, color=INK["critical"], zorder=8)
    _zoom_arrows(inset, np.asarray(response.L, complex), zoom)
    inset.set_title(f"near \u22121: closest |1+L| = {zoom.distance:.3g}", fontsize=6.5,
                    color=INK["text"], pad=2)
    inset.set_xlim(x0, x1)
    inset.set_ylim(y0, y1)
    return box


def _window(L: np.ndarray, zoom) -> np.ndarray:
    """L with the samples far outside the inset replaced by gaps (NaN), so the
    inset's lines hold only what it shows; one sample beyond each edge is kept
    so the lines leave the frame where the curve does."""
    near = np.max(np.abs(np.column_stack([(L + 1).real, L.imag])), axis=1) <= 1.5 * zoom.half
    keep = near.copy()
    keep[:-1] |= near[1:]
    keep[1:] |= near[:-1]
    return np.where(keep, L, np.nan)


def _zoom_arrows(inset, L: np.ndarray, zoom) -> None:
    """Arrow heads at the closest sample of each half, pointing along traversal."""
    i = zoom.index
    step = 0.25 * zoom.half
    j = i
    while j < L.size - 1 and abs(L[j] - L[i]) < step:
        j += 1
    k = i
    while k > 0 and abs(L[k] - L[i]) < step:
        k -= 1
    if j == k:
        return
    for a, b, color in ((L[k], L[j], INK["curve"]), (np.conj(L[j]), np.conj(L[k]), INK["mirror"])):
        inset.annotate("", xy=(b.real, b.imag), xytext=(a.real, a.imag),
                       arrowprops=dict(arrowstyle="-|>", color=color, lw=0, mutation_scale=14,
                                       shrinkA=0, shrinkB=0), zorder=6, gid="zoom-arrow")


# ------------------------------------------------------------------ side panel

def _count_text(result: BreakResult, hz: bool) -> str:
    word = verdict_word(result)
    text = (f"P = {result.open_loop_rhp_poles},  N = {result.encirclements},  "
            f"Z = {result.closed_loop_rhp_poles}\nclosed loop: {word}")
    if result.marginal and result.marginal_freq is not None:
        text += f"\nat {freq_label(result.marginal_freq, hz)}"
    return text


def _side_panel(side, ax, result: BreakResult, marks: list[str], ring: Ring | None, zoom,
                hz: bool):
    """The count, the notes and the legend; returns the free stretch between the
    notes and the legend (display box) when an inset is wanted."""
    side.text(0.02, 0.985, _count_text(result, hz), va="top", ha="left",
              fontsize=9.5, color=INK["text"], gid="count",
              bbox=dict(fc="white", ec="#777777", lw=0.8, boxstyle="round,pad=0.45"))
    body = ["N: clockwise turns around \u22121", "Z = N + P: closed-loop poles",
            "in the right half plane", ""]
    body += ["crossovers:"] + (marks or ["none"])
    if result.margins is None:
        body += ["(\u2248 read off the samples:", " no margins claimed)"]
    if zoom is not None:
        where = (f"at {freq_label(zoom.s.imag, hz)}" if abs(zoom.s.real) < 1e-12 * max(abs(zoom.s), 1)
                 else "on an indentation")
        body += ["", "inset: the square around \u22121",
                 f"  enlarged; closest |1+L| = {zoom.distance:.3g}", f"  {where}"]
    if ring is not None:
        r0, wd = f"{ring.inner:g}", f"{ring.width:g}"
        body += ["", "shaded ring: |L| > " + r0 + " compressed,",
                 f"drawn radius {r0} + {wd}\u00b7d/(1+d),", f"d = log10(|L|/{r0});",
                 "thin circles: \u00d710, \u00d7100, \u00d71000"]
    height = side.bbox.height / ax.figure.dpi
    notes = side.text(0.0, 1.0 - NOTES_BELOW / height, "\n".join(body), va="top", ha="left",
                      fontsize=KEY_SIZE,
                      color=INK["note"], linespacing=1.35,
                      gid="ring-note" if ring is not None else "notes")
    legend = side.legend(*ax.get_legend_handles_labels())
    if zoom is None:
        return None
    renderer = renderer_of(ax.figure)
    top, bottom = notes.get_window_extent(renderer).y0, legend.get_window_extent(renderer).y1
    return (side.bbox.x0, bottom, side.bbox.x1, top)
