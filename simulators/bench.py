"""One simulated bench: panel state in time, the optics from panel to sensor, disturbances and the camera.

Sign of the phase (the project's convention): the panel multiplies the reflected field by exp(+i phi(g)), waves
written exp(i(k.r - w t)), so phi is k times the extra optical path (a delay). The liquid crystal's phi(g) is its
double-pass retardance, which falls as the drive voltage rises; the truth this bench reports is phi(g) - phi(0) as it
is, falling with gray, never flipped to rise.

The camera field is linear in the panel field, and a displayed pattern is a few regions of uniform gray (mirror
half, low and high grating stripes). Each region's field is propagated once and cached by the region's pixels, so
a frame costs one complex multiply-add per region and pixel: U = sum_r c_r(t) B_r + c_g(t) G, with c_r the region's
complex amplitude at time t (liquid-crystal transient, flicker, panel tilt, warming) and G the cover-glass ghost.
With a cell-gap variation t(x, y), a region's phase is rho * t(x, y); exp(i rho t) is expanded to third order in
rho (t - 1), which keeps the superposition exact to (rho (t - 1))^4 / 24 (7e-5 rad at rho (t - 1) = 0.2).

Modelling choices (documented so that tests can hold the simulator to them):
- Fringing-field crosstalk smooths each region's weight on the panel with a Gaussian of ``crosstalk_px`` (the
  weights still sum to one); this equals smoothing the phase to first order in the phase step.
- Incident polarisation at ``polarization_deg`` to the director: the aligned part (cos) is modulated, the rest
  (sin) reflects from the whole panel as from a mirror and adds to the image incoherently.
- Cover glass: its front surface (anti-reflection coated) and its inner glass/ITO/LC interface reflect a fixed
  field over the whole beam at the mirror angle (or tilted by twice a wedge angle, times the glass index for the
  inner one). The ghosts never see the liquid crystal's phase, so they interfere with the mirror beam and the first
  order as a constant phasor at the fringe carrier: a cyclic error of about sqrt(R_ghost / R_panel) rad. Their
  pistons: the inner one ``inner_phase_rad`` from the panel's light at zero retardance, the front one less the
  glass's double pass 2 k n t cos(theta_glass); warming lengthens the glass's path by ``path_per_k``. They leave the
  panel plane (the glass's few hundred um in front of the panel are not propagated separately).
- Warming: the panel's temperature follows the configured warm-up and ramp; the birefringence follows the order
  parameter law, so the whole curve scales (and the mirror-vs-first-order piston moves with it), and the glass's
  path moves the ghosts' pistons.
- A panel tilt alpha (vibration, drift) shifts the whole camera image by 2 alpha z; its effect on the fringes is
  a piston 2 k alpha . l_r per region, with the lever l_r = -z <k_perp>_r / k from the mean direction of the
  region's light in the fringe band (0 for the mirror beam, z sin(theta_1) for the grating's first order: the shear
  of the two beams). Regions never straddle the configured split line, so a mirror half and grating stripes of one
  gray stay apart and each takes the lever of its own light.
- A frame uses the panel state at the middle of its exposure; flicker is averaged over the exposure exactly.
"""

from __future__ import annotations

import collections
import hashlib
import math
import threading
import time
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from analysis.config import Config, ConfigError
from analysis.patterns import grating_half, layout_of
from simulators.optics import (CameraSampler, Propagator, beam_amplitude, beam_field, camera_points_um,
                               photons_per_joule)
from simulators.response import PanelResponse, order_factor
from simulators.sensor import Sensor

SETTLED_TAU = 14.0  # after 14 time constants a transient is below 1e-6 of its step: treat it as settled
TAYLOR_TERMS = 4
GHOST_TURN_STEP_RAD = 1e-3  # the ghosts' summed column is rebuilt when warming turns them this much (slow: mrad/s)


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
    """A region's propagated fields (one per Taylor term) at the camera and its tilt lever (um, x and y)."""

    fields: np.ndarray  # (n_pixels, terms) complex64
    lever_um: tuple[float, float]


# The largest sensor and panel the simulator takes (pixels): several complex arrays of this size are held at once.
MAX_SIMULATED_PX = 8 * 1024 * 1024


