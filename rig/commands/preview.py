"""``fringecal preview``: one frame of the split-screen pattern at a mirror gray, as a 16-bit PNG."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

from rig.errors import UsageError
from rig.options import load_bench_config, writable


def register(command) -> None:
    p = command("preview", cmd_preview, "grab one split-screen frame and write it as a 16-bit PNG")
    p.add_argument("--sim", action="store_true", help="use the built-in simulated bench")
    p.add_argument("--mirror-gray", type=int, default=0, metavar="G", help="gray of the mirror half (default 0)")
    p.add_argument("--out", required=True, metavar="FRAME.png", help="where to write the raw camera counts")
    p.add_argument("--view", metavar="VIEW.png", help="also write an 8-bit contrast-stretched copy to look at")


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
