"""Pictures of a sweep: the Nyquist band of sampled plants around the nominal curve, and
each worst margin against each ranged param.

matplotlib comes only through `plots.py` (its headless set-up, style and SVG writer);
this module adds two figure kinds in the same look: the nominal curve in the deep ink
blue, the sampled plants thin and light in the same hue, so the band reads in grey print.
"""
from __future__ import annotations

import numpy as np

from ..sweep.results import WORST_KEYS
from .geometry import choose_ring, closed_curve
from .plots.common import INK, style as _style
from .plots.nyquist import _guides, _limits


def _new_figure(size):
    from matplotlib.figure import Figure

    return Figure(figsize=size, layout="constrained")

__all__ = ["band_figure", "worst_figure", "worst_profile", "PROFILE_BINS"]

#: the range of each param is cut into this many equal stretches for the worst-margin profile
PROFILE_BINS = 10

_LABELS = {"phase_margin_deg": "phase margin [deg]", "gain_margin_up_db": "gain margin up [dB]",
           "gain_margin_down_db": "gain margin down [dB]", "delay_margin_s": "delay margin [s]",
           "disk_margin_alpha": "disk margin alpha", "sensitivity_peak": "Ms",
           "complementary_peak": "Mt"}
_WORST_IS_LARGEST = {"gain_margin_down_db", "sensitivity_peak", "complementary_peak"}
_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
#: one colour per param, from the report's own inks (lightness differs as well as hue)
_PARAM_INKS = (INK["curve"], INK["gain"], INK["phase"], "#2f7d4f", INK["t"], "#555555", INK["mirror"], "#8c2d46")


def band_figure(nominal, plants, *, model: str = "", title_note: str = ""):
    """`nominal`: the nominal BreakResult; `plants`: BreakResults of sampled plants at the
    same break. The nominal curve bold, every plant's thin around it, on one ring."""
    response = nominal.response
    with _style(f"{model}-{nominal.name}-band"):
        fig = _new_figure((7.4, 6.0))
        ax = fig.subplots()
        ax.set_aspect("equal")
        ring = choose_ring(response)
        _guides(ax, ring)
        seen = [np.zeros(0, complex)]
        for n, p in enumerate(q for q in plants if q.response is not None and len(q.response.L)):
            upper, mirror = closed_curve(p.response)
            if ring is not None:
                upper, mirror = ring.compress(upper), ring.compress(mirror)
            for half in (upper, mirror):
                ax.plot(half.real, half.imag, color=INK["mirror"], lw=0.7, alpha=0.8, zorder=2,
                        label=None if n or half is mirror else "sampled plants", gid="band-plant")
            seen += [upper, mirror]
        upper, mirror = closed_curve(response)
        if ring is not None:
            upper, mirror = ring.compress(upper), ring.compress(mirror)
        ax.plot(upper.real, upper.imag, color=INK["curve"], lw=1.9, zorder=4, label="nominal plant",
                gid="band-nominal")
        ax.plot(mirror.real, mirror.imag, color=INK["curve"], lw=1.1, ls=(0, (5, 3)), zorder=4)
        ax.plot([-1], [0], ls="none", marker="P", ms=9, color=INK["critical"], zorder=8,
                label="critical point \u22121")
        _limits(ax, np.concatenate([upper, *seen]), mirror, ring)
        ax.set_xlabel("Re L")
        ax.set_ylabel("Im L")
        head = f"{model} \u00b7 " if model else ""
        ax.set_title(f"{head}break {nominal.name}: nominal and {len(plants)} sampled plants{title_note}",
                     loc="left")
        ax.legend(loc="lower right")
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


def worst_figure(result, brk: int, *, model: str = ""):
    """Each worst margin of a break against each ranged param (its range from low to high),
    with the nominal value as a dashed line."""
    table = result.plants
    b = result.breaks[brk]
    keys = [k for k, w in b.worst if w.value is not None and np.isfinite(w.value)]
    rows = max(1, (len(keys) + 1) // 2)
    with _style(f"{model}-{b.name}-worst"):
        fig = _new_figure((8.6, 2.1 * rows + 0.6))
        axes = np.atleast_1d(fig.subplots(rows, 2, squeeze=False)).ravel()
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
