"""Free-space optics of the bench: incident beam, band-limited angular-spectrum propagation, camera sampling.

Propagation follows K. Matsushima and T. Shimobaba, "Band-limited angular spectrum method for numerical simulation
of free-space propagation in far and near fields", Optics Express 17(22), 19662 (2009): the field is zero-padded to
twice its size and spatial frequencies above u_limit = 1 / (lambda sqrt((2 du z)^2 + 1)) are dropped, which removes
the aliasing of the transfer function at long distances. Coordinates are in um from the panel centre,
x to the right and y down, as seen by the camera looking back along the reflected beam; panel column x and camera
x are one axis (no mirror flip). The panel's pixels are flat steps: their aperture's sinc envelope is part of the
transfer function, so a binary grating's orders have Goodman's efficiencies, not those of point samples.

Waves are written exp(i(k.r - w t)): the transfer function is exp(+i k_z z), and a phase exp(+i 2 pi x / L) on the
panel sends the light toward +x (k_x = 2 pi / L > 0).
"""

from __future__ import annotations

import numpy as np
import scipy.fft as sfft
from scipy import ndimage

PLANCK_J_S = 6.62607015e-34
LIGHT_M_S = 299792458.0


def centred_coords_um(n: int, pitch_um: float) -> np.ndarray:
    """Sample-centre coordinates (um) of ``n`` samples at ``pitch_um``, symmetric about zero."""
    return (np.arange(n) - (n - 1) / 2) * pitch_um


def beam_amplitude(x_um: np.ndarray, y_um: np.ndarray, beam) -> np.ndarray:
    """Relative incident amplitude (1 at the beam centre) at panel positions (um from the panel centre).

    ``beam`` is a config ``[simulator.beam]`` section. A flat-top is a super-Gaussian of order 10 (edges a few
    percent of the radius wide, as a real beam shaper gives).
    """
    r2 = (x_um - beam.center_mm[0] * 1e3) ** 2 + (y_um - beam.center_mm[1] * 1e3) ** 2
    w2 = (beam.radius_mm * 1e3) ** 2
    return np.exp(-r2 / w2) if beam.profile == "gaussian" else np.exp(-((r2 / w2) ** 10))


def beam_field(width: int, height: int, pitch_um: float, beam, wavelength_um: float, power_w: float) -> np.ndarray:
    """Incident complex amplitude on the panel grid, scaled so that sum |E|^2 * pitch^2 = ``power_w``.

    ``beam`` is a config ``[simulator.beam]`` section. |E|^2 is an irradiance in W/um^2. A wavefront of radius R
    multiplies the field by exp(+i k r^2 / 2R): with waves exp(i(k z - w t)), R > 0 is a diverging beam.
    """
    x = centred_coords_um(width, pitch_um)[None, :]
    y = centred_coords_um(height, pitch_um)[:, None]
    field = beam_amplitude(x, y, beam).astype(np.complex128)
    if beam.curvature_m:
        k = 2 * np.pi / wavelength_um
        r2 = (x - beam.center_mm[0] * 1e3) ** 2 + (y - beam.center_mm[1] * 1e3) ** 2
        field *= np.exp(1j * k * r2 / (2 * beam.curvature_m * 1e6))
    norm = np.sqrt(power_w / (np.sum(np.abs(field) ** 2) * pitch_um**2))
    return field * norm


def transfer_function(shape: tuple[int, int], pitch_um: float, wavelength_um: float, distance_um: float) -> np.ndarray:
    """Band-limited angular-spectrum transfer function (complex64, FFT order) without the common exp(ikz), for
    fields of flat pixels ``pitch_um`` wide (100 % fill factor)."""
    ny, nx = shape
    fx = sfft.fftfreq(nx, d=pitch_um)[None, :]
    fy = sfft.fftfreq(ny, d=pitch_um)[:, None]
    inv_lam2 = 1.0 / wavelength_um**2
    arg = inv_lam2 - fx**2 - fy**2
    kz_minus_k = 2 * np.pi * (np.sqrt(np.maximum(arg, 0.0)) - 1.0 / wavelength_um)
    # each panel pixel is a flat step one pitch wide, not a point sample: its aperture weights the angular spectrum
    # by sinc(f pitch) in x and y (the rest of its light goes to the pixel grid's own orders, off the grid here)
    h = np.exp(1j * distance_um * kz_minus_k) * np.sinc(fx * pitch_um) * np.sinc(fy * pitch_um)
    lim_x = 1.0 / (wavelength_um * np.sqrt((2 * distance_um / (nx * pitch_um)) ** 2 + 1))
    lim_y = 1.0 / (wavelength_um * np.sqrt((2 * distance_um / (ny * pitch_um)) ** 2 + 1))
    keep = (arg > 0) & (np.abs(fx) < lim_x) & (np.abs(fy) < lim_y)
    return np.where(keep, h, 0).astype(np.complex64)


