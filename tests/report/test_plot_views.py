"""What the views show: the phase branch, a delay's far crossovers, labels
that do not overlap, frequencies in the unit asked for, the inset near -1, and
pictures drawn from the check's samples alone. Figures are drawn with the Agg
renderer, which also measures the text."""
from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pytest

from loopwise.analysis import check_file
from loopwise.report import plots
from loopwise.report.geometry import ZOOM_BELOW, choose_ring, select_crossings
from loopwise.transfer import Transfer

from .conftest import LOOPS, drawn_line

MODELS = Path(__file__).resolve().parents[2] / "models"


@pytest.fixture(scope="module")
def demo() -> dict[str, tuple[str, object]]:
    """'model/break' -> (model name, BreakResult) for every demo model's breaks."""
    out = {}
    for path in sorted(MODELS.glob("*.loop")):
        m = check_file(str(path))
        for b in m.breaks:
            out[f"{m.model}/{b.name}"] = (m.model, b)
    return out


def _all_text(fig) -> str:
    return "\n".join(t.get_text() for t in _texts(fig, drawn=False))


def _texts(fig, drawn: bool = True):
    """Every text a reader sees: page texts, titles, axis and tick labels inside
    the view, annotations, legend entries. Draws the figure first (Agg)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    if drawn:
        FigureCanvasAgg(fig).draw()
    out = list(fig.texts)
    for legend in fig.legends:
        out += legend.get_texts()
    for ax in fig.axes:
        out += [ax.title, ax._left_title, ax._right_title, ax.xaxis.label, ax.yaxis.label]
        out += list(ax.texts)
        if ax.get_legend() is not None:
            out += ax.get_legend().get_texts()
        for axis in (ax.xaxis, ax.yaxis):
            lo, hi = sorted(axis.get_view_interval())
            slack = 1e-9 * max(abs(lo), abs(hi), 1.0)
            out += [t.label1 for t in axis.get_major_ticks()
                    if lo - slack <= t.get_loc() <= hi + slack]
    return [t for t in out if t.get_visible() and t.get_text().strip()]


def _boxes_overlap(a, b, slack: float = 0.5) -> bool:
    return (min(a.x1, b.x1) - max(a.x0, b.x0) > slack) and (min(a.y1, b.y1) - max(a.y0, b.y0) > slack)


# ------------------------------------------------------------- phase branch

@pytest.mark.parametrize("name, start", [
    ("three_lags", 0.0),          # type 0: L(0) = 2 > 0
    ("integrator_delay", -90.0),  # one integrator
    ("double_integrator", -180.0),
    ("type_three", -270.0),       # three integrators: -270, not +90
    ("negative_gain", -180.0),    # L(0) = -0.5: a negative gain lags by 180 deg
])
def test_phase_at_the_lowest_drawn_frequency_sits_on_the_asymptote(loops, name, start):
    """L ~ K / s^n at low frequency has phase -90 n deg (and -180 more when K < 0);
    the drawn phase starts on that branch (within 5 deg: the dynamics above add a little)."""
    phase = drawn_line(plots.bode_figure(loops[name]), "bode-phase")
    assert start - 5.0 <= phase.imag[0] <= start + 5.0


def test_loop_fallen_to_rounding_noise_at_low_frequency_still_draws():
    """Inside a closed nested cascade an inner break's L has many zeros at s = 0: at
    1e-10 rad/s |L| is rounding noise (about 1e-80, with exact zeros among it). The
    asymptote is read where successive slopes agree, beyond the noise; reading it off
    the lowest two samples gave 0.0 to a negative power (an internal error that lost
    the whole `report`). The slope where it is read is checked against the phase the
    view draws there: -90 deg per net integrator, i.e. +90 deg per zero at s = 0."""
    from loopwise.analysis import check_text
    from loopwise.report.geometry import _asymptote, unwrapped_phase_deg
    from tests.reference.loopsets import nested_cascade

    result = check_text(nested_cascade(8).text())
    for b in result.breaks:
        n, _, i = _asymptote(b.response)
        L = b.response.axis_L
        assert abs(L[i]) > 0 and np.isfinite(L[i])
        phase = unwrapped_phase_deg(b.response)
        # the drawn branch at the anchor is -90 n deg (positive gain: every C and G here)
        assert phase[i] == pytest.approx(-90.0 * n, abs=5.0)
        drawn = drawn_line(plots.bode_figure(b), "bode-phase")
        assert np.isfinite(drawn.imag).sum() > 10
        plots.sensitivity_figure(b)  # raised the same internal error before


@pytest.mark.parametrize("source", ["type_three", "conditionally_stable/elevation"])
def test_the_critical_line_of_a_type_three_loop_is_minus_180(loops, demo, source):
    result = loops[source] if source in loops else demo[source][1]
    fig = plots.bode_figure(result)
    levels = {l.get_ydata()[0] for ax in fig.axes for l in ax.get_lines()
              if l.get_gid() == "critical-phase"}
    assert levels == {-180.0}


def test_the_phase_drops_by_half_a_turn_across_an_undamped_pair(loops):
    """The contour passes s = 2j on a small half circle to the right: L ~ c/(s - 2j)
    turns by -180 deg there, so the phase just above 2 rad/s is 180 deg lower."""
    result = loops["undamped_pair"]
    fig = plots.bode_figure(result)
    x, y = next(l for l in fig.axes[1].get_lines() if l.get_gid() == "bode-phase").get_data()
    x, y = np.asarray(x, float), np.asarray(y, float)
    gap = int(np.flatnonzero(np.isnan(x))[0])
    # 0.5 (s + 1) / ((s^2 + 4)(s + 2)) on either side of the pair, re-derived:
    # atan(w) - atan(w/2), then -180 deg once the contour has passed s = 2j
    below, above = x[gap - 1], x[gap + 1]
    assert y[gap - 1] == pytest.approx(math.degrees(math.atan(below) - math.atan(below / 2)), abs=1e-6)
    assert y[gap + 1] == pytest.approx(math.degrees(math.atan(above) - math.atan(above / 2)) - 180, abs=1e-6)


# ------------------------------------------------------------- delay loops

@pytest.mark.parametrize("source", ["servo_axis/current", "greenhouse_heating/water"])
def test_a_delays_far_phase_crossovers_are_counted_not_drawn_to_scale(demo, source):
    _, result = demo[source]
    m = result.margins
    marks, groups = select_crossings(result)
    marked = {c.freq for c in marks if c.kind == "phase"}
    # every phase crossover that sets a margin the table quotes is marked
    for gm in (m.gain_margin_up_db, m.gain_margin_down_db):
        if gm is not None:
            assert any(p.freq in marked for p in m.phase_crossovers
                       if math.isclose(p.gain_margin_db, gm, rel_tol=1e-9))
    # the rest beyond the last marked one are summarised: count and level in the key
    top = max(c.freq for c in marks)
    beyond = [p for p in m.phase_crossovers if p.freq > top]
    assert beyond and not any(p.freq in marked for p in beyond)
    fig = plots.bode_figure(result)
    key = _all_text(fig)
    assert f"{len(beyond)} further phase crossovers" in key
    assert f"\u2212{min(p.gain_margin_db for p in beyond):.1f} dB" in key
    # the phase axis shows the margins' region: every marked crossover, within two turns,
    # although the delay's lag over the drawn frequencies runs to thousands of degrees
    phase = drawn_line(fig, "bode-phase")
    lo, hi = fig.axes[1].get_ylim()
    assert hi - lo < 720.0 and phase.imag.min() < lo - 1000.0
    for c in marks:
        at = np.interp(math.log(c.freq), np.log(phase.real), phase.imag)
        assert lo < at < hi


# ------------------------------------------------------------- labels

def _cases():
    return [("demo", key, kind) for key in (
        "conditionally_stable/elevation", "double_integrator/attitude", "greenhouse_heating/water",
        "greenhouse_heating/air", "levitation_rig/sensor", "servo_axis/current", "servo_axis/speed",
        "servo_axis/position", "shared_params/infeed", "shared_params/outfeed")
        for kind in plots.KINDS] + [("loop", name, kind) for name in sorted(LOOPS) for kind in plots.KINDS]


@pytest.mark.parametrize("where, key, kind", _cases())
def test_labels_do_not_overlap_and_stay_on_the_page(loops, demo, where, key, kind):
    model, result = demo[key] if where == "demo" else (key, loops[key])
    fig = plots.make_figure(result, kind, model=model, hz=kind == "bode")
    texts = _texts(fig)
    renderer = fig.canvas.get_renderer()
    boxes = [(t.get_text(), t.get_window_extent(renderer)) for t in texts]
    page = fig.bbox
    for text, box in boxes:
        assert page.x0 <= box.x0 and box.x1 <= page.x1 and page.y0 <= box.y0 and box.y1 <= page.y1, text
    for i, (ta, a) in enumerate(boxes):
        for tb, b in boxes[i + 1:]:
            assert not _boxes_overlap(a, b), (ta, tb)
    # tags do not cover the marks they name, nor -1
    marks = [ax.transData.transform(np.column_stack(l.get_data()))[0] for ax in fig.axes
             for l in ax.get_lines()
             if l.get_gid() in ("gain-crossover", "phase-crossover", "critical-point")]
    for t in texts:
        if (t.get_gid() or "").startswith("tag-"):
            box = t.get_window_extent(renderer)
            assert not any(box.x0 < x < box.x1 and box.y0 < y < box.y1 for x, y in marks), t.get_text()


@pytest.mark.parametrize("kind", plots.KINDS)
@pytest.mark.parametrize("source", ["servo_axis/current", "conditionally_stable/elevation"])
def test_every_label_honours_hz(demo, source, kind):
    model, result = demo[source]
    text = _all_text(plots.make_figure(result, kind, model=model, hz=True))
    assert "rad/s" not in text and "\u03c9" not in text
    marks, _ = select_crossings(result)
    tags = dict(re.findall(r"([cp]\d+)\s+f[cp] [=\u2248] ([-\d.e+]+) Hz", text))
    if kind != "sensitivity":
        assert len(tags) == len(marks)
        for (tag, value), c in zip(sorted(tags.items(), key=lambda kv: float(kv[1])),
                                   sorted(marks, key=lambda c: c.freq)):
            assert float(value) == pytest.approx(c.freq / (2 * math.pi), rel=5e-3), tag
    else:
        m = result.margins
        hz = [float(v) for v in re.findall(r"at ([-\d.e+]+) Hz", text)]
        for peak in (m.sensitivity_peak, m.complementary_peak):
            assert any(v == pytest.approx(peak.freq / (2 * math.pi), rel=5e-3, abs=1e-9) for v in hz)


def test_ring_labels_each_sit_on_their_circle(loops):
    result = loops["type_three"]
    fig = plots.nyquist_figure(result)
    ring = choose_ring(result.response)
    ax = fig.axes[0]
    for k in (10, 100, 1000):
        label = next(t for t in ax.texts if t.get_gid() == f"ring-label-{k}")
        assert abs(complex(*label.xy)) == pytest.approx(ring.radius_of(k * ring.inner))


def test_the_indentation_arc_on_the_ring_is_drawn_smooth(loops):
    """Around the triple integrator the curve runs along the outer edge of the
    ring; the chord between drawn neighbours there may leave the arc by at most
    a quarter of a point (the engine samples that arc every ~8 deg, which alone
    would leave it by half a point: a visible polygon)."""
    result = loops["type_three"]
    fig = plots.nyquist_figure(result)
    ring = choose_ring(result.response)
    ax = fig.axes[0]
    z = drawn_line(fig, "nyquist-positive")
    pt_per_unit = (ax.transData.transform([[1, 0]]) - ax.transData.transform([[0, 0]]))[0, 0] * 72 / fig.dpi
    a, b = z[:-1], z[1:]
    on_arc = (np.abs(a) > ring.inner + 0.9 * ring.width) & (np.abs(b) > ring.inner + 0.9 * ring.width)
    assert on_arc.sum() > 20
    sagitta = (np.abs(a) + np.abs(b)) / 2 - np.abs((a + b) / 2)
    assert sagitta[on_arc].max() * pt_per_unit <= 0.25


# ------------------------------------------------------------- zoom near -1

@pytest.mark.parametrize("name", sorted(LOOPS))
def test_the_inset_appears_exactly_when_the_curve_passes_close_to_minus_one(loops, name):
    """docs/plots.md: an inset when some sample has |1 + L| < 0.3; its view holds -1
    and the closest sample, and arrow heads there point along the traversal."""
    assert ZOOM_BELOW == 0.3
    result = loops[name]
    L = result.response.L
    closest = int(np.argmin(np.abs(1 + L)))
    fig = plots.nyquist_figure(result)
    insets = [ax for ax in fig.axes if ax.get_gid() == "zoom"]
    assert len(insets) == (1 if abs(1 + L[closest]) < 0.3 else 0)
    if not insets:
        return
    inset = insets[0]
    (x0, x1), (y0, y1) = inset.get_xlim(), inset.get_ylim()
    for z in (-1.0 + 0j, L[closest]):
        assert x0 < z.real < x1 and y0 < z.imag < y1
    arrows = [a for a in inset.texts if a.get_gid() == "zoom-arrow"]
    assert len(arrows) == 2
    head, tail = complex(*arrows[0].xy), complex(*arrows[0].xyann)
    order = {complex(v): i for i, v in enumerate(L)}
    assert order[tail] < closest < order[head]  # positive frequencies: tail first


def test_the_small_margin_and_barely_unstable_loops_get_an_inset(loops):
    for name in ("small_margin", "barely_unstable", "three_lags_high"):
        assert any(ax.get_gid() == "zoom" for ax in plots.nyquist_figure(loops[name]).axes), name
    assert not any(ax.get_gid() == "zoom" for ax in plots.nyquist_figure(loops["three_lags"]).axes)


# ------------------------------------------------------------- samples only

def test_drawing_never_evaluates_the_loop_again(loops, monkeypatch):
    """Every picture comes from the check's samples: with transfer evaluation
    switched off, all views of every loop still draw."""
    def refuse(*_args, **_kwargs):
        raise AssertionError("a picture evaluated the loop again")

    monkeypatch.setattr(Transfer, "evaluate", refuse)
    for name in LOOPS:
        for kind in plots.KINDS:
            plots.svg_text(plots.make_figure(loops[name], kind, model=name))
