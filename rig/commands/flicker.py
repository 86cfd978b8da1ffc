"""``fringecal flicker``: hold a gray level, grab at the camera's rate and measure the phase flicker."""

from __future__ import annotations

import json

import numpy as np

from analysis.flicker import flicker_figures
from rig.atomic import write_atomic
from rig.errors import UsageError
from rig.options import add_run_options, load_bench_config, number
from rig.output.figures import flicker_figure
from rig.output.results import write_json
from rig.run.session import Session, guarded, prepare_run
from rig.run.stages import get_ready
from rig.run.steps import hold_steps


def register(command) -> None:
    p = command("flicker", cmd_flicker, "phase flicker of one gray level: rms, peak to peak, spectrum")
    add_run_options(p)
    p.add_argument("--gray", type=int, required=True, metavar="G", help="gray level of the mirror half to hold")
    p.add_argument("--seconds", type=number("a recording time in s", 0, 3600, lo_open=True), default=2.0,
                   metavar="S", help="how long to record (default 2)")
    p.add_argument("--expect-hz", type=number("a drive frequency in Hz", 0, 1e6, lo_open=True), metavar="F",
                   help="the panel's drive frequency if known: warns when the frame rate cannot resolve it")
    p.add_argument("--json", action="store_true", help="print the figures as JSON on stdout")


def cmd_flicker(args) -> int:
    """Hold the split pattern at one mirror gray, grab frames back to back at the camera's rate, extract every
    frame's fringe phase and report its rms and peak-to-peak flicker, its spectrum and dominant frequency."""
    gmax = load_bench_config(args).gray_max  # before the run folder is made: a bad gray leaves nothing behind
    if not 0 <= args.gray <= gmax:
        raise UsageError(f"--gray: expected a gray level in [0, {gmax}], got {args.gray}")
    cfg, folder = prepare_run(args, "flicker")
    low, high = cfg.pattern.grating_low, cfg.pattern.grating_high

    def body():
        with Session(args, cfg, folder, "fringecal flicker") as s:
            get_ready(s, low, high)
            rate = getattr(s.devices.camera, "frame_rate_hz", None) or 1.0 / max(s.devices.camera.exposure_s, 1e-3)
            frames = max(int(round(args.seconds * rate)), 8)
            m = s.engine.run(hold_steps(cfg, args.gray, low, high, frames))
            exposure = s.devices.camera.exposure_s
            bench = s.devices.bench
        t = np.array([r.t_s for r in m.results])
        phase = np.array([r.phase_rad for r in m.results])
        fig = flicker_figures(t, phase, args.expect_hz)
        summary = {"gray": args.gray, "grating_pair": [low, high], "frames": int(t.size), "exposure_s": exposure,
                   "rms_rad": fig.rms_rad, "peak_to_peak_rad": fig.peak_to_peak_rad, "dominant_hz": fig.dominant_hz,
                   "frame_rate_hz": fig.frame_rate_hz, "nyquist_hz": fig.frame_rate_hz / 2,
                   "spectral_bin_hz": fig.bin_hz, "warnings": _warnings(fig, args.expect_hz)}
        if bench is not None:
            amp = bench.fringe_flicker_rad(args.gray, low, high, exposure)
            summary["simulator_true_rms_rad"] = amp / np.sqrt(2)
            summary["simulator_ripple_hz"] = cfg.simulator.timing.flicker_hz
        folder.write_csv("flicker.csv", ["t_s", "phase_rad"], ((f"{a:.9f}", f"{b:.6f}") for a, b in zip(t, phase)))
        write_json(folder.path / "flicker.json", summary)
        write_atomic(folder.path / "flicker.png",
                     flicker_figure(t, phase, fig.freqs_hz, fig.spectrum_rad, fig.dominant_hz))
        folder.update(status="complete", flicker=summary)
        if args.json:
            print(json.dumps(summary, indent=2))
        else:
            print(f"gray {args.gray}: flicker {fig.rms_rad * 1e3:.2f} mrad rms, {fig.peak_to_peak_rad * 1e3:.2f} mrad "
                  f"peak to peak, dominant {fig.dominant_hz:.2f} Hz, {t.size} frames at {fig.frame_rate_hz:.1f} "
                  f"frames/s (exposure {exposure * 1e3:.3f} ms); files in {folder.path}")
            for w in summary["warnings"]:
                print(f"warning: {w}")
        return 0

    return guarded(folder, body, resume=None)


def _warnings(fig, expect_hz) -> list[str]:
    out = []
    nyquist = fig.frame_rate_hz / 2
    if fig.above_nyquist:
        out.append(f"the drive frequency {expect_hz:g} Hz is above this frame rate's Nyquist limit "
                   f"({nyquist:.1f} Hz): the flicker is aliased to {fig.dominant_hz:.1f} Hz")
    elif fig.dominant_hz > 0.8 * nyquist:
        out.append(f"the dominant frequency {fig.dominant_hz:.1f} Hz is near the Nyquist limit ({nyquist:.1f} Hz); "
                   "it may be an alias of a faster ripple")
    return out
