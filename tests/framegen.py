"""Split-screen fringe frames from an analytic model, independent of the bench simulator, with exact truth (numpy only).

Light (electrons per pixel over the exposure): a mirror beam and a first-order beam, each a Gaussian with its own
centre and 1/e^2 radius; the mirror beam is cut by the image of the split line, a soft, slightly tilted edge with an
erf profile. They interfere with a coherence factor ``coherence`` (polarisation, partial coherence):

    I = I1 m + I2 + S + 2 coherence sqrt(I1 m I2) cos(Phi + phi) [+ ghost]

with S a stray-light background with linear gradients and Phi(x, y) = 2 pi (fx x' + fy y') + chirp x'^2 + curve y'^2,
x', y' measured from the reference point, the centre of the band the analysis reads. phi is the fringe phase: the
mirror field is multiplied by exp(+i phi) (the project's sign convention), so the interference term moves by +phi,
and the truth of a frame is phi at the reference point. A coherent ghost is a constant field at the mirror angle
(a cover-glass reflection) of amplitude ``ghost`` times the mirror beam's: it beats with the first order at the
carrier with its own fixed phase ``ghost_phase_rad``.

Sensor (EMVA 1288 photon transfer, from memory): Poisson electrons capped at the full well, Gaussian read noise in
electrons, conversion gain K (ADU per electron), an offset, rounding, and the ADC's full scale. The expected count
of a pixel is offset + K I (rounding is unbiased to 1/12 ADU^2) and its variance K (mu - offset) + K^2 read^2 + 1/12
ADU^2, which is what the Cramér–Rao bound in test_framegen_estimators.py uses.

Each ``Kind`` is a scene plus a list of levels (phase, mirror-beam scale, contrast factor): the same scene at
different mirror grays, as a sweep sees it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
from scipy import special


@dataclass(frozen=True)
class Sensor:
    """Camera: conversion gain (ADU/e), read noise (e rms), offset (ADU), bit depth, full well (e)."""

    gain_adu_per_e: float = 0.25
    read_noise_e: float = 6.0
    offset_adu: float = 40.0
    bit_depth: int = 12
    full_well_e: float = 20000.0

    @property
    def full_scale(self) -> int:
        return 2**self.bit_depth - 1

    def variance_adu2(self, mean_adu: np.ndarray) -> np.ndarray:
        """Pixel noise variance (ADU^2) at expected count ``mean_adu``: shot, read and rounding noise."""
        k = self.gain_adu_per_e
        return k * np.maximum(mean_adu - self.offset_adu, 0.0) + (k * self.read_noise_e) ** 2 + 1 / 12


@dataclass(frozen=True)
class Level:
    """One frame's truth: fringe phase (rad) at the reference point, mirror-beam intensity scale, contrast factor."""

    phase_rad: float
    mirror_scale: float = 1.0
    contrast: float = 1.0


@dataclass(frozen=True)
class Kind:
    """A scene (geometry, light, fringes, sensor) and the levels to render it at."""

    name: str
    shape: tuple[int, int] = (220, 400)
    band: tuple[int, int, int, int] = (40, 360, 25, 195)  # x0, x1, y0, y1 of the rectangle the analysis reads
    period_px: float = 10.6
    angle_deg: float = 1.5
    mirror_e: float = 3000.0          # peak electrons of the mirror beam
    mirror_centre: tuple[float, float] = (0.47, 0.52)  # (x, y) as fractions of the frame
    mirror_radius: float = 0.55       # 1/e^2 radius as a fraction of the frame width
    first_e: float = 2000.0
    first_centre: tuple[float, float] = (0.56, 0.45)
    first_radius: float = 0.42
    coherence: float = 0.97
    stray_e: float = 300.0
    stray_gradient: tuple[float, float] = (0.4, -0.25)  # relative change across the frame in x and y
    edge_x: float = 0.95              # the split line's image (fraction of width), mirror light to its left
    edge_tilt_deg: float = 2.0
    edge_softness_px: float = 8.0
    chirp_rad_px2: float = 0.0
    curve_rad_px2: float = 0.0
    ghost: float = 0.0
    ghost_phase_rad: float = 0.7
    sensor: Sensor = field(default_factory=Sensor)
    levels: tuple[Level, ...] = ()

    @property
    def reference_xy(self) -> tuple[float, float]:
        """The reference point (px): the band's centre, where the estimators put theta = 0."""
        x0, x1, y0, y1 = self.band
        return (x0 + x1 - 1) / 2, (y0 + y1 - 1) / 2


