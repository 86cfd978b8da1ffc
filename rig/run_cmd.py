"""fringecal tune, sweep and run: the bench calibration from one command, unattended and resumable."""

from __future__ import annotations

import signal
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from analysis.band import Band
from analysis.carrier import Carrier, NoFringesError
from analysis.config import config_from_dict
from analysis.curve import CurveError, phase_curve
from analysis.fringe import DEFAULT_METHOD, METHODS
from analysis.lut import build_lut
from rig.accessories import Accessories, DriftWatch, open_accessories
from rig.cameras import open_camera
from rig.cli import load_bench_config
from rig.clock import MonotonicClock
from rig.dashboard import EventFile, LiveDashboard, PlainProgress, RunState
from rig.engine import DeviceFault, Engine, Interrupted
from rig.errors import UsageError
from rig.journal import Journal, read_journal
from rig.lut_files import metadata, write_lut_folder
from rig.measure import FrameAnalyzer
from rig.plans import PlanError, exposure_plan, locate_plan, opposite_gray, sweep_plan, tune_plan, warmup_plan
from rig.report import write_report
from rig.results import curve_summary, plot_curve, plot_tuning, write_json, write_phase_csv
from rig.runfolder import RunFolder, command_line, default_run_dir, now_iso
from rig.safety import add_acknowledgement_flag, ensure_laser_safety
from rig.screen import Tee, open_screen

MIN_TUNED_CONTRAST = 0.10
EXIT_FAULT, EXIT_INTERRUPTED = 3, 130


def register(command) -> None:
    specs = (
        ("tune", cmd_tune, "find the grating gray pair with the most fringe contrast (a pi phase step)"),
        ("sweep", cmd_sweep, "measure the phase of every gray level with drift references (resumable)"),
        ("run", cmd_run, "the whole calibration: exposure, tuning, sweep, phase curve and lookup table"),
    )
    for name, func, help_text in specs:
        p = command(name, func, help_text)
        add_run_options(p)
        if name in ("sweep", "run"):
            p.add_argument("--warmup-minutes", type=float, default=0.0, metavar="M",
                           help="before measuring, hold a pattern until the fringe phase is stable, at most M minutes")
        if name == "sweep":
            p.add_argument("--resume", metavar="RUN_DIR", help="continue an interrupted sweep in RUN_DIR")
            p.add_argument("--pair", metavar="LOW:HIGH", help="grating gray pair (default: the config's)")


def add_run_options(p) -> None:
    """The options every command that makes a run folder shares (tune, sweep, run, map, flicker)."""
    p.add_argument("--sim", action="store_true", help="use the built-in simulated bench")
    p.add_argument("--out", metavar="DIR", help="run folder to create (default: runs/YYYYmmdd-HHMMSS)")
    p.add_argument("--yes", action="store_true", help="ask nothing (unattended runs)")
    p.add_argument("--method", choices=METHODS, default=DEFAULT_METHOD,
                   help=f"fringe-phase estimator (default {DEFAULT_METHOD})")
    p.add_argument("--events", metavar="FILE", help="also write progress events as JSON lines to FILE")
    p.add_argument("--no-frames", action="store_true", help="do not save the fringe-band crops of each frame")
    add_acknowledgement_flag(p)


# --- devices -------------------------------------------------------------------------------------------------
@dataclass
class Devices:
    """The screen, camera, clock and serial accessories of one session, and the simulated bench behind the
    simulated parts (None when nothing is simulated). ``close`` releases every one of them, whatever fails."""

    screen: object
    camera: object
    clock: object
    bench: object | None
    identity: dict
    accessories: Accessories = field(default_factory=Accessories)

    def close(self) -> None:
        try:
            self.accessories.close()
        finally:
            try:
                self.screen.close()
            finally:
                self.camera.close()


