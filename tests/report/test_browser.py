"""The nightly report in a real browser: headless Chromium opens report.html from disk.

Chromium is driven over the DevTools protocol on a pipe (``--remote-debugging-pipe``: commands
on fd 3, replies on fd 4, NUL-terminated JSON), which reports console errors, uncaught
exceptions and every network request as events, and lets the test measure each figure and
hit-test a point after the page loaded.
A full-page screenshot is written to ``tests/artifacts/`` (git-ignored). Without Chromium the
test fails with instructions (CI installs it), it is never skipped.
"""

from __future__ import annotations

import base64
import fcntl
import json
import os
import select
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "nightly"))
from nightly_fixtures import REPO, copy_demo, nightly  # noqa: E402

CHROMIUM = "/usr/bin/chromium"
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--remote-debugging-pipe", "--window-size=1280,900"]
ARTIFACTS = REPO / "tests" / "artifacts"
TIMEOUT_S = 60.0

pytestmark = pytest.mark.browser


def _chromium() -> str:
    found = CHROMIUM if os.access(CHROMIUM, os.X_OK) else shutil.which("chromium")
    if not found:
        pytest.fail("headless Chromium is needed for this test and was not found at "
                    f"{CHROMIUM} or on PATH; install it with 'apt-get install -y chromium' "
                    "(.ci/run does this)", pytrace=False)
    return found


def _high(fd: int) -> int:
    """``fd`` moved to a number >= 10, so that setting fds 3 and 4 cannot clobber it."""
    moved = fcntl.fcntl(fd, fcntl.F_DUPFD_CLOEXEC, 10)
    os.close(fd)
    return moved


class DevTools:
    """A minimal DevTools-protocol client over Chromium's debugging pipe."""

    def __init__(self, binary: str, user_data_dir: Path):
        cmd_r, self._cmd_w = map(_high, os.pipe())
        self._out_r, out_w = map(_high, os.pipe())
        # fds 3 and 4 of the browser are the pipe ends (a Python trampoline sets them: dash
        # cannot redirect fds above 9)
        trampoline = ("import os, sys; os.dup2(int(sys.argv[1]), 3); "
                      "os.dup2(int(sys.argv[2]), 4); os.execv(sys.argv[3], sys.argv[3:])")
        self._log = open(user_data_dir.parent / "chromium-stderr.log", "w+b")
        self.proc = subprocess.Popen(
            [sys.executable, "-c", trampoline, str(cmd_r), str(out_w), binary, *FLAGS,
             f"--user-data-dir={user_data_dir}", "about:blank"], pass_fds=(cmd_r, out_w),
            stdout=subprocess.DEVNULL, stderr=self._log)
        os.close(cmd_r)
        os.close(out_w)
        self._buf, self._next, self.events = b"", 0, []

    def _read(self, deadline: float) -> dict:
        while b"\0" not in self._buf:
            left = deadline - time.monotonic()
            if left <= 0 or not select.select([self._out_r], [], [], left)[0]:
                raise TimeoutError("no answer from chromium")
            chunk = os.read(self._out_r, 1 << 20)
            if not chunk:
                self._log.seek(0)
                raise RuntimeError("chromium closed the debugging pipe: "
                                   + self._log.read().decode(errors="replace")[-2000:])
            self._buf += chunk
        msg, self._buf = self._buf.split(b"\0", 1)
        return json.loads(msg)

    def send(self, method: str, params: dict | None = None, session: str | None = None,
             timeout: float = TIMEOUT_S) -> dict:
        self._next += 1
        msg = {"id": self._next, "method": method, "params": params or {}}
        if session:
            msg["sessionId"] = session
        os.write(self._cmd_w, json.dumps(msg).encode() + b"\0")
        deadline = time.monotonic() + timeout
        while True:
            reply = self._read(deadline)
            if reply.get("id") == self._next:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply["result"]
            self.events.append(reply)

    def wait_for(self, method: str, timeout: float = TIMEOUT_S) -> dict:
        deadline = time.monotonic() + timeout
        for i, e in enumerate(self.events):
            if e.get("method") == method:
                return self.events[i]
        while True:
            e = self._read(deadline)
            self.events.append(e)
            if e.get("method") == method:
                return e

    def close(self) -> None:
        try:
            self.send("Browser.close", timeout=10)
        except Exception:
            pass
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
        os.close(self._cmd_w)
        os.close(self._out_r)
        self._log.close()

    def problems(self) -> list[str]:
        """Console errors, uncaught exceptions and error log entries seen so far."""
        out = []
        for e in self.events:
            m, p = e.get("method"), e.get("params", {})
            if m == "Runtime.exceptionThrown":
                out.append("exception: " + json.dumps(p.get("exceptionDetails", {}))[:500])
            elif m == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
                out.append("console: " + json.dumps(p.get("args", []))[:500])
            elif m == "Log.entryAdded" and p.get("entry", {}).get("level") == "error":
                out.append("log: " + p["entry"].get("text", "")[:500])
        return out


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("browser-report")
    result = nightly(tmp, copy_demo(tmp))
    return Path(result.report["html"]), result


