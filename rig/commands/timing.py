"""fringecal timing: how long after ``show()`` the camera sees the panel change, and how long until it has settled.

Two patterns alternate: the split screen with its grating on (bright first order, fringes) and off (the grating
half one uniform gray). Each frame after a switch is placed between the two steady images, 0 (old) to 1 (new).
A frame still at 0 ended its exposure before the change began, the first frame above 0 ended after it, so each
switch brackets the latency; a random delay before each switch moves it against the camera's frame clock, and the
brackets of all switches together pin the latency far below one frame period. Settle time and the frames to discard
are read from the first frame that stays at 1.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from analysis.patterns import layout_of, split_screen
from rig.errors import UsageError
from rig.options import load_bench_config
from rig.run.session import open_devices
from rig.safety import add_acknowledgement_flag, ensure_laser_safety

CHANGED = 0.02  # departure from the old image, either way, that counts as "changed" (well above frame noise)
SETTLED = 0.02  # within this fraction of the new image counts as settled
MARGIN = 1.2  # recommended settle time over the longest one seen


def register(command) -> None:
    p = command("timing", cmd_timing, "measure display-to-camera latency; recommend settle time and frames to discard")
    p.add_argument("--sim", action="store_true", help="use the built-in simulated bench")
    p.add_argument("--cycles", type=int, default=20, metavar="N", help="pattern switches to time (default 20)")
    p.add_argument("--hold-s", type=float, default=0.3, metavar="S",
                   help="how long each pattern is watched after a switch (default 0.3)")
    add_acknowledgement_flag(p)


@dataclass(frozen=True)
class Switch:
    """One pattern switch: latency bracket, settle time (s after show() returned) and frames before settling."""

    latency_lo_s: float
    latency_hi_s: float
    settled_s: float
    frames_before_settled: int


def progress(image: np.ndarray, old: np.ndarray, new: np.ndarray) -> float:
    """Where ``image`` lies from ``old`` (0) to ``new`` (1), by projection on their difference."""
    d = new - old
    return float(np.vdot(image.astype(np.float64) - old, d) / np.vdot(d, d))


def time_switch(frames, old: np.ndarray, new: np.ndarray, t_show: float) -> Switch | None:
    """Bracket the latency and find the settle point in the frames grabbed after a switch at ``t_show``."""
    ends = [f.timestamp_s + f.exposure_s / 2 - t_show for f in frames]
    starts = [f.timestamp_s - f.exposure_s / 2 - t_show for f in frames]
    where = [progress(f.image, old, new) for f in frames]
    changed = next((i for i, w in enumerate(where) if abs(w) > CHANGED), None)  # a transient may first move away
    settled = next((i for i in range(len(where)) if all(abs(w - 1) < SETTLED for w in where[i:])), None)
    if changed is None or settled is None:
        return None
    lo = ends[changed - 1] if changed > 0 else -math.inf
    return Switch(lo, ends[changed], max(starts[settled], 0.0), settled)


def latency_estimate(switches: list[Switch]) -> tuple[float, float, float]:
    """(estimate, lower, upper) in s: the intersection of every bracket, or their middle half if they disagree."""
    lo = max(s.latency_lo_s for s in switches)
    hi = min(s.latency_hi_s for s in switches)
    if lo > hi:  # jitter: brackets do not overlap; take the interquartile range of their bounds
        lo = float(np.percentile([s.latency_lo_s for s in switches if math.isfinite(s.latency_lo_s)] or [hi], 75))
        hi = float(np.percentile([s.latency_hi_s for s in switches], 25))
        lo, hi = min(lo, hi), max(lo, hi)
    lo = max(lo, 0.0) if math.isfinite(lo) else 0.0
    return (lo + hi) / 2, lo, hi


def measure(devices, cfg, cycles: int, hold_s: float, seed: int = 0) -> list[Switch]:
    """Alternate grating on/off ``cycles`` times and time each switch."""
    m, p = cfg.modulator, cfg.pattern
    ref, low, high = cfg.sweep.reference_gray, p.grating_low, p.grating_high
    patterns = [split_screen(m.width_px, m.height_px, ref, low, high, layout_of(p), m.bit_depth),
                split_screen(m.width_px, m.height_px, ref, low, low, layout_of(p), m.bit_depth)]
    screen, camera, clock = devices.screen, devices.camera, devices.clock
    timeout = cfg.camera.grab_timeout_s

    def steady(k: int) -> tuple[np.ndarray, list]:
        screen.show(patterns[k])
        clock.sleep(hold_s)
        frames = [camera.grab(timeout_s=timeout) for _ in range(3)]
        return np.mean([f.image for f in frames[1:]], axis=0), frames

    refs = [None, None]
    refs[1], _ = steady(1)
    refs[0], frames = steady(0)
    period = max(float(np.median(np.diff([f.timestamp_s for f in frames]))), 1e-4)
    if np.allclose(refs[0], refs[1], atol=1.0):
        raise UsageError("timing: the camera sees no difference between the grating on and off; check that the "
                         "first order overlaps the mirror half on the camera (fringecal plan) and the exposure")
    rng = np.random.default_rng(seed)
    switches, shown = [], 0
    for _ in range(cycles):
        new = 1 - shown
        clock.sleep(rng.uniform(0, period))  # move the switch against the camera's frame clock
        screen.show(patterns[new])
        t_show = clock.now()
        frames = []
        while not frames or frames[-1].timestamp_s - t_show < hold_s:
            frames.append(camera.grab(timeout_s=timeout))
        switch = time_switch(frames, refs[shown], refs[new], t_show)
        if switch is not None:
            switches.append(switch)
        shown = new
    return switches


def report(switches: list[Switch], cycles: int, exposure_timestamps: bool) -> list[str]:
    """The lines ``fringecal timing`` prints."""
    est, lo, hi = latency_estimate(switches)
    first = np.array([s.latency_hi_s for s in switches]) * 1e3
    settle = np.array([s.settled_s for s in switches]) * 1e3
    discard = max(s.frames_before_settled for s in switches)
    recommend_s = math.ceil(settle.max() * MARGIN) / 1e3
    lines = [f"display latency: {est * 1e3:.1f} ms (between {lo * 1e3:.1f} and {hi * 1e3:.1f} ms over "
             f"{len(switches)} of {cycles} switches)",
             f"first changed frame ended after show(): min {first.min():.1f}, median {np.median(first):.1f}, "
             f"max {first.max():.1f} ms",
             f"settled after show(): min {settle.min():.1f}, median {np.median(settle):.1f}, "
             f"max {settle.max():.1f} ms (frames within {SETTLED:.0%} of the new image)",
             f"recommended: sweep.settle_s = {recommend_s:g}; camera.discard_frames = {discard} "
             f"(frames that arrived after show() before the first settled one)"]
    if not exposure_timestamps:
        lines.append("note: this camera gives no exposure timestamps; times are arrival times, so rely on "
                     "camera.discard_frames rather than the settle time alone")
    return lines


def cmd_timing(args) -> int:
    """Alternate two patterns, time when frames change, report latency and recommend settle time and discards."""
    if args.cycles < 2:
        raise UsageError(f"--cycles: expected at least 2 switches, got {args.cycles}")
    if not args.hold_s > 0:
        raise UsageError(f"--hold-s: expected seconds > 0, got {args.hold_s}")
    cfg = load_bench_config(args)
    ensure_laser_safety(cfg.laser.laser_class, cfg.laser.wavelength_nm, sim=args.sim or cfg.camera.backend == "sim",
                        acknowledged=args.laser_safety_acknowledged or cfg.laser.safety_acknowledged)
    devices = open_devices(cfg, args.sim)
    try:
        devices.camera.exposure_s = cfg.camera.exposure_s
        switches = measure(devices, cfg, args.cycles, args.hold_s, seed=cfg.simulator.seed)
    finally:
        devices.close()
    if len(switches) < 2:
        raise UsageError(f"timing: only {len(switches)} of {args.cycles} switches showed a clean change; raise "
                         "--hold-s above the settle time or check the light level")
    for line in report(switches, args.cycles, getattr(devices.camera, "exposure_timestamps", True)):
        print(line)
    return 0
