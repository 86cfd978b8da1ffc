"""The stages every measurement shares, in the order a run takes them: dark level, exposure, fringe band, tuning,
warm-up, the sign, frames per level, sweep and finishing. Each measures on the session's bench, records what it found in the run folder, and
returns what the next stage needs."""

from __future__ import annotations

import math

import numpy as np

from analysis.band import Band
from analysis.carrier import Carrier, NoFringesError
from analysis.agreement import agreement
from analysis.config import replace
from analysis.curve import CurveError, frames_for_target, sweep_curve
from analysis.adaptive import table_error_rad
from analysis.lut import build_lut, monotone_cubic
from analysis.sign import probe_direction, scan_midpoints, staircase_grays
from rig.output.lut_files import metadata, write_lut_folder
from rig.output.numbers import fixed, with_std
from rig.output.report import write_report
from rig.output.results import curve_summary, now_iso, plot_curve, plot_tuning, write_json, write_phase_csv
from rig.output.runs import read_journal
from rig.run.adaptive import AdaptiveSettings, adaptive_sweep_steps, finish_model, journal_rows
from rig.run.folder import RunFolder
from rig.run.session import Session
from rig.run.steps import (StepError, exposure_steps, farthest_gray, locate_steps, opposite_gray, scatter_steps,
                           sign_steps, sweep_steps, tune_steps, warmup_steps)

MIN_TUNED_CONTRAST = 0.10
MAX_SCAN_EXTRA = 24  # grays the band stage may add to its coarse scan where the fringe phase moves fast


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
    dark = check_dark(s, float(dark_image.mean()))
    s.analyzer.dark_adu = dark
    s.folder.update(dark_adu=dark, dark_source=f"mean of {settings.dark_frames} frames with the shutter closed")
    s.log(f"dark level {dark:.1f} ADU with the shutter closed")
    return dark


def estimate_dark(s: Session) -> float:
    """Dark stage without a shutter: the black level (ADU) from the darkest 0.1 % of pixels of one frame, the best
    estimate there is. Writes ``dark_adu`` and ``dark_source`` into run.json; returns the level (ADU)."""
    frame = s.devices.camera.grab(timeout_s=s.engine.timeout_s)
    dark = check_dark(s, float(np.percentile(frame.image, 0.1)))
    s.analyzer.dark_adu = dark
    s.folder.update(dark_adu=dark, dark_source="0.1th percentile of a frame (no shutter configured)")
    return dark


MAX_DARK_FRACTION = 0.5  # a black level above this fraction of full scale means light floods the camera


def check_dark(s: Session, dark: float) -> float:
    """``dark`` (ADU) if it is a plausible black level; else StepError: the camera sees too much light."""
    full = 2**s.devices.camera.bit_depth - 1
    if not (np.isfinite(dark) and dark < MAX_DARK_FRACTION * full):
        raise StepError(f"dark level: the darkest pixels are at {dark / full:.0%} of full scale at "
                        f"{s.devices.camera.exposure_s * 1e3:.3g} ms exposure, expected below "
                        f"{MAX_DARK_FRACTION:.0%}: light floods the camera; attenuate the beam")
    return dark


def auto_exposure(s: Session, low: int, high: int) -> float:
    """Exposure stage: the camera exposure (s) that brings the fringes' peak near 70 % of full scale at the grating
    pair ``low``/``high``. Writes ``exposure_s`` into run.json; returns the exposure (s). A camera whose images do
    not follow its exposure (a replay) keeps the configured one."""
    camera, kept = s.devices.camera, ""
    if getattr(camera, "fixed_images", False):
        exposure, kept = camera.exposure_s, " kept: the camera's images do not follow its exposure"
    else:
        exposure = s.engine.run(exposure_steps(s.cfg, camera.exposure_s, low, high))
    s.folder.update(exposure_s=exposure)
    s.log(f"exposure {exposure * 1e3:.3f} ms{kept}")
    return exposure


