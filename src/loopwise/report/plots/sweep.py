"""Pictures of a sweep: the Nyquist band of sampled plants around the nominal curve, and
each worst margin against each ranged param.

Drawn with the package's own parts, in the same look: the Nyquist view's curve,
guides and limits (`nyquist.drawn_curve`, `draw_guides`, `set_limits`), the
style, fixed axes rectangles and line thinning of `common`. The nominal curve is in
the deep ink blue, the sampled plants thin and light in the same hue, so the band
reads in grey print.
"""
from __future__ import annotations

import numpy as np

from ...sweep.results import WORST_KEYS
from ..geometry import choose_ring
from .common import INK, new_figure, style, thin_lines
from .nyquist import draw_guides, drawn_curve, set_limits

__all__ = ["band_figure", "worst_figure", "worst_profile", "PROFILE_BINS"]

#: the range of each param is cut into this many equal stretches for the worst-margin profile
PROFILE_BINS = 10

_LABELS = {"phase_margin_deg": "phase margin [deg]", "gain_margin_up_db": "gain margin up [dB]",
           "gain_margin_down_db": "gain margin down [dB] (<0)", "delay_margin_s": "delay margin [s]",
           "disk_margin_alpha": "disk margin alpha", "sensitivity_peak": "Ms",
           "complementary_peak": "Mt"}
_WORST_IS_LARGEST = {"gain_margin_down_db", "sensitivity_peak", "complementary_peak"}
_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
#: one colour per param, from the report's own inks (lightness differs as well as hue)
_PARAM_INKS = (INK["curve"], INK["gain"], INK["phase"], "#2f7d4f", INK["t"], "#555555", INK["mirror"], "#8c2d46")

#: the band's page (inches) and its one axes rectangle (figure fractions)
BAND_SIZE = (7.4, 6.0)
BAND_AXES = (0.1, 0.08, 0.86, 0.84)
#: the profile's page: width, height of a row of two axes, and the margins (inches)
PROFILE_WIDTH, PROFILE_ROW = 8.6, 2.1
PROFILE_MARGINS = dict(left=0.75, right=0.2, top=0.55, bottom=0.5, gap_x=0.85, gap_y=0.45)


def band_figure(nominal, plants, *, model: str = "", title_note: str = ""):
    """`nominal`: the nominal BreakResult; `plants`: BreakResults of sampled plants at the
    same break. The nominal curve bold, every plant's thin around it, on one ring."""
    response = nominal.response
    with style(f"{model}-{nominal.name}-band"):
        fig, axes = new_figure(BAND_SIZE, {"main": BAND_AXES})
        ax = axes["main"]
        ax.set_aspect("equal")
        ring = choose_ring(response)
        draw_guides(ax, ring)
        seen = [np.zeros(0, complex)]
        drawn = [q for q in plants if q.response is not None and len(q.response.L)]
        for n, p in enumerate(drawn):
            upper, mirror = drawn_curve(p.response, ring)
            for half in (upper, mirror):
                ax.plot(half.real, half.imag, color=INK["mirror"], lw=0.7, alpha=0.8, zorder=2,
                        label=None if n or half is mirror else "sampled plants", gid="band-plant")
            seen += [upper, mirror]
        upper, mirror = drawn_curve(response, ring)
        ax.plot(upper.real, upper.imag, color=INK["curve"], lw=1.9, zorder=4, label="nominal plant",
                gid="band-nominal")
        ax.plot(mirror.real, mirror.imag, color=INK["curve"], lw=1.1, ls=(0, (5, 3)), zorder=4)
        ax.plot([-1], [0], ls="none", marker="P", ms=9, color=INK["critical"], zorder=8,
                label="critical point \u22121")
        set_limits(ax, np.concatenate([upper, *seen]), mirror, ring)
        ax.set_xlabel("Re L")
        ax.set_ylabel("Im L")
        head = f"{model} \u00b7 " if model else ""
        ax.set_title(f"{head}break {nominal.name}: nominal and {len(drawn)} sampled plants{title_note}",
                     loc="left")
        ax.legend(loc="lower right")
        thin_lines(fig)
    return fig


