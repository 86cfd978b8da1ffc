"""``fringecal lut``: turn a measured phase curve (phase.csv) into a linearising lookup table folder; with
``--temperature-c``, the table for a panel temperature from runs at two or more temperatures."""

from __future__ import annotations

import datetime
import math
import re
import sys

import numpy as np

from analysis.config import load_config
from analysis.lut import build_lut
from analysis.thermal import TemperatureRun, predict_temperature
from rig.atomic import write_atomic
from rig.errors import UsageError
from rig.options import check_wavelength_nm, output_folder
from rig.output.provenance import claim_output, source_of
from rig.output.lut_files import FILE_NAMES, metadata, write_lut_folder
from rig.output.results import read_phase_csv
from rig.output.runs import Result, bit_depth_of, read_result


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


MAX_REVERSAL_RAD, MAX_REVERSAL_STD = 1.0, 5.0


def check_monotone(curve, source) -> None:
    """Refuse (UsageError naming the row) a curve that goes back against its direction by more than
    MAX_REVERSAL_RAD and MAX_REVERSAL_STD standard deviations: a glitch that a table would hide."""
    phase, std = curve.phase_rad, curve.phase_std_rad
    direction = np.sign(phase[-1] - phase[0]) or 1.0
    back = -np.diff(phase) * direction
    limit = np.maximum(MAX_REVERSAL_RAD, MAX_REVERSAL_STD * np.hypot(std[:-1], std[1:]))
    bad = np.flatnonzero(back > limit)
    if bad.size:
        i = int(bad[0]) + 1
        word = "rising" if direction > 0 else "falling"
        raise UsageError(f"PHASE_CSV: {source} lines {i + 1}-{i + 2}: from gray {curve.gray[i - 1]} to gray "
                         f"{curve.gray[i]} the phase goes back {back[i - 1]:.2f} rad against the curve's {word} "
                         "direction; expected a monotone curve (remeasure those grays, or remove the bad row)")


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
    if wavelength is not None:
        check_wavelength_nm(wavelength, "--wavelength-nm")
    range_rad = None if args.range is None else parse_range(args.range)
    if args.levels is not None and args.levels < 2:
        raise UsageError(f"--levels: expected at least 2 table entries, got {args.levels}")
    out = output_folder(args.out)
    if args.temperature_c is not None:
        return _temperature_table(args, out, range_rad)
    if len(args.phase_csv) != 1:
        raise UsageError(f"PHASE_CSV: expected one curve (several runs only with --temperature-c), "
                         f"got {len(args.phase_csv)}")
    source = args.phase_csv[0]

    curve = read_phase_csv(source)
    check_monotone(curve, source)
    try:
        lut = build_lut(curve.gray, curve.phase_rad, curve.phase_std_rad, bit_depth=bit_depth, levels=args.levels,
                        range_rad=range_rad)
    except ValueError as err:
        raise UsageError(f"PHASE_CSV: {source}: {err}") from None

    claim_output(out, source_of(source), args.force)
    out.mkdir(exist_ok=True)
    created = datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")
    write_lut_folder(out, lut, metadata(lut, str(source), created, wavelength))
    _print_table(out, lut)
    return 0


def _print_table(out, lut) -> None:
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


def run_temperature_c(result: Result) -> tuple[float, str]:
    """A run's panel temperature (C) and where it comes from: the probe's mean, or a simulated panel's setting."""
    info = result.info
    if info.get("temperature_c") is not None:
        return float(info["temperature_c"]), "probe"
    if info.get("devices", {}).get("camera_backend") == "sim" and "config" in info:
        return float(info["config"]["simulator"]["response"]["temperature_c"]), "simulated panel"
    raise UsageError(f"RUN_DIR: {result.label} records no panel temperature (fit a probe: [accessories.thermometer])")