def _phases(n: int, span: float = 2 * math.pi, start: float = -2.9) -> tuple[float, ...]:
    return tuple(start + span * i / n for i in range(n))


def kinds() -> dict[str, Kind]:
    """The eleven kinds: ten a lab meets, and a coherent ghost."""
    base = Kind("clean", levels=tuple(Level(p) for p in _phases(6)))
    rng = np.random.default_rng(12)
    vib = tuple(Level(p + float(rng.normal(0, 0.3)), contrast=math.exp(-0.15**2 / 2)) for p in _phases(6))
    # Drift: piston 0.4 rad and scale +3 % over the sequence, laser power -10 %; references at phase 0 between.
    drift = []
    for i, p in enumerate(_phases(5)):
        t = i / 4
        for q in (0.0, p):
            drift.append(Level((1 + 0.03 * t) * q + 0.4 * t, mirror_scale=1 - 0.1 * t))
    four_pi = tuple(Level(math.remainder(p, 2 * math.pi)) for p in _phases(6, 4 * math.pi, 0.1))
    steep = tuple(Level(math.remainder(3.2 * g, 2 * math.pi)) for g in (0.0, 0.35, 0.7, 1.05, 1.4, 1.75))
    gray_amp = tuple(Level(p, mirror_scale=s) for p, s in zip(_phases(6), (1.0, 0.8, 0.55, 0.4, 0.6, 0.9)))
    return {k.name: k for k in (
        base,
        replace(base, name="low light", mirror_e=120.0, first_e=80.0, stray_e=15.0),
        replace(base, name="vibration", levels=vib),
        replace(base, name="drift", levels=tuple(drift)),
        replace(base, name="chirped period", chirp_rad_px2=1.0 / 160**2, curve_rad_px2=0.5 / 85**2),
        replace(base, name="4pi panel", levels=four_pi),
        replace(base, name="steep curve", levels=steep, period_px=7.4, angle_deg=-3.0),
        replace(base, name="clipping crests", mirror_e=6200.0, first_e=4300.0),
        replace(base, name="gray-dependent amplitude", levels=gray_amp),
        replace(base, name="1200x1920", shape=(1200, 1920), band=(640, 1280, 100, 1100), period_px=12.3,
                angle_deg=0.8, mirror_radius=0.3, first_radius=0.24, edge_x=0.7),
        replace(base, name="ghost", ghost=0.06),
    )}


