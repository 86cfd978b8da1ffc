"""``fringecal plan``: the split-screen geometry for a bench, before a mount is moved."""

from __future__ import annotations

import dataclasses
import json
import math

from analysis.geometry import BAND_FILL, MIN_FRINGES, RECOMMENDED_SAMPLES, plan, setup_from_config
from rig.errors import UsageError
from rig.options import WAVELENGTH, load_bench_config

TRADE_OFF = ("A shorter grating period diffracts at a larger angle, so the beams overlap sooner and the bench is "
             "shorter, but the fringes are finer on the sensor; a longer period needs more distance, and a longer "
             "path is more sensitive to air currents and vibration.")

# BenchSetup field a flag overrides -> what a valid value is
FLAGS = {"wavelength_nm": "a wavelength > 0 nm", "pitch_um": "a panel pixel pitch > 0 um",
         "period_px": "a grating period of at least 2 px", "camera_pixel_um": "a camera pixel pitch > 0 um",
         "distance_mm": "a distance > 0 mm", "beam_radius_mm": "a beam radius > 0 mm"}


def cmd_plan(args) -> int:
    """Plan the split-screen geometry: first-order angle, overlap band, fringe sampling and a working distance.

    Values come from --config (default: the 1064 nm demo bench); flags override them.
    """
    cfg = load_bench_config(args)
    changes = {}
    for field, expected in FLAGS.items():
        value = getattr(args, field)
        if value is None:
            continue
        if not (math.isfinite(value) and (value >= 2 if field == "period_px" else value > 0)):
            raise UsageError(f"--{field.replace('_', '-')}: expected {expected}, got {value:g}")
        changes[field] = value
    setup = dataclasses.replace(setup_from_config(cfg), **changes)
    try:
        result = plan(setup)
    except ValueError as err:
        raise UsageError(f"plan: {err}") from None
    if args.json:
        doc = {k: v for k, v in dataclasses.asdict(result).items() if k not in ("band_mm", "distance_range_mm",
                                                                                 "warnings")}
        doc.update(samples_per_fringe=result.samples_per_fringe, band_low_mm=result.band_mm[0],
                   band_high_mm=result.band_mm[1], distance_min_mm=None, distance_max_mm=None,
                   distance_mm=setup.distance_mm, wavelength_nm=setup.wavelength_nm, period_px=setup.period_px,
                   trade_off=TRADE_OFF, warnings=list(result.warnings))
        if result.distance_range_mm:
            doc.update(distance_min_mm=result.distance_range_mm[0], distance_max_mm=result.distance_range_mm[1])
        print(json.dumps(doc, indent=1))
        return 0
    print(report(setup, result))
    return 0


def report(setup, result) -> str:
    """The plan as lines of text for a person."""
    axis = setup.axis
    rng = result.distance_range_mm
    lines = [
        f"{setup.wavelength_nm:g} nm, grating period {setup.period_px} px x {setup.pitch_um:g} um = "
        f"{setup.period_px * setup.pitch_um:g} um, camera pixels {setup.camera_pixel_um:g} um, "
        f"distance {setup.distance_mm:g} mm",
        f"  first-order angle          {result.first_order_angle_mrad:.2f} mrad",
        f"  order separation at camera {result.order_separation_mm:.3f} mm",
        f"  overlap starts at          {result.overlap_start_mm:.1f} mm (band wider than its edges' diffraction blur)",
        f"  overlap band               {result.overlap_width_mm:.3f} mm wide, {axis} = {result.band_mm[0]:.3f}.."
        f"{result.band_mm[1]:.3f} mm (centre {result.band_center_mm:.3f} mm)",
        f"  fringe period on sensor    {result.fringe_period_um:.2f} um = {result.fringe_period_px:.2f} px "
        f"(samples per fringe; at least {RECOMMENDED_SAMPLES} recommended)",
        f"  fringes across the band    {result.fringes_across_band:.1f}",
        "  working distances          " + (f"{rng[0]:.1f}..{rng[1]:.1f} mm (at least {MIN_FRINGES} fringes, clear of the "
                                           f"edge blur, within the beam and the sensor)" if rng else "none"),
        f"  recommended distance       {result.recommended_distance_mm:.1f} mm (band about {BAND_FILL:.0%} of the "
        f"sensor)",
        f"  recommended period         {result.recommended_period_px} px at "
        f"{result.recommended_period_distance_mm:.1f} mm (shortest even period with at least "
        f"{RECOMMENDED_SAMPLES} samples per fringe)",
        TRADE_OFF,
    ]
    lines += [f"warning: {w}" for w in result.warnings]
    return "\n".join(lines)


def register(command) -> None:
    """Add ``fringecal plan`` to the parser."""
    p = command("plan", cmd_plan, "plan the split-screen geometry: overlap distance, fringe sampling, a distance",
                config="bench config (TOML) the plan starts from (flags override it); default: the 1064 nm demo bench")
    p.add_argument("--wavelength-nm", type=WAVELENGTH, metavar="NM", help="laser wavelength (default: from the config)")
    p.add_argument("--pitch-um", type=float, metavar="UM", help="panel pixel pitch")
    p.add_argument("--period-px", type=int, metavar="P", help="grating period in panel pixels")
    p.add_argument("--camera-pixel-um", type=float, metavar="UM", help="camera pixel pitch")
    p.add_argument("--distance-mm", type=float, metavar="MM", help="panel-to-sensor distance")
    p.add_argument("--beam-radius-mm", type=float, metavar="MM", help="1/e^2 radius of the beam on the panel")
    p.add_argument("--json", action="store_true", help="print the plan as JSON")
