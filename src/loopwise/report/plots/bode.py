"""The Bode view (|L| and its continuous phase, margins as arrows) and the
sensitivity view (|S|, |T|, Ms, Mt, the disk-margin frequency), both drawn
from the engine's axis samples (docs/plots.md)."""
from __future__ import annotations

import math

import numpy as np

from ...results import BreakResult
from ..geometry import (bode_range, decade_label, gap_at_axis_poles, select_crossings,
                        unwrapped_phase_deg)
from .common import (INK, KEY_SIZE, Label, Panel, display_points, freq_label, freq_symbol, marker_box,
                     need_response, new_figure, place_labels, style, thin_lines, title,
                     unmarked_lines)

BODE_SIZE = (8.6, 6.0)
BODE_RECTS = {"mag": (0.095, 0.515, 0.615, 0.42), "phase": (0.095, 0.075, 0.615, 0.42)}
BODE_KEY = (0.735, 0.075, 0.255, 0.86)
SENS_SIZE = (8.6, 4.4)
SENS_RECTS = {"main": (0.09, 0.105, 0.62, 0.8)}
SENS_KEY = (0.735, 0.105, 0.255, 0.8)
#: a phase curve spanning at most this many degrees is shown whole; a wider one
#: (a delay's lag) up to PHASE_VIEW_ABOVE times the highest marked crossover
WHOLE_PHASE_UP_TO = 540.0
PHASE_VIEW_ABOVE = 2.0

_MAG_TAG = [(0, 9), (0, -10), (11, 9), (-11, 9), (11, -10), (-11, -10), (0, 17), (0, -18),
            (20, 0), (-20, 0), (22, 16), (-22, 16), (22, -17), (-22, -17)]
_SIDE_TAG = [(11, 0), (-11, 0), (11, 9), (-11, 9), (11, -9), (-11, -9), (20, 0), (-20, 0),
             (20, 14), (-20, 14), (20, -14), (-20, -14)]


def _axis_data(result: BreakResult, marks, hz: bool):
    response = need_response(result)
    w = response.freq
    L = response.axis_L
    phase = unwrapped_phase_deg(response)
    keep = (w > 0) & np.isfinite(L) & (L != 0) & bode_range(response, marks)
    scale = 1 / (2 * math.pi) if hz else 1.0
    return w[keep], w[keep] * scale, L[keep], phase[keep], scale


#: minor ticks (at 2 and 5) only on frequency axes spanning at most this many decades
MINOR_TICKS_UP_TO = 6.0


def _log_frequency_axis(ax) -> None:
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter, NullLocator

    ax.xaxis.set_major_locator(LogLocator(base=10, numticks=12))
    # two minor ticks a decade read as well as eight; over a wide span the decade
    # grid alone reads well, and every tick costs a few artists to draw
    lo, hi = ax.get_xlim()
    wide = lo > 0 and math.log10(hi / lo) > MINOR_TICKS_UP_TO
    ax.xaxis.set_minor_locator(NullLocator() if wide else
                               LogLocator(base=10, subs=(2.0, 5.0), numticks=12))
    ax.xaxis.set_major_formatter(FuncFormatter(decade_label))
    ax.xaxis.set_minor_formatter(NullFormatter())


def _tagged(marks):
    count = {"gain": 0, "phase": 0}
    for c in marks:
        count[c.kind] += 1
        yield f"{'c' if c.kind == 'gain' else 'p'}{count[c.kind]}", c


