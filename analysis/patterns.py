"""Gray-level images for the panel: split-screen calibration patterns and phase patterns through a lookup table.

Images are row-major (row = y, down; column = x, right), uint8 for 8-bit panels and uint16 for 9 to 12 bits.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Rect:
    """Rectangle in pixels (of the panel or of an image), half-open: columns x0..x1-1, rows y0..y1-1."""

    x0: int
    x1: int
    y0: int
    y1: int

    @property
    def width(self) -> int:
        return self.x1 - self.x0

    @property
    def height(self) -> int:
        return self.y1 - self.y0

    @property
    def slices(self) -> tuple[slice, slice]:
        """(rows, columns) slices for indexing an image or the panel."""
        return slice(self.y0, self.y1), slice(self.x0, self.x1)

    def check_inside(self, shape: tuple[int, int], what: str = "roi") -> None:
        """Raise ValueError unless this is a non-empty rectangle inside an image of ``shape`` (rows, cols)."""
        h, w = shape
        if not (0 <= self.x0 < self.x1 <= w and 0 <= self.y0 < self.y1 <= h):
            raise ValueError(f"{what}: expected x0:x1,y0:y1 inside the {w}x{h} px image, "
                             f"got {self.x0}:{self.x1},{self.y0}:{self.y1}")


@dataclass(frozen=True)
class SplitLayout:
    """Where the mirror and grating halves sit; the grating's lines run parallel to the split line."""

    split: str = "vertical"
    split_position: float = 0.5
    grating_side: str = "right"
    period_px: int = 6

    def __post_init__(self):
        sides = {"vertical": ("left", "right"), "horizontal": ("top", "bottom")}
        if self.split not in sides:
            raise ValueError(f"split: expected 'vertical' or 'horizontal', got {self.split!r}")
        if self.grating_side not in sides[self.split]:
            raise ValueError(f"grating_side: expected one of {sides[self.split]} for a {self.split} split, "
                             f"got {self.grating_side!r}")
        if self.period_px < 2:
            raise ValueError(f"period_px: expected an integer >= 2, got {self.period_px!r}")
        if not 0.0 < self.split_position < 1.0:
            raise ValueError(f"split_position: expected a fraction in (0, 1), got {self.split_position!r}")


def layout_of(pattern_cfg) -> SplitLayout:
    """The split layout described by a config's ``[pattern]`` section."""
    return SplitLayout(pattern_cfg.split, pattern_cfg.split_position, pattern_cfg.grating_side,
                       pattern_cfg.grating_period_px)


def dtype_for(bit_depth: int) -> type:
    """Smallest unsigned integer type that holds the gray levels of a panel."""
    if not 1 <= bit_depth <= 16:
        raise ValueError(f"bit_depth: expected 1 to 16 bits, got {bit_depth!r}")
    return np.uint8 if bit_depth <= 8 else np.uint16


def check_panel_pattern(pattern, width_px: int, height_px: int, bit_depth: int, who: str = "screen") -> np.ndarray:
    """``pattern`` as an array if it is a ``height_px`` x ``width_px`` image of integer gray levels of ``bit_depth``
    bits; ValueError naming ``who`` and what was expected otherwise. Every panel backend checks with this."""
    pattern = np.asarray(pattern)
    if pattern.shape != (height_px, width_px):
        raise ValueError(f"{who}: expected a {height_px}x{width_px} pattern (rows x columns), got {pattern.shape}")
    if pattern.dtype.kind not in "ui":
        raise ValueError(f"{who}: expected integer gray levels, got {pattern.dtype}")
    if pattern.size and (pattern.min() < 0 or pattern.max() >= 2**bit_depth):
        raise ValueError(f"{who}: gray levels must lie in [0, {2**bit_depth - 1}] for a {bit_depth}-bit panel, "
                         f"got {pattern.min()}..{pattern.max()}")
    return pattern


def _check_gray(name: str, value: int, bit_depth: int) -> None:
    gmax = 2**bit_depth - 1
    if not 0 <= int(value) <= gmax or int(value) != value:
        raise ValueError(f"{name}: expected a gray level in [0, {gmax}] for {bit_depth} bits, got {value!r}")


def grating_mask(width: int, height: int, layout: SplitLayout) -> np.ndarray:
    """Boolean image, True on the high stripes of the binary grating (50 % duty, floor(p/2) high pixels)."""
    axis = np.arange(width if layout.split == "vertical" else height)
    stripes = (axis % layout.period_px) < layout.period_px // 2
    if layout.split == "vertical":
        return np.broadcast_to(stripes[None, :], (height, width))
    return np.broadcast_to(stripes[:, None], (height, width))


def grating_half(width: int, height: int, layout: SplitLayout) -> np.ndarray:
    """Boolean image, True on the half that shows the grating."""
    along_x = layout.split == "vertical"
    n = width if along_x else height
    cut = int(round(layout.split_position * n))
    axis = np.arange(n)
    side = axis >= cut if layout.grating_side in ("right", "bottom") else axis < cut
    return np.broadcast_to(side[None, :] if along_x else side[:, None], (height, width))


def split_screen(width: int, height: int, mirror_gray: int, low: int, high: int, layout: SplitLayout,
                 bit_depth: int = 8) -> np.ndarray:
    """Split-screen pattern: uniform ``mirror_gray`` on one half, a low/high binary grating on the other."""
    for name, value in (("mirror_gray", mirror_gray), ("low", low), ("high", high)):
        _check_gray(name, value, bit_depth)
    # the split line and the grating's lines are parallel: one row (or column) repeated makes the image
    along_x = layout.split == "vertical"
    half, stripes = (image[0] if along_x else image[:, 0]
                     for image in (grating_half(width, height, layout), grating_mask(width, height, layout)))
    line = np.where(half, np.where(stripes, high, low), mirror_gray).astype(dtype_for(bit_depth))
    return np.broadcast_to(line[None, :] if along_x else line[:, None], (height, width)).copy()