def open_devices(cfg, sim: bool, start_s: float = 0.0) -> Devices:
    """Open the bench the config describes; ``start_s`` continues a simulated run's time line.

    ``sim`` (--sim): the whole bench is simulated. Otherwise the panel is a window on ``modulator.display`` and the
    camera comes from ``camera.backend``; a 'sim' camera watches the simulated bench, which is shown each pattern
    the window shows. Serial accessories with a port configured are opened and checked.
    """
    if sim:
        from simulators.bench import Bench
        from simulators.devices import SimCamera, SimScreen
        bench = Bench(cfg, start_s=start_s)
        identity = {"screen": f"simulated panel {cfg.modulator.width_px}x{cfg.modulator.height_px}",
                    "camera": f"simulated camera {cfg.camera.width_px}x{cfg.camera.height_px}",
                    "simulator_seed": cfg.simulator.seed}
        accessories = open_accessories(cfg.accessories)  # serial gadgets with a port work beside a simulated bench
        identity.update({role: part.link.identity or part.link.where for role, part in accessories.fitted().items()})
        return Devices(SimScreen(bench), SimCamera(bench), bench.clock, bench, identity, accessories)
    opened = []
    try:
        window = open_screen(cfg.modulator)
        opened.append(window)
        identity = {"screen": window.display.describe()}
        if cfg.camera.backend == "sim":
            from simulators.bench import Bench
            from simulators.devices import SimCamera, SimScreen
            bench = Bench(cfg, start_s=start_s)
            screen, camera, clock = Tee(window, SimScreen(bench)), SimCamera(bench), bench.clock
            identity.update(camera=f"simulated camera {cfg.camera.width_px}x{cfg.camera.height_px}",
                            simulator_seed=cfg.simulator.seed)
        else:
            bench, screen, clock = None, window, MonotonicClock()
            camera = open_camera(cfg.camera, clock)
            identity["camera"] = getattr(camera, "name", cfg.camera.backend)
        opened.append(camera)
        if not getattr(camera, "exposure_timestamps", True) and cfg.camera.discard_frames == 0:
            print(f"warning: {identity['camera']} gives no exposure timestamps; set camera.discard_frames "
                  "(fringecal timing measures how many)", file=sys.stderr)
        accessories = open_accessories(cfg.accessories)
        opened.append(accessories)
        identity.update({role: part.link.identity or part.link.where for role, part in accessories.fitted().items()})
        if accessories.rotator is not None:
            identity["rotator_angle_deg"] = accessories.rotator.move_to(cfg.accessories.rotator.angle_deg)
    except BaseException:
        for device in reversed(opened):
            device.close()
        raise
    return Devices(screen, camera, clock, bench, identity, accessories)


def take_dark(s: "Session") -> float:
    """Black level (ADU): the mean of frames with the shutter closed when one is fitted, else estimate_dark."""
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


