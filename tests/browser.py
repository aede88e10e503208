"""A minimal headless-Chromium driver over the DevTools protocol, for report tests.

Opens a local HTML file, waits for it to load, runs a JavaScript check, records console
errors and uncaught exceptions, and takes a screenshot. Uses Debian's ``chromium`` and the
``websocket-client`` package; no browser download.
"""

from __future__ import annotations

import base64
import contextlib
import json
import shutil
import subprocess
import tempfile
import time
import urllib.request
from pathlib import Path

CHROMIUM_FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--remote-debugging-port=0",
    "--window-size=1280,2000",
]


def find_chromium() -> str | None:
    """Path of a Chromium executable, or None."""
    for name in ("chromium", "chromium-browser", "google-chrome"):
        p = shutil.which(name)
        if p:
            return p
    return None


class _Session:
    def __init__(self, ws_url: str):
        import websocket

        self.ws = websocket.create_connection(ws_url, timeout=30, suppress_origin=True)
        self.next_id = 0
        self.events: list[dict] = []

    def call(self, method: str, **params):
        self.next_id += 1
        my = self.next_id
        self.ws.send(json.dumps({"id": my, "method": method, "params": params}))
        while True:
            msg = json.loads(self.ws.recv())
            if msg.get("id") == my:
                if "error" in msg:
                    raise RuntimeError(f"{method}: {msg['error']}")
                return msg.get("result", {})
            self.events.append(msg)

    def wait_event(self, name: str, timeout: float = 30.0) -> dict:
        end = time.time() + timeout
        for e in self.events:
            if e.get("method") == name:
                return e
        while time.time() < end:
            msg = json.loads(self.ws.recv())
            self.events.append(msg)
            if msg.get("method") == name:
                return msg
        raise TimeoutError(name)


class BrowserSession(_Session):
    """A running headless Chromium page: open files, evaluate JavaScript, print to PDF."""

    def open(self, html_file: Path) -> None:
        """Navigate to a local file and wait for its load event."""
        self.events = [e for e in self.events if e.get("method") != "Page.loadEventFired"]
        self.call("Page.navigate", url=Path(html_file).resolve().as_uri())
        self.wait_event("Page.loadEventFired", timeout=60)

    def evaluate(self, expression: str):
        """The JSON value of a JavaScript expression (promises are awaited)."""
        res = self.call(
            "Runtime.evaluate", expression=expression, returnByValue=True, awaitPromise=True
        )
        return res["result"].get("value")

    def print_pdf(self) -> bytes:
        """The page printed on A4 portrait with the browser's default margins."""
        out = self.call("Page.printToPDF", paperWidth=8.27, paperHeight=11.69, printBackground=True)
        return base64.b64decode(out["data"])

    def errors(self) -> list[str]:
        """Console errors and uncaught exceptions seen so far."""
        errors = []
        for e in self.events:
            m, p = e.get("method"), e.get("params", {})
            if m == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
                errors.append(str(p.get("args")))
            elif m == "Runtime.exceptionThrown":
                errors.append(str(p.get("exceptionDetails", {}).get("text")))
            elif m == "Log.entryAdded" and p.get("entry", {}).get("level") == "error":
                errors.append(str(p["entry"].get("text")))
        return errors


@contextlib.contextmanager
def browser_session():
    """Start headless Chromium (1280 px wide window) and yield a :class:`BrowserSession`."""
    exe = find_chromium()
    if exe is None:
        raise FileNotFoundError("chromium")
    profile = tempfile.mkdtemp(prefix="ecoscan-chromium-")
    proc = subprocess.Popen(
        [exe, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", "about:blank"],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    try:
        port_file = Path(profile) / "DevToolsActivePort"
        end = time.time() + 30
        while not port_file.exists() or not port_file.read_text().strip():
            if time.time() > end or proc.poll() is not None:
                raise RuntimeError("chromium did not start")
            time.sleep(0.1)
        port = int(port_file.read_text().split()[0])
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=10) as r:
            pages = [t for t in json.load(r) if t.get("type") == "page"]
        s = BrowserSession(pages[0]["webSocketDebuggerUrl"])
        s.call("Runtime.enable")
        s.call("Log.enable")
        s.call("Page.enable")
        try:
            yield s
        finally:
            s.ws.close()
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
        shutil.rmtree(profile, ignore_errors=True)


def inspect_page(html_file: Path, screenshot: Path, check_js: str) -> dict:
    """Load a page headless; return the check's value, console errors and exceptions.

    Parameters
    ----------
    html_file : Path
        Local HTML file to open.
    screenshot : Path
        Where to save a full-page PNG screenshot.
    check_js : str
        A JavaScript expression evaluated after load; its JSON value is returned.
    """
    with browser_session() as s:
        s.open(html_file)
        value = s.evaluate(check_js)
        shot = s.call("Page.captureScreenshot", format="png", captureBeyondViewport=True)
        screenshot.write_bytes(base64.b64decode(shot["data"]))
        return {"value": value, "errors": s.errors()}


IMAGES_OK_JS = """
(async () => {
  const imgs = Array.from(document.images);
  const res = await Promise.all(imgs.map(async (im) => {
    try { await im.decode(); return im.naturalWidth > 0 && im.naturalHeight > 0; }
    catch (e) { return false; }
  }));
  return {count: imgs.length, decoded: res.filter(Boolean).length,
          title: document.title, sections: document.querySelectorAll('h2').length};
})()
"""
