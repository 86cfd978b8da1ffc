"""One contract every panel backend passes: the pattern window (8-bit, and 10-bit packed into red and green) on the
second monitor of a real X server, the simulated screen, and a panel driven by its maker's library through a
``module:Class`` plug-in (tests/toy_screen.py, 10-bit). What each shows is read back from where it ends up: the
window's framebuffer, the simulated panel's state, the toy SDK's frame."""

import math

import numpy as np
import pytest
from toy_screen import ToyPanel
from xdisplay import panel_display

from analysis.config import replace
from analysis.patterns import SplitLayout, split_screen
from rig.errors import UsageError
from rig.devices.panels import load_screen_backend
from rig.devices.protocols import Screen
from simulators.bench import Bench
from simulators.devices import SimScreen


def unpack(rgb: np.ndarray, shift_bits) -> np.ndarray:
    """Gray levels from a framebuffer packed as rig.devices.screen.pack_rgb does (10-bit: high bits in red, low in
    green)."""
    if tuple(shift_bits) == (0, 0, 0):
        return rgb[..., 0].astype(int)
    return (rgb[..., 0].astype(int) << 2) | (rgb[..., 1].astype(int) >> 6)


@pytest.fixture(params=["window-8bit", "window-10bit", "sim", "plugin-10bit"])
def panel(request, small_cfg):
    """(screen, read_back) where read_back(pattern) shows ``pattern`` and returns the gray levels displayed."""
    kind = request.param
    if kind.startswith("window"):
        from rig.devices.screen import PygletScreen
        shifts = (0, 0, 0) if kind == "window-8bit" else (2, -6, 0)
        screen = PygletScreen(panel_display(), bit_depth=8 if kind == "window-8bit" else 10, shift_bits=shifts)

        def read_back(pattern):
            return unpack(screen.show_checked(pattern), shifts)
    elif kind == "sim":
        bench = Bench(small_cfg)
        screen = SimScreen(bench)

        def read_back(pattern):
            screen.show(pattern)
            return bench.state_at(math.inf).pattern
    else:
        settings = replace(small_cfg, **{"modulator.backend": "toy_screen:ToyPanel", "modulator.bit_depth": 10,
                                         "pattern.grating_high": 300}).modulator
        screen = load_screen_backend(settings)

        def read_back(pattern):
            screen.show(pattern)
            return screen.sdk.frame
    yield screen, read_back
    screen.close()


def test_screen_contract_is_a_screen_of_its_size_and_depth(panel):
    screen, _ = panel
    assert isinstance(screen, Screen)
    assert screen.width_px >= 16 and screen.height_px >= 16 and 8 <= screen.bit_depth <= 12


def test_screen_contract_split_patterns_arrive_gray_for_gray_at_full_bit_depth(panel):
    screen, read_back = panel
    w, h, bits = screen.width_px, screen.height_px, screen.bit_depth
    top = 2**bits - 1
    for layout in (SplitLayout(period_px=6), SplitLayout("horizontal", 0.4, "top", 7)):
        for mirror, low, high in [(top, 0, top // 3), (top // 2 + 1, 13, top)]:
            pattern = split_screen(w, h, mirror, low, high, layout, bits)
            assert np.array_equal(read_back(pattern), pattern)
    # stripes of grays that set every bit one at a time and together, as int64 (any integer type is taken)
    grays = np.array([0, 1, 2**(bits - 1) - 1, 2**(bits - 1), 0x2AAA & top, 0x1555 & top, top - 1, top])
    stripes = np.broadcast_to(grays[np.arange(w) * grays.size // w], (h, w))
    assert np.array_equal(read_back(stripes), stripes)


@pytest.mark.parametrize("change, fragment", [
    ("shape", "pattern (rows x columns)"),
    ("range", "gray levels must lie in [0, "),
    ("float", "integer gray levels"),
])
def test_screen_contract_refuses_patterns_that_do_not_fit(panel, change, fragment):
    screen, _ = panel
    w, h, bits = screen.width_px, screen.height_px, screen.bit_depth
    pattern = {"shape": np.zeros((h, w - 1), np.uint16), "range": np.full((h, w), 2**bits, np.uint16),
               "float": np.zeros((h, w), np.float32)}[change]
    with pytest.raises(ValueError) as err:
        screen.show(pattern)
    assert fragment in str(err.value) and "\n" not in str(err.value)


def test_screen_contract_close_twice_then_show_is_a_connection_error(panel):
    screen, _ = panel
    screen.close()
    screen.close()
    with pytest.raises(ConnectionError):
        screen.show(np.zeros((screen.height_px, screen.width_px), np.uint8))


# --- the module:Class loader --------------------------------------------------------------------------------------
def test_screen_contract_plugin_is_blanked_and_released_on_close(small_cfg):
    screen = load_screen_backend(replace(small_cfg, **{"modulator.backend": "toy_screen:ToyPanel"}).modulator)
    screen.show(np.full((screen.height_px, screen.width_px), 200, np.uint8))
    screen.close()
    assert screen.released and not screen.sdk.frame.any()


def test_screen_contract_plugin_that_vanishes_raises_connection_error(small_cfg):
    screen = ToyPanel(small_cfg.modulator)
    screen.sdk.connected = False
    with pytest.raises(ConnectionError, match="toy panel: the panel does not answer"):
        screen.show(np.zeros((screen.height_px, screen.width_px), np.uint8))


@pytest.mark.parametrize("backend, fragment", [
    ("no_such_module_x:Panel", "modulator.backend: cannot import module 'no_such_module_x'"),
    ("toy_screen:Missing", "modulator.backend: module 'toy_screen' has no class 'Missing'"),
    ("toy_screen:NotAPanel", "is not a screen (missing width_px"),
    ("toy_screen:WrongSizePanel", "modulator.width_px/height_px/bit_depth: configured 400x300, 8 bits, but"),
])
def test_screen_contract_plugin_errors_name_the_setting(small_cfg, backend, fragment):
    with pytest.raises(UsageError) as err:
        load_screen_backend(replace(small_cfg, **{"modulator.backend": backend}).modulator)
    assert fragment in str(err.value) and "\n" not in str(err.value)


def test_screen_contract_plugin_drives_a_sweep_with_grays_at_full_bit_depth(tmp_path):
    """A 10-bit panel plug-in beside the simulated camera (no --sim: the hardware path): the sweep runs, and every
    pattern reaches the plug-in as 16-bit gray levels up to 1023, never cut to 8 bits; the panel is left blank."""
    from conftest import small_config_file

    from rig.cli import main
    cfg = small_config_file(tmp_path, **{"modulator.backend": "toy_screen:ToyPanel", "modulator.bit_depth": 10,
                                         "pattern.grating_high": 320, "sweep.levels": [0, 256, 512, 768, 1023]})
    ToyPanel.opened.clear()
    assert main(["sweep", "--config", str(cfg), "--pair", "0:320", "--out", str(tmp_path / "run")]) == 0
    received = [r for panel in ToyPanel.opened for r in panel.sdk.received]
    assert len(received) > 5 and {dtype for dtype, _ in received} == {np.dtype(np.uint16)}
    assert 1023 in {top for _, top in received} and all(panel.released for panel in ToyPanel.opened)
    assert not ToyPanel.opened[-1].sdk.frame.any()