class Session:
    """Devices, journal, engine and progress display of one command; everything is closed on every exit path."""

    def __init__(self, args, cfg, folder: RunFolder, title: str, start_s: float = 0.0, frames_before: int = 0):
        self.cfg, self.folder = cfg, folder
        self.devices = open_devices(cfg, args.sim, start_s)
        folder.update(devices={**folder.info.get("devices", {}), "identity": self.devices.identity})
        cam = self.devices.camera
        self.analyzer = FrameAnalyzer(2**cam.bit_depth - 1, dark_adu=folder.info.get("dark_adu", 0.0),
                                      method=args.method)
        self.state = RunState(title)
        self.events = EventFile(args.events) if args.events else None
        self.live = LiveDashboard(self.state) if sys.stdout.isatty() else None
        listeners = [self.state] + ([PlainProgress(self.state, sys.stdout)] if self.live is None else [])
        listeners += [self.events] if self.events else []
        self.journal = Journal(folder.path / "journal.jsonl")
        if self.journal.cut:
            folder.warn(f"journal: dropped a last line cut short by the interruption ({len(self.journal.cut)} bytes)")
        self.engine = Engine(cfg, self.devices.screen, cam, self.devices.clock, self.analyzer, self.journal,
                             publish=lambda event: [listener(event) for listener in listeners],
                             on_frame=folder.on_frame, frames_before=frames_before,
                             session=folder.info.get("sessions", 1), **self._accessory_options(cfg, folder))
        self._previous_handler = None

    def _accessory_options(self, cfg, folder: RunFolder) -> dict:
        """Engine options for the accessories: frames to discard, and logged readings with drift warnings."""
        options = {"discard_frames": cfg.camera.discard_frames, "timeout_s": cfg.camera.grab_timeout_s}
        parts = self.devices.accessories
        if parts.power_meter is not None or parts.thermometer is not None:
            def warn(message: str) -> None:
                folder.warn(message)
                self.log(f"warning: {message}")

            watch = DriftWatch(cfg.accessories, warn)
            options["readings"] = lambda: watch(parts.readings())
        return options

    def log(self, message: str) -> None:
        self.engine.publish({"event": "log", "message": message})

    def __enter__(self):
        def on_sigint(signum, frame):
            if self.engine._stop:
                raise KeyboardInterrupt
            self.engine.request_stop()
            self.log("Ctrl-C: stopping after the current level (press again to stop at once)")

        self._previous_handler = signal.signal(signal.SIGINT, on_sigint)
        if self.live is not None:
            self.live.__enter__()
        return self

    def __exit__(self, *exc):
        try:
            self.engine.close()
        finally:
            faults = dict(self.folder.info.get("faults", {}))
            for kind, count in self.engine.faults.items():
                faults[kind] = faults.get(kind, 0) + count
            self.folder.update(faults=faults, frames=self.engine.frames_grabbed)
            signal.signal(signal.SIGINT, self._previous_handler or signal.SIG_DFL)
            if self.live is not None:
                self.live.__exit__(*exc)
            self.journal.close()
            if self.events:
                self.events.close()
            self.devices.close()
        return False


# --- stages --------------------------------------------------------------------------------------------------
def auto_exposure(s: Session, low: int, high: int) -> float:
    """Run the exposure plan at the grating pair ``low``/``high`` and record the exposure chosen."""
    exposure = s.engine.run(exposure_plan(s.cfg, s.devices.camera.exposure_s, low, high))
    s.folder.update(exposure_s=exposure)
    s.log(f"exposure {exposure * 1e3:.3f} ms")
    return exposure


def estimate_dark(s: Session) -> float:
    """Black level (ADU) from the darkest pixels of a frame: without a shutter, the best estimate there is."""
    frame = s.devices.camera.grab(timeout_s=s.engine.timeout_s)
    dark = float(np.percentile(frame.image, 0.1))
    s.analyzer.dark_adu = dark
    s.folder.update(dark_adu=dark, dark_source="0.1th percentile of a frame (no shutter configured)")
    return dark


