"""Panels driven by their maker's library rather than shown as a monitor: ``[modulator] backend = "module:Class"``.

fringecal calls ``Class(settings)`` with the config's ``[modulator]`` section; the object must satisfy
``rig.devices.protocols.Screen``. ``ScreenBase`` holds what every such backend shares (the pattern check, the closed
state, blanking on close), so a backend writes only ``_do_show`` and ``_do_close``. Patterns arrive as height x width
arrays of gray levels at the panel's full bit depth (uint8 up to 8 bits, uint16 above), row 0 at the top.
"""

from __future__ import annotations


import numpy as np

from analysis.patterns import check_panel_pattern, dtype_for
from rig.errors import UsageError
from rig.devices.plugins import load_plugin
from rig.devices.protocols import Screen


class ScreenBase:
    """Shared checks of the panel backends (see the module docstring)."""

    def __init__(self, name: str, width_px: int, height_px: int, bit_depth: int):
        self.name = name
        self.width_px, self.height_px, self.bit_depth = width_px, height_px, bit_depth
        self._closed = False

    def show(self, pattern: np.ndarray) -> None:
        """Display ``pattern`` (height x width gray levels of ``bit_depth`` bits); return once the panel has it."""
        if self._closed:
            raise ConnectionError(f"{self.name}: show after close")
        pattern = check_panel_pattern(pattern, self.width_px, self.height_px, self.bit_depth, self.name)
        self._do_show(pattern.astype(dtype_for(self.bit_depth), copy=False))

    def close(self) -> None:
        """Blank the panel to gray 0 and release it (safe to call twice)."""
        if self._closed:
            return
        self._closed = True
        try:
            self._do_show(np.zeros((self.height_px, self.width_px), dtype_for(self.bit_depth)))
        finally:
            self._do_close()

    # --- what a backend provides ------------------------------------------------------------------------------
    def _do_show(self, pattern: np.ndarray) -> None:
        """Hand the checked pattern to the panel; raise ConnectionError if the panel is gone."""
        raise NotImplementedError

    def _do_close(self) -> None:
        pass


def load_screen_backend(settings):
    """Instantiate the panel class named ``module:Class`` in ``modulator.backend`` as Class(settings), and check that
    it is a Screen of the configured size and bit depth."""
    screen = load_plugin(settings, "modulator.backend", Screen, ("width_px", "height_px", "bit_depth", "show", "close"),
                         "screen")
    got = (screen.width_px, screen.height_px, screen.bit_depth)
    if got != (settings.width_px, settings.height_px, settings.bit_depth):
        screen.close()
        raise UsageError(f"modulator.width_px/height_px/bit_depth: configured {settings.width_px}x"
                         f"{settings.height_px}, {settings.bit_depth} bits, but {settings.backend} is {got[0]}x"
                         f"{got[1]}, {got[2]} bits")
    return screen
