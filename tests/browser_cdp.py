"""A minimal headless-Chromium driver for the report tests: the DevTools protocol over
``--remote-debugging-pipe`` (JSON messages separated by NUL bytes on file descriptors 3 and 4;
no network, no port, no extra package).

Used to measure where elements of the page lie (``getBoundingClientRect``) and to take a
screenshot of one element's box."""

import base64
import fcntl
import json
import os
import select
import shlex
import subprocess
import time

__all__ = ["Chromium"]


def _high(fd):
    """``fd`` duplicated to a descriptor number of at least 10 (the original closed)."""
    new = fcntl.fcntl(fd, fcntl.F_DUPFD, 10)
    os.close(fd)
    return new


class Chromium:
    """One headless Chromium with a private profile under ``home``; use as a context manager."""

    def __init__(self, exe, home, timeout_s=120):
        self.timeout_s = timeout_s
        for sub in ("home", "profile", "config", "cache"):
            (home / sub).mkdir(parents=True, exist_ok=True)
        env = dict(
            os.environ,
            HOME=str(home / "home"),
            XDG_CONFIG_HOME=str(home / "config"),
            XDG_CACHE_HOME=str(home / "cache"),
        )
        to_child, self._w = os.pipe()
        self._r, from_child = os.pipe()
        # moved above 4, so that the redirections below cannot overwrite one another
        to_child, from_child = (_high(fd) for fd in (to_child, from_child))
        args = [
            exe, "--headless", "--no-sandbox", "--disable-gpu", "--remote-debugging-pipe",
            f"--user-data-dir={home / 'profile'}", "--no-first-run", "--no-default-browser-check",
            "--disable-background-networking", "--disable-component-update", "--disable-sync",
            "--disable-extensions", "--disable-default-apps", "--hide-scrollbars", "about:blank",
        ]  # fmt: skip
        # the protocol's descriptors must be 3 (commands in) and 4 (replies out)
        line = f"exec {shlex.join(args)} 3<&{to_child} 4>&{from_child}"
        self.proc = subprocess.Popen(
            ["/bin/bash", "-c", line],  # bash: descriptors above 9 (dash: 0-9 only)
            pass_fds=(to_child, from_child),
            env=env,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        os.close(to_child)
        os.close(from_child)
        self._next, self._buf, self.events, self.session = 0, b"", [], None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        try:
            self.send("Browser.close", session=False)
        except (OSError, RuntimeError, TimeoutError):
            pass
        try:
            self.proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
        os.close(self._w)
        os.close(self._r)

    def _read_message(self, deadline):
        while b"\0" not in self._buf:
            left = deadline - time.monotonic()
            if left <= 0:
                raise TimeoutError(f"chromium did not answer within {self.timeout_s} s")
            ready, _, _ = select.select([self._r], [], [], left)
            if ready:
                chunk = os.read(self._r, 1 << 20)
                if not chunk:
                    raise RuntimeError("chromium closed the protocol pipe")
                self._buf += chunk
        msg, self._buf = self._buf.split(b"\0", 1)
        return json.loads(msg)

    def send(self, method, session=True, **params):
        """The result of one protocol command (RuntimeError on a protocol error)."""
        self._next += 1
        msg = {"id": self._next, "method": method, "params": params}
        if session and self.session:
            msg["sessionId"] = self.session
        os.write(self._w, json.dumps(msg).encode() + b"\0")
        deadline = time.monotonic() + self.timeout_s
        while True:
            reply = self._read_message(deadline)
            if reply.get("id") == self._next:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            self.events.append(reply)

    def wait_event(self, method):
        deadline = time.monotonic() + self.timeout_s
        while True:
            for i, ev in enumerate(self.events):
                if ev.get("method") == method:
                    return self.events.pop(i)
            self.events.append(self._read_message(deadline))

    def open(self, uri, width, height):
        """Load ``uri`` in a page of ``width`` x ``height`` CSS pixels and wait for its load."""
        targets = self.send("Target.getTargets", session=False)["targetInfos"]
        page = next(t for t in targets if t["type"] == "page")
        self.session = self.send(
            "Target.attachToTarget", session=False, targetId=page["targetId"], flatten=True
        )["sessionId"]
        self.send(
            "Emulation.setDeviceMetricsOverride",
            width=width,
            height=height,
            deviceScaleFactor=1,
            mobile=False,
        )
        # the page forbids scripts (CSP); the measurements below are the test's own
        self.send("Page.setBypassCSP", enabled=True)
        self.send("Page.enable")
        self.send("Page.navigate", url=uri)
        self.wait_event("Page.loadEventFired")

    def evaluate(self, expression):
        res = self.send("Runtime.evaluate", expression=expression, returnByValue=True)
        if "exceptionDetails" in res:
            raise RuntimeError(f"evaluate: {res['exceptionDetails']}")
        return res["result"].get("value")

    def boxes(self, selector):
        """{id: {x, y, width, height}} in page coordinates of the elements matching
        ``selector`` (scrolled to the top)."""
        js = (
            "window.scrollTo(0, 0); JSON.stringify(Object.fromEntries(Array.from("
            f"document.querySelectorAll({json.dumps(selector)})).map(e => {{"
            "const r = e.getBoundingClientRect();"
            "return [e.id, {x: r.x, y: r.y, width: r.width, height: r.height}];})))"
        )
        return json.loads(self.evaluate(js))

    def screenshot(self, box, path):
        """PNG of the page region ``box`` (page coordinates), written to ``path``."""
        clip = {k: float(box[k]) for k in ("x", "y", "width", "height")}
        data = self.send(
            "Page.captureScreenshot",
            format="png",
            clip={**clip, "scale": 1},
            captureBeyondViewport=True,
        )["data"]
        path.write_bytes(base64.b64decode(data))
        return path
