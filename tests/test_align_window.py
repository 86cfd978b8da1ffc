"""The live alignment window: what it draws (camera image scaled, band outlined, saturated pixels marked, profile,
figures, hint, keys), where it opens (never on the panel's display), and that it reacts to keys; on the two-monitor
X server, the window is read back pixel for pixel."""

import numpy as np
import pytest
from conftest import split_for
from xdisplay import panel_display

from analysis.alignment import alignment_figures, hint
from analysis.band import find_band
from analysis.carrier import find_carrier
from analysis.config import replace
from analysis.patterns import Rect
from rig.devices.align_window import (BAND_RGB, IMAGE_BOX, PROFILE_BOX, PROFILE_RGB, SATURATED_RGB, VIEW_H, VIEW_W,
                              AlignWindow, align_display, compose_view, image_placement)
from rig.devices.screen import DisplayError, DisplayInfo
from simulators.bench import Bench
from simulators.devices import SimCamera

DESK = DisplayInfo(0, "DESK", 0, 0, 1280, 1024, True)
PANEL = DisplayInfo(1, "PANEL", 1280, 0, 1920, 1080, False)
KEYS = "keys: + / - grating high gray, q quit"


@pytest.fixture(scope="module")
def fringe_frame(small_cfg):
    """A simulated frame of the small bench's split pattern, its band and fringe angle."""
    bench = Bench(small_cfg)
    bench.show(split_for(small_cfg, 0, 0, 80))
    bench.clock.sleep(0.2)
    image = SimCamera(bench).grab().image
    survey = find_band(image, 40.0, find_carrier(image))
    return image, survey.band, survey.carrier.angle_deg


def view_of(image, band, angle, full_scale=4095):
    fig = alignment_figures(image, full_scale, 40.0)
    return compose_view(image, full_scale, band, angle, [("contrast", f"{fig.contrast:.3f}")], hint(fig), KEYS)


def test_align_window_view_shows_the_scaled_image_with_the_band_outlined(fringe_frame):
    image, band, angle = fringe_frame
    view = view_of(image, band, angle)
    assert view.shape == (VIEW_H, VIEW_W, 3) and view.dtype == np.uint8
    scale, place = image_placement(image.shape)
    assert IMAGE_BOX.x0 <= place.x0 < place.x1 <= IMAGE_BOX.x1 and place.width == round(image.shape[1] * scale)
    # off the outline, the picture is the camera image at 255 / full scale, nearest neighbour
    ys = np.arange(place.y0 + 10, place.y1 - 10, 17)
    xs = np.arange(place.x0 + 10, place.x1 - 10, 13)
    rows, cols = image.shape  # nearest neighbour as OpenCV maps it: floor(destination * source / destination size)
    src = image[np.floor((ys - place.y0) * rows / place.height).astype(int)][
        :, np.floor((xs - place.x0) * cols / place.width).astype(int)]
    expected = np.clip(src * (255.0 / 4095), 0, 255).astype(np.uint8)
    shown = view[np.ix_(ys, xs)]
    on_outline = np.all(shown == BAND_RGB, axis=-1)
    assert on_outline.mean() < 0.1
    assert np.array_equal(shown[..., 0][~on_outline], expected[~on_outline])
    # the outline runs along the band's scaled edges
    left = place.x0 + round(band.x0 * scale)
    top, bottom = place.y0 + round(band.y0 * scale), place.y0 + round(band.y1 * scale) - 1
    assert np.all(view[top + 2:bottom - 2, left] == BAND_RGB)
    assert not np.any(np.all(view[place.slices] == SATURATED_RGB, axis=-1))  # nothing saturated in this frame
    # the profile across the band is plotted
    assert np.count_nonzero(np.all(view[PROFILE_BOX.slices] == PROFILE_RGB, axis=-1)) > PROFILE_BOX.width


def test_align_window_view_marks_saturated_pixels(fringe_frame):
    image, band, angle = fringe_frame
    hot = image.copy()
    hot[50:60, 100:110] = 4095
    view = view_of(hot, band, angle)
    scale, place = image_placement(hot.shape)
    red = np.all(view == SATURATED_RGB, axis=-1)
    block = red[place.y0 + round(50 * scale) + 1:place.y0 + round(60 * scale) - 1,
                place.x0 + round(100 * scale) + 1:place.x0 + round(110 * scale) - 1]
    assert block.size and block.all()
    assert not red[place.slices].sum() > (10 * scale + 2) ** 2  # only there


def test_align_window_view_without_fringes_says_so():
    flat = np.full((200, 256), 900, np.uint16)
    view = compose_view(flat, 4095, None, None, [("contrast", "0.000")], "no usable fringes", KEYS)
    assert not np.any(np.all(view == BAND_RGB, axis=-1))


