"""A headless Chromium driven over the DevTools protocol, for the report's browser test.

The protocol runs over a pipe (``--remote-debugging-pipe``: commands on the
child's file descriptor 3, replies and events on 4, each message a JSON text
ended by a NUL byte), so no port is opened and nothing beyond the standard
library is needed.
"""

import base64
import fcntl
import json
import os
import select
import shutil
import subprocess
import tempfile
import time

# Running as root in a container needs --no-sandbox; the rest keep Chromium
# from reaching for the network (updates, sync, metrics) in a closed sandbox.
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--no-first-run", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--disable-quic", "--disable-extensions",
         "--disable-default-apps", "--mute-audio", "--remote-debugging-pipe")


def find_chromium():
    """Path of Debian's Chromium (or a Chrome) on PATH, or None."""
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


def _high(fd):
    """``fd`` moved to a number of at least 10, closed on exec."""
    moved = fcntl.fcntl(fd, fcntl.F_DUPFD_CLOEXEC, 10)
    os.close(fd)
    return moved


class Browser:
    """One Chromium process with one page; every event is kept in ``events``."""

    def __init__(self, executable, *, timeout=60.0):
        self.timeout = timeout
        self.events = []
        self._next_id = 0
        self._buffer = b""
        self._profile = tempfile.mkdtemp(prefix="augplan-chromium-")
        # Parent ends and child ends all above 9 and closed on exec; the child's
        # ends are copied onto 3 and 4 (inheritable) just before Chromium starts.
        to_child, self._commands = (_high(fd) for fd in os.pipe())
        self._replies, from_child = (_high(fd) for fd in os.pipe())

        def _pipes_to_3_and_4():
            os.dup2(to_child, 3)
            os.dup2(from_child, 4)

        self._process = subprocess.Popen(
            [executable, *FLAGS, f"--user-data-dir={self._profile}", "about:blank"],
            stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
            preexec_fn=_pipes_to_3_and_4, close_fds=False)
        os.close(to_child)
        os.close(from_child)
        target = self.send("Target.createTarget", url="about:blank")["targetId"]
        self.session = self.send("Target.attachToTarget", targetId=target, flatten=True)["sessionId"]

    def close(self):
        try:
            self.send("Browser.close")
        except (OSError, RuntimeError, TimeoutError):
            pass
        try:
            self._process.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self._process.kill()
            self._process.wait()
        for fd in (self._commands, self._replies):
            os.close(fd)
        shutil.rmtree(self._profile, ignore_errors=True)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def _read_message(self, deadline):
        while b"\0" not in self._buffer:
            left = deadline - time.monotonic()
            if left <= 0:
                raise TimeoutError("Chromium did not answer in time")
            ready, _, _ = select.select([self._replies], [], [], left)
            if ready:
                chunk = os.read(self._replies, 1 << 20)
                if not chunk:
                    raise RuntimeError("Chromium closed its DevTools pipe")
                self._buffer += chunk
        message, self._buffer = self._buffer.split(b"\0", 1)
        return json.loads(message)

    def send(self, method, *, session=None, **params):
        """Send one command and return its result; events that arrive meanwhile are kept."""
        self._next_id += 1
        message = {"id": self._next_id, "method": method, "params": params}
        if session:
            message["sessionId"] = session
        os.write(self._commands, json.dumps(message).encode() + b"\0")
        deadline = time.monotonic() + self.timeout
        while True:
            reply = self._read_message(deadline)
            if reply.get("id") == self._next_id:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            self.events.append(reply)

    def page(self, method, **params):
        """A command to the page's session."""
        return self.send(method, session=self.session, **params)

    def wait_for(self, method):
        """Wait for the page event ``method`` (or return it if it already came)."""
        deadline = time.monotonic() + self.timeout
        for event in self.events:
            if event.get("method") == method:
                return event
        while True:
            event = self._read_message(deadline)
            self.events.append(event)
            if event.get("method") == method:
                return event

    def evaluate(self, expression):
        """The value of a JavaScript expression in the page."""
        result = self.page("Runtime.evaluate", expression=expression, returnByValue=True, awaitPromise=True)
        if "exceptionDetails" in result:
            raise RuntimeError(f"{expression}: {result['exceptionDetails']}")
        return result["result"].get("value")

    def screenshot(self):
        """PNG bytes of the viewport."""
        return base64.b64decode(self.page("Page.captureScreenshot", format="png")["data"])
