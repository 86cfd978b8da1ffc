"""The pattern window: display choice, refusal of the primary display, size checks, and pixel-exact read-back on
the second monitor of a real X server."""

import numpy as np
import pytest

from analysis.patterns import SplitLayout, blazed_phase, phase_to_gray, split_screen
from rig.cli import main
from rig.devices.screen import DisplayError, DisplayInfo, PygletScreen, choose_display, pack_rgb
from xdisplay import PANEL_H, PANEL_W, panel_display

DESK = DisplayInfo(0, "DESK", 0, 0, 1280, 1024, True)
PANEL = DisplayInfo(1, "PANEL", 1280, 0, 1920, 1080, False)
DISPLAYS = [DESK, PANEL]


@pytest.mark.parametrize("wanted", [1, "PANEL", "auto"])
def test_choose_display_by_index_name_or_size(wanted):
    assert choose_display(DISPLAYS, wanted, 1920, 1080, allow_primary=False) == PANEL


@pytest.mark.parametrize("wanted, size, fragments", [
    (0, (1280, 1024), ["modulator.display", "primary", "--allow-primary"]),
    ("auto", (1280, 1024), ["modulator.display", "'auto' found no", "1280x1024"]),
    (7, (1920, 1080), ["modulator.display", "no display with index 7", "PANEL"]),
    ("HDMI-2", (1920, 1080), ["modulator.display", "no display named 'HDMI-2'"]),
    (1, (1600, 1200), ["modulator.width_px/height_px", "1600x1200", "1920x1080"]),
])
def test_choose_display_errors_name_the_setting(wanted, size, fragments):
    with pytest.raises(DisplayError) as err:
        choose_display(DISPLAYS, wanted, *size, allow_primary=False)
    assert "\n" not in str(err.value)
    for fragment in fragments:
        assert fragment in str(err.value)


def test_primary_display_only_when_allowed():
    assert choose_display(DISPLAYS, 0, 1280, 1024, allow_primary=True) == DESK


def test_rgb_packing_of_a_10_bit_gray_keeps_every_bit():
    grays = np.arange(1024)[None, :]
    rgb = pack_rgb(grays, (2, -6, 0)).astype(int)[0]
    assert np.array_equal((rgb[:, 0] << 2) | (rgb[:, 1] >> 6), np.arange(1024))
    assert np.array_equal(rgb[:, 2], np.arange(1024) & 0xFF)
    assert np.array_equal(pack_rgb(np.array([[37]]), (0, 0, 0)), [[[37, 37, 37]]])


# --- a real window on the second monitor ----------------------------------------------------------------------
@pytest.fixture(scope="module")
def screen():
    display = panel_display()
    s = PygletScreen(display, bit_depth=8)
    yield s
    s.close()


def test_window_covers_the_second_monitor(screen):
    assert screen._window.get_location() == (1280, 0)
    assert screen._window.get_framebuffer_size() == (PANEL_W, PANEL_H)


@pytest.mark.parametrize("layout", [SplitLayout(period_px=6), SplitLayout("horizontal", 0.4, "top", 7)])
def test_split_screen_reads_back_exactly(screen, layout):
    for mirror, low, high in [(0, 0, 128), (201, 13, 255), (37, 90, 91)]:
        pattern = split_screen(PANEL_W, PANEL_H, mirror, low, high, layout)
        assert np.array_equal(screen.show_checked(pattern), screen.expected_rgb(pattern))


def test_blazed_grating_and_noise_read_back_exactly(screen):
    blazed = phase_to_gray(blazed_phase(PANEL_W, PANEL_H, period_px=13), bit_depth=8)
    noise = np.random.default_rng(5).integers(0, 256, (PANEL_H, PANEL_W))
    for pattern in (blazed, noise):
        shown = screen.show_checked(pattern)
        assert np.array_equal(shown[..., 0], pattern) and np.array_equal(shown[..., 1], shown[..., 2])
        assert np.array_equal(shown[..., 0], shown[..., 1])


