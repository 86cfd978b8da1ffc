"""GenICam cameras (GigE Vision, USB3 Vision) through Aravis: the ``genicam`` camera backend and the camera list.

Aravis (LGPL) is used through PyGObject: the ``genicam`` extra plus Debian's ``gir1.2-aravis-0.8`` (README). The
settings go through Aravis's camera helpers, which use the standard feature names:

- exposure in µs: ``ExposureTime`` (``ExposureTimeAbs`` on older GigE Vision cameras);
- gain in dB: ``Gain``. A camera that offers only ``GainRaw`` (no unit) is set in its raw steps, and
  ``gain_unit`` says so;
- pixel format ``Mono8``/``Mono10``/``Mono12``/``Mono16`` (unpacked) chosen by ``camera.bit_depth``, so frames carry
  the sensor's true bit depth;
- the configured frame is a window of ``camera.width_px`` x ``camera.height_px`` centred on the sensor; a ROI is set
  on the camera (``OffsetX``/``OffsetY``/``Width``/``Height``) rounded outward to the camera's increments.

Timestamps: the device stamps each buffer in ns on its own clock. The offset to ``time.monotonic`` is taken from the
first frame (arrival time minus device stamp) and afterwards only ever lowered, when a frame arrives with less delay;
so a mapped time is never later than the truth by more than the first frame's transfer time, and a device clock that
drifts makes frames look older, never newer: stale frames are dropped, fresh ones at worst waited for. The stamp is
taken as the end of the exposure (a camera that stamps its start only makes frames look older still).

Triggering (``camera.trigger = "software"``): each ``grab`` triggers one exposure and waits for it, so a frame is
never older than the call.

Faults: no buffer within the timeout raises ``TimeoutError`` if the camera still answers a register read, and
``ConnectionError`` if it does not (or Aravis reported the control link lost); a buffer that arrived damaged is a
``TimeoutError`` (retried).
"""

from __future__ import annotations

import ipaddress
import time
from dataclasses import dataclass

import numpy as np

from analysis.patterns import Rect
from rig.devices.cameras import CameraBase, UnsupportedSetting
from rig.errors import UsageError

BUFFERS = 4  # buffers queued in the stream: a free-running camera keeps at most this many frames waiting
MONO_FORMATS = {8: "Mono8", 10: "Mono10", 12: "Mono12", 16: "Mono16"}
INSTALL_HINT = ("install the Debian packages gir1.2-aravis-0.8 and aravis-tools and the project's extra "
                "(pip install -e '.[genicam]'; README, GenICam cameras)")


def aravis():
    """The Aravis module through PyGObject; UsageError naming the setting and the install route if missing."""
    try:
        import gi
        gi.require_version("Aravis", "0.8")
        from gi.repository import Aravis
    except (ImportError, ValueError) as err:
        raise UsageError(f"camera.backend: 'genicam' needs Aravis 0.8 through PyGObject ({err}); "
                         f"{INSTALL_HINT}") from None
    return Aravis


def _glib_error():
    from gi.repository import GLib
    return GLib.Error


@dataclass(frozen=True)
class GenicamInfo:
    """One camera as Aravis's discovery reports it."""

    device_id: str
    vendor: str
    model: str
    serial: str
    address: str
    protocol: str

    def describe(self) -> str:
        return (f"{self.device_id}: {self.vendor} {self.model}, serial {self.serial}, {self.protocol} "
                f"at {self.address}")


def list_genicam() -> list[GenicamInfo]:
    """The GenICam cameras Aravis finds on the enabled interfaces (GigE Vision discovery waits about 1 s)."""
    Aravis = aravis()
    Aravis.update_device_list()
    return [GenicamInfo(Aravis.get_device_id(i), Aravis.get_device_vendor(i) or "", Aravis.get_device_model(i) or "",
                        Aravis.get_device_serial_nbr(i) or "", Aravis.get_device_address(i) or "",
                        Aravis.get_device_protocol(i) or "")
            for i in range(Aravis.get_n_devices())]


def _is_address(device: str) -> bool:
    try:
        ipaddress.ip_address(device)
    except ValueError:
        return False
    return True


