"""Progress of a run for people and programs: a live terminal dashboard, plain lines, or JSON-lines events.

All three consume the engine's events (dicts with an "event" key: stage, pattern, frame, unit, fault, log) from
the acquisition thread and the analysis worker; ``RunState`` folds them into one picture under a lock.
"""

from __future__ import annotations

import collections
import json
import math
import threading
import time

import numpy as np
from rich.console import Console, Group
from rich.live import Live
from rich.panel import Panel
from rich.progress_bar import ProgressBar
from rich.table import Table
from rich.text import Text

SPARK = "▁▂▃▄▅▆▇█"


def sparkline(values, width: int = 64) -> str:
    """Values as a one-line bar chart of at most ``width`` characters."""
    v = np.asarray(values, float)
    if v.size == 0:
        return ""
    if v.size > width:
        v = v[: width]
    lo, hi = float(v.min()), float(v.max())
    scale = (len(SPARK) - 1) / (hi - lo) if hi > lo else 0.0
    return "".join(SPARK[int(round((x - lo) * scale))] for x in v)


def text_plot(x, y, width: int = 56, height: int = 9) -> list[str]:
    """A scatter of y against x in a ``height`` x ``width`` grid of characters (top row = largest y)."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    grid = [[" "] * width for _ in range(height)]
    if x.size:
        x0, x1 = float(x.min()), float(max(x.max(), x.min() + 1))
        y0, y1 = float(y.min()), float(max(y.max(), y.min() + 1e-9))
        for xi, yi in zip(x, y):
            col = int(round((xi - x0) / (x1 - x0) * (width - 1)))
            row = height - 1 - int(round((yi - y0) / (y1 - y0) * (height - 1)))
            grid[row][col] = "•"
    return ["".join(r) for r in grid]


def _duration(seconds: float) -> str:
    if not math.isfinite(seconds):
        return "--:--"
    m, s = divmod(int(seconds), 60)
    h, m = divmod(m, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m:02d}:{s:02d}"


class RunState:
    """What the run is doing, folded from events; safe to update from several threads."""

    def __init__(self, title: str):
        self.title = title
        self.lock = threading.Lock()
        self.stage, self.total, self.done = "starting", 0, 0
        self.what = ""  # the stage's units in words
        self.stage_started = time.monotonic()
        self.started = time.monotonic()
        self.pattern = None
        self.last: dict = {}
        self.profile: list[float] = []
        self.phases: dict[int, float] = {}
        self.references: list[tuple[float, float]] = []
        self.faults: collections.Counter[str] = collections.Counter()
        self.log: collections.deque[str] = collections.deque(maxlen=5)
        self._done_at_start = 0

    def __call__(self, event: dict) -> None:
        with self.lock:
            kind = event.get("event")
            if kind == "stage":
                self.stage, self.total, self.done = event["name"], event["total"], event.get("done", 0)
                self.what = event.get("what", "")
                self.stage_started = time.monotonic()
                self._done_at_start = self.done
                self.log.append(f"stage: {event['name']}")
            elif kind == "pattern":
                self.pattern = (event["mirror_gray"], event["low"], event["high"])
            elif kind == "frame":
                self.last = event
                if event.get("purpose") == "exposure":  # each trial is one step of the exposure stage
                    self.done += 1
                self.profile = event.get("profile") or self.profile
                if event.get("phase_rad") is not None:
                    if event["purpose"] == "reference":
                        self.references.append((event["t_s"], event["phase_rad"]))
                    elif event["purpose"] == "level":
                        self.phases[event["gray"]] = event["phase_rad"]
            elif kind == "unit":
                self.done = event["done"]
            elif kind == "fault":
                self.faults[event["kind"]] += 1
            elif kind == "log":
                self.log.append(event["message"])

    def eta_s(self) -> float:
        """Seconds left in this stage, from the pace of the units done in it so far."""
        done_here = self.done - self._done_at_start
        if self.total <= 0 or done_here <= 0:
            return math.inf
        return (time.monotonic() - self.stage_started) / done_here * (self.total - self.done)

    def drift_rad(self) -> float | None:
        """Phase change of the reference gray since its first visit (rad), None before a second visit."""
        if len(self.references) < 2:
            return None
        return float(np.angle(np.exp(1j * (self.references[-1][1] - self.references[0][1]))))

    def curve(self) -> tuple[np.ndarray, np.ndarray]:
        """The phase curve so far (rad, unwrapped over the measured grays, relative to the lowest)."""
        if not self.phases:
            return np.array([]), np.array([])
        grays = np.array(sorted(self.phases))
        phase = np.unwrap([self.phases[g] for g in grays])
        phase -= phase[0]
        if phase.size > 1 and np.polyfit(grays, phase, 1)[0] < 0:
            phase = -phase
        return grays, phase


class LiveDashboard:
    """A rich Live view of a RunState, redrawn a few times a second while the run goes on."""

    def __init__(self, state: RunState, console: Console | None = None, refresh_per_second: float = 4):
        self.state = state
        self.console = console or Console()
        self._live = Live(console=self.console, refresh_per_second=refresh_per_second, get_renderable=self.render,
                          transient=False)

    def __enter__(self):
        self._live.__enter__()
        return self

    def __exit__(self, *exc):
        self._live.__exit__(*exc)

    def render(self):
        s = self.state
        with s.lock:
            top = Table.grid(padding=(0, 2))
            top.add_column(style="bold")
            top.add_column()
            bar = ProgressBar(total=max(s.total, 1), completed=s.done, width=36)
            progress = Table.grid(padding=(0, 1))
            progress.add_row(bar, Text(f"{s.done}/{s.total}  elapsed {_duration(time.monotonic() - s.started)}  "
                                       f"ETA {_duration(s.eta_s())}"))
            top.add_row("stage", f"{s.stage}: {s.what}" if s.what else s.stage)
            top.add_row("progress", progress)
            if s.pattern:
                top.add_row("pattern", f"mirror gray {s.pattern[0]}, grating {s.pattern[1]}/{s.pattern[2]}")
            last = s.last
            if last:
                contrast = "—" if last.get("contrast") is None else f"{last['contrast']:.3f}"
                peak = Text(f"{100 * last['peak_fraction']:.0f} % of full scale")
                if last.get("saturated_px"):
                    peak.append(f"  SATURATED: {last['saturated_px']} px", style="bold red")
                top.add_row("frame", visit(last))
                top.add_row("contrast", contrast)
                top.add_row("peak", peak)
            if s.profile:
                top.add_row("fringes", sparkline(s.profile))
            drift = s.drift_rad()
            top.add_row("drift", "—" if drift is None else f"{drift:+.3f} rad since the first reference")
            faults = ", ".join(f"{k} {v}" for k, v in sorted(s.faults.items())) or "none"
            top.add_row("faults", faults)
            grays, phase = s.curve()
            plot = Text("\n".join(text_plot(grays, phase))) if grays.size > 1 else Text("(no levels yet)")
            caption = (f"phase vs gray: {grays.min()}..{grays.max()}, 0..{phase.max():.2f} rad"
                       if grays.size > 1 else "phase vs gray")
            log = Text("\n".join(s.log))
        return Panel(Group(top, Panel(plot, title=caption, title_align="left"), log), title=s.title,
                     title_align="left")


def visit(frame: dict) -> str:
    """The gray a frame was taken at, marked when it was a visit of the drift reference."""
    return f"gray {frame.get('gray')}" + (" (drift reference)" if frame.get("purpose") == "reference" else "")


class PlainProgress:
    """Progress as plain lines (no escape codes) for logs and pipes: one line per stage, per ~5 % and per fault."""

    def __init__(self, state: RunState, stream):
        self.state = state
        self.stream = stream
        self._last_percent = -100

    def __call__(self, event: dict) -> None:
        kind = event.get("event")
        s = self.state
        if kind == "stage":
            self._last_percent = -100
            self._print(f"[{event['name']}] {event.get('what') or str(event['total']) + ' steps'}"
                        + (f", {event['done']} already done" if event.get("done") else ""))
        elif kind == "frame" and event.get("purpose") == "exposure":
            saturated = f", {event['saturated_px']} px saturated" if event.get("saturated_px") else ""
            self._print(f"[exposure] trial {s.done}: {event['exposure_s'] * 1e3:.3f} ms, peak "
                        f"{100 * event['peak_fraction']:.0f}% of full scale{saturated}")
        elif kind == "unit" and s.total:
            percent = 100 * event["done"] // s.total
            if percent >= self._last_percent + 5 or event["done"] == s.total:
                self._last_percent = percent
                last = s.last
                contrast = "" if last.get("contrast") is None else f" contrast {last['contrast']:.3f}"
                self._print(f"[{s.stage}] {event['done']}/{s.total} ({percent}%) {visit(last)}"
                            f"{contrast} peak {100 * last.get('peak_fraction', 0):.0f}% ETA {_duration(s.eta_s())}")
        elif kind == "fault":
            self._print(f"[{s.stage}] camera {event['kind']} at gray {event['gray']} (#{event['count']}); retrying")
        elif kind == "log":
            self._print(event["message"])

    def _print(self, line: str) -> None:
        print(line, file=self.stream, flush=True)


class EventFile:
    """Every event as one JSON line in a file (``--events FILE``), for other programs to follow a run."""

    def __init__(self, path):
        self._fh = open(path, "a", encoding="utf-8")
        self._lock = threading.Lock()

    def __call__(self, event: dict) -> None:
        line = json.dumps({"time": time.time(), **event}, separators=(",", ":"))
        with self._lock:
            self._fh.write(line + "\n")
            self._fh.flush()

    def close(self) -> None:
        self._fh.close()
