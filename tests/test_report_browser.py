"""The study report in a real browser: headless Chromium renders it, prints it, and nothing is missing.

Chromium is driven over its DevTools protocol on a pipe (``--remote-debugging-pipe``: commands on
file descriptor 3, replies on 4, each a JSON message ended by a NUL byte), so no extra package is
needed. The test installs nothing: CI installs Debian's ``chromium`` (and ``poppler-utils`` for
``pdftoppm``) in ``.ci/run``; where no browser is present the tests are skipped and say why. The
screenshots stay under the test's temporary folder as CI artefacts (their paths are printed).
"""

from __future__ import annotations

import base64
import json
import os
import select
import shutil
import subprocess
import time
from pathlib import Path

import numpy as np
import pytest

from slipnet.reports.html_study import SECTIONS

BROWSER = next((p for p in (shutil.which(n) for n in ("chromium", "chromium-browser", "google-chrome")) if p), None)
pytestmark = pytest.mark.skipif(BROWSER is None, reason="no Chromium on this machine (Debian: apt-get install "
                                "chromium); CI installs it in .ci/run")

_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
          "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-extensions",
          "--hide-scrollbars", "--window-size=1280,900", "--remote-debugging-pipe"]


class Chromium:
    """A headless Chromium driven over the DevTools pipe (one page, events collected)."""

    def __init__(self, profile: Path) -> None:
        cmd_r, self._cmd_w = os.pipe()
        self._out_r, out_w = os.pipe()

        def child() -> None:  # the browser reads commands on fd 3 and writes replies on fd 4
            a, b = os.dup(cmd_r), os.dup(out_w)  # (either end may itself be 3 or 4)
            os.dup2(a, 3)
            os.dup2(b, 4)

        # fds 3 and 4 are kept open across the exec (the child sets them up before it)
        self.proc = subprocess.Popen([BROWSER, *_FLAGS, f"--user-data-dir={profile}", "about:blank"],
                                     stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                                     pass_fds=(3, 4), preexec_fn=child)
        os.close(cmd_r)
        os.close(out_w)
        self._buf = b""
        self._id = 0
        self.events: list[dict] = []
        self.session = None
        target = self.call("Target.createTarget", {"url": "about:blank"}, browser=True)["targetId"]
        self.session = self.call("Target.attachToTarget", {"targetId": target, "flatten": True},
                                 browser=True)["sessionId"]
        for domain in ("Page", "Runtime", "Log"):
            self.call(f"{domain}.enable")

    def _read(self, timeout: float) -> dict:
        end = time.monotonic() + timeout
        while b"\0" not in self._buf:
            left = end - time.monotonic()
            if left <= 0 or (self.proc.poll() is not None and not select.select([self._out_r], [], [], 0)[0]):
                raise TimeoutError("no answer from Chromium")
            if select.select([self._out_r], [], [], min(left, 0.5))[0]:
                chunk = os.read(self._out_r, 1 << 20)
                if not chunk:
                    raise TimeoutError("Chromium closed its DevTools pipe")
                self._buf += chunk
        msg, self._buf = self._buf.split(b"\0", 1)
        return json.loads(msg)

    def call(self, method: str, params: dict | None = None, *, browser: bool = False, timeout: float = 60.0) -> dict:
        """Send one command and wait for its reply (events that arrive meanwhile are kept)."""
        self._id += 1
        msg = {"id": self._id, "method": method, "params": params or {}}
        if self.session and not browser:
            msg["sessionId"] = self.session
        os.write(self._cmd_w, json.dumps(msg).encode() + b"\0")
        while True:
            reply = self._read(timeout)
            if reply.get("id") == self._id:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            self.events.append(reply)

    def wait_for(self, method: str, timeout: float = 60.0) -> dict:
        """The first event ``method`` (already received or coming)."""
        for e in self.events:
            if e.get("method") == method:
                return e
        while True:
            e = self._read(timeout)
            self.events.append(e)
            if e.get("method") == method:
                return e

    def problems(self) -> list[str]:
        """Console errors, uncaught exceptions and log errors (failed loads, blocked content)."""
        out = []
        for e in self.events:
            m, p = e.get("method"), e.get("params", {})
            if m == "Runtime.exceptionThrown":
                out.append(f"exception: {p.get('exceptionDetails', {}).get('text')}")
            elif m == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
                out.append(f"console.{p['type']}: {p.get('args')}")
            elif m == "Log.entryAdded" and p.get("entry", {}).get("level") == "error":
                out.append(f"log: {p['entry'].get('text')} {p['entry'].get('url', '')}")
        return out

    def close(self) -> None:
        try:
            self.call("Browser.close", browser=True, timeout=10.0)
        except (RuntimeError, TimeoutError, OSError):
            pass
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
        os.close(self._cmd_w)
        os.close(self._out_r)