def open_aravis_camera(device: str):
    """Open the camera named by ``device``: an IP address (opened directly, no discovery), Aravis's device id, a user
    id (matched by Aravis), or a serial number (matched here, against the discovered cameras); '' takes the only
    camera found."""
    Aravis = aravis()
    GError = _glib_error()
    found = None
    if not device:
        found = list_genicam()
        if len(found) != 1:
            listing = "; ".join(f.describe() for f in found) or "none found"
            raise UsageError(f"camera.device: {len(found)} GenICam cameras found, name one by serial, user id or "
                             f"address (cameras: {listing})")
        device = found[0].device_id
    try:
        return Aravis.Camera.new(device)
    except GError as err:
        message = err.message
    if _is_address(device):
        raise UsageError(f"camera.device: no GenICam camera answers at {device} ({message})") from None
    found = found or list_genicam()
    by_serial = [f for f in found if f.serial == device]
    if len(by_serial) == 1:
        try:
            return Aravis.Camera.new(by_serial[0].device_id)
        except GError as err:
            message = err.message
    listing = "; ".join(f.describe() for f in found) or "none found"
    raise UsageError(f"camera.device: no GenICam camera answers to {device!r} as serial, user id or address "
                     f"({message}; cameras: {listing})") from None


class GenicamCamera(CameraBase):
    """A GenICam camera through Aravis (see the module docstring); ``settings`` is the config's ``[camera]``."""

    def __init__(self, settings, clock=None):
        self._aravis = aravis()
        self._gerror = _glib_error()
        self._gone = False
        self.name = f"GenICam camera {settings.device!r}"
        self._cam = cam = open_aravis_camera(settings.device)
        try:
            self._device = cam.get_device()
            self._lost_handler = self._device.connect("control-lost", self._on_control_lost)
            self.name = name = "GenICam camera " + " ".join(
                self._control("reading its identity", get) for get in
                (cam.get_vendor_name, cam.get_model_name, cam.get_device_serial_number))
            self._set_pixel_format(settings.bit_depth)
            self._window = self._centred_window(settings.width_px, settings.height_px)
            self.gain_unit = "dB" if self._control("reading the features", cam.is_feature_available,
                                                   "Gain") else "raw steps (GainRaw)"
            super().__init__(name, settings.width_px, settings.height_px, settings.bit_depth, settings.exposure_s,
                             settings.gain_db, clock)
            self._exposure_s = self._do_set_exposure(settings.exposure_s)
            self._gain_db = self._do_set_gain(settings.gain_db)
            self.trigger_mode = settings.trigger
            if self.trigger_mode == "software":
                if not self._control("reading the triggers", cam.is_software_trigger_supported):
                    raise UnsupportedSetting(f"camera.trigger: {name} has no software trigger; use 'free-run'")
                self._control("setting the software trigger", cam.set_trigger, "Software")
            else:
                self._control("setting free run", cam.clear_triggers)
                self._control("setting continuous acquisition", cam.set_acquisition_mode,
                              self._aravis.AcquisitionMode.CONTINUOUS)
            self._device_roi = self._window
            self._stream = None
            self._offset_ns: int | None = None
            self._start()
        except ConnectionError as err:  # found, but failing while being set up: a setup problem, one line
            self._release()
            raise UsageError(f"camera.device: {err}") from None
        except BaseException:
            self._release()
            raise

    # --- what the rig sees --------------------------------------------------------------------------------
    def describe_settings(self) -> str:
        """Exposure, gain, format and window as the camera reports them now."""
        cam = self._cam
        region = self._control("reading the region", cam.get_region)
        return (f"{self.name}: exposure {self._control('reading the exposure', cam.get_exposure_time):.1f} us, "
                f"gain {self._control('reading the gain', cam.get_gain):g} {self.gain_unit}, "
                f"{self._control('reading the pixel format', cam.get_pixel_format_as_string)}, "
                f"{region.width}x{region.height} at ({region.x}, {region.y})")

    # --- CameraBase hooks -----------------------------------------------------------------------------------
    def _do_grab(self, timeout_s: float) -> tuple[np.ndarray, float]:
        if self._gone:
            raise ConnectionError(f"{self.name}: the camera's control link was lost")
        if self.trigger_mode == "software":
            self._control("software trigger", self._cam.software_trigger)  # one exposure, starting now
        buffer = self._stream.timeout_pop_buffer(max(1, round(timeout_s * 1e6)))
        arrived_ns = time.monotonic_ns()
        if buffer is None:
            self._check_alive()
            raise TimeoutError(f"{self.name}: no frame within {timeout_s} s")
        try:
            status = buffer.get_status()
            if status != self._aravis.BufferStatus.SUCCESS:
                raise TimeoutError(f"{self.name}: a buffer arrived damaged ({status.value_nick})")
            image = self._image(buffer)
            device_ns = buffer.get_timestamp() or buffer.get_system_timestamp()
        finally:
            self._stream.push_buffer(buffer)
        if self._offset_ns is None or arrived_ns - device_ns < self._offset_ns:
            self._offset_ns = arrived_ns - device_ns
        t_end = (device_ns + self._offset_ns) / 1e9
        return image, t_end - self._exposure_s / 2

    def _do_set_exposure(self, exposure_s: float) -> float:
        cam = self._cam
        lo, hi = self._control("reading the exposure range", cam.get_exposure_time_bounds)
        exposure_us = exposure_s * 1e6
        if not lo <= exposure_us <= hi:
            raise ValueError(f"{self.name}: exposure_s expected {lo * 1e-6:g} to {hi * 1e-6:g} s for this camera, "
                             f"got {exposure_s!r}")
        self._control("setting the exposure", cam.set_exposure_time, exposure_us)
        return self._control("reading the exposure", cam.get_exposure_time) * 1e-6

    def _do_set_gain(self, gain_db: float) -> float:
        cam = self._cam
        if not self._control("reading the features", cam.is_gain_available):
            if gain_db == 0:
                return 0.0
            raise UnsupportedSetting(f"camera.gain_db: {self.name} offers no gain feature; set 0")
        lo, hi = self._control("reading the gain range", cam.get_gain_bounds)
        if not lo <= gain_db <= hi:
            raise ValueError(f"{self.name}: gain_db expected {lo:g} to {hi:g} {self.gain_unit}, got {gain_db!r}")
        self._control("setting the gain", cam.set_gain, gain_db)
        return float(self._control("reading the gain", cam.get_gain))

    def _do_set_roi(self, rect: Rect | None) -> Rect:
        """Set the camera's window to cover ``rect`` (frame coordinates) rounded outward to its increments; return
        what the camera now delivers (frame coordinates)."""
        w = self._window
        if rect is None:
            wanted = w
        else:
            wanted = Rect(w.x0 + rect.x0, w.x0 + rect.x1, w.y0 + rect.y0, w.y0 + rect.y1)
        region = self._fit_region(wanted)
        if region != self._device_roi:
            self._stop()
            self._set_region(region)
            self._device_roi = region
            self._start()
        return Rect(region.x0 - w.x0, region.x1 - w.x0, region.y0 - w.y0, region.y1 - w.y0)

    def _do_close(self) -> None:
        self._release()

    # --- inside ------------------------------------------------------------------------------------------------
    def _on_control_lost(self, _device) -> None:
        self._gone = True  # called from Aravis's heartbeat thread; the next grab reports it

    def _control(self, what: str, func, *args):
        """Call an Aravis control function; a device that does not answer is a ConnectionError naming ``what``."""
        if self._gone:
            raise ConnectionError(f"{self.name}: {what}: the camera's control link was lost")
        try:
            return func(*args)
        except self._gerror as err:
            raise ConnectionError(f"{self.name}: {what}: {err.message}") from None

    def _check_alive(self) -> None:
        """ConnectionError unless the camera answers a register read (a dead GigE Vision link takes ~5 s to tell)."""
        self._control("no frame, and the camera does not answer", self._cam.get_payload)

    def _set_pixel_format(self, bit_depth: int) -> None:
        offered = self._control("reading the pixel formats", self._cam.dup_available_pixel_formats_as_strings)
        wanted = MONO_FORMATS.get(bit_depth)
        if wanted not in offered:
            mono = [f for f in offered if f in MONO_FORMATS.values()]
            raise UsageError(f"camera.bit_depth: {self.name} offers {', '.join(mono) or 'no unpacked mono format'} "
                             f"(pixel formats {', '.join(offered)}); got {bit_depth} bits")
        self._control("setting the pixel format", self._cam.set_pixel_format_from_string, wanted)

    def _centred_window(self, width_px: int, height_px: int) -> Rect:
        cam = self._cam
        sensor = self._control("reading the sensor size", cam.get_sensor_size)
        if width_px > sensor.width or height_px > sensor.height:
            raise UsageError(f"camera.width_px/height_px: {width_px}x{height_px} exceeds the sensor of {self.name} "
                             f"({sensor.width}x{sensor.height})")
        for axis, size, increment in (("width_px", width_px, cam.get_width_increment),
                                      ("height_px", height_px, cam.get_height_increment)):
            step = self._control("reading the increments", increment)
            if size % step:
                raise UsageError(f"camera.{axis}: {self.name} takes multiples of {step} px, got {size}")
        x_step = self._control("reading the increments", cam.get_x_offset_increment) or 1
        y_step = self._control("reading the increments", cam.get_y_offset_increment) or 1
        x0 = (sensor.width - width_px) // 2 // x_step * x_step
        y0 = (sensor.height - height_px) // 2 // y_step * y_step
        window = Rect(x0, x0 + width_px, y0, y0 + height_px)
        self._set_region(window)
        return window

    def _fit_region(self, wanted: Rect) -> Rect:
        """``wanted`` (sensor coordinates) grown outward to the offset and size increments, inside the window."""
        cam = self._cam
        xs = self._control("reading the increments", cam.get_x_offset_increment) or 1
        ys = self._control("reading the increments", cam.get_y_offset_increment) or 1
        ws = self._control("reading the increments", cam.get_width_increment) or 1
        hs = self._control("reading the increments", cam.get_height_increment) or 1
        w = self._window
        x0, y0 = w.x0 + (wanted.x0 - w.x0) // xs * xs, w.y0 + (wanted.y0 - w.y0) // ys * ys
        x1 = min(x0 + -(-(wanted.x1 - x0) // ws) * ws, w.x1)
        y1 = min(y0 + -(-(wanted.y1 - y0) // hs) * hs, w.y1)
        return Rect(x0, x1, y0, y1)

    def _set_region(self, r: Rect) -> None:
        self._control("setting the region", self._cam.set_region, r.x0, r.y0, r.x1 - r.x0, r.y1 - r.y0)
        got = self._control("reading the region", self._cam.get_region)
        if (got.x, got.y, got.width, got.height) != (r.x0, r.y0, r.x1 - r.x0, r.y1 - r.y0):
            raise UsageError(f"camera.width_px/height_px: {self.name} took the region {got.width}x{got.height} at "
                             f"({got.x}, {got.y}) for {r}")

    def _image(self, buffer) -> np.ndarray:
        width, height = buffer.get_image_width(), buffer.get_image_height()
        dtype = np.uint8 if self.bit_depth == 8 else np.dtype("<u2")
        data = np.frombuffer(buffer.get_data(), dtype)
        if data.size < width * height:
            raise TimeoutError(f"{self.name}: a buffer arrived short ({data.size} of {width * height} px)")
        return data[:width * height].reshape(height, width).copy()

    def _start(self) -> None:
        cam = self._cam
        self._stream = self._control("creating the stream", cam.create_stream, None, None)
        if self._stream is None:
            raise ConnectionError(f"{self.name}: Aravis could not open a stream")
        payload = self._control("reading the payload size", cam.get_payload)
        for _ in range(BUFFERS):
            self._stream.push_buffer(self._aravis.Buffer.new_allocate(payload))
        self._control("starting acquisition", cam.start_acquisition)

    def _stop(self) -> None:
        if self._stream is not None:
            self._control("stopping acquisition", self._cam.stop_acquisition)
            self._stream = None

    def _release(self) -> None:
        """Stop acquisition if the camera still answers, and drop Aravis's objects (safe after a fault)."""
        try:
            if not self._gone and getattr(self, "_stream", None) is not None:
                self._stop()
        except ConnectionError:
            pass  # closing a camera that is gone: nothing left to stop
        finally:
            self._stream = None
            device = getattr(self, "_device", None)
            if device is not None and getattr(self, "_lost_handler", None) is not None:
                device.disconnect(self._lost_handler)
            self._device = self._cam = None
