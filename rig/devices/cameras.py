"""Camera backends behind the rig's Camera protocol: opencv (a device, file or URL), replay (a folder of images),
genicam (rig/devices/genicam.py) and a lab's own class named ``module:Class``; the simulated camera lives in
simulators/devices.py.

``CameraBase`` holds what every backend shares: range checks of exposure and gain, the ROI (set on the device where
the backend can, else cropped), frame numbering, the closed state and the Frame metadata. A backend writes only the
``_do_`` methods. Frames are stamped on the rig's clock (``timestamp_s`` = middle of the exposure); where a backend
cannot know when a frame was exposed it says so in ``exposure_timestamps`` and the run discards
``camera.discard_frames`` frames after each pattern change.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from concurrent.futures import TimeoutError as FutureTimeout
from pathlib import Path

import numpy as np

from analysis.frame import Frame
from analysis.imageio import ImageFolderError, list_images, read_image
from analysis.patterns import Rect
from rig.devices.clock import MonotonicClock
from rig.devices.plugins import load_plugin
from rig.devices.protocols import Camera
from rig.errors import UsageError

EXPOSURE_RANGE_S = (1e-6, 10.0)


class UnsupportedSetting(UsageError):
    """The camera's driver does not allow a setting the run needs; the message names the setting and the camera."""


class CameraBase:
    """Shared checks and metadata of the rig's camera backends (see the module docstring)."""

    exposure_timestamps = True  # frames carry when they were exposed, on the rig's clock

    def __init__(self, name: str, width_px: int, height_px: int, bit_depth: int, exposure_s: float, gain_db: float,
                 clock=None):
        self.name = name
        self.width_px, self.height_px, self.bit_depth = width_px, height_px, bit_depth
        self.clock = clock or MonotonicClock()
        self._exposure_s, self._gain_db = exposure_s, gain_db
        self._roi: Rect | None = None
        self._delivered = Rect(0, width_px, 0, height_px)  # the part of the frame the device sends
        self._sequence = -1
        self._closed = False

    @property
    def exposure_s(self) -> float:
        """Exposure time (s)."""
        return self._exposure_s

    @exposure_s.setter
    def exposure_s(self, value: float) -> None:
        lo, hi = EXPOSURE_RANGE_S
        if not lo <= value <= hi:
            raise ValueError(f"{self.name}: exposure_s expected {lo:g} to {hi:g} s, got {value!r}")
        self._exposure_s = float(self._do_set_exposure(float(value)))

    @property
    def gain_db(self) -> float:
        """Analogue gain (dB)."""
        return self._gain_db

    @gain_db.setter
    def gain_db(self, value: float) -> None:
        if not 0.0 <= value <= 48.0:
            raise ValueError(f"{self.name}: gain_db expected 0 to 48 dB, got {value!r}")
        self._gain_db = float(self._do_set_gain(float(value)))

    @property
    def roi(self) -> Rect | None:
        """Region of the sensor that frames are cropped to (None: the whole sensor)."""
        return self._roi

    @roi.setter
    def roi(self, rect: Rect | None) -> None:
        if rect is not None and not (0 <= rect.x0 < rect.x1 <= self.width_px and 0 <= rect.y0 < rect.y1 <= self.height_px):
            raise ValueError(f"{self.name}: roi {rect} lies outside the {self.width_px}x{self.height_px} sensor")
        self._delivered = self._do_set_roi(rect)
        self._roi = rect

    def grab(self, timeout_s: float = 1.0) -> Frame:
        """The next frame; TimeoutError if none within ``timeout_s``, ConnectionError if the camera is gone."""
        if self._closed:
            raise ConnectionError(f"{self.name}: grab after close")
        if not timeout_s > 0:
            raise ValueError(f"{self.name}: timeout_s expected > 0, got {timeout_s!r}")
        image, t_mid = self._do_grab(timeout_s)
        d = self._delivered
        if image.shape != (d.height, d.width):
            raise ConnectionError(f"{self.name}: frame of {image.shape[1]}x{image.shape[0]} px where "
                                  f"{d.width}x{d.height} were due")
        image = image.astype(np.uint16, copy=False)
        if self._roi is not None and self._roi != d:
            r = self._roi
            image = np.ascontiguousarray(image[r.y0 - d.y0:r.y1 - d.y0, r.x0 - d.x0:r.x1 - d.x0])
        self._sequence += 1
        return Frame(image, t_mid, self._exposure_s, self._gain_db, self.bit_depth, self._sequence, True)

    def close(self) -> None:
        """Release the camera (safe to call twice)."""
        if not self._closed:
            self._closed = True
            self._do_close()

    # --- what a backend provides ------------------------------------------------------------------------------
    def _do_grab(self, timeout_s: float) -> tuple[np.ndarray, float]:
        """Return (2-D image, mid-exposure time on the rig's clock)."""
        raise NotImplementedError

    def _do_set_exposure(self, exposure_s: float) -> float:
        """Apply the exposure; return the value the device took."""
        return exposure_s

    def _do_set_gain(self, gain_db: float) -> float:
        """Apply the gain; return the value the device took."""
        return gain_db

    def _do_set_roi(self, rect: Rect | None) -> Rect:
        """Set ``rect`` (None: the whole frame) on the device if it can; return the part of the frame it will send
        from now on (covering ``rect``; the rest is cropped here). By default the whole frame: crop everything."""
        return Rect(0, self.width_px, 0, self.height_px)

    def _do_close(self) -> None:
        pass


