"""The report in a real headless Chromium: images load, no network request, screenshot.

Skips (with the reason printed) where no Chromium is installed; .ci/run
installs one best-effort.
"""
from __future__ import annotations

import json
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from scaling.run.pipeline import write_outputs

from helpers_figures import SCRIPT_GROUP, simulated

pytestmark = pytest.mark.browser

PROBE = ("<script>window.addEventListener('load', () => {"
         "const d = document.createElement('div'); d.id = 'probe';"
         "d.textContent = [...document.images].map(i => i.complete + ':' + i.naturalWidth)"
         ".join(',');"
         "document.body.appendChild(d); });</script>")


def _chromium() -> str | None:
    return shutil.which("chromium") or shutil.which("chromium-browser")


def _run(browser: str, profile: Path, *args: str, timeout: int = 60) -> subprocess.CompletedProcess:
    cmd = [browser, "--headless=new", "--no-sandbox", "--disable-gpu", "--disable-quic",
           "--no-first-run", "--disable-background-networking", "--disable-component-update",
           "--disable-sync", "--hide-scrollbars", f"--user-data-dir={profile}",
           "--host-resolver-rules=MAP * ~NOTFOUND", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, check=False)


def _page_requests(netlog: Path) -> list:
    """http(s) URLs requested by a page (browser-internal requests have no origin)."""
    data = json.loads(netlog.read_text(encoding="utf-8", errors="replace"))
    start = data["constants"]["logEventTypes"]["URL_REQUEST_START_JOB"]
    urls = []
    for event in data["events"]:
        params = event.get("params") or {}
        url = params.get("url", "")
        if event["type"] == start and re.match(r"https?://", url) \
                and params.get("initiator") != "not an origin":
            urls.append(url)
    return urls


@pytest.fixture(scope="module")
def browser():
    path = _chromium()
    if path is None:
        reason = "no chromium or chromium-browser on PATH; browser test skipped"
        print(reason)
        pytest.skip(reason)
    return path


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    folder = tmp_path_factory.mktemp("browser")
    result = simulated(folder, groups=["one", SCRIPT_GROUP], decades=(0, 3), n=15)
    run = write_outputs(result, folder / "out")
    return run.out_dir / "report.html"


class TestReportInBrowser:
    def test_images_load_and_nothing_is_fetched(self, browser, report, tmp_path):
        probe = tmp_path / "probe.html"
        text = report.read_text(encoding="utf-8")
        n_img = text.count("<img ")
        assert n_img == 4
        probe.write_text(text.replace("</body>", PROBE + "</body>"), encoding="utf-8")
        netlog = tmp_path / "net.json"
        done = _run(browser, tmp_path / "profile", "--dump-dom", "--virtual-time-budget=5000",
                    f"--log-net-log={netlog}", probe.as_uri())
        found = re.search(r'<div id="probe">([^<]*)</div>', done.stdout)
        assert found, f"no probe output; stderr tail: {done.stderr[-500:]}"
        states = found.group(1).split(",")
        assert len(states) == n_img
        for state in states:
            complete, width = state.split(":")
            assert complete == "true" and int(width) > 0
        # the alert in the group name was escaped: the page made no alert element
        assert "<script>alert(1)</script>" not in done.stdout
        assert _page_requests(netlog) == []

    def test_request_detector_sees_a_page_request(self, browser, tmp_path):
        # Control: a page with an external image must show up in the net log
        # (the host resolver maps every name to NOTFOUND, so nothing leaves).
        page = tmp_path / "control.html"
        page.write_text('<!DOCTYPE html><html><body><img src="http://control.invalid/x.png">'
                        "</body></html>", encoding="utf-8")
        netlog = tmp_path / "net.json"
        _run(browser, tmp_path / "profile", "--dump-dom", "--virtual-time-budget=3000",
             f"--log-net-log={netlog}", page.as_uri())
        assert _page_requests(netlog) == ["http://control.invalid/x.png"]

    def test_screenshot(self, browser, report, tmp_path):
        from PIL import Image
        shot = tmp_path / "report.png"
        done = _run(browser, tmp_path / "profile", f"--screenshot={shot}",
                    "--window-size=1200,3000", report.as_uri())
        assert shot.exists(), done.stderr[-500:]
        with Image.open(shot) as im:
            assert im.size == (1200, 3000)
            # not blank: the page drew text and figures
            assert len(im.convert("L").getcolors(maxcolors=1 << 16) or range(999)) > 50
        print(f"screenshot: {shot}")
