"""One measuring session: the bench's devices opened and closed, the journal, the engine and the progress listeners;
and how a command's run folder is made and how its failures end (status in run.json, message, exit code)."""

from __future__ import annotations

import signal
import sys
from dataclasses import dataclass, field
from pathlib import Path

from analysis.curve import CurveError
from rig.devices.accessories import Accessories, DriftWatch, open_accessories
from rig.devices.cameras import open_camera
from rig.devices.clock import MonotonicClock
from rig.devices.screen import Tee, open_screen
from rig.errors import EXIT_FAULT, EXIT_INTERRUPTED, STORAGE_FULL, DeviceFault, UsageError, describe_os_error
from rig.options import load_bench_config, writable
from rig.output.dashboard import EventFile, LiveDashboard, PlainProgress, RunState
from rig.output.results import now_iso
from rig.run.engine import Engine, Interrupted
from rig.run.folder import RunFolder, command_line, default_run_dir
from rig.run.journal import Journal
from rig.run.measure import FrameAnalyzer
from rig.run.steps import StepError
from rig.safety import ensure_laser_safety

# The signals that stop a run after the current level: Ctrl-C, a scheduler or `timeout` (SIGTERM), a closed
# terminal or SSH session (SIGHUP); a second one stops at once.
STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)


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

    ``sim`` (--sim): the whole bench is simulated. Otherwise the panel is a window on ``modulator.display`` (or the
    ``modulator.backend`` plug-in) and the camera comes from ``camera.backend``; a 'sim' camera watches the simulated bench, which is shown each pattern
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
        identity = {"screen": window.display.describe() if hasattr(window, "display") else
                    f"{getattr(window, 'name', 'panel')} ({cfg.modulator.backend})"}
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


class Session:
    """Devices, journal, engine and progress display of one command; everything is closed on every exit path."""

    def __init__(self, args, cfg, folder: RunFolder, title: str, start_s: float = 0.0, frames_before: int = 0):
        self.cfg, self.folder = cfg, folder
        self.devices = open_devices(cfg, args.sim, start_s)
        folder.update(devices={**folder.info.get("devices", {}), "identity": self.devices.identity},
                      method=args.method)
        cam = self.devices.camera
        self.analyzer = FrameAnalyzer(2**cam.bit_depth - 1, dark_adu=folder.info.get("dark_adu", 0.0),
                                      method=args.method)
        self.state = RunState(title)
        self.events = EventFile(args.events) if args.events else None
        json_out = getattr(args, "json", False)  # stdout is for the JSON alone; progress goes to stderr
        self.live = LiveDashboard(self.state) if sys.stdout.isatty() and not json_out else None
        progress = sys.stderr if json_out else sys.stdout
        listeners = [self.state] + ([PlainProgress(self.state, progress)] if self.live is None else [])
        listeners += [self.events] if self.events else []
        self.journal = Journal(folder.path / "journal.jsonl")
        if self.journal.cut:
            folder.warn(f"journal: dropped a last line cut short by the interruption ({len(self.journal.cut)} bytes)")
        self.engine = Engine(cfg, self.devices.screen, cam, self.devices.clock, self.analyzer, self.journal,
                             publish=lambda event: [listener(event) for listener in listeners],
                             on_frame=folder.on_frame, frames_before=frames_before,
                             session=folder.info.get("sessions", 1), **self._accessory_options(cfg, folder))
        self._previous_handlers: dict = {}

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
        def on_stop(signum, frame):
            if self.engine._stop:
                raise KeyboardInterrupt
            name = "Ctrl-C" if signum == signal.SIGINT else signal.Signals(signum).name
            self.engine.request_stop(f"{name}: stopping after the current level (Ctrl-C again to stop at once)")

        self._previous_handlers = {sig: signal.signal(sig, on_stop) for sig in STOP_SIGNALS}
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
            for sig, handler in self._previous_handlers.items():
                signal.signal(sig, handler if handler is not None else signal.SIG_DFL)
            if self.live is not None:
                self.live.__exit__(*exc)
            self.journal.close()
            if self.events:
                self.events.close()
            self.devices.close()
        return False


