"""The modulator panel as a borderless full-screen pyglet window on a chosen display, 1:1 with its pixels.

Exactness is the point: the window must be the panel's size, the pattern is drawn as a texture at integer position
(0, 0) with nearest-neighbour filtering, and each gray is written into the red, green and blue channels by the
configured packing. ``show_checked()`` also returns what the framebuffer holds so a test (or ``fringecal screens --check``)
can demand equality pixel for pixel. The read is taken from the back buffer after drawing and before the flip:
the front buffer of many drivers (the dummy X server's among them) reads back as black, and after a flip the back
buffer is undefined.

pyglet is imported only when a display is used, so the rest of fringecal runs on machines without one.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from analysis.patterns import check_panel_pattern
from rig.errors import UsageError


class DisplayError(UsageError):
    """No display can be reached, or none matches the setting; the message names the setting."""


@dataclass(frozen=True)
class DisplayInfo:
    """One monitor as the desktop arranges it (pixels); ``primary`` is the desktop's main display."""

    index: int
    name: str
    x: int
    y: int
    width_px: int
    height_px: int
    primary: bool

    def describe(self) -> str:
        return (f"display {self.index} '{self.name}': {self.width_px}x{self.height_px} at "
                f"({self.x}, {self.y}){' - primary (desktop)' if self.primary else ''}")


def _pyglet_screens():
    try:
        import pyglet
        return pyglet.display.get_display().get_screens()
    except Exception as err:  # pyglet raises several unrelated types when no X server answers
        raise DisplayError(f"modulator.display: no display server reachable ({type(err).__name__}: {err}); "
                           "is DISPLAY set?") from None


def list_displays() -> list[DisplayInfo]:
    """The displays the desktop offers, in pyglet's order (the index ``modulator.display`` refers to)."""
    screens = _pyglet_screens()
    infos = []
    for i, s in enumerate(screens):
        name = s.get_monitor_name() if hasattr(s, "get_monitor_name") else f"screen{i}"
        # with one screen and no primary flag, that screen is the desktop
        primary = bool(getattr(s, "is_primary", len(screens) == 1))
        infos.append(DisplayInfo(i, str(name), int(s.x), int(s.y), int(s.width), int(s.height), primary))
    return infos


def choose_display(displays: list[DisplayInfo], wanted: int | str, width_px: int, height_px: int,
                   allow_primary: bool) -> DisplayInfo:
    """The display for the panel: by index, by name, or ('auto') the only non-primary one of the panel's size."""
    listing = "; ".join(d.describe() for d in displays) or "none"
    if wanted == "auto":
        fits = [d for d in displays if (d.width_px, d.height_px) == (width_px, height_px)]
        if not allow_primary:
            fits = [d for d in fits if not d.primary]
        if len(fits) != 1:
            what = "no" if not fits else f"{len(fits)}"
            raise DisplayError(f"modulator.display: 'auto' found {what} non-primary display of the panel's size "
                               f"{width_px}x{height_px}; set the index or name (displays: {listing})")
        chosen = fits[0]
    elif isinstance(wanted, int):
        if not 0 <= wanted < len(displays):
            raise DisplayError(f"modulator.display: no display with index {wanted} (displays: {listing})")
        chosen = displays[wanted]
    else:
        named = [d for d in displays if d.name == wanted]
        if not named:
            raise DisplayError(f"modulator.display: no display named '{wanted}' (displays: {listing})")
        chosen = named[0]
    if chosen.primary and not allow_primary:
        raise DisplayError(f"modulator.display: {chosen.describe()} is the desktop's primary display; a full-screen "
                           "pattern there locks you out of the desktop (allow it with --allow-primary or "
                           "modulator.allow_primary = true)")
    if (chosen.width_px, chosen.height_px) != (width_px, height_px):
        raise DisplayError(f"modulator.width_px/height_px: the panel is {width_px}x{height_px} but {chosen.describe()};"
                           " a window of another size would scale the pattern")
    return chosen


