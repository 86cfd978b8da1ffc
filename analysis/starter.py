"""A commented starter config for a real bench, written from a few answers (what ``fringecal new-bench`` writes).

The answers are keyed by config path (``modulator.width_px``); anything not answered is written as a placeholder
marked CHANGE. Placeholders are the code's own defaults (analysis/config.py), so they are neutral values that fit
no particular panel. A serial accessory without a port is written ``port = ""``: not fitted.
"""

from __future__ import annotations

import datetime
import json
import textwrap
import typing
from dataclasses import dataclass

from analysis import config as schema
from analysis.config import Config, ConfigError, config_from_dict

ROLES = {"shutter": "shutter", "power_meter": "power meter", "rotator": "rotation mount (half-wave plate)",
         "thermometer": "temperature probe"}
NOT_FITTED = ("", "none", "no", "-")  # answers that mean "this bench has no such part"


@dataclass(frozen=True)
class Question:
    """One question of the starter: the config key it answers and what is asked."""

    key: str
    prompt: str


QUESTIONS = (
    Question("modulator.width_px", "panel width in pixels"),
    Question("modulator.height_px", "panel height in pixels"),
    Question("modulator.pitch_um", "panel pixel pitch in micrometres (data sheet)"),
    Question("modulator.bit_depth", "panel gray-level bits (8, 10 or 12)"),
    Question("laser.wavelength_nm", "laser vacuum wavelength in nm"),
    Question("camera.backend", "camera backend (opencv, replay, or module:Class)"),
    Question("camera.device", "camera device (opencv index, file or URL; replay: an image folder)"),
    *(Question(f"accessories.{role}.port", f"serial port of the {name} (empty: not fitted)")
      for role, name in ROLES.items()),
)

# Written with a CHANGE mark until the bench's own value replaces them; the rest are sound starting values.
PLACEHOLDERS = ("modulator.width_px", "modulator.height_px", "modulator.pitch_um", "modulator.bit_depth",
                "laser.wavelength_nm", "laser.power_mw", "laser.laser_class", "camera.device", "camera.width_px",
                "camera.height_px", "camera.pitch_um", "camera.bit_depth", "geometry.distance_mm",
                "geometry.incidence_deg")

# Extra words for a key, after its meaning from the schema: what decides the value on a bench.
NOTES = {
    "modulator.display": "'auto' picks the one non-primary display of the panel's size; `fringecal screens` "
                         "lists them",
    "modulator.allow_primary": "never true on a bench",
    "modulator.rgb_shift_bits": "a 10-bit panel taking its high 8 bits on red and the low 2 at the top of green: "
                                "[2, -6, 0]",
    "laser.power_mw": "after attenuation",
    "camera.backend": "module:Class is your camera maker's SDK wrapped as DEVELOPERS.md shows",
    "camera.bit_depth": "8 for most opencv cameras; 10-16 for SDK backends that deliver more",
    "camera.exposure_s": "a start: the run's exposure stage adjusts it",
    "camera.discard_frames": "copy from `fringecal timing` (opencv frames carry no exposure timestamps)",
    "geometry.distance_mm": "`fringecal plan` recommends one",
    "sweep.settle_s": "copy from `fringecal timing`",
    "sweep.frames_per_level": "'auto' measures how much the table's vibration scatters the frames and takes enough",
    "sweep.order": "shuffled: slow drifts (warming, a turning cover-glass ghost) then scatter about the curve, where "
                   "the drift references and the uncertainty see them, instead of bending it along the gray axis",
    "baud": "as set on the instrument",
    "commands": "the fringecal defaults (SCPI style): change them to the instrument's manual",
}

WRITTEN = {
    "modulator": ("width_px", "height_px", "pitch_um", "bit_depth", "display", "allow_primary", "rgb_shift_bits"),
    "laser": ("wavelength_nm", "power_mw", "laser_class"),
    "camera": ("backend", "device", "width_px", "height_px", "pitch_um", "bit_depth", "exposure_s", "gain_db",
               "discard_frames", "grab_timeout_s"),
    "geometry": ("distance_mm", "incidence_deg"),
    "sweep": ("settle_s", "frames_per_level", "order"),
}
# A real bench's starter departs from the code's defaults (kept simple for the ideal simulated bench) here:
RECOMMENDED = {"camera.backend": "opencv", "sweep.frames_per_level": "auto", "sweep.order": "shuffled"}
COMMAND_KEYS = {"shutter": ("open_command", "close_command", "state_command"), "power_meter": ("measure_command",),
                "rotator": ("move_command", "position_command", "angle_deg"), "thermometer": ("measure_command",)}
WIDTH = 118  # comment lines wrap like the project's code
OPENCV_BIT_DEPTH = 8  # what OpenCV's capture delivers from almost every camera, so the better placeholder there


def parse_answer(key: str, text: str):
    """The value of config ``key`` from the typed answer ``text``; ConfigError naming the key if it does not fit."""
    text = text.strip()
    if key.endswith(".port"):
        return "" if text.lower() in NOT_FITTED else text
    hint = _field(key)[0]
    if hint is int:
        try:
            value = int(text)
        except ValueError:
            raise ConfigError(f"[{key}] expected an integer, got {text!r}") from None
    elif hint is float:
        try:
            value = float(text)
        except ValueError:
            raise ConfigError(f"[{key}] expected a number, got {text!r}") from None
    else:
        value = text
    check(key, value)
    return value


