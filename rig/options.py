"""Command-line options and argument checks that several commands share: the bench config, output paths, run options."""

from __future__ import annotations

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


def output_folder(path: str, what: str = "--out") -> Path:
    """A folder to write results into: it may exist (as a folder), and its parent must."""
    out = Path(path)
    if out.exists() and not out.is_dir():
        raise UsageError(f"{what}: {out} exists and is not a folder")
    if not out.parent.exists():
        raise UsageError(f"{what}: folder {out.parent} does not exist")
    return out


def writable(path: str, what: str) -> Path:
    out = Path(path)
    if out.parent and not out.parent.exists():
        raise UsageError(f"{what}: folder {out.parent} does not exist")
    return out


def add_run_options(p) -> None:
    """The options every command that makes a run folder shares (tune, sweep, run, map, flicker)."""
    p.add_argument("--sim", action="store_true", help="use the built-in simulated bench")
    p.add_argument("--out", metavar="DIR", help="run folder to create (default: runs/YYYYmmdd-HHMMSS)")
    add_method_option(p)
    p.add_argument("--events", metavar="FILE", help="also write progress events as JSON lines to FILE")
    p.add_argument("--no-frames", action="store_true", help="do not save the fringe-band crops of each frame")
    add_acknowledgement_flag(p)


def add_method_option(p) -> None:
    """--method, its help saying when to choose each estimator (from the estimators' own notes)."""
    choices = "; ".join(f"{name}{' (default)' if name == DEFAULT_METHOD else ''}: {METHOD_NOTES[name]}"
                        for name in METHODS)
    p.add_argument("--method", choices=METHODS, default=DEFAULT_METHOD, metavar="NAME",
                   help=f"fringe-phase estimator, one of {choices}")


def add_sweep_options(p) -> None:
    """How the sweep chooses its levels (sweep, run, map)."""
    p.add_argument("--adaptive", action="store_true",
                   help="measure only the levels a model of the curve needs (the default above 8 bits)")
    p.add_argument("--full", action="store_true", help="measure every gray level (the default at 8 bits)")
    p.add_argument("--tolerance-mrad", type=float, metavar="MRAD",
                   help="adaptive: stop when the table's predicted RMS error is below this (default 10)")
    p.add_argument("--max-levels", type=int, metavar="N",
                   help="adaptive: measure at most N levels (default 48 at 8 bits, 72 at 10, 96 at 12)")
