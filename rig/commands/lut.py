"""``fringecal lut``: turn a measured phase curve (phase.csv) into a linearising lookup table folder."""

from __future__ import annotations

import datetime
import math
import re
import sys

from analysis.config import load_config
from analysis.lut import build_lut
from rig.errors import UsageError
from rig.options import output_folder
from rig.output.lut_files import FILE_NAMES, metadata, write_lut_folder
from rig.output.results import read_phase_csv


def parse_range(text: str) -> float:
    """A phase range in rad from '6.283', '2pi', '1.5pi' or 'pi'; raise UsageError unless finite and > 0."""
    match = re.fullmatch(r"\s*([0-9.eE+-]*)\s*\*?\s*pi\s*", text)
    try:
        value = (float(match.group(1) or 1.0) * math.pi) if match else float(text)
    except ValueError:
        value = math.nan
    if not (math.isfinite(value) and value > 0):
        raise UsageError(f"--range: expected a phase range > 0 rad (e.g. 6.283 or 2pi), got {text!r}")
    return value


def cmd_lut(args) -> int:
    """Build a linearising lookup table from a measured phase curve and write it in five formats.

    Target phases are evenly spaced over [0, range); for each the gray whose phase on the smoothed, monotone
    curve is nearest is chosen. Writes lut.csv, lut.json, lut.npy, lut.mat and lut.txt into --out.
    """
    cfg = load_config(args.config) if args.config else None
    bit_depth = args.bit_depth if args.bit_depth is not None else cfg.modulator.bit_depth if cfg else 8
    if not 1 <= bit_depth <= 16:
        raise UsageError(f"--bit-depth: expected 1 to 16 bits, got {bit_depth}")
    wavelength = args.wavelength_nm if args.wavelength_nm is not None else cfg.laser.wavelength_nm if cfg else None
    if wavelength is not None and not (math.isfinite(wavelength) and wavelength > 0):
        raise UsageError(f"--wavelength-nm: expected a wavelength > 0 nm, got {wavelength}")
    range_rad = None if args.range is None else parse_range(args.range)
    if args.levels is not None and args.levels < 2:
        raise UsageError(f"--levels: expected at least 2 table entries, got {args.levels}")
    out = output_folder(args.out)

    curve = read_phase_csv(args.phase_csv)
    try:
        lut = build_lut(curve.gray, curve.phase_rad, curve.phase_std_rad, bit_depth=bit_depth, levels=args.levels,
                        range_rad=range_rad)
    except ValueError as err:
        raise UsageError(f"PHASE_CSV: {args.phase_csv}: {err}") from None

    out.mkdir(exist_ok=True)
    created = datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")
    write_lut_folder(out, lut, metadata(lut, str(args.phase_csv), created, wavelength))
    g0, g1 = lut.window
    print(f"wrote {out}/{{{','.join(n.removeprefix('lut.') for n in FILE_NAMES)}}}: {lut.levels} levels over "
          f"{lut.range_rad:.4f} rad ({lut.range_rad / math.pi:.3f} pi), grays {g0}..{g1}, "
          f"{lut.distinct_grays} distinct")
    print(f"quantisation phase error: worst {1e3 * lut.worst_quantisation_rad:.1f} mrad, "
          f"RMS {1e3 * lut.rms_quantisation_rad:.1f} mrad; measured curve through the table: RMS linearity error "
          f"{1e3 * lut.rms_linearity_rad:.1f} mrad (measurement std {1e3 * lut.uncertainty_rad:.1f} mrad RMS)")
    for note in lut.notes:
        print(f"note: {note}")
    for warning in lut.warnings:
        print(f"warning: {warning}", file=sys.stderr)
    return 0


def register(command) -> None:
    """Add ``fringecal lut`` to the parser."""
    p = command("lut", cmd_lut, "build a linearising lookup table from a phase.csv")
    p.add_argument("phase_csv", metavar="PHASE_CSV", help="measured curve: gray,phase_rad,phase_std_rad,contrast,n_frames")
    p.add_argument("--out", required=True, metavar="DIR", help="folder for lut.csv/json/npy/mat/txt (made if missing)")
    p.add_argument("--range", metavar="RAD", help="phase range of the table, e.g. 6.283 or 2pi (default 2pi, or the "
                                                  "panel's reach when it is less)")
    p.add_argument("--levels", type=int, metavar="N", help="table entries (default: 2**bit-depth)")
    p.add_argument("--bit-depth", type=int, metavar="BITS", help="panel gray-level bits (default: from --config, else 8)")
    p.add_argument("--wavelength-nm", type=float, metavar="NM", help="wavelength recorded in lut.json "
                                                                     "(default: from --config, if given)")
