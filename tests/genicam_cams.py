"""Aravis's two simulated GenICam cameras for the tests: the in-process one ("Fake" interface) and the GigE Vision
one served on loopback by ``arv-fake-gv-camera-0.8 -i 127.0.0.1`` (the real network protocol path).

``.ci/run`` installs Aravis and sets FRINGECAL_REQUIRE_GENICAM, so in CI a missing piece fails the tests instead of
skipping them.
"""

import os
import shutil
import signal
import subprocess
import time

import pytest

from analysis.config import replace

GV_ADDRESS = "127.0.0.1"  # the fake GigE Vision camera only serves an interface's own address; loopback only
GV_SERIAL = "FCGV15"
FAKE_ID = "Fake_1"


def skip_or_fail(reason: str):
    if os.environ.get("FRINGECAL_REQUIRE_GENICAM"):
        pytest.fail(reason)
    pytest.skip(reason)


def require_aravis():
    """The Aravis module with its in-process simulated camera enabled; skip (fail in CI) without it."""
    from rig.errors import UsageError
    from rig.devices.genicam import aravis

    try:
        Aravis = aravis()
    except UsageError as err:
        skip_or_fail(str(err))
    Aravis.enable_interface("Fake")
    return Aravis


def genicam_settings(cfg, device: str, **changes):
    """The ``[camera]`` section of ``cfg`` for a genicam camera: 80x60 px, 16 bits, plus ``changes``."""
    base = {"camera.backend": "genicam", "camera.device": device, "camera.width_px": 80, "camera.height_px": 60,
            "camera.bit_depth": 16}
    base.update({f"camera.{k}": v for k, v in changes.items()})
    return replace(cfg, **base).camera


class FakeGigE:
    """``arv-fake-gv-camera-0.8`` on loopback, started on demand and killed by pid."""

    def __init__(self):
        self.proc: subprocess.Popen | None = None

    def ensure_running(self) -> str:
        """Start the server unless it runs; return the address to open it at."""
        if self.proc is not None and self.proc.poll() is None:
            return GV_ADDRESS
        Aravis = require_aravis()
        program = shutil.which("arv-fake-gv-camera-0.8")
        if program is None:
            skip_or_fail("arv-fake-gv-camera-0.8 not found (Debian package aravis-tools)")
        self.proc = subprocess.Popen([program, "-i", GV_ADDRESS, "-s", GV_SERIAL], stdout=subprocess.DEVNULL,
                                     stderr=subprocess.PIPE)
        from gi.repository import GLib
        deadline = time.monotonic() + 10.0
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                err = self.proc.stderr.read().decode(errors="replace").strip()
                skip_or_fail(f"arv-fake-gv-camera-0.8 -i {GV_ADDRESS} exited: {err} (another one running?)")
            try:
                Aravis.Camera.new(GV_ADDRESS)  # dropped at once: the tests open their own
                return GV_ADDRESS
            except GLib.Error:
                time.sleep(0.1)
        self.kill()
        skip_or_fail(f"arv-fake-gv-camera-0.8 on {GV_ADDRESS} did not answer within 10 s")

    def kill(self) -> None:
        """SIGKILL: the camera vanishes as if unplugged."""
        if self.proc is not None and self.proc.poll() is None:
            self.proc.send_signal(signal.SIGKILL)
            self.proc.wait(timeout=10)
        if self.proc is not None:
            self.proc.stderr.close()
        self.proc = None
