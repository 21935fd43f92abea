"""Nyquist, Bode and sensitivity views of one break, drawn from the engine's samples.

The only module of loopwise that imports matplotlib, and only inside functions
(the CLI starts without it). Figures are built with `matplotlib.figure.Figure`
directly, never through the global pyplot state, so nothing opens a window and
the same code serves files (svg, png, pdf) and the inline SVG of the HTML report.
Every function returns the Figure so tests can read the drawn data back.

Look (our own, see docs/plots.md): ink-blue curve for positive frequencies, the
same hue lighter and dashed for the mirror half, orange-brown circles for gain
crossovers, violet diamonds for phase crossovers, a black filled plus for -1.
Hues differ in lightness as well, and every item also differs in line style or
marker shape, so the views read in grey print and for colour-blind readers.
"""
from __future__ import annotations

import io
import math
import os
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from ..results import BreakResult
from .geometry import (Ring, bode_range, choose_ring, closed_curve, crossings, decade_label,
                       gap_at_axis_poles, unwrapped_phase_deg, verdict_word)

__all__ = ["KINDS", "SUFFIXES", "INK", "nyquist_figure", "bode_figure", "sensitivity_figure",
           "make_figure", "save_figure", "svg_text"]

KINDS = ("nyquist", "bode", "sensitivity")
SUFFIXES = (".svg", ".png", ".pdf")

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
    "t": "#c0661a",          # |T| curve (orange, lighter than the gain marks)
}


