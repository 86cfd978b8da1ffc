"""Choosing the grating pair from fringe contrast measured against the high gray."""

from __future__ import annotations

import numpy as np


def coarse_peak(points: list[tuple[int, float]], low: int, gray_max: int, reach: float = 0.9) -> tuple[int, int]:
    """Bracket (grays) around the first local maximum of contrast that reaches ``reach`` of the largest.

    Panels with more than 2 pi show maxima at steps of pi and 3 pi; the first is the smallest step that works.
    ``points`` are (high gray, contrast) in ascending gray.
    """
    if not points:
        raise ValueError("points: expected at least one (gray, contrast) pair")
    grays = [g for g, _ in points]
    contrast = np.array([c for _, c in points])
    top = contrast.max()
    for i, c in enumerate(contrast):
        left = contrast[i - 1] if i else -np.inf
        right = contrast[i + 1] if i + 1 < len(contrast) else -np.inf
        if c >= reach * top and c >= left and c >= right:
            a = grays[i - 1] if i else low + 1
            b = grays[i + 1] if i + 1 < len(grays) else gray_max
            return a, b
    raise ValueError("points: expected finite contrast values (the largest is always a local maximum)")


def vertex_gray(points: dict[int, float], fallback: int) -> float:
    """Gray (fractional) at the vertex of a parabola fitted to contrast vs gray; ``fallback`` if it has none.

    The parabola is fitted to the points within the upper half of the contrast range near the peak, where the
    contrast-vs-step curve is close to quadratic.
    """
    grays = np.array(sorted(points), float)
    contrast = np.array([points[int(g)] for g in grays])
    keep = contrast >= contrast.min() + 0.5 * (contrast.max() - contrast.min())
    if keep.sum() < 3:
        keep = np.ones_like(keep)
    if keep.sum() < 3:
        return float(fallback)
    a, b, _ = np.polyfit(grays[keep], contrast[keep], 2)
    if a >= 0:
        return float(fallback)
    vertex = -b / (2 * a)
    if not grays[keep].min() <= vertex <= grays[keep].max():
        return float(fallback)
    return float(vertex)