@pytest.mark.parametrize("pattern, fragment", [
    (np.zeros((PANEL_H, PANEL_W - 1), np.uint8), "1080x1920 pattern"),
    (np.full((PANEL_H, PANEL_W), 256, np.uint16), "[0, 255]"),
    (np.zeros((PANEL_H, PANEL_W), np.float32), "integer gray levels"),
])
def test_show_rejects_patterns_that_do_not_fit(screen, pattern, fragment):
    with pytest.raises(ValueError, match=fragment.replace("[", r"\[").replace("]", r"\]")):
        screen.show(pattern)


def test_ten_bit_panel_packs_into_red_and_green():
    s = PygletScreen(panel_display(), bit_depth=10, shift_bits=(2, -6, 0))
    try:
        pattern = np.random.default_rng(2).integers(0, 1024, (PANEL_H, PANEL_W))
        shown = s.show_checked(pattern).astype(int)
        assert np.array_equal((shown[..., 0] << 2) | (shown[..., 1] >> 6), pattern)
    finally:
        s.close()


def test_twelve_bit_patterns_read_back_with_every_bit():
    """A 12-bit panel with red = gray >> 4 and green = gray << 4: a split screen at 12-bit grays, a blazed grating
    drawn at 12 bits and random 12-bit grays all read back from the window with every bit (red bits 11..4, the top
    nibble of green bits 3..0)."""
    s = PygletScreen(panel_display(), bit_depth=12, shift_bits=(4, -4, 0))
    try:
        patterns = [split_screen(PANEL_W, PANEL_H, 2741, 0, 1299, SplitLayout(period_px=6), bit_depth=12),
                    phase_to_gray(blazed_phase(PANEL_W, PANEL_H, period_px=13), bit_depth=12),
                    np.random.default_rng(3).integers(0, 4096, (PANEL_H, PANEL_W))]
        for pattern in patterns:
            shown = s.show_checked(pattern).astype(int)
            assert np.array_equal((shown[..., 0] << 4) | (shown[..., 1] >> 4), pattern)
        assert int(patterns[1].max()) > 3500  # the blazed grating spans the 12-bit range (12 of 13 steps), not 8 bits
    finally:
        s.close()


def test_lossy_packing_is_refused():
    with pytest.raises(DisplayError, match="modulator.rgb_shift_bits"):
        PygletScreen(panel_display(), bit_depth=10, shift_bits=(0, 0, 0))


def test_close_twice_and_show_after_close():
    s = PygletScreen(panel_display(), bit_depth=8)
    s.close()
    s.close()
    with pytest.raises(ConnectionError):
        s.show(np.zeros((PANEL_H, PANEL_W), np.uint8))


# --- fringecal screens ------------------------------------------------------------------------------------------
def test_screens_lists_displays_and_marks_the_primary(capsys):
    panel_display()
    assert main(["screens"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert any("1280x1024 at (0, 0)" in line and "primary" in line for line in lines)
    assert any("1920x1080 at (1280, 0)" in line and "primary" not in line for line in lines)


def test_screens_check_reads_every_pixel_back(capsys):
    index = panel_display().index
    assert main(["screens", "--check", str(index), "--hold-s", "0"]) == 0
    assert f"all {PANEL_W * PANEL_H} pixels read back exactly" in capsys.readouterr().out


def test_screens_check_with_a_config_of_another_size_fails_cleanly(tmp_path, capsys):
    index = panel_display().index
    cfg = tmp_path / "bench.toml"
    cfg.write_text("[modulator]\nwidth_px = 1600\nheight_px = 1200\n")
    assert main(["screens", "--check", str(index), "--config", str(cfg), "--hold-s", "0"]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "modulator.width_px/height_px" in err and "1600x1200" in err


def test_screens_check_refuses_the_primary_unless_allowed(capsys):
    panel_display()
    assert main(["screens", "--check", "0", "--hold-s", "0"]) == 2
    assert "primary" in capsys.readouterr().err
    assert main(["screens", "--check", "0", "--hold-s", "0", "--allow-primary"]) == 0
    assert "1280x1024" in capsys.readouterr().out


def test_screens_check_of_a_missing_display(capsys):
    panel_display()
    assert main(["screens", "--check", "9"]) == 2
    assert "--check: no display with index 9" in capsys.readouterr().err
