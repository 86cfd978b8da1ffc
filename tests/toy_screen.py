"""A panel driven by its maker's library, as DEVELOPERS.md describes one: named in a config as
``toy_screen:ToyPanel``.

It wraps a made-up maker's "SDK" (here: a class that keeps the last frame it was sent) in the rig's screen base
class, writing only the ``_do_`` methods; fringecal is not changed to use it.
"""

import numpy as np

from rig.devices.panels import ScreenBase


class MakerPanelSDK:
    """Stands in for a maker's library: takes whole frames of 16-bit gray levels, and can be unplugged."""

    def __init__(self, width, height):
        self.width, self.height = width, height
        self.frame = np.zeros((height, width), np.uint16)
        self.received = []  # (dtype, highest gray) of every frame
        self.connected = True

    def send_frame(self, gray_levels: np.ndarray) -> bool:
        if not self.connected:
            return False
        self.received.append((gray_levels.dtype, int(gray_levels.max())))
        self.frame = gray_levels.astype(np.uint16)
        return True


class ToyPanel(ScreenBase):
    """A panel of the configured size and bit depth behind the toy SDK; ``ToyPanel.opened`` lists every one made."""

    opened = []

    def __init__(self, settings):
        super().__init__("toy panel", settings.width_px, settings.height_px, settings.bit_depth)
        self.sdk = MakerPanelSDK(settings.width_px, settings.height_px)
        self.released = False
        ToyPanel.opened.append(self)

    def _do_show(self, pattern):
        if not self.sdk.send_frame(pattern):
            raise ConnectionError(f"{self.name}: the panel does not answer")

    def _do_close(self):
        self.released = True


class NotAPanel:
    def __init__(self, settings):
        pass


class WrongSizePanel(ToyPanel):
    def __init__(self, settings):
        super().__init__(settings)
        self.width_px = settings.width_px // 2
