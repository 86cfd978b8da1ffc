"""Synthetic fringe images with known phase for the analysis tests (no optics, exact truth)."""

import numpy as np


def fringes(phase_rad, shape=(96, 160), fx=0.094, fy=0.0, amplitude=200.0, background=300.0, noise=0.0,
            envelope=False, chirp=0.0, rng=None):
    """Image B + A cos(2 pi (fx x' + fy y') + chirp x'^2 + phase), x', y' from the image centre (px).

    ``envelope`` gives A and B a Gaussian fall-off and B a gradient, like two beams of unequal size plus stray light.
    """
    h, w = shape
    y, x = np.mgrid[:h, :w].astype(float)
    xc, yc = x - (w - 1) / 2, y - (h - 1) / 2
    amp = np.full(shape, amplitude)
    bg = np.full(shape, background)
    if envelope:
        amp = amplitude * np.exp(-((xc + 0.2 * w) / (0.8 * w)) ** 2 - (yc / (0.9 * h)) ** 2)
        bg = background * (0.6 + 0.4 * np.exp(-(xc / w) ** 2)) + 0.15 * background * x / w
    img = bg + amp * np.cos(2 * np.pi * (fx * xc + fy * yc) + chirp * xc**2 + phase_rad)
    if noise:
        img = img + (rng or np.random.default_rng(0)).normal(0.0, noise, shape)
    return img
