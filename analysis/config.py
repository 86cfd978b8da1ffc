"""Bench configuration: TOML files loaded into frozen, range-checked dataclasses.

Every field declares its unit in its name and its allowed values in ``spec``. Unknown keys are errors, so a
misspelt key never passes silently. Errors name the file, the key path and what was expected.
"""

from __future__ import annotations

import dataclasses
import difflib
import json
import math
import tomllib
import typing
from dataclasses import dataclass, field
from pathlib import Path


class ConfigError(ValueError):
    """A configuration value is missing, misspelt, of the wrong type or out of range."""


def spec(default, *, lo=None, hi=None, choices=None, lo_open=False, doc=""):
    """Declare a config field with its default, inclusive range or choices and a one-line meaning."""
    meta = {"lo": lo, "hi": hi, "choices": choices, "lo_open": lo_open, "doc": doc}
    if isinstance(default, (list, tuple)):
        return field(default_factory=lambda: tuple(default), metadata=meta)
    return field(default=default, metadata=meta)


@dataclass(frozen=True)
class Modulator:
    width_px: int = spec(1600, lo=16, hi=16384, doc="panel width")
    height_px: int = spec(1200, lo=16, hi=16384, doc="panel height")
    pitch_um: float = spec(8.5, lo=0.5, hi=100.0, doc="pixel pitch")
    bit_depth: int = spec(8, lo=8, hi=12, doc="gray-level bits")
    display: int | str = spec("auto", doc="display index, display name, or 'auto' (match the panel's size)")
    allow_primary: bool = spec(False, doc="let the pattern window cover the desktop's primary display")
    rgb_shift_bits: tuple[int, int, int] = spec((0, 0, 0), lo=-15, hi=15,
                                                doc="right shift of the gray into red, green, blue (negative: left); "
                                                    "each channel keeps its low 8 bits")
    backend: str = spec("window", doc="window (a full-screen pattern window on modulator.display), or module:Class "
                                      "for a panel driven by its maker's library")


@dataclass(frozen=True)
class Laser:
    wavelength_nm: float = spec(1064.0, lo=350.0, hi=2000.0, doc="vacuum wavelength")
    power_mw: float = spec(3.0, lo=0.0, hi=1e5, lo_open=True, doc="power reaching the panel")
    laser_class: str = spec("unset", choices=("unset", "1", "1M", "2", "2M", "3R", "3B", "4"),
                            doc="IEC 60825-1 class as labelled on the laser")
    safety_acknowledged: bool = spec(False, doc="the laser-safety notice has been read (otherwise asked once per machine)")


@dataclass(frozen=True)
class Camera:
    backend: str = spec("sim", doc="sim, opencv, replay, genicam, or module:Class for a lab's own backend")
    width_px: int = spec(1280, lo=16, hi=16384, doc="sensor width")
    height_px: int = spec(1024, lo=16, hi=16384, doc="sensor height")
    pitch_um: float = spec(4.8, lo=0.5, hi=50.0, doc="sensor pixel pitch")
    bit_depth: int = spec(12, lo=8, hi=16, doc="ADC bits")
    exposure_s: float = spec(0.0015, lo=1e-6, hi=10.0, doc="exposure time")
    gain_db: float = spec(0.0, lo=0.0, hi=48.0, doc="analogue gain")
    device: str = spec("", doc="opencv: device index, file or URL ('': device 0); replay: image folder; "
                               "genicam: serial, user id or address ('': the only camera); "
                               "module:Class: handed to the class")
    discard_frames: int = spec(0, lo=0, hi=1000,
                               doc="frames thrown away after every pattern change (for timestamps off the bench clock)")
    grab_timeout_s: float = spec(2.0, lo=0.01, hi=600.0, doc="longest wait for one frame")
    trigger: str = spec("free-run", choices=("free-run", "software"),
                        doc="software: one triggered exposure per needed frame, after the settle time")


@dataclass(frozen=True)
class Geometry:
    distance_mm: float = spec(150.0, lo=1.0, hi=5000.0, doc="panel-to-sensor distance along the beam")
    incidence_deg: float = spec(3.0, lo=0.0, hi=30.0, doc="angle of incidence on the panel")
    camera_offset_mm: tuple[float, float] = spec((-1.6, 0.0), lo=-100.0, hi=100.0,
                                                 doc="sensor centre from the reflected beam axis (x right, y down)")
    camera_roll_deg: float = spec(0.0, lo=-45.0, hi=45.0, doc="sensor rotation about the beam axis")