def bode_figure(result: BreakResult, *, model: str | None = None, hz: bool = False):
    """Magnitude (dB) and continuous phase (deg) of L on the axis, margins annotated."""
    marks, unmarked = select_crossings(result)
    w, x, L, phase, scale = _axis_data(result, marks, hz)
    with style(f"{model}-{result.name}-bode"):
        fig, axes = new_figure(BODE_SIZE, BODE_RECTS)
        mag_ax, ph_ax, key = axes["mag"], axes["phase"], Panel(fig, BODE_KEY)
        ph_ax.sharex(mag_ax)
        mag_ax.tick_params(labelbottom=False)
        gx, g_mag, g_phase = gap_at_axis_poles(result.response, x, scale, 20 * np.log10(np.abs(L)), phase)
        mag_ax.semilogx(gx, g_mag, color=INK["curve"], lw=1.8, gid="bode-magnitude")
        ph_ax.semilogx(gx, g_phase, color=INK["curve"], lw=1.8, gid="bode-phase")
        mag_ax.axhline(0, color=INK["guide"], lw=0.9, ls=(0, (4, 2)))
        for wp in result.response.axis_poles:
            if wp > 0:
                for a in (mag_ax, ph_ax):
                    a.axvline(wp * scale, color="#999999", lw=0.7, ls=(0, (1, 1)))
        levels, lines, focus, tags = set(), [], [], {"mag": [], "phase": []}
        points = {"mag": [], "phase": []}
        for n, (tag, c) in enumerate(_tagged(marks)):
            xc = c.freq * scale
            if not (x.size and x[0] <= xc <= x[-1]):
                continue
            pc = float(np.interp(math.log(c.freq), np.log(w), phase))
            mark = _gain_mark if c.kind == "gain" else _phase_mark
            level = mark(mag_ax, ph_ax, c, tag, xc, pc, tags, points, up=n % 2 == 0)
            levels.add(round(level / 180.0) * 180.0)
            focus.append(c.freq)
            lines.append(_key_line(tag, c, hz))
        for level in sorted(levels):
            ph_ax.axhline(level, color=INK["guide"], lw=0.9, ls=(0, (4, 2)), zorder=1,
                          gid="critical-phase")
        if x.size:
            mag_ax.set_xlim(x[0], x[-1])
        off_view = _phase_view(ph_ax, w, phase, focus, levels)
        _log_frequency_axis(ph_ax)
        _log_frequency_axis(mag_ax)
        mag_ax.set_ylabel("|L| [dB]")
        ph_ax.set_ylabel("phase of L [deg]")
        ph_ax.set_xlabel("frequency [Hz]" if hz else "frequency [rad/s]")
        title(fig, result, "Bode view of L", model)
        for name, ax, curve in (("mag", mag_ax, g_mag), ("phase", ph_ax, g_phase)):
            ink = display_points(ax, gx, curve)
            place_labels(ax, tags[name], [marker_box(ax, p, 6) for p in points[name]], ink)
        notes = unmarked_lines(unmarked, hz)
        if off_view is not None:
            notes += [f"phase below {off_view[0]:.0f}\u00b0 above",
                      f"  {freq_label(off_view[1], hz)} (off the view)"]
        _bode_key(key, result, lines, notes)
        thin_lines(fig)
    return fig


def _phase_view(ph_ax, w, phase, focus, levels):
    """Phase limits that keep the crossovers readable: the whole curve when it
    spans at most WHOLE_PHASE_UP_TO, else from the lowest frequency to
    PHASE_VIEW_ABOVE times the highest marked crossover; and the critical lines.
    Beyond, a delay's lag runs off the bottom; returns (lower limit, frequency
    where the curve leaves the view) then, else None."""
    from matplotlib.ticker import MultipleLocator

    finite = phase[np.isfinite(phase)]
    if finite.size == 0:
        return None
    near = finite
    if focus and np.ptp(finite) > WHOLE_PHASE_UP_TO:
        near = phase[(w <= PHASE_VIEW_ABOVE * max(focus)) & np.isfinite(phase)]
        near = near if near.size else finite
    lo = min(float(near.min()), *levels) if levels else float(near.min())
    hi = max(float(near.max()), *levels) if levels else float(near.max())
    pad = max(0.08 * (hi - lo), 20.0)
    ph_ax.set_ylim(lo - pad, hi + pad)
    base = 45.0
    while (hi - lo + 2 * pad) / base > 8:
        base *= 2
    ph_ax.yaxis.set_major_locator(MultipleLocator(base))
    below = np.flatnonzero(phase < lo - pad)
    return (lo - pad, float(w[below[0]])) if below.size else None


