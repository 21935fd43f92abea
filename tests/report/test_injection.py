"""Hostile file names (issue 16, item 17): every format shows them safely.

The models are written into tmp_path under names that hold a newline with a fake
heading and a remote image, terminal escape sequences (clear screen, window
title, a C1 control), backticks, raw HTML and table pipes. Without a `model`
statement the model's name is the file's stem, so the names reach every place a
model name is shown. Each output is read back with a real parser: xml.etree for
HTML and JUnit, markdown-it-py (CommonMark with tables) for Markdown, json and
the SARIF schema for SARIF; the terminal text must hold no C0 or C1 control
character at all.
"""
from __future__ import annotations

import json
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import jsonschema
import pytest
from markdown_it import MarkdownIt

from loopwise.cli import main

LOOP = """input r
e = r - y
y = [2/(s+1)](e)
break b at y
require b phase_margin >= 150deg
"""
BROKEN = "input r\ny = [1/(s+1)](e_typo)\nbreak b at y\n"

HOSTILE = [
    "x\n# Fake heading\n![img](http:evil.example.png)",   # a new Markdown block and a remote image
    "\x1b[2J\x1b]0;pwned\x07title",                        # clear screen, window title
    "csi\u009b31mred",                                     # a C1 control (CSI)
    "tick`s``here`",                                       # backticks that would end a code span
    "<img src=x onerror=alert(1)>",                        # raw HTML
    "pipe|in|name",                                        # table cells
]
#: C0 and C1 control characters other than newline (and DEL)
CONTROL = re.compile("[\x00-\x09\x0b-\x1f\x7f-\x9f]")
SARIF_SCHEMA = json.loads((Path(__file__).parent / "data" / "sarif-schema-2.1.0.json").read_text(encoding="utf-8"))


def _hostile_folder(tmp_path_factory, prefix: str, text: str) -> Path:
    """A folder of models named by HOSTILE, each holding `text`, and one unreadable model."""
    root = tmp_path_factory.mktemp(prefix)
    for name in HOSTILE:
        (root / f"{name}.loop").write_text(text)
    (root / "broken\x1b[31m<b>`|\nx.loop").write_text(BROKEN)
    return root


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    return _hostile_folder(tmp_path_factory, "hostile", LOOP)


def run(folder: Path, capsys, *args) -> str:
    code = main(["check", str(folder), "--no-progress", "--color", "never", *args])
    assert code == 2  # one model cannot be read; the others are checked (and fail a requirement)
    return capsys.readouterr().out


def test_terminal_text_holds_no_control_character(folder, capsys):
    out = run(folder, capsys)
    assert "\x1b" not in out and not CONTROL.search(out), repr(CONTROL.search(out))
    # every model is still there, its name shown with `?` for what was unsafe
    assert "?[2J?]0;pwned?title" in out and "csi?31mred" in out
    assert "x?# Fake heading?![img](http:evil.example.png)" in out
    assert out.count("FAIL  ") == len(HOSTILE)


def test_diff_text_and_markdown_are_safe(folder, capsys):
    code = main(["diff", str(folder), str(folder)])
    out = capsys.readouterr().out
    assert code == 2 and "\x1b" not in out and not CONTROL.search(out)
    main(["diff", str(folder), str(folder), "--format", "markdown"])
    md = capsys.readouterr().out
    tokens = list(_walk(_markdown_tokens(md)))
    assert not {t.type for t in tokens} & {"image", "link_open", "html_block"}
    # the only raw HTML is the report's own small print
    assert {t.content for t in tokens if t.type == "html_inline"} <= {"<sub>", "</sub>"}
    assert not CONTROL.search(md)


def _markdown_tokens(text: str):
    md = MarkdownIt("commonmark").enable("table")
    return md.parse(text)


def _walk(tokens):
    for t in tokens:
        yield t
        yield from _walk(t.children or [])