def locate(s: Session, low: int, high: int) -> int:
    """Find the fringe band from several mirror grays; try other high grays if this pair makes no fringes.

    Returns the mirror gray whose fringes are pi from the reference gray's (for tuning).
    """
    gmax = s.cfg.gray_max
    tried = []
    for candidate in dict.fromkeys([high, gmax // 4, gmax // 2, (3 * gmax) // 4]):
        if candidate == low:
            continue
        measurements = s.engine.run(locate_plan(s.cfg, low, candidate))
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
    raise PlanError("locate: " + "; ".join(tried))


def get_ready(s: Session, low: int, high: int) -> int:
    """Dark level, exposure and fringe band at the grating pair ``low``/``high``, as every measurement starts;
    returns the mirror gray whose fringes are pi from the reference gray's (for tuning)."""
    take_dark(s)
    auto_exposure(s, low, high)
    return locate(s, low, high)


def tune(s: Session, opposite: int):
    """Tune the grating pair; save tune.csv and tune.png; stop with hints if the contrast stays low."""
    result = s.engine.run(tune_plan(s.cfg, (s.cfg.sweep.reference_gray, opposite)))
    s.folder.write_csv("tune.csv", ["high_gray", "amplitude_adu", "contrast"],
                       [(h, f"{a:.3f}", f"{c:.5f}") for h, a, c in sorted(result.curve)])
    plot_tuning(s.folder.path / "tune.png", [(h, c) for h, _, c in result.curve], result.low, result.high)
    s.folder.update(pair={"low": result.low, "high": result.high, "contrast": result.contrast,
                          "pi_step_gray": result.pi_step_gray, "measurements": result.measurements})
    if result.contrast < MIN_TUNED_CONTRAST:
        raise PlanError(f"tune: the best fringe contrast {result.contrast:.3f} is below {MIN_TUNED_CONTRAST}; "
                        "rotate the polarisation onto the panel's director (half-wave plate), check that the first "
                        "order overlaps the mirror half on the camera, and check the exposure")
    s.log(f"pair {result.low}/{result.high}: contrast {result.contrast:.3f}, pi step {result.pi_step_gray:.1f} grays"
          f" ({result.measurements} pairs measured)")
    return result


def warm_up(s: Session, low: int, high: int, minutes: float) -> None:
    """Hold the reference pattern until its fringe phase is stable (or ``minutes`` pass); record how it went."""
    if minutes <= 0:
        return
    result = s.engine.run(warmup_plan(s.cfg, low, high, minutes))
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
    s.folder.update(pair={**s.folder.info.get("pair", {}), "low": low, "high": high})
    s.engine.run(sweep_plan(s.cfg, low, high, done))


def finalize(folder: RunFolder, cfg, method: str, bench=None) -> dict:
    """Phase curve, lookup table and result files from the journal; return the closing summary."""
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


# --- commands ------------------------------------------------------------------------------------------------
def prepare_run(args, what: str):
    cfg = load_bench_config(args)
    ensure_laser_safety(cfg.laser.laser_class, cfg.laser.wavelength_nm,
                        sim=args.sim or cfg.camera.backend == "sim",
                        acknowledged=args.laser_safety_acknowledged or cfg.laser.safety_acknowledged)
    out = Path(args.out) if args.out else default_run_dir()
    if not args.out:
        out.parent.mkdir(exist_ok=True)
    devices = {"camera_backend": "sim" if args.sim else cfg.camera.backend}
    folder = RunFolder.create(out, cfg, command_line(), devices, save_frames=not args.no_frames)
    print(f"{what}: run folder {folder.path}", flush=True)
    return cfg, folder


def guarded(folder: RunFolder, body) -> int:
    """Run ``body``; turn stops and failures into a run.json status, a one-line message and an exit code."""
    try:
        return body()
    except Interrupted:
        folder.update(status="interrupted", ended=now_iso())
        print(f"fringecal: stopped; nothing measured is lost. Resume with: fringecal sweep --resume {folder.path}",
              file=sys.stderr)
        return EXIT_INTERRUPTED
    except KeyboardInterrupt:
        folder.update(status="interrupted", ended=now_iso())
        print(f"fringecal: interrupted; resume with: fringecal sweep --resume {folder.path}", file=sys.stderr)
        return EXIT_INTERRUPTED
    except (DeviceFault, PlanError) as err:
        folder.update(status="failed", ended=now_iso(), message=str(err))
        print(f"fringecal: error: {err}", file=sys.stderr)
        print(f"fringecal: everything measured so far is in {folder.path}", file=sys.stderr)
        return EXIT_FAULT
    except CurveError as err:
        folder.update(status="failed", ended=now_iso(), message=str(err))
        raise UsageError(str(err)) from None


def cmd_tune(args) -> int:
    """Find the low/high gray pair of the grating whose phase step is pi: the pair with the most fringe contrast."""
    cfg, folder = prepare_run(args, "tune")

    def body():
        with Session(args, cfg, folder, "fringecal tune") as s:
            opposite = get_ready(s, cfg.pattern.grating_low, cfg.pattern.grating_high)
            result = tune(s, opposite)
        folder.update(status="tuned", ended=now_iso())
        print(f"pair {result.low}/{result.high}: contrast {result.contrast:.3f}; the pi step is "
              f"{result.pi_step_gray:.1f} gray levels; curve in {folder.path / 'tune.csv'} and tune.png")
        return 0

    return guarded(folder, body)


def _parse_pair(text: str, gmax: int) -> tuple[int, int]:
    try:
        low, high = (int(v) for v in text.split(":"))
    except ValueError:
        raise UsageError(f"--pair: expected LOW:HIGH gray levels such as 0:80, got {text!r}") from None
    if not (0 <= low <= gmax and 0 <= high <= gmax and low != high):
        raise UsageError(f"--pair: expected two different gray levels in [0, {gmax}], got {text!r}")
    return low, high


def cmd_sweep(args) -> int:
    """Step the mirror half through every gray level at a fixed grating pair, with drift references."""
    if args.resume:
        return _resume(args)
    cfg, folder = prepare_run(args, "sweep")
    low, high = (_parse_pair(args.pair, cfg.gray_max) if args.pair
                 else (cfg.pattern.grating_low, cfg.pattern.grating_high))

    def body():
        with Session(args, cfg, folder, "fringecal sweep") as s:
            get_ready(s, low, high)
            warm_up(s, low, high, args.warmup_minutes)
            sweep(s, low, high)
            bench = s.devices.bench
        return _finish(folder, cfg, args.method, bench)

    return guarded(folder, body)


def _resume(args) -> int:
    if args.config or args.out or args.pair or args.warmup_minutes:
        raise UsageError("--resume: the run's own config, folder and pair are used; drop --config, --out, --pair and "
                         "--warmup-minutes")
    folder = RunFolder.open(args.resume)
    cfg = config_from_dict(folder.info["config"], source=folder.info["config_source"])
    if "band" not in folder.info or "pair" not in folder.info or "exposure_s" not in folder.info:
        raise UsageError(f"--resume: {folder.path} stopped before its sweep began; start a new run")
    if folder.info.get("status") == "complete":
        raise UsageError(f"--resume: {folder.path} is already complete")
    args.sim = args.sim or folder.info["devices"]["camera_backend"] == "sim"
    contents = read_journal(folder.path / "journal.jsonl")
    done = contents.checkpoints()
    start_s, frames_before = contents.last_checkpoint_s(), contents.frames_journaled()
    pair, b, c = folder.info["pair"], folder.info["band"], folder.info["carrier"]
    band = Band(b["x0"], b["x1"], b["y0"], b["y1"])
    folder.update(status="running")
    print(f"sweep: resuming {folder.path}: {len(done)} units already measured", flush=True)

    def body():
        with Session(args, cfg, folder, "fringecal sweep (resumed)", start_s, frames_before) as s:
            s.devices.camera.exposure_s = folder.info["exposure_s"]
            s.analyzer.use(band, Carrier(c["fx"], c["fy"], c["sharpness"]))
            folder.set_crop(band, c["period_px"], (s.devices.camera.height_px, s.devices.camera.width_px))
            sweep(s, pair["low"], pair["high"], done)
            bench = s.devices.bench
        return _finish(folder, cfg, args.method, bench)

    return guarded(folder, body)


def _finish(folder, cfg, method, bench) -> int:
    summary = finalize(folder, cfg, method, bench)
    for line in closing_lines(folder, summary):
        print(line)
    return 0


def cmd_run(args) -> int:
    """The main job: exposure, grating-pair tuning, the sweep, the phase curve, the lookup table, a summary."""
    cfg, folder = prepare_run(args, "run")

    def body():
        with Session(args, cfg, folder, "fringecal run") as s:
            opposite = get_ready(s, cfg.pattern.grating_low, cfg.pattern.grating_high)
            warm_up(s, cfg.pattern.grating_low, cfg.pattern.grating_high, args.warmup_minutes)
            result = tune(s, opposite)
            auto_exposure(s, result.low, result.high)  # the tuned first order is brighter than the starting pair's
            sweep(s, result.low, result.high)
            bench = s.devices.bench
        return _finish(folder, cfg, args.method, bench)

    return guarded(folder, body)
