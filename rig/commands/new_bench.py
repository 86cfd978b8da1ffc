"""``fringecal new-bench``: a commented starter config for a real bench, from a few questions or from flags."""

from __future__ import annotations

import sys
from pathlib import Path

from analysis.config import ConfigError
from analysis.starter import QUESTIONS, parse_answer, parse_size, starter_text
from configs import HERE as CONFIGS
from rig.errors import UsageError

SHIPPED = tuple(sorted(p.stem for p in CONFIGS.glob("*.toml")))
# flag -> the config key it answers (the panel size answers two)
FLAGS = {"pitch_um": "modulator.pitch_um", "bit_depth": "modulator.bit_depth",
         "wavelength_nm": "laser.wavelength_nm", "camera": "camera.backend", "device": "camera.device",
         "shutter": "accessories.shutter.port", "power_meter": "accessories.power_meter.port",
         "rotator": "accessories.rotator.port", "thermometer": "accessories.thermometer.port"}


def register(command) -> None:
    p = command("new-bench", cmd_new_bench, "write a commented starter config for a real bench (or copy a shipped one)",
                config=None)
    p.add_argument("--out", required=True, metavar="FILE", help="the config file to write (not overwritten)")
    p.add_argument("--copy", choices=SHIPPED, metavar="NAME",
                   help=f"copy a config shipped with fringecal instead: {', '.join(SHIPPED)}")
    p.add_argument("--panel-px", metavar="WxH", help="panel size in pixels, e.g. 1600x1200")
    p.add_argument("--pitch-um", metavar="UM", help="panel pixel pitch")
    p.add_argument("--bit-depth", metavar="BITS", help="panel gray-level bits (8, 10 or 12)")
    p.add_argument("--wavelength-nm", metavar="NM", help="laser vacuum wavelength")
    p.add_argument("--camera", metavar="BACKEND", help="camera backend: opencv, replay or module:Class")
    p.add_argument("--device", metavar="DEV", help="camera device: opencv index, file or URL; replay: image folder")
    for flag, name in (("--shutter", "shutter"), ("--power-meter", "power meter"), ("--rotator", "rotation mount"),
                       ("--thermometer", "temperature probe")):
        p.add_argument(flag, metavar="PORT", help=f"serial port of the {name} ('' or none: not fitted)")


def cmd_new_bench(args) -> int:
    """Write a starter config for a real bench: the answers given as flags, the rest asked on stdin (an empty
    answer, or the end of the input, keeps a placeholder marked CHANGE); or, with --copy, a shipped config."""
    out = Path(args.out)
    if out.exists():
        raise UsageError(f"--out: {out} exists; fringecal does not overwrite a config (choose another name)")
    if not out.parent.is_dir():
        raise UsageError(f"--out: folder {out.parent} does not exist")
    given = [f"--{k.replace('_', '-')}" for k in ("panel_px", *FLAGS) if getattr(args, k) is not None]
    if args.copy:
        if given:
            raise UsageError(f"--copy: a shipped config is copied as it is; drop {', '.join(given)}")
        out.write_text((CONFIGS / f"{args.copy}.toml").read_text(encoding="utf-8"), encoding="utf-8")
        print(f"wrote {out}: a copy of the shipped {args.copy}.toml")
        return 0
    answers = _from_flags(args)
    _ask(answers, sys.stdin, sys.stdout)
    text = starter_text(answers)
    out.write_text(text, encoding="utf-8")
    marked = text.count("# CHANGE")
    print(f"wrote {out}: " + (f"{marked} placeholder values marked CHANGE to edit; then" if marked else "next:")
          + f" fringecal preflight --config {out}")
    return 0


def _from_flags(args) -> dict:
    answers = {}
    if args.panel_px is not None:
        size = _parsed("--panel-px", parse_size, args.panel_px)
        answers.update(zip(("modulator.width_px", "modulator.height_px"), size))
    for name, key in FLAGS.items():
        text = getattr(args, name)
        if text is not None:
            answers[key] = _parsed(f"--{name.replace('_', '-')}", lambda t, key=key: parse_answer(key, t), text)
    return answers


def _parsed(flag: str, parse, text: str):
    try:
        return parse(text)
    except ConfigError as err:
        raise UsageError(f"{flag}: {err}") from None


def _ask(answers: dict, stdin, stdout) -> None:
    """Ask each question the flags did not answer; an empty line keeps the placeholder, the input's end all of them."""
    left = [q for q in QUESTIONS if q.key not in answers]
    if left:
        print("An empty answer keeps a placeholder marked CHANGE (for a serial port: not fitted).", file=stdout)
    for question in left:
        while True:
            print(f"{question.prompt}: ", end="", file=stdout, flush=True)
            line = stdin.readline()
            if not line:  # end of input: the placeholders stand for every question left
                print(file=stdout)
                return
            if not line.strip():
                break
            try:
                answers[question.key] = parse_answer(question.key, line)
                break
            except ConfigError as err:
                print(f"  {err}; try again (empty: keep the placeholder)", file=stdout)
