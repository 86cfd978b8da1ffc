"""Simulated serial instruments served on a pseudo-terminal: a real ``serial.Serial`` opens ``port`` and talks to
them byte for byte, as to a USB-serial adapter.

A model is a callable from one command line (str) to its reply (str, or None for commands without a reply).
``mode`` injects faults: 'silent' answers nothing (a timeout), 'garbled' answers noise; ``unplug()`` closes the
terminal as a pulled adapter does.
"""

from __future__ import annotations

import os
import select
import threading
import tty


class PtyInstrument:
    """Serves ``model`` on a new pseudo-terminal until ``close()``."""

    def __init__(self, model, read_terminator: str = "\n", write_terminator: str = "\n"):
        self.model = model
        self.mode = "ok"
        self.received: list[str] = []
        self._in_end, self._out_end = read_terminator.encode(), write_terminator.encode()
        self._master, self._slave = os.openpty()
        tty.setraw(self._slave)  # no echo, no CR/LF translation: the bytes pass as a serial line passes them
        self.port = os.ttyname(self._slave)  # the slave end stays open here, or the master's reads fail with EIO
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._serve, name=f"pty-{self.port}", daemon=True)
        self._thread.start()

    def _serve(self) -> None:
        buffer = b""
        while not self._stop.is_set():
            ready, _, _ = select.select([self._master], [], [], 0.05)
            if not ready:
                continue
            try:
                chunk = os.read(self._master, 4096)
            except OSError:
                return
            buffer += chunk
            while self._in_end in buffer:
                line, buffer = buffer.split(self._in_end, 1)
                self._answer(line.decode("ascii", errors="replace"))

    def _answer(self, line: str) -> None:
        self.received.append(line)
        reply = self.model(line)
        if reply is None or self.mode == "silent":
            return
        out = b"\x93#?\xfe%" if self.mode == "garbled" else reply.encode("ascii")
        os.write(self._master, out + self._out_end)

    def unplug(self) -> None:
        """Vanish like a pulled USB adapter: both ends of the terminal close."""
        self._stop.set()
        self._thread.join()
        for fd in (self._master, self._slave):
            try:
                os.close(fd)
            except OSError:
                pass

    def close(self) -> None:
        """Stop serving (safe to call twice, and after ``unplug``)."""
        if not self._stop.is_set():
            self.unplug()


IDENTITY = "fringecal-sim,{kind},0001,1.0"


class ShutterModel:
    """SHUT:OPEN / SHUT:CLOS / SHUT? -> 1 or 0."""

    def __init__(self):
        self.is_open = False

    def __call__(self, line: str):
        if line == "*IDN?":
            return IDENTITY.format(kind="shutter")
        if line in ("SHUT:OPEN", "SHUT:CLOS"):
            self.is_open = line == "SHUT:OPEN"
            return None
        if line == "SHUT?":
            return "1" if self.is_open else "0"
        return "ERR unknown command"


class MeterModel:
    """A meter answering ``query`` with ``value`` (W or degrees C), which a test may change between readings."""

    def __init__(self, kind: str, query: str, value: float):
        self.kind, self.query, self.value = kind, query, value

    def __call__(self, line: str):
        if line == "*IDN?":
            return IDENTITY.format(kind=self.kind)
        if line == self.query:
            return f"{self.value:.6E}"
        return "ERR unknown command"


class RotatorModel:
    """ROT:MOVE <deg> starts a move of ``steps`` position queries; ROT:POS? reports the angle on the way."""

    def __init__(self, angle_deg: float = 0.0, steps: int = 3):
        self.angle_deg, self.steps = angle_deg, steps
        self._target, self._left = angle_deg, 0

    def __call__(self, line: str):
        if line == "*IDN?":
            return IDENTITY.format(kind="rotator")
        if line.startswith("ROT:MOVE "):
            self._target, self._left = float(line.split()[1]), self.steps
            return None
        if line == "ROT:POS?":
            if self._left:
                self._left -= 1
                self.angle_deg += (self._target - self.angle_deg) / (self._left + 1)
            return f"{self.angle_deg:.4f}"
        return "ERR unknown command"