def _tables_are_even(tokens) -> bool:
    """Every row of every Markdown table has as many cells as the others of its table part
    (header or body), and there is at least one table."""
    rows = []
    for t in tokens:
        if t.type in ("thead_open", "tbody_open"):
            rows.append([])
        if t.type == "tr_open":
            rows[-1].append(0)
        if t.type in ("th_open", "td_open"):
            rows[-1][-1] += 1
    widths = [len(set(r)) for r in rows if r]
    return bool(widths) and all(w == 1 for w in widths)


def _valid_machine_output(raw: str, fmt: str) -> None:
    """SARIF or JSON text: every control character escaped, parsed, SARIF against its schema."""
    assert not CONTROL.search(raw.replace("\n", "")), fmt  # JSON writes them as \\uXXXX
    doc = json.loads(raw)
    if fmt == "sarif":
        jsonschema.Draft4Validator(SARIF_SCHEMA).validate(doc)


def test_markdown_makes_no_heading_image_link_or_html_from_a_name(folder, capsys, tmp_path):
    out_file = tmp_path / "summary.md"
    run(folder, capsys, "--format", "markdown", "--output", str(out_file), "--quiet")
    text = out_file.read_text(encoding="utf-8")
    tokens = list(_walk(_markdown_tokens(text)))
    kinds = {t.type for t in tokens}
    assert not kinds & {"image", "link_open", "html_inline", "html_block"}, kinds
    headings = [tokens[i + 1].content for i, t in enumerate(tokens) if t.type == "heading_open"]
    # our own headings only: the verdict, one per model, the unreadable models
    assert headings[0].startswith("loopwise check:")
    assert len(headings) == 1 + len(HOSTILE) + 1
    assert not any(h.startswith("Fake heading") for h in headings)
    # the names are shown literally (code spans keep the text; `?` for control characters)
    code = [t.content for t in tokens if t.type == "code_inline"]
    assert "tick`s``here`.loop" in " ".join(code) and "<img src=x onerror=alert(1)>.loop" in " ".join(code)
    # every table row has as many cells as its header
    assert _tables_are_even(tokens)
    assert "pipe|in|name" in " ".join(code)


def test_junit_is_well_formed_and_keeps_the_names(folder, capsys, tmp_path):
    out_file = tmp_path / "report.xml"
    run(folder, capsys, "--format", "junit", "--output", str(out_file), "--quiet")
    raw = out_file.read_text(encoding="utf-8")
    root = ET.fromstring(raw)
    assert not CONTROL.search(raw)
    names = {s.get("name") for s in root.iter("testsuite")}
    assert any(n.endswith("<img src=x onerror=alert(1)>.loop") for n in names)
    assert root.get("errors") == "1"


def test_sarif_and_json_are_valid_and_escape_every_control_character(folder, capsys, tmp_path):
    for fmt in ("sarif", "json"):
        out_file = tmp_path / f"out.{fmt}"
        run(folder, capsys, "--format", fmt, "--output", str(out_file), "--quiet")
        raw = out_file.read_text(encoding="utf-8")
        _valid_machine_output(raw, fmt)
    assert "\\u001b" in raw and "\\u009b" in raw  # the names kept in the data, escaped


def test_html_report_is_well_formed_with_no_markup_from_a_name(folder, capsys, tmp_path):
    out_file = tmp_path / "report.html"
    code = main(["report", str(folder), "--output", str(out_file), "--no-progress"])
    capsys.readouterr()
    assert code == 2
    page = out_file.read_text(encoding="utf-8")
    tree = ET.fromstring(page[page.index("<html"):])  # well-formed XML
    tags = {e.tag.rsplit("}", 1)[-1] for e in tree.iter()}
    assert "img" not in tags
    assert not CONTROL.search(page.replace("\t", ""))
    text = " ".join(tree.itertext())
    assert "<img src=x onerror=alert(1)>" in text  # shown as text
    assert "broken?[31m<b>`|?x.loop" in text       # the unreadable one too, with its error


