"""Bench geometry planner: where the grating's first order meets the mirror half, and what the camera sees there.

Coordinates run along the split line's normal (x for a vertical split, y for a horizontal one), in mm from the
reflected beam axis through the panel centre, as ``geometry.camera_offset_mm`` does. The sensor is taken normal to
the mirror half's reflected beam; angles are from that beam (the small incidence angle on the panel is ignored).

The physics: the grating half diffracts its first order at sin(theta) = lambda / period (grating equation); the
order that heads across the split line is a copy of the grating half's beam sheared by z tan(theta) at distance z,
and where it lies on the mirror half's beam the two make straight fringes of period lambda / sin(theta) = period.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

MIN_SAMPLES = 3          # below 3 samples per fringe the fringe phase is under-sampled (Shannon needs > 2)
RECOMMENDED_SAMPLES = 4  # 4 or more samples per fringe: common practice for fringe analysis
MIN_FRINGES = 10         # fewest whole fringes across the band for a Fourier fringe analysis to find its carrier
BAND_FILL = 0.5          # recommended band width as a fraction of the sensor: both edges in view with room to spare


@dataclass(frozen=True)
class BenchSetup:
    """What the planner needs, along the split line's normal.

    ``panel_px`` and ``sensor_px`` count pixels along that normal; ``split_position`` is the split line as a fraction
    of the panel; ``grating_positive`` is True when the grating half lies on the positive side (right or bottom);
    ``beam_radius_mm`` is the incident beam's 1/e^2 radius, taken as its edge, and ``beam_center_mm`` its centre from
    the panel centre; ``camera_center_mm`` is where the sensor centre sits; ``axis`` names the normal (x or y).
    """

    wavelength_nm: float
    pitch_um: float
    period_px: int
    panel_px: int
    split_position: float
    grating_positive: bool
    beam_radius_mm: float
    beam_center_mm: float
    camera_pixel_um: float
    sensor_px: int
    camera_center_mm: float
    distance_mm: float
    axis: str = "x"


@dataclass(frozen=True)
class BenchPlan:
    """The planner's figures for one setup (angles mrad, lengths mm unless the name says um or px).

    ``band_mm`` is the overlap band at the camera (low, high edge along the normal); ``distance_range_mm`` the
    distances meeting every constraint (None when none does); ``recommended_period_px`` the shortest even period
    sampled by at least four camera pixels per fringe, and ``recommended_period_distance_mm`` its distance.
    """

    first_order_angle_mrad: float
    order_separation_mm: float
    overlap_start_mm: float
    overlap_width_mm: float
    band_mm: tuple[float, float]
    band_center_mm: float
    fringe_period_um: float
    fringe_period_px: float
    fringes_across_band: float
    distance_range_mm: tuple[float, float] | None
    recommended_distance_mm: float
    recommended_period_px: int
    recommended_period_distance_mm: float
    warnings: tuple[str, ...]

    @property
    def samples_per_fringe(self) -> float:
        """Camera pixels per fringe period: the fringe period in px."""
        return self.fringe_period_px


def setup_from_config(cfg) -> BenchSetup:
    """A BenchSetup from a bench Config (``analysis.config``)."""
    m, p, cam, geo = cfg.modulator, cfg.pattern, cfg.camera, cfg.geometry
    vertical = p.split == "vertical"
    beam = cfg.simulator.beam
    return BenchSetup(
        wavelength_nm=cfg.laser.wavelength_nm, pitch_um=m.pitch_um, period_px=p.grating_period_px,
        panel_px=m.width_px if vertical else m.height_px, split_position=p.split_position,
        grating_positive=p.grating_side in ("right", "bottom"), beam_radius_mm=beam.radius_mm,
        beam_center_mm=beam.center_mm[0 if vertical else 1], camera_pixel_um=cam.pitch_um,
        sensor_px=cam.width_px if vertical else cam.height_px,
        camera_center_mm=geo.camera_offset_mm[0 if vertical else 1], distance_mm=geo.distance_mm,
        axis="x" if vertical else "y")


def first_order_angle_rad(wavelength_nm: float, period_um: float) -> float:
    """First-order diffraction angle (rad) from the grating equation sin(theta) = lambda / period."""
    ratio = wavelength_nm * 1e-3 / period_um
    if not 0 < ratio < 1:
        raise ValueError(f"period: expected a grating period longer than the wavelength {wavelength_nm:g} nm, "
                         f"got {period_um:g} um (no first order)")
    return math.asin(ratio)


def fringe_period_um(wavelength_nm: float, angle_rad: float) -> float:
    """Fringe period (um) of two plane waves meeting at ``angle_rad``, on a sensor normal to one of them."""
    return wavelength_nm * 1e-3 / math.sin(angle_rad)


def split_mm(s: BenchSetup) -> float:
    """Split line (mm from the panel centre): the edge before the first pixel of the second half."""
    return (round(s.split_position * s.panel_px) - s.panel_px / 2) * s.pitch_um * 1e-3


def half_extents_mm(s: BenchSetup) -> tuple[float, float]:
    """Illuminated extent (mm) of the mirror and grating halves from the split line: the beam clipped to the panel."""
    half_panel = s.panel_px * s.pitch_um * 1e-3 / 2
    split = split_mm(s)
    low = max(s.beam_center_mm - s.beam_radius_mm, -half_panel)
    high = min(s.beam_center_mm + s.beam_radius_mm, half_panel)
    mirror, grating = (split - low, high - split) if s.grating_positive else (high - split, split - low)
    return mirror, grating


def band_at(s: BenchSetup, distance_mm: float, angle_rad: float) -> tuple[float, float]:
    """Overlap band (low, high edge, mm along the normal) at ``distance_mm``; empty bands have high <= low."""
    mirror, grating = half_extents_mm(s)
    split = split_mm(s)
    shear = distance_mm * math.tan(angle_rad)
    # measured from the split line into the mirror half: the sheared grating half covers [shear - grating, shear]
    near, far = max(0.0, shear - grating), min(shear, mirror)
    if s.grating_positive:
        return split - far, split - near
    return split + near, split + far


def plan(s: BenchSetup) -> BenchPlan:
    """Plan the split-screen geometry for ``s``; see the module docstring for the physics.

    The halves share an edge, so geometrically the sheared first order touches the mirror half from z = 0 on. What a
    camera can use starts once the band is wider than the diffraction blur of its two edges (the split line's edge
    and its sheared image), about sqrt(lambda z) each: z tan(theta) >= 2 sqrt(lambda z), so the overlap start is
    z0 = 4 lambda / tan^2(theta). The band then widens as z tan(theta) until the beam limits it, at
    z tan(theta) = the smaller illuminated half. Distances must also give ``MIN_FRINGES`` fringes across the band
    and keep the band on the sensor; the recommended distance makes the band ``BAND_FILL`` of the sensor.
    """
    for name in ("wavelength_nm", "pitch_um", "beam_radius_mm", "camera_pixel_um", "distance_mm"):
        value = getattr(s, name)
        if not (math.isfinite(value) and value > 0):
            raise ValueError(f"{name}: expected a positive number, got {value!r}")
    if s.period_px < 2:
        raise ValueError(f"period_px: expected a grating period of at least 2 px, got {s.period_px!r}")
    mirror, grating = half_extents_mm(s)
    if min(mirror, grating) <= 0:
        raise ValueError(f"beam_center_mm: the beam ({s.beam_radius_mm:g} mm radius at {s.beam_center_mm:g} mm) "
                         f"misses the {'mirror' if mirror <= 0 else 'grating'} half")
    period_um = s.period_px * s.pitch_um
    theta = first_order_angle_rad(s.wavelength_nm, period_um)
    fringe_um = fringe_period_um(s.wavelength_nm, theta)
    samples = fringe_um / s.camera_pixel_um
    sensor_mm = s.sensor_px * s.camera_pixel_um * 1e-3

    start, lo, hi, recommended = _distances_mm(s, s.period_px)
    band = band_at(s, s.distance_mm, theta)
    width = max(band[1] - band[0], 0.0)

    warnings = []
    if samples < 2:
        warnings.append(f"{samples:.2f} samples per fringe is below the Nyquist limit of 2: the fringes alias; "
                        f"use a longer grating period (at least {RECOMMENDED_SAMPLES} samples recommended)")
    elif samples < MIN_SAMPLES:
        warnings.append(f"{samples:.2f} samples per fringe under-samples the fringes (below {MIN_SAMPLES}); "
                        f"use a longer grating period (at least {RECOMMENDED_SAMPLES} recommended)")
    elif samples < RECOMMENDED_SAMPLES:
        warnings.append(f"{samples:.2f} samples per fringe: at least {RECOMMENDED_SAMPLES} are recommended")
    if lo > hi:
        warnings.append(f"no distance meets every constraint: the band needs {lo:.1f} mm to hold {MIN_FRINGES} "
                        f"fringes past the edge blur, but the beam or sensor limits it from {hi:.1f} mm; "
                        f"use a shorter grating period or a larger beam")
    elif not lo <= s.distance_mm <= hi:
        warnings.append(f"distance {s.distance_mm:g} mm is outside the working range {lo:.1f}..{hi:.1f} mm")
    cam_lo, cam_hi = s.camera_center_mm - sensor_mm / 2, s.camera_center_mm + sensor_mm / 2
    if width > 0 and (band[0] < cam_lo or band[1] > cam_hi):
        warnings.append(f"the band {band[0]:.2f}..{band[1]:.2f} mm is not all on the sensor ({cam_lo:.2f}.."
                        f"{cam_hi:.2f} mm); centre the camera at {(band[0] + band[1]) / 2:.2f} mm")

    twin = _twin_orders_mm(s, theta)
    if twin and twin[0] < cam_hi and twin[1] > cam_lo:
        warnings.append(f"the grating half's +1 and -1 orders still overlap at {twin[0]:.2f}..{twin[1]:.2f} mm, on "
                        f"the sensor: fringes of half the period there; keep the analysis inside the band or move "
                        f"further than {half_extents_mm(s)[1] / (2 * math.tan(theta)):.0f} mm")
    best_period = _shortest_period(s)
    return BenchPlan(
        first_order_angle_mrad=1e3 * theta, order_separation_mm=s.distance_mm * math.tan(theta), overlap_start_mm=start,
        overlap_width_mm=width, band_mm=band, band_center_mm=(band[0] + band[1]) / 2, fringe_period_um=fringe_um,
        fringe_period_px=samples, fringes_across_band=width * 1e3 / fringe_um,
        distance_range_mm=(lo, hi) if lo <= hi else None, recommended_distance_mm=recommended,
        recommended_period_px=best_period, recommended_period_distance_mm=_distances_mm(s, best_period)[3], warnings=tuple(warnings))


def _twin_orders_mm(s: BenchSetup, angle_rad: float) -> tuple[float, float] | None:
    """Where the grating half's +1 and -1 orders overlap each other (mm, low and high edge), or None.

    Each is the grating half shifted by z tan(theta), one either way, so they overlap until 2 z tan(theta) exceeds
    the grating half's illuminated extent.
    """
    grating = half_extents_mm(s)[1]
    shear = s.distance_mm * math.tan(angle_rad)
    if 2 * shear >= grating:
        return None
    split = split_mm(s)
    near, far = shear, grating - shear  # from the split line into the grating half
    return (split + near, split + far) if s.grating_positive else (split - far, split - near)


def _distances_mm(s: BenchSetup, period_px: int) -> tuple[float, float, float, float]:
    """Overlap start, working range (low, high) and recommended distance (mm) for a grating period."""
    theta = first_order_angle_rad(s.wavelength_nm, period_px * s.pitch_um)
    tan = math.tan(theta)
    fringe_mm = fringe_period_um(s.wavelength_nm, theta) * 1e-3
    sensor_mm = s.sensor_px * s.camera_pixel_um * 1e-3
    start = 4 * s.wavelength_nm * 1e-6 / tan**2
    lo = max(start, MIN_FRINGES * fringe_mm / tan)
    hi = min(min(half_extents_mm(s)), sensor_mm) / tan
    return start, lo, hi, min(max(BAND_FILL * sensor_mm / tan, lo), hi)


def _shortest_period(s: BenchSetup) -> int:
    """Shortest even period (px) with at least RECOMMENDED_SAMPLES camera pixels per fringe and a first order.

    Even, because the binary grating's stripes are then equal (50 % duty), which leaves out its even orders.
    """
    period = 2
    while (period * s.pitch_um < RECOMMENDED_SAMPLES * s.camera_pixel_um
           or period * s.pitch_um <= s.wavelength_nm * 1e-3):
        period += 2
    return period
