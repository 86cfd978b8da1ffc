"""The live alignment window: the camera image with the fringe band and saturated pixels marked, the fringe profile
across the band, and the alignment figures, hint and keys, on a display other than the panel's.

The whole view is drawn with OpenCV into one RGB image (``compose_view``, pure, testable without a display) and shown
1:1 as a texture, so what the window shows can be read back and compared pixel for pixel. Keys arrive as the same
characters the terminal view reads (``poll``); Escape and closing the window mean q.

pyglet is imported only when the window opens.
"""

from __future__ import annotations

import cv2
import numpy as np

from analysis.patterns import Rect

VIEW_W, VIEW_H = 1000, 700
IMAGE_BOX = Rect(10, 650, 10, 490)     # the scaled camera image, letterboxed
PROFILE_BOX = Rect(10, 650, 510, 690)  # the fringe profile across the band
TEXT_X, TEXT_Y0, TEXT_DY = 665, 34, 30
BACKGROUND = (24, 24, 28)
BAND_RGB = (0, 210, 255)
SATURATED_RGB = (255, 40, 40)
PROFILE_RGB = (120, 230, 120)
TEXT_RGB, LABEL_RGB, HINT_RGB = (235, 235, 235), (150, 150, 160), (255, 215, 90)
FONT, FONT_SCALE = cv2.FONT_HERSHEY_SIMPLEX, 0.5


def image_placement(shape: tuple[int, int], box: Rect = IMAGE_BOX) -> tuple[float, Rect]:
    """Scale (view px per camera px) and where a camera image of ``shape`` (rows, cols) lands in ``box``."""
    rows, cols = shape
    scale = min(box.width / cols, box.height / rows)
    w, h = max(1, round(cols * scale)), max(1, round(rows * scale))
    x0, y0 = box.x0 + (box.width - w) // 2, box.y0 + (box.height - h) // 2
    return scale, Rect(x0, x0 + w, y0, y0 + h)


def band_profile(image: np.ndarray, band: Rect, angle_deg: float) -> np.ndarray:
    """The band averaged along the fringes (ADU): a row average for near-vertical fringes, else a column average."""
    crop = np.asarray(image, np.float32)[band.slices]
    return crop.mean(axis=0 if abs(angle_deg) < 45 else 1)


def panel_display_of(displays: list, mod):
    """The display the ``[modulator]`` section ``mod`` puts the panel on (by index, by name, or 'auto': the only
    non-primary display of the panel's size), or None when it names none; the size is not checked here."""
    if isinstance(mod.display, int):
        return displays[mod.display] if 0 <= mod.display < len(displays) else None
    if mod.display != "auto":
        return next((d for d in displays if d.name == mod.display), None)
    fits = [d for d in displays if (d.width_px, d.height_px) == (mod.width_px, mod.height_px)
            and (mod.allow_primary or not d.primary)]
    return fits[0] if len(fits) == 1 else None


def align_display(displays: list, mod):
    """Where the alignment window opens: the desktop's primary display unless the panel is on it, else the first
    other display. DisplayError when the panel's display is the only one."""
    from rig.devices.screen import DisplayError

    panel = panel_display_of(displays, mod)
    others = [d for d in displays if panel is None or d.index != panel.index]
    if not others:
        raise DisplayError(f"modulator.display: the alignment window needs a display other than the panel's "
                           f"({panel.describe()}); use --terminal")
    return next((d for d in others if d.primary), others[0])


def _wrap(text: str, width_px: int) -> list[str]:
    lines, line = [], ""
    for word in text.split():
        trial = f"{line} {word}".strip()
        if line and cv2.getTextSize(trial, FONT, FONT_SCALE, 1)[0][0] > width_px:
            lines.append(line)
            line = word
        else:
            line = trial
    return lines + ([line] if line else [])


def compose_view(image: np.ndarray, full_scale: int, band: Rect | None, angle_deg: float | None,
                 rows: list[tuple[str, str]], hint_line: str, keys_line: str) -> np.ndarray:
    """The window's picture (VIEW_H x VIEW_W x 3 uint8, row 0 at the top).

    ``image`` in camera counts is scaled into IMAGE_BOX (black to full scale), pixels at ``full_scale`` painted
    SATURATED_RGB, the ``band`` outlined in BAND_RGB and its profile plotted in PROFILE_BOX (the full-scale line
    dashed); ``rows`` are (label, value) pairs, then the hint and the keys.
    """
    view = np.empty((VIEW_H, VIEW_W, 3), np.uint8)
    view[:] = BACKGROUND
    img = np.asarray(image)
    scale, place = image_placement(img.shape)
    gray = np.clip(img.astype(np.float32) * (255.0 / full_scale), 0, 255).astype(np.uint8)
    rgb = np.repeat(gray[..., None], 3, axis=2)
    rgb[img >= full_scale] = SATURATED_RGB
    # nearest neighbour: a saturated pixel stays visible, never blended away
    view[place.slices] = cv2.resize(rgb, (place.width, place.height), interpolation=cv2.INTER_NEAREST)
    if band is not None:
        p0 = (place.x0 + round(band.x0 * scale), place.y0 + round(band.y0 * scale))
        p1 = (place.x0 + round(band.x1 * scale) - 1, place.y0 + round(band.y1 * scale) - 1)
        cv2.rectangle(view, p0, p1, BAND_RGB, 2, cv2.LINE_8)
        _draw_profile(view, band_profile(img, band, angle_deg or 0.0), full_scale)
    else:
        cv2.putText(view, "no fringe band found", (PROFILE_BOX.x0 + 10, PROFILE_BOX.y0 + 30), FONT, FONT_SCALE,
                    LABEL_RGB, 1, cv2.LINE_8)
    y = TEXT_Y0
    for label, value in rows:
        cv2.putText(view, label, (TEXT_X, y), FONT, FONT_SCALE, LABEL_RGB, 1, cv2.LINE_8)
        for line in _wrap(value, VIEW_W - TEXT_X - 100):
            cv2.putText(view, line, (TEXT_X + 95, y), FONT, FONT_SCALE, TEXT_RGB, 1, cv2.LINE_8)
            y += TEXT_DY
    for line in _wrap(hint_line, VIEW_W - TEXT_X - 10):
        y += 8
        cv2.putText(view, line, (TEXT_X, y), FONT, FONT_SCALE, HINT_RGB, 1, cv2.LINE_8)
        y += TEXT_DY - 8
    key_lines = _wrap(keys_line, VIEW_W - TEXT_X - 10)
    for i, line in enumerate(key_lines):  # at the bottom of the text column
        y = VIEW_H - 20 - TEXT_DY * (len(key_lines) - 1 - i)
        cv2.putText(view, line, (TEXT_X, y), FONT, FONT_SCALE, LABEL_RGB, 1, cv2.LINE_8)
    return view