class ReplayCamera(CameraBase):
    """Serves a folder's images in acquisition order (a manifest.csv, or file names that carry the gray, as
    ``fringecal analyze`` reads them), starting again at the end: a bench rehearsal without a bench.

    Each frame's exposure starts when ``grab`` is called, so no frame predates a settle deadline; exposure and gain
    are recorded in the frames' metadata but do not change the images (``fixed_images``), so a run keeps the
    configured exposure instead of tuning it.
    """

    fixed_images = True

    def __init__(self, settings, clock=None):
        folder = Path(settings.device)
        if not settings.device:
            raise UsageError("camera.device: the replay camera needs the folder of images to serve")
        try:
            self.records = list_images(folder)
            first = read_image(self.records[0].path)
        except ImageFolderError as err:
            raise UsageError(f"camera.device: replay: {err}") from None
        height, width = first.shape
        super().__init__(f"replay camera ({folder})", width, height, settings.bit_depth, settings.exposure_s,
                         settings.gain_db, clock)
        self.served = 0

    def _do_grab(self, timeout_s: float) -> tuple[np.ndarray, float]:
        record = self.records[self.served % len(self.records)]
        try:
            image = read_image(record.path)
        except ImageFolderError as err:
            raise ConnectionError(f"{self.name}: {err}") from None
        if image.dtype.kind == "f" or image.max(initial=0) > 2**self.bit_depth - 1:
            raise ConnectionError(f"{self.name}: {record.path.name} holds values beyond {self.bit_depth}-bit counts "
                                  "(camera.bit_depth)")
        self.served += 1
        return image, self.clock.now() + self._exposure_s / 2


