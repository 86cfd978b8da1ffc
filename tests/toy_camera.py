"""A lab's own camera backend as DEVELOPERS.md describes one: named in a config as ``toy_camera:ToyCamera``.

It wraps a made-up maker's "SDK" (here: a NumPy generator) in the rig's camera base class, writing only the
``_do_`` methods; fringecal is not changed to use it.
"""

import time

import numpy as np

from rig.devices.cameras import CameraBase


class ToyCamera(CameraBase):
    """A 12-bit camera whose frames are a bright stripe on dark noise, exposed when ``grab`` is called."""

    def __init__(self, settings):
        super().__init__("toy camera", settings.width_px, settings.height_px, settings.bit_depth,
                         settings.exposure_s, settings.gain_db)
        self._rng = np.random.default_rng(0)
        self.released = False

    def _do_grab(self, timeout_s):
        start = time.monotonic()
        image = self._rng.integers(30, 50, (self.height_px, self.width_px))
        image[:, self.width_px // 2] = min(4095, int(2e6 * self.exposure_s))
        return image, start + self.exposure_s / 2

    def _do_set_exposure(self, exposure_s):
        return round(exposure_s, 6)  # the "SDK" works in whole microseconds

    def _do_close(self):
        self.released = True


class NotACamera:
    def __init__(self, settings):
        pass
