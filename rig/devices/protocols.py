"""The narrow interfaces the run loop needs from hardware; real and simulated backends satisfy them structurally.

Contract for every backend: calls that wait on hardware take a timeout and raise ``TimeoutError`` when it passes
(retryable); a camera that is gone raises ``ConnectionError`` (fatal); ``close()`` is safe to call twice.
"""

from __future__ import annotations

from typing import Protocol, runtime_checkable

import numpy as np

from analysis.frame import Frame


@runtime_checkable
class Screen(Protocol):
    """The modulator panel as a display: shows one gray-level image at a time, 1:1 with its pixels."""

    width_px: int
    height_px: int
    bit_depth: int

    def show(self, pattern: np.ndarray) -> None:
        """Display ``pattern`` (height x width gray levels); return once it has been handed to the panel."""

    def close(self) -> None:
        """Blank and release the display."""


@runtime_checkable
class Camera(Protocol):
    """A camera that returns whole frames with metadata."""

    width_px: int
    height_px: int
    bit_depth: int
    exposure_s: float
    gain_db: float

    def grab(self, timeout_s: float = 1.0) -> Frame:
        """Return the next frame exposed after the call; raise TimeoutError if none arrives in ``timeout_s``.

        A camera in software-trigger mode (``camera.trigger = "software"``) triggers one exposure and returns it."""

    def close(self) -> None:
        """Stop acquisition and release the device."""


@runtime_checkable
class Clock(Protocol):
    """Time as the bench sees it (s); the simulator's clock may run faster than the wall clock."""

    def now(self) -> float:
        """Seconds on a monotonic clock."""

    def sleep(self, seconds: float) -> None:
        """Wait ``seconds``."""


@runtime_checkable
class Transport(Protocol):
    """A byte link to a serial instrument: ``serial.Serial`` satisfies it, and so do the tests' scripted fakes.

    ``read_until`` returns what arrived before ``expected`` or before ``timeout`` seconds passed (then without the
    terminator); a link that is gone raises ``serial.SerialException`` or ``OSError``.
    """

    timeout: float | None

    def write(self, data: bytes) -> int | None:
        """Send ``data``."""

    def read_until(self, expected: bytes = b"\n", size: int | None = None) -> bytes:
        """Bytes up to and including ``expected``, or what came before the timeout."""

    def reset_input_buffer(self) -> None:
        """Drop bytes received and not read (a late reply to an earlier query)."""

    def close(self) -> None:
        """Release the port."""
