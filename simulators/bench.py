"""One simulated bench: panel state in time, the optics from panel to sensor, disturbances and the camera.

The camera field is linear in the panel field, and a displayed pattern is a few regions of uniform gray (mirror
half, low and high grating stripes). Each region's field is propagated once and cached by the region's pixels, so
a frame costs one complex multiply-add per region and pixel: U = sum_r c_r(t) B_r, with c_r the region's complex
amplitude at time t (liquid-crystal transient, flicker, panel tilt). With a cell-gap variation t(x, y), a region's
phase is rho * t(x, y); exp(i rho t) is expanded to third order in rho (t - 1), which keeps the superposition exact to
(rho (t - 1))^4 / 24 (7e-5 rad at rho (t - 1) = 0.2).

Modelling choices (documented so that tests can hold the simulator to them):
- Fringing-field crosstalk smooths each region's weight on the panel with a Gaussian of ``crosstalk_px`` (the
  weights still sum to one); this equals smoothing the phase to first order in the phase step.
- Incident polarisation at ``polarization_deg`` to the director: the aligned part (cos) is modulated, the rest
  (sin) reflects from the whole panel as from a mirror and adds to the image incoherently.
- A panel tilt alpha (vibration, drift) adds 2 k alpha . c_r to region r, c_r being its illuminated centroid.
  Regions never straddle the configured split line, so a mirror half and grating stripes of one gray stay apart
  and each takes the piston of its own half.
- A frame uses the panel state at the middle of its exposure; flicker is averaged over the exposure exactly.
"""

from __future__ import annotations

import collections
import hashlib
import math
import threading
import time
from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from analysis.config import Config
from analysis.patterns import grating_half, layout_of
from simulators.optics import (CameraSampler, Propagator, beam_field, camera_points_um, centred_coords_um,
                               photons_per_joule)
from simulators.response import PanelResponse, order_factor
from simulators.sensor import Sensor

SETTLED_TAU = 14.0  # after 14 time constants a transient is below 1e-6 of its step: treat it as settled
TAYLOR_TERMS = 4


class SimClock:
    """Bench time (s). Fast mode advances only when told to, in whole nanoseconds so that the same sequence of
    waits always lands on the same instants; real-time mode follows the wall clock."""

    def __init__(self, realtime: bool = False, start_s: float = 0.0):
        self.realtime = realtime
        self._t0 = time.monotonic() - start_s
        self._ns = round(start_s * 1e9)
        self._lock = threading.Lock()

    def now(self) -> float:
        """Seconds since the bench's time zero."""
        if self.realtime:
            return time.monotonic() - self._t0
        return self._ns / 1e9

    def sleep(self, seconds: float) -> None:
        """Wait ``seconds`` (real-time) or jump the clock forward (fast)."""
        if seconds <= 0:
            return
        if self.realtime:
            time.sleep(seconds)
        else:
            with self._lock:
                self._ns += round(seconds * 1e9)

    def wait_until(self, t: float) -> None:
        """Return once the clock reads at least ``t``."""
        if self.realtime:
            self.sleep(t - self.now())
        else:
            with self._lock:
                self._ns = max(self._ns, round(t * 1e9))


@dataclass(frozen=True)
class Region:
    """Pixels of one gray on the panel and their liquid-crystal state since the last change took effect."""

    gray: int
    start_rad: float   # retardance when the change took effect
    target_rad: float  # retardance the crystal relaxes to
    t_change: float    # when the change took effect (s)
    key: bytes         # identity of the pixel set, for the basis cache

    def retardance(self, t: float, tau_s: float) -> float:
        """Retardance (rad) at time ``t``: exponential approach from start to target."""
        if t <= self.t_change:
            return self.start_rad
        if self.start_rad == self.target_rad or t - self.t_change > SETTLED_TAU * tau_s:
            return self.target_rad
        return self.target_rad + (self.start_rad - self.target_rad) * math.exp(-(t - self.t_change) / tau_s)


@dataclass(frozen=True)
class PanelState:
    """What the panel shows from ``t_change`` on: a label image and one Region per label."""

    t_change: float
    labels: np.ndarray
    regions: tuple[Region, ...]
    pattern: np.ndarray


