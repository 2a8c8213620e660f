"""A small client of the Chrome DevTools Protocol over a pipe, for headless Chromium.

Chromium started with ``--remote-debugging-pipe`` reads protocol commands from its file descriptor 3
and writes answers and events to descriptor 4, each message one JSON text ended by a NUL byte. This
needs no port, no websocket and no package beyond the standard library. Every wait has a deadline;
a browser that exits, crashes or stays silent becomes one :class:`~unmix.errors.BrowserError`.

Only :mod:`unmix.io.browser` uses this module.
"""

from __future__ import annotations

import contextlib
import json
import os
import select
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from ..errors import BrowserError

# Started between Popen and Chromium: puts the two pipe ends on descriptors 3 and 4 (Chromium's fixed
# numbers) and then becomes Chromium. Done in a child process rather than in ``preexec_fn``, which is not
# safe while other threads run (a product set's heartbeat thread does). Copies to descriptors >= 10
# first, so that one end sitting on 3 or 4 is not overwritten by the other.
_TRAMPOLINE = (
    "import fcntl, os, sys\n"
    "a = fcntl.fcntl(int(sys.argv[1]), fcntl.F_DUPFD, 10)\n"
    "b = fcntl.fcntl(int(sys.argv[2]), fcntl.F_DUPFD, 10)\n"
    "os.dup2(a, 3)\n"
    "os.dup2(b, 4)\n"
    "os.close(a)\n"
    "os.close(b)\n"
    "os.execv(sys.argv[3], sys.argv[3:])\n"
)

#: Flags of every start. ``--no-sandbox``: Chromium's sandbox refuses to start as root (CI runs as root)
#: and in containers without user namespaces; the browser only opens the project's own local pages.
_FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-dev-shm-usage",  # small /dev/shm in containers
    "--disable-extensions",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-default-apps",
    "--disable-sync",
    "--no-first-run",
    "--no-default-browser-check",
    "--mute-audio",
    "--hide-scrollbars",
    "--remote-debugging-pipe",
)


