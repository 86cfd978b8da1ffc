"""``fringecal align``: a live view for aligning the bench — contrast, exposure, fringe period and hints — in a
window on a display other than the panel's (rig/devices/align_window.py), or in the terminal."""

from __future__ import annotations

import contextlib
import os
import select
import sys
import time
from dataclasses import dataclass, field

import cv2
import numpy as np
from rich.console import Console, Group
from rich.live import Live
from rich.panel import Panel
from rich.table import Table
from rich.text import Text

from analysis.alignment import AlignmentFigures, alignment_figures, best_waveplate_deg, hint
from analysis.patterns import layout_of, split_screen
from rig.devices.align_window import AlignWindow, align_display, compose_view
from rig.devices.screen import DisplayError, list_displays
from rig.errors import UsageError
from rig.options import load_bench_config
from rig.output.numbers import fixed
from rig.run.session import open_devices
from rig.safety import add_acknowledgement_flag, ensure_laser_safety

SHADES = " .:-=+*#%@"
KEY_HELP = "keys: + / - grating high gray, ] / [ exposure x1.25 / /1.25, q quit"


def register(command) -> None:
    p = command("align", cmd_align, "live alignment view: contrast, exposure, fringe period, hints")
    p.add_argument("--sim", action="store_true", help="use the built-in simulated bench")
    p.add_argument("--seconds", type=float, metavar="S",
                   help="stop after S seconds (default: until q; 10 s when input is not a terminal)")
    p.add_argument("--rate", type=float, default=4.0, metavar="HZ", help="updates per second (default 4)")
    p.add_argument("--mirror-gray", type=int, metavar="G", help="gray of the mirror half (default the reference)")
    p.add_argument("--scan-waveplate", action="store_true",
                   help="first step the motorised half-wave plate over 90 deg, fit the contrast and move to the best")
    p.add_argument("--terminal", action="store_true",
                   help="the view in the terminal, not in a window (automatic when there is no display)")
    add_acknowledgement_flag(p)


def text_image(image: np.ndarray, width: int = 64, height: int = 16) -> list[str]:
    """A coarse picture of a camera frame in characters, darkest to brightest: SHADES."""
    small = cv2.resize(np.asarray(image, np.float32), (width, height), interpolation=cv2.INTER_AREA)
    lo, hi = float(small.min()), float(small.max())
    levels = np.zeros_like(small, int) if hi <= lo else ((small - lo) / (hi - lo) * (len(SHADES) - 1)).round()
    return ["".join(SHADES[int(v)] for v in row) for row in levels]


@dataclass
class AlignState:
    """What the view shows, updated once a frame."""

    low: int
    high: int
    mirror_gray: int
    exposure_s: float
    figures: AlignmentFigures | None = None
    best_contrast: float = 0.0
    frames: int = 0
    picture: list[str] = field(default_factory=list)
    done: bool = False
    image: np.ndarray | None = None  # the last camera frame


def apply_key(key: str, state: AlignState, gray_max: int) -> bool:
    """Change the state for one key press; return True when the pattern or exposure must be set again."""
    if key == "q":
        state.done = True
    elif key in "+=":
        state.high = min(state.high + 1, gray_max)
    elif key in "-_":
        state.high = max(state.high - 1, 0)
    elif key == "]":
        state.exposure_s *= 1.25
    elif key == "[":
        state.exposure_s /= 1.25
    else:
        return False
    return not state.done


class TerminalKeys:
    """Single key presses from a terminal without waiting (cbreak mode, restored on exit)."""

    def __enter__(self):
        import termios
        import tty
        self._fd = sys.stdin.fileno()
        self._saved = termios.tcgetattr(self._fd)
        tty.setcbreak(self._fd)
        return self

    def __exit__(self, *exc):
        import termios
        termios.tcsetattr(self._fd, termios.TCSADRAIN, self._saved)

    def poll(self) -> list[str]:
        keys = []
        while select.select([self._fd], [], [], 0)[0]:
            keys.append(os.read(self._fd, 1).decode(errors="ignore"))
        return keys


class NoKeys(contextlib.nullcontext):
    """The key source when input is not a terminal: nothing is ever pressed."""

    def poll(self) -> list[str]:
        return []


