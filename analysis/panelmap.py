"""Spatially resolved calibration: tiles of the panel and a smooth model of how the response varies across it.

Sub-region calibration with a polynomial model of the variation follows D. Engström et al., Optics Express 21(13),
16086 (2013).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from analysis.patterns import Rect


@dataclass(frozen=True)
class Tile:
    """One tile of an R x C grid: row, column and its panel rectangle."""

    row: int
    col: int
    rect: Rect

    @property
    def name(self) -> str:
        return f"r{self.row}_c{self.col}"

    @property
    def centre_px(self) -> tuple[float, float]:
        r = self.rect
        return (r.x0 + r.x1) / 2, (r.y0 + r.y1) / 2


def parse_grid(text: str) -> tuple[int, int]:
    """'RxC' (e.g. 3x4) into rows and columns, each 1 to 16."""
    match = re.fullmatch(r"\s*(\d+)\s*[xX]\s*(\d+)\s*", text)
    if not match or not all(1 <= int(v) <= 16 for v in match.groups()):
        raise ValueError(f"--grid: expected RxC with 1 to 16 rows and columns, such as 3x3, got {text!r}")
    return int(match.group(1)), int(match.group(2))


def tiles(width_px: int, height_px: int, rows: int, cols: int) -> list[Tile]:
    """The grid's tiles in reading order; edges fall on whole pixels and the tiles cover the panel."""
    xs = np.linspace(0, width_px, cols + 1).round().astype(int)
    ys = np.linspace(0, height_px, rows + 1).round().astype(int)
    return [Tile(r, c, Rect(int(xs[c]), int(xs[c + 1]), int(ys[r]), int(ys[r + 1])))
            for r in range(rows) for c in range(cols)]


@dataclass(frozen=True)
class Surface:
    """A polynomial of total degree ``degree`` in normalised panel coordinates (-1..1), fitted to tile values."""

    degree: int
    coefficients: tuple[float, ...]  # in the order of _terms
    rms_residual: float
    width_px: int
    height_px: int

    def __call__(self, x_px, y_px) -> np.ndarray:
        u, v = _normalise(np.asarray(x_px, float), np.asarray(y_px, float), self.width_px, self.height_px)
        return _design(u, v, self.degree) @ np.asarray(self.coefficients)


def fit_surface(x_px, y_px, values, width_px: int, height_px: int, degree: int = 2) -> Surface:
    """Least-squares polynomial surface through tile values; the degree drops until the fit is determined."""
    x, y, z = (np.asarray(a, float).ravel() for a in (x_px, y_px, values))
    while degree > 0 and (degree + 1) * (degree + 2) // 2 > z.size:
        degree -= 1
    u, v = _normalise(x, y, width_px, height_px)
    a = _design(u, v, degree)
    coef, *_ = np.linalg.lstsq(a, z, rcond=None)
    rms = float(np.sqrt(np.mean((a @ coef - z) ** 2)))
    return Surface(degree, tuple(float(c) for c in coef), rms, width_px, height_px)


def _normalise(x, y, w, h):
    return 2 * x / w - 1, 2 * y / h - 1


def _design(u, v, degree):
    u, v = np.atleast_1d(u), np.atleast_1d(v)
    return np.column_stack([u**i * v**(n - i) for n in range(degree + 1) for i in range(n, -1, -1)])
