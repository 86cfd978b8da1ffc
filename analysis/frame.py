"""A camera frame and the metadata every backend reports with it."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Frame:
    """One camera image (uint16 counts, ADU) and what the camera said about it.

    ``timestamp_s`` is the middle of the exposure on the camera's clock; ``complete`` is False when the driver
    delivered a partial or damaged buffer; ``sequence`` counts frames the camera produced, so gaps show drops.
    """

    image: np.ndarray
    timestamp_s: float
    exposure_s: float
    gain_db: float
    bit_depth: int
    sequence: int
    complete: bool = True

    @property
    def full_scale(self) -> int:
        """Largest count the ADC can report."""
        return 2**self.bit_depth - 1

    @property
    def saturated_px(self) -> int:
        """Pixels at full scale."""
        return int(np.count_nonzero(self.image >= self.full_scale))