@dataclass(frozen=True)
class Pattern:
    split: str = spec("vertical", choices=("vertical", "horizontal"),
                      doc="vertical: left and right halves; horizontal: top and bottom halves")
    split_position: float = spec(0.5, lo=0.05, hi=0.95, doc="split line as a fraction of the panel width (height)")
    grating_side: str = spec("right", choices=("left", "right", "top", "bottom"), doc="half that shows the grating")
    grating_period_px: int = spec(6, lo=2, hi=512, doc="binary grating period")
    grating_low: int = spec(0, lo=0, hi=4095, doc="gray of the grating's low stripes")
    grating_high: int = spec(128, lo=0, hi=4095, doc="gray of the grating's high stripes")


@dataclass(frozen=True)
class Sweep:
    levels: str | tuple[int, ...] = spec("all", doc="'all', or a list of gray levels")
    frames_per_level: int | str = spec(2, lo=1, hi=1000,
                                       doc="frames grabbed per gray level, or 'auto': as many as bring a level's "
                                           "standard error to target_std_mrad (2 to 16), from the frames' scatter "
                                           "measured just before the sweep (drift-reference visits then take at "
                                           "least as many)")
    target_std_mrad: float = spec(2.0, lo=0.05, hi=1000.0,
                                  doc="standard error per level that frames_per_level 'auto' aims for")
    settle_s: float = spec(0.1, lo=0.0, hi=60.0, doc="wait after a pattern change")
    reference_gray: int = spec(0, lo=0, hi=4095, doc="gray re-measured for drift correction")
    reference_every: int = spec(16, lo=0, hi=100000, doc="levels between drift references (0: none)")
    reference_frames: int = spec(6, lo=1, hi=1000,
                                 doc="frames grabbed per drift-reference visit, back to back (a visit's noise "
                                     "reaches every level through the drift model)")
    second_reference_gray: int | str = spec("auto", lo=0, hi=4095,
                                            doc="gray re-measured with every reference for the drift of the curve's "
                                                "scale: 'auto' (the gray farthest in phase from reference_gray on "
                                                "the coarse scan), 'none', or a gray")
    order: str = spec("ascending", choices=("ascending", "shuffled", "up-down"), doc="order of the levels")
    warmup_slope_rad_per_min: float = spec(0.01, lo=1e-6, hi=10.0, lo_open=False,
                                           doc="warm-up is over when the fringe phase moves less than this a minute")


@dataclass(frozen=True)
class Response:
    cell_gap_um: float = spec(3.2, lo=0.3, hi=50.0, doc="liquid-crystal layer thickness")
    v_min: float = spec(0.9, lo=0.0, hi=20.0, doc="drive voltage at gray 0 (V rms)")
    v_max: float = spec(3.0, lo=0.0, hi=20.0, doc="drive voltage at full gray (V rms)")
    threshold_v: float = spec(0.9, lo=0.0, hi=20.0, doc="Freedericksz threshold")
    v0: float = spec(0.9, lo=0.01, hi=20.0, doc="width of the tilt-vs-voltage curve")
    electronic_gamma: float = spec(1.0, lo=0.2, hi=5.0, doc="exponent of the gray-to-voltage map")
    ne_cauchy: tuple[float, float, float] = spec((1.67798, 0.01696, 0.00127), lo=-10.0, hi=10.0,
                                                 doc="extraordinary index A, B (um^2), C (um^4)")
    no_cauchy: tuple[float, float, float] = spec((1.49669, 0.00785, 0.00026), lo=-10.0, hi=10.0,
                                                 doc="ordinary index A, B (um^2), C (um^4)")
    temperature_c: float = spec(25.0, lo=-20.0, hi=100.0, doc="panel temperature")
    reference_temperature_c: float = spec(25.0, lo=-20.0, hi=100.0, doc="temperature of the Cauchy coefficients")
    clearing_c: float = spec(58.0, lo=0.0, hi=200.0, doc="nematic-isotropic transition")
    order_exponent: float = spec(0.22, lo=0.05, hi=0.5, doc="exponent of the order-parameter law")
    crosstalk_px: float = spec(0.0, lo=0.0, hi=10.0, doc="fringing-field smoothing width (Gaussian sigma)")
    thickness_variation: float = spec(0.0, lo=0.0, hi=0.2, doc="peak relative cell-gap variation across the panel")
    reflectance_droop: float = spec(0.0, lo=0.0, hi=0.5, doc="relative loss of reflected power at full gray")
    polarization_deg: float = spec(0.0, lo=-90.0, hi=90.0, doc="incident polarisation from the LC director")


