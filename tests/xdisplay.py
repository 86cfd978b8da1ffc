"""The X display the window tests need: two monitors side by side, the second (1920x1080) standing in for a panel.

``.ci/run`` starts such a server (Xorg with the dummy driver) and sets FRINGECAL_REQUIRE_DISPLAY, so in CI a
missing or wrong display fails the tests instead of skipping them.
"""

import os

import pytest

PANEL_W, PANEL_H = 1920, 1080


def panel_bench_toml(backend: str = "sim", device: str = "", extra: str = "") -> str:
    """A config whose panel is the second monitor's window: a 256 x 200 px camera 40 mm away sees the band of a 1 mm
    beam (0.25 mW); ``extra`` is appended TOML (sections of its own)."""
    return f"""
[modulator]
width_px = {PANEL_W}
height_px = {PANEL_H}
[laser]
power_mw = 0.25
[camera]
backend = "{backend}"
device = "{device}"
width_px = 256
height_px = 200
[geometry]
distance_mm = 40.0
camera_offset_mm = [-0.42, 0.0]
[simulator.beam]
radius_mm = 1.0
{extra}"""


def panel_display():
    """The non-primary 1920x1080 display; skip (or fail, in CI) when there is none."""
    from rig.errors import UsageError
    from rig.devices.screen import list_displays

    reason = None
    if not os.environ.get("DISPLAY"):
        reason = "no X server: DISPLAY is not set (.ci/run starts Xorg with two monitors)"
    else:
        try:
            displays = list_displays()
        except UsageError as err:
            displays, reason = [], str(err)
        panels = [d for d in displays if not d.primary and (d.width_px, d.height_px) == (PANEL_W, PANEL_H)]
        if reason is None and (not panels or not any(d.primary for d in displays)):
            reason = f"display {os.environ['DISPLAY']} has no primary plus {PANEL_W}x{PANEL_H} second monitor"
    if reason is None:
        return panels[0]
    if os.environ.get("FRINGECAL_REQUIRE_DISPLAY"):
        pytest.fail(reason)
    pytest.skip(reason)
