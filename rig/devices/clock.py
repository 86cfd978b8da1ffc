"""The rig's clock on hardware: the process's monotonic clock, which every real backend stamps its frames on."""

from __future__ import annotations

import time


class MonotonicClock:
    """Seconds on ``time.monotonic`` (never steps with NTP or the wall clock)."""

    def now(self) -> float:
        """Seconds on the monotonic clock."""
        return time.monotonic()

    def sleep(self, seconds: float) -> None:
        """Wait ``seconds`` (nothing for zero or less)."""
        if seconds > 0:
            time.sleep(seconds)
