"""Headless Chromium driven through the DevTools protocol over a pipe (no extra package).

Chromium started with ``--remote-debugging-pipe`` reads protocol messages from its file
descriptor 3 and writes replies to descriptor 4, each a JSON text ended by a NUL byte (Chrome
DevTools Protocol, "remote-debugging-pipe"). Tests open a page, run JavaScript in it and read the
values back; :func:`find_chromium` is None where no Chromium is installed (the tests skip then;
CI installs Debian's ``chromium``).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import tempfile
import time

__all__ = ["find_chromium", "Browser"]

FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run", "--remote-debugging-pipe",
         "--allow-file-access-from-files"]


def find_chromium() -> str | None:
    """The Chromium binary: Debian's ``/usr/bin/chromium`` is a shell wrapper (it sources
    ``/etc/chromium.d``), so the program it starts is taken when it is there."""
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            real = os.path.join("/usr/lib", name, name)
            return real if os.access(real, os.X_OK) else path
    return None


class Browser:
    """A headless Chromium with a fresh profile; ``page(url)`` opens a tab, ``js(expr)`` evaluates
    in it (awaiting promises) and returns the value."""

    def __init__(self, width: int = 1400, height: int = 1000):
        self.profile = tempfile.mkdtemp(prefix="tw-chromium-")
        to_chrome_r, self._to_chrome = os.pipe()
        self._from_chrome, from_chrome_w = os.pipe()

        def fds():  # fresh copies first: dup2 of a descriptor onto itself would keep it close-on-exec
            a, b = os.dup(to_chrome_r), os.dup(from_chrome_w)
            os.dup2(a, 3)
            os.dup2(b, 4)

        self.proc = subprocess.Popen([find_chromium(), *FLAGS, f"--user-data-dir={self.profile}",
                                      f"--window-size={width},{height}", "about:blank"],
                                     stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                                     preexec_fn=fds, close_fds=False)
        os.close(to_chrome_r)
        os.close(from_chrome_w)
        self._next = 0
        self._buffer = b""
        self.session = None

    def call(self, method: str, params: dict | None = None, *, session: str | None = None, timeout: float = 60.0):
        self._next += 1
        msg = {"id": self._next, "method": method, "params": params or {}}
        if session:
            msg["sessionId"] = session
        os.write(self._to_chrome, json.dumps(msg).encode() + b"\0")
        deadline = time.monotonic() + timeout
        while True:
            while b"\0" in self._buffer:
                raw, self._buffer = self._buffer.split(b"\0", 1)
                reply = json.loads(raw)
                if reply.get("id") == self._next:
                    if "error" in reply:
                        raise RuntimeError(f"{method}: {reply['error']}")
                    return reply.get("result", {})
            if time.monotonic() > deadline:
                raise TimeoutError(f"no reply to {method} within {timeout} s")
            chunk = os.read(self._from_chrome, 1 << 20)
            if not chunk:
                raise RuntimeError("chromium closed its pipe")
            self._buffer += chunk

    def page(self, url: str) -> None:
        target = self.call("Target.createTarget", {"url": "about:blank"})["targetId"]
        self.session = self.call("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
        self.call("Page.enable", session=self.session)
        self.call("Emulation.setDeviceMetricsOverride", {"width": 1400, "height": 1000, "deviceScaleFactor": 1,
                                                         "mobile": False}, session=self.session)
        self.call("Page.navigate", {"url": url}, session=self.session)

    def js(self, expression: str, timeout: float = 60.0):
        result = self.call("Runtime.evaluate", {"expression": expression, "returnByValue": True,
                                                "awaitPromise": True}, session=self.session, timeout=timeout)
        if "exceptionDetails" in result:
            raise RuntimeError(f"{expression[:60]}...: {result['exceptionDetails']}")
        return result["result"].get("value")

    def wait_for(self, condition: str, timeout: float = 60.0):
        """Wait until the JavaScript ``condition`` is true in the page (polled)."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            try:
                if self.js(f"Boolean({condition})"):
                    return
            except RuntimeError:
                pass  # the page is still loading
            time.sleep(0.05)
        raise TimeoutError(f"{condition} not true within {timeout} s")

    def screenshot(self, path) -> None:
        import base64

        data = self.call("Page.captureScreenshot", {"format": "png"}, session=self.session)["data"]
        with open(path, "wb") as fh:
            fh.write(base64.b64decode(data))

    def close(self) -> None:
        try:
            self.call("Browser.close", timeout=10)
        except Exception:  # noqa: BLE001 - it may be gone already
            pass
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
        for fd in (self._to_chrome, self._from_chrome):
            try:
                os.close(fd)
            except OSError:
                pass
        shutil.rmtree(self.profile, ignore_errors=True)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False
