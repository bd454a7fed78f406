"""Headless Debian chromium for page checks: console errors, network requests, DOM, screenshot.

Uses the DevTools protocol over a pipe-free remote-debugging port on loopback only.
"""

from __future__ import annotations

import json
import os
import shutil
import socket
import subprocess
import tempfile
import time
import urllib.request
from pathlib import Path

import pytest

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--no-first-run",
    "--disable-component-update",
    "--disable-sync",
    "--disable-quic",
    "--remote-allow-origins=*",
]

# In CI (CI set) a missing chromium fails the browser tests instead of skipping them.
needs_chromium = pytest.mark.skipif(
    CHROMIUM is None and not os.environ.get("CI"), reason="Debian's chromium is not installed"
)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class _CDP:
    def __init__(self, ws_url: str) -> None:
        import websocket  # type: ignore[import-not-found]

        self.ws = websocket.create_connection(ws_url, timeout=30)
        self.n = 0
        self.events: list[dict] = []

    def call(self, method: str, **params):
        self.n += 1
        self.ws.send(json.dumps({"id": self.n, "method": method, "params": params}))
        while True:
            msg = json.loads(self.ws.recv())
            if msg.get("id") == self.n:
                return msg.get("result", {})
            self.events.append(msg)

    def drain(self, seconds: float) -> None:
        end = time.time() + seconds
        self.ws.settimeout(0.2)
        while time.time() < end:
            try:
                self.events.append(json.loads(self.ws.recv()))
            except Exception:  # noqa: BLE001 - timeout
                pass
        self.ws.settimeout(30)


def inspect_page(page: Path, *, screenshot: Path | None = None, script: str = "1") -> dict:
    """Open ``page`` (a file) headless; return console errors, requests and ``script``'s value."""
    port = _free_port()
    profile = tempfile.mkdtemp(prefix="rr-chromium-")
    proc = subprocess.Popen(
        [
            CHROMIUM,
            *FLAGS,
            f"--user-data-dir={profile}",
            f"--remote-debugging-port={port}",
            "--window-size=1280,900",
            "about:blank",
        ],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    try:
        for _ in range(100):
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/json") as r:
                    targets = json.loads(r.read())
                pages = [t for t in targets if t.get("type") == "page"]
                if pages:
                    break
            except OSError:
                pass
            time.sleep(0.1)
        else:
            raise RuntimeError("chromium did not start")
        cdp = _CDP(pages[0]["webSocketDebuggerUrl"])
        cdp.call("Runtime.enable")
        cdp.call("Log.enable")
        cdp.call("Network.enable")
        cdp.call("Page.enable")
        cdp.call("Page.navigate", url=page.resolve().as_uri())
        cdp.drain(3.0)
        value = cdp.call("Runtime.evaluate", expression=script, returnByValue=True)
        # a script that is not ready yet returns null: on a loaded machine a heavy page
        # (a report with a map inside) may need longer than the first wait
        for _ in range(24):
            if value.get("result", {}).get("value") is not None:
                break
            cdp.drain(0.5)
            value = cdp.call("Runtime.evaluate", expression=script, returnByValue=True)
        if screenshot is not None:
            import base64

            shot = cdp.call("Page.captureScreenshot", format="png")
            screenshot.write_bytes(base64.b64decode(shot["data"]))
        cdp.drain(0.5)
    finally:
        proc.terminate()
        proc.wait(timeout=10)
        shutil.rmtree(profile, ignore_errors=True)
    errors = []
    requests = []
    for ev in cdp.events:
        m = ev.get("method")
        p = ev.get("params", {})
        if m == "Runtime.exceptionThrown":
            errors.append(p["exceptionDetails"].get("text", "exception"))
        elif m == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
            errors.append(
                " ".join(str(a.get("value", a.get("description", ""))) for a in p.get("args", []))
            )
        elif m == "Log.entryAdded" and p["entry"].get("level") == "error":
            errors.append(p["entry"].get("text", ""))
        elif m == "Network.requestWillBeSent":
            url = p["request"]["url"]
            if not url.startswith(("file:", "data:", "about:")):
                requests.append(url)
    return {"errors": errors, "requests": requests, "value": value.get("result", {}).get("value")}
