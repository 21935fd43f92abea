"""The HTML report in a real headless browser (Debian's `chromium`): what a reader sees.

The figures are laid out inside the page width with none over another, each
break's table row is shown (its box inside the viewport, the browser showing it
at its place, the page not scrolling sideways), the caution is shown, and the
screenshot is not blank. Each check is also run on the report broken on purpose
(a style sheet that stacks the figures, hides the rows, ...): it must fail there.

Driven over the Chrome DevTools protocol on `--remote-debugging-pipe` (JSON
messages ended by NUL on file descriptors 3 and 4), so no extra package is
needed. The page itself has no scripts; the measuring happens from outside
through the protocol. CI installs chromium (.ci/run); locally the test is
skipped only when the browser is absent.
"""
from __future__ import annotations

import base64
import json
import os
import select
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

from loopwise.cli import main
from loopwise.results import CAUTION

from .conftest import LOOPS

CHROMIUM = shutil.which("chromium")

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed here "
                       "(apt-get install -y chromium; CI installs it)"),
]


def _high(fd: int) -> int:
    import fcntl

    moved = fcntl.fcntl(fd, fcntl.F_DUPFD, 10)
    os.close(fd)
    return moved


class DevTools:
    """A minimal DevTools-protocol client over the pipe transport."""

    def __init__(self, profile: str, timeout: float = 60.0):
        cmd_r, self._cmd_w = os.pipe()
        self._res_r, res_w = os.pipe()
        # move the child's ends above 9 so placing them on 3 and 4 cannot clobber either
        cmd_r, res_w = (_high(fd) for fd in (cmd_r, res_w))
        flags = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update",
                 "--disable-sync", f"--user-data-dir={profile}", "--remote-debugging-pipe",
                 "--window-size=1280,2000", "about:blank"]
        # the browser reads commands on fd 3 and writes replies on fd 4
        place = ("import os, sys; os.dup2(int(sys.argv[1]), 3); os.dup2(int(sys.argv[2]), 4); "
                 "os.execv(sys.argv[3], sys.argv[3:])")
        self.proc = subprocess.Popen(
            [sys.executable, "-c", place, str(cmd_r), str(res_w), CHROMIUM, *flags],
            pass_fds=(cmd_r, res_w), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        os.close(cmd_r)
        os.close(res_w)
        self._buf, self._next, self.events = b"", 0, []
        self._deadline = time.monotonic() + timeout

    def _read(self, wanted):
        while True:
            while b"\0" in self._buf:
                raw, self._buf = self._buf.split(b"\0", 1)
                message = json.loads(raw)
                if wanted(message):
                    return message
                if "method" in message:
                    self.events.append(message)
            ready, _, _ = select.select([self._res_r], [], [],
                                        max(0.0, self._deadline - time.monotonic()))
            if not ready:
                raise TimeoutError("the browser did not answer in time")
            chunk = os.read(self._res_r, 1 << 20)
            if not chunk:
                raise EOFError("the browser closed the pipe")
            self._buf += chunk

    def call(self, method: str, params: dict | None = None, session: str | None = None):
        self._next += 1
        message = {"id": self._next, "method": method, "params": params or {}}
        if session:
            message["sessionId"] = session
        os.write(self._cmd_w, json.dumps(message).encode() + b"\0")
        reply = self._read(lambda m, i=self._next: m.get("id") == i)
        if "error" in reply:
            raise RuntimeError(f"{method}: {reply['error']}")
        return reply["result"]

    def wait_for(self, method: str):
        for i, event in enumerate(self.events):
            if event["method"] == method:
                return self.events.pop(i)
        return self._read(lambda m: m.get("method") == method)

    def close(self):
        try:
            self.call("Browser.close")
        except (OSError, EOFError, TimeoutError, RuntimeError):
            pass
        try:
            self.proc.wait(10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
        os.close(self._cmd_w)
        os.close(self._res_r)


#: what the page looks like once laid out, measured in page coordinates (CSS pixels):
#: the viewport's width and the page's scroll width, every figure's box, each break's
#: table row (its box, and whether the browser shows it: the element at its centre,
#: scrolled into view, is the row or inside it) and the caution (the same)
MEASURE = """(() => {
  const W = document.documentElement.clientWidth;
  const box = e => { const r = e.getBoundingClientRect();
    return {left: r.left + scrollX, top: r.top + scrollY, right: r.right + scrollX,
            bottom: r.bottom + scrollY, width: r.width, height: r.height}; };
  const shown = e => { e.scrollIntoView({block: 'center', inline: 'nearest'});
    const r = e.getBoundingClientRect();
    if (!r.width || !r.height) return false;
    const hit = document.elementFromPoint(r.left + Math.min(r.width, W) / 2, r.top + r.height / 2);
    return !!hit && e.contains(hit); };
  const rows = [...document.querySelectorAll('table')]
    .filter(t => t.caption && t.caption.textContent.startsWith('Breaks of model'))
    .flatMap(t => [...t.tBodies[0].rows]);
  const caution = document.querySelector('header .caution');
  const out = {
    width: W, scrollWidth: document.documentElement.scrollWidth,
    height: document.documentElement.scrollHeight,
    svgs: [...document.querySelectorAll('svg')].map(s => {
      const r = s.getBoundingClientRect(); return [r.width, r.height]; }),
    figures: [...document.querySelectorAll('figure')].map(box),
    rows: rows.map(r => ({box: box(r), text: r.innerText})),
    caution: caution ? {box: box(caution), text: caution.innerText} : null,
    text: document.body.innerText };
  out.rows.forEach((r, i) => { r.shown = shown(rows[i]); });
  if (caution) out.caution.shown = shown(caution);
  scrollTo(0, 0);
  return JSON.stringify(out); })()"""

#: the two models of the page, one break each
BREAKS = 2


def _show(browser: DevTools, session: str, html: Path) -> dict:
    """Load a page, measure it (MEASURE), and take two screenshots: the whole page at
    full size (a PNG file next to it) and at a quarter of its size (for the pixels)."""
    browser.call("Page.navigate", {"url": html.resolve().as_uri()}, session)
    browser.wait_for("Page.loadEventFired")
    measured = json.loads(browser.call("Runtime.evaluate", {"expression": MEASURE, "returnByValue": True},
                                       session)["result"]["value"])
    height = min(int(measured["height"]), 16000)
    browser.call("Emulation.setDeviceMetricsOverride", {
        "width": 1280, "height": height, "deviceScaleFactor": 1, "mobile": False}, session)
    shot = html.with_suffix(".png")
    shot.write_bytes(base64.b64decode(browser.call("Page.captureScreenshot", {"format": "png"}, session)["data"]))
    small = browser.call("Page.captureScreenshot", {"format": "png", "clip": {
        "x": 0, "y": 0, "width": 1280, "height": height, "scale": 0.25}}, session)["data"]
    browser.call("Emulation.clearDeviceMetricsOverride", session=session)
    return {"measured": measured, "shot": shot, "small": base64.b64decode(small)}


#: the report with one thing broken on purpose, by a style sheet added after the page's:
#: each must trip the check named beside it (`test_each_check_fails_on_a_broken_page`)
BROKEN = {
    "figures_stacked": ("figure_problems", ".plots { display: block; position: relative; height: 40px } "
                        "figure { position: absolute; top: 0; left: 0; width: 900px }"),
    "figure_too_wide": ("figure_problems", "figure { max-width: none; width: 1500px }"),
    "figures_squashed": ("figure_problems", "figure { height: 80px; overflow: hidden }"),
    "rows_hidden": ("row_problems", "tbody tr { visibility: hidden }"),
    "table_too_wide": ("row_problems", ".wrap { overflow: visible } table { width: 1800px }"),
    "caution_hidden": ("caution_problems", ".caution { display: none }"),
    "caution_covered": ("caution_problems", ".caution { position: relative; z-index: -1 } "
                        "header { background: #fff; position: relative; z-index: 0 } "
                        "header .caution { margin-top: -3rem }"),
    "blank": ("blank_problems", "body { visibility: hidden }"),
}


@pytest.fixture(scope="module")
def pages(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("browser")
    models = tmp / "models"
    models.mkdir()
    for name in ("integrator_delay", "three_lags_high"):
        (models / f"{name}.loop").write_text(LOOPS[name][0], encoding="utf-8")
    out = tmp / "report.html"
    assert main(["report", str(models), "--output", str(out), "--no-progress"]) == 1
    html = out.read_text(encoding="utf-8")
    for name, (_, css) in BROKEN.items():
        (tmp / f"{name}.html").write_text(html.replace("</head>", f"<style>{css}</style></head>", 1),
                                          encoding="utf-8")
    browser = DevTools(str(tmp / "profile"))
    try:
        target = browser.call("Target.createTarget", {"url": "about:blank"})["targetId"]
        sid = browser.call("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
        for domain in ("Page", "Runtime", "Log", "Network"):
            browser.call(f"{domain}.enable", session=sid)
        shown = {"report": _show(browser, sid, out)}
        shown["report"]["events"] = list(browser.events)  # the report's own load, before the others
        for name in BROKEN:
            shown[name] = _show(browser, sid, tmp / f"{name}.html")
    finally:
        browser.close()
    return shown


@pytest.fixture(scope="module")
def page(pages):
    return pages["report"]


# --- the checks: each returns what is wrong with a measured page (nothing: a good page) -----

def _overlap(a: dict, b: dict) -> float:
    """The area two boxes share (CSS px^2)."""
    w = min(a["right"], b["right"]) - max(a["left"], b["left"])
    h = min(a["bottom"], b["bottom"]) - max(a["top"], b["top"])
    return max(w, 0.0) * max(h, 0.0)


def _inside(box: dict, width: float) -> bool:
    return box["left"] >= -0.5 and box["right"] <= width + 0.5


def figure_problems(shown: dict) -> list[str]:
    """Every figure laid out: a real size, inside the page width, no two overlapping."""
    m = shown["measured"]
    figs = m["figures"]
    out = [f"figure {i} is {f['width']:.0f} x {f['height']:.0f} px" for i, f in enumerate(figs)
           if f["width"] < 300 or f["height"] < 150]
    out += [f"figure {i} spans {f['left']:.0f}..{f['right']:.0f} px of a {m['width']} px page"
            for i, f in enumerate(figs) if not _inside(f, m["width"])]
    out += [f"figures {i} and {j} overlap" for i in range(len(figs)) for j in range(i + 1, len(figs))
            if _overlap(figs[i], figs[j]) > 1.0]
    return out


def row_problems(shown: dict) -> list[str]:
    """Each break's row of the table shown: a real box inside the viewport's width, not
    hidden or covered, and the page not wider than the viewport."""
    m = shown["measured"]
    out = [] if len(m["rows"]) == BREAKS else [f"{len(m['rows'])} break rows, not {BREAKS}"]
    for i, r in enumerate(m["rows"]):
        if r["box"]["width"] <= 0 or r["box"]["height"] <= 0:
            out.append(f"break row {i} has no box")
        if not _inside(r["box"], m["width"]):
            out.append(f"break row {i} spans {r['box']['left']:.0f}..{r['box']['right']:.0f} px "
                       f"of a {m['width']} px viewport")
        if not r["shown"]:
            out.append(f"break row {i} is not what the browser shows at its place")
    if m["scrollWidth"] > m["width"]:
        out.append(f"the page is {m['scrollWidth']} px wide in a {m['width']} px viewport")
    return out


def caution_problems(shown: dict) -> list[str]:
    """The caution is on the page and shown (not hidden, not covered, inside the width)."""
    c = shown["measured"]["caution"]
    if c is None:
        return ["no caution"]
    out = [] if CAUTION in c["text"] else ["the caution's text is not shown"]
    if c["box"]["width"] <= 0 or c["box"]["height"] <= 0 or not c["shown"]:
        out.append("the caution is not what the browser shows at its place")
    if not _inside(c["box"], shown["measured"]["width"]):
        out.append("the caution runs off the page")
    return out


def blank_problems(shown: dict) -> list[str]:
    """The screenshot is not blank: its grey levels vary, and a share of it is ink."""
    from io import BytesIO

    import matplotlib.image as mpimg
    import numpy as np

    pixels = mpimg.imread(BytesIO(shown["small"]), format="png")  # floats in [0, 1]
    grey = pixels[..., :3].mean(axis=2)
    ink = float((grey < 0.8).mean())  # darker than the page's light bands and borders
    # the report measured 0.07 and 3.6% at a quarter of its size; a blank page 0 and 0%
    out = []
    if float(grey.std()) < 0.03:
        out.append(f"the screenshot is nearly uniform (std {grey.std():.3f})")
    if ink < 0.01:
        out.append(f"only {ink:.1%} of the screenshot is ink")
    return out


CHECKS = {f.__name__: f for f in (figure_problems, row_problems, caution_problems, blank_problems)}


# --- the report ---------------------------------------------------------------------------------

def test_loads_without_console_errors(page):
    errors = [e for e in page["events"]
              if e["method"] == "Runtime.exceptionThrown"
              or (e["method"] == "Runtime.consoleAPICalled" and e["params"]["type"] in ("error", "assert"))
              or (e["method"] == "Log.entryAdded" and e["params"]["entry"]["level"] == "error")]
    assert errors == []


def test_fetches_nothing_but_the_file_itself(page):
    urls = [e["params"]["request"]["url"] for e in page["events"]
            if e["method"] == "Network.requestWillBeSent"]
    assert urls and all(u.startswith("file://") for u in urls)
    assert len(urls) == 1


def test_every_figure_renders_with_a_size_and_the_tables_show(page):
    measured = page["measured"]
    assert len(measured["svgs"]) == len(measured["figures"]) == 6  # three views for each of the two breaks
    assert all(w > 100 and h > 100 for w, h in measured["svgs"])
    text = measured["text"]
    for word in ("integrator_delay", "three_lags_high", "UNSTABLE", "STABLE", "PM deg", "Caution"):
        assert word in text


def test_the_figures_lie_inside_the_page_and_apart(page):
    assert figure_problems(page) == []


def test_each_breaks_row_is_shown_and_the_page_does_not_scroll_sideways(page):
    assert row_problems(page) == []
    assert [r["text"].split("\t")[0] for r in page["measured"]["rows"]] == ["loop", "loop"]
    assert {r["text"].split("\t")[2] for r in page["measured"]["rows"]} == {"STABLE", "UNSTABLE"}


def test_the_caution_is_shown(page):
    assert caution_problems(page) == []


def test_the_screenshot_is_not_blank(page):
    data = page["shot"].read_bytes()
    assert data.startswith(b"\x89PNG") and len(data) > 50_000
    assert blank_problems(page) == []


# --- the checks have teeth: a page broken on purpose fails the check it breaks ------------------

@pytest.mark.parametrize("broken", BROKEN)
def test_each_check_fails_on_a_broken_page(pages, broken):
    check = CHECKS[BROKEN[broken][0]]
    assert check(pages[broken]) != [], f"{check.__name__} passed a page with {broken}"