def locate(s: Session, low: int, high: int) -> int:
    """Band stage: where the fringes are (band, carrier frequency, fringe count) from frames at several mirror grays;
    tries other high grays if this pair makes no fringes.

    Writes ``band``, ``carrier``, ``band_survey`` and ``coarse_scan`` (the grays' fringe phases) into run.json and
    sets the crop of saved frames; returns the mirror gray whose fringes are pi from the reference gray's (for
    tuning). Raises StepError if no pair makes fringes.
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
              f"{c.period_px:.2f} px at {fixed(c.angle_deg, 1)} deg")
        grays, phases = coarse_scan(s, low, candidate, measurements)
        s.folder.update(coarse_scan={"gray": grays, "fringe_phase_rad": phases})
        return opposite_gray(grays, phases, s.cfg.sweep.reference_gray)
    raise StepError("locate: " + "; ".join(tried))


def coarse_scan(s: Session, low: int, high: int, measurements) -> tuple[list[int], list[float]]:
    """The band stage's (gray, fringe phase) scan, in gray order: the phases of the located ``measurements``, with
    grays added (at most MAX_SCAN_EXTRA) where the phase moves too far between neighbours to be unwrapped
    (analysis.sign.scan_midpoints); logs the gaps still too wide when the extra grays run out."""
    def phases_of(ms):
        return {m.results[0].gray: s.analyzer(m.images[0], m.results[0].gray, "locate", 0.0, 0).phase_rad for m in ms}

    scan = phases_of(measurements)
    budget = MAX_SCAN_EXTRA
    while (extra := scan_midpoints(list(scan), list(scan.values()))) and budget > 0:
        extra = extra[:budget]
        budget -= len(extra)
        scan |= phases_of(s.engine.run(locate_steps(s.cfg, low, high, extra)))
        scan = dict(sorted(scan.items()))
    if extra:
        s.log(f"coarse scan: after {MAX_SCAN_EXTRA} extra grays the fringe phase still moves more than π/2 around "
              f"grays {', '.join(map(str, extra))}; the sign probe's staircase may miss its phase steps")
    return list(scan), list(scan.values())


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
    s.log(f"grating pair {result.low}/{result.high}: contrast {result.contrast:.3f}; a π phase step is "
          f"{result.pi_step_gray:.1f} gray levels ({result.measurements} pairs measured)")
    return result


def find_sign(s: Session, low: int, high: int, frames: int = 2) -> str:
    """Sign stage: which way the panel's phase runs with gray, from the blazed staircase probe (analysis/sign.py)
    drawn from the band stage's coarse scan; the grating pair ``low``/``high`` is shown again afterwards.

    Writes ``direction`` (the probe's figures, basis "measured") into run.json and a warning when the probe cannot
    tell; returns "rising", "falling" or "unknown".
    """
    scan = s.folder.info["coarse_scan"]
    grays = staircase_grays(scan["gray"], scan["fringe_phase_rad"], s.cfg.sweep.reference_gray,
                            s.cfg.pattern.grating_period_px)
    away, toward = s.engine.run(sign_steps(s.cfg, grays, frames))
    probe = probe_direction([r.amplitude_adu or 0.0 for r in away.results],
                            [r.amplitude_adu or 0.0 for r in toward.results], grays)
    s.folder.update(direction=probe.summary())
    if probe.direction == "unknown":
        s.folder.warn(f"sign: the blazed staircase probe could not tell which way the phase runs (fringe amplitude "
                      f"ratio {probe.ratio:.2f}); the curve is made to rise and its direction is recorded as assumed")
    s.log(f"sign: the phase {'runs an unknown way' if probe.direction == 'unknown' else probe.direction} with gray "
          f"(blazed staircase: fringe amplitude {probe.amplitude_away_adu:.1f} vs {probe.amplitude_toward_adu:.1f} "
          "ADU rising away from / toward the mirror half)")
    return probe.direction


def scale_reference(s: Session) -> int | None:
    """The second reference gray of the sweep (``sweep.second_reference_gray``; 'auto': the gray of the band stage's
    coarse scan in run.json farthest in phase from the reference gray, the longest lever for the scale drift).
    Writes ``scale_gray`` into run.json; returns it, or None for 'none'."""
    chosen = s.cfg.sweep.second_reference_gray
    if chosen == "auto":
        scan = s.folder.info["coarse_scan"]
        chosen = farthest_gray(scan["gray"], scan["fringe_phase_rad"], s.cfg.sweep.reference_gray)
    gray = None if chosen == "none" or not s.cfg.sweep.reference_every else chosen
    if gray == s.cfg.sweep.reference_gray:
        gray = None
    s.folder.update(scale_gray=gray)
    return gray


AUTO_FRAMES = (2, 16)  # frames per level 'auto' chooses within (two or more: a level's own scatter is then seen)
PROBE_FRAMES = 10      # back-to-back frames of the scatter probe at each reference gray


def choose_frames(s: Session, low: int, high: int) -> None:
    """Frames stage, for ``sweep.frames_per_level`` 'auto' (nothing otherwise, or when run.json has the choice):
    PROBE_FRAMES back to back at the reference gray, at the gray pi from it on the band stage's coarse scan (mid
    curve, where the phase is steep and drive flicker, dphase/dV times the voltage ripple, the largest) and at
    run.json's ``scale_gray``; their scatter beyond their pixel noise (vibration, flicker), pooled, sets the frames
    per level that bring a level's standard error to ``sweep.target_std_mrad`` (analysis.curve.frames_for_target),
    within AUTO_FRAMES.

    Writes ``auto_frames`` (the choice and the figures behind it) into run.json; returns nothing.
    """
    cfg = s.cfg
    if cfg.sweep.frames_per_level != "auto" or "auto_frames" in s.folder.info:
        return
    scan, scale = s.folder.info.get("coarse_scan"), s.folder.info.get("scale_gray")
    steep = opposite_gray(scan["gray"], scan["fringe_phase_rad"], cfg.sweep.reference_gray) if scan else None
    grays = tuple(g for g in dict.fromkeys((cfg.sweep.reference_gray, steep, scale)) if g is not None)
    measured = s.engine.run(scatter_steps(cfg, low, high, grays, PROBE_FRAMES))
    rows = [(i, r.phase_rad, r.phase_std_rad) for i, m in enumerate(measured) for r in m.results
            if r.phase_rad is not None and r.phase_std_rad is not None]
    target = cfg.sweep.target_std_mrad * 1e-3
    try:
        if not rows:
            raise CurveError("no frame of the probe has a fringe phase")
        n, scatter, pixel = frames_for_target(*zip(*rows), target, *AUTO_FRAMES)
    except CurveError:
        raise StepError("frames: the scatter probe measured too few fringe phases; check the fringes with "
                        "`fringecal align`, or set sweep.frames_per_level to a number") from None
    s.folder.update(auto_frames={"per_level": n, "frame_scatter_rad": scatter, "pixel_noise_rad": pixel,
                            "target_rad": target, "probe_frames": len(rows), "probe_grays": list(grays)})
    capped = " (the most it takes)" if n == AUTO_FRAMES[1] and math.hypot(scatter, pixel) > target * n**0.5 else ""
    s.log(f"frames: {n} a level{capped}: the frames scatter by {1e3 * scatter:.1f} mrad beyond {1e3 * pixel:.2f} "
          f"mrad of pixel noise, and a level's standard error is to be {1e3 * target:g} mrad")


def sweep_config(cfg, info: dict):
    """``cfg`` with the frames per level the sweep in run.json ``info`` uses ('auto' resolved by choose_frames; the
    drift-reference visits then take at least as many, since their noise reaches every level)."""
    if cfg.sweep.frames_per_level != "auto":
        return cfg
    if "auto_frames" not in info:
        raise StepError("frames: sweep.frames_per_level is 'auto' but the scatter probe has not chosen a number")
    return with_frames(cfg, int(info["auto_frames"]["per_level"]))


def with_frames(cfg, n: int):
    """``cfg`` sweeping ``n`` frames a level, its drift-reference visits at least as many."""
    return replace(cfg, **{"sweep.frames_per_level": n, "sweep.reference_frames": max(cfg.sweep.reference_frames, n)})


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


def sweep(s: Session, low: int, high: int, done=frozenset(), adaptive: AdaptiveSettings | None = None) -> None:
    """Sweep stage: the fringe phase of every mirror gray at the grating pair ``low``/``high``, with drift references
    (at run.json's ``scale_gray`` too, when set); units whose checkpoint is in ``done`` are skipped (a resumed run).
    With ``adaptive`` settings only the levels the model asks for are measured (rig/run/adaptive.py), each choice
    journaled, with the same references.

    Writes ``pair`` into run.json, and a journal line per frame and per finished unit (frame crops in frames/);
    returns nothing.
    """
    cfg = sweep_config(s.cfg, s.folder.info)
    s.folder.update(pair={**s.folder.info.get("pair", {}), "low": low, "high": high}, sweep_began=True)
    scale_gray = s.folder.info.get("scale_gray")
    if adaptive is None:
        s.engine.run(sweep_steps(cfg, low, high, done, scale_gray=scale_gray))
        return
    rows = journal_rows(read_journal(s.folder.path / "journal.jsonl").frames()) if done else []
    direction = (s.folder.info.get("direction") or {}).get("direction", "unknown")
    s.engine.run(adaptive_sweep_steps(cfg, low, high, adaptive, done, rows, log=s.log, direction=direction,
                                      scale_gray=scale_gray))


FRAME_COLUMNS = ("frame", "purpose", "gray", "t_s", "phase_rad", "phase_std_rad", "amplitude_adu", "background_adu",
                 "contrast")


def finish(folder: RunFolder, cfg, method: str, bench=None, adaptive: AdaptiveSettings | None = None) -> dict:
    """Finish stage: the phase curve (and its uncertainty) and the lookup table from the journal's frames; on the
    simulator, the error against the true curve. An adaptive sweep's table comes from its model at every gray.

    The curve takes each frame's complex fringe amplitude (for the cyclic-error correction), the references at one
    or two grays (piston, and scale drift referred to the sweep's middle) and the direction the sign stage measured.
    Writes frames.csv, phase.csv, phase.png, manifest.csv, lut/, analysis.json, report.html (and truth.csv on the
    simulator: the true curve of the panel region whose light makes the band's fringes, at the sweep's middle; an
    adaptive sweep also model.csv) and ``status`` complete into run.json; returns the summary analysis.json holds.
    """
    contents = read_journal(folder.path / "journal.jsonl")
    frames = sweep_frames(contents.frames())
    if not frames:
        raise CurveError("sweep: no measured frame in the journal")
    folder.write_csv("frames.csv", list(FRAME_COLUMNS),
                     ([_cell(r.get(k)) for k in FRAME_COLUMNS] for r in contents.frames() if "phase_rad" in r))
    warnings = list(folder.info.get("warnings", []))
    curve, mid_s = curve_from_frames(frames, cfg.sweep.reference_gray, folder.info, warnings=warnings)
    probe = folder.info.get("direction") or {}
    saturated = sorted({r["gray"] for r in frames if r["saturated_px"]})
    if saturated:
        warnings.append(f"saturated pixels in the band at grays {', '.join(map(str, saturated))}")
    if curve.rejected_grays:
        warnings.append(f"outlier gray levels left out: {', '.join(map(str, curve.rejected_grays))}")
    b, c = folder.info["band"], folder.info["carrier"]
    band = Band(b["x0"], b["x1"], b["y0"], b["y1"])
    summary = curve_summary(curve, band, Carrier(c["fx"], c["fy"], c["sharpness"]), method, warnings, "time_s")
    summary["sign_probe"] = probe or None
    summary["curve_at_s"] = mid_s
    model = (finish_model(journal_rows(frames), cfg, adaptive, probe.get("direction", "unknown"),
                          folder.info.get("scale_gray")) if adaptive is not None else None)
    summary["sweep"] = sweep_figures(frames)
    truth = None
    if bench is not None:
        grays, phase = bench.sampled_true_curve((band.x0, band.x1, band.y0, band.y1), at_s=mid_s)
        folder.write_csv("truth.csv", ["gray", "phase_rad"], ((int(g), f"{p:.6f}") for g, p in zip(grays, phase)))
        truth = (grays, phase)
        summary["truth"] = {"region": "panel pixels whose light makes the band's fringes, weighted by their fringe "
                                      "amplitude", "at_s": mid_s,
                            **agreement(curve.gray, curve.phase_rad, curve.std_rad, grays, phase).summary()}
        summary["truth_rms_error_rad"] = summary["truth"]["rms_error_rad"]
    write_phase_csv(folder.path / "phase.csv", curve, model)
    if model is not None:
        folder.write_csv("model.csv", ["gray", "phase_rad", "phase_std_rad", "measured"],
                         ((int(g), f"{p:.6f}", f"{e:.6f}", int(m))
                          for g, p, e, m in zip(model.gray, model.phase_rad, model.std_rad, model.measured)))
        summary["adaptive"] = model.summary(adaptive)
    plot_curve(folder.path / "phase.png", curve, method, truth, model)
    folder.write_manifest(contents.frames())
    if model is None:  # the measured curve, as it runs: the table smooths it and judges its dips itself
        table_input = (curve.gray, curve.phase_rad, curve.std_rad)
    else:
        table_input = (model.gray, model.phase_rad, model.std_rad)
    lut = build_lut(*table_input, bit_depth=cfg.modulator.bit_depth, smooth=model is None,
                    direction=curve.direction if curve.direction_basis != "assumed" else None)
    summary["warnings"] += [w for w in lut.warnings if w not in summary["warnings"]]
    if truth is not None:
        estimate = monotone_cubic(table_input[0], table_input[1], truth[0])
        summary["table_error_vs_truth_rad"] = table_error_rad(lut.gray, estimate, truth[1])
    (folder.path / "lut").mkdir(exist_ok=True)
    meta = metadata(lut, "phase.csv", now_iso(), cfg.laser.wavelength_nm)
    meta["direction_basis"] = curve.direction_basis
    if model is not None:
        meta.update(method=f"adaptive sweep: {summary['adaptive']['model']}, at every gray; nearest gray per target",
                    predicted_rms_error_rad=model.table.rms_rad)
    temperatures = [r["temperature_c"] for r in frames if r.get("temperature_c") is not None]
    if temperatures:  # a probe was fitted: every table says at what temperature it was measured
        meta["temperature_c"] = summary["temperature_c"] = float(np.mean(temperatures))
        summary["temperature_range_c"] = [float(min(temperatures)), float(max(temperatures))]
    files = write_lut_folder(folder.path / "lut", lut, meta)
    summary["lut"] = {"folder": "lut", "window_gray": list(lut.window), "distinct_grays": lut.distinct_grays,
                      "rms_linearity_rad": lut.rms_linearity_rad, "range_rad": lut.range_rad, "levels": lut.levels,
                      "direction": lut.direction, "range_label": lut.range_label,
                      "files": [f.name for f in files], "dips": [d.summary() for d in lut.dips]}
    if model is not None:
        summary["lut"]["predicted_rms_error_rad"] = model.table.rms_rad
    write_json(folder.path / "analysis.json", summary)
    folder.update(status="complete", ended=now_iso(), range_rad=summary["range_rad"],
                  first_gray_2pi=summary["first_gray_2pi"], temperature_c=summary.get("temperature_c"))
    write_report(folder.path)  # after the status: the page says how the run ended
    return summary


def sweep_frames(records: list[dict]) -> list[dict]:
    """The sweep's measured frames (levels and references with a phase) among journal or frames.csv records, in
    time order."""
    frames = [r for r in records if r["purpose"] in ("level", "reference") and r["phase_rad"] is not None]
    return sorted(frames, key=lambda r: r["t_s"])


def curve_from_frames(frames: list[dict], reference_gray: int, info: dict, *, cyclic: bool = True,
                      direction: str | None = None, warnings: list[str] | None = None):
    """The phase curve of a sweep's frames (journal or frames.csv records, any order) as a run makes it, and the
    time (s) it refers to (the sweep's middle).

    ``info`` is the run's run.json: its ``direction`` (the sign probe's) and ``scale_gray`` are used; ``direction``
    overrides the probe's. ``cyclic`` False leaves the fringe amplitudes out (no cyclic-error fit), to see what the
    correction does. A missing amplitude is noted in ``warnings``.
    """
    frames = sweep_frames(frames)
    if not frames:
        raise CurveError("sweep: no measured frame")
    measured = (info.get("direction") or {}).get("direction", "unknown")
    chosen = measured if direction is None else direction
    basis = "measured" if direction is None and measured != "unknown" else None
    amplitude = [r.get("amplitude_adu") or np.nan for r in frames] if cyclic else None
    curve, mid_s, used = sweep_curve([r["gray"] for r in frames], [r["phase_rad"] for r in frames],
                                     [r["phase_std_rad"] for r in frames], [r["t_s"] for r in frames],
                                     [r.get("contrast") for r in frames], amplitude, reference_gray,
                                     direction=chosen, direction_basis=basis, scale_gray=info.get("scale_gray"),
                                     smooth=True)
    if cyclic and not used and warnings is not None:
        warnings.append("no fringe amplitudes recorded: the cyclic error is neither fitted nor corrected")
    return curve, mid_s


def _cell(value) -> str:
    """A frames.csv cell: empty for a missing value, full precision for a number."""
    if value is None:
        return ""
    return repr(value) if isinstance(value, float) else str(value)


def sweep_figures(frames: list[dict]) -> dict:
    """Levels measured, frames and bench time (s, first to last sweep frame on the bench clock) of a sweep."""
    times = [r["t_s"] for r in frames]
    return {"levels": len({r["gray"] for r in frames if r["purpose"] == "level"}), "frames": len(frames),
            "bench_s": float(max(times) - min(times)) if times else 0.0}


def closing_lines(folder: RunFolder, summary: dict) -> list[str]:
    """The lines a finished run prints: range, worst uncertainty, table window, warnings, files."""
    first = summary["first_gray_2pi"]
    lines = [f"phase range {summary['range_rad']:.3f} rad ({summary['range_pi']:.2f} π); "
             + (f"2π first reached at gray {first}" if first is not None else "2π not reached"),
             f"worst uncertainty {summary['worst_std_rad'] * 1e3:.1f} mrad at gray {summary['worst_std_gray']}"]
    lines += correction_lines(summary)
    if "truth" in summary:
        t = summary["truth"]
        lines.append(f"against the simulator's truth (the sampled panel region at t = {t['at_s']:.1f} s): "
                     f"{t['rms_error_rad'] * 1e3:.1f} mrad rms ({t['worst_error_rad'] * 1e3:.1f} worst); stated std: "
                     f"chi-square per level {t['chi2_per_level']:.2f}, {100 * t['within_2sigma']:.0f} % of levels "
                     "within 2 sigma")
    sw = summary["sweep"]
    if "adaptive" in summary:
        a = summary["adaptive"]
        lines.append(f"adaptive sweep: {sw['levels']} levels measured ({sw['frames']} frames, {sw['bench_s']:.1f} s "
                     f"of bench time); the table's predicted error is {a['predicted_table_rms_rad'] * 1e3:.1f} mrad "
                     f"RMS (tolerance {a['tolerance_rad'] * 1e3:g} mrad, budget {a['budget_levels']} levels)")
        if "earlier_shape" in a:
            e = a["earlier_shape"]
            lines.append(f"earlier curve's shape {'holds' if e['holds'] else 'does not hold'}: scale {e['scale']:.4f}, "
                         f"chi-square {e['chi2']:.1f} for {e['dof']} degrees of freedom (p = {e['p_value']:.3g})"
                         + ("" if e["holds"] else "; went on measuring until the model's table was good enough"))
    if "table_error_vs_truth_rad" in summary:
        lines.append(f"table error against the simulator's truth: {summary['table_error_vs_truth_rad'] * 1e3:.1f} "
                     "mrad RMS over its entries")
    lines += table_lines(summary["lut"])
    lines += [f"warning: {w}" for w in summary["warnings"]]
    lines.append(f"files in {folder.path}: report.html, phase.csv, analysis.json, phase.png, lut/, journal.jsonl, "
                 "run.json")
    sim = " --sim" if folder.info.get("devices", {}).get("camera_backend") == "sim" else ""
    lut = folder.path / "lut"
    csv_name, _, npy_name, mat_name, txt_name = summary["lut"]["files"]
    lines += [f"next: load {lut / npy_name} in your hologram code: entry i is the gray for the phase "
              f"{summary['lut']['range_rad']:.4f} * i / {summary['lut']['levels']} rad (README: Using the table; "
              f"{mat_name}, {txt_name} and {csv_name} hold the same table)",
              f"next: check it on the bench: fringecal verify{sim} --lut {lut} --config {folder.path / 'config.toml'}"]
    return lines


def correction_lines(summary: dict) -> list[str]:
    """The corrections applied to the curve, in words: direction, drift, cyclic error, and the budget's largest part."""
    lines = []
    if summary.get("direction"):
        lines.append(f"phase {summary['direction']} with gray ({summary.get('direction_basis')})")
    d = summary.get("drift")
    if d:
        scale = (f" and scale from gray {d['scale_gray']} (span {100 * d['scale_span']:.2f} %)"
                 if d.get("scale_gray") is not None else " only (one reference gray)")
        lines.append(f"drift removed: piston ({1e3 * d['span_rad']:.1f} mrad span){scale}")
    c = summary.get("cyclic")
    if c and c.get("assessed") is False:
        lines.append("cyclic error: not assessed (the fringe amplitude changes from level to level beyond the leak "
                     "model; see the warnings)")
    elif c:
        lines.append(f"cyclic error: leak |L|/a = {with_std(c['ratio'], c['ratio_std'])} "
                     f"({1e3 * c['peak_error_rad']:.1f} mrad peak), correction {'applied' if c['applied'] else 'off'}")
    b = summary.get("budget")
    if b:
        worst = max(b["components"].items(), key=lambda kv: kv[1]["median_rad"])
        lines.append(f"uncertainty budget: {1e3 * b['combined_median_rad']:.2f} mrad median per level, largest part "
                     f"{worst[0].replace('_', ' ')} ({1e3 * worst[1]['median_rad']:.2f} mrad)")
    return lines


def table_lines(table: dict) -> list[str]:
    """What a finished table spans and how many different grays it uses, in words."""
    low, high = table["window_gray"]
    range_rad, levels, distinct = table["range_rad"], table["levels"], table["distinct_grays"]
    lines = [f"lookup table: {levels} entries over {range_rad:.3f} rad ({range_rad / np.pi:.2f} π), from grays "
             f"{low}..{high}"]
    if distinct < levels:
        lines.append(f"  {distinct} different grays among its {levels} entries: where the curve is steep, neighbouring"
                     " entries are nearer in phase than one gray step, so they share a gray")
    return lines