def pack_rgb(pattern: np.ndarray, shift_bits: tuple[int, int, int]) -> np.ndarray:
    """Gray levels (H x W) to H x W x 3 uint8: channel c holds ``gray >> shift_bits[c]`` (left shift if negative)
    keeping its low 8 bits."""
    values = pattern.astype(np.uint32)
    planes = [(values >> s if s >= 0 else values << -s) & 0xFF for s in shift_bits]
    return np.stack(planes, axis=-1).astype(np.uint8)


class PygletScreen:
    """The panel as a full-screen window on ``display`` (a DisplayInfo from ``choose_display``).

    ``show()`` returns after the buffer flip has completed (``glFinish``). Patterns are H x W arrays of gray levels
    of ``bit_depth`` bits; ``shift_bits`` packs them into red, green and blue (all zero: the gray in every channel).
    """

    def __init__(self, display: DisplayInfo, bit_depth: int = 8, shift_bits: tuple[int, int, int] = (0, 0, 0),
                 vsync: bool = True):
        import pyglet
        from pyglet import gl

        self.display = display
        self.width_px, self.height_px, self.bit_depth = display.width_px, display.height_px, bit_depth
        self.shift_bits = tuple(shift_bits)
        grays = np.arange(2**bit_depth)[None, :]
        if len(np.unique(pack_rgb(grays, self.shift_bits)[0], axis=0)) != grays.size:
            raise DisplayError(f"modulator.rgb_shift_bits: {list(self.shift_bits)} loses bits of a {bit_depth}-bit "
                               f"gray; e.g. [{bit_depth - 8}, {bit_depth - 16}, 0] puts the high bits in red and the "
                               "low bits in green")
        self._gray_only = self.shift_bits == (0, 0, 0)
        screen = pyglet.display.get_display().get_screens()[display.index]
        # 8 bits per channel explicitly: left to itself, a driver may pick a 565 buffer that rounds grays
        template = gl.Config(red_size=8, green_size=8, blue_size=8, alpha_size=8, double_buffer=True)
        try:
            config = screen.get_best_config(template)
        except pyglet.window.NoSuchConfigException:
            raise DisplayError(f"modulator.display: {display.describe()} offers no 8-bit-per-channel "
                               "double-buffered framebuffer") from None
        self._window = pyglet.window.Window(fullscreen=True, screen=screen, config=config, vsync=vsync,
                                            style=pyglet.window.Window.WINDOW_STYLE_BORDERLESS, visible=True)
        self._gl = gl
        self._capture, self._captured = False, None
        try:
            size = self._window.get_framebuffer_size()
            if tuple(size) != (self.width_px, self.height_px):
                raise DisplayError(f"modulator.display: the full-screen window on {display.describe()} has a "
                                   f"{size[0]}x{size[1]} framebuffer (desktop scaling?); it must be exactly the panel")
            self._window.set_mouse_visible(False)
            self._texture = None
            self._do_show(np.zeros((self.height_px, self.width_px), np.uint16))
        except BaseException:
            self._window.close()
            raise

    def show(self, pattern: np.ndarray) -> None:
        """Display ``pattern`` (height x width gray levels, integers in the panel's range) pixel for pixel."""
        if self._window is None:
            raise ConnectionError("screen: show after close")
        self._do_show(check_panel_pattern(pattern, self.width_px, self.height_px, self.bit_depth))

    def show_checked(self, pattern: np.ndarray) -> np.ndarray:
        """Display ``pattern`` like ``show`` and return the framebuffer as presented (H x W x 3 uint8, row 0 at the
        top): compare it with ``expected_rgb(pattern)``."""
        self._captured = None
        self._capture = True
        try:
            self.show(pattern)
        finally:
            self._capture = False
        return self._captured

    def _do_show(self, pattern: np.ndarray) -> None:
        import pyglet
        gl = self._gl
        self._window.switch_to()
        self._window.dispatch_events()
        if self._gray_only:
            data, fmt = np.ascontiguousarray(pattern, np.uint8), "R"
        else:
            data, fmt = pack_rgb(pattern, self.shift_bits), "RGB"
        w, h = self.width_px, self.height_px
        # negative pitch: numpy row 0 is the top of the panel, GL's row 0 the bottom
        image = pyglet.image.ImageData(w, h, fmt, data.tobytes(), pitch=-w * len(fmt))
        gl.glPixelStorei(gl.GL_UNPACK_ALIGNMENT, 1)
        if self._texture is None:
            self._texture = image.get_texture()
        else:
            self._texture.blit_into(image, 0, 0, 0)
        gl.glBindTexture(self._texture.target, self._texture.id)
        gl.glTexParameteri(self._texture.target, gl.GL_TEXTURE_MIN_FILTER, gl.GL_NEAREST)
        gl.glTexParameteri(self._texture.target, gl.GL_TEXTURE_MAG_FILTER, gl.GL_NEAREST)
        if self._gray_only:
            # one uploaded channel, shown as the same gray on red, green and blue
            swizzle = (gl.GLint * 4)(gl.GL_RED, gl.GL_RED, gl.GL_RED, gl.GL_ONE)
            gl.glTexParameteriv(self._texture.target, gl.GL_TEXTURE_SWIZZLE_RGBA, swizzle)
        gl.glDisable(gl.GL_DITHER)
        gl.glDisable(gl.GL_BLEND)
        self._window.clear()
        self._texture.blit(0, 0)  # integer origin: a half-pixel offset would blend neighbours
        if self._capture:
            self._captured = self._read_back_buffer()
        self._window.flip()
        gl.glFinish()

    def _read_back_buffer(self) -> np.ndarray:
        gl = self._gl
        w, h = self.width_px, self.height_px
        buf = (gl.GLubyte * (w * h * 3))()
        gl.glPixelStorei(gl.GL_PACK_ALIGNMENT, 1)
        gl.glReadBuffer(gl.GL_BACK)
        gl.glReadPixels(0, 0, w, h, gl.GL_RGB, gl.GL_UNSIGNED_BYTE, buf)
        return np.flipud(np.frombuffer(buf, np.uint8).reshape(h, w, 3)).copy()  # GL rows run bottom-up

    def expected_rgb(self, pattern: np.ndarray) -> np.ndarray:
        """What the framebuffer should hold for ``pattern`` (H x W x 3 uint8)."""
        return pack_rgb(np.asarray(pattern), self.shift_bits)

    def close(self) -> None:
        """Blank the panel and close the window (safe to call twice)."""
        if self._window is None:
            return
        try:
            self._do_show(np.zeros((self.height_px, self.width_px), np.uint16))
        finally:
            self._window.close()
            self._window = None


def open_screen(mod, allow_primary: bool = False):
    """Open the panel the ``[modulator]`` config section ``mod`` describes: the pattern window, or the lab's
    ``module:Class`` for a panel driven by its maker's library (rig/devices/panels.py)."""
    if mod.backend != "window":
        from rig.devices.panels import load_screen_backend
        return load_screen_backend(mod)
    display = choose_display(list_displays(), mod.display, mod.width_px, mod.height_px,
                             allow_primary or mod.allow_primary)
    return PygletScreen(display, mod.bit_depth, mod.rgb_shift_bits)


class Tee:
    """Shows every pattern on the panel (the window or a plug-in) and on a second screen (the simulated panel a simulated camera watches),
    so a run can drive the real window while the simulator supplies the frames."""

    def __init__(self, window, twin):
        self.window, self.twin = window, twin
        self.width_px, self.height_px, self.bit_depth = window.width_px, window.height_px, window.bit_depth

    def show(self, pattern: np.ndarray) -> None:
        """Show ``pattern`` on the window, then hand it to the twin."""
        self.window.show(pattern)
        self.twin.show(pattern)

    def close(self) -> None:
        """Close the window and blank the twin."""
        try:
            self.window.close()
        finally:
            self.twin.close()
