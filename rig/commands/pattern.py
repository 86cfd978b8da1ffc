"""``fringecal pattern``: a panel-sized phase pattern turned into gray levels through a lookup table, as a PNG."""

from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np

from analysis.patterns import (blazed_phase, layout_of, lens_phase, phase_to_gray, split_screen, vortex_phase)
from rig.atomic import write_atomic
from rig.errors import UsageError
from rig.options import load_bench_config
from rig.output.lut_files import read_lut_folder

KINDS = ("blazed", "lens", "vortex", "split")


def pattern_phase(kind: str, cfg, args, wavelength_nm: float) -> np.ndarray:
    """Phase (rad) of the requested kind on the configured panel (every kind but split)."""
    m = cfg.modulator
    if kind == "blazed":
        if args.period_px == 0 or not math.isfinite(args.period_px):
            raise UsageError(f"--period-px: expected a finite non-zero period, got {args.period_px}")
        return blazed_phase(m.width_px, m.height_px, args.period_px, args.angle_deg)
    if kind == "lens":
        if args.focal_mm is None or args.focal_mm == 0 or not math.isfinite(args.focal_mm):
            raise UsageError("--focal-mm: expected a finite non-zero focal length (mm) for --kind lens")
        return lens_phase(m.width_px, m.height_px, args.focal_mm, wavelength_nm, m.pitch_um)
    return vortex_phase(m.width_px, m.height_px, args.charge)


def cmd_pattern(args) -> int:
    """Write a panel-sized pattern through a lookup table: blazed grating, lens, vortex or split screen.

    The panel's size and pitch come from --config (default: the 1064 nm demo), the gray-level depth and phase
    range from the table. 8-bit panels get an 8-bit PNG, deeper ones a 16-bit PNG holding the gray levels.
    """
    import cv2

    table = read_lut_folder(args.lut)
    cfg = load_bench_config(args)
    m = cfg.modulator
    if args.config and m.bit_depth != table.bit_depth:
        raise UsageError(f"--lut: the table is for a {table.bit_depth}-bit panel, --config describes a "
                         f"{m.bit_depth}-bit one")
    if Path(args.out).suffix.lower() != ".png":
        raise UsageError(f"--out: expected a .png file name, got {args.out}")
    out = Path(args.out)
    if not out.parent.exists():
        raise UsageError(f"--out: folder {out.parent} does not exist")
    wavelength = cfg.laser.wavelength_nm
    if table.wavelength_nm is not None and abs(table.wavelength_nm - wavelength) > 0.5:
        print(f"warning: the table was made at {table.wavelength_nm:g} nm, the config says {wavelength:g} nm",
              file=sys.stderr)

    def gray(phase):
        return phase_to_gray(phase, table.bit_depth, table.gray, table.range_rad)

    if args.kind == "split":
        p = cfg.pattern
        low, high, mirror = (int(gray(np.array(v))) for v in (0.0, math.pi, args.mirror_phase))
        image = split_screen(m.width_px, m.height_px, mirror, low, high, layout_of(p), table.bit_depth)
        what = (f"split screen, mirror at {args.mirror_phase:.3f} rad (gray {mirror}), {p.grating_period_px} px "
                f"grating 0/pi (grays {low}/{high})")
    else:
        image = gray(pattern_phase(args.kind, cfg, args, wavelength))
        if args.kind == "blazed":
            what = f"blazed grating, period {args.period_px:g} px at {args.angle_deg:g} deg"
        elif args.kind == "lens":
            what = f"lens, focal length {args.focal_mm:g} mm at {wavelength:g} nm"
        else:
            what = f"vortex of charge {args.charge}"
    ok, png = cv2.imencode(".png", image)
    if not ok:
        raise UsageError(f"--out: could not encode {out}")
    write_atomic(out, png.tobytes())
    print(f"wrote {out}: {m.width_px}x{m.height_px} px, {8 if image.dtype == np.uint8 else 16}-bit PNG of a "
          f"{table.bit_depth}-bit {what} through {args.lut} ({table.gray.size} levels over {table.range_rad:.3f} rad);"
          f" grays {int(image.min())}..{int(image.max())}")
    return 0


def register(command) -> None:
    """Add ``fringecal pattern`` to the parser."""
    p = command("pattern", cmd_pattern, "write a phase pattern through a lookup table as a PNG for the panel",
                config="bench config (TOML) giving the panel size; default: the 1064 nm demo bench")
    p.add_argument("--lut", required=True, metavar="DIR", help="table folder written by 'fringecal lut'")
    p.add_argument("--kind", required=True, choices=KINDS, help="what to draw")
    p.add_argument("--out", required=True, metavar="FILE.png", help="PNG to write")
    p.add_argument("--period-px", type=float, default=8.0, metavar="P", help="blazed: period (default 8 px)")
    p.add_argument("--angle-deg", type=float, default=0.0, metavar="DEG",
                   help="blazed: grating vector from +x (default 0)")
    p.add_argument("--focal-mm", type=float, metavar="F", help="lens: focal length (negative: diverging)")
    p.add_argument("--charge", type=int, default=1, metavar="L", help="vortex: topological charge (default 1)")
    p.add_argument("--mirror-phase", type=float, default=0.0, metavar="RAD",
                   help="split: phase of the mirror half (default 0); the grating half is a 0/pi grating")