def _matplotlib():
    """Import matplotlib on first use; headless (Agg) when there is no display."""
    import matplotlib

    if not (os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY")):
        matplotlib.use("Agg", force=False)
    return matplotlib


@contextmanager
def _style(salt: str = "loopwise"):
    mpl = _matplotlib()
    rc = {
        "font.family": "DejaVu Sans", "font.size": 8.5, "axes.titlesize": 10,
        "axes.labelsize": 9, "axes.edgecolor": "#555555", "axes.linewidth": 0.8,
        "axes.spines.top": False, "axes.spines.right": False,
        "axes.grid": True, "grid.color": "#dddddd", "grid.linewidth": 0.6,
        "grid.linestyle": "-", "xtick.color": "#444444", "ytick.color": "#444444",
        "legend.frameon": False, "legend.fontsize": 8,
        "svg.fonttype": "none", "svg.hashsalt": salt,  # real text; ids unique per figure
        "path.simplify": False,
    }
    with mpl.rc_context(rc):
        yield mpl


def _new_figure(size):
    from matplotlib.figure import Figure

    return Figure(figsize=size, layout="constrained")


def _freq_label(w: float, hz: bool) -> str:
    return f"{w / (2 * math.pi):.3g} Hz" if hz else f"{w:.3g} rad/s"


def _title(result: BreakResult, what: str, model: str | None) -> str:
    head = f"{model} \u00b7 " if model else ""
    return f"{head}break {result.name} (at {result.at}): {what}"


# ----------------------------------------------------------------- Nyquist

def _draw_ring(ax, ring: Ring) -> None:
    from matplotlib.patches import Annulus, Circle

    ax.add_patch(Annulus((0, 0), ring.outer, ring.width, facecolor=INK["ring"],
                         edgecolor="none", zorder=0, gid="ring"))
    ax.add_patch(Circle((0, 0), ring.inner, fill=False, ec=INK["guide"], lw=0.7,
                        ls=(0, (1, 2)), zorder=1))
    for k, label in ((10, "\u00d710"), (100, "\u00d7100"), (1000, "\u00d71000")):
        rho = ring.radius_of(k * ring.inner)
        ax.add_patch(Circle((0, 0), rho, fill=False, ec="#cfcfcf", lw=0.5, zorder=0))
        a = math.radians(62)
        ax.text(rho * math.cos(a), rho * math.sin(a), label, fontsize=6.5, color="#666666",
                ha="center", va="center", rotation=-28, zorder=1,
                bbox=dict(fc=INK["ring"], ec="none", pad=0.2))


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


def _tagged(result: BreakResult):
    """(tag, crossover) in frequency order: c1, c2 ... gain, p1, p2 ... phase crossovers."""
    count = {"gain": 0, "phase": 0}
    out = []
    for c in crossings(result):
        count[c.kind] += 1
        out.append((f"{'c' if c.kind == 'gain' else 'p'}{count[c.kind]}", c))
    return out


def _mark_crossings(ax, result: BreakResult, ring: Ring | None, hz: bool) -> list[str]:
    """Markers with short tags (c1, p1, ...) on the curve; returns the key lines."""
    lines, seen = [], set()
    for tag, c in _tagged(result):
        z = complex(ring.compress(np.array([c.point]))[0]) if ring else c.point
        gain = c.kind == "gain"
        marker, color = ("o", INK["gain"]) if gain else ("D", INK["phase"])
        label = "gain crossover |L| = 1" if gain else "phase crossover (L < 0 real)"
        ax.plot([z.real], [z.imag], ls="none", marker=marker, ms=6.5, mfc="white", mew=1.6,
                mec=color, zorder=6, label=None if label in seen else label,
                gid=f"{c.kind}-crossover")
        seen.add(label)
        a = math.atan2(z.imag, z.real) if z != 0 else math.pi / 2
        ax.annotate(tag, xy=(z.real, z.imag), xytext=(9 * math.cos(a) + (0 if gain else 4),
                    9 * math.sin(a) + (5 if gain else -7)), textcoords="offset points",
                    fontsize=7.5, color=color, ha="center", va="center", zorder=7,
                    fontweight="bold", bbox=dict(fc="white", ec="none", alpha=0.75, pad=0.5))
        approx = "" if c.exact else "\u2248"
        what = f"PM {approx}{c.margin:.1f}\u00b0" if gain else f"GM {approx}{c.margin:+.1f} dB"
        sym = "\u03c9c" if gain else "\u03c9p"
        eq = "\u2248" if approx else "="
        lines.append(f"{tag}  {sym} {eq} {_freq_label(c.freq, hz)}, {what}")
    return lines


def _count_text(result: BreakResult) -> str:
    word = verdict_word(result)
    text = (f"P = {result.open_loop_rhp_poles},  N = {result.encirclements},  "
            f"Z = {result.closed_loop_rhp_poles}\nclosed loop: {word}")
    if result.marginal and result.marginal_freq is not None:
        text += f"\nat {result.marginal_freq:.3g} rad/s"
    return text


def _side_panel(side, ax, result: BreakResult, marks: list[str], ring: Ring | None) -> None:
    side.set_axis_off()
    side.text(0.02, 0.96, _count_text(result), transform=side.transAxes, va="top", ha="left",
              fontsize=9.5, color=INK["text"], gid="count",
              bbox=dict(fc="white", ec="#777777", lw=0.8, boxstyle="round,pad=0.45"))
    body = ["N: clockwise turns around \u22121", "Z = N + P: closed-loop poles", "in the right half plane", ""]
    body += ["crossovers:"] + (marks or ["none"])
    if result.margins is None:
        body += ["(\u2248 read off the samples:", " no margins claimed)"]
    if ring is not None:
        r0, wd = f"{ring.inner:g}", f"{ring.width:g}"
        body += ["", "shaded ring: |L| > " + r0 + " compressed,",
                 f"drawn radius {r0} + {wd}\u00b7d/(1+d),", f"d = log10(|L|/{r0});",
                 "thin circles: \u00d710, \u00d7100, \u00d71000"]
    side.text(0.0, 0.80, "\n".join(body), transform=side.transAxes, va="top", ha="left",
              fontsize=7.5, color="#333333", linespacing=1.35,
              gid="ring-note" if ring is not None else "notes")
    handles, labels = ax.get_legend_handles_labels()
    side.legend(handles, labels, loc="lower left", fontsize=7.5, borderaxespad=0, handlelength=2.6)


def nyquist_figure(result: BreakResult, *, model: str | None = None, hz: bool = False):
    """The loop's curve along the whole contour, far stretches on a compressed ring."""
    response = _need_response(result)
    with _style(f"{model}-{result.name}-nyquist"):
        fig = _new_figure((8.6, 6.2))
        ax, side = fig.subplots(1, 2, gridspec_kw={"width_ratios": [3.0, 1.3]})
        ax.set_aspect("equal")
        ring = choose_ring(response)
        upper, mirror = closed_curve(response)
        if ring is not None:
            _draw_ring(ax, ring)
            upper, mirror = ring.compress(upper), ring.compress(mirror)
        _guides(ax)
        ax.plot(upper.real, upper.imag, color=INK["curve"], lw=1.9, zorder=3,
                label="L, positive frequencies", gid="nyquist-positive")
        ax.plot(mirror.real, mirror.imag, color=INK["mirror"], lw=1.3, ls=(0, (5, 3)),
                zorder=2, label="negative frequencies", gid="nyquist-negative")
        _arrows(ax, upper, INK["curve"], (0.15, 0.4, 0.65, 0.9))
        _arrows(ax, mirror, INK["mirror"], (0.3, 0.7))
        ax.plot([-1], [0], ls="none", marker="P", ms=9, color=INK["critical"], zorder=8,
                label="critical point \u22121", gid="critical-point")
        marks = _mark_crossings(ax, result, ring, hz)
        _limits(ax, upper, mirror, ring)
        ax.set_xlabel("Re L")
        ax.set_ylabel("Im L")
        ax.set_title(_title(result, "Nyquist curve of L", model), loc="left")
        _side_panel(side, ax, result, marks, ring)
    return fig


def _guides(ax) -> None:
    from matplotlib.patches import Circle

    ax.add_patch(Circle((0, 0), 1.0, fill=False, ec=INK["guide"], lw=0.8, ls=(0, (2, 2)),
                        zorder=1, label="unit circle |L| = 1"))
    ax.axhline(0, color="#bbbbbb", lw=0.6, zorder=1)
    ax.axvline(0, color="#bbbbbb", lw=0.6, zorder=1)


def _limits(ax, upper, mirror, ring) -> None:
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


def _need_response(result: BreakResult):
    if result.response is None or len(result.response.L) == 0:
        from ..errors import UsageError

        raise UsageError(f"break {result.name!r} has no frequency response to draw")
    return result.response


# -------------------------------------------------------------------- Bode

def _axis_data(result: BreakResult, hz: bool):
    response = _need_response(result)
    w = response.freq
    L = response.axis_L
    phase = unwrapped_phase_deg(response)
    keep = (w > 0) & np.isfinite(L) & (L != 0) & bode_range(response, crossings(result))
    scale = 1 / (2 * math.pi) if hz else 1.0
    return w[keep], w[keep] * scale, L[keep], phase[keep], scale


def _log_frequency_axis(ax) -> None:
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    ax.xaxis.set_major_locator(LogLocator(base=10, numticks=12))
    # two minor ticks a decade read as well as eight and cost a quarter of the drawing
    ax.xaxis.set_minor_locator(LogLocator(base=10, subs=(2.0, 5.0), numticks=12))
    ax.xaxis.set_major_formatter(FuncFormatter(decade_label))
    ax.xaxis.set_minor_formatter(NullFormatter())


def _phase_locator(span: float):
    from matplotlib.ticker import MultipleLocator

    base = 45.0
    while span / base > 8:
        base *= 2
    return MultipleLocator(base)


def bode_figure(result: BreakResult, *, model: str | None = None, hz: bool = False):
    """Magnitude (dB) and continuous phase (deg) of L on the axis, margins annotated."""
    w, x, L, phase, scale = _axis_data(result, hz)
    with _style(f"{model}-{result.name}-bode"):
        fig = _new_figure((8.6, 6.0))
        axes = fig.subplot_mosaic([["mag", "key"], ["phase", "key"]],
                                  width_ratios=[3.0, 1.15], sharex=False)
        mag_ax, ph_ax, key = axes["mag"], axes["phase"], axes["key"]
        ph_ax.sharex(mag_ax)
        mag_ax.tick_params(labelbottom=False)
        gx, g_mag, g_phase = gap_at_axis_poles(result.response, x, scale, 20 * np.log10(np.abs(L)), phase)
        mag_ax.semilogx(gx, g_mag, color=INK["curve"], lw=1.8, gid="bode-magnitude")
        ph_ax.semilogx(gx, g_phase, color=INK["curve"], lw=1.8, gid="bode-phase")
        mag_ax.axhline(0, color=INK["guide"], lw=0.9, ls=(0, (4, 2)))
        for wp in _need_response(result).axis_poles:
            if wp > 0:
                for a in (mag_ax, ph_ax):
                    a.axvline(wp * scale, color="#999999", lw=0.7, ls=(0, (1, 1)))
        levels, lines, focus = set(), [], []
        for n, (tag, c) in enumerate(_tagged(result)):
            xc = c.freq * scale
            if not (x.size and x[0] <= xc <= x[-1]):
                continue
            pc = float(np.interp(math.log(c.freq), np.log(w), phase))
            if c.kind == "gain":
                level = _bode_gain_mark(mag_ax, ph_ax, c, tag, xc, pc, up=n % 2 == 0)
                levels.add(round(level / 180.0) * 180.0)
            else:
                _bode_phase_mark(mag_ax, ph_ax, c, tag, xc, pc)
            focus.append(c.freq)
            lines.append(_key_line(tag, c, hz))
        for level in levels:
            ph_ax.axhline(level, color=INK["guide"], lw=0.9, ls=(0, (4, 2)), zorder=1)
        _phase_view(ph_ax, w, phase, focus, levels)
        _log_frequency_axis(ph_ax)
        _log_frequency_axis(mag_ax)
        mag_ax.set_ylabel("|L| [dB]")
        ph_ax.set_ylabel("phase of L [deg], unwrapped")
        ph_ax.set_xlabel("frequency [Hz]" if hz else "frequency [rad/s]")
        mag_ax.set_title(_title(result, "Bode view of L", model), loc="left")
        _bode_key(key, result, lines)
    return fig


def _phase_view(ph_ax, w, phase, focus, levels) -> None:
    """Phase limits that keep the crossovers readable: a delay's lag beyond a
    decade above the last crossover runs off the bottom (its roll-off shows as the dive)."""
    if phase.size == 0:
        return
    near = phase[w <= 10 * max(focus)] if focus else phase
    near = near if near.size else phase
    lo = min(float(near.min()), *levels) if levels else float(near.min())
    hi = max(float(near.max()), *levels) if levels else float(near.max())
    pad = max(0.08 * (hi - lo), 20.0)
    ph_ax.set_ylim(lo - pad, hi + pad)
    ph_ax.yaxis.set_major_locator(_phase_locator(hi - lo + 2 * pad))


def _key_line(tag: str, c, hz: bool) -> str:
    approx = "" if c.exact else "\u2248"
    eq = "\u2248" if approx else "="
    if c.kind == "gain":
        return f"{tag}  \u03c9c {eq} {_freq_label(c.freq, hz)}\n     phase margin {approx}{c.margin:.1f}\u00b0"
    return f"{tag}  \u03c9p {eq} {_freq_label(c.freq, hz)}\n     gain margin {approx}{c.margin:+.1f} dB"


def _bode_key(key, result: BreakResult, lines: list[str]) -> None:
    key.set_axis_off()
    body = ["crossovers:", *(lines or ["none"]), ""]
    body += ["c: gain crossover (|L| = 1)", "p: phase crossover (L < 0 real)",
             "arrows: the margin at each", "dashed: 0 dB, and the phase", "that puts L on \u22121"]
    if result.margins is None:
        body += ["", "closed loop not stable:", "margins not claimed;", "\u2248 read off the samples"]
    key.text(0.02, 0.98, "\n".join(body), transform=key.transAxes, va="top", ha="left",
             fontsize=7.5, color="#333333", linespacing=1.35, gid="bode-key")


def _bode_gain_mark(mag_ax, ph_ax, c, tag, xc, pc, up: bool = True) -> float:
    lag = c.lag_deg if c.lag_deg is not None else 180.0
    # the -1 line of this branch: rotate the phase down by lag, or up by 360 - lag
    level = pc - lag if lag <= 180 else pc + (360 - lag)
    color = INK["gain"]
    mag_ax.plot([xc], [0], ls="none", marker="o", ms=6, mfc="white", mew=1.5, mec=color,
                zorder=5, gid="gain-crossover")
    for a in (mag_ax, ph_ax):
        a.axvline(xc, color=color, lw=0.6, ls=(0, (2, 2)), alpha=0.8)
    _tag(mag_ax, tag, xc, 0, color, (0, 9) if up else (0, -10))  # neighbours alternate
    ph_ax.annotate("", xy=(xc, level), xytext=(xc, pc),
                   arrowprops=dict(arrowstyle="<|-|>", color=color, lw=1.2, mutation_scale=9,
                                   shrinkA=0, shrinkB=0), gid="phase-margin-arrow")
    ph_ax.plot([xc], [pc], ls="none", marker="o", ms=5, mfc="white", mew=1.4, mec=color, zorder=5)
    _tag(ph_ax, tag, xc, (pc + level) / 2, color, (10, 0))
    return level


def _bode_phase_mark(mag_ax, ph_ax, c, tag, xc, pc) -> None:
    level = -c.margin  # |L| there in dB
    color = INK["phase"]
    mag_ax.annotate("", xy=(xc, 0), xytext=(xc, level),
                    arrowprops=dict(arrowstyle="<|-|>", color=color, lw=1.2, mutation_scale=9,
                                    shrinkA=0, shrinkB=0), gid="gain-margin-arrow")
    mag_ax.plot([xc], [level], ls="none", marker="D", ms=5, mfc="white", mew=1.4, mec=color,
                zorder=5, gid="phase-crossover")
    _tag(mag_ax, tag, xc, level / 2, color, (10, 0))
    ph_ax.plot([xc], [pc], ls="none", marker="D", ms=5, mfc="white", mew=1.4, mec=color, zorder=5)
    for a in (mag_ax, ph_ax):
        a.axvline(xc, color=color, lw=0.6, ls=(0, (1, 2)), alpha=0.8)


def _tag(ax, tag, x, y, color, offset) -> None:
    ax.annotate(tag, (x, y), xytext=offset, textcoords="offset points", fontsize=7.5,
                color=color, fontweight="bold", ha="center", va="center", zorder=7,
                bbox=dict(fc="white", ec="none", alpha=0.8, pad=0.5))


# ------------------------------------------------------------- sensitivity

def sensitivity_figure(result: BreakResult, *, model: str | None = None, hz: bool = False):
    """|S| = |1/(1+L)| and |T| = |L/(1+L)| in dB, with Ms, Mt and the disk-margin frequency."""
    w, x, L, _, scale = _axis_data(result, hz)
    with _style(f"{model}-{result.name}-sensitivity"):
        fig = _new_figure((8.6, 4.4))
        ax, key = fig.subplots(1, 2, gridspec_kw={"width_ratios": [3.0, 1.15]})
        with np.errstate(divide="ignore"):
            s_db = -20 * np.log10(np.abs(1 + L))
            t_db = 20 * np.log10(np.abs(L)) + s_db
        gx, g_s, g_t = gap_at_axis_poles(result.response, x, scale, s_db, t_db)
        ax.semilogx(gx, g_s, color=INK["curve"], lw=1.8, label="|S| = |1/(1+L)|", gid="sens-S")
        ax.semilogx(gx, g_t, color=INK["t"], lw=1.6, ls=(0, (6, 2)),
                    label="|T| = |L/(1+L)|", gid="sens-T")
        ax.axhline(0, color=INK["guide"], lw=0.9, ls=(0, (4, 2)))
        lines = _sensitivity_marks(ax, result, x, scale, hz)
        finite = np.concatenate([s_db, t_db])
        finite = finite[np.isfinite(finite)]
        if finite.size:
            top = max(float(finite.max()), 0.0)
            ax.set_ylim(max(float(finite.min()), top - 80.0) - 3.0, top + 6.0)
        _log_frequency_axis(ax)
        ax.set_ylabel("magnitude [dB]")
        ax.set_xlabel("frequency [Hz]" if hz else "frequency [rad/s]")
        ax.set_title(_title(result, "sensitivity |S| and complementary |T|", model), loc="left")
        handles, labels = ax.get_legend_handles_labels()
        key.set_axis_off()
        key.legend(handles, labels, loc="lower left", fontsize=7.5, borderaxespad=0,
                   handlelength=2.6)
        key.text(0.02, 0.98, "\n".join(lines), transform=key.transAxes, va="top", ha="left",
                 fontsize=7.5, color="#333333", linespacing=1.35, gid="sens-key")
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
                label=f"{name} (peak)", gid=f"peak-{name}")
        lines += [f"{name} = {peak.value:.3g} ({peak.db:.1f} dB)", f"     at {_freq_label(peak.freq, hz)}"]
    dm = m.disk_margin
    if dm is not None and dm.freq is not None and math.isfinite(dm.freq) and dm.freq > 0:
        ax.axvline(dm.freq * scale, color=INK["phase"], lw=1.0, ls=(0, (3, 1, 1, 1)),
                   label="disk-margin frequency", gid="disk-margin")
        lo, hi = dm.gain_db
        lines += ["", f"disk margin \u03b1 = {dm.alpha:.3g}", f"     at {_freq_label(dm.freq, hz)}",
                  f"     gain {lo:+.1f} / {hi:+.1f} dB", f"     phase \u00b1{dm.phase_deg:.1f}\u00b0"]
    return lines


