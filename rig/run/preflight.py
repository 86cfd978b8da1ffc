"""The pre-flight check of a bench config, before any light: each part tried once, each reported with what to do.

Nothing is shown on the panel and no run folder is made. Items are ``passed``, ``failed`` (the part is there but
does not work as configured) or ``missing`` (not configured: a serial part with ``port = ""``).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Callable

from analysis.geometry import plan, setup_from_config
from rig.devices.accessories import ROLES, open_accessories
from rig.devices.cameras import open_camera
from rig.devices.clock import MonotonicClock
from rig.devices.screen import choose_display, list_displays
from rig.errors import UsageError

PASSED, FAILED, MISSING = "passed", "failed", "missing"
SETTING_TOLERANCE = 0.05  # a camera may round exposure and gain to its own steps; 5 % is still the value asked for
PART_NAMES = {"shutter": "shutter", "power_meter": "power meter", "rotator": "rotation mount",
              "thermometer": "temperature probe"}


@dataclass(frozen=True)
class Item:
    """One line of the check: what was tried, how it went, what was found and what to do about it."""

    name: str
    status: str
    found: str
    todo: str = ""


def check_bench(cfg, config_path: str, opener=None, displays: Callable[[], list] = list_displays) -> list[Item]:
    """Every item of the pre-flight check of ``cfg`` (read from ``config_path``), in the order a bench is set up.

    ``opener`` makes the serial transports (default ``serial.Serial``); ``displays`` lists the monitors.
    """
    items = [_display(cfg, displays)]
    items += _camera(cfg)
    for role in ROLES:
        items.append(_serial_part(cfg, role, opener))
    items.append(_geometry(cfg, config_path))
    return items


def _display(cfg, displays) -> Item:
    m = cfg.modulator
    try:
        chosen = choose_display(displays(), m.display, m.width_px, m.height_px, m.allow_primary)
    except UsageError as err:
        return Item("panel display", FAILED, str(err),
                    "connect the panel as a second monitor; `fringecal screens` lists the displays; set "
                    "modulator.display and the panel size")
    if chosen.primary:
        return Item("panel display", FAILED, f"{chosen.describe()} is the desktop's primary display",
                    "make another monitor the desktop's primary; set modulator.allow_primary = false")
    return Item("panel display", PASSED, f"{chosen.describe()}: the panel's size and not the primary one",
                f"`fringecal screens --check {chosen.index}` checks it pixel for pixel")


def _camera(cfg) -> list[Item]:
    c = cfg.camera
    names = ("camera opens", "camera grabs", "camera exposure", "camera gain")
    if c.backend == "sim":
        return [Item(n, MISSING, "camera.backend is 'sim', the simulated camera",
                     "set camera.backend (opencv, replay or module:Class) and camera.device") for n in names]
    try:
        camera = open_camera(c, MonotonicClock())
    except (UsageError, ConnectionError, OSError, TimeoutError) as err:
        todo = "check the camera's cable and driver, camera.backend and camera.device"
        return [Item(names[0], FAILED, str(err), todo)] + [Item(n, FAILED, "not tried: the camera did not open",
                                                                "see 'camera opens'") for n in names[1:]]
    try:
        items = [Item(names[0], PASSED, f"{getattr(camera, 'name', c.backend)}: {camera.width_px}x{camera.height_px} "
                                        f"px, {camera.bit_depth}-bit")]
        try:
            frame = camera.grab(timeout_s=c.grab_timeout_s)
        except (TimeoutError, ConnectionError, OSError) as err:
            items.append(Item(names[1], FAILED, str(err), "raise camera.grab_timeout_s, or check the trigger mode "
                                                          "and cable"))
        else:
            shape = frame.image.shape
            found = f"a {shape[1]}x{shape[0]} frame, peak {int(frame.image.max())} of {frame.full_scale}"
            if (shape[1], shape[0]) != (c.width_px, c.height_px):
                items.append(Item(names[1], FAILED, f"{found}; the config says {c.width_px}x{c.height_px}",
                                  "set camera.width_px and camera.height_px to the frame's size"))
            else:
                items.append(Item(names[1], PASSED, found))
        items.append(_setting(camera, "exposure_s", c.exposure_s, names[2], "camera.exposure_s", "s"))
        items.append(_setting(camera, "gain_db", c.gain_db, names[3], "camera.gain_db", "dB"))
    finally:
        camera.close()
    return items


def _setting(camera, attribute: str, wanted: float, name: str, key: str, unit: str) -> Item:
    """Set one camera setting and read it back."""
    try:
        setattr(camera, attribute, wanted)
        got = getattr(camera, attribute)
    except (UsageError, ConnectionError, OSError, TimeoutError, ValueError) as err:
        return Item(name, FAILED, str(err), f"use a backend that can set it, or set {key} to what the camera takes")
    if not math.isclose(got, wanted, rel_tol=SETTING_TOLERANCE, abs_tol=1e-12):
        return Item(name, FAILED, f"set {wanted:g} {unit}, read back {got:g} {unit}",
                    f"set {key} within the camera's range")
    return Item(name, PASSED, f"set {wanted:g} {unit}, read back {got:g} {unit}")


def _serial_part(cfg, role: str, opener) -> Item:
    name = PART_NAMES[role]
    link = getattr(cfg.accessories, role)
    key = f"accessories.{role}"
    if not link.port:
        return Item(name, MISSING, f'{key}.port = "": not fitted', f"put its serial port in {key}.port")
    # open this part alone, exactly as a run opens it
    others = {r: dataclasses.replace(getattr(cfg.accessories, r), port="") for r in ROLES if r != role}
    try:
        parts = open_accessories(dataclasses.replace(cfg.accessories, **others), opener)
    except UsageError as err:
        return Item(name, FAILED, str(err), f"check the cable, {key}.port and .baud, and the command strings "
                                            "against the instrument's manual; or set the port to \"\" to leave it out")
    try:
        identity = getattr(parts, role).link.identity
    finally:
        parts.close()
    return Item(name, PASSED, f"{link.port} answers" + (f" {identity!r}" if identity else " (no identify command)"))


def _geometry(cfg, config_path: str) -> Item:
    try:
        result = plan(setup_from_config(cfg))
    except ValueError as err:
        return Item("geometry", FAILED, str(err), f"`fringecal plan --config {config_path}`")
    if result.warnings:
        return Item("geometry", FAILED, "; ".join(result.warnings),
                    f"`fringecal plan --config {config_path}` recommends a distance and grating period")
    return Item("geometry", PASSED, f"{result.samples_per_fringe:.1f} samples per fringe, "
                                    f"{result.fringes_across_band:.1f} fringes across the band")


def exit_code(items: list[Item]) -> int:
    """0 when nothing failed (parts not fitted are not failures), 3 when anything did."""
    return 3 if any(i.status == FAILED for i in items) else 0