@pytest.fixture(scope="module")
def report(tmp_path_factory) -> Path:
    """The report of a small study on a synthetic map."""
    from slipnet.io import write_map
    from slipnet.study import (
        ForecastOptions,
        GrowthOptions,
        LoadOptions,
        MapOptions,
        NotchOptions,
        StudyOptions,
        run_study,
    )
    from slipnet.synthetic import make_specimen

    folder = tmp_path_factory.mktemp("report")
    spec = make_specimen((70, 90), 2.0, grain_size_um=25.0, seed=3, load_axis=(0.0, 1.0, 0.0))
    path = write_map(spec.omap, folder / "coupon.npz")
    opts = StudyOptions(map=MapOptions(path=str(path)), load=LoadOptions(axis=(0.0, 1.0, 0.0)),
                        notch=NotchOptions(edges=("right",), spacing_um=30.0, depth_um=20.0, root_radius_um=4.0,
                                           window_um=60.0),
                        forecast=ForecastOptions(candidates=3, horizon_um=80.0, samples=4),
                        growth=GrowthOptions(n_points=300))
    return run_study(opts, folder / "out").files["report"]


@pytest.fixture
def browser(tmp_path):
    b = Chromium(tmp_path / "profile")
    yield b
    b.close()


def _open(browser: Chromium, path: Path) -> None:
    browser.call("Page.navigate", {"url": path.resolve().as_uri()})
    browser.wait_for("Page.loadEventFired")


def _not_blank(png: Path) -> tuple[float, float]:
    """(share of pixels that are not near-white, standard deviation of grey levels) of a PNG."""
    import matplotlib.image as mpimg

    img = mpimg.imread(png)[..., :3]
    grey = img.mean(axis=2)
    return float(np.mean(grey < 0.9)), float(grey.std())


def test_report_renders_without_console_errors_or_missing_images(browser, report, tmp_path):
    _open(browser, report)
    got = browser.call("Runtime.evaluate", {"returnByValue": True, "expression": (
        "JSON.stringify({images: Array.from(document.images).map(i => [i.complete, i.naturalWidth]),"
        " sections: Array.from(document.querySelectorAll('section')).map(s => s.id),"
        " scripts: document.scripts.length, title: document.title})")})
    page = json.loads(got["result"]["value"])
    assert page["scripts"] == 0
    assert page["sections"] == [a for a, _ in SECTIONS]
    assert len(page["images"]) >= 10
    missing = [i for i, (done, width) in enumerate(page["images"]) if not done or width == 0]
    assert not missing, f"images that did not load: {missing}"
    assert not browser.problems(), browser.problems()
    shot = tmp_path / "first_screen.png"
    shot.write_bytes(base64.b64decode(browser.call("Page.captureScreenshot", {"format": "png"})["data"]))
    print(f"screenshot of the first screen: {shot}")
    ink, spread = _not_blank(shot)
    assert ink > 0.02 and spread > 0.05, (ink, spread)


def test_report_prints_with_a_page_per_section(browser, report, tmp_path):
    _open(browser, report)
    pdf = tmp_path / "report.pdf"
    pdf.write_bytes(base64.b64decode(browser.call("Page.printToPDF", {"printBackground": True,
                                                                       "preferCSSPageSize": True})["data"]))
    assert pdf.read_bytes().startswith(b"%PDF") and not browser.problems()
    print(f"printed report: {pdf}")
    if shutil.which("pdfinfo"):
        info = subprocess.run(["pdfinfo", str(pdf)], capture_output=True, text=True, check=True).stdout
        pages = int(next(line.split()[-1] for line in info.splitlines() if line.startswith("Pages:")))
        assert pages >= len(SECTIONS) - 1  # a page break before each section after the first
    if not shutil.which("pdftoppm"):
        pytest.skip("pdftoppm (Debian: poppler-utils) not present: the printed page was not turned into a picture")
    subprocess.run(["pdftoppm", "-png", "-r", "70", "-f", "1", "-l", "2", str(pdf), str(tmp_path / "page")],
                   check=True, capture_output=True)
    pages = sorted(tmp_path.glob("page-*.png"))
    assert len(pages) == 2
    print(f"printed pages as pictures: {', '.join(map(str, pages))}")
    for png in pages:
        ink, spread = _not_blank(png)
        assert ink > 0.01 and spread > 0.03, (png.name, ink, spread)


def test_the_checks_catch_a_broken_picture_and_a_blank_page(browser, tmp_path):
    page = tmp_path / "broken.html"
    page.write_text("<!DOCTYPE html><html><body><img src=\"data:image/png;base64,AAAA\"></body></html>",
                    encoding="utf-8")
    _open(browser, page)
    got = browser.call("Runtime.evaluate", {"returnByValue": True, "expression":
                                            "JSON.stringify(Array.from(document.images).map(i => i.naturalWidth))"})
    assert json.loads(got["result"]["value"]) == [0]
    shot = tmp_path / "blank.png"
    shot.write_bytes(base64.b64decode(browser.call("Page.captureScreenshot", {"format": "png"})["data"]))
    ink, _ = _not_blank(shot)
    assert ink < 0.02  # the non-blank check above would fail on this page