@dataclass(frozen=True)
class Beam:
    profile: str = spec("gaussian", choices=("gaussian", "flat-top"), doc="incident beam shape")
    radius_mm: float = spec(3.5, lo=0.05, hi=100.0, doc="1/e^2 radius (gaussian) or radius (flat-top)")
    center_mm: tuple[float, float] = spec((0.0, 0.0), lo=-100.0, hi=100.0, doc="beam centre from the panel centre")
    curvature_m: float = spec(0.0, lo=-1e4, hi=1e4, doc="wavefront radius of curvature (0: collimated)")


@dataclass(frozen=True)
class Noise:
    quantum_efficiency: float = spec(0.12, lo=0.0, hi=1.0, lo_open=True, doc="electrons per photon")
    e_per_adu: float = spec(2.5, lo=0.01, hi=1000.0, doc="conversion gain at 0 dB")
    read_noise_e: float = spec(6.0, lo=0.0, hi=1000.0, doc="read noise")
    dark_offset_adu: float = spec(40.0, lo=0.0, hi=65535.0, doc="black level")
    full_well_e: float = spec(10500.0, lo=10.0, hi=1e7, doc="pixel full-well capacity")
    optical_density: float = spec(3.0, lo=0.0, hi=12.0, doc="neutral-density attenuation before the sensor")
    stray_light: float = spec(0.003, lo=0.0, hi=1.0, doc="uniform background as a fraction of the peak intensity")
    prnu: float = spec(0.0, lo=0.0, hi=0.2,
                       doc="photo-response non-uniformity: relative gain std over pixels (EMVA 1288; ~0.005 typical)")
    dsnu_e: float = spec(0.0, lo=0.0, hi=1000.0,
                         doc="dark-signal non-uniformity: offset std over pixels in e- (EMVA 1288; ~1-3 e- typical)")
    dark_current_e_per_s: float = spec(0.0, lo=0.0, hi=1e6,
                                       doc="mean dark current (EMVA 1288; ~1-50 e-/s for CMOS at room temperature)")
    hot_pixels: int = spec(0, lo=0, hi=100000, doc="pixels with a much larger dark current (fixed per camera seed)")
    hot_pixel_e_per_s: float = spec(2e4, lo=0.0, hi=1e8, doc="dark current of a hot pixel")


@dataclass(frozen=True)
class Timing:
    realtime: bool = spec(False, doc="sleep like hardware (true) or advance a simulated clock (false)")
    lc_tau_s: float = spec(0.005, lo=0.0, hi=10.0, doc="liquid-crystal response time constant")
    display_latency_s: float = spec(0.017, lo=0.0, hi=1.0, doc="delay from show() to the panel changing")
    frame_rate_hz: float = spec(100.0, lo=0.1, hi=100000.0, doc="camera frame rate")
    vibration_urad: float = spec(0.02, lo=0.0, hi=1000.0, doc="rms panel tilt jitter, frame to frame")
    drift_urad_per_s: float = spec(0.0, lo=-1000.0, hi=1000.0, doc="slow panel tilt drift")
    flicker_rad: float = spec(0.0, lo=0.0, hi=3.0, doc="peak phase ripple at the steepest gray")
    flicker_hz: float = spec(120.0, lo=0.0, hi=100000.0, doc="ripple frequency")
    warmup_k: float = spec(0.0, lo=0.0, hi=30.0, doc="panel temperature rise still to come when the bench starts")
    warmup_tau_s: float = spec(600.0, lo=1.0, hi=36000.0, doc="time constant of the panel's warm-up")
    warming_k_per_min: float = spec(0.0, lo=-30.0, hi=30.0,
                                    doc="steady panel temperature ramp from the bench's time zero (the demo bench "
                                        "sweeps from about 6 s to 39 s)")