def figure_rows(state: AlignState) -> list[tuple[str, str]]:
    """(label, value) lines of the view, the same in the terminal and in the window."""
    fig = state.figures
    rows = [("pattern", f"mirror gray {state.mirror_gray}, grating {state.low}/{state.high}"),
            ("exposure", f"{state.exposure_s * 1e3:.3f} ms")]
    if fig is not None:
        rows.append(("contrast", f"{fig.contrast:.3f}   (best so far {state.best_contrast:.3f})"))
        rows.append(("peak", f"{100 * fig.peak_fraction:.0f} % of full scale"
                     + (f"  SATURATED: {fig.saturated_px} px" if fig.saturated_px else "")))
        if fig.period_px is not None:
            rows.append(("fringes", f"period {fig.period_px:.2f} px at {fixed(fig.angle_deg, 1)} deg, "
                                    f"{fig.fringe_count:.0f} across the band"))
            rows.append(("uniformity", f"period varies {100 * fig.period_spread:.1f} % rms across the band"))
    return rows


def render(state: AlignState):
    fig = state.figures
    table = Table.grid(padding=(0, 2))
    table.add_column(style="bold")
    table.add_column()
    for label, value in figure_rows(state):
        table.add_row(label, Text(value, style="bold red" if "SATURATED" in value else ""))
    if fig is not None:
        table.add_row("hint", Text(hint(fig), style="bold"))
    return Panel(Group(table, Text("\n".join(state.picture)), Text(KEY_HELP, style="dim")),
                 title=f"fringecal align — frame {state.frames}", title_align="left")


def window_view(state: AlignState, full_scale: int, message: str | None):
    """The window's picture of ``state`` (rig.devices.align_window.compose_view), None before the first frame."""
    if state.image is None:
        return None
    fig = state.figures
    rows = figure_rows(state) + ([("camera", message)] if message else [])
    return compose_view(state.image, full_scale, fig.band, fig.angle_deg, rows, hint(fig), KEY_HELP)


def open_window(cfg, terminal: bool) -> AlignWindow | None:
    """The alignment window on a display other than the panel's; None for the terminal view (--terminal, or no
    display reachable)."""
    if terminal:
        return None
    try:
        displays = list_displays()
    except DisplayError:
        return None
    display = align_display(displays, cfg.modulator)
    try:
        return AlignWindow(display)
    except Exception as err:  # pyglet raises several unrelated types when a display gives no OpenGL window
        print(f"align: no window on {display.describe()} ({type(err).__name__}: {err}); the view is in the "
              "terminal", file=sys.stderr)
        return None


def align_loop(cfg, devices, state: AlignState, keys, update, seconds: float, rate_hz: float) -> AlignState:
    """Grab, measure and show until ``seconds`` pass or q is pressed."""
    m, p = cfg.modulator, cfg.pattern
    camera, clock = devices.camera, devices.clock
    full_scale = 2**camera.bit_depth - 1

    def apply():
        camera.exposure_s = state.exposure_s
        devices.screen.show(split_screen(m.width_px, m.height_px, state.mirror_gray, state.low, state.high,
                                         layout_of(p), m.bit_depth))
        clock.sleep(cfg.sweep.settle_s)

    apply()
    end = time.monotonic() + seconds
    while not state.done and time.monotonic() < end:
        started = time.monotonic()
        changed = False
        for key in keys.poll():
            changed |= apply_key(key, state, cfg.gray_max)
        if state.done:
            break
        if changed:
            try:
                apply()
            except ValueError as err:  # an exposure the camera refuses: keep the last one
                state.exposure_s = camera.exposure_s
                update(state, f"camera: {err}")
        frame = camera.grab(timeout_s=2.0)
        state.figures = alignment_figures(frame.image, full_scale, cfg.simulator.noise.dark_offset_adu
                                          if devices.bench is not None else 0.0)
        state.best_contrast = max(state.best_contrast, state.figures.contrast)
        state.frames += 1
        state.image = frame.image
        state.picture = text_image(frame.image)
        update(state, None)
        time.sleep(max(0.0, 1.0 / rate_hz - (time.monotonic() - started)))
    return state


WAVEPLATE_STEPS_DEG = tuple(7.5 * i for i in range(12))  # a half-wave plate repeats every 90 deg