class Propagator:
    """Propagates panel-grid fields over ``distance_um`` on a twice-padded grid, reusing one transfer function."""

    def __init__(self, width: int, height: int, pitch_um: float, wavelength_um: float, distance_um: float):
        self.shape_in = (height, width)
        self.shape = (sfft.next_fast_len(2 * height), sfft.next_fast_len(2 * width))
        self.offset = ((self.shape[0] - height) // 2, (self.shape[1] - width) // 2)
        self.pitch_um = pitch_um
        self.h = transfer_function(self.shape, pitch_um, wavelength_um, distance_um)

    def __call__(self, field: np.ndarray) -> np.ndarray:
        """Field (complex64) on the padded grid at the far plane; the input sits at ``self.offset``."""
        if field.shape != self.shape_in:
            raise ValueError(f"field: expected shape {self.shape_in}, got {field.shape}")
        padded = np.zeros(self.shape, np.complex64)
        oy, ox = self.offset
        padded[oy:oy + field.shape[0], ox:ox + field.shape[1]] = field
        spec = sfft.fft2(padded, workers=-1)
        spec *= self.h
        return sfft.ifft2(spec, workers=-1, overwrite_x=True)

    def index_of_um(self, x_um: np.ndarray, y_um: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Fractional (row, column) indices on the padded grid of positions (um from the panel centre)."""
        ny, nx = self.shape_in
        col = x_um / self.pitch_um + (nx - 1) / 2 + self.offset[1]
        row = y_um / self.pitch_um + (ny - 1) / 2 + self.offset[0]
        return row, col


def camera_points_um(width: int, height: int, pitch_um: float, offset_mm: tuple[float, float],
                     roll_deg: float) -> tuple[np.ndarray, np.ndarray]:
    """Positions (um) of every camera pixel centre in the beam frame, row-major, for a sensor rolled by ``roll_deg``."""
    u = centred_coords_um(width, pitch_um)[None, :]
    v = centred_coords_um(height, pitch_um)[:, None]
    c, s = np.cos(np.deg2rad(roll_deg)), np.sin(np.deg2rad(roll_deg))
    x = offset_mm[0] * 1e3 + c * u - s * v
    y = offset_mm[1] * 1e3 + s * u + c * v
    return x.ravel(), y.ravel()


class CameraSampler:
    """Samples padded-grid fields at the camera's pixel centres by cubic-spline interpolation."""

    def __init__(self, propagator: Propagator, x_um: np.ndarray, y_um: np.ndarray):
        row, col = propagator.index_of_um(x_um, y_um)
        margin = 4
        self.r0 = max(int(np.floor(row.min())) - margin, 0)
        self.c0 = max(int(np.floor(col.min())) - margin, 0)
        self.r1 = min(int(np.ceil(row.max())) + margin + 1, propagator.shape[0])
        self.c1 = min(int(np.ceil(col.max())) + margin + 1, propagator.shape[1])
        if self.r1 - self.r0 < 2 * margin or self.c1 - self.c0 < 2 * margin:
            raise ValueError("camera: the sensor lies outside the simulated field; check geometry.camera_offset_mm")
        self.coords = np.vstack([row - self.r0, col - self.c0])

    def __call__(self, far_field: np.ndarray) -> np.ndarray:
        """Complex field (complex64) at each camera pixel, flattened row-major."""
        crop = far_field[self.r0:self.r1, self.c0:self.c1]
        re = ndimage.map_coordinates(crop.real, self.coords, order=3, mode="constant")
        im = ndimage.map_coordinates(crop.imag, self.coords, order=3, mode="constant")
        return (re + 1j * im).astype(np.complex64)


def photons_per_joule(wavelength_um: float) -> float:
    """Photons in one joule of light at ``wavelength_um``."""
    return wavelength_um * 1e-6 / (PLANCK_J_S * LIGHT_M_S)
