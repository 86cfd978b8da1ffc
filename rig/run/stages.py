"""The stages every measurement shares, in the order a run takes them: dark level, exposure, fringe band, tuning,
warm-up, sweep and finishing. Each measures on the session's bench, records what it found in the run folder, and
returns what the next stage needs."""

from __future__ import annotations

import numpy as np

from analysis.band import Band
from analysis.carrier import Carrier, NoFringesError
from analysis.curve import CurveError, phase_curve
from analysis.lut import build_lut
from rig.output.lut_files import metadata, write_lut_folder
from rig.output.report import write_report
from rig.output.results import curve_summary, now_iso, plot_curve, plot_tuning, write_json, write_phase_csv
from rig.output.runs import read_journal
from rig.run.folder import RunFolder
from rig.run.session import Session
from rig.run.steps import StepError, exposure_steps, locate_steps, opposite_gray, sweep_steps, tune_steps, warmup_steps

MIN_TUNED_CONTRAST = 0.10


def take_dark(s: Session) -> float:
    """Dark stage: the camera's black level (ADU), from frames with the shutter closed when one is fitted, else
    ``estimate_dark``.

    Writes ``dark_adu`` and ``dark_source`` into run.json and sets the analyzer's dark level; returns the level (ADU).
    """
    shutter = s.devices.accessories.shutter
    if shutter is None:
        return estimate_dark(s)
    settings = s.cfg.accessories.shutter
    shutter.close()
    try:
        frames = [s.devices.camera.grab(timeout_s=s.engine.timeout_s).image for _ in range(settings.dark_frames)]
    finally:
        shutter.open()
    dark_image = np.mean(frames, axis=0)
    dark = float(dark_image.mean())
    s.analyzer.dark_adu = dark
    s.folder.update(dark_adu=dark, dark_source=f"mean of {settings.dark_frames} frames with the shutter closed")
    s.log(f"dark level {dark:.1f} ADU with the shutter closed")
    return dark


def estimate_dark(s: Session) -> float:
    """Dark stage without a shutter: the black level (ADU) from the darkest 0.1 % of pixels of one frame, the best
    estimate there is. Writes ``dark_adu`` and ``dark_source`` into run.json; returns the level (ADU)."""
    frame = s.devices.camera.grab(timeout_s=s.engine.timeout_s)
    dark = float(np.percentile(frame.image, 0.1))
    s.analyzer.dark_adu = dark
    s.folder.update(dark_adu=dark, dark_source="0.1th percentile of a frame (no shutter configured)")
    return dark


def auto_exposure(s: Session, low: int, high: int) -> float:
    """Exposure stage: the camera exposure (s) that brings the fringes' peak near 70 % of full scale at the grating
    pair ``low``/``high``. Writes ``exposure_s`` into run.json; returns the exposure (s)."""
    exposure = s.engine.run(exposure_steps(s.cfg, s.devices.camera.exposure_s, low, high))
    s.folder.update(exposure_s=exposure)
    s.log(f"exposure {exposure * 1e3:.3f} ms")
    return exposure