def worst_profile(table, brk: int, key: str, bins: int = PROFILE_BINS):
    """Per ranged param: the worst value of margin `key` at break `brk` over the stable
    plants whose param lies in each of `bins` equal stretches of its range (NaN where a
    stretch holds none). Returns (stretch centres in [0, 1], array params x bins)."""
    j = [k for k, _ in WORST_KEYS].index(key)
    values = table.margins[:, brk, j]
    lo, hi = table.values.min(axis=0), table.values.max(axis=0)
    span = np.where(hi > lo, hi - lo, 1.0)
    position = np.clip((table.values - lo) / span, 0.0, 1.0)
    which = np.minimum((position * bins).astype(int), bins - 1)
    worst = np.full((len(table.names), bins), np.nan)
    largest = key in _WORST_IS_LARGEST
    for p in range(len(table.names)):
        for b in range(bins):
            v = values[(which[:, p] == b) & np.isfinite(values)]
            if v.size:
                worst[p, b] = v.max() if largest else v.min()
    return (np.arange(bins) + 0.5) / bins, worst


def _grid(rows: int) -> tuple[tuple[float, float], dict[str, tuple[float, float, float, float]]]:
    """The profile page and its axes rectangles, two per row, named by their order."""
    m = PROFILE_MARGINS
    height = PROFILE_ROW * rows + m["top"] + m["bottom"]
    width = (PROFILE_WIDTH - m["left"] - m["right"] - m["gap_x"]) / 2
    tall = (height - m["top"] - m["bottom"] - m["gap_y"] * (rows - 1)) / rows
    rects = {}
    for k in range(2 * rows):
        row, col = divmod(k, 2)
        left = m["left"] + col * (width + m["gap_x"])
        bottom = height - m["top"] - (row + 1) * tall - row * m["gap_y"]
        rects[str(k)] = (left / PROFILE_WIDTH, bottom / height, width / PROFILE_WIDTH, tall / height)
    return (PROFILE_WIDTH, height), rects


def worst_figure(result, brk: int, *, model: str = ""):
    """Each worst margin of a break against each ranged param (its range from low to high),
    with the nominal value as a dashed line."""
    table = result.plants
    b = result.breaks[brk]
    keys = [k for k, w in b.worst if w.value is not None and np.isfinite(w.value)]
    rows = max(1, (len(keys) + 1) // 2)
    with style(f"{model}-{b.name}-worst"):
        size, rects = _grid(rows)
        fig, named = new_figure(size, rects)
        axes = [named[str(k)] for k in range(2 * rows)]
        for ax, key in zip(axes, keys):
            x, worst = worst_profile(table, brk, key)
            for p, name in enumerate(table.names):
                rng = next(q for q in result.params if q.name == name)
                ax.plot(x, worst[p], marker=_MARKERS[p % len(_MARKERS)], ms=3.5, lw=1.0,
                        color=_PARAM_INKS[p % len(_PARAM_INKS)],
                        label=f"{name} [{rng.lo:.3g}, {rng.hi:.3g}]", gid=f"worst-{key}-{name}")
            nominal = b.worst_of(key).nominal
            if nominal is not None and np.isfinite(nominal):
                ax.axhline(nominal, color=INK["guide"], lw=0.9, ls=(0, (4, 3)), label="nominal plant")
            ax.set_ylabel(_LABELS[key])
            ax.set_xlim(0, 1)
        for ax in axes[len(keys):]:
            ax.set_visible(False)
        for ax in axes[max(0, len(keys) - 2):len(keys)]:
            ax.set_xlabel("position in the param's range (low end 0, high end 1)")
        if keys:
            axes[0].legend(loc="best", fontsize=7)
        fig.suptitle(f"{model} \u00b7 break {b.name}: worst margin over the other params, "
                     f"in {PROFILE_BINS} stretches of each param's range", x=0.01, ha="left", fontsize=10)
    return fig