@dataclass(frozen=True)
class CoverGlass:
    thickness_um: float = spec(700.0, lo=10.0, hi=10000.0, doc="cover-glass thickness (0.5-1.1 mm typical, from memory)")
    index: float = spec(1.5, lo=1.0, hi=4.0, doc="cover-glass refractive index (borosilicate ~1.5 in the near IR)")
    path_per_k: float = spec(1e-5, lo=-1e-3, hi=1e-3,
                             doc="relative change of the glass's optical path per kelvin, dn/dT + n alpha "
                                 "(~1e-5/K for borosilicate, from memory)")
    front_reflectance: float = spec(0.0, lo=0.0, hi=0.1,
                                    doc="intensity reflectance of the front surface (AR coated: 0.001-0.005, "
                                        "common practice)")
    front_wedge_urad: tuple[float, float] = spec((0.0, 0.0), lo=-1e5, hi=1e5,
                                                 doc="front-surface tilt from the panel plane (x, y)")
    inner_reflectance: float = spec(0.0, lo=0.0, hi=0.1,
                                    doc="intensity reflectance of the inner glass/ITO/LC interface (~0.002-0.01, "
                                        "from memory; the largest cover-glass ghost)")
    inner_wedge_urad: tuple[float, float] = spec((0.0, 0.0), lo=-1e5, hi=1e5,
                                                 doc="inner-surface tilt from the panel plane (x, y)")
    inner_phase_rad: float = spec(1.0, lo=-100.0, hi=100.0,
                                  doc="phase of the inner reflection relative to the panel's light at zero "
                                      "retardance (set by the cell's ordinary path; unknown on a real panel)")


@dataclass(frozen=True)
class Faults:
    timeout_rate: float = spec(0.0, lo=0.0, hi=1.0, doc="fraction of grabs that time out")
    drop_rate: float = spec(0.0, lo=0.0, hi=1.0, doc="fraction of frames silently skipped")
    corrupt_rate: float = spec(0.0, lo=0.0, hi=1.0, doc="fraction of frames delivered incomplete")
    die_after_frames: int = spec(0, lo=0, hi=10**9, doc="camera disconnects after this many frames (0: never)")


TERMINATORS = ("\n", "\r", "\r\n")


@dataclass(frozen=True)
class SerialLink:
    port: str = spec("", doc="serial port such as /dev/ttyUSB0 ('': not fitted)")
    baud: int = spec(9600, lo=300, hi=4_000_000, doc="baud rate")
    write_terminator: str = spec("\n", choices=TERMINATORS, doc="ends every command sent")
    read_terminator: str = spec("\n", choices=TERMINATORS, doc="ends every reply")
    timeout_s: float = spec(1.0, lo=0.01, hi=60.0, doc="longest wait for one reply")
    retries: int = spec(2, lo=0, hi=10, doc="repeats of a query that timed out or got a garbled reply")
    identify_command: str = spec("*IDN?", doc="query answered with the instrument's identity ('': none)")


@dataclass(frozen=True)
class Shutter(SerialLink):
    open_command: str = spec("SHUT:OPEN", doc="command that opens the shutter")
    close_command: str = spec("SHUT:CLOS", doc="command that closes the shutter")
    state_command: str = spec("SHUT?", doc="query of the shutter state ('': trust the commands)")
    open_reply: str = spec("1", doc="state reply of an open shutter")
    closed_reply: str = spec("0", doc="state reply of a closed shutter")
    move_s: float = spec(0.05, lo=0.0, hi=10.0, doc="time the blade takes to move")
    dark_frames: int = spec(4, lo=1, hi=100, doc="frames averaged into the dark frame")


@dataclass(frozen=True)
class PowerMeter(SerialLink):
    measure_command: str = spec("MEAS:POW?", doc="query answered with the power in W")
    drift_fraction: float = spec(0.05, lo=0.0, hi=10.0, lo_open=True,
                                 doc="warn when the power moves this fraction from its first reading")


