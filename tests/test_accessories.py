"""Serial accessories: each role against a simulated instrument on a pseudo-terminal through a real serial.Serial,
protocol-level scripted fakes, and the timeout, garbled-reply, unplugged and missing-port cases."""

import time

import pytest
import serial

from analysis.config import Config, replace
from rig.devices.accessories import DriftWatch, PowerMeter, Rotator, Shutter, open_accessories
from rig.errors import DeviceFault
from rig.errors import UsageError
from simulators.instruments import MeterModel, PtyInstrument, RotatorModel, ShutterModel


class ScriptedTransport:
    """A transport that expects exactly ``script``'s (sent, reply) pairs in order; reply None means a timeout."""

    def __init__(self, script, terminator=b"\n"):
        self.script, self.terminator = list(script), terminator
        self.timeout = 0.1
        self.closed = False

    def write(self, data):
        assert self.script, f"unexpected command {data!r}"
        sent, reply = self.script[0]
        assert data == sent.encode() + self.terminator
        if reply is False:  # a command that gets no reply
            self.script.pop(0)
        return len(data)

    def read_until(self, expected=b"\n", size=None):
        sent, reply = self.script.pop(0)
        return b"" if reply is None else reply.encode() + expected

    def reset_input_buffer(self):
        pass

    def close(self):
        self.closed = True

    def assert_done(self):
        assert self.script == [], f"commands never sent: {self.script}"


def accessories_cfg(**ports):
    changes = {f"accessories.{role}.port": port for role, port in ports.items()}
    for role in ports:
        changes[f"accessories.{role}.timeout_s"] = 0.2
    return replace(Config(), **changes).accessories


@pytest.fixture
def instruments():
    made = []

    def make(model):
        inst = PtyInstrument(model)
        made.append(inst)
        return inst

    yield make
    for inst in made:
        inst.close()


# --- scripted fakes: the exact bytes of each role ----------------------------------------------------------------
def test_shutter_protocol_confirms_each_move():
    settings = Config().accessories.shutter
    fake = ScriptedTransport([("SHUT:CLOS", False), ("SHUT?", "0"), ("SHUT:OPEN", False), ("SHUT?", "1")])
    shutter = Shutter(fake, settings, sleep=lambda s: None)
    shutter.close()
    shutter.open()
    fake.assert_done()


def test_power_meter_retries_a_garbled_reply_then_reads():
    settings = Config().accessories.power_meter
    fake = ScriptedTransport([("MEAS:POW?", "#!x"), ("MEAS:POW?", None), ("MEAS:POW?", "2.5E-3")])
    assert PowerMeter(fake, settings).read_w() == 2.5e-3
    fake.assert_done()


def test_rotator_protocol_polls_until_within_tolerance():
    settings = Config().accessories.rotator
    fake = ScriptedTransport([("ROT:MOVE 45.0000", False), ("ROT:POS?", "10.0"), ("ROT:POS?", "44.95")])
    assert Rotator(fake, settings, sleep=lambda s: None).move_to(45.0) == 44.95
    fake.assert_done()


def test_shutter_that_does_not_move_is_a_fault():
    settings = Config().accessories.shutter
    fake = ScriptedTransport([("SHUT:OPEN", False), ("SHUT?", "0")])
    with pytest.raises(DeviceFault, match="shutter .*still not open after 'SHUT:OPEN'"):
        Shutter(fake, settings, sleep=lambda s: None).open()


# --- each role on a pseudo-terminal through serial.Serial -------------------------------------------------------------
def test_every_role_over_a_real_serial_port(instruments):
    shutter_model, rot_model = ShutterModel(), RotatorModel(angle_deg=0.0, steps=3)
    power = instruments(MeterModel("power meter", "MEAS:POW?", 3.1e-3))
    temp = instruments(MeterModel("thermometer", "MEAS:TEMP?", 24.25))
    shutter, rot = instruments(shutter_model), instruments(rot_model)
    bench = open_accessories(accessories_cfg(shutter=shutter.port, power_meter=power.port, rotator=rot.port,
                                             thermometer=temp.port))
    try:
        assert isinstance(bench.power_meter.link.transport, serial.Serial)
        assert bench.readings() == {"power_w": pytest.approx(3.1e-3), "temperature_c": pytest.approx(24.25)}
        bench.shutter.open()
        assert shutter_model.is_open and bench.shutter.is_open()
        bench.shutter.close()
        assert not shutter_model.is_open
        assert bench.rotator.move_to(22.5) == pytest.approx(22.5, abs=0.1)
        assert rot_model.angle_deg == pytest.approx(22.5)
        assert power.received[0] == "*IDN?"  # each part is asked who it is when opened
    finally:
        bench.close()
    assert shutter.received[-2:] == ["SHUT:CLOS", "SHUT?"]  # closing the bench leaves the beam blocked


def test_silent_instrument_times_out_with_a_clear_fault(instruments):
    power = instruments(MeterModel("power meter", "MEAS:POW?", 1e-3))
    bench = open_accessories(accessories_cfg(power_meter=power.port))
    power.mode = "silent"
    started = time.monotonic()
    with pytest.raises(DeviceFault) as err:
        bench.readings()
    assert time.monotonic() - started < 3 * 0.2 + 1.0  # three tries of 0.2 s, never a hang
    assert f"power meter on {power.port}: no reply to 'MEAS:POW?' within 0.2 s (3 tries)" == str(err.value)
    bench.close()


def test_garbled_reply_is_a_fault_that_shows_it(instruments):
    temp = instruments(MeterModel("thermometer", "MEAS:TEMP?", 25.0))
    bench = open_accessories(accessories_cfg(thermometer=temp.port))
    temp.mode = "garbled"
    with pytest.raises(DeviceFault, match=r"temperature probe on .*: reply .* to 'MEAS:TEMP\?' is not a number"):
        bench.thermometer.read_c()
    bench.close()


def test_unplugged_port_is_a_fault(instruments):
    power = instruments(MeterModel("power meter", "MEAS:POW?", 1e-3))
    bench = open_accessories(accessories_cfg(power_meter=power.port))
    power.unplug()
    with pytest.raises(DeviceFault, match="power meter on .*: (the port is gone|no reply)"):
        bench.readings()
    bench.close()


def test_missing_port_is_a_usage_error_naming_the_setting():
    with pytest.raises(UsageError, match=r"^accessories.shutter.port: cannot open /dev/fringecal-no-such-tty") as err:
        open_accessories(accessories_cfg(shutter="/dev/fringecal-no-such-tty"))
    assert 'port = "" leaves the part out' in str(err.value)


def test_instrument_answering_nonsense_when_opened_is_a_usage_error(instruments):
    temp = instruments(MeterModel("thermometer", "MEAS:TEMP?", 25.0))
    temp.mode = "garbled"
    with pytest.raises(UsageError, match="^accessories.thermometer: temperature probe on .* is not a number"):
        open_accessories(accessories_cfg(thermometer=temp.port))


def test_drift_watch_warns_once_per_quantity():
    warnings = []
    watch = DriftWatch(Config().accessories, warnings.append)
    watch({"power_w": 1.00e-3, "temperature_c": 25.0})
    watch({"power_w": 1.04e-3, "temperature_c": 25.4})
    assert warnings == []
    watch({"power_w": 0.90e-3, "temperature_c": 25.6})
    watch({"power_w": 0.80e-3, "temperature_c": 26.0})
    assert len(warnings) == 2
    assert warnings[0].startswith("power_w drifted 10.0%") and warnings[1].startswith("temperature_c drifted 0.60 C")
