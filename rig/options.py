"""Command-line options and argument checks that several commands share: the bench config, output paths, run options."""

from __future__ import annotations

import argparse
import math
import os
import tempfile
from pathlib import Path

from analysis.config import Config, load_config
from analysis.fringe import DEFAULT_METHOD, METHOD_NOTES, METHODS
from rig.errors import UsageError
from rig.safety import add_acknowledgement_flag


def load_bench_config(args) -> Config:
    if args.config is None:
        if not getattr(args, "sim", True):
            raise UsageError("--config: a bench config is needed without --sim (`fringecal new-bench --out bench.toml` "
                             "writes one)")
        from configs import DEFAULT_SIM
        return load_config(DEFAULT_SIM)
    return load_config(args.config)


# Wavelengths (nm) a phase panel is calibrated at: deep ultraviolet to far infrared, generously.
WAVELENGTH_NM = (100.0, 20000.0)


def number(expected: str, lo: float | None = None, hi: float | None = None, lo_open: bool = False):
    """An argparse ``type``: a finite float in [lo, hi] (lo excluded with ``lo_open``); ``expected`` says what it
    is, with its unit, in the error ("a duration in minutes")."""
    def parse(text: str) -> float:
        try:
            value = float(text)
        except ValueError:
            value = math.nan
        low_ok = lo is None or value > lo or (value == lo and not lo_open)
        if not (math.isfinite(value) and low_ok and (hi is None or value <= hi)):
            bounds = (f" {'above' if lo_open else 'from'} {lo:g}" if lo is not None else "") + \
                     (f" {'up ' if lo is None else ''}to {hi:g}" if hi is not None else "")
            raise argparse.ArgumentTypeError(f"expected {expected}{bounds}, got {text!r}")
        return value
    return parse


WAVELENGTH = number("a wavelength in nm", *WAVELENGTH_NM)
WARMUP_MINUTES = number("a warm-up time in minutes", 0, 24 * 60)


def check_wavelength_nm(value: float, what: str) -> float:
    """``value`` (nm) if it is a plausible wavelength; else UsageError naming ``what``."""
    try:
        return WAVELENGTH(str(value))
    except argparse.ArgumentTypeError as err:
        raise UsageError(f"{what}: {err}") from None


def output_folder(path: str, what: str = "--out") -> Path:
    """A folder to write results into: it may exist (as a folder), its parent must, and it must be creatable."""
    out = Path(path)
    if out.exists() and not out.is_dir():
        raise UsageError(f"{what}: {out} exists and is not a folder")
    if not out.parent.is_dir():
        raise UsageError(f"{what}: folder {out.parent} does not exist")
    if not out.exists():
        try:  # the only sure test of a place (root may write where permissions say no; /proc refuses everyone)
            out.mkdir()
            out.rmdir()
        except OSError as err:
            raise UsageError(f"{what}: cannot create the folder {out} ({err.strerror})") from None
    return out


def writable(path: str, what: str) -> Path:
    """A file to write: not a folder, in a folder that exists, and creatable there. A file not there yet is not
    made here (a program following it would see it come and go): a scratch file in its folder is, and removed."""
    out = Path(path)
    if out.is_dir():
        raise UsageError(f"{what}: {out} is a folder; expected a file name")
    if not out.parent.is_dir():
        raise UsageError(f"{what}: folder {out.parent} does not exist")
    try:
        if out.exists():
            os.close(os.open(out, os.O_WRONLY | os.O_APPEND))
        else:
            tempfile.TemporaryFile(dir=out.parent).close()
    except OSError as err:
        raise UsageError(f"{what}: cannot write {out} ({err.strerror})") from None
    return out


def add_run_options(p) -> None:
    """The options every command that makes a run folder shares (tune, sweep, run, map, flicker)."""
    p.add_argument("--sim", action="store_true", help="use the built-in simulated bench")
    p.add_argument("--out", metavar="DIR", help="run folder to create (default: runs/YYYYmmdd-HHMMSS)")
    add_method_option(p)
    p.add_argument("--events", metavar="FILE", help="also write progress events as JSON lines to FILE")
    p.add_argument("--no-frames", action="store_true", help="do not save the fringe-band crops of each frame")
    add_acknowledgement_flag(p)


def add_method_option(p, default: str = DEFAULT_METHOD) -> None:
    """--method, its help saying when to choose each estimator (from the estimators' own notes)."""
    choices = "; ".join(f"{name}{' (default)' if name == default else ''}: {METHOD_NOTES[name]}"
                        for name in METHODS)
    p.add_argument("--method", choices=METHODS, default=default, metavar="NAME",
                   help=f"fringe-phase estimator, one of {choices}")


def add_sweep_options(p) -> None:
    """How the sweep chooses its levels (sweep, run, map)."""
    p.add_argument("--adaptive", action="store_true",
                   help="measure only the levels a model of the curve needs (the default above 8 bits)")
    p.add_argument("--full", action="store_true", help="measure every gray level (the default at 8 bits)")
    p.add_argument("--tolerance-mrad", type=number("a predicted table error in mrad", 0, 1000, lo_open=True),
                   metavar="MRAD",
                   help="adaptive: stop when the table's predicted RMS error is below this (default 10)")
    p.add_argument("--max-levels", type=int, metavar="N",
                   help="adaptive: measure at most N levels (default 48 at 8 bits, 72 at 10, 96 at 12)")