@dataclass(frozen=True)
class Rotator(SerialLink):
    move_command: str = spec("ROT:MOVE {angle_deg}", doc="command that starts a move ({angle_deg} is replaced)")
    position_command: str = spec("ROT:POS?", doc="query answered with the angle in degrees")
    angle_deg: float = spec(0.0, lo=-360.0, hi=360.0, doc="angle to set before a run (half-wave plate)")
    tolerance_deg: float = spec(0.1, lo=0.001, hi=10.0, doc="a move is done within this angle of its target")
    move_timeout_s: float = spec(30.0, lo=0.1, hi=600.0, doc="longest wait for a move")


@dataclass(frozen=True)
class Thermometer(SerialLink):
    measure_command: str = spec("MEAS:TEMP?", doc="query answered with the temperature in degrees C")
    drift_c: float = spec(0.5, lo=0.0, hi=100.0, lo_open=True,
                          doc="warn when the temperature moves this far from its first reading")


@dataclass(frozen=True)
class Accessories:
    shutter: Shutter = field(default_factory=Shutter)
    power_meter: PowerMeter = field(default_factory=PowerMeter)
    rotator: Rotator = field(default_factory=Rotator)
    thermometer: Thermometer = field(default_factory=Thermometer)


@dataclass(frozen=True)
class Simulator:
    seed: int = spec(1, lo=0, hi=2**63 - 1, doc="seed of every random draw")
    response: Response = field(default_factory=Response)
    beam: Beam = field(default_factory=Beam)
    noise: Noise = field(default_factory=Noise)
    timing: Timing = field(default_factory=Timing)
    cover_glass: CoverGlass = field(default_factory=CoverGlass)
    faults: Faults = field(default_factory=Faults)


@dataclass(frozen=True)
class Config:
    modulator: Modulator = field(default_factory=Modulator)
    laser: Laser = field(default_factory=Laser)
    camera: Camera = field(default_factory=Camera)
    geometry: Geometry = field(default_factory=Geometry)
    pattern: Pattern = field(default_factory=Pattern)
    sweep: Sweep = field(default_factory=Sweep)
    accessories: Accessories = field(default_factory=Accessories)
    simulator: Simulator = field(default_factory=Simulator)
    source: str = field(default="<defaults>", compare=False)

    @property
    def gray_max(self) -> int:
        """Largest gray level of the panel."""
        return 2**self.modulator.bit_depth - 1

    def sweep_levels(self) -> tuple[int, ...]:
        """Gray levels of the sweep in ascending order, before any reordering."""
        if self.sweep.levels == "all":
            return tuple(range(self.gray_max + 1))
        return tuple(sorted(set(self.sweep.levels)))


def load_config(path: str | Path) -> Config:
    """Read a TOML config file; raise ConfigError naming the file, key path and expectation."""
    path = Path(path)
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError(f"{path}: no such config file") from None
    except IsADirectoryError:
        raise ConfigError(f"{path}: is a folder; expected a config file (TOML)") from None
    except UnicodeDecodeError as err:
        raise ConfigError(f"{path}: expected a TOML text file in UTF-8, found byte 0x{err.object[err.start]:02x} "
                          f"at offset {err.start}") from None
    except OSError as err:
        raise ConfigError(f"{path}: cannot read the config file ({err.strerror or err})") from None
    except tomllib.TOMLDecodeError as err:
        raise ConfigError(f"{path}: not valid TOML ({err})") from None
    return config_from_dict(raw, source=str(path))


def config_from_dict(raw: dict, source: str = "<dict>") -> Config:
    """Build a checked Config from nested dicts (as TOML gives them)."""
    cfg = _build(Config, raw, source, "")
    cfg = dataclasses.replace(cfg, source=source)
    _cross_check(cfg)
    return cfg


def replace(cfg: Config, **changes) -> Config:
    """Return a copy with dotted-path changes, e.g. replace(cfg, **{"laser.wavelength_nm": 780.0}), re-checked."""
    raw = as_dict(cfg)
    for dotted, value in changes.items():
        node = raw
        *parents, leaf = dotted.split(".")
        for key in parents:
            node = node[key]
        if leaf not in node:
            raise ConfigError(f"{cfg.source}: [{dotted}] unknown key")
        node[leaf] = value
    return config_from_dict(raw, source=cfg.source)


