"""Open a local HTML file in headless Chromium and inspect it through the DevTools protocol.

Chromium speaks the protocol over a pipe (``--remote-debugging-pipe``: it
reads commands on file descriptor 3 and writes answers on 4, each a JSON
message ended by a NUL byte), so no port is opened and no client library is
needed.  The browser runs with networking off (the DevTools offline switch,
on top of a proxy and resolver that lead nowhere), and every request the
page makes is recorded, so a test can prove the page loads nothing.
"""
from __future__ import annotations

import base64
import fcntl
import json
import os
import subprocess
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

CHROMIUM_FLAGS = (
    "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run", "--disable-background-networking",
    "--disable-component-update", "--disable-sync", "--disable-extensions", "--hide-scrollbars",
    "--mute-audio", "--proxy-server=127.0.0.1:9", "--host-resolver-rules=MAP * ~NOTFOUND",
)
IMAGE_CHECK = """JSON.stringify(Array.from(document.images).map(img => ({
    complete: img.complete, width: img.naturalWidth, height: img.naturalHeight, alt: img.alt})))"""


@dataclass
class PageVisit:
    """What loading the page showed: requests made, console and log messages, image states, a screenshot."""

    requests: list[str] = field(default_factory=list)
    failed_requests: list[str] = field(default_factory=list)
    messages: list[str] = field(default_factory=list)  # console calls and browser log entries
    images: list[dict] = field(default_factory=list)
    text_length: int = 0
    screenshot: bytes = b""  # PNG
    page_height: int = 0
    pdf: bytes = b""  # the page printed on A4, print style sheet applied


class _Pipe:
    def __init__(self, process, to_browser, from_browser):
        self.process, self.to_browser, self.from_browser = process, to_browser, from_browser
        self.buffer = b""
        self.next_id = 0
        self.events: list[dict] = []

    def send(self, method: str, params: dict | None = None, session: str | None = None) -> dict:
        self.next_id += 1
        message = {"id": self.next_id, "method": method, "params": params or {}}
        if session:
            message["sessionId"] = session
        os.write(self.to_browser, json.dumps(message).encode() + b"\0")
        while True:
            reply = self._read()
            if reply.get("id") == self.next_id:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            self.events.append(reply)

    def wait_for(self, method: str) -> dict:
        for k, event in enumerate(self.events):
            if event.get("method") == method:
                return self.events.pop(k)
        while True:
            event = self._read()
            if event.get("method") == method:
                return event
            self.events.append(event)

    def _read(self) -> dict:
        while b"\0" not in self.buffer:
            chunk = os.read(self.from_browser, 1 << 20)
            if not chunk:
                raise RuntimeError(f"chromium closed the pipe (exit status {self.process.poll()})")
            self.buffer += chunk
        message, self.buffer = self.buffer.split(b"\0", 1)
        return json.loads(message)


def visit(chromium: str, page: Path, *, width: int = 1366, height: int = 900, full_page: bool = True) -> PageVisit:
    """Load ``page`` offline at a desktop viewport and report what happened."""
    commands_read, commands_write = os.pipe()
    answers_read, answers_write = os.pipe()
    # The child's ends moved above 10 first (closed at exec), so placing them at 3 and 4 cannot overwrite
    # one another; 3 and 4 are then the only descriptors Chromium inherits beside stdio (Python opens
    # everything else non-inheritable), which is why close_fds can stay off.
    child_read, child_write = (fcntl.fcntl(fd, fcntl.F_DUPFD_CLOEXEC, 10) for fd in (commands_read, answers_write))
    for fd in (commands_read, answers_write):
        os.close(fd)
    with tempfile.TemporaryDirectory(prefix="affix-chromium-") as profile:
        process = subprocess.Popen(
            [chromium, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", "--remote-debugging-pipe", "about:blank"],
            close_fds=False, stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
            preexec_fn=lambda: (os.dup2(child_read, 3), os.dup2(child_write, 4)),
        )
        os.close(child_read)
        os.close(child_write)
        pipe = _Pipe(process, commands_write, answers_read)
        try:
            return _inspect(pipe, page, width, height, full_page)
        finally:
            try:
                pipe.send("Browser.close")
            except (RuntimeError, OSError):
                pass
            os.close(commands_write)
            os.close(answers_read)
            try:
                process.wait(timeout=20)
            except subprocess.TimeoutExpired:
                process.kill()
                process.wait()


def _inspect(pipe: _Pipe, page: Path, width: int, height: int, full_page: bool) -> PageVisit:
    target = pipe.send("Target.createTarget", {"url": "about:blank"})["targetId"]
    session = pipe.send("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
    for domain in ("Page", "Network", "Runtime", "Log"):
        pipe.send(f"{domain}.enable", session=session)
    pipe.send("Network.emulateNetworkConditions", {"offline": True, "latency": 0, "downloadThroughput": -1,
                                                   "uploadThroughput": -1}, session=session)
    pipe.send("Emulation.setDeviceMetricsOverride", {"width": width, "height": height, "deviceScaleFactor": 1,
                                                     "mobile": False}, session=session)
    pipe.send("Page.navigate", {"url": page.resolve().as_uri()}, session=session)
    pipe.wait_for("Page.loadEventFired")
    result = PageVisit()
    images = pipe.send("Runtime.evaluate", {"expression": IMAGE_CHECK, "awaitPromise": False,
                                            "returnByValue": True}, session=session)
    result.images = json.loads(images["result"]["value"])
    length = pipe.send("Runtime.evaluate", {"expression": "document.body.innerText.length", "returnByValue": True},
                       session=session)
    result.text_length = int(length["result"]["value"])
    metrics = pipe.send("Page.getLayoutMetrics", session=session)
    result.page_height = int(metrics["cssContentSize"]["height"])
    shot_height = result.page_height if full_page else height
    shot = pipe.send("Page.captureScreenshot", {
        "format": "png", "captureBeyondViewport": full_page,
        "clip": {"x": 0, "y": 0, "width": width, "height": shot_height, "scale": 1},
    }, session=session)
    result.screenshot = base64.b64decode(shot["data"])
    printed = pipe.send("Page.printToPDF", {"paperWidth": 8.27, "paperHeight": 11.69, "printBackground": True},
                        session=session)
    result.pdf = base64.b64decode(printed["data"])
    for event in pipe.events:
        method, params = event.get("method"), event.get("params", {})
        if method == "Network.requestWillBeSent":
            result.requests.append(params["request"]["url"])
        elif method == "Network.loadingFailed":
            result.failed_requests.append(params.get("errorText", ""))
        elif method == "Runtime.consoleAPICalled":
            result.messages.append(" ".join(str(a.get("value", "")) for a in params.get("args", [])))
        elif method == "Log.entryAdded":
            result.messages.append(f"{params['entry']['level']}: {params['entry']['text']}")
    return result
