"""fringecal cameras: the GenICam cameras Aravis finds, and with a genicam config, what the configured one is set to."""

from __future__ import annotations

from analysis.config import load_config
from rig.devices.genicam import aravis, list_genicam


def register(command) -> None:
    p = command("cameras", cmd_cameras, "list the GenICam cameras (GigE Vision, USB3 Vision) that Aravis finds",
                config="a genicam bench config (TOML): also show what its camera is set to")
    p.add_argument("--simulated", action="store_true",
                   help="also list Aravis's own simulated camera (device Fake_1), to try the backend without one")


def cmd_cameras(args) -> int:
    """List the GenICam cameras on the network and the USB buses: device id, vendor, model, serial, address. With a
    config whose camera.backend is genicam, open the configured camera and show its settings as it reports them."""
    if args.simulated:
        aravis().enable_interface("Fake")
    found = list_genicam()
    for info in found:
        print(info.describe())
    if not found:
        print("no GenICam camera found (GigE Vision cameras must be on a subnet of this computer's; USB3 Vision "
              "cameras need access to the device, e.g. a udev rule)")
    cfg = load_config(args.config) if args.config else None
    if cfg is not None and cfg.camera.backend == "genicam":
        from rig.devices.genicam import GenicamCamera
        camera = GenicamCamera(cfg.camera)
        try:
            print(f"{cfg.source}: camera.device {cfg.camera.device!r} is {camera.describe_settings()}")
        finally:
            camera.close()
    return 0