@dataclass(frozen=True)
class RegionBasis:
    """A region's propagated fields (one per Taylor term) at the camera and its illuminated centroid (um)."""

    fields: np.ndarray  # (n_pixels, terms) complex64
    centroid_um: tuple[float, float]


class Bench:
    """The whole simulated bench for one config: panel, optics, disturbances, sensor and clock.

    ``start_s`` sets the clock's first reading, so a resumed run can continue the time line it was on: noise and
    vibration are keyed by frame number (time / frame period) and reproduce exactly.
    """

    def __init__(self, cfg: Config, start_s: float = 0.0):
        self.cfg = cfg
        sim, m, cam, geo = cfg.simulator, cfg.modulator, cfg.camera, cfg.geometry
        self.clock = SimClock(sim.timing.realtime, start_s)
        self.response = PanelResponse(sim.response, m.bit_depth, cfg.laser.wavelength_nm, geo.incidence_deg)
        self.wavelength_um = cfg.laser.wavelength_nm * 1e-3
        self.sensor = Sensor(sim.noise, cam.bit_depth, sim.seed)
        self.fault_rng = np.random.default_rng([sim.seed, 1])
        self.flicker_offset = 2 * np.pi * np.random.default_rng(sim.seed).random()

        self.beam = beam_field(m.width_px, m.height_px, m.pitch_um, sim.beam, self.wavelength_um,
                               cfg.laser.power_mw * 1e-3).astype(np.complex64)
        self.propagator = Propagator(m.width_px, m.height_px, m.pitch_um, self.wavelength_um, geo.distance_mm * 1e3)
        x_um, y_um = camera_points_um(cam.width_px, cam.height_px, cam.pitch_um, geo.camera_offset_mm,
                                      geo.camera_roll_deg)
        self.sampler = CameraSampler(self.propagator, x_um, y_um)
        self.camera_shape = (cam.height_px, cam.width_px)
        self.thickness = self._thickness_map()
        self._basis: collections.OrderedDict[bytes, RegionBasis] = collections.OrderedDict()
        self._basis_limit = 24
        self._stack_cache: tuple[tuple[bytes, ...], np.ndarray] | None = None
        self._states: collections.deque[PanelState] = collections.deque(maxlen=6)
        self._lock = threading.Lock()

        # regions never straddle the configured split line: a region's tilt piston is taken in its own half
        self._side = grating_half(m.width_px, m.height_px, layout_of(cfg.pattern)).astype(np.int32)
        blank = np.zeros((m.height_px, m.width_px), np.uint16)
        whole = np.ones(blank.shape, bool)
        self._whole_key = _mask_key(whole)
        self._ensure_basis(self._whole_key, whole)
        self.set_polarization_deg(sim.response.polarization_deg)
        r0 = float(self.response.retardance_rad(0))
        self._states.append(PanelState(-math.inf, blank.astype(np.int32),
                                       (Region(0, r0, r0, -math.inf, self._whole_key),), blank))

    def set_polarization_deg(self, angle_deg: float) -> None:
        """Turn the incident polarisation to ``angle_deg`` from the director (what a half-wave plate does)."""
        theta = np.deg2rad(angle_deg)
        self.polarization_deg = float(angle_deg)
        self.aligned_amp = float(np.cos(theta))
        unaligned = float(np.sin(theta)) ** 2
        stray = np.float32(self.cfg.simulator.noise.stray_light) * np.float32(np.max(np.abs(self.beam)) ** 2)
        self.background = stray
        if unaligned > 1e-12:  # the unmodulated part reflects from the whole panel as from a mirror
            mirror = self._basis[self._whole_key].fields[:, 0]
            self.background = stray + np.float32(unaligned) * (np.abs(mirror) ** 2).astype(np.float32)

    # --- panel -----------------------------------------------------------------------------------------------
    def show(self, pattern: np.ndarray) -> None:
        """Put ``pattern`` on the panel now; the crystal starts to respond after the display latency."""
        m = self.cfg.modulator
        if pattern.shape != (m.height_px, m.width_px):
            raise ValueError(f"pattern: expected {m.height_px}x{m.width_px} (rows x columns), got {pattern.shape}")
        if pattern.dtype.kind != "u" or int(pattern.max()) > self.response.gray_max:
            raise ValueError(f"pattern: expected unsigned gray levels up to {self.response.gray_max}")
        t_c = self.clock.now() + self.cfg.simulator.timing.display_latency_s
        with self._lock:
            old = self._states[-1]
            self._states.append(self._next_state(old, pattern, t_c))

    def _next_state(self, old: PanelState, pattern: np.ndarray, t_c: float) -> PanelState:
        tau = self.cfg.simulator.timing.lc_tau_s
        n_gray = self.response.gray_max + 1
        combined = (old.labels * n_gray + pattern) * 2 + self._side
        counts = np.bincount(combined.ravel())
        present = np.flatnonzero(counts)
        lut = np.zeros(present[-1] + 1, np.int32)
        groups: dict[tuple, int] = {}
        starts: list[tuple[int, float]] = []
        for code in present:
            rest, side = divmod(int(code), 2)
            label, gray = divmod(rest, n_gray)
            start = old.regions[label].retardance(t_c, tau)
            target = float(self.response.retardance_rad(gray))
            # regions that need no transient merge by gray (within their half), so labels stay few over a sweep
            group = (gray, side) if abs(start - target) < 1e-9 else (gray, side, label)
            if group not in groups:
                groups[group] = len(groups)
                starts.append((gray, start))
            lut[code] = groups[group]
        labels = lut[combined]
        masks = [labels == index for index in range(len(starts))]
        keys = [_mask_key(mask) for mask in masks]
        # order regions by pixel set so that the same pattern always sums its fields in the same order
        order = sorted(range(len(starts)), key=lambda i: (keys[i], starts[i]))
        relabel = np.empty(len(starts), np.int32)
        relabel[order] = np.arange(len(starts), dtype=np.int32)
        regions = []
        for index in order:
            gray, start = starts[index]
            regions.append(Region(gray, start, float(self.response.retardance_rad(gray)), t_c, keys[index]))
            self._ensure_basis(keys[index], masks[index], keep=keys)
        return PanelState(t_c, relabel[labels], tuple(regions), pattern.copy())

    def state_at(self, t: float) -> PanelState:
        """The panel state in force at time ``t``."""
        for state in reversed(self._states):
            if state.t_change <= t:
                return state
        return self._states[0]

    def _thickness_map(self) -> np.ndarray | None:
        """Relative cell gap t(x, y) = 1 + v P(x, y), P a fixed smooth bowl-and-wedge with max |P| = 1."""
        v = self.cfg.simulator.response.thickness_variation
        if v == 0:
            return None
        m = self.cfg.modulator
        xh = np.linspace(-1, 1, m.width_px)[None, :]
        yh = np.linspace(-1, 1, m.height_px)[:, None]
        p = 0.6 * (xh**2 + yh**2) + 0.3 * xh - 0.2 * yh
        p = p - p.mean()
        return (1.0 + v * p / np.abs(p).max()).astype(np.float32)

    # --- optics ----------------------------------------------------------------------------------------------
    def _weight(self, mask: np.ndarray) -> np.ndarray:
        sigma = self.cfg.simulator.response.crosstalk_px
        if sigma == 0:
            return mask.astype(np.float32)
        return ndimage.gaussian_filter(mask.astype(np.float32), sigma, mode="nearest")

    def _ensure_basis(self, key: bytes, mask: np.ndarray, keep=()) -> None:
        if key in self._basis:
            self._basis.move_to_end(key)
            return
        weighted = self.beam * self._weight(mask)
        terms = [weighted]
        if self.thickness is not None:
            delta = self.thickness - 1.0
            for order in range(1, TAYLOR_TERMS):
                terms.append(weighted * ((1j * delta) ** order / math.factorial(order)).astype(np.complex64))
        fields = np.stack([self.sampler(self.propagator(term)) for term in terms], axis=1)
        power = np.abs(weighted) ** 2
        total = float(power.sum()) or 1.0
        m = self.cfg.modulator
        cx = float((power.sum(axis=0) * centred_coords_um(m.width_px, m.pitch_um)).sum() / total)
        cy = float((power.sum(axis=1) * centred_coords_um(m.height_px, m.pitch_um)).sum() / total)
        self._basis[key] = RegionBasis(np.ascontiguousarray(fields), (cx, cy))
        # never evict fields still in use: by the states kept, by the state being built (keep), the whole panel
        in_use = {r.key for state in self._states for r in state.regions} | {key, self._whole_key, *keep}
        for old in [k for k in self._basis if k not in in_use][: max(len(self._basis) - self._basis_limit, 0)]:
            del self._basis[old]

    def _stacked(self, state: PanelState) -> np.ndarray:
        keys = tuple(r.key for r in state.regions)
        if self._stack_cache is None or self._stack_cache[0] != keys:
            self._stack_cache = (keys, np.concatenate([self._basis[k].fields for k in keys], axis=1))
        return self._stack_cache[1]

    def thermal_factor(self, t: float) -> float:
        """Retardance at time ``t`` relative to the warm panel's: the birefringence of a panel still warming up is
        larger (order-parameter law), its temperature approaching the configured one exponentially."""
        timing, resp = self.cfg.simulator.timing, self.cfg.simulator.response
        if not timing.warmup_k or not math.isfinite(t):
            return 1.0
        now_c = resp.temperature_c - timing.warmup_k * math.exp(-max(t, 0.0) / timing.warmup_tau_s)
        return (order_factor(now_c, resp.clearing_c, resp.order_exponent)
                / order_factor(resp.temperature_c, resp.clearing_c, resp.order_exponent))

    def region_phases(self, state: PanelState, t: float, exposure_s: float, tilt_urad=(0.0, 0.0)) -> list[float]:
        """Phase (rad) of each region's aligned field at time ``t``: transient, flicker and panel-tilt piston."""
        timing = self.cfg.simulator.timing
        k2 = 4 * np.pi / self.wavelength_um * 1e-6  # 2k, per urad of tilt and um of lever arm
        ripple = 0.0
        if timing.flicker_rad:
            ripple = (timing.flicker_rad * np.sinc(timing.flicker_hz * exposure_s)
                      * math.sin(2 * math.pi * timing.flicker_hz * t + self.flicker_offset))
        phases = []
        for r in state.regions:
            rho = r.retardance(t, timing.lc_tau_s) * self.thermal_factor(t)
            if ripple:
                rho += ripple * float(self.response.slope_weight(r.gray))
            cx, cy = self._basis[r.key].centroid_um
            phases.append(rho + k2 * (tilt_urad[0] * cx + tilt_urad[1] * cy))
        return phases

    def coefficients(self, state: PanelState, t: float, exposure_s: float, tilt_urad=(0.0, 0.0)) -> np.ndarray:
        """Complex weights of the stacked region bases at time ``t``."""
        droop = self.cfg.simulator.response.reflectance_droop
        coeffs = []
        for r, phase in zip(state.regions, self.region_phases(state, t, exposure_s, tilt_urad)):
            amp = self.aligned_amp * math.sqrt(1.0 - droop * r.gray / self.response.gray_max)
            c = amp * np.exp(1j * phase)
            if self.thickness is None:
                coeffs.append(c)
            else:
                rho = r.retardance(t, self.cfg.simulator.timing.lc_tau_s) * self.thermal_factor(t)
                coeffs.extend(c * rho**n for n in range(TAYLOR_TERMS))
        return np.asarray(coeffs, np.complex64)

    def irradiance(self, t: float, exposure_s: float, tilt_urad=(0.0, 0.0)) -> np.ndarray:
        """Irradiance (W/um^2) at every camera pixel at time ``t`` (flattened row-major)."""
        with self._lock:
            state = self.state_at(t)
            field = self._stacked(state) @ self.coefficients(state, t, exposure_s, tilt_urad)
        intensity = field.real**2
        intensity += field.imag**2
        intensity += self.background
        return intensity

    def panel_field(self, t: float, exposure_s: float = 0.0) -> np.ndarray:
        """Aligned-polarisation field leaving the panel at time ``t`` (no superposition shortcut)."""
        state = self.state_at(t)
        droop = self.cfg.simulator.response.reflectance_droop
        out = np.zeros(state.labels.shape, np.complex64)
        thick = 1.0 if self.thickness is None else self.thickness
        tau = self.cfg.simulator.timing.lc_tau_s
        for index, (r, phase) in enumerate(zip(state.regions, self.region_phases(state, t, exposure_s))):
            rho = r.retardance(t, tau) * self.thermal_factor(t)
            amp = self.aligned_amp * math.sqrt(1.0 - droop * r.gray / self.response.gray_max)
            out += (self.beam * self._weight(state.labels == index)
                    * (amp * np.exp(1j * (phase - rho + rho * thick))).astype(np.complex64))
        return out

    def irradiance_full(self, t: float, exposure_s: float = 0.0) -> np.ndarray:
        """Irradiance like ``irradiance`` but by propagating the whole panel field: the reference for the shortcut."""
        field = self.sampler(self.propagator(self.panel_field(t, exposure_s)))
        return np.abs(field) ** 2 + self.background

    def electrons(self, irradiance: np.ndarray, exposure_s: float) -> np.ndarray:
        """Expected photo-electrons per pixel for an irradiance (W/um^2) and exposure (s)."""
        n, cam = self.cfg.simulator.noise, self.cfg.camera
        scale = (cam.pitch_um**2 * exposure_s * photons_per_joule(self.wavelength_um)
                 * 10 ** (-n.optical_density) * n.quantum_efficiency)
        return irradiance * np.float32(scale)

    def tilt_at(self, t: float, key: int) -> tuple[float, float]:
        """Panel tilt (urad, x and y) for frame ``key`` at ``t``: drift plus that frame's vibration jitter."""
        timing = self.cfg.simulator.timing
        drift = timing.drift_urad_per_s * t if math.isfinite(t) else 0.0
        jitter = (np.random.default_rng([self.cfg.simulator.seed, 2, key]).normal(0.0, timing.vibration_urad, 2)
                  if timing.vibration_urad else (0.0, 0.0))
        return drift + float(jitter[0]), drift + float(jitter[1])

    def fringe_flicker_rad(self, mirror_gray: int, low: int, high: int, exposure_s: float) -> float:
        """Peak amplitude (rad) of the fringe-phase ripple a camera with ``exposure_s`` sees for a split pattern.

        The grating's first order carries the mean phase of its two stripes, so its ripple is their mean ripple; the
        fringes show the mirror's ripple less that.
        """
        timing = self.cfg.simulator.timing
        w = self.response.slope_weight
        return float(timing.flicker_rad * abs(np.sinc(timing.flicker_hz * exposure_s))
                     * abs(w(mirror_gray) - 0.5 * (w(low) + w(high))))

    def true_curve_in(self, x0: int, x1: int, y0: int, y1: int) -> tuple[np.ndarray, np.ndarray]:
        """The true curve (rad) of the panel pixels in columns x0..x1-1, rows y0..y1-1: the retardance scales with
        the cell gap, so it is the panel's curve times the region's illumination-weighted mean relative gap."""
        grays, phase = self.response.curve()
        if self.thickness is None:
            return grays, phase
        w = np.abs(self.beam[y0:y1, x0:x1]) ** 2
        return grays, phase * float((self.thickness[y0:y1, x0:x1] * w).sum() / w.sum())

    def true_curve(self) -> tuple[np.ndarray, np.ndarray]:
        """Gray levels and the panel's true phase (rad, relative to gray 0) over the illuminated panel."""
        grays, phase = self.response.curve()
        if self.thickness is not None:
            w = np.abs(self.beam) ** 2
            phase = phase * float((self.thickness * w).sum() / w.sum())
        return grays, phase


def _mask_key(mask: np.ndarray) -> bytes:
    return hashlib.blake2b(np.packbits(mask).tobytes() + repr(mask.shape).encode(), digest_size=16).digest()
