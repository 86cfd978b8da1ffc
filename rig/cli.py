"""The ``fringecal`` command line."""

from __future__ import annotations

import argparse
import csv
import importlib
import sys
from pathlib import Path

import numpy as np

from analysis.config import Config, ConfigError, load_config
from rig import __version__
from rig.errors import UsageError

DESCRIPTION = """\
Calibrate the phase response of a liquid-crystal-on-silicon modulator with split-screen fringes.

One half of the panel shows a uniform gray (a mirror), the other a binary phase grating whose first
diffraction order overlaps the mirror half's reflection on the camera and makes fringes. Stepping the
mirror gray shifts the fringes; their phase is the panel's phase-vs-gray curve.

Every command that needs a bench takes --sim to use the built-in simulated bench instead of hardware.
Without --config, --sim commands use the demo bench configs/tweezers-1064.toml.
"""

EPILOG = """\
a typical session:
  fringecal plan --config my-bench.toml            distances and grating period before moving a mount
  fringecal run --sim --yes                        the whole calibration, here on the simulated bench
  fringecal sweep --resume runs/20261201-101500    finish a sweep that was interrupted
  fringecal analyze my-images/ --out result/       a phase curve from images taken with other software
  fringecal lut result/phase.csv --out table/      the lookup table in five formats
  fringecal preview --sim --mirror-gray 80 --out frame.png --view frame-view.png
"""


COMMAND_MODULES: tuple[str, ...] = (
    "rig.run_cmd", "rig.map_cmd", "rig.align_cmd", "rig.flicker_cmd", "rig.analyze_cmd", "rig.lut_cmd",
    "rig.pattern_cmd", "rig.plan_cmd", "rig.compare_cmd", "rig.screens_cmd", "rig.timing_cmd", "rig.report",
    "rig.verify_cmd",
)


def load_bench_config(args) -> Config:
    if args.config is None:
        if not getattr(args, "sim", True):
            raise UsageError("--config: a bench config is needed without --sim (start from configs/bench-template.toml)")
        from configs import DEFAULT_SIM
        return load_config(DEFAULT_SIM)
    return load_config(args.config)


def output_folder(path: str, what: str = "--out") -> Path:
    """A folder to write results into: it may exist (as a folder), and its parent must."""
    out = Path(path)
    if out.exists() and not out.is_dir():
        raise UsageError(f"{what}: {out} exists and is not a folder")
    if not out.parent.exists():
        raise UsageError(f"{what}: folder {out.parent} does not exist")
    return out


def writable(path: str, what: str) -> Path:
    out = Path(path)
    if out.parent and not out.parent.exists():
        raise UsageError(f"{what}: folder {out.parent} does not exist")
    return out


def cmd_preview(args) -> int:
    """Grab one frame of the split-screen pattern at a mirror gray and write it as a 16-bit PNG."""
    import cv2

    from analysis.patterns import layout_of, split_screen
    from simulators.bench import Bench
    from simulators.devices import SimCamera, SimScreen

    if not args.sim:
        raise UsageError("preview: live hardware is not wired into fringecal yet; use --sim")
    cfg = load_bench_config(args)
    if not 0 <= args.mirror_gray <= cfg.gray_max:
        raise UsageError(f"--mirror-gray: expected a gray level in [0, {cfg.gray_max}], got {args.mirror_gray}")
    if Path(args.out).suffix.lower() != ".png":
        raise UsageError(f"--out: expected a .png file name, got {args.out}")
    out = writable(args.out, "--out")
    bench = Bench(cfg)
    screen, camera = SimScreen(bench), SimCamera(bench)
    m, p = cfg.modulator, cfg.pattern
    screen.show(split_screen(m.width_px, m.height_px, args.mirror_gray, p.grating_low, p.grating_high,
                             layout_of(p), m.bit_depth))
    bench.clock.sleep(cfg.sweep.settle_s)
    frame = camera.grab()
    if not cv2.imwrite(str(out), frame.image):
        raise UsageError(f"--out: could not write {out}")
    if args.view:
        view = cv2.normalize(frame.image.astype(np.float32), None, 0, 255, cv2.NORM_MINMAX).astype(np.uint8)
        cv2.imwrite(str(writable(args.view, "--view")), view)
    peak = int(frame.image.max())
    print(f"wrote {out}: {frame.image.shape[1]}x{frame.image.shape[0]} px, {cfg.camera.bit_depth}-bit counts in a "
          f"16-bit PNG; mirror gray {args.mirror_gray}, grating {p.grating_low}/{p.grating_high}, "
          f"peak {peak} of {frame.full_scale} ({100 * peak / frame.full_scale:.0f} %), "
          f"{frame.saturated_px} saturated px, {cfg.laser.wavelength_nm:g} nm")
    if frame.saturated_px:
        print(f"warning: {frame.saturated_px} pixels at full scale; lower camera.exposure_s", file=sys.stderr)
    return 0


def cmd_sim_truth(args) -> int:
    """Write the simulated panel's true phase curve as gray,phase_rad."""
    from simulators.bench import Bench

    cfg = load_bench_config(args)
    out = writable(args.out, "--out")
    grays, phase = Bench(cfg).true_curve()
    with out.open("w", newline="") as fh:
        writer = csv.writer(fh)
        writer.writerow(["gray", "phase_rad"])
        writer.writerows((int(g), f"{p:.6f}") for g, p in zip(grays, phase))
    reach = np.flatnonzero(phase >= 2 * np.pi)
    first = f"2pi first reached at gray {reach[0]}" if reach.size else "2pi not reached"
    print(f"wrote {out}: {len(grays)} levels, range {phase[-1]:.3f} rad ({phase[-1] / np.pi:.2f} pi), {first}")
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="fringecal", description=DESCRIPTION, epilog=EPILOG,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--version", action="version", version=f"fringecal {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    def command(name, func, help_text):
        p = sub.add_parser(name, help=help_text, description=func.__doc__)
        p.set_defaults(func=func)
        p.add_argument("--config", metavar="FILE", help="bench config (TOML); default with --sim: the 1064 nm demo")
        return p

    p = command("preview", cmd_preview, "grab one split-screen frame and write it as a 16-bit PNG")
    p.add_argument("--sim", action="store_true", help="use the built-in simulated bench")
    p.add_argument("--mirror-gray", type=int, default=0, metavar="G", help="gray of the mirror half (default 0)")
    p.add_argument("--out", required=True, metavar="FRAME.png", help="where to write the raw camera counts")
    p.add_argument("--view", metavar="VIEW.png", help="also write an 8-bit contrast-stretched copy to look at")

    p = command("sim-truth", cmd_sim_truth, "write the simulated panel's true phase curve (gray,phase_rad)")
    p.add_argument("--out", required=True, metavar="truth.csv", help="CSV file to write")

    # Commands kept in modules of their own: each has register(command) adding its subparser.
    for module in COMMAND_MODULES:
        importlib.import_module(module).register(command)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 0
    try:
        return args.func(args)
    except (ConfigError, UsageError) as err:
        print(f"fringecal: error: {err}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("fringecal: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
