"""The figures: drawn from the engine's samples, and what they show is what the engine found.

The Nyquist count is re-read from the drawn line data by a method independent
of the engine: signed crossings of the ray
from -1 towards -infinity (a closed curve winds around a point as often as it
crosses any ray from it, counted with sign).
"""
from __future__ import annotations

import math
import re
import subprocess
import sys

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from loopwise.cli import main
from loopwise.report import plots
from loopwise.report.geometry import Ring, choose_ring, crossings
from loopwise.report.plots.common import THIN_TOL_PT

from .conftest import LOOPS, drawn_line


def _texts(fig) -> str:
    """Every text of the figure: in the axes and on the page (keys, titles)."""
    return "\n".join(t.get_text() for t in [*fig.texts, *(t for a in fig.axes for t in a.texts)])


def _ray_crossings(z: np.ndarray, about: float = -1.0) -> int:
    """Clockwise turns of the closed polyline z around `about`, from crossings of
    the ray (-inf, about) on the real axis: going up across it is clockwise."""
    z = np.append(z, z[0]) - about
    a, b = z[:-1], z[1:]
    turns = 0
    for p, q in zip(a, b):
        if (p.imag < 0) != (q.imag < 0):  # the segment crosses the real axis
            t = p.imag / (p.imag - q.imag)
            if p.real + t * (q.real - p.real) < 0:
                turns += 1 if q.imag >= 0 else -1
    return turns