def locate(s: Session, low: int, high: int) -> int:
    """Band stage: where the fringes are (band, carrier frequency, fringe count) from frames at several mirror grays;
    tries other high grays if this pair makes no fringes.

    Writes ``band``, ``carrier`` and ``band_survey`` into run.json and sets the crop of saved frames; returns the
    mirror gray whose fringes are pi from the reference gray's (for tuning). Raises StepError if no pair makes fringes.
    """
    gmax = s.cfg.gray_max
    tried = []
    for candidate in dict.fromkeys([high, gmax // 4, gmax // 2, (3 * gmax) // 4]):
        if candidate == low:
            continue
        measurements = s.engine.run(locate_steps(s.cfg, low, candidate))
        images = [m.images[0] for m in measurements]
        try:
            survey = s.analyzer.locate(images)
        except NoFringesError as err:
            tried.append(f"{low}/{candidate}: {err}")
            continue
        b, c = survey.band, survey.carrier
        s.folder.set_crop(b, c.period_px, images[0].shape)
        s.folder.update(band={"x0": b.x0, "x1": b.x1, "y0": b.y0, "y1": b.y1},
                        carrier={"fx": c.fx, "fy": c.fy, "sharpness": c.sharpness, "period_px": c.period_px,
                                 "angle_deg": c.angle_deg},
                        band_survey={"fringe_count": survey.fringe_count, "period_spread": survey.period_spread,
                                     "contrast": survey.contrast})
        s.log(f"fringe band x {b.x0}..{b.x1}, y {b.y0}..{b.y1}: {survey.fringe_count:.0f} fringes of "
              f"{c.period_px:.2f} px at {c.angle_deg:.1f} deg")
        grays = [m.results[0].gray for m in measurements]
        phases = [s.analyzer(img, g, "locate", 0.0, 0).phase_rad for img, g in zip(images, grays)]
        return opposite_gray(grays, phases, s.cfg.sweep.reference_gray)
    raise StepError("locate: " + "; ".join(tried))


def get_ready(s: Session, low: int, high: int) -> int:
    """Dark level, exposure and fringe band at the grating pair ``low``/``high``, as every measurement starts;
    returns the mirror gray whose fringes are pi from the reference gray's (for tuning)."""
    take_dark(s)
    auto_exposure(s, low, high)
    return locate(s, low, high)


def tune(s: Session, opposite: int):
    """Tune stage: fringe contrast against the grating's high gray, to find the pair whose phase step is pi (the most
    contrast).

    Writes tune.csv and tune.png, and ``pair`` into run.json; returns the TuneResult. Raises StepError, with hints,
    if the best contrast stays below MIN_TUNED_CONTRAST.
    """
    result = s.engine.run(tune_steps(s.cfg, (s.cfg.sweep.reference_gray, opposite)))
    s.folder.write_csv("tune.csv", ["high_gray", "amplitude_adu", "contrast"],
                       [(h, f"{a:.3f}", f"{c:.5f}") for h, a, c in sorted(result.curve)])
    plot_tuning(s.folder.path / "tune.png", [(h, c) for h, _, c in result.curve], result.low, result.high)
    s.folder.update(pair={"low": result.low, "high": result.high, "contrast": result.contrast,
                          "pi_step_gray": result.pi_step_gray, "measurements": result.measurements})
    if result.contrast < MIN_TUNED_CONTRAST:
        raise StepError(f"tune: the best fringe contrast {result.contrast:.3f} is below {MIN_TUNED_CONTRAST}; "
                        "rotate the polarisation onto the panel's director (half-wave plate), check that the first "
                        "order overlaps the mirror half on the camera, and check the exposure")
    s.log(f"pair {result.low}/{result.high}: contrast {result.contrast:.3f}, pi step {result.pi_step_gray:.1f} grays"
          f" ({result.measurements} pairs measured)")
    return result


def warm_up(s: Session, low: int, high: int, minutes: float) -> None:
    """Warm-up stage: the drift of the reference pattern's fringe phase (rad/min) while it is held, until it is stable
    or ``minutes`` pass (nothing is done for ``minutes`` <= 0).

    Writes ``warmup`` into run.json (and a warning if never stable); returns nothing.
    """
    if minutes <= 0:
        return
    result = s.engine.run(warmup_steps(s.cfg, low, high, minutes))
    s.folder.update(warmup={"stable": result.stable, "minutes": result.minutes,
                            "slope_rad_per_min": result.slope_rad_per_min})
    if result.stable:
        s.log(f"warm-up: stable after {result.minutes:.1f} min ({result.slope_rad_per_min:+.4f} rad/min)")
    else:
        message = (f"warm-up: not stable after {result.minutes:.1f} min (last slope {result.slope_rad_per_min:+.4f}"
                   f" rad/min, limit {s.cfg.sweep.warmup_slope_rad_per_min}); measuring anyway")
        s.folder.warn(message)
        s.log(message)


def sweep(s: Session, low: int, high: int, done=frozenset()) -> None:
    """Sweep stage: the fringe phase of every mirror gray at the grating pair ``low``/``high``, with drift references;
    units whose checkpoint is in ``done`` are skipped (a resumed run).

    Writes ``pair`` into run.json, and a journal line per frame and per finished unit (frame crops in frames/);
    returns nothing.
    """
    s.folder.update(pair={**s.folder.info.get("pair", {}), "low": low, "high": high})
    s.engine.run(sweep_steps(s.cfg, low, high, done))


def finish(folder: RunFolder, cfg, method: str, bench=None) -> dict:
    """Finish stage: the phase curve (and its uncertainty) and the lookup table from the journal's frames; on the
    simulator, the error against the true curve.

    Writes phase.csv, phase.png, manifest.csv, lut/, analysis.json, report.html (and truth.csv on the simulator) and
    ``status`` complete into run.json; returns the summary that analysis.json holds.
    """
    contents = read_journal(folder.path / "journal.jsonl")
    frames = [r for r in contents.frames() if r["purpose"] in ("level", "reference") and r["phase_rad"] is not None]
    frames.sort(key=lambda r: r["t_s"])
    if not frames:
        raise CurveError("sweep: no measured frame in the journal")
    warnings = list(folder.info.get("warnings", []))
    curve = phase_curve([r["gray"] for r in frames], [r["phase_rad"] for r in frames],
                        [r["phase_std_rad"] for r in frames], [r["t_s"] for r in frames],
                        [r["contrast"] for r in frames], cfg.sweep.reference_gray, None, smooth=True)
    saturated = sorted({r["gray"] for r in frames if r["saturated_px"]})
    if saturated:
        warnings.append(f"saturated pixels in the band at grays {', '.join(map(str, saturated))}")
    if curve.rejected_grays:
        warnings.append(f"outlier gray levels left out: {', '.join(map(str, curve.rejected_grays))}")
    b, c = folder.info["band"], folder.info["carrier"]
    summary = curve_summary(curve, Band(b["x0"], b["x1"], b["y0"], b["y1"]),
                            Carrier(c["fx"], c["fy"], c["sharpness"]), method, warnings, "time_s")
    truth = None
    if bench is not None:
        grays, phase = bench.true_curve()
        folder.write_csv("truth.csv", ["gray", "phase_rad"], ((int(g), f"{p:.6f}") for g, p in zip(grays, phase)))
        truth = (grays, phase)
        err = curve.phase_rad - phase[curve.gray]
        summary["truth_rms_error_rad"] = float(np.sqrt(np.mean((err - err.mean()) ** 2)))
    write_phase_csv(folder.path / "phase.csv", curve)
    plot_curve(folder.path / "phase.png", curve, method, truth)
    folder.write_manifest(contents.frames())
    lut = build_lut(curve.gray, curve.smooth_rad if curve.smooth_rad is not None else curve.phase_rad,
                    curve.std_rad, bit_depth=cfg.modulator.bit_depth)
    (folder.path / "lut").mkdir(exist_ok=True)
    meta = metadata(lut, "phase.csv", now_iso(), cfg.laser.wavelength_nm)
    temperatures = [r["temperature_c"] for r in frames if r.get("temperature_c") is not None]
    if temperatures:  # a probe was fitted: every table says at what temperature it was measured
        meta["temperature_c"] = summary["temperature_c"] = float(np.mean(temperatures))
        summary["temperature_range_c"] = [float(min(temperatures)), float(max(temperatures))]
    write_lut_folder(folder.path / "lut", lut, meta)
    summary["lut"] = {"folder": "lut", "window_gray": list(lut.window), "distinct_grays": lut.distinct_grays,
                      "rms_linearity_rad": lut.rms_linearity_rad}
    write_json(folder.path / "analysis.json", summary)
    folder.update(status="complete", ended=now_iso(), range_rad=summary["range_rad"],
                  first_gray_2pi=summary["first_gray_2pi"], temperature_c=summary.get("temperature_c"))
    write_report(folder.path)  # after the status: the page says how the run ended
    return summary


def closing_lines(folder: RunFolder, summary: dict) -> list[str]:
    """The lines a finished run prints: range, worst uncertainty, table window, warnings, files."""
    first = summary["first_gray_2pi"]
    lines = [f"phase range {summary['range_rad']:.3f} rad ({summary['range_pi']:.2f} pi); "
             + (f"2 pi first reached at gray {first}" if first is not None else "2 pi not reached"),
             f"worst uncertainty {summary['worst_std_rad'] * 1e3:.1f} mrad at gray {summary['worst_std_gray']}"]
    if "truth_rms_error_rad" in summary:
        lines.append(f"against the simulator's truth: {summary['truth_rms_error_rad'] * 1e3:.1f} mrad rms")
    lines.append(f"lookup table for 0..2 pi uses grays {summary['lut']['window_gray'][0]}.."
                 f"{summary['lut']['window_gray'][1]} ({summary['lut']['distinct_grays']} distinct)")
    lines += [f"warning: {w}" for w in summary["warnings"]]
    lines.append(f"files in {folder.path}: report.html, phase.csv, analysis.json, phase.png, lut/, journal.jsonl, "
                 "run.json")
    return lines