def scan_waveplate(cfg, devices, rotator, state: AlignState, report) -> float:
    """Step the half-wave plate over WAVEPLATE_STEPS_DEG, measure the contrast at each, move to the fitted best."""
    m, p = cfg.modulator, cfg.pattern
    camera, clock = devices.camera, devices.clock
    full_scale = 2**camera.bit_depth - 1
    dark = cfg.simulator.noise.dark_offset_adu if devices.bench is not None else 0.0
    devices.screen.show(split_screen(m.width_px, m.height_px, state.mirror_gray, state.low, state.high, layout_of(p),
                                     m.bit_depth))
    angles, contrast = [], []
    for angle in WAVEPLATE_STEPS_DEG:
        angles.append(rotator.move_to(angle))
        clock.sleep(cfg.sweep.settle_s)
        contrast.append(alignment_figures(camera.grab(timeout_s=2.0).image, full_scale, dark).contrast)
        report(f"half-wave plate {angles[-1]:5.1f} deg: contrast {contrast[-1]:.3f}")
    best, rms = best_waveplate_deg(angles, contrast)
    reached = rotator.move_to(best)
    clock.sleep(cfg.sweep.settle_s)
    final = alignment_figures(camera.grab(timeout_s=2.0).image, full_scale, dark).contrast
    report(f"half-wave plate moved to {reached:.2f} deg (cos^2 fit, rms {rms:.3f}): contrast {final:.3f}")
    return reached


def cmd_align(args) -> int:
    """Show the split pattern and update contrast, exposure, fringe period and orientation, their uniformity, the
    camera image and a hint for the likeliest fault, several times a second: in a window on a display other than
    the panel's (the image scaled, the fringe band outlined, saturated pixels in red, the fringe profile across the
    band), or in the terminal with --terminal or without a display."""
    cfg = load_bench_config(args)
    if args.rate <= 0:
        raise UsageError(f"--rate: expected updates per second above 0, got {args.rate}")
    if args.seconds is not None and args.seconds <= 0:
        raise UsageError(f"--seconds: expected a duration above 0, got {args.seconds}")
    gray = cfg.sweep.reference_gray if args.mirror_gray is None else args.mirror_gray
    if not 0 <= gray <= cfg.gray_max:
        raise UsageError(f"--mirror-gray: expected a gray level in [0, {cfg.gray_max}], got {gray}")
    ensure_laser_safety(cfg.laser.laser_class, cfg.laser.wavelength_nm, sim=args.sim or cfg.camera.backend == "sim",
                        acknowledged=args.laser_safety_acknowledged or cfg.laser.safety_acknowledged)
    window = open_window(cfg, args.terminal)
    interactive = window is not None or (sys.stdin.isatty() and sys.stdout.isatty())
    seconds = args.seconds if args.seconds is not None else (float("inf") if interactive else 10.0)
    try:
        devices = open_devices(cfg, args.sim)
    except BaseException:
        if window is not None:
            window.close()
        raise
    state = AlignState(cfg.pattern.grating_low, cfg.pattern.grating_high, gray, devices.camera.exposure_s)
    try:
        if args.scan_waveplate:
            rotator = devices.accessories.rotator
            if rotator is None and devices.bench is not None:
                from simulators.devices import SimRotator
                rotator = SimRotator(devices.bench)
            if rotator is None:
                raise UsageError("--scan-waveplate: no rotation mount configured ([accessories.rotator] port)")
            scan_waveplate(cfg, devices, rotator, state, lambda line: print(line, flush=True))
        if window is not None:
            full_scale = 2**devices.camera.bit_depth - 1
            print(f"align: window on {window.display.describe()}; keys go to the window", flush=True)

            def update(s, message):
                view = window_view(s, full_scale, message)
                if view is not None:
                    window.show(view)
            align_loop(cfg, devices, state, window, update, seconds, args.rate)
            print(f"align: {state.frames} frames, best contrast {state.best_contrast:.3f}; grating "
                  f"{state.low}/{state.high}, exposure {state.exposure_s * 1e3:.3f} ms", flush=True)
        elif interactive:
            console = Console()
            with TerminalKeys() as keys, Live(render(state), console=console, refresh_per_second=8) as live:
                def update(s, message):
                    live.update(render(s))
                    if message:
                        console.log(message)
                align_loop(cfg, devices, state, keys, update, seconds, args.rate)
        else:
            print(f"align: mirror gray {state.mirror_gray}, grating {state.low}/{state.high}", flush=True)

            def update(s, message):
                f = s.figures
                print(message or (f"frame {s.frames}: contrast {f.contrast:.3f} (best {s.best_contrast:.3f}), "
                                  f"peak {100 * f.peak_fraction:.0f} %, "
                                  + (f"period {f.period_px:.2f} px at {fixed(f.angle_deg, 1)} deg; " if f.period_px else "")
                                  + hint(f)), flush=True)
            align_loop(cfg, devices, state, NoKeys(), update, seconds, args.rate)
    finally:
        try:
            devices.close()
        finally:
            if window is not None:
                window.close()
    return 0
