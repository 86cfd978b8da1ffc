"""``fringecal preview``: one frame of the split-screen pattern at a mirror gray, as a 16-bit PNG."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

from rig.errors import UsageError
from rig.options import load_bench_config, writable
from rig.run.session import open_devices
from rig.safety import add_acknowledgement_flag, ensure_laser_safety


def register(command) -> None:
    p = command("preview", cmd_preview, "grab one split-screen frame and write it as a 16-bit PNG")
    p.add_argument("--sim", action="store_true", help="use the built-in simulated bench")
    p.add_argument("--mirror-gray", type=int, default=0, metavar="G", help="gray of the mirror half (default 0)")
    p.add_argument("--out", required=True, metavar="FRAME.png", help="where to write the raw camera counts")
    p.add_argument("--view", metavar="VIEW.png", help="also write an 8-bit contrast-stretched copy to look at")
    add_acknowledgement_flag(p)


def cmd_preview(args) -> int:
    """Show the split-screen pattern at a mirror gray, grab one frame and write it as a 16-bit PNG.

    On a bench the pattern goes to the panel's display and the frame comes from the configured camera, as in a run
    (the laser-safety notice comes first); with --sim both are simulated.
    """
    import cv2

    from analysis.patterns import layout_of, split_screen

    cfg = load_bench_config(args)
    if not 0 <= args.mirror_gray <= cfg.gray_max:
        raise UsageError(f"--mirror-gray: expected a gray level in [0, {cfg.gray_max}], got {args.mirror_gray}")
    if Path(args.out).suffix.lower() != ".png":
        raise UsageError(f"--out: expected a .png file name, got {args.out}")
    out = writable(args.out, "--out")
    ensure_laser_safety(cfg.laser.laser_class, cfg.laser.wavelength_nm, sim=args.sim or cfg.camera.backend == "sim",
                        acknowledged=args.laser_safety_acknowledged or cfg.laser.safety_acknowledged)
    m, p = cfg.modulator, cfg.pattern
    devices = open_devices(cfg, args.sim)
    try:
        devices.screen.show(split_screen(m.width_px, m.height_px, args.mirror_gray, p.grating_low, p.grating_high,
                                         layout_of(p), m.bit_depth))
        devices.clock.sleep(cfg.sweep.settle_s)
        for _ in range(cfg.camera.discard_frames):  # frames the camera had queued before the pattern changed
            devices.camera.grab(timeout_s=cfg.camera.grab_timeout_s)
        frame = devices.camera.grab(timeout_s=cfg.camera.grab_timeout_s)
    finally:
        devices.close()
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
