"""The HTML report in a real headless browser (Debian's `chromium`).

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

import pytest

from loopwise.cli import main

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


MEASURE = """JSON.stringify({
  svgs: [...document.querySelectorAll('svg')].map(s => {
    const r = s.getBoundingClientRect(); return [r.width, r.height]; }),
  text: document.body.innerText,
  height: document.documentElement.scrollHeight })"""


@pytest.fixture(scope="module")
def page(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("browser")
    models = tmp / "models"
    models.mkdir()
    for name in ("integrator_delay", "three_lags_high"):
        (models / f"{name}.loop").write_text(LOOPS[name][0], encoding="utf-8")
    out = tmp / "report.html"
    assert main(["report", str(models), "--output", str(out), "--no-progress"]) == 1
    browser = DevTools(str(tmp / "profile"))
    try:
        target = browser.call("Target.createTarget", {"url": "about:blank"})["targetId"]
        sid = browser.call("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
        for domain in ("Page", "Runtime", "Log", "Network"):
            browser.call(f"{domain}.enable", session=sid)
        browser.call("Page.navigate", {"url": out.resolve().as_uri()}, sid)
        browser.wait_for("Page.loadEventFired")
        measured = json.loads(browser.call("Runtime.evaluate", {"expression": MEASURE,
                                                                "returnByValue": True},
                                           sid)["result"]["value"])
        browser.call("Emulation.setDeviceMetricsOverride", {
            "width": 1280, "height": min(int(measured["height"]), 16000),
            "deviceScaleFactor": 1, "mobile": False}, sid)
        shot = browser.call("Page.captureScreenshot", {"format": "png"}, sid)["data"]
        (tmp / "report.png").write_bytes(base64.b64decode(shot))
        events = list(browser.events)
    finally:
        browser.close()
    return {"measured": measured, "events": events, "shot": tmp / "report.png"}


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
    assert len(measured["svgs"]) == 6  # three views for each of the two breaks
    assert all(w > 100 and h > 100 for w, h in measured["svgs"])
    text = measured["text"]
    for word in ("integrator_delay", "three_lags_high", "UNSTABLE", "STABLE", "PM deg", "Caution"):
        assert word in text


def test_screenshot_is_taken(page):
    data = page["shot"].read_bytes()
    assert data.startswith(b"\x89PNG") and len(data) > 50_000