def parse_size(text: str) -> tuple[int, int]:
    """Width and height (px) from ``WIDTHxHEIGHT``; ConfigError naming the panel size if it does not fit."""
    try:
        width, height = (int(v) for v in text.lower().split("x"))
    except ValueError:
        raise ConfigError(f"[modulator.width_px, height_px] expected WIDTHxHEIGHT such as 1600x1200, got {text!r}") \
            from None
    check("modulator.width_px", width)
    check("modulator.height_px", height)
    return width, height


def check(key: str, value) -> None:
    """Range-check one answer with the schema's own rules (ConfigError naming the key)."""
    section, *rest = key.split(".")
    node: dict = {}
    raw = {section: node}
    for part in rest[:-1]:
        node = node.setdefault(part, {})
    node[rest[-1]] = value
    try:
        config_from_dict(raw, source="answer")
    except ConfigError as err:
        raise ConfigError(str(err).removeprefix("answer: ")) from None


def starter_config(answers: dict) -> Config:
    """The Config the starter text describes (the answers over the defaults)."""
    raw: dict = {}
    for key, value in _values(answers).items():
        *parents, leaf = key.split(".")
        node = raw
        for part in parents:
            node = node.setdefault(part, {})
        node[leaf] = value
    return config_from_dict(raw, source="starter answers")


def starter_text(answers: dict, created: datetime.datetime | None = None) -> str:
    """The commented TOML of a starter config: ``answers`` ({key: value}) over placeholders marked CHANGE."""
    starter_config(answers)  # the whole set must pass the schema's cross-checks before anything is written
    values = _values(answers)
    created = created or datetime.datetime.now(datetime.timezone.utc)
    unanswered = [k for k in PLACEHOLDERS if k not in answers]
    # a panel of more than 8 bits needs its channel shifts from the panel's manual
    change = unanswered + (["modulator.rgb_shift_bits"] if values["modulator.bit_depth"] > 8 else [])
    lines = [
        f"# fringecal config for a real bench, written by `fringecal new-bench` on {created:%Y-%m-%d %H:%M} UTC.",
        "# Each key has its meaning above it; keys not listed take their defaults (`fringecal new-bench --copy",
        "# bench-template` writes every key with its default and meaning).",
        ("# Lines marked CHANGE hold placeholders: put your bench's values there."
         if unanswered else "# Every placeholder was answered; check the values against the data sheets."),
        "# Next: `fringecal preflight --config THIS_FILE` tries the display, camera and serial parts, before any light.",
        "",
    ]
    for section, keys in WRITTEN.items():
        lines.append(f"[{section}]")
        lines += [_line(f"{section}.{k}", values[f"{section}.{k}"], f"{section}.{k}" in change) for k in keys]
        lines.append("")
    for role, name in ROLES.items():
        key = f"accessories.{role}"
        port = values[f"{key}.port"]
        lines.append(f"[{key}]")
        if not port:
            lines += [f"# not fitted: this bench has no {name}; put its serial port here to use one", 'port = ""']
        else:
            lines += [f"# the {name}'s serial port", f"port = {json.dumps(port)}"]
            lines.append(_line(f"{key}.baud", values[f"{key}.baud"], True, NOTES["baud"]))
            lines.append(f"# {NOTES['commands']}")
            lines += [_line(f"{key}.{k}", values[f"{key}.{k}"], False, "") for k in COMMAND_KEYS[role]]
        lines.append("")
    return "\n".join(lines)


def _values(answers: dict) -> dict:
    unknown = [k for k in answers if k not in {q.key for q in QUESTIONS}]
    if unknown:
        raise ConfigError(f"[{unknown[0]}] is not a question of the starter")
    defaults = schema.as_dict(Config())
    values = {}
    for section, keys in WRITTEN.items():
        values.update({f"{section}.{k}": defaults[section][k] for k in keys})
    for role, keys in COMMAND_KEYS.items():
        values.update({f"accessories.{role}.{k}": defaults["accessories"][role][k] for k in ("port", "baud", *keys)})
    values.update(RECOMMENDED)  # a real bench: the default "sim" camera is the simulator's, and so on
    values.update(answers)
    if values["camera.backend"] == "opencv":
        values["camera.bit_depth"] = OPENCV_BIT_DEPTH
    return values


def _field(key: str):
    """(type, doc) of a config key from the schema."""
    cls = Config
    *parents, leaf = key.split(".")
    for part in parents:
        cls = typing.get_type_hints(cls)[part]
    return typing.get_type_hints(cls)[leaf], cls.__dataclass_fields__[leaf].metadata.get("doc", "")


def _toml(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml(v) for v in value) + "]"
    return repr(value)


def _line(key: str, value, placeholder: bool, note: str | None = None) -> str:
    doc = _field(key)[1]
    note = NOTES.get(key, "") if note is None else note
    comment = textwrap.fill(doc + (f"; {note}" if note else ""), WIDTH, initial_indent="# ", subsequent_indent="# ")
    assignment = f"{key.rsplit('.', 1)[1]} = {_toml(value)}"
    return comment + "\n" + (f"{assignment:<28} # CHANGE" if placeholder else assignment)