def _draw_profile(view: np.ndarray, profile: np.ndarray, full_scale: int) -> None:
    box = PROFILE_BOX
    cv2.rectangle(view, (box.x0, box.y0), (box.x1 - 1, box.y1 - 1), LABEL_RGB, 1, cv2.LINE_8)
    cv2.putText(view, "fringe profile across the band (dashed: full scale)", (box.x0 + 8, box.y0 + 22), FONT,
                0.45, LABEL_RGB, 1, cv2.LINE_8)
    for x in range(box.x0, box.x1, 12):  # full scale, dashed
        cv2.line(view, (x, box.y0 + 30), (min(x + 5, box.x1 - 1), box.y0 + 30), SATURATED_RGB, 1, cv2.LINE_8)
    if profile.size < 2:
        return
    xs = box.x0 + 2 + np.arange(profile.size) * (box.width - 5) / (profile.size - 1)
    ys = box.y1 - 3 - np.clip(profile / full_scale, 0, 1) * (box.height - 33)
    points = np.round(np.column_stack([xs, ys])).astype(np.int32)
    cv2.polylines(view, [points], False, PROFILE_RGB, 1, cv2.LINE_8)


class AlignWindow:
    """A pyglet window on ``display`` (a rig DisplayInfo) that shows ``compose_view`` pictures and collects keys."""

    def __init__(self, display):
        import pyglet
        from pyglet import gl
        from pyglet.window import key

        self.display = display
        screen = pyglet.display.get_display().get_screens()[display.index]
        template = gl.Config(red_size=8, green_size=8, blue_size=8, alpha_size=8, double_buffer=True)
        config = screen.get_best_config(template)
        width, height = min(VIEW_W, display.width_px), min(VIEW_H, display.height_px)
        self._window = pyglet.window.Window(width, height, caption="fringecal align", screen=screen, config=config,
                                            resizable=False, visible=False)
        self._window.set_location(display.x + (display.width_px - width) // 2,
                                  display.y + (display.height_px - height) // 2)
        self._window.set_visible(True)
        self._gl, self._texture = gl, None
        self._keys: list[str] = []
        self.capture, self.captured = False, None

        def on_text(text):
            self._keys.extend(text)

        def on_key_press(symbol, modifiers):
            if symbol == key.ESCAPE:
                self._keys.append("q")
            return pyglet.event.EVENT_HANDLED  # not pyglet's default, which closes the window on Escape

        def on_close():
            self._keys.append("q")
            return pyglet.event.EVENT_HANDLED

        self._window.push_handlers(on_text=on_text, on_key_press=on_key_press, on_close=on_close)

    @property
    def window(self):
        """The pyglet window (tests dispatch key events to it)."""
        return self._window

    def poll(self) -> list[str]:
        """Characters typed since the last call ('q' for Escape or a closed window)."""
        self._window.dispatch_events()
        keys, self._keys = self._keys, []
        return keys

    def show(self, view: np.ndarray) -> None:
        """Draw ``view`` (H x W x 3 uint8, row 0 at the top) 1:1 at the window's top left and flip."""
        import pyglet
        gl = self._gl
        w, h = self._window.get_framebuffer_size()
        view = np.ascontiguousarray(view[:h, :w])
        vh, vw = view.shape[:2]
        self._window.switch_to()
        image = pyglet.image.ImageData(vw, vh, "RGB", view.tobytes(), pitch=-vw * 3)
        gl.glPixelStorei(gl.GL_UNPACK_ALIGNMENT, 1)
        self._texture = image.get_texture()
        gl.glBindTexture(self._texture.target, self._texture.id)
        gl.glTexParameteri(self._texture.target, gl.GL_TEXTURE_MIN_FILTER, gl.GL_NEAREST)
        gl.glTexParameteri(self._texture.target, gl.GL_TEXTURE_MAG_FILTER, gl.GL_NEAREST)
        self._window.clear()
        self._texture.blit(0, h - vh)  # integer origin, top-aligned (GL's y runs up)
        if self.capture:
            buf = (gl.GLubyte * (w * h * 3))()
            gl.glPixelStorei(gl.GL_PACK_ALIGNMENT, 1)
            gl.glReadBuffer(gl.GL_BACK)
            gl.glReadPixels(0, 0, w, h, gl.GL_RGB, gl.GL_UNSIGNED_BYTE, buf)
            self.captured = np.flipud(np.frombuffer(buf, np.uint8).reshape(h, w, 3)).copy()
        self._window.flip()

    def close(self) -> None:
        """Close the window (safe to call twice)."""
        if self._window is not None:
            self._window.close()
            self._window = None