def prepare_run(args, what: str):
    cfg = load_bench_config(args)
    ensure_laser_safety(cfg.laser.laser_class, cfg.laser.wavelength_nm,
                        sim=args.sim or cfg.camera.backend == "sim",
                        acknowledged=args.laser_safety_acknowledged or cfg.laser.safety_acknowledged)
    if args.events:  # before the run folder is made: a bad path leaves nothing behind
        writable(args.events, "--events")
    out = Path(args.out) if args.out else default_run_dir()
    if not args.out:
        out.parent.mkdir(exist_ok=True)
    devices = {"camera_backend": "sim" if args.sim else cfg.camera.backend}
    folder = RunFolder.create(out, cfg, command_line(), devices, save_frames=not args.no_frames)
    print(f"{what}: run folder {folder.path}", flush=True, file=sys.stderr if getattr(args, "json", False) else None)
    return cfg, folder


def guarded(folder: RunFolder, body, resume: str | None = "sweep") -> int:
    """Run ``body``; turn stops and failures into a run.json status, a one-line message and an exit code.

    ``resume`` is the command whose ``--resume`` continues the run (sweep, map), None for a command that cannot be
    resumed; a sweep's run can be resumed once its sweep began, before that it is started again.
    """
    try:
        return body()
    except (Interrupted, KeyboardInterrupt):
        _set_status(folder, status="interrupted", ended=now_iso())
        print(f"fringecal: stopped; nothing measured is lost. {_next_step(folder, resume)}", file=sys.stderr)
        return EXIT_INTERRUPTED
    except OSError as err:
        if err.errno in STORAGE_FULL:  # resumable once there is space again: nothing half-written was recorded
            _set_status(folder, status="interrupted", ended=now_iso(), message=describe_os_error(err))
            print(f"fringecal: storage: {describe_os_error(err)}; stopped, nothing recorded is lost. Free some space,"
                  f" then: {_next_step(folder, resume)}", file=sys.stderr)
        else:
            _set_status(folder, status="failed", ended=now_iso(), message=describe_os_error(err))
            print(f"fringecal: storage: {describe_os_error(err)}; everything measured so far is in {folder.path}",
                  file=sys.stderr)
        return EXIT_FAULT
    except (DeviceFault, StepError) as err:
        folder.update(status="failed", ended=now_iso(), message=str(err))
        print(f"fringecal: error: {err}; everything measured so far is in {folder.path}"
              + (f". {_next_step(folder, resume)}" if _resumable(folder, resume) else ""), file=sys.stderr)
        return EXIT_FAULT
    except CurveError as err:
        folder.update(status="failed", ended=now_iso(), message=str(err))
        raise UsageError(str(err)) from None


def _set_status(folder: RunFolder, **fields) -> None:
    """Record how the run ended, if the storage still takes it (a full disk may not)."""
    try:
        folder.update(**fields)
    except OSError:
        pass


def _resumable(folder: RunFolder, resume: str | None) -> bool:
    return resume == "map" or resume == "sweep" and folder.sweep_began()


def _next_step(folder: RunFolder, resume: str | None) -> str:
    """What to do after a stop: resume the run, or (stopped before anything resumable) start it again."""
    if _resumable(folder, resume):
        return f"Resume with: fringecal {resume} --resume {folder.path}"
    words = list(folder.info.get("command", ["fringecal"]))
    for option in ("--out", "--resume"):
        if option in words[:-1]:
            i = words.index(option)
            del words[i:i + 2]
    before = "its sweep began" if resume == "sweep" else "it finished"
    return f"It stopped before {before}, so there is nothing to resume; start again: {' '.join(words)}"