class OpenCVCamera(CameraBase):
    """A camera, video file, image sequence (``name%03d.png``) or stream URL through ``cv2.VideoCapture``.

    Reads run in a worker thread so ``grab`` can time out (VideoCapture has no timeout of its own). Frames are kept
    at the driver's bit depth (16-bit frames stay 16-bit); colour frames become gray. OpenCV gives no exposure
    time, so frames are stamped on arrival and ``exposure_timestamps`` is False: set ``camera.discard_frames``
    (``fringecal timing`` measures it). Exposure is set only through V4L2 (Linux cameras), in its 100 us unit;
    gain in dB is not settable through OpenCV, so other settings raise UnsupportedSetting naming them.
    """

    exposure_timestamps = False
    V4L2_EXPOSURE_UNIT_S = 100e-6

    def __init__(self, settings, clock=None):
        import cv2

        cv2.utils.logging.setLogLevel(cv2.utils.logging.LOG_LEVEL_ERROR)  # errors are reported here, on one line
        self._cv2 = cv2
        device = settings.device or "0"
        source = int(device) if device.isdigit() else device
        cap = cv2.VideoCapture(source, cv2.CAP_IMAGES) if "%" in device else cv2.VideoCapture(source)
        if not cap.isOpened():
            raise UsageError(f"camera.device: opencv cannot open {device!r} (no such camera index, file or URL)")
        self._cap = cap
        self._backend = cap.getBackendName()
        if isinstance(source, int):
            cap.set(cv2.CAP_PROP_FRAME_WIDTH, settings.width_px)
            cap.set(cv2.CAP_PROP_FRAME_HEIGHT, settings.height_px)
        self._worker = ThreadPoolExecutor(max_workers=1, thread_name_prefix="opencv-read")
        self._pending = None
        try:
            probe = self._read_now()
            if probe is None:
                raise UsageError(f"camera.device: opencv opened {device!r} but it delivers no frame")
            height, width = probe.shape
            if (width, height) != (settings.width_px, settings.height_px):
                raise UsageError(f"camera.width_px/height_px: configured {settings.width_px}x{settings.height_px} "
                                 f"but opencv {device!r} delivers {width}x{height}")
            if probe.dtype == np.uint8 and settings.bit_depth != 8:
                raise UsageError(f"camera.bit_depth: configured {settings.bit_depth} but opencv {device!r} delivers "
                                 "8-bit frames; set camera.bit_depth = 8")
        except BaseException:
            self._worker.shutdown(wait=False)
            cap.release()
            raise
        self._first = probe  # served by the first grab, so a recording loses no frame to the probe
        super().__init__(f"opencv camera {device!r} ({self._backend})", width, height, settings.bit_depth,
                         settings.exposure_s, settings.gain_db, clock)

    def _read_now(self) -> np.ndarray | None:
        ok, image = self._cap.read()
        if not ok or image is None:
            return None
        if image.ndim == 3:
            image = self._cv2.cvtColor(image, self._cv2.COLOR_BGR2GRAY)
        return image

    def _do_grab(self, timeout_s: float) -> tuple[np.ndarray, float]:
        if self._first is not None:
            image, self._first = self._first, None
        else:
            if self._pending is None:
                self._pending = self._worker.submit(self._read_now)
            try:
                image = self._pending.result(timeout=timeout_s)
            except FutureTimeout:
                # the read goes on in the worker; the next grab collects it instead of starting another
                raise TimeoutError(f"{self.name}: no frame within {timeout_s} s") from None
            self._pending = None
            if image is None:
                raise ConnectionError(f"{self.name}: no more frames (end of a recording, or the camera is gone)")
        return image, self.clock.now() - self._exposure_s / 2

    def _do_set_exposure(self, exposure_s: float) -> float:
        cv2 = self._cv2
        if self._backend == "V4L2":
            units = max(1, round(exposure_s / self.V4L2_EXPOSURE_UNIT_S))
            cv2_manual = 1  # V4L2_EXPOSURE_MANUAL
            self._cap.set(cv2.CAP_PROP_AUTO_EXPOSURE, cv2_manual)
            if self._cap.set(cv2.CAP_PROP_EXPOSURE, units):
                return units * self.V4L2_EXPOSURE_UNIT_S
        raise UnsupportedSetting(f"camera.exposure_s: {self.name} does not let OpenCV set the exposure; fix it in "
                                 "the camera's own tool, or wrap the maker's SDK as a module:Class backend")

    def _do_set_gain(self, gain_db: float) -> float:
        if gain_db == self._gain_db:
            return gain_db
        raise UnsupportedSetting(f"camera.gain_db: {self.name} gives no gain in dB through OpenCV; set it in the "
                                 "camera's own tool and put that value in camera.gain_db")

    def _do_close(self) -> None:
        self._worker.shutdown(wait=True)
        self._cap.release()


def load_backend(settings):
    """Instantiate the lab's own camera class named ``module:Class`` in ``camera.backend`` as Class(settings).

    ``settings`` is the config's ``[camera]`` section; the object must satisfy rig.devices.protocols.Camera and stamp its
    frames on ``time.monotonic`` (the rig's clock).
    """
    camera = load_plugin(settings, "camera.backend", Camera,
                         ("width_px", "height_px", "bit_depth", "exposure_s", "gain_db", "grab", "close"), "camera")
    return camera


def open_camera(settings, clock=None):
    """The camera the ``[camera]`` section describes (not 'sim': the simulated camera needs the simulated bench)."""
    if settings.backend == "opencv":
        return OpenCVCamera(settings, clock)
    if settings.backend == "replay":
        return ReplayCamera(settings, clock)
    if settings.backend == "genicam":
        from rig.devices.genicam import GenicamCamera  # Aravis is an optional extra
        return GenicamCamera(settings, clock)
    return load_backend(settings)