def staircase_split(width: int, height: int, mirror_gray: int, step_grays, layout: SplitLayout,
                    rising_away: bool = True, bit_depth: int = 8) -> np.ndarray:
    """Split-screen probe: uniform ``mirror_gray`` on one half, a blazed staircase on the other.

    The staircase repeats ``step_grays`` (one gray per pixel, ``len(step_grays)`` pixels per period, the grating's
    lines parallel to the split line), in that order going away from the mirror half when ``rising_away``, toward it
    otherwise. A staircase whose phase grows toward the mirror half steers its light into the order that overlaps
    the mirror half's reflection (the fringe band); the mirrored staircase steers it away.
    """
    steps = [int(g) for g in step_grays]
    _check_gray("mirror_gray", mirror_gray, bit_depth)
    for g in steps:
        _check_gray("step_grays", g, bit_depth)
    if len(steps) < 2:
        raise ValueError(f"step_grays: expected at least 2 grays per period, got {len(steps)}")
    along_x = layout.split == "vertical"
    n = width if along_x else height
    away = 1 if layout.grating_side in ("right", "bottom") else -1
    index = np.mod(np.arange(n) * (away if rising_away else -away), len(steps))
    line = np.asarray(steps)[index]
    img = np.full((height, width), mirror_gray, dtype=dtype_for(bit_depth))
    half = grating_half(width, height, layout)
    stairs = np.broadcast_to(line[None, :] if along_x else line[:, None], (height, width))
    img[half] = stairs[half]
    return img


def split_in_rect(width: int, height: int, rect: Rect, mirror_gray: int, low: int, high: int,
                  layout: SplitLayout, background_gray: int, bit_depth: int = 8) -> np.ndarray:
    """Split-screen pattern drawn inside ``rect`` (split measured within the rectangle), uniform elsewhere."""
    _check_gray("background_gray", background_gray, bit_depth)
    rect.check_inside((height, width), "rect")
    inner = split_screen(rect.width, rect.height, mirror_gray, low, high, layout, bit_depth)
    out = np.full((height, width), background_gray, dtype=dtype_for(bit_depth))
    out[rect.y0:rect.y1, rect.x0:rect.x1] = inner
    return out


def _coords_px(width: int, height: int) -> tuple[np.ndarray, np.ndarray]:
    """Pixel-centre coordinates from the panel centre (px), as broadcastable row and column vectors."""
    x = np.arange(width) - (width - 1) / 2
    y = np.arange(height) - (height - 1) / 2
    return x[None, :], y[:, None]


def blazed_phase(width: int, height: int, period_px: float, angle_deg: float = 0.0) -> np.ndarray:
    """Phase (rad, in [0, 2pi)) of a blazed grating of ``period_px``, grating vector at ``angle_deg`` from +x."""
    if period_px == 0:
        raise ValueError("period_px: expected a non-zero period")
    x, y = _coords_px(width, height)
    a = np.deg2rad(angle_deg)
    return np.mod(2 * np.pi * (x * np.cos(a) + y * np.sin(a)) / period_px, 2 * np.pi)


def lens_phase(width: int, height: int, focal_mm: float, wavelength_nm: float, pitch_um: float) -> np.ndarray:
    """Phase (rad, in [0, 2pi)) of a thin lens of focal length ``focal_mm`` (paraxial, -k r^2 / 2f)."""
    if focal_mm == 0:
        raise ValueError("focal_mm: expected a non-zero focal length")
    x, y = _coords_px(width, height)
    r2_um2 = (x**2 + y**2) * pitch_um**2
    k = 2 * np.pi / (wavelength_nm * 1e-3)
    return np.mod(-k * r2_um2 / (2 * focal_mm * 1e3), 2 * np.pi)


def vortex_phase(width: int, height: int, charge: int) -> np.ndarray:
    """Phase (rad, in [0, 2pi)) of an optical vortex of topological ``charge``."""
    x, y = _coords_px(width, height)
    return np.mod(charge * np.arctan2(y, x), 2 * np.pi)


def phase_to_gray(phase_rad: np.ndarray, bit_depth: int = 8, lut: np.ndarray | None = None,
                  lut_range_rad: float = 2 * np.pi) -> np.ndarray:
    """Turn phases (rad, wrapped to [0, 2pi)) into gray levels through a lookup table.

    ``lut[i]`` is the gray that delays ``lut_range_rad * i / len(lut)``; without one the identity table (gray
    proportional to phase over all levels) is used. A table spanning less than 2 pi gives its last gray to the
    phases beyond its range, the nearest it can make.
    """
    if not lut_range_rad > 0:
        raise ValueError(f"lut_range_rad: expected a phase range > 0 rad, got {lut_range_rad!r}")
    n_levels = 2**bit_depth
    if lut is None:
        lut = np.arange(n_levels)
    lut = np.asarray(lut)
    if lut.ndim != 1 or lut.size < 2:
        raise ValueError(f"lut: expected a 1-D table of at least 2 gray levels, got shape {lut.shape}")
    if lut.min() < 0 or lut.max() >= n_levels:
        raise ValueError(f"lut: expected gray levels in [0, {n_levels - 1}], got {lut.min()}..{lut.max()}")
    frac = np.mod(np.asarray(phase_rad, dtype=float), 2 * np.pi) / lut_range_rad
    index = np.minimum((frac * lut.size).astype(np.int64), lut.size - 1)
    return lut[index].astype(dtype_for(bit_depth))