def _key_line(tag: str, c, hz: bool) -> str:
    approx = "" if c.exact else "\u2248"
    eq = "\u2248" if approx else "="
    head = f"{tag}  {freq_symbol(c.kind, hz)} {eq} {freq_label(c.freq, hz)}"
    if c.kind == "gain":
        return f"{head}\n     phase margin {approx}{c.margin:.1f}\u00b0"
    return f"{head}\n     gain margin {approx}{c.margin:+.1f} dB"


def _bode_key(key, result: BreakResult, lines: list[str], notes: list[str]) -> None:
    body = ["crossovers:", *(lines or ["none"]), *notes, ""]
    body += ["c: gain crossover (|L| = 1)", "p: phase crossover (L < 0 real)",
             "arrows: the margin at each", "dashed: 0 dB, and the phase", "that puts L on \u22121"]
    if result.margins is None:
        body += ["", "closed loop not stable:", "margins not claimed;", "\u2248 read off the samples"]
    key.text(0.02, 1.0, "\n".join(body), va="top", ha="left", fontsize=KEY_SIZE,
             color=INK["note"], linespacing=1.35, gid="bode-key")


def _tag(tag: str, xy, color: str, spots) -> Label:
    return Label(tag, [(xy, off) for off in spots],
                 dict(fontsize=7.5, color=color, fontweight="bold", ha="center", va="center",
                      zorder=7, bbox=dict(fc="white", ec="none", alpha=0.8, pad=0.2)),
                 leader_beyond=19.0, gid=f"tag-{tag}")


def _gain_mark(mag_ax, ph_ax, c, tag, xc, pc, tags, points, up: bool = True) -> float:
    lag = c.lag_deg if c.lag_deg is not None else 180.0
    # the -1 line of this branch: rotate the phase down by lag, or up by 360 - lag
    level = pc - lag if lag <= 180 else pc + (360 - lag)
    color = INK["gain"]
    mag_ax.plot([xc], [0], ls="none", marker="o", ms=6, mfc="white", mew=1.5, mec=color,
                zorder=5, gid="gain-crossover")
    for a in (mag_ax, ph_ax):
        a.axvline(xc, color=color, lw=0.6, ls=(0, (2, 2)), alpha=0.8)
    ph_ax.annotate("", xy=(xc, level), xytext=(xc, pc),
                   arrowprops=dict(arrowstyle="<|-|>", color=color, lw=1.2, mutation_scale=9,
                                   shrinkA=0, shrinkB=0), gid="phase-margin-arrow")
    ph_ax.plot([xc], [pc], ls="none", marker="o", ms=5, mfc="white", mew=1.4, mec=color, zorder=5)
    spots = _MAG_TAG if up else _MAG_TAG[1:2] + _MAG_TAG[:1] + _MAG_TAG[2:]  # neighbours alternate
    tags["mag"].append(_tag(tag, (xc, 0), color, spots))
    tags["phase"].append(_tag(tag, (xc, (pc + level) / 2), color, _SIDE_TAG))
    points["mag"].append((xc, 0))
    points["phase"] += [(xc, pc), (xc, level)]
    return level


def _phase_mark(mag_ax, ph_ax, c, tag, xc, pc, tags, points, up: bool = True) -> float:
    level = -c.margin  # |L| there in dB
    color = INK["phase"]
    mag_ax.annotate("", xy=(xc, 0), xytext=(xc, level),
                    arrowprops=dict(arrowstyle="<|-|>", color=color, lw=1.2, mutation_scale=9,
                                    shrinkA=0, shrinkB=0), gid="gain-margin-arrow")
    mag_ax.plot([xc], [level], ls="none", marker="D", ms=5, mfc="white", mew=1.4, mec=color,
                zorder=5, gid="phase-crossover")
    ph_ax.plot([xc], [pc], ls="none", marker="D", ms=5, mfc="white", mew=1.4, mec=color, zorder=5)
    for a in (mag_ax, ph_ax):
        a.axvline(xc, color=color, lw=0.6, ls=(0, (1, 2)), alpha=0.8)
    tags["mag"].append(_tag(tag, (xc, level / 2), color, _SIDE_TAG))
    points["mag"] += [(xc, level), (xc, 0)]
    points["phase"].append((xc, pc))
    return pc


