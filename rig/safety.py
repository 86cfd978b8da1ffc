"""Laser safety: the notice shown before anything lights the bench, and its once-per-machine acknowledgement.

Live commands call ``ensure_laser_safety`` before the first pattern is shown; the simulator needs none. The
acknowledgement is a small JSON file in the user's fringecal folder: ``$FRINGECAL_HOME`` if set, else
``$XDG_CONFIG_HOME/fringecal``, else ``~/.config/fringecal``.
"""

from __future__ import annotations

import datetime
import json
import os
import sys
from pathlib import Path

from rig.atomic import write_atomic
from rig.errors import UsageError

NOTICE_VERSION = 1  # raise when the notice changes in substance: everyone is asked again
ACK_FILE = "laser-safety-acknowledged.json"
ACK_FLAG = "--laser-safety-acknowledged"
NEAR_INFRARED_NM = 700.0  # beyond about 700 nm the eye barely sees the beam, and has no blink reflex for it


def fringecal_home() -> Path:
    """The user's fringecal folder (not created here)."""
    if os.environ.get("FRINGECAL_HOME"):
        return Path(os.environ["FRINGECAL_HOME"])
    base = os.environ.get("XDG_CONFIG_HOME") or Path.home() / ".config"
    return Path(base) / "fringecal"


def safety_notice(laser_class: str, wavelength_nm: float) -> str:
    """The cautions to read before a live run, for the configured laser class and wavelength (nm)."""
    if laser_class == "unset":
        klass = ("Laser class: not set. Put the IEC 60825-1 class from the laser's label in laser.laser_class "
                 "of the config.")
    else:
        klass = f"Laser class {laser_class} (IEC 60825-1, as configured)."
    lines = [
        "LASER SAFETY - read before the bench is lit.",
        klass,
        f"- Wear eyewear of an optical density rated for {wavelength_nm:g} nm at this laser's power.",
        "- Keep the beam at a safe height, away from eye level, and never look along it.",
        "- Block the unused diffraction orders and the reflection from the panel's cover glass with beam stops.",
        "- Attenuate the beam to what the camera needs before it reaches the panel.",
    ]
    if wavelength_nm >= NEAR_INFRARED_NM:
        lines.append(f"- {wavelength_nm:g} nm is near-infrared: the beam and its stray reflections are invisible "
                     "or barely visible and the eye has no blink reflex for them. Take extra care; find beams with "
                     "a viewer card or camera, never by eye.")
    lines.append("The lab's laser safety officer and local rules take precedence over this notice.")
    return "\n".join(lines)


def is_acknowledged() -> bool:
    """True when this machine's user has acknowledged the current notice."""
    try:
        record = json.loads((fringecal_home() / ACK_FILE).read_text(encoding="utf-8"))
    except (FileNotFoundError, NotADirectoryError, json.JSONDecodeError, UnicodeDecodeError):
        return False
    return isinstance(record, dict) and record.get("notice_version", 0) >= NOTICE_VERSION


def record_acknowledgement(laser_class: str, wavelength_nm: float) -> Path:
    """Store the acknowledgement (with when, and for which laser) and return the file written."""
    home = fringecal_home()
    home.mkdir(parents=True, exist_ok=True)
    record = {"notice_version": NOTICE_VERSION, "laser_class": laser_class, "wavelength_nm": wavelength_nm,
              "acknowledged_utc": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")}
    return write_atomic(home / ACK_FILE, (json.dumps(record, indent=1) + "\n").encode())


def ensure_laser_safety(laser_class: str, wavelength_nm: float, *, sim: bool, acknowledged: bool,
                        stream=None) -> None:
    """Show the notice before a live run; refuse (UsageError) until it has been acknowledged once on this machine.

    ``acknowledged`` is the user's ``--laser-safety-acknowledged`` flag or config key for this run; given once, it
    is stored, so later runs show the notice and go on. Simulated runs light nothing: no notice, no question.
    """
    if sim:
        return
    stream = sys.stderr if stream is None else stream
    print(safety_notice(laser_class, wavelength_nm), file=stream)
    if is_acknowledged():
        return
    if not acknowledged:
        raise UsageError(f"laser safety: read the notice above, then run again with {ACK_FLAG} "
                         f"(asked once per machine; stored in {fringecal_home() / ACK_FILE})")
    try:
        record_acknowledgement(laser_class, wavelength_nm)
    except OSError as err:
        print(f"warning: could not store the laser-safety acknowledgement ({err}); you will be asked again",
              file=stream)


def add_acknowledgement_flag(parser) -> None:
    """Give a live command's subparser the acknowledgement flag."""
    parser.add_argument(ACK_FLAG, action="store_true", dest="laser_safety_acknowledged",
                        help="I have read the laser-safety notice (needed once per machine before a live run)")