def as_dict(obj) -> dict:
    """Nested plain dicts of a config (tuples become lists, as TOML writes them)."""
    out = {}
    for f in dataclasses.fields(obj):
        if f.name == "source":
            continue
        value = getattr(obj, f.name)
        if dataclasses.is_dataclass(value):
            out[f.name] = as_dict(value)
        elif isinstance(value, tuple):
            out[f.name] = list(value)
        else:
            out[f.name] = value
    return out


def to_toml(cfg: Config) -> str:
    """The config as TOML text that load_config reads back to an equal Config."""
    lines: list[str] = []

    def value(v):
        if isinstance(v, bool):
            return "true" if v else "false"
        if isinstance(v, str):
            return json.dumps(v)
        if isinstance(v, (list, tuple)):
            return "[" + ", ".join(value(x) for x in v) + "]"
        return repr(v)

    def table(name, node):
        scalars = {k: v for k, v in node.items() if not isinstance(v, dict)}
        if scalars:
            lines.append(f"[{name}]")
            lines.extend(f"{k} = {value(v)}" for k, v in scalars.items())
            lines.append("")
        for k, v in node.items():
            if isinstance(v, dict):
                table(f"{name}.{k}", v)

    for section, node in as_dict(cfg).items():
        table(section, node)
    return "\n".join(lines)


def _build(cls, raw, source, prefix):
    if not isinstance(raw, dict):
        raise ConfigError(f"{source}: [{prefix.rstrip('.')}] expected a table of keys, got {raw!r}")
    hints = typing.get_type_hints(cls)
    names = {f.name for f in dataclasses.fields(cls) if f.name != "source"}
    for key in raw:
        if key not in names:
            near = _closest(key, names)
            hint = f" (did you mean '{near}'?)" if near else f"; known keys: {', '.join(sorted(names))}"
            raise ConfigError(f"{source}: [{prefix}{key}] unknown key{hint}")
    values = {}
    for f in dataclasses.fields(cls):
        if f.name not in raw:
            continue
        hint, path = hints[f.name], f"{prefix}{f.name}"
        if dataclasses.is_dataclass(hint):
            values[f.name] = _build(hint, raw[f.name], source, path + ".")
        else:
            values[f.name] = _check(raw[f.name], hint, f.metadata, source, path)
    return cls(**values)


def _check(value, hint, meta, source, path):
    def fail(expected):
        raise ConfigError(f"{source}: [{path}] expected {expected}, got {value!r}")

    choices, lo, hi = meta.get("choices"), meta.get("lo"), meta.get("hi")
    if path == "sweep.levels":
        if value == "all":
            return value
        if not isinstance(value, list) or not value or not all(type(v) is int for v in value):
            fail("'all' or a non-empty list of integer gray levels")
        if len(set(value)) < 2:
            fail("'all' or a list of at least 2 different gray levels (a repeated level is measured once)")
        return tuple(value)
    if path == "sweep.frames_per_level":
        if value == "auto" or type(value) is int and lo <= value <= hi:
            return value
        fail(f"'auto' or an integer in [{lo}, {hi}]")
    if path == "sweep.second_reference_gray":
        if value in ("auto", "none") or type(value) is int and lo <= value <= hi:
            return value
        fail(f"'auto', 'none' or a gray level in [{lo}, {hi}]")
    if path == "modulator.display":
        if type(value) is int and value >= 0 or isinstance(value, str) and value:
            return value
        fail("a display index (integer >= 0), a display name, or 'auto'")
    if path == "modulator.rgb_shift_bits":
        if not (isinstance(value, list) and len(value) == 3 and all(type(v) is int and lo <= v <= hi for v in value)):
            fail(f"a list of 3 integer shifts in [{lo}, {hi}]")
        return tuple(value)
    origin = typing.get_origin(hint)
    if origin is tuple:
        n = len(typing.get_args(hint))
        if not isinstance(value, list) or len(value) != n:
            fail(f"a list of {n} numbers")
        return tuple(_check_scalar(v, float, lo, hi, meta, fail) for v in value)
    if hint is str:
        if not isinstance(value, str):
            fail("a string")
        if choices and value not in choices:
            fail("one of " + ", ".join(repr(c) for c in choices))
        return value
    if hint is bool:
        if not isinstance(value, bool):
            fail("true or false")
        return value
    return _check_scalar(value, hint, lo, hi, meta, fail)


