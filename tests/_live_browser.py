"""A headless chromium session on a live page (DevTools protocol): clicks, script, downloads.

Builds on :mod:`tests._browser` (same chromium, same flags). Used by the planning page's
browser test and by ``scripts/screenshot_serve.py``. Clicks are real mouse events
(``Input.dispatchMouseEvent``) at page coordinates.
"""

from __future__ import annotations

import base64
import json
import shutil
import subprocess
import tempfile
import threading
import time
import urllib.request
from pathlib import Path
from typing import Any

from ._browser import _CDP, CHROMIUM, FLAGS, _free_port


class Session:
    """One chromium page; collects console errors, dialogs and every request's address."""

    def __init__(self, *, downloads: Path, size: str = "1400,950") -> None:
        self.port = _free_port()
        self.profile = tempfile.mkdtemp(prefix="rr-chromium-")
        self.downloads = downloads
        self.proc = subprocess.Popen(
            [
                CHROMIUM,
                *FLAGS,
                f"--user-data-dir={self.profile}",
                f"--remote-debugging-port={self.port}",
                f"--window-size={size}",
                "about:blank",
            ],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        for _ in range(150):
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{self.port}/json") as r:
                    pages = [t for t in json.loads(r.read()) if t.get("type") == "page"]
                if pages:
                    break
            except OSError:
                pass
            time.sleep(0.1)
        else:
            self.close()
            raise RuntimeError("chromium did not start")
        with urllib.request.urlopen(f"http://127.0.0.1:{self.port}/json/version") as r:
            browser_ws = json.loads(r.read())["webSocketDebuggerUrl"]
        self.browser = _CDP(browser_ws)
        self.browser.call(
            "Browser.setDownloadBehavior",
            behavior="allow",
            downloadPath=str(downloads),
            eventsEnabled=True,
        )
        self.cdp = _CDP(pages[0]["webSocketDebuggerUrl"])
        for domain in ("Runtime", "Log", "Network", "Page"):
            self.cdp.call(f"{domain}.enable")

    def close(self) -> None:
        """Stop chromium and remove its profile."""
        self.proc.terminate()
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:  # pragma: no cover
            self.proc.kill()
        shutil.rmtree(self.profile, ignore_errors=True)

    def __enter__(self) -> Session:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # ------------------------------------------------------------------ page

    def goto(self, url: str) -> None:
        """Open ``url``."""
        self.cdp.call("Page.navigate", url=url)

    def js(self, expression: str) -> Any:
        """Evaluate ``expression`` in the page (promises awaited); return its value."""
        res = self.cdp.call(
            "Runtime.evaluate", expression=expression, returnByValue=True, awaitPromise=True
        )
        if "exceptionDetails" in res:
            raise RuntimeError(
                f"page script failed: {res['exceptionDetails'].get('text')}: "
                f"{res.get('result', {}).get('description')}"
            )
        return res.get("result", {}).get("value")

    def wait(self, expression: str, timeout: float = 30.0) -> Any:
        """Wait until ``expression`` is truthy in the page; return its value."""
        end = time.time() + timeout
        while time.time() < end:
            value = self.js(expression)
            if value:
                return value
            self.cdp.drain(0.2)
        raise TimeoutError(f"page never satisfied: {expression}")

    def click_xy(self, x: float, y: float) -> None:
        """Press and release the left mouse button at page pixel (x, y)."""
        for kind in ("mouseMoved", "mousePressed", "mouseReleased"):
            self.cdp.call(
                "Input.dispatchMouseEvent", type=kind, x=x, y=y, button="left", clickCount=1
            )
        self.cdp.drain(0.15)

    def click(self, selector: str) -> None:
        """Click the middle of the element ``selector`` (scrolled into view first)."""
        box = self.js(f"""(() => {{ const e = document.querySelector({json.dumps(selector)});
            if (!e) return null; e.scrollIntoView({{block: 'center'}});
            const r = e.getBoundingClientRect();
            return [r.left + r.width / 2, r.top + r.height / 2]; }})()""")
        if box is None:
            raise LookupError(f"no element {selector}")
        self.click_xy(*box)

    def click_map(self, lat: float, lon: float) -> None:
        """Click the map at a latitude and longitude."""
        x, y = self.js(f"""(() => {{ const p = map.latLngToContainerPoint([{lat}, {lon}]);
            const r = map.getContainer().getBoundingClientRect();
            return [r.left + p.x, r.top + p.y]; }})()""")
        self.click_xy(x, y)

    def text(self, selector: str) -> str:
        """Return the text of ``selector``."""
        return self.js(f"document.querySelector({json.dumps(selector)}).textContent")

    def set_files(self, selector: str, files: list[Path]) -> None:
        """Choose ``files`` in the file input ``selector`` (as a person picking them would)."""
        root = self.cdp.call("DOM.getDocument")["root"]["nodeId"]
        node = self.cdp.call("DOM.querySelector", nodeId=root, selector=selector)["nodeId"]
        self.cdp.call("DOM.setFileInputFiles", nodeId=node, files=[str(f) for f in files])
        self.cdp.drain(0.3)

    def screenshot(self, path: Path) -> None:
        """Save a PNG of the window."""
        shot = self.cdp.call("Page.captureScreenshot", format="png")
        path.write_bytes(base64.b64decode(shot["data"]))

    def wait_download(self, suffix: str, timeout: float = 20.0) -> Path:
        """Wait for a finished download ending in ``suffix``; return it."""
        end = time.time() + timeout
        while time.time() < end:
            done = [
                p
                for p in self.downloads.iterdir()
                if p.name.endswith(suffix) and not p.name.endswith(".crdownload")
            ]
            if done:
                return done[0]
            self.cdp.drain(0.2)
        raise TimeoutError(f"no download ending in {suffix}")

    # ------------------------------------------------------------------ what was seen

    def seen(self) -> dict[str, list[str]]:
        """Return console errors, dialogs opened and request addresses seen so far."""
        self.cdp.drain(0.3)
        errors, dialogs, requests = [], [], []
        for ev in self.cdp.events:
            m, p = ev.get("method"), ev.get("params", {})
            if m == "Runtime.exceptionThrown":
                d = p["exceptionDetails"]
                errors.append(
                    d.get("text", "") + " " + str(d.get("exception", {}).get("description", ""))
                )
            elif m == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
                errors.append(
                    " ".join(
                        str(a.get("value", a.get("description", ""))) for a in p.get("args", [])
                    )
                )
            elif m == "Log.entryAdded" and p["entry"].get("level") == "error":
                errors.append(p["entry"].get("text", "") + " " + p["entry"].get("url", ""))
            elif m == "Page.javascriptDialogOpening":
                dialogs.append(p.get("message", ""))
                self.cdp.call("Page.handleJavaScriptDialog", accept=True)
            elif m == "Network.requestWillBeSent":
                requests.append(p["request"]["url"])
        return {"errors": errors, "dialogs": dialogs, "requests": requests}


class LiveServer:
    """Serve an ASGI app with uvicorn on a free loopback port in a background thread."""

    def __init__(self, app: Any) -> None:
        import uvicorn

        self.port = _free_port()
        self.server = uvicorn.Server(
            uvicorn.Config(app, host="127.0.0.1", port=self.port, log_level="warning")
        )
        self.thread = threading.Thread(target=self.server.run, daemon=True)

    @property
    def url(self) -> str:
        """Return the page's address."""
        return f"http://127.0.0.1:{self.port}/"

    def __enter__(self) -> LiveServer:
        self.thread.start()
        for _ in range(200):
            if self.server.started:
                return self
            time.sleep(0.05)
        raise RuntimeError("the server did not start")

    def __exit__(self, *exc: object) -> None:
        self.server.should_exit = True
        self.thread.join(timeout=10)


def walk_through(
    s: Session,
    url: str,
    *,
    points: list[tuple[float, float]],
    corners: list[tuple[float, float]],
    depart: tuple[str, str],
    plan_files: list[Path] | None = None,
    plan_date: str = "",
    shots: Path | None = None,
) -> dict[str, Any]:
    """Use every pane of the planning page as a person would; return what the page showed.

    ``points`` and ``corners`` are (lat, lon); ``depart`` is (date, time). With ``shots``,
    a screenshot of each pane is saved there (route.png, week.png, area.png, compare.png).
    """

    def shot(name: str) -> None:
        if shots is not None:
            s.cdp.drain(0.6)
            s.screenshot(shots / f"{name}.png")

    out: dict[str, Any] = {}
    s.goto(url)
    s.wait("typeof S !== 'undefined' && S.info !== null && netLayer.getLayers().length > 0")
    s.wait("S.networkShown > 50")
    for lat, lon in points:
        s.click_map(lat, lon)
    out["placed"] = s.js("S.points.length")
    s.js(
        f"$('depart-date').value = {json.dumps(depart[0])}; "
        f"$('depart-time').value = {json.dumps(depart[1])}; true"
    )
    s.click("#btn-score")
    s.wait("!$('route-result').hidden && $('total-risk').textContent !== ''")
    s.wait("$('busy').hidden")
    out["score"] = s.text("#total-risk")
    out["waypoints"] = s.js("S.points")
    s.js("$('max-extra').value = '50'; true")
    s.click("#btn-alts")
    s.wait("$('alt-list').children.length > 1 && $('busy').hidden")
    s.click("#alt-list tr:nth-child(2) input[name=pick]")
    s.wait("S.picked && S.picked.label !== 'plan'")
    out["picked"] = s.text("#total-risk")
    out["picked_label"] = s.js("S.picked.label")
    s.wait("$('busy').hidden")
    shot("route")
    s.click("#btn-export-geojson")
    out["export"] = s.wait_download(".geojson")
    s.click("#tabs button[data-pane=week]")
    s.wait("document.querySelectorAll('#week-chart rect').length === 168")
    out["week_best"] = s.text("#week-best")
    shot("week")
    s.click("#tabs button[data-pane=area]")
    s.click("#btn-draw")
    for lat, lon in corners:
        s.click_map(lat, lon)
    s.click("#btn-finish")
    s.wait("!$('area-result').hidden && $('area-km').textContent !== '' && $('busy').hidden")
    out["area_km"] = s.text("#area-km")
    out["area_ring"] = s.js("S.area")
    shot("area")
    s.click("#tabs button[data-pane=plan]")
    if plan_files:
        s.set_files("#plan-files", plan_files)
        s.wait(f"$('plan-files-list').textContent.split(', ').length === {len(plan_files)}")
        s.js(f"$('plan-date').value = {json.dumps(plan_date)}; true")
        s.click("#btn-plan")
        s.wait("!$('plan-result').hidden && $('busy').hidden", timeout=120)
        out["plan_summary"] = s.text("#plan-summary")
        out["plan_rows"] = s.js("$('plan-rows').children.length")
    shot("plan")
    s.click("#tabs button[data-pane=compare]")
    out["compare_rows"] = s.js("$('compare-rows').children.length")
    s.click("#btn-compare-csv")
    out["csv"] = s.wait_download(".csv")
    shot("compare")
    out["body_text"] = s.js("document.body.textContent")
    out["tooltips"] = s.js(
        "(() => { const t = []; netLayer.eachLayer(g => g.eachLayer(l => "
        "{ const x = l.getTooltip(); if (x) { let c = x.getContent(); "
        "if (typeof c === 'function') c = c(l); t.push(c.textContent); } "
        "})); return t; })()"
    )
    out["img_x"] = s.js("document.querySelectorAll('img[src=\"x\"]').length")
    out["caution"] = s.text("#caution")
    return out