#: What the page holds once loaded: the figures with their drawn size and content, and the
#: hover text of the point under the pointer at the centre of a flagged CO2 lab point.
PROBE = """(() => {
  const figs = Array.from(document.querySelectorAll('svg.plot')).map(s => {
    const r = s.getBoundingClientRect();
    return {fluid: s.dataset.fluid, figure: s.dataset.figure, w: r.width, h: r.height,
            points: s.querySelectorAll('use').length,
            samples: Array.from(s.querySelectorAll('g[data-layer="samples"] path'))
              .map(p => p.getBBox().width),
            images: s.querySelectorAll('image').length,
            titles: s.querySelectorAll('title').length};
  });
  const target = Array.from(document.querySelectorAll(
      'svg.plot[data-fluid="carbon-dioxide"][data-figure="phase"] g.fl-points use'))
    .find(u => (u.querySelector('title') || {}).textContent.includes('flag 1'));
  let hover = null;
  if (target) {
    target.scrollIntoView({block: 'center'});
    const r = target.getBoundingClientRect();
    const hit = document.elementFromPoint(r.left + r.width / 2, r.top + r.height / 2);
    let el = hit;
    while (el && !(el.querySelector && el.querySelector(':scope > title'))) el = el.parentNode;
    hover = {tag: hit ? hit.tagName : null,
             text: el ? el.querySelector(':scope > title').textContent : null};
  }
  const index = Array.from(document.querySelectorAll('#passed ~ table.index tr[id] a'))
    .map(a => ({href: a.getAttribute('href'), url: a.href, row: a.closest('tr').id}));
  const verdict = document.querySelector('.verdict');
  return JSON.stringify({verdict: verdict ? verdict.innerText : null,
                         title: document.title, figures: figs, hover: hover, index: index,
                         back: Array.from(document.querySelectorAll('a[href="../report.html"]'))
                           .map(a => a.href)});
})()"""


def _open(tools: DevTools, session: str, url: str) -> tuple[dict, list[str], list[str]]:
    """Load ``url`` and probe it; returns the probe, the problems and the requested URLs."""
    tools.events.clear()
    tools.send("Page.navigate", {"url": url}, session=session)
    tools.wait_for("Page.loadEventFired")
    page = json.loads(tools.send("Runtime.evaluate", {"expression": PROBE,
                                                      "returnByValue": True},
                                 session=session)["result"]["value"])
    requests = [e["params"]["request"]["url"] for e in tools.events
                if e.get("method") == "Network.requestWillBeSent"]
    return page, tools.problems(), requests


def _check_figures(figures: dict) -> None:
    for key, fig in figures.items():
        assert fig["w"] > 500 and fig["h"] > 250, key
        assert fig["points"] > 20 and fig["titles"] > 10, key
        # the dense samples of evaluated equations: merged paths spread over the panel
        assert fig["samples"] and max(fig["samples"]) > 50 and min(fig["samples"]) > 0, key
        assert fig["images"] == 0, key


def test_report_renders_in_chromium_with_every_figure(report, tmp_path):
    """Chromium loads report.html from disk with no console error and no request beyond the
    file itself; the phase diagram and deviation plots of every fluid needing attention
    render (drawn size, points, the merged layer of equation samples); resting the pointer
    on a flagged point shows its source, file and row; the fluid that passed everything is
    an index row whose link opens its own page, as self-contained, with both figures and a
    link back; a screenshot is saved."""
    binary = _chromium()
    html_path, result = report
    tools = DevTools(binary, tmp_path / "profile")
    try:
        target = tools.send("Target.createTarget", {"url": "about:blank"})["targetId"]
        session = tools.send("Target.attachToTarget",
                             {"targetId": target, "flatten": True})["sessionId"]
        for domain in ("Runtime.enable", "Log.enable", "Page.enable", "Network.enable"):
            tools.send(domain, session=session)
        page, problems, requests = _open(tools, session, html_path.as_uri())
        size = tools.send("Page.getLayoutMetrics", session=session)["cssContentSize"]
        shot = tools.send("Page.captureScreenshot", {
            "format": "png", "captureBeyondViewport": True,
            "clip": {"x": 0, "y": 0, "width": size["width"],
                     "height": min(size["height"], 16000), "scale": 1}}, session=session)
        # a fluid that passed everything: its row in the index leads to its own page
        passed = {row["row"]: row for row in page["index"]}
        fluid_page = None
        if "fluid-argon" in passed:
            fluid_page = _open(tools, session, passed["fluid-argon"]["url"])
    finally:
        tools.close()
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    artefact = ARTIFACTS / "nightly-report.png"
    artefact.write_bytes(base64.b64decode(shot["data"]))
    assert artefact.stat().st_size > 10_000
    assert problems == []
    assert requests and all(u == html_path.as_uri() or u.startswith("data:") for u in requests), \
        requests
    assert page["verdict"].startswith("FAIL") and result.run_id in page["title"]
    fluids = {"carbon-dioxide", "nitrogen", "water"}     # each with a failure or warning
    figures = {(f["fluid"], f["figure"]): f for f in page["figures"]}
    assert set(figures) == {(f, k) for f in fluids for k in ("phase", "deviation")}
    _check_figures(figures)
    # argon passed every check: one index row, its figures on its own self-contained page
    assert [r["href"] for r in page["index"]] == ["fluids/fluid-argon.html"]
    assert fluid_page is not None
    argon, argon_problems, argon_requests = fluid_page
    assert argon_problems == []
    url = passed["fluid-argon"]["url"]
    assert argon_requests and all(u == url or u.startswith("data:") for u in argon_requests), \
        argon_requests
    argon_figures = {(f["fluid"], f["figure"]): f for f in argon["figures"]}
    assert set(argon_figures) == {("argon", "phase"), ("argon", "deviation")}
    _check_figures(argon_figures)
    assert argon["back"] == [html_path.as_uri()]
    assert page["hover"]["tag"] == "use", page["hover"]
    text = page["hover"]["text"]
    assert "brackenridge-rig-a-co2-2024-05/co2-vle-rig-a.csv row 16" in text
    assert text.startswith("brackenridge-rig-a-co2-2024-05 (measurement)") and "T = " in text