def _check_scalar(value, kind, lo, hi, meta, fail):
    unit = "an integer" if kind is int else "a number"
    rng = ""
    if lo is not None and hi is not None:
        rng = f" in ({lo}, {hi}]" if meta.get("lo_open") else f" in [{lo}, {hi}]"
    if isinstance(value, bool) or not isinstance(value, (int, float)) or (kind is int and not isinstance(value, int)):
        fail(unit + rng)
    if isinstance(value, float) and not math.isfinite(value):
        fail(unit + rng)
    if lo is not None and (value < lo or (meta.get("lo_open") and value == lo)):
        fail(unit + rng)
    if hi is not None and value > hi:
        fail(unit + rng)
    return kind(value)


def _closest(key, names):
    match = difflib.get_close_matches(key, list(names), n=1, cutoff=0.6)
    return match[0] if match else None


def _cross_check(cfg: Config) -> None:
    src, gmax = cfg.source, cfg.gray_max
    bits = cfg.modulator.bit_depth

    def fail(path, expected, got):
        raise ConfigError(f"{src}: [{path}] expected {expected}, got {got!r}")

    for key in ("grating_low", "grating_high"):
        value = getattr(cfg.pattern, key)
        if value > gmax:
            fail(f"pattern.{key}", f"a gray level in [0, {gmax}] for a {bits}-bit panel", value)
    if cfg.pattern.grating_low == cfg.pattern.grating_high:
        fail("pattern.grating_high", "a gray different from pattern.grating_low", cfg.pattern.grating_high)
    sides = ("left", "right") if cfg.pattern.split == "vertical" else ("top", "bottom")
    if cfg.pattern.grating_side not in sides:
        fail("pattern.grating_side", f"{' or '.join(sides)} for a {cfg.pattern.split} split", cfg.pattern.grating_side)
    span = cfg.modulator.width_px if cfg.pattern.split == "vertical" else cfg.modulator.height_px
    if cfg.pattern.grating_period_px * 2 > span * min(cfg.pattern.split_position, 1 - cfg.pattern.split_position):
        fail("pattern.grating_period_px", "at least two periods inside the grating half", cfg.pattern.grating_period_px)
    if cfg.sweep.reference_gray > gmax:
        fail("sweep.reference_gray", f"a gray level in [0, {gmax}]", cfg.sweep.reference_gray)
    second = cfg.sweep.second_reference_gray
    if type(second) is int and (second > gmax or second == cfg.sweep.reference_gray):
        fail("sweep.second_reference_gray", f"'auto', 'none' or a gray in [0, {gmax}] other than reference_gray",
             second)
    if cfg.sweep.levels != "all":
        bad = [g for g in cfg.sweep.levels if not 0 <= g <= gmax]
        if bad:
            fail("sweep.levels", f"gray levels in [0, {gmax}] for a {bits}-bit panel", bad[0])
    r = cfg.simulator.response
    if r.v_max <= r.v_min:
        fail("simulator.response.v_max", f"a voltage above v_min = {r.v_min}", r.v_max)
    if r.clearing_c <= r.temperature_c:
        fail("simulator.response.temperature_c", f"a temperature below the clearing point {r.clearing_c} C",
             r.temperature_c)
    if cfg.modulator.backend != "window" and ":" not in cfg.modulator.backend:
        fail("modulator.backend", "window, or module:Class", cfg.modulator.backend)
    backend = cfg.camera.backend
    if backend not in ("sim", "opencv", "replay", "genicam") and ":" not in backend:
        fail("camera.backend", "sim, opencv, replay, genicam, or module:Class", backend)


def describe(cls=Config, prefix="") -> list[tuple[str, str, str]]:
    """List (key path, default, meaning) for every field: the source of the config template's comments."""
    rows = []
    for f in dataclasses.fields(cls):
        if f.name == "source":
            continue
        hint = typing.get_type_hints(cls)[f.name]
        if dataclasses.is_dataclass(hint):
            rows += describe(hint, prefix + f.name + ".")
        else:
            default = f.default if f.default is not dataclasses.MISSING else f.default_factory()
            rows.append((prefix + f.name, repr(default), f.metadata.get("doc", "")))
    return rows