# --- the sweep's formats: the same names, over a box ----------------------------------------

SWEPT = LOOP.replace("input r", "param k = 2 in [1.5, 2.5]\ninput r").replace("[2/(s+1)]", "[k/(s+1)]")


@pytest.fixture(scope="module")
def swept_folder(tmp_path_factory) -> Path:
    return _hostile_folder(tmp_path_factory, "hostile-sweep", SWEPT)


def sweep(folder: Path, capsys, *args) -> str:
    code = main(["sweep", str(folder), "--no-progress", "--samples", "2", "--jobs", "1", *args])
    assert code == 2  # one model cannot be read; the others are swept (and fail a requirement)
    return capsys.readouterr().out


def test_sweep_text_holds_no_control_character(swept_folder, capsys):
    out = sweep(swept_folder, capsys)
    assert "\x1b" not in out and not CONTROL.search(out), repr(CONTROL.search(out))
    assert "?[2J?]0;pwned?title" in out and "x?# Fake heading?![img](http:evil.example.png)" in out
    assert out.count("FAIL  ") == len(HOSTILE)


def test_sweep_markdown_makes_no_heading_image_link_or_html_from_a_name(swept_folder, capsys, tmp_path):
    out_file = tmp_path / "sweep.md"
    sweep(swept_folder, capsys, "--format", "markdown", "--output", str(out_file), "--quiet")
    text = out_file.read_text(encoding="utf-8")
    tokens = list(_walk(_markdown_tokens(text)))
    assert not {t.type for t in tokens} & {"image", "link_open", "html_inline", "html_block"}
    headings = [tokens[i + 1].content for i, t in enumerate(tokens) if t.type == "heading_open"]
    assert headings[0].startswith("loopwise sweep:") and len(headings) == 1 + len(HOSTILE) + 1
    code = " ".join(t.content for t in tokens if t.type == "code_inline")
    assert "tick`s``here`.loop" in code and "<img src=x onerror=alert(1)>" in code and "pipe|in|name" in code
    assert _tables_are_even(tokens)


def test_sweep_junit_sarif_and_json_are_well_formed(swept_folder, capsys, tmp_path):
    out_file = tmp_path / "sweep.xml"
    sweep(swept_folder, capsys, "--format", "junit", "--output", str(out_file), "--quiet")
    raw = out_file.read_text(encoding="utf-8")
    root = ET.fromstring(raw)
    assert not CONTROL.search(raw)
    assert any(s.get("name").endswith("<img src=x onerror=alert(1)>.loop") for s in root.iter("testsuite"))
    for fmt in ("sarif", "json"):
        out_file = tmp_path / f"sweep.{fmt}"
        sweep(swept_folder, capsys, "--format", fmt, "--output", str(out_file), "--quiet")
        raw = out_file.read_text(encoding="utf-8")
        _valid_machine_output(raw, fmt)
        assert "\\u001b" in raw and "\\u009b" in raw


def test_html_sweep_section_is_well_formed_with_no_markup_from_a_name(swept_folder, capsys, tmp_path):
    out_file = tmp_path / "report.html"
    code = main(["report", str(swept_folder / "<img src=x onerror=alert(1)>.loop"),
                 str(swept_folder / "x\n# Fake heading\n![img](http:evil.example.png).loop"),
                 "--sweep", "--samples", "2", "--output", str(out_file), "--no-progress"])
    capsys.readouterr()
    assert code == 1  # the requirement fails; every model is read
    page = out_file.read_text(encoding="utf-8")
    tree = ET.fromstring(page[page.index("<html"):])
    tags = {e.tag.rsplit("}", 1)[-1] for e in tree.iter()}
    assert "img" not in tags and "h4" in tags  # the sweep sections are there
    assert not CONTROL.search(page.replace("\t", ""))
    assert "<img src=x onerror=alert(1)>" in " ".join(tree.itertext())