# ------------------------------------------------------------------ output

_MAKERS = {"nyquist": nyquist_figure, "bode": bode_figure, "sensitivity": sensitivity_figure}


def make_figure(result: BreakResult, kind: str, *, model: str | None = None, hz: bool = False):
    return _MAKERS[kind](result, model=model, hz=hz)


def save_figure(fig, path: str | Path, salt: str = "loopwise") -> None:
    """Write svg, png or pdf by suffix; no dates in the file, so reruns give the same bytes."""
    path = Path(path)
    fmt = path.suffix.lower().lstrip(".")
    meta = {"svg": {"Date": None}, "pdf": {"CreationDate": None}, "png": {}}[fmt]
    with _style(salt):
        fig.savefig(path, format=fmt, metadata=meta, dpi=150)


def _thin_lines(fig, tol_px: float = 0.35) -> None:
    """Drop points closer than `tol_px` display pixels along the path to the last kept one.

    The engine samples densely (thousands of points a break); an inline SVG
    needs only what a screen can show. Gaps (NaN) and their neighbours are
    kept, and every step between kept points stays under a pixel, so the drawn
    curve, and its turns around -1, are those of the full samples.
    """
    for ax in fig.axes:
        for line in ax.get_lines():
            x = np.asarray(line.get_xdata(orig=False), float)
            y = np.asarray(line.get_ydata(orig=False), float)
            if x.size < 400:
                continue
            with np.errstate(all="ignore"):
                d = line.get_transform().transform(np.column_stack([x, y]))
            finite = np.all(np.isfinite(d), axis=1)
            keep = ~finite
            keep[0] = keep[-1] = True
            edge = np.zeros_like(keep)
            edge[:-1] |= ~finite[1:]
            edge[1:] |= ~finite[:-1]
            keep |= edge
            # a point is kept each time the path length grows by another tol_px
            step = np.abs(np.diff(d, axis=0)).sum(axis=1)
            length = np.concatenate([[0.0], np.cumsum(np.where(np.isfinite(step), step, 0.0))])
            bucket = np.floor(length / tol_px)
            keep[1:] |= bucket[1:] != bucket[:-1]
            line.set_data(x[keep], y[keep])


def svg_text(fig, salt: str = "loopwise") -> str:
    """The figure as an <svg> element to inline in HTML (no XML prolog or doctype)."""
    _thin_lines(fig)
    buf = io.StringIO()
    with _style(salt):
        fig.savefig(buf, format="svg", metadata={"Date": None})
    text = buf.getvalue()
    return text[text.index("<svg"):]
