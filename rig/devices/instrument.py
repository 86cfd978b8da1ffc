"""A line-protocol serial instrument: send a command line, read one reply line, with timeouts and retries.

The command strings, terminators, timeout and retries come from the config (``SerialLink`` fields); defaults follow
the SCPI habit (``*IDN?`` for the identity, queries ending in ``?``). Errors name the part and its port:
``DeviceFault`` during a run (retries exhausted, port gone); opening problems become ``UsageError`` in
rig/accessories.py.
"""

from __future__ import annotations

import math

from rig.errors import DeviceFault

try:
    import termios
    # an unplugged adapter raises serial.SerialException (an OSError) or, from a tcflush, termios.error
    LINK_ERRORS: tuple[type[BaseException], ...] = (OSError, termios.error)
except ImportError:  # no termios off POSIX
    LINK_ERRORS = (OSError,)


class LineInstrument:
    """One instrument on ``transport`` (a ``serial.Serial`` or a fake), speaking the line protocol in ``link``."""

    def __init__(self, transport, part: str, link):
        self.transport, self.part, self.link = transport, part, link
        self._write_end = link.write_terminator.encode()
        self._read_end = link.read_terminator.encode()
        self.where = f"{part} on {link.port or 'a test link'}"
        self.identity = ""  # the identify reply, once asked

    def write(self, command: str) -> None:
        """Send ``command`` (no reply expected)."""
        self._check(command)
        self._do_write(command)

    def query(self, command: str) -> str:
        """Send ``command`` and return its reply line (stripped); retried ``link.retries`` times on a timeout."""
        self._check(command)
        return self._ask(command, lambda reply: reply)

    def query_number(self, command: str, unit: str) -> float:
        """Send ``command`` and return its reply as a finite number; a garbled reply is retried like a timeout."""
        self._check(command)

        def parse(reply: str) -> float:
            value = float(reply.split()[0]) if reply.split() else math.nan
            if not math.isfinite(value):
                raise ValueError(reply)
            return value

        return self._ask(command, parse, f"a number in {unit}")

    def identify(self) -> str:
        """Ask the instrument who it is and keep the reply in ``identity`` ('' without an identify command)."""
        self.identity = self.query(self.link.identify_command) if self.link.identify_command else ""
        return self.identity

    def _check(self, command: str) -> None:
        if not command or not command.isascii() or any(c in command for c in "\r\n"):
            raise ValueError(f"{self.where}: expected a one-line ASCII command, got {command!r}")

    def _ask(self, command: str, parse, expected: str = "a reply"):
        problem = ""
        for _ in range(self.link.retries + 1):
            reply = self._do_query(command)
            if reply is None:
                problem = f"no reply to {command!r} within {self.link.timeout_s} s"
                continue
            try:
                return parse(reply)
            except ValueError:
                problem = f"reply {reply!r} to {command!r} is not {expected}"
        raise DeviceFault(f"{self.where}: {problem} ({self.link.retries + 1} tries)")

    def _do_write(self, command: str) -> None:
        try:
            self.transport.write(command.encode("ascii") + self._write_end)
        except LINK_ERRORS as err:
            raise DeviceFault(f"{self.where}: the port is gone ({err})") from None

    def _do_query(self, command: str) -> str | None:
        """The reply line, or None after the timeout."""
        try:
            self.transport.reset_input_buffer()  # a late reply to an earlier try must not answer this one
            self.transport.write(command.encode("ascii") + self._write_end)
            raw = self.transport.read_until(self._read_end)
        except LINK_ERRORS as err:
            raise DeviceFault(f"{self.where}: the port is gone ({err})") from None
        if not raw.endswith(self._read_end):
            return None
        # bytes that are not ASCII show as U+FFFD: a parser rejects them and the message shows them
        return raw[: -len(self._read_end)].decode("ascii", errors="replace").strip()
