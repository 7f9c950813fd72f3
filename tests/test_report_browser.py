"""The report page in a real browser: Debian's chromium, headless, driven over the Chrome DevTools protocol.

Needs /usr/bin/chromium (apt-get install -y chromium) and the websocket-client Python package;
without them the test is skipped, or fails when CI=true. A full-page screenshot goes to
test-artifacts/report.png.
"""

from __future__ import annotations

import base64
import itertools
import json
import os
import shutil
import subprocess
import tempfile
import time
import urllib.request
from pathlib import Path

import pytest

from conftest import REPO, require_file

CHROMIUM = "/usr/bin/chromium"
FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
    "--remote-debugging-port=0",
    "--window-size=1200,900",
)
START_S = 30
LOAD_S = 30


def websocket_module():
    """The websocket-client package; skip outside CI when missing, fail in CI."""
    try:
        import websocket
    except ImportError:
        message = "the websocket-client Python package is missing (pip install websocket-client)"
        if os.environ.get("CI") == "true":
            pytest.fail(message)
        pytest.skip(message)
    return websocket


class DevTools:
    """A minimal Chrome DevTools protocol session: numbered commands, events kept until read."""

    def __init__(self, url: str, websocket) -> None:
        self._socket = websocket.create_connection(url, timeout=LOAD_S, suppress_origin=True)
        self._ids = itertools.count(1)
        self.events: list[dict] = []

    def call(self, method: str, **params: object) -> dict:
        number = next(self._ids)
        self._socket.send(json.dumps({"id": number, "method": method, "params": params}))
        while True:
            message = json.loads(self._socket.recv())
            if message.get("id") == number:
                if "error" in message:
                    raise AssertionError(f"{method}: {message['error']}")
                return message.get("result", {})
            self.events.append(message)

    def wait_for(self, method: str) -> dict:
        deadline = time.monotonic() + LOAD_S
        while time.monotonic() < deadline:
            for event in self.events:
                if event.get("method") == method:
                    return event
            self.events.append(json.loads(self._socket.recv()))
        raise AssertionError(f"no {method} within {LOAD_S} s")

    def close(self) -> None:
        self._socket.close()


def start_chromium(profile: Path) -> tuple[subprocess.Popen, int]:
    """Start chromium with a fresh profile; return the process and the port it chose (DevToolsActivePort)."""
    process = subprocess.Popen([CHROMIUM, *FLAGS, f"--user-data-dir={profile}", "about:blank"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    marker = profile / "DevToolsActivePort"
    deadline = time.monotonic() + START_S
    while time.monotonic() < deadline:
        if marker.exists() and marker.read_text().strip():
            return process, int(marker.read_text().split()[0])
        if process.poll() is not None:
            raise AssertionError(f"chromium exited with {process.returncode} before opening its DevTools port")
        time.sleep(0.1)
    process.kill()
    raise AssertionError(f"chromium did not open its DevTools port within {START_S} s")


def test_report_page_loads_without_errors_and_every_image_renders(demo_build: Path) -> None:
    """Chromium as the reference renderer: no console errors or exceptions, every <img> decoded (naturalWidth > 0)."""
    require_file(CHROMIUM, "chromium")
    websocket = websocket_module()
    page = (demo_build / "report" / "index.html").resolve()
    profile = Path(tempfile.mkdtemp(prefix="corpusmill-chromium-"))
    process, port = start_chromium(profile)
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=START_S) as response:
            target = next(t for t in json.load(response) if t["type"] == "page")
        tools = DevTools(target["webSocketDebuggerUrl"], websocket)
        try:
            for domain in ("Page", "Runtime", "Log"):
                tools.call(f"{domain}.enable")
            tools.call("Page.navigate", url=page.as_uri())
            tools.wait_for("Page.loadEventFired")
            images = tools.call(
                "Runtime.evaluate",
                returnByValue=True,
                expression="Array.from(document.images, i => [i.alt, i.complete, i.naturalWidth, i.naturalHeight])",
            )["result"]["value"]
            title = tools.call("Runtime.evaluate", expression="document.title", returnByValue=True)["result"]["value"]
            shot = tools.call("Page.captureScreenshot", format="png", captureBeyondViewport=True)["data"]
            errors = [
                e
                for e in tools.events
                if e.get("method") == "Runtime.exceptionThrown"
                or (e.get("method") == "Runtime.consoleAPICalled" and e["params"]["type"] in ("error", "assert"))
                or (e.get("method") == "Log.entryAdded" and e["params"]["entry"]["level"] == "error")
            ]
        finally:
            tools.close()
    finally:
        process.terminate()
        try:
            process.wait(timeout=10)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()
        shutil.rmtree(profile, ignore_errors=True)
    artifacts = REPO / "test-artifacts"
    artifacts.mkdir(exist_ok=True)
    (artifacts / "report.png").write_bytes(base64.b64decode(shot))
    assert title == "Vocabulary coverage report"
    assert errors == []
    assert len(images) == 4
    assert all(complete and width > 0 and height > 0 for _, complete, width, height in images), images
