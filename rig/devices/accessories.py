"""The bench's serial accessories in their roles: shutter, power meter, rotation mount (half-wave plate) and
temperature probe; opening them from the config, their readings for the journal, and drift warnings.

Each role HAS a LineInstrument on a transport handed to it (a ``serial.Serial`` on a bench, a fake in tests).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, fields
from typing import Callable

from rig.devices.instrument import LineInstrument
from rig.errors import DeviceFault, UsageError


class Shutter:
    """Opens and closes the beam; with a state query configured, every move is confirmed."""

    def __init__(self, transport, settings, sleep: Callable[[float], None] = time.sleep):
        self.link, self.settings, self._sleep = LineInstrument(transport, "shutter", settings), settings, sleep

    def open(self) -> None:
        """Open the shutter and wait until the blade has moved."""
        self._move(self.settings.open_command, self.settings.open_reply, "open")

    def close(self) -> None:
        """Close the shutter and wait until the blade has moved."""
        self._move(self.settings.close_command, self.settings.closed_reply, "closed")

    def is_open(self) -> bool:
        """True when the state query answers the open reply (DeviceFault for any other answer)."""
        s = self.settings
        reply = self.link.query(s.state_command)
        if reply not in (s.open_reply, s.closed_reply):
            raise DeviceFault(f"{self.link.where}: state reply {reply!r} to {s.state_command!r} is neither "
                              f"{s.open_reply!r} (open) nor {s.closed_reply!r} (closed)")
        return reply == s.open_reply

    def _move(self, command: str, reply: str, state: str) -> None:
        self.link.write(command)
        self._sleep(self.settings.move_s)
        if self.settings.state_command and self.is_open() != (state == "open"):
            raise DeviceFault(f"{self.link.where}: still not {state} after {command!r}")


class PowerMeter:
    """Laser power (W)."""

    def __init__(self, transport, settings):
        self.link, self.settings = LineInstrument(transport, "power meter", settings), settings

    def read_w(self) -> float:
        """One power reading (W)."""
        return self.link.query_number(self.settings.measure_command, "W")


class Thermometer:
    """Temperature near the panel (degrees C)."""

    def __init__(self, transport, settings):
        self.link, self.settings = LineInstrument(transport, "temperature probe", settings), settings

    def read_c(self) -> float:
        """One temperature reading (degrees C)."""
        return self.link.query_number(self.settings.measure_command, "degrees C")


class Rotator:
    """A motorised rotation mount (a half-wave plate setting the polarisation on the panel)."""

    def __init__(self, transport, settings, clock=time.monotonic, sleep: Callable[[float], None] = time.sleep):
        self.link, self.settings = LineInstrument(transport, "rotation mount", settings), settings
        self._clock, self._sleep = clock, sleep

    def angle_deg(self) -> float:
        """The mount's angle (degrees)."""
        return self.link.query_number(self.settings.position_command, "degrees")

    def move_to(self, angle_deg: float) -> float:
        """Move to ``angle_deg`` (-360..360) and return the angle reached, within ``tolerance_deg``."""
        if not (math.isfinite(angle_deg) and -360.0 <= angle_deg <= 360.0):
            raise ValueError(f"{self.link.where}: angle_deg expected -360..360, got {angle_deg!r}")
        s = self.settings
        self.link.write(s.move_command.format(angle_deg=f"{angle_deg:.4f}"))
        deadline = self._clock() + s.move_timeout_s
        while True:
            reached = self.angle_deg()
            if abs(reached - angle_deg) <= s.tolerance_deg:
                return reached
            if self._clock() > deadline:
                raise DeviceFault(f"{self.link.where}: at {reached:.3f} deg, not {angle_deg:.3f}, "
                                  f"{s.move_timeout_s} s after the move began")
            self._sleep(0.05)  # polling faster only loads the mount's controller


ROLES = {"shutter": Shutter, "power_meter": PowerMeter, "rotator": Rotator, "thermometer": Thermometer}


@dataclass
class Accessories:
    """The accessories a bench has (None for those not fitted) and their ports; ``close`` releases every port."""

    shutter: Shutter | None = None
    power_meter: PowerMeter | None = None
    rotator: Rotator | None = None
    thermometer: Thermometer | None = None

    def fitted(self) -> dict:
        return {f.name: getattr(self, f.name) for f in fields(self) if getattr(self, f.name) is not None}

    def readings(self) -> dict:
        """What is logged with every journal line: power (W) and temperature (C) where those are fitted."""
        out = {}
        if self.power_meter is not None:
            out["power_w"] = self.power_meter.read_w()
        if self.thermometer is not None:
            out["temperature_c"] = self.thermometer.read_c()
        return out

    def close(self) -> None:
        """Release every port (the shutter is left closed: the safe state)."""
        try:
            if self.shutter is not None:
                self.shutter.close()
        finally:
            for device in self.fitted().values():
                device.link.transport.close()


def open_accessories(settings, opener=None) -> Accessories:
    """Open each accessory whose port is set in the ``[accessories]`` section and check that it answers.

    ``opener(port, baudrate=, timeout=, write_timeout=)`` makes the transport; by default ``serial.Serial``.
    Problems at this stage are the config's: a UsageError naming ``accessories.<role>``.
    """
    if opener is None:
        import serial
        opener = serial.Serial
    bench = Accessories()
    try:
        for role, cls in ROLES.items():
            link = getattr(settings, role)
            if not link.port:
                continue
            key = f"accessories.{role}"
            try:
                transport = opener(link.port, baudrate=link.baud, timeout=link.timeout_s,
                                   write_timeout=link.timeout_s)
            except (OSError, ValueError) as err:
                raise UsageError(f"{key}.port: cannot open {link.port} ({err}); port = \"\" leaves the part out")\
                    from None
            device = cls(transport, link)
            setattr(bench, role, device)
            try:
                device.link.identify()
                if role == "rotator":
                    device.angle_deg()
                elif role == "power_meter":
                    device.read_w()
                elif role == "thermometer":
                    device.read_c()
                elif link.state_command:
                    device.is_open()
            except DeviceFault as err:
                raise UsageError(f"{key}: {err}") from None
    except BaseException:
        for device in bench.fitted().values():
            device.link.transport.close()
        raise
    return bench


class DriftWatch:
    """Warns once per quantity when a reading moves past its threshold from the first reading of the run."""

    def __init__(self, settings, warn: Callable[[str], None]):
        self.limits = {"power_w": ("relative", settings.power_meter.drift_fraction),
                       "temperature_c": ("absolute", settings.thermometer.drift_c)}
        self.warn = warn
        self.first: dict[str, float] = {}
        self.warned: set[str] = set()

    def __call__(self, readings: dict) -> dict:
        """Check ``readings`` and return them unchanged."""
        for name, value in readings.items():
            first = self.first.setdefault(name, value)
            kind, limit = self.limits[name]
            moved = abs(value - first) / abs(first) if kind == "relative" and first else abs(value - first)
            if moved > limit and name not in self.warned:
                self.warned.add(name)
                shown = f"{moved:.1%}" if kind == "relative" else f"{moved:.2f} C"
                self.warn(f"{name} drifted {shown} from its first reading ({first:.6g} -> {value:.6g}); "
                          "the phase curve may be affected")
        return readings
