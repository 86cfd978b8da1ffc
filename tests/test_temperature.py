"""With a temperature probe, every table records its temperature and compare shows the curve shift against it."""

import json

import numpy as np
import pytest
from conftest import small_config_file

from rig.cli import main
from simulators.instruments import MeterModel, PtyInstrument


def run_at(tmp_path, name, temperature_c):
    """A simulated sweep of a panel at ``temperature_c``, with a serial probe on a pseudo-terminal reading it."""
    probe = PtyInstrument(MeterModel("thermometer", "MEAS:TEMP?", temperature_c))
    try:
        cfg = small_config_file(tmp_path, f"{name}.toml", **{
            "simulator.response.temperature_c": temperature_c, "sweep.levels": list(range(0, 256, 15)) + [255],
            "accessories.thermometer.port": probe.port, "accessories.thermometer.timeout_s": 0.5})
        out = tmp_path / name
        assert main(["sweep", "--sim", "--config", str(cfg), "--out", str(out), "--pair", "0:80"]) == 0
    finally:
        probe.close()
    return out


def test_tables_carry_their_temperature_and_compare_shows_the_shift(tmp_path, capsys):
    """Birefringence falls as the nematic warms towards its clearing point (order-parameter law; the simulated E7
    clears at 58 C), so the warmer panel's range is smaller."""
    cool, warm = run_at(tmp_path, "cool", 25.0), run_at(tmp_path, "warm", 35.0)
    for folder, t in ((cool, 25.0), (warm, 35.0)):
        assert json.loads((folder / "lut" / "lut.json").read_text())["temperature_c"] == pytest.approx(t)
        assert json.loads((folder / "run.json").read_text())["temperature_c"] == pytest.approx(t)
    capsys.readouterr()
    assert main(["compare", str(cool), str(warm)]) == 0
    out = capsys.readouterr().out
    line = next(l for l in out.splitlines() if l.startswith("temperature at 1064 nm"))
    per_k = float(line.split("range ")[1].split(" mrad")[0]) / 1e3
    truth = {}
    for folder in (cool, warm):
        rows = np.loadtxt(folder / "truth.csv", delimiter=",", skiprows=1)
        truth[folder] = abs(rows[-1, 1] - rows[0, 1])  # the range: a span, whichever way the phase runs
    assert per_k < 0
    assert per_k == pytest.approx((truth[warm] - truth[cool]) / 10.0, rel=0.1)
