"""Load a page in headless Chromium and report what a reader would meet: console errors,
failed loads, images that did not load, and a screenshot.

Talks to the browser over the Chrome DevTools Protocol (an open, documented protocol) with
the `websocket-client` package; nothing is injected into the page.
"""
from __future__ import annotations

import base64
import json
import os
import signal
import shutil
import subprocess
import tempfile
import time
import urllib.request
from pathlib import Path

CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                  "--no-first-run", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync", "--remote-allow-origins=*",
                  "--remote-debugging-port=0", "--hide-scrollbars"]


def find_chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome", "chrome"):
        found = shutil.which(name)
        if found:
            return found
    return None


class _Session:
    def __init__(self, ws):
        self.ws = ws
        self.next_id = 0
        self.events: list[dict] = []

    def call(self, method: str, params: dict | None = None, timeout: float = 30.0) -> dict:
        self.next_id += 1
        wanted = self.next_id
        self.ws.send(json.dumps({"id": wanted, "method": method, "params": params or {}}))
        deadline = time.time() + timeout
        while time.time() < deadline:
            message = json.loads(self.ws.recv())
            if message.get("id") == wanted:
                if "error" in message:
                    raise RuntimeError(f"{method}: {message['error']}")
                return message.get("result", {})
            self.events.append(message)
        raise TimeoutError(method)

    def wait_for(self, method: str, timeout: float = 30.0) -> dict:
        for event in self.events:
            if event.get("method") == method:
                return event
        deadline = time.time() + timeout
        while time.time() < deadline:
            message = json.loads(self.ws.recv())
            self.events.append(message)
            if message.get("method") == method:
                return message
        raise TimeoutError(method)


def _stop_group(proc: subprocess.Popen) -> None:
    """Stop Chromium and every process it started (they share its new session)."""
    try:
        os.killpg(proc.pid, signal.SIGTERM)
    except ProcessLookupError:
        pass
    try:
        proc.wait(timeout=10)
    except subprocess.TimeoutExpired:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.wait()
    deadline = time.time() + 5
    while time.time() < deadline:  # the helpers exit soon after the main process
        try:
            os.killpg(proc.pid, 0)
        except ProcessLookupError:
            return
        time.sleep(0.05)


#: Makes every lazy image load now and waits until each has loaded or failed.
_LOAD_EVERY_IMAGE = """Promise.all(Array.from(document.images).map(i => {
  i.loading = "eager";
  return i.complete ? null : new Promise(done => { i.onload = i.onerror = done; });
}))"""


def _mouse(s: "_Session", action: str, selector: str) -> None:
    """Move the mouse over the first element matching `selector` (scrolled into view), and
    click it when `action` is ``click``: real input events, as a reader's."""
    where = s.call("Runtime.evaluate", {
        "expression": f"(() => {{ const e = document.querySelector({json.dumps(selector)});"
                      " e.scrollIntoView({block: 'center'});"
                      " const r = e.getBoundingClientRect();"
                      " return [r.x + r.width / 2, r.y + r.height / 2]; })()",
        "returnByValue": True})["result"]["value"]
    x, y = where
    s.call("Input.dispatchMouseEvent", {"type": "mouseMoved", "x": x, "y": y})
    if action == "click":
        for kind in ("mousePressed", "mouseReleased"):
            s.call("Input.dispatchMouseEvent", {"type": kind, "x": x, "y": y,
                                                "button": "left", "clickCount": 1})


def load_page(url: str, *, width: int = 1280, height: int = 2000, timeout: float = 60.0,
              steps=(), load_every_image: bool = False) -> dict:
    """Open `url` in a fresh headless Chromium profile.

    Parameters
    ----------
    steps : sequence of (action, selector, expression)
        After loading, in order: ``hover`` or ``click`` the first element matching the CSS
        `selector` with the mouse, then evaluate the JavaScript `expression` in the page.
    load_every_image : bool
        Make lazy-loaded images load (as scrolling to each would) and wait for all of them
        before looking at them.

    Returns
    -------
    dict
        ``errors`` (console errors, uncaught exceptions, error log entries and failed network
        loads, as text), ``images`` (for each <img>: complete, naturalWidth, naturalHeight,
        the start of its src), ``screenshot`` (PNG bytes of the viewport) and ``steps`` (the
        value of each step's expression).
    """
    import websocket  # websocket-client, a test extra

    chromium = find_chromium()
    if chromium is None:
        raise FileNotFoundError("no Chromium found")
    # Chromium's helper processes may still write to the profile as the main one exits, so
    # they are stopped as one process group and leftovers do not fail the cleanup
    with tempfile.TemporaryDirectory(prefix="spikemeasure-browser-",
                                     ignore_cleanup_errors=True) as profile:
        proc = subprocess.Popen([chromium, *CHROMIUM_FLAGS, f"--user-data-dir={profile}",
                                 f"--window-size={width},{height}", "about:blank"],
                                stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                                start_new_session=True)
        try:
            port_file = Path(profile) / "DevToolsActivePort"
            deadline = time.time() + timeout
            while not (port_file.exists() and port_file.read_text().strip()):
                if proc.poll() is not None or time.time() > deadline:
                    raise RuntimeError("Chromium did not start its DevTools endpoint")
                time.sleep(0.1)
            port = int(port_file.read_text().split()[0])
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=10) as r:
                pages = [t for t in json.load(r) if t.get("type") == "page"]
            ws = websocket.create_connection(pages[0]["webSocketDebuggerUrl"], timeout=timeout,
                                             suppress_origin=True)
            try:
                s = _Session(ws)
                for domain in ("Page", "Runtime", "Log", "Network"):
                    s.call(f"{domain}.enable")
                s.call("Page.navigate", {"url": url})
                s.wait_for("Page.loadEventFired", timeout)
                if load_every_image:
                    s.call("Runtime.evaluate", {"expression": _LOAD_EVERY_IMAGE,
                                                "awaitPromise": True}, timeout)
                values = []
                for action, selector, expression in steps:
                    _mouse(s, action, selector)
                    values.append(s.call("Runtime.evaluate", {
                        "expression": expression, "returnByValue": True})["result"].get("value"))
                images = s.call("Runtime.evaluate", {
                    "expression": "Array.from(document.images).map(i => ({complete: i.complete,"
                                  " width: i.naturalWidth, height: i.naturalHeight,"
                                  " src: i.src.slice(0, 40)}))",
                    "returnByValue": True})["result"]["value"]
                shot = s.call("Page.captureScreenshot", {"format": "png"})["data"]
                errors = []
                for e in s.events:
                    method, p = e.get("method"), e.get("params", {})
                    if method == "Runtime.consoleAPICalled" and p.get("type") in ("error",
                                                                                  "assert"):
                        errors.append("console: " + " ".join(
                            str(a.get("value", a.get("description", ""))) for a in p["args"]))
                    elif method == "Runtime.exceptionThrown":
                        errors.append("exception: " + str(p.get("exceptionDetails", {})))
                    elif method == "Log.entryAdded" and p["entry"].get("level") == "error":
                        errors.append("log: " + p["entry"].get("text", ""))
                    elif method == "Network.loadingFailed":
                        errors.append("load failed: " + p.get("errorText", ""))
            finally:
                ws.close()
        finally:
            _stop_group(proc)
    return {"errors": errors, "images": images, "screenshot": base64.b64decode(shot),
            "steps": values}
