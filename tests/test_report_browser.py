"""The HTML report in a real headless browser (Debian's chromium), driven over the Chrome
DevTools Protocol on a websocket: the page loads from file:// with no console error and no
network request, and a screenshot shows the matrix with its cells in the report's colours.

Skips when chromium or the websocket client is missing, except under REXPR_REQUIRE_BROWSER=1
(CI), where that is a failure. REXPR_SCREENSHOT_DIR keeps the screenshot for a person to look at.
"""

from __future__ import annotations

import base64
import itertools
import json
import os
import shutil
import struct
import subprocess
import sys
import time
from pathlib import Path

import pytest

pytestmark = pytest.mark.slow

REQUIRED = os.environ.get("REXPR_REQUIRE_BROWSER", "") == "1"
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--disable-dev-shm-usage", "--remote-debugging-port=0")
WIDTH, HEIGHT = 1400, 1000
# The report's own cell colours (rexpr/differential/report_html.py), as RGB.
AGREE, DISAGREE = (0xC7, 0xEB, 0xD0), (0xF4, 0x97, 0x8E)


def _need(condition: bool, reason: str) -> None:
    if not condition:
        if REQUIRED:
            pytest.fail(f"{reason} (REXPR_REQUIRE_BROWSER=1, so this is a failure, not a skip)")
        pytest.skip(reason)


class DevTools:
    """A minimal CDP client: commands by id, events collected per session."""

    def __init__(self, socket) -> None:
        self.socket = socket
        self.ids = itertools.count(1)
        self.events: list[dict] = []

    def send(self, method: str, params: dict | None = None, session: str | None = None, timeout: float = 30) -> dict:
        number = next(self.ids)
        message = {"id": number, "method": method, "params": params or {}}
        if session:
            message["sessionId"] = session
        self.socket.send(json.dumps(message))
        deadline = time.monotonic() + timeout
        while True:
            reply = json.loads(self.socket.recv(timeout=max(0.1, deadline - time.monotonic())))
            if reply.get("id") == number:
                if "error" in reply:
                    raise AssertionError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            self.events.append(reply)

    def wait_for(self, method: str, timeout: float = 30) -> dict:
        deadline = time.monotonic() + timeout
        while True:
            for event in self.events:
                if event.get("method") == method:
                    return event
            self.events.append(json.loads(self.socket.recv(timeout=max(0.1, deadline - time.monotonic()))))