def check_simulable(cfg: Config) -> None:
    """Raise ConfigError, naming the key, for a bench too large to simulate in memory."""
    for key, part in (("camera", cfg.camera), ("modulator", cfg.modulator)):
        if part.width_px * part.height_px > MAX_SIMULATED_PX:
            raise ConfigError(f"{cfg.source}: [{key}.width_px] expected at most {MAX_SIMULATED_PX // 2**20} Mpx "
                              f"for a simulated {key}, got {part.width_px}x{part.height_px} px")


class Bench:
    """The whole simulated bench for one config: panel, optics, disturbances, sensor and clock.

    ``start_s`` sets the clock's first reading, so a resumed run can continue the time line it was on: noise and
    vibration are keyed by frame number (time / frame period) and reproduce exactly.
    """

    def __init__(self, cfg: Config, start_s: float = 0.0):
        check_simulable(cfg)
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
        self.camera_x_um, self.camera_y_um = camera_points_um(cam.width_px, cam.height_px, cam.pitch_um,
                                                              geo.camera_offset_mm, geo.camera_roll_deg)
        try:
            self.sampler = CameraSampler(self.propagator, self.camera_x_um, self.camera_y_um)
        except ValueError:
            raise ConfigError(f"{cfg.source}: [geometry.camera_offset_mm] expected the camera inside the simulated "
                              f"field of the panel's light, got {list(geo.camera_offset_mm)} mm") from None
        self.camera_shape = (cam.height_px, cam.width_px)
        self.thickness = self._thickness_map()
        self.band_weight = self._band_weight()
        self._band = self._band_core()
        self._basis: collections.OrderedDict[bytes, RegionBasis] = collections.OrderedDict()
        self._basis_limit = 24
        self._stack_cache: tuple[tuple[bytes, ...], np.ndarray, tuple | None] | None = None
        self._states: collections.deque[PanelState] = collections.deque(maxlen=6)
        self._lock = threading.Lock()
        # the panel's controller: works out each new panel state in order, off the caller's thread
        self._controller = ThreadPoolExecutor(max_workers=1, thread_name_prefix="sim-panel")
        self._shown: Future | None = None

        # regions never straddle the configured split line: a region's tilt lever is taken in its own half
        self._side = grating_half(m.width_px, m.height_px, layout_of(cfg.pattern)).astype(np.int32)
        blank = np.zeros((m.height_px, m.width_px), np.uint16)
        whole = np.ones(blank.shape, bool)
        self._whole_key = _mask_key(whole)
        self._ensure_basis(self._whole_key, whole)
        self._ghosts = self._ghost_bases()
        self._ghost_cache: tuple[int, np.ndarray] | None = None
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
        if unaligned > 1e-12:
            # the unmodulated part reflects from the whole panel as from a mirror, with the ghosts (at the
            # configured temperature: their slow piston drift only moves this fringe-free background)
            field = self._basis[self._whole_key].fields[:, 0].copy()
            if self._ghosts is not None:
                field += self._ghosts[0] @ self.ghost_coefficients(math.inf, (0.0, 0.0), aligned=1.0)
            self.background = stray + np.float32(unaligned) * (np.abs(field) ** 2).astype(np.float32)

    # --- panel -----------------------------------------------------------------------------------------------
    def show(self, pattern: np.ndarray) -> None:
        """Put ``pattern`` on the panel now; the crystal starts to respond after the display latency.

        Like a panel's controller, the bench takes the pattern and returns at once; the new panel state (and the
        propagated fields of new pixel sets) is worked out in its own thread, and reading the panel waits for it.
        """
        m = self.cfg.modulator
        if pattern.shape != (m.height_px, m.width_px):
            raise ValueError(f"pattern: expected {m.height_px}x{m.width_px} (rows x columns), got {pattern.shape}")
        if pattern.dtype.kind != "u" or int(pattern.max()) > self.response.gray_max:
            raise ValueError(f"pattern: expected unsigned gray levels up to {self.response.gray_max}")
        t_c = self.clock.now() + self.cfg.simulator.timing.display_latency_s
        self._shown = self._controller.submit(self._apply, pattern.copy(), t_c)

    def _apply(self, pattern: np.ndarray, t_c: float) -> None:
        with self._lock:
            self._states.append(self._next_state(self._states[-1], pattern, t_c))

    def _wait_shown(self) -> None:
        """Return once every pattern shown so far is on the panel (re-raising a failure to work one out)."""
        if self._shown is not None:
            self._shown.result()

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
        return PanelState(t_c, relabel[labels], tuple(regions), pattern)

    def state_at(self, t: float) -> PanelState:
        """The panel state in force at time ``t``."""
        self._wait_shown()
        return self._state_at(t)

    def _state_at(self, t: float) -> PanelState:
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

    def shear_um(self) -> float:
        """Distance (um) on the camera between where a panel point's mirror light and its first order land:
        z tan(theta_1), sin(theta_1) = lambda / period (grating equation)."""
        period_um = self.cfg.pattern.grating_period_px * self.cfg.modulator.pitch_um
        return self.cfg.geometry.distance_mm * 1e3 * math.tan(math.asin(self.wavelength_um / period_um))

    def _band_weight(self) -> np.ndarray:
        """Fringe amplitude (geometric optics, relative) at every camera pixel, flattened row-major.

        The mirror half's light goes straight, so camera point (x, y) sees the mirror pixel at (x, y); the first order
        that reaches it left the grating pixel one shear further toward the grating half. The fringe amplitude is the
        product of the two incident amplitudes where the first point lies on the mirror half and the second on the
        grating half, zero elsewhere.
        """
        m, p = self.cfg.modulator, self.cfg.pattern
        vertical = p.split == "vertical"
        n = m.width_px if vertical else m.height_px
        cut_um = (round(p.split_position * n) - 0.5 - (n - 1) / 2) * m.pitch_um  # edge between the halves
        toward = 1.0 if p.grating_side in ("right", "bottom") else -1.0  # from the mirror half to the grating half
        along = self.camera_x_um if vertical else self.camera_y_um
        shear = toward * self.shear_um()
        on_mirror = toward * (along - cut_um) < 0
        on_grating = toward * (along + shear - cut_um) > 0
        panel = self.cfg.simulator.beam
        a_m = beam_amplitude(self.camera_x_um, self.camera_y_um, panel)
        a_g = (beam_amplitude(self.camera_x_um + shear, self.camera_y_um, panel) if vertical
               else beam_amplitude(self.camera_x_um, self.camera_y_um + shear, panel))
        return np.where(on_mirror & on_grating, a_m * a_g, 0.0)

    def _band_core(self) -> np.ndarray:
        """Camera pixels (bool image) where the tilt levers are measured: the band, less two Fresnel lengths
        sqrt(lambda z) beside the split line's image, where light of the grating's zero order still spreads."""
        w = self.band_weight
        core = w > 0.1 * max(float(w.max()), 1e-30)
        p, m = self.cfg.pattern, self.cfg.modulator
        vertical = p.split == "vertical"
        n = m.width_px if vertical else m.height_px
        cut_um = (round(p.split_position * n) - 0.5 - (n - 1) / 2) * m.pitch_um
        along = self.camera_x_um if vertical else self.camera_y_um
        fresnel_um = math.sqrt(self.wavelength_um * self.cfg.geometry.distance_mm * 1e3)
        return (core & (np.abs(along - cut_um) > 2 * fresnel_um)).reshape(self.camera_shape)

    def _ghost_bases(self) -> tuple[np.ndarray, list[tuple[float, float, tuple[float, float], bool]]] | None:
        """Propagated cover-glass ghost fields (n_pixels, n) and, for each, (amplitude, piston at the configured
        temperature (rad), tilt lever (um), whether warming moves its piston). None without ghosts."""
        glass, geo = self.cfg.simulator.cover_glass, self.cfg.geometry
        k = 2 * np.pi / self.wavelength_um
        inside = math.asin(math.sin(math.radians(geo.incidence_deg)) / glass.index)
        double_pass = 2 * k * glass.index * glass.thickness_um * math.cos(inside)
        m = self.cfg.modulator
        x = (np.arange(m.width_px) - (m.width_px - 1) / 2) * m.pitch_um
        y = (np.arange(m.height_px) - (m.height_px - 1) / 2) * m.pitch_um
        specs = []
        for reflectance, wedge_urad, scale, piston, moves in (
                (glass.front_reflectance, glass.front_wedge_urad, 1.0, glass.inner_phase_rad - double_pass, True),
                (glass.inner_reflectance, glass.inner_wedge_urad, glass.index, glass.inner_phase_rad, False)):
            if reflectance > 0:
                # a surface tilted by w reflects with 2 w of tilt; inside the glass the phase ramp is n times steeper
                ramp = 2 * k * scale * 1e-6 * (wedge_urad[0] * x[None, :] + wedge_urad[1] * y[:, None])
                specs.append((math.sqrt(reflectance), piston, self.beam * np.exp(1j * ramp).astype(np.complex64),
                              moves))
        if not specs:
            return None
        fields, params = [], []
        for amp, piston, field, moves in specs:
            propagated = self.sampler(self.propagator(field.astype(np.complex64)))
            fields.append(propagated)
            params.append((amp, piston, self._lever_um(propagated), moves))
        return np.ascontiguousarray(np.stack(fields, axis=1)), params

    def glass_turn_rad(self, t: float) -> float:
        """Phase (rad) by which warming has turned the front ghost against the rest at time ``t``: the glass's
        optical path grows, so the panel's light and the inner ghost fall behind the front reflection."""
        glass = self.cfg.simulator.cover_glass
        heat = self.temperature_c(t) - self.cfg.simulator.response.temperature_c
        return -2 * (2 * np.pi / self.wavelength_um) * glass.thickness_um * glass.path_per_k * heat

    def ghost_coefficients(self, t: float, tilt_urad=(0.0, 0.0), aligned: float | None = None,
                           turn_rad: float | None = None) -> np.ndarray:
        """Complex weight of each ghost field at time ``t``: fixed fields whose pistons move only with the glass's
        temperature (``turn_rad`` overrides it) and the panel tilt."""
        amp0 = self.aligned_amp if aligned is None else aligned
        turn = self.glass_turn_rad(t) if turn_rad is None else turn_rad
        k2 = 4 * np.pi / self.wavelength_um * 1e-6
        out = []
        for amp, piston, lever, moves in self._ghosts[1]:
            phase = piston + (turn if moves else 0.0) + k2 * (tilt_urad[0] * lever[0] + tilt_urad[1] * lever[1])
            out.append(amp0 * amp * np.exp(1j * phase))
        return np.asarray(out, np.complex64)

    def _ghost_column(self, t: float) -> tuple[int, np.ndarray]:
        """Both ghosts summed into one camera field at the glass's turn at ``t``, rounded to GHOST_TURN_STEP_RAD,
        and that rounded turn's index: a frame pays one multiply-add per pixel for the cover glass."""
        step = round(self.glass_turn_rad(t) / GHOST_TURN_STEP_RAD)
        if self._ghost_cache is None or self._ghost_cache[0] != step:
            coeffs = self.ghost_coefficients(t, aligned=1.0, turn_rad=step * GHOST_TURN_STEP_RAD)
            self._ghost_cache = (step, self._ghosts[0] @ coeffs)
        return self._ghost_cache

    def _ghost_weight(self, tilt_urad) -> complex:
        """Weight of the summed ghost column: the aligned share and the tilt piston at the ghosts' mean lever."""
        params = self._ghosts[1]
        amps = [a for a, *_ in params]
        lx = sum(a * lever[0] for a, _, lever, _ in params) / sum(amps)
        ly = sum(a * lever[1] for a, _, lever, _ in params) / sum(amps)
        k2 = 4 * np.pi / self.wavelength_um * 1e-6
        return self.aligned_amp * np.exp(1j * k2 * (tilt_urad[0] * lx + tilt_urad[1] * ly))

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
        self._basis[key] = RegionBasis(np.ascontiguousarray(fields), self._lever_um(fields[:, 0]))
        # never evict fields still in use: by the states kept, by the state being built (keep), the whole panel
        in_use = {r.key for state in self._states for r in state.regions} | {key, self._whole_key, *keep}
        for old in [k for k in self._basis if k not in in_use][: max(len(self._basis) - self._basis_limit, 0)]:
            del self._basis[old]

    def _lever_um(self, camera_field: np.ndarray) -> tuple[float, float]:
        """Tilt lever (um, x and y) of a propagated field: -z <k_perp> / k over the fringe band, <k_perp> from the
        phase between neighbouring camera pixels (exact for a plane wave below the Nyquist limit)."""
        f = camera_field.reshape(self.camera_shape)
        band = self._band if self._band.any() else np.ones(self.camera_shape, bool)
        pitch = self.cfg.camera.pitch_um
        both_u = band[:, 1:] & band[:, :-1]
        both_v = band[1:, :] & band[:-1, :]
        k_u = np.angle(np.sum((np.conj(f[:, :-1]) * f[:, 1:])[both_u])) / pitch
        k_v = np.angle(np.sum((np.conj(f[:-1, :]) * f[1:, :])[both_v])) / pitch
        c, s = math.cos(math.radians(self.cfg.geometry.camera_roll_deg)), math.sin(
            math.radians(self.cfg.geometry.camera_roll_deg))
        z_over_k = self.cfg.geometry.distance_mm * 1e3 * self.wavelength_um / (2 * np.pi)
        return -z_over_k * (c * k_u - s * k_v), -z_over_k * (s * k_u + c * k_v)

    def _stacked(self, state: PanelState, t: float) -> np.ndarray:
        """The region bases (then the summed ghost column) as rows (n_terms, n_pixels), each row contiguous."""
        keys = tuple(r.key for r in state.regions)
        if self._stack_cache is None or self._stack_cache[0] != keys:
            parts = [self._basis[k].fields.T for k in keys]
            if self._ghosts is not None:
                parts.append(self._ghost_column(t)[1][None, :])
            self._stack_cache = (keys, np.concatenate(parts, axis=0), self._ghost_cache)
        elif self._ghosts is not None and self._ghost_column(t) is not self._stack_cache[2]:
            self._stack_cache[1][-1] = self._ghost_cache[1]  # warming turned the front ghost: rebuild its share
            self._stack_cache = (*self._stack_cache[:2], self._ghost_cache)
        return self._stack_cache[1]

    def temperature_c(self, t: float) -> float:
        """Panel temperature (C) at time ``t``: the configured one, less the warm-up still to come, plus the ramp.

        ``t`` = inf (or any non-finite time) means the configured temperature.
        """
        timing, resp = self.cfg.simulator.timing, self.cfg.simulator.response
        if not math.isfinite(t):
            return resp.temperature_c
        now_c = resp.temperature_c + timing.warming_k_per_min * max(t, 0.0) / 60.0
        if timing.warmup_k:
            now_c -= timing.warmup_k * math.exp(-max(t, 0.0) / timing.warmup_tau_s)
        return min(now_c, resp.clearing_c - 0.5)  # the law holds only below the clearing point

    def thermal_factor(self, t: float) -> float:
        """Retardance at time ``t`` relative to that at the configured temperature: the birefringence follows the
        order-parameter law, so a warming panel's whole curve shrinks."""
        resp = self.cfg.simulator.response
        now_c = self.temperature_c(t)
        if now_c == resp.temperature_c:
            return 1.0
        return (order_factor(now_c, resp.clearing_c, resp.order_exponent)
                / order_factor(resp.temperature_c, resp.clearing_c, resp.order_exponent))

    def region_phases(self, state: PanelState, t: float, exposure_s: float, tilt_urad=(0.0, 0.0)) -> list[float]:
        """Phase (rad) of each region's aligned field at time ``t``: transient, warming, flicker and panel tilt."""
        timing = self.cfg.simulator.timing
        k2 = 4 * np.pi / self.wavelength_um * 1e-6  # 2k, per urad of tilt and um of lever arm
        ripple = 0.0
        if timing.flicker_rad:
            ripple = (timing.flicker_rad * np.sinc(timing.flicker_hz * exposure_s)
                      * math.sin(2 * math.pi * timing.flicker_hz * t + self.flicker_offset))
        thermal = self.thermal_factor(t)
        phases = []
        for r in state.regions:
            rho = r.retardance(t, timing.lc_tau_s) * thermal
            if ripple:
                rho += ripple * float(self.response.slope_weight(r.gray))
            lx, ly = self._basis[r.key].lever_um
            phases.append(rho + k2 * (tilt_urad[0] * lx + tilt_urad[1] * ly))
        return phases

    def coefficients(self, state: PanelState, t: float, exposure_s: float, tilt_urad=(0.0, 0.0)) -> np.ndarray:
        """Complex weights of the stacked region bases (then the summed ghost column) at time ``t``."""
        droop = self.cfg.simulator.response.reflectance_droop
        coeffs = []
        thermal = self.thermal_factor(t)
        for r, phase in zip(state.regions, self.region_phases(state, t, exposure_s, tilt_urad)):
            amp = self.aligned_amp * math.sqrt(1.0 - droop * r.gray / self.response.gray_max)
            c = amp * np.exp(1j * phase)
            if self.thickness is None:
                coeffs.append(c)
            else:
                rho = r.retardance(t, self.cfg.simulator.timing.lc_tau_s) * thermal
                coeffs.extend(c * rho**n for n in range(TAYLOR_TERMS))
        if self._ghosts is not None:
            coeffs.append(self._ghost_weight(tilt_urad))
        return np.asarray(coeffs, np.complex64)

    def irradiance(self, t: float, exposure_s: float, tilt_urad=(0.0, 0.0)) -> np.ndarray:
        """Irradiance (W/um^2) at every camera pixel at time ``t`` (flattened row-major)."""
        self._wait_shown()
        with self._lock:
            state = self._state_at(t)
            rows = self._stacked(state, t)
            coeffs = self.coefficients(state, t, exposure_s, tilt_urad)
            # one multiply-add per row, not a BLAS matrix-vector product: for a few rows of many pixels a threaded
            # gemv spends milliseconds handing work between threads on a busy machine, 20-40 times the arithmetic
            field = rows[0] * coeffs[0]
            for row, c in zip(rows[1:], coeffs[1:]):
                field += row * c
        intensity = field.real**2
        intensity += field.imag**2
        intensity += self.background
        return intensity

    def panel_field(self, t: float, exposure_s: float = 0.0) -> np.ndarray:
        """Aligned-polarisation field leaving the panel at time ``t``, ghosts included (no superposition shortcut)."""
        state = self.state_at(t)
        droop = self.cfg.simulator.response.reflectance_droop
        out = np.zeros(state.labels.shape, np.complex64)
        thick = 1.0 if self.thickness is None else self.thickness
        tau = self.cfg.simulator.timing.lc_tau_s
        thermal = self.thermal_factor(t)
        for index, (r, phase) in enumerate(zip(state.regions, self.region_phases(state, t, exposure_s))):
            rho = r.retardance(t, tau) * thermal
            amp = self.aligned_amp * math.sqrt(1.0 - droop * r.gray / self.response.gray_max)
            out += (self.beam * self._weight(state.labels == index)
                    * (amp * np.exp(1j * (phase - rho + rho * thick))).astype(np.complex64))
        return out

    def irradiance_full(self, t: float, exposure_s: float = 0.0) -> np.ndarray:
        """Irradiance like ``irradiance`` but by propagating the whole panel field: the reference for the shortcut.

        The ghost fields are rebuilt here from the config, independently of the cached ghost columns.
        """
        field = self.panel_field(t, exposure_s)
        glass, geo = self.cfg.simulator.cover_glass, self.cfg.geometry
        if self._ghosts is not None:
            k = 2 * np.pi / self.wavelength_um
            m = self.cfg.modulator
            x = (np.arange(m.width_px) - (m.width_px - 1) / 2)[None, :] * m.pitch_um
            y = (np.arange(m.height_px) - (m.height_px - 1) / 2)[:, None] * m.pitch_um
            inside = math.asin(math.sin(math.radians(geo.incidence_deg)) / glass.index)
            heat = self.temperature_c(t) - self.cfg.simulator.response.temperature_c
            glass_rad = 2 * k * glass.thickness_um * (glass.index * math.cos(inside) + glass.path_per_k * heat)
            for r, wedge, n, piston in ((glass.front_reflectance, glass.front_wedge_urad, 1.0,
                                         glass.inner_phase_rad - glass_rad),
                                        (glass.inner_reflectance, glass.inner_wedge_urad, glass.index,
                                         glass.inner_phase_rad)):
                ramp = 2 * k * n * 1e-6 * (wedge[0] * x + wedge[1] * y)
                field = field + (self.aligned_amp * math.sqrt(r) * self.beam
                                 * np.exp(1j * (piston + ramp))).astype(np.complex64)
        sampled = self.sampler(self.propagator(field.astype(np.complex64)))
        return np.abs(sampled) ** 2 + self.background

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

    # --- truth -------------------------------------------------------------------------------------------------
    def _curve_over(self, weight: np.ndarray, at_s: float) -> tuple[np.ndarray, np.ndarray]:
        """Gray levels and phi(g) - phi(0) (rad) averaged over panel pixels with ``weight``, at time ``at_s``."""
        grays, phase = self.response.curve()
        phase = phase * self.thermal_factor(at_s)
        if self.thickness is None:
            return grays, phase
        total = float(weight.sum())
        if total <= 0:
            raise ValueError("truth: the weighted panel region receives no light")
        return grays, phase * float((self.thickness * weight).sum() / total)

    def true_curve_in(self, x0: int, x1: int, y0: int, y1: int,
                      at_s: float = math.inf) -> tuple[np.ndarray, np.ndarray]:
        """The true curve phi(g) - phi(0) (rad) of the panel pixels in columns x0..x1-1, rows y0..y1-1, weighted by
        the incident intensity: the retardance scales with the cell gap."""
        weight = np.zeros(self.beam.shape, np.float32)
        weight[y0:y1, x0:x1] = np.abs(self.beam[y0:y1, x0:x1]) ** 2
        return self._curve_over(weight, at_s)

    def true_curve(self, at_s: float = math.inf) -> tuple[np.ndarray, np.ndarray]:
        """Gray levels and the true phi(g) - phi(0) (rad) over the whole illuminated panel (falls with gray).

        ``at_s``: the panel's temperature at that bench time (default: the configured temperature).
        """
        return self._curve_over(np.abs(self.beam) ** 2, at_s)

    def sampled_weight(self, band_px: tuple[int, int, int, int] | None = None) -> np.ndarray:
        """Weight (relative) of each panel pixel in the analysed fringes: the mirror pixels whose light lands in the
        band, weighted by the geometric fringe amplitude there (see ``_band_weight``).

        ``band_px`` = (x0, x1, y0, y1), camera columns x0..x1-1 and rows y0..y1-1 (the rig's band); None: the whole
        camera.
        """
        w = self.band_weight.reshape(self.camera_shape)
        if band_px is not None:
            x0, x1, y0, y1 = band_px
            keep = np.zeros(self.camera_shape, bool)
            keep[y0:y1, x0:x1] = True
            w = np.where(keep, w, 0.0)
        m = self.cfg.modulator
        col = np.rint(self.camera_x_um / m.pitch_um + (m.width_px - 1) / 2).astype(int)
        row = np.rint(self.camera_y_um / m.pitch_um + (m.height_px - 1) / 2).astype(int)
        inside = (col >= 0) & (col < m.width_px) & (row >= 0) & (row < m.height_px) & (w.ravel() > 0)
        weight = np.zeros(m.height_px * m.width_px)
        np.add.at(weight, row[inside] * m.width_px + col[inside], w.ravel()[inside])
        return weight.reshape(m.height_px, m.width_px)

    def sampled_true_curve(self, band_px: tuple[int, int, int, int] | None = None,
                           at_s: float = math.inf) -> tuple[np.ndarray, np.ndarray]:
        """Gray levels and the true phi(g) - phi(0) (rad) of the panel region whose light makes the analysed fringes
        (``sampled_weight``): what a calibration on this bench should find. ``at_s`` as in ``true_curve``."""
        return self._curve_over(self.sampled_weight(band_px), at_s)


def _mask_key(mask: np.ndarray) -> bytes:
    return hashlib.blake2b(np.packbits(mask).tobytes() + repr(mask.shape).encode(), digest_size=16).digest()