def _temperature_table(args, out, range_rad) -> int:
    """The table at ``--temperature-c`` from two or more runs (analysis/thermal.py); writes it and curve.csv."""
    results = [read_result(spec, "RUN_DIR") for spec in args.phase_csv]
    bits = args.bit_depth if args.bit_depth is not None else bit_depth_of(results)
    gmax = 2**bits - 1
    runs, sources = [], []
    for r in results:
        t, source = run_temperature_c(r)
        c = r.curve
        if c.gray[0] != 0 or c.gray[-1] != gmax:
            raise UsageError(f"RUN_DIR: {r.label}: expected a curve over grays 0..{gmax}, got {c.gray[0]}..{c.gray[-1]}")
        grays = np.arange(gmax + 1)
        runs.append(TemperatureRun(t, np.interp(grays, c.gray, c.phase_rad), np.interp(grays, c.gray,
                                                                                       c.phase_std_rad)))
        sources.append(f"{r.label} at {t:g} C ({source})")
    clearing = args.clearing_c
    if clearing is None:
        clearing = float(results[0].info.get("config", {}).get("simulator", {}).get("response", {})
                         .get("clearing_c", 58.0))
    try:
        pred = predict_temperature(runs, args.temperature_c, clearing)
        lut = build_lut(np.arange(gmax + 1), pred.phase_rad, pred.phase_std_rad, bit_depth=bits, levels=args.levels,
                        range_rad=range_rad, smooth=gmax < 1024)
    except ValueError as err:
        raise UsageError(f"--temperature-c: {err}") from None
    out.mkdir(exist_ok=True)
    created = datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")
    meta = metadata(lut, "; ".join(sources), created, results[0].wavelength_nm)
    meta.update(temperature_c=pred.temperature_c, measured_range_c=list(pred.measured_range_c),
                temperature_model={"law": "phi = A(g) + B(g) (1 - T/Tc)^beta, T in kelvin",
                                   "clearing_c": pred.clearing_c, "exponent": pred.exponent,
                                   "closure_rms_rad": pred.closure_rad},
                curve_std_rms_rad=float(np.sqrt(np.mean(pred.phase_std_rad**2))), extrapolated=not pred.inside)
    write_lut_folder(out, lut, meta)
    write_atomic(out / "curve.csv", ("gray,phase_rad,phase_std_rad\n" + "".join(
        f"{g},{p:.6f},{e:.6f}\n" for g, (p, e) in enumerate(zip(pred.phase_rad, pred.phase_std_rad)))).encode())
    print(f"curve at {pred.temperature_c:g} C from {len(runs)} runs ({', '.join(sources)}): std "
          f"{1e3 * meta['curve_std_rms_rad']:.1f} mrad RMS (order-parameter law: clearing point {pred.clearing_c:.1f} C,"
          f" exponent {pred.exponent:.3f}); curve.csv beside the table")
    _print_table(out, lut)
    if not pred.inside:
        print(f"warning: {pred.note()}", file=sys.stderr)
    return 0


def register(command) -> None:
    """Add ``fringecal lut`` to the parser."""
    p = command("lut", cmd_lut, "build a linearising lookup table from a phase.csv (or, for a temperature, from runs)",
                config="bench config (TOML) giving the panel's bit depth and the wavelength for lut.json")
    p.add_argument("phase_csv", metavar="PHASE_CSV", nargs="+",
                   help="measured curve: gray,phase_rad,phase_std_rad,contrast,n_frames; with --temperature-c, two "
                        "or more run folders of the panel at different temperatures")
    p.add_argument("--temperature-c", type=float, metavar="T",
                   help="write the table for panel temperature T (C) from the runs given (order-parameter law)")
    p.add_argument("--clearing-c", type=float, metavar="TC",
                   help="with --temperature-c: the liquid crystal's clearing point in C, fitted when three or more "
                        "runs are given (default: the runs' config, simulator.response.clearing_c)")
    p.add_argument("--out", required=True, metavar="DIR", help="folder for lut.csv/json/npy/mat/txt (made if missing)")
    p.add_argument("--range", metavar="RAD", help="phase range of the table, e.g. 6.283 or 2pi (default 2pi, or the "
                                                  "panel's reach when it is less)")
    p.add_argument("--levels", type=int, metavar="N", help="table entries (default: 2**bit-depth)")
    p.add_argument("--bit-depth", type=int, metavar="BITS", help="panel gray-level bits (default: from --config, else 8)")
    p.add_argument("--wavelength-nm", type=float, metavar="NM", help="wavelength recorded in lut.json "
                                                                     "(default: from --config, if given)")
    p.add_argument("--force", action="store_true",
                   help="write into --out even if it holds a run, or results made from another source")