def _distance_to_polyline(points: np.ndarray, line: np.ndarray) -> np.ndarray:
    """Distance of each point to the polyline `line` (complex numbers)."""
    a, b = line[:-1], line[1:]
    out = np.full(points.size, np.inf)
    for chunk in np.array_split(np.arange(points.size), max(1, points.size // 500)):
        p = points[chunk][:, None]
        ab = b - a
        t = np.clip(((p - a) * np.conj(ab)).real / np.maximum(np.abs(ab) ** 2, 1e-300), 0, 1)
        out[chunk] = np.abs(p - (a + t * ab)).min(axis=1)
    return out


@pytest.mark.parametrize("name", sorted(LOOPS))
def test_drawn_nyquist_curve_winds_as_often_as_the_engine_counts(loops, name):
    result = loops[name]
    fig = plots.nyquist_figure(result, model=name)
    drawn = np.concatenate([drawn_line(fig, "nyquist-positive"), drawn_line(fig, "nyquist-negative")])
    assert _ray_crossings(drawn) == result.encirclements
    # the drawn curve is the engine's own, compressed: every drawn point is a sample,
    # or (on the ring) a point of an arc between two; and no sample lies further
    # from the drawn line than the thinning allows
    ring = choose_ring(result.response)
    upper = drawn_line(fig, "nyquist-positive")
    samples = result.response.L
    if ring is not None:
        samples = ring.compress(samples)
    is_sample = np.isin(upper, samples)
    assert is_sample.sum() >= 2
    if ring is None:
        assert is_sample.all()
    else:
        assert np.all(np.abs(upper[~is_sample]) > ring.inner)
    ax = fig.axes[0]
    to_pt = 72.0 / fig.dpi
    disp = lambda z: (lambda d: (d[:, 0] + 1j * d[:, 1]) * to_pt)(
        ax.transData.transform(np.column_stack([z.real, z.imag])))
    gap = _distance_to_polyline(disp(samples[np.isfinite(samples)]), disp(upper))
    assert gap.max() <= THIN_TOL_PT + 1e-6


@pytest.mark.parametrize("name", sorted(LOOPS))
def test_the_mirror_half_is_the_conjugate_in_reverse(loops, name):
    fig = plots.nyquist_figure(loops[name], model=name)
    upper, mirror = drawn_line(fig, "nyquist-positive"), drawn_line(fig, "nyquist-negative")
    np.testing.assert_allclose(mirror, np.conj(upper[::-1]))


@pytest.mark.parametrize("name", sorted(n for n in LOOPS if n not in ("three_lags_high",)))
def test_ring_stretches_exactly_where_the_loop_has_axis_poles(loops, name):
    result = loops[name]
    has_axis_poles = LOOPS[name][2]
    assert bool(result.response.axis_poles) == has_axis_poles
    fig = plots.nyquist_figure(result, model=name)
    ring_patches = [p for p in fig.axes[0].patches if p.get_gid() == "ring"]
    upper = drawn_line(fig, "nyquist-positive")
    if has_axis_poles:
        ring = choose_ring(result.response)
        assert ring is not None and len(ring_patches) == 1
        on_ring = np.abs(upper) > ring.inner
        assert on_ring.any() and np.all(np.abs(upper) <= ring.outer + 1e-9)
        # the stretches on the ring include the indentation around the axis pole
        indentation = ring.compress(result.response.L[~result.response.on_axis])
        assert on_ring[np.isin(upper, indentation)].any()
        assert "log10" in _texts(fig)
    else:
        assert choose_ring(result.response) is None and not ring_patches


def test_a_large_gain_alone_also_goes_on_the_ring(loops):
    result = loops["three_lags_high"]
    ring = choose_ring(result.response)
    assert ring is not None
    assert np.abs(result.response.L).max() > ring.inner


@settings(max_examples=200, deadline=None)
@given(r=st.floats(1e-6, 1e12), angle=st.floats(-math.pi, math.pi),
       inner=st.floats(1.6, 4.0), width=st.floats(0.5, 5.0))
def test_ring_map_keeps_angle_fixes_the_inner_disk_and_inverts(r, angle, inner, width):
    ring = Ring(inner, width)
    z = np.array([r * np.exp(1j * angle)])
    w = ring.compress(z)
    assert abs(w[0]) <= ring.outer + 1e-12
    if r <= inner:
        np.testing.assert_allclose(w, z)
    else:
        assert abs(np.angle(w[0] / z[0])) < 1e-9
        np.testing.assert_allclose(ring.expand(w), z, rtol=1e-6)
    # strictly increasing in radius: the map cannot fold the curve over itself
    assert abs(ring.compress(z * 1.5)[0]) > abs(w[0]) or abs(w[0]) > ring.outer - 1e-9


def test_crossovers_are_marked_where_the_engine_found_them(loops):
    result = loops["integrator_delay"]
    fig = plots.nyquist_figure(result, model="m")
    marks = crossings(result)
    gains = [c for c in marks if c.kind == "gain"]
    phases = [c for c in marks if c.kind == "phase"]
    assert gains and phases
    ax = fig.axes[0]
    drawn_gain = [l for l in ax.get_lines() if l.get_gid() == "gain-crossover"]
    drawn_phase = [l for l in ax.get_lines() if l.get_gid() == "phase-crossover"]
    assert len(drawn_gain) == len(gains) and len(drawn_phase) == len(phases)
    for line in drawn_gain:  # |L| = 1 at a gain crossover
        x, y = line.get_data()
        assert math.hypot(x[0], y[0]) == pytest.approx(1.0, abs=1e-6)
    for line in drawn_phase:  # L real and negative at a phase crossover
        x, y = line.get_data()
        assert y[0] == pytest.approx(0.0, abs=1e-9) and x[0] < 0
    notes = _texts(fig)
    for c in marks:
        assert f"{c.freq:.3g} rad/s" in notes
    assert f"N = {result.encirclements}" in notes and f"P = {result.open_loop_rhp_poles}" in notes
    assert "STABLE" in notes


def test_bode_phase_is_continuous_and_shows_the_delay(loops):
    result = loops["integrator_delay"]
    fig = plots.bode_figure(result, model="m")
    phase = drawn_line(fig, "bode-phase")
    w, deg = phase.real, phase.imag
    assert np.all(np.abs(np.diff(deg)) < 90)
    # phase of 3 exp(-0.05 s)/(s (s+1)(s+2)) at s = jw, re-derived:
    # -90 - atan(w) - atan(w/2) (the rational part) - w*0.05 rad (the delay)
    rational = -90 - np.degrees(np.arctan(w) + np.arctan(w / 2))
    delay = np.degrees(w * 0.05)
    np.testing.assert_allclose(deg, rational - delay, atol=1e-6)
    assert delay[-1] > 5  # the delay's extra lag shows at the top of the drawn range


def test_bode_in_hz_divides_the_frequency_axis(loops):
    result = loops["three_lags"]
    rad = drawn_line(plots.bode_figure(result), "bode-magnitude")
    hz = drawn_line(plots.bode_figure(result, hz=True), "bode-magnitude")
    np.testing.assert_allclose(hz.real, rad.real / (2 * math.pi))
    np.testing.assert_allclose(hz.imag, rad.imag)


def test_sensitivity_curves_are_S_and_T_of_the_samples(loops):
    result = loops["three_lags"]
    fig = plots.sensitivity_figure(result)
    s_line, t_line = drawn_line(fig, "sens-S"), drawn_line(fig, "sens-T")
    # each drawn point is a sample (the lines are thinned separately)
    L_s = result.response.axis_L[np.isin(result.response.freq, s_line.real)]
    L_t = result.response.axis_L[np.isin(result.response.freq, t_line.real)]
    np.testing.assert_allclose(s_line.imag, 20 * np.log10(np.abs(1 / (1 + L_s))), atol=1e-9)
    np.testing.assert_allclose(t_line.imag, 20 * np.log10(np.abs(L_t / (1 + L_t))), atol=1e-9)
    m = result.margins
    if m is not None:
        ms = [l for l in fig.axes[0].get_lines() if l.get_gid() == "peak-Ms"]
        assert len(ms) == 1 and ms[0].get_data()[1][0] == pytest.approx(m.sensitivity_peak.db)
        assert s_line.imag.max() <= m.sensitivity_peak.db + 0.05


@pytest.mark.parametrize("suffix", [".svg", ".png", ".pdf"])
def test_plot_command_writes_every_kind_in_every_format(model_files, tmp_path, suffix):
    out = tmp_path / f"fig{suffix}"
    code = main(["plot", str(model_files / "integrator_delay.loop"), "--kind", "all",
                 "--output", str(out)])
    assert code == 0
    magic = {".svg": b"<?xml", ".png": b"\x89PNG", ".pdf": b"%PDF"}[suffix]
    for kind in ("nyquist", "bode", "sensitivity"):
        data = (tmp_path / f"fig-{kind}{suffix}").read_bytes()
        assert data.startswith(magic) and len(data) > 2000


def test_plot_command_default_names_in_the_working_folder(model_files, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(["plot", str(model_files / "three_lags.loop"), "--kind", "bode", "--hz"]) == 0
    assert (tmp_path / "three_lags-loop-bode.svg").read_text().count("<svg") == 1


@pytest.mark.parametrize("extra, message", [
    (["--break", "nosuch"], "the breaks are: loop"),
    (["--output", "fig.jpg"], "unknown suffix .jpg"),
    (["--output", "/nonexistent/folder/fig.svg"], "cannot write"),
    (["--kind", "polar"], "invalid choice"),
])
def test_plot_command_bad_input_is_one_line_and_exit_2(model_files, capsys, extra, message):
    code = main(["plot", str(model_files / "three_lags.loop"), *extra])
    err = capsys.readouterr().err
    assert code == 2
    assert message in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err


def test_only_plots_imports_matplotlib():
    code = ("import sys, loopwise.cli, loopwise.commands.plot, loopwise.commands.report, "
            "loopwise.report.html, loopwise.report.geometry; "
            "assert 'matplotlib' not in sys.modules, 'matplotlib imported too early'")
    subprocess.run([sys.executable, "-c", code], check=True)


def test_unstable_loop_crossovers_are_read_off_the_samples(loops):
    """10/(s+1)^3 (re-derived): phase crossover where 3 atan(w) = 180 deg, w = sqrt(3),
    |L| = 10/8 there (gain margin -20 log10(1.25) = -1.94 dB); gain crossover where
    (1 + w^2)^(3/2) = 10, w = sqrt(10^(2/3) - 1) = 1.908."""
    result = loops["three_lags_high"]
    assert result.margins is None and not result.stable
    marks = {c.kind: c for c in crossings(result)}
    assert not marks["gain"].exact and not marks["phase"].exact
    assert marks["phase"].freq == pytest.approx(math.sqrt(3), rel=5e-3)
    assert marks["phase"].margin == pytest.approx(-20 * math.log10(1.25), abs=0.05)
    assert marks["gain"].freq == pytest.approx(math.sqrt(10 ** (2 / 3) - 1), rel=5e-3)
    notes = _texts(plots.nyquist_figure(result))
    assert "\u2248" in notes and "UNSTABLE" in notes


def test_undamped_pair_lines_break_at_the_pole(loops):
    result = loops["undamped_pair"]
    fig = plots.bode_figure(result)
    line = next(l for l in fig.axes[0].get_lines() if l.get_gid() == "bode-magnitude")
    x = np.asarray(line.get_xdata(), float)
    gap = np.flatnonzero(np.isnan(x))
    assert len(gap) == 1 and x[gap[0] - 1] < 2.0 < x[gap[0] + 1]


def test_no_progress_bar_without_a_terminal(model_files, tmp_path, capsys):
    assert main(["plot", str(model_files / "three_lags.loop"), "--kind", "all",
                 "--output", str(tmp_path / "f.svg")]) == 0
    captured = capsys.readouterr()
    assert captured.err == "" and captured.out.count("wrote ") == 3


def test_plot_of_an_unreadable_model_prints_the_located_error_and_exits_2(tmp_path, capsys):
    bad = tmp_path / "bad.loop"
    bad.write_text("model bad\ninput r\ne = r - y\ny = [2/(s+1)](e_typo)\nbreak loop at y\n")
    assert main(["plot", str(bad), "--output", str(tmp_path / "f.svg")]) == 2
    err = capsys.readouterr().err
    assert f"{bad}:4:15:" in err and "^" in err and "Traceback" not in err
    assert not (tmp_path / "f.svg").exists()


def _svg_polyline(svg: str, gid: str) -> np.ndarray:
    """The points of the path in group `gid` of an SVG file (page coordinates, y down)."""
    group = re.search(rf'<g id="{gid}">(.*?)</g>', svg, re.S).group(1)
    d = re.search(r'<path d="([^"]*)"', group).group(1)
    xy = np.array([float(v) for v in re.findall(r"-?[\d.]+(?:e-?\d+)?", d)]).reshape(-1, 2)
    return xy[:, 0] + 1j * xy[:, 1]


@pytest.mark.parametrize("name", sorted(LOOPS))
def test_plot_files_are_thinned_and_still_wind_as_the_engine_counts(loops, name, model_files,
                                                                    tmp_path):
    """`loopwise plot` writes the thinned curve (re-read from the SVG file itself);
    it still turns around -1 exactly N times. The page's y axis points down, which
    turns clockwise into anticlockwise: the file's count is -N."""
    out = tmp_path / "n.svg"
    assert main(["plot", str(model_files / f"{name}.loop"), "--output", str(out)]) == 0
    svg = out.read_text(encoding="utf-8")
    curve = np.concatenate([_svg_polyline(svg, "nyquist-positive"),
                            _svg_polyline(svg, "nyquist-negative")])
    use = re.search(r'<g id="critical-point">.*?<use [^>]*x="([-\d.]+)" y="([-\d.]+)"', svg, re.S)
    critical = float(use.group(1)) + 1j * float(use.group(2))
    assert _ray_crossings(curve - critical - 1.0) == -loops[name].encirclements
    assert curve.size < 0.5 * 2 * loops[name].response.L.size or curve.size < 600
    assert len(svg.encode()) < SVG_BOUND


#: an upper bound on one figure's SVG (the report inlines three per break; before
#: thinning by deviation, figures ran to 60-100 kB)
SVG_BOUND = 45_000


@pytest.mark.parametrize("name", sorted(LOOPS))
@pytest.mark.parametrize("kind", plots.KINDS)
def test_svg_size_per_figure_is_bounded(loops, name, kind):
    assert len(plots.svg_text(plots.make_figure(loops[name], kind, model=name)).encode()) < SVG_BOUND


def test_a_file_name_with_dollar_signs_is_printed_as_written(tmp_path, capsys):
    """A model without a `model` line is named after its file: `e$\\q{$f` must reach every
    figure as written (matplotlib would otherwise parse `$...$` as math text, and this one
    stops the drawing with a parse error)."""
    text = "input r\nblock G = 2/((s+1)*(s+2))\ne = r - y\ny = G(e)\nbreak b at y\n"
    model = tmp_path / "e$\\q{$f.loop"
    model.write_text(text)
    out = tmp_path / "o.svg"
    assert main(["plot", str(model), "--kind", "all", "--output", str(out)]) == 0
    for kind in ("nyquist", "bode", "sensitivity"):
        assert "e$\\q{$f" in (tmp_path / f"o-{kind}.svg").read_text(encoding="utf-8")
    page = tmp_path / "r.html"
    assert main(["report", str(model), "--output", str(page)]) == 0
    assert "e$\\q{$f" in page.read_text(encoding="utf-8")