@pytest.mark.parametrize("panel_setting, expected", [(1, DESK), ("PANEL", DESK), (0, PANEL), ("auto", DESK)])
def test_align_window_opens_on_a_display_other_than_the_panels(small_cfg, panel_setting, expected):
    mod = replace(small_cfg, **{"modulator.display": panel_setting, "modulator.width_px": 1920,
                                "modulator.height_px": 1080}).modulator
    assert align_display([DESK, PANEL], mod) == expected


def test_align_window_refuses_the_panels_only_display(small_cfg):
    mod = replace(small_cfg, **{"modulator.display": 0}).modulator
    with pytest.raises(DisplayError, match="--terminal"):
        align_display([DESK], mod)


# --- a real window on the two-monitor X server ----------------------------------------------------------------
def test_align_window_draws_exactly_the_view_and_reacts_to_keys(fringe_frame):
    import pyglet
    from rig.devices.screen import list_displays

    panel = panel_display()
    desk = next(d for d in list_displays() if d.primary)
    window = AlignWindow(desk)
    try:
        x, y = window.window.get_location()
        assert desk.x <= x < desk.x + desk.width_px and not panel.x <= x < panel.x + panel.width_px
        view = view_of(*fringe_frame)
        window.capture = True
        window.show(view)
        assert np.array_equal(window.captured, view)
        window.window.dispatch_event("on_text", "+")
        window.window.dispatch_event("on_text", "]")
        window.window.dispatch_event("on_key_press", pyglet.window.key.ESCAPE, 0)
        assert window.poll() == ["+", "]", "q"]
        assert window.poll() == []
    finally:
        window.close()
        window.close()


def test_align_window_command_draws_the_camera_and_band_and_takes_its_keys(small_cfg, tmp_path, monkeypatch, capsys):
    """``fringecal align --sim`` with the panel configured on the second monitor: the window opens on the first,
    every picture it shows reads back exactly, shows the camera image with the band outlined, and the keys typed
    into the window (+, ], q) nudge the grating and the exposure and end the view long before its 60 s."""
    import time

    from conftest import small_config_file

    from rig.cli import main
    from rig.devices.align_window import AlignWindow

    panel = panel_display()
    cfg = small_config_file(tmp_path, **{"modulator.display": panel.index})
    shots, typed = [], iter([[], ["+"], [], ["]"], [], ["q"]])
    real_show, real_poll = AlignWindow.show, AlignWindow.poll

    def show(self, view):
        self.capture = True
        real_show(self, view)
        shots.append((view, self.captured, self.window.get_location()))

    def poll(self):
        for text in next(typed, []):
            self.window.dispatch_event("on_text", text)
        return real_poll(self)

    monkeypatch.setattr(AlignWindow, "show", show)
    monkeypatch.setattr(AlignWindow, "poll", poll)
    started = time.monotonic()
    assert main(["align", "--sim", "--config", str(cfg), "--seconds", "60", "--rate", "20"]) == 0
    assert time.monotonic() - started < 30
    out = capsys.readouterr().out
    assert "align: window on display 0" in out
    assert f"grating {small_cfg.pattern.grating_low}/{small_cfg.pattern.grating_high + 1}" in out
    assert f"exposure {small_cfg.camera.exposure_s * 1.25e3:.3f} ms" in out
    assert len(shots) == 5  # frames before q: the fifth poll's keys are read before the sixth frame
    for view, captured, (x, _) in shots:
        assert np.array_equal(captured, view)
        assert 0 <= x < panel.x  # on the primary display, left of the panel's
        scale, place = image_placement((200, 256))
        picture = captured[place.slices]
        assert np.count_nonzero(np.all(picture == BAND_RGB, axis=-1)) > 500  # the band's outline
        assert np.ptp(picture[..., 1]) > 100  # fringes: the camera image, not a blank


def test_align_window_gives_way_to_the_terminal_view_without_a_display(small_cfg, tmp_path, monkeypatch, capsys):
    """Over SSH (no display server answering) the same command falls back to the terminal view's lines."""
    from conftest import small_config_file

    import rig.commands.align as align
    from rig.cli import main

    def no_display():
        raise DisplayError("modulator.display: no display server reachable; is DISPLAY set?")

    monkeypatch.setattr(align, "list_displays", no_display)
    monkeypatch.setattr(align, "AlignWindow", None)  # opening a window now would fail the test
    cfg = small_config_file(tmp_path)
    assert main(["align", "--sim", "--config", str(cfg), "--seconds", "1", "--rate", "5"]) == 0
    lines = [line for line in capsys.readouterr().out.splitlines() if line.startswith("frame")]
    assert lines and "contrast" in lines[0]