class DevTools:
    """One headless Chromium process and its protocol pipe; use as a context manager.

    Parameters
    ----------
    executable : path
        The Chromium (or Chrome) executable.
    timeout : float
        Seconds any single step may take (start, each command, each awaited event).
    """

    def __init__(self, executable: str | os.PathLike, *, timeout: float = 60.0) -> None:
        self.executable = str(executable)
        self.timeout = float(timeout)
        self.events: list[dict] = []
        self._next_id = 0
        self._buffer = b""
        self._proc: subprocess.Popen | None = None
        self._profile: str | None = None

    # -- start and stop ---------------------------------------------------------------------------
    def __enter__(self) -> DevTools:
        self.start()
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def start(self) -> None:
        """Start Chromium with a fresh profile in a temporary folder and wait for its first answer."""
        self._profile = tempfile.mkdtemp(prefix="unmix-chromium-")
        cmd_read, self._cmd_write = os.pipe()
        self._evt_read, evt_write = os.pipe()
        self._log = open(Path(self._profile) / "stderr.txt", "w+b")  # noqa: SIM115 (closed in close())
        args = [sys.executable, "-I", "-S", "-c", _TRAMPOLINE, str(cmd_read), str(evt_write),
                self.executable, *_FLAGS, f"--user-data-dir={self._profile}", "about:blank"]
        try:
            self._proc = subprocess.Popen(args, pass_fds=(cmd_read, evt_write), stdin=subprocess.DEVNULL,
                                          stdout=self._log, stderr=self._log, start_new_session=True)
        except OSError as exc:
            self.close()
            raise BrowserError(f"cannot start {self.executable}: {exc.strerror or exc}") from None
        finally:
            os.close(cmd_read)
            os.close(evt_write)
        try:
            self.send("Browser.getVersion")
        except BaseException:
            self.close()
            raise

    def close(self) -> None:
        """Ask Chromium to quit, end its process group if it does not, remove the temporary profile."""
        proc, self._proc = self._proc, None
        if proc is not None:
            with contextlib.suppress(OSError, BrowserError):
                self._write({"id": self._new_id(), "method": "Browser.close"})
            try:
                proc.wait(timeout=min(self.timeout, 10.0))
            except subprocess.TimeoutExpired:
                pass
            # the renderer and helper processes share the group of the process started here
            with contextlib.suppress(ProcessLookupError, PermissionError):
                os.killpg(proc.pid, signal.SIGKILL)
            with contextlib.suppress(subprocess.TimeoutExpired):
                proc.wait(timeout=10.0)
        for fd in ("_cmd_write", "_evt_read"):
            with contextlib.suppress(AttributeError, OSError):
                os.close(getattr(self, fd))
            with contextlib.suppress(AttributeError):
                delattr(self, fd)
        if getattr(self, "_log", None) is not None:
            self._log.close()
            self._log = None
        if self._profile is not None:
            shutil.rmtree(self._profile, ignore_errors=True)
            self._profile = None

    # -- messages ---------------------------------------------------------------------------------
    def send(self, method: str, params: dict | None = None, *, session: str | None = None,
             timeout: float | None = None) -> dict:
        """Send one command and return its result; a protocol error becomes a :class:`BrowserError`."""
        msg_id = self._new_id()
        msg = {"id": msg_id, "method": method, "params": params or {}}
        if session is not None:
            msg["sessionId"] = session
        self._write(msg)
        deadline = time.monotonic() + (self.timeout if timeout is None else timeout)
        while True:
            reply = self._receive(deadline, f"an answer to {method}")
            if reply.get("id") == msg_id:
                if "error" in reply:
                    err = reply["error"]
                    raise BrowserError(f"Chromium refused {method}: {err.get('message')} {err.get('data', '')}".rstrip())
                return reply.get("result", {})
            if "method" in reply:
                self.events.append(reply)

    def wait_event(self, method: str, *, session: str | None = None, timeout: float | None = None) -> dict:
        """Return the first event ``method`` (of ``session``) not yet taken, waiting for it if needed."""
        deadline = time.monotonic() + (self.timeout if timeout is None else timeout)
        while True:
            for i, event in enumerate(self.events):
                if event.get("method") == method and event.get("sessionId") == session:
                    return self.events.pop(i)
            reply = self._receive(deadline, f"the event {method}")
            if "method" in reply:
                self.events.append(reply)

    def _new_id(self) -> int:
        self._next_id += 1
        return self._next_id

    def _write(self, msg: dict) -> None:
        data = json.dumps(msg).encode() + b"\0"
        try:
            while data:
                data = data[os.write(self._cmd_write, data):]
        except (BrokenPipeError, AttributeError):
            raise BrowserError(f"{self.executable} has exited; {self._stderr_tail()}") from None

    def _receive(self, deadline: float, waiting_for: str) -> dict:
        while b"\0" not in self._buffer:
            left = deadline - time.monotonic()
            if left <= 0:
                raise BrowserError(f"{self.executable} gave no {waiting_for} within {self.timeout:g} s; "
                                   "a busy machine may need a longer timeout")
            ready, _, _ = select.select([self._evt_read], [], [], left)
            if not ready:
                continue
            chunk = os.read(self._evt_read, 1 << 20)
            if not chunk:
                raise BrowserError(f"{self.executable} exited while this run waited for {waiting_for}; "
                                   f"{self._stderr_tail()}")
            self._buffer += chunk
        text, _, self._buffer = self._buffer.partition(b"\0")
        return json.loads(text)

    def _stderr_tail(self) -> str:
        """The last line Chromium printed, for error messages."""
        if getattr(self, "_log", None) is None:
            return "it printed nothing"
        self._log.flush()
        self._log.seek(0)
        lines = [ln.strip() for ln in self._log.read().decode(errors="replace").splitlines() if ln.strip()]
        return f"its last message: {lines[-1][:300]}" if lines else "it printed nothing"