@pytest.fixture()
def browser(tmp_path):
    binary = shutil.which("chromium") or shutil.which("chromium-browser")
    _need(binary is not None, "chromium is not installed (apt-get install -y chromium)")
    try:
        from websockets.sync.client import connect
    except ImportError:
        _need(False, "the websockets package is not installed")
    profile = tmp_path / "profile"
    process = subprocess.Popen([binary, *FLAGS, f"--user-data-dir={profile}", "about:blank"],
                               stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        port_file = profile / "DevToolsActivePort"
        deadline = time.monotonic() + 30
        while not (port_file.is_file() and len(port_file.read_text().splitlines()) >= 2):
            assert process.poll() is None, "chromium exited at start"
            assert time.monotonic() < deadline, "chromium did not open its DevTools port"
            time.sleep(0.05)
        port, path = port_file.read_text().splitlines()[:2]
        with connect(f"ws://127.0.0.1:{port}{path}", max_size=64 * 2**20, open_timeout=20) as socket:
            yield DevTools(socket)
    finally:
        process.terminate()
        try:
            process.wait(10)
        except subprocess.TimeoutExpired:
            process.kill()


def _report(tmp_path: Path) -> Path:
    """A real run: three bundled corpora plus one whose published answer is wrong on purpose
    (2 + 1 is 3, ISO/IEC 9075-2 6.27), on the local backends and the embedded SQL engines."""
    corpora = tmp_path / "corpora"
    corpora.mkdir()
    bundled = Path(__file__).resolve().parent.parent / "corpora"
    for name in ("nulls", "whitespace", "like"):
        shutil.copy(bundled / f"{name}.toml", corpora / f"{name}.toml")
    (corpora / "wrong.toml").write_text(
        'category = "deliberately wrong"\ndescription = "a test fixture"\n'
        '[columns.i]\ntype = "int64"\nvalues = [1, 2]\n'
        '[[case]]\nexpression = "i + 1"\nreason = "addition"\nsource = "ISO/IEC 9075-2 6.27; row 2 wrong on purpose"\n'
        'expected = [2, 4]\n', encoding="utf-8")
    report = tmp_path / "report"
    done = subprocess.run([sys.executable, "-m", "rexpr.cli.main", "diff", "--corpora", str(corpora), "--engines",
                           "reference,arrow,numpy,duckdb,sqlite", "--report", str(report)],
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 1, done.stderr  # the wrong answer makes it red
    return report / "report.html"


def _png_size(data: bytes) -> tuple[int, int]:
    # PNG signature and IHDR layout: ISO/IEC 15948 (PNG), 5.2 and 11.2.2.
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and data[12:16] == b"IHDR"
    return struct.unpack(">II", data[16:24])


PIXELS_JS = """
(async (src, points) => {
  const image = new Image();
  image.src = src;
  await image.decode();
  const canvas = document.createElement('canvas');
  canvas.width = image.width; canvas.height = image.height;
  const context = canvas.getContext('2d');
  context.drawImage(image, 0, 0);
  const all = context.getImageData(0, 0, image.width, image.height).data;
  const colours = new Set();
  for (let i = 0; i < all.length; i += 4 * 97) colours.add((all[i] << 16) | (all[i + 1] << 8) | all[i + 2]);
  return {distinct: colours.size,
          points: points.map(([x, y]) => Array.from(context.getImageData(x, y, 1, 1).data.slice(0, 3)))};
})
"""

LAYOUT_JS = """
(() => {
  const matrix = document.getElementById('matrix');
  const box = matrix.getBoundingClientRect();
  const centre = (td) => { const r = td.getBoundingClientRect(); return [Math.round(r.x + r.width / 2),
                                                                        Math.round(r.y + 3)]; };
  const agree = matrix.querySelector('td.agree'), disagree = matrix.querySelector('td.disagree');
  return {top: box.top, left: box.left, width: box.width, height: box.height,
          rows: matrix.querySelectorAll('tbody tr').length,
          agree: agree && centre(agree), disagree: disagree && centre(disagree),
          cards: document.querySelectorAll('div.card').length,
          resources: performance.getEntriesByType('resource').length,
          title: document.title};
})()
"""


def _close(a: list[int], b: tuple[int, int, int]) -> bool:
    return all(abs(x - y) <= 3 for x, y in zip(a, b))


def test_report_page_loads_offline_without_errors_and_shows_the_matrix(browser, tmp_path):
    page = _report(tmp_path)
    target = browser.send("Target.createTarget", {"url": "about:blank"})["targetId"]
    session = browser.send("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
    for domain in ("Network", "Runtime", "Log", "Page"):
        browser.send(f"{domain}.enable", session=session)
    browser.send("Emulation.setDeviceMetricsOverride", {"width": WIDTH, "height": HEIGHT, "deviceScaleFactor": 1,
                                                        "mobile": False}, session=session)
    url = page.resolve().as_uri()
    browser.send("Page.navigate", {"url": url}, session=session)
    browser.wait_for("Page.loadEventFired")
    layout = browser.send("Runtime.evaluate", {"expression": LAYOUT_JS, "returnByValue": True},
                          session=session)["result"]["value"]
    shot = browser.send("Page.captureScreenshot", {"format": "png"}, session=session)["data"]

    mine = [e for e in browser.events if e.get("sessionId") == session]
    requested = [e["params"]["request"]["url"] for e in mine if e["method"] == "Network.requestWillBeSent"]
    assert all(u == url for u in requested), requested  # the page itself, nothing else
    assert layout["resources"] == 0
    problems = [e["params"] for e in mine if e["method"] == "Runtime.exceptionThrown"
                or (e["method"] == "Runtime.consoleAPICalled" and e["params"]["type"] in ("error", "assert"))
                or (e["method"] == "Log.entryAdded" and e["params"]["entry"]["level"] == "error")]
    assert problems == []

    assert layout["title"].startswith("rexpr differential report")
    assert layout["rows"] >= 10 and layout["cards"] >= 1
    assert 0 <= layout["top"] < HEIGHT / 2 and layout["width"] > 400  # the matrix is on the first screen
    png = base64.b64decode(shot)
    assert _png_size(png) == (WIDTH, HEIGHT) and len(png) > 20_000
    if os.environ.get("REXPR_SCREENSHOT_DIR"):
        Path(os.environ["REXPR_SCREENSHOT_DIR"], "report.png").write_bytes(png)

    # Read the screenshot's pixels back through the browser's own PNG decoder, in a second tab.
    points = [layout["agree"], layout["disagree"]]
    scratch = browser.send("Target.createTarget", {"url": "about:blank"})["targetId"]
    other = browser.send("Target.attachToTarget", {"targetId": scratch, "flatten": True})["sessionId"]
    pixels = browser.send("Runtime.evaluate", {
        "expression": f"{PIXELS_JS}('data:image/png;base64,{shot}', {json.dumps(points)})",
        "awaitPromise": True, "returnByValue": True}, session=other)["result"]["value"]
    assert pixels["distinct"] > 8  # not a blank page
    agree, disagree = pixels["points"]
    assert _close(agree, AGREE), agree
    assert _close(disagree, DISAGREE), disagree
