"""The HTML report: one well-formed, self-contained file with the same figures as check."""
from __future__ import annotations

import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from loopwise.cli import main
from loopwise.report.summary import BREAK_COLUMNS, break_row
from loopwise.results import CAUTION
from loopwise.run import check_paths

from .conftest import write_models

BAD_MODEL = """model broken
input r
e = r - y
y = [2/(s+1)](e_typo)
break loop at y
"""


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    """(exit code, page text, parsed tree, RunResult) for the loops plus one bad model."""
    tmp_path = tmp_path_factory.mktemp("report")
    model_files = write_models(tmp_path / "models")
    (model_files / "broken.loop").write_text(BAD_MODEL, encoding="utf-8")
    out = tmp_path / "report.html"
    code = main(["report", str(model_files), "--output", str(out), "--no-progress"])
    page = out.read_text(encoding="utf-8")
    # strict: the page is well-formed XML (every element closed, text escaped)
    tree = ET.fromstring(page[page.index("<html"):])
    return code, page, tree, check_paths([str(model_files)])


def _text(node) -> str:
    return " ".join(" ".join(node.itertext()).split())


def _local(tag: str) -> str:
    return tag.rsplit("}", 1)[-1]


def test_unreadable_model_is_listed_with_its_error_and_exit_2(report):
    code, page, tree, run = report
    assert code == 2 and run.errors
    section = next(s for s in tree.iter("section") if s.get("id") == "unreadable")
    text = _text(section)
    first = run.errors[0]
    assert f"{first.span.file}:{first.span.line}:{first.span.col}" in text
    assert first.message in text


def test_every_model_has_the_check_table(report):
    _, _, tree, run = report
    tables = list(tree.iter("table"))
    assert len(tables) == len(run.models)
    headers = [h for h, _, _ in BREAK_COLUMNS]
    for table, model in zip(tables, run.models):
        assert [_text(th) for th in table.iter("th")] == headers
        rows = [[_text(td) for td in tr.iter("td")] for tr in table.find("tbody")]
        assert rows == [break_row(b) for b in model.breaks]


def test_three_views_per_break_and_the_caution(report):
    _, page, tree, run = report
    svgs = [e for e in tree.iter() if _local(e.tag) == "svg"]
    assert len(svgs) == 3 * sum(len(m.breaks) for m in run.models)
    assert CAUTION in _text(tree.find("body"))
    assert "@media print" in page
    for word in ("STABLE", "UNSTABLE", "PASS", "FAIL"):
        assert re.search(rf">{word}<", page), word


def test_self_contained_no_scripts_nothing_fetched_unique_ids(report):
    _, page, tree, _ = report
    tags = {_local(e.tag) for e in tree.iter()}
    assert not tags & {"script", "link", "iframe", "object", "embed", "img", "image"}
    ids = []
    for e in tree.iter():
        for name, value in e.attrib.items():
            if _local(name) in ("src", "href"):
                assert value.startswith("#"), value  # in-page references only
            if name == "id":
                ids.append(value)
            assert not _local(name).startswith("on"), name  # no event handlers
    assert len(ids) == len(set(ids))
    assert "@import" not in page
    assert not re.search(r"url\((?!#)", page)


def test_requirements_are_reported_met_or_not(model_files, tmp_path):
    (model_files / "three_lags.loop").write_text(
        (model_files / "three_lags.loop").read_text() + "require loop phase_margin >= 80deg\n"
        "require loop gain_margin >= 6dB\n")
    out = tmp_path / "r.html"
    code = main(["report", str(model_files / "three_lags.loop"), "-o", str(out)])
    text = _text(ET.fromstring(out.read_text()[out.read_text().index("<html"):]))
    assert code == 1  # phase margin 67.6 deg < 80 deg
    assert "NOT MET break loop: phase_margin >= 80" in text
    assert "MET break loop: gain_margin >= 6" in text


@pytest.mark.parametrize("output, message", [
    ("report.txt", "name it with .html"),
    ("/nonexistent/folder/report.html", "does not exist"),
])
def test_report_bad_output_is_one_line_and_exit_2(model_files, capsys, output, message):
    code = main(["report", str(model_files), "--output", output])
    err = capsys.readouterr().err
    assert code == 2 and message in err and len(err.strip().splitlines()) == 1


def test_the_page_is_the_same_drawn_in_one_process_or_two(tmp_path):
    model = write_models(tmp_path / "models") / "undamped_pair.loop"
    pages = []
    for jobs in ("1", "2"):
        out = tmp_path / f"r{jobs}.html"
        assert main(["report", str(model), "-o", str(out), "--jobs", jobs]) == 0
        pages.append(out.read_bytes())
    assert pages[0] == pages[1]


def test_inline_nyquist_curves_are_thinned_and_wind_as_the_engine_counts(report):
    """The page's inline SVG (re-read from the page text) turns around -1 exactly
    N times for every break (page y points down: the count there is -N)."""
    from .test_plots import _ray_crossings, _svg_polyline

    _, page, _, run = report
    for n, m in enumerate(run.models):
        for k, b in enumerate(m.breaks):
            prefix = f"m{n}b{k}n-"
            curve = np.concatenate([_svg_polyline(page, prefix + "nyquist-positive"),
                                    _svg_polyline(page, prefix + "nyquist-negative")])
            use = re.search(rf'<g id="{prefix}critical-point">.*?<use [^>]*x="([-\d.]+)" '
                            r'y="([-\d.]+)"', page, re.S)
            critical = float(use.group(1)) + 1j * float(use.group(2))
            assert _ray_crossings(curve - critical - 1.0) == -b.encirclements, (m.model, b.name)
            assert curve.size < b.response.L.size