# ------------------------------------------------------------- sensitivity

def sensitivity_figure(result: BreakResult, *, model: str | None = None, hz: bool = False):
    """|S| = |1/(1+L)| and |T| = |L/(1+L)| in dB, with Ms, Mt and the disk-margin frequency."""
    marks, _ = select_crossings(result)
    w, x, L, _, scale = _axis_data(result, marks, hz)
    with style(f"{model}-{result.name}-sensitivity"):
        fig, axes = new_figure(SENS_SIZE, SENS_RECTS)
        ax, key = axes["main"], Panel(fig, SENS_KEY)
        with np.errstate(divide="ignore"):
            s_db = -20 * np.log10(np.abs(1 + L))
            t_db = 20 * np.log10(np.abs(L)) + s_db
        gx, g_s, g_t = gap_at_axis_poles(result.response, x, scale, s_db, t_db)
        ax.semilogx(gx, g_s, color=INK["curve"], lw=1.8, label="|S| = |1/(1+L)|", gid="sens-S")
        ax.semilogx(gx, g_t, color=INK["t"], lw=1.6, ls=(0, (6, 2)),
                    label="|T| = |L/(1+L)|", gid="sens-T")
        ax.axhline(0, color=INK["guide"], lw=0.9, ls=(0, (4, 2)))
        lines = _sensitivity_marks(ax, result, x, scale, hz)
        if x.size:
            ax.set_xlim(x[0], x[-1])
        finite = np.concatenate([s_db, t_db])
        finite = finite[np.isfinite(finite)]
        if finite.size:
            top = max(float(finite.max()), 0.0)
            ax.set_ylim(max(float(finite.min()), top - 80.0) - 3.0, top + 6.0)
        _log_frequency_axis(ax)
        ax.set_ylabel("magnitude [dB]")
        ax.set_xlabel("frequency [Hz]" if hz else "frequency [rad/s]")
        title(fig, result, "sensitivity |S| and complementary |T|", model)
        key.legend(*ax.get_legend_handles_labels())
        key.text(0.02, 1.0, "\n".join(lines), va="top", ha="left", fontsize=KEY_SIZE,
                 color=INK["note"], linespacing=1.35, gid="sens-key")
        thin_lines(fig)
    return fig


def _sensitivity_marks(ax, result: BreakResult, x, scale: float, hz: bool) -> list[str]:
    m = result.margins
    if m is None:
        return ["closed loop not stable:", "Ms, Mt and disk margin", "not claimed"]
    lines = []
    for peak, name, color, marker in ((m.sensitivity_peak, "Ms", INK["curve"], "v"),
                                      (m.complementary_peak, "Mt", INK["t"], "^")):
        if peak is None:
            continue
        xp = peak.freq * scale
        # a peak at zero frequency (or beyond the view) is marked at the edge of the view
        xp_drawn = min(max(xp, x[0]), x[-1]) if x.size else xp
        ax.plot([xp_drawn], [peak.db], ls="none", marker=marker, ms=7, color=color, zorder=5,
                clip_on=False, label=f"{name} (peak)", gid=f"peak-{name}")
        lines += [f"{name} = {peak.value:.3g} ({peak.db:.1f} dB)", f"     at {freq_label(peak.freq, hz)}"]
    dm = m.disk_margin
    if dm is not None and dm.freq is not None and math.isfinite(dm.freq) and dm.freq > 0:
        ax.axvline(dm.freq * scale, color=INK["phase"], lw=1.0, ls=(0, (3, 1, 1, 1)),
                   label="disk-margin frequency", gid="disk-margin")
        lo, hi = dm.gain_db
        lines += ["", f"disk margin \u03b1 = {dm.alpha:.3g}", f"     at {freq_label(dm.freq, hz)}",
                  f"     gain {lo:+.1f} / {hi:+.1f} dB", f"     phase \u00b1{dm.phase_deg:.1f}\u00b0"]
    return lines
