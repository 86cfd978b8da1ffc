"""Thin simulated devices on one Bench: a screen and a camera that satisfy the rig's Screen and Camera protocols."""

from __future__ import annotations

import math

import numpy as np

from analysis.frame import Frame
from analysis.patterns import Rect, check_panel_pattern, dtype_for
from simulators.bench import Bench


class SimScreen:
    """The simulated panel as a display."""

    def __init__(self, bench: Bench):
        m = bench.cfg.modulator
        self.bench = bench
        self.width_px, self.height_px, self.bit_depth = m.width_px, m.height_px, m.bit_depth
        self.shown = 0
        self.closed = False

    def show(self, pattern: np.ndarray) -> None:
        """Hand ``pattern`` (height x width gray levels) to the simulated panel (it changes after the display
        latency)."""
        if self.closed:
            raise ConnectionError("sim screen: show after close")
        pattern = check_panel_pattern(pattern, self.width_px, self.height_px, self.bit_depth, "sim screen")
        self.bench.show(pattern.astype(dtype_for(self.bit_depth), copy=False))
        self.shown += 1

    def close(self) -> None:
        """Blank the panel to gray 0 (safe to call twice)."""
        if not self.closed:
            self.bench.show(np.zeros((self.height_px, self.width_px), np.uint16))
            self.closed = True


class SimCamera:
    """A simulated camera, free running or software triggered (``camera.trigger``).

    Free running, frame k exposes from k * period for ``exposure_s``, and ``grab`` returns the first frame whose
    exposure ends after the call, so a frame may have started before it (as a streaming camera's next buffer does).
    Software triggered, ``grab`` triggers one exposure that starts at the call, or when the previous exposure ends
    (readout overlaps the next exposure, so triggered frames may follow each other back to back). Faults come from
    the config's ``[simulator.faults]`` rates.
    """

    def __init__(self, bench: Bench):
        cam = bench.cfg.camera
        self.bench = bench
        self.width_px, self.height_px, self.bit_depth = cam.width_px, cam.height_px, cam.bit_depth
        self._exposure_s = cam.exposure_s
        self.gain_db = cam.gain_db
        self.frame_rate_hz = bench.cfg.simulator.timing.frame_rate_hz
        self.trigger_mode = cam.trigger
        self.roi: Rect | None = None
        self._last_k = -1
        self._exposed_until_ns = 0  # software trigger: the end of the last exposure
        self.delivered = 0
        self.closed = False

    @property
    def exposure_s(self) -> float:
        """Exposure time (s)."""
        return self._exposure_s

    @exposure_s.setter
    def exposure_s(self, value: float) -> None:
        if not 1e-6 <= value <= 10.0:
            raise ValueError(f"exposure_s: expected 1e-06 to 10 s, got {value!r}")
        self._exposure_s = float(value)

    def grab(self, timeout_s: float = 1.0) -> Frame:
        """Next frame (see the class); raise TimeoutError or ConnectionError as the configured faults say."""
        faults = self.bench.cfg.simulator.faults
        clock, rng = self.bench.clock, self.bench.fault_rng
        if self.closed:
            raise ConnectionError("sim camera: grab after close")
        if faults.die_after_frames and self.delivered >= faults.die_after_frames:
            raise ConnectionError(f"sim camera: disconnected after {self.delivered} frames (configured fault)")
        if faults.timeout_rate and rng.random() < faults.timeout_rate:
            clock.sleep(timeout_s)
            raise TimeoutError(f"sim camera: no frame within {timeout_s} s (configured fault)")
        exposure = self._exposure_s
        # whole nanoseconds, so that frame numbers depend only on the clock reading, not on float rounding
        exposure_ns, period_ns = round(exposure * 1e9), round(max(1.0 / self.frame_rate_hz, exposure) * 1e9)
        if self.trigger_mode == "software":
            now = clock.now()
            start_ns = max(math.ceil(now * 1e9), self._exposed_until_ns)
            while start_ns / 1e9 < now:  # never a hair before the call, whatever the float rounding
                start_ns += 1
            self._exposed_until_ns = start_ns + exposure_ns
            # exposures start at least one exposure apart, so this key (noise, vibration) rises with every frame
            k = max(start_ns // exposure_ns, self._last_k + 1)
            sequence = self.delivered
        else:
            k = max((round(clock.now() * 1e9) - exposure_ns) // period_ns + 1, self._last_k + 1)
            while faults.drop_rate and rng.random() < faults.drop_rate:
                k += 1
            start_ns = k * period_ns
            sequence = k
        t_start = start_ns / 1e9
        t_mid = (start_ns + exposure_ns / 2) / 1e9
        irradiance = self.bench.irradiance(t_mid, exposure, self.bench.tilt_at(t_mid, k))
        electrons = self.bench.electrons(irradiance, exposure).reshape(self.height_px, self.width_px)
        image = self.bench.sensor.expose(electrons, self.gain_db, key=k, exposure_s=exposure)
        complete = True
        if faults.corrupt_rate and rng.random() < faults.corrupt_rate:
            image[int(rng.integers(1, self.height_px)):] = 0  # a truncated buffer: the tail never arrived
            complete = False
        if self.roi is not None:
            r = self.roi
            image = np.ascontiguousarray(image[r.y0:r.y1, r.x0:r.x1])
        clock.wait_until(t_start + exposure)
        self._last_k = k
        self.delivered += 1
        return Frame(image, t_mid, exposure, self.gain_db, self.bit_depth, sequence, complete)

    def close(self) -> None:
        """Stop the simulated camera; later grabs raise ConnectionError."""
        self.closed = True


class SimRotator:
    """A motorised half-wave plate on the simulated bench: at angle a the polarisation on the panel is turned by 2a
    from the config's ``polarization_deg``. Same methods as the rig's serial rotation mount."""

    def __init__(self, bench: Bench):
        self.bench = bench
        self._zero_deg = bench.polarization_deg
        self._angle_deg = 0.0

    def angle_deg(self) -> float:
        """The mount's angle (degrees)."""
        return self._angle_deg

    def move_to(self, angle_deg: float) -> float:
        """Turn the plate to ``angle_deg`` (-360..360) and return the angle reached."""
        if not -360.0 <= angle_deg <= 360.0:
            raise ValueError(f"sim rotation mount: angle_deg expected -360..360, got {angle_deg!r}")
        self._angle_deg = float(angle_deg)
        self.bench.set_polarization_deg(self._zero_deg + 2 * self._angle_deg)
        return self._angle_deg