def components_e(kind: Kind, level: Level, band_only: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Expected electrons per pixel of ``kind`` at ``level``: (background, fringe term), before the full well; of
    the whole frame or, with ``band_only``, of the band alone."""
    h, w = kind.shape
    x0, x1, y0, y1 = kind.band if band_only else (0, w, 0, h)
    y, x = np.mgrid[y0:y1, x0:x1].astype(np.float64)
    xr, yr = kind.reference_xy

    def gauss(peak, centre, radius):
        r = radius * w
        return peak * np.exp(-2 * ((x - centre[0] * w) ** 2 + (y - centre[1] * h) ** 2) / r**2)

    tilt = math.tan(math.radians(kind.edge_tilt_deg))
    edge = 0.5 * special.erfc((x - kind.edge_x * w - tilt * (y - h / 2)) / (math.sqrt(2) * kind.edge_softness_px))
    mirror = level.mirror_scale * gauss(kind.mirror_e, kind.mirror_centre, kind.mirror_radius) * edge
    first = gauss(kind.first_e, kind.first_centre, kind.first_radius)
    gx, gy = kind.stray_gradient
    background = mirror + first + kind.stray_e * (1 + gx * (x / w - 0.5) + gy * (y / h - 0.5))
    f = 1 / kind.period_px
    a = math.radians(kind.angle_deg)
    xp, yp = x - xr, y - yr
    carrier = 2 * np.pi * f * (math.cos(a) * xp + math.sin(a) * yp) + kind.chirp_rad_px2 * xp**2 \
        + kind.curve_rad_px2 * yp**2
    fringe = 2 * kind.coherence * level.contrast * np.sqrt(mirror * first) * np.exp(1j * level.phase_rad)
    if kind.ghost:
        # A constant field over the whole aperture at the mirror beam's angle, ``ghost`` times the mirror beam's peak
        # amplitude: it beats with the mirror beam (no fringes: same angle) and with the first order at the carrier.
        g = kind.ghost**2 * kind.mirror_e * level.mirror_scale
        background = background + g + 2 * np.sqrt(g * mirror) * np.cos(level.phase_rad - kind.ghost_phase_rad)
        fringe = fringe + 2 * np.sqrt(g * first) * np.exp(1j * kind.ghost_phase_rad)
    return background, np.real(fringe * np.exp(1j * carrier))


def light_e(kind: Kind, level: Level, band_only: bool = False) -> np.ndarray:
    """Expected electrons per pixel of ``kind`` at ``level`` (before the full well), see components_e."""
    background, fringe = components_e(kind, level, band_only)
    return background + fringe


def draw(kind: Kind, electrons: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """One noisy uint16 frame from expected ``electrons`` (any sub-array of light_e's)."""
    s = kind.sensor
    e = np.minimum(rng.poisson(electrons).astype(np.float64), s.full_well_e)
    counts = np.rint(s.offset_adu + s.gain_adu_per_e * (e + rng.normal(0.0, s.read_noise_e, e.shape)))
    return np.clip(counts, 0, s.full_scale).astype(np.uint16)


def phase_bound_rad(d_phase: np.ndarray, nuisance: list[np.ndarray], information: np.ndarray) -> float:
    """Cramér–Rao bound (rad) of a phase from independent pixels: sqrt([J^-1]_00), J = sum_i info_i g_i g_i^T.

    g_i = (d mu_i / d phi, d mu_i / d nu_1, ...) are the derivatives of each pixel's expected count with respect to
    the phase and the nuisance parameters estimated with it; info_i is the pixel's Fisher information per unit
    mean, 1 / variance for Gaussian noise (S. M. Kay, Fundamentals of Statistical Signal Processing: Estimation
    Theory, 1993, ch. 3, the general Gaussian case with the variance not depending on the parameters, and the
    inverse of the full Fisher matrix for nuisance parameters; from memory). For Poisson counts the same sum with
    variance = mean is exact.
    """
    g = np.stack([d_phase.ravel()] + [n.ravel() for n in nuisance])
    fisher = (g * information.ravel()) @ g.T
    return math.sqrt(float(np.linalg.inv(fisher)[0, 0]))


def censored_information(mean_adu: np.ndarray, var_adu2: np.ndarray, full_scale: float) -> np.ndarray:
    """Fisher information about a pixel's mean (1/ADU^2) when counts above ``full_scale`` read as full scale.

    A Gaussian reading censored at c, z = (c - mu) / sigma: I = [Phi(z) - z phi(z) + phi(z)^2 / (1 - Phi(z))] /
    sigma^2 (the Tobit model's information, common practice; from memory): 1 / sigma^2 far below full scale, 0 far
    above it, 0.82 / sigma^2 for a mean right at it.
    """
    sigma = np.sqrt(var_adu2)
    z = (full_scale - mean_adu) / sigma
    pdf = np.exp(-0.5 * z**2) / math.sqrt(2 * math.pi)
    # phi / (1 - Phi) through erfcx keeps the ratio finite far below full scale.
    hazard = math.sqrt(2 / math.pi) / special.erfcx(z / math.sqrt(2))
    return (special.ndtr(z) - z * pdf + pdf * hazard) / var_adu2


def frame_bound_rad(kind: Kind, level: Level, step_rad: float = 1e-4) -> float:
    """Cramér–Rao bound (rad) of ``level``'s fringe phase from the band's pixels of ``kind``.

    Nuisance parameters: a scale of the background (beams, stray light) and a scale of the fringe amplitude, the two
    an estimator must find in every frame; the beams' shapes and the fringes' geometry are taken as known, so the
    bound is the least phase noise any estimator reading the band can have. Pixel variance from the sensor's photon
    transfer (Sensor.variance_adu2), with the full scale's censoring (censored_information).
    """
    s = kind.sensor

    def counts(phase):
        bg, fr = components_e(kind, replace(level, phase_rad=phase), band_only=True)
        return s.gain_adu_per_e * bg, s.gain_adu_per_e * fr

    bg, fr = counts(level.phase_rad)
    mean = s.offset_adu + np.minimum(bg + fr, s.gain_adu_per_e * s.full_well_e)
    d_phase = (sum(counts(level.phase_rad + step_rad)) - sum(counts(level.phase_rad - step_rad))) / (2 * step_rad)
    info = censored_information(mean, s.variance_adu2(mean), s.full_scale)
    return phase_bound_rad(d_phase, [bg, fr], info)


@dataclass(frozen=True)
class Trial:
    """How an estimator did on a kind: rms error and noise scatter over the bound, stated std over the scatter.

    ``ratio`` is the rms error against the truth after removing one offset common to all frames (the estimators
    report the phase of a band average, not of the reference point) over the rms bound: it includes any error
    that depends on the phase or the brightness. ``noise_ratio`` keeps only the scatter about each level's own
    mean. ``honesty`` is the rms stated std over that scatter (1 when honest). ``spread_rad`` is the peak-to-peak
    of the levels' mean errors.
    """

    ratio: float
    noise_ratio: float
    honesty: float
    spread_rad: float
    bound_rad: float


def trial(kind: Kind, make_estimator, draws: int, rng: np.random.Generator) -> Trial:
    """Run an estimator on ``draws`` noisy frames of each of ``kind``'s levels (band crops) and score it.

    ``make_estimator(first_crop)`` returns a function crop -> estimate (with .phase_rad and .std_rad); it sees the
    first noisy crop first, as an analysis that finds the carrier once per sweep does.
    """
    errors, stds, bounds = [], [], []
    estimator = None
    for level in kind.levels:
        electrons = light_e(kind, level, band_only=True)
        bounds.append(frame_bound_rad(kind, level))
        row, srow = [], []
        for _ in range(draws):
            crop = draw(kind, electrons, rng)
            estimator = estimator or make_estimator(crop)
            e = estimator(crop)
            row.append(e.phase_rad - level.phase_rad)
            srow.append(e.std_rad)
        errors.append(row)
        stds.append(srow)
    err = np.angle(np.exp(1j * np.array(errors)))
    err = np.angle(np.exp(1j * (err - np.angle(np.mean(np.exp(1j * err))))))
    means = err.mean(axis=1, keepdims=True)
    scatter = float(np.sqrt(np.mean((err - means) ** 2) * draws / (draws - 1)))
    bound = float(np.sqrt(np.mean(np.square(bounds))))
    return Trial(float(np.sqrt(np.mean(err**2))) / bound, scatter / bound,
                 float(np.sqrt(np.mean(np.square(stds)))) / scatter, float(np.ptp(means)), bound)
